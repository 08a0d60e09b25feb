"""Tests of riskvet.modelling.penalized (ridge, lasso, elastic net, group lasso).

References: scikit-learn's LogisticRegression for the binary model (the
version is named in the assertion messages); for the ordinal model a slow,
obviously-correct log-likelihood written here and minimised by
scipy.optimize, finite-difference optimality (KKT) conditions, and
invariants (alpha -> 0 is maximum likelihood, warm starts equal cold starts,
groups enter and leave whole, zero weights equal dropped rows).  Data are
simulated in the tests (small, so the file runs in seconds).
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
import scipy
import sklearn
from scipy import optimize, stats
from sklearn.linear_model import LogisticRegression

from riskvet.errors import ConvergenceWarning, DesignError, FitError, RiskvetError, RiskvetWarning
from riskvet.modelling.fitter import fit_cumulative
from riskvet.modelling.penalized import PenaltyChoice, PenaltyPath, fit_penalized, penalty_path, tune_penalty

SKL = f"scikit-learn {sklearn.__version__}"
SCIPY = f"scipy {scipy.__version__}"
CDF = {"logit": stats.logistic.cdf, "probit": stats.norm.cdf, "cloglog": lambda t: -np.expm1(-np.exp(t))}


def binary_data(n=200, seed=1):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 5))
    eta = X @ np.array([1.0, -0.5, 0.0, 0.3, 0.0]) + 0.3
    y = (rng.uniform(size=n) < 1.0 / (1.0 + np.exp(-eta))).astype(int)
    return X, y


def ordinal_data(n=150, seed=3, K=3):
    """Latent logistic model cut at quantiles; columns x1..x5 (x3, x4 a 'term' of two columns)."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 5))
    X[:, 1] = 2.0 + 3.0 * X[:, 1]  # a column far from zero and not of unit scale
    lat = X @ np.array([0.9, -0.15, 0.4, 0.2, 0.0]) + rng.logistic(size=n)
    y = np.searchsorted(np.quantile(lat, np.linspace(0, 1, K + 1)[1:-1]), lat)
    return pd.DataFrame(X, columns=[f"x{j + 1}" for j in range(5)]), y


# ---- a slow, obviously-correct objective ----------------------------------


def slow_loglik(params, X, y, K, link="logit", proportional=True, w=None):
    """sum_i w_i log(F(theta_y - x b_y) - F(theta_{y-1} - x b_{y-1})), from the cumulative probabilities."""
    X = np.asarray(X, dtype=float)
    m = K - 1
    theta = params[:m]
    B = params[m:].reshape(X.shape[1], 1 if proportional else m)
    cum = CDF[link](theta[None, :] - X @ B)
    full = np.hstack([np.zeros((X.shape[0], 1)), cum, np.ones((X.shape[0], 1))])
    prob = np.diff(full, axis=1)[np.arange(X.shape[0]), y]
    w = np.ones(X.shape[0]) if w is None else w
    return float(w @ np.log(prob))


def slow_penalty(params, m, groups_idx, l1):
    b = params[m:]
    group = sum(np.sqrt(len(g)) * np.linalg.norm(params[g]) for g in groups_idx)
    return l1 * group + 0.5 * (1.0 - l1) * float(b @ b)


def smooth_gradient(params, X, y, K, alpha, l1, pen_idx, link="logit", proportional=True, h=1e-6):
    """Central differences of -loglik/n + alpha (1 - l1)/2 ||b||^2 (error of order h^2, about 1e-12 here)."""
    n = len(y)

    def f(p):
        b = p[pen_idx]
        return -slow_loglik(p, X, y, K, link, proportional) / n + 0.5 * alpha * (1.0 - l1) * float(b @ b)

    g = np.empty_like(params)
    for j in range(params.size):
        e = np.zeros_like(params)
        e[j] = h
        g[j] = (f(params + e) - f(params - e)) / (2.0 * h)
    return g


# ---- binary model against scikit-learn -----------------------------------


@pytest.mark.parametrize("l1_ratio, alpha", [(0.0, 0.05), (1.0, 0.06), (0.5, 0.04)])
def test_binary_matches_scikit_learn(l1_ratio, alpha):
    # scikit-learn minimises C * sum_i loss_i + penalty, with penalty
    # l1_ratio ||w||_1 + (1 - l1_ratio)/2 ||w||^2 (its current API: penalty is
    # chosen by l1_ratio alone); dividing by C n gives riskvet's objective
    # -loglik/n + alpha (...) with alpha = 1 / (C n).  The intercept is not
    # penalised by either; riskvet's threshold is minus the intercept.
    # Tolerance 1e-6: both solvers run to tol 1e-12, and measured agreement is
    # about 1e-8 (saga stops on the change of the coefficients per epoch).
    X, y = binary_data()
    n = len(y)
    fit = fit_penalized(X, y, alpha=alpha, l1_ratio=l1_ratio)
    solver = "lbfgs" if l1_ratio == 0.0 else "saga"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # scikit-learn's FutureWarnings of its changing API
        ref = LogisticRegression(C=1.0 / (alpha * n), l1_ratio=l1_ratio, solver=solver, tol=1e-12, max_iter=100_000).fit(X, y)
    assert fit.converged
    np.testing.assert_allclose(fit.coef.to_numpy(), ref.coef_[0], atol=1e-6, err_msg=SKL)
    np.testing.assert_allclose(-fit.thresholds.iloc[0], ref.intercept_[0], atol=1e-6, err_msg=SKL)
    if l1_ratio == 1.0:
        # the lasso sets the same coefficients exactly to zero
        assert np.array_equal(fit.coef.to_numpy() == 0.0, ref.coef_[0] == 0.0), SKL
        assert np.any(ref.coef_[0] == 0.0)


def test_binary_weights_match_scikit_learn_sample_weight():
    # With weights the objective is -sum w_i l_i / sum(w) + ..., so C = 1 / (alpha sum(w)).
    X, y = binary_data()
    w = np.random.default_rng(7).integers(1, 4, size=len(y)).astype(float)
    alpha = 0.03
    fit = fit_penalized(X, y, alpha=alpha, l1_ratio=1.0, weights=w)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = LogisticRegression(C=1.0 / (alpha * w.sum()), l1_ratio=1.0, solver="saga", tol=1e-12, max_iter=100_000)
        ref.fit(X, y, sample_weight=w)
    np.testing.assert_allclose(fit.coef.to_numpy(), ref.coef_[0], atol=1e-6, err_msg=SKL)
    np.testing.assert_allclose(-fit.thresholds.iloc[0], ref.intercept_[0], atol=1e-6, err_msg=SKL)


# ---- ordinal model ------------------------------------------------------


def test_alpha_zero_is_maximum_likelihood():
    # Tolerance 1e-7: both converge to a Newton decrement of 1e-8 or below.
    X, y = ordinal_data()
    ml = fit_cumulative(X, y)
    for l1 in (0.0, 1.0):
        fit = fit_penalized(X, y, alpha=0.0, l1_ratio=l1)
        np.testing.assert_allclose(fit.params.to_numpy(), ml.params.to_numpy(), atol=1e-7)
        assert fit.loglik == pytest.approx(ml.loglik, abs=1e-9)
    # alpha -> 0: the ridge estimate moves by about alpha n b / information (< 1e-6 here)
    tiny = fit_penalized(X, y, alpha=1e-9)
    np.testing.assert_allclose(tiny.params.to_numpy(), ml.params.to_numpy(), atol=1e-6)


@pytest.mark.parametrize("link, proportional", [("logit", True), ("probit", True), ("logit", False)])
def test_ridge_matches_direct_minimisation(link, proportional):
    # The objective written out here, minimised by scipy's BFGS on a
    # central-difference gradient (gtol 1e-9).  Tolerance 1e-6: BFGS stops
    # with a gradient of 1e-9, about 1e-8 in the estimates given the
    # curvature (at least 0.05 per observation here), and the difference
    # gradient adds rounding of order 1e-10.
    X, y = ordinal_data()
    K, m, alpha = 3, 2, 0.05
    fit = fit_penalized(X, y, alpha=alpha, link=link, proportional=proportional)
    q = fit.n_params
    Xa = X.to_numpy()

    def objective(p):
        b = p[m:]
        return -slow_loglik(p, Xa, y, K, link, proportional) / len(y) + 0.5 * alpha * float(b @ b)

    x0 = np.r_[-0.5, 0.5, np.zeros(q - m)]
    ref = optimize.minimize(objective, x0, jac=lambda p: _central(objective, p), method="BFGS", options={"gtol": 1e-9, "maxiter": 2000})
    assert fit.converged
    np.testing.assert_allclose(fit.params.to_numpy(), ref.x, atol=1e-6, err_msg=SCIPY)
    assert fit.loglik == pytest.approx(slow_loglik(fit.params.to_numpy(), Xa, y, K, link, proportional), abs=1e-9)


def _central(f, p, h=1e-6):
    g = np.empty_like(p)
    for j in range(p.size):
        e = np.zeros_like(p)
        e[j] = h
        g[j] = (f(p + e) - f(p - e)) / (2.0 * h)
    return g


@pytest.mark.parametrize("l1_ratio, groups, proportional, alpha", [
    (1.0, None, True, 0.06),
    (1.0, {"term": ["x3", "x4"]}, True, 0.08),
    (0.6, {"term": ["x3", "x4"]}, True, 0.15),
    (1.0, None, False, 0.06),
])
def test_lasso_and_group_lasso_meet_the_optimality_conditions(l1_ratio, groups, proportional, alpha):
    # KKT, with g the gradient of the smooth part (central differences of the
    # slow objective): g = 0 for thresholds; ||g_G|| <= lambda sqrt(p_G) for a
    # group at zero; g_G + lambda sqrt(p_G) b_G / ||b_G|| = 0 otherwise
    # (lambda = alpha l1_ratio).  Tolerance 1e-7 on the per-observation
    # gradient: differences are accurate to about 1e-10, and the fit meets the
    # conditions to well under 1e-8 after its last Newton step.  Each alpha
    # is one at which some groups are zero and some are not.
    X, y = ordinal_data()
    K, m = 3, 2
    fit = fit_penalized(X, y, alpha=alpha, l1_ratio=l1_ratio, groups=groups, proportional=proportional)
    p = fit.params.to_numpy()
    per = 1 if proportional else m
    cols = list(X.columns)
    members = [list(groups["term"])] if groups else []
    singles = [[c] for c in cols if not any(c in g for g in members)]
    groups_idx = [np.concatenate([m + cols.index(c) * per + np.arange(per) for c in g]) for g in members + singles]
    g = smooth_gradient(p, X.to_numpy(), y, K, alpha, l1_ratio, np.arange(m, p.size), proportional=proportional)
    lam = alpha * l1_ratio
    np.testing.assert_allclose(g[:m], 0.0, atol=1e-7)
    n_zero = 0
    for idx in groups_idx:
        b = p[idx]
        nb = np.linalg.norm(b)
        if nb == 0.0:
            n_zero += 1
            assert np.linalg.norm(g[idx]) <= lam * np.sqrt(idx.size) + 1e-7
        else:
            np.testing.assert_allclose(g[idx] + lam * np.sqrt(idx.size) * b / nb, 0.0, atol=1e-7)
    assert 0 < n_zero < len(groups_idx), "alpha chosen so some groups are zero and some are not"
    # the objective at the estimate is no larger than at nearby points (a direct check of the minimum)
    objective = -slow_loglik(p, X.to_numpy(), y, K, proportional=proportional) / len(y) + alpha * slow_penalty(p, m, groups_idx, l1_ratio)
    rng = np.random.default_rng(0)
    for _ in range(20):
        q = p + 1e-4 * rng.normal(size=p.size)
        other = -slow_loglik(q, X.to_numpy(), y, K, proportional=proportional) / len(y) + alpha * slow_penalty(q, m, groups_idx, l1_ratio)
        assert other >= objective - 1e-12


def test_singleton_groups_are_the_l1_norm():
    X, y = ordinal_data()
    plain = fit_penalized(X, y, alpha=0.04, l1_ratio=1.0)
    single = fit_penalized(X, y, alpha=0.04, l1_ratio=1.0, groups={"a": ["x1"], "b": ["x3"]})
    np.testing.assert_allclose(single.params.to_numpy(), plain.params.to_numpy(), atol=1e-10)
    assert plain.penalty["groups"] is None and single.penalty["groups"] == {"a": ["x1"], "b": ["x3"]}


def test_groups_enter_and_leave_whole_and_unpenalized_columns_stay():
    X, y = ordinal_data()
    path = penalty_path(X, y, l1_ratio=1.0, groups={"term": ["x3", "x4", "x5"]}, unpenalized=["x2"], n_alphas=15)
    frame = pd.DataFrame(path.params, columns=path.names)
    term = frame[["x3", "x4", "x5"]].to_numpy()
    assert np.all(np.all(term == 0.0, axis=1) | np.all(term != 0.0, axis=1))
    assert np.any(np.all(term == 0.0, axis=1)) and np.any(np.all(term != 0.0, axis=1))
    assert np.all(frame["x2"] != 0.0)
    # at the largest alpha every penalised group is zero, and the unpenalised
    # column has its maximum-likelihood value in the model without the others
    assert path.n_nonzero_groups[0] == 0
    ml = fit_cumulative(X[["x2"]], y)
    np.testing.assert_allclose(frame.loc[0, ["y<=0", "y<=1", "x2"]].to_numpy(dtype=float), ml.params.to_numpy(), atol=1e-7)
    # alpha_max is the smallest alpha with every group at zero
    below = fit_penalized(X, y, alpha=path.alphas[0] * (1 - 1e-3), l1_ratio=1.0, groups={"term": ["x3", "x4", "x5"]}, unpenalized=["x2"])
    assert np.any(below.coef.drop("x2").to_numpy() != 0.0)
    assert path.group_names == ("x1", "term") and path.unpenalized == ("x2",)


def test_non_proportional_column_is_one_group():
    X, y = ordinal_data()
    fit = fit_penalized(X, y, alpha=0.04, l1_ratio=1.0, proportional=False)
    coef = fit.coef.to_numpy()
    assert np.all(np.all(coef == 0.0, axis=1) | np.all(coef != 0.0, axis=1))
    assert np.any(np.all(coef == 0.0, axis=1))


@pytest.mark.parametrize("l1_ratio", [0.0, 1.0, 0.5])
def test_path_warm_starts_give_the_cold_answer(l1_ratio):
    # Tolerance 1e-6: each fit stops at a decrement below 1e-8 (estimates
    # about 1e-8 in standard-error units from the optimum), whatever its start.
    X, y = ordinal_data()
    groups = {"term": ["x3", "x4"]}
    path = penalty_path(X, y, l1_ratio=l1_ratio, groups=groups, n_alphas=12)
    assert np.all(np.diff(path.alphas) < 0) and path.converged.all()
    for i in (0, 5, 11):
        cold = fit_penalized(X, y, alpha=path.alphas[i], l1_ratio=l1_ratio, groups=groups)
        np.testing.assert_allclose(path.params[i], cold.params.to_numpy(), atol=1e-6)
        assert path.loglik[i] == pytest.approx(cold.loglik, abs=1e-8)
    if l1_ratio > 0:
        assert path.n_nonzero_groups[0] == 0 and path.n_nonzero_groups[-1] == 4
    # the log-likelihood rises as the penalty falls
    assert np.all(np.diff(path.loglik) >= -1e-9)


def test_path_given_alphas_and_tables():
    X, y = ordinal_data()
    path = penalty_path(X, y, l1_ratio=1.0, alphas=[0.01, 0.1, 0.05])
    assert isinstance(path, PenaltyPath)
    np.testing.assert_array_equal(path.alphas, [0.1, 0.05, 0.01])
    frame = path.to_frame()
    assert list(frame.columns) == ["alpha", "parameter", "estimate", "loglik", "n_nonzero_groups"]
    assert len(frame) == 3 * len(path.names)
    json.dumps(path.to_dict(), allow_nan=False)


# ---- the fit object and invariants ---------------------------------------


def test_fit_records_how_it_was_estimated():
    X, y = ordinal_data()
    fit = fit_penalized(X, y, alpha=0.05, l1_ratio=0.5, groups={"term": ["x3", "x4"]}, unpenalized=["x1"])
    assert fit.estimation == "penalized" and fit.interval_kind == "none"
    assert fit.penalty == {"alpha": 0.05, "l1_ratio": 0.5, "groups": {"term": ["x3", "x4"]}, "unpenalized": ["x1"]}
    assert fit.se.isna().all() and fit.cov.isna().all().all()
    assert np.isnan(fit.aic) and np.isnan(fit.lr_test.p)
    assert fit.loglik == pytest.approx(slow_loglik(fit.params.to_numpy(), X.to_numpy(), y, 3), abs=1e-9)
    assert fit.loglik_null == pytest.approx(fit_cumulative(None, y).loglik, abs=1e-9)
    json.dumps(fit.to_dict(), allow_nan=False)
    prob = fit.predict_proba(X)
    np.testing.assert_allclose(prob.sum(axis=1), 1.0)


def test_weights_are_frequencies_and_zero_weight_drops_the_row():
    X, y = ordinal_data()
    w = np.ones(len(y))
    w[:10] = 2.0
    w[10:20] = 0.0
    weighted = fit_penalized(X, y, alpha=0.04, l1_ratio=1.0, weights=w)
    rows = np.r_[np.arange(10), np.arange(10), np.arange(20, len(y))]
    copied = fit_penalized(X.iloc[rows], y[rows], alpha=0.04, l1_ratio=1.0)
    np.testing.assert_allclose(weighted.params.to_numpy(), copied.params.to_numpy(), atol=1e-9)
    assert weighted.n == copied.n and weighted.n_rows == len(y) - 10


def test_constant_offset_moves_only_the_thresholds():
    X, y = ordinal_data()
    base = fit_penalized(X, y, alpha=0.04, l1_ratio=1.0)
    shifted = fit_penalized(X, y, alpha=0.04, l1_ratio=1.0, offset=np.full(len(y), 0.7))
    np.testing.assert_allclose(shifted.coef.to_numpy(), base.coef.to_numpy(), atol=1e-9)
    np.testing.assert_allclose(shifted.thresholds.to_numpy(), base.thresholds.to_numpy() + 0.7, atol=1e-9)
    assert shifted.has_offset


def test_warm_start_from_a_fit_and_convergence_warning():
    X, y = ordinal_data()
    first = fit_penalized(X, y, alpha=0.04, l1_ratio=1.0)
    again = fit_penalized(X, y, alpha=0.04, l1_ratio=1.0, start=first)
    np.testing.assert_allclose(again.params.to_numpy(), first.params.to_numpy(), atol=1e-9)
    assert again.iterations <= 1
    with pytest.warns(ConvergenceWarning):
        short = fit_penalized(X, y, alpha=0.001, l1_ratio=1.0, max_iter=1)
    assert not short.converged and short.warnings and short.warnings[0].startswith("convergence")


def test_ridge_copes_with_collinear_penalised_columns():
    X, y = ordinal_data()
    X = X.assign(x6=X["x1"] + X["x3"])
    fit = fit_penalized(X, y, alpha=0.05)
    assert fit.converged and np.all(np.isfinite(fit.params))
    with pytest.raises(FitError, match="collinear"):
        fit_penalized(X, y, alpha=0.05, unpenalized=["x1", "x3", "x6"])


# ---- tune_penalty --------------------------------------------------------


def test_tune_penalty_is_deterministic_and_maps_back_to_the_original_scale():
    X, y = ordinal_data()
    groups = {"term": ["x3", "x4"]}
    a = tune_penalty(X, y, l1_ratio=1.0, groups=groups, n_folds=5, seed=11, n_alphas=12)
    b = tune_penalty(X, y, l1_ratio=1.0, groups=groups, n_folds=5, seed=11, n_alphas=12)
    assert isinstance(a, PenaltyChoice)
    pd.testing.assert_frame_equal(a.cv, b.cv)
    assert a.alpha == b.alpha and a.seed == 11
    c = tune_penalty(X, y, l1_ratio=1.0, groups=groups, n_folds=5, seed=12, n_alphas=12)
    assert not np.array_equal(a.fold_loglik, c.fold_loglik)
    assert list(a.to_frame().columns) == ["alpha", "mean_test_loglik", "se", "n_nonzero_groups"]
    i = int(np.flatnonzero(a.alphas == a.alpha)[0])
    best = a.cv["mean_test_loglik"].max()
    assert a.cv["mean_test_loglik"].iloc[i] == best
    # the final fit is a fit on the standardised columns, mapped back:
    # b = b_std / sd, theta_j = theta_j_std + sum mean b_std / sd.
    # Tolerance 1e-6: two fits each within about 1e-8 of the optimum.
    Xs = (X - a.center) / a.scale
    std = fit_penalized(Xs, y, alpha=a.alpha, l1_ratio=1.0, groups=groups)
    b_std = std.coef.to_numpy()
    np.testing.assert_allclose(a.fit.coef.to_numpy(), b_std / a.scale.to_numpy(), atol=1e-6)
    shift = float(np.sum(a.center.to_numpy() * b_std / a.scale.to_numpy()))
    np.testing.assert_allclose(a.fit.thresholds.to_numpy(), std.thresholds.to_numpy() + shift, atol=1e-6)
    np.testing.assert_allclose(a.center.to_numpy(), X.mean().to_numpy())
    np.testing.assert_allclose(a.scale.to_numpy(), X.std(ddof=0).to_numpy())
    assert a.fit.penalty["standardised"] is True and a.fit.penalty["alpha"] == a.alpha
    assert a.fit.loglik == pytest.approx(std.loglik, abs=1e-8)
    json.dumps(a.to_dict(), allow_nan=False)


def test_tune_penalty_takes_a_generator_and_whole_weights():
    X, y = ordinal_data()
    a = tune_penalty(X, y, n_folds=4, seed=np.random.default_rng(5), n_alphas=8)
    b = tune_penalty(X, y, n_folds=4, seed=np.random.default_rng(5), n_alphas=8)
    pd.testing.assert_frame_equal(a.cv, b.cv)
    assert a.seed is None
    # rows of weight 0 are not dealt to folds: the same as dropping them
    w = np.ones(len(y))
    w[::7] = 0.0
    keep = w > 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        weighted = tune_penalty(X, y, l1_ratio=0.5, n_folds=4, seed=3, n_alphas=8, weights=w)
        dropped = tune_penalty(X[keep], y[keep], l1_ratio=0.5, n_folds=4, seed=3, n_alphas=8)
    pd.testing.assert_frame_equal(weighted.cv, dropped.cv)
    with pytest.raises(FitError, match="whole frequency counts"):
        tune_penalty(X, y, n_folds=4, weights=np.full(len(y), 0.5))


def test_tune_penalty_refuses_more_folds_than_rows_of_a_level():
    X, y = ordinal_data(n=40)
    y = y.copy()
    y[y == 2] = 1
    y[:3] = 2
    with pytest.raises(DesignError, match=r"rows by level \{'0': \d+, '1': \d+, '2': 3\}") as info:
        tune_penalty(X, y, n_folds=5)
    assert "5 folds" in str(info.value)


# ---- bad input -----------------------------------------------------------


@pytest.mark.parametrize("kwargs, match", [
    ({"alpha": -1.0}, "alpha"),
    ({"alpha": float("nan")}, "alpha"),
    ({"alpha": 0.1, "l1_ratio": 1.5}, "l1_ratio"),
    ({"alpha": 0.1, "link": "cauchit"}, "link"),
    ({"alpha": 0.1, "groups": {"g": ["x1", "zz"]}}, "groups"),
    ({"alpha": 0.1, "groups": {"g": ["x1"], "h": ["x1", "x2"]}}, "one group only"),
    ({"alpha": 0.1, "groups": ["x1"]}, "mapping"),
    ({"alpha": 0.1, "unpenalized": ["zz"]}, "unpenalized"),
    ({"alpha": 0.1, "unpenalized": "x1"}, "unpenalized"),
    ({"alpha": 0.1, "groups": {"g": ["x1", "x2"]}, "unpenalized": ["x1"]}, "whole groups"),
    ({"alpha": 0.1, "start": "warm"}, "start"),
    ({"alpha": 0.1, "max_iter": 0}, "max_iter"),
])
def test_fit_penalized_refuses_bad_input(kwargs, match):
    X, y = ordinal_data()
    with pytest.raises(RiskvetError, match=match):
        fit_penalized(X, y, **kwargs)


def test_bad_data_get_the_fitters_messages():
    X, y = ordinal_data()
    with pytest.raises(FitError, match="constant column"):
        fit_penalized(X.assign(c=1.0), y, alpha=0.1)
    with pytest.raises(FitError, match="empty level"):
        fit_penalized(X, pd.Categorical(np.where(y == 1, 2, y), categories=[0, 1, 2], ordered=True), alpha=0.1)
    with pytest.raises(FitError, match="rows"):
        fit_penalized(X.iloc[:10], y, alpha=0.1)


def test_path_and_tuning_refuse_bad_input():
    X, y = ordinal_data()
    with pytest.raises(FitError, match="alphas"):
        penalty_path(X, y, alphas=[0.1, -1.0])
    with pytest.raises(FitError, match="n_alphas"):
        penalty_path(X, y, n_alphas=1)
    with pytest.raises(FitError, match="alpha_min_ratio"):
        penalty_path(X, y, alpha_min_ratio=2.0)
    with pytest.raises(FitError, match="penalised column"):
        penalty_path(X, y, unpenalized=list(X.columns))
    with pytest.raises(FitError, match="n_folds"):
        tune_penalty(X, y, n_folds=1)
    with pytest.raises(FitError, match="seed"):
        tune_penalty(X, y, seed="abc")
