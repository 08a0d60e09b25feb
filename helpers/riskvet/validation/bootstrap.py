"""Internal validation by the bootstrap: repeat the whole derivation procedure.

:func:`validate_internally` draws ``n_boot`` bootstrap samples of the
derivation cohort and runs the study's whole derivation procedure
(:func:`riskvet.derive.derive`: knot placement, category levels, variable
selection, fitting) on each.  Every replicate model is measured on its own
bootstrap sample, on the original data and on the rows its sample left out
(out of bag).  From these come, for each performance measure, the
optimism-corrected estimate, the .632 and .632+ estimates, the spread across
replicates, the uniform shrinkage factor, and how stable the variable
selection is.

Frequency weights (a row standing for w identical people, from
``data.weight_column``): the rows are resampled, each drawn row bringing
all w of its people, and every measure is of people (see
:func:`validate_internally`).

Reproducibility: replicate ``i`` draws its rows and its selection seed from
its own stream, ``numpy.random.SeedSequence(seed).spawn(n_boot)[i]``, and the
results are combined in replicate order in the calling process, so the result
is identical, bit for bit, whether the replicates run in one process, in
``n_jobs`` local worker processes or on a dask.distributed cluster.  Every
worker runs with one BLAS thread.

Replicates that fail (an outcome level absent from the resample, a fit that
does not converge or meets separation, a design the resample cannot support,
or any other error met inside the replicate) are counted and listed with
their reason; none is silently dropped and none stops the run, which stops
with a :class:`~riskvet.errors.RiskvetError` only when more than the study's
``internal_validation.max_failed_share`` fail.  Estimates that cannot be read
(few patients on one side of a cut, replicate values spread too widely) are
computed and flagged ``unstable`` with the reason.
"""

from __future__ import annotations

import contextlib
import dataclasses
import math
import os
import pickle
import shutil
import sys
import tempfile
import warnings
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator, Sequence

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..errors import DataError, DesignError, FitError, RiskvetError, RiskvetWarning, StudyError, problem
from ..modelling import kernels
from ..modelling.folds import cluster_codes, cluster_members, draw_clusters
from ..measures.summary import average_summaries

__all__ = [
    "MeasureEstimate",
    "ReplicateFailure",
    "ReplicateSpread",
    "SelectionStability",
    "ShrinkageEstimate",
    "InternalValidation",
    "validate_internally",
    "bootstrap_indices",
    "cluster_bootstrap_indices",
    "heuristic_shrinkage",
    "shrink_model",
    "write_shrunken_model",
    "MIN_CUT_EVENTS",
    "UNSTABLE_SPREAD",
    "MIN_DEFINED_SHARE",
]

#: Probabilities are floored here before taking logs (per-row log-likelihood pieces).
_LOG_FLOOR = 1e-15
#: Largest selection seed handed to a replicate (selection seeds are non-negative ints).
_SEED_CEILING = 2**31 - 1
#: Weight of the out-of-bag estimate in the .632 estimator (1 - 1/e, rounded as published).
_W632 = 0.632

#: Fewest patients on the smaller side of a cut of an ordered outcome (events
#: or non-events) for that cut's own measures to be read.  The replicate
#: models are measured on the original data, which play the part of a
#: validation sample for them, and at least 100 events and 100 non-events is
#: the minimum given for validating a model's performance (Vergouwe et al.
#: 2005; Collins, Ogundimu & Altman 2016).  It applies to the per-cut measures
#: of an ordered outcome (a rare level's cut) only: a binary outcome's
#: measures are the model's headline and keep their value, flagged by the
#: spread rule below when the replicates cannot pin them down.
MIN_CUT_EVENTS = 100

#: Width of the central 95% of a measure's replicate values on the original
#: data beyond which its corrected value is flagged unstable, by kind (common
#: practice; the widths are this package's choice): a calibration slope
#: spread over more than 1 (say 0.5 to 1.5) runs from strong overfitting to
#: underfitting, so the correction cannot say which; calibration-in-the-large
#: spread over more than 2 on the logit scale is a factor above e^2 (7.4) in
#: the odds of the mean risk; a C statistic spread over more than 0.25 covers
#: half of the range 0.5 to 1 on which C is read.
UNSTABLE_SPREAD: dict[str, float] = {"slope": 1.0, "intercept": 2.0, "concordance": 0.25}

#: A measure defined in fewer than this share of the successful replicates is
#: flagged unstable: the optimism then rests on a selected minority of them
#: (common practice).
MIN_DEFINED_SHARE = 0.5


# ---------------------------------------------------------------------------
# Performance measures
# ---------------------------------------------------------------------------

#: Kinds of measure, with what "no information" and "better" mean for each.
#: ``higher``: larger is better.  ``noinfo``: how the no-information value is
#: obtained (see :func:`_no_information`); ``None`` means .632/.632+ do not apply.
_KINDS: dict[str, dict[str, Any]] = {
    "concordance": {"higher": True, "noinfo": "half"},
    "brier": {"higher": False, "noinfo": "pairs"},
    "scaled_brier": {"higher": True, "noinfo": "pairs"},
    "r2": {"higher": True, "noinfo": "pairs"},
    "ici": {"higher": False, "noinfo": "pairs"},
    "slope": {"higher": None, "noinfo": None},
    "intercept": {"higher": None, "noinfo": None},
}


def _cut_words(levels: Sequence[str], j: int) -> str:
    """The event of cut ``j`` of an ordered outcome in words: the top level, or "<level> or higher".

    The same words as :func:`riskvet.reporting.labels.cut_label` (that layer
    may not be imported here; a test keeps the two equal).
    """
    return str(levels[j + 1]) if j == len(levels) - 2 else f"{levels[j + 1]} or higher"


def _measure_specs(levels: Sequence[str]) -> list[tuple[str, str, str]]:
    """(key, label, kind) of every measure, in report order, for outcome ``levels``.

    Labels name a cut by its event in words (``C (AUC), transferred``).
    """
    K = len(levels)
    specs: list[tuple[str, str, str]] = []
    if K == 2:
        specs.append(("auc", "C statistic (AUC)", "concordance"))
    else:
        for j in range(K - 1):
            specs.append((f"auc_cut{j}", f"C (AUC), {_cut_words(levels, j)}", "concordance"))
        specs += [
            ("average_cut_auc", "Average dichotomised C", "concordance"),
            ("ordinal_c", "Ordinal c-index", "concordance"),
            ("generalised_c", "Generalised C", "concordance"),
        ]
    specs += [
        ("brier", "Brier score", "brier"),
        ("scaled_brier", "Scaled Brier score", "scaled_brier"),
        ("nagelkerke_r2", "Nagelkerke R²", "r2"),
        ("calibration_slope", "Calibration slope of the linear predictor" + ("" if K == 2 else ", all levels"), "slope"),
    ]
    if K == 2:
        specs += [
            ("calibration_intercept", "Calibration-in-the-large", "intercept"),
            ("ici", "Integrated calibration index (ICI)", "ici"),
        ]
    else:
        for j in range(K - 1):
            specs.append((f"calibration_slope_cut{j}", f"Calibration slope, {_cut_words(levels, j)}", "slope"))
        for j in range(K - 1):
            specs.append((f"calibration_intercept_cut{j}", f"Calibration-in-the-large, {_cut_words(levels, j)}", "intercept"))
        for j in range(K - 1):
            specs.append((f"ici_cut{j}", f"ICI, {_cut_words(levels, j)}", "ici"))
    return specs


def _lp_slope(y: np.ndarray, lp: np.ndarray | None, K: int, link: str) -> float:
    """Slope b of the cumulative model P(Y <= j) = F(a_j - b LP) on the given data.

    NaN when the linear predictor is constant (a model with no predictors:
    the slope is undefined, see :data:`riskvet.measures.calibration.SLOPE_UNDEFINED_CONSTANT`)
    or the fit does not converge or meets separation.
    """
    from ..measures.calibration import _is_constant
    from ..modelling.fitter import fit_cumulative

    if lp is None or lp.ndim != 1 or _is_constant(lp):
        return float("nan")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        fit = fit_cumulative(lp[:, None], y, link=link, n_levels=K)
    if not fit.converged or fit.separation:
        return float("nan")
    return float(np.asarray(fit.coef, dtype=float).ravel()[0])


def _measures(y: np.ndarray, prob: np.ndarray, lp: np.ndarray | None, *, K: int, link: str) -> tuple[dict[str, float], dict[str, int]]:
    """Every measure of predictions ``prob`` (n x K) against ``y``; NaN where undefined.

    The measures are those of :func:`riskvet.metrics.performance_summary`
    (renamed without the cut suffix for a binary outcome) plus the
    calibration slope of the linear predictor (:func:`_lp_slope`).  When an
    outcome level is absent (possible in an out-of-bag sample) every measure
    is NaN.  Also returns the warnings met, counted by class name.
    """
    from ..measures.summary import performance_summary

    nan = float("nan")
    caught: Counter[str] = Counter()
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        try:
            summary = performance_summary(y, prob)
        except DataError:
            summary = None
        try:
            lp_slope = _lp_slope(y, lp, K, link) if summary is not None else nan
        except FitError:
            lp_slope = nan
    for w in seen:
        caught[w.category.__name__] += 1
    out: dict[str, float] = {}
    for key, _, _ in _measure_specs(tuple(str(j) for j in range(K))):
        if key == "calibration_slope":
            out[key] = lp_slope
        elif summary is None:
            out[key] = nan
        else:
            source = key if K > 2 or key in summary else f"{key}_cut0"
            out[key] = float(summary[source])
    return out, dict(caught)


def _row_pieces(y: np.ndarray, prob: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-row Brier loss and log-likelihood contribution (the additive losses)."""
    n, K = prob.shape
    indicator = np.zeros_like(prob)
    indicator[np.arange(n), y] = 1.0
    if K == 2:
        brier_row = (indicator[:, 1] - prob[:, 1]) ** 2
    else:
        brier_row = np.sum((indicator - prob) ** 2, axis=1)
    logp_row = np.log(np.maximum(prob[np.arange(n), y], _LOG_FLOOR))
    return brier_row, logp_row


def _r2_from_loglik(ll: float, ll0: float, n: int) -> float:
    """Nagelkerke R2 from a log-likelihood ``ll`` and the null ``ll0`` of ``n`` rows."""
    cs = -math.expm1(-2.0 * (ll - ll0) / n)
    cs_max = -math.expm1(2.0 * ll0 / n)
    return cs / cs_max if cs_max > 0 else float("nan")


def _no_information(key: str, kind: str, y: np.ndarray, prob: np.ndarray) -> float:
    """No-information value of a measure for predictions ``prob`` of outcomes ``y``.

    The value the measure takes when predictions carry no information about
    the outcome, i.e. averaged over all n^2 pairings of an observed outcome
    y_i with a prediction p_j (Efron & Tibshirani 1997, eq. 27).
    """
    n, K = prob.shape
    props = np.bincount(y, minlength=K) / n
    if kind == "concordance":
        return 0.5
    if kind in ("brier", "scaled_brier"):
        if K == 2:
            gamma = float(np.mean(props[1] * (1.0 - prob[:, 1]) ** 2 + props[0] * prob[:, 1] ** 2))
            null = float(props[0] * props[1])
        else:
            gamma = float(np.mean(np.sum(props[None, :] * (1.0 - prob) ** 2 + (1.0 - props[None, :]) * prob**2, axis=1)))
            null = float(1.0 - np.sum(props**2))
        if kind == "brier":
            return gamma
        return 1.0 - gamma / null if null > 0 else float("nan")
    if kind == "r2":
        present = props > 0
        ll0 = float(n * np.sum(props[present] * np.log(props[present])))
        gamma_ll = float(n * np.sum(props * np.mean(np.log(np.maximum(prob, _LOG_FLOOR)), axis=0)))
        return _r2_from_loglik(gamma_ll, ll0, n)
    if kind == "ici":
        j = 0 if key == "ici" else int(key.removeprefix("ici_cut"))
        cut_p = np.clip(prob[:, j + 1 :].sum(axis=1), 0.0, 1.0)
        return float(np.mean(np.abs(np.mean(y > j) - cut_p)))
    return float("nan")


def _estimator_632(apparent: float, err1: float, gamma: float, higher: bool) -> tuple[float, float, float]:
    """.632 and .632+ estimates and the relative overfitting rate R.

    Computed on the loss scale (a higher-is-better measure is negated), with
    Err1' = min(Err1, gamma) and R = (Err1' - err) / (gamma - err) clipped to
    [0, 1] (0 when Err1 <= err or gamma <= err), w = .632 / (1 - .368 R),
    Err(.632+) = (1 - w) err + w Err1' (Efron & Tibshirani 1997, eqs 28-32).
    """
    if not (np.isfinite(apparent) and np.isfinite(err1)):
        return float("nan"), float("nan"), float("nan")
    sign = -1.0 if higher else 1.0
    err, e1 = sign * apparent, sign * err1
    est632 = (1.0 - _W632) * err + _W632 * e1
    if not np.isfinite(gamma):
        return sign * est632, float("nan"), float("nan")
    g = sign * gamma
    e1p = min(e1, g)
    if e1 > err and g > err:
        rate = float(np.clip((e1p - err) / (g - err), 0.0, 1.0))
    else:
        rate = 0.0
    w = _W632 / (1.0 - (1.0 - _W632) * rate)
    est_plus = (1.0 - w) * err + w * e1p
    return sign * est632, sign * est_plus, rate


# ---------------------------------------------------------------------------
# Result objects
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class MeasureEstimate:
    """Bootstrap internal validation of one performance measure.

    Attributes
    ----------
    measure, label, kind : str
        Key (``auc_cut0``), display label and kind (``concordance``,
        ``brier``, ``scaled_brier``, ``r2``, ``ici``, ``slope``, ``intercept``).
    apparent : float
        The measure of the model derived on all data, on the same data.
    bootstrap_mean : float
        Mean over replicates of each replicate model's measure on its own
        bootstrap sample.
    test_mean : float
        Mean over replicates of each replicate model's measure on the original data.
    optimism : float
        Mean over replicates of (bootstrap-sample measure - original-data measure).
    corrected : float
        ``apparent - optimism`` (Harrell, Lee & Mark 1996).
    oob_mean : float
        Err(1): the out-of-bag estimate (see :func:`validate_internally` Notes).
    no_information : float
        The measure's value when predictions carry no information (NaN for
        calibration slope and intercept).
    overfitting_rate : float
        R of the .632+ estimator, in [0, 1].
    estimate_632, estimate_632plus : float
        The .632 and .632+ estimates (NaN for calibration slope and intercept).
    optimism_sd, optimism_lower, optimism_upper : float
        SD and 2.5 / 97.5 percentiles of the per-replicate optimism (the
        central 95% of replicates; there is no confidence setting for the
        bootstrap spread).
    test_sd, test_lower, test_upper : float
        SD and 2.5 / 97.5 percentiles (central 95%) of the original-data
        measure across replicates.
    n_replicates : int
        Replicates in which both the bootstrap-sample and the original-data
        measure could be computed (the optimism is averaged over these).
    n_oob : int
        Replicates with an out-of-bag value (for replicate-averaged Err(1)),
        or rows out of bag at least once (for the per-row Brier and R2).
    smaller_side : int or None
        For a measure of one cut (and every measure of a binary outcome but
        the overall ones): patients on the smaller side of the cut in the
        derivation data, min(events, non-events); None otherwise.
    unstable : bool
        The corrected value is computed but not to be read as an estimate:
        fewer than :data:`MIN_CUT_EVENTS` patients on the smaller side of its
        cut, a central-95% spread of its replicate values on the original
        data wider than :data:`UNSTABLE_SPREAD` for its kind, or a value in
        fewer than :data:`MIN_DEFINED_SHARE` of the successful replicates.
    unstable_reason : str
        Every rule met, in words, joined by "; "; empty when stable.
    undefined_reason : str
        Why the apparent or corrected value is NaN (for example a model with
        no predictors, whose calibration slope is undefined); empty otherwise.
    """

    measure: str
    label: str
    kind: str
    apparent: float
    bootstrap_mean: float
    test_mean: float
    optimism: float
    corrected: float
    oob_mean: float
    no_information: float
    overfitting_rate: float
    estimate_632: float
    estimate_632plus: float
    optimism_sd: float
    optimism_lower: float
    optimism_upper: float
    test_sd: float
    test_lower: float
    test_upper: float
    n_replicates: int
    n_oob: int
    smaller_side: int | None = None
    unstable: bool = False
    unstable_reason: str = ""
    undefined_reason: str = ""

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


@dataclass(frozen=True)
class ReplicateSpread:
    """How one quantity the derivation procedure produces varies across the bootstrap replicates.

    Attributes
    ----------
    quantity : str
        ``penalty_alpha`` (the penalty weight a penalised derivation chose)
        or ``calibration_slope`` (the slope of each replicate model's linear
        predictor on the original data, the bootstrap shrinkage factor).
    label : str
        The quantity in words.
    apparent : float
        Its value for the derivation on all data (the apparent calibration
        slope; the penalty chosen on all data).
    median, lower, upper : float
        Median and 2.5 / 97.5 percentiles (the central 95%; numpy's linear
        interpolation) of the finite replicate values.
    n_replicates : int
        Replicates with a finite value.
    values : tuple of float
        Every successful replicate's value, in replicate order (NaN where
        it has none).
    """

    quantity: str
    label: str
    apparent: float
    median: float
    lower: float
    upper: float
    n_replicates: int
    values: tuple[float, ...] = field(default=(), repr=False)

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})

    def to_frame(self) -> pd.DataFrame:
        """One row: quantity, label, apparent, median, lower, upper, n_replicates."""
        columns = ["quantity", "label", "apparent", "median", "lower", "upper", "n_replicates"]
        return pd.DataFrame([{c: getattr(self, c) for c in columns}], columns=columns)


def _replicate_spread(quantity: str, label: str, apparent: float | None, values: Sequence[float | None]) -> ReplicateSpread:
    """Median and central 95% of the finite ``values`` (NaN when there are none)."""
    v = np.asarray([np.nan if x is None else float(x) for x in values], dtype=float)
    finite = v[np.isfinite(v)]
    tail = 100.0 * (1.0 - _SPREAD_SHARE) / 2.0
    if finite.size:
        median = float(np.median(finite))
        lo, hi = (float(x) for x in np.percentile(finite, [tail, 100.0 - tail]))
    else:
        median = lo = hi = float("nan")
    return ReplicateSpread(
        quantity=quantity, label=label, apparent=float("nan") if apparent is None else float(apparent),
        median=median, lower=lo, upper=hi, n_replicates=int(finite.size), values=tuple(float(x) for x in v),
    )


@dataclass(frozen=True)
class ReplicateFailure:
    """A replicate that produced no model, with why.

    Attributes
    ----------
    replicate : int
        Replicate number 0 .. n_boot-1.
    reason : str
        ``empty outcome level``, ``non-convergence``, ``separation`` (not
        for a Firth fit, which is finite under separation), ``cannot predict
        original data``, or the kind of error met: ``fit error``, ``design
        error``, ``data error``, ``study error``, ``input error``,
        ``numerical error``, ``arithmetic error``, ``lookup error``, ``type
        error``, ``value error``, ``recursion error``, ``unexpected error``.
    message : str
        The first line of the error message (with where it was met, for an
        error the package did not expect), or the detail.
    """

    replicate: int
    reason: str
    message: str

    def to_dict(self) -> dict[str, Any]:
        return {"replicate": self.replicate, "reason": self.reason, "message": self.message}


@dataclass(frozen=True)
class SelectionStability:
    """How often the derivation procedure chose each candidate term across replicates.

    Attributes
    ----------
    candidate_terms : tuple of str
        Every candidate term, in design order.
    forced_terms : tuple of str
        Terms the study forces into every model.
    apparent_terms : tuple of str
        Terms selected on all data.
    times_selected : dict
        Term -> number of successful replicates that selected it.
    n_replicates : int
        Successful replicates.
    model_sizes : dict
        Number of selected terms -> number of replicates.
    top_sets : tuple of (tuple of str, int)
        The most frequent selected sets (at most ten), with their counts,
        most frequent first (ties in order of first appearance).
    method : str
        The study's selection method.
    """

    candidate_terms: tuple[str, ...]
    forced_terms: tuple[str, ...]
    apparent_terms: tuple[str, ...]
    times_selected: dict[str, int]
    n_replicates: int
    model_sizes: dict[int, int]
    top_sets: tuple[tuple[tuple[str, ...], int], ...]
    method: str

    @property
    def share_selected(self) -> dict[str, float]:
        """Term -> share of successful replicates that selected it."""
        n = max(self.n_replicates, 1)
        return {t: self.times_selected[t] / n for t in self.candidate_terms}

    @property
    def apparent_set_share(self) -> float:
        """Share of replicates that selected exactly the apparent set of terms."""
        for terms, count in self.top_sets:
            if set(terms) == set(self.apparent_terms):
                return count / max(self.n_replicates, 1)
        return 0.0

    def to_frame(self) -> pd.DataFrame:
        """One row per candidate term: in the apparent model, forced, times and share selected."""
        share = self.share_selected
        return pd.DataFrame(
            {
                "term": list(self.candidate_terms),
                "forced": [t in self.forced_terms for t in self.candidate_terms],
                "in_apparent_model": [t in self.apparent_terms for t in self.candidate_terms],
                "times_selected": [self.times_selected[t] for t in self.candidate_terms],
                "share_selected": [share[t] for t in self.candidate_terms],
            }
        )

    def sets_frame(self) -> pd.DataFrame:
        """The most frequent selected sets: terms, size, count and share."""
        n = max(self.n_replicates, 1)
        return pd.DataFrame(
            {
                "terms": [", ".join(t) for t, _ in self.top_sets],
                "n_terms": [len(t) for t, _ in self.top_sets],
                "count": [c for _, c in self.top_sets],
                "share": [c / n for _, c in self.top_sets],
            }
        )

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "candidate_terms": self.candidate_terms,
                "forced_terms": self.forced_terms,
                "apparent_terms": self.apparent_terms,
                "times_selected": self.times_selected,
                "share_selected": self.share_selected,
                "n_replicates": self.n_replicates,
                "model_sizes": {str(k): v for k, v in self.model_sizes.items()},
                "top_sets": [{"terms": list(t), "count": c} for t, c in self.top_sets],
                "method": self.method,
            }
        )


@dataclass(frozen=True)
class ShrinkageEstimate:
    """Uniform shrinkage factors for the derived model's coefficients.

    Attributes
    ----------
    bootstrap : float
        Mean over replicates of the calibration slope of each replicate
        model's linear predictor on the original data.
    bootstrap_sd, bootstrap_lower, bootstrap_upper : float
        SD and 2.5 / 97.5 percentiles (central 95%) of those slopes.
    source : str
        How the slope was measured (see :func:`validate_internally` Notes).
    heuristic : float
        (model chi2 - df) / model chi2 with df the final model's degrees of
        freedom; shown for comparison, optimistic after selection.
    heuristic_candidates : float
        The same chi2 with df counting every candidate parameter the
        procedure considered (the honest count when selection was used).
    model_chi2 : float
        Likelihood-ratio chi-square of the apparent (selected) model against
        the null model; the same value enters both heuristic factors.
    df_final, df_candidates : int
        Degrees of freedom of the final model and of all candidates.
    n_replicates : int
        Replicates behind the bootstrap factor.
    """

    bootstrap: float
    bootstrap_sd: float
    bootstrap_lower: float
    bootstrap_upper: float
    source: str
    heuristic: float
    heuristic_candidates: float
    model_chi2: float
    df_final: int
    df_candidates: int
    n_replicates: int

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})

    def to_frame(self) -> pd.DataFrame:
        """One row per method: factor and what it rests on."""
        return pd.DataFrame(
            [
                {"method": "bootstrap calibration slope", "factor": self.bootstrap, "basis": f"{self.n_replicates} replicates; {self.source}"},
                {"method": "heuristic, final model df", "factor": self.heuristic, "basis": f"chi2 {self.model_chi2:.1f} on {self.df_final} df"},
                {"method": "heuristic, candidate df", "factor": self.heuristic_candidates, "basis": f"chi2 {self.model_chi2:.1f} on {self.df_candidates} df"},
            ]
        )


@dataclass(frozen=True)
class InternalValidation:
    """Result of bootstrap internal validation of the whole derivation procedure.

    Attributes
    ----------
    estimates : tuple of MeasureEstimate
        One per measure, in report order.
    shrinkage : ShrinkageEstimate
        Bootstrap and heuristic uniform shrinkage factors.
    stability : SelectionStability
        Variable-selection stability across replicates.
    failures : tuple of ReplicateFailure
        Every replicate that produced no model, with its reason.
    n_boot, n_succeeded : int
        Replicates asked for and replicates that produced a model.
    seed : int
        Seed of the replicate streams.
    n, n_levels : int
        People in the derivation data (its rows, without frequency weights;
        the sum of the weights with them) and outcome levels.
    levels : tuple of str
        Outcome levels coded 0 .. K-1.
    max_failed_share : float
        The share of failed replicates above which the run stops.
    replicate_warnings : dict
        Statistical warnings met inside successful replicates, by class name
        (counted, not re-issued: there may be hundreds); ``measure:`` marks
        those met while measuring.
    apparent_warnings : tuple of str
        Statistical warnings of the derivation on all data (also issued).
    replicate_values : DataFrame
        Long table of every successful replicate's measures: columns
        ``replicate``, ``measure``, ``sample`` (``bootstrap``, ``original``,
        ``out_of_bag``) and ``value``.
    selection_seeds : tuple of int
        The selection seed each replicate used.
    slope_spread : ReplicateSpread or None
        The replicate models' calibration slopes on the original data (the
        values behind ``shrinkage.bootstrap``): apparent slope, median and
        central 95%.
    penalty_spread : ReplicateSpread or None
        For a penalised derivation (``fit.estimation == "penalized"``), the
        penalty weight alpha chosen on all data and in each replicate; None
        otherwise.
    n_rows : int or None
        With frequency weights, the rows of the derivation data (the units
        resampled: a drawn row brings all its people); None without weights,
        when rows are people.
    n_clusters : int or None
        With a cluster column (``data.cluster_column``), the clusters of the
        derivation data: the units resampled (a drawn cluster brings all its
        rows); None when rows are resampled.
    cluster_kind : str or None
        ``data.cluster_kind`` (site, period or person) with clusters; None otherwise.
    n_imputations : int or None
        Under multiple imputation (``missing_data.method: multiple_imputation``)
        the m completed data sets of the original data and of every
        resample (each replicate resamples the incomplete rows, then imputes
        them); None under complete cases.
    """

    estimates: tuple[MeasureEstimate, ...]
    shrinkage: ShrinkageEstimate
    stability: SelectionStability
    failures: tuple[ReplicateFailure, ...]
    n_boot: int
    n_succeeded: int
    seed: int
    n: int
    n_levels: int
    levels: tuple[str, ...]
    max_failed_share: float
    replicate_warnings: dict[str, int]
    apparent_warnings: tuple[str, ...]
    replicate_values: pd.DataFrame = field(repr=False)
    selection_seeds: tuple[int, ...] = field(repr=False)
    slope_spread: ReplicateSpread | None = None
    penalty_spread: ReplicateSpread | None = None
    n_rows: int | None = None
    n_clusters: int | None = None
    cluster_kind: str | None = None
    n_imputations: int | None = None

    @property
    def resampled(self) -> str:
        """The units each replicate draws with replacement: ``"clusters"`` or ``"rows"``."""
        return "rows" if self.n_clusters is None else "clusters"

    @property
    def n_failed(self) -> int:
        return len(self.failures)

    @property
    def failure_counts(self) -> dict[str, int]:
        """Failed replicates by reason."""
        return dict(sorted(Counter(f.reason for f in self.failures).items()))

    def estimate(self, measure: str) -> MeasureEstimate:
        """The estimate of one measure by key."""
        for e in self.estimates:
            if e.measure == measure:
                return e
        raise RiskvetError(problem("InternalValidation.estimate(measure)", allowed=f"one of {[e.measure for e in self.estimates]}", received=measure))

    def values(self, measure: str, sample: str = "original") -> np.ndarray:
        """Per-replicate values of one measure on one sample, in replicate order."""
        table = self.replicate_values
        rows = table[(table["measure"] == measure) & (table["sample"] == sample)]
        return rows["value"].to_numpy(dtype=float)

    def to_frame(self) -> pd.DataFrame:
        """One row per measure with every estimate (with ``unstable``, ``unstable_reason``, ``undefined_reason``)."""
        return pd.DataFrame([dataclasses.asdict(e) for e in self.estimates])  # NaN kept (to_dict makes it None)

    def spreads_frame(self) -> pd.DataFrame:
        """The replicate spreads of the calibration slope and (penalised derivations) the chosen penalty."""
        parts = [s.to_frame() for s in (self.slope_spread, self.penalty_spread) if s is not None]
        columns = ["quantity", "label", "apparent", "median", "lower", "upper", "n_replicates"]
        return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=columns)

    def failures_frame(self) -> pd.DataFrame:
        """Failed replicates: replicate, reason, message."""
        return pd.DataFrame([f.to_dict() for f in self.failures], columns=["replicate", "reason", "message"])

    @property
    def headline_measure(self) -> str:
        return "auc" if self.n_levels == 2 else "average_cut_auc"

    def to_dict(self) -> dict[str, Any]:
        values: dict[str, dict[str, list]] = {}
        for (measure, sample), rows in self.replicate_values.groupby(["measure", "sample"], sort=False):
            values.setdefault(measure, {})[sample] = rows["value"].tolist()
        return to_jsonable(
            {
                "estimates": [e.to_dict() for e in self.estimates],
                "shrinkage": self.shrinkage.to_dict(),
                "stability": self.stability.to_dict(),
                "failures": [f.to_dict() for f in self.failures],
                "failure_counts": self.failure_counts,
                "n_boot": self.n_boot,
                "n_succeeded": self.n_succeeded,
                "n_failed": self.n_failed,
                "seed": self.seed,
                "n": self.n,
                "n_levels": self.n_levels,
                "levels": self.levels,
                "max_failed_share": self.max_failed_share,
                "replicate_warnings": self.replicate_warnings,
                "apparent_warnings": self.apparent_warnings,
                "selection_seeds": self.selection_seeds,
                "replicate_values": values,
                "slope_spread": self.slope_spread.to_dict() if self.slope_spread is not None else None,
                "penalty_spread": self.penalty_spread.to_dict() if self.penalty_spread is not None else None,
                **({} if self.n_rows is None else {"counted": "people", "n_rows": self.n_rows}),
                "resampled": self.resampled,
                **({} if self.n_clusters is None else {"n_clusters": self.n_clusters, "cluster_kind": self.cluster_kind}),
                **({} if self.n_imputations is None else {"n_imputations": self.n_imputations,
                                                          "imputation_scheme": "resample, then impute each resample"}),
            }
        )


# ---------------------------------------------------------------------------
# Inputs
# ---------------------------------------------------------------------------


def _check_study(study: Any, func: str):
    from ..intake.study import Study

    if not isinstance(study, Study):
        raise RiskvetError(problem(f"{func}(study)", allowed="a validated Study (riskvet.study.load_study)", received=type(study).__name__))
    return study


def _as_data(study, data: Any, func: str) -> tuple[pd.DataFrame, np.ndarray]:
    """(frame of the predictor columns, y codes) from a PreparedCohort or a (frame, y) pair."""
    from ..intake.data import PreparedCohort

    if isinstance(data, PreparedCohort):
        frame, y = data.frame, data.y
    elif isinstance(data, tuple) and len(data) == 2 and isinstance(data[0], pd.DataFrame):
        frame, y = data
    elif isinstance(data, pd.DataFrame):
        from ..intake.outcome import outcome_codes

        column = study.outcome.column
        if column not in data.columns:
            raise DataError(problem(f"{func}(data)", allowed=f"a frame holding the outcome column {column!r}", received=f"columns {list(data.columns)[:20]}"))
        frame, y = data, outcome_codes(study, data[column], source=f"{func}(data)")
    else:
        raise RiskvetError(problem(f"{func}(data)", allowed="a PreparedCohort (riskvet.data.load_cohorts(...).derivation), the analysis frame with its outcome column, or a (frame, y) pair", received=type(data).__name__))
    columns = list(study.predictors.in_analysis)
    if study.imputing:  # the auxiliary columns of the imputation models travel with the predictors
        columns += [c for c in study.missing_data.auxiliary if c not in columns]
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise DataError(problem(f"{func}(data)", allowed=f"a frame holding every predictor in analysis {columns}", received=f"missing columns {missing}"))
    K = len(study.outcome.ordered_levels)
    y = np.asarray(y)
    if y.ndim != 1 or y.shape[0] != len(frame) or y.dtype.kind not in "iu" or (y.size and (y.min() < 0 or y.max() >= K)):
        raise DataError(problem(f"{func}(data) y", allowed=f"{len(frame)} integer outcome codes 0..{K - 1}", received=f"shape {y.shape}, dtype {y.dtype}"))
    return frame[columns].reset_index(drop=True), y.astype(np.int64)


def _as_weighted_data(study, data: Any, weights: Any, func: str) -> tuple[pd.DataFrame, np.ndarray, np.ndarray | None]:
    """(frame, y, frequency weights or None): the weights of a PreparedCohort, or those passed beside the data.

    Weights are whole numbers >= 0, one per row (row i stands for
    ``weights[i]`` identical people).
    """
    from ..intake.data import PreparedCohort

    frame, y = _as_data(study, data, func)
    own = data.weights if isinstance(data, PreparedCohort) else None
    if weights is not None and own is not None:
        raise RiskvetError(problem(f"{func}(weights=)", allowed="None when the data are a PreparedCohort read with frequency weights (its own weights are used)", received="weights"))
    weights = own if weights is None else weights
    if weights is None:
        return frame, y, None
    w = np.asarray(weights)
    if w.shape != (len(frame),) or w.dtype.kind not in "iuf" or not np.all(np.isfinite(w)) or np.any(w < 0) or np.any(w != np.floor(w)):
        raise DataError(problem(f"{func}(weights=)", allowed=f"{len(frame)} frequency weights: whole numbers >= 0, one per row",
                                received=f"shape {w.shape}, dtype {w.dtype}"))
    return frame, y, w.astype(np.int64)


def _as_clusters(data: Any, clusters: Any, n: int, func: str) -> tuple[np.ndarray | None, str | None]:
    """(cluster codes 0..G-1 in order of first appearance, or None; the cluster kind): a PreparedCohort's own clusters, or those passed."""
    from ..intake.data import PreparedCohort

    own = data.clusters if isinstance(data, PreparedCohort) else None
    kind = data.cluster_kind if isinstance(data, PreparedCohort) else None
    if clusters is not None and own is not None:
        raise RiskvetError(problem(f"{func}(clusters=)", allowed="None when the data are a PreparedCohort read with data.cluster_column (its own clusters are used)", received="clusters"))
    labels = own if clusters is None else clusters
    if labels is None:
        return None, None
    values = np.asarray(labels, dtype=object)
    if values.shape != (n,):
        raise DataError(problem(f"{func}(clusters=)", allowed=f"{n} cluster labels, one per row", received=f"shape {values.shape}"))
    missing = np.flatnonzero(pd.isna(values))
    if missing.size:
        raise DataError(problem(f"{func}(clusters=)", allowed="a cluster label for every row, none missing",
                                received=f"{missing.size} missing, rows {(missing[:5] + 1).tolist()}"))
    return cluster_codes(values), kind


def _people(n_rows: int, weights: np.ndarray | None, rows: np.ndarray | None = None) -> np.ndarray:
    """The rows of ``rows`` (default every row) written out one per person: row i repeated ``weights[i]`` times.

    Without weights it is ``rows`` itself, so that every array indexed by it
    is the array an unweighted analysis measures.
    """
    rows = np.arange(n_rows) if rows is None else rows
    return rows if weights is None else np.repeat(rows, weights[rows])


def _check_count(value: Any, name: str, func: str, *, minimum: int = 1) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise RiskvetError(problem(f"{func}({name}=)", allowed=f"a whole number of at least {minimum}", received=value))
    return int(value)


def _check_seed(seed: Any, func: str) -> int:
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise RiskvetError(problem(f"{func}(seed=)", allowed="a non-negative whole number", received=seed))
    return int(seed)


def _check_n_jobs(n_jobs: Any, func: str) -> int:
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, (int, np.integer)) or n_jobs == 0 or n_jobs < -1:
        raise RiskvetError(problem(f"{func}(n_jobs=)", allowed="a positive number of workers, or -1 for every core", received=n_jobs))
    return int(os.cpu_count() or 1) if n_jobs == -1 else int(n_jobs)


def cluster_bootstrap_indices(clusters: Any, *, n_boot: int, seed: int) -> list[np.ndarray]:
    """The rows each cluster bootstrap replicate brings, exactly as :func:`validate_internally` draws them with clusters.

    Parameters
    ----------
    clusters : array-like, shape (n_rows,)
        The cluster label of every row.
    n_boot : int
        Replicates.
    seed : int
        Seed of the replicate streams.

    Returns
    -------
    list of ndarray of int
        Replicate i's rows: the G clusters it drew with replacement
        (stream i of ``SeedSequence(seed).spawn(n_boot)``, G integers in
        ``[0, G)``, clusters numbered in order of first appearance), each
        bringing all its rows.  With one row per cluster this is
        :func:`bootstrap_indices`, row for row.
    """
    members = cluster_members(cluster_codes(clusters))
    n_boot = _check_count(n_boot, "n_boot", "cluster_bootstrap_indices")
    seed = _check_seed(seed, "cluster_bootstrap_indices")
    return [draw_clusters(np.random.default_rng(c), members) for c in np.random.SeedSequence(seed).spawn(n_boot)]


def bootstrap_indices(n_rows: int, *, n_boot: int, seed: int) -> np.ndarray:
    """The rows each bootstrap replicate draws, exactly as :func:`validate_internally` draws them.

    Parameters
    ----------
    n_rows : int
        Rows in the data.
    n_boot : int
        Replicates.
    seed : int
        Seed of the replicate streams.

    Returns
    -------
    ndarray of int, shape (n_boot, n_rows)
        Row ``i`` holds replicate i's row indices, drawn with replacement.

    Notes
    -----
    Replicate i uses ``numpy.random.default_rng(SeedSequence(seed).spawn(n_boot)[i])``:
    first ``n_rows`` integers in ``[0, n_rows)`` (the resample), then one
    integer in ``[0, 2^31 - 1)``, the seed of that replicate's selection.
    """
    n_rows = _check_count(n_rows, "n_rows", "bootstrap_indices")
    n_boot = _check_count(n_boot, "n_boot", "bootstrap_indices")
    seed = _check_seed(seed, "bootstrap_indices")
    children = np.random.SeedSequence(seed).spawn(n_boot)
    return np.vstack([np.random.default_rng(c).integers(0, n_rows, size=n_rows) for c in children])


def _draw(child: np.random.SeedSequence, n: int, members: tuple[np.ndarray, np.ndarray] | None = None) -> tuple[np.ndarray, int]:
    """A replicate's rows (n rows, or the rows of G clusters drawn with replacement) and its selection seed."""
    rng = np.random.default_rng(child)
    idx = rng.integers(0, n, size=n) if members is None else draw_clusters(rng, members)
    return idx, int(rng.integers(0, _SEED_CEILING))


# ---------------------------------------------------------------------------
# Shrinkage
# ---------------------------------------------------------------------------


def heuristic_shrinkage(model_chi2: float, df: int) -> float:
    """Heuristic uniform shrinkage factor (model chi2 - df) / model chi2.

    Parameters
    ----------
    model_chi2 : float
        Likelihood-ratio chi-square of the model against the null model.
    df : int
        Degrees of freedom: the number of estimated coefficients (with
        selection, every candidate coefficient considered).

    Returns
    -------
    float
        The factor; NaN when ``model_chi2`` is not positive.

    References
    ----------
    .. [1] van Houwelingen JC, le Cessie S. Predictive value of statistical
       models. Statistics in Medicine 1990;9(11):1303-1325.
    """
    if not np.isfinite(model_chi2) or model_chi2 <= 0:
        return float("nan")
    return float((model_chi2 - df) / model_chi2)


def shrink_model(model, *, factor: float, frame: pd.DataFrame, y: np.ndarray, method: str = "bootstrap calibration slope"):
    """Multiply a model's coefficients by ``factor`` and re-estimate its thresholds.

    Parameters
    ----------
    model : PredictionModel
        The frozen model (proportional cumulative model).
    factor : float
        Uniform shrinkage factor, in (0, 2).
    frame : DataFrame
        The derivation data the thresholds are re-estimated on.
    y : array of int
        Outcome codes 0..K-1 of ``frame``.
    method : str
        How the factor was obtained, recorded in the provenance.

    Returns
    -------
    PredictionModel
        Coefficients ``factor * beta``; thresholds from a cumulative model
        with no predictors and the shrunken linear predictor as offset; the
        parent's SHA-256, the method and the factor in the provenance.

    Notes
    -----
    Re-estimating the thresholds keeps the mean predicted risk at the
    observed one after shrinkage (Steyerberg, Clinical Prediction Models,
    2nd ed. 2019, ch. 13; recalled from memory).

    References
    ----------
    .. [1] van Houwelingen JC, le Cessie S. Predictive value of statistical
       models. Statistics in Medicine 1990;9(11):1303-1325.
    """
    from ..modelling.modelfile import PredictionModel
    from ..modelling.fitter import fit_cumulative

    if not isinstance(model, PredictionModel):
        raise RiskvetError(problem("shrink_model(model)", allowed="a PredictionModel", received=type(model).__name__))
    if not model.proportional:
        raise RiskvetError(problem("shrink_model(model)", allowed="a proportional cumulative model (one coefficient per column)", received="a non-proportional model"))
    if isinstance(factor, bool) or not (isinstance(factor, (int, float, np.floating)) and np.isfinite(factor) and 0 < factor < 2):
        raise RiskvetError(problem("shrink_model(factor=)", allowed="a finite number in (0, 2)", received=factor))
    y = np.asarray(y, dtype=np.int64)
    lp = float(factor) * model.linear_predictor(frame)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        refit = fit_cumulative(None, y, offset=lp, link=model.link, n_levels=len(model.levels))
    if not refit.converged:
        raise FitError("shrink_model: re-estimating the thresholds with the shrunken linear predictor as offset did not converge")
    provenance = {
        **dict(model.provenance),
        "parent_sha256": model.digest(),
        "update_method": "uniform shrinkage",
        "shrinkage_method": method,
        "shrinkage_factor": float(factor),
    }
    return PredictionModel(
        design=model.design,
        thresholds=np.asarray(refit.thresholds, dtype=float),
        coef=model.coef * float(factor),
        link=model.link,
        outcome=dict(model.outcome),
        provenance=provenance,
    )


def write_shrunken_model(model_path: str | Path, *, factor: float, frame: pd.DataFrame, y: np.ndarray,
                         method: str = "bootstrap calibration slope", path: str | Path | None = None) -> Path:
    """Write the uniformly shrunken version of a model file beside it.

    Parameters
    ----------
    model_path : path
        The parent model file (read and hash-checked with :func:`riskvet.modelfile.load_model`).
    factor, frame, y, method
        As in :func:`shrink_model`.
    path : path, optional
        Where to write; default ``<parent stem>_shrunk.json`` in the parent's folder.

    Returns
    -------
    Path
        The new model file (never overwrites an existing file).
    """
    from ..modelling.modelfile import load_model, save_model

    model_path = Path(model_path)
    parent = load_model(model_path)
    out = Path(path) if path is not None else model_path.with_name(f"{model_path.stem}_shrunk.json")
    return save_model(shrink_model(parent, factor=factor, frame=frame, y=y, method=method), out)


# ---------------------------------------------------------------------------
# Running tasks locally or on a cluster
# ---------------------------------------------------------------------------

_PAYLOAD_CACHE: dict[str, Any] = {}


def _cached_payload(path: str) -> Any:
    """The payload pickled at ``path``, read once per worker process."""
    if path not in _PAYLOAD_CACHE:
        _PAYLOAD_CACHE.clear()
        with open(path, "rb") as fh:
            _PAYLOAD_CACHE[path] = pickle.load(fh)
    return _PAYLOAD_CACHE[path]


def _one_thread():
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # threadpoolctl ships with scikit-learn; loky also caps threads by environment
        return contextlib.nullcontext()
    return threadpool_limits(limits=1)


def _run_batch(worker: Callable, payload: Any, batch: Sequence[Any]) -> list[Any]:
    # Every resampling item (bootstrap replicate, cross-validation fold, left-out
    # cluster, external or updating replicate) runs on the compiled loops,
    # whichever process runs it (see riskvet.modelling.kernels).
    with _one_thread(), kernels.compiled():
        return [worker(payload, item) for item in batch]


def _run_batch_from_file(worker: Callable, path: str, batch: Sequence[Any]) -> list[Any]:
    return _run_batch(worker, _cached_payload(path), batch)


class _NotebookLine:
    """Progress as one output line of a notebook, redrawn in place.

    The line is a display with an id, updated rather than appended to, so an
    executed notebook stores only its last state: one line, however many
    replicates ran.
    """

    def __init__(self, total: int, desc: str):
        import time

        from IPython.display import Pretty, display

        self._clock = time.monotonic
        self._pretty = Pretty
        self.total, self.desc, self.n = total, desc, 0
        self.start = self._last = self._clock()
        self.handle = display(Pretty(self._text()), display_id=True)

    def _text(self) -> str:
        elapsed = self._clock() - self.start
        eta = elapsed / self.n * (self.total - self.n) if self.n else float("nan")
        tail = f", about {eta:.0f} s left" if self.n and self.n < self.total else f" in {elapsed:.0f} s" if self.n else ""
        return f"{self.desc}: {self.n} of {self.total} done{tail}"

    def update(self, k: int) -> None:
        self.n += k
        now = self._clock()
        if self.handle is not None and (now - self._last >= 0.5 or self.n >= self.total):
            self._last = now
            self.handle.update(self._pretty(self._text()))

    def close(self) -> None:
        if self.handle is not None:
            self.handle.update(self._pretty(self._text()))


def _in_notebook() -> bool:
    shell = sys.modules.get("IPython")
    if shell is None or "ipykernel" not in sys.modules:
        return False
    try:
        ip = shell.get_ipython()
    except AttributeError:
        return False
    return ip is not None and getattr(ip, "kernel", None) is not None


#: Environment variable naming a file the runner reads to show a stage's progress on its terminal.
PROGRESS_ENV = "RISKVET_PROGRESS"


class _FileProgress:
    """Progress written to the file the runner watches: one line per update, ``done total seconds desc``.

    Inside ``riskvet run`` the stage kernel's own output goes to the notebook,
    which must not hold progress; the runner shows these lines on its
    terminal instead.
    """

    def __init__(self, total: int, desc: str, path: str):
        import time

        self._clock = time.monotonic
        self.total, self.desc, self.path, self.n = total, desc, path, 0
        self.start = self._clock()
        self._write()

    def _write(self) -> None:
        try:
            with open(self.path, "a", encoding="utf-8") as handle:
                handle.write(f"{self.n} {self.total} {self._clock() - self.start:.3f} {self.desc}\n")
        except OSError:
            pass  # progress is a courtesy; it never stops the work

    def update(self, k: int) -> None:
        self.n += k
        self._write()

    def close(self) -> None:
        pass


def _progress_bar(total: int, desc: str, enabled: bool):
    """Progress: to the runner's file inside ``riskvet run``; a tqdm bar with ETA on a terminal;
    one line updated in place in a notebook; about ten redraws of one line elsewhere (logs)."""
    from tqdm import tqdm

    watched = os.environ.get(PROGRESS_ENV)
    if watched:
        return _FileProgress(total, desc, watched)
    if not enabled:
        return tqdm(total=total, disable=True)
    stream = sys.stderr
    if getattr(stream, "isatty", lambda: False)():
        return tqdm(total=total, desc=desc, unit="rep", file=stream, dynamic_ncols=True)
    if _in_notebook():
        return _NotebookLine(total, desc)
    return tqdm(total=total, desc=desc, unit="rep", file=stream, ncols=80, ascii=True,
                mininterval=0.0, miniters=max(1, math.ceil(total / 10)), smoothing=0.0)


def _batches(items: Sequence[Any], n_batches: int) -> list[list[Any]]:
    n_batches = max(1, min(n_batches, len(items)))
    edges = np.linspace(0, len(items), n_batches + 1).round().astype(int)
    return [list(items[a:b]) for a, b in zip(edges[:-1], edges[1:]) if b > a]


def _execute(worker: Callable, payload: Any, items: Sequence[Any], *, n_jobs: int, scheduler: str | None,
             desc: str, progress: bool) -> Iterator[Any]:
    """Run ``worker(payload, item)`` for every item; yield results in item order.

    One process: in a loop.  ``n_jobs > 1``: joblib's loky backend, the
    payload written once to a temporary file and read once by each worker
    process.  ``scheduler`` set: joblib's dask backend on a
    ``distributed.Client(scheduler)``, the payload scattered once to every
    worker.  Every batch runs with one BLAS thread.
    """
    bar = _progress_bar(len(items), desc, progress)
    try:
        if scheduler:
            try:
                import distributed
            except ImportError:
                raise RiskvetError(problem("compute.scheduler", allowed="dask.distributed installed (pip install 'riskvet[dask]')", received=scheduler)) from None
            import joblib

            with distributed.Client(scheduler, set_as_default=False) as client:
                n_workers = max(1, sum(client.nthreads().values()))
                batches = _batches(items, 8 * n_workers)
                with joblib.parallel_backend("dask", client=client, scatter=[payload]):
                    results = joblib.Parallel(return_as="generator")(
                        joblib.delayed(_run_batch)(worker, payload, b) for b in batches
                    )
                    for out in results:
                        bar.update(len(out))
                        yield from out
        elif n_jobs == 1:
            for b in _batches(items, max(1, math.ceil(len(items) / 10))):
                out = _run_batch(worker, payload, b)
                bar.update(len(out))
                yield from out
        else:
            import joblib

            folder = tempfile.mkdtemp(prefix="riskvet-")
            try:
                path = os.path.join(folder, "payload.pickle")
                with open(path, "wb") as fh:
                    pickle.dump(payload, fh, protocol=pickle.HIGHEST_PROTOCOL)
                batches = _batches(items, 8 * n_jobs)
                with joblib.parallel_config(backend="loky", inner_max_num_threads=1):
                    results = joblib.Parallel(n_jobs=n_jobs, return_as="generator")(
                        joblib.delayed(_run_batch_from_file)(worker, path, b) for b in batches
                    )
                    for out in results:
                        bar.update(len(out))
                        yield from out
            finally:
                shutil.rmtree(folder, ignore_errors=True)
    finally:
        bar.close()


# ---------------------------------------------------------------------------
# One replicate
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Payload:
    """What every worker needs, sent once."""

    study: Any
    frame: pd.DataFrame
    y: np.ndarray
    K: int
    link: str
    weights: np.ndarray | None = None
    #: cluster code of every row, and the rows of each cluster (riskvet.modelling.folds); None to resample rows
    clusters: np.ndarray | None = None
    members: tuple[np.ndarray, np.ndarray] | None = None
    #: multiple imputation: the m completed data sets of the original data (each replicate imputes its own
    #: resample m times), and the person of every row when a cluster is a person
    completed: tuple[pd.DataFrame, ...] | None = None
    m: int = 0
    persons: np.ndarray | None = None


#: Reason of a failed replicate by the kind of error met, most specific kind first.
#: The names are stable: records, pages and tests read them.
_REASONS: tuple[tuple[type[BaseException], str], ...] = (
    (FitError, "fit error"),
    (DesignError, "design error"),
    (DataError, "data error"),
    (StudyError, "study error"),
    (RiskvetError, "input error"),
    (np.linalg.LinAlgError, "numerical error"),
    (ArithmeticError, "arithmetic error"),  # division by zero, overflow, floating-point trouble
    (LookupError, "lookup error"),  # an index or key that does not exist
    (TypeError, "type error"),
    (ValueError, "value error"),
    (RecursionError, "recursion error"),
)

#: Errors that are never a replicate's failure: they stop the whole run.
#: (KeyboardInterrupt and SystemExit are not Exceptions, so no handler here catches them.)
_PROPAGATE: tuple[type[BaseException], ...] = (MemoryError,)


def _failure_reason(exc: BaseException) -> str:
    """The stable reason name of a replicate that met ``exc`` (``unexpected error`` for any other kind)."""
    for kind, reason in _REASONS:
        if isinstance(exc, kind):
            return reason
    return "unexpected error"


def _failure_message(exc: BaseException, where: str = "") -> str:
    """The first line of the error's message (at most 300 characters), after ``where`` when given.

    The message is kept without the error's class name, so that it reads as
    words on a page; the reason (:func:`_failure_reason`) names the kind.
    """
    lines = str(exc).strip().splitlines()
    first = lines[0][:300] if lines else f"an {_failure_reason(exc)} without a message"
    return f"{where}: {first}" if where else first


def _fit_and_predict(study, frame_fit: pd.DataFrame, y_fit: np.ndarray, frame_new: pd.DataFrame, seed: int, K: int,
                     *, weights: np.ndarray | None = None, clusters: np.ndarray | None = None):
    """derive() on (frame_fit, y_fit) (with frequency ``weights``), then probabilities and LP on frame_new.

    Returns (derivation, prob, lp, warning counts) or raises _ReplicateFailed.
    """
    from ..modelling.derive import derive

    derivation, caught = _guarded_derivation(
        study, y_fit, K, weights, lambda: derive(study, frame_fit, y_fit, seed=seed, weights=weights, clusters=clusters))
    prob, lp = _guarded_predict(derivation, frame_new)
    return derivation, prob, lp, caught


def _guarded_derivation(study, y_fit: np.ndarray, K: int, weights: np.ndarray | None, run: Callable[[], Any]):
    """``run()`` (a derivation procedure), with every way it can fail turned into a _ReplicateFailed with its reason.

    Returns (derivation, warning counts).
    """
    counts = np.bincount(y_fit, weights=weights, minlength=K)
    if np.any(counts == 0):
        levels = list(study.outcome.ordered_levels) if len(study.outcome.ordered_levels) == K else list(range(K))
        empty = [levels[j] for j in np.flatnonzero(counts == 0)]
        tally = {lv: int(round(c)) for lv, c in zip(levels, counts.tolist())}
        raise _ReplicateFailed("empty outcome level", f"no one in outcome level(s) {empty} of the resample; people by level {tally}")
    caught: Counter[str] = Counter()
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        try:
            derivation = run()
        except _PROPAGATE:
            raise
        except (RiskvetError, np.linalg.LinAlgError) as exc:
            raise _ReplicateFailed(_failure_reason(exc), _failure_message(exc)) from None
        except Exception as exc:  # any other error of the procedure is this replicate's failure, not the run's
            raise _ReplicateFailed(_failure_reason(exc), _failure_message(exc, "deriving the model")) from None
    for w in seen:
        caught[w.category.__name__] += 1
    fit = derivation.fit
    if not fit.converged:
        why = next((w.split(": ", 1)[1] for w in fit.warnings if w.startswith("convergence: ")), None)
        if why is None:
            why = ("the likelihood could not be improved from its starting values" if fit.iterations == 0
                   else f"no convergence after {fit.iterations} Newton iterations")
        raise _ReplicateFailed("non-convergence", f"the model derived on this resample did not converge: {why}")
    # A Firth fit stays finite under separation (Heinze & Schemper 2002), so it is a model like any other.
    if fit.separation and getattr(fit, "estimation", "maximum likelihood") != "firth":
        raise _ReplicateFailed("separation", f"separated by {list(fit.separation)}")
    return derivation, caught


def _guarded_predict(derivation, frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_predict`, its failures a _ReplicateFailed with their reason."""
    try:
        return _predict(derivation, frame)
    except _PROPAGATE:
        raise
    except RiskvetError as exc:
        raise _ReplicateFailed("cannot predict original data", _failure_message(exc)) from None
    except Exception as exc:
        raise _ReplicateFailed(_failure_reason(exc), _failure_message(exc, "predicting with the derived model")) from None


def _predict(derivation, frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Level probabilities and the anchored linear predictor of a derived model on ``frame``.

    The linear predictor is taken minus the first threshold, F^-1(P(Y > 0)),
    so that predictions of different models (cross-validation folds) can be
    pooled on one scale; a constant shift leaves every calibration slope
    unchanged.  For a non-proportional model it is the n x (K-1) matrix of
    per-cut linear predictors, not anchored.
    """
    fit = derivation.fit
    X = derivation.design.transform(frame)
    prob = np.asarray(fit.predict_proba(X), dtype=float)
    lp = np.asarray(fit.linear_predictor(X), dtype=float)
    if lp.ndim == 2 and lp.shape[1] == 1:
        lp = lp[:, 0]
    if lp.ndim == 1:
        lp = lp - float(np.asarray(fit.thresholds, dtype=float)[0])
    return prob, lp


class _ReplicateFailed(Exception):
    def __init__(self, reason: str, message: str):
        super().__init__(message)
        self.reason = reason
        self.message = message


def _chosen_penalty(fit) -> float | None:
    """The penalty weight alpha a penalised fit chose, or None for any other estimation."""
    if getattr(fit, "estimation", None) != "penalized":
        return None
    penalty = getattr(fit, "penalty", None)
    alpha = penalty.get("alpha") if isinstance(penalty, dict) else None
    return float(alpha) if alpha is not None else float("nan")


def _replicate(payload: _Payload, item: tuple[int, np.random.SeedSequence]) -> dict[str, Any]:
    """One bootstrap replicate of the whole derivation procedure.

    Every error met on the way (other than those in ``_PROPAGATE`` and the
    interrupts) makes the replicate a counted failure with its reason.
    """
    i, child = item
    idx, sel_seed = _draw(child, len(payload.frame), payload.members)
    record: dict[str, Any] = {"replicate": i, "selection_seed": sel_seed}
    try:
        record.update(_replicate_values(payload, idx, sel_seed))
    except _ReplicateFailed as exc:
        record.update(status="failed", reason=exc.reason, message=exc.message)
    except _PROPAGATE:
        raise
    except Exception as exc:
        record.update(status="failed", reason=_failure_reason(exc), message=_failure_message(exc, "measuring the replicate model"))
    return record


def _replicate_values(payload: _Payload, idx: np.ndarray, sel_seed: int) -> dict[str, Any]:
    """The derivation on resample ``idx`` and its measures on the resample, the original data and out of bag."""
    if payload.completed is not None:
        return _replicate_values_imputed(payload, idx, sel_seed)
    n = len(payload.frame)
    w = payload.weights
    # the resample as counts: each drawn row is one weighted row, so the
    # selection's cross-validation never splits its copies over folds; with
    # frequency weights a drawn row brings all w of its people
    counts = np.bincount(idx, minlength=n)
    if w is not None:
        counts = counts * w
    derivation, prob, lp, caught = _fit_and_predict(
        payload.study, payload.frame, payload.y, payload.frame, sel_seed, payload.K, weights=counts, clusters=payload.clusters
    )
    y = payload.y
    # every measure is of people: the resample, the original data and the rows out of bag written out one per person
    boot_people, all_people = _people(n, w, idx), _people(n, w)
    lp_b = lp[boot_people] if lp.ndim == 1 else None
    boot, w1 = _measures(y[boot_people], prob[boot_people], lp_b, K=payload.K, link=payload.link)
    test, w2 = _measures(y[all_people], prob[all_people], lp[all_people] if lp.ndim == 1 else None, K=payload.K, link=payload.link)
    inbag = np.zeros(n, dtype=bool)
    inbag[idx] = True
    oob_rows = np.flatnonzero(~inbag)
    if oob_rows.size:
        oob_people = _people(n, w, oob_rows)
        oob, w3 = _measures(y[oob_people], prob[oob_people], lp[oob_people] if lp.ndim == 1 else None, K=payload.K, link=payload.link)
    else:
        oob, w3 = {k: float("nan") for k in test}, {}
    brier_row, logp_row = _row_pieces(y[oob_rows], prob[oob_rows])
    for c in (w1, w2, w3):
        caught.update({f"measure:{k}": v for k, v in c.items()})
    return dict(
        status="ok",
        terms=derivation.terms,
        boot=boot,
        test=test,
        oob=oob,
        oob_rows=oob_rows.astype(np.int32),
        brier_oob=brier_row,
        logp_oob=logp_row,
        warnings=dict(caught),
        penalty_alpha=_chosen_penalty(derivation.fit),
    )


def _imputed_measures(payload: _Payload, derivation, completed_b: Sequence[pd.DataFrame], y_b: np.ndarray,
                      oob_rows: np.ndarray) -> tuple[dict, dict, dict, np.ndarray, np.ndarray, Counter]:
    """The replicate model's measures on each completed resample, each completed original and its rows out of bag, averaged."""
    K, link = payload.K, payload.link
    boots, tests, oobs, briers, logps = [], [], [], [], []
    caught: Counter[str] = Counter()
    for j, original in enumerate(payload.completed):
        prob_b, lp_b = _guarded_predict(derivation, completed_b[j])
        prob, lp = _guarded_predict(derivation, original)
        b, w1 = _measures(y_b, prob_b, lp_b if lp_b.ndim == 1 else None, K=K, link=link)
        t, w2 = _measures(payload.y, prob, lp if lp.ndim == 1 else None, K=K, link=link)
        if oob_rows.size:
            o, w3 = _measures(payload.y[oob_rows], prob[oob_rows], lp[oob_rows] if lp.ndim == 1 else None, K=K, link=link)
        else:
            o, w3 = {k: float("nan") for k in t}, {}
        brier, logp = _row_pieces(payload.y[oob_rows], prob[oob_rows])
        boots.append(b), tests.append(t), oobs.append(o), briers.append(brier), logps.append(logp)
        for c in (w1, w2, w3):
            caught.update({f"measure:{k}": v for k, v in c.items()})
    return (average_summaries(boots), average_summaries(tests), average_summaries(oobs), np.mean(briers, axis=0),
            np.mean(logps, axis=0), caught)


def _imputed_split(study, frame: pd.DataFrame, y: np.ndarray, train: np.ndarray, test: np.ndarray, *, m: int, K: int,
                   sel_seed: int, persons: np.ndarray | None = None):
    """One split under multiple imputation (a cross-validation fold, a left-out cluster): the training rows imputed and
    the procedure run on their m completed data sets, then the held-out rows imputed on their own (outcome included,
    as new data would be) and predicted in each of theirs.  The training imputation and the selection folds draw from
    ``sel_seed``, the held-out imputation from a stream of its own.  Returns (derivation, warning counts, list of
    (probabilities, linear predictor) per held-out completed data set); failures are _ReplicateFailed."""
    from ..imputation.procedure import derive_imputed, impute_rows, missing_cell_share

    frame_t, y_t = frame.iloc[train].reset_index(drop=True), y[train]
    frame_h, y_h = frame.iloc[test].reset_index(drop=True), y[test]

    def run():
        completed = tuple(impute_rows(study, frame_t, y_t, m=m, seed=sel_seed))
        return derive_imputed(study, completed, y_t, missing_share=missing_cell_share(frame_t, study.predictors.in_analysis),
                              seed=sel_seed, persons=persons)

    derivation, caught = _guarded_derivation(study, y_t, K, None, run)
    held_seed = int(np.random.SeedSequence([sel_seed, 1]).generate_state(1)[0])
    return derivation, caught, [_guarded_predict(derivation, c) for c in impute_rows(study, frame_h, y_h, m=m, seed=held_seed)]


def _replicate_values_imputed(payload: _Payload, idx: np.ndarray, sel_seed: int) -> dict[str, Any]:
    """One replicate under multiple imputation: resample the incomplete rows, impute the resample m times, derive.

    The resample is imputed on its own, so the rows the model is tested on
    never inform the imputation of the rows it is derived from (Wahl et al.
    2016).  The replicate's seed drives both its imputations and its
    selection folds (separate generators).  Each measure is the mean over
    the completed data sets.
    """
    from ..imputation.procedure import derive_imputed, impute_rows, missing_cell_share

    study = payload.study
    frame_b = payload.frame.iloc[idx].reset_index(drop=True)
    y_b = payload.y[idx]
    persons = idx if payload.persons is None else payload.persons[idx]
    held: list[tuple[pd.DataFrame, ...]] = []

    def run():
        completed_b = tuple(impute_rows(study, frame_b, y_b, m=payload.m, seed=sel_seed))
        held.append(completed_b)
        return derive_imputed(study, completed_b, y_b, missing_share=missing_cell_share(frame_b, study.predictors.in_analysis),
                              seed=sel_seed, persons=persons)

    derivation, caught = _guarded_derivation(study, y_b, payload.K, None, run)
    inbag = np.zeros(len(payload.frame), dtype=bool)
    inbag[idx] = True
    oob_rows = np.flatnonzero(~inbag)
    boot, test, oob, brier_row, logp_row, measured = _imputed_measures(payload, derivation, held[0], y_b, oob_rows)
    caught.update(measured)
    return dict(status="ok", terms=derivation.terms, boot=boot, test=test, oob=oob, oob_rows=oob_rows.astype(np.int32),
                brier_oob=brier_row, logp_oob=logp_row, warnings=dict(caught), penalty_alpha=None)


# ---------------------------------------------------------------------------
# The public entry
# ---------------------------------------------------------------------------


#: Share of the replicates between the reported lower and upper spread limits.
#: Neither :func:`validate_internally` nor the study's ``internal_validation``
#: section has a confidence setting, so the spread is always the central 95%.
_SPREAD_SHARE = 0.95


def _spread(values: np.ndarray) -> tuple[float, float, float]:
    """SD and the central ``_SPREAD_SHARE`` (95%) of the finite replicate values.

    The limits are the empirical 2.5 and 97.5 percentiles (numpy's default
    linear interpolation).  They describe how the replicates scatter; they
    are not presented as a confidence interval of the corrected estimate.
    """
    v = values[np.isfinite(values)]
    if v.size == 0:
        return float("nan"), float("nan"), float("nan")
    sd = float(np.std(v, ddof=1)) if v.size > 1 else float("nan")
    tail = 100.0 * (1.0 - _SPREAD_SHARE) / 2.0
    lo, hi = np.percentile(v, [tail, 100.0 - tail])
    return sd, float(lo), float(hi)


def _mean(values: np.ndarray) -> float:
    v = values[np.isfinite(values)]
    return float(np.mean(v)) if v.size else float("nan")


def _outcome_info(study) -> dict[str, Any]:
    levels = list(study.outcome.ordered_levels)
    return {
        "column": study.outcome.column,
        "type": study.outcome.type,
        "levels": levels,
        "labels": {lv: study.outcome.label(lv) for lv in levels},
    }


def validate_internally(study, data, *, n_boot: int, seed: int, n_jobs: int = 1, progress: bool = True,
                        weights: np.ndarray | None = None, clusters: Any = None) -> InternalValidation:
    """Bootstrap internal validation of the study's whole derivation procedure.

    Parameters
    ----------
    study : Study
        The validated study; its derivation procedure (design, selection,
        model family) is repeated in every replicate, its
        ``internal_validation.max_failed_share`` bounds the failures, and
        ``compute.scheduler``, when set, sends the replicates to that
        dask.distributed scheduler (its workers need the same riskvet,
        numpy and scipy installed; the result is then identical to a local run).
    data : PreparedCohort, DataFrame or (DataFrame, array of int)
        The derivation cohort (``load_cohorts(study).derivation``), or its
        complete-case frame and outcome codes 0..K-1.
    n_boot : int
        Bootstrap replicates, at least 1.
    seed : int
        Seed of the replicate streams.
    n_jobs : int, default 1
        Local worker processes (-1: every core).  Ignored when the study names
        a scheduler.  The result does not depend on it.
    progress : bool, default True
        Show a progress bar on standard error.
    weights : array of int, optional
        Frequency weights of a (frame, y) pair: row i stands for
        ``weights[i]`` identical people.  A PreparedCohort read with
        ``data.weight_column`` brings its own (then leave this None).
    clusters : array-like, optional
        The cluster label of every row of a (frame, y) pair: replicates then
        draw whole clusters.  A PreparedCohort read with
        ``data.cluster_column`` brings its own (then leave this None).

    Returns
    -------
    InternalValidation

    Raises
    ------
    RiskvetError
        Bad input, a failing derivation on all data, or more failed
        replicates than ``max_failed_share`` allows (the message gives the
        counts by reason).

    Notes
    -----
    Replicate b draws n rows with replacement, runs the derivation procedure
    on them (with its own selection seed) and gives model f_b.  With
    M(f, D) a measure of model f on data D, D the original data and D_b the
    bootstrap sample:

    * apparent A = M(f, D) for the model f derived on D;
    * optimism O = mean_b [M(f_b, D_b) - M(f_b, D)], corrected A - O
      (Efron 1983; Harrell, Lee & Mark 1996; Steyerberg et al. 2001);
    * Err(1), the out-of-bag estimate: for the Brier score and the
      log-likelihood behind Nagelkerke's R2, which are sums over patients,
      the leave-one-out bootstrap of Efron & Tibshirani (1997):
      (1/n) sum_i mean_{b: i not in D_b} L(y_i, f_b(x_i)) over the rows out
      of bag at least once (R2 is then computed from that log-likelihood).
      C statistics and the ICI are not sums over patients; for them Err(1)
      is the mean over replicates of the measure on each replicate's
      out-of-bag rows (common practice);
    * .632 = 0.368 A + 0.632 Err(1); .632+ as in Efron & Tibshirani (1997,
      eqs 28-32), computed on the loss scale, with the no-information value
      gamma: 0.5 for C statistics; for the Brier score the mean loss over
      all n^2 pairs (y_i, p_j) of the apparent model, gamma = (1/n) sum_j
      sum_k [pi_k (1 - p_jk)^2 + (1 - pi_k) p_jk^2] (binary: pi (1 - p_j)^2
      + (1 - pi) p_j^2); for the scaled Brier score 1 - gamma / B_null; for
      R2 the R2 of the all-pairs log-likelihood n sum_k pi_k mean_j log
      p_jk; for the ICI of cut j, mean_j |pi_j - p_j|, the ICI of a flat
      calibration curve.  Calibration slope and intercept are not error
      rates and have no no-information value: their .632 estimates are NaN;
    * shrinkage: the mean over replicates of the calibration slope b of
      P(Y <= j) = F(a_j - b LP_b) fitted on D with the model's link, LP_b
      the linear predictor of f_b (for K = 2 this is the logistic
      calibration slope of Cox 1958).  For a non-proportional model the LP
      is a matrix and the per-cut slopes are averaged instead.  The
      heuristic factor (model chi2 - df) / model chi2 (van Houwelingen &
      le Cessie 1990) is reported beside it, with chi2 the likelihood-ratio
      chi-square of the model selected on all data and df counting every
      candidate parameter (the honest count with selection; with the final
      model's df for comparison);
    * spread: the SD and the 2.5 / 97.5 percentiles of the replicate
      values, i.e. their central 95% (there is no confidence setting for
      it); ``slope_spread`` and, for a penalised derivation,
      ``penalty_spread`` give the median and central 95% of the replicate
      calibration slopes and of the chosen penalty weights;
    * stability: an estimate is flagged ``unstable`` (still computed) when
      the smaller side of its cut holds fewer than :data:`MIN_CUT_EVENTS`
      patients (Vergouwe et al. 2005; Collins, Ogundimu & Altman 2016),
      when the central 95% of its replicate values on the original data is
      wider than :data:`UNSTABLE_SPREAD` for its kind, or when it is defined
      in fewer than :data:`MIN_DEFINED_SHARE` of the successful replicates
      (both common practice);
    * failures: any error met inside a replicate (other than running out of
      memory or an interrupt) makes it a failed replicate with its reason,
      never a crash of the run; a derived fit with separation fails unless
      it is a Firth fit.  A model with no predictors is a valid result: its
      calibration slopes are NaN with ``undefined_reason`` saying why;
    * frequency weights (row i stands for w_i identical people): the
      bootstrap resamples rows, so a drawn row brings all w_i of its people
      and a person's copies are never split between the resample and the
      rows out of bag; the resample passed to the derivation is the counts
      c_i w_i (c_i the times row i was drawn), and every measure (apparent,
      on the resample, on the original data, out of bag, the pooled
      out-of-bag losses and the no-information values) is computed on the
      rows written out one per person, so each equals the measure on the
      data written out row by row.  With every w_i = 1 the result is the
      unweighted one, bit for bit;
    * clusters (``data.cluster_column``: a person's visits, a site's
      patients): replicate b draws G of the G clusters with replacement,
      each bringing all its rows (the cluster bootstrap, Davison & Hinkley
      1997, section 3.8; Field & Welsh 2007), the rows of the clusters not
      drawn are out of bag, and when a cluster is a person
      (``data.cluster_kind: person``) the selection's cross-validation
      inside the replicate deals whole people to folds (sites and periods:
      rows, see :func:`riskvet.modelling.derive.derive`).  Clusters are numbered in
      order of first appearance, so with one row per cluster every replicate
      is the row bootstrap's, draw for draw.

    References
    ----------
    .. [1] Efron B. Estimating the error rate of a prediction rule:
       improvement on cross-validation. JASA 1983;78(382):316-331.
    .. [2] Efron B, Tibshirani R. Improvements on cross-validation: the
       .632+ bootstrap method. JASA 1997;92(438):548-560.
    .. [3] Harrell FE, Lee KL, Mark DB. Multivariable prognostic models:
       issues in developing models, evaluating assumptions and adequacy, and
       measuring and reducing errors. Statistics in Medicine
       1996;15(4):361-387.
    .. [4] Steyerberg EW, Harrell FE, Borsboom GJJM, Eijkemans MJC, Vergouwe
       Y, Habbema JDF. Internal validation of predictive models: efficiency
       of some procedures for logistic regression analysis. Journal of
       Clinical Epidemiology 2001;54(8):774-781.
    .. [5] van Houwelingen JC, le Cessie S. Predictive value of statistical
       models. Statistics in Medicine 1990;9(11):1303-1325.
    .. [6] Cox DR. Two further applications of a model for binary
       regression. Biometrika 1958;45(3-4):562-565.
    .. [7] Vergouwe Y, Steyerberg EW, Eijkemans MJC, Habbema JDF.
       Substantial effective sample sizes were required for external
       validation studies of predictive logistic regression models. Journal
       of Clinical Epidemiology 2005;58(5):475-483.
    .. [8] Collins GS, Ogundimu EO, Altman DG. Sample size considerations for
       the external validation of a multivariable prognostic model: a
       resampling study. Statistics in Medicine 2016;35(2):214-226.
    .. [9] Heinze G, Schemper M. A solution to the problem of separation in
       logistic regression. Statistics in Medicine 2002;21(16):2409-2419.
    .. [10] Davison AC, Hinkley DV. Bootstrap Methods and their Application.
       Cambridge University Press, 1997.
    .. [11] Field CA, Welsh AH. Bootstrapping clustered data. Journal of the
       Royal Statistical Society, Series B 2007;69(3):369-390.
    """
    func = "validate_internally"
    study = _check_study(study, func)
    frame, y, w = _as_weighted_data(study, data, weights, func)
    codes, cluster_kind = _as_clusters(data, clusters, len(frame), func)
    n_boot = _check_count(n_boot, "n_boot", func)
    seed = _check_seed(seed, func)
    n_jobs = _check_n_jobs(n_jobs, func)
    levels = tuple(study.outcome.ordered_levels)
    K = len(levels)
    link = study.model.link
    n = len(frame)

    imputing = _imputed_original(study, frame, y, data, w, func) if study.imputing else None
    apparent_derivation, prob, lp, trouble = _derive_on_all_data(study, frame, y, weights=w, clusters=codes, imputing=imputing)
    apparent_warnings = tuple(dict.fromkeys(f"{m.category.__name__}: {m.message}" for m in trouble))
    for m in trouble:  # statistical trouble of the model on all data is shown as well as recorded
        warnings.warn(str(m.message), m.category, stacklevel=2)
    people = _people(n, w)
    if imputing is None:
        apparent, _ = _measures(y[people], prob[people], lp[people] if lp.ndim == 1 else None, K=K, link=link)
    else:  # the measures in each completed data set, averaged; prob and lp below are the averages over them
        apparent = average_summaries([_measures(y, pj, lj if lj.ndim == 1 else None, K=K, link=link)[0] for pj, lj in zip(prob, lp)])
        prob, lp = prob.mean(axis=0), lp.mean(axis=0)

    specs = _measure_specs(levels)
    keys = [k for k, _, _ in specs]
    tally = _run_replicates(
        _Payload(study=study, frame=frame, y=y, K=K, link=link, weights=w, clusters=codes,
                 members=None if codes is None else cluster_members(codes),
                 **({} if imputing is None else {"completed": imputing["completed"], "m": len(imputing["completed"]),
                                                 "persons": imputing["persons"]})), seed=seed, n_boot=n_boot, keys=keys,
        n_jobs=n_jobs, scheduler=study.compute.scheduler, progress=progress,
    )
    max_failed = study.internal_validation.max_failed_share
    _check_failures(tally, n_boot=n_boot, max_failed=max_failed, func=func)

    arrays = {s: {k: np.asarray(v, dtype=float) for k, v in d.items()} for s, d in tally.values.items()}
    estimates = _measure_estimates(specs, arrays, tally, apparent, y, prob, K=K, people=people)
    estimates = _with_flags(estimates, y[people], K=K, n_succeeded=len(tally.ok_ids), constant_lp=_constant_lp(lp))
    slopes, source = _shrinkage_slopes(arrays["original"], proportional_lp=lp.ndim == 1, K=K, link=link)
    shrinkage = _shrinkage(slopes, source, study, apparent_derivation, K=K)
    stability = _selection_stability(study, apparent_derivation, tally.terms)
    slope_spread = _replicate_spread("calibration_slope", "Calibration slope of the replicate models on the original data",
                                     _apparent_slope(apparent, K=K, proportional_lp=lp.ndim == 1), slopes)
    apparent_alpha = _chosen_penalty(apparent_derivation.fit)
    penalty_spread = (None if apparent_alpha is None else
                      _replicate_spread("penalty_alpha", "Penalty weight chosen by the derivation procedure", apparent_alpha, tally.penalties))

    return InternalValidation(
        estimates=tuple(estimates),
        shrinkage=shrinkage,
        stability=stability,
        failures=tuple(tally.failures),
        n_boot=n_boot,
        n_succeeded=len(tally.ok_ids),
        seed=seed,
        n=int(people.size),
        n_levels=K,
        levels=levels,
        max_failed_share=float(max_failed),
        replicate_warnings=dict(sorted(tally.replicate_warnings.items())),
        apparent_warnings=apparent_warnings,
        replicate_values=_replicate_table(arrays, tally.ok_ids, keys),
        selection_seeds=tuple(tally.seeds),
        slope_spread=slope_spread,
        penalty_spread=penalty_spread,
        n_rows=None if w is None else n,
        n_clusters=None if codes is None else int(codes.max()) + 1,
        cluster_kind=cluster_kind if codes is not None else None,
        n_imputations=None if imputing is None else len(imputing["completed"]),
    )


# ---------------------------------------------------------------------------
# Steps of validate_internally
# ---------------------------------------------------------------------------


def _derive_on_all_data(study, frame: pd.DataFrame, y: np.ndarray, *, weights: np.ndarray | None = None,
                        clusters: np.ndarray | None = None, imputing: dict[str, Any] | None = None,
                        ) -> tuple[Any, np.ndarray, np.ndarray, list[warnings.WarningMessage]]:
    """The derivation procedure on all data (with its frequency ``weights``), as the derivation stage runs it.

    Returns the derivation, its probabilities and linear predictor on the
    same rows, and the statistical warnings met, which the caller issues
    again so that they point at its own caller.  Under multiple imputation
    (``imputing``) the probabilities and linear predictors are stacked, one
    per completed data set.
    """
    from ..modelling.derive import derive

    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        if imputing is None:
            options = {k: v for k, v in (("weights", weights), ("clusters", clusters)) if v is not None}
            derivation = derive(study, frame, y, **options)
            prob, lp = _predict(derivation, frame)
        else:
            from ..imputation.procedure import derive_imputed, missing_cell_share

            derivation = derive_imputed(study, imputing["completed"], y, persons=imputing["persons"],
                                        missing_share=missing_cell_share(frame, study.predictors.in_analysis))
            predicted = [_predict(derivation, c) for c in imputing["completed"]]
            prob, lp = np.stack([p for p, _ in predicted]), np.stack([q for _, q in predicted])
    return derivation, prob, lp, [w for w in seen if issubclass(w.category, RiskvetWarning)]


def _imputed_original(study, frame: pd.DataFrame, y: np.ndarray, data: Any, weights: np.ndarray | None, func: str) -> dict[str, Any]:
    """The original data imputed as the derivation stage imputes them (same m and seed, so the same model)."""
    from ..imputation.procedure import imputations_needed, impute_rows, incomplete_share

    if weights is not None:  # a study file refuses the pair; weights passed beside a (frame, y) pair are refused here
        raise RiskvetError(problem(f"{func}(weights=)", allowed="None under multiple imputation (frequency weights are not supported with it)",
                                   received="weights"))
    section = study.missing_data
    m = section.m if section.m is not None else imputations_needed(1.0 - incomplete_share(study, frame))
    completed = tuple(impute_rows(study, frame, y, m=m, seed=section.seed))
    kind = getattr(data, "cluster_kind", None)
    persons = data.clusters if kind == "person" and getattr(data, "clusters", None) is not None else None
    return {"completed": completed, "persons": None if persons is None else cluster_codes(persons)}


@dataclass(frozen=True)
class _Tally:
    """What the replicates returned, gathered in replicate order.

    ``failures`` and ``seeds`` cover every replicate, ``terms``,
    ``replicate_warnings`` and ``ok_ids`` the successful ones; ``values``
    maps sample (``bootstrap``, ``original``, ``out_of_bag``) to measure key
    to the successful replicates' values; ``brier_sum``,
    ``logp_sum`` and ``oob_count`` are per original row, summed over the
    replicates that left the row out; ``penalties`` holds the penalty weight
    each successful replicate chose (None unless its fit was penalised).
    """

    failures: tuple[ReplicateFailure, ...]
    seeds: tuple[int, ...]
    terms: tuple[tuple[str, ...], ...]
    replicate_warnings: dict[str, int]
    values: dict[str, dict[str, list[float]]]
    ok_ids: tuple[int, ...]
    brier_sum: np.ndarray
    logp_sum: np.ndarray
    oob_count: np.ndarray
    penalties: tuple[float | None, ...] = ()


def _run_replicates(payload: _Payload, *, seed: int, n_boot: int, keys: Sequence[str], n_jobs: int,
                    scheduler: str | None, progress: bool) -> _Tally:
    """Run every replicate, each on its own spawned stream, and gather the results in replicate order."""
    n = len(payload.frame)
    items = list(enumerate(np.random.SeedSequence(seed).spawn(n_boot)))
    failures: list[ReplicateFailure] = []
    seeds: list[int] = []
    terms_list: list[tuple[str, ...]] = []
    warn_counts: Counter[str] = Counter()
    values = {s: {k: [] for k in keys} for s in ("bootstrap", "original", "out_of_bag")}
    ok_ids: list[int] = []
    brier_sum = np.zeros(n)
    logp_sum = np.zeros(n)
    oob_count = np.zeros(n, dtype=np.int64)
    penalties: list[float | None] = []
    for rec in _execute(_replicate, payload, items, n_jobs=n_jobs, scheduler=scheduler,
                        desc="bootstrap", progress=progress):
        seeds.append(rec["selection_seed"])
        if rec["status"] != "ok":
            failures.append(ReplicateFailure(rec["replicate"], rec["reason"], rec["message"]))
            continue
        ok_ids.append(rec["replicate"])
        penalties.append(rec.get("penalty_alpha"))
        terms_list.append(tuple(rec["terms"]))
        warn_counts.update(rec["warnings"])
        for sample, src in (("bootstrap", "boot"), ("original", "test"), ("out_of_bag", "oob")):
            for k in keys:
                values[sample][k].append(rec[src][k])
        rows = rec["oob_rows"]
        brier_sum[rows] += rec["brier_oob"]
        logp_sum[rows] += rec["logp_oob"]
        oob_count[rows] += 1
    return _Tally(
        failures=tuple(failures), seeds=tuple(seeds), terms=tuple(terms_list), replicate_warnings=dict(warn_counts),
        values=values, ok_ids=tuple(ok_ids), brier_sum=brier_sum, logp_sum=logp_sum, oob_count=oob_count,
        penalties=tuple(penalties),
    )


def _check_failures(tally: _Tally, *, n_boot: int, max_failed: float, func: str) -> None:
    """Stop when more replicates failed than the study allows, or none succeeded."""
    failures = tally.failures
    if len(failures) > max_failed * n_boot or not tally.ok_ids:
        counts = dict(sorted(Counter(f.reason for f in failures).items()))
        raise RiskvetError(
            problem(
                f"{func}: failed replicates",
                allowed=f"at most internal_validation.max_failed_share = {max_failed:g} of {n_boot} ({math.floor(max_failed * n_boot)})",
                received=f"{len(failures)} failed, by reason {counts}; first: replicate {failures[0].replicate}: {failures[0].message}",
            )
        )


def _measure_estimates(specs: Sequence[tuple[str, str, str]], arrays: dict[str, dict[str, np.ndarray]], tally: _Tally,
                       apparent: dict[str, float], y: np.ndarray, prob: np.ndarray, *, K: int,
                       people: np.ndarray | None = None) -> list[MeasureEstimate]:
    """Optimism-corrected, .632 and .632+ estimates and the replicate spread of every measure.

    ``people`` writes the rows out one per person (frequency weights): the
    pooled out-of-bag losses and the no-information values are then of
    people, as on the data written out row by row.
    """
    if people is not None:
        y, prob = y[people], prob[people]
        tally = dataclasses.replace(tally, brier_sum=tally.brier_sum[people], logp_sum=tally.logp_sum[people],
                                    oob_count=tally.oob_count[people])
    n = y.shape[0]
    seen = tally.oob_count > 0
    props = np.bincount(y, minlength=K) / n
    present = props > 0
    ll0 = float(n * np.sum(props[present] * np.log(props[present])))
    null_brier = float(props[0] * props[1]) if K == 2 else float(1.0 - np.sum(props**2))
    err1_brier = float(np.mean(tally.brier_sum[seen] / tally.oob_count[seen])) if seen.any() else float("nan")
    err1_ll = float(n * np.mean(tally.logp_sum[seen] / tally.oob_count[seen])) if seen.any() else float("nan")

    estimates = []
    for key, label, kind in specs:
        boot = arrays["bootstrap"][key]
        test = arrays["original"][key]
        oob = arrays["out_of_bag"][key]
        both = np.isfinite(boot) & np.isfinite(test)
        diff = boot[both] - test[both]
        optimism = float(np.mean(diff)) if diff.size else float("nan")
        # Brier and log-likelihood are sums over patients, so their Err(1) pools rows out of bag
        if kind == "brier":
            err1, n_oob = err1_brier, int(seen.sum())
        elif kind == "scaled_brier":
            err1, n_oob = (1.0 - err1_brier / null_brier if null_brier > 0 else float("nan")), int(seen.sum())
        elif kind == "r2":
            err1, n_oob = _r2_from_loglik(err1_ll, ll0, n) if np.isfinite(err1_ll) else float("nan"), int(seen.sum())
        else:
            err1, n_oob = _mean(oob), int(np.isfinite(oob).sum())
        info = _KINDS[kind]
        if info["noinfo"] is None:
            gamma = est632 = est_plus = rate = float("nan")
        else:
            gamma = _no_information(key, kind, y, prob)
            est632, est_plus, rate = _estimator_632(apparent[key], err1, gamma, bool(info["higher"]))
        o_sd, o_lo, o_hi = _spread(boot - test)
        t_sd, t_lo, t_hi = _spread(test)
        estimates.append(
            MeasureEstimate(
                measure=key, label=label, kind=kind, apparent=apparent[key],
                bootstrap_mean=_mean(boot[both]), test_mean=_mean(test[both]),
                optimism=optimism, corrected=apparent[key] - optimism, oob_mean=err1,
                no_information=gamma, overfitting_rate=rate, estimate_632=est632, estimate_632plus=est_plus,
                optimism_sd=o_sd, optimism_lower=o_lo, optimism_upper=o_hi,
                test_sd=t_sd, test_lower=t_lo, test_upper=t_hi,
                n_replicates=int(both.sum()), n_oob=n_oob,
            )
        )
    return estimates


def _constant_lp(lp: np.ndarray) -> bool:
    """Whether a linear predictor (one column, or one per cut) is constant: a model with no predictors."""
    from ..measures.calibration import _is_constant

    columns = lp[:, None] if lp.ndim == 1 else lp
    return bool(columns.shape[1] == 0 or all(_is_constant(columns[:, j]) for j in range(columns.shape[1])))


def _measure_cut(key: str, K: int) -> int | None:
    """The cut a measure belongs to (every measure of a binary outcome but the overall ones belongs to cut 0)."""
    head, sep, tail = key.rpartition("_cut")
    if sep and tail.isdigit():
        return int(tail)
    if K == 2 and key in ("auc", "calibration_slope", "calibration_intercept", "ici"):
        return 0
    return None


def _undefined_reason(e: MeasureEstimate, *, constant_lp: bool) -> str:
    """Why an estimate's apparent or corrected value is NaN, in words; empty when both are numbers."""
    from ..measures.calibration import SLOPE_UNDEFINED_CONSTANT

    if np.isfinite(e.apparent) and np.isfinite(e.corrected):
        return ""
    if e.kind == "slope" and constant_lp and not np.isfinite(e.apparent):
        return f"the model derived on all data has no predictors: {SLOPE_UNDEFINED_CONSTANT}"
    if not np.isfinite(e.apparent):
        return "the measure is undefined for the model derived on all data"
    return "no replicate gave the measure both on its resample and on the original data"


def _instability(e: MeasureEstimate, smaller: int | None, *, n_succeeded: int) -> list[str]:
    """The rules of :attr:`MeasureEstimate.unstable` an estimate meets, each in words."""
    reasons = []
    if smaller is not None and smaller < MIN_CUT_EVENTS:
        reasons.append(f"{smaller} patients on the smaller side of this cut, fewer than the {MIN_CUT_EVENTS} needed to read its measures")
    width = UNSTABLE_SPREAD.get(e.kind)
    spread = e.test_upper - e.test_lower
    if width is not None and np.isfinite(spread) and spread > width:
        reasons.append(
            f"the replicate models' values on the original data spread over {spread:.3g} "
            f"({e.test_lower:.3g} to {e.test_upper:.3g}, central 95%), wider than {width:g}"
        )
    if n_succeeded and e.n_replicates < MIN_DEFINED_SHARE * n_succeeded:
        reasons.append(f"defined in {e.n_replicates} of {n_succeeded} successful replicates, fewer than {MIN_DEFINED_SHARE:.0%}")
    return reasons


def _with_flags(estimates: Sequence[MeasureEstimate], y: np.ndarray, *, K: int, n_succeeded: int,
                constant_lp: bool) -> list[MeasureEstimate]:
    """Every estimate with its cut's smaller side, its stability flag and reasons, and why it is undefined."""
    out = []
    for e in estimates:
        cut = _measure_cut(e.measure, K)
        smaller = None if cut is None or K == 2 else int(min(np.sum(y > cut), np.sum(y <= cut)))
        reasons = _instability(e, smaller, n_succeeded=n_succeeded)
        out.append(dataclasses.replace(
            e, smaller_side=smaller, unstable=bool(reasons), unstable_reason="; ".join(reasons),
            undefined_reason=_undefined_reason(e, constant_lp=constant_lp),
        ))
    return out


def _shrinkage_slopes(original: dict[str, np.ndarray], *, proportional_lp: bool, K: int, link: str) -> tuple[np.ndarray, str]:
    """Each replicate model's calibration slope on the original data, and how it was measured.

    ``original`` holds the replicate models' measures on the original data;
    ``proportional_lp`` says whether the linear predictor is one column.
    """
    if proportional_lp:
        return original["calibration_slope"], f"slope of the replicate models' linear predictor in a cumulative {link} model on the original data"
    cut_keys = [f"calibration_slope_cut{j}" for j in range(K - 1)]
    stacked = np.vstack([original[k] for k in cut_keys])
    have = np.isfinite(stacked).any(axis=0)
    slopes = np.full(stacked.shape[1], np.nan)
    slopes[have] = np.nanmean(stacked[:, have], axis=0)  # a replicate without any slope stays NaN, unwarned
    return slopes, "mean of the per-cut logistic calibration slopes on the original data (non-proportional model)"


def _apparent_slope(apparent: dict[str, float], *, K: int, proportional_lp: bool) -> float:
    """The apparent calibration slope, measured as :func:`_shrinkage_slopes` measures the replicates'."""
    if proportional_lp:
        return apparent["calibration_slope"]
    values = np.asarray([apparent[f"calibration_slope_cut{j}"] for j in range(K - 1)], dtype=float)
    return float(np.mean(values[np.isfinite(values)])) if np.isfinite(values).any() else float("nan")


def _shrinkage(slopes: np.ndarray, source: str, study, apparent_derivation, *, K: int) -> ShrinkageEstimate:
    """Bootstrap and heuristic uniform shrinkage factors from the replicate models' slopes (:func:`_shrinkage_slopes`)."""
    s_sd, s_lo, s_hi = _spread(slopes)
    # Heuristic shrinkage (van Houwelingen & le Cessie 1990), (chi2 - df) / chi2.
    # chi2 is the likelihood-ratio chi-square of the model the procedure selected
    # on all data against the null model: the fit the shrinkage would be applied to.
    # It is paired with two df.  The candidate df (every parameter the procedure
    # considered) is the honest one when variables were selected: selection picks
    # the columns that happen to fit these data best, so the selected model's chi2
    # carries the chance fit of all candidates, and charging only the final model's
    # df would overstate the factor (Steyerberg, Clinical Prediction Models, 2019,
    # recalled from memory).  The final-model df is shown for comparison; without
    # selection the two are equal.
    fit = apparent_derivation.fit
    chi2 = float(fit.lr_test.statistic)
    df_final = int(fit.lr_test.df)
    per_column = 1 if study.model.proportional else K - 1
    df_candidates = int(len(apparent_derivation.candidate_design.columns) * per_column)
    return ShrinkageEstimate(
        bootstrap=_mean(slopes), bootstrap_sd=s_sd, bootstrap_lower=s_lo, bootstrap_upper=s_hi, source=source,
        heuristic=heuristic_shrinkage(chi2, df_final), heuristic_candidates=heuristic_shrinkage(chi2, df_candidates),
        model_chi2=chi2, df_final=df_final, df_candidates=df_candidates, n_replicates=int(np.isfinite(slopes).sum()),
    )


def _selection_stability(study, apparent_derivation, terms_list: Sequence[tuple[str, ...]]) -> SelectionStability:
    """How often each candidate term, and each selected set, was chosen across the successful replicates."""
    candidates = tuple(t.name for t in apparent_derivation.candidate_design.terms)
    chosen = Counter(t for terms in terms_list for t in terms)
    set_counts: Counter[tuple[str, ...]] = Counter()
    first_seen: dict[tuple[str, ...], int] = {}
    for pos, terms in enumerate(terms_list):
        key_set = tuple(t for t in candidates if t in set(terms))
        set_counts[key_set] += 1
        first_seen.setdefault(key_set, pos)
    top = sorted(set_counts.items(), key=lambda kv: (-kv[1], first_seen[kv[0]]))[:10]
    return SelectionStability(
        candidate_terms=candidates,
        forced_terms=tuple(t for t in study.predictors.forced if t in candidates),
        apparent_terms=apparent_derivation.terms,
        times_selected={t: int(chosen.get(t, 0)) for t in candidates},
        n_replicates=len(terms_list),
        model_sizes=dict(sorted(Counter(len(t) for t in terms_list).items())),
        top_sets=tuple((t, int(c)) for t, c in top),
        method=study.selection.method,
    )


def _replicate_table(arrays: dict[str, dict[str, np.ndarray]], ok_ids: Sequence[int], keys: Sequence[str]) -> pd.DataFrame:
    """Long table of every successful replicate's measures: replicate, measure, sample, value."""
    long_rows = {
        "replicate": np.repeat(np.asarray(ok_ids, dtype=np.int64), 3 * len(keys)),
        "measure": np.tile(np.repeat(np.asarray(keys, dtype=object), 3), len(ok_ids)),
        "sample": np.tile(np.asarray(["bootstrap", "original", "out_of_bag"] * len(keys), dtype=object), len(ok_ids)),
        "value": np.asarray(
            [arrays[s][k][r] for r in range(len(ok_ids)) for k in keys for s in ("bootstrap", "original", "out_of_bag")],
            dtype=float,
        ),
    }
    replicate_values = pd.DataFrame(long_rows)
    replicate_values["measure"] = replicate_values["measure"].astype(str)
    replicate_values["sample"] = replicate_values["sample"].astype(str)
    return replicate_values
