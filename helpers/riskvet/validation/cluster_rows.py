"""One frozen model's measures in one group of people (a left-out cluster, a validation cohort), with standard errors.

:func:`cluster_measures` gives, per cut of the outcome, C with DeLong's
standard error, calibration-in-the-large and the calibration slope with
their likelihood standard errors, O/E with the binomial standard error of
log O/E, and net benefit at the study's thresholds with its multinomial
standard error: the rows that internal-external cross-validation and the
pooling over validation cohorts or over imputations combine
(:mod:`riskvet.validation.iecv`, :mod:`riskvet.validation.imputed_measures`).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np
from scipy import stats

from .._jsonable import to_jsonable
from .pooling import log_oe_from_counts

__all__ = ["MEASURES", "ClusterMeasure", "cluster_measures"]


#: Measures of every left-out cluster: key -> (label, pooling scale, ideal value).
MEASURES: dict[str, tuple[str, str, float]] = {
    "c": ("C (AUC)", "logit", 1.0),
    "calibration_in_the_large": ("calibration-in-the-large", "identity", 0.0),
    "calibration_slope": ("calibration slope", "identity", 1.0),
    "oe_ratio": ("observed/expected ratio", "log", 1.0),
    "net_benefit": ("net benefit", "identity", math.nan),
}


@dataclass(frozen=True)
class ClusterMeasure:
    """One measure in one left-out cluster, at one cut (and threshold).

    Attributes
    ----------
    cluster : str
        The cluster's label.
    measure : str
        A key of :data:`MEASURES`.
    cut : int
        The cut j (event: Y > j).
    threshold : float
        The risk threshold of a net benefit; NaN for the other measures.
    estimate, se : float
        The measure and its standard error on its own scale (NaN when not
        estimated).
    lower, upper : float
        Its confidence interval: Wald on the pooling scale, back-transformed.
    reason : str
        Why it was not estimated (empty when it was).
    """

    cluster: str
    measure: str
    cut: int
    threshold: float
    estimate: float
    se: float
    lower: float
    upper: float
    reason: str = ""

    @property
    def estimated(self) -> bool:
        return not self.reason

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


def _wald(estimate: float, se: float, scale: str, z: float) -> tuple[float, float]:
    """Wald limits built on the pooling scale and returned to the measure's scale."""
    if not (math.isfinite(estimate) and math.isfinite(se)):
        return math.nan, math.nan
    if scale == "logit":
        centre, half = math.log(estimate / (1.0 - estimate)), z * se / (estimate * (1.0 - estimate))
        return 1.0 / (1.0 + math.exp(-(centre - half))), 1.0 / (1.0 + math.exp(-(centre + half)))
    if scale == "log":
        centre, half = math.log(estimate), z * se / estimate
        return math.exp(centre - half), math.exp(centre + half)
    return estimate - z * se, estimate + z * se


def _row(cluster: str, measure: str, cut: int, estimate: float, se: float, z: float, *, threshold: float = math.nan,
         reason: str = "") -> ClusterMeasure:
    if not reason and not (math.isfinite(estimate) and math.isfinite(se) and se > 0):
        reason = "no standard error could be estimated in this cluster"
    if reason:
        return ClusterMeasure(cluster, measure, cut, threshold, math.nan, math.nan, math.nan, math.nan, reason)
    lower, upper = _wald(estimate, se, MEASURES[measure][1], z)
    return ClusterMeasure(cluster, measure, cut, threshold, float(estimate), float(se), lower, upper)


def _net_benefit_rows(cluster: str, event: np.ndarray, p: np.ndarray, cut: int, thresholds: Sequence[float],
                      z: float) -> list[ClusterMeasure]:
    """Net benefit at each threshold with the multinomial standard error (positive: p >= t)."""
    from ..measures.decision import net_benefit

    if not len(thresholds):
        return []
    n = event.size
    curve = net_benefit(event.astype(int), p, thresholds=list(thresholds))  # its counts (positive: p >= t) and estimate
    rows = []
    for t, nb, tp, fp in zip(curve.threshold.tolist(), curve.net_benefit, curve.true_positives, curve.false_positives):
        a, b = float(tp) / n, float(fp) / n
        odds = t / (1.0 - t)
        # var(a - odds b) with (a, b) multinomial shares: [a(1-a) + odds^2 b(1-b) + 2 odds a b] / n
        var = (a * (1.0 - a) + odds**2 * b * (1.0 - b) + 2.0 * odds * a * b) / n
        # nobody at or above t: net benefit is exactly 0 with no sampling variance, so it cannot be weighted in the pooling
        reason = "" if var > 0 else f"no one in this cluster has a predicted risk at or above {t:g}"
        rows.append(_row(cluster, "net_benefit", cut, float(nb), math.sqrt(var), z, threshold=float(t), reason=reason))
    return rows


def cluster_measures(cluster: str, y: np.ndarray, prob: np.ndarray, *, thresholds: dict[int, Sequence[float]],
                     min_events: int, confidence: float = 0.95) -> list[ClusterMeasure]:
    """Every measure of one left-out cluster, at every cut.

    Parameters
    ----------
    cluster : str
        Its label.
    y : array of int, shape (n,)
        Outcome codes of its people (one row per person).
    prob : array, shape (n, K)
        Their predicted level probabilities.
    thresholds : dict of int to sequence of float
        The study's risk thresholds by cut.
    min_events : int
        Fewest people on each side of a cut for that cut's measures.
    confidence : float
        Level of the per-cluster intervals.

    Returns
    -------
    list of ClusterMeasure
        Estimated measures, and the others with their reasons.
    """
    from ..measures.calibration import calibration
    from ..measures.discrimination import concordance, dichotomise

    z = float(stats.norm.ppf(0.5 + confidence / 2))
    K = prob.shape[1]
    rows: list[ClusterMeasure] = []
    for j in range(K - 1):
        y_cut, p_cut = dichotomise(y, prob, cut=j)
        event = np.asarray(y_cut, dtype=bool)
        n_event, n_non = int(event.sum()), int((~event).sum())
        cut_thresholds = tuple(thresholds.get(j, ()))
        if min(n_event, n_non) < min_events:
            # the reason names the rule, never the small count itself (a record shows no count below min_cell_count)
            reason = f"fewer than {min_events} people on one side of this cut (internal_external.min_events)"
            keys = [(m, math.nan) for m in MEASURES if m != "net_benefit"] + [("net_benefit", t) for t in cut_thresholds]
            rows += [_row(cluster, m, j, math.nan, math.nan, z, threshold=t, reason=reason) for m, t in keys]
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the cluster's own troubles show as reasons, not as warnings on the page
            c = concordance(y_cut, p_cut)
            cal = calibration(y_cut, p_cut, confidence=confidence)
        c_reason = "" if 0.0 < c.estimate < 1.0 else f"C of {c.estimate:g} in this cluster: not on the logit scale"
        rows.append(_row(cluster, "c", j, c.estimate, c.se, z, reason=c_reason))
        rows.append(_row(cluster, "calibration_in_the_large", j, cal.calibration_in_the_large, cal.calibration_in_the_large_se, z))
        rows.append(_row(cluster, "calibration_slope", j, cal.slope, cal.slope_se, z, reason=cal.slope_undefined))
        observed, expected = float(n_event), float(np.sum(p_cut))
        log_ratio, log_var = log_oe_from_counts([observed], [expected], n=[float(event.size)])
        oe = float(np.exp(log_ratio[0]))
        rows.append(_row(cluster, "oe_ratio", j, oe, oe * math.sqrt(float(log_var[0])), z))
        rows += _net_benefit_rows(cluster, event, np.asarray(p_cut, dtype=float), j, cut_thresholds, z)
    return rows
