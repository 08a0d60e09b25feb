"""The log-log link, and what the complementary log-log link means with two levels.

References: statsmodels GLM Binomial with the CLogLog link (version named in
the assertion messages); the link's own identities.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels
import statsmodels.api as sm

from riskvet.modelling.fitter import fit_cumulative
from riskvet.modelling.links import LINKS, link_cdf, link_parts, link_ppf

SM = f"statsmodels {statsmodels.__version__}"


def binary_data(seed=3, n=400):
    rng = np.random.default_rng(seed)
    X = pd.DataFrame({"age": rng.normal(size=n), "smoker": rng.binomial(1, 0.3, n).astype(float)})
    eta = -0.4 + 0.7 * X["age"] - 0.5 * X["smoker"]
    y = (rng.uniform(size=n) < 1 - np.exp(-np.exp(eta))).astype(int).to_numpy()
    return X, y


def statsmodels_cloglog(X, event):
    model = sm.GLM(event, sm.add_constant(X), family=sm.families.Binomial(link=sm.families.links.CLogLog()))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return model.fit(tol=1e-12, maxiter=200)


def test_loglog_is_in_the_links_and_has_its_formulas():
    assert "loglog" in LINKS
    t = np.linspace(-5, 5, 41)
    F, S, f, df = link_parts("loglog", t)
    np.testing.assert_allclose(F, np.exp(-np.exp(-t)), rtol=1e-14)
    np.testing.assert_allclose(S, 1 - np.exp(-np.exp(-t)), rtol=1e-12)
    np.testing.assert_allclose(f, np.exp(-t) * np.exp(-np.exp(-t)), rtol=1e-13)
    np.testing.assert_allclose(df, f * (np.exp(-t) - 1), rtol=1e-12, atol=1e-300)
    # Derivatives by central differences (step 1e-6: error of order 1e-10).
    h = 1e-6
    np.testing.assert_allclose((link_cdf("loglog", t + h) - link_cdf("loglog", t - h)) / (2 * h), f, atol=1e-8)
    np.testing.assert_allclose((link_parts("loglog", t + h)[2] - link_parts("loglog", t - h)[2]) / (2 * h), df, atol=1e-8)
    p = np.array([1e-12, 0.01, 0.5, 0.99, 1 - 1e-12])
    np.testing.assert_allclose(link_cdf("loglog", link_ppf("loglog", p)), p, rtol=1e-10)
    np.testing.assert_allclose(link_ppf("loglog", p), -np.log(-np.log(p)), rtol=1e-14)


def test_loglog_tails_keep_their_precision():
    # Mirror of the complementary log-log: F_loglog(t) = S_cloglog(-t).
    t = np.array([-800.0, -50.0, -3.0, 0.0, 3.0, 40.0, 800.0])
    F, S, f, df = link_parts("loglog", t)
    Fc, Sc, fc, dfc = link_parts("cloglog", -t)
    np.testing.assert_array_equal(F, Sc)
    np.testing.assert_array_equal(S, Fc)
    assert np.all(np.isfinite(np.c_[F, S, f, df]))
    assert F[0] == 0.0 and S[0] == 1.0
    # Upper tail: 1 - F(40) = 1 - exp(-exp(-40)) ~ exp(-40), kept by expm1.
    assert S[5] == pytest.approx(np.exp(-40.0), rel=1e-12)


def test_binary_loglog_is_the_event_side_cloglog_regression():
    # K = 2, link="loglog": P(Y = 1) = 1 - exp(-exp(x beta - theta)), the
    # complementary log-log regression of the event with intercept -theta.
    # Tolerance 1e-6: both fits stop at gradients of order 1e-8.
    X, y = binary_data()
    fit = fit_cumulative(X, y, link="loglog")
    ref = statsmodels_cloglog(X, y)
    np.testing.assert_allclose(-fit.thresholds.iloc[0], ref.params["const"], atol=1e-6, err_msg=SM)
    np.testing.assert_allclose(fit.coef.to_numpy(), ref.params[["age", "smoker"]].to_numpy(), atol=1e-6, err_msg=SM)
    assert fit.loglik == pytest.approx(ref.llf, abs=1e-8)
    # statsmodels' GLM standard errors use the expected information; the
    # fitter's the observed one; they differ at the estimate (non-canonical
    # link), so only their agreement to within 5% is checked.
    np.testing.assert_allclose(fit.se[["age", "smoker"]].to_numpy(), ref.bse[["age", "smoker"]].to_numpy(), rtol=0.05)
    prob = fit.predict_proba(X)[:, 1]
    np.testing.assert_allclose(prob, ref.predict(sm.add_constant(X)), atol=1e-8)


def test_binary_cloglog_models_the_lowest_level():
    # K = 2, link="cloglog": P(Y = 0) = 1 - exp(-exp(theta - x beta)), the
    # complementary log-log regression of the NON-event 1 - y, whose
    # coefficients are -beta and intercept theta.
    X, y = binary_data(seed=4)
    fit = fit_cumulative(X, y, link="cloglog")
    ref = statsmodels_cloglog(X, 1 - y)
    np.testing.assert_allclose(fit.thresholds.iloc[0], ref.params["const"], atol=1e-6, err_msg=SM)
    np.testing.assert_allclose(-fit.coef.to_numpy(), ref.params[["age", "smoker"]].to_numpy(), atol=1e-6, err_msg=SM)
    assert fit.loglik == pytest.approx(ref.llf, abs=1e-8)


def test_ordinal_loglog_is_the_mirror_of_cloglog_on_reversed_levels():
    # Reversing the levels (Y -> K-1-Y) and the sign of x turns a log-log
    # model into a complementary log-log one: P(Y <= j) = exp(-exp(-(theta_j
    # - x beta))) equals P(Y' >= K-1-j) for Y' = K-1-Y under cloglog with
    # thresholds -theta reversed and coefficients -beta.
    rng = np.random.default_rng(5)
    n = 300
    X = rng.normal(size=(n, 2))
    y = np.searchsorted([-0.3, 0.9], X @ [0.8, -0.4] + rng.gumbel(size=n))
    a = fit_cumulative(X, y, link="loglog")
    b = fit_cumulative(X, 2 - y, link="cloglog")
    np.testing.assert_allclose(a.thresholds.to_numpy(), -b.thresholds.to_numpy()[::-1], atol=1e-6)
    np.testing.assert_allclose(a.coef.to_numpy(), -b.coef.to_numpy(), atol=1e-6)
    assert a.loglik == pytest.approx(b.loglik, abs=1e-8)
