"""Tests of riskvet.measures.calibration against statsmodels, numpy, the package fitter, slow code and simulation.

Tolerances: ``rel=1e-12`` (or ``abs=1e-12``) compares the same closed-form quantity computed in
a different order, so only floating-point rounding separates the two; wider tolerances are
explained beside their checks.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels
import statsmodels.api as sm
from scipy import special, stats
from statsmodels.nonparametric.smoothers_lowess import lowess
from statsmodels.stats.proportion import proportion_confint

from riskvet.measures.calibration import calibration, ordinal_calibration
from riskvet.measures.discrimination import dichotomise
from riskvet.errors import DataError, RiskvetError, RiskvetWarning, SeparationWarning
from riskvet.modelling.fitter import fit_cumulative


def miscalibrated(n=1500, seed=3):
    """Predictions whose true logit is 0.2 + 0.8 * logit(prob): too extreme and too low."""
    rng = np.random.default_rng(seed)
    lp = rng.normal(-1.0, 1.2, n)
    prob = special.expit(lp)
    y = (rng.random(n) < special.expit(0.2 + 0.8 * lp)).astype(int)
    return y, prob, lp


def ordinal_data(n=500, seed=4, k=3):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 2))
    theta = np.linspace(-0.7, 0.7, k - 1)
    cum = special.expit(theta[None, :] - (x @ np.array([0.8, -0.5]))[:, None])
    y = (rng.random(n)[:, None] > cum).sum(axis=1)
    return x, y


def po_probs(fit, x):
    cum = special.expit(fit.thresholds.to_numpy()[None, :] - (x @ fit.coef.to_numpy())[:, None])
    return np.diff(np.c_[np.zeros(x.shape[0]), cum, np.ones(x.shape[0])], axis=1)


def test_recalibration_regressions_match_statsmodels():
    y, prob, lp = miscalibrated()
    res = calibration(y, prob)
    # statsmodels 0.15.0 GLM(Binomial) with offset = logit(prob), intercept only.
    large = sm.GLM(y, np.ones(y.size), family=sm.families.Binomial(), offset=lp).fit(tol=1e-12)
    assert res.calibration_in_the_large == pytest.approx(large.params[0], abs=1e-7), statsmodels.__version__
    assert res.calibration_in_the_large_se == pytest.approx(large.bse[0], rel=1e-6)
    # statsmodels 0.15.0 Logit of y on logit(prob): slope and its intercept with SEs.
    slope = sm.Logit(y, sm.add_constant(lp)).fit(disp=0, tol=1e-12)
    assert res.slope == pytest.approx(slope.params[1], abs=1e-7)
    assert res.slope_se == pytest.approx(slope.bse[1], rel=1e-6)
    assert res.slope_intercept == pytest.approx(slope.params[0], abs=1e-7)
    assert res.slope_intercept_se == pytest.approx(slope.bse[0], rel=1e-6)
    # Tolerances: both fitters stop at ~1e-8 on their own criteria; 1e-7 on estimates and 1e-6
    # relative on SEs leave room for that and nothing more.
    z = stats.norm.ppf(0.975)
    assert res.slope_lower == pytest.approx(res.slope - z * res.slope_se, rel=1e-12)
    # The generating model: slope 0.8, so the estimate must be well below 1.
    assert res.slope_upper < 1.0 and res.calibration_in_the_large_lower > 0


def test_refitted_model_has_intercept_zero_and_slope_one():
    # A logistic model refitted on its own data by maximum likelihood with an intercept
    # has calibration-in-the-large 0 and slope 1 (score equations; common practice).
    rng = np.random.default_rng(8)
    x = rng.normal(size=(600, 3))
    y = (rng.random(600) < special.expit(-0.5 + x @ np.array([1.0, -0.5, 0.3]))).astype(int)
    fit = fit_cumulative(x, y)
    prob = 1.0 - special.expit(fit.thresholds.iloc[0] - x @ fit.coef.to_numpy())
    res = calibration(y, prob, development=True)
    # 1e-6: the fitter's convergence tolerance (Newton decrement 1e-8) bounds the score residual.
    assert res.calibration_in_the_large == pytest.approx(0.0, abs=1e-6)
    assert res.slope == pytest.approx(1.0, abs=1e-6)
    assert res.slope_intercept == pytest.approx(0.0, abs=1e-6)
    assert res.oe_ratio == pytest.approx(1.0, abs=1e-6)
    assert res.hosmer_lemeshow_df == res.n_groups - 2


@pytest.mark.filterwarnings("ignore:The Log link function does not respect the domain")
def test_oe_ratio_interval_matches_statsmodels_log_binomial():
    # ln(O/E) with E fixed is the intercept of a log-link binomial GLM with offset ln(mean prob);
    # statsmodels 0.15.0 GLM(Binomial(link=Log)) gives the same estimate and SE sqrt((1 - phi)/(n phi)).
    y, prob, _ = miscalibrated(n=800, seed=5)
    res = calibration(y, prob, confidence=0.9)
    fam = sm.families.Binomial(link=sm.families.links.Log())
    glm = sm.GLM(y, np.ones(y.size), family=fam, offset=np.full(y.size, np.log(prob.mean()))).fit(tol=1e-12)
    lo, hi = np.exp(glm.conf_int(alpha=0.1)[0])
    assert res.oe_ratio == pytest.approx(np.exp(glm.params[0]), rel=1e-8)
    assert (res.oe_lower, res.oe_upper) == pytest.approx((lo, hi), rel=1e-6)


def test_smoothed_curve_equals_statsmodels_lowess():
    # statsmodels 0.15.0 lowess, frac = 0.75, it = 0 (no robustness iterations), at the curve's
    # points: the local linear smoother (degree = 1).
    y, prob, _ = miscalibrated(n=1200, seed=6)
    res = calibration(y, prob, degree=1)
    assert res.degree == 1
    order = np.argsort(prob)
    ref = lowess(y[order].astype(float), prob[order], frac=0.75, it=0, xvals=res.curve_predicted)
    np.testing.assert_allclose(res.curve_observed, ref, rtol=0, atol=1e-10)
    # ICI family against lowess evaluated at every patient (delta = 0).  The package
    # interpolates between ~100 points; on this smooth curve that moves ICI by < 1e-5 and
    # single patients by < 5e-4, so those are the tolerances.
    full = lowess(y.astype(float), prob, frac=0.75, it=0, return_sorted=False)
    err = np.abs(full - prob)
    assert res.ici == pytest.approx(err.mean(), abs=1e-5)
    assert res.e50 == pytest.approx(np.median(err), abs=5e-4)
    assert res.e90 == pytest.approx(np.quantile(err, 0.9), abs=5e-4)
    assert res.emax == pytest.approx(err.max(), abs=5e-4)
    assert np.all(res.curve_lower <= res.curve_observed) and np.all(res.curve_observed <= res.curve_upper)


def _direct_local_fit(x, y, x0, frac, degree):
    """Slow reference: tricube weights over the floor(frac n) nearest x, one weighted polynomial fit."""
    dist = np.abs(x - x0)
    radius = np.sort(dist)[int(frac * x.size) - 1]
    w = np.where(dist < radius, (1 - (dist / radius) ** 3) ** 3, 0.0)
    # numpy.polyfit multiplies the unsquared residuals by its w, so sqrt(w) gives weights w.
    intercept = np.polyfit(x - x0, y, degree, w=np.sqrt(w))[-1]
    # Equivalent kernel from the pseudoinverse of the weighted design (an SVD, not the normal
    # equations the package solves): s(x0) = sum_j l_j y_j.
    design = np.vander(x - x0, degree + 1, increasing=True)
    kernel = np.linalg.pinv(np.sqrt(w)[:, None] * design)[0] * np.sqrt(w)
    return intercept, kernel


def test_local_quadratic_curve_and_band_equal_direct_weighted_fits():
    # Reference: numpy 2.4 polyfit (weighted least squares) at each evaluation point, and the
    # equivalent kernel from numpy.linalg.pinv of the weighted design.  Both are exact linear
    # algebra on the same weights, so 1e-10 leaves room for rounding only (values are O(0.1)).
    y, prob, _ = miscalibrated(n=900, seed=15)
    res = calibration(y, prob, frac=0.6)  # degree 2 is the default
    assert res.degree == 2
    order = np.argsort(prob)
    x, ys = prob[order], y[order].astype(float)
    pi = np.clip(np.interp(x, res.curve_predicted, res.curve_observed), 0, 1)
    z = stats.norm.ppf(0.975)
    fits, kernels = zip(*(_direct_local_fit(x, ys, x0, 0.6, 2) for x0 in res.curve_predicted))
    np.testing.assert_allclose(res.curve_observed, fits, rtol=0, atol=1e-10)
    np.testing.assert_allclose(np.array(kernels) @ ys, fits, rtol=0, atol=1e-10)
    se = np.sqrt((np.array(kernels) ** 2) @ (pi * (1 - pi)))
    inside = (res.curve_lower > 0) & (res.curve_upper < 1)
    assert inside.sum() > 50
    np.testing.assert_allclose((res.curve_upper - res.curve_observed)[inside], z * se[inside], rtol=0, atol=1e-10)
    # The check discriminates: the local linear curve on the same data is far from these fits.
    linear = calibration(y, prob, frac=0.6, degree=1)
    assert np.max(np.abs(linear.curve_observed - np.array(fits))) > 1e-3
    # The ordinal path passes the degree on to each cut.
    two = ordinal_calibration(y, np.column_stack([1 - prob, prob]), frac=0.6, degree=1)
    np.testing.assert_array_equal(two.cuts[0].curve_observed, linear.curve_observed)


def test_score_with_few_values_lowers_the_degree_where_the_window_needs_it():
    # Predictions with four distinct values.  The prediction at the window's radius gets weight
    # 0, so some windows hold only two distinct values with positive weight and cannot support
    # a quadratic: there the fit must be the weighted straight line (numpy 2.4 polyfit of
    # degree 1); elsewhere it is the quadratic.  Same 1e-10 as above.
    rng = np.random.default_rng(17)
    sizes = [120, 80, 60, 40]
    prob = np.repeat([0.1, 0.3, 0.45, 0.6], sizes)
    y = (rng.random(prob.size) < np.repeat([0.15, 0.25, 0.5, 0.7], sizes)).astype(int)
    with pytest.warns(RiskvetWarning, match="non-empty groups"):
        res = calibration(y, prob, frac=0.75)
    order = np.argsort(prob, kind="stable")
    x, ys = prob[order], y[order].astype(float)
    k = int(0.75 * x.size)
    used = []
    for x0, fitted in zip(res.curve_predicted, res.curve_observed):
        dist = np.abs(x - x0)
        degree = min(2, np.unique(x[dist < np.sort(dist)[k - 1]]).size - 1)
        used.append(degree)
        assert fitted == pytest.approx(_direct_local_fit(x, ys, x0, 0.75, degree)[0], abs=1e-10)
    assert set(used) == {1, 2}  # both kinds of window occur
    assert np.all(np.isfinite(res.curve_lower)) and np.isfinite(res.ici)


@pytest.mark.parametrize("degree", [1, 2])
def test_ici_is_small_on_perfectly_calibrated_data(degree):
    # With y ~ Bernoulli(prob) the true calibration curve is the identity, which a local
    # polynomial of degree >= 1 reproduces exactly (Fan & Gijbels 1996, ch. 3), so the curve
    # carries noise only, of SD about the band's SE; the mean absolute noise is then about
    # 0.8 SE, and 2 x the mean SE is a bound it should not reach.  For contrast, a true
    # calibration slope of 0.8 gives an ICI near 0.05 on the same predictions, so the check
    # can fail.
    rng = np.random.default_rng(16)
    n = 20_000
    prob = special.expit(rng.normal(-1.0, 1.0, n))
    y = (rng.random(n) < prob).astype(int)
    res = calibration(y, prob, degree=degree)
    mean_se = np.mean((res.curve_upper - res.curve_lower) / (2 * stats.norm.ppf(0.975)))
    assert res.ici < 2 * mean_se < 0.02
    y_off = (rng.random(n) < special.expit(0.1 + 0.8 * special.logit(prob))).astype(int)
    assert calibration(y_off, prob, degree=degree).ici > 0.03


def test_band_matches_simulated_spread_of_the_smoother():
    # The band's SE is the binomial SE of the linear smoother with predictions held fixed.
    # Monte Carlo check: 300 outcome draws from known risks; the SD of the curve at each point
    # should match the mean reported SE within 15% (Monte Carlo error of an SD from 300 draws is ~4%).
    rng = np.random.default_rng(9)
    prob = np.sort(special.expit(rng.normal(-0.5, 1.0, 400)))
    curves, ses = [], []
    for _ in range(300):
        y = (rng.random(prob.size) < prob).astype(int)
        res = calibration(y, prob, confidence=0.95)
        curves.append(res.curve_observed)
        ses.append((res.curve_upper - res.curve_lower) / (2 * stats.norm.ppf(0.975)))
    curves = np.array(curves)
    ses = np.array(ses)
    middle = slice(10, -10)  # away from the ends, where clipping at [0, 1] shortens the band
    ratio = curves.std(axis=0, ddof=1)[middle] / ses.mean(axis=0)[middle]
    assert np.all(np.abs(ratio - 1) < 0.15), ratio


def test_grouped_table_and_hosmer_lemeshow_against_slow_code():
    y, prob, _ = miscalibrated(n=700, seed=7)
    res = calibration(y, prob, n_groups=8, confidence=0.9)
    frame = pd.DataFrame({"y": y, "p": prob})
    # Slow version: cut at the empirical 1/8 quantiles, right-closed on the upper edge.
    edges = np.quantile(prob, np.linspace(0, 1, 9))
    frame["g"] = np.searchsorted(edges[1:-1], prob, side="right")
    table = frame.groupby("g").agg(n=("y", "size"), o=("y", "sum"), e=("p", "sum"))
    np.testing.assert_array_equal(res.group_n, table["n"].to_numpy())
    np.testing.assert_array_equal(res.group_events, table["o"].to_numpy())
    np.testing.assert_allclose(res.group_mean_predicted, (table["e"] / table["n"]).to_numpy(), rtol=1e-12)
    hl = np.sum((table["o"] - table["e"]) ** 2 / (table["e"] * (1 - table["e"] / table["n"])))
    assert res.hosmer_lemeshow == pytest.approx(hl, rel=1e-12)
    # Hosmer & Lemeshow: g - 2 df on development data; g on independent data (common practice).
    assert res.hosmer_lemeshow_df == 8
    assert res.hosmer_lemeshow_pvalue == pytest.approx(stats.chi2.sf(hl, 8), rel=1e-10)
    assert calibration(y, prob, n_groups=8, development=True).hosmer_lemeshow_df == 6
    # Wilson limits of the observed rate: statsmodels 0.15.0 proportion_confint(method="wilson").
    lo, hi = proportion_confint(table["o"].to_numpy(), table["n"].to_numpy(), alpha=0.1, method="wilson")
    np.testing.assert_allclose(res.group_observed_lower, lo, rtol=1e-10)
    np.testing.assert_allclose(res.group_observed_upper, hi, rtol=1e-10)
    assert res.groups_frame().shape == (8, 9)


def test_tied_predictions_merge_groups_and_warn():
    y = np.array([0, 1] * 30)
    prob = np.repeat([0.2, 0.5, 0.7], 20)
    with pytest.warns(RiskvetWarning, match="non-empty groups"):
        res = calibration(y, prob)
    assert res.n_groups == 3 and any("groups" in w for w in res.warnings)


def test_histogram_counts_every_prediction():
    y, prob, _ = miscalibrated(n=300, seed=10)
    res = calibration(y, prob)
    assert res.histogram_events.sum() == y.sum() and res.histogram_nonevents.sum() == (1 - y).sum()


def test_ordinal_cuts_equal_binary_calibration_of_each_cut():
    x, y = ordinal_data()
    prob = po_probs(fit_cumulative(x, y), x)
    res = ordinal_calibration(y, prob, development=True)
    for j in range(2):
        yj, pj = dichotomise(y, prob, cut=j)
        direct = calibration(yj, pj, development=True)
        assert res.cuts[j].cut == j
        assert res.cuts[j].slope == pytest.approx(direct.slope, rel=1e-12)
        assert res.cuts[j].ici == pytest.approx(direct.ici, rel=1e-12)


def test_ordinal_hosmer_lemeshow_reduces_to_binary_for_two_levels():
    # sum over both columns of (O - E)^2 / E equals (O - E)^2 / (E (1 - E / n)) (algebra).
    y, prob, _ = miscalibrated(n=600, seed=11)
    binary = calibration(y, prob, development=True)
    ordinal = ordinal_calibration(y, np.column_stack([1 - prob, prob]), development=True)
    assert ordinal.hosmer_lemeshow == pytest.approx(binary.hosmer_lemeshow, rel=1e-10)
    assert ordinal.hosmer_lemeshow_df == binary.hosmer_lemeshow_df == 8


def test_ordinal_hosmer_lemeshow_df_by_simulation():
    # Fagerland & Hosmer (Stat Med 2013): on the development data of a correct proportional
    # odds model the statistic is ~ chi-square with (g - 2)(K - 1) + (K - 2) df (recalled from
    # memory).  300 simulated data sets, K = 3, g = 10: the mean statistic must be near 17,
    # not near the 20 = g (K - 1) used for independent data.  Monte Carlo SE of the mean is
    # about 0.3; the tolerance 1.5 separates the two candidate values (3 apart).
    rng = np.random.default_rng(12)
    dev, val = [], []
    for _ in range(300):
        x = rng.normal(size=(500, 2))
        cum = special.expit(np.array([-0.7, 0.7])[None, :] - (x @ np.array([0.8, -0.5]))[:, None])
        y = (rng.random(500)[:, None] > cum).sum(axis=1)
        true = np.diff(np.c_[np.zeros(500), cum, np.ones(500)], axis=1)
        fitted = po_probs(fit_cumulative(x, y), x)
        from riskvet.measures.calibration import _ordinal_hosmer_lemeshow

        dev.append(_ordinal_hosmer_lemeshow(y, fitted, 10, True)[0])
        val.append(_ordinal_hosmer_lemeshow(y, true, 10, False)[0])
    assert abs(np.mean(dev) - 17) < 1.5
    assert abs(np.mean(val) - 20) < 1.5
    res = ordinal_calibration(y, fitted, development=True)
    assert res.hosmer_lemeshow_df == 17 and ordinal_calibration(y, true).hosmer_lemeshow_df == 20


def test_predictions_at_zero_or_one_are_clipped_with_warning():
    y = np.array([0, 1, 0, 1, 0, 1, 0, 1, 1, 0] * 5)
    prob = np.tile([0.0, 0.2, 0.6, 1.0, 0.3, 0.7, 0.1, 0.8, 0.5, 0.4], 5)
    with pytest.warns(RiskvetWarning, match="exactly 0 or 1"):
        res = calibration(y, prob, n_groups=5)
    assert np.isfinite(res.slope) and res.warnings == ("10 predictions of exactly 0 or 1 were moved to 1e-10 from the boundary before taking logits",)


def test_separation_in_the_slope_fit_is_warned_and_recorded():
    # Outcome perfectly ordered by prob: the slope's ML estimate is infinite (Albert & Anderson,
    # Biometrika 1984); the fitter's warning must reach the result.
    y = np.array([0, 0, 1, 1, 0, 1, 0, 1, 1, 0] * 5)
    prob = np.tile([0.05, 0.2, 0.6, 0.9, 0.3, 0.7, 0.1, 0.8, 0.5, 0.4], 5)
    with pytest.warns(SeparationWarning):
        res = calibration(y, prob, n_groups=5)
    assert any("separation" in w for w in res.warnings)


def test_bad_input_and_serialisation():
    y, prob, _ = miscalibrated(n=200, seed=13)
    with pytest.raises(RiskvetError, match=r"calibration\(n_groups=\).*integer >= 2"):
        calibration(y, prob, n_groups=1)
    with pytest.raises(RiskvetError, match=r"calibration\(frac=\)"):
        calibration(y, prob, frac=0)
    for bad in (0, 3, True, 2.0):
        with pytest.raises(RiskvetError, match=r"calibration\(degree=\).*1 \(local linear\) or 2.*received"):
            calibration(y, prob, degree=bad)
    with pytest.raises(RiskvetError, match=r"ordinal_calibration\(degree=\)"):
        ordinal_calibration(np.r_[y, 2], np.full((y.size + 1, 3), 1 / 3), degree=0)
    with pytest.raises(RiskvetError, match=r"calibration\(development=\)"):
        calibration(y, prob, development="yes")
    with pytest.raises(DataError, match="both events and non-events"):
        calibration(np.zeros(10, int), np.full(10, 0.2))
    with pytest.raises(DataError, match=r"ordinal_calibration\(prob=\)"):
        ordinal_calibration([0, 1, 2], np.full((3, 3), 0.5))
    res = calibration(y, prob)
    json.dumps(res.to_dict(), allow_nan=False)
    assert res.to_frame()["measure"].tolist()[:2] == ["calibration_in_the_large", "slope"]
    assert res.curve_frame().shape[1] == 4
    x, yo = ordinal_data(n=200, seed=14)
    ores = ordinal_calibration(yo, po_probs(fit_cumulative(x, yo), x))
    json.dumps(ores.to_dict(), allow_nan=False)
    assert "ordinal_hosmer_lemeshow" in set(ores.to_frame()["measure"])


@pytest.mark.parametrize("k", [2, 3, 4])
def test_performance_summary_equals_the_full_results(k):
    from riskvet import metrics

    x, y = ordinal_data(n=400, seed=20 + k, k=k)
    prob = po_probs(fit_cumulative(x, y), x)
    prob = prob * 0.9 + 0.1 / k  # shrink towards uniform so the calibration fits do real work
    summary = metrics.performance_summary(y, prob)
    assert tuple(summary) == metrics.summary_keys(k)
    disc = metrics.ordinal_discrimination(y, prob)
    cal = metrics.ordinal_calibration(y, prob)
    acc = metrics.overall_accuracy(y, prob)
    for j in range(k - 1):
        assert summary[f"auc_cut{j}"] == disc.cuts[j].estimate
        assert summary[f"calibration_intercept_cut{j}"] == cal.cuts[j].calibration_in_the_large
        assert summary[f"calibration_slope_cut{j}"] == cal.cuts[j].slope
        assert summary[f"ici_cut{j}"] == pytest.approx(cal.cuts[j].ici, rel=1e-12)
    assert summary["average_cut_auc"] == disc.average_cut_c
    assert summary["ordinal_c"] == pytest.approx(disc.ordinal_c, rel=1e-12)
    assert summary["generalised_c"] == pytest.approx(disc.generalised_c, rel=1e-12)
    assert summary["brier"] == acc.brier.brier and summary["scaled_brier"] == acc.brier.scaled_brier
    assert summary["nagelkerke_r2"] == acc.nagelkerke_r2
    assert summary["n_fit_warnings"] == 0.0
    assert all(isinstance(v, float) for v in summary.values())


def test_performance_summary_refuses_a_missing_level():
    from riskvet import metrics

    with pytest.raises(DataError, match=r"performance_summary\(y=\).*every level"):
        metrics.performance_summary([0, 0, 2, 2], np.full((4, 3), 1 / 3))
