"""Tests of Firth's bias-reduced fit (``fit_cumulative(..., firth=True)``).

References: a closed form (the 2x2 table with 1/2 added to each cell), the
published worked example of Heinze & Schemper (2002), and a slow
implementation written here from the definition (scipy.optimize on
``l + 1/2 log det I`` with ``I`` summed row by row and level by level).
"""

from __future__ import annotations

import io
import math
import warnings

import numpy as np
import pandas as pd
import pytest
import scipy
from scipy import optimize, special, stats

from riskvet.errors import FitError, SeparationWarning
from riskvet.modelling.fitter import fit_cumulative

SCIPY = f"scipy {scipy.__version__}"

# The endometrial cancer data analysed by Heinze & Schemper (2002), Stat Med
# 21:2409-2419, section 5: 79 patients, histology grade HG (1 = high) against
# neovasculation NV (0/1), pulsatility index PI and endometrium height EH.
# Every patient with NV = 1 has HG = 1 (quasi-complete separation).  Copied
# from a public CSV of the data set.
ENDOMETRIAL = """NV,PI,EH,HG
0,13,1.64,0
0,16,2.26,0
0,8,3.14,0
0,34,2.68,0
0,20,1.28,0
0,5,2.31,0
0,17,1.8,0
0,10,1.68,0
0,26,1.56,0
0,17,2.31,0
0,8,2.01,0
0,7,1.89,0
0,20,3.15,0
0,10,1.23,0
0,18,1.27,0
0,16,1.76,0
0,18,2,0
0,8,2.64,1
0,29,0.88,1
0,12,1.27,1
0,20,1.37,1
1,38,0.97,1
1,22,1.14,1
1,7,0.88,1
1,25,0.91,1
1,15,0.58,1
0,7,0.97,1
0,28,1.5,0
0,11,1.33,0
0,19,2.37,0
0,10,1.82,0
0,10,3.13,0
0,18,1.31,0
0,14,1.92,0
0,21,1.64,0
0,11,2.01,0
0,17,1.88,0
0,25,1.93,0
0,16,2.11,0
0,19,1.29,0
0,15,1.72,0
0,33,0.75,0
0,24,1.92,0
0,48,1.84,1
0,12,1.11,1
0,19,1.61,1
0,2,1.18,1
1,22,1.44,1
1,40,1.18,1
1,5,0.93,1
1,0,1.17,1
0,21,1.19,1
0,15,1.06,1
0,29,2.02,0
0,15,2.29,0
0,12,2.33,0
0,3,2.9,0
0,20,1.7,0
0,23,1.41,0
0,12,2.25,0
0,22,1.54,0
0,42,1.97,0
0,15,1.75,0
0,13,2.16,0
0,14,2.57,0
0,19,1.37,0
0,12,3.61,0
0,13,2.04,0
0,10,2.17,0
0,12,1.69,1
1,49,0.27,1
0,6,1.84,1
0,5,1.3,1
0,17,0.96,1
1,11,1.01,1
1,21,0.98,1
0,5,0.35,1
1,19,1.02,1
0,33,0.85,1
"""


def endometrial():
    df = pd.read_csv(io.StringIO(ENDOMETRIAL))
    return df[["NV", "PI", "EH"]].astype(float), df["HG"].to_numpy()


# ---------------------------------------------------------------------------
# A slow implementation from the definition
# ---------------------------------------------------------------------------


def _cdf_pdf(link, t):
    if link == "logit":
        F = special.expit(t)
        return F, F * (1.0 - F)
    if link == "probit":
        return stats.norm.cdf(t), stats.norm.pdf(t)
    if link == "cloglog":
        return 1.0 - np.exp(-np.exp(t)), np.exp(t - np.exp(t))
    return np.exp(-np.exp(-t)), np.exp(-t - np.exp(-t))  # loglog


def brute_penalised(phi, X, y, K, link, proportional, offset=None, weights=None):
    """``l + 1/2 log det I`` and ``I``, row by row and level by level.

    ``I = sum_i w_i sum_k (dP_ik/dphi)(dP_ik/dphi)' / P_ik``, the expected
    information of a multinomial observation with level probabilities
    ``P_ik = F(u_ik) - F(u_i,k-1)``, ``u_ij = theta_j - x_i beta_j - offset_i``.
    """
    n, p = X.shape
    m = K - 1
    q = phi.shape[0]
    theta = phi[:m]
    B = np.repeat(phi[m:, None], m, axis=1) if proportional else phi[m:].reshape(p, m)
    off = np.zeros(n) if offset is None else offset
    w = np.ones(n) if weights is None else weights
    ll = 0.0
    info = np.zeros((q, q))
    for i in range(n):
        u = theta - X[i] @ B - off[i]
        F, f = _cdf_pdf(link, u)
        du = np.zeros((m, q))
        for j in range(m):
            du[j, j] = 1.0
            if proportional:
                du[j, m:] = -X[i]
            else:
                du[j, m + j :: m] = -X[i]
        cum = np.r_[0.0, F, 1.0]
        for k in range(K):
            P = cum[k + 1] - cum[k]
            if P <= 0:
                return -np.inf, info
            if y[i] == k:
                ll += w[i] * math.log(P)
            dP = np.zeros(q)
            if k < m:
                dP += f[k] * du[k]
            if k >= 1:
                dP -= f[k - 1] * du[k - 1]
            info += w[i] * np.outer(dP, dP) / P
    sign, logdet = np.linalg.slogdet(info)
    return (ll + 0.5 * logdet if sign > 0 else -np.inf), info


def brute_fit(X, y, K, link, proportional, start, offset=None, fixed=None):
    """Maximise the penalised log-likelihood by BFGS; ``fixed=(k, value)`` profiles."""

    def full(z):
        if fixed is None:
            return z
        return np.insert(z, fixed[0], fixed[1])

    def obj(z):
        v = brute_penalised(full(z), X, y, K, link, proportional, offset)[0]
        return -v if np.isfinite(v) else 1e10

    z0 = start if fixed is None else np.delete(start, fixed[0])
    res = optimize.minimize(obj, z0, method="BFGS", options={"gtol": 1e-9, "maxiter": 2000})
    return full(res.x), -res.fun


def ordinal_data(seed, n=60):
    rng = np.random.default_rng(seed)
    X = np.c_[rng.uniform(-1.5, 1.5, n), rng.binomial(1, 0.4, n)]
    lat = X @ np.array([0.9, -0.6]) + rng.logistic(size=n)
    y = np.searchsorted([-0.5, 0.8], lat)
    return X, y


# ---------------------------------------------------------------------------
# Closed form and published example
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("cells", [(15, 5, 0, 10), (12, 8, 4, 9), (3, 4, 7, 0)])
def test_saturated_binary_model_is_the_table_with_a_half_added(cells):
    # One binary predictor, logit link: Firth's estimates of the saturated
    # model are the empirical log odds with 1/2 added to each cell of the 2x2
    # table (common practice).  Cells: (x=0,y=0), (x=0,y=1), (x=1,y=0),
    # (x=1,y=1).
    a, b, c, d = cells
    x = np.r_[np.zeros(a + b), np.ones(c + d)]
    y = np.r_[np.zeros(a), np.ones(b), np.zeros(c), np.ones(d)].astype(int)
    fit = fit_cumulative(pd.DataFrame({"x": x}), y, firth=True)
    a2, b2, c2, d2 = (v + 0.5 for v in cells)
    # Tolerance 1e-6: Fisher scoring stops at a penalised-score decrement of
    # tol**1.5 = 1e-12, about 1e-7 on these estimates.
    assert fit.estimation == "firth"
    assert fit.thresholds.iloc[0] == pytest.approx(math.log(a2 / b2), abs=1e-6)
    assert fit.coef["x"] == pytest.approx(math.log((d2 / c2) / (b2 / a2)), abs=1e-6)


def test_saturated_model_with_an_empty_cell_is_finite_and_not_warned():
    x = np.r_[np.zeros(20), np.ones(10)]
    y = np.r_[np.zeros(15), np.ones(15)].astype(int)  # every x = 1 has y = 1
    with warnings.catch_warnings():
        warnings.simplefilter("error", SeparationWarning)
        fit = fit_cumulative(pd.DataFrame({"x": x}), y, firth=True)
    assert fit.coef["x"] == pytest.approx(math.log((10.5 / 0.5) / (5.5 / 15.5)), abs=1e-6)
    assert fit.separation == ("x",)
    assert any("Firth's estimates are finite" in w for w in fit.warnings)


def test_endometrial_example_of_heinze_and_schemper():
    # Heinze & Schemper (2002), Stat Med 21:2409-2419, Table (Firth-type
    # estimates for the endometrial data), recalled from memory: intercept
    # 3.775, NV 2.929, PI -0.035, EH -2.604.  Tolerance: half a unit of the
    # last digit given.  The profile limits are checked against the slow
    # implementation below instead of recalled values.
    X, y = endometrial()
    with warnings.catch_warnings():
        warnings.simplefilter("error", SeparationWarning)
        fit = fit_cumulative(X, y, firth=True)
    assert fit.separation == ("NV",)
    assert -fit.thresholds.iloc[0] == pytest.approx(3.775, abs=5e-4)
    assert fit.coef["NV"] == pytest.approx(2.929, abs=5e-4)
    assert fit.coef["PI"] == pytest.approx(-0.035, abs=5e-4)
    assert fit.coef["EH"] == pytest.approx(-2.604, abs=5e-4)
    assert fit.interval_kind == "profile penalised likelihood"
    ci = fit.confint(0.95)
    assert np.all(ci["lower"] < fit.params) and np.all(fit.params < ci["upper"])
    frame = fit.to_frame()
    assert frame.loc[frame["term"] == "NV", "lower"].item() == pytest.approx(ci.loc["NV", "lower"])
    # Plain maximum likelihood on the same data diverges and is warned about.
    with pytest.warns(SeparationWarning, match="NV"):
        ml = fit_cumulative(X, y)
    assert ml.separation == ("NV",) and ml.coef["NV"] > 10


def test_profile_limits_and_p_values_against_a_slow_profile():
    # At each profile limit, the slow implementation's profile deviance
    # 2 (l*(full) - max l* with the parameter fixed) equals chi2_1(0.95); and
    # the p-value is the chi-squared tail of the same deviance at 0.  The
    # tolerance 2e-4 allows for BFGS's own stopping (gtol 1e-9, numerical
    # gradients) in the slow fits.
    X, y = endometrial()
    fit = fit_cumulative(X, y, firth=True)
    Xa = X.to_numpy()
    phi = fit.params.to_numpy()
    top = brute_penalised(phi, Xa, y, 2, "logit", True)[0]
    assert fit.loglik_penalized == pytest.approx(top, abs=1e-8)
    crit = stats.chi2.ppf(0.95, 1)
    for k, name in ((1, "NV"), (3, "EH")):
        for side in ("lower", "upper"):
            b = fit.profile.loc[name, side]
            _, val = brute_fit(Xa, y, 2, "logit", True, phi, fixed=(k, b))
            assert 2 * (top - val) == pytest.approx(crit, abs=2e-4), (name, side, SCIPY)
        _, val0 = brute_fit(Xa, y, 2, "logit", True, phi, fixed=(k, 0.0))
        assert fit.profile.loc[name, "p"] == pytest.approx(stats.chi2.sf(2 * (top - val0), 1), rel=1e-3)


# ---------------------------------------------------------------------------
# Against the slow implementation
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "link, proportional, seed",
    [("logit", True, 1), ("probit", True, 2), ("cloglog", True, 3), ("loglog", True, 4), ("logit", False, 1), ("cloglog", False, 3),
     ("loglog", False, 6)],
)
def test_ordinal_firth_against_slow_implementation(link, proportional, seed):
    # K = 3, n = 60: estimates agree with BFGS on the brute-force penalised
    # log-likelihood to 1e-4 (BFGS with numerical gradients reaches about
    # 1e-6 relative; the fitter is tighter), and the covariance is the
    # inverse of the brute-force expected information to 1e-6.
    # The non-proportional cases are data whose maximum-likelihood fit has
    # every level probability positive (see the next test for data where it
    # has not).
    X, y = ordinal_data(seed)
    fit = fit_cumulative(X, y, link=link, proportional=proportional, firth=True)
    assert fit.converged and fit.estimation == "firth" and fit.interval_kind == "Wald"
    phi = fit.params.to_numpy()
    ref, ref_val = brute_fit(X, y, 3, link, proportional, phi + 0.05)
    np.testing.assert_allclose(phi, ref, atol=1e-4, err_msg=SCIPY)
    val, info = brute_penalised(phi, X, y, 3, link, proportional)
    assert fit.loglik_penalized == pytest.approx(val, abs=1e-8)
    assert val >= ref_val - 1e-9
    np.testing.assert_allclose(fit.cov.to_numpy(), np.linalg.inv(info), rtol=1e-6, atol=1e-10)


def test_nonproportional_firth_without_interior_estimate_says_so():
    # seed 2, n = 60: the maximum-likelihood cumulative probabilities cross
    # on 10 rows; Firth's penalty (1/2 log det of the expected information,
    # which holds 1/P_ik for every level) then rises without bound towards
    # P_ik = 0, and the fit must say so instead of returning a number as if
    # converged.
    from riskvet.errors import ConvergenceWarning

    X, y = ordinal_data(2)
    with pytest.warns(ConvergenceWarning, match="rises without bound"):
        fit = fit_cumulative(X, y, proportional=False, firth=True)
    assert not fit.converged


def test_penalised_score_is_zero_by_finite_differences():
    # The analytic score of the penalty: at Firth's estimates the slow
    # penalised log-likelihood is flat (central differences, step 1e-5, so
    # the error is of order 1e-10 / 1e-5 = 1e-5 for the objective's rounding).
    X, y = ordinal_data(1)
    off = np.linspace(-0.3, 0.3, len(y))
    for proportional in (True, False):
        fit = fit_cumulative(X, y, link="probit", proportional=proportional, firth=True, offset=off)
        phi = fit.params.to_numpy()
        h = 1e-5
        for k in range(phi.shape[0]):
            e = np.zeros_like(phi)
            e[k] = h
            up = brute_penalised(phi + e, X, y, 3, "probit", proportional, off)[0]
            dn = brute_penalised(phi - e, X, y, 3, "probit", proportional, off)[0]
            assert (up - dn) / (2 * h) == pytest.approx(0.0, abs=1e-5)


def test_binary_logit_modified_score_of_firth():
    # Firth (1993): for the binary logit model the estimates solve
    # X1'(y - pi + h (1/2 - pi)) = 0, h the diagonal of the hat matrix
    # W^1/2 X1 (X1' W X1)^-1 X1' W^1/2.
    rng = np.random.default_rng(8)
    X = rng.normal(size=(40, 3))
    y = (X @ [1.0, -0.5, 0.3] + rng.logistic(size=40) > 0).astype(int)
    fit = fit_cumulative(X, y, firth=True)
    X1 = np.hstack([np.ones((40, 1)), X])
    b = np.r_[-fit.thresholds.iloc[0], fit.coef.to_numpy()]
    pi = special.expit(X1 @ b)
    Wh = np.sqrt(pi * (1 - pi))[:, None] * X1
    h = np.sum(Wh @ np.linalg.inv(Wh.T @ Wh) * Wh, axis=1)
    np.testing.assert_allclose(X1.T @ (y - pi + h * (0.5 - pi)), 0.0, atol=1e-7)


def test_weights_equal_duplicated_rows():
    X, y = ordinal_data(3, n=40)
    w = np.r_[np.full(20, 2.0), np.ones(20)]
    Xd = np.vstack([X[:20], X])
    yd = np.r_[y[:20], y]
    for proportional in (True, False):
        a = fit_cumulative(X, y, weights=w, firth=True, proportional=proportional)
        b = fit_cumulative(Xd, yd, firth=True, proportional=proportional)
        np.testing.assert_allclose(a.params.to_numpy(), b.params.to_numpy(), atol=1e-7)
        np.testing.assert_allclose(a.cov.to_numpy(), b.cov.to_numpy(), rtol=1e-6, atol=1e-12)


# ---------------------------------------------------------------------------
# Separation
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("proportional", [True, False])
def test_finite_under_complete_and_quasi_complete_separation(proportional):
    rng = np.random.default_rng(10)
    n = 60
    z = rng.normal(size=n)
    # Complete: the outcome level is a step function of x.
    x = rng.normal(size=n)
    y = np.searchsorted([-0.4, 0.5], x)
    # Quasi-complete: an indicator whose rows at 1 are all in the top level.
    d = rng.binomial(1, 0.25, n).astype(float)
    yq = rng.integers(0, 3, n)
    yq[d == 1] = 2
    for X, yy, name in ((pd.DataFrame({"z": z, "x": x}), y, "x"), (pd.DataFrame({"z": z, "d": d}), yq, "d")):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            fit = fit_cumulative(X, yy, firth=True, proportional=proportional)
        assert not any(issubclass(c.category, SeparationWarning) for c in caught)
        assert name in fit.separation
        assert any(f"separated by ['{name}']" in w for w in fit.warnings)
        if proportional:
            assert fit.converged
            assert any("Firth's estimates are finite" in w for w in fit.warnings)
            assert np.all(np.isfinite(fit.params)) and np.all(np.isfinite(fit.se))
        else:
            # The non-proportional penalty is unbounded towards P_ik = 0 (see
            # test_nonproportional_firth_without_interior_estimate_says_so),
            # and separated data reach that boundary: the fit says so.
            assert not fit.converged
            assert any("rises without bound" in w for w in fit.warnings)


def test_to_dict_and_frames():
    X, y = endometrial()
    fit = fit_cumulative(X, y, firth=True)
    out = fit.to_dict()
    assert out["estimation"] == "firth" and out["interval_kind"] == "profile penalised likelihood"
    assert out["profile_confidence"] == 0.95
    assert fit.lr_test.df == 3 and fit.lr_test.p < 1e-6
    f90 = fit_cumulative(X, y, firth=True, confidence=0.9)
    assert f90.confint(0.9).loc["EH", "lower"] > fit.confint(0.95).loc["EH", "lower"]
    with pytest.raises(FitError, match="confidence"):
        fit.to_frame(0.9)
    ordinal = fit_cumulative(*ordinal_data(11), firth=True)
    assert ordinal.profile is None and ordinal.interval_kind == "Wald"
    assert np.isfinite(ordinal.to_frame(0.9)["lower"]).all()


@pytest.mark.parametrize("kwargs", [{"firth": "yes"}, {"firth": 1}, {"confidence": 1.5}])
def test_bad_options_raise(kwargs):
    X, y = ordinal_data(12)
    with pytest.raises(FitError):
        fit_cumulative(X, y, **kwargs)
