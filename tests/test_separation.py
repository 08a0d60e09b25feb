"""Separation is checked after every fit, and the lean fitter's screen catches it.

Definitions of complete and quasi-complete separation: Albert & Anderson
(1984), Biometrika 71:1-10; the check is the linear programme of Konis
(2007).  The patterns here are built so that the answer is known by
construction (a direction along which no row's probability falls).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from riskvet.errors import SeparationWarning
from riskvet.modelling.fitter import _fit_arrays, _make_design, _separated_columns, _separation_check, fit_cumulative
from riskvet.modelling.proportional_odds import brant_test, proportional_odds_lr_test


def rare_dummy(seed, n=300, K=3, top=False):
    """Ordinary data plus a rare indicator whose rows at 1 miss the lowest level
    (or, with ``top``, are all in the top level)."""
    rng = np.random.default_rng(seed)
    X = pd.DataFrame({"age": rng.normal(size=n), "sex": rng.binomial(1, 0.5, n).astype(float)})
    cuts = np.linspace(-1, 1, K - 1)
    y = np.searchsorted(cuts, 0.6 * X["age"] + 0.4 * X["sex"] + rng.logistic(size=n))
    rare = np.zeros(n)
    rare[rng.choice(n, 12, replace=False)] = 1.0
    y[rare == 1] = K - 1 if top else np.maximum(y[rare == 1], 1)
    return X.assign(rare=rare), y


def test_binary_quasi_complete_rare_dummy_is_named():
    # Every row with rare = 1 has the event: the binary MLE of its coefficient
    # is infinite, and the fit is warned about by name.
    X, y = rare_dummy(1, K=2)
    with pytest.warns(SeparationWarning, match="rare"):
        fit = fit_cumulative(X, y)
    assert fit.separation == ("rare",)
    raw = _fit_arrays(X.to_numpy(), y, 2)
    assert raw.suspect_separation


def test_ordinal_proportional_quasi_complete_is_named():
    # Rows with rare = 1 are all in the top level: along beta_rare -> +inf no
    # row's probability falls.
    X, y = rare_dummy(2, top=True)
    with pytest.warns(SeparationWarning, match="rare"):
        fit = fit_cumulative(X, y)
    assert fit.separation == ("rare",)
    assert _fit_arrays(X.to_numpy(), y, 3).suspect_separation


def test_nonproportional_dummy_missing_the_lowest_level_is_named():
    # The users' case: a dummy never in the lowest level.  The proportional
    # model is not separated by it (its rows in level 1 hold the coefficient
    # back), but the cut-0 coefficient of the non-proportional model runs to
    # infinity while the fit "converges" with a huge standard error.
    X, y = rare_dummy(3)
    with warnings.catch_warnings():
        warnings.simplefilter("error", SeparationWarning)
        prop = fit_cumulative(X, y)
    assert prop.separation == ()
    with pytest.warns(SeparationWarning, match="rare"):
        nonprop = fit_cumulative(X, y, proportional=False)
    assert nonprop.separation == ("rare",)
    assert _fit_arrays(X.to_numpy(), y, 3, proportional=False).suspect_separation


def test_proportional_odds_tests_say_they_are_not_valid_under_separation():
    X, y = rare_dummy(4)
    with pytest.warns(SeparationWarning):
        lr = proportional_odds_lr_test(X, y)
    assert not lr.valid and np.isnan(lr.statistic) and np.isnan(lr.p)
    assert lr.separation == ("non-proportional fit: rare",)
    assert "not valid" in lr.reason and "rare" in lr.reason
    assert not lr.to_frame()["valid"].item() and "rare" in lr.to_frame()["reason"].item()
    assert lr.to_dict()["valid"] is False
    # Brant's separate binary fit of y > 0 is separated by the dummy.
    with pytest.warns(SeparationWarning, match="rare"):
        br = brant_test(X, y)
    assert not br.valid and np.isnan(br.statistic) and "rare" in br.reason
    assert br.separation == ("y > 0: rare",)
    assert np.isnan(br.terms["statistic"]).all()


@pytest.mark.parametrize("seed", [11, 12, 13, 14, 15])
def test_no_false_alarms_on_ordinary_data(seed):
    # Ordinary data with indicators (common and rare but present at every
    # level) and continuous columns: no separation, no warning, no test
    # marked invalid.
    rng = np.random.default_rng(seed)
    n = 400
    X = pd.DataFrame(
        {
            "age": rng.normal(60, 10, n),
            "sex": rng.binomial(1, 0.5, n).astype(float),
            "minor": rng.binomial(1, 0.08, n).astype(float),
            "score": rng.gamma(2.0, 1.0, n),
        }
    )
    lp = 0.04 * (X["age"] - 60) + 0.5 * X["sex"] + 0.3 * X["minor"] + 0.2 * X["score"]
    for K in (2, 3, 4):
        y = np.searchsorted(np.linspace(-0.8, 0.8, K - 1), lp + rng.logistic(size=n))
        with warnings.catch_warnings():
            # Crossing cumulative probabilities of the non-proportional fit
            # on a few extreme rows are not separation; only that is checked.
            warnings.simplefilter("ignore")
            warnings.simplefilter("error", SeparationWarning)
            for prop in (True, False):
                fit = fit_cumulative(X, y, proportional=prop)
                assert fit.separation == () and fit.converged
                assert not any("separation" in w for w in fit.warnings)
            if K > 2:
                assert proportional_odds_lr_test(X, y).valid
                assert brant_test(X, y).valid


def test_large_data_screen_is_exact_both_ways():
    # Above the subset size the programme first runs on a subset; it must
    # clear unseparated data and still find a separation carried by 10 rows
    # of 8,000 (which the subset may well miss).
    from riskvet.modelling import fitter

    rng = np.random.default_rng(21)
    n = 8000
    X = np.c_[rng.normal(size=n), rng.binomial(1, 0.3, n)]
    y = np.searchsorted([-0.5, 0.6], X @ [0.5, 0.4] + rng.logistic(size=n))
    assert n > fitter._LP_SUBSET
    d = _make_design(X, y, 3, np.ones(n), None, "logit", False, True)
    assert _separation_check(d) == () == _separated_columns(d)
    Xs = np.c_[X, np.zeros(n)]
    idx = rng.choice(np.flatnonzero(y > 0), 10, replace=False)
    Xs[idx, 2] = 1.0
    d = _make_design(Xs, y, 3, np.ones(n), None, "logit", False, True)
    assert _separation_check(d) == (2,) == _separated_columns(d)


def test_screen_flags_huge_standardised_coefficients_only():
    from riskvet.modelling.fitter import _separation_screen

    rng = np.random.default_rng(31)
    X = rng.normal(size=(200, 2))
    y = (X[:, 0] + rng.logistic(size=200) > 0).astype(int)
    d = _make_design(X, y, 2, np.ones(200), None, "logit", True, True)
    P = np.full(200, 0.5)
    assert not _separation_screen(d, np.array([0.0, 1.0, -0.5]), P, True, False)
    assert _separation_screen(d, np.array([0.0, 12.0, -0.5]), P, True, False)
    assert _separation_screen(d, np.array([0.0, 1.0, -0.5]), P, False, False)


def test_one_column_binary_separation_is_decided_exactly_without_the_programme():
    """The shortcut for one column of a binary model (every calibration-slope fit) agrees with the linear programme
    on overlapping, touching (quasi-complete) and apart (complete) data, in both directions (invented test data)."""
    from riskvet.modelling.fitter import _make_design, _separated_columns, _separation_check

    rng = np.random.default_rng(3)
    for case in ("overlap", "touch", "apart", "reversed"):
        x = np.sort(rng.normal(size=40))
        y = (np.arange(40) >= 20).astype(np.int64)
        if case == "overlap":
            y[[3, 30]] = y[[30, 3]]
        elif case == "touch":
            x[20] = x[19]
        elif case == "reversed":
            y = 1 - y
        order = np.argsort(y, kind="stable")
        d = _make_design(x[order, None], y[order], 2, np.ones(40), None, "logit", True, True)
        assert _separation_check(d) == _separated_columns(d), case
        assert bool(_separation_check(d)) == (case != "overlap"), case


@pytest.mark.parametrize("K", [2, 3, 4])
@pytest.mark.parametrize("proportional", [True, False])
def test_one_column_separation_rule_agrees_with_the_programme(K, proportional):
    """The one-column rule (every calibration and recalibration fit) gives the linear programme's answer on
    overlapping, touching and apart levels, upwards, downwards and mixed, for 2 to 4 levels, proportional and
    not (invented test data; the programme is the reference)."""
    from riskvet.modelling.fitter import _make_design, _one_column_separated, _separated_columns

    rng = np.random.default_rng(40 + K)
    n_per = 12
    seen = set()
    for trial in range(60):
        y = np.repeat(np.arange(K), n_per)
        # levels on disjoint, touching or overlapping ranges, in a random order of the ranges
        centres = rng.permutation(K) if trial % 3 else np.arange(K)
        spread = rng.choice([0.2, 0.5, 0.8])  # 0.5 touches (quasi-complete), 0.8 overlaps
        x = np.concatenate([c + spread * np.linspace(-1.0, 1.0, n_per) for c in centres])
        if trial % 5 == 0:
            x[rng.integers(len(x))] += rng.normal()  # one stray row
        if trial % 7 == 0:
            x[y == 0] = x[y == 0][0]  # a level with one value
        d = _make_design(x[:, None], y, K, np.ones(len(y)), None, "logit", proportional, True)
        expected = _separated_columns(d)
        assert _one_column_separated(d) == expected, (trial, centres, spread)
        seen.add(bool(expected))
    assert seen == {True, False}  # both answers were met


def test_public_fit_skips_the_screen_but_still_finds_separation():
    """fit_cumulative runs the separation programme after every fit, so it skips the cheap screen; the separation is
    still named, and the lean entry still screens (invented test data)."""
    from riskvet.modelling.fitter import _fit_arrays

    rng = np.random.default_rng(12)
    x = rng.normal(size=300)
    y = np.searchsorted([-0.3, 0.8], x + rng.logistic(size=300))
    X = np.c_[x, (y == 2).astype(float)]  # the second column separates the top level
    with pytest.warns(SeparationWarning):
        fit = fit_cumulative(pd.DataFrame(X, columns=["x", "top"]), y)
    assert fit.separation == ("top",)
    assert _fit_arrays(X, y, 3).suspect_separation
    assert _fit_arrays(X, y, 3, screen_separation=False).suspect_separation
    clean = _fit_arrays(X[:, :1], y, 3)
    assert not clean.suspect_separation
    assert _fit_arrays(X[:, :1], y, 3, screen_separation=False).suspect_separation
