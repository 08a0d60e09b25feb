"""Tests of Rubin's rules, riskvet.imputation.rubin.pool.

Reference values come from the formulas worked by hand (Rubin 1987, section
3.1; Barnard & Rubin 1999; van Buuren 2018, sections 2.3 and 5.2), from a
slow element-by-element re-implementation in plain Python, and from
statsmodels' MICE combining step fed the same m completed-data fits.
Tolerances: 1e-12 relative where only floating-point rounding of a few
operations separates two computations of the same formula.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import stats

from riskvet.errors import DataError, RiskvetError
from riskvet.imputation.rubin import PooledImputations, pool

RTOL = 1e-12  # rounding only: the same formula evaluated in another order

# m = 5 completed-data analyses of one parameter, chosen so that the hand-worked numbers are round.
Q = [1.0, 1.2, 0.9, 1.1, 1.3]
U = [0.04, 0.05, 0.04, 0.06, 0.05]
# A second parameter for the 2-D cases.
Q2 = [-0.5, -0.3, -0.6, -0.4, -0.8]
U2 = [0.010, 0.012, 0.011, 0.009, 0.013]

PER_PARAMETER = ("estimate", "within", "between", "total", "se", "riv", "lambda_", "fmi", "df", "lower", "upper")


def by_hand(q, u, df_complete=None, confidence=0.95):
    """Rubin's rules for one parameter, step by step in plain Python floats.

    Source: Rubin 1987, section 3.1 (Q-bar, U-bar, B, T, r, df, fmi, eq. 3.1.10);
    Barnard & Rubin 1999, eqs. 2-3 (df_obs, df); van Buuren 2018, sections 2.3 and 5.2.
    """
    m = len(q)
    qbar = sum(q) / m
    ubar = sum(u) / m
    b = sum((x - qbar) ** 2 for x in q) / (m - 1)
    t = ubar + (1 + 1 / m) * b
    if b == 0:
        r, lam, df_old = 0.0, 0.0, math.inf
    else:
        r = (1 + 1 / m) * b / ubar
        lam = (1 + 1 / m) * b / t
        df_old = (m - 1) * (1 + 1 / r) ** 2
    if df_complete is None:
        df = df_old
    else:
        df_obs = (df_complete + 1) / (df_complete + 3) * df_complete * (1 - lam)
        df = df_obs if math.isinf(df_old) else df_old * df_obs / (df_old + df_obs)
    fmi = (r + 2 / (df_old + 3)) / (r + 1)
    level = 0.5 + confidence / 2
    crit = stats.norm.ppf(level) if math.isinf(df) else stats.t.ppf(level, df)
    se = math.sqrt(t)
    return dict(estimate=qbar, within=ubar, between=b, total=t, se=se, riv=r, lambda_=lam, fmi=fmi, df=df, lower=qbar - crit * se, upper=qbar + crit * se)


def assert_matches(result, expected, rtol=RTOL):
    for name in PER_PARAMETER:
        np.testing.assert_allclose(getattr(result, name), expected[name], rtol=rtol, atol=0, err_msg=name)


# --- hand-worked examples -------------------------------------------------------------------------


def test_hand_worked_example_one_parameter():
    # Source: Rubin 1987, section 3.1 and METHODS.md "Missing data", worked by hand:
    # Q-bar = 5.5 / 5 = 1.1; U-bar = 0.24 / 5 = 0.048;
    # B = (0.01 + 0.01 + 0.04 + 0 + 0.04) / 4 = 0.025; T = 0.048 + 1.2 * 0.025 = 0.078;
    # r = 0.03 / 0.048 = 0.625; lambda = 0.03 / 0.078 = 5/13; df = 4 (1 + 1.6)^2 = 27.04;
    # fmi = (0.625 + 2 / 30.04) / 1.625.
    result = pool(Q, U)
    assert isinstance(result.estimate, float) and isinstance(result.df, float)
    np.testing.assert_allclose(result.estimate, 1.1, rtol=RTOL)
    np.testing.assert_allclose(result.within, 0.048, rtol=RTOL)
    np.testing.assert_allclose(result.between, 0.025, rtol=RTOL)
    np.testing.assert_allclose(result.total, 0.078, rtol=RTOL)
    np.testing.assert_allclose(result.se, math.sqrt(0.078), rtol=RTOL)
    np.testing.assert_allclose(result.riv, 0.625, rtol=RTOL)
    np.testing.assert_allclose(result.lambda_, 5 / 13, rtol=RTOL)
    np.testing.assert_allclose(result.df, 27.04, rtol=RTOL)
    np.testing.assert_allclose(result.fmi, (0.625 + 2 / 30.04) / 1.625, rtol=RTOL)
    crit = stats.t.ppf(0.975, 27.04)
    np.testing.assert_allclose(result.lower, 1.1 - crit * math.sqrt(0.078), rtol=RTOL)
    np.testing.assert_allclose(result.upper, 1.1 + crit * math.sqrt(0.078), rtol=RTOL)
    assert (result.m, result.df_complete, result.df_method, result.confidence) == (5, None, "rubin 1987", 0.95)
    assert result.notes == ()
    assert_matches(result, by_hand(Q, U))


def test_hand_worked_example_barnard_rubin():
    # Source: Barnard & Rubin 1999, eqs. 2-3, worked by hand with nu_com = 20:
    # 1 - lambda = 8/13; df_obs = 21/23 * 20 * 8/13; df = 27.04 df_obs / (27.04 + df_obs).
    result = pool(Q, U, df_complete=20)
    df_obs = 21 / 23 * 20 * 8 / 13
    np.testing.assert_allclose(result.df, 27.04 * df_obs / (27.04 + df_obs), rtol=RTOL)
    # fmi keeps Rubin's df (Rubin 1987, eq. 3.1.10), so it does not change with df_complete.
    np.testing.assert_allclose(result.fmi, (0.625 + 2 / 30.04) / 1.625, rtol=RTOL)
    assert (result.df_complete, result.df_method) == (20.0, "barnard-rubin 1999")
    assert_matches(result, by_hand(Q, U, df_complete=20))


@pytest.mark.parametrize("df_complete", [None, 20])
def test_hand_worked_example_two_parameters(df_complete):
    # Source: by_hand above (Rubin 1987; Barnard & Rubin 1999), one column at a time.
    result = pool(np.column_stack([Q, Q2]), np.column_stack([U, U2]), df_complete=df_complete, confidence=0.9)
    first, second = by_hand(Q, U, df_complete, 0.9), by_hand(Q2, U2, df_complete, 0.9)
    for name in PER_PARAMETER:
        value = getattr(result, name)
        assert isinstance(value, np.ndarray) and value.shape == (2,) and not value.flags.writeable, name
        np.testing.assert_allclose(value, [first[name], second[name]], rtol=RTOL, err_msg=name)
    # The first column pooled alone gives the same numbers (parameters are pooled one by one).
    alone = pool(Q, U, df_complete=df_complete, confidence=0.9)
    for name in PER_PARAMETER:
        np.testing.assert_allclose(getattr(result, name)[0], getattr(alone, name), rtol=RTOL, err_msg=name)
    assert result.m == 5 and result.confidence == 0.9


finite = st.floats(-1e3, 1e3, allow_nan=False)
positive = st.floats(1e-6, 1e3, allow_nan=False)


@st.composite
def analyses(draw):
    m = draw(st.integers(2, 8))
    p = draw(st.integers(1, 3))
    q = draw(st.lists(st.lists(finite, min_size=p, max_size=p), min_size=m, max_size=m))
    u = draw(st.lists(st.lists(positive, min_size=p, max_size=p), min_size=m, max_size=m))
    return np.array(q), np.array(u)


@settings(max_examples=150, deadline=None)
@given(analyses(), st.one_of(st.none(), st.floats(0.5, 1e6)))
def test_agrees_with_slow_plain_python_implementation(data, df_complete):
    # Source: by_hand (Rubin 1987; Barnard & Rubin 1999) element by element against the vectorised code.
    # B is built from deviations Q_i - Q-bar, whose rounding (~ eps |Q|) depends on the summation
    # order; the spread of the estimates is kept above 1e-4 (1 + |Q|), so B agrees to ~1e-11
    # relative, and rtol 1e-9 leaves room for that.  Identical estimates (B = 0) are tested apart.
    q, u = data
    assume(np.all(np.ptp(q, axis=0) > 1e-4 * (1 + np.abs(q).max(axis=0))))
    # and lambda at most 0.999: nearer 1, the reference's 1 - lambda loses digits to cancellation that
    # pool avoids (it uses U-bar / T), and the tiny Barnard-Rubin df magnifies the difference
    m = q.shape[0]
    ubar, between = u.mean(axis=0), q.var(axis=0, ddof=1)
    assume(np.all(ubar / (ubar + (1 + 1 / m) * between) > 1e-3))
    result = pool(q, u, df_complete=df_complete)
    for j in range(q.shape[1]):
        expected = by_hand(q[:, j].tolist(), u[:, j].tolist(), df_complete)
        for name in PER_PARAMETER:
            np.testing.assert_allclose(getattr(result, name)[j], expected[name], rtol=1e-9, atol=1e-12, err_msg=name)


# --- statsmodels --------------------------------------------------------------------------------


def test_agrees_with_statsmodels_mice_combine():
    # Source: statsmodels 0.15.0, statsmodels.imputation.mice.MICE.combine, which pools the fits in
    # its results_list by Rubin's rules (mean params, mean cov_params + (1 + 1/m) np.cov(params)),
    # and reports frac_miss_info = (1 + 1/m) B / T, our lambda_.  MICE.fit imputes by itself, but
    # combine() only reads results_list, so we give it our own m completed-data OLS fits.
    # statsmodels has no degrees of freedom for MI, so df is not compared.
    sm = pytest.importorskip("statsmodels.api")
    mice = pytest.importorskip("statsmodels.imputation.mice")
    rng = np.random.default_rng(20240611)
    n, m = 80, 6
    x1 = rng.normal(size=n)
    x2 = 0.5 * x1 + rng.normal(size=n)
    y = 1.0 + 0.8 * x1 - 0.4 * x2 + rng.normal(size=n)
    missing = rng.random(n) < 0.3
    # stochastic regression imputation of x2 from x1 and y, once per completed data set
    design = np.column_stack([np.ones(n), x1, y])
    coef, *_ = np.linalg.lstsq(design[~missing], x2[~missing], rcond=None)
    resid_sd = np.std(x2[~missing] - design[~missing] @ coef, ddof=3)
    fits = []
    for _ in range(m):
        completed = x2.copy()
        completed[missing] = design[missing] @ coef + rng.normal(scale=resid_sd, size=missing.sum())
        fits.append(sm.OLS(y, np.column_stack([np.ones(n), x1, completed])).fit())
    combiner = mice.MICE("y ~ x1 + x2", sm.OLS, None)
    combiner.results_list = fits
    combiner.endog_names, combiner.exog_names = fits[0].model.endog_names, fits[0].model.exog_names
    reference = combiner.combine()

    result = pool(np.array([f.params for f in fits]), np.array([f.bse**2 for f in fits]), df_complete=n - 3)
    np.testing.assert_allclose(result.estimate, reference.params, rtol=RTOL)
    np.testing.assert_allclose(result.se, reference.bse, rtol=RTOL)
    np.testing.assert_allclose(result.lambda_, reference.frac_miss_info, rtol=RTOL)
    assert np.all(result.between > 0)


# --- Barnard-Rubin degrees of freedom -----------------------------------------------------------


@settings(max_examples=200, deadline=None)
@given(analyses(), st.floats(0.01, 1e8))
def test_barnard_rubin_df_is_below_complete_data_df(data, df_complete):
    # Source: Barnard & Rubin 1999, property (b): the adjusted df never exceeds nu_com;
    # and it never exceeds Rubin's df either (harmonic combination of df_old and df_obs).
    q, u = data
    small = pool(q, u, df_complete=df_complete)
    large = pool(q, u)
    assert np.all(small.df < df_complete)
    assert np.all(small.df <= large.df)
    assert np.all(small.df > 0)


def test_barnard_rubin_df_tends_to_rubin_df_as_complete_df_grows():
    # Source: Barnard & Rubin 1999, property (c): df -> df_old as nu_com -> infinity.
    # With nu_com = 1e12, df / df_old - 1 ~ df_old / df_obs ~ 3e-11, hence rtol 1e-9.
    q, u = np.column_stack([Q, Q2]), np.column_stack([U, U2])
    rubin = pool(q, u)
    np.testing.assert_allclose(pool(q, u, df_complete=1e12).df, rubin.df, rtol=1e-9)
    gaps = [np.max(np.abs(pool(q, u, df_complete=v).df - rubin.df)) for v in (10, 100, 1e4, 1e6)]
    assert all(a > b for a, b in zip(gaps, gaps[1:]))  # monotone in nu_com (property (a))


@pytest.mark.parametrize("df_complete", [1.0, 7.0, 50.0])
def test_barnard_rubin_df_with_no_between_variance(df_complete):
    # Source: Barnard & Rubin 1999, eq. 3 at lambda = 0: df_old is infinite, so
    # df = df_old df_obs / (df_old + df_obs) -> df_obs = nu_com (nu_com + 1) / (nu_com + 3).
    limit = df_complete * (df_complete + 1) / (df_complete + 3)
    result = pool([0.7] * 5, U, df_complete=df_complete)
    assert result.between == 0 and result.lambda_ == 0 and result.riv == 0
    np.testing.assert_allclose(result.df, limit, rtol=1e-15)
    assert result.notes and "df_obs" in result.notes[0]
    # The formula approaches the same limit as B -> 0 from above (tiny spread of the estimates):
    # df_obs - df ~ df_obs^2 lambda^2 / (m - 1), about 1e-20 here, far below rtol 1e-12.
    nearly = pool([0.7, 0.7 + 1e-9, 0.7 - 1e-9, 0.7, 0.7], U, df_complete=df_complete)
    assert nearly.between > 0
    np.testing.assert_allclose(nearly.df, limit, rtol=RTOL)
    # fmi uses Rubin's df (infinite), so it is 0 whatever nu_com (Rubin 1987, eq. 3.1.10).
    assert result.fmi == 0


# --- edge cases and limits ----------------------------------------------------------------------


def test_no_between_variance_gives_infinite_df_and_normal_interval():
    # Source: Rubin 1987, section 3.1: with B = 0, r = 0 and df = (m - 1)(1 + 1/r)^2 is infinite;
    # the t interval becomes the normal interval and fmi = (0 + 2/inf) / 1 = 0.
    result = pool([0.7] * 4, [0.04, 0.05, 0.06, 0.05])
    assert result.between == 0 and result.riv == 0 and result.lambda_ == 0 and result.fmi == 0
    assert math.isinf(result.df)
    z = stats.norm.ppf(0.975)
    np.testing.assert_allclose(result.se, math.sqrt(0.05), rtol=RTOL)
    np.testing.assert_allclose([result.lower, result.upper], [0.7 - z * result.se, 0.7 + z * result.se], rtol=RTOL)
    assert result.notes and "infinite" in result.notes[0]
    assert result.to_dict()["df"] is None  # JSON has no infinity
    assert math.isinf(result.to_frame()["df"].iloc[0])


def test_interval_tends_to_normal_interval_as_lambda_goes_to_zero():
    # Source: Rubin 1987, section 3.1: with small r the
    # df is large and the reference distribution approximately normal.
    z = stats.norm.ppf(0.975)
    gaps = []
    for spread in (1e-1, 1e-2, 1e-3, 1e-4):
        result = pool(np.array(Q) * spread, U)
        normal_upper = result.estimate + z * result.se
        gaps.append(abs(result.upper - normal_upper) / result.se)
    assert all(a > b for a, b in zip(gaps, gaps[1:]))
    # lambda ~ 1e-7 here, df ~ 4 / lambda^2 ~ 1e14: t and z quantiles agree to ~1e-13.
    assert gaps[-1] < 1e-10


def test_parameter_fixed_by_design_has_zero_se():
    # Decision documented in pool: U-bar = 0 and B = 0 follows the B = 0 rule (se 0, point interval).
    result = pool(np.column_stack([[2.0] * 3, [1.0, 2.0, 3.0]]), np.column_stack([[0.0] * 3, [1.0] * 3]))
    assert result.se[0] == 0 and result.lower[0] == result.upper[0] == 2.0
    assert math.isinf(result.df[0]) and result.riv[0] == 0
    assert result.df[1] == pytest.approx(2 * (1 + 1 / ((4 / 3) * 1.0)) ** 2, rel=RTOL)


def test_zero_within_variance_with_between_variance_is_refused():
    # Decision documented in pool: r = (1 + 1/m) B / 0 is infinite; refused rather than reported.
    with pytest.raises(DataError, match=r"pool\(variances=\).*parameters \[1\]"):
        pool(np.column_stack([Q, Q2]), np.column_stack([U, [0.0] * 5]))


# --- invariances --------------------------------------------------------------------------------


def test_permuting_imputations_changes_nothing():
    # Source: Rubin 1987, section 3.1: every pooled quantity is a symmetric function of the m analyses.
    # pool sorts each column before summing, so the floats are identical, not just close.
    q, u = np.column_stack([Q, Q2]), np.column_stack([U, U2])
    base = pool(q, u, df_complete=30).to_dict()
    rng = np.random.default_rng(7)
    for _ in range(5):
        order = rng.permutation(5)
        assert pool(q[order], u[order], df_complete=30).to_dict() == base


def test_adding_a_constant_shifts_estimate_and_interval_only():
    # Source: Rubin 1987, section 3.1: B and U-bar depend on the estimates only through their
    # deviations from Q-bar, so a shift c moves Q-bar, lower and upper by c and nothing else.
    # Tolerance 1e-9 on the spread quantities: Q-bar + c is rounded at |c| eps ~ 1e-15,
    # which enters B through deviations of size ~0.1.
    q, u = np.column_stack([Q, Q2]), np.column_stack([U, U2])
    c = 3.0
    base, shifted = pool(q, u, df_complete=30), pool(q + c, u, df_complete=30)
    for name in ("estimate", "lower", "upper"):
        np.testing.assert_allclose(getattr(shifted, name), getattr(base, name) + c, rtol=RTOL, err_msg=name)
    for name in ("within", "between", "total", "se", "riv", "lambda_", "fmi", "df"):
        np.testing.assert_allclose(getattr(shifted, name), getattr(base, name), rtol=1e-9, err_msg=name)


# --- result object ------------------------------------------------------------------------------


def test_result_is_frozen_with_tidy_frame_and_json_dict():
    result = pool(np.column_stack([Q, Q2]), np.column_stack([U, U2]), df_complete=30)
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.estimate = 0  # type: ignore[misc]
    with pytest.raises(ValueError):
        result.se[0] = 0.0  # read-only arrays
    frame = result.to_frame()
    assert isinstance(frame, pd.DataFrame)
    assert list(frame.columns) == ["estimate", "se", "df", "lower", "upper", "riv", "fmi", "lambda"]
    assert len(frame) == 2
    np.testing.assert_array_equal(frame["lambda"], result.lambda_)
    record = result.to_dict()
    json.dumps(record, allow_nan=False)
    assert record["df_method"] == "barnard-rubin 1999" and record["m"] == 5 and record["estimate"] == result.estimate.tolist()
    one = pool(Q, U).to_frame()
    assert len(one) == 1 and one["estimate"].iloc[0] == pool(Q, U).estimate
    assert isinstance(pool(Q, U), PooledImputations)


# --- bad input: each a DataError naming the argument --------------------------------------------


@pytest.mark.parametrize(
    "estimates, variances, kwargs, where",
    [
        ([1.0], [0.1], {}, "estimates"),  # m = 1
        ([[1.0, 2.0]], [[0.1, 0.1]], {}, "estimates"),  # m = 1, two parameters
        ([1.0, math.nan, 1.2], [0.1, 0.1, 0.1], {}, "estimates"),
        ([1.0, 1.1, 1.2], [0.1, math.nan, 0.1], {}, "variances"),
        ([1.0, 1.1, 1.2], [0.1, math.inf, 0.1], {}, "variances"),
        ([1.0, 1.1, 1.2], [0.1, -0.01, 0.1], {}, "variances"),
        ([1.0, 1.1, 1.2], [0.1, 0.1], {}, "variances"),  # shape mismatch
        (np.ones((3, 2)), np.ones(3), {}, "variances"),  # 2-D against 1-D
        (np.ones(3), np.ones((3, 1)), {}, "variances"),  # (m,) against (m, 1)
        (np.ones((3, 2, 2)), np.ones((3, 2, 2)), {}, "estimates"),
        (["a", "b"], [0.1, 0.1], {}, "estimates"),
        (Q, U, {"df_complete": 0}, "df_complete"),
        (Q, U, {"df_complete": -5.0}, "df_complete"),
        (Q, U, {"df_complete": math.inf}, "df_complete"),
        (Q, U, {"df_complete": True}, "df_complete"),
        (Q, U, {"df_complete": "20"}, "df_complete"),
    ],
)
def test_bad_input_is_a_data_error_naming_the_argument(estimates, variances, kwargs, where):
    with pytest.raises(DataError, match=rf"^pool\({where}=\): expected .*; received "):
        pool(estimates, variances, **kwargs)


@pytest.mark.parametrize("confidence", [0.0, 1.0, 95, "0.95", True])
def test_bad_confidence_is_refused(confidence):
    with pytest.raises(RiskvetError, match=r"^pool\(confidence=\): expected a number strictly between 0 and 1"):
        pool(Q, U, confidence=confidence)
