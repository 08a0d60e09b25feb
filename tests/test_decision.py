"""Tests of riskvet.measures.decision: hand-worked net benefit, statsmodels and scikit-learn references.

Tolerances: ``rel=1e-12`` (or ``abs=1e-12``) compares the same closed-form quantity computed in
a different order, so only floating-point rounding separates the two; wider tolerances are
explained beside their checks.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import statsmodels
from sklearn.metrics import confusion_matrix
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from riskvet.measures.decision import (
    net_benefit,
    ordinal_net_benefit,
    rule_net_benefit,
    threshold_for,
    threshold_table,
)
from riskvet.errors import DataError, RiskvetError

# A ten-patient case worked by hand from the formula of Vickers & Elkin
# (Med Decis Making 2006): NB = TP/n - FP/n * pt/(1 - pt); treat all = pi - (1 - pi) pt/(1 - pt).
Y10 = np.array([1, 1, 1, 0, 0, 0, 0, 0, 0, 1])
P10 = np.array([0.9, 0.6, 0.3, 0.5, 0.2, 0.1, 0.35, 0.05, 0.25, 0.15])


def test_net_benefit_worked_by_hand():
    res = net_benefit(Y10, P10, thresholds=[0.1, 0.25, 0.5])
    # pt = 0.10: positive (p >= 0.1) are all but 0.05 -> TP 4, FP 5: 4/10 - 5/10 * 1/9
    # pt = 0.25: positive 0.9, 0.6, 0.3 (events), 0.5, 0.35, 0.25 -> TP 3, FP 3: 0.3 - 0.3 * 1/3 = 0.2
    # pt = 0.50: positive 0.9, 0.6 (events), 0.5 -> TP 2, FP 1: 0.2 - 0.1 * 1 = 0.1
    np.testing.assert_allclose(res.true_positives, [4, 3, 2])
    np.testing.assert_allclose(res.false_positives, [5, 3, 1])
    np.testing.assert_allclose(res.net_benefit, [0.4 - 0.5 / 9, 0.2, 0.1], rtol=0, atol=1e-15)
    # treat all with prevalence 0.4: 0.4 - 0.6/9, 0.4 - 0.6/3 = 0.2, 0.4 - 0.6 = -0.2
    np.testing.assert_allclose(res.treat_all, [0.4 - 0.6 / 9, 0.2, -0.2], rtol=0, atol=1e-15)
    np.testing.assert_array_equal(res.treat_none, [0, 0, 0])
    assert res.prevalence == 0.4 and res.strategy == "model" and res.cut is None


def test_rule_net_benefit_worked_by_hand():
    rule = np.array([1, 1, 0, 1, 0, 0, 0, 0, 0, 0], dtype=bool)
    res = rule_net_benefit(Y10, rule, thresholds=[0.25, 0.5])
    # TP 2 (patients 1, 2), FP 1 (patient 4): 0.2 - 0.1 * 1/3 and 0.2 - 0.1 * 1.
    np.testing.assert_allclose(res.net_benefit, [0.2 - 0.1 / 3, 0.1], rtol=0, atol=1e-15)
    assert res.strategy == "rule"
    # 0/1 coding is accepted the same way.
    assert np.array_equal(rule_net_benefit(Y10, rule.astype(int), thresholds=[0.25]).net_benefit, res.net_benefit[:1])


def test_net_benefit_limits():
    # Treating everybody (all p above pt) gives the treat-all line; nobody positive gives 0
    # (Vickers & Elkin 2006, the two reference strategies).
    t = np.array([0.2, 0.4])
    everyone = net_benefit(Y10, np.full(10, 0.99), thresholds=t)
    np.testing.assert_allclose(everyone.net_benefit, everyone.treat_all, atol=1e-15)
    nobody = net_benefit(Y10, np.full(10, 0.01), thresholds=t)
    np.testing.assert_array_equal(nobody.net_benefit, [0, 0])


def test_ordinal_net_benefit_per_cut():
    rng = np.random.default_rng(4)
    prob = rng.dirichlet([1, 1, 1], 80)
    y = np.array([rng.choice(3, p=p) for p in prob])
    res = ordinal_net_benefit(y, prob, thresholds=[0.2, 0.4])
    assert [r.cut for r in res] == [0, 1]
    for j, r in enumerate(res):
        direct = net_benefit((y > j).astype(int), prob[:, j + 1 :].sum(axis=1), thresholds=[0.2, 0.4])
        np.testing.assert_allclose(r.net_benefit, direct.net_benefit, atol=1e-15)


def test_threshold_table_counts_match_sklearn_confusion_matrix():
    rng = np.random.default_rng(6)
    y = rng.integers(0, 2, 300)
    p = np.round(np.clip(rng.normal(0.3 + 0.3 * y, 0.2), 0, 1), 2)
    thresholds = [0.0, 0.25, 0.4, 0.55, 1.0]
    res = threshold_table(y, p, thresholds=thresholds)
    for i, t in enumerate(thresholds):
        # scikit-learn 1.9.1 confusion_matrix: [[tn, fp], [fn, tp]]
        tn, fp, fn, tp = confusion_matrix(y, (p >= t).astype(int), labels=[0, 1]).ravel()
        assert (res.tp[i], res.fp[i], res.fn[i], res.tn[i]) == (tp, fp, fn, tn)


@pytest.mark.parametrize("method,sm_method", [("wilson", "wilson"), ("clopper-pearson", "beta")])
def test_threshold_table_intervals_match_statsmodels(method, sm_method):
    rng = np.random.default_rng(7)
    y = rng.integers(0, 2, 200)
    p = np.clip(rng.normal(0.35 + 0.3 * y, 0.2), 0, 1)
    res = threshold_table(y, p, thresholds=[0.3, 0.5], confidence=0.9, interval=method)
    for i in range(2):
        tp, fp, fn, tn = res.tp[i], res.fp[i], res.fn[i], res.tn[i]
        for name, count, total in (("sensitivity", tp, tp + fn), ("specificity", tn, tn + fp), ("ppv", tp, tp + fp), ("npv", tn, tn + fn)):
            # statsmodels 0.15.0 proportion_confint, alpha = 1 - confidence; rel 1e-9 allows for
            # statsmodels computing the same closed forms in a different order
            lo, hi = proportion_confint(count, total, alpha=0.1, method=sm_method)
            assert getattr(res, f"{name}_lower")[i] == pytest.approx(lo, rel=1e-9), statsmodels.__version__
            assert getattr(res, f"{name}_upper")[i] == pytest.approx(hi, rel=1e-9)
            assert getattr(res, name)[i] == pytest.approx(count / total, rel=1e-12)


def test_likelihood_ratio_intervals_match_statsmodels_log_ratio():
    # LR+ = (TP/n1) / (FP/n0) is a ratio of two independent proportions; its log-method
    # interval (Simel, Samsa & Matchar, J Clin Epidemiol 1991) equals statsmodels 0.15.0
    # confint_proportions_2indep(compare="ratio", method="log").
    rng = np.random.default_rng(8)
    y = rng.integers(0, 2, 250)
    p = np.clip(rng.normal(0.35 + 0.3 * y, 0.2), 0, 1)
    res = threshold_table(y, p, thresholds=[0.45])
    tp, fp, fn, tn = res.tp[0], res.fp[0], res.fn[0], res.tn[0]
    lo, hi = confint_proportions_2indep(tp, tp + fn, fp, fp + tn, compare="ratio", method="log", alpha=0.05)
    assert (res.lr_positive_lower[0], res.lr_positive_upper[0]) == pytest.approx((lo, hi), rel=1e-9)
    lo, hi = confint_proportions_2indep(fn, tp + fn, tn, fp + tn, compare="ratio", method="log", alpha=0.05)
    assert (res.lr_negative_lower[0], res.lr_negative_upper[0]) == pytest.approx((lo, hi), rel=1e-9)
    assert res.lr_positive[0] == pytest.approx(res.sensitivity[0] / (1 - res.specificity[0]), rel=1e-12)


def test_threshold_table_degenerate_cells():
    res = threshold_table(Y10, P10, thresholds=[0.95, 0.0])
    # At 0.95 nobody is positive: PPV is 0/0 (nan), LR+ undefined; at 0 everybody is positive.
    assert np.isnan(res.ppv[0]) and np.isnan(res.lr_positive[0]) and np.isnan(res.ppv_lower[0])
    assert res.sensitivity[1] == 1.0 and res.specificity[1] == 0.0 and np.isnan(res.npv[1])
    json.dumps(res.to_dict(), allow_nan=False)
    frame = res.to_frame()
    assert len(frame) == 2 and frame["tp"].dtype == "int64"


def test_threshold_for_targets():
    # Sensitivity 0.75 = 3 of the 4 events; the highest threshold keeping it is 0.3.
    choice = threshold_for(Y10, P10, sensitivity=0.75)
    assert (choice.threshold, choice.sensitivity) == (0.3, 0.75)
    # At 0.3 the non-events 0.5 and 0.35 are positive: specificity 4/6.
    assert choice.specificity == pytest.approx(4 / 6, rel=1e-12)
    # Specificity 5/6 allows one positive non-event (0.5): the lowest such threshold is 0.5.
    choice = threshold_for(Y10, P10, specificity=5 / 6)
    assert choice.threshold == 0.5 and choice.sensitivity == 0.5
    # Specificity 1 allows no positive non-event: threshold 0.6 (above the non-event at 0.5).
    assert threshold_for(Y10, P10, specificity=1.0).threshold == 0.6
    assert threshold_for(Y10, P10, sensitivity=1.0).threshold == 0.15


def test_bad_input():
    with pytest.raises(RiskvetError, match=r"net_benefit\(thresholds=\).*strictly between 0 and 1"):
        net_benefit(Y10, P10, thresholds=[0.0, 0.5])
    with pytest.raises(RiskvetError, match=r"threshold_for\(sensitivity=, specificity=\).*exactly one"):
        threshold_for(Y10, P10)
    with pytest.raises(RiskvetError, match=r"threshold_for\(sensitivity=\).*\(0, 1\]"):
        threshold_for(Y10, P10, sensitivity=1.5)
    with pytest.raises(RiskvetError, match=r"threshold_table\(interval=\)"):
        threshold_table(Y10, P10, thresholds=[0.5], interval="exact")
    with pytest.raises(DataError, match=r"rule_positive=\).*booleans or 0/1"):
        rule_net_benefit(Y10, np.arange(10), thresholds=[0.5])
    with pytest.raises(DataError, match="both events and non-events"):
        threshold_table(np.zeros(4, int), [0.1, 0.2, 0.3, 0.4], thresholds=[0.5])
    nb = net_benefit(Y10, P10, thresholds=[0.2])
    json.dumps(nb.to_dict(), allow_nan=False)
    assert set(nb.to_frame()["strategy"]) == {"model", "treat all", "treat none"}


def test_ordinal_net_benefit_bad_input():
    with pytest.raises(DataError, match=r"ordinal_net_benefit\(y=\).*levels 0 .. 2"):
        ordinal_net_benefit([0, 1, 3], np.full((3, 3), 1 / 3), thresholds=[0.2])
    with pytest.raises(RiskvetError, match=r"ordinal_net_benefit\(thresholds=\)"):
        ordinal_net_benefit([0, 1, 2], np.full((3, 3), 1 / 3), thresholds=[1.0])


def test_wilson_limits_are_exact_at_zero_and_all_events():
    """Wilson (1927): with 0 of m events the lower limit is exactly 0, with m of m the upper is exactly 1."""
    from riskvet.measures.decision import _proportion_interval

    lower, upper = _proportion_interval(np.array([0.0, 7.0]), np.array([7.0, 7.0]), 1.959963984540054, 0.95, "wilson")
    assert lower[0] == 0.0 and upper[1] == 1.0
    assert 0.0 < upper[0] < 1.0 and 0.0 < lower[1] < 1.0
