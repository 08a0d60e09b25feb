"""Random-effects pooling: riskvet.pooling.

Checked against a published worked example (the BCG vaccine trials),
statsmodels 0.15.0 (``statsmodels.stats.meta_analysis.combine_effects``), a
slow direct maximisation of the restricted likelihood by scipy.optimize,
by-hand formulas for the Hartung-Knapp and prediction intervals, and
invariants of the estimators.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, stats
from statsmodels.stats.meta_analysis import combine_effects

import riskvet
import riskvet.pooling as pooling
from riskvet.errors import ConvergenceWarning, DataError, RiskvetError
from riskvet.validation import pooling as pooling_module

# BCG vaccine trials: tuberculosis cases / non-cases among vaccinated and
# unvaccinated (Colditz GA, Brewer TF, Berkey CS, et al. Efficacy of BCG
# vaccine in the prevention of tuberculosis. JAMA 1994;271:698-702), the
# worked example of Viechtbauer W. Conducting meta-analyses in R with the
# metafor package. J Stat Softw 2010;36(3), section 3.  Counts recalled from
# memory; they reproduce Q = 152.2330 printed there to all digits, which
# confirms them.
BCG = np.array(
    [
        [4, 119, 11, 128],
        [6, 300, 29, 274],
        [3, 228, 11, 209],
        [62, 13536, 248, 12619],
        [33, 5036, 47, 5761],
        [180, 1361, 372, 1079],
        [8, 2537, 10, 619],
        [505, 87886, 499, 87892],
        [29, 7470, 45, 7232],
        [17, 1699, 65, 1600],
        [186, 50448, 141, 27197],
        [5, 2493, 3, 2338],
        [27, 16886, 29, 17825],
    ],
    dtype=float,
)


def bcg_log_risk_ratios() -> tuple[np.ndarray, np.ndarray]:
    tpos, tneg, cpos, cneg = BCG.T
    y = np.log(tpos / (tpos + tneg)) - np.log(cpos / (cpos + cneg))
    v = 1 / tpos - 1 / (tpos + tneg) + 1 / cpos - 1 / (cpos + cneg)
    return y, v


def heterogeneous(seed: int, k: int = 8) -> tuple[np.ndarray, np.ndarray]:
    """Estimates with unequal variances and real between-cluster spread."""
    rng = np.random.default_rng(seed)
    v = rng.uniform(0.01, 0.2, size=k)
    y = 0.7 + rng.normal(0, 0.4, size=k) + rng.normal(0, np.sqrt(v))
    return y, v


# --- published worked example -------------------------------------------------


def test_bcg_worked_example_dl_and_reml():
    # Viechtbauer (2010), J Stat Softw 36(3), section 3 (the BCG log risk
    # ratios); values recalled from memory, printed there to 4 decimals:
    #   REML: tau^2 = 0.3132, estimate -0.7145, se 0.1798, CI -1.0669 to -0.3622
    #   DL:   tau^2 = 0.3088, estimate -0.7141, se 0.1787, CI -1.0644 to -0.3638
    #   Q(df = 12) = 152.2330; I^2 (DL) = 92.12%
    # Tolerance 6e-5: half a unit in the 4th decimal, plus float slack.
    y, v = bcg_log_risk_ratios()
    reml = pooling.random_effects(y, v, method="reml")
    dl = pooling.random_effects(y, v, method="dl")
    tol = 6e-5
    assert reml.tau2 == pytest.approx(0.3132, abs=tol)
    assert reml.estimate == pytest.approx(-0.7145, abs=tol)
    assert reml.se == pytest.approx(0.1798, abs=tol)
    assert (reml.lower, reml.upper) == pytest.approx((-1.0669, -0.3622), abs=tol)
    assert dl.tau2 == pytest.approx(0.3088, abs=tol)
    assert dl.estimate == pytest.approx(-0.7141, abs=tol)
    assert dl.se == pytest.approx(0.1787, abs=tol)
    assert (dl.lower, dl.upper) == pytest.approx((-1.0644, -0.3638), abs=tol)
    assert dl.q == pytest.approx(152.2330, abs=tol) and dl.k == 13
    assert dl.i2 == pytest.approx(0.9212, abs=tol)


# --- statsmodels 0.15.0 ---------------------------------------------------------
# combine_effects(effect, variance, method_re=...) returns fixed- and
# random-effects results.  method_re="dl" (alias "chi2") is DerSimonian and
# Laird's moment estimator, our method="dl"; note statsmodels does not truncate
# it at 0, so the comparison uses data with Q > k - 1.  method_re="iterated"
# (alias "pm") is Paule and Mandel's estimator, which riskvet does not offer;
# it equals REML when all variances are equal (both give tau^2 = s^2 - v), the
# case compared below.  Its mean_effect_re / sd_eff_w_re are our estimate / se;
# conf_int(use_t=False)[1] our normal interval; sd_eff_w_re_hksj and
# conf_int(use_t=True)[3] ("random effect wls", t on k - 1 df) our
# hartung_knapp=True se and interval; q is Cochran's Q.


@pytest.mark.parametrize("seed", [2, 3, 4])
def test_dl_matches_statsmodels_combine_effects(seed):
    y, v = heterogeneous(seed)
    ref = combine_effects(y, v, method_re="dl")
    assert ref.q > len(y) - 1  # so statsmodels' untruncated tau^2 is ours
    ours = pooling.random_effects(y, v, method="dl")
    hk = pooling.random_effects(y, v, method="dl", hartung_knapp=True)
    # Both compute the same closed forms: agreement to rounding (1e-12).
    rel = 1e-12
    assert ours.tau2 == pytest.approx(ref.tau2, rel=rel)
    assert ours.q == pytest.approx(ref.q, rel=rel)
    assert ours.i2 == pytest.approx(ref.i2, rel=rel)
    assert ours.estimate == pytest.approx(ref.mean_effect_re, rel=rel)
    assert ours.se == pytest.approx(ref.sd_eff_w_re, rel=rel)
    assert (ours.lower, ours.upper) == pytest.approx(tuple(ref.conf_int(use_t=False)[1]), rel=rel)
    assert hk.se == pytest.approx(ref.sd_eff_w_re_hksj, rel=rel)
    assert (hk.lower, hk.upper) == pytest.approx(tuple(ref.conf_int(use_t=True)[3]), rel=rel)
    assert ours.weights == pytest.approx(np.asarray(ref.weights_rel_re), rel=rel)


def test_reml_matches_statsmodels_paule_mandel_when_variances_are_equal():
    rng = np.random.default_rng(7)
    y = rng.normal(0.0, 0.5, size=9)
    v = np.full(9, 0.05)
    ref = combine_effects(y, v, method_re="iterated", atol=1e-13, maxiter=200)
    ours = pooling.random_effects(y, v, method="reml", hartung_knapp=True)
    s2 = np.var(y, ddof=1)
    # PM solves its estimating equation to atol 1e-13 and REML stops at a
    # relative step of 1e-12: agreement to 1e-9 is far inside both.
    assert ours.tau2 == pytest.approx(s2 - 0.05, rel=1e-9)
    assert ours.tau2 == pytest.approx(ref.tau2, rel=1e-9)
    assert ours.estimate == pytest.approx(ref.mean_effect_re, rel=1e-9)
    assert (ours.lower, ours.upper) == pytest.approx(tuple(ref.conf_int(use_t=True)[3]), rel=1e-9)


# --- REML against a slow direct maximisation ----------------------------------


def slow_restricted_loglik(tau2: float, y: np.ndarray, v: np.ndarray) -> float:
    """Restricted log-likelihood in matrix form (Patterson & Thompson's REML):
    -1/2 [log|V| + log|X'V^-1 X| + r'V^-1 r], V = diag(v + tau2), X = 1."""
    V = np.diag(v + tau2)
    X = np.ones((y.size, 1))
    Vinv = np.linalg.inv(V)
    beta = np.linalg.solve(X.T @ Vinv @ X, X.T @ Vinv @ y)
    r = y - X @ beta
    return -0.5 * (np.linalg.slogdet(V)[1] + np.linalg.slogdet(X.T @ Vinv @ X)[1] + r @ Vinv @ r)


@pytest.mark.parametrize("seed", [11, 12, 13, 14])
def test_reml_maximises_the_restricted_likelihood(seed):
    y, v = heterogeneous(seed, k=6 + seed % 4)
    found = optimize.minimize_scalar(
        lambda t: -slow_restricted_loglik(t, y, v), bounds=(0.0, 10.0), method="bounded", options={"xatol": 1e-10}
    )
    ours = pooling.random_effects(y, v, method="reml")
    # Brent's bounded search stops at xatol 1e-10 in tau^2; 1e-7 leaves room
    # for the flatness of the likelihood near its top.
    assert ours.tau2 == pytest.approx(found.x, abs=1e-7)
    # and ours is at least as high as what the search found (to rounding)
    assert slow_restricted_loglik(ours.tau2, y, v) >= -found.fun - 1e-12


def test_reml_on_the_boundary_is_zero_and_is_the_maximum():
    # Estimates closer together than their variances allow: the restricted
    # likelihood falls from tau^2 = 0, so the maximum over tau^2 >= 0 is 0.
    y = np.array([0.10, 0.12, 0.09, 0.11, 0.10])
    v = np.array([0.04, 0.05, 0.03, 0.06, 0.04])
    ours = pooling.random_effects(y, v, method="reml")
    assert ours.tau2 == 0.0
    grid = np.linspace(0.0, 0.05, 51)
    assert np.argmax([slow_restricted_loglik(t, y, v) for t in grid]) == 0


# --- by-hand formulas ------------------------------------------------------------


def test_hartung_knapp_and_prediction_interval_by_hand():
    y, v = heterogeneous(21, k=7)
    plain = pooling.random_effects(y, v, method="reml", confidence=0.9)
    hk = pooling.random_effects(y, v, method="reml", hartung_knapp=True, confidence=0.9)
    k = y.size
    w = 1.0 / (v + plain.tau2)
    mu = np.sum(w * y) / np.sum(w)
    se_hk = math.sqrt(np.sum(w * (y - mu) ** 2) / ((k - 1) * np.sum(w)))
    t1 = stats.t.ppf(0.95, k - 1)
    # Same arithmetic in another order: agreement to rounding.
    assert hk.estimate == pytest.approx(mu, rel=1e-12)
    assert hk.se == pytest.approx(se_hk, rel=1e-12)
    assert (hk.lower, hk.upper) == pytest.approx((mu - t1 * se_hk, mu + t1 * se_hk), rel=1e-12)
    se = math.sqrt(1.0 / np.sum(w))
    half = stats.t.ppf(0.95, k - 2) * math.sqrt(plain.tau2 + se**2)
    assert (plain.prediction_lower, plain.prediction_upper) == pytest.approx((mu - half, mu + half), rel=1e-12)
    half_hk = stats.t.ppf(0.95, k - 2) * math.sqrt(plain.tau2 + se_hk**2)
    assert (hk.prediction_lower, hk.prediction_upper) == pytest.approx((mu - half_hk, mu + half_hk), rel=1e-12)
    assert plain.q_p == pytest.approx(stats.chi2.sf(plain.q, k - 1), rel=1e-12)


def test_two_clusters_give_no_prediction_interval_and_say_why():
    res = pooling.random_effects([0.70, 0.80], [0.001, 0.002])
    assert math.isnan(res.prediction_lower) and math.isnan(res.prediction_upper)
    assert any("at least 3 clusters" in note for note in res.notes)
    assert math.isfinite(res.lower) and math.isfinite(res.upper)
    assert json.dumps(res.to_dict(), allow_nan=False)


# --- invariants ------------------------------------------------------------------


def test_dl_tau2_is_zero_when_q_is_at_most_its_degrees_of_freedom():
    y = np.array([0.30, 0.35, 0.28, 0.33])
    v = np.array([0.01, 0.02, 0.015, 0.01])
    res = pooling.random_effects(y, v, method="dl")
    assert res.q <= y.size - 1
    assert res.tau2 == 0.0 and res.i2 == 0.0
    # with tau^2 = 0 the random-effects result is the fixed-effect one
    assert res.estimate == pytest.approx(np.sum(y / v) / np.sum(1 / v), rel=1e-12)


@pytest.mark.parametrize("method", ["dl", "reml"])
def test_equal_estimates_and_variances_have_no_heterogeneity(method):
    res = pooling.random_effects(np.full(5, 0.72), np.full(5, 0.003), method=method)
    assert res.tau2 == 0.0 and res.q == pytest.approx(0.0, abs=1e-20) and res.i2 == 0.0
    assert res.estimate == pytest.approx(0.72, rel=1e-14)
    assert res.se == pytest.approx(math.sqrt(0.003 / 5), rel=1e-12)
    assert res.weights == pytest.approx(np.full(5, 0.2), rel=1e-12)


@settings(max_examples=25, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    k=st.integers(3, 10),
    shift=st.floats(-5, 5),
    factor=st.floats(0.05, 20),
    method=st.sampled_from(["dl", "reml"]),
    hk=st.booleans(),
)
def test_permutation_invariance_and_scale_equivariance(seed, k, shift, factor, method, hk):
    rng = np.random.default_rng(seed)
    v = rng.uniform(0.005, 0.3, size=k)
    y = rng.normal(0, 0.5, size=k) + rng.normal(0, np.sqrt(v))
    base = pooling.random_effects(y, v, method=method, hartung_knapp=hk)
    order = rng.permutation(k)
    permuted = pooling.random_effects(y[order], v[order], method=method, hartung_knapp=hk)
    # Sums in another order and an iteration stopped at a relative step of
    # 1e-12: 1e-8 relative (plus 1e-12 absolute for tau^2 near 0) is ample.
    for name in ("estimate", "se", "tau2", "lower", "upper", "q", "i2"):
        assert getattr(permuted, name) == pytest.approx(getattr(base, name), rel=1e-8, abs=1e-12)
    assert permuted.weights == pytest.approx(base.weights[order], rel=1e-8)
    scaled = pooling.random_effects(shift + factor * y, factor**2 * v, method=method, hartung_knapp=hk)
    assert scaled.estimate == pytest.approx(shift + factor * base.estimate, rel=1e-8, abs=1e-9 * factor)
    assert scaled.se == pytest.approx(factor * base.se, rel=1e-8)
    assert scaled.tau2 == pytest.approx(factor**2 * base.tau2, rel=1e-7, abs=1e-12 * factor**2)
    assert scaled.upper - scaled.lower == pytest.approx(factor * (base.upper - base.lower), rel=1e-8)
    assert scaled.q == pytest.approx(base.q, rel=1e-8) and scaled.i2 == pytest.approx(base.i2, rel=1e-8, abs=1e-12)


def test_reml_non_convergence_warns_and_is_recorded(monkeypatch):
    monkeypatch.setattr(pooling_module, "_REML_MAX_ITER", 1)
    y, v = heterogeneous(5)
    with pytest.warns(ConvergenceWarning, match="did not converge"):
        res = pooling.random_effects(y, v, method="reml")
    assert res.warnings and "did not converge" in res.warnings[0]


def test_converged_fit_is_silent():
    y, v = bcg_log_risk_ratios()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = pooling.random_effects(y, v)
    assert res.warnings == () and res.iterations >= 1


# --- result objects ----------------------------------------------------------------


def test_result_tables_and_dict():
    y, v = bcg_log_risk_ratios()
    res = pooling.random_effects(y, v, labels=[f"trial {i}" for i in range(1, 14)])
    frame = res.to_frame()
    assert list(frame.columns) == ["row", "estimate", "lower", "upper", "weight"]
    assert frame["row"].tolist()[-2:] == ["pooled", "prediction"] and frame["row"][0] == "trial 1"
    assert frame["weight"][:13].sum() == pytest.approx(1.0, rel=1e-12)
    assert res.summary_frame().shape[0] == 1
    out = res.to_dict()
    assert json.dumps(out, allow_nan=False) and out["k"] == 13 and out["method"] == "reml"
    with pytest.raises(AttributeError):
        res.tau2 = 0.0
    with pytest.raises(ValueError):
        res.weights[0] = 0.5
    assert riskvet.pooling.random_effects is pooling_module.random_effects


# --- transformations -------------------------------------------------------------------


def test_logit_c_delta_method_and_round_trip():
    c = np.array([0.62, 0.75, 0.81, 0.93])
    var = np.array([4e-4, 2.5e-4, 1e-4, 3e-5])
    logit, logit_var = pooling.logit_c(c, var)
    # delta method: the derivative of logit by a central difference (error
    # O(h^2) = 1e-12 relative with h = 1e-6, so 1e-6 is safe).
    h = 1e-6
    slope = (np.log((c + h) / (1 - c - h)) - np.log((c - h) / (1 - c + h))) / (2 * h)
    assert logit_var == pytest.approx(var * slope**2, rel=1e-6)
    assert pooling.c_from_logit(logit) == pytest.approx(c, rel=1e-14)


def test_log_oe_forms_and_round_trip():
    oe = np.array([0.8, 1.1, 1.3])
    var = np.array([0.01, 0.02, 0.04])
    log, log_var = pooling.log_oe(oe, var)
    assert log_var == pytest.approx(var / oe**2, rel=1e-14)
    assert pooling.oe_from_log(log) == pytest.approx(oe, rel=1e-14)
    o, e, n = np.array([40.0, 55.0]), np.array([50.0, 50.0]), np.array([400.0, 500.0])
    log, poisson = pooling.log_oe_from_counts(o, e)
    assert log == pytest.approx(np.log(o / e)) and poisson == pytest.approx(1 / o)
    _, binomial = pooling.log_oe_from_counts(o, e, n=n)
    # var(O) = n p (1 - p) with p = O / n, over O^2
    assert binomial == pytest.approx(n * (o / n) * (1 - o / n) / o**2, rel=1e-14)


def test_pooling_c_on_the_logit_scale_and_back():
    c = np.array([0.70, 0.74, 0.78, 0.72, 0.81])
    var = np.array([6e-4, 4e-4, 5e-4, 9e-4, 3e-4])
    pooled = pooling.random_effects(*pooling.logit_c(c, var), hartung_knapp=True)
    back = pooling.back_transform(pooled, scale="logit")
    assert back.estimate == pytest.approx(1 / (1 + math.exp(-pooled.estimate)), rel=1e-14)
    assert back.lower < back.estimate < back.upper and 0 < back.prediction_lower < back.prediction_upper < 1
    assert c.min() < back.estimate < c.max()
    assert json.dumps(back.to_dict(), allow_nan=False) and back.to_frame().shape == (1, 6)
    same = pooling.back_transform(pooled, scale="identity")
    assert same.estimate == pooled.estimate
    oe = pooling.back_transform(pooled, scale="log")
    assert oe.upper == pytest.approx(math.exp(pooled.upper), rel=1e-14)


# --- bad input, once per parameter -------------------------------------------------------


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"estimates": [0.7]}, DataError, "at least 2 clusters"),
        ({"estimates": [[0.7, 0.8]]}, DataError, "1-D"),
        ({"estimates": [0.7, np.nan, 0.8]}, DataError, "finite"),
        ({"estimates": ["a", "b"]}, DataError, "numbers"),
        ({"variances": [0.01, 0.0, 0.02]}, DataError, "variances > 0"),
        ({"variances": [0.01, 0.02]}, DataError, "one variance per estimate"),
        ({"variances": [0.01, np.inf, 0.02]}, DataError, "finite"),
        ({"method": "pm"}, RiskvetError, "'dl' or 'reml'"),
        ({"hartung_knapp": "yes"}, RiskvetError, "True or False"),
        ({"confidence": 95}, RiskvetError, "strictly between 0 and 1"),
        ({"labels": ["a", "b"]}, DataError, "one label per cluster"),
    ],
)
def test_random_effects_bad_input(kwargs, error, match):
    args = {"estimates": [0.7, 0.75, 0.8], "variances": [0.01, 0.02, 0.015], **kwargs}
    with pytest.raises(error, match=match) as caught:
        pooling.random_effects(args.pop("estimates"), args.pop("variances"), **args)
    assert "random_effects(" in str(caught.value) and "received" in str(caught.value)


def test_transformation_bad_input():
    with pytest.raises(DataError, match=r"logit_c\(c=\)"):
        pooling.logit_c([0.7, 1.0], [0.01, 0.01])
    with pytest.raises(DataError, match=r"logit_c\(variance=\)"):
        pooling.logit_c([0.7, 0.8], [0.01])
    with pytest.raises(DataError, match=r"log_oe\(oe=\)"):
        pooling.log_oe([0.0, 1.0], [0.01, 0.01])
    with pytest.raises(DataError, match=r"log_oe\(variance=\)"):
        pooling.log_oe([0.9, 1.0], [-0.01, 0.01])
    with pytest.raises(DataError, match=r"log_oe_from_counts\(observed=\)"):
        pooling.log_oe_from_counts([0, 5], [4.0, 5.0])
    with pytest.raises(DataError, match=r"log_oe_from_counts\(expected=\)"):
        pooling.log_oe_from_counts([3, 5], [4.0])
    with pytest.raises(DataError, match=r"log_oe_from_counts\(n=\)"):
        pooling.log_oe_from_counts([3, 5], [4.0, 5.0], n=[3, 100])
    pooled = pooling.random_effects([0.1, 0.2, 0.3], [0.01, 0.01, 0.01])
    with pytest.raises(RiskvetError, match=r"back_transform\(scale=\)"):
        pooling.back_transform(pooled, scale="probit")
    with pytest.raises(RiskvetError, match=r"back_transform\(pooled=\)"):
        pooling.back_transform(0.5, scale="logit")
