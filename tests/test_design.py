"""Tests of riskvet.intake.design: knots, spline basis, design specification."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import patsy
import pytest
import scipy.stats.mstats
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st

from riskvet.intake.design import (
    KNOT_QUANTILES,
    DesignSpec,
    Term,
    build_design,
    harrell_knots,
    rcs_basis,
)
from riskvet.errors import DesignError, ModelFileError, RiskvetError

# --------------------------------------------------------------------------
# Data: the 1996 American National Election Study extract shipped with
# statsmodels 0.15 (statsmodels.datasets.anes96, 944 respondents).  PID is a
# 0-6 party-identification code; it is also given text labels here to have a
# text categorical predictor.
# --------------------------------------------------------------------------

PID_LABELS = {0: "strong dem", 1: "weak dem", 2: "lean dem", 3: "independent", 4: "lean rep", 5: "weak rep",
              6: "strong rep"}


@pytest.fixture(scope="module")
def anes() -> pd.DataFrame:
    data = sm.datasets.anes96.load_pandas().data
    data = data.assign(party=data["PID"].astype(int).map(PID_LABELS).astype("str"))
    return data


@pytest.fixture(scope="module")
def dev(anes) -> pd.DataFrame:
    return anes.iloc[:600]


@pytest.fixture(scope="module")
def val(anes) -> pd.DataFrame:
    return anes.iloc[600:]


@pytest.fixture(scope="module")
def spec(dev) -> DesignSpec:
    return build_design(
        dev,
        linear=["vote", "TVnews"],
        splines={"age": 4, "logpopul": 3},
        categorical={"educ": 3, "party": "independent"},
        interactions=[("age", "party"), ("vote", "educ")],
    )


# --------------------------------------------------------------------------
# Knots
# --------------------------------------------------------------------------

# Harrell FE Jr., Regression Modeling Strategies, 2nd ed., Springer 2015,
# Table 2.3 (recalled from memory; the printed table could not be checked).
PUBLISHED_QUANTILES = {
    3: (0.10, 0.5, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.5, 0.725, 0.95),
    6: (0.05, 0.23, 0.41, 0.59, 0.77, 0.95),
    7: (0.025, 0.1833, 0.3417, 0.5, 0.6583, 0.8167, 0.975),
}


def test_knot_quantile_table_is_the_published_one():
    # Harrell 2015, Table 2.3 (recalled from memory).
    assert dict(KNOT_QUANTILES) == PUBLISHED_QUANTILES


@pytest.mark.parametrize("n_knots", [3, 4, 5, 6, 7])
def test_knots_are_the_published_quantiles_on_a_uniform_grid(n_knots):
    # On 0, 0.001, ..., 1 (n = 1001 >= 100, so no small-sample rule) the
    # sample quantile at p is p itself, so the knots are Table 2.3 (Harrell
    # 2015; recalled from memory).  Tolerance 1e-12: interpolation round-off.
    x = np.linspace(0.0, 1.0, 1001)
    np.testing.assert_allclose(harrell_knots(x, n_knots), PUBLISHED_QUANTILES[n_knots], rtol=0, atol=1e-12)


@pytest.mark.parametrize("n_knots", [3, 5, 7])
def test_knots_use_the_type7_sample_quantile(n_knots):
    # Reference: scipy 1.17 scipy.stats.mstats.mquantiles with alphap=betap=1,
    # which is Hyndman & Fan (Am Stat 1996) definition 7.  Skewed data with
    # n = 500, so the small-sample rule does not apply.  Tolerance 1e-12:
    # two implementations of the same interpolation.
    x = np.random.default_rng(11).lognormal(size=500)
    expected = scipy.stats.mstats.mquantiles(x, prob=PUBLISHED_QUANTILES[n_knots], alphap=1, betap=1)
    np.testing.assert_allclose(harrell_knots(x, n_knots), expected, rtol=1e-12)


def test_small_samples_put_the_outer_knots_at_the_fifth_values():
    # Harrell 2015, section 2.4.6: for n < 100 the outer knots are the 5th
    # smallest and 5th largest values (recalled from memory); inner knots stay
    # at their quantiles.  Exact equality: order statistics are data values.
    x = np.random.default_rng(3).normal(size=60)
    knots = harrell_knots(x, 5)
    ordered = np.sort(x)
    assert knots[0] == ordered[4] and knots[-1] == ordered[-5]
    np.testing.assert_allclose(knots[1:-1], np.quantile(x, [0.275, 0.5, 0.725]), rtol=1e-14)
    # At n = 100 the outer quantiles are used again.
    x100 = np.random.default_rng(3).normal(size=100)
    np.testing.assert_allclose(harrell_knots(x100, 5)[[0, -1]], np.quantile(x100, [0.05, 0.95]), rtol=1e-14)


def test_too_few_distinct_values_for_the_knots():
    x = np.repeat([0.0, 1.0, 2.0], 40)  # 3 distinct values cannot give 5 knots
    with pytest.raises(DesignError, match=r"n_distinct_values': 3") as info:
        harrell_knots(x, 5)
    assert "fewer knots" in str(info.value)
    with pytest.raises(DesignError, match="at least 5 values"):
        harrell_knots([1.0, 2.0, 3.0, 4.0], 3)


@pytest.mark.parametrize("bad", [2, 8, 3.0, True, "4", None])
def test_number_of_knots_outside_3_to_7_is_refused(bad):
    with pytest.raises(DesignError, match="n_knots: expected an integer number of knots from 3 to 7"):
        harrell_knots(np.arange(200.0), bad)


def test_knots_refuse_missing_values():
    with pytest.raises(DesignError, match="finite values"):
        harrell_knots([1.0, np.nan] * 60, 3)


# --------------------------------------------------------------------------
# Spline basis
# --------------------------------------------------------------------------


def _projection_residual(target: np.ndarray, basis: np.ndarray) -> np.ndarray:
    """Relative least-squares residual of each target column on ``basis``."""
    coef, *_ = np.linalg.lstsq(basis, target, rcond=None)
    return np.linalg.norm(target - basis @ coef, axis=0) / np.linalg.norm(target, axis=0)


def _patsy_natural_spline(x: np.ndarray, knots: np.ndarray) -> np.ndarray:
    # patsy 1.0.3 natural cubic regression spline, all knots given, no
    # constraint: k columns spanning the natural cubic splines (with constant).
    return np.asarray(
        patsy.dmatrix("cr(x, knots=inner, lower_bound=lo, upper_bound=hi) - 1",
                      {"x": x, "inner": knots[1:-1], "lo": knots[0], "hi": knots[-1]})
    )


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
@pytest.mark.parametrize("n_knots", [3, 4, 5, 7])
def test_basis_spans_the_natural_cubic_spline_space(seed, n_knots):
    # Reference: patsy 1.0.3 cr() (installed with statsmodels 0.15).  The
    # restricted cubic spline basis plus an intercept and patsy's basis must
    # span the same k-dimensional space: each projects onto the other with
    # zero residual.  Round-off here is about cond * eps ~ 1e3 * 2e-16 (the
    # observed residuals are ~1e-14), so 1e-8 leaves a wide margin while a
    # basis that is not a natural spline leaves ~1e-2 (negative control below).
    rng = np.random.default_rng(seed)
    x = rng.normal(60.0, 12.0, size=250)
    knots = harrell_knots(x, n_knots)
    # Include points beyond the outer knots, where both must be linear.
    x = np.concatenate([x, [knots[0] - 30.0, knots[0] - 1.0, knots[-1] + 1.0, knots[-1] + 30.0]])
    ours = np.column_stack([np.ones(x.size), rcs_basis(x, knots)])
    reference = _patsy_natural_spline(x, knots)
    assert np.linalg.matrix_rank(ours) == n_knots
    assert _projection_residual(ours, reference).max() < 1e-8
    assert _projection_residual(reference, ours).max() < 1e-8


def test_span_check_detects_a_basis_that_is_not_restricted():
    # Negative control for the test above: an unrestricted truncated cubic
    # (x - t_2)_+^3 is not linear beyond the outer knot, so it is not in
    # patsy 1.0.3's natural spline space.
    x = np.random.default_rng(5).normal(60.0, 12.0, size=250)
    knots = harrell_knots(x, 4)
    x = np.concatenate([x, [knots[-1] + 30.0]])
    wrong = np.maximum(x - knots[1], 0.0)[:, None] ** 3
    assert _projection_residual(wrong, _patsy_natural_spline(x, knots)).max() > 1e-3


def test_basis_hand_worked_values():
    # Hand-worked from the truncated-power formula (Harrell 2015, section
    # 2.4.5) with knots 0, 1, 2, so (t_k - t_1)^2 = 4:
    #   x = 1.5: (1.5^3 - 0.5^3 * 2) / 4            = 0.78125
    #   x = 3  : (3^3 - 2^3 * 2 + 1^3 * 1) / 4      = 3
    #   x = 4  : (4^3 - 3^3 * 2 + 2^3 * 1) / 4      = 4.5
    # Exact in binary floating point, so compared exactly.
    basis = rcs_basis([-1.0, 0.0, 1.5, 3.0, 4.0], [0.0, 1.0, 2.0])
    np.testing.assert_array_equal(basis[:, 0], [-1.0, 0.0, 1.5, 3.0, 4.0])
    np.testing.assert_array_equal(basis[:, 1], [0.0, 0.0, 0.78125, 3.0, 4.5])


def test_basis_normalisation_keeps_the_predictor_scale():
    # Normalising by (t_k - t_1)^2 makes the basis equivariant: rescaling x
    # and the knots by c rescales every column by c (common practice reason
    # for the normalisation).  Tolerance 1e-12 relative: round-off.
    x = np.random.default_rng(8).uniform(20, 90, size=100)
    knots = harrell_knots(x, 5)
    np.testing.assert_allclose(rcs_basis(x * 365.25, knots * 365.25), rcs_basis(x, knots) * 365.25, rtol=1e-12,
                               atol=1e-9)


@pytest.mark.parametrize("n_knots", [3, 5, 7])
def test_basis_is_linear_beyond_the_outer_knots(n_knots):
    knots = harrell_knots(np.random.default_rng(n_knots).normal(50, 10, 400), n_knots)
    span = knots[-1] - knots[0]
    below = np.linspace(knots[0] - span, knots[0], 41)
    above = np.linspace(knots[-1], knots[-1] + span, 41)
    # Nonlinear terms are exactly zero at and below the first knot.
    assert np.all(rcs_basis(below, knots)[:, 1:] == 0.0)
    # Second differences on an even grid beyond the last knot vanish up to the
    # cancellation of cubic terms of size ~ (2 span)^3 / span^2 times eps.
    second = np.diff(rcs_basis(above, knots)[:, 1:], n=2, axis=0)
    assert np.abs(second).max() < 1e-9 * span
    # And the nonlinear terms really bend between the knots.
    inside = np.linspace(knots[0], knots[-1], 41)
    assert np.abs(np.diff(rcs_basis(inside, knots)[:, 1:], n=2, axis=0)).max() > 1e-4 * span


def _piece_polynomials(basis_column, lo, hi):
    """Cubic fitted exactly to one polynomial piece on (lo, hi)."""
    grid = np.linspace(lo, hi, 9)[1:-1]
    return np.polynomial.Polynomial.fit(grid, basis_column(grid), deg=3)


@pytest.mark.parametrize("n_knots", [4, 6])
def test_basis_is_twice_continuously_differentiable_at_the_knots(n_knots):
    # Numerical check: fit the exact cubic on each side of each interior
    # knot and compare value, first and second derivative at the knot.
    # Tolerances: the cubics are recovered to ~1e-10 from exact data, so
    # 1e-7 (relative to the scale of the derivative) separates round-off
    # from a genuine jump; the third derivative must jump at interior knots
    # (it does not for a smoother function), which shows the check can fail.
    knots = harrell_knots(np.random.default_rng(21).normal(0, 1, 500), n_knots)
    for col in range(1, n_knots - 1):
        def column(z, col=col):
            return rcs_basis(z, knots)[:, col]
        for j in range(1, n_knots - 1):
            left = _piece_polynomials(column, knots[j - 1], knots[j])
            right = _piece_polynomials(column, knots[j], knots[j + 1])
            for order in (0, 1, 2):
                lv, rv = left.deriv(order)(knots[j]), right.deriv(order)(knots[j])
                assert abs(lv - rv) <= 1e-7 * max(1.0, abs(lv)), (col, j, order)
        # Every nonlinear term has a third-derivative jump at t_{k-1}.
        jumps = [abs(_piece_polynomials(column, knots[j - 1], knots[j]).deriv(3)(knots[j])
                     - _piece_polynomials(column, knots[j], knots[j + 1]).deriv(3)(knots[j]))
                 for j in range(1, n_knots - 1)]
        assert max(jumps) > 1e-3


def test_continuity_check_detects_a_second_derivative_jump():
    # Negative control for the check above: (x)_+^2 has a jump in its second
    # derivative at 0.
    def kinked(z):
        return np.maximum(z, 0.0) ** 2
    left, right = _piece_polynomials(kinked, -1.0, 0.0), _piece_polynomials(kinked, 0.0, 1.0)
    assert abs(left.deriv(2)(0.0) - right.deriv(2)(0.0)) > 1.0


def test_basis_refuses_bad_knots_and_values():
    with pytest.raises(DesignError, match="strictly increasing"):
        rcs_basis([1.0, 2.0], [0.0, 2.0, 1.0])
    with pytest.raises(DesignError, match="at least 3"):
        rcs_basis([1.0, 2.0], [0.0, 1.0])
    with pytest.raises(DesignError, match="finite"):
        rcs_basis([1.0, np.inf], [0.0, 1.0, 2.0])


# --------------------------------------------------------------------------
# Design specification
# --------------------------------------------------------------------------


def test_columns_and_term_columns(spec, dev):
    assert [t.name for t in spec.terms] == ["vote", "TVnews", "age", "logpopul", "educ", "party", "age:party",
                                            "vote:educ"]
    assert spec.term_columns["age"] == ("age", "age_nonlin1", "age_nonlin2")
    assert spec.term_columns["logpopul"] == ("logpopul", "logpopul_nonlin1")
    # educ codes 1..7 with reference 3; party labels sorted, reference omitted.
    assert spec.term_columns["educ"] == tuple(f"educ={v}" for v in (1, 2, 4, 5, 6, 7))
    party_levels = sorted(PID_LABELS.values())
    assert spec.term_columns["party"] == tuple(f"party={v}" for v in party_levels if v != "independent")
    assert spec.term_columns["age:party"][0] == "age:party=lean dem"
    assert len(spec.term_columns["age:party"]) == 3 * 6
    assert spec.columns == tuple(c for t in spec.terms for c in spec.term_columns[t.name])
    assert spec.sources == ("vote", "TVnews", "age", "logpopul", "educ", "party")
    X = spec.transform(dev)
    assert list(X.columns) == list(spec.columns)
    assert (X.dtypes == np.float64).all()
    assert X.index.equals(dev.index)


def test_spline_columns_equal_the_basis(spec, dev):
    # The spline term's knots are learned once on the development data.
    X = spec.transform(dev)
    knots = harrell_knots(dev["age"].to_numpy(), 4)
    np.testing.assert_array_equal(np.asarray(spec.terms[2].knots), knots)
    np.testing.assert_array_equal(X[list(spec.term_columns["age"])].to_numpy(), rcs_basis(dev["age"], knots))


def test_categorical_columns_match_pandas_dummies(spec, val):
    # Reference: pandas 3.1 get_dummies, reference column dropped.
    X = spec.transform(val)
    dummies = pd.get_dummies(val["party"], prefix="party", prefix_sep="=", dtype=float)
    dummies = dummies.drop(columns="party=independent")
    pd.testing.assert_frame_equal(X[list(dummies.columns)], dummies, check_names=False)
    educ = pd.get_dummies(val["educ"].astype(int), prefix="educ", prefix_sep="=", dtype=float)
    educ = educ.reindex(columns=[f"educ={v}" for v in (1, 2, 4, 5, 6, 7)], fill_value=0.0)
    pd.testing.assert_frame_equal(X[list(educ.columns)], educ, check_names=False)


def test_interaction_columns_are_products(spec, val):
    X = spec.transform(val)
    for a in spec.term_columns["age"]:
        for b in spec.term_columns["party"]:
            np.testing.assert_array_equal(X[f"{a}:{b}"].to_numpy(), X[a].to_numpy() * X[b].to_numpy())
    for b in spec.term_columns["educ"]:
        np.testing.assert_array_equal(X[f"vote:{b}"].to_numpy(), val["vote"].to_numpy() * X[b].to_numpy())


def test_binary_predictor_is_a_linear_term(spec, dev):
    X = spec.transform(dev)
    np.testing.assert_array_equal(X["vote"].to_numpy(), dev["vote"].to_numpy())
    flags = dev.assign(vote=dev["vote"].astype(bool))
    pd.testing.assert_frame_equal(spec.transform(flags), X)


def test_text_categorical_and_codes_encode_alike(dev):
    as_text = build_design(dev, categorical={"party": "strong dem"})
    as_categorical = build_design(
        dev.assign(party=pd.Categorical(dev["party"], categories=sorted(PID_LABELS.values()))),
        categorical={"party": "strong dem"},
    )
    pd.testing.assert_frame_equal(as_text.transform(dev), as_categorical.transform(dev))
    # Numeric codes, float in the data, become integer levels.
    codes = build_design(dev, categorical={"PID": None})
    assert codes.terms[0].levels == (0, 1, 2, 3, 4, 5, 6) and codes.terms[0].reference == 0
    assert codes.columns == tuple(f"PID={v}" for v in range(1, 7))
    assert np.array_equal(codes.transform(dev.assign(PID=dev["PID"].astype(int))).to_numpy(),
                          codes.transform(dev).to_numpy())


def test_categorical_levels_follow_category_order_and_declared_levels(dev):
    order = ["strong rep", "weak rep", "lean rep", "independent", "lean dem", "weak dem", "strong dem"]
    ordered = build_design(dev.assign(party=pd.Categorical(dev["party"], categories=order)),
                           categorical={"party": None})
    assert ordered.terms[0].levels == tuple(order) and ordered.terms[0].reference == "strong rep"
    declared = build_design(dev, categorical={"party": None}, levels={"party": order + ["refused"], "other": [1, 2]})
    assert declared.terms[0].levels == tuple(order + ["refused"])
    # A declared level absent from the data gives a column of zeros.
    assert (declared.transform(dev)["party=refused"] == 0.0).all()


def test_transform_on_new_frame_same_columns_same_order(spec, val):
    shuffled = val[list(reversed(val.columns))].assign(extra=1.0).iloc[::-1]
    X = spec.transform(shuffled)
    assert list(X.columns) == list(spec.columns)
    pd.testing.assert_frame_equal(X.sort_index(), spec.transform(val))


def test_json_round_trip_is_bit_identical(spec, anes):
    text = spec.to_json()
    json.loads(text)  # plain JSON
    again = DesignSpec.from_json(text)
    assert again == spec
    before, after = spec.transform(anes).to_numpy(), again.transform(anes).to_numpy()
    assert before.tobytes() == after.tobytes()
    assert DesignSpec.from_dict(json.loads(json.dumps(spec.to_dict()))) == spec
    assert [t.knots for t in again.terms] == [t.knots for t in spec.terms]


def test_damaged_design_files_are_refused(spec):
    data = spec.to_dict()
    data["terms"][2]["knots"][1] += 1.0  # knots no longer agree with knots_hex
    with pytest.raises(ModelFileError, match="knots"):
        DesignSpec.from_dict(data)
    with pytest.raises(ModelFileError, match="schema"):
        DesignSpec.from_dict({"schema": "other", "terms": []})
    with pytest.raises(ModelFileError, match="JSON"):
        DesignSpec.from_json("{not json")
    data = spec.to_dict()
    data["terms"][4]["reference"] = 99
    with pytest.raises(ModelFileError, match="reference"):
        DesignSpec.from_dict(data)


def test_to_frame_one_row_per_term(spec):
    table = spec.to_frame()
    assert list(table["name"]) == [t.name for t in spec.terms]
    assert list(table.columns) == ["name", "kind", "sources", "columns", "knots", "levels", "reference", "parts"]
    row = table.set_index("name").loc["educ"]
    assert row["kind"] == "categorical" and row["reference"] == 3 and row["levels"] == (1, 2, 3, 4, 5, 6, 7)
    assert table.set_index("name").loc["age:party", "parts"] == ("age", "party")
    assert len(table.set_index("name").loc["age", "knots"]) == 4


def test_subset_keeps_the_design_order(spec, dev):
    small = spec.subset(["party", "age", "age:party"])
    assert [t.name for t in small.terms] == ["age", "party", "age:party"]
    pd.testing.assert_frame_equal(small.transform(dev), spec.transform(dev)[list(small.columns)])
    # An interaction carries its own encoding.
    alone = spec.subset("vote:educ")
    pd.testing.assert_frame_equal(alone.transform(dev), spec.transform(dev)[list(alone.columns)])
    with pytest.raises(DesignError, match="'sex'"):
        spec.subset(["age", "sex"])


def test_empty_design_gives_no_columns(dev):
    empty = build_design(dev)
    X = empty.transform(dev)
    assert X.shape == (len(dev), 0) and X.index.equals(dev.index)


# --------------------------------------------------------------------------
# Refusals
# --------------------------------------------------------------------------


def test_refuses_unseen_category_naming_column_level_and_count(spec, val):
    bad = val.assign(party=val["party"].where(np.arange(len(val)) >= 7, "refused"))
    with pytest.raises(DesignError, match=r"column 'party'.*'refused': 7") as info:
        spec.transform(bad)
    assert "'n_rows': 7" in str(info.value)
    codes = val.assign(educ=np.where(np.arange(len(val)) < 2, 9.0, val["educ"]))
    with pytest.raises(DesignError, match=r"column 'educ'.*\{9: 2\}"):
        spec.transform(codes)
    # Text "3" is not the code 3: types are not silently converted.
    with pytest.raises(DesignError, match="column 'educ'"):
        spec.transform(val.assign(educ=val["educ"].astype(int).astype(str)))


def test_refuses_missing_columns(spec, val):
    with pytest.raises(DesignError, match=r"missing_columns': \['age', 'party'\]"):
        spec.transform(val.drop(columns=["party", "age"]))


def test_refuses_missing_values_naming_rows_and_count(spec, val):
    bad = val.copy()
    bad.loc[[601, 650, 700], "age"] = np.nan
    with pytest.raises(DesignError, match=r"column 'age'.*'n_missing': 3.*'rows': \[601, 650, 700\]"):
        spec.transform(bad)
    bad = val.assign(party=val["party"].where(val.index != 640))
    with pytest.raises(DesignError, match=r"column 'party'.*'n_missing': 1.*\[640\]"):
        spec.transform(bad)


def test_refuses_non_numeric_text_in_numeric_columns(spec, val):
    text = val["TVnews"].astype(str)
    # Text that reads as numbers is accepted (a column read as text).
    pd.testing.assert_frame_equal(spec.transform(val.assign(TVnews=text)), spec.transform(val))
    bad = val.assign(TVnews=text.where(val.index % 100 != 0, "n/a"))
    with pytest.raises(DesignError, match=r"column 'TVnews'.*'n_not_numeric': 4.*'n/a'"):
        spec.transform(bad)
    with pytest.raises(DesignError, match=r"column 'age'.*finite"):
        spec.transform(val.assign(age=val["age"].where(val.index != 700, np.inf)))


def test_transform_refuses_a_non_frame(spec):
    with pytest.raises(DesignError, match="DataFrame"):
        spec.transform(np.zeros((3, 3)))


@pytest.mark.parametrize(
    ("kwargs", "pattern"),
    [
        ({"linear": ["age"], "splines": {"age": 4}}, r"build_design: splines.*already in linear"),
        ({"linear": ["age", "age"]}, r"each name once"),
        ({"linear": ["height"]}, r"unknown_columns': \['height'\]"),
        ({"splines": {"age": 8}}, r"splines\['age'\]: expected an integer number of knots from 3 to 7; received 8"),
        ({"splines": {"age": 2}}, r"from 3 to 7; received 2"),
        ({"splines": {"vote": 3}}, r"splines\['vote'\].*distinct"),
        ({"categorical": {"party": "martian"}}, r"categorical\['party'\]: expected one of the levels.*'martian'"),
        ({"categorical": {"educ": "3"}}, r"categorical\['educ'\].*received '3'"),
        ({"categorical": {"party": None}, "levels": {"party": ["strong dem", "weak dem"]}}, r"column 'party'.*unseen"),
        ({"categorical": {"party": None}, "levels": {"party": ["a", "a"]}}, r"distinct levels"),
        ({"linear": ["age"], "interactions": [("age", "sex")]}, r"interactions: expected term names.*'sex'"),
        ({"linear": ["age"], "interactions": [("age", "age")]}, r"two different terms"),
        ({"linear": ["age", "vote"], "interactions": [("age", "vote"), ("vote", "age")]}, r"each pair once"),
        ({"linear": ["age", "vote"], "interactions": ("age", "vote")}, r"pairs of term names"),
    ],
)
def test_build_design_refuses_bad_arguments(dev, kwargs, pattern):
    with pytest.raises(DesignError, match=pattern):
        build_design(dev, **kwargs)


def test_build_design_refuses_incomplete_development_data(dev):
    bad = dev.assign(age=dev["age"].where(dev.index != 10))
    with pytest.raises(DesignError, match=r"column 'age'.*'n_missing': 1"):
        build_design(bad, splines={"age": 3})


def test_generated_name_clash_is_refused(dev):
    clash = dev.assign(age_nonlin1=dev["age"])
    with pytest.raises(DesignError, match="distinct output column names"):
        build_design(clash, linear=["age_nonlin1"], splines={"age": 3})


def test_errors_are_value_errors():
    assert issubclass(DesignError, RiskvetError) and issubclass(DesignError, ValueError)


def test_term_refuses_inconsistent_contents():
    with pytest.raises(DesignError, match="columns"):
        Term(name="age", kind="spline", sources=("age",), columns=("age",), knots=(1.0, 2.0, 3.0))
    with pytest.raises(DesignError, match="kind"):
        Term(name="age", kind="quadratic", sources=("age",), columns=("age",))


# --------------------------------------------------------------------------
# Property: encoding is row-wise
# --------------------------------------------------------------------------

_PROPERTY_SPEC = build_design(
    pd.DataFrame({
        "x": np.linspace(-3.0, 3.0, 120),
        "g": np.tile(["a", "b", "c"], 40),
        "b": np.tile([0, 1], 60),
    }),
    linear=["b"],
    splines={"x": 5},
    categorical={"g": "b"},
    interactions=[("x", "g"), ("b", "x")],
)


@settings(max_examples=60, deadline=None)
@given(
    rows=st.lists(
        st.tuples(
            st.floats(min_value=-50.0, max_value=50.0, allow_nan=False),
            st.sampled_from(["a", "b", "c"]),
            st.sampled_from([0, 1]),
        ),
        min_size=1,
        max_size=30,
    ),
    data=st.data(),
)
def test_transform_of_a_row_subset_is_the_subset_of_transform(rows, data):
    frame = pd.DataFrame(rows, columns=["x", "g", "b"])
    picks = data.draw(st.lists(st.integers(0, len(frame) - 1), max_size=40))
    full = _PROPERTY_SPEC.transform(frame)
    part = _PROPERTY_SPEC.transform(frame.iloc[picks])
    assert part.index.equals(frame.index[picks])
    assert part.to_numpy().tobytes() == full.iloc[picks].to_numpy().tobytes()
