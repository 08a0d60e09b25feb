"""Tests of riskvet.measures.agreement against published examples and reference libraries."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from scipy import stats
from sklearn.metrics import cohen_kappa_score
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.inter_rater import cohens_kappa

from riskvet.measures.agreement import (
    ICC_FORMS,
    PREVALENCE_LIMIT,
    UNINFORMATIVE_REASONS,
    agreement_indices,
    bland_altman,
    decision_agreement,
    icc,
    icc_table,
    kappa,
    kappa_from_table,
)
from riskvet.errors import DataError, RiskvetError, RiskvetWarning, StudyError

# Shrout PE, Fleiss JL. Psychological Bulletin 1979; 86: 420-428, Table 2:
# 6 targets (rows) rated by 4 judges (columns).
SHROUT_FLEISS = np.array(
    [[9, 2, 5, 8], [6, 1, 3, 2], [8, 4, 6, 8], [7, 1, 2, 6], [10, 5, 6, 9], [6, 2, 4, 7]],
    dtype=float,
)


# --------------------------------------------------------------------------
# ICC
# --------------------------------------------------------------------------

def test_icc_shrout_fleiss_published_values():
    # Shrout & Fleiss 1979, Table 2 and the text (recalled from memory):
    # ICC(1,1)=.17, ICC(2,1)=.29, ICC(3,1)=.71, ICC(1,4)=.44, ICC(2,4)=.62, ICC(3,4)=.91.
    # Tolerance 0.005: the paper prints two decimals.
    published = {"1,1": 0.17, "2,1": 0.29, "3,1": 0.71, "1,k": 0.44, "2,k": 0.62, "3,k": 0.91}
    table = icc_table(SHROUT_FLEISS)
    for form, value in published.items():
        assert table[form].value == pytest.approx(value, abs=0.005), form
        assert icc(SHROUT_FLEISS, form=form).value == table[form].value


def test_icc_shrout_fleiss_mean_squares():
    # Shrout & Fleiss 1979, Table 2 (recalled from memory): BMS 11.24, WMS 6.26,
    # JMS 32.49, EMS 1.02.  Tolerance 0.005: two decimals printed.
    r = icc(SHROUT_FLEISS, form="2,1")
    assert r.ms_subjects == pytest.approx(11.24, abs=0.005)
    assert r.ms_within == pytest.approx(6.26, abs=0.005)
    assert r.ms_raters == pytest.approx(32.49, abs=0.005)
    assert r.ms_residual == pytest.approx(1.02, abs=0.005)


def _long(x: np.ndarray) -> pd.DataFrame:
    n, k = x.shape
    return pd.DataFrame(
        {
            "y": x.ravel(),
            "subject": np.repeat([f"s{i}" for i in range(n)], k),
            "rater": np.tile([f"r{j}" for j in range(k)], n),
        }
    )


@pytest.mark.parametrize("seed", [0, 1])
def test_icc_mean_squares_match_statsmodels_anova(seed):
    # Reference: statsmodels 0.15.0 OLS + anova_lm (type I sums of squares).  Two-way additive model gives subjects, raters, residual;
    # the one-way model's residual is the within-subject mean square.
    # Tolerance 1e-9 relative: both are exact sums of squares in double precision.
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(9, 3)) + rng.normal(size=(9, 1)) * 2 + np.array([0.0, 0.5, -0.3])
    frame = _long(x)
    two = anova_lm(smf.ols("y ~ C(subject) + C(rater)", data=frame).fit(), typ=1)
    one = anova_lm(smf.ols("y ~ C(subject)", data=frame).fit(), typ=1)
    r = icc(x, form="1,1")
    assert r.ms_subjects == pytest.approx(two.loc["C(subject)", "mean_sq"], rel=1e-9)
    assert r.ms_raters == pytest.approx(two.loc["C(rater)", "mean_sq"], rel=1e-9)
    assert r.ms_residual == pytest.approx(two.loc["Residual", "mean_sq"], rel=1e-9)
    assert r.ms_within == pytest.approx(one.loc["Residual", "mean_sq"], rel=1e-9)
    # The F tests are the ANOVA's subject F tests.
    assert r.f_statistic == pytest.approx(one.loc["C(subject)", "F"], rel=1e-9)
    assert r.p_value == pytest.approx(one.loc["C(subject)", "PR(>F)"], rel=1e-7)
    r3 = icc(x, form="3,1")
    assert r3.f_statistic == pytest.approx(two.loc["C(subject)", "F"], rel=1e-9)
    assert r3.p_value == pytest.approx(two.loc["C(subject)", "PR(>F)"], rel=1e-7)


def test_icc_formulas_by_hand_and_intervals():
    # Exact F intervals for forms 1 and 3 written out from Shrout & Fleiss 1979
    # (eqs. for ICC(1,1) and ICC(3,1)) with scipy's F quantiles.
    bms, wms, jms, ems = 11.241666666666667, 6.263888888888889, 32.486111111111114, 1.0194444444444444
    n, k = 6, 4
    r1 = icc(SHROUT_FLEISS, form="1,1")
    f = bms / wms
    fl = f / stats.f.ppf(0.975, n - 1, n * (k - 1))
    fu = f * stats.f.ppf(0.975, n * (k - 1), n - 1)
    assert r1.lower == pytest.approx((fl - 1) / (fl + k - 1), rel=1e-10)
    assert r1.upper == pytest.approx((fu - 1) / (fu + k - 1), rel=1e-10)
    r3k = icc(SHROUT_FLEISS, form="3,k")
    f3 = bms / ems
    fl3 = f3 / stats.f.ppf(0.975, n - 1, (n - 1) * (k - 1))
    assert r3k.lower == pytest.approx(1 - 1 / fl3, rel=1e-10)
    # Form 2: the Spearman-Brown step-up of the single-rating limits equals
    # McGraw & Wong (1996) ICC(A,k) limit n(BMS - F*EMS)/(F*(JMS - EMS) + n BMS).
    r2 = icc(SHROUT_FLEISS, form="2,1")
    r2k = icc(SHROUT_FLEISS, form="2,k")
    rho = r2.value
    a = k * rho / (n * (1 - rho))
    b = 1 + k * rho * (n - 1) / (n * (1 - rho))
    v = (a * jms + b * ems) ** 2 / ((a * jms) ** 2 / (k - 1) + (b * ems) ** 2 / ((n - 1) * (k - 1)))
    fstar = stats.f.ppf(0.975, n - 1, v)
    assert r2k.lower == pytest.approx(n * (bms - fstar * ems) / (fstar * (jms - ems) + n * bms), rel=1e-8)
    for r in icc_table(SHROUT_FLEISS).results:
        assert r.lower < r.value < r.upper


def _coverage(form, sim, reps, truth, seed):
    rng = np.random.default_rng(seed)
    hits = 0
    for _ in range(reps):
        r = icc(sim(rng), form=form)
        hits += r.lower <= truth <= r.upper
    return hits / reps


def test_icc_exact_intervals_cover_at_nominal_rate():
    # Forms 1 and 3 have exact intervals under their normal models (Shrout &
    # Fleiss 1979), so simulated coverage must be 0.95 up to Monte Carlo error:
    # 1500 replicates give SE sqrt(.95*.05/1500) = 0.0056; tolerance 0.025 (about 4.4 SE).
    n, k, s_subj, s_err = 8, 3, 1.0, 1.0
    truth = s_subj**2 / (s_subj**2 + s_err**2)

    def one_way(rng):
        return rng.normal(0, s_subj, (n, 1)) + rng.normal(0, s_err, (n, k))

    rater_shift = np.array([0.0, 1.0, -2.0])  # fixed rater effects of the mixed model

    def mixed(rng):
        return rng.normal(0, s_subj, (n, 1)) + rater_shift + rng.normal(0, s_err, (n, k))

    assert _coverage("1,1", one_way, 1500, truth, 11) == pytest.approx(0.95, abs=0.025)
    assert _coverage("3,1", mixed, 1500, truth, 12) == pytest.approx(0.95, abs=0.025)


def test_icc_invariants():
    # Adding a constant to one rater's column changes nothing in the consistency
    # form 3 and lowers the absolute-agreement form 2 (definition, McGraw & Wong 1996).
    shifted = SHROUT_FLEISS.copy()
    shifted[:, 0] += 5
    assert icc(shifted, form="3,1").value == pytest.approx(icc(SHROUT_FLEISS, form="3,1").value, rel=1e-12)
    assert icc(shifted, form="2,1").value < icc(SHROUT_FLEISS, form="2,1").value
    # Identical raters: every form is 1.
    same = np.repeat(np.arange(5.0)[:, None], 3, axis=1)
    for r in icc_table(same).results:
        assert r.value == pytest.approx(1.0)
        assert r.upper == pytest.approx(1.0)
    # Permuting raters or subjects leaves everything unchanged.
    perm = SHROUT_FLEISS[[3, 1, 0, 5, 2, 4]][:, [2, 0, 3, 1]]
    assert icc_table(perm).to_frame()["value"].tolist() == pytest.approx(icc_table(SHROUT_FLEISS).to_frame()["value"].tolist(), rel=1e-12)


def test_icc_outputs():
    table = icc_table(pd.DataFrame(SHROUT_FLEISS, columns=list("ABCD")))
    frame = table.to_frame()
    assert list(frame["form"]) == list(ICC_FORMS)
    assert {"value", "lower", "upper", "f_statistic", "df1", "df2", "p_value", "n", "k"} <= set(frame.columns)
    json.dumps(table.to_dict(), allow_nan=False)
    r = table["2,1"]
    assert r.n == 6 and r.k == 4
    with pytest.raises(AttributeError):
        r.value = 0.0  # frozen
    assert icc(SHROUT_FLEISS, form="1,1", confidence=0.8).upper < icc(SHROUT_FLEISS, form="1,1").upper


def test_icc_bad_input():
    frame = pd.DataFrame(SHROUT_FLEISS, index=[f"p{i}" for i in range(6)])
    frame.iloc[2, 1] = np.nan
    frame.iloc[4, 3] = np.nan
    with pytest.raises(DataError, match=r"p2.*p4"):
        icc(frame, form="1,1")
    with pytest.raises(StudyError, match="form"):
        icc(SHROUT_FLEISS, form="4,1")
    with pytest.raises(StudyError, match="confidence"):
        icc(SHROUT_FLEISS, form="1,1", confidence=95)
    with pytest.raises(DataError, match="2 subjects"):
        icc(SHROUT_FLEISS[:1], form="1,1")
    with pytest.raises(DataError, match="numeric"):
        icc([["a", "b"], ["c", "d"]], form="1,1")
    with pytest.raises(DataError, match="vary"):
        icc(np.ones((4, 2)), form="1,1")
    with pytest.raises(StudyError):
        icc_table(SHROUT_FLEISS)["2,4"]
    with pytest.raises(StudyError, match="confidence"):
        icc_table(SHROUT_FLEISS, confidence=0)
    with pytest.raises(DataError, match="n subjects"):
        icc_table([1.0, 2.0, 3.0])


# --------------------------------------------------------------------------
# kappa
# --------------------------------------------------------------------------

def _pairs_from_table(table):
    a, b = [], []
    for i, row in enumerate(table):
        for j, count in enumerate(row):
            a += [i] * count
            b += [j] * count
    return np.array(a), np.array(b)


@pytest.mark.parametrize("weights", [None, "linear", "quadratic"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_kappa_matches_scikit_learn(weights, seed):
    # Reference: sklearn.metrics.cohen_kappa_score (scikit-learn 1.9.1);
    # its disagreement weights |i-j| and (i-j)^2 give the same kappa as our
    # agreement weights.  Tolerance 1e-12: same closed form.
    rng = np.random.default_rng(seed)
    a = rng.integers(0, 4, 60)
    b = np.clip(a + rng.integers(-1, 2, 60), 0, 3)
    assert kappa(a, b, weights=weights).value == pytest.approx(cohen_kappa_score(a, b, weights=weights), abs=1e-12)


@pytest.mark.parametrize("wt", [None, "linear", "quadratic"])
def test_kappa_standard_errors_match_statsmodels(wt):
    # Reference: statsmodels.stats.inter_rater.cohens_kappa (statsmodels 0.15.0),
    # which implements the Fleiss-Cohen-Everitt (1969) variances (std_kappa,
    # std_kappa0).  Tolerance 1e-10 relative: same formula, different code.
    table = [[14, 4, 1, 0], [3, 11, 5, 1], [1, 2, 9, 3], [0, 1, 2, 8]]
    a, b = _pairs_from_table(table)
    ours = kappa(a, b, weights=wt)
    ref = cohens_kappa(np.array(table), wt=wt) if wt else cohens_kappa(np.array(table))
    assert ours.value == pytest.approx(ref.kappa, rel=1e-10)
    assert ours.se == pytest.approx(ref.std_kappa, rel=1e-10)
    assert ours.se_null == pytest.approx(ref.std_kappa0, rel=1e-10)


def test_kappa_published_example():
    # Fleiss JL, Levin B, Paik MC. Statistical Methods for Rates and Proportions,
    # 3rd ed. 2003, ch. 18 (recalled from memory): two raters diagnose 100
    # patients; proportions psychotic/neurotic/organic rows .75 .01 .04 / .05 .04 .01
    # / .00 .00 .10; p_o = .89, p_e = .66, kappa = .68 (tolerance 0.005: two decimals).
    table = [[75, 1, 4], [5, 4, 1], [0, 0, 10]]
    a, b = _pairs_from_table(table)
    r = kappa(a, b)
    assert r.observed_agreement == pytest.approx(0.89, abs=1e-12)
    assert r.expected_agreement == pytest.approx(0.66, abs=1e-12)
    assert r.value == pytest.approx(0.68, abs=0.005)
    assert r.table == tuple(tuple(row) for row in table)


def test_kappa_standard_error_by_hand_two_by_two():
    # Hand computation for the 2x2 table [[20, 5], [10, 15]] (n = 50) with the
    # unweighted formulas of Fleiss, Cohen & Everitt (1969) written out term by term.
    n = 50
    p11, p12, p21, p22 = 20 / n, 5 / n, 10 / n, 15 / n
    r1, r2 = p11 + p12, p21 + p22  # rater a margins: .5, .5
    c1, c2 = p11 + p21, p12 + p22  # rater b margins: .6, .4
    po = p11 + p22  # .70
    pe = r1 * c1 + r2 * c2  # .50
    k = (po - pe) / (1 - pe)  # .40
    var = (
        p11 * (1 - (r1 + c1) * (1 - k)) ** 2
        + p22 * (1 - (r2 + c2) * (1 - k)) ** 2
        + (1 - k) ** 2 * (p12 * (c1 + r2) ** 2 + p21 * (c2 + r1) ** 2)
        - (k - pe * (1 - k)) ** 2
    ) / (n * (1 - pe) ** 2)
    var0 = (pe + pe**2 - (r1 * c1 * (r1 + c1) + r2 * c2 * (r2 + c2))) / (n * (1 - pe) ** 2)
    a, b = _pairs_from_table([[20, 5], [10, 15]])
    res = kappa(a, b)
    assert res.value == pytest.approx(0.4, abs=1e-12)
    assert res.se == pytest.approx(math.sqrt(var), rel=1e-12)
    assert res.se_null == pytest.approx(math.sqrt(var0), rel=1e-12)
    assert res.lower == pytest.approx(0.4 - stats.norm.ppf(0.975) * math.sqrt(var), rel=1e-12)
    assert res.p_value == pytest.approx(2 * stats.norm.sf(0.4 / math.sqrt(var0)), rel=1e-12)


def test_kappa_levels_and_labels():
    a = pd.Series(["low", "mid", "high", "mid", "low", "high"], dtype="string")
    b = pd.Series(["low", "high", "high", "mid", "mid", "high"], dtype="string")
    order = ["low", "mid", "high"]
    r = kappa(a, b, weights="linear", levels=order)
    assert r.levels == tuple(order)
    # Reference: scikit-learn 1.9.1 cohen_kappa_score with labels in the same order.
    assert r.value == pytest.approx(cohen_kappa_score(a, b, weights="linear", labels=order), abs=1e-12)
    # A level that no rater used still occupies a row and a column.
    r4 = kappa([1, 2, 2, 1], [1, 2, 1, 1], levels=[1, 2, 3], weights="quadratic")
    assert len(r4.table) == 3
    assert r4.agreement_table().shape == (3, 3)
    json.dumps(r.to_dict(), allow_nan=False)
    assert r.to_frame().shape[0] == 1
    # Perfect agreement gives kappa 1; swapping raters leaves kappa unchanged.
    assert kappa(a, a).value == pytest.approx(1.0)
    assert kappa(b, a, weights="linear", levels=order).value == pytest.approx(r.value, abs=1e-12)


def test_kappa_degenerate_warns_and_records():
    with pytest.warns(RiskvetWarning, match="undefined"):
        r = kappa([1, 1, 1], [1, 1, 1], levels=[0, 1])
    assert math.isnan(r.value)
    assert r.warnings
    json.dumps(r.to_dict(), allow_nan=False)


def test_kappa_bad_input():
    with pytest.raises(DataError, match="same length"):
        kappa([1, 2], [1, 2, 3])
    with pytest.raises(DataError, match=r"missing at rows \[1\]"):
        kappa([1, None, 2], [1, 2, 2])
    with pytest.raises(DataError, match="levels"):
        kappa([1, 2, 5], [1, 2, 2], levels=[1, 2])
    with pytest.raises(StudyError, match="weights"):
        kappa([1, 2], [1, 2], weights="cubic")
    with pytest.raises(DataError, match="sorted"):
        kappa([1, "a"], [1, "a"])
    with pytest.raises(DataError, match="at least 2"):
        kappa([1, 1], [1, 1])
    assert issubclass(DataError, RiskvetError)


# --------------------------------------------------------------------------
# Bland-Altman
# --------------------------------------------------------------------------

# Bland & Altman, Lancet 1986, Table 1 (recalled from memory): peak expiratory
# flow rate (l/min) of 17 subjects, first reading by the large Wright meter and
# by the mini Wright meter.
WRIGHT = [494, 395, 516, 434, 476, 557, 413, 442, 650, 433, 417, 656, 267, 478, 178, 423, 427]
MINI = [512, 430, 520, 428, 500, 600, 364, 380, 658, 445, 432, 626, 260, 477, 259, 350, 451]


def test_bland_altman_published_example():
    # Bland & Altman 1986 (recalled from memory): mean difference -2.1 l/min,
    # SD 38.8, limits of agreement -79.7 and 75.5 with 2 SD.  Tolerances: 0.05
    # for one printed decimal; 0.15 for the limits, which the paper formed from
    # the rounded mean and SD.
    r = bland_altman(WRIGHT, MINI, limits=2)
    assert r.bias == pytest.approx(-2.1, abs=0.05)
    assert r.sd == pytest.approx(38.8, abs=0.05)
    assert r.lower == pytest.approx(-79.7, abs=0.15)
    assert r.upper == pytest.approx(75.5, abs=0.15)


def test_bland_altman_by_hand():
    # Differences 1..5 exactly: bias 3, SD sqrt(2.5) (hand computation).
    b = np.array([10.0, 20.0, 30.0, 40.0, 50.0])
    a = b + np.array([1.0, 2.0, 3.0, 4.0, 5.0])
    r = bland_altman(a, b)
    sd = math.sqrt(2.5)
    assert r.bias == pytest.approx(3.0, abs=1e-12)
    assert r.sd == pytest.approx(sd, rel=1e-12)
    assert r.lower == pytest.approx(3 - 1.96 * sd, rel=1e-12)
    assert r.upper == pytest.approx(3 + 1.96 * sd, rel=1e-12)
    # Interval formulas (Bland & Altman 1986): bias +/- t s/sqrt(n); limits +/- t sqrt(3 s^2 / n).
    t = stats.t.ppf(0.975, 4)
    assert r.bias_interval == pytest.approx((3 - t * sd / math.sqrt(5), 3 + t * sd / math.sqrt(5)), rel=1e-12)
    h = t * math.sqrt(3 * sd**2 / 5)
    assert r.upper_interval == pytest.approx((r.upper - h, r.upper + h), rel=1e-12)
    assert r.lower_interval == pytest.approx((r.lower - h, r.lower + h), rel=1e-12)
    assert r.means.tolist() == pytest.approx(((a + b) / 2).tolist())
    assert r.differences.tolist() == pytest.approx([1, 2, 3, 4, 5])
    # Proportional bias: reference numpy.polyfit of differences on means.
    slope, intercept = np.polyfit((a + b) / 2, a - b, 1)
    assert r.slope == pytest.approx(slope, rel=1e-10)
    assert r.intercept == pytest.approx(intercept, rel=1e-10)
    with pytest.raises(ValueError):
        r.means[0] = 0.0  # read-only array


def test_bland_altman_exact_interval_coverage():
    # The non-central t interval for a normal quantile is exact, so its coverage
    # of mu + 1.96 sigma is 0.95 up to Monte Carlo error (common practice check):
    # 4000 replicates, SE 0.0034, tolerance 0.015 (about 4.4 SE).  The
    # approximate interval is not exact; only the exact one is held to this.
    rng = np.random.default_rng(5)
    n, reps = 10, 4000
    truth_hi, truth_lo = 1.0 + 1.96 * 2.0, 1.0 - 1.96 * 2.0
    hits_hi = hits_lo = 0
    for _ in range(reps):
        d = rng.normal(1.0, 2.0, n)
        r = bland_altman(d, np.zeros(n), interval="exact")
        hits_hi += r.upper_interval[0] <= truth_hi <= r.upper_interval[1]
        hits_lo += r.lower_interval[0] <= truth_lo <= r.lower_interval[1]
    assert hits_hi / reps == pytest.approx(0.95, abs=0.015)
    assert hits_lo / reps == pytest.approx(0.95, abs=0.015)


def test_bland_altman_invariants_and_outputs():
    r = bland_altman(WRIGHT, MINI)
    s = bland_altman(MINI, WRIGHT)
    assert s.bias == pytest.approx(-r.bias)
    assert s.lower == pytest.approx(-r.upper)
    e = bland_altman(WRIGHT, MINI, interval="exact")
    # The exact interval is not symmetric about the limit but contains it.
    assert e.upper_interval[0] < e.upper < e.upper_interval[1]
    assert e.lower_interval[0] < e.lower < e.lower_interval[1]
    frame = r.to_frame()
    assert list(frame["quantity"])[:3] == ["bias", "lower limit of agreement", "upper limit of agreement"]
    d = r.to_dict()
    json.dumps(d, allow_nan=False)
    assert len(d["means"]) == 17 and d["interval_method"] == "approximate"
    assert r.points_frame().shape == (17, 2)


def test_bland_altman_bad_input():
    with pytest.raises(DataError, match="3 pairs"):
        bland_altman([1, 2], [1, 2])
    with pytest.raises(DataError, match="numbers"):
        bland_altman([1, 2, "x"], [1, 2, 3])
    with pytest.raises(DataError, match=r"missing at rows \['c'\]"):
        bland_altman(pd.Series([1.0, 2, np.nan], index=list("abc")), [1, 2, 3])
    with pytest.raises(StudyError, match="interval"):
        bland_altman([1, 2, 3], [1, 2, 4], interval="bootstrap")
    with pytest.raises(StudyError, match="limits"):
        bland_altman([1, 2, 3], [1, 2, 4], limits=-1)


# --------------------------------------------------------------------------
# decisions
# --------------------------------------------------------------------------

def test_decision_agreement():
    rng = np.random.default_rng(3)
    risk_a = rng.uniform(0, 1, 80)
    risk_b = np.clip(risk_a + rng.normal(0, 0.08, 80), 0, 1)
    r = decision_agreement(risk_a, risk_b, threshold=0.3)
    da, db = (risk_a >= 0.3).astype(int), (risk_b >= 0.3).astype(int)
    # Reference: scikit-learn 1.9.1 cohen_kappa_score on the decisions.
    assert r.decisions.value == pytest.approx(cohen_kappa_score(da, db), abs=1e-12)
    assert r.discordant == int(np.sum(da != db))
    assert r.positive_a == int(da.sum())
    assert r.risks.bias == pytest.approx(float(np.mean(risk_a - risk_b)), abs=1e-12)
    frame = r.to_frame()
    assert frame.shape[0] == 4
    json.dumps(r.to_dict(), allow_nan=False)
    with pytest.raises(StudyError, match="threshold"):
        decision_agreement(risk_a, risk_b, threshold=1.5)
    with pytest.raises(DataError, match="between 0 and 1"):
        decision_agreement(risk_a * 2, risk_b, threshold=0.3)


# --------------------------------------------------------------------------
# kappa from a table; PABAK, specific agreement, uninformative kappa
# --------------------------------------------------------------------------

# Feinstein AR, Cicchetti DV. J Clin Epidemiol 1990; 43: 543-549, the two
# tables of the first paradox (recalled from memory): 100 pairs, p_o = .85 in
# both, kappa .70 and .32.  In Feinstein's notation a = both yes, b = first
# rater yes only, c = second rater yes only, d = both no; here rows are the
# first rater, columns the second, "no" first: [[d, c], [b, a]].
BALANCED = [[45, 6], [9, 40]]     # a = 40, b = 9, c = 6, d = 45
UNBALANCED = [[5, 5], [10, 80]]   # a = 80, b = 10, c = 5, d = 5


def test_kappa_from_table_is_kappa_of_the_pairs():
    for table in (BALANCED, UNBALANCED, [[75, 1, 4], [5, 4, 1], [0, 0, 10]]):
        a, b = _pairs_from_table(table)
        for weights in (None, "linear", "quadratic"):
            direct, pairs = kappa_from_table(table, weights=weights), kappa(a, b, weights=weights)
            for field in ("value", "se", "se_null", "lower", "upper", "p_value", "expected_agreement"):
                assert getattr(direct, field) == pytest.approx(getattr(pairs, field), rel=1e-12)
            assert direct.table == pairs.table and direct.levels == (0, 1, 2)[: len(table)]
    assert kappa_from_table(BALANCED, levels=["no", "yes"]).levels == ("no", "yes")
    for bad in ([[1, 2, 3]], [[1, -1], [0, 2]], [[0.5, 1], [1, 1]], [[0, 0], [0, 0]], [[1]]):
        with pytest.raises(DataError, match="kappa_from_table\\(table\\)"):
            kappa_from_table(bad)
    with pytest.raises(DataError, match="levels"):
        kappa_from_table(BALANCED, levels=["x"])
    with pytest.raises(StudyError, match="weights"):
        kappa_from_table(BALANCED, weights="cubic")


def test_prevalence_paradox_published_tables():
    # Feinstein & Cicchetti 1990 (part I), recalled from memory: kappa .70 and .32 at p_o .85
    # (two decimals given, so tolerance 0.005).
    assert kappa_from_table(BALANCED).value == pytest.approx(0.70, abs=0.005)
    assert kappa_from_table(UNBALANCED).value == pytest.approx(0.32, abs=0.005)
    balanced, unbalanced = agreement_indices(BALANCED), agreement_indices(UNBALANCED)
    # Byrt, Bishop & Carlin 1993: PABAK = 2 p_o - 1, the same for both tables (hand calculation: 2 x .85 - 1)
    assert balanced.pabak == pytest.approx(0.70, abs=1e-12) and unbalanced.pabak == pytest.approx(0.70, abs=1e-12)
    # prevalence index (a - d)/n and bias index (b - c)/n, by hand: (40 - 45)/100, (9 - 6)/100; (80 - 5)/100, (10 - 5)/100
    assert balanced.prevalence_index == pytest.approx(-0.05, abs=1e-12) and balanced.bias_index == pytest.approx(0.03, abs=1e-12)
    assert unbalanced.prevalence_index == pytest.approx(0.75, abs=1e-12) and unbalanced.bias_index == pytest.approx(0.05, abs=1e-12)
    # Cicchetti & Feinstein 1990 (part II) specific agreement, by hand: p_pos = 2a/(2a + b + c), p_neg = 2d/(2d + b + c):
    # 80/95 and 90/105; 160/175 and 10/25
    assert balanced.positive_agreement == pytest.approx(80 / 95, abs=1e-12)
    assert balanced.negative_agreement == pytest.approx(90 / 105, abs=1e-12)
    assert unbalanced.positive_agreement == pytest.approx(160 / 175, abs=1e-12)
    assert unbalanced.negative_agreement == pytest.approx(10 / 25, abs=1e-12)
    # neither is flagged: the most used category holds 105 and 175 of the 200 readings (hand count: 51 + 54 "no"; 90 + 85 "yes")
    assert balanced.largest_share == pytest.approx(0.525) and unbalanced.largest_share == pytest.approx(0.875)
    assert balanced.informative and unbalanced.informative and not unbalanced.reason


def test_pabak_for_more_categories_by_hand():
    # Fleiss, Levin & Paik 2003 table (see test_kappa_published_example): p_o = .89, K = 3;
    # Brennan & Prediger 1981: (K p_o - 1)/(K - 1) = (2.67 - 1)/2 = .835 by hand.
    r = agreement_indices([[75, 1, 4], [5, 4, 1], [0, 0, 10]])
    assert r.pabak == pytest.approx(0.835, abs=1e-12) and r.categories == 3
    assert math.isnan(r.positive_agreement) and math.isnan(r.bias_index)
    assert r.to_frame()["index"].tolist() == ["observed agreement", "prevalence- and bias-adjusted kappa"]
    json.dumps(r.to_dict(), allow_nan=True)


def test_uninformative_kappa():
    # 148 of 150 agree, every one of them in the upper category, and one rater used only that category:
    # kappa is 0 (hand calculation: p_o = p_e = 148/150) with a standard error of (almost) 0.
    k = kappa_from_table([[0, 2], [0, 148]])
    assert k.value == pytest.approx(0.0, abs=1e-12) and k.upper - k.lower < 1e-6
    r = agreement_indices([[0, 2], [0, 148]])
    assert not r.informative and r.reason_code == 1 and r.reason == UNINFORMATIVE_REASONS[1]
    assert "prevalence" in r.reason and r.largest_share == pytest.approx(298 / 300)
    assert r.pabak == pytest.approx(2 * 148 / 150 - 1) and r.negative_agreement == 0.0
    assert r.positive_agreement == pytest.approx(296 / 298)
    # one rater used a single category although no category dominates: kappa 0 whatever the other did
    single = agreement_indices([[50, 50], [0, 0]])
    assert single.largest_share == pytest.approx(0.75) and single.reason_code == 2 and not single.informative
    assert kappa_from_table([[50, 50], [0, 0]]).value == pytest.approx(0.0, abs=1e-12)
    # the limit itself: 95% of readings in one category is flagged, just under is not (hand counts over 200 readings)
    assert agreement_indices([[95, 0], [0, 5]]).largest_share == pytest.approx(PREVALENCE_LIMIT)
    assert not agreement_indices([[95, 0], [0, 5]]).informative
    assert agreement_indices([[94, 0], [0, 6]]).informative
    # no positive pair at all: positive agreement undefined
    assert math.isnan(agreement_indices([[10, 0], [0, 0]]).positive_agreement)
    for bad in ([[1, 2, 3]], [[-1, 1], [1, 1]], [[0, 0], [0, 0]]):
        with pytest.raises(DataError, match="agreement_indices\\(table\\)"):
            agreement_indices(bad)


from hypothesis import given, settings, strategies as st


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 30), min_size=4, max_size=4).filter(lambda v: sum(v) > 0))
def test_agreement_indices_invariants(cells):
    t = np.array(cells).reshape(2, 2)
    r = agreement_indices(t)
    assert -1 <= r.pabak <= 1 and 0.5 <= r.largest_share <= 1
    for v in (r.positive_agreement, r.negative_agreement):
        assert math.isnan(v) or 0 <= v <= 1
    # swapping the raters: the same agreement, the bias index changes sign
    swapped = agreement_indices(t.T)
    assert swapped.pabak == r.pabak and swapped.bias_index == pytest.approx(-r.bias_index, abs=1e-15)
    assert swapped.positive_agreement == pytest.approx(r.positive_agreement, nan_ok=True)
    # relabelling the categories: positive and negative agreement trade places, the prevalence index changes sign
    flipped = agreement_indices(t[::-1, ::-1])
    assert flipped.positive_agreement == pytest.approx(r.negative_agreement, nan_ok=True)
    assert flipped.prevalence_index == pytest.approx(-r.prevalence_index, abs=1e-15)
    # a slow direct count: p_o is the share of pairs on the diagonal
    assert r.observed_agreement == pytest.approx(sum(t[i, i] for i in range(2)) / t.sum(), abs=1e-15)
