"""Tests of riskvet.measures.discrimination against published values, reference libraries and slow counting.

Tolerances: ``rel=1e-12`` (or ``abs=1e-12``) compares the same closed-form quantity computed in
a different order, so only floating-point rounding separates the two; wider tolerances are
explained beside their checks.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy
import scipy.stats
import sklearn
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import roc_auc_score
from sklearn.metrics import roc_curve as sk_roc_curve

from riskvet.measures.discrimination import (
    compare_concordance,
    concordance,
    dichotomise,
    ordinal_discrimination,
    roc_curve,
)
from riskvet.errors import DataError, RiskvetError

# Hanley JA, McNeil BJ. Radiology 1982;143:29-36, Table 1 (recalled from memory,
# and checked here: the counts reproduce the published area 0.893 and, through
# the paper's own SE formula, the published SE 0.032).  CT images rated
# 1 = definitely normal .. 5 = definitely abnormal.
HM_NORMAL = [33, 6, 6, 11, 2]  # 58 normal images
HM_ABNORMAL = [3, 2, 2, 11, 33]  # 51 abnormal images


def hanley_mcneil_data():
    ratings = np.arange(1, 6)
    score = np.r_[np.repeat(ratings, HM_NORMAL), np.repeat(ratings, HM_ABNORMAL)].astype(float)
    y = np.r_[np.zeros(58, int), np.ones(51, int)]
    return y, score


def slow_components(y, score):
    """Obviously-correct O(n^2) DeLong structural components (DeLong et al., Biometrics 1988, section 2)."""
    x1 = score[y == 1]
    x0 = score[y == 0]
    psi = (x1[:, None] > x0[None, :]) + 0.5 * (x1[:, None] == x0[None, :])
    auc = psi.mean()
    v10 = psi.mean(axis=1)
    v01 = psi.mean(axis=0)
    return auc, v10, v01


def slow_delong_var(y, score):
    auc, v10, v01 = slow_components(y, score)
    return np.var(v10, ddof=1) / v10.size + np.var(v01, ddof=1) / v01.size


def slow_pair_c(y, score):
    """Harrell's C by counting every pair with different outcome levels (Harrell, RMS 2015)."""
    num = 0.0
    den = 0
    for i in range(len(y)):
        for j in range(len(y)):
            if y[i] > y[j]:
                den += 1
                num += 1.0 if score[i] > score[j] else 0.5 if score[i] == score[j] else 0.0
    return num / den


def test_hanley_mcneil_table1_area_and_se():
    y, score = hanley_mcneil_data()
    res = concordance(y, score)
    # Published area 0.893 (Hanley & McNeil 1982, Table 1; recalled from memory), printed to 3 decimals.
    assert res.estimate == pytest.approx(0.893, abs=5e-4)
    # Published SE 0.032 comes from the paper's exponential approximation; DeLong's
    # nonparametric SE differs (0.0307 here).  Tolerance 0.003 (about 10%) covers the
    # two methods' known disagreement on 5-point rating data; equality is not expected.
    assert res.se == pytest.approx(0.032, abs=0.003)
    assert abs(res.se - 0.0325) > 5e-4
    # The DeLong SE itself must equal the slow structural-components computation.
    assert res.se == pytest.approx(np.sqrt(slow_delong_var(y, score)), rel=1e-12)


def test_hanley_mcneil_standard_error_formula_reproduces_paper():
    # Guards the recalled counts: Hanley & McNeil (1982) eq. 1 with Q1 = A/(2-A),
    # Q2 = 2A^2/(1+A) must give the published SE 0.032 from these counts.
    y, score = hanley_mcneil_data()
    a = concordance(y, score).estimate
    q1, q2 = a / (2 - a), 2 * a * a / (1 + a)
    se = np.sqrt((a * (1 - a) + 50 * (q1 - a * a) + 57 * (q2 - a * a)) / (51 * 58))
    assert se == pytest.approx(0.032, abs=5e-4)


def test_matches_sklearn_roc_auc_score():
    # scikit-learn 1.9.1 roc_auc_score
    rng = np.random.default_rng(11)
    y = rng.integers(0, 2, 500)
    score = np.round(rng.normal(y * 0.8, 1.0), 1)  # rounding creates ties
    assert concordance(y, score).estimate == pytest.approx(roc_auc_score(y, score), rel=1e-12), sklearn.__version__


def test_roc_curve_matches_sklearn_points():
    # scikit-learn 1.9.1 roc_curve(drop_intermediate=False): same points; its first threshold is inf too.
    rng = np.random.default_rng(12)
    y = rng.integers(0, 2, 300)
    score = np.round(rng.normal(y, 1.0), 1)
    fpr, tpr, thr = sk_roc_curve(y, score, drop_intermediate=False)
    res = roc_curve(y, score)
    np.testing.assert_allclose(res.sensitivity, tpr, rtol=0, atol=1e-12)
    np.testing.assert_allclose(1 - res.specificity, fpr, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(res.threshold[1:], thr[1:])
    assert np.isinf(res.threshold[0])
    assert res.auc == pytest.approx(roc_auc_score(y, score), rel=1e-12)
    # Curve end points and monotonicity (common practice invariants).
    assert (res.sensitivity[0], res.specificity[0], res.sensitivity[-1], res.specificity[-1]) == (0, 1, 1, 0)
    assert np.all(np.diff(res.sensitivity) >= 0) and np.all(np.diff(res.specificity) <= 0)


def test_delong_variance_matches_structural_components():
    rng = np.random.default_rng(3)
    y = rng.integers(0, 2, 120)
    score = rng.integers(0, 8, 120).astype(float) + y
    res = concordance(y, score)
    assert res.se**2 == pytest.approx(slow_delong_var(y, score), rel=1e-12)


def test_logit_interval_is_back_transformed_wald_on_logit_scale():
    y, score = hanley_mcneil_data()
    res = concordance(y, score, transform="logit", confidence=0.9)
    z = scipy.stats.norm.ppf(0.95)
    lg = np.log(res.estimate / (1 - res.estimate))
    half = z * res.se / (res.estimate * (1 - res.estimate))
    assert res.lower == pytest.approx(1 / (1 + np.exp(-(lg - half))), rel=1e-12)
    assert res.upper == pytest.approx(1 / (1 + np.exp(-(lg + half))), rel=1e-12)
    assert 0 < res.lower < res.estimate < res.upper < 1
    plain = concordance(y, score, confidence=0.9)
    assert plain.upper - plain.estimate == pytest.approx(z * plain.se, rel=1e-12)


def test_compare_concordance_matches_slow_paired_delong():
    rng = np.random.default_rng(5)
    n = 150
    y = rng.integers(0, 2, n)
    a = rng.normal(y, 1.0)
    b = np.round(a + rng.normal(0, 1.0, n))  # correlated, tied
    res = compare_concordance(y, a, b)
    auc_a, v10a, v01a = slow_components(y, a)
    auc_b, v10b, v01b = slow_components(y, b)
    s10 = np.cov(np.vstack([v10a, v10b]))
    s01 = np.cov(np.vstack([v01a, v01b]))
    cov = s10 / v10a.size + s01 / v01a.size
    var = cov[0, 0] + cov[1, 1] - 2 * cov[0, 1]
    assert res.difference == pytest.approx(auc_a - auc_b, rel=1e-12)
    assert res.se == pytest.approx(np.sqrt(var), rel=1e-10)
    assert res.z == pytest.approx((auc_a - auc_b) / np.sqrt(var), rel=1e-10)
    assert res.pvalue == pytest.approx(2 * scipy.stats.norm.sf(abs(res.z)), rel=1e-12)
    assert res.correlation == pytest.approx(cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1]), rel=1e-10)


def test_compare_concordance_of_a_score_with_itself():
    y, score = hanley_mcneil_data()
    res = compare_concordance(y, score, score * 10 + 3)
    assert res.difference == 0 and res.se == pytest.approx(0, abs=1e-12) and res.pvalue == 1.0


# ---- property tests (invariants of a rank statistic; common practice) ----

scores = st.lists(st.integers(-4, 4), min_size=4, max_size=40)


@st.composite
def binary_data(draw):
    values = draw(scores)
    n = len(values)
    y = draw(st.lists(st.integers(0, 1), min_size=n, max_size=n).filter(lambda v: 0 < sum(v) < len(v)))
    return np.array(y), np.array(values, dtype=float)


@settings(max_examples=60, deadline=None)
@given(binary_data())
def test_property_equals_pair_counting_and_sklearn(data):
    y, score = data
    auc, _, _ = slow_components(y, score)
    assert concordance(y, score).estimate == pytest.approx(auc, abs=1e-12)
    assert concordance(y, score).estimate == pytest.approx(roc_auc_score(y, score), abs=1e-12)  # scikit-learn 1.9.1


@settings(max_examples=60, deadline=None)
@given(binary_data())
def test_property_monotone_transform_and_reversal(data):
    y, score = data
    base = concordance(y, score)
    transformed = concordance(y, np.exp(score / 2.0) * 3.0 - 7.0)
    reversed_ = concordance(y, -score)
    assert transformed.estimate == pytest.approx(base.estimate, abs=1e-12)
    assert transformed.se == pytest.approx(base.se, abs=1e-12, nan_ok=True)
    assert reversed_.estimate == pytest.approx(1 - base.estimate, abs=1e-12)
    # Swapping the event labels is the same as reversing the score.
    assert concordance(1 - y, score).estimate == pytest.approx(1 - base.estimate, abs=1e-12)


@settings(max_examples=40, deadline=None)
@given(binary_data(), st.data())
def test_property_weights_are_frequencies(data, draw):
    y, score = data
    w = np.array(draw.draw(st.lists(st.integers(1, 3), min_size=len(y), max_size=len(y))))
    expanded = concordance(np.repeat(y, w), np.repeat(score, w))
    weighted = concordance(y, score, weights=w)
    assert weighted.estimate == pytest.approx(expanded.estimate, abs=1e-12)
    assert weighted.se == pytest.approx(expanded.se, abs=1e-12, nan_ok=True)


def test_zero_weight_equals_dropping_the_row():
    y, score = hanley_mcneil_data()
    w = np.ones(y.size)
    w[[0, 5, 70]] = 0
    keep = w > 0
    assert concordance(y, score, weights=w) == concordance(y[keep], score[keep])


def test_all_ties_give_one_half():
    y = np.array([0, 1, 0, 1, 1])
    res = concordance(y, np.full(5, 0.3))
    assert res.estimate == 0.5


def test_perfect_separation():
    y = np.array([0, 0, 1, 1])
    res = concordance(y, [0.1, 0.2, 0.8, 0.9])
    assert res.estimate == 1.0 and res.se == 0.0


# ---- one-class and bad input: one documented behaviour (DataError) ----


@pytest.mark.parametrize("func", [lambda y, s: concordance(y, s), lambda y, s: roc_curve(y, s), lambda y, s: compare_concordance(y, s, s)])
def test_one_class_raises_data_error(func):
    with pytest.raises(DataError, match="both events and non-events"):
        func(np.ones(5, int), np.arange(5.0))


def test_bad_input_messages_name_parameter_allowed_and_received():
    with pytest.raises(DataError, match=r"concordance\(y=\).*binary.*received"):
        concordance([0, 1, 2], [1.0, 2.0, 3.0])
    with pytest.raises(DataError, match=r"concordance\(score=\).*length 3"):
        concordance([0, 1, 1], [1.0, 2.0])
    with pytest.raises(DataError, match=r"concordance\(score=\).*finite"):
        concordance([0, 1, 1], [1.0, np.nan, 2.0])
    with pytest.raises(RiskvetError, match=r"concordance\(transform=\)"):
        concordance([0, 1], [1.0, 2.0], transform="probit")
    with pytest.raises(RiskvetError, match=r"concordance\(confidence=\)"):
        concordance([0, 1], [1.0, 2.0], confidence=95)
    with pytest.raises(DataError, match=r"concordance\(weights=\)"):
        concordance([0, 1], [1.0, 2.0], weights=[1.0, -1.0])
    with pytest.raises(DataError, match=r"concordance\(y=\).*numeric"):
        concordance(np.array(["a", "b"]), [1.0, 2.0])
    with pytest.raises(DataError, match=r"ordinal_discrimination\(y=\).*every level"):
        ordinal_discrimination([0, 0, 2, 2], np.full((4, 3), 1 / 3))
    with pytest.raises(DataError, match=r"ordinal_discrimination\(prob=\).*summing to 1"):
        ordinal_discrimination([0, 1, 2], np.full((3, 3), 0.3))
    with pytest.raises(RiskvetError, match=r"dichotomise\(cut=\)"):
        dichotomise([0, 1, 2], np.full((3, 3), 1 / 3), cut=2)


# ---- ordered outcomes ----


def ordinal_example(n=240, seed=7):
    rng = np.random.default_rng(seed)
    lp = rng.normal(0, 1.2, n)
    theta = np.array([-0.5, 1.0])
    cum = 1 / (1 + np.exp(-(theta[None, :] - lp[:, None])))  # P(Y <= j)
    prob = np.diff(np.c_[np.zeros(n), cum, np.ones(n)], axis=1)
    u = rng.random(n)
    y = (u[:, None] > cum).sum(axis=1)
    return y, prob, lp


def test_ordinal_generalised_c_and_somers_d_against_scipy_and_pairs():
    y, prob, lp = ordinal_example()
    res = ordinal_discrimination(y, prob)
    expected = prob @ np.arange(3)
    # scipy 1.17.1 scipy.stats.somersd(x=outcome, y=score): D(score | outcome), denominator =
    # pairs untied on the outcome, which is Harrell's Dxy.
    ref = scipy.stats.somersd(y, expected)
    assert res.somers_d == pytest.approx(ref.statistic, rel=1e-12), scipy.__version__
    # scipy 1.17.1: its p-value uses the standard error under D = 0 (Brown & Benedetti 1977).
    assert res.somers_d_pvalue == pytest.approx(ref.pvalue, rel=1e-8)
    assert res.generalised_c == pytest.approx(slow_pair_c(y, expected), rel=1e-12)
    assert res.somers_d == pytest.approx(2 * res.generalised_c - 1, abs=1e-12)
    # Proportional odds: E[Y] increases with the linear predictor, so ranking on it is the same.
    by_lp = ordinal_discrimination(y, prob, score=lp)
    assert by_lp.generalised_c == pytest.approx(res.generalised_c, abs=1e-12)
    assert by_lp.ordinal_c == pytest.approx(res.ordinal_c, abs=1e-12)


def test_ordinal_c_index_is_mean_of_pairwise_aucs():
    # Van Calster et al., Biometrical Journal 2012: ORC = mean over the K(K-1)/2 category pairs.
    y, prob, _ = ordinal_example(n=200, seed=8)
    score = prob @ np.arange(3)
    res = ordinal_discrimination(y, prob)
    pair_aucs = []
    for k, l in [(0, 1), (0, 2), (1, 2)]:
        keep = (y == k) | (y == l)
        pair_aucs.append(roc_auc_score(y[keep] == l, score[keep]))  # scikit-learn 1.9.1
    np.testing.assert_allclose(res.pair_c, pair_aucs, rtol=1e-12)
    assert res.ordinal_c == pytest.approx(np.mean(pair_aucs), rel=1e-12)
    assert res.pair_levels == ((0, 1), (0, 2), (1, 2))


def test_ordinal_cut_aucs_and_average():
    y, prob, _ = ordinal_example(n=200, seed=9)
    res = ordinal_discrimination(y, prob)
    for j in range(2):
        yj, pj = dichotomise(y, prob, cut=j)
        np.testing.assert_array_equal(yj, (y > j).astype(int))
        np.testing.assert_allclose(pj, prob[:, j + 1 :].sum(axis=1))
        assert res.cuts[j].estimate == pytest.approx(roc_auc_score(y > j, prob[:, j + 1 :].sum(axis=1)), rel=1e-12)
        assert res.cuts[j].se**2 == pytest.approx(slow_delong_var((y > j).astype(int), pj), rel=1e-10)
    assert res.average_cut_c == pytest.approx(np.mean([c.estimate for c in res.cuts]), rel=1e-12)


def test_somers_d_ase_reduces_to_structural_components_for_binary():
    # For K = 2, Somers' D = 2C - 1 and its non-null ASE (Brown & Benedetti, JASA 1977)
    # is twice the DeLong SE with n1, n0 (not n1 - 1, n0 - 1) in the denominators.
    y, score = hanley_mcneil_data()
    res = ordinal_discrimination(y, np.column_stack([1 - score / 6, score / 6]))
    auc, v10, v01 = slow_components(y, score)
    se = np.sqrt(np.mean((v10 - auc) ** 2) / v10.size + np.mean((v01 - auc) ** 2) / v01.size)
    assert res.somers_d_se == pytest.approx(2 * se, rel=1e-10)
    assert res.generalised_c == pytest.approx(auc, rel=1e-12)
    assert res.ordinal_c == pytest.approx(auc, rel=1e-12)
    assert res.cuts[0].estimate == pytest.approx(auc, rel=1e-12)


def test_results_are_frozen_and_json_ready():
    y, prob, _ = ordinal_example(n=100, seed=10)
    res = ordinal_discrimination(y, prob)
    json.dumps(res.to_dict(), allow_nan=False)
    frame = res.to_frame()
    assert list(frame["measure"]) == ["c_cut0", "c_cut1", "average_cut_c", "ordinal_c", "generalised_c", "somers_d"]
    with pytest.raises(AttributeError):
        res.ordinal_c = 0.5  # type: ignore[misc]
    with pytest.raises(ValueError):
        res.pair_c[0] = 0.0
    y2, s2 = hanley_mcneil_data()
    for r in (concordance(y2, s2), compare_concordance(y2, s2, -s2), roc_curve(y2, s2)):
        json.dumps(r.to_dict(), allow_nan=False)
        assert len(r.to_frame()) >= 1
