"""Decisions at risk thresholds: classification measures and net benefit.

A patient is classified positive at threshold t when ``prob >= t``.  For an
ordered outcome, apply these functions to one cut (see
:func:`riskvet.discrimination.dichotomise`) or use
:func:`ordinal_net_benefit`, which returns one decision curve per cut.

Sensitivity and specificity need events and non-events, so
:func:`threshold_table` and :func:`threshold_for` raise
:class:`riskvet.errors.DataError` without both (the package-wide rule); net
benefit is defined for any prevalence and is computed as it is.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

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
from ..errors import DataError, RiskvetError, problem

__all__ = [
    "ThresholdTable",
    "ThresholdChoice",
    "NetBenefitResult",
    "threshold_table",
    "threshold_for",
    "net_benefit",
    "ordinal_net_benefit",
    "rule_net_benefit",
]

_INTERVALS = ("wilson", "clopper-pearson")


def _check_thresholds(thresholds: Any, func: str, *, open_unit: bool) -> np.ndarray:
    arr = np.atleast_1d(np.asarray(thresholds, dtype=float))
    allowed = "numbers strictly between 0 and 1" if open_unit else "numbers in [0, 1]"
    if arr.ndim != 1 or arr.size == 0:
        raise RiskvetError(problem(f"{func}(thresholds=)", allowed=f"a non-empty 1-D sequence of {allowed}", received=f"shape {arr.shape}"))
    bad = ~np.isfinite(arr) | ((arr <= 0) | (arr >= 1) if open_unit else (arr < 0) | (arr > 1))
    if np.any(bad):
        raise RiskvetError(problem(f"{func}(thresholds=)", allowed=allowed, received=arr[bad][:3].tolist()))
    return arr


def _proportion_interval(count: np.ndarray, total: np.ndarray, z: float, conf: float, method: str) -> tuple[np.ndarray, np.ndarray]:
    """Binomial confidence limits, vectorised; ``nan`` where total is 0."""
    count = np.asarray(count, dtype=float)
    total = np.asarray(total, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "wilson":
            p = count / total
            denom = 1.0 + z * z / total
            centre = (p + z * z / (2.0 * total)) / denom
            half = z / denom * np.sqrt(p * (1.0 - p) / total + z * z / (4.0 * total * total))
            # at 0 and at m events the Wilson limits are exactly 0 and 1; rounding
            # would otherwise leave them a hair inside and the estimate outside
            lower = np.where(count <= 0, 0.0, centre - half)
            upper = np.where(count >= total, 1.0, centre + half)
        else:
            alpha = 1.0 - conf
            lower = np.where(count > 0, stats.beta.ppf(alpha / 2.0, count, total - count + 1.0), 0.0)
            upper = np.where(count < total, stats.beta.ppf(1.0 - alpha / 2.0, count + 1.0, total - count), 1.0)
    empty = total <= 0
    lower = np.where(empty, np.nan, np.clip(lower, 0.0, 1.0))
    upper = np.where(empty, np.nan, np.clip(upper, 0.0, 1.0))
    return lower, upper


def _ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


def _counts(event: np.ndarray, p: np.ndarray, thresholds: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """TP, FP, FN, TN at each threshold (positive: p >= t), in O((n + T) log n)."""
    order = np.sort(p)
    ev_sorted = np.sort(p[event])
    n1 = ev_sorted.shape[0]
    n = order.shape[0]
    positives = n - np.searchsorted(order, thresholds, side="left")
    tp = n1 - np.searchsorted(ev_sorted, thresholds, side="left")
    fp = positives - tp
    fn = n1 - tp
    tn = (n - n1) - fp
    return tp.astype(float), fp.astype(float), fn.astype(float), tn.astype(float)


@dataclass(frozen=True)
class ThresholdTable:
    """Classification measures at a set of risk thresholds (positive: prob >= threshold).

    Attributes
    ----------
    threshold : ndarray
        The thresholds, as given.
    tp, fp, fn, tn : ndarray
        True/false positives and negatives at each threshold.
    sensitivity, specificity, ppv, npv : ndarray
        TP/(TP+FN), TN/(TN+FP), TP/(TP+FP), TN/(TN+FN); ``nan`` for 0/0.
    sensitivity_lower, sensitivity_upper, specificity_lower, specificity_upper,
    ppv_lower, ppv_upper, npv_lower, npv_upper : ndarray
        Binomial confidence limits (``interval`` method).
    lr_positive, lr_negative : ndarray
        sensitivity / (1 - specificity) and (1 - sensitivity) / specificity.
    lr_positive_lower, lr_positive_upper, lr_negative_lower, lr_negative_upper : ndarray
        Log-method confidence limits; ``nan`` when a count in the formula is 0.
    confidence : float
        Confidence level.
    interval : str
        ``"wilson"`` or ``"clopper-pearson"``.
    n_events, n_nonevents : int
        Patients with and without the event.
    """

    threshold: np.ndarray
    tp: np.ndarray
    fp: np.ndarray
    fn: np.ndarray
    tn: np.ndarray
    sensitivity: np.ndarray
    sensitivity_lower: np.ndarray
    sensitivity_upper: np.ndarray
    specificity: np.ndarray
    specificity_lower: np.ndarray
    specificity_upper: np.ndarray
    ppv: np.ndarray
    ppv_lower: np.ndarray
    ppv_upper: np.ndarray
    npv: np.ndarray
    npv_lower: np.ndarray
    npv_upper: np.ndarray
    lr_positive: np.ndarray
    lr_positive_lower: np.ndarray
    lr_positive_upper: np.ndarray
    lr_negative: np.ndarray
    lr_negative_lower: np.ndarray
    lr_negative_upper: np.ndarray
    confidence: float
    interval: str
    n_events: int
    n_nonevents: int

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """One row per threshold; one column per count, measure and limit."""
        columns = [name for name in self.__dataclass_fields__ if name not in ("confidence", "interval", "n_events", "n_nonevents")]
        frame = pd.DataFrame({name: getattr(self, name) for name in columns})
        for name in ("tp", "fp", "fn", "tn"):
            # nullable integers: a count a record suppresses (riskvet.reporting.classification) is missing
            frame[name] = frame[name].astype("Int64" if frame[name].isna().any() else "int64")
        return frame


@dataclass(frozen=True)
class ThresholdChoice:
    """The threshold that meets a target sensitivity or specificity.

    Attributes
    ----------
    target : str
        ``"sensitivity"`` or ``"specificity"``.
    target_value : float
        The value asked for.
    threshold : float
        For a sensitivity target, the largest observed predicted value t with
        sensitivity(t) >= target (so specificity is as high as possible); for
        a specificity target, the smallest observed value, or ``inf`` (nobody
        positive), with specificity(t) >= target.
    sensitivity, specificity : float
        Achieved at ``threshold``.
    """

    target: str
    target_value: float
    threshold: float
    sensitivity: float
    specificity: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields (an ``inf`` threshold becomes None)."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """One-row table of the fields."""
        return pd.DataFrame([{name: getattr(self, name) for name in self.__dataclass_fields__}])


@dataclass(frozen=True)
class NetBenefitResult:
    """Net benefit of a model or rule against treating all and treating none.

    Attributes
    ----------
    threshold : ndarray
        Threshold probabilities pt (each in (0, 1)).
    net_benefit : ndarray
        TP/n - FP/n * pt / (1 - pt) for the strategy (model or rule).
    treat_all : ndarray
        prevalence - (1 - prevalence) * pt / (1 - pt).
    treat_none : ndarray
        Zero at every threshold.
    true_positives, false_positives : ndarray
        TP and FP of the strategy at each threshold.
    prevalence : float
        Proportion of events.
    n : int
        Patients.
    strategy : str
        ``"model"`` or ``"rule"``.
    cut : int or None
        For an ordered outcome, the cut j (event Y > j); ``None`` for binary.
    """

    threshold: np.ndarray
    net_benefit: np.ndarray
    treat_all: np.ndarray
    treat_none: np.ndarray
    true_positives: np.ndarray
    false_positives: np.ndarray
    prevalence: float
    n: int
    strategy: str
    cut: int | None

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """Tidy table: threshold, strategy, net_benefit (the strategy, treat all, treat none)."""
        parts = []
        for label, values in ((self.strategy, self.net_benefit), ("treat all", self.treat_all), ("treat none", self.treat_none)):
            parts.append(pd.DataFrame({"threshold": self.threshold, "strategy": label, "net_benefit": values}))
        frame = pd.concat(parts, ignore_index=True)
        frame["cut"] = self.cut
        return frame


def threshold_table(
    y: Any,
    prob: Any,
    *,
    thresholds: Any,
    confidence: float = 0.95,
    interval: str = "wilson",
) -> ThresholdTable:
    """Sensitivity, specificity, predictive values and likelihood ratios at thresholds.

    Parameters
    ----------
    y : array-like of {0, 1}, shape (n,)
        Observed outcome.
    prob : array-like of float, shape (n,)
        Predicted event probability (or any score on [0, 1]).
    thresholds : sequence of float
        Thresholds in [0, 1]; positive means ``prob >= threshold``.
    confidence : float, default 0.95
        Confidence level of all intervals.
    interval : {"wilson", "clopper-pearson"}, default "wilson"
        Binomial interval for the four proportions.

    Returns
    -------
    ThresholdTable

    Notes
    -----
    Wilson limits: (p + z^2/2m +/- z sqrt(p(1-p)/m + z^2/4m^2)) / (1 + z^2/m)
    for a proportion p of m.  Clopper–Pearson limits are beta quantiles.
    Likelihood ratios use the log method: SE(ln LR+) = sqrt(1/TP - 1/(TP+FN)
    + 1/FP - 1/(FP+TN)), SE(ln LR-) = sqrt(1/FN - 1/(TP+FN) + 1/TN - 1/(FP+TN)).

    References
    ----------
    .. [1] Wilson EB. Probable inference, the law of succession, and
       statistical inference. J Am Stat Assoc 1927;22(158):209-212.
    .. [2] Clopper CJ, Pearson ES. The use of confidence or fiducial limits
       illustrated in the case of the binomial. Biometrika 1934;26(4):404-413.
    .. [3] Simel DL, Samsa GP, Matchar DB. Likelihood ratios with confidence:
       sample size estimation for diagnostic test studies. J Clin Epidemiol
       1991;44(8):763-770.
    """
    func = "threshold_table"
    conf = _check_confidence(confidence, func)
    if interval not in _INTERVALS:
        raise RiskvetError(problem(f"{func}(interval=)", allowed=" or ".join(repr(m) for m in _INTERVALS), received=interval))
    y_arr = _as_binary(y, func)
    p = _as_prob_vector(prob, y_arr.shape[0], func)
    t = _check_thresholds(thresholds, func, open_unit=False)
    event = y_arr == 1
    _require_two_classes(event, func)
    tp, fp, fn, tn = _counts(event, p, t)
    z = _z(conf)
    n1, n0 = tp + fn, tn + fp
    out: dict[str, np.ndarray] = {}
    for name, num, den in (("sensitivity", tp, n1), ("specificity", tn, n0), ("ppv", tp, tp + fp), ("npv", tn, tn + fn)):
        lo, hi = _proportion_interval(num, den, z, conf, interval)
        out[name], out[f"{name}_lower"], out[f"{name}_upper"] = _ratio(num, den), lo, hi
    sens, spec = out["sensitivity"], out["specificity"]
    with np.errstate(divide="ignore", invalid="ignore"):
        lr_pos = np.where(spec < 1, sens / (1.0 - spec), np.inf)
        lr_neg = np.where(spec > 0, (1.0 - sens) / spec, np.inf)
        se_pos = np.sqrt(1 / tp - 1 / n1 + 1 / fp - 1 / n0)
        se_neg = np.sqrt(1 / fn - 1 / n1 + 1 / tn - 1 / n0)
        ok_pos = (tp > 0) & (fp > 0)
        ok_neg = (fn > 0) & (tn > 0)
        lr_pos_lo = np.where(ok_pos, np.exp(np.log(lr_pos) - z * se_pos), np.nan)
        lr_pos_hi = np.where(ok_pos, np.exp(np.log(lr_pos) + z * se_pos), np.nan)
        lr_neg_lo = np.where(ok_neg, np.exp(np.log(lr_neg) - z * se_neg), np.nan)
        lr_neg_hi = np.where(ok_neg, np.exp(np.log(lr_neg) + z * se_neg), np.nan)
    lr_pos = np.where((tp == 0) & (fp == 0), np.nan, lr_pos)
    lr_neg = np.where((fn == 0) & (tn == 0), np.nan, lr_neg)
    return ThresholdTable(
        threshold=_frozen(t),
        tp=_frozen(tp),
        fp=_frozen(fp),
        fn=_frozen(fn),
        tn=_frozen(tn),
        **{k: _frozen(v) for k, v in out.items()},
        lr_positive=_frozen(lr_pos),
        lr_positive_lower=_frozen(lr_pos_lo),
        lr_positive_upper=_frozen(lr_pos_hi),
        lr_negative=_frozen(lr_neg),
        lr_negative_lower=_frozen(lr_neg_lo),
        lr_negative_upper=_frozen(lr_neg_hi),
        confidence=conf,
        interval=interval,
        n_events=int(event.sum()),
        n_nonevents=int((~event).sum()),
    )


def threshold_for(y: Any, prob: Any, *, sensitivity: float | None = None, specificity: float | None = None) -> ThresholdChoice:
    """The threshold reaching a target sensitivity or a target specificity.

    Parameters
    ----------
    y : array-like of {0, 1}, shape (n,)
        Observed outcome.
    prob : array-like of float, shape (n,)
        Predicted event probability.
    sensitivity : float, optional
        Target sensitivity in (0, 1].  Give exactly one of the two targets.
    specificity : float, optional
        Target specificity in (0, 1].

    Returns
    -------
    ThresholdChoice

    Notes
    -----
    Candidate thresholds are the observed predicted values (and ``inf``,
    nobody positive).  Sensitivity falls and specificity rises as the
    threshold rises, so the choice is the highest threshold that keeps
    sensitivity at or above its target, or the lowest threshold that brings
    specificity to its target.  The achieved values are estimates on these
    data; use :func:`threshold_table` for their intervals.
    """
    func = "threshold_for"
    if (sensitivity is None) == (specificity is None):
        raise RiskvetError(problem(f"{func}(sensitivity=, specificity=)", allowed="exactly one of the two targets", received=(sensitivity, specificity)))
    name = "sensitivity" if sensitivity is not None else "specificity"
    target = sensitivity if sensitivity is not None else specificity
    if isinstance(target, bool) or not isinstance(target, (int, float, np.floating)) or not 0.0 < float(target) <= 1.0:
        raise RiskvetError(problem(f"{func}({name}=)", allowed="a number in (0, 1]", received=target))
    y_arr = _as_binary(y, func)
    p = _as_prob_vector(prob, y_arr.shape[0], func)
    event = y_arr == 1
    _require_two_classes(event, func)
    candidates = np.r_[np.inf, np.unique(p)[::-1]]  # decreasing thresholds
    tp, fp, fn, tn = _counts(event, p, candidates)
    sens = tp / (tp + fn)
    spec = tn / (tn + fp)
    # a small allowance so that a target written as 0.9 is met by 9/10 despite rounding
    eps = 1e-12
    if name == "sensitivity":
        idx = int(np.argmax(sens >= float(target) - eps))
    else:
        idx = int(np.nonzero(spec >= float(target) - eps)[0][-1])
    return ThresholdChoice(
        target=name,
        target_value=float(target),
        threshold=float(candidates[idx]),
        sensitivity=float(sens[idx]),
        specificity=float(spec[idx]),
    )


def _net_benefit(event: np.ndarray, positive_tp_fp: tuple[np.ndarray, np.ndarray], t: np.ndarray, strategy: str, cut: int | None) -> NetBenefitResult:
    tp, fp = positive_tp_fp
    n = event.shape[0]
    odds = t / (1.0 - t)
    prevalence = float(event.mean())
    return NetBenefitResult(
        threshold=_frozen(t),
        net_benefit=_frozen(tp / n - fp / n * odds),
        treat_all=_frozen(prevalence - (1.0 - prevalence) * odds),
        treat_none=_frozen(np.zeros_like(t)),
        true_positives=_frozen(tp),
        false_positives=_frozen(fp),
        prevalence=prevalence,
        n=int(n),
        strategy=strategy,
        cut=cut,
    )


def net_benefit(y: Any, prob: Any, *, thresholds: Any) -> NetBenefitResult:
    """Net benefit of treating patients with predicted risk at or above each threshold.

    Parameters
    ----------
    y : array-like of {0, 1}, shape (n,)
        Observed outcome.
    prob : array-like of float, shape (n,)
        Predicted event probability.
    thresholds : sequence of float
        Threshold probabilities pt, each strictly between 0 and 1.

    Returns
    -------
    NetBenefitResult

    Notes
    -----
    NB(pt) = TP/n - FP/n * pt / (1 - pt), with positive meaning prob >= pt.
    Treat all: NB = pi - (1 - pi) pt / (1 - pt), pi the prevalence.  Treat
    none: NB = 0.  The weight pt / (1 - pt) is the harm of a false positive
    relative to the benefit of a true positive implied by choosing pt.

    References
    ----------
    .. [1] Vickers AJ, Elkin EB. Decision curve analysis: a novel method for
       evaluating prediction models. Medical Decision Making
       2006;26(6):565-574.
    """
    func = "net_benefit"
    y_arr = _as_binary(y, func)
    p = _as_prob_vector(prob, y_arr.shape[0], func)
    t = _check_thresholds(thresholds, func, open_unit=True)
    event = y_arr == 1
    tp, fp, _, _ = _counts(event, p, t)
    return _net_benefit(event, (tp, fp), t, "model", None)


def ordinal_net_benefit(y: Any, prob: Any, *, thresholds: Any) -> tuple[NetBenefitResult, ...]:
    """Net benefit for each cut Y > j of an ordered outcome.

    Parameters
    ----------
    y : array-like of int, shape (n,)
        Outcome levels 0 .. K-1.
    prob : array-like of float, shape (n, K)
        Predicted level probabilities.
    thresholds : sequence of float
        Threshold probabilities for P(Y > j), each strictly between 0 and 1.

    Returns
    -------
    tuple of NetBenefitResult
        One per cut j = 0 .. K-2, with ``cut`` set.

    References
    ----------
    .. [1] Vickers AJ, Elkin EB. Decision curve analysis: a novel method for
       evaluating prediction models. Medical Decision Making
       2006;26(6):565-574.
    """
    func = "ordinal_net_benefit"
    y_arr = _as_outcome(y, func)
    matrix = _as_prob_matrix(prob, y_arr.shape[0], func)
    _as_outcome(y_arr, func, n_levels=matrix.shape[1])
    t = _check_thresholds(thresholds, func, open_unit=True)
    cut_p = _cut_probs(matrix)
    out = []
    for j in range(matrix.shape[1] - 1):
        event = y_arr > j
        tp, fp, _, _ = _counts(event, cut_p[:, j], t)
        out.append(_net_benefit(event, (tp, fp), t, "model", j))
    return tuple(out)


def rule_net_benefit(y: Any, rule_positive: Any, *, thresholds: Any) -> NetBenefitResult:
    """Net benefit of treating the patients an existing rule calls positive.

    Parameters
    ----------
    y : array-like of {0, 1}, shape (n,)
        Observed outcome.
    rule_positive : array-like of bool or {0, 1}, shape (n,)
        The rule's classification (for a graded rule, its positive category
        or categories).
    thresholds : sequence of float
        Threshold probabilities pt at which to weigh the rule's false
        positives, each strictly between 0 and 1.

    Returns
    -------
    NetBenefitResult
        With ``strategy = "rule"``; TP and FP do not change with pt, only
        their weighting does.

    References
    ----------
    .. [1] Vickers AJ, Elkin EB. Decision curve analysis: a novel method for
       evaluating prediction models. Medical Decision Making
       2006;26(6):565-574.
    """
    func = "rule_net_benefit"
    y_arr = _as_binary(y, func)
    rule = np.asarray(rule_positive)
    if rule.ndim != 1 or rule.shape[0] != y_arr.shape[0]:
        raise DataError(problem(f"{func}(rule_positive=)", allowed=f"a 1-D array of length {y_arr.shape[0]}", received=f"shape {rule.shape}"))
    if rule.dtype != bool:
        values = rule.astype(float) if np.issubdtype(rule.dtype, np.number) else None
        if values is None or not np.all(np.isin(values, (0.0, 1.0))):
            raise DataError(problem(f"{func}(rule_positive=)", allowed="booleans or 0/1", received=f"values such as {np.unique(rule)[:4].tolist()}"))
        rule = values == 1.0
    t = _check_thresholds(thresholds, func, open_unit=True)
    event = y_arr == 1
    tp = np.full(t.shape, float(np.count_nonzero(rule & event)))
    fp = np.full(t.shape, float(np.count_nonzero(rule & ~event)))
    return _net_benefit(event, (tp, fp), t, "rule", None)
