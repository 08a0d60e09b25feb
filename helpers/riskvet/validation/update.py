"""Updating a frozen model on new data, and choosing how far to update.

The updates form a nested hierarchy (Steyerberg et al. 2004; Janssen et al.
2008), written for the cumulative model P(Y <= j | x) = F(theta_j - LP) with
the frozen model's linear predictor LP = x beta:

=============================  ======================================  ==========
method                         model on the new data                   parameters
=============================  ======================================  ==========
``original``                   F(theta_j - LP)                         0
``in_the_large``               F(theta_j + d - LP): one common shift   1
``in_the_large_thresholds``    F(a_j - LP): thresholds re-estimated    K - 1
``recalibration``              F(a_j - b LP): thresholds and a slope   K
``revision``                   F(a_j - x beta*): all re-estimated      K - 1 + p
``extension``                  F(a_j - x beta* - z gamma): new terms   K - 1 + p + q
=============================  ======================================  ==========

For a binary outcome (K = 2) the two recalibrations in the large coincide
and only ``in_the_large`` is fitted.  :func:`closed_test` chooses among the
fitted updates by the closed testing procedure of Vergouwe et al. (2017).
:func:`update_model` fits every update, runs the closed test, freezes each
update as a new :class:`~riskvet.modelfile.PredictionModel` whose provenance
names its parent and the data it was updated on, and reports performance on
the updating data before and after (optimistic: the same data chose and
fitted the update; bootstrap-corrected figures on request).

Bootstrap replicate i repeats the whole procedure on a resample drawn with
stream i of ``numpy.random.SeedSequence(seed).spawn(n_boot)``, so results do
not depend on how many workers ran them.  A replicate that cannot be
evaluated (an outcome level absent, or any error met on the way) is a
counted failure with its reason; when more than ``max_failed_share`` of them
fail, the optimism correction is not reported (NaN, with the reason stated).
"""

from __future__ import annotations

import hashlib
import math
import warnings
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats

from .._jsonable import to_jsonable
from ..modelling.links import link_parts
from ..measures.calibration import OrdinalCalibration, ordinal_calibration
from ..intake.design import DesignSpec, build_design
from ..errors import DataError, RiskvetError, RiskvetWarning, problem
from ..modelling.modelfile import PredictionModel, model_from_fit
from ..modelling.fitter import fit_cumulative
from .bootstrap import _PROPAGATE, ReplicateFailure, _failure_message, _failure_reason
from .external import _Unmeasured, run_replicates

__all__ = [
    "METHODS",
    "METHOD_LABELS",
    "METHOD_NAMES",
    "method_label",
    "method_name",
    "UpdateFit",
    "LRComparison",
    "ClosedTest",
    "UpdatePerformance",
    "UpdateResult",
    "frame_digest",
    "recalibrate_in_the_large",
    "recalibrate",
    "revise",
    "extend",
    "closed_test",
    "update_model",
]

#: Update methods from least to most extensive.
METHODS: tuple[str, ...] = (
    "original",
    "in_the_large",
    "in_the_large_thresholds",
    "recalibration",
    "revision",
    "extension",
)

#: Display name of each method, with what it re-estimates (ordered outcome).
METHOD_LABELS: dict[str, str] = {
    "original": "original model (no update)",
    "in_the_large": "recalibration in the large (one common shift of the thresholds)",
    "in_the_large_thresholds": "recalibration in the large (every threshold re-estimated, linear predictor as offset)",
    "recalibration": "logistic recalibration (thresholds and one slope on the linear predictor)",
    "revision": "model revision (all coefficients re-estimated, same design)",
    "extension": "model extension (revision plus new predictors)",
}

#: The same for a binary outcome, where the one threshold is the intercept.
_BINARY_LABELS: dict[str, str] = {
    **METHOD_LABELS,
    "in_the_large": "recalibration in the large (new intercept, linear predictor as offset)",
    "recalibration": "logistic recalibration (new intercept and one slope on the linear predictor)",
}

#: Short name of each method, for sentences, table columns and legends.
METHOD_NAMES: dict[str, str] = {
    "original": "original",
    "in_the_large": "recalibration in the large, common shift",
    "in_the_large_thresholds": "recalibration in the large, all thresholds",
    "recalibration": "logistic recalibration",
    "revision": "revision",
    "extension": "extension",
}


def method_label(method: str, *, binary: bool = False) -> str:
    """Display name of an update method with what it re-estimates (:data:`METHOD_LABELS`)."""
    return (_BINARY_LABELS if binary else METHOD_LABELS)[method]


def method_name(method: str, *, binary: bool = False) -> str:
    """Short display name of an update method (:data:`METHOD_NAMES`); binary outcomes have one recalibration in the large."""
    if binary and method == "in_the_large":
        return "recalibration in the large"
    return METHOD_NAMES[method]


def _phrase(method: str, binary: bool) -> str:
    return "the original model" if method == "original" else method_name(method, binary=binary)

_OPTIMISM_NOTE = (
    "Performance on the data used to choose and fit the update is optimistic: the same patients "
    "estimated the new parameters and are then used to judge them. Judge the updated model on "
    "new data, or read the bootstrap-corrected figures."
)

_SHIFT_TOL = 1e-12
_SHIFT_MAX_ITER = 100


# ---------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class UpdateFit:
    """One update of a frozen model, fitted on the updating data.

    Attributes
    ----------
    method : str
        One of :data:`METHODS`.
    model : PredictionModel
        The updated model (the parent itself for ``original``), with
        provenance naming the parent's digest, the method and the data.
    n_params : int
        Parameters estimated on the updating data (0 for ``original``).
    loglik : float
        Log-likelihood of the updated model on the updating data.
    parameters : dict
        The update's own parameters on the scale users read: ``shift`` (with
        ``shift_se``) for ``in_the_large``; ``thresholds`` for
        ``in_the_large_thresholds``; ``thresholds``, ``slope`` and
        ``slope_se`` for ``recalibration``; empty otherwise (read the model's
        coefficient table).
    converged : bool
        Whether the fit met its convergence criterion.
    warnings : tuple of str
        Statistical trouble met in the fit.
    """

    method: str
    model: PredictionModel = field(repr=False)
    n_params: int
    loglik: float
    parameters: Mapping[str, Any]
    converged: bool
    warnings: tuple[str, ...]

    @property
    def label(self) -> str:
        return method_label(self.method, binary=len(self.model.levels) == 2)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary; the model is given by its digest and coefficient table."""
        return to_jsonable(
            {
                "method": self.method,
                "label": self.label,
                "n_params": self.n_params,
                "loglik": self.loglik,
                "parameters": dict(self.parameters),
                "converged": self.converged,
                "warnings": list(self.warnings),
                "model_sha256": self.model.digest(),
                "coefficients": self.model.coefficient_table(),
            }
        )

    def to_frame(self) -> pd.DataFrame:
        """The updated model's thresholds and coefficients."""
        table = self.model.coefficient_table()
        table.insert(0, "method", self.method)
        return table


@dataclass(frozen=True)
class LRComparison:
    """A likelihood-ratio test of a simpler update against a more extensive one.

    Attributes
    ----------
    simpler, extensive : str
        Methods compared.
    statistic : float
        2 (loglik_extensive - loglik_simpler), at least 0.
    df : int
        Difference in estimated parameters.
    p : float
        Chi-squared upper tail; NaN when ``df`` is 0 (the two are the same model).
    significant : bool
        ``p < alpha`` (False when ``df`` is 0).
    reached : bool
        Whether the closed test reached this test (the later tests are
        computed and shown, but did not decide).
    """

    simpler: str
    extensive: str
    statistic: float
    df: int
    p: float
    significant: bool
    reached: bool

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(self.__dict__)


@dataclass(frozen=True)
class ClosedTest:
    """The closed testing procedure choosing an update.

    Attributes
    ----------
    alpha : float
        Level of every test.
    most_extensive : str
        The update every simpler one is tested against.
    tests : tuple of LRComparison
        First the most extensive update against the original, then each
        simpler update (least extensive first) against the most extensive.
    chosen : str
        The method chosen.
    reason : str
        One sentence saying why.
    """

    alpha: float
    most_extensive: str
    tests: tuple[LRComparison, ...]
    chosen: str
    reason: str

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "alpha": self.alpha,
                "most_extensive": self.most_extensive,
                "tests": [t.to_dict() for t in self.tests],
                "chosen": self.chosen,
                "reason": self.reason,
            }
        )

    def to_frame(self) -> pd.DataFrame:
        """One row per test: step, simpler, extensive, statistic, df, p, significant, reached."""
        rows = [{"step": i + 1, **t.to_dict()} for i, t in enumerate(self.tests)]
        return pd.DataFrame(rows, columns=["step", "simpler", "extensive", "statistic", "df", "p", "significant", "reached"])


@dataclass(frozen=True)
class UpdatePerformance:
    """Performance of the original and the updated models on the updating data.

    Attributes
    ----------
    table : DataFrame
        Columns ``method``, ``measure``, ``cut`` (None for whole-outcome
        measures), ``apparent`` (on the updating data: optimistic for an
        update), ``optimism`` and ``corrected`` (bootstrap, for the chosen
        method only when ``n_boot > 0``; NaN otherwise).
    n_boot : int
        Bootstrap replicates behind the correction (0: none).
    n_failed : int
        Replicates that could not be evaluated (an outcome level absent from
        the resample, or any error met while refitting, testing or measuring)
        and were left out.
    note : str
        Why the apparent figures are optimistic.
    replicate_choices : dict of str to int
        Method -> replicates (of those evaluated) in which the closed test
        chose it.  The optimism is that of the whole procedure, whichever
        update each replicate chose, so the corrected figures describe the
        procedure as much as the update chosen on all the data.
    failures : tuple of ReplicateFailure
        Every replicate that could not be evaluated, with its reason
        (``empty outcome level``, ``fit error``, ``numerical error``,
        ``arithmetic error``, ...; the names of
        :class:`riskvet.validation.bootstrap.ReplicateFailure`) and the first
        line of the message, after the step where it was met.
    max_failed_share : float
        The share of failed replicates above which the correction is not
        reported.
    correction_withheld : str
        Why ``optimism`` and ``corrected`` are NaN for every measure (more
        failed replicates than ``max_failed_share`` allows); empty when they
        are reported.
    correction_notes : dict of str to str
        Measure key (a key of ``performance_summary``) -> why that measure's
        correction is NaN although the others are reported: the measure was
        undefined in more than ``max_failed_share`` of the replicates.
    """

    table: pd.DataFrame = field(repr=False)
    n_boot: int
    n_failed: int
    note: str
    replicate_choices: Mapping[str, int] = field(default_factory=dict)
    failures: tuple[ReplicateFailure, ...] = ()
    max_failed_share: float = 0.1
    correction_withheld: str = ""
    correction_notes: Mapping[str, str] = field(default_factory=dict)

    @property
    def failure_counts(self) -> dict[str, int]:
        """Failed replicates by reason."""
        return _count_reasons(self.failures)

    def failure_frame(self) -> pd.DataFrame:
        """One row per failed replicate: ``replicate``, ``reason``, ``message``."""
        return pd.DataFrame([f.to_dict() for f in self.failures], columns=["replicate", "reason", "message"])

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({"n_boot": self.n_boot, "n_failed": self.n_failed, "note": self.note, "rows": self.table,
                            "replicate_choices": dict(self.replicate_choices),
                            "failures": [f.to_dict() for f in self.failures], "failure_counts": self.failure_counts,
                            "max_failed_share": self.max_failed_share, "correction_withheld": self.correction_withheld,
                            "correction_notes": dict(self.correction_notes)})


def _count_reasons(failures: Sequence[ReplicateFailure]) -> dict[str, int]:
    counts: dict[str, int] = {}
    for f in failures:
        counts[f.reason] = counts.get(f.reason, 0) + 1
    return dict(sorted(counts.items()))


@dataclass(frozen=True)
class UpdateResult:
    """Every update of a model on one cohort, the closed test and the performance.

    Attributes
    ----------
    cohort : str
        Label of the updating data.
    data_sha256 : str
        :func:`frame_digest` of the rows and columns used.
    n : int
        Rows used (complete in every column any update reads).
    n_dropped : int
        Rows left out because a new predictor was missing.
    parent_sha256 : str
        Digest of the frozen model that was updated.
    fits : dict of str to UpdateFit
        By method, least extensive first.
    closed_test : ClosedTest
    performance : UpdatePerformance
    calibration_before, calibration_after : OrdinalCalibration
        Calibration of the original and of the chosen model on the updating
        data (apparent; the "after" is optimistic), for the figure.
    warnings : tuple of str
        Statistical trouble from every fit, and the optimism warning.
    """

    cohort: str
    data_sha256: str
    n: int
    n_dropped: int
    parent_sha256: str
    fits: Mapping[str, UpdateFit] = field(repr=False)
    closed_test: ClosedTest
    performance: UpdatePerformance = field(repr=False)
    calibration_before: OrdinalCalibration = field(repr=False)
    calibration_after: OrdinalCalibration = field(repr=False)
    warnings: tuple[str, ...]

    @property
    def chosen(self) -> UpdateFit:
        """The fit the closed test chose."""
        return self.fits[self.closed_test.chosen]

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "cohort": self.cohort,
                "data_sha256": self.data_sha256,
                "n": self.n,
                "n_dropped": self.n_dropped,
                "parent_sha256": self.parent_sha256,
                "fits": {k: v.to_dict() for k, v in self.fits.items()},
                "closed_test": self.closed_test.to_dict(),
                "performance": self.performance.to_dict(),
                "calibration_before": self.calibration_before.to_frame(),
                "calibration_after": self.calibration_after.to_frame(),
                "warnings": list(self.warnings),
            }
        )

    def to_frame(self) -> pd.DataFrame:
        """One row per update: method, label, n_params, loglik, chosen."""
        rows = [
            {"method": m, "label": f.label, "n_params": f.n_params, "loglik": f.loglik, "chosen": m == self.closed_test.chosen}
            for m, f in self.fits.items()
        ]
        return pd.DataFrame(rows)


# ---------------------------------------------------------------------------
# Inputs
# ---------------------------------------------------------------------------


def frame_digest(frame: pd.DataFrame, y: np.ndarray, *, columns: Sequence[str]) -> str:
    """SHA-256 of the updating data: the named columns and the outcome codes.

    The columns are written as CSV text in sorted name order with 17
    significant digits for floats, then the outcome codes, so the digest
    depends on the values only (not on the index, the column order or the
    pandas version's binary layout).
    """
    cols = sorted(set(columns))
    text = frame[cols].to_csv(index=False, lineterminator="\n", float_format="%.17g")
    digest = hashlib.sha256(text.encode("utf-8"))
    digest.update(("y:" + ",".join(str(int(v)) for v in np.asarray(y))).encode("ascii"))
    return digest.hexdigest()


def _check_model(model: Any, func: str) -> PredictionModel:
    if not isinstance(model, PredictionModel):
        raise RiskvetError(problem(f"{func}(model=)", allowed="a PredictionModel (see riskvet.modelfile.load_model)", received=type(model).__name__))
    if not model.proportional:
        raise RiskvetError(
            problem(
                f"{func}(model=)",
                allowed="a proportional (one coefficient per column) or binary model; updating a model with "
                "per-cut coefficients is not implemented",
                received="a non-proportional model",
            )
        )
    return model


def _check_y(y: Any, n: int, K: int, func: str) -> np.ndarray:
    arr = np.asarray(y)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise DataError(problem(f"{func}(y=)", allowed=f"a 1-D array of {n} outcome codes (one per row of frame)", received=f"shape {arr.shape}"))
    if not np.issubdtype(arr.dtype, np.integer) and not (np.issubdtype(arr.dtype, np.floating) and np.all(arr == np.round(arr))):
        raise DataError(problem(f"{func}(y=)", allowed=f"integer codes 0..{K - 1}", received=f"dtype {arr.dtype}"))
    codes = arr.astype(np.int64)
    if codes.size and (codes.min() < 0 or codes.max() > K - 1):
        raise DataError(problem(f"{func}(y=)", allowed=f"integer codes 0..{K - 1}", received=f"values from {codes.min()} to {codes.max()}"))
    counts = np.bincount(codes, minlength=K)
    if np.any(counts == 0):
        raise DataError(problem(f"{func}(y=)", allowed=f"every outcome level 0..{K - 1} present", received=f"level counts {counts.tolist()}"))
    return codes


def _check_alpha(alpha: Any, func: str) -> float:
    if isinstance(alpha, bool) or not isinstance(alpha, (int, float, np.floating)) or not 0.0 < float(alpha) < 1.0:
        raise RiskvetError(problem(f"{func}(alpha=)", allowed="a number strictly between 0 and 1", received=alpha))
    return float(alpha)


def _check_boot_options(n_boot: Any, seed: Any, max_failed_share: Any, func: str) -> None:
    """Refuse bootstrap settings :func:`update_model` cannot use: a negative or fractional ``n_boot``, no seed for a
    bootstrap, a failure share outside 0 to 1."""
    if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 0:
        raise RiskvetError(problem(f"{func}(n_boot=)", allowed="a whole number >= 0", received=n_boot))
    if n_boot > 0 and (seed is None or isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0):
        raise RiskvetError(problem(f"{func}(seed=)", allowed="a non-negative integer when n_boot > 0", received=seed))
    if isinstance(max_failed_share, bool) or not isinstance(max_failed_share, (int, float, np.floating)) or not 0.0 <= float(max_failed_share) <= 1.0:
        raise RiskvetError(problem(f"{func}(max_failed_share=)", allowed="a share between 0 and 1", received=max_failed_share))


def _loglik(model: PredictionModel, lp: np.ndarray, y: np.ndarray) -> float:
    prob = model.proba_from_lp(lp)
    with np.errstate(divide="ignore"):
        return float(np.sum(np.log(prob[np.arange(y.shape[0]), y])))


def _provenance(parent: PredictionModel, method: str, *, cohort: str, data_sha256: str, n: int, extra: Mapping[str, Any] | None = None) -> dict[str, Any]:
    from .. import __version__

    prov = {
        "riskvet_version": __version__,
        "parent_model_sha256": parent.digest(),
        "update_method": method,
        "update_method_label": method_label(method, binary=len(parent.levels) == 2),
        "updated_on": {"cohort": cohort, "data_sha256": data_sha256, "n": int(n)},
    }
    for key in ("study_sha256", "derivation_data_sha256"):
        if key in parent.provenance:
            prov[f"parent_{key}"] = parent.provenance[key]
    if extra:
        prov.update(extra)
    return prov


def _replace(parent: PredictionModel, *, thresholds: np.ndarray, coef: np.ndarray, provenance: Mapping[str, Any], design: DesignSpec | None = None) -> PredictionModel:
    return PredictionModel(
        design=parent.design if design is None else design,
        thresholds=np.asarray(thresholds, dtype=float),
        coef=np.asarray(coef, dtype=float),
        link=parent.link,
        outcome=dict(parent.outcome),
        provenance=dict(provenance),
    )


# ---------------------------------------------------------------------------
# The updates
# ---------------------------------------------------------------------------


def _fit_common_shift(theta: np.ndarray, lp: np.ndarray, y: np.ndarray, link: str) -> tuple[float, float, float, bool]:
    """Maximum-likelihood common shift d of all thresholds: P(Y <= j) = F(theta_j + d - lp).

    Newton-Raphson on the one-parameter log-likelihood, which is concave in d
    because the three link densities are log-concave (Pratt 1981).
    """
    K = theta.size + 1
    up = y < K - 1
    lo = y > 0
    iu = np.minimum(y, K - 2)
    il = np.maximum(y - 1, 0)

    def parts(d: float):
        a = theta[iu] + d - lp
        b = theta[il] + d - lp
        Fa, Sa, fa, dfa = link_parts(link, a)
        Fb, Sb, fb, dfb = link_parts(link, b)
        Fa, fa, dfa = np.where(up, Fa, 1.0), np.where(up, fa, 0.0), np.where(up, dfa, 0.0)
        Fb, fb, dfb = np.where(lo, Fb, 0.0), np.where(lo, fb, 0.0), np.where(lo, dfb, 0.0)
        Sa, Sb = np.where(up, Sa, 0.0), np.where(lo, Sb, 1.0)
        P = np.where(lo & (b > 0.0), Sb - Sa, Fa - Fb)
        with np.errstate(divide="ignore", invalid="ignore"):
            ll = float(np.sum(np.log(P)))
            g = (fa - fb) / P
            h = (dfa - dfb) / P - g * g
        return ll, float(np.sum(g)), float(np.sum(h))

    d = 0.0
    ll, g, h = parts(d)
    converged = False
    for _ in range(_SHIFT_MAX_ITER):
        if not h < 0:
            break
        step = -g / h
        if step * g <= _SHIFT_TOL:
            converged = True
            break
        for _half in range(50):
            ll_new, g_new, h_new = parts(d + step)
            if np.isfinite(ll_new) and ll_new >= ll - 1e-12:
                break
            step /= 2.0
        d += step
        ll, g, h = ll_new, g_new, h_new
    se = float(1.0 / math.sqrt(-h)) if h < 0 else float("nan")
    return float(d), se, ll, converged


def recalibrate_in_the_large(
    model: PredictionModel,
    frame: pd.DataFrame,
    y: Any,
    *,
    thresholds: bool = False,
    cohort: str = "updating data",
) -> UpdateFit:
    """Recalibration in the large: new baseline risk, same linear predictor.

    Parameters
    ----------
    model : PredictionModel
        The frozen model (proportional or binary).
    frame : DataFrame
        The updating data, with every column the model's design reads.
    y : array of int
        Outcome codes 0..K-1; every level must occur.
    thresholds : bool, keyword-only
        False (default): one common shift d of all thresholds (one
        parameter).  True: every threshold re-estimated with the LP as an
        offset (K - 1 parameters; for a binary outcome the two coincide).
    cohort : str, keyword-only
        Label of the updating data, recorded in the provenance.

    Returns
    -------
    UpdateFit
        Method ``in_the_large`` or ``in_the_large_thresholds``.

    Notes
    -----
    Common shift: P(Y <= j | x) = F(theta_j + d - LP), d by maximum
    likelihood (Newton-Raphson; SE from the observed information).  A
    positive d raises every cumulative probability P(Y <= j), i.e. lowers
    the predicted risk of the higher levels.  Re-estimated thresholds:
    P(Y <= j | x) = F(a_j - LP), LP an offset, fitted by
    :func:`riskvet.models.fit_cumulative`.

    References
    ----------
    Steyerberg EW, Borsboom GJJM, van Houwelingen HC, Eijkemans MJC, Habbema
    JDF. Validation and updating of predictive logistic regression models: a
    study on sample size and shrinkage. Statistics in Medicine
    2004;23(16):2567-2586.

    Janssen KJM, Moons KGM, Kalkman CJ, Grobbee DE, Vergouwe Y. Updating
    methods improved the performance of a clinical prediction model in new
    patients. Journal of Clinical Epidemiology 2008;61(1):76-86.
    """
    func = "recalibrate_in_the_large"
    model = _check_model(model, func)
    K = len(model.levels)
    yy = _check_y(y, len(frame), K, func)
    lp = model.linear_predictor(frame)
    data_sha = frame_digest(frame, yy, columns=model.design.sources)
    if not thresholds or K == 2:
        d, se, ll, converged = _fit_common_shift(model.thresholds, lp, yy, model.link)
        notes = () if converged else ("convergence: the common-shift fit stopped before meeting its criterion",)
        for note in notes:
            warnings.warn(note, RiskvetWarning, stacklevel=2)
        prov = _provenance(model, "in_the_large", cohort=cohort, data_sha256=data_sha, n=yy.size, extra={"shift": d})
        updated = _replace(model, thresholds=model.thresholds + d, coef=model.coef, provenance=prov)
        return UpdateFit("in_the_large", updated, 1, ll, {"shift": d, "shift_se": se}, converged, notes)
    fit = fit_cumulative(None, yy, link=model.link, offset=lp, n_levels=K)
    new_theta = fit.thresholds.to_numpy(dtype=float)
    prov = _provenance(model, "in_the_large_thresholds", cohort=cohort, data_sha256=data_sha, n=yy.size)
    updated = _replace(model, thresholds=new_theta, coef=model.coef, provenance=prov)
    return UpdateFit(
        "in_the_large_thresholds", updated, K - 1, float(fit.loglik),
        {"thresholds": new_theta.tolist(), "thresholds_se": fit.se.to_numpy().tolist(), "change": (new_theta - model.thresholds).tolist()},
        bool(fit.converged), tuple(fit.warnings),
    )


def recalibrate(model: PredictionModel, frame: pd.DataFrame, y: Any, *, cohort: str = "updating data") -> UpdateFit:
    """Logistic recalibration: new thresholds and one slope on the linear predictor.

    Parameters
    ----------
    model, frame, y, cohort
        As in :func:`recalibrate_in_the_large`.

    Returns
    -------
    UpdateFit
        Method ``recalibration``; the updated coefficients are ``b * beta``.

    Notes
    -----
    P(Y <= j | x) = F(a_j - b LP), (a, b) by maximum likelihood with
    :func:`riskvet.models.fit_cumulative` on the single column LP.  b < 1
    shrinks the spread of the predictions, b > 1 widens it.

    References
    ----------
    Cox DR. Two further applications of a model for binary regression.
    Biometrika 1958;45(3-4):562-565.

    Steyerberg EW et al. Statistics in Medicine 2004;23(16):2567-2586 (see
    :func:`recalibrate_in_the_large`).
    """
    func = "recalibrate"
    model = _check_model(model, func)
    K = len(model.levels)
    yy = _check_y(y, len(frame), K, func)
    lp = model.linear_predictor(frame)
    fit = fit_cumulative(pd.DataFrame({"lp": lp}), yy, link=model.link, n_levels=K, start=np.r_[model.thresholds, 1.0])
    b = float(fit.coef["lp"])
    theta = fit.thresholds.to_numpy(dtype=float)
    data_sha = frame_digest(frame, yy, columns=model.design.sources)
    prov = _provenance(model, "recalibration", cohort=cohort, data_sha256=data_sha, n=yy.size, extra={"slope": b})
    updated = _replace(model, thresholds=theta, coef=b * model.coef, provenance=prov)
    return UpdateFit(
        "recalibration", updated, K, float(fit.loglik),
        {"thresholds": theta.tolist(), "slope": b, "slope_se": float(fit.se["lp"])},
        bool(fit.converged), tuple(fit.warnings),
    )


def revise(model: PredictionModel, frame: pd.DataFrame, y: Any, *, cohort: str = "updating data") -> UpdateFit:
    """Model revision: thresholds and every coefficient re-estimated, same design.

    Parameters
    ----------
    model, frame, y, cohort
        As in :func:`recalibrate_in_the_large`.

    Returns
    -------
    UpdateFit
        Method ``revision``.  The design (knots, levels) is the parent's, so
        the revised model reads the same columns in the same way.

    References
    ----------
    Steyerberg EW et al. Statistics in Medicine 2004;23(16):2567-2586.
    """
    func = "revise"
    model = _check_model(model, func)
    K = len(model.levels)
    yy = _check_y(y, len(frame), K, func)
    X = model.design.transform(frame)
    fit = fit_cumulative(X, yy, link=model.link, n_levels=K, start=np.r_[model.thresholds, model.coef])
    data_sha = frame_digest(frame, yy, columns=model.design.sources)
    prov = _provenance(model, "revision", cohort=cohort, data_sha256=data_sha, n=yy.size)
    updated = model_from_fit(fit, model.design, outcome=model.outcome, provenance=prov)
    return UpdateFit("revision", updated, fit.n_params, float(fit.loglik), {}, bool(fit.converged), tuple(fit.warnings))


def _new_design(frame: pd.DataFrame, new_predictors: Mapping[str, Any], func: str) -> DesignSpec:
    linear, splines, categorical, levels = [], {}, {}, {}
    for name, spec in new_predictors.items():
        form = getattr(spec, "form", spec if isinstance(spec, str) else None)
        if form == "linear":
            linear.append(name)
        elif form == "spline":
            splines[name] = int(spec.knots)
        elif form == "categorical":
            categorical[name] = getattr(spec, "reference", None)
            if getattr(spec, "levels", None) is not None:
                levels[name] = list(spec.levels)
        else:
            raise RiskvetError(problem(f"{func}(new_predictors[{name!r}])", allowed="a PredictorSpec or 'linear'/'categorical'", received=spec))
    return build_design(frame, linear=linear, splines=splines, categorical=categorical, levels=levels or None)


def extend(
    model: PredictionModel,
    frame: pd.DataFrame,
    y: Any,
    *,
    new_predictors: Mapping[str, Any],
    cohort: str = "updating data",
) -> UpdateFit:
    """Model extension: revision plus new predictors, whose design is learned on the updating data.

    Parameters
    ----------
    model, frame, y, cohort
        As in :func:`recalibrate_in_the_large`; ``frame`` also holds the new
        predictors, complete.
    new_predictors : mapping, keyword-only
        Name -> :class:`riskvet.study.PredictorSpec` (or ``"linear"`` /
        ``"categorical"``), as in ``updating.new_predictors``.

    Returns
    -------
    UpdateFit
        Method ``extension``; the design is the parent's terms followed by
        the new terms (spline knots and levels from ``frame``).

    References
    ----------
    Janssen KJM et al. Journal of Clinical Epidemiology 2008;61(1):76-86
    (see :func:`recalibrate_in_the_large`).
    """
    func = "extend"
    model = _check_model(model, func)
    if not new_predictors:
        raise RiskvetError(problem(f"{func}(new_predictors=)", allowed="at least one new predictor", received=dict(new_predictors)))
    clash = sorted(set(new_predictors) & set(model.design.sources))
    if clash:
        raise RiskvetError(problem(f"{func}(new_predictors=)", allowed="columns the model does not already read", received=clash))
    K = len(model.levels)
    yy = _check_y(y, len(frame), K, func)
    extra = _new_design(frame, new_predictors, func)
    design = DesignSpec(terms=model.design.terms + extra.terms)
    X = design.transform(frame)
    start = np.r_[model.thresholds, model.coef, np.zeros(len(extra.columns))]
    fit = fit_cumulative(X, yy, link=model.link, n_levels=K, start=start)
    data_sha = frame_digest(frame, yy, columns=design.sources)
    prov = _provenance(model, "extension", cohort=cohort, data_sha256=data_sha, n=yy.size, extra={"new_predictors": sorted(new_predictors)})
    updated = model_from_fit(fit, design, outcome=model.outcome, provenance=prov)
    return UpdateFit("extension", updated, fit.n_params, float(fit.loglik), {"new_columns": list(extra.columns)}, bool(fit.converged), tuple(fit.warnings))


# ---------------------------------------------------------------------------
# Closed testing
# ---------------------------------------------------------------------------


def _p_text(p: float) -> str:
    """A p-value for a sentence: ``p < 0.001`` or ``p = 0.070`` (3 decimals, no scientific notation)."""
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def _compare(simpler: UpdateFit, extensive: UpdateFit, alpha: float, reached: bool) -> LRComparison:
    df = int(extensive.n_params - simpler.n_params)
    stat = max(0.0, 2.0 * (extensive.loglik - simpler.loglik))
    p = float(stats.chi2.sf(stat, df)) if df > 0 else float("nan")
    return LRComparison(simpler.method, extensive.method, float(stat), df, p, bool(df > 0 and p < alpha), reached)


def closed_test(fits: Mapping[str, UpdateFit] | Sequence[UpdateFit], *, alpha: float = 0.05) -> ClosedTest:
    """Choose an update by the closed testing procedure of likelihood-ratio tests.

    Parameters
    ----------
    fits : mapping or sequence of UpdateFit
        The original model and the updates fitted on the same rows (at least
        ``original`` and one update).
    alpha : float, keyword-only
        Level of each test (the study's ``updating.alpha``).

    Returns
    -------
    ClosedTest

    Notes
    -----
    With the updates ordered from least to most extensive,
    M_0 (original) < M_1 < ... < M_max, each nested in the next:

    1. M_max is tested against M_0 (df = parameters of M_max).  If the test
       is not significant at ``alpha``, the original model is kept.
    2. Otherwise the simpler updates are tested against M_max in turn, least
       extensive first; the first that is not significantly worse is chosen.
    3. If every simpler update is significantly worse, M_max is chosen.

    The hypotheses "M_k fits as well as M_max" are nested: the one for a less
    extensive model implies the one for every more extensive model, so the
    intersection of any set of them is the one for its least extensive
    model.  Testing them least extensive first, and each only after the one
    before it was rejected, is therefore a closed testing procedure, which
    keeps the familywise type I error at ``alpha`` (Marcus, Peritz & Gabriel
    1976).  This is the procedure of
    Vergouwe et al. (2017) for M_0 < recalibration in the large <
    recalibration < revision; for an ordered outcome the chain has both
    recalibrations in the large (common shift, then all thresholds), and
    extension, when requested, becomes M_max.  Two updates with the same
    number of parameters are the same model (for example recalibration and
    revision of a one-column model); the simpler is then taken as not worse.

    References
    ----------
    Vergouwe Y, Nieboer D, Oostenbrink R, Debray TPA, Murray GD, Kattan MW,
    Koffijberg H, Moons KGM, Steyerberg EW. A closed testing procedure to
    select an appropriate method for updating prediction models. Statistics
    in Medicine 2017;36(28):4529-4539.

    Marcus R, Peritz E, Gabriel KR. On closed testing procedures with special
    reference to ordered analysis of variance. Biometrika 1976;63(3):655-660.
    """
    func = "closed_test"
    a = _check_alpha(alpha, func)
    items = list(fits.values()) if isinstance(fits, Mapping) else list(fits)
    if not all(isinstance(f, UpdateFit) for f in items):
        raise RiskvetError(problem(f"{func}(fits=)", allowed="UpdateFit objects", received=[type(f).__name__ for f in items]))
    by_method = {f.method: f for f in items}
    if "original" not in by_method or len(by_method) < 2:
        raise RiskvetError(problem(f"{func}(fits=)", allowed="the original model and at least one update", received=sorted(by_method)))
    return _closed_test_by(by_method, a, lambda simpler, extensive, reached: _compare(simpler, extensive, a, reached))


def _closed_test_by(by_method: Mapping[str, UpdateFit], a: float, compare: Callable[[UpdateFit, UpdateFit, bool], LRComparison]) -> ClosedTest:
    """The closed test of :func:`closed_test` with each comparison made by ``compare(simpler, extensive, reached)``
    (the likelihood-ratio test of one data set, or its pooling over imputations)."""
    ordered = [by_method[m] for m in METHODS if m in by_method]
    original, most = ordered[0], ordered[-1]
    binary = len(original.model.levels) == 2
    most_name = _phrase(most.method, binary)
    tests = [compare(original, most, True)]
    chosen: str | None = None
    if not tests[0].significant:
        chosen = "original"
        reason = (
            f"The most extensive update ({most_name}) did not fit significantly better than the original model "
            f"(LR {tests[0].statistic:.2f}, df {tests[0].df}, {_p_text(tests[0].p)}), so the original model is kept."
        )
    for simpler in ordered[1:-1]:
        t = compare(simpler, most, chosen is None)
        tests.append(t)
        if chosen is None and not t.significant:
            chosen = simpler.method
            if t.df > 0:
                name = _phrase(simpler.method, binary)
                reason = (
                    f"The original model fits significantly worse than {most_name} ({_p_text(tests[0].p)}), and "
                    f"{name} is not significantly worse than {most_name} (LR {t.statistic:.2f}, df {t.df}, "
                    f"{_p_text(t.p)}), so the simpler update is chosen."
                )
            else:
                name = _phrase(simpler.method, binary)
                reason = f"{name[0].upper() + name[1:]} and {most_name} are the same model here; the simpler description is kept."
    if chosen is None:
        chosen = most.method
        reason = (
            f"The original model and every simpler update fit significantly worse than {most_name} "
            f"(largest {_p_text(max(t.p for t in tests if t.df > 0))}), so {most_name} is chosen."
        )
    return ClosedTest(alpha=a, most_extensive=most.method, tests=tuple(tests), chosen=chosen, reason=reason)


# ---------------------------------------------------------------------------
# Performance before and after
# ---------------------------------------------------------------------------


def _summary(y: np.ndarray, prob: np.ndarray) -> dict[str, float]:
    from ..measures.summary import performance_summary

    return performance_summary(y, prob)


def _performance_table(rows: Sequence[Mapping[str, Any]]) -> pd.DataFrame:
    """The apparent performance of every update, with its optimism and corrected columns still empty."""
    table = pd.DataFrame(list(rows), columns=["method", "measure", "cut", "apparent"])
    table["cut"] = table["cut"].astype("Int64")
    table["optimism"] = np.nan
    table["corrected"] = np.nan
    return table


def _summary_rows(method: str, values: Mapping[str, float]) -> list[dict[str, Any]]:
    rows = []
    for key, value in values.items():
        if key == "n_fit_warnings":
            continue
        measure, cut = _split_key(key)
        rows.append({"method": method, "measure": measure, "cut": cut, "apparent": float(value)})
    return rows


def _split_key(key: str) -> tuple[str, int | None]:
    """``"auc_cut1"`` -> ``("auc", 1)``; keys without a cut suffix -> ``(key, None)``."""
    head, sep, tail = key.rpartition("_cut")
    if sep and tail.isdigit():
        return head, int(tail)
    return key, None


def _fit_all(model: PredictionModel, frame: pd.DataFrame, y: np.ndarray, *, new_predictors: Mapping[str, Any] | None, cohort: str) -> dict[str, UpdateFit]:
    K = len(model.levels)
    lp = model.linear_predictor(frame)
    original = UpdateFit("original", model, 0, _loglik(model, lp, y), {}, True, ())
    fits = {"original": original}
    fits["in_the_large"] = recalibrate_in_the_large(model, frame, y, cohort=cohort)
    if K > 2:
        fits["in_the_large_thresholds"] = recalibrate_in_the_large(model, frame, y, thresholds=True, cohort=cohort)
    fits["recalibration"] = recalibrate(model, frame, y, cohort=cohort)
    fits["revision"] = revise(model, frame, y, cohort=cohort)
    if new_predictors:
        fits["extension"] = extend(model, frame, y, new_predictors=new_predictors, cohort=cohort)
    return fits


class _UpdateReplicate:
    """One bootstrap replicate of the whole update procedure (every fit, the closed test), or why there is none."""

    def __init__(self, model, frame, y, new_predictors, alpha, cohort):
        self.args = (model, frame, y, new_predictors, alpha, cohort)

    def __call__(self, stream):
        """The replicate's choice and optimism; any error but ``_PROPAGATE`` makes it a counted failure."""
        try:
            return self.optimism(stream)
        except _PROPAGATE:
            raise
        except Exception as exc:  # an error of one resample is that replicate's failure, not the run's
            return _Unmeasured(_failure_reason(exc), _failure_message(exc, "resampling the updating data"))

    def optimism(self, stream):
        return _boot_replicate(*self.args, stream)


def _boot_replicate(model, frame, y, new_predictors, alpha, cohort, seed_seq):
    rng = np.random.default_rng(seed_seq)
    n = y.shape[0]
    idx = rng.integers(0, n, n)
    yb = y[idx]
    K = len(model.levels)
    counts = np.bincount(yb, minlength=K)
    if counts.min() == 0:
        empty = [model.levels[j] for j in np.flatnonzero(counts == 0)]
        tally = {str(lv): int(c) for lv, c in zip(model.levels, counts.tolist())}
        return _Unmeasured("empty outcome level", f"no one in outcome level(s) {empty} of the resample; people by level {tally}")
    fb = frame.iloc[idx].reset_index(drop=True)
    step = "refitting the updates"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        try:
            fits = _fit_all(model, fb, yb, new_predictors=new_predictors, cohort=cohort)
            step = "choosing the update"
            method = closed_test(fits, alpha=alpha).chosen
            step = "measuring the chosen update"
            chosen = fits[method].model
            apparent = _summary(yb, chosen.predict_proba(fb))
            test = _summary(y, chosen.predict_proba(frame))
        except _PROPAGATE:
            raise
        except Exception as exc:  # counted with its reason and the step that met it
            return _Unmeasured(_failure_reason(exc), _failure_message(exc, step))
    return {"chosen": method, "optimism": {k: apparent[k] - test[k] for k in apparent}}


def update_model(
    model: PredictionModel,
    frame: pd.DataFrame,
    y: Any,
    *,
    alpha: float = 0.05,
    new_predictors: Mapping[str, Any] | None = None,
    cohort: str = "updating data",
    n_boot: int = 0,
    seed: int | None = None,
    n_jobs: int = 1,
    scheduler: str | None = None,
    max_failed_share: float = 0.1,
) -> UpdateResult:
    """Fit the updating hierarchy on one cohort and choose an update by closed testing.

    Parameters
    ----------
    model : PredictionModel
        The frozen model (proportional or binary).
    frame : DataFrame
        The updating cohort (a :class:`riskvet.data.PreparedCohort` frame),
        holding the model's columns and any new predictors.
    y : array of int
        Outcome codes 0..K-1; every level must occur.
    alpha : float, keyword-only
        Level of the closed test (``updating.alpha``).
    new_predictors : mapping, optional, keyword-only
        ``updating.new_predictors``; when given, extension is fitted and is
        the most extensive update.  Rows missing a new predictor are left out
        of every update, so all are compared on the same rows.
    cohort : str, keyword-only
        Label of the updating data, recorded in every model's provenance.
    n_boot : int, keyword-only
        Bootstrap replicates for optimism-corrected performance of the chosen
        update (0, the default, skips them).  Each replicate repeats the
        whole procedure (every fit and the closed test) on a resample.
    seed : int, optional, keyword-only
        Seed of the bootstrap; replicate i draws from stream i of
        ``SeedSequence(seed).spawn(n_boot)``.  Required when ``n_boot > 0``.
    n_jobs : int, keyword-only
        Worker processes for the bootstrap (-1: every core).
    scheduler : str, optional, keyword-only
        Address of a dask.distributed scheduler (``compute.scheduler``).
    max_failed_share : float, keyword-only
        Largest share of the ``n_boot`` replicates that may fail (an outcome
        level absent from the resample, or any error met while refitting,
        testing or measuring) before the correction is withheld: above it
        ``optimism`` and ``corrected`` are NaN and
        ``performance.correction_withheld`` says why; at or below it the
        failed replicates are left out and listed in
        ``performance.failures``.  A single measure undefined in more than
        this share of the replicates loses its correction alone
        (``performance.correction_notes``).  The default, 0.1, is that of
        :func:`riskvet.validation.external.validate_cohort`.

    Returns
    -------
    UpdateResult

    Notes
    -----
    The apparent performance of an update on its own updating data is
    optimistic.  The bootstrap correction follows Harrell, Lee & Mark
    (1996): optimism = mean over replicates of (performance of the procedure's
    chosen model on the resample - its performance on the updating data),
    corrected = apparent - optimism.  The mean is over the B_ok replicates
    that could be evaluated, and is reported only when
    B - B_ok <= max_failed_share * B.

    References
    ----------
    Vergouwe Y et al. Statistics in Medicine 2017;36(28):4529-4539 (see
    :func:`closed_test`).

    Harrell FE, Lee KL, Mark DB. Multivariable prognostic models: issues in
    developing models, evaluating assumptions and adequacy, and measuring and
    reducing errors. Statistics in Medicine 1996;15(4):361-387.
    """
    func = "update_model"
    model = _check_model(model, func)
    a = _check_alpha(alpha, func)
    if not isinstance(frame, pd.DataFrame):
        raise DataError(problem(f"{func}(frame=)", allowed="a pandas DataFrame", received=type(frame).__name__))
    _check_boot_options(n_boot, seed, max_failed_share, func)
    new_predictors = dict(new_predictors or {})
    missing_cols = [c for c in new_predictors if c not in frame.columns]
    if missing_cols:
        raise DataError(problem(f"{func}(frame=)", allowed=f"the new predictors {sorted(new_predictors)}", received=f"missing columns {missing_cols}"))
    K = len(model.levels)
    y_all = np.asarray(y)
    if y_all.ndim != 1 or y_all.shape[0] != len(frame):
        raise DataError(problem(f"{func}(y=)", allowed=f"one outcome code per row of frame ({len(frame)})", received=f"shape {y_all.shape}"))
    keep = np.ones(len(frame), dtype=bool)
    for c in new_predictors:
        keep &= frame[c].notna().to_numpy()
    n_dropped = int((~keep).sum())
    frame_used = frame.loc[keep].reset_index(drop=True)
    yy = _check_y(y_all[keep], len(frame_used), K, func)
    columns = list(model.design.sources) + list(new_predictors)
    data_sha = frame_digest(frame_used, yy, columns=columns)

    fits = _fit_all(model, frame_used, yy, new_predictors=new_predictors, cohort=cohort)
    test = closed_test(fits, alpha=a)

    rows: list[dict[str, Any]] = []
    for method, fit in fits.items():
        rows += _summary_rows(method, _summary(yy, fit.model.predict_proba(frame_used)))
    table = _performance_table(rows)
    performance, boot_notes = _bootstrap_correction(
        _UpdateReplicate(model, frame_used, yy, new_predictors, a, cohort), table, chosen=test.chosen, methods=list(fits),
        n_boot=int(n_boot), seed=seed, n_jobs=n_jobs, scheduler=scheduler, max_failed_share=float(max_failed_share),
    )
    for note in boot_notes:
        warnings.warn(note, RiskvetWarning, stacklevel=2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)  # recorded on the calibration results
        before = ordinal_calibration(yy, model.predict_proba(frame_used))
        after = ordinal_calibration(yy, fits[test.chosen].model.predict_proba(frame_used))
    notes = [f"{m}: {w}" for m, f in fits.items() for w in f.warnings]
    notes += boot_notes
    notes.append(_OPTIMISM_NOTE)
    return UpdateResult(
        cohort=cohort,
        data_sha256=data_sha,
        n=int(yy.size),
        n_dropped=n_dropped,
        parent_sha256=model.digest(),
        fits=fits,
        closed_test=test,
        performance=performance,
        calibration_before=before,
        calibration_after=after,
        warnings=tuple(notes),
    )


def _bootstrap_correction(replicate: _UpdateReplicate, table: pd.DataFrame, *, chosen: str, methods: Sequence[str], n_boot: int,
                          seed: int | None, n_jobs: int, scheduler: str | None,
                          max_failed_share: float) -> tuple[UpdatePerformance, list[str]]:
    """Run the replicates and fill the chosen update's optimism and corrected values, under the failure limit.

    Returns the performance and the notes to issue (failures by reason,
    and what was withheld).
    """
    if n_boot == 0:
        return UpdatePerformance(table=table, n_boot=0, n_failed=0, note=_OPTIMISM_NOTE,
                                 max_failed_share=max_failed_share), []
    reps = run_replicates(replicate, n_boot=n_boot, seed=int(seed), n_jobs=n_jobs, scheduler=scheduler)
    failures = tuple(ReplicateFailure(i, r.reason, r.message) for i, r in enumerate(reps) if isinstance(r, _Unmeasured))
    done = [r for r in reps if not isinstance(r, _Unmeasured)]
    choices = {m: sum(1 for r in done if r["chosen"] == m) for m in methods}
    choices = {m: c for m, c in choices.items() if c}
    withheld, notes = _failure_limit(failures, n_boot=n_boot, max_failed_share=max_failed_share)
    correction_notes: dict[str, str] = {}
    if done and not withheld:
        ok = [r["optimism"] for r in done]
        allowed = max_failed_share * n_boot
        optimism: dict[str, float] = {}
        for k in ok[0]:
            values = [r[k] for r in ok]
            missing = n_boot - int(np.isfinite(values).sum())
            if missing > allowed or missing == n_boot:
                correction_notes[k] = (f"undefined in {missing} of {n_boot} resamples, more than the {max_failed_share:.0%} "
                                       "allowed (max_failed_share); its optimism correction is not reported"
                                       if missing > allowed else
                                       f"undefined in every one of the {n_boot} resamples; its optimism correction is not reported")
                notes.append(f"bootstrap: {k}: {correction_notes[k]}")
            else:
                optimism[k] = float(np.nanmean(values))
        _fill_correction(table, optimism, chosen=chosen)
    performance = UpdatePerformance(table=table, n_boot=n_boot, n_failed=len(failures), note=_OPTIMISM_NOTE, replicate_choices=choices,
                                    failures=failures, max_failed_share=max_failed_share, correction_withheld=withheld,
                                    correction_notes=correction_notes)
    return performance, notes


def _fill_correction(table: pd.DataFrame, optimism: Mapping[str, float], *, chosen: str) -> None:
    """Write the optimism and the corrected value into the chosen update's rows of ``table`` (in place)."""
    for i in np.flatnonzero((table["method"] == chosen).to_numpy()):
        m, c = table.at[i, "measure"], table.at[i, "cut"]
        key = m if pd.isna(c) else f"{m}_cut{int(c)}"
        if key in optimism:
            table.at[i, "optimism"] = optimism[key]
            table.at[i, "corrected"] = table.at[i, "apparent"] - optimism[key]


def _failure_limit(failures: Sequence[ReplicateFailure], *, n_boot: int, max_failed_share: float) -> tuple[str, list[str]]:
    """Why the correction is withheld (empty when it is not) and the notes to issue."""
    notes: list[str] = []
    if not failures:
        return "", notes
    by_reason = ", ".join(f"{c} {r}" for r, c in _count_reasons(failures).items())
    notes.append(f"bootstrap: {len(failures)} of {n_boot} replicates could not be evaluated and were left out ({by_reason})")
    if len(failures) <= max_failed_share * n_boot:
        return "", notes
    withheld = (f"{len(failures)} of {n_boot} replicates could not be evaluated, more than the {max_failed_share:.0%} "
                "allowed (max_failed_share); the optimism correction is not reported")
    notes.append(f"bootstrap: {withheld}")
    return withheld, notes
