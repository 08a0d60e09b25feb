"""Tests of riskvet.modelling.fitter.fit_cumulative.

Reference fits come from statsmodels (OrderedModel, Logit, Probit, GLM; the
version is printed in assertion messages), from the R MASS polr results that
statsmodels ships with its own ordinal-model tests, and from published worked
examples.  Everything else is an invariant of the likelihood.
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy
import statsmodels
import statsmodels.api as sm
from scipy import optimize, stats
from statsmodels.miscmodels.ordinal_model import OrderedModel

from riskvet.errors import (
    ConvergenceWarning,
    CrossingWarning,
    DataError,
    FitError,
    RiskvetError,
    SeparationWarning,
)
from riskvet.modelling.fitter import CumulativeFit, _evaluate, _fit_arrays, _grad_hess, _make_design, fit_cumulative

SM = f"statsmodels {statsmodels.__version__}"
SCIPY = f"scipy {scipy.__version__}"
UCLA_CSV = Path(statsmodels.__file__).parent / "miscmodels" / "tests" / "results" / "ologit_ucla.csv"
LEVELS = ["unlikely", "somewhat likely", "very likely"]


def ucla():
    df = pd.read_csv(UCLA_CSV)
    y = pd.Categorical(df["apply"], categories=LEVELS, ordered=True)
    return df[["pared", "public", "gpa"]].astype(float), y


def simulated(n=500, K=4, seed=5, link="logit", p=3):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    X[:, -1] = rng.binomial(1, 0.4, n)
    beta = np.linspace(0.8, -0.5, p)
    # P(Y <= j) = F(theta_j - x beta) when the latent x beta + e, e ~ F, is cut
    # at theta; scipy's gumbel_l has the cloglog cdf 1 - exp(-exp(t)).
    if link == "logit":
        noise = rng.logistic(size=n)
    elif link == "probit":
        noise = rng.normal(size=n)
    else:
        noise = stats.gumbel_l.rvs(size=n, random_state=rng)
    cuts = np.quantile(X @ beta + noise, np.linspace(0, 1, K + 1)[1:-1])
    y = np.searchsorted(cuts, X @ beta + noise)
    return pd.DataFrame(X, columns=[f"v{j}" for j in range(p)]), y


def statsmodels_ordered(X, y, distr):
    """statsmodels OrderedModel by BFGS, converted to (thresholds, coef)."""
    model = OrderedModel(y, X, distr=distr)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = model.fit(method="bfgs", disp=False, maxiter=10000, gtol=1e-8)
    par = np.asarray(res.params)
    p = X.shape[1]
    # statsmodels stores the first threshold and then log increments.
    theta = model.transform_threshold_params(par)[1:-1]
    return np.r_[theta, par[:p]], res


# ---------------------------------------------------------------------------
# Published worked example and the R results statsmodels ships
# ---------------------------------------------------------------------------


def test_ucla_ologit_against_r_polr_results_shipped_with_statsmodels():
    # Source: statsmodels/miscmodels/tests/results/results_ordinal_model.py
    # (R 3.4.4, MASS::polr(apply ~ pared + public + gpa, method="logit"/
    # "probit"/"cloglog", Hess=TRUE) on ologit_ucla.csv, the UCLA OARC
    # ordered-logit teaching data set).  polr maximises with optim's BFGS,
    # which stops short of the maximum: its coefficients are within 2e-4 and
    # its thresholds within 6e-4 of the exact maximum (which statsmodels
    # OrderedModel by Newton with tol 1e-12 reproduces to 1e-8 here), so the
    # tolerances are atol 2e-4 (coefficients, as in statsmodels' own test) and
    # 1e-3 (thresholds).  Standard errors are printed to 4 significant
    # digits: rtol 3e-3.
    from statsmodels.miscmodels.tests.results import results_ordinal_model as ref

    X, y = ucla()
    for link, res in (("logit", ref.res_ord_logit), ("probit", ref.res_ord_probit), ("cloglog", ref.res_ord_cloglog)):
        fit = fit_cumulative(X, y, link=link)
        assert fit.converged
        np.testing.assert_allclose(fit.coef.to_numpy(), res.coefficients_val, atol=2e-4, err_msg=link)
        np.testing.assert_allclose(fit.thresholds.to_numpy(), res.thresholds, atol=1e-3, err_msg=link)
        np.testing.assert_allclose(fit.se.to_numpy()[2:], res.coefficients_stdE, rtol=3e-3, atol=1e-5, err_msg=link)
        # The R probabilities rest on the optim estimates: atol 1e-4.
        np.testing.assert_allclose(fit.predict_proba(X)[:7], res.prob_pred, atol=1e-4, err_msg=link)
        # p-values of the coefficients (normal reference, as in the results file).
        frame = fit.to_frame()
        coef_p = frame.loc[frame["kind"] == "coefficient", "p"].to_numpy()
        np.testing.assert_allclose(coef_p, res.coefficients_pval, rtol=0.01, atol=1e-5, err_msg=link)


def test_ucla_ologit_published_deviance_and_labels():
    # UCLA OARC, "Ordinal logistic regression | R data analysis examples":
    # polr prints residual deviance 717.0249 and AIC 727.0249 (recalled from
    # memory).  A deviance agrees to 4 decimals once the optimum is reached.
    X, y = ucla()
    fit = fit_cumulative(X, y)
    assert -2 * fit.loglik == pytest.approx(717.0249, abs=2e-4)
    assert fit.aic == pytest.approx(727.0249, abs=2e-4)
    assert list(fit.thresholds.index) == ["y<=unlikely", "y<=somewhat likely"]
    assert fit.levels == tuple(LEVELS)
    assert fit.n == 400 and fit.n_rows == 400


# ---------------------------------------------------------------------------
# statsmodels reference fits
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "link, distr, seed",
    [("logit", "logit", 5), ("logit", "logit", 11), ("probit", "probit", 6), ("cloglog", stats.gumbel_l, 7)],
)
def test_against_statsmodels_ordered_model_simulated(link, distr, seed):
    # statsmodels OrderedModel (BFGS, gtol 1e-8); cloglog is its distr=scipy.stats.gumbel_l,
    # whose cdf is 1 - exp(-exp(t)).  BFGS stopped at gradient norm 1e-8 leaves
    # parameter errors below 1e-7: estimates atol 1e-6.  statsmodels' standard
    # errors come from a numerically differentiated score: rtol 1e-5.
    X, y = simulated(seed=seed, link=link)
    fit = fit_cumulative(X, y, link=link)
    est, res = statsmodels_ordered(X, y, distr)
    np.testing.assert_allclose(fit.params.to_numpy(), est, atol=1e-6, err_msg=SM)
    assert fit.loglik == pytest.approx(res.llf, abs=1e-8), SM
    p = X.shape[1]
    np.testing.assert_allclose(fit.se.to_numpy()[-p:], np.asarray(res.bse)[:p], rtol=1e-5, err_msg=SM)
    np.testing.assert_allclose(fit.predict_proba(X), res.predict(), atol=1e-7, err_msg=SM)
    assert fit.aic == pytest.approx(res.aic, abs=1e-6), SM
    assert fit.bic == pytest.approx(res.bic, abs=1e-6), SM


def test_threshold_covariance_matches_statsmodels_by_delta_method():
    # statsmodels OrderedModel reports the covariance of (theta_0, log increments);
    # mapping it to the natural scale with the Jacobian of theta = cumsum(theta_0,
    # exp(increments)) must give our natural-scale covariance.  Tolerance as for SEs.
    X, y = simulated(seed=8, K=4)
    fit = fit_cumulative(X, y)
    _, res = statsmodels_ordered(X, y, "logit")
    p = X.shape[1]
    par = np.asarray(res.params)
    m = 3
    J = np.zeros((m, m))
    J[:, 0] = 1.0
    for j in range(1, m):
        J[j:, j] = np.exp(par[p + j])
    cov_sm = np.asarray(res.cov_params())[p:, p:]
    np.testing.assert_allclose(fit.cov.to_numpy()[:m, :m], J @ cov_sm @ J.T, rtol=2e-5, err_msg=SM)


def test_binary_equals_statsmodels_logit_on_spector():
    # statsmodels.datasets.spector (Spector & Mazzeo 1980, 32 students); Logit by
    # Newton with analytic Hessian, converged to machine precision: atol 1e-8
    # on estimates, rtol 1e-7 on SEs.  Our threshold is minus the intercept.
    data = sm.datasets.spector.load_pandas()
    X = data.exog.astype(float)
    y = data.endog.astype(int).to_numpy()
    res = sm.Logit(y, sm.add_constant(X)).fit(disp=0, tol=1e-12, maxiter=100)
    fit = fit_cumulative(X, y)
    assert fit.thresholds.iloc[0] == pytest.approx(-res.params["const"], abs=1e-8), SM
    np.testing.assert_allclose(fit.coef.to_numpy(), res.params[["GPA", "TUCE", "PSI"]].to_numpy(), atol=1e-8)
    np.testing.assert_allclose(fit.se.to_numpy(), res.bse[["const", "GPA", "TUCE", "PSI"]].to_numpy(), rtol=1e-7)
    assert fit.loglik == pytest.approx(res.llf, abs=1e-10)
    assert fit.lr_test.statistic == pytest.approx(res.llr, rel=1e-9)
    assert fit.lr_test.p == pytest.approx(res.llr_pvalue, rel=1e-6)
    assert fit.lr_test.df == 3
    assert fit.aic == pytest.approx(res.aic, rel=1e-10) and fit.bic == pytest.approx(res.bic, rel=1e-10)
    # Greene, Econometric Analysis, table of the Spector-Mazzeo logit:
    # const -13.021, GPA 2.826, TUCE 0.095, PSI 2.379 (recalled from memory).
    np.testing.assert_allclose(np.r_[-fit.thresholds.iloc[0], fit.coef.to_numpy()], [-13.021, 2.826, 0.095, 2.379], atol=1e-3)
    np.testing.assert_allclose(fit.predict_proba(X)[:, 1], res.predict(), atol=1e-10)


def test_binary_probit_and_cloglog_against_statsmodels():
    # statsmodels Probit, and GLM Binomial with the CLogLog link (IRLS to 1e-12).
    # With K = 2 our model is P(Y = 0) = F(theta - x beta): the cloglog GLM for
    # the indicator of level 0 has intercept theta and slopes -beta.
    X, y = simulated(n=400, K=2, seed=9)
    Xc = sm.add_constant(X)
    pr = sm.Probit(y, Xc).fit(disp=0, tol=1e-12)
    fit = fit_cumulative(X, y, link="probit")
    np.testing.assert_allclose(np.r_[-fit.thresholds.iloc[0], fit.coef.to_numpy()], pr.params.to_numpy(), atol=1e-8, err_msg=SM)
    np.testing.assert_allclose(fit.se.to_numpy(), pr.bse.to_numpy(), rtol=1e-6, err_msg=SM)
    assert fit.loglik == pytest.approx(pr.llf, abs=1e-9)
    glm = sm.GLM(1 - y, Xc, family=sm.families.Binomial(link=sm.families.links.CLogLog()))
    # Newton (not IRLS) so that statsmodels' covariance is the observed
    # information, as ours is (for a non-canonical link the expected one differs).
    gres = glm.fit(method="newton", tol=1e-13, maxiter=200)
    fit = fit_cumulative(X, y, link="cloglog")
    np.testing.assert_allclose(np.r_[fit.thresholds.iloc[0], -fit.coef.to_numpy()], gres.params.to_numpy(), atol=1e-8, err_msg=SM)
    np.testing.assert_allclose(fit.se.to_numpy(), gres.bse.to_numpy(), rtol=1e-6, err_msg=SM)
    assert fit.loglik == pytest.approx(gres.llf, abs=1e-8), SM


# ---------------------------------------------------------------------------
# Invariants
# ---------------------------------------------------------------------------


def test_derivatives_match_numerical_differentiation():
    # scipy.optimize.approx_fprime of our own log-likelihood: central enough
    # at step 1e-6 for an agreement of 1e-4 relative to the scale of the entries.
    X, y = simulated(n=120, K=4, seed=3)
    Xa = X.to_numpy()
    for link in ("logit", "probit", "cloglog"):
        for prop in (True, False):
            d = _make_design(Xa, y, 4, np.ones(len(y)), None, link, prop, True)
            rng = np.random.default_rng(0)
            q = d.n_params
            phi = np.r_[np.array([-1.0, 0.2, 1.1]), 0.2 * rng.normal(size=q - 3)]
            ll, pc = _evaluate(d, phi)
            g, H = _grad_hess(d, pc)
            num_g = optimize.approx_fprime(phi, lambda t: _evaluate(d, t)[0], 1e-6)
            np.testing.assert_allclose(g, num_g, rtol=1e-4, atol=1e-4 * np.abs(num_g).max(), err_msg=link)
            num_H = np.array([optimize.approx_fprime(phi, lambda t, i=i: _grad_hess(d, _evaluate(d, t)[1])[0][i], 1e-6) for i in range(q)])
            np.testing.assert_allclose(H, num_H, rtol=1e-4, atol=1e-4 * np.abs(num_H).max(), err_msg=link)


def test_frequency_weights_equal_duplicated_rows():
    # Frequency weights: a weight of k is the row repeated k times (common practice);
    # a weight of 0 drops the row.  Same optimum, so agreement to 1e-9.
    X, y = simulated(n=150, K=3, seed=12)
    rng = np.random.default_rng(1)
    w = rng.integers(0, 4, size=len(y)).astype(float)
    rows = np.repeat(np.arange(len(y)), w.astype(int))
    for prop in (True, False):
        fw = fit_cumulative(X, y, weights=w, proportional=prop)
        fd = fit_cumulative(X.iloc[rows].reset_index(drop=True), y[rows], proportional=prop)
        np.testing.assert_allclose(fw.params.to_numpy(), fd.params.to_numpy(), rtol=1e-9, atol=1e-10)
        np.testing.assert_allclose(fw.se.to_numpy(), fd.se.to_numpy(), rtol=1e-8)
        np.testing.assert_allclose(fw.cov.to_numpy(), fd.cov.to_numpy(), rtol=1e-7, atol=1e-12)
        assert fw.loglik == pytest.approx(fd.loglik, rel=1e-12)
        assert fw.n == fd.n == w.sum()
        assert fw.n_rows == int(np.sum(w > 0))
        assert fw.aic == pytest.approx(fd.aic) and fw.bic == pytest.approx(fd.bic)


def test_offset_of_fitted_linear_predictor_gives_back_the_thresholds():
    # At the maximum the threshold score equations hold with beta fixed, so a
    # thresholds-only refit with offset x beta returns the same thresholds
    # (recalibration in the large of a model on its own data changes nothing).
    X, y = simulated(n=300, K=4, seed=13)
    for link in ("logit", "probit", "cloglog"):
        fit = fit_cumulative(X, y, link=link)
        lp = fit.linear_predictor(X)
        refit = fit_cumulative(None, y, offset=lp, link=link)
        np.testing.assert_allclose(refit.thresholds.to_numpy(), fit.thresholds.to_numpy(), atol=1e-7)
        assert refit.loglik == pytest.approx(fit.loglik, abs=1e-8)
        assert refit.has_offset and refit.coef.empty
        # With an offset, loglik_null is the thresholds-only fit with that offset.
        assert refit.lr_test.df == 0 and refit.loglik_null == pytest.approx(refit.loglik, abs=1e-8)


def test_offset_shifts_thresholds():
    # A constant offset c is absorbed by the thresholds: theta(offset c) = theta + c.
    X, y = simulated(n=200, K=3, seed=14)
    base = fit_cumulative(X, y)
    shifted = fit_cumulative(X, y, offset=np.full(len(y), 0.7))
    np.testing.assert_allclose(shifted.thresholds.to_numpy(), base.thresholds.to_numpy() + 0.7, atol=1e-7)
    np.testing.assert_allclose(shifted.coef.to_numpy(), base.coef.to_numpy(), atol=1e-7)


def test_thresholds_only_model_is_the_marginal_distribution():
    # Without predictors the MLE reproduces the observed cumulative proportions:
    # theta_j = F^{-1}(proportion of y <= j) (saturated for the margin).
    y = np.array([0] * 30 + [1] * 50 + [2] * 20)
    for link, ppf in (("logit", stats.logistic.ppf), ("probit", stats.norm.ppf), ("cloglog", stats.gumbel_l.ppf)):
        fit = fit_cumulative(None, y, link=link)
        np.testing.assert_allclose(fit.thresholds.to_numpy(), ppf([0.3, 0.8]), atol=1e-9)
        assert fit.loglik == pytest.approx(30 * np.log(0.3) + 50 * np.log(0.5) + 20 * np.log(0.2), abs=1e-9)


def test_probabilities_sum_to_one_and_match_cumulative():
    X, y = simulated(n=200, K=4, seed=15)
    for prop in (True, False):
        fit = fit_cumulative(X, y, proportional=prop)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", CrossingWarning)
            prob = fit.predict_proba(X)
        np.testing.assert_allclose(prob.sum(axis=1), 1.0, atol=1e-12)
        np.testing.assert_allclose(np.cumsum(prob, axis=1)[:, :-1], fit.cumulative_proba(X), atol=1e-12)
    # Array input gives the same as the frame; extra frame columns are ignored.
    fit = fit_cumulative(X, y)
    extra = X.assign(other=1.0)[["other"] + list(X.columns)]
    np.testing.assert_allclose(fit.predict_proba(extra), fit.predict_proba(X.to_numpy()))


def test_nonproportional_against_direct_maximisation_and_saturation():
    # (1) The non-proportional log-likelihood maximised directly by
    # scipy.optimize.minimize (BFGS on a plain re-implementation of the
    # likelihood): estimates agree to 1e-4 (BFGS gtol 1e-7).
    X, y = simulated(n=300, K=3, seed=16, p=2)
    fit = fit_cumulative(X, y, proportional=False)
    prop = fit_cumulative(X, y)
    assert fit.loglik >= prop.loglik
    Xa = X.to_numpy()

    def negll(par):
        theta = par[:2]
        B = par[2:].reshape(2, 2)  # column-major: per column, one per cut
        cum = stats.logistic.cdf(theta[None, :] - Xa @ B)
        full = np.hstack([np.zeros((len(y), 1)), cum, np.ones((len(y), 1))])
        pr = np.diff(full, axis=1)[np.arange(len(y)), y]
        return -np.sum(np.log(np.clip(pr, 1e-300, None)))

    x0 = np.r_[prop.thresholds.to_numpy(), np.repeat(prop.coef.to_numpy(), 2)]
    ref = optimize.minimize(negll, x0, method="BFGS", options={"gtol": 1e-7})
    np.testing.assert_allclose(fit.params.to_numpy(), ref.x, atol=1e-4)
    assert fit.loglik == pytest.approx(-ref.fun, abs=1e-6)
    # Parameter layout: coef frame has one column per cut.
    assert list(fit.coef.columns) == list(fit.thresholds.index)
    np.testing.assert_allclose(fit.coef.to_numpy().ravel(), fit.params.to_numpy()[2:])
    # (2) With one categorical predictor (indicators of 3 groups) the
    # non-proportional model is saturated: the fitted probabilities are the
    # observed proportions within groups (Agresti 2010, ch. 3), so the
    # log-likelihood is sum n_gk log(n_gk / n_g).
    rng = np.random.default_rng(4)
    g = rng.integers(0, 3, 400)
    probs = np.array([[0.5, 0.3, 0.2], [0.2, 0.5, 0.3], [0.1, 0.3, 0.6]])
    yy = np.array([rng.choice(3, p=probs[k]) for k in g])
    D = pd.DataFrame({"g1": (g == 1).astype(float), "g2": (g == 2).astype(float)})
    sat = fit_cumulative(D, yy, proportional=False)
    tab = pd.crosstab(g, yy).to_numpy().astype(float)
    expected = np.sum(tab * np.log(tab / tab.sum(axis=1, keepdims=True)))
    assert sat.loglik == pytest.approx(expected, abs=1e-8)
    assert sat.n_crossing == 0


def heat_like(n=900, seed=31):
    """Invented data: a temperature near 39 with two truncated-cubic spline
    columns, an age near 60 and a column shifted by +1000; K = 3, with
    different slopes of temperature at the two cuts."""
    rng = np.random.default_rng(seed)
    temp = rng.normal(39.0, 1.0, n)
    age = rng.normal(60.0, 15.0, n)
    X = pd.DataFrame(
        {
            "temp": temp,
            "temp_s1": np.clip(temp - 38.5, 0, None) ** 3,
            "temp_s2": np.clip(temp - 39.5, 0, None) ** 3,
            "age": age,
            "lab": 1000.0 + rng.normal(size=n),
        }
    )
    z = 0.03 * (age - 60) + 0.4 * (X["lab"].to_numpy() - 1000)
    # A steeper temperature slope at the lower cut: the cumulative logits
    # meet near 36.5 degrees (P(Y > 1) is capped at P(Y > 0) below that).
    p_gt0 = 1 / (1 + np.exp(-(-0.5 + 1.2 * (temp - 39) + z)))
    p_gt1 = np.minimum(p_gt0, 1 / (1 + np.exp(-(-1.5 + 0.8 * (temp - 39) + z))))
    u = rng.random(n)
    y = (u < p_gt0).astype(int) + (u < p_gt1).astype(int)
    return X, y


def logit_nonproportional_negll(Xa, y, m):
    """Plain non-proportional cumulative logit negative log-likelihood
    (thresholds, then per column one coefficient per cut)."""

    def negll(par):
        B = par[m:].reshape(Xa.shape[1], m)
        cum = stats.logistic.cdf(par[:m][None, :] - Xa @ B)
        full = np.hstack([np.zeros((len(y), 1)), cum, np.ones((len(y), 1))])
        pr = np.diff(full, axis=1)[np.arange(len(y)), y]
        return -np.sum(np.log(np.clip(pr, 1e-300, None)))

    return negll


def test_nonproportional_on_raw_scale_columns_matches_centred_columns_and_scipy():
    # Columns far from zero (temperature near 39 with spline terms, a column
    # near 1000) put the thresholds in the hundreds and, at x = 0, far from
    # the data, the two cumulative logits out of order.
    # The fit must reach the same maximum as on centred columns, which is
    # checked against scipy.optimize.minimize (BFGS, gtol 1e-7, scipy
    # version printed) on the centred and standardised columns, where BFGS
    # is well conditioned: log-likelihoods agree to 1e-6.
    X, y = heat_like()
    Xa = X.to_numpy()
    mu, sd = Xa.mean(axis=0), Xa.std(axis=0)
    m = 2
    with warnings.catch_warnings():
        warnings.simplefilter("error", ConvergenceWarning)
        warnings.simplefilter("ignore", CrossingWarning)  # a few rows at the edges
        raw = fit_cumulative(X, y, proportional=False)
        cen = fit_cumulative(X - mu, y, proportional=False)
    assert raw.converged and cen.converged
    assert raw.iterations == cen.iterations  # Newton is affine invariant
    assert raw.n_crossing == cen.n_crossing
    assert np.diff(raw.thresholds.to_numpy())[0] < 0
    negll = logit_nonproportional_negll((Xa - mu) / sd, y, m)
    prop = fit_cumulative((X - mu) / sd, y)
    x0 = np.r_[prop.thresholds.to_numpy(), np.repeat(prop.coef.to_numpy(), m)]
    ref = optimize.minimize(negll, x0, method="BFGS", options={"gtol": 1e-7})
    assert raw.loglik == pytest.approx(-ref.fun, abs=1e-6), SCIPY
    assert raw.loglik == pytest.approx(cen.loglik, abs=1e-9)
    # Exact map between the two parameterisations: theta_j(raw) =
    # theta_j(centred) + mean(x) beta_j, coefficients and their covariance
    # unchanged, cov(raw) = T cov(centred) T'.  Tolerances: both fits stop
    # at affine images of the same iterates, so they differ by rounding, which
    # is 1e-7 relative on thresholds in the hundreds.
    B = cen.coef.to_numpy()
    np.testing.assert_allclose(raw.coef.to_numpy(), B, rtol=1e-6, atol=1e-8)
    np.testing.assert_allclose(raw.thresholds.to_numpy(), cen.thresholds.to_numpy() + mu @ B, rtol=1e-7)
    T = np.eye(raw.n_params)
    for j in range(m):
        T[j, m + j :: m] = mu
    np.testing.assert_allclose(raw.cov.to_numpy(), T @ cen.cov.to_numpy() @ T.T, rtol=1e-5, atol=1e-10)
    # The BFGS optimum mapped to the raw scale: coefficients are sd-scaled,
    # thresholds shifted; BFGS estimates are good to about 1e-4.
    B_ref = ref.x[m:].reshape(-1, m) / sd[:, None]
    np.testing.assert_allclose(raw.coef.to_numpy(), B_ref, atol=1e-4 * np.abs(B_ref).max() + 1e-4)
    # Predictions on the data are the same from either fit (to 1e-8).
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CrossingWarning)
        np.testing.assert_allclose(raw.predict_proba(X), cen.predict_proba(X - mu), atol=1e-8)
    # The proportional model on the same raw columns: same maximum as centred.
    assert fit_cumulative(X, y).loglik == pytest.approx(fit_cumulative(X - mu, y).loglik, abs=1e-9)


@pytest.mark.filterwarnings("ignore::riskvet.errors.CrossingWarning")
def test_raw_scale_columns_with_weights_offset_and_warm_start():
    # Centring uses the weighted means: frequency weights equal repeated rows
    # (common practice); a constant offset c moves every threshold by c; a
    # warm start from the fit itself needs at most one step.  All on the
    # raw-scale columns of heat_like; tolerances as in the weight test above
    # (same optimum, rounding only), 1e-7 relative on thresholds near 600.
    X, y = heat_like(n=400, seed=32)
    rng = np.random.default_rng(2)
    w = rng.integers(0, 4, size=len(y)).astype(float)
    rows = np.repeat(np.arange(len(y)), w.astype(int))
    for prop in (True, False):
        fw = fit_cumulative(X, y, weights=w, proportional=prop)
        fd = fit_cumulative(X.iloc[rows].reset_index(drop=True), y[rows], proportional=prop)
        assert fw.converged and fd.converged
        assert fw.loglik == pytest.approx(fd.loglik, rel=1e-12)
        np.testing.assert_allclose(fw.params.to_numpy(), fd.params.to_numpy(), rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(fw.cov.to_numpy(), fd.cov.to_numpy(), rtol=1e-6, atol=1e-12)
        off = fit_cumulative(X, y, weights=w, proportional=prop, offset=np.full(len(y), 0.7))
        np.testing.assert_allclose(off.thresholds.to_numpy(), fw.thresholds.to_numpy() + 0.7, rtol=1e-7)
        np.testing.assert_allclose(off.coef.to_numpy(), fw.coef.to_numpy(), rtol=1e-6, atol=1e-9)
        # Each fit stops within sqrt(tol) = 1e-4 standard errors of the maximum.
        warm = fit_cumulative(X, y, weights=w, proportional=prop, start=fw)
        assert warm.converged and warm.iterations <= 1
        assert np.all(np.abs(warm.params - fw.params) <= 1e-4 * fw.se)
    # The proportional fit as the start of the non-proportional one.
    start = fit_cumulative(X, y, proportional=False, start=fit_cumulative(X, y))
    cold = fit_cumulative(X, y, proportional=False)
    assert start.loglik == pytest.approx(cold.loglik, abs=1e-9)
    assert np.all(np.abs(start.params - cold.params) <= 1e-4 * cold.se)


def test_nonproportional_optimum_with_crossing_on_extreme_rows_is_reached():
    # Invented data: a cluster with all three levels and a larger cluster,
    # 4 units higher, with only the bottom and top levels; x is centred, so
    # x = 0 is its mean.  The maximum has the cumulative logits crossing over
    # the second cluster and at x = 0 (so the thresholds are out of order);
    # only bottom- and top-level rows cross there, so every
    # row's observed level keeps a positive probability and the likelihood is
    # finite.  The fit must reach that maximum, checked against
    # scipy.optimize.minimize (BFGS, gtol 1e-7) on the same likelihood
    # (log-likelihoods to 1e-6, estimates to 1e-4), and report the crossing.
    rng = np.random.default_rng(0)
    x = np.r_[rng.normal(0, 1, 150), rng.normal(4, 1, 300)]
    x = x - x.mean()
    y = np.r_[rng.choice(3, 150, p=[0.3, 0.4, 0.3]), rng.choice([0, 2], 300)]
    X = pd.DataFrame({"x": x})
    with warnings.catch_warnings():
        warnings.simplefilter("error", ConvergenceWarning)
        with pytest.warns(CrossingWarning, match="cross"):
            fit = fit_cumulative(X, y, proportional=False)
    assert fit.converged and fit.n_crossing > 0
    assert np.diff(fit.thresholds.to_numpy())[0] < 0  # crossing at x = 0
    cum = fit.cumulative_proba(X)
    crossed = np.diff(cum, axis=1)[:, 0] < 0
    assert not np.any(crossed & (y == 1))  # middle-level rows never cross
    negll = logit_nonproportional_negll(x[:, None], y, 2)
    prop = fit_cumulative(X, y)
    x0 = np.r_[prop.thresholds.to_numpy(), np.repeat(prop.coef.to_numpy(), 2)]
    ref = optimize.minimize(negll, x0, method="BFGS", options={"gtol": 1e-7})
    assert fit.loglik == pytest.approx(-ref.fun, abs=1e-6), SCIPY
    np.testing.assert_allclose(fit.params.to_numpy(), ref.x, atol=1e-4, err_msg=SCIPY)


def test_fitter_leaves_the_callers_columns_untouched_and_models_load_is_the_model_file_reader():
    # The fitter centres a copy: Fortran-ordered input (as variable selection
    # passes it), sorted or unsorted by level, is not modified.
    X, y = heat_like(n=200, seed=33)
    for yy in (y, np.sort(y)):
        Xf = np.asfortranarray(X.to_numpy())
        before = Xf.copy()
        _fit_arrays(Xf, yy, 3)
        np.testing.assert_array_equal(Xf, before)
    import riskvet.modelling.modelfile
    import riskvet.models

    assert riskvet.models.load is riskvet.modelling.modelfile.load_model and "load" in riskvet.models.__all__


def test_k2_nonproportional_equals_proportional():
    X, y = simulated(n=200, K=2, seed=17)
    a = fit_cumulative(X, y)
    b = fit_cumulative(X, y, proportional=False)
    np.testing.assert_allclose(a.params.to_numpy(), b.params.to_numpy(), atol=1e-10)
    assert a.loglik == pytest.approx(b.loglik, abs=1e-10)


def test_warm_start_same_estimates_fewer_iterations():
    X, y = simulated(n=400, K=4, seed=18)
    cold = fit_cumulative(X, y)
    warm = fit_cumulative(X, y, start=cold)
    np.testing.assert_allclose(warm.params.to_numpy(), cold.params.to_numpy(), atol=1e-9)
    assert warm.iterations < cold.iterations
    vec = fit_cumulative(X, y, start=cold.params.to_numpy())
    np.testing.assert_allclose(vec.params.to_numpy(), cold.params.to_numpy(), atol=1e-9)
    # A smaller model as a start (missing columns at 0) and a proportional fit
    # as the start of a non-proportional one.
    small = fit_cumulative(X[["v0"]], y)
    grown = fit_cumulative(X, y, start=small)
    np.testing.assert_allclose(grown.params.to_numpy(), cold.params.to_numpy(), atol=1e-9)
    nonprop = fit_cumulative(X, y, proportional=False, start=cold)
    ref = fit_cumulative(X, y, proportional=False)
    np.testing.assert_allclose(nonprop.params.to_numpy(), ref.params.to_numpy(), atol=1e-8)
    # An unusable start (thresholds out of order) falls back to the default start.
    bad = cold.params.to_numpy().copy()
    bad[:3] = bad[:3][::-1]
    np.testing.assert_allclose(fit_cumulative(X, y, start=bad).params.to_numpy(), cold.params.to_numpy(), atol=1e-9)


def test_lean_entry_matches_public_fit_and_row_order_does_not_matter():
    X, y = simulated(n=300, K=3, seed=19)
    fit = fit_cumulative(X, y)
    raw = _fit_arrays(X.to_numpy(), y, 3)
    np.testing.assert_allclose(raw.params, fit.params.to_numpy(), atol=0)
    perm = np.random.default_rng(0).permutation(len(y))
    again = fit_cumulative(X.iloc[perm], y[perm])
    np.testing.assert_allclose(again.params.to_numpy(), fit.params.to_numpy(), atol=1e-10)


def test_tables_and_json():
    X, y = ucla()
    fit = fit_cumulative(X, y)
    frame = fit.to_frame()
    assert list(frame.columns) == [
        "term", "kind", "cut", "estimate", "se", "lower", "upper", "z", "p",
        "odds_ratio", "odds_ratio_lower", "odds_ratio_upper",
    ]
    row = frame.set_index("term").loc["gpa"]
    z = stats.norm.ppf(0.975)
    assert row["lower"] == pytest.approx(row["estimate"] - z * row["se"])
    assert row["odds_ratio"] == pytest.approx(np.exp(row["estimate"]))
    assert np.isnan(frame.set_index("term").loc["y<=unlikely", "odds_ratio"])
    ci = fit.confint(0.9)
    assert ci.loc["pared", "upper"] == pytest.approx(fit.params["pared"] + stats.norm.ppf(0.95) * fit.se["pared"])
    text = json.dumps(fit.to_dict(), allow_nan=False)
    back = json.loads(text)
    assert back["parameters"][2]["term"] == "pared" and back["link"] == "logit"
    assert "odds_ratio" not in fit_cumulative(X, y, link="probit").to_frame().columns
    with pytest.raises(dataclasses_frozen_error()):
        fit.loglik = 0.0  # type: ignore[misc]
    assert isinstance(fit, CumulativeFit)


def dataclasses_frozen_error():
    import dataclasses

    return dataclasses.FrozenInstanceError


# ---------------------------------------------------------------------------
# Trouble is reported
# ---------------------------------------------------------------------------


def test_quasi_complete_separation_names_the_predictor():
    # Every row with x_sep = 1 is in the top level: the MLE of its coefficient
    # is +infinity (Albert & Anderson 1984 give the binary case).
    rng = np.random.default_rng(20)
    n = 200
    X = pd.DataFrame({"age": rng.normal(size=n), "x_sep": rng.binomial(1, 0.2, n).astype(float)})
    y = rng.integers(0, 3, n)
    y[X["x_sep"].to_numpy() == 1] = 2
    with pytest.warns(SeparationWarning, match="x_sep"):
        fit = fit_cumulative(X, y)
    assert fit.separation == ("x_sep",)
    assert any("separation" in w for w in fit.warnings)
    assert fit.coef["x_sep"] > 8  # diverging
    assert abs(fit.coef["age"]) < 1


def test_complete_separation_binary():
    rng = np.random.default_rng(21)
    X = pd.DataFrame({"noise": rng.normal(size=80), "marker": rng.normal(size=80)})
    y = (X["marker"] > 0.1).astype(int).to_numpy()
    with pytest.warns(SeparationWarning, match="marker"):
        fit = fit_cumulative(X, y)
    assert "marker" in fit.separation and "noise" not in fit.separation


def test_no_separation_warning_on_ordinary_data():
    X, y = simulated(n=300, K=3, seed=22)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fit = fit_cumulative(X, y)
    assert fit.warnings == () and fit.separation == ()


def test_collinear_and_constant_columns_are_named():
    X, y = simulated(n=200, K=3, seed=23)
    bad = X.assign(total=X["v0"] + 2 * X["v1"])
    with pytest.raises(FitError, match=r"collinear.*'v0'.*'v1'.*'total'"):
        fit_cumulative(bad, y)
    with pytest.raises(FitError, match="constant.*'one'"):
        fit_cumulative(X.assign(one=1.0), y)
    # Indicators of all groups sum to the constant that the thresholds carry.
    g = np.random.default_rng(0).integers(0, 2, len(y))
    trap = X.assign(a=(g == 0).astype(float), b=(g == 1).astype(float))
    with pytest.raises(FitError, match=r"collinear.*'a'.*'b'"):
        fit_cumulative(trap, y)


def test_empty_level_is_named_with_counts():
    y = np.array([0, 0, 2, 2, 3, 0, 2, 3])
    with pytest.raises(FitError, match=r"empty level\(s\) \['1'\].*'1': 0\.0"):
        fit_cumulative(None, y)
    cat = pd.Categorical(["low", "low", "high", "high"], categories=["low", "mid", "high"], ordered=True)
    with pytest.raises(FitError, match=r"\['mid'\]"):
        fit_cumulative(None, cat)
    # Weight zero empties a level too.
    with pytest.raises(FitError, match=r"\['2'\]"):
        fit_cumulative(None, np.array([0, 1, 2, 1, 0]), weights=[1, 1, 0, 1, 1])
    with pytest.raises(FitError, match=r"\['3'\]"):
        fit_cumulative(None, np.array([0, 1, 2, 1, 0]), n_levels=4)


def test_non_convergence_is_warned_and_recorded():
    X, y = simulated(n=300, K=3, seed=24)
    with pytest.warns(ConvergenceWarning, match="no convergence after 1 iterations"):
        fit = fit_cumulative(X, y, max_iter=1)
    assert not fit.converged and fit.iterations == 1
    assert any("convergence" in w for w in fit.warnings)


def test_crossing_cumulative_probabilities_are_counted():
    # The middle level becomes rare as x grows while both outer levels gain, so
    # the two cut slopes have opposite signs and the fitted cumulative logits
    # meet within the range of x.
    rng = np.random.default_rng(25)
    n = 600
    x = rng.uniform(-2, 3, n)
    p1 = 1 / (1 + np.exp(-(0.5 - 2.5 * x)))
    u = rng.random(n)
    y = np.where(u < p1, 1, np.where(u < p1 + (1 - p1) / 2, 0, 2))
    with pytest.warns(CrossingWarning, match="cross"):
        fit = fit_cumulative(pd.DataFrame({"x": x}), y, proportional=False)
    assert fit.n_crossing > 0
    assert any("crossing" in w for w in fit.warnings)
    # The count is the rows whose fitted cumulative probabilities decrease.
    cum = fit.cumulative_proba(pd.DataFrame({"x": x}))
    assert fit.n_crossing == int(np.sum(np.diff(cum, axis=1) < 0))
    with pytest.warns(CrossingWarning):
        prob = fit.predict_proba(pd.DataFrame({"x": np.array([3.0, 0.0])}))
    assert prob[0].min() < 0


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"link": "logistic"}, "link"),
        ({"weights": [-1.0] + [1.0] * 9}, "weights"),
        ({"offset": [0.0] * 9}, "offset"),
        ({"max_iter": 0}, "max_iter"),
        ({"start": [0.0, 1.0]}, "start"),
        ({"proportional": "yes"}, "proportional"),
    ],
)
def test_bad_options_raise(kwargs, match):
    X = pd.DataFrame({"a": np.arange(10.0)})
    y = np.array([0, 1, 2] * 3 + [0])
    with pytest.raises(FitError, match=match):
        fit_cumulative(X, y, **kwargs)


def test_bad_data_raise():
    y = np.array([0, 1, 2, 0, 1, 2])
    with pytest.raises(FitError, match="X.*6 rows"):
        fit_cumulative(np.zeros((5, 1)), y)
    with pytest.raises(FitError, match="missing or infinite values in \\['b'\\]"):
        fit_cumulative(pd.DataFrame({"a": np.arange(6.0), "b": [1, 2, np.nan, 4, 5, 6]}), y)
    with pytest.raises(FitError, match="non-numeric \\['s'\\]"):
        fit_cumulative(pd.DataFrame({"s": list("abcdef")}), y)
    with pytest.raises(FitError, match="integer levels"):
        fit_cumulative(None, np.array([0.5, 1, 2, 0, 1, 2]))
    with pytest.raises(FitError, match="y"):
        fit_cumulative(None, np.array(["a", "b", "a", "b"]))
    with pytest.raises(FitError, match="at least two"):
        fit_cumulative(None, np.zeros(5, dtype=int))
    with pytest.raises(FitError, match="2-D"):
        fit_cumulative(np.zeros(6), y)
    fit = fit_cumulative(pd.DataFrame({"a": [0.1, 2, 0.3, 1, 0.5, 1.6]}), y)
    with pytest.raises(DataError, match="missing \\['a'\\]"):
        fit.predict_proba(pd.DataFrame({"b": [1.0]}))
    with pytest.raises(RiskvetError, match="confidence"):
        fit.confint(1.5)


def test_separation_check_directly():
    # The linear programme finds no direction on ordinary data (even with a
    # strong predictor), and finds the separating column in both model forms.
    from riskvet.modelling.fitter import _separated_columns

    X, y = simulated(n=300, K=3, seed=26)
    strong = X.assign(v0=X["v0"] * 4.0).to_numpy()
    for prop in (True, False):
        d = _make_design(strong, y, 3, np.ones(len(y)), None, "logit", prop, True)
        assert _separated_columns(d) == ()
    sep = X.to_numpy().copy()
    sep[:, 1] = (y == 2) * 1.0 + 0.01 * np.random.default_rng(0).normal(size=len(y)) * (y == 2)
    for prop in (True, False):
        d = _make_design(sep, y, 3, np.ones(len(y)), None, "logit", prop, True)
        assert _separated_columns(d) == (1,)


def test_pandas_outcome_types():
    # Nullable integers, booleans and ordered categoricals all give the same fit.
    X, y = simulated(n=120, K=2, seed=27)
    ref = fit_cumulative(X, y)
    for yy in (pd.Series(y, dtype="Int64"), pd.Series(y.astype(bool)), pd.Series(pd.Categorical(y, ordered=True))):
        np.testing.assert_allclose(fit_cumulative(X, yy).params.to_numpy(), ref.params.to_numpy())
    with pytest.raises(FitError, match="missing"):
        fit_cumulative(X, pd.Series([pd.NA] + list(y[1:]), dtype="Int64"))
    with pytest.raises(FitError, match="values of type str"):
        fit_cumulative(None, pd.Series(["a", "b"] * 60))
