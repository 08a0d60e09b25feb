"""Tests of riskvet.modelling.proportional_odds: Brant's test and the proportional-odds LR test."""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels
import statsmodels.api as sm
from scipy import stats
from statsmodels.miscmodels.ordinal_model import OrderedModel

from riskvet.errors import CrossingWarning, FitError, RiskvetError
from riskvet.modelling.proportional_odds import brant_test, proportional_odds_lr_test

SM = f"statsmodels {statsmodels.__version__}"
UCLA_CSV = Path(statsmodels.__file__).parent / "miscmodels" / "tests" / "results" / "ologit_ucla.csv"


def ucla():
    df = pd.read_csv(UCLA_CSV)
    y = pd.Categorical(df["apply"], categories=["unlikely", "somewhat likely", "very likely"], ordered=True)
    return df[["pared", "public", "gpa"]].astype(float), y


def po_data(n, seed, K=3, nonpo=0.0):
    """Latent-logistic data; ``nonpo`` gives x2 a different slope at the upper cut."""
    rng = np.random.default_rng(seed)
    X = pd.DataFrame({"x1": rng.normal(size=n), "x2": rng.normal(size=n), "x3": rng.binomial(1, 0.5, n).astype(float)})
    lp = X.to_numpy() @ np.array([0.7, -0.4, 0.5])
    cuts = np.linspace(-1.0, 1.0, K - 1)
    # P(Y > j) = expit(lp + extra_j - cut_j), built cumulatively so it is a proper model.
    cum_gt = np.column_stack([1 / (1 + np.exp(-(lp + (nonpo * X["x2"].to_numpy() if j == K - 2 else 0.0) - c))) for j, c in enumerate(cuts)])
    cum_gt = np.minimum.accumulate(cum_gt, axis=1)
    u = rng.random(n)
    y = (u[:, None] < cum_gt).sum(axis=1)
    return X, y


def test_brant_ucla_published_values():
    # UCLA OARC, "Ordered logistic regression | Stata data analysis examples":
    # brant test on apply ~ pared + public + gpa prints chi2 4.34 (3 df,
    # p 0.227) overall; pared 0.13 (p 0.716), public 3.44 (p 0.064), gpa 0.18
    # (p 0.672) (recalled from memory).  Printed to 2 and 3 decimals: atol
    # 0.005 on the statistics and 0.0005 on p.
    X, y = ucla()
    res = brant_test(X, y)
    assert res.statistic == pytest.approx(4.34, abs=0.005) and res.df == 3
    assert res.p == pytest.approx(0.227, abs=5e-4)
    t = res.terms.set_index("term")
    np.testing.assert_allclose(t.loc[["pared", "public", "gpa"], "statistic"], [0.13, 3.44, 0.18], atol=0.005)
    np.testing.assert_allclose(t.loc[["pared", "public", "gpa"], "p"], [0.716, 0.064, 0.672], atol=5e-4)
    assert list(t["df"]) == [1, 1, 1]


def brant_by_hand(X, y):
    """Brant (1990) statistic from statsmodels Logit fits, written out loop by loop."""
    K = int(y.max()) + 1
    Xc = sm.add_constant(X.to_numpy())
    p = X.shape[1]
    fits = [sm.Logit((y > j).astype(float), Xc).fit(disp=0, tol=1e-12) for j in range(K - 1)]
    pis = [f.predict() for f in fits]
    covs = [np.asarray(f.cov_params()) for f in fits]
    m = K - 1
    V = np.zeros((m * p, m * p))
    for j in range(m):
        for l in range(m):
            if j == l:
                block = covs[j]
            else:
                a, b = min(j, l), max(j, l)
                W = pis[b] - pis[a] * pis[b]
                block = covs[j] @ (Xc.T * W) @ Xc @ covs[l]
            V[j * p : (j + 1) * p, l * p : (l + 1) * p] = block[1:, 1:]
    b = np.concatenate([np.asarray(f.params)[1:] for f in fits])
    D = np.hstack([np.tile(np.eye(p), (m - 1, 1)), -np.eye((m - 1) * p)])
    db = D @ b
    return float(db @ np.linalg.inv(D @ V @ D.T) @ db), np.array([f.params[1:] for f in fits]).T


def test_brant_against_a_loop_implementation_on_statsmodels_logit_fits():
    # The separate binary fits, their covariances and predictions come from
    # statsmodels Logit (Newton, tol 1e-12); the cross-covariance formula is
    # applied term by term.  Same quantities: rtol 1e-6.
    X, y = po_data(500, seed=3, K=4, nonpo=0.6)
    stat, slopes = brant_by_hand(X, y)
    res = brant_test(X, y)
    assert res.statistic == pytest.approx(stat, rel=1e-6), SM
    # Both fits converge to about 1e-9 in absolute terms: rtol 1e-7, atol 1e-8.
    np.testing.assert_allclose(res.coef_by_cut.to_numpy(), slopes, rtol=1e-7, atol=1e-8)
    assert res.df == 3 * 2
    # A per-column test is the overall test restricted to one column.
    one, _ = brant_by_hand(X[["x2"]], y)
    alone = brant_test(X[["x2"]], y)
    assert alone.statistic == pytest.approx(one, rel=1e-6)


def test_brant_frequency_weights_equal_duplication():
    X, y = po_data(200, seed=4)
    w = np.random.default_rng(2).integers(0, 3, len(y))
    rows = np.repeat(np.arange(len(y)), w)
    a = brant_test(X, y, weights=w)
    b = brant_test(X.iloc[rows], y[rows])
    assert a.statistic == pytest.approx(b.statistic, rel=1e-7)
    np.testing.assert_allclose(a.terms["statistic"], b.terms["statistic"], rtol=1e-7)


def test_brant_groups_test_columns_jointly():
    X, y = po_data(400, seed=5, K=4)
    res = brant_test(X, y, groups={"x1 and x2": ["x1", "x2"], "x3": ["x3"]})
    t = res.terms.set_index("term")
    assert t.loc["x1 and x2", "df"] == 4 and t.loc["x3", "df"] == 2
    assert t.loc["x1 and x2", "columns"] == "x1, x2"
    # Testing all columns as one group is the overall test.
    all_in_one = brant_test(X, y, groups={"all": ["x1", "x2", "x3"]})
    assert all_in_one.terms["statistic"].iloc[0] == pytest.approx(res.statistic, rel=1e-12)


def test_size_and_power_by_simulation():
    # Under proportional odds both statistics are chi-squared with p(K-2) df
    # (Brant 1990; likelihood-ratio theory), so over 150 data sets the 5%
    # rejection rate should lie within 0.01..0.11 (binomial, about +-3 SE),
    # and the p-values should not be far from uniform (KS p > 0.001).
    p_brant, p_lr = [], []
    for seed in range(150):
        X, y = po_data(300, seed=100 + seed)
        p_brant.append(brant_test(X, y).p)
        p_lr.append(proportional_odds_lr_test(X, y).p)
    for ps in (np.array(p_brant), np.array(p_lr)):
        assert 0.01 <= np.mean(ps < 0.05) <= 0.11
        assert stats.kstest(ps, "uniform").pvalue > 1e-3
    # With a strongly non-proportional x2 both tests reject, and Brant's
    # per-term test singles out x2.
    X, y = po_data(1500, seed=7, nonpo=1.5)
    res = brant_test(X, y)
    t = res.terms.set_index("term")
    assert res.p < 1e-4 and t.loc["x2", "p"] < 1e-4
    assert t.loc["x1", "p"] > 1e-3 and t.loc["x3", "p"] > 1e-3
    # The non-proportional fit of such data crosses on some rows: counted and warned.
    with pytest.warns(CrossingWarning):
        lr = proportional_odds_lr_test(X, y)
    assert lr.p < 1e-4
    assert lr.n_crossing > 0 and any("crossing" in m for m in lr.warnings)


def test_lr_test_against_statsmodels_and_a_saturated_model():
    # Indicators of three groups: the non-proportional model is saturated, so
    # its log-likelihood is sum n_gk log(n_gk / n_g) (Agresti 2010, ch. 3);
    # the proportional one comes from statsmodels OrderedModel (BFGS, gtol 1e-8,
    # log-likelihood good to 1e-8).  The LR statistic then follows: atol 1e-6.
    rng = np.random.default_rng(8)
    g = rng.integers(0, 3, 600)
    probs = np.array([[0.5, 0.3, 0.2], [0.3, 0.3, 0.4], [0.2, 0.5, 0.3]])
    y = np.array([rng.choice(3, p=probs[k]) for k in g])
    D = pd.DataFrame({"g1": (g == 1).astype(float), "g2": (g == 2).astype(float)})
    tab = pd.crosstab(g, y).to_numpy().astype(float)
    saturated = np.sum(tab * np.log(tab / tab.sum(axis=1, keepdims=True)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = OrderedModel(y, D, distr="logit").fit(method="bfgs", disp=False, maxiter=10000, gtol=1e-8)
    res = proportional_odds_lr_test(D, y)
    assert res.loglik_nonproportional == pytest.approx(saturated, abs=1e-8)
    assert res.loglik_proportional == pytest.approx(ref.llf, abs=1e-8), SM
    assert res.statistic == pytest.approx(2 * (saturated - ref.llf), abs=1e-6)
    assert res.df == 2
    assert res.p == pytest.approx(stats.chi2.sf(res.statistic, 2), rel=1e-10)
    assert res.n_crossing == 0


@pytest.mark.parametrize("nonpo, seed, significant", [(-0.5, 3, True), (0.0, 4, False)])
def test_lr_test_on_raw_scale_columns_agrees_with_brant(nonpo, seed, significant):
    # Columns far from zero (x1 as a temperature near 39, x2 near 1000) do not
    # change either model: shifting and scaling a column is absorbed by the
    # thresholds and slopes, so both the LR statistic and Brant's statistic
    # must equal those of the unshifted columns (LR to 1e-6: each fit stops
    # within tol of its maximum; Brant to 1e-8 relative: a Wald statistic of
    # slopes only).  With nonpo = -0.5 the thresholds of the non-proportional
    # model are out of order at x = 0, far from the data.  The two tests have
    # the same chi-squared(p (K - 2)) null distribution (Brant 1990; Agresti
    # 2010, section 3.5), and here, on 800 rows, they agree in size: both
    # reject at 0.001 with the strongly non-proportional x2, neither at 0.05
    # with proportional data.
    X, y = po_data(800, seed=seed, nonpo=nonpo)
    S = X.assign(x1=X["x1"] * 0.8 + 39.0, x2=X["x2"] * 15.0 + 1000.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lr_raw = proportional_odds_lr_test(S, y)
        lr = proportional_odds_lr_test(X, y)
        brant_raw = brant_test(S, y)
        brant = brant_test(X, y)
    assert lr_raw.nonproportional_fit.converged and lr_raw.warnings == ()
    assert lr_raw.statistic == pytest.approx(lr.statistic, abs=1e-6)
    assert lr_raw.loglik_nonproportional == pytest.approx(lr.loglik_nonproportional, abs=1e-7)
    assert brant_raw.statistic == pytest.approx(brant.statistic, rel=1e-8)
    if nonpo:
        assert np.diff(lr_raw.nonproportional_fit.thresholds.to_numpy())[0] < 0
    if significant:
        assert lr_raw.p < 1e-3 and brant_raw.p < 1e-3
    else:
        assert lr_raw.p > 0.05 and brant_raw.p > 0.05


def test_results_tables_and_json():
    X, y = ucla()
    res = brant_test(X, y)
    frame = res.to_frame()
    assert list(frame["term"]) == ["overall", "pared", "public", "gpa"]
    assert list(res.coef_by_cut.columns) == ["y>unlikely", "y>somewhat likely"]
    json.dumps(res.to_dict(), allow_nan=False)
    lr = proportional_odds_lr_test(X, y)
    assert list(lr.to_frame().columns) == ["statistic", "df", "p", "loglik_proportional", "loglik_nonproportional", "n_crossing"]
    assert lr.statistic >= 0 and lr.df == 3
    json.dumps(lr.to_dict(), allow_nan=False)


def test_bad_input():
    X, y = po_data(100, seed=9, K=2)
    with pytest.raises(FitError, match="at least 3 outcome levels"):
        brant_test(X, y)
    with pytest.raises(FitError, match="at least 3 outcome levels"):
        proportional_odds_lr_test(X, y)
    X, y = po_data(100, seed=9)
    with pytest.raises(FitError, match="groups"):
        brant_test(X, y, groups={"bad": ["nope"]})
    with pytest.raises(RiskvetError, match="weights"):
        brant_test(X, y, weights=-np.ones(len(y)))
    with pytest.raises(FitError, match="at least one column"):
        brant_test(None, y)
    with pytest.raises(FitError, match="empty level"):
        brant_test(X, pd.Categorical.from_codes(np.where(y == 1, 2, y), ["a", "b", "c"], ordered=True))
