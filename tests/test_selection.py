"""Tests of riskvet.modelling.selection.select_terms."""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels
import statsmodels.api as sm
from scipy import stats
from statsmodels.miscmodels.ordinal_model import OrderedModel

from riskvet.errors import DesignError, FitError
from riskvet.modelling.fitter import fit_cumulative
from riskvet.modelling.selection import _folds, select_terms

SM = f"statsmodels {statsmodels.__version__}"


def sim(n=500, p_null=6, seed=0, K=3, strong=(1.2, -0.9, 0.7)):
    """A few strong predictors and several null ones, latent-logistic outcome."""
    rng = np.random.default_rng(seed)
    p = len(strong) + p_null
    X = pd.DataFrame(rng.normal(size=(n, p)), columns=[f"s{j}" for j in range(len(strong))] + [f"n{j}" for j in range(p_null)])
    lat = X.to_numpy()[:, : len(strong)] @ np.array(strong) + rng.logistic(size=n)
    y = np.searchsorted(np.quantile(lat, np.linspace(0, 1, K + 1)[1:-1]), lat)
    return X, y


def singles(X):
    return {c: [c] for c in X.columns}


def sm_ordered(X, y):
    model = OrderedModel(y, X, distr="logit")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return model, model.fit(method="bfgs", disp=False, maxiter=10000, gtol=1e-8)


def test_strong_predictors_are_chosen_and_nulls_mostly_not():
    X, y = sim(n=800, p_null=8, seed=1)
    res = select_terms(X, y, groups=singles(X), seed=3)
    assert set(res.terms[:3]) == {"s0", "s1", "s2"}
    assert len(res.terms) <= 5
    assert res.size == len(res.terms)
    # The chosen size is the arg-max of the cross-validation curve.
    cv = res.cv
    assert list(cv["size"]) == list(range(12))
    assert res.size == int(cv["size"][cv["mean_test_loglik"].idxmax()])
    assert (cv["n_folds_reached"] == 10).all() and (cv["se"] > 0).all()
    # The final model is the plain fit of the chosen columns.
    ref = fit_cumulative(X[list(res.columns)], y)
    np.testing.assert_allclose(res.fit.params.to_numpy(), ref.params.to_numpy(), atol=1e-8)
    # The path on all data matches the final model.
    assert res.path["loglik"].iloc[-1] == pytest.approx(res.fit.loglik, abs=1e-6)
    assert list(res.path["term"][1:]) == list(res.terms)


def test_deterministic_for_a_seed():
    X, y = sim(n=400, seed=2)
    a = select_terms(X, y, groups=singles(X), seed=11)
    b = select_terms(X, y, groups=singles(X), seed=11)
    assert a.terms == b.terms
    pd.testing.assert_frame_equal(a.cv, b.cv)
    pd.testing.assert_frame_equal(a.path, b.path)
    c = select_terms(X, y, groups=singles(X), seed=np.random.default_rng(11))
    pd.testing.assert_frame_equal(a.cv, c.cv)
    assert c.seed is None and a.seed == 11
    d = select_terms(X, y, groups=singles(X), seed=12)
    assert not np.allclose(d.cv["mean_test_loglik"], a.cv["mean_test_loglik"])
    # Row order of the input does not change the path on all data.
    perm = np.random.default_rng(0).permutation(len(y))
    e = select_terms(X.iloc[perm], y[perm], groups=singles(X), seed=11, method="backward")
    f = select_terms(X, y, groups=singles(X), method="backward")
    assert e.terms == f.terms


def test_folds_are_stratified():
    y = np.repeat([0, 1, 2], [53, 31, 16])
    fold = _folds(y, 10, np.random.default_rng(0))
    for k in range(3):
        counts = np.bincount(fold[y == k], minlength=10)
        assert counts.max() - counts.min() <= 1
    sizes = np.bincount(fold, minlength=10)
    assert sizes.max() - sizes.min() <= 1


def test_forced_terms_are_kept():
    X, y = sim(n=400, seed=4)
    res = select_terms(X, y, groups=singles(X), forced=["n3", "n1"], seed=0)
    assert res.terms[:2] == ("n3", "n1") and res.forced == ("n3", "n1")
    assert res.path["action"].iloc[0] == "start"
    assert "n3" in res.fit.columns and "n1" in res.fit.columns
    back = select_terms(X, y, groups=singles(X), forced=["n3"], method="backward")
    assert "n3" in back.terms
    assert "n3" not in set(back.path["term"])


def test_groups_enter_and_leave_whole():
    # A three-level categorical as two indicators and a two-column term.
    rng = np.random.default_rng(5)
    n = 600
    g = rng.integers(0, 3, n)
    x = rng.normal(size=n)
    X = pd.DataFrame(
        {
            "cat_b": (g == 1).astype(float),
            "cat_c": (g == 2).astype(float),
            "x": x,
            "x_sq": x * x,
            "noise": rng.normal(size=n),
        }
    )
    lat = 1.0 * (g == 1) - 1.0 * (g == 2) + 0.8 * x + rng.logistic(size=n)
    y = np.searchsorted([-0.5, 0.8], lat)
    groups = {"cat": ["cat_b", "cat_c"], "x": ["x", "x_sq"], "noise": ["noise"]}
    res = select_terms(X, y, groups=groups, seed=1)
    assert set(res.terms) >= {"cat", "x"}
    for term, cols in groups.items():
        present = [c in res.columns for c in cols]
        assert all(present) or not any(present)
    entered = res.path[res.path["action"] == "add"].set_index("term")
    assert entered.loc["cat", "df"] == 2 and entered.loc["x", "df"] == 2
    back = select_terms(X, y, groups=groups, method="backward")
    for term, cols in groups.items():
        present = [c in back.columns for c in cols]
        assert all(present) or not any(present)
    removed = back.path[back.path["action"] == "remove"]
    assert all(removed["df"] == [len(groups[t]) for t in removed["term"]])


def test_score_statistic_against_statsmodels_numerical_score_and_hessian():
    # Score statistic for adding a column at the fit without it:
    # U' I^{-1} U with U and I from statsmodels OrderedModel's score() and
    # hessian() (numerical derivatives) evaluated at the restricted estimates
    # with the new coefficient 0.  The statistic does not depend on how the
    # thresholds are parameterised since their score is zero there.
    # Numerical second derivatives and BFGS estimates: rtol 1e-4.
    X, y = sim(n=400, p_null=2, seed=6)
    base = ["s0"]
    res = select_terms(X, y, groups=singles(X), forced=base, seed=0)
    first = res.path.iloc[1]
    model0, fit0 = sm_ordered(X[base], y)
    stats_sm = {}
    for cand in [c for c in X.columns if c not in base]:
        cols = base + [cand]
        full = OrderedModel(y, X[cols], distr="logit")
        par = np.asarray(fit0.params)
        params = np.r_[par[: len(base)], 0.0, par[len(base) :]]
        U = full.score(params)
        H = full.hessian(params)
        stats_sm[cand] = float(-U @ np.linalg.solve(H, U))
    best = max(stats_sm, key=stats_sm.get)
    assert first["term"] == best, SM
    assert first["statistic"] == pytest.approx(stats_sm[best], rel=1e-4), SM
    assert first["p"] == pytest.approx(stats.chi2.sf(stats_sm[best], 1), rel=1e-3)


def test_binary_score_statistic_equals_statsmodels_glm_score_test():
    # statsmodels GLM(Binomial).score_test(exog_extra=...) for logistic
    # regression (canonical link: observed = expected information): rtol 1e-6.
    X, y = sim(n=300, p_null=3, seed=7, K=2)
    res = select_terms(X, y, groups=singles(X), forced=["s0", "s1"], seed=0)
    step = res.path.iloc[1]
    glm = sm.GLM(y, sm.add_constant(X[["s0", "s1"]]), family=sm.families.Binomial()).fit(tol=1e-12)
    ref = glm.score_test(exog_extra=X[[step["term"]]].to_numpy(), return_object=True)
    assert step["statistic"] == pytest.approx(float(np.squeeze(ref.statistic)), rel=1e-6), SM
    assert step["p"] == pytest.approx(float(np.squeeze(ref.pvalue)), rel=1e-5)
    assert int(ref.k_constraint) == step["df"] == 1


def test_backward_aic_against_brute_force_with_statsmodels():
    # Each removal is the one with the smallest AIC among the single
    # removals, each step lowers the AIC, and at the end no single removal
    # lowers it; AICs recomputed by statsmodels OrderedModel (BFGS, gtol
    # 1e-8; AIC agreement 1e-6).
    X, y = sim(n=300, p_null=3, seed=8, strong=(0.9, 0.25))
    res = select_terms(X, y, groups=singles(X), method="backward")
    current = list(X.columns)
    aic_now = sm_ordered(X[current], y)[1].aic
    assert res.path["aic"].iloc[0] == pytest.approx(aic_now, abs=1e-6), SM
    for _, row in res.path.iloc[1:].iterrows():
        options = {c: sm_ordered(X[[d for d in current if d != c]], y)[1].aic for c in current}
        choice = min(options, key=options.get)
        assert row["term"] == choice
        assert options[choice] < aic_now
        assert row["aic"] == pytest.approx(options[choice], abs=1e-6)
        current.remove(choice)
        aic_now = options[choice]
    assert set(current) == set(res.terms)
    for c in current:
        assert sm_ordered(X[[d for d in current if d != c]], y)[1].aic >= aic_now


def test_method_none_is_the_full_model():
    X, y = sim(n=300, seed=9)
    res = select_terms(X, y, groups=singles(X), method="none")
    ref = fit_cumulative(X, y)
    np.testing.assert_allclose(res.fit.params.to_numpy(), ref.params.to_numpy(), atol=1e-8)
    assert res.terms == tuple(X.columns) and res.cv is None and res.size is None and res.n_folds is None
    assert len(res.path) == 1


def test_nonproportional_and_probit_selection_run():
    X, y = sim(n=400, p_null=2, seed=10)
    res = select_terms(X, y, groups=singles(X), proportional=False, seed=0, n_folds=5)
    assert set(res.terms) >= {"s0", "s1"}
    assert not res.fit.proportional
    add = res.path[res.path["action"] == "add"]
    assert (add["df"] == 2).all()  # K - 1 coefficients per column
    res = select_terms(X, y, groups=singles(X), link="probit", seed=0, n_folds=5)
    assert res.fit.link == "probit" and set(res.terms) >= {"s0", "s1"}


def test_weights_equal_duplication_without_cross_validation():
    X, y = sim(n=200, p_null=3, seed=11)
    w = np.random.default_rng(3).integers(0, 3, len(y))
    rows = np.repeat(np.arange(len(y)), w)
    for method in ("backward", "none"):
        a = select_terms(X, y, groups=singles(X), method=method, weights=w)
        b = select_terms(X.iloc[rows], y[rows], groups=singles(X), method=method)
        assert a.terms == b.terms
        np.testing.assert_allclose(a.path["aic"], b.path["aic"], rtol=1e-10)
    fwd = select_terms(X, y, groups=singles(X), weights=w, seed=0)
    assert fwd.fit.n == w.sum()


def test_tables_and_json():
    X, y = sim(n=300, seed=12)
    res = select_terms(X, y, groups=singles(X), seed=0, n_folds=5)
    assert list(res.to_frame().columns) == ["step", "action", "term", "criterion", "statistic", "df", "p", "loglik", "aic", "n_params"]
    assert set(res.cv_by_fold["fold"]) == set(range(1, 6))
    data = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    assert data["method"] == "forward" and data["terms"] == list(res.terms)


def test_bad_input():
    X, y = sim(n=100, seed=13)
    g = singles(X)
    with pytest.raises(DesignError, match="unknown"):
        select_terms(X, y, groups={**g, "extra": ["zz"]})
    with pytest.raises(DesignError, match="one term only"):
        select_terms(X, y, groups={**g, "dup": ["s0"]})
    with pytest.raises(DesignError, match=r"in no term \['n5'\]"):
        select_terms(X, y, groups={k: v for k, v in g.items() if k != "n5"})
    with pytest.raises(DesignError, match="forced"):
        select_terms(X, y, groups=g, forced=["nope"])
    with pytest.raises(DesignError, match="method"):
        select_terms(X, y, groups=g, method="stepwise")
    with pytest.raises(DesignError, match="n_folds"):
        select_terms(X, y, groups=g, n_folds=1)
    with pytest.raises(DesignError, match="seed"):
        select_terms(X, y, groups=g, seed=-1)
    with pytest.raises(FitError, match="link"):
        select_terms(X, y, groups=g, link="tanh")
    with pytest.raises(DesignError, match="groups"):
        select_terms(X, y, groups=[["s0"]])
    yy = y.copy()
    yy[:] = 0
    yy[0] = 1
    yy[1:3] = 2
    with pytest.raises(DesignError, match="at least 2 rows in every level"):
        select_terms(X, yy, groups=g)


def test_fold_trouble_is_reported():
    # An indicator of one row: in the fold holding that row the training
    # column is all zero, so it cannot enter and that fold's path stops one
    # term short (the largest size becomes ineligible); in the other folds it
    # separates (the row is in the top level, so its coefficient diverges).
    from riskvet.errors import RiskvetWarning, SeparationWarning

    X, y = sim(n=300, p_null=2, seed=14)
    rare = np.zeros(len(y))
    rare[np.flatnonzero(y == 2)[0]] = 1.0
    X = X.assign(rare=rare)
    with pytest.warns(RiskvetWarning) as record:
        res = select_terms(X, y, groups=singles(X), seed=0)
    messages = [str(r.message) for r in record]
    assert any("path stopped" in m for m in messages)
    assert any(issubclass(r.category, SeparationWarning) and "separation" in str(r.message) for r in record)
    assert any("path stopped" in m for m in res.warnings) and any("separation" in m for m in res.warnings)
    assert np.isnan(res.cv["mean_test_loglik"].iloc[-1])
    assert res.cv["n_folds_reached"].iloc[-1] == 9
    assert "rare" not in res.terms


def test_log_p_value_far_in_the_tail():
    # For even df the chi-squared upper tail has the closed form
    # exp(-x) sum_{i<df/2} x^i / i!, x = stat/2 (the Poisson sum; common
    # practice): check the log tail where the p-value itself underflows.
    from riskvet.modelling.selection import _log_chi2_sf

    stat = 5000.0
    x = stat / 2
    assert _log_chi2_sf(stat, 2) == pytest.approx(-x, rel=1e-12)
    assert _log_chi2_sf(stat, 4) == pytest.approx(np.log1p(x) - x, rel=1e-12)
    assert _log_chi2_sf(stat, 6) == pytest.approx(np.log(1 + x + x * x / 2) - x, rel=1e-9)
    # Where the p-value is representable it is used directly (scipy chdtrc).
    assert _log_chi2_sf(30.0, 3) == pytest.approx(np.log(stats.chi2.sf(30.0, 3)), rel=1e-12)
