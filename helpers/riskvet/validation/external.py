"""External validation: a frozen model applied, unchanged, to a new cohort.

:func:`apply_model` predicts for a cohort and refuses one the model's design
cannot encode.  :func:`validate_cohort` reports the model's performance in
that cohort -- discrimination per cut and over the ordered outcome,
calibration per cut with smoothed curves, overall accuracy, classification
at the study's risk thresholds and decision curves -- with bootstrap
percentile intervals, and the same measures in the subgroups the study
names, flagging subgroups too small to read.

Bootstrap replicate i resamples the cohort's rows with stream i of
``numpy.random.SeedSequence(seed).spawn(n_boot)``, so results do not depend
on how many workers ran them.  A resample that cannot be measured (an
outcome level absent, or any error met while measuring) is a counted
failure with its reason; when more than ``max_failed_share`` of them fail,
the whole-cohort intervals are not reported (NaN, with the reason stated).
"""

from __future__ import annotations

import dataclasses
import warnings
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from .bootstrap import _PROPAGATE, ReplicateFailure, _failure_message, _failure_reason
from ..measures.calibration import OrdinalCalibration, ordinal_calibration
from ..measures.decision import NetBenefitResult, ThresholdTable, net_benefit, threshold_table
from ..measures.discrimination import OrdinalDiscrimination, dichotomise, ordinal_discrimination
from ..errors import DataError, DesignError, RiskvetError, RiskvetWarning, problem
from ..measures.summary import performance_summary, summary_keys
from ..modelling.modelfile import PredictionModel
from ..measures.overall import OverallAccuracy, overall_accuracy
from ..intake.outcome import cut_name

__all__ = [
    "SubgroupSpec",
    "CohortValidation",
    "apply_model",
    "subgroup_masks",
    "decision_grid",
    "validate_cohort",
    "run_replicates",
    "measure_label",
    "calibration_label",
    "MIN_SUBGROUP_EVENTS",
]

#: Measures shown in performance tables, in order (keys of performance_summary without the cut suffix).
_SHOWN = (
    "auc",
    "average_cut_auc",
    "ordinal_c",
    "generalised_c",
    "calibration_intercept",
    "calibration_slope",
    "ici",
    "brier",
    "scaled_brier",
    "nagelkerke_r2",
)

_MEASURE_LABELS = {
    "auc": "C (AUC)",
    "average_cut_auc": "average dichotomised C",
    "ordinal_c": "ordinal c-index",
    "generalised_c": "generalised C",
    "calibration_intercept": "calibration-in-the-large",
    "calibration_slope": "calibration slope",
    "ici": "integrated calibration index",
    "brier": "Brier score",
    "scaled_brier": "scaled Brier score",
    "nagelkerke_r2": "Nagelkerke R²",
}


#: Fewest events, and fewest non-events, at any cut for a subgroup's calibration
#: to be read (Vergouwe et al. 2005; Collins, Ogundimu & Altman 2016).
MIN_SUBGROUP_EVENTS = 100

#: Measures of the ordered outcome as a whole that equal the cut's C when there are two levels.
_ORDINAL_ONLY = ("average_cut_auc", "ordinal_c", "generalised_c")

#: Display names of the calibration summaries (``OrdinalCalibration.to_frame`` measures).
_CALIBRATION_LABELS = {
    "calibration_in_the_large": "calibration-in-the-large",
    "slope": "calibration slope",
    "oe_ratio": "observed/expected ratio",
    "mean_observed": "observed proportion",
    "mean_predicted": "mean predicted risk",
    "ici": "integrated calibration index (ICI)",
    "e50": "E50 (median absolute calibration error)",
    "e90": "E90 (90th percentile of the error)",
    "emax": "Emax (largest error)",
    "hosmer_lemeshow": "Hosmer-Lemeshow statistic",
    "hosmer_lemeshow_pvalue": "Hosmer-Lemeshow p",
    "ordinal_hosmer_lemeshow": "ordinal Hosmer-Lemeshow statistic",
    "ordinal_hosmer_lemeshow_df": "ordinal Hosmer-Lemeshow df",
    "ordinal_hosmer_lemeshow_pvalue": "ordinal Hosmer-Lemeshow p",
}


def measure_label(measure: str, n_levels: int) -> str:
    """Display name of a performance measure (a key of ``performance_summary`` without its cut suffix)."""
    if n_levels == 2 and measure == "auc":
        return "C statistic (AUC)"
    return _MEASURE_LABELS.get(measure, measure.replace("_", " "))


def calibration_label(measure: str) -> str:
    """Display name of a calibration summary (a ``measure`` of ``OrdinalCalibration.to_frame``)."""
    return _CALIBRATION_LABELS.get(measure, measure.replace("_", " "))


def _split_key(key: str) -> tuple[str, int | None]:
    head, sep, tail = key.rpartition("_cut")
    if sep and tail.isdigit():
        return head, int(tail)
    return key, None


# ---------------------------------------------------------------------------
# Applying the model
# ---------------------------------------------------------------------------


def apply_model(model: PredictionModel, frame: pd.DataFrame, *, label: str = "validation") -> np.ndarray:
    """Predicted level probabilities of a frozen model for every row of a cohort.

    Parameters
    ----------
    model : PredictionModel
        The frozen model; it is not changed.
    frame : DataFrame
        The cohort, with every column the model's design reads.
    label : str, keyword-only
        Cohort label, named in error messages.

    Returns
    -------
    ndarray, shape (n, K)

    Raises
    ------
    DesignError
        The design cannot encode the cohort: a column is absent, has missing
        values, non-numeric values, or categories the model has never seen;
        the message names the cohort, the column and the values.
    """
    if not isinstance(model, PredictionModel):
        raise RiskvetError(problem("apply_model(model=)", allowed="a PredictionModel", received=type(model).__name__))
    if not isinstance(frame, pd.DataFrame):
        raise DataError(problem("apply_model(frame=)", allowed="a pandas DataFrame", received=type(frame).__name__))
    try:
        prob = model.predict_proba(frame)
    except DesignError as exc:
        raise DesignError(f"validation cohort {label!r}: the model cannot be applied: {exc}") from None
    return prob


# ---------------------------------------------------------------------------
# Subgroups
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class SubgroupSpec:
    """A subgroup definition: a categorical column, or bands of a numeric column.

    Attributes
    ----------
    column : str
    bands : tuple of float or None
        Increasing cut points b_1 < ... < b_m giving the groups
        ``< b_1``, ``b_1 to < b_2``, ..., ``>= b_m``.
    """

    column: str
    bands: tuple[float, ...] | None = None


def _band_labels(bands: Sequence[float]) -> list[str]:
    b = [f"{v:g}" for v in bands]
    labels = [f"< {b[0]}"]
    labels += [f"{lo} to < {hi}" for lo, hi in zip(b, b[1:])]
    labels.append(f">= {b[-1]}")
    return labels


def subgroup_masks(frame: pd.DataFrame, spec: SubgroupSpec | Any) -> tuple[list[tuple[str, np.ndarray]], int]:
    """Row masks of every group of one subgroup definition.

    Parameters
    ----------
    frame : DataFrame
    spec : SubgroupSpec or an object with ``column`` and ``bands``
        (such as :class:`riskvet.study.Subgroup`).

    Returns
    -------
    groups : list of (label, boolean mask)
        Categorical column: one group per observed value, sorted as text.
        Bands: the groups of :class:`SubgroupSpec`, empty ones included.
    n_missing : int
        Rows whose value is missing (in no group).
    """
    column = spec.column
    if column not in frame.columns:
        raise DataError(problem("subgroups: column", allowed=f"a column of the cohort {list(frame.columns)[:20]}", received=column))
    values = frame[column]
    missing = values.isna().to_numpy()
    bands = getattr(spec, "bands", None)
    if bands is not None:
        x = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        bad = ~np.isfinite(x) & ~missing
        if bad.any():
            raise DataError(problem(f"subgroups: column {column!r} (bands)", allowed="numbers", received=f"{int(bad.sum())} values that are not numbers"))
        edges = np.r_[-np.inf, np.asarray(bands, dtype=float), np.inf]
        groups = []
        for label, lo, hi in zip(_band_labels(bands), edges[:-1], edges[1:]):
            groups.append((label, (~missing) & (x >= lo) & (x < hi)))
        return groups, int(missing.sum())
    text = values.astype("string")
    levels = sorted(str(v) for v in text.dropna().unique())
    return [(lv, (text == lv).fillna(False).to_numpy(dtype=bool)) for lv in levels], int(missing.sum())


# ---------------------------------------------------------------------------
# Bootstrap machinery
# ---------------------------------------------------------------------------


def _call(payload: Callable[[np.random.SeedSequence], Any], stream: np.random.SeedSequence) -> Any:
    return payload(stream)


def run_replicates(
    func: Callable[[np.random.SeedSequence], Any],
    *,
    n_boot: int,
    seed: int,
    n_jobs: int = 1,
    scheduler: str | None = None,
) -> list[Any]:
    """Run ``func`` on stream i of ``SeedSequence(seed).spawn(n_boot)`` for i = 0..n_boot-1.

    ``func`` must be picklable (a module-level function or an instance of a
    module-level class).  Replicates run in one process (``n_jobs = 1``),
    in joblib worker processes (``n_jobs > 1``, -1 for every core), or on a
    dask.distributed cluster (``scheduler``, the ``compute.scheduler``
    address), through the executor the internal bootstrap uses.  The list is
    in replicate order whatever ran it, so results do not depend on it.
    """
    from .bootstrap import _execute

    if n_jobs == -1:
        import os

        n_jobs = os.cpu_count() or 1
    streams = np.random.SeedSequence(int(seed)).spawn(int(n_boot))
    return list(_execute(_call, func, streams, n_jobs=int(n_jobs), scheduler=scheduler, desc="bootstrap", progress=False))


def _check_boot(n_boot: Any, seed: Any, confidence: Any, func: str) -> tuple[int, int, float]:
    if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 0:
        raise RiskvetError(problem(f"{func}(n_boot=)", allowed="a whole number >= 0", received=n_boot))
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise RiskvetError(problem(f"{func}(seed=)", allowed="a non-negative integer", received=seed))
    if isinstance(confidence, bool) or not isinstance(confidence, (int, float)) or not 0 < float(confidence) < 1:
        raise RiskvetError(problem(f"{func}(confidence=)", allowed="a number strictly between 0 and 1", received=confidence))
    return int(n_boot), int(seed), float(confidence)


@dataclass(frozen=True)
class _Unmeasured:
    """Why a resample (or a subgroup of it) has no measures: a stable reason and the message's first line."""

    reason: str
    message: str


def _summary_or_reason(y: np.ndarray, prob: np.ndarray, K: int, levels: Sequence[str] | None = None) -> dict[str, float] | _Unmeasured:
    """The lean measures of (y, prob), or why there are none; an error never escapes (but ``_PROPAGATE``)."""
    counts = np.bincount(y, minlength=K)
    if y.size == 0 or counts.min() == 0:
        names = list(levels) if levels is not None and len(levels) == K else list(range(K))
        empty = [names[j] for j in np.flatnonzero(counts == 0)]
        tally = {str(lv): int(c) for lv, c in zip(names, counts.tolist())}
        return _Unmeasured("empty outcome level", f"no one in outcome level(s) {empty} of the resample; people by level {tally}")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        try:
            return performance_summary(y, prob)
        except _PROPAGATE:
            raise
        except Exception as exc:
            return _Unmeasured(_failure_reason(exc), _failure_message(exc, "measuring the resample"))


def _summary_or_none(y: np.ndarray, prob: np.ndarray, K: int) -> dict[str, float] | None:
    out = _summary_or_reason(y, prob, K)
    return out if isinstance(out, dict) else None


class _Replicate:
    """Picklable bootstrap replicate: the whole cohort and every subgroup."""

    def __init__(self, y: np.ndarray, prob: np.ndarray, masks: Mapping[tuple[str, str], np.ndarray],
                 levels: Sequence[str] | None = None, weights: np.ndarray | None = None):
        self.y, self.prob, self.masks, self.levels, self.weights = y, prob, masks, levels, weights

    def __call__(self, stream: np.random.SeedSequence) -> dict[tuple[str, str], dict[str, float] | _Unmeasured]:
        rng = np.random.default_rng(stream)
        n = self.y.shape[0]
        idx = rng.integers(0, n, n)
        if self.weights is not None:
            # rows are resampled; a drawn row brings all its people, and the measures are of people
            idx = np.repeat(idx, self.weights[idx])
        yb, pb = self.y[idx], self.prob[idx]
        K = self.prob.shape[1]
        out = {("", ""): _summary_or_reason(yb, pb, K, self.levels)}
        for key, mask in self.masks.items():
            sel = mask[idx]
            out[key] = _summary_or_reason(yb[sel], pb[sel], K, self.levels) if sel.any() else _Unmeasured("empty subgroup", "no one of the subgroup in the resample")
        return out


def _interval_rows(apparent: Mapping[str, float] | None, reps: list[Any], keys: Sequence[str], confidence: float, levels: Sequence[str]) -> list[dict[str, Any]]:
    ok = [r for r in reps if isinstance(r, dict)]
    tail = 100 * (1 - confidence) / 2
    K = len(levels)
    rows = []
    for key in keys:
        measure, cut = _split_key(key)
        if measure not in _SHOWN or (K == 2 and measure in _ORDINAL_ONLY):
            continue
        values = np.array([r[key] for r in ok], dtype=float)
        values = values[np.isfinite(values)]
        if values.size >= 2:
            lower, upper = np.percentile(values, [tail, 100 - tail])
            se = float(np.std(values, ddof=1))
        else:
            lower = upper = se = float("nan")
        rows.append(
            {
                "measure": measure,
                "label": measure_label(measure, K),
                "cut": cut,
                "outcome": cut_name(levels, cut),
                "estimate": float(apparent[key]) if apparent is not None else float("nan"),
                "se": se,
                "lower": float(lower),
                "upper": float(upper),
                "n_boot_used": int(values.size),
            }
        )
    return rows


def _order_rows(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    rank = {m: i for i, m in enumerate(_SHOWN)}
    return sorted(rows, key=lambda r: (rank[r["measure"]], -1 if r["cut"] is None else r["cut"]))


def decision_grid(thresholds: Sequence[float] = ()) -> np.ndarray:
    """Threshold probabilities of a decision curve: 0.01 steps up to max(0.5, 1.5 x the largest study threshold)."""
    top = max([0.5] + [1.5 * float(t) for t in thresholds])
    top = min(top, 0.99)
    grid = np.round(np.arange(0.01, top + 1e-9, 0.01), 2)
    return np.unique(np.r_[grid, np.asarray(list(thresholds), dtype=float)])


# ---------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class CohortValidation:
    """Performance of a frozen model in one validation cohort.

    Attributes
    ----------
    label : str
        Cohort label.
    levels : tuple of str
        Outcome levels coded 0..K-1.
    n : int
        Patients (people: the sum of the frequency weights when there are any).
    level_counts : dict
        Patients at each outcome level.
    discrimination : OrdinalDiscrimination
        Per-cut C with DeLong intervals, average dichotomised C, ordinal
        c-index, generalised C (apparent, no resampling).
    calibration : OrdinalCalibration
        Per cut: calibration-in-the-large, slope, O/E, smoothed curve, ICI,
        grouped table; the ordinal Hosmer-Lemeshow test.
    overall : OverallAccuracy
        Brier scores and R2.
    threshold_tables : dict of int to ThresholdTable
        By cut, at the study's thresholds for that cut (cuts without
        thresholds are absent).
    decision_curves : tuple of NetBenefitResult
        One per cut, over :func:`decision_grid` of the cut's thresholds.
    performance : DataFrame
        Headline measures with bootstrap standard errors and percentile
        intervals: ``measure``, ``label``, ``cut``, ``outcome``,
        ``estimate`` (on the cohort as observed), ``se``, ``lower``,
        ``upper``, ``n_boot_used``.  For a binary outcome the measures of an
        ordered outcome (average dichotomised C, ordinal c-index,
        generalised C) are left out: they equal the C statistic.
    subgroups : DataFrame
        The same measures per subgroup with the columns of
        ``subgroup_sizes`` before them.
    subgroup_sizes : DataFrame
        ``column``, ``group``, ``n``, ``n_top`` (patients in the highest
        level), ``n_bottom`` (patients in the lowest level), ``few_events``
        (at some cut fewer than ``min_subgroup_events`` events or non-events:
        min(n_bottom, n_top) below it), ``small`` (``few_events``, or n below
        ``min_subgroup_size``: flagged, not to be over-read), one row per
        group, and a row ``group = "(missing)"`` when values are missing
        (counts by level -1: not measured).
    n_boot, seed : int
        Bootstrap replicates and seed.
    n_failed : int
        Whole-cohort replicates that could not be evaluated (an outcome
        level absent from the resample, or an error met while measuring it).
    confidence : float
    min_subgroup_size : int
    warnings : tuple of str
    min_subgroup_events : int
        Fewest events and non-events at every cut for a subgroup not to be
        flagged ``few_events``.
    failures : tuple of ReplicateFailure
        Every whole-cohort replicate that could not be evaluated, with its
        reason (``empty outcome level``, ``data error``, ``fit error``, ...)
        and the first line of the message.
    max_failed_share : float
        The share of failed replicates above which the whole-cohort
        intervals are not reported.
    n_rows : int or None
        With frequency weights, the cohort's rows of positive weight (the
        units the bootstrap resamples; ``n``, ``level_counts`` and the
        subgroup sizes are then people); None without weights.
    intervals_withheld : str
        Why the whole-cohort intervals of ``performance`` are NaN (more
        failed replicates than ``max_failed_share`` allows); empty when they
        are reported.
    interval_notes : dict of str to str
        Measure key (a key of ``performance_summary``) -> why that measure's
        interval is NaN although the others are reported: the measure was
        undefined in more than ``max_failed_share`` of the replicates.
    """

    label: str
    levels: tuple[str, ...]
    n: int
    level_counts: Mapping[str, int]
    discrimination: OrdinalDiscrimination = field(repr=False)
    calibration: OrdinalCalibration = field(repr=False)
    overall: OverallAccuracy = field(repr=False)
    threshold_tables: Mapping[int, ThresholdTable] = field(repr=False)
    decision_curves: tuple[NetBenefitResult, ...] = field(repr=False)
    performance: pd.DataFrame = field(repr=False)
    subgroups: pd.DataFrame = field(repr=False)
    subgroup_sizes: pd.DataFrame = field(repr=False)
    n_boot: int
    seed: int
    n_failed: int
    confidence: float
    min_subgroup_size: int
    warnings: tuple[str, ...]
    min_subgroup_events: int = MIN_SUBGROUP_EVENTS
    failures: tuple[ReplicateFailure, ...] = ()
    max_failed_share: float = 0.1
    intervals_withheld: str = ""
    interval_notes: Mapping[str, str] = field(default_factory=dict)
    n_rows: int | None = None

    @property
    def failure_counts(self) -> dict[str, int]:
        """Failed whole-cohort replicates by reason."""
        counts: dict[str, int] = {}
        for f in self.failures:
            counts[f.reason] = counts.get(f.reason, 0) + 1
        return dict(sorted(counts.items()))

    def to_frame(self) -> pd.DataFrame:
        """The headline measures with intervals, with a ``cohort`` column."""
        table = self.performance.copy()
        table.insert(0, "cohort", self.label)
        return table

    def threshold_frame(self) -> pd.DataFrame:
        """Classification at the study's thresholds, all cuts stacked (``cohort``, ``cut``, ``outcome`` first)."""
        parts = []
        for cut, tab in self.threshold_tables.items():
            f = tab.to_frame()
            f.insert(0, "outcome", cut_name(self.levels, cut))
            f.insert(0, "cut", cut)
            f.insert(0, "cohort", self.label)
            parts.append(f)
        return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=["cohort", "cut", "outcome", "threshold"])

    def calibration_frame(self) -> pd.DataFrame:
        """Per-cut calibration summaries (apparent, with model-based intervals), in words.

        Columns ``cohort``, ``outcome``, ``measure`` (display name), ``estimate``,
        ``se``, ``lower``, ``upper``.  For a binary outcome the ordinal
        Hosmer-Lemeshow rows are left out (they repeat the binary test).
        """
        table = self.calibration.to_frame()
        if len(self.levels) == 2:
            table = table[~table["measure"].str.startswith("ordinal_")]
        cuts = [None if pd.isna(c) else int(c) for c in table["cut"]]
        out = pd.DataFrame({
            "cohort": self.label,
            "outcome": [cut_name(self.levels, c) for c in cuts],
            "measure": [calibration_label(m) for m in table["measure"]],
        })
        for column in ("estimate", "se", "lower", "upper"):
            out[column] = table[column].to_numpy()
        return out

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "label": self.label,
                "levels": list(self.levels),
                "n": self.n,
                "level_counts": dict(self.level_counts),
                "discrimination": self.discrimination.to_dict(),
                "calibration": self.calibration.to_dict(),
                "overall": self.overall.to_dict(),
                "threshold_tables": {str(k): v.to_dict() for k, v in self.threshold_tables.items()},
                "decision_curves": [d.to_dict() for d in self.decision_curves],
                "performance": self.performance,
                "subgroups": self.subgroups,
                "subgroup_sizes": self.subgroup_sizes,
                "n_boot": self.n_boot,
                "seed": self.seed,
                "n_failed": self.n_failed,
                "confidence": self.confidence,
                "min_subgroup_size": self.min_subgroup_size,
                "min_subgroup_events": self.min_subgroup_events,
                "warnings": list(self.warnings),
                "failures": [f.to_dict() for f in self.failures],
                "failure_counts": self.failure_counts,
                "max_failed_share": self.max_failed_share,
                "intervals_withheld": self.intervals_withheld,
                "interval_notes": dict(self.interval_notes),
                **({} if self.n_rows is None else {"counted": "people", "n_rows": self.n_rows}),
            }
        )


# ---------------------------------------------------------------------------
# Validation of one cohort
# ---------------------------------------------------------------------------


def validate_cohort(
    model: PredictionModel,
    frame: pd.DataFrame,
    y: Any,
    *,
    label: str = "validation",
    thresholds: Mapping[int, Sequence[float]] | None = None,
    subgroups: Sequence[Any] = (),
    min_subgroup_size: int = 100,
    min_subgroup_events: int = MIN_SUBGROUP_EVENTS,
    n_boot: int = 200,
    seed: int = 0,
    confidence: float = 0.95,
    n_jobs: int = 1,
    scheduler: str | None = None,
    max_failed_share: float = 0.1,
    weights: Any = None,
) -> CohortValidation:
    """Performance of a frozen model in one validation cohort, with bootstrap intervals.

    Parameters
    ----------
    model : PredictionModel
        The frozen model (never refitted here).
    frame : DataFrame
        The cohort (a :class:`riskvet.data.PreparedCohort` frame).
    y : array of int
        Outcome codes 0..K-1; every level must occur.
    label : str, keyword-only
        Cohort label.
    thresholds : mapping of int to sequence of float, optional, keyword-only
        Risk thresholds of clinical interest by cut (``study.thresholds_for_cut``).
    subgroups : sequence, keyword-only
        :class:`SubgroupSpec` (or :class:`riskvet.study.Subgroup`) objects.
    min_subgroup_size : int, keyword-only
        Subgroups with fewer patients are flagged ``small``.
    min_subgroup_events : int, keyword-only
        Subgroups with fewer events or fewer non-events than this at some cut
        are flagged ``few_events`` (and ``small``): their calibration cannot
        be read.  The default, 100 of each, is the minimum for validating
        calibration of Vergouwe et al. (2005) and Collins, Ogundimu & Altman
        (2016).
    n_boot : int, keyword-only
        Bootstrap replicates (0: no intervals).
    seed : int, keyword-only
        Bootstrap seed.
    confidence : float, keyword-only
        Level of the percentile intervals.
    n_jobs : int, keyword-only
        Worker processes (-1: every core).
    scheduler : str, optional, keyword-only
        Address of a dask.distributed scheduler (``compute.scheduler``).
    max_failed_share : float, keyword-only
        Largest share of the ``n_boot`` replicates that may fail (an outcome
        level absent from the resample, or an error met while measuring it)
        before the whole-cohort intervals are withheld: above it they are
        NaN and ``intervals_withheld`` says why; at or below it the number
        failed and their reasons are in ``failures``.  A single measure
        undefined in more than this share of the replicates loses its
        interval alone (``interval_notes``).  The default, 0.1, is the
        default of ``internal_validation.max_failed_share``.
    weights : array of int, optional, keyword-only
        Frequency weights (``PreparedCohort.weights``): row i stands for
        ``weights[i]`` identical people.  Every measure is then computed on
        the rows written out one per person, and the bootstrap resamples
        rows, a drawn row bringing all its people.

    Returns
    -------
    CohortValidation

    Notes
    -----
    The model is applied as frozen: no parameter is re-estimated.  Interval
    for a measure: the (1 - confidence)/2 and (1 + confidence)/2 percentiles
    of its values over B resamples of the cohort's rows with replacement
    (Efron & Tibshirani 1993, ch. 13); resamples lacking an outcome level
    are left out and counted.  A subgroup's measures use the subgroup's rows
    within each resample, so subgroup and whole-cohort intervals come from
    the same replicates.  Measures: per-cut C (DeLong 1988), average
    dichotomised C and ordinal c-index (Van Calster et al. 2012),
    calibration-in-the-large and slope per cut (Cox 1958), ICI (Austin &
    Steyerberg 2019), Brier and scaled Brier scores, classification at the
    study's thresholds and net benefit (Vickers & Elkin 2006), all computed
    by :mod:`riskvet.metrics`.

    References
    ----------
    Efron B, Tibshirani RJ. An Introduction to the Bootstrap. Chapman & Hall, 1993.

    Riley RD, Archer L, Snell KIE, et al. Evaluation of clinical prediction
    models (part 2): how to undertake an external validation study. BMJ
    2024;384:e074820.

    Vickers AJ, Elkin EB. Decision curve analysis: a novel method for
    evaluating prediction models. Medical Decision Making 2006;26(6):565-574.

    Vergouwe Y, Steyerberg EW, Eijkemans MJC, Habbema JDF. Substantial
    effective sample sizes were required for external validation studies of
    predictive logistic regression models. Journal of Clinical Epidemiology
    2005;58(5):475-483.

    Collins GS, Ogundimu EO, Altman DG. Sample size considerations for the
    external validation of a multivariable prognostic model: a resampling
    study. Statistics in Medicine 2016;35(2):214-226.
    """
    func = "validate_cohort"
    n_boot, seed, confidence = _check_boot(n_boot, seed, confidence, func)
    if isinstance(min_subgroup_size, bool) or not isinstance(min_subgroup_size, (int, np.integer)) or min_subgroup_size < 1:
        raise RiskvetError(problem(f"{func}(min_subgroup_size=)", allowed="a whole number >= 1", received=min_subgroup_size))
    if isinstance(min_subgroup_events, bool) or not isinstance(min_subgroup_events, (int, np.integer)) or min_subgroup_events < 1:
        raise RiskvetError(problem(f"{func}(min_subgroup_events=)", allowed="a whole number >= 1", received=min_subgroup_events))
    if isinstance(max_failed_share, bool) or not isinstance(max_failed_share, (int, float, np.floating)) or not 0.0 <= float(max_failed_share) <= 1.0:
        raise RiskvetError(problem(f"{func}(max_failed_share=)", allowed="a share between 0 and 1", received=max_failed_share))
    limits = (int(min_subgroup_size), int(min_subgroup_events))
    prob = apply_model(model, frame, label=label)
    levels = tuple(model.levels)
    K = len(levels)
    yy, counts = _check_outcome(y, n_rows=len(frame), levels=levels, label=label, func=func)
    row_y, row_prob, w, frame, yy, prob, first = _written_out(frame, yy, prob, weights, func=func)
    if w is not None:
        yy, counts = _check_outcome(yy, n_rows=len(frame), levels=levels, label=label, func=func)
    thresholds = {int(k): tuple(v) for k, v in (thresholds or {}).items() if len(v)}
    bad = [k for k in thresholds if not 0 <= k < K - 1]
    if bad:
        raise RiskvetError(problem(f"{func}(thresholds=)", allowed=f"cuts 0..{K - 2}", received=bad))

    disc, cal, overall, tables, curves, notes = _whole_cohort_measures(yy, prob, thresholds, confidence=confidence)
    masks, sizes = _subgroup_groups(frame, yy, subgroups, K=K, limits=limits)

    apparent = performance_summary(yy, prob)
    row_masks = masks if w is None else {key: mask[first] for key, mask in masks.items()}
    replicate = _Replicate(row_y, row_prob, row_masks, levels, weights=w)
    reps = run_replicates(replicate, n_boot=n_boot, seed=seed, n_jobs=n_jobs, scheduler=scheduler) if n_boot else []
    keys = summary_keys(K)
    whole = [r[("", "")] for r in reps]
    failures = tuple(ReplicateFailure(i, r.reason, r.message) for i, r in enumerate(whole) if isinstance(r, _Unmeasured))
    performance = pd.DataFrame(_order_rows(_interval_rows(apparent, whole, keys, confidence, levels)))
    performance["cut"] = performance["cut"].astype("Int64")
    performance, withheld, interval_notes, failure_notes = _withhold_intervals(
        performance, failures, n_boot=n_boot, max_failed_share=float(max_failed_share))
    notes += failure_notes
    sub_table, sub_notes = _subgroup_table(masks, yy, prob, reps, keys=keys, confidence=confidence, levels=levels, limits=limits)
    notes += sub_notes
    for note in notes:
        warnings.warn(note, RiskvetWarning, stacklevel=2)
    return CohortValidation(
        label=str(label),
        levels=levels,
        n=int(yy.size),
        level_counts={lv: int(c) for lv, c in zip(levels, counts)},
        discrimination=disc,
        calibration=cal,
        overall=overall,
        threshold_tables=tables,
        decision_curves=tuple(curves),
        performance=performance,
        subgroups=sub_table,
        subgroup_sizes=sizes,
        n_boot=n_boot,
        seed=seed,
        n_failed=len(failures),
        confidence=confidence,
        min_subgroup_size=int(min_subgroup_size),
        warnings=tuple(dict.fromkeys(notes)),
        min_subgroup_events=int(min_subgroup_events),
        failures=failures,
        max_failed_share=float(max_failed_share),
        intervals_withheld=withheld,
        interval_notes=interval_notes,
        n_rows=None if w is None else int(w.size),
    )


def _written_out(frame: pd.DataFrame, yy: np.ndarray, prob: np.ndarray, weights: Any, *, func: str):
    """The cohort's rows and, with frequency weights, the cohort written out one row per person.

    Returns (row outcomes, row probabilities, weights of the rows kept,
    frame, outcomes and probabilities one per person, the position of each
    kept row's first person).  Rows of weight 0 stand for no one and are
    left out.  Without weights the rows are the people and the weights None.
    """
    if weights is None:
        return yy, prob, None, frame, yy, prob, None
    w = np.asarray(weights)
    if w.shape != (len(frame),) or w.dtype.kind not in "iuf" or not np.all(np.isfinite(w)) or np.any(w < 0) or np.any(w != np.floor(w)):
        raise DataError(problem(f"{func}(weights=)", allowed=f"{len(frame)} frequency weights: whole numbers >= 0, one per row",
                                received=f"shape {w.shape}, dtype {w.dtype}"))
    keep = w > 0
    w = w[keep].astype(np.int64)
    frame, yy, prob = frame.loc[keep].reset_index(drop=True), yy[keep], prob[keep]
    people = np.repeat(np.arange(w.size), w)
    first = np.cumsum(w) - w
    return yy, prob, w, frame.iloc[people].reset_index(drop=True), yy[people], prob[people], first


def _withhold_intervals(performance: pd.DataFrame, failures: Sequence[ReplicateFailure], *, n_boot: int,
                        max_failed_share: float) -> tuple[pd.DataFrame, str, dict[str, str], list[str]]:
    """Apply the failure limit to the whole-cohort intervals.

    Returns the table (limits and SE set to NaN where withheld), why all of
    them are withheld (empty when not), why single measures' are, and the
    notes to issue.
    """
    notes: list[str] = []
    if not n_boot:
        return performance, "", {}, notes
    table = performance.copy()
    counts: dict[str, int] = {}
    for f in failures:
        counts[f.reason] = counts.get(f.reason, 0) + 1
    allowed = max_failed_share * n_boot
    withheld = ""
    if failures:
        by_reason = ", ".join(f"{c} {r}" for r, c in sorted(counts.items()))
        notes.append(f"bootstrap: {len(failures)} of {n_boot} resamples could not be evaluated and were left out ({by_reason})")
    if len(failures) > allowed:
        withheld = (f"{len(failures)} of {n_boot} resamples could not be evaluated, more than the "
                    f"{max_failed_share:.0%} allowed (max_failed_share); bootstrap intervals are not reported")
        table[["se", "lower", "upper"]] = np.nan
        notes.append(f"bootstrap: {withheld}")
        return table, withheld, {}, notes
    interval_notes: dict[str, str] = {}
    for i, row in table.iterrows():
        missing = n_boot - int(row["n_boot_used"])
        if missing > allowed:
            key = row["measure"] if pd.isna(row["cut"]) else f"{row['measure']}_cut{int(row['cut'])}"
            interval_notes[key] = (f"undefined in {missing} of {n_boot} resamples, more than the {max_failed_share:.0%} "
                                   "allowed (max_failed_share); its bootstrap interval is not reported")
            table.loc[i, ["se", "lower", "upper"]] = np.nan
            notes.append(f"bootstrap: {row['label']}{'' if pd.isna(row['cut']) else ', ' + str(row['outcome'])}: {interval_notes[key]}")
    return table, "", interval_notes, notes


def _check_outcome(y: Any, *, n_rows: int, levels: Sequence[str], label: str, func: str) -> tuple[np.ndarray, np.ndarray]:
    """Outcome codes of every row and the count at each level, every level present."""
    K = len(levels)
    yy = np.asarray(y)
    if yy.ndim != 1 or yy.shape[0] != n_rows:
        raise DataError(problem(f"{func}(y=)", allowed=f"one outcome code per row of frame ({n_rows})", received=f"shape {yy.shape}"))
    yy = yy.astype(np.int64)
    counts = np.bincount(yy, minlength=K)
    if counts.size != K or np.any(counts == 0):
        raise DataError(problem(f"{func}(y=) in cohort {label!r}", allowed=f"every outcome level of {list(levels)} present", received=f"level counts {counts.tolist()}"))
    return yy, counts


def _whole_cohort_measures(yy: np.ndarray, prob: np.ndarray, thresholds: Mapping[int, tuple[float, ...]], *,
                           confidence: float):
    """Discrimination, calibration, overall accuracy, threshold tables and decision curves of the whole cohort.

    Returns them with the statistical warnings met, as text; they are
    issued once, with the rest, by the caller.
    """
    K = prob.shape[1]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", RiskvetWarning)
        disc = ordinal_discrimination(yy, prob, confidence=confidence, transform="logit")
        cal = ordinal_calibration(yy, prob, confidence=confidence)
        overall = overall_accuracy(yy, prob)
        tables = {}
        curves = []
        for j in range(K - 1):
            y_cut, p_cut = dichotomise(yy, prob, cut=j)
            if j in thresholds:
                tables[j] = threshold_table(y_cut, p_cut, thresholds=list(thresholds[j]), confidence=confidence)
            curve = net_benefit(y_cut, p_cut, thresholds=decision_grid(thresholds.get(j, ())))
            curves.append(dataclasses.replace(curve, cut=j))
    notes = [str(w.message) for w in caught if issubclass(w.category, RiskvetWarning)]
    return disc, cal, overall, tables, curves, notes


#: Columns describing a subgroup's size, before its measures.
_SIZE_COLUMNS = ["column", "group", "n", "n_top", "n_bottom", "few_events", "small"]


def _size_row(column: str, name: str, y_group: np.ndarray, K: int, limits: tuple[int, int]) -> dict[str, Any]:
    """A subgroup's size and flags: events and non-events at the scarcest cut are min(n_bottom, n_top)."""
    n_g = int(y_group.size)
    n_top, n_bottom = int((y_group == K - 1).sum()), int((y_group == 0).sum())
    few = min(n_top, n_bottom) < limits[1]
    return {"column": column, "group": name, "n": n_g, "n_top": n_top, "n_bottom": n_bottom,
            "few_events": bool(few), "small": bool(few or n_g < limits[0])}


def _subgroup_groups(frame: pd.DataFrame, yy: np.ndarray, subgroups: Sequence[Any], *, K: int,
                     limits: tuple[int, int]) -> tuple[dict[tuple[str, str], np.ndarray], pd.DataFrame]:
    """Row masks of every subgroup, keyed by (column, group), and the table of their sizes.

    ``limits`` is (min_subgroup_size, min_subgroup_events).
    """
    masks: dict[tuple[str, str], np.ndarray] = {}
    size_rows = []
    for spec in subgroups:
        groups, n_missing = subgroup_masks(frame, spec)
        for name, mask in groups:
            masks[(spec.column, name)] = mask
            size_rows.append(_size_row(spec.column, name, yy[mask], K, limits))
        if n_missing:
            size_rows.append({"column": spec.column, "group": "(missing)", "n": n_missing, "n_top": -1, "n_bottom": -1,
                              "few_events": True, "small": True})
    return masks, pd.DataFrame(size_rows, columns=_SIZE_COLUMNS)


def _subgroup_table(masks: Mapping[tuple[str, str], np.ndarray], yy: np.ndarray, prob: np.ndarray,
                    reps: list[dict[tuple[str, str], dict[str, float] | None]], *, keys: Sequence[str], confidence: float,
                    levels: Sequence[str], limits: tuple[int, int]) -> tuple[pd.DataFrame, list[str]]:
    """Every subgroup's measures with intervals from the same replicates as the whole cohort.

    Also returns a note for each subgroup that lacks an outcome level and so has no measures.
    """
    K = len(levels)
    sub_rows = []
    notes: list[str] = []
    for (column, name), mask in masks.items():
        n_g = int(mask.sum())
        app = _summary_or_none(yy[mask], prob[mask], K) if n_g else None
        info = _size_row(column, name, yy[mask], K, limits)
        if app is None and n_g:
            notes.append(f"subgroup {column} = {name}: not every outcome level occurs (n = {n_g}); measures not computed")
        for row in _order_rows(_interval_rows(app, [r[(column, name)] for r in reps], keys, confidence, levels)):
            sub_rows.append({**info, **row})
    sub_cols = [*_SIZE_COLUMNS, "measure", "label", "cut", "outcome", "estimate", "se", "lower", "upper", "n_boot_used"]
    sub_table = pd.DataFrame(sub_rows, columns=sub_cols)
    sub_table["cut"] = sub_table["cut"].astype("Int64")
    return sub_table, notes
