"""Tests for riskvet.validation.rule.

References: riskvet.measures.discrimination.compare_concordance (the package's paired
DeLong test, itself tested against published examples) for the paired
comparison; scikit-learn 1.9 roc_auc_score for C of the rule's category
codes and of the model; net benefit worked by hand on a ten-patient case
(formula of Vickers & Elkin, Med Decis Making 2006).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_auc_score

from riskvet.reporting.sentences.external_validation import rule_summary
from riskvet.measures.discrimination import compare_concordance, dichotomise
from riskvet.errors import DataError, RiskvetError
from riskvet.validation.rule import compare_with_rule, rule_positive, rule_score

LEVELS = ["green", "amber", "red"]


def synthetic(n: int, seed: int):
    """Invented data: an ordered outcome, model probabilities and a coarse rule."""
    rng = np.random.default_rng(seed)
    risk = rng.normal(size=n)
    eta = risk + rng.logistic(size=n)
    y = np.digitize(eta, [0.5, 2.0])
    cum = 1 / (1 + np.exp(-(np.array([0.5, 2.0])[None, :] - risk[:, None])))
    prob = np.column_stack([cum[:, 0], cum[:, 1] - cum[:, 0], 1 - cum[:, 1]])
    noisy = risk + rng.normal(scale=0.8, size=n)
    rule = np.where(noisy > 1.2, "red", np.where(noisy > 0.0, "amber", "green")).astype(object)
    return y, prob, rule


@pytest.fixture(scope="module")
def data():
    return synthetic(600, 5)


@pytest.fixture(scope="module")
def result(data):
    y, prob, rule = data
    return compare_with_rule(
        y, prob, rule, levels=LEVELS, positive_from="red", thresholds={0: (0.3, 0.5), 1: (0.1, 0.2)},
        outcome_levels=["low", "mid", "high"], n_boot=30, seed=2, rule_column="triage",
    )


def test_paired_delong_agrees_with_metrics_module(data, result):
    y, prob, rule = data
    code = rule_score(rule, levels=LEVELS)
    for j, comp in enumerate(result.concordance):
        y_cut, p_cut = dichotomise(y, prob, cut=j)
        ref = compare_concordance(y_cut, p_cut, code)
        assert comp.difference == ref.difference
        assert comp.se == ref.se and comp.pvalue == ref.pvalue
        # C of each against scikit-learn 1.9 (ties in the rule's codes count 1/2 in both)
        assert comp.estimate_a == pytest.approx(roc_auc_score(y_cut, p_cut), abs=1e-12)
        assert comp.estimate_b == pytest.approx(roc_auc_score(y_cut, code), abs=1e-12)
    row = result.concordance_table.iloc[1]
    assert row["outcome"] == "Y >= high"
    assert row["c_model"] > row["c_rule"]


def test_rule_net_benefit_by_hand():
    # Ten patients, binary outcome (K = 2).  Rule red = positive: patients 0-2
    # red, of whom 0 and 1 have the event (TP = 2, FP = 1).  At pt = 0.2,
    # NB_rule = 2/10 - 1/10 * 0.2/0.8 = 0.2 - 0.025 = 0.175.  The model's
    # event probabilities put patients 0, 1, 3 at or above 0.2 with events at
    # 0, 1, 3 (TP = 3, FP = 0): NB_model = 3/10 = 0.3.  At pt = 0.5 only
    # patient 0 is model-positive (TP = 1): NB_model = 0.1; NB_rule = 0.2 -
    # 0.1 * 1 = 0.1.  Treat all: prevalence 0.3 - 0.7 * 0.25 = 0.125 at 0.2.
    y = np.array([1, 1, 0, 1, 0, 0, 0, 0, 0, 0])
    p1 = np.array([0.6, 0.3, 0.1, 0.25, 0.15, 0.1, 0.05, 0.1, 0.05, 0.02])
    prob = np.column_stack([1 - p1, p1])
    rule = ["red", "red", "red", "amber", "amber", "green", "green", "green", "amber", "green"]
    out = compare_with_rule(y, prob, rule, levels=LEVELS, positive_from="red", thresholds={0: (0.2, 0.5)}, n_boot=0)
    nb = out.net_benefit_table
    assert list(nb["nb_rule"]) == pytest.approx([0.175, 0.1])
    assert list(nb["nb_model"]) == pytest.approx([0.3, 0.1])
    assert list(nb["difference"]) == pytest.approx([0.125, 0.0])
    assert nb["nb_treat_all"].iloc[0] == pytest.approx(0.125)
    assert out.rule_positive_share == pytest.approx(0.3)
    # without bootstrap intervals no threshold is clearly better or worse; the
    # sentence says so in words rather than "at 0" (which reads as a threshold)
    text = rule_summary(out)
    assert "at none of them, and below it, with the interval below 0, at none of them." in text
    assert "at 0." not in text and "2 thresholds" in text


def test_bootstrap_replicate_is_paired_and_reproducible(data, result):
    y, prob, rule = data
    code = rule_score(rule, levels=LEVELS)
    # replicate 0 draws from stream 0 of SeedSequence(seed).spawn(n_boot)
    stream = np.random.SeedSequence(2).spawn(30)[0]
    idx = np.random.default_rng(stream).integers(0, len(y), len(y))
    for j in range(2):
        y_cut, p_cut = dichotomise(y[idx], prob[idx], cut=j)
        expected = roc_auc_score(y_cut, p_cut) - roc_auc_score(y_cut, code[idx])
        assert result.boot_c_difference[0, j] == pytest.approx(expected, abs=1e-12)
    assert result.boot_c_difference.shape == (30, 2)
    assert set(result.boot_nb_difference) == {0, 1}
    # the tail as the package writes it, 100 * (1 - 0.95) / 2 = 2.5000000000000002 in binary floating point,
    # so the percentiles are compared bit for bit (2.5 itself moves the interpolation by one unit in the last place)
    tail = 100 * (1 - 0.95) / 2
    lo, hi = np.percentile(result.boot_c_difference[:, 0], [tail, 100 - tail])
    assert result.concordance_table["boot_lower"].iloc[0] == lo and result.concordance_table["boot_upper"].iloc[0] == hi
    again = compare_with_rule(
        y, prob, rule, levels=LEVELS, positive_from="red", thresholds={0: (0.3, 0.5), 1: (0.1, 0.2)},
        outcome_levels=["low", "mid", "high"], n_boot=30, seed=2, rule_column="triage",
    )
    np.testing.assert_array_equal(again.boot_c_difference, result.boot_c_difference)


def test_missing_rule_values_are_left_out(data):
    y, prob, rule = data
    rule = rule.copy()
    rule[:25] = None
    out = compare_with_rule(y, prob, rule, levels=LEVELS, n_boot=0)
    assert out.n_missing_rule == 25 and out.n == len(y) - 25
    y_cut, p_cut = dichotomise(y[25:], prob[25:], cut=0)
    assert out.concordance[0].estimate_a == pytest.approx(roc_auc_score(y_cut, p_cut))
    # without positive_from there is no net-benefit comparison, and the summary says so
    assert len(out.net_benefit_table) == 0 and out.rule_curves == ()
    assert "positive_from" in rule_summary(out)


def test_score_rule(data):
    y, prob, _ = data
    score = prob[:, 2] * 10 + 3  # a monotone score ranks as the model does
    out = compare_with_rule(y, prob, score, kind="score", n_boot=0)
    assert out.concordance[1].difference == pytest.approx(0.0, abs=1e-12)
    with pytest.raises(RiskvetError, match="positive_from"):
        compare_with_rule(y, prob, score, kind="score", positive_from="red", n_boot=0)


def test_rule_score_and_positive():
    s = rule_score(pd.Series(["green", "red", None, "amber"]), levels=LEVELS)
    np.testing.assert_array_equal(s, [0.0, 2.0, np.nan, 1.0])
    np.testing.assert_array_equal(rule_positive(np.array([0.0, 1.0, 2.0]), levels=LEVELS, positive_from="amber"), [False, True, True])
    with pytest.raises(DataError, match="purple"):
        rule_score(["green", "purple"], levels=LEVELS)
    with pytest.raises(DataError, match="numbers"):
        rule_score(["1", "x"], kind="score")
    with pytest.raises(RiskvetError, match="kind"):
        rule_score(["1"], kind="points")
    with pytest.raises(RiskvetError, match="levels"):
        rule_score(["green"], levels=["green"])
    with pytest.raises(RiskvetError, match="positive_from"):
        rule_positive(np.array([0.0]), levels=LEVELS, positive_from="blue")


def test_bad_input(data):
    y, prob, rule = data
    with pytest.raises(RiskvetError, match="n_boot"):
        compare_with_rule(y, prob, rule, levels=LEVELS, n_boot=-2)
    with pytest.raises(RiskvetError, match="confidence"):
        compare_with_rule(y, prob, rule, levels=LEVELS, confidence=95)
    with pytest.raises(DataError, match="shapes"):
        compare_with_rule(y[:-1], prob, rule, levels=LEVELS)
    with pytest.raises(DataError, match="one value per patient"):
        compare_with_rule(y, prob, rule[:-1], levels=LEVELS)
    with pytest.raises(DataError, match="every outcome level"):
        compare_with_rule(np.zeros_like(y), prob, rule, levels=LEVELS)


def test_json_and_figures(result):
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    from riskvet.reporting.figures.external_validation import plot_rule_comparison

    json.dumps(result.to_dict(), allow_nan=False)
    fig = plot_rule_comparison(result)
    assert isinstance(fig, Figure) and len(fig.axes) == 3
    assert "Y >= high" in rule_summary(result)
    with pytest.raises(RiskvetError, match="RuleComparison"):
        plot_rule_comparison("result")


def test_withheld_bootstrap_intervals_are_said_so_and_delong_given(result):
    """Too many failed replicates: the page's sentence says the bootstrap intervals are withheld and why, and gives
    DeLong's intervals instead, never 'nan'."""
    import dataclasses

    withheld = dataclasses.replace(result, intervals_withheld="4 of 30 replicates failed, more than the allowed share 0.1")
    text = rule_summary(withheld)
    assert "bootstrap intervals are withheld (4 of 30 replicates failed" in text
    assert "DeLong interval" in text and "nan" not in text.lower()
