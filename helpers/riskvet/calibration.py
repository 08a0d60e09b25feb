"""Calibration of predicted probabilities: recalibration regressions, smoothed curve, grouped table.

For a binary outcome (or one cut Y > j of an ordered outcome, see
:func:`riskvet.discrimination.dichotomise`) :func:`calibration` reports

* calibration-in-the-large a in logit P(y = 1) = a + offset(logit prob) and
  the calibration slope b in logit P(y = 1) = a' + b logit prob (Cox 1958),
  both fitted by maximum likelihood with the package's cumulative-model
  fitter (:func:`riskvet.models.fit_cumulative` with K = 2);
* the observed/expected ratio with a log-scale interval;
* a smoothed calibration curve with a pointwise band, and the integrated
  calibration index with E50, E90 and Emax (Austin & Steyerberg 2019);
* a table by quantile groups of prob, and the Hosmer–Lemeshow test.

:func:`ordinal_calibration` repeats this for every cut of an ordered
outcome and adds the ordinal Hosmer–Lemeshow test of Fagerland & Hosmer
(2013).

The smoother
------------
Local linear regression of y on prob with tricube weights over the nearest
``frac * n`` predictions (frac = 0.75 by default), with no robustness
iterations: the robustness reweighting of lowess treats the large residuals
that a 0/1 outcome always has as outliers and would bias the curve.  It is
evaluated at about 100 points (50 evenly spaced over the range of prob and
50 at its quantiles) and linearly interpolated in between, which is how the
per-patient values behind the ICI are obtained.  At the evaluation points
the curve equals ``statsmodels.nonparametric.lowess(y, prob, frac=frac,
it=0, xvals=points)``.  The band is pointwise: the smoother is linear in y,
s(x0) = sum_j l_j(x0) y_j, so Var s(x0) = sum_j l_j(x0)^2 pi_j (1 - pi_j),
estimated with pi_j = s(prob_j); the band is s +/- z SE clipped to [0, 1].
It treats the predictions as fixed and ignores smoothing bias.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import special, stats

from .decision import _proportion_interval
from .discrimination import (
    _as_binary,
    _as_outcome,
    _as_prob_matrix,
    _as_prob_vector,
    _check_confidence,
    _cut_probs,
    _fields_dict,
    _frozen,
    _require_two_classes,
    _z,
)
from .errors import RiskvetError, RiskvetWarning, problem

__all__ = ["CalibrationResult", "OrdinalCalibration", "calibration", "ordinal_calibration"]

#: Predictions are clipped to [_EPS, 1 - _EPS] before taking logits.
_EPS = 1e-10
#: Default share of the data in each local regression of the smoother.
DEFAULT_FRAC = 0.75
_N_EVEN = 50
_N_QUANTILE = 50
_N_HIST_BINS = 40


# ---------------------------------------------------------------------------
# Recalibration regressions
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Recalibration:
    citl: float
    citl_se: float
    intercept: float
    slope: float
    intercept_se: float
    slope_se: float
    notes: tuple[str, ...]


def _recalibrate(y: np.ndarray, lp: np.ndarray) -> _Recalibration:
    """Both recalibration regressions by the package's cumulative-model fitter (K = 2).

    :func:`riskvet.models.fit_cumulative` states P(Y <= 0) = expit(theta - x beta
    - offset), so P(Y = 1) = expit(-theta + x beta + offset): the intercept of
    the recalibration model is -theta, with the same SE.  Trouble met by the
    fitter (separation, non-convergence) is warned by it and recorded here.
    """
    from .models import fit_cumulative  # deferred: keeps importing the metrics light

    large = fit_cumulative(None, y, offset=lp)
    slope = fit_cumulative(lp[:, None], y)
    notes = tuple(f"calibration-in-the-large fit: {m}" for m in large.warnings) + tuple(f"calibration slope fit: {m}" for m in slope.warnings)
    return _Recalibration(
        citl=float(-large.thresholds.iloc[0]),
        citl_se=float(large.se.iloc[0]),
        intercept=float(-slope.thresholds.iloc[0]),
        slope=float(slope.coef.iloc[0]),
        intercept_se=float(slope.se.iloc[0]),
        slope_se=float(slope.se.iloc[1]),
        notes=notes,
    )


# ---------------------------------------------------------------------------
# Smoother
# ---------------------------------------------------------------------------


def _evaluation_points(p_sorted: np.ndarray) -> np.ndarray:
    lo, hi = float(p_sorted[0]), float(p_sorted[-1])
    even = np.linspace(lo, hi, _N_EVEN)
    quant = np.quantile(p_sorted, np.linspace(0.0, 1.0, _N_QUANTILE))
    return np.unique(np.r_[even, quant])


def _knn_radius(x_sorted: np.ndarray, points: np.ndarray, k: int) -> np.ndarray:
    """Distance from each point to its k-th nearest x (x sorted), by bisection on the window start."""
    n = x_sorted.shape[0]
    lo = np.zeros(points.shape[0], dtype=np.int64)
    hi = np.full(points.shape[0], n - k, dtype=np.int64)
    # The window [l, l+k) is best at the smallest l with x[l+k-1] - x0 >= x0 - x[l];
    # the left side decreases and the right side increases with l.
    active = lo < hi
    while np.any(active):
        mid = (lo + hi) // 2
        right_ok = x_sorted[mid + k - 1] - points >= points - x_sorted[mid]
        hi = np.where(active & right_ok, mid, hi)
        lo = np.where(active & ~right_ok, mid + 1, lo)
        active = lo < hi
    start = lo
    left = np.maximum(points - x_sorted[start], x_sorted[start + k - 1] - points)
    # the window one to the left can be as good when the best start is the bisection result
    prev = np.maximum(start - 1, 0)
    left_prev = np.maximum(points - x_sorted[prev], x_sorted[prev + k - 1] - points)
    return np.minimum(left, left_prev)


# Evaluation points are processed in blocks through two preallocated work
# arrays: a fresh points x patients temporary per operation costs more in
# first-touch page faults than the arithmetic itself.
_BLOCK = 32


def _local_linear(
    x_sorted: np.ndarray, y_sorted: np.ndarray, points: np.ndarray, frac: float, variance: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray | None]:
    """Local linear tricube smoother at ``points``; with ``variance`` also its pointwise SE.

    The fit at x0 is sum_j l_j y_j with l_j = w_j (1 + (x0 - xbar)(x_j - xbar) / S),
    w tricube weights (1 - (d_j / r)^3)^3 normalised to sum 1, r the distance to
    the k-th nearest x, k = floor(frac n), xbar and S the weighted mean and sum of
    squared deviations of x (S floored at 1e-12).  A zero radius (more than k
    predictions tied at x0) leaves weight only on the ties.
    """
    n = x_sorted.shape[0]
    k = min(max(int(frac * n + 1e-10), 2), n)
    inv_radius = 1.0 / np.maximum(_knn_radius(x_sorted, points, k), 1e-300)
    xx = x_sorted * x_sorted
    xy = x_sorted * y_sorted
    fitted = np.empty(points.shape[0])
    se = None if variance is None else np.empty(points.shape[0])
    block = min(_BLOCK, points.shape[0])
    work_u = np.empty((block, n))
    work_t = np.empty((block, n))
    for b in range(0, points.shape[0], block):
        pts = points[b : b + block]
        m = pts.shape[0]
        u, w = work_u[:m], work_t[:m]
        np.subtract(pts[:, None], x_sorted[None, :], out=u)
        np.abs(u, out=u)
        with np.errstate(over="ignore"):
            np.multiply(u, inv_radius[b : b + m, None], out=u)
        np.minimum(u, 1.0, out=u)
        np.multiply(u, u, out=w)
        np.multiply(w, u, out=w)
        np.subtract(1.0, w, out=w)
        np.multiply(w, w, out=u)
        np.multiply(u, w, out=w)  # w = (1 - u^3)^3
        sw = w.sum(axis=1)
        xbar = (w @ x_sorted) / sw
        sqdev = np.maximum((w @ xx) / sw - xbar * xbar, 1e-12)
        ybar = (w @ y_sorted) / sw
        cov = (w @ xy) / sw - xbar * ybar
        slope_term = (pts - xbar) / sqdev
        fitted[b : b + m] = ybar + slope_term * cov
        if variance is not None and se is not None:
            # l = (w / sw) * (1 + slope_term * (x - xbar)), built in the free work array
            np.subtract(x_sorted[None, :], xbar[:, None], out=u)
            np.multiply(u, slope_term[:, None], out=u)
            np.add(u, 1.0, out=u)
            np.multiply(u, w, out=u)
            np.multiply(u, (1.0 / sw)[:, None], out=u)
            np.multiply(u, u, out=u)
            se[b : b + m] = np.sqrt(u @ variance)
    return fitted, se


@dataclass(frozen=True)
class _Smooth:
    points: np.ndarray
    fitted: np.ndarray
    se: np.ndarray | None
    per_patient: np.ndarray


def _smooth(y_sorted: np.ndarray, p_sorted: np.ndarray, frac: float, *, with_se: bool) -> _Smooth:
    points = _evaluation_points(p_sorted)
    fitted, _ = _local_linear(p_sorted, y_sorted, points, frac)
    per_patient = np.interp(p_sorted, points, fitted)
    se = None
    if with_se:
        pi = np.clip(per_patient, 0.0, 1.0)
        _, se = _local_linear(p_sorted, y_sorted, points, frac, variance=pi * (1.0 - pi))
    return _Smooth(points, fitted, se, per_patient)


# ---------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class CalibrationResult:
    """Calibration of event probabilities against a binary outcome (or one cut).

    Attributes
    ----------
    calibration_in_the_large, calibration_in_the_large_se : float
        a in logit P(y = 1) = a + offset(logit prob), and its SE.  0 is ideal;
        a > 0 means predictions too low on average.
    calibration_in_the_large_lower, calibration_in_the_large_upper : float
        Wald limits.
    slope, slope_se, slope_lower, slope_upper : float
        b in logit P(y = 1) = a' + b logit prob, SE, Wald limits.  1 is
        ideal; b < 1 means predictions too extreme (typical of overfitting).
    slope_intercept, slope_intercept_se : float
        a' of the same regression.
    mean_observed, mean_predicted : float
        Event proportion and mean prediction.
    oe_ratio, oe_lower, oe_upper : float
        sum(y) / sum(prob) with limits exp(ln(O/E) +/- z SE), SE(ln O/E) =
        sqrt((1 - O/n) / O).
    ici, e50, e90, emax : float
        Mean, median, 90th percentile and maximum of |s(prob_i) - prob_i|
        over patients, s the smoothed curve.
    curve_predicted, curve_observed : ndarray
        The smoothed curve at its evaluation points.
    curve_lower, curve_upper : ndarray
        Pointwise confidence band of the curve (see module Notes).
    frac : float
        Share of the data in each local regression of the smoother.
    group_n, group_events, group_observed, group_observed_lower,
    group_observed_upper, group_mean_predicted, group_min_predicted,
    group_max_predicted : ndarray
        Table by quantile groups of prob: patients, events, event
        proportion with Wilson limits, mean/min/max prediction.
    hosmer_lemeshow, hosmer_lemeshow_df, hosmer_lemeshow_pvalue : float
        Statistic sum_g (O_g - E_g)^2 / (E_g (1 - E_g / n_g)), its degrees of
        freedom and chi-square p-value.
    n_groups : int
        Non-empty groups (fewer than asked when predictions are tied).
    histogram_edges : ndarray
        Bin edges for the distribution of predictions.
    histogram_events, histogram_nonevents : ndarray
        Counts of events / non-events in each bin.
    development : bool
        Whether the data are the model's development data (changes the
        Hosmer–Lemeshow df).
    confidence : float
        Confidence level of all intervals.
    n, n_events : int
        Patients and events.
    cut : int or None
        For an ordered outcome, the cut j (event Y > j).
    warnings : tuple of str
        Statistical warnings met (also issued as warnings).
    """

    calibration_in_the_large: float
    calibration_in_the_large_se: float
    calibration_in_the_large_lower: float
    calibration_in_the_large_upper: float
    slope: float
    slope_se: float
    slope_lower: float
    slope_upper: float
    slope_intercept: float
    slope_intercept_se: float
    mean_observed: float
    mean_predicted: float
    oe_ratio: float
    oe_lower: float
    oe_upper: float
    ici: float
    e50: float
    e90: float
    emax: float
    curve_predicted: np.ndarray
    curve_observed: np.ndarray
    curve_lower: np.ndarray
    curve_upper: np.ndarray
    frac: float
    group_n: np.ndarray
    group_events: np.ndarray
    group_observed: np.ndarray
    group_observed_lower: np.ndarray
    group_observed_upper: np.ndarray
    group_mean_predicted: np.ndarray
    group_min_predicted: np.ndarray
    group_max_predicted: np.ndarray
    hosmer_lemeshow: float
    hosmer_lemeshow_df: float
    hosmer_lemeshow_pvalue: float
    n_groups: int
    histogram_edges: np.ndarray
    histogram_events: np.ndarray
    histogram_nonevents: np.ndarray
    development: bool
    confidence: float
    n: int
    n_events: int
    cut: int | None
    warnings: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """Tidy summary: measure, estimate, se, lower, upper (one row per measure)."""
        nan = float("nan")
        rows = [
            ("calibration_in_the_large", self.calibration_in_the_large, self.calibration_in_the_large_se, self.calibration_in_the_large_lower, self.calibration_in_the_large_upper),
            ("slope", self.slope, self.slope_se, self.slope_lower, self.slope_upper),
            ("oe_ratio", self.oe_ratio, nan, self.oe_lower, self.oe_upper),
            ("mean_observed", self.mean_observed, nan, nan, nan),
            ("mean_predicted", self.mean_predicted, nan, nan, nan),
            ("ici", self.ici, nan, nan, nan),
            ("e50", self.e50, nan, nan, nan),
            ("e90", self.e90, nan, nan, nan),
            ("emax", self.emax, nan, nan, nan),
            ("hosmer_lemeshow", self.hosmer_lemeshow, nan, nan, nan),
            ("hosmer_lemeshow_pvalue", self.hosmer_lemeshow_pvalue, nan, nan, nan),
        ]
        frame = pd.DataFrame(rows, columns=["measure", "estimate", "se", "lower", "upper"])
        frame["cut"] = self.cut
        return frame

    def groups_frame(self) -> pd.DataFrame:
        """The grouped table, one row per quantile group."""
        return pd.DataFrame(
            {
                "group": np.arange(1, self.n_groups + 1),
                "n": self.group_n.astype(np.int64),
                "events": self.group_events.astype(np.int64),
                "observed": self.group_observed,
                "observed_lower": self.group_observed_lower,
                "observed_upper": self.group_observed_upper,
                "mean_predicted": self.group_mean_predicted,
                "min_predicted": self.group_min_predicted,
                "max_predicted": self.group_max_predicted,
            }
        )

    def curve_frame(self) -> pd.DataFrame:
        """The smoothed curve and its band, one row per evaluation point."""
        return pd.DataFrame(
            {"predicted": self.curve_predicted, "observed": self.curve_observed, "lower": self.curve_lower, "upper": self.curve_upper}
        )


@dataclass(frozen=True)
class OrdinalCalibration:
    """Calibration of an ordered outcome: every cut, and the ordinal Hosmer–Lemeshow test.

    Attributes
    ----------
    cuts : tuple of CalibrationResult
        Calibration of P(Y > j) for each cut j = 0 .. K-2.
    hosmer_lemeshow, hosmer_lemeshow_df, hosmer_lemeshow_pvalue : float
        Ordinal Hosmer–Lemeshow statistic sum_g sum_k (O_gk - E_gk)^2 / E_gk,
        its degrees of freedom and p-value.
    n_groups : int
        Non-empty groups of the ordinal score.
    observed, expected : ndarray, shape (n_groups, K)
        Observed and expected counts per group and outcome level.
    development : bool
        Whether the data are the model's development data.
    n : int
        Patients.
    """

    cuts: tuple[CalibrationResult, ...]
    hosmer_lemeshow: float
    hosmer_lemeshow_df: float
    hosmer_lemeshow_pvalue: float
    n_groups: int
    observed: np.ndarray
    expected: np.ndarray
    development: bool
    n: int

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields (cut results nested)."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """Per-cut summaries stacked (column ``cut``), then the ordinal test rows (cut missing)."""
        nan = float("nan")
        extra = pd.DataFrame(
            [
                ("ordinal_hosmer_lemeshow", self.hosmer_lemeshow, nan, nan, nan),
                ("ordinal_hosmer_lemeshow_df", self.hosmer_lemeshow_df, nan, nan, nan),
                ("ordinal_hosmer_lemeshow_pvalue", self.hosmer_lemeshow_pvalue, nan, nan, nan),
            ],
            columns=["measure", "estimate", "se", "lower", "upper"],
        )
        extra["cut"] = None
        return pd.concat([c.to_frame() for c in self.cuts] + [extra], ignore_index=True)


# ---------------------------------------------------------------------------
# Pieces
# ---------------------------------------------------------------------------


def _check_options(func: str, n_groups: Any, frac: Any, development: Any) -> None:
    if isinstance(n_groups, bool) or not isinstance(n_groups, (int, np.integer)) or n_groups < 2:
        raise RiskvetError(problem(f"{func}(n_groups=)", allowed="an integer >= 2", received=n_groups))
    if isinstance(frac, bool) or not isinstance(frac, (int, float, np.floating)) or not 0.0 < float(frac) <= 1.0:
        raise RiskvetError(problem(f"{func}(frac=)", allowed="a number in (0, 1]", received=frac))
    if not isinstance(development, (bool, np.bool_)):
        raise RiskvetError(problem(f"{func}(development=)", allowed="True or False", received=development))


def _quantile_groups(score: np.ndarray, n_groups: int) -> tuple[np.ndarray, int]:
    """Group index 0 .. g-1 by quantiles of score; tied scores stay together, empty groups vanish."""
    edges = np.quantile(score, np.linspace(0.0, 1.0, n_groups + 1))
    raw = np.searchsorted(edges[1:-1], score, side="right")
    used, group = np.unique(raw, return_inverse=True)
    return group, int(used.shape[0])


def _logit(p: np.ndarray) -> tuple[np.ndarray, int]:
    clipped = np.clip(p, _EPS, 1.0 - _EPS)
    return special.logit(clipped), int(np.count_nonzero(clipped != p))


def _calibration_one(
    y: np.ndarray,
    p: np.ndarray,
    *,
    development: bool,
    n_groups: int,
    conf: float,
    frac: float,
    cut: int | None,
) -> CalibrationResult:
    notes: list[str] = []
    n = int(y.shape[0])
    yf = y.astype(float)
    lp, n_clipped = _logit(p)
    if n_clipped:
        notes.append(f"{n_clipped} predictions of exactly 0 or 1 were moved to {_EPS:g} from the boundary before taking logits")
    rec = _recalibrate(y, lp)
    z = _z(conf)

    events = float(yf.sum())
    expected = float(p.sum())
    oe = events / expected if expected > 0 else float("inf")
    se_log_oe = float(np.sqrt((1.0 - events / n) / events))
    oe_lower, oe_upper = oe * np.exp(-z * se_log_oe), oe * np.exp(z * se_log_oe)

    order = np.argsort(p, kind="stable")
    p_sorted, y_sorted = p[order], yf[order]
    sm = _smooth(y_sorted, p_sorted, frac, with_se=True)
    abs_err = np.abs(sm.per_patient - p_sorted)
    se = sm.se if sm.se is not None else np.full_like(sm.fitted, np.nan)
    band_lower = np.clip(sm.fitted - z * se, 0.0, 1.0)
    band_upper = np.clip(sm.fitted + z * se, 0.0, 1.0)

    group, g = _quantile_groups(p, n_groups)
    g_n = np.bincount(group, minlength=g).astype(float)
    g_events = np.bincount(group, weights=yf, minlength=g)
    g_expected = np.bincount(group, weights=p, minlength=g)
    g_lower, g_upper = _proportion_interval(g_events, g_n, z, conf, "wilson")
    g_min = np.full(g, np.inf)
    g_max = np.full(g, -np.inf)
    np.minimum.at(g_min, group, p)
    np.maximum.at(g_max, group, p)
    with np.errstate(divide="ignore", invalid="ignore"):
        hl_terms = (g_events - g_expected) ** 2 / (g_expected * (1.0 - g_expected / g_n))
    hl = float(np.sum(hl_terms)) if np.all(np.isfinite(hl_terms)) else float("nan")
    df = float(g - 2 if development else g)
    hl_p = float(stats.chi2.sf(hl, df)) if df > 0 and np.isfinite(hl) else float("nan")
    if g < n_groups:
        notes.append(f"tied predictions left {g} non-empty groups of the {n_groups} asked for")

    lo, hi = float(p_sorted[0]), float(p_sorted[-1])
    edges = np.linspace(lo, hi if hi > lo else lo + 1e-9, _N_HIST_BINS + 1)
    hist_events = np.histogram(p[y == 1], bins=edges)[0]
    hist_non = np.histogram(p[y == 0], bins=edges)[0]

    for note in notes:
        warnings.warn(note, RiskvetWarning, stacklevel=3)
    notes.extend(rec.notes)  # already warned by the fitter

    return CalibrationResult(
        calibration_in_the_large=rec.citl,
        calibration_in_the_large_se=rec.citl_se,
        calibration_in_the_large_lower=rec.citl - z * rec.citl_se,
        calibration_in_the_large_upper=rec.citl + z * rec.citl_se,
        slope=rec.slope,
        slope_se=rec.slope_se,
        slope_lower=rec.slope - z * rec.slope_se,
        slope_upper=rec.slope + z * rec.slope_se,
        slope_intercept=rec.intercept,
        slope_intercept_se=rec.intercept_se,
        mean_observed=events / n,
        mean_predicted=expected / n,
        oe_ratio=float(oe),
        oe_lower=float(oe_lower),
        oe_upper=float(oe_upper),
        ici=float(np.mean(abs_err)),
        e50=float(np.quantile(abs_err, 0.5)),
        e90=float(np.quantile(abs_err, 0.9)),
        emax=float(np.max(abs_err)),
        curve_predicted=_frozen(sm.points),
        curve_observed=_frozen(sm.fitted),
        curve_lower=_frozen(band_lower),
        curve_upper=_frozen(band_upper),
        frac=float(frac),
        group_n=_frozen(g_n),
        group_events=_frozen(g_events),
        group_observed=_frozen(g_events / g_n),
        group_observed_lower=_frozen(g_lower),
        group_observed_upper=_frozen(g_upper),
        group_mean_predicted=_frozen(g_expected / g_n),
        group_min_predicted=_frozen(g_min),
        group_max_predicted=_frozen(g_max),
        hosmer_lemeshow=hl,
        hosmer_lemeshow_df=df,
        hosmer_lemeshow_pvalue=hl_p,
        n_groups=g,
        histogram_edges=_frozen(edges),
        histogram_events=_frozen(hist_events, dtype=np.int64),
        histogram_nonevents=_frozen(hist_non, dtype=np.int64),
        development=bool(development),
        confidence=conf,
        n=n,
        n_events=int(events),
        cut=cut,
        warnings=tuple(notes),
    )


def calibration(
    y: Any,
    prob: Any,
    *,
    development: bool = False,
    n_groups: int = 10,
    confidence: float = 0.95,
    frac: float = DEFAULT_FRAC,
) -> CalibrationResult:
    """Calibration of predicted event probabilities for a binary outcome.

    Parameters
    ----------
    y : array-like of {0, 1}, shape (n,)
        Observed outcome.  For one cut of an ordered outcome use
        :func:`riskvet.discrimination.dichotomise` first.
    prob : array-like of float, shape (n,)
        Predicted event probabilities.
    development : bool, default False
        True when ``y`` is the data the model was fitted on: the
        Hosmer–Lemeshow test then has g - 2 degrees of freedom, otherwise g.
    n_groups : int, default 10
        Number of quantile groups for the table and the Hosmer–Lemeshow test.
    confidence : float, default 0.95
        Confidence level of all intervals and the curve's band.
    frac : float, default 0.75
        Share of the data in each local regression of the smoothed curve.

    Returns
    -------
    CalibrationResult

    Raises
    ------
    DataError
        Bad input, or no events or no non-events.

    Warns
    -----
    ConvergenceWarning, SeparationWarning, RiskvetWarning
        Recalibration trouble, predictions of exactly 0 or 1, groups lost to
        ties; each also recorded in ``warnings``.

    Notes
    -----
    With LP = logit(prob): calibration-in-the-large a from
    logit P(y = 1) = a + LP (LP an offset); calibration slope b from
    logit P(y = 1) = a' + b LP; both by maximum likelihood, Wald intervals
    from the inverse information.  O/E = sum y / sum prob; SE(ln O/E) =
    sqrt((1 - phi) / (n phi)), phi = O / n, the binomial delta-method SE of
    the log event proportion with E held fixed.  ICI = mean_i |s(p_i) - p_i|
    with s the smoothed curve (module Notes); E50, E90, Emax are the median,
    90th percentile and maximum.  Hosmer–Lemeshow: C = sum_g (O_g - E_g)^2 /
    (E_g (1 - E_g / n_g)) over quantile groups of prob, referred to
    chi-square with g - 2 df on development data (Hosmer & Lemeshow) or g
    df on independent data (common practice).

    References
    ----------
    .. [1] Cox DR. Two further applications of a model for binary regression.
       Biometrika 1958;45(3-4):562-565.
    .. [2] Austin PC, Steyerberg EW. The Integrated Calibration Index (ICI)
       and related metrics for quantifying the calibration of logistic
       regression models. Statistics in Medicine 2019;38(21):4051-4065.
    .. [3] Hosmer DW, Lemeshow S. Goodness of fit tests for the multiple
       logistic regression model. Communications in Statistics - Theory and
       Methods 1980;9(10):1043-1069.
    .. [4] Cleveland WS. Robust locally weighted regression and smoothing
       scatterplots. J Am Stat Assoc 1979;74(368):829-836.
    .. [5] Van Calster B, McLernon DJ, van Smeden M, Wynants L, Steyerberg EW.
       Calibration: the Achilles heel of predictive analytics. BMC Medicine
       2019;17:230.
    .. [6] Wilson EB. Probable inference, the law of succession, and
       statistical inference. J Am Stat Assoc 1927;22(158):209-212.
    """
    func = "calibration"
    conf = _check_confidence(confidence, func)
    _check_options(func, n_groups, frac, development)
    y_arr = _as_binary(y, func)
    p = _as_prob_vector(prob, y_arr.shape[0], func)
    _require_two_classes(y_arr == 1, func)
    return _calibration_one(y_arr, p, development=bool(development), n_groups=int(n_groups), conf=conf, frac=float(frac), cut=None)


def _ordinal_hosmer_lemeshow(y: np.ndarray, matrix: np.ndarray, n_groups: int, development: bool) -> tuple[float, float, float, int, np.ndarray, np.ndarray]:
    k = matrix.shape[1]
    score = matrix @ np.arange(k, dtype=float)
    group, g = _quantile_groups(score, n_groups)
    observed = np.zeros((g, k))
    np.add.at(observed, (group, y), 1.0)
    expected = np.zeros((g, k))
    np.add.at(expected, group, matrix)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = (observed - expected) ** 2 / expected
    stat = float(np.sum(terms)) if np.all(np.isfinite(terms)) else float("nan")
    df = float((g - 2) * (k - 1) + (k - 2) if development else g * (k - 1))
    pvalue = float(stats.chi2.sf(stat, df)) if df > 0 and np.isfinite(stat) else float("nan")
    return stat, df, pvalue, g, observed, expected


def ordinal_calibration(
    y: Any,
    prob: Any,
    *,
    development: bool = False,
    n_groups: int = 10,
    confidence: float = 0.95,
    frac: float = DEFAULT_FRAC,
) -> OrdinalCalibration:
    """Calibration of predicted level probabilities for an ordered outcome.

    Parameters
    ----------
    y : array-like of int, shape (n,)
        Outcome levels 0 .. K-1.
    prob : array-like of float, shape (n, K)
        Predicted level probabilities (rows sum to 1).
    development, n_groups, confidence, frac
        As in :func:`calibration`.

    Returns
    -------
    OrdinalCalibration

    Notes
    -----
    Each cut j is assessed as a binary outcome Y > j with prediction
    P(Y > j) = sum_{k > j} prob_k.  The ordinal Hosmer–Lemeshow test sorts
    patients by the ordinal score sum_k k prob_k, forms g quantile groups,
    and compares observed with expected counts in the g x K table:
    C = sum_g sum_k (O_gk - E_gk)^2 / E_gk.  On development data of a
    proportional-odds model the reference distribution is chi-square with
    (g - 2)(K - 1) + (K - 2) df (Fagerland & Hosmer 2013; recalled from
    memory); on independent data g (K - 1) df is used (common practice, by
    analogy with the binary test).  For K = 2 both reduce to the binary test.

    References
    ----------
    .. [1] Fagerland MW, Hosmer DW. A goodness-of-fit test for the
       proportional odds regression model. Statistics in Medicine
       2013;32(13):2235-2249.
    .. [2] Austin PC, Steyerberg EW. The Integrated Calibration Index (ICI)
       and related metrics for quantifying the calibration of logistic
       regression models. Statistics in Medicine 2019;38(21):4051-4065.
    """
    func = "ordinal_calibration"
    conf = _check_confidence(confidence, func)
    _check_options(func, n_groups, frac, development)
    y_arr = _as_outcome(y, func)
    matrix = _as_prob_matrix(prob, y_arr.shape[0], func)
    _as_outcome(y_arr, func, n_levels=matrix.shape[1])
    cut_p = _cut_probs(matrix)
    cuts = []
    for j in range(matrix.shape[1] - 1):
        y_cut = (y_arr > j).astype(np.int64)
        _require_two_classes(y_cut == 1, func)
        cuts.append(
            _calibration_one(y_cut, cut_p[:, j], development=bool(development), n_groups=int(n_groups), conf=conf, frac=float(frac), cut=j)
        )
    stat, df, pvalue, g, observed, expected = _ordinal_hosmer_lemeshow(y_arr, matrix, int(n_groups), bool(development))
    return OrdinalCalibration(
        cuts=tuple(cuts),
        hosmer_lemeshow=stat,
        hosmer_lemeshow_df=df,
        hosmer_lemeshow_pvalue=pvalue,
        n_groups=g,
        observed=_frozen(observed),
        expected=_frozen(expected),
        development=bool(development),
        n=int(y_arr.shape[0]),
    )
