"""Discrimination: concordance (AUC), its DeLong variance, ROC points, ordinal measures.

All functions here rank patients; none looks at the scale of the predictions.
Outcome levels are coded 0 .. K-1.  For binary outcomes ``y`` is 0/1 and
``score`` (or ``prob``) is any real score where higher means "more likely an
event".  For ordered outcomes ``prob`` is the n x K matrix of predicted level
probabilities; "cut j" is the split Y > j versus Y <= j (j = 0 .. K-2) and
its predicted probability is ``prob[:, j+1:].sum(axis=1)``.

Degenerate data: every measure that needs both an event and a non-event (or
two outcome levels) raises :class:`riskvet.errors.DataError` when one of them
is absent.  This one behaviour holds across :mod:`riskvet.metrics`.  The
input checks are those of :mod:`~riskvet.measures._checks`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import special, stats

from ..errors import DataError, RiskvetError, problem
from ._checks import (
    _as_binary,
    _as_outcome,
    _as_prob_matrix,
    _as_score,
    _as_weights,
    _check_confidence,
    _cut_probs,
    _fields_dict,
    _frozen,
    _require_two_classes,
    _z,
)

__all__ = [
    "ConcordanceResult",
    "ConcordanceComparison",
    "RocCurveResult",
    "OrdinalDiscrimination",
    "concordance",
    "compare_concordance",
    "roc_curve",
    "ordinal_discrimination",
    "dichotomise",
]


def dichotomise(y: Any, prob: Any, *, cut: int) -> tuple[np.ndarray, np.ndarray]:
    """Binary outcome and event probability of one cut of an ordered outcome.

    Parameters
    ----------
    y : array-like of int, shape (n,)
        Outcome levels 0 .. K-1.
    prob : array-like, shape (n, K)
        Predicted level probabilities.
    cut : int
        Cut index j in 0 .. K-2; the event is Y > j.

    Returns
    -------
    y_cut : ndarray of int, shape (n,)
        1 where Y > j, else 0.
    prob_cut : ndarray of float, shape (n,)
        Predicted P(Y > j) = sum of ``prob[:, j+1:]``.
    """
    func = "dichotomise"
    y_arr = _as_outcome(y, func)
    matrix = _as_prob_matrix(prob, y_arr.shape[0], func)
    n_cuts = matrix.shape[1] - 1
    if isinstance(cut, bool) or not isinstance(cut, (int, np.integer)) or not 0 <= int(cut) < n_cuts:
        raise RiskvetError(problem(f"{func}(cut=)", allowed=f"an integer 0 .. {n_cuts - 1}", received=cut))
    _as_outcome(y_arr, func, n_levels=matrix.shape[1])
    return (y_arr > cut).astype(np.int64), _cut_probs(matrix)[:, int(cut)]


# ---------------------------------------------------------------------------
# Core computation: midrank placements (DeLong structural components)
# ---------------------------------------------------------------------------


def _placements(event: np.ndarray, score: np.ndarray, weights: np.ndarray | None) -> tuple[float, np.ndarray, float, float]:
    """AUC and DeLong placement values in O(n log n).

    Returns ``(auc, placement, w1, w0)`` where, for an event row,
    ``placement`` is V10 = share of non-event weight with a lower score plus
    half the share tied, and for a non-event row it is V01 = share of event
    weight with a higher score plus half the share tied.  ``w1``/``w0`` are
    the total event and non-event weights.
    """
    uniq, inv = np.unique(score, return_inverse=True)
    w = np.ones(score.shape[0]) if weights is None else weights
    m = uniq.shape[0]
    w1_level = np.bincount(inv, weights=w * event, minlength=m)
    w0_level = np.bincount(inv, weights=w * (~event), minlength=m)
    w1 = float(w1_level.sum())
    w0 = float(w0_level.sum())
    below0 = np.cumsum(w0_level) - w0_level
    above1 = w1 - np.cumsum(w1_level)
    v10_level = (below0 + 0.5 * w0_level) / w0
    v01_level = (above1 + 0.5 * w1_level) / w1
    auc = float(np.dot(w1_level, v10_level) / w1)
    placement = np.where(event, v10_level[inv], v01_level[inv])
    return auc, placement, w1, w0


def _delong_cov(event: np.ndarray, weights: np.ndarray | None, parts: list[tuple[float, np.ndarray, float, float]]) -> np.ndarray:
    """DeLong covariance matrix of several AUCs computed on the same rows."""
    w = np.ones(event.shape[0]) if weights is None else weights
    w1, w0 = parts[0][2], parts[0][3]
    aucs = np.array([p[0] for p in parts])
    placements = np.vstack([p[1] for p in parts])
    ev, ne = event, ~event
    d10 = placements[:, ev] - aucs[:, None]
    d01 = placements[:, ne] - aucs[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        s10 = (d10 * w[ev]) @ d10.T / (w1 - 1.0)
        s01 = (d01 * w[ne]) @ d01.T / (w0 - 1.0)
        cov = s10 / w1 + s01 / w0
    if w1 <= 1.0 or w0 <= 1.0:
        cov = np.full_like(cov, np.nan)
    return cov


def _auc_only(event: np.ndarray, score: np.ndarray) -> float:
    """Unweighted AUC (ties 1/2), no checks; the fast path for resampling."""
    return _placements(event, score, None)[0]


def _interval(estimate: float, se: float, z: float, transform: str | None) -> tuple[float, float]:
    if not np.isfinite(se):
        return float("nan"), float("nan")
    if transform == "logit":
        if estimate <= 0.0 or estimate >= 1.0:
            return float(estimate), float(estimate)
        centre = special.logit(estimate)
        half = z * se / (estimate * (1.0 - estimate))
        return float(special.expit(centre - half)), float(special.expit(centre + half))
    return float(estimate - z * se), float(estimate + z * se)


# ---------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class ConcordanceResult:
    """Concordance statistic (area under the ROC curve) with its DeLong interval.

    Attributes
    ----------
    estimate : float
        C = P(score of an event > score of a non-event) + 1/2 P(tie).
    se : float
        DeLong standard error; ``nan`` with fewer than two events or two
        non-events (in weight).
    lower, upper : float
        Confidence limits (plain Wald, or back-transformed from the logit scale).
    confidence : float
        Confidence level of the interval.
    transform : str
        ``"none"`` or ``"logit"``: the scale on which the interval was built.
    n_events, n_nonevents : float
        Number (total weight) of events and non-events.
    """

    estimate: float
    se: float
    lower: float
    upper: float
    confidence: float
    transform: str
    n_events: float
    n_nonevents: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """One-row table: measure, estimate, se, lower, upper, confidence, n_events, n_nonevents."""
        return pd.DataFrame([{"measure": "concordance", **self.to_dict()}])


@dataclass(frozen=True)
class ConcordanceComparison:
    """Paired comparison of two concordance statistics on the same patients.

    Attributes
    ----------
    estimate_a, estimate_b : float
        C of ``score_a`` and of ``score_b``.
    difference : float
        ``estimate_a - estimate_b``.
    se : float
        DeLong standard error of the difference.
    lower, upper : float
        Wald confidence limits of the difference.
    confidence : float
        Confidence level.
    correlation : float
        DeLong estimate of the correlation between the two C statistics.
    z : float
        ``difference / se``.
    pvalue : float
        Two-sided p-value of the hypothesis of equal C.
    n_events, n_nonevents : int
        Counts of events and non-events.
    """

    estimate_a: float
    estimate_b: float
    difference: float
    se: float
    lower: float
    upper: float
    confidence: float
    correlation: float
    z: float
    pvalue: float
    n_events: int
    n_nonevents: int

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """One-row table of all fields."""
        return pd.DataFrame([self.to_dict()])


@dataclass(frozen=True)
class RocCurveResult:
    """Points of an empirical ROC curve, from the strictest threshold to the loosest.

    A patient is test-positive when ``score >= threshold``.  The first point
    has ``threshold = inf`` (nobody positive: sensitivity 0, specificity 1),
    the last the smallest score (everybody positive).

    Attributes
    ----------
    threshold : ndarray
        Distinct score values in decreasing order, preceded by ``inf``.
    sensitivity : ndarray
        Share of events with ``score >= threshold`` (non-decreasing).
    specificity : ndarray
        Share of non-events with ``score < threshold`` (non-increasing).
    auc : float
        Area under these points by the trapezoid rule (equals C with ties 1/2).
    """

    threshold: np.ndarray
    sensitivity: np.ndarray
    specificity: np.ndarray
    auc: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields (``inf`` threshold becomes None)."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """Table with columns threshold, sensitivity, specificity, one row per point."""
        return pd.DataFrame({"threshold": self.threshold, "sensitivity": self.sensitivity, "specificity": self.specificity})


@dataclass(frozen=True)
class OrdinalDiscrimination:
    """Discrimination measures for an ordered outcome with K levels.

    Attributes
    ----------
    cuts : tuple of ConcordanceResult
        C of P(Y > j) for the split Y > j versus Y <= j, j = 0 .. K-2.
    average_cut_c : float
        Mean of the K-1 cut C statistics (average dichotomised C).
    ordinal_c : float
        Ordinal c-index: unweighted mean of the K(K-1)/2 pairwise-category C
        statistics of ``score``.
    pair_levels : tuple of (int, int)
        The level pairs (k, l), k < l, in the order of ``pair_c``.
    pair_c : ndarray
        C of ``score`` among patients with Y in {k, l}, with Y = l as event.
    pair_n : ndarray
        Number of patient pairs n_k * n_l behind each pairwise C.
    generalised_c : float
        Harrell's C over all patient pairs with different outcome levels
        (ties in ``score`` count 1/2); equals the ``pair_n``-weighted mean of
        ``pair_c``.
    somers_d : float
        Somers' D of score given outcome, ``2 * (generalised_c - 1/2)``.
    somers_d_se : float
        Asymptotic standard error of Somers' D (non-null, for the interval).
    somers_d_lower, somers_d_upper : float
        Wald confidence limits of Somers' D (clipped to [-1, 1]).
    somers_d_pvalue : float
        Two-sided p-value for D = 0, from the standard error under the null.
    confidence : float
        Confidence level.
    score : str
        ``"expected level"`` (sum_k k * prob_k) or ``"supplied"``.
    n : int
        Number of patients.
    level_counts : ndarray
        Patients at each outcome level 0 .. K-1.
    """

    cuts: tuple[ConcordanceResult, ...]
    average_cut_c: float
    ordinal_c: float
    pair_levels: tuple[tuple[int, int], ...]
    pair_c: np.ndarray
    pair_n: np.ndarray
    generalised_c: float
    somers_d: float
    somers_d_se: float
    somers_d_lower: float
    somers_d_upper: float
    somers_d_pvalue: float
    confidence: float
    score: str
    n: int
    level_counts: np.ndarray

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields (cut results as nested dicts)."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """Tidy table: one row per measure (cut C, average, ordinal, generalised C, Somers' D)."""
        rows = [
            {"measure": f"c_cut{j}", "estimate": c.estimate, "se": c.se, "lower": c.lower, "upper": c.upper}
            for j, c in enumerate(self.cuts)
        ]
        nan = float("nan")
        rows.append({"measure": "average_cut_c", "estimate": self.average_cut_c, "se": nan, "lower": nan, "upper": nan})
        rows.append({"measure": "ordinal_c", "estimate": self.ordinal_c, "se": nan, "lower": nan, "upper": nan})
        rows.append(
            {
                "measure": "generalised_c",
                "estimate": self.generalised_c,
                "se": self.somers_d_se / 2.0,
                "lower": (1.0 + self.somers_d_lower) / 2.0,
                "upper": (1.0 + self.somers_d_upper) / 2.0,
            }
        )
        rows.append({"measure": "somers_d", "estimate": self.somers_d, "se": self.somers_d_se, "lower": self.somers_d_lower, "upper": self.somers_d_upper})
        return pd.DataFrame(rows)


# ---------------------------------------------------------------------------
# Public functions
# ---------------------------------------------------------------------------


def concordance(
    y: Any,
    score: Any,
    *,
    confidence: float = 0.95,
    transform: str | None = None,
    weights: Any = None,
) -> ConcordanceResult:
    """Concordance statistic (AUC) of a score for a binary outcome, with DeLong interval.

    Parameters
    ----------
    y : array-like of {0, 1}, shape (n,)
        Observed outcome (1 = event).
    score : array-like of float, shape (n,)
        Any score where higher means more likely an event: a predicted
        probability, a linear predictor, a rule's points.
    confidence : float, default 0.95
        Confidence level of the interval.
    transform : {None, "logit"}, default None
        ``None`` builds the Wald interval C +/- z SE on the C scale (it may
        leave [0, 1] for C near 1); ``"logit"`` builds it on logit(C) with the
        delta-method SE, SE / (C (1 - C)), and back-transforms, so it stays
        inside (0, 1).
    weights : array-like of float, shape (n,), optional
        Frequency weights (a weight of 2 counts the patient twice; a weight of
        0 drops the row).  Non-integer weights are accepted and treated as
        counts, which makes the SE an approximation.

    Returns
    -------
    ConcordanceResult

    Raises
    ------
    DataError
        Bad ``y``/``score``/``weights``, or no events or no non-events.

    Notes
    -----
    With events i = 1 .. n1 and non-events j = 1 .. n0,
    C = (1 / n1 n0) sum_i sum_j psi(s_i, s_j), psi = 1, 1/2, 0 for
    s_i >, =, < s_j.  DeLong's structural components are
    V10_i = (1/n0) sum_j psi(s_i, s_j) and V01_j = (1/n1) sum_i psi(s_i, s_j),
    and Var(C) = S10 / n1 + S01 / n0 with S10 = sum_i (V10_i - C)^2 / (n1 - 1)
    and S01 likewise.  The components are computed from midranks in
    O(n log n).

    References
    ----------
    .. [1] DeLong ER, DeLong DM, Clarke-Pearson DL. Comparing the areas under
       two or more correlated receiver operating characteristic curves: a
       nonparametric approach. Biometrics 1988;44(3):837-845.
    .. [2] Hanley JA, McNeil BJ. The meaning and use of the area under a
       receiver operating characteristic (ROC) curve. Radiology
       1982;143(1):29-36.

    Examples
    --------
    The CT rating data of Hanley & McNeil (1982, Table 1): 58 normal and 51
    abnormal images rated 1 (definitely normal) to 5 (definitely abnormal).

    >>> import numpy as np
    >>> ratings = np.arange(1, 6)
    >>> score = np.r_[np.repeat(ratings, [33, 6, 6, 11, 2]), np.repeat(ratings, [3, 2, 2, 11, 33])]
    >>> y = np.r_[np.zeros(58, int), np.ones(51, int)]
    >>> round(concordance(y, score).estimate, 3)
    0.893
    """
    func = "concordance"
    conf = _check_confidence(confidence, func)
    if transform not in (None, "logit"):
        raise RiskvetError(problem(f"{func}(transform=)", allowed='None or "logit"', received=transform))
    y_arr = _as_binary(y, func)
    s = _as_score(score, y_arr.shape[0], func)
    w = _as_weights(weights, y_arr.shape[0], func)
    if w is not None:
        keep = w > 0
        y_arr, s, w = y_arr[keep], s[keep], w[keep]
        if y_arr.size == 0:
            raise DataError(problem(f"{func}(weights=)", allowed="at least one positive weight", received="all weights 0"))
    event = y_arr == 1
    _require_two_classes(event, func)
    parts = _placements(event, s, w)
    se = float(np.sqrt(_delong_cov(event, w, [parts])[0, 0]))
    auc = parts[0]
    lower, upper = _interval(auc, se, _z(conf), transform)
    return ConcordanceResult(
        estimate=auc,
        se=se,
        lower=lower,
        upper=upper,
        confidence=conf,
        transform="none" if transform is None else transform,
        n_events=parts[2],
        n_nonevents=parts[3],
    )


def compare_concordance(y: Any, score_a: Any, score_b: Any, *, confidence: float = 0.95) -> ConcordanceComparison:
    """Paired comparison of the C statistics of two scores on the same patients.

    Parameters
    ----------
    y : array-like of {0, 1}, shape (n,)
        Observed outcome.
    score_a, score_b : array-like of float, shape (n,)
        The two scores (for example a new model's probability and an existing
        rule's points).
    confidence : float, default 0.95
        Confidence level of the interval for the difference.

    Returns
    -------
    ConcordanceComparison

    Notes
    -----
    With the structural components of both scores, S10 and S01 become 2 x 2
    covariance matrices and
    Var(C_a - C_b) = L (S10 / n1 + S01 / n0) L', L = (1, -1).
    z = (C_a - C_b) / SE is referred to the standard normal.

    References
    ----------
    .. [1] DeLong ER, DeLong DM, Clarke-Pearson DL. Comparing the areas under
       two or more correlated receiver operating characteristic curves: a
       nonparametric approach. Biometrics 1988;44(3):837-845.
    """
    func = "compare_concordance"
    conf = _check_confidence(confidence, func)
    y_arr = _as_binary(y, func)
    a = _as_score(score_a, y_arr.shape[0], func, "score_a")
    b = _as_score(score_b, y_arr.shape[0], func, "score_b")
    event = y_arr == 1
    _require_two_classes(event, func)
    parts = [_placements(event, a, None), _placements(event, b, None)]
    cov = _delong_cov(event, None, parts)
    diff = parts[0][0] - parts[1][0]
    var = float(cov[0, 0] + cov[1, 1] - 2.0 * cov[0, 1])
    se = float(np.sqrt(max(var, 0.0)))
    with np.errstate(divide="ignore", invalid="ignore"):
        z = diff / se if se > 0 else (0.0 if diff == 0 else float(np.sign(diff)) * float("inf"))
        corr = float(cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1])) if cov[0, 0] > 0 and cov[1, 1] > 0 else float("nan")
    half = _z(conf) * se
    return ConcordanceComparison(
        estimate_a=parts[0][0],
        estimate_b=parts[1][0],
        difference=float(diff),
        se=se,
        lower=float(diff - half),
        upper=float(diff + half),
        confidence=conf,
        correlation=corr,
        z=float(z),
        pvalue=float(2.0 * stats.norm.sf(abs(z))),
        n_events=int(event.sum()),
        n_nonevents=int((~event).sum()),
    )


def roc_curve(y: Any, score: Any) -> RocCurveResult:
    """Empirical ROC curve: sensitivity and specificity at every distinct score.

    Parameters
    ----------
    y : array-like of {0, 1}, shape (n,)
        Observed outcome.
    score : array-like of float, shape (n,)
        Score; positive means ``score >= threshold``.

    Returns
    -------
    RocCurveResult

    References
    ----------
    .. [1] Hanley JA, McNeil BJ. The meaning and use of the area under a
       receiver operating characteristic (ROC) curve. Radiology
       1982;143(1):29-36.
    """
    func = "roc_curve"
    y_arr = _as_binary(y, func)
    s = _as_score(score, y_arr.shape[0], func)
    event = y_arr == 1
    _require_two_classes(event, func)
    uniq, inv = np.unique(s, return_inverse=True)
    n1_level = np.bincount(inv, weights=event.astype(float), minlength=uniq.shape[0])[::-1]
    n0_level = np.bincount(inv, weights=(~event).astype(float), minlength=uniq.shape[0])[::-1]
    tp = np.r_[0.0, np.cumsum(n1_level)]
    fp = np.r_[0.0, np.cumsum(n0_level)]
    sens = tp / tp[-1]
    fpr = fp / fp[-1]
    area = float(np.sum(np.diff(fpr) * (sens[1:] + sens[:-1]) / 2.0))
    return RocCurveResult(
        threshold=_frozen(np.r_[np.inf, uniq[::-1]]),
        sensitivity=_frozen(sens),
        specificity=_frozen(1.0 - fpr),
        auc=area,
    )


def _somers_d_table(levels: np.ndarray, score: np.ndarray, n_levels: int) -> tuple[float, float, float]:
    """Somers' D of score given outcome with its non-null and null ASE.

    Works on the K x m contingency table of outcome level by distinct score,
    with 2-D cumulative sums, so it costs O(K m).
    """
    uniq, inv = np.unique(score, return_inverse=True)
    m = uniq.shape[0]
    table = np.zeros((n_levels, m))
    np.add.at(table, (levels, inv), 1.0)
    n = float(table.sum())
    # cum[i, j] = sum of table[:i+1, :j+1]
    cum = table.cumsum(axis=0).cumsum(axis=1)
    pad = np.zeros((n_levels + 1, m + 1))
    pad[1:, 1:] = cum
    row_tot = table.sum(axis=1)
    # counts strictly below-left, below-right etc. with rows = outcome, columns = score
    below_left = pad[:-1, :-1]  # rows < i, cols < j
    rows_lt = pad[:-1, -1][:, None]  # rows < i, any col
    cols_lt = pad[-1, :-1][None, :]  # cols < j, any row
    rows_le = pad[1:, -1][:, None]
    cols_le = pad[-1, 1:][None, :]
    le_le = pad[1:, 1:]
    above_right = n - rows_le - cols_le + le_le  # rows > i, cols > j
    below_right = rows_lt - pad[:-1, 1:]  # rows < i, cols > j
    above_left = cols_lt - pad[1:, :-1]  # rows > i, cols < j
    concordant = below_left + above_right
    discordant = below_right + above_left
    p_minus_q = float(np.sum(table * (concordant - discordant)))
    w_r = n * n - float(np.sum(row_tot**2))
    d = p_minus_q / w_r
    diff = concordant - discordant
    ase1 = 2.0 / w_r**2 * np.sqrt(np.sum(table * (w_r * diff - p_minus_q * (n - row_tot[:, None])) ** 2))
    s0 = np.sum(table * diff**2) - p_minus_q**2 / n
    ase0 = 2.0 / w_r * np.sqrt(max(s0, 0.0))
    return d, float(ase1), float(ase0)


def _pairwise_c(levels: np.ndarray, score: np.ndarray, n_levels: int) -> tuple[list[tuple[int, int]], np.ndarray, np.ndarray]:
    pairs: list[tuple[int, int]] = []
    cs: list[float] = []
    ns: list[float] = []
    counts = np.bincount(levels, minlength=n_levels)
    for k in range(n_levels):
        for l in range(k + 1, n_levels):
            keep = (levels == k) | (levels == l)
            cs.append(_auc_only(levels[keep] == l, score[keep]))
            pairs.append((k, l))
            ns.append(float(counts[k]) * float(counts[l]))
    return pairs, np.array(cs), np.array(ns)


def ordinal_discrimination(
    y: Any,
    prob: Any,
    *,
    score: Any = None,
    confidence: float = 0.95,
    transform: str | None = None,
) -> OrdinalDiscrimination:
    """Discrimination of predicted level probabilities for an ordered outcome.

    Parameters
    ----------
    y : array-like of int, shape (n,)
        Outcome levels 0 .. K-1; every level must occur.
    prob : array-like of float, shape (n, K)
        Predicted level probabilities (rows sum to 1).  A vector is read as a
        binary outcome's event probability (K = 2).
    score : array-like of float, shape (n,), optional
        The single score ranked by the ordinal c-index, the generalised C and
        Somers' D.  Default: the expected level E[Y] = sum_k k * prob_k.  For
        a proportional-odds model E[Y] increases strictly with the linear
        predictor, so both give the same results; for other models pass the
        score to rank on here.
    confidence : float, default 0.95
        Confidence level.
    transform : {None, "logit"}, default None
        Interval scale for the cut C statistics (see :func:`concordance`).

    Returns
    -------
    OrdinalDiscrimination

    Raises
    ------
    DataError
        Bad input, or an outcome level with no patients.

    Notes
    -----
    Cut j: C of P(Y > j) for Y > j versus Y <= j, with DeLong SE.  Average
    dichotomised C: their unweighted mean.  Ordinal c-index:
    ORC = (2 / K(K-1)) sum_{k<l} C_kl, where C_kl is the C of ``score`` among
    patients at levels k and l, level l being the event.  Harrell's
    generalised C counts all patient pairs with different levels, a pair
    being concordant when the patient with the higher level has the higher
    score (ties in score 1/2): C_gen = sum n_k n_l C_kl / sum n_k n_l.
    Somers' D(score | Y) = (P - Q) / (n^2 - sum_k n_k^2) = 2 C_gen - 1, with
    P and Q twice the concordant and discordant pair counts; its asymptotic
    SE (for the interval) is
    ASE1 = (2 / w^2) sqrt(sum_ij n_ij (w (A_ij - D_ij) - (P - Q)(n - n_i.))^2)
    and under D = 0 (for the test) ASE0 = (2 / w) sqrt(sum_ij n_ij
    (A_ij - D_ij)^2 - (P - Q)^2 / n), w = n^2 - sum_i n_i.^2, over the table
    n_ij of outcome level i by distinct score j, with A_ij / D_ij the counts
    of cells concordant / discordant with cell ij.

    References
    ----------
    .. [1] Van Calster B, Van Belle V, Vergouwe Y, Steyerberg EW.
       Discrimination ability of prediction models for ordinal outcomes:
       relationships between existing measures and a new measure.
       Biometrical Journal 2012;54(5):674-685.
    .. [2] Harrell FE. Regression Modeling Strategies, 2nd ed. Springer, 2015.
    .. [3] Somers RH. A new asymmetric measure of association for ordinal
       variables. American Sociological Review 1962;27(6):799-811.
    .. [4] Brown MB, Benedetti JK. Sampling behavior of tests for correlation
       in two-way contingency tables. Journal of the American Statistical
       Association 1977;72(358):309-315.
    .. [5] DeLong ER, DeLong DM, Clarke-Pearson DL. Biometrics
       1988;44(3):837-845.
    """
    func = "ordinal_discrimination"
    conf = _check_confidence(confidence, func)
    if transform not in (None, "logit"):
        raise RiskvetError(problem(f"{func}(transform=)", allowed='None or "logit"', received=transform))
    y_arr = _as_outcome(y, func)
    matrix = _as_prob_matrix(prob, y_arr.shape[0], func)
    n_levels = matrix.shape[1]
    _as_outcome(y_arr, func, n_levels=n_levels)
    counts = np.bincount(y_arr, minlength=n_levels)
    if np.any(counts == 0):
        raise DataError(
            problem(f"{func}(y=)", allowed=f"patients at every level 0 .. {n_levels - 1}", received=f"level counts {counts.tolist()}")
        )
    if score is None:
        rank_score = matrix @ np.arange(n_levels, dtype=float)
        score_kind = "expected level"
    else:
        rank_score = _as_score(score, y_arr.shape[0], func)
        score_kind = "supplied"
    z = _z(conf)
    cut_p = _cut_probs(matrix)
    cuts = []
    for j in range(n_levels - 1):
        event = y_arr > j
        parts = _placements(event, cut_p[:, j], None)
        se = float(np.sqrt(_delong_cov(event, None, [parts])[0, 0]))
        lo, hi = _interval(parts[0], se, z, transform)
        cuts.append(ConcordanceResult(parts[0], se, lo, hi, conf, "none" if transform is None else transform, parts[2], parts[3]))
    pairs, pair_c, pair_n = _pairwise_c(y_arr, rank_score, n_levels)
    gen_c = float(np.dot(pair_c, pair_n) / pair_n.sum())
    d, ase1, ase0 = _somers_d_table(y_arr, rank_score, n_levels)
    pvalue = float(2.0 * stats.norm.sf(abs(d) / ase0)) if ase0 > 0 else float("nan")
    return OrdinalDiscrimination(
        cuts=tuple(cuts),
        average_cut_c=float(np.mean([c.estimate for c in cuts])),
        ordinal_c=float(np.mean(pair_c)),
        pair_levels=tuple(pairs),
        pair_c=_frozen(pair_c),
        pair_n=_frozen(pair_n),
        generalised_c=gen_c,
        somers_d=float(d),
        somers_d_se=ase1,
        somers_d_lower=float(max(-1.0, d - z * ase1)),
        somers_d_upper=float(min(1.0, d + z * ase1)),
        somers_d_pvalue=pvalue,
        confidence=conf,
        score=score_kind,
        n=int(y_arr.shape[0]),
        level_counts=_frozen(counts, dtype=np.int64),
    )
