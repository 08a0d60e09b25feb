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
Local polynomial regression of y on prob (Cleveland 1979; Cleveland & Devlin
1988): at each evaluation point x0 a weighted least-squares fit of y on a
polynomial in (prob - x0) of degree 2 (local quadratic, the default) or 1
(local linear), with tricube weights over the nearest ``frac * n``
predictions (frac = 0.75 by default), and no robustness iterations: the
robustness reweighting of lowess treats the large residuals that a 0/1
outcome always has as outliers and would bias the curve.  The defaults
follow the curve behind the ICI, E50, E90 and Emax of Austin & Steyerberg
(2019), which the paper describes as a local regression with degree 2,
tricube weights, span 0.75 and no robustness iterations (recalled from
memory).  Each local fit is computed exactly at its evaluation point; an
implementation that fits only at the vertices of a tree and interpolates
between them differs slightly.

The curve is evaluated at about 100 points (50 evenly spaced over the range
of prob and 50 at its quantiles) and linearly interpolated in between, which
is how the per-patient values behind the ICI are obtained.  With degree 1
the curve at the evaluation points equals
``statsmodels.nonparametric.lowess(y, prob, frac=frac, it=0,
xvals=points)``; with degree 2 it equals a weighted polynomial fit at each
point (both tested).  Where the neighbourhood holds fewer distinct
predictions with positive weight than the polynomial has coefficients (a
score with a few distinct values), the degree is lowered at that point to
the highest the data support (a local line, or a local mean).

The band is pointwise.  The smoother is linear in y: s(x0) = sum_j l_j(x0)
y_j, with l(x0) the equivalent kernel of the local fit, l_j = w_j e_1' (X'W
X)^-1 x_j for the design rows x_j = (1, d_j, .., d_j^degree), so the band
follows the chosen degree.  Var s(x0) = sum_j l_j(x0)^2 pi_j (1 - pi_j),
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

from ._checks import (
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
from .decision import _proportion_interval
from ..errors import FitError, RiskvetError, RiskvetWarning, problem

__all__ = [
    "CalibrationResult",
    "OrdinalCalibration",
    "MergedGroups",
    "calibration",
    "ordinal_calibration",
    "merge_groups",
    "merge_bins",
    "SLOPE_UNDEFINED_CONSTANT",
]

#: Predictions are clipped to [_EPS, 1 - _EPS] before taking logits.
_EPS = 1e-10
#: Default share of the data in each local regression of the smoother.
DEFAULT_FRAC = 0.75
#: Default degree of the local polynomials of the smoother (2: local quadratic).
DEFAULT_DEGREE = 2
_N_EVEN = 50
_N_QUANTILE = 50
_N_HIST_BINS = 40


# ---------------------------------------------------------------------------
# Recalibration regressions
# ---------------------------------------------------------------------------


#: Logits whose spread is at most this share of their size (at least 1) count as constant:
#: predictions of one value, computed through exp and log, differ by rounding
#: (about 1e-15 relative); 1e-8 leaves a wide margin above it and far below
#: any spread a model with a predictor gives (common practice for a tolerance).
_CONSTANT_LP = 1e-8

#: Why the calibration slope is NaN when every prediction is the same.
SLOPE_UNDEFINED_CONSTANT = (
    "the predictions are constant (a model with no predictors): a calibration slope needs predictions that vary"
)


def _is_constant(lp: np.ndarray) -> bool:
    """Whether the values of ``lp`` are one value up to rounding (see ``_CONSTANT_LP``)."""
    if lp.size == 0:
        return True
    scale = max(1.0, float(np.max(np.abs(lp))))
    return float(np.ptp(lp)) <= _CONSTANT_LP * scale


@dataclass(frozen=True)
class _Recalibration:
    citl: float
    citl_se: float
    intercept: float
    slope: float
    intercept_se: float
    slope_se: float
    notes: tuple[str, ...]
    slope_undefined: str = ""


def _recalibrate(y: np.ndarray, lp: np.ndarray) -> _Recalibration:
    """Both recalibration regressions by the package's cumulative-model fitter (K = 2).

    :func:`riskvet.models.fit_cumulative` states P(Y <= 0) = expit(theta - x beta
    - offset), so P(Y = 1) = expit(-theta + x beta + offset): the intercept of
    the recalibration model is -theta, with the same SE.  Trouble met by the
    fitter (separation, non-convergence) is warned by it and recorded here.
    With constant ``lp`` (a model without predictors) the slope regression
    has nothing to regress on: slope and its intercept are NaN and
    ``slope_undefined`` says why; so too when that fit cannot be made.
    Calibration-in-the-large is defined either way.
    """
    from ..modelling.fitter import fit_cumulative  # deferred: keeps importing the metrics light

    large = fit_cumulative(None, y, offset=lp)
    notes = tuple(f"calibration-in-the-large fit: {m}" for m in large.warnings)
    nan = float("nan")
    undefined = SLOPE_UNDEFINED_CONSTANT if _is_constant(lp) else ""
    slope = None
    if not undefined:
        try:
            slope = fit_cumulative(lp[:, None], y)
        except FitError as exc:
            first = (str(exc).splitlines() or [""])[0][:300]
            undefined = f"the calibration slope regression cannot be fitted: {first}"
    if slope is None:
        return _Recalibration(citl=float(-large.thresholds.iloc[0]), citl_se=float(large.se.iloc[0]), intercept=nan,
                              slope=nan, intercept_se=nan, slope_se=nan, notes=notes, slope_undefined=undefined)
    return _Recalibration(
        citl=float(-large.thresholds.iloc[0]),
        citl_se=float(large.se.iloc[0]),
        intercept=float(-slope.thresholds.iloc[0]),
        slope=float(slope.coef.iloc[0]),
        intercept_se=float(slope.se.iloc[0]),
        slope_se=float(slope.se.iloc[1]),
        notes=notes + tuple(f"calibration slope fit: {m}" for m in slope.warnings),
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


# Evaluation points are processed in blocks through preallocated work arrays:
# a fresh points x patients temporary per operation costs more in first-touch
# page faults than the arithmetic itself.
_BLOCK = 32


#: A unit-diagonal moment matrix with a smaller determinant is treated as singular.
_SINGULAR_DET = 1e-12


def _supported_inverse(matrices: np.ndarray) -> np.ndarray:
    """Inverses of a stack of unit-diagonal moment matrices, lowering the degree where singular.

    Each matrix is inverted in its largest leading block whose determinant is
    at least ``_SINGULAR_DET`` (eigenvalues of a unit-diagonal p x p matrix
    are at most p, so this bounds the smallest one away from 0), with zeros
    elsewhere: where the neighbourhood holds fewer distinct predictions than
    the polynomial has coefficients, the fit there drops its highest powers
    (a local line, or a local mean).  An all-zero matrix (no weight) stays 0.
    """
    m, p, _ = matrices.shape
    out = np.zeros_like(matrices)
    todo = np.ones(m, dtype=bool)
    for size in range(p, 0, -1):
        block = matrices[todo][:, :size, :size]
        good = np.linalg.det(block) >= _SINGULAR_DET
        rows = np.flatnonzero(todo)[good]
        if rows.size:
            out[rows, :size, :size] = np.linalg.inv(block[good])
        todo[rows] = False
        if not np.any(todo):
            break
    return out


def _local_polynomial(
    x_sorted: np.ndarray,
    y_sorted: np.ndarray,
    points: np.ndarray,
    frac: float,
    degree: int,
    variance: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray | None]:
    """Local polynomial tricube smoother at ``points``; with ``variance`` also its pointwise SE.

    At each x0 the fit is the weighted least-squares regression of y on
    1, d, .., d^degree with d = (x - x0) / r, r the distance to the k-th
    nearest x (k = floor(frac n)) and tricube weights w = (1 - |d|^3)^3 for
    |d| < 1, else 0; the smooth is its intercept.  With A the (degree+1)^2
    moment matrix A_ab = sum_j w_j d_j^(a+b) and a = A^-1 e_1, the fit is
    linear in y: s(x0) = sum_j l_j y_j, l_j = w_j sum_a a_a d_j^a (the
    equivalent kernel), which also gives the SE.  A is scaled to unit
    diagonal before the inverse; where the neighbourhood cannot support the
    polynomial (fewer distinct x with weight than coefficients) the degree is
    lowered there (:func:`_supported_inverse`).  A zero radius (more than
    k predictions tied at x0) leaves weight only on the ties; when every
    prediction in the window lies at exactly the radius (heavy ties), no
    weight is left and the smooth there is NaN.
    """
    n = x_sorted.shape[0]
    k = min(max(int(frac * n + 1e-10), 2), n)
    inv_radius = 1.0 / np.maximum(_knn_radius(x_sorted, points, k), 1e-300)
    ones = np.ones(n)
    ones_y = np.column_stack([ones, y_sorted])
    n_coef = degree + 1
    fitted = np.empty(points.shape[0])
    se = None if variance is None else np.empty(points.shape[0])
    block = min(_BLOCK, points.shape[0])
    work_d = np.empty((block, n))
    work_w = np.empty((block, n))
    work_t = np.empty((block, n))
    hankel = np.add.outer(np.arange(n_coef), np.arange(n_coef))
    for b in range(0, points.shape[0], block):
        pts = points[b : b + block]
        m = pts.shape[0]
        d, w, t = work_d[:m], work_w[:m], work_t[:m]
        np.subtract(x_sorted[None, :], pts[:, None], out=d)
        with np.errstate(over="ignore"):
            np.multiply(d, inv_radius[b : b + m, None], out=d)
        np.clip(d, -1.0, 1.0, out=d)  # outside the window the weight is 0 whatever d is
        np.abs(d, out=w)
        np.multiply(w, w, out=t)
        np.multiply(t, w, out=t)
        np.subtract(1.0, t, out=t)
        np.multiply(t, t, out=w)
        np.multiply(w, t, out=w)  # w = (1 - |d|^3)^3
        # moments S_c = sum w d^c (c = 0 .. 2 degree) and R_a = sum w d^a y (a = 0 .. degree)
        moments = np.empty((m, 2 * degree + 1))
        rhs = np.empty((m, n_coef))
        for c in range(2 * degree + 1):
            if c == 1:
                np.multiply(w, d, out=t)
            elif c > 1:
                np.multiply(t, d, out=t)
            power = w if c == 0 else t
            if c <= degree:
                both = power @ ones_y
                moments[:, c], rhs[:, c] = both[:, 0], both[:, 1]
            else:
                moments[:, c] = power @ ones
        matrix = moments[:, hankel]
        diag = np.sqrt(np.diagonal(matrix, axis1=1, axis2=2))
        scale = 1.0 / np.where(diag > 0, diag, 1.0)
        inverse = _supported_inverse(matrix * scale[:, :, None] * scale[:, None, :])
        coef = inverse[:, :, 0] * scale * scale[:, :1]  # a = A^-1 e_1, undoing the scaling
        # no weight at all (the k nearest all tied at exactly the radius): the smooth is undefined
        coef[moments[:, 0] <= 0] = np.nan
        fitted[b : b + m] = np.einsum("ij,ij->i", coef, rhs)
        if variance is not None and se is not None:
            # l = w * (a_0 + a_1 d + ... + a_degree d^degree), by Horner's rule in the free array
            np.multiply(d, coef[:, degree, None], out=t)
            for a in range(degree - 1, 0, -1):
                np.add(t, coef[:, a, None], out=t)
                np.multiply(t, d, out=t)
            np.add(t, coef[:, 0, None], out=t)
            np.multiply(t, w, out=t)
            np.multiply(t, t, out=t)
            se[b : b + m] = np.sqrt(t @ variance)
    return fitted, se


@dataclass(frozen=True)
class _Smooth:
    points: np.ndarray
    fitted: np.ndarray
    se: np.ndarray | None
    per_patient: np.ndarray


def _smooth(y_sorted: np.ndarray, p_sorted: np.ndarray, frac: float, *, with_se: bool, degree: int = DEFAULT_DEGREE) -> _Smooth:
    """The smoothed calibration curve of sorted data; the default degree is the public default.

    :func:`riskvet.metrics.performance_summary` calls this with the default
    ``degree``, so the lean pass (and with it the bootstrap) reports the same
    ICI as :func:`calibration` with its defaults.
    """
    points = _evaluation_points(p_sorted)
    fitted, _ = _local_polynomial(p_sorted, y_sorted, points, frac, degree)
    per_patient = np.interp(p_sorted, points, fitted)
    se = None
    if with_se:
        pi = np.clip(per_patient, 0.0, 1.0)
        _, se = _local_polynomial(p_sorted, y_sorted, points, frac, degree, variance=pi * (1.0 - pi))
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
    degree : int
        Degree of the smoother's local polynomials (2 quadratic, 1 linear).
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
    slope_undefined : str
        Why ``slope``, its SE, limits and ``slope_intercept`` are NaN: the
        predictions are constant (:data:`SLOPE_UNDEFINED_CONSTANT`, a model
        with no predictors; every other field is still computed), or the
        slope regression cannot be fitted.  Empty when the slope is defined.
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
    degree: int
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
    slope_undefined: str = ""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """Tidy summary: measure, estimate, se, lower, upper (one row per measure).

        A slope that is undefined (``slope_undefined``) is a row of NaN.
        """
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


def _check_options(func: str, n_groups: Any, frac: Any, development: Any, degree: Any) -> None:
    if isinstance(n_groups, bool) or not isinstance(n_groups, (int, np.integer)) or n_groups < 2:
        raise RiskvetError(problem(f"{func}(n_groups=)", allowed="an integer >= 2", received=n_groups))
    if isinstance(frac, bool) or not isinstance(frac, (int, float, np.floating)) or not 0.0 < float(frac) <= 1.0:
        raise RiskvetError(problem(f"{func}(frac=)", allowed="a number in (0, 1]", received=frac))
    if not isinstance(development, (bool, np.bool_)):
        raise RiskvetError(problem(f"{func}(development=)", allowed="True or False", received=development))
    if isinstance(degree, bool) or not isinstance(degree, (int, np.integer)) or degree not in (1, 2):
        raise RiskvetError(problem(f"{func}(degree=)", allowed="1 (local linear) or 2 (local quadratic)", received=degree))


def _quantile_groups(score: np.ndarray, n_groups: int) -> tuple[np.ndarray, int]:
    """Group index 0 .. g-1 by quantiles of score; tied scores stay together, empty groups vanish."""
    edges = np.quantile(score, np.linspace(0.0, 1.0, n_groups + 1))
    raw = np.searchsorted(edges[1:-1], score, side="right")
    used, group = np.unique(raw, return_inverse=True)
    return group, int(used.shape[0])


def _logit(p: np.ndarray) -> tuple[np.ndarray, int]:
    clipped = np.clip(p, _EPS, 1.0 - _EPS)
    return special.logit(clipped), int(np.count_nonzero(clipped != p))


def _oe_ratio(events: float, expected: float, n: int, z: float) -> tuple[float, float, float]:
    """Observed/expected ratio with its interval from the log scale."""
    oe = events / expected if expected > 0 else float("inf")
    se_log_oe = float(np.sqrt((1.0 - events / n) / events))
    return oe, oe * np.exp(-z * se_log_oe), oe * np.exp(z * se_log_oe)


def _curve_with_band(y_sorted: np.ndarray, p_sorted: np.ndarray, frac: float, degree: int, z: float) -> tuple[_Smooth, np.ndarray, np.ndarray, np.ndarray]:
    """Smoothed curve of data sorted by prob, per-patient absolute errors, and the pointwise band."""
    sm = _smooth(y_sorted, p_sorted, frac, with_se=True, degree=degree)
    abs_err = np.abs(sm.per_patient - p_sorted)
    se = sm.se if sm.se is not None else np.full_like(sm.fitted, np.nan)
    band_lower = np.clip(sm.fitted - z * se, 0.0, 1.0)
    band_upper = np.clip(sm.fitted + z * se, 0.0, 1.0)
    return sm, abs_err, band_lower, band_upper


@dataclass(frozen=True)
class _GroupTable:
    """Observed and expected events by quantile group of prob, with the Hosmer–Lemeshow test."""

    n: np.ndarray
    events: np.ndarray
    expected: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    min_predicted: np.ndarray
    max_predicted: np.ndarray
    hosmer_lemeshow: float
    df: float
    pvalue: float
    n_groups: int


def _group_table(yf: np.ndarray, p: np.ndarray, n_groups: int, development: bool, z: float, conf: float) -> _GroupTable:
    """Group prob by quantiles, count events against predictions in each group and test the difference."""
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
    return _GroupTable(g_n, g_events, g_expected, g_lower, g_upper, g_min, g_max, hl, df, hl_p, g)


def _histograms(y: np.ndarray, p: np.ndarray, lo: float, hi: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Bin edges over [lo, hi] and the counts of events and of non-events in each bin."""
    edges = np.linspace(lo, hi if hi > lo else lo + 1e-9, _N_HIST_BINS + 1)
    return edges, np.histogram(p[y == 1], bins=edges)[0], np.histogram(p[y == 0], bins=edges)[0]


def _calibration_one(
    y: np.ndarray,
    p: np.ndarray,
    *,
    development: bool,
    n_groups: int,
    conf: float,
    frac: float,
    degree: int,
    cut: int | None,
) -> CalibrationResult:
    """Calibration of checked event probabilities ``p`` of a 0/1 outcome ``y``."""
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
    oe, oe_lower, oe_upper = _oe_ratio(events, expected, n, z)

    order = np.argsort(p, kind="stable")
    p_sorted, y_sorted = p[order], yf[order]
    sm, abs_err, band_lower, band_upper = _curve_with_band(y_sorted, p_sorted, frac, degree, z)

    groups = _group_table(yf, p, n_groups, development, z, conf)
    if groups.n_groups < n_groups:
        notes.append(f"tied predictions left {groups.n_groups} non-empty groups of the {n_groups} asked for")

    edges, hist_events, hist_non = _histograms(y, p, float(p_sorted[0]), float(p_sorted[-1]))

    # warned here rather than in the steps, so that stacklevel points at the caller of the public function
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
        degree=int(degree),
        group_n=_frozen(groups.n),
        group_events=_frozen(groups.events),
        group_observed=_frozen(groups.events / groups.n),
        group_observed_lower=_frozen(groups.lower),
        group_observed_upper=_frozen(groups.upper),
        group_mean_predicted=_frozen(groups.expected / groups.n),
        group_min_predicted=_frozen(groups.min_predicted),
        group_max_predicted=_frozen(groups.max_predicted),
        hosmer_lemeshow=groups.hosmer_lemeshow,
        hosmer_lemeshow_df=groups.df,
        hosmer_lemeshow_pvalue=groups.pvalue,
        n_groups=groups.n_groups,
        histogram_edges=_frozen(edges),
        histogram_events=_frozen(hist_events, dtype=np.int64),
        histogram_nonevents=_frozen(hist_non, dtype=np.int64),
        development=bool(development),
        confidence=conf,
        n=n,
        n_events=int(events),
        cut=cut,
        warnings=tuple(notes),
        slope_undefined=rec.slope_undefined,
    )


def calibration(
    y: Any,
    prob: Any,
    *,
    development: bool = False,
    n_groups: int = 10,
    confidence: float = 0.95,
    frac: float = DEFAULT_FRAC,
    degree: int = DEFAULT_DEGREE,
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
    degree : {2, 1}, default 2
        Degree of the local polynomials of the smoothed curve: 2 (local
        quadratic, the setting behind the published ICI) or 1 (local
        linear).  The curve's band follows the chosen degree.

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
    with s the smoothed curve; E50, E90, Emax are the median, 90th
    percentile and maximum.  The curve at x0 is the intercept b_0 of

        minimise_b  sum_j w_j (y_j - b_0 - b_1 d_j - .. - b_q d_j^q)^2,
        d_j = (p_j - x0) / r(x0),  w_j = (1 - |d_j|^3)^3 for |d_j| < 1 else 0,

    q = ``degree``, r(x0) the distance from x0 to its floor(frac n)-th
    nearest prediction; it is computed exactly at each evaluation point and
    interpolated linearly between them (module Notes).  The defaults
    (q = 2, frac = 0.75, no robustness iterations) are the local-regression
    settings behind the published ICI (Austin & Steyerberg 2019, as recalled
    from memory); q = 1 is the local linear smoother.

    Constant predictions p (a model with no predictors) are a valid input:
    logit p has no spread, so the slope b is undefined and returned as NaN
    with ``slope_undefined`` saying why; calibration-in-the-large is then
    logit(ybar) - logit(p), O/E = ybar / p and the smoothed curve is the
    mean outcome, so ICI = |ybar - p|.

    Hosmer–Lemeshow: C = sum_g (O_g - E_g)^2 / (E_g (1 - E_g / n_g)) over
    quantile groups of prob, referred to chi-square with g - 2 df on
    development data (Hosmer & Lemeshow) or g df on independent data
    (common practice).

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
    .. [5] Cleveland WS, Devlin SJ. Locally weighted regression: an approach
       to regression analysis by local fitting. J Am Stat Assoc
       1988;83(403):596-610.
    .. [6] Cleveland WS, Grosse E, Shyu WM. Local regression models. In:
       Chambers JM, Hastie TJ, eds. Statistical Models in S. Wadsworth &
       Brooks/Cole; 1992:309-376.
    .. [7] Fan J, Gijbels I. Local Polynomial Modelling and Its
       Applications. London: Chapman & Hall; 1996.
    .. [8] Van Calster B, McLernon DJ, van Smeden M, Wynants L, Steyerberg EW.
       Calibration: the Achilles heel of predictive analytics. BMC Medicine
       2019;17:230.
    .. [9] Wilson EB. Probable inference, the law of succession, and
       statistical inference. J Am Stat Assoc 1927;22(158):209-212.
    """
    func = "calibration"
    conf = _check_confidence(confidence, func)
    _check_options(func, n_groups, frac, development, degree)
    y_arr = _as_binary(y, func)
    p = _as_prob_vector(prob, y_arr.shape[0], func)
    _require_two_classes(y_arr == 1, func)
    return _calibration_one(y_arr, p, development=bool(development), n_groups=int(n_groups), conf=conf, frac=float(frac), degree=int(degree), cut=None)


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
    degree: int = DEFAULT_DEGREE,
) -> OrdinalCalibration:
    """Calibration of predicted level probabilities for an ordered outcome.

    Parameters
    ----------
    y : array-like of int, shape (n,)
        Outcome levels 0 .. K-1.
    prob : array-like of float, shape (n, K)
        Predicted level probabilities (rows sum to 1).
    development, n_groups, confidence, frac, degree
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
    The smoothed curve of each cut is the local polynomial fit of
    :func:`calibration` (degree 2 by default, the local-regression setting behind the
    published ICI; see the module Notes).

    References
    ----------
    .. [1] Fagerland MW, Hosmer DW. A goodness-of-fit test for the
       proportional odds regression model. Statistics in Medicine
       2013;32(13):2235-2249.
    .. [2] Austin PC, Steyerberg EW. The Integrated Calibration Index (ICI)
       and related metrics for quantifying the calibration of logistic
       regression models. Statistics in Medicine 2019;38(21):4051-4065.
    .. [3] Cleveland WS, Devlin SJ. Locally weighted regression: an approach
       to regression analysis by local fitting. J Am Stat Assoc
       1988;83(403):596-610.
    """
    func = "ordinal_calibration"
    conf = _check_confidence(confidence, func)
    _check_options(func, n_groups, frac, development, degree)
    y_arr = _as_outcome(y, func)
    matrix = _as_prob_matrix(prob, y_arr.shape[0], func)
    _as_outcome(y_arr, func, n_levels=matrix.shape[1])
    cut_p = _cut_probs(matrix)
    cuts = []
    for j in range(matrix.shape[1] - 1):
        y_cut = (y_arr > j).astype(np.int64)
        _require_two_classes(y_cut == 1, func)
        cuts.append(
            _calibration_one(y_cut, cut_p[:, j], development=bool(development), n_groups=int(n_groups), conf=conf, frac=float(frac), degree=int(degree), cut=j)
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


# ---------------------------------------------------------------------------
# Groups and bins for publication: adjacent ones merged until each is large
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class MergedGroups:
    """Adjacent quantile groups of a :class:`CalibrationResult`, merged until each holds enough people.

    Attributes
    ----------
    n, events : ndarray
        Patients and events of each merged group.
    observed, observed_lower, observed_upper : ndarray
        Event proportion of each merged group and its Wilson limits at
        ``confidence``.
    mean_predicted, min_predicted, max_predicted : ndarray
        Mean (weighted by the original groups' sizes), smallest and largest
        prediction of each merged group.
    members : tuple of tuple of int
        The original groups (numbered from 0, as in the result) in each
        merged group.
    min_count : int
        Every merged group holds at least this many events and as many
        non-events.
    confidence : float
        Level of the Wilson limits.
    """

    n: np.ndarray
    events: np.ndarray
    observed: np.ndarray
    observed_lower: np.ndarray
    observed_upper: np.ndarray
    mean_predicted: np.ndarray
    min_predicted: np.ndarray
    max_predicted: np.ndarray
    members: tuple[tuple[int, ...], ...]
    min_count: int
    confidence: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields."""
        return _fields_dict(self)


def _check_min_count(min_count: Any, func: str) -> int:
    if isinstance(min_count, bool) or not isinstance(min_count, (int, np.integer)) or min_count < 0:
        raise RiskvetError(problem(f"{func}(min_count=)", allowed="a whole number >= 0", received=min_count))
    return int(min_count)


def _runs(counts: np.ndarray, enough) -> list[list[int]]:
    """Consecutive runs of indices, each closed as soon as ``enough(sum of its counts)``.

    A last run that is not enough joins the run before it; when no run is
    ever enough, there is none (the whole cannot be shown at all).
    """
    runs: list[list[int]] = []
    current: list[int] = []
    total = np.zeros(counts.shape[1:])
    for i in range(counts.shape[0]):
        current.append(i)
        total = total + counts[i]
        if enough(total):
            runs.append(current)
            current, total = [], np.zeros(counts.shape[1:])
    if current and runs:
        runs[-1].extend(current)
    return runs


def merge_groups(result: CalibrationResult, *, min_count: int) -> MergedGroups:
    """Merge adjacent quantile groups until each holds ``min_count`` events and ``min_count`` non-events.

    Parameters
    ----------
    result : CalibrationResult
        From :func:`calibration` (or one cut of :func:`ordinal_calibration`).
    min_count : int, keyword-only
        The smallest number of events, and of non-events, a group may hold
        (a record's ``output.min_cell_count``); 0 or 1 merges nothing, as
        counts of 0 give nothing away.

    Returns
    -------
    MergedGroups
        With no groups when the data hold fewer than ``min_count`` events or
        non-events in all.

    Notes
    -----
    A group's event proportion, with its size, states its number of events
    and of non-events, so a group shown with 1 to ``min_count - 1`` of
    either would publish a small count.  Groups are taken in order of
    prediction and closed as soon as both counts reach ``min_count``; a
    remainder that does not joins the last closed group.  The measures of
    ``result`` (the Hosmer–Lemeshow test included) are untouched: they were
    computed from the original groups.
    """
    func = "merge_groups"
    if not isinstance(result, CalibrationResult):
        raise RiskvetError(problem(f"{func}(result=)", allowed="a CalibrationResult", received=type(result).__name__))
    m = _check_min_count(min_count, func)
    n = np.asarray(result.group_n, dtype=float)
    events = np.asarray(result.group_events, dtype=float)
    counts = np.column_stack([events, n - events])
    runs = _runs(counts, lambda total: bool(np.all(total >= m))) if m > 1 else [[i] for i in range(n.shape[0])]
    merged_n = np.array([n[r].sum() for r in runs])
    merged_events = np.array([events[r].sum() for r in runs])
    expected = np.array([(np.asarray(result.group_mean_predicted)[r] * n[r]).sum() for r in runs])
    lower, upper = _proportion_interval(merged_events, merged_n, _z(result.confidence), result.confidence, "wilson")
    with np.errstate(divide="ignore", invalid="ignore"):
        observed = merged_events / merged_n
        mean_predicted = expected / merged_n
    return MergedGroups(
        n=_frozen(merged_n, dtype=np.int64),
        events=_frozen(merged_events, dtype=np.int64),
        observed=_frozen(observed),
        observed_lower=_frozen(np.minimum(lower, observed)),
        observed_upper=_frozen(np.maximum(upper, observed)),
        mean_predicted=_frozen(mean_predicted),
        min_predicted=_frozen([np.asarray(result.group_min_predicted)[r].min() for r in runs]),
        max_predicted=_frozen([np.asarray(result.group_max_predicted)[r].max() for r in runs]),
        members=tuple(tuple(int(i) for i in r) for r in runs),
        min_count=m,
        confidence=float(result.confidence),
    )


def merge_bins(edges: Any, counts: Any, *, min_count: int) -> tuple[np.ndarray, np.ndarray]:
    """Merge adjacent histogram bins until every bin holds 0 or at least ``min_count`` people.

    Parameters
    ----------
    edges : array-like, shape (B + 1,)
        Bin edges, increasing.
    counts : array-like of int, shape (B,)
        People in each bin.
    min_count : int, keyword-only
        The smallest count a bin may show (``output.min_cell_count``).

    Returns
    -------
    edges, counts : ndarray
        The merged bins.  Runs of empty bins stay as they are; a bin holding
        1 to ``min_count - 1`` people is joined with the bins after it (empty
        ones included) until the run holds ``min_count``, and a small
        remainder at the top joins the last bin that holds people.  When all
        the bins together hold 1 to ``min_count - 1`` people, no bin can be
        shown and both arrays are empty.
    """
    func = "merge_bins"
    m = _check_min_count(min_count, func)
    e = np.asarray(edges, dtype=float)
    c = np.asarray(counts)
    if e.ndim != 1 or c.ndim != 1 or e.shape[0] != c.shape[0] + 1 or np.any(np.diff(e) <= 0):
        raise RiskvetError(problem(f"{func}(edges=, counts=)", allowed="B + 1 increasing edges and B counts", received=f"{e.shape[0]} edges, {c.shape[0]} counts"))
    if np.any(c < 0) or np.any(c % 1):
        raise RiskvetError(problem(f"{func}(counts=)", allowed="whole counts >= 0", received=c.tolist()))
    c = c.astype(np.int64)
    if 0 < c.sum() < m:
        return np.empty(0), np.empty(0, dtype=np.int64)
    runs: list[list[int]] = []
    current: list[int] = []
    for i, k in enumerate(c):
        if not current and k == 0:
            runs.append([i])  # an empty bin on its own shows nothing
            continue
        current.append(i)
        if c[current].sum() >= m:
            runs.append(current)
            current = []
    if current:
        last = max(j for j, r in enumerate(runs) if c[r].sum() > 0) if any(c[r].sum() > 0 for r in runs) else None
        if last is None:
            runs.append(current)
        else:
            runs[last:] = [[i for r in runs[last:] for i in r] + current]
    new_edges = np.array([e[r[0]] for r in runs] + [e[runs[-1][-1] + 1]])
    return new_edges, np.array([c[r].sum() for r in runs], dtype=np.int64)
