"""Random-effects pooling of performance measures across clusters or studies.

A measure estimated in each of k clusters (centres, regions, periods of an
internal-external cross-validation, or published validations) is pooled by
the random-effects model

    y_i = mu + u_i + e_i,   u_i ~ N(0, tau^2),   e_i ~ N(0, v_i),

with v_i the within-cluster variance taken as known.  :func:`random_effects`
estimates tau^2 by DerSimonian and Laird's moment estimator or by restricted
maximum likelihood, pools with inverse-variance weights 1 / (v_i + tau^2),
and reports the confidence interval of mu (normal, or Hartung and Knapp's),
the prediction interval for the measure in a new cluster, Cochran's Q and
I^2.

Measures are pooled on a scale where their sampling distribution is near
normal and unbounded (Debray et al. 2017): the C statistic on the logit
scale (:func:`logit_c`) and the observed/expected ratio on the log scale
(:func:`log_oe`, :func:`log_oe_from_counts`); :func:`back_transform` returns
the pooled result to the measure's own scale.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import special, stats

from .._jsonable import to_jsonable
from ..errors import ConvergenceWarning, DataError, RiskvetError, problem
from ..measures._checks import _check_confidence, _frozen

__all__ = [
    "PooledEstimate",
    "PooledOnScale",
    "random_effects",
    "logit_c",
    "c_from_logit",
    "log_oe",
    "log_oe_from_counts",
    "oe_from_log",
    "back_transform",
]

METHODS = ("dl", "reml")
SCALES = ("identity", "logit", "log")

# REML iteration: stop when a Fisher-scoring step moves tau^2 by less than
# this fraction of max(tau^2, mean within variance), a scale-free criterion,
# so that rescaling the measure rescales the answer and not the stopping rule.
_REML_RTOL = 1e-12
_REML_MAX_ITER = 200
_REML_MAX_HALVINGS = 30


@dataclass(frozen=True)
class PooledEstimate:
    """A random-effects pooled estimate.

    Attributes
    ----------
    estimate : float
        Pooled mean mu on the scale the estimates were given.
    se : float
        Standard error of ``estimate`` used by the intervals: sqrt(1 / sum w_i)
        or, with ``hartung_knapp``, the Hartung-Knapp standard error.
    tau2 : float
        Between-cluster variance (>= 0).
    i2 : float
        Higgins and Thompson's I^2 = max(0, (Q - (k - 1)) / Q), in [0, 1].
    lower, upper : float
        Confidence interval of mu at ``confidence``.
    prediction_lower, prediction_upper : float
        Prediction interval for the measure in a new cluster; NaN when
        k < 3 (the t distribution on k - 2 degrees of freedom needs k >= 3).
    k : int
        Number of clusters pooled.
    q, q_p : float
        Cochran's Q and its chi-squared p-value on k - 1 degrees of freedom.
    method : str
        ``"dl"`` or ``"reml"``.
    hartung_knapp : bool
        Whether the confidence interval is Hartung and Knapp's.
    confidence : float
        Level of both intervals.
    weights : ndarray
        Relative random-effects weight of each cluster,
        w_i / sum w_j with w_i = 1 / (v_i + tau^2); sums to 1.
    estimates, variances : ndarray
        The inputs, per cluster.
    labels : tuple of str
        Cluster names (``"1"``, ``"2"``... unless given).
    iterations : int
        Fisher-scoring iterations of REML (0 for DL).
    notes : tuple of str
        Why a field is NaN (for example the prediction interval with k < 3).
    warnings : tuple of str
        Statistical trouble met (REML not converging); each also issued as a
        :class:`~riskvet.errors.ConvergenceWarning`.
    """

    estimate: float
    se: float
    tau2: float
    i2: float
    lower: float
    upper: float
    prediction_lower: float
    prediction_upper: float
    k: int
    q: float
    q_p: float
    method: str
    hartung_knapp: bool
    confidence: float
    weights: np.ndarray = field(repr=False)
    estimates: np.ndarray = field(repr=False)
    variances: np.ndarray = field(repr=False)
    labels: tuple[str, ...] = field(repr=False)
    iterations: int = 0
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        """One row per cluster, then the pooled estimate and the prediction interval.

        Columns ``row`` (cluster label, ``"pooled"`` or ``"prediction"``),
        ``estimate``, ``lower``, ``upper`` and ``weight``.  A cluster's
        interval is its own normal interval y_i +- z sqrt(v_i): the rows of a
        forest plot.
        """
        z = float(stats.norm.ppf(0.5 + self.confidence / 2.0))
        half = z * np.sqrt(self.variances)
        rows = [
            {"row": label, "estimate": y, "lower": y - h, "upper": y + h, "weight": w}
            for label, y, h, w in zip(self.labels, self.estimates.tolist(), half.tolist(), self.weights.tolist())
        ]
        rows.append({"row": "pooled", "estimate": self.estimate, "lower": self.lower, "upper": self.upper, "weight": 1.0})
        rows.append(
            {"row": "prediction", "estimate": self.estimate, "lower": self.prediction_lower, "upper": self.prediction_upper, "weight": math.nan}
        )
        return pd.DataFrame(rows)

    def summary_frame(self) -> pd.DataFrame:
        """One row: the pooled estimate, its intervals and the heterogeneity."""
        keys = ("estimate", "se", "lower", "upper", "prediction_lower", "prediction_upper", "tau2", "i2", "q", "q_p", "k", "method", "hartung_knapp", "confidence")
        return pd.DataFrame([{key: getattr(self, key) for key in keys}])

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


def _as_vector(values: Any, name: str) -> np.ndarray:
    """A finite 1-D float array of at least two values."""
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise DataError(problem(f"random_effects({name}=)", allowed="a 1-D array of numbers", received=values)) from None
    if arr.ndim != 1:
        raise DataError(problem(f"random_effects({name}=)", allowed="a 1-D array, one value per cluster", received=f"shape {arr.shape}"))
    if arr.size < 2:
        raise DataError(
            problem(f"random_effects({name}=)", allowed="at least 2 clusters (with one there is nothing to pool and no heterogeneity to estimate)", received=f"{arr.size} values")
        )
    if not np.all(np.isfinite(arr)):
        raise DataError(problem(f"random_effects({name}=)", allowed="finite numbers, no missing values", received=f"{int(np.sum(~np.isfinite(arr)))} non-finite values"))
    return arr


def _check_inputs(estimates: Any, variances: Any, method: Any, hartung_knapp: Any, confidence: Any) -> tuple[np.ndarray, np.ndarray, float]:
    y = _as_vector(estimates, "estimates")
    v = _as_vector(variances, "variances")
    if v.shape != y.shape:
        raise DataError(problem("random_effects(variances=)", allowed=f"one variance per estimate ({y.size})", received=f"{v.size} values"))
    if np.any(v <= 0):
        raise DataError(problem("random_effects(variances=)", allowed="variances > 0", received=f"values such as {v[v <= 0][:3].tolist()}"))
    if method not in METHODS:
        raise RiskvetError(problem("random_effects(method=)", allowed=" or ".join(repr(m) for m in METHODS), received=method))
    if not isinstance(hartung_knapp, (bool, np.bool_)):
        raise RiskvetError(problem("random_effects(hartung_knapp=)", allowed="True or False", received=hartung_knapp))
    return y, v, _check_confidence(confidence, "random_effects")


def _labels(labels: Any, k: int) -> tuple[str, ...]:
    if labels is None:
        return tuple(str(i + 1) for i in range(k))
    out = tuple(str(x) for x in labels)
    if len(out) != k:
        raise DataError(problem("random_effects(labels=)", allowed=f"one label per cluster ({k})", received=f"{len(out)} labels"))
    return out


def _fixed_effect(y: np.ndarray, v: np.ndarray) -> tuple[float, float]:
    """Cochran's Q and DerSimonian and Laird's truncated tau^2."""
    w = 1.0 / v
    mu = float(np.sum(w * y) / np.sum(w))
    q = float(np.sum(w * (y - mu) ** 2))
    scale = float(np.sum(w) - np.sum(w**2) / np.sum(w))
    return q, max(0.0, (q - (y.size - 1)) / scale)


def restricted_loglik(tau2: float, y: np.ndarray, v: np.ndarray) -> float:
    """Restricted log-likelihood of tau^2, up to a constant.

    Notes
    -----
    With w_i = 1 / (v_i + tau^2) and mu(tau^2) = sum w_i y_i / sum w_i,

        l_R(tau^2) = -1/2 [ sum log(v_i + tau^2) + log(sum w_i)
                            + sum w_i (y_i - mu)^2 ].
    """
    w = 1.0 / (v + tau2)
    mu = np.sum(w * y) / np.sum(w)
    return float(-0.5 * (np.sum(np.log(v + tau2)) + np.log(np.sum(w)) + np.sum(w * (y - mu) ** 2)))


def _fisher_step(tau2: float, y: np.ndarray, v: np.ndarray) -> float:
    """Fisher-scoring step of the restricted likelihood in tau^2."""
    w = 1.0 / (v + tau2)
    sw = np.sum(w)
    mu = np.sum(w * y) / sw
    score2 = np.sum(w**2 * (y - mu) ** 2) - (sw - np.sum(w**2) / sw)
    info2 = np.sum(w**2) - 2.0 * np.sum(w**3) / sw + (np.sum(w**2) / sw) ** 2
    return float(score2 / info2)


def _reml_tau2(y: np.ndarray, v: np.ndarray, start: float) -> tuple[float, int, bool]:
    """REML tau^2 by Fisher scoring from ``start``, kept >= 0, with step halving.

    Returns tau^2, the iterations used and whether the iteration converged.
    """
    tau2 = start
    current = restricted_loglik(tau2, y, v)
    scale = float(np.mean(v))
    for iteration in range(1, _REML_MAX_ITER + 1):
        step = _fisher_step(tau2, y, v)
        for _ in range(_REML_MAX_HALVINGS):
            proposal = max(0.0, tau2 + step)
            value = restricted_loglik(proposal, y, v)
            if value >= current - 1e-14 * abs(current):
                break
            step /= 2.0
        moved = abs(proposal - tau2)
        tau2, current = proposal, value
        if moved <= _REML_RTOL * max(tau2, scale):
            return tau2, iteration, True
    return tau2, _REML_MAX_ITER, False


def _prediction_interval(mu: float, se: float, tau2: float, k: int, confidence: float) -> tuple[float, float, tuple[str, ...]]:
    if k < 3:
        note = (
            f"prediction interval not computed: it uses the t distribution on k - 2 degrees of freedom, "
            f"which needs at least 3 clusters (k = {k})"
        )
        return math.nan, math.nan, (note,)
    half = float(stats.t.ppf(0.5 + confidence / 2.0, k - 2)) * math.sqrt(tau2 + se**2)
    return mu - half, mu + half, ()


def random_effects(
    estimates: Any,
    variances: Any,
    *,
    method: str = "reml",
    hartung_knapp: bool = False,
    confidence: float = 0.95,
    labels: Any = None,
) -> PooledEstimate:
    """Pool per-cluster estimates by a random-effects meta-analysis.

    Parameters
    ----------
    estimates : array_like, shape (k,)
        The measure in each cluster, on the scale to pool (see
        :func:`logit_c`, :func:`log_oe`); k >= 2, finite.
    variances : array_like, shape (k,)
        Its within-cluster variance (squared standard error); finite, > 0.
    method : {"reml", "dl"}
        Estimator of tau^2: restricted maximum likelihood or DerSimonian
        and Laird's moment estimator.
    hartung_knapp : bool
        Use Hartung and Knapp's variance and the t distribution on k - 1
        degrees of freedom for the confidence interval of mu.
    confidence : float
        Level of the confidence and prediction intervals, in (0, 1).
    labels : sequence of str, optional
        Cluster names for :meth:`PooledEstimate.to_frame`.

    Returns
    -------
    PooledEstimate

    Raises
    ------
    DataError
        Estimates or variances not 1-D, of unequal length, fewer than 2,
        not finite, or a variance <= 0.
    RiskvetError
        An unknown ``method``, a non-boolean ``hartung_knapp`` or a
        ``confidence`` outside (0, 1).

    Warns
    -----
    ConvergenceWarning
        REML did not converge (also recorded in ``warnings``).

    Notes
    -----
    With fixed-effect weights w_i = 1 / v_i and their weighted mean y_F,
    Cochran's Q = sum w_i (y_i - y_F)^2 on k - 1 degrees of freedom, and

        DL:   tau^2 = max(0, (Q - (k - 1)) / (sum w_i - sum w_i^2 / sum w_i)).

    REML maximises the restricted log-likelihood (see
    :func:`restricted_loglik`) over tau^2 >= 0 by Fisher scoring from the DL
    value: with w_i = 1 / (v_i + tau^2), W = sum w_i, mu = sum w_i y_i / W,

        tau^2 <- tau^2 + [sum w_i^2 (y_i - mu)^2 - (W - sum w_i^2 / W)]
                         / [sum w_i^2 - 2 sum w_i^3 / W + (sum w_i^2 / W)^2],

    projected onto tau^2 >= 0 and halved while the likelihood falls
    (Viechtbauer 2005).  Then, with w_i = 1 / (v_i + tau^2),

        mu = sum w_i y_i / sum w_i,   se = sqrt(1 / sum w_i),
        CI: mu +- z se,

    or, with Hartung and Knapp (2001) (also Sidik & Jonkman 2002),

        se_HK^2 = sum w_i (y_i - mu)^2 / ((k - 1) sum w_i),
        CI: mu +- t_{k-1} se_HK,

    and ``se`` is then se_HK.  The prediction interval for the measure in a
    new cluster (Riley, Higgins & Deeks 2011) is

        mu +- t_{k-2} sqrt(tau^2 + se^2),

    with the ``se`` of the confidence interval; it needs k >= 3.
    I^2 = max(0, (Q - (k - 1)) / Q) (Higgins & Thompson 2002), 0 when Q = 0;
    it is computed from Q and so does not depend on ``method``.

    References
    ----------
    DerSimonian R, Laird N. Meta-analysis in clinical trials. Controlled
    Clinical Trials 1986;7:177-188.

    Viechtbauer W. Bias and efficiency of meta-analytic variance estimators
    in the random-effects model. Journal of Educational and Behavioral
    Statistics 2005;30:261-293.

    Hartung J, Knapp G. On tests of the overall treatment effect in
    meta-analysis with normally distributed responses. Statistics in
    Medicine 2001;20:1771-1782.

    Sidik K, Jonkman JN. A simple confidence interval for meta-analysis.
    Statistics in Medicine 2002;21:3153-3159.

    Higgins JPT, Thompson SG. Quantifying heterogeneity in a meta-analysis.
    Statistics in Medicine 2002;21:1539-1558.

    Riley RD, Higgins JPT, Deeks JJ. Interpretation of random effects
    meta-analyses. BMJ 2011;342:d549.

    Debray TPA, Damen JAAG, Snell KIE, et al. A guide to systematic review
    and meta-analysis of prediction model performance. BMJ 2017;356:i6460.
    """
    y, v, confidence = _check_inputs(estimates, variances, method, hartung_knapp, confidence)
    names = _labels(labels, y.size)
    k = int(y.size)
    # Every sum runs over the clusters in one canonical order (by estimate, then variance), so the
    # result does not depend on the order the clusters were given in, to the last bit: otherwise
    # rounding in another order can stop the REML iteration one step apart.
    order = np.lexsort((v, y))
    ys, vs = y[order], v[order]
    q, tau2 = _fixed_effect(ys, vs)
    iterations, trouble = 0, ()
    if method == "reml":
        tau2, iterations, converged = _reml_tau2(ys, vs, tau2)
        if not converged:
            trouble = (f"REML estimate of tau^2 did not converge in {_REML_MAX_ITER} iterations; the last value {tau2:.6g} is reported",)
            warnings.warn(trouble[0], ConvergenceWarning, stacklevel=2)
    ws = 1.0 / (vs + tau2)
    mu = float(np.sum(ws * ys) / np.sum(ws))
    w = np.empty_like(ws)
    w[order] = ws / np.sum(ws)  # each cluster's share of the weight, in the order given
    if hartung_knapp:
        se = math.sqrt(float(np.sum(ws * (ys - mu) ** 2)) / ((k - 1) * float(np.sum(ws))))
        crit = float(stats.t.ppf(0.5 + confidence / 2.0, k - 1))
    else:
        se = math.sqrt(1.0 / float(np.sum(ws)))
        crit = float(stats.norm.ppf(0.5 + confidence / 2.0))
    pred_lower, pred_upper, notes = _prediction_interval(mu, se, tau2, k, confidence)
    return PooledEstimate(
        estimate=mu,
        se=se,
        tau2=float(tau2),
        i2=max(0.0, (q - (k - 1)) / q) if q > 0 else 0.0,
        lower=mu - crit * se,
        upper=mu + crit * se,
        prediction_lower=pred_lower,
        prediction_upper=pred_upper,
        k=k,
        q=q,
        q_p=float(stats.chi2.sf(q, k - 1)),
        method=method,
        hartung_knapp=bool(hartung_knapp),
        confidence=confidence,
        weights=_frozen(w),
        estimates=_frozen(y),
        variances=_frozen(v),
        labels=names,
        iterations=iterations,
        notes=notes,
        warnings=trouble,
    )


def _measure(values: Any, place: str, *, low: float, high: float, allowed: str) -> np.ndarray:
    """A finite float array strictly inside (low, high)."""
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise DataError(problem(place, allowed=allowed, received=values)) from None
    bad = ~np.isfinite(arr) | (arr <= low) | (arr >= high)
    if arr.ndim > 1 or arr.size == 0 or np.any(bad):
        raise DataError(problem(place, allowed=allowed, received=arr[bad][:3].tolist() if np.any(bad) else f"shape {arr.shape}"))
    return arr


def logit_c(c: Any, variance: Any) -> tuple[np.ndarray, np.ndarray]:
    """The C statistic on the logit scale, with its delta-method variance.

    Parameters
    ----------
    c : array_like
        C statistics (AUCs), strictly between 0 and 1.
    variance : array_like
        Their variances (for example DeLong's), > 0; same shape as ``c``.

    Returns
    -------
    logit : ndarray
        log(C / (1 - C)).
    logit_variance : ndarray
        variance / (C (1 - C))^2.

    Notes
    -----
    The delta method: d logit(C) / dC = 1 / (C (1 - C)), so
    var(logit C) ~ var(C) / (C (1 - C))^2.  :func:`c_from_logit` (the
    inverse logit) maps pooled values back.

    References
    ----------
    Debray TPA, Damen JAAG, Snell KIE, et al. A guide to systematic review
    and meta-analysis of prediction model performance. BMJ 2017;356:i6460.
    """
    c_arr = _measure(c, "logit_c(c=)", low=0.0, high=1.0, allowed="C statistics strictly between 0 and 1")
    var = _measure(variance, "logit_c(variance=)", low=0.0, high=math.inf, allowed="finite variances > 0")
    if var.shape != c_arr.shape:
        raise DataError(problem("logit_c(variance=)", allowed=f"one variance per C ({c_arr.size})", received=f"{var.size} values"))
    return special.logit(c_arr), var / (c_arr * (1.0 - c_arr)) ** 2


def c_from_logit(logit: Any) -> np.ndarray:
    """The inverse of :func:`logit_c`: 1 / (1 + exp(-logit))."""
    return special.expit(np.asarray(logit, dtype=float))


def log_oe(oe: Any, variance: Any) -> tuple[np.ndarray, np.ndarray]:
    """The observed/expected ratio on the log scale, with its delta-method variance.

    Parameters
    ----------
    oe : array_like
        O/E ratios (observed events over the sum of predicted risks), > 0.
    variance : array_like
        Their variances, > 0; same shape as ``oe``.

    Returns
    -------
    log : ndarray
        log(O/E).
    log_variance : ndarray
        variance / (O/E)^2.

    Notes
    -----
    Delta method: d log(x) / dx = 1 / x.  :func:`oe_from_log` (exp) maps
    pooled values back.  When only the counts are known use
    :func:`log_oe_from_counts`.

    References
    ----------
    Debray TPA, Damen JAAG, Snell KIE, et al. A guide to systematic review
    and meta-analysis of prediction model performance. BMJ 2017;356:i6460.
    """
    ratio = _measure(oe, "log_oe(oe=)", low=0.0, high=math.inf, allowed="finite O/E ratios > 0")
    var = _measure(variance, "log_oe(variance=)", low=0.0, high=math.inf, allowed="finite variances > 0")
    if var.shape != ratio.shape:
        raise DataError(problem("log_oe(variance=)", allowed=f"one variance per O/E ({ratio.size})", received=f"{var.size} values"))
    return np.log(ratio), var / ratio**2


def log_oe_from_counts(observed: Any, expected: Any, *, n: Any = None) -> tuple[np.ndarray, np.ndarray]:
    """log(O/E) from observed and expected event counts, with its variance.

    Parameters
    ----------
    observed : array_like
        Observed events O in each cluster, > 0.
    expected : array_like
        Expected events E (sum of predicted risks), > 0.
    n : array_like, optional
        Patients in each cluster; gives the binomial variance instead of the
        Poisson one.

    Returns
    -------
    log : ndarray
        log(O / E).
    log_variance : ndarray
        1 / O (Poisson), or (1 - O / n) / O (binomial) with ``n``.

    Notes
    -----
    E is treated as fixed, so var(log(O/E)) = var(log O) ~ var(O) / O^2,
    with var(O) = O (Poisson) or O (1 - O/n) (binomial).

    References
    ----------
    Debray TPA, Damen JAAG, Snell KIE, et al. A guide to systematic review
    and meta-analysis of prediction model performance. BMJ 2017;356:i6460.
    """
    o = _measure(observed, "log_oe_from_counts(observed=)", low=0.0, high=math.inf, allowed="finite event counts > 0")
    e = _measure(expected, "log_oe_from_counts(expected=)", low=0.0, high=math.inf, allowed="finite expected counts > 0")
    if e.shape != o.shape:
        raise DataError(problem("log_oe_from_counts(expected=)", allowed=f"one expected count per observed count ({o.size})", received=f"{e.size} values"))
    if n is None:
        return np.log(o / e), 1.0 / o
    size = _measure(n, "log_oe_from_counts(n=)", low=0.0, high=math.inf, allowed="finite cluster sizes > 0")
    if size.shape != o.shape or np.any(o >= size):
        raise DataError(problem("log_oe_from_counts(n=)", allowed="one size per cluster, larger than its observed events", received=size.tolist()[:3]))
    return np.log(o / e), (1.0 - o / size) / o


def oe_from_log(log: Any) -> np.ndarray:
    """The inverse of :func:`log_oe`: exp(log)."""
    return np.exp(np.asarray(log, dtype=float))


@dataclass(frozen=True)
class PooledOnScale:
    """A pooled result returned to the measure's own scale.

    Attributes
    ----------
    scale : str
        The scale pooled on: ``"logit"`` (C), ``"log"`` (O/E) or ``"identity"``.
    estimate, lower, upper, prediction_lower, prediction_upper : float
        The pooled value and its intervals, back-transformed (interval ends
        map to interval ends since the transformations are increasing).
    pooled : PooledEstimate
        The result on the pooling scale.
    """

    scale: str
    estimate: float
    lower: float
    upper: float
    prediction_lower: float
    prediction_upper: float
    pooled: PooledEstimate = field(repr=False)

    def to_frame(self) -> pd.DataFrame:
        """One row: the back-transformed estimate and intervals."""
        keys = ("scale", "estimate", "lower", "upper", "prediction_lower", "prediction_upper")
        return pd.DataFrame([{key: getattr(self, key) for key in keys}])

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


def back_transform(pooled: PooledEstimate, *, scale: str) -> PooledOnScale:
    """Return a pooled estimate and its intervals to the measure's scale.

    Parameters
    ----------
    pooled : PooledEstimate
        From :func:`random_effects` on the transformed estimates.
    scale : {"logit", "log", "identity"}
        The scale pooled on: ``"logit"`` after :func:`logit_c` (inverse
        logit back), ``"log"`` after :func:`log_oe` (exp back).

    Returns
    -------
    PooledOnScale

    Notes
    -----
    The back-transformed estimate is the median, not the mean, of the
    pooled distribution on the original scale; intervals keep their
    coverage because the transformations are monotone (Debray et al. 2017).

    References
    ----------
    Debray TPA, Damen JAAG, Snell KIE, et al. A guide to systematic review
    and meta-analysis of prediction model performance. BMJ 2017;356:i6460.
    """
    if not isinstance(pooled, PooledEstimate):
        raise RiskvetError(problem("back_transform(pooled=)", allowed="a PooledEstimate from random_effects", received=type(pooled).__name__))
    if scale not in SCALES:
        raise RiskvetError(problem("back_transform(scale=)", allowed=" or ".join(repr(s) for s in SCALES), received=scale))
    inverse = {"logit": c_from_logit, "log": oe_from_log, "identity": lambda x: np.asarray(x, dtype=float)}[scale]
    values = inverse([pooled.estimate, pooled.lower, pooled.upper, pooled.prediction_lower, pooled.prediction_upper])
    estimate, lower, upper, p_lower, p_upper = (float(x) for x in values)
    return PooledOnScale(scale=scale, estimate=estimate, lower=lower, upper=upper, prediction_lower=p_lower, prediction_upper=p_upper, pooled=pooled)
