"""Tests of multiple imputation by chained equations, riskvet.imputation.chained.impute.

Invariants (observed cells untouched, dtypes, categories and index kept,
PMM imputes observed values only, per-imputation streams), a brute-force
check of the donor search, the multinomial logit against statsmodels'
MNLogit, simulations under MCAR and MAR against the full-data fit and the
complete-case fit, and a comparison with statsmodels' MICE on the same data.
Every tolerance is explained where it is used.  Data are small (n <= 1000,
m <= 10) so the module runs in a few seconds on two shared cores.
"""

from __future__ import annotations

import inspect
import json
import re

import numpy as np
import pandas as pd
import pytest
from riskvet.errors import DataError, RiskvetWarning
from riskvet.imputation.chained import Imputations, _fit_multinomial, _match, impute
from scipy.special import expit

sm = pytest.importorskip("statsmodels.api")


# ---- data ---------------------------------------------------------------------------------------------


def mixed_frame(n: int = 240, seed: int = 0) -> pd.DataFrame:
    """Every supported kind of column, about 20% missing in six of them, a non-default index."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    frame = pd.DataFrame(
        {
            "x": x,
            "age": pd.array(np.round(50 + 10 * x + rng.normal(0, 5, n)).astype(int), dtype="Int64"),
            "grade": pd.Categorical(rng.choice(["low", "mid", "high"], n), categories=["low", "mid", "high", "unused"], ordered=True),
            "region": pd.array(rng.choice(["north", "south", "east", "west"], n), dtype="str"),
            "smoker": np.array(rng.choice(["yes", "no"], n), dtype=object),
            "y": (rng.random(n) < expit(x)).astype(int),
            "id": [f"p{i}" for i in range(n)],
        },
        index=pd.Index(np.arange(n) * 3 + 7, name="pid"),
    )
    for name in ("x", "age", "grade", "region", "smoker"):
        frame.loc[rng.random(n) < 0.2, name] = np.nan
    frame.loc[frame.index[:5], "id"] = np.nan  # a passenger column with holes, left as it is
    return frame


def simulate(seed: int, mechanism: str, n: int = 1000) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Three correlated predictors, a binary category, a binary outcome; x1 and c made incomplete.

    MCAR: each of x1 and c missing with probability 0.25, independently of
    everything.  MAR: x1 missing with probability 0.7 when y = 1 and x3 > 0
    (else 0.1), c missing with probability 0.6 when y = 0 and x2 < 0 (else
    0.1): about 24% and 30% missing.  Missingness depends only on the
    outcome and on complete predictors, so it is MAR, but it depends on the
    outcome *jointly* with x2 and x3, so the complete cases are a selected
    sample in which the odds ratios of x2 and x3 are distorted (selection on
    the outcome alone would only shift the intercept).
    """
    rng = np.random.default_rng(seed)
    cov = np.array([[1.0, 0.5, 0.3], [0.5, 1.0, 0.4], [0.3, 0.4, 1.0]])
    x = rng.multivariate_normal(np.zeros(3), cov, size=n)
    c = (rng.random(n) < expit(-0.3 + 0.8 * x[:, 0])).astype(int)
    y = (rng.random(n) < expit(-0.5 + 0.8 * x[:, 0] + 0.5 * x[:, 1] - 0.4 * x[:, 2] + 0.7 * c)).astype(int)
    full = pd.DataFrame(
        {"x1": x[:, 0], "x2": x[:, 1], "x3": x[:, 2], "c": pd.Categorical(np.where(c == 1, "yes", "no"), categories=["no", "yes"]), "y": y}
    )
    if mechanism == "mcar":
        miss_x1, miss_c = rng.random(n) < 0.25, rng.random(n) < 0.25
    else:
        miss_x1 = rng.random(n) < np.where((y == 1) & (x[:, 2] > 0), 0.7, 0.1)
        miss_c = rng.random(n) < np.where((y == 0) & (x[:, 1] < 0), 0.6, 0.1)
    incomplete = full.copy()
    incomplete.loc[miss_x1, "x1"] = np.nan
    incomplete.loc[miss_c, "c"] = np.nan
    return full, incomplete


TERMS = ("const", "x1", "x2", "x3", "c")


def logit_fit(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """statsmodels Logit of y on x1, x2, x3, c: (coefficients, squared standard errors), intercept first."""
    X = sm.add_constant(pd.DataFrame({"x1": frame["x1"], "x2": frame["x2"], "x3": frame["x3"], "c": (frame["c"] == "yes").astype(float)}))
    result = sm.Logit(frame["y"].astype(float), X).fit(disp=0)
    return result.params.to_numpy(), result.bse.to_numpy() ** 2


def pooled(imputations: Imputations) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rubin's rules by hand: (Q-bar, T, B) over the completed data sets."""
    fits = [logit_fit(data) for data in imputations]
    q = np.array([f[0] for f in fits])
    u = np.array([f[1] for f in fits])
    m = q.shape[0]
    between = q.var(axis=0, ddof=1)
    return q.mean(axis=0), u.mean(axis=0) + (1 + 1 / m) * between, between


def bias_study(mechanism: str, replicates: int = 200, first_seed: int = 1000) -> pd.DataFrame:
    """The pilot simulation behind the tolerances of the MCAR and MAR tests (not run by pytest: slow).

    For each replicate r: data from ``simulate(first_seed + r, mechanism)``,
    m = 10 imputations with 10 iterations (seed r), and the deviations of
    the pooled MI coefficients and of the complete-case coefficients from
    the full-data fit.  Run with
    ``PYTHONPATH=helpers python -c "import sys; sys.path.insert(0, 'tests'); import test_chained as t; print(t.bias_study('mar').describe())"``.
    """
    rows = []
    for r in range(replicates):
        full, incomplete = simulate(first_seed + r, mechanism)
        q_bar, _, _ = pooled(impute(incomplete, m=10, seed=r, iterations=10, outcome="y"))
        q_full, _ = logit_fit(full)
        q_cc, _ = logit_fit(incomplete.dropna())
        rows.append({**{f"mi_{k}": v for k, v in zip(TERMS, q_bar - q_full)}, **{f"cc_{k}": v for k, v in zip(TERMS, q_cc - q_full)}})
    return pd.DataFrame(rows)


# ---- invariants -------------------------------------------------------------------------------------


def test_observed_cells_unchanged_only_missing_filled_and_types_kept():
    frame = mixed_frame()
    original = frame.copy()
    imp = impute(frame, m=2, seed=3, iterations=3, outcome="y", methods={"id": "none"})
    assert set(imp.columns_imputed) == {"x", "age", "grade", "region", "smoker"}
    pd.testing.assert_frame_equal(frame, original)  # the input is not modified
    for data in imp:
        assert list(data.columns) == list(frame.columns)
        pd.testing.assert_index_equal(data.index, frame.index)
        pd.testing.assert_series_equal(data.dtypes, frame.dtypes)
        assert list(data["grade"].cat.categories) == ["low", "mid", "high", "unused"] and data["grade"].cat.ordered
        for name in frame.columns:
            observed = frame[name].notna()
            pd.testing.assert_series_equal(data.loc[observed, name], frame.loc[observed, name])
        assert not data[list(imp.columns_imputed)].isna().any().any()
        # the 'none' column is carried unchanged, holes included
        pd.testing.assert_series_equal(data["id"], frame["id"])
    assert imp.methods == {"x": "pmm", "age": "pmm", "grade": "cumulative", "region": "multinomial", "smoker": "logistic", "id": "none"}
    assert any("'id'" in note for note in imp.notes)


def test_pmm_imputes_only_observed_values_of_the_column():
    rng = np.random.default_rng(4)
    n = 300
    z = rng.normal(size=n)
    frame = pd.DataFrame({"z": z, "score": np.round(2 * z + rng.normal(size=n)) / 2, "count": pd.array(rng.poisson(3, n), dtype="Int64")})
    frame.loc[rng.random(n) < 0.3, "score"] = np.nan
    frame.loc[rng.random(n) < 0.3, "count"] = pd.NA
    imp = impute(frame, m=3, seed=1, iterations=4)
    for name in ("score", "count"):
        observed = set(frame[name].dropna().astype(float))
        for j in range(imp.m):
            assert set(imp.values[j][name].tolist()) <= observed
            filled = imp.completed(j)[name]
            assert set(filled.astype(float)) <= observed


def test_donor_search_matches_brute_force():
    # The windowed search must return one of the k nearest observed predictions, as a full sort would.
    rng = np.random.default_rng(8)
    for n_obs, k in ((50, 5), (7, 5), (3, 5), (200, 1), (40, 10)):
        pred_obs = np.round(rng.normal(size=n_obs), 1)  # rounding makes ties
        pred_mis = rng.normal(scale=1.5, size=60)
        chosen = _match(pred_obs, pred_mis, k, np.random.default_rng(1))
        kk = min(k, n_obs)
        for i, donor in enumerate(chosen):
            distance = np.abs(pred_obs - pred_mis[i])
            assert distance[donor] <= np.sort(distance)[kk - 1] + 1e-15


def test_same_seed_same_imputations_and_stream_per_imputation():
    frame = mixed_frame(n=150, seed=2)
    a = impute(frame, m=3, seed=11, iterations=2, outcome="y", methods={"id": "none"})
    b = impute(frame, m=3, seed=11, iterations=2, outcome="y", methods={"id": "none"})
    c = impute(frame, m=5, seed=11, iterations=2, outcome="y", methods={"id": "none"})
    d = impute(frame, m=3, seed=12, iterations=2, outcome="y", methods={"id": "none"})
    for j in range(3):
        pd.testing.assert_frame_equal(a.completed(j), b.completed(j))
        pd.testing.assert_frame_equal(a.completed(j), c.completed(j))  # imputation j does not depend on m
    pd.testing.assert_frame_equal(a.chain, c.chain[c.chain["imputation"] < 3].reset_index(drop=True))
    assert not a.completed(0).equals(d.completed(0))
    assert not a.completed(0).equals(a.completed(1))


# ---- categories -------------------------------------------------------------------------------------


def test_ordered_and_unordered_categories_get_valid_levels():
    rng = np.random.default_rng(5)
    n = 400
    x = rng.normal(size=n)
    # each ordered column is x plus its own logistic noise, cut at levels: associated, never determined
    stage = np.digitize(x + rng.logistic(size=n) * 0.5, [-0.7, 0.0, 0.7])  # 0..3
    severity = np.digitize(x + rng.logistic(size=n), [-0.5, 0.5])  # 0..2
    dose = np.digitize(x + rng.logistic(size=n), [-0.3, 0.8])  # 0..2
    frame = pd.DataFrame(
        {
            "x": x,
            "stage": pd.Categorical(np.array(["I", "II", "III", "IV"])[stage], categories=["I", "II", "III", "IV"], ordered=True),
            "severity": np.array(["mild", "moderate", "severe"], dtype=object)[severity],
            "colour": pd.Categorical(rng.choice(["red", "green", "blue"], n)),
            "dose": np.array([10.0, 20.0, 40.0])[dose],
        }
    )
    for name in ("stage", "severity", "colour", "dose"):
        frame.loc[rng.random(n) < 0.25, name] = np.nan
    imp = impute(frame, m=2, seed=2, iterations=3, ordered={"severity": ["mild", "moderate", "severe"], "dose": [10.0, 20.0, 40.0]})
    assert imp.methods == {"stage": "cumulative", "severity": "cumulative", "colour": "multinomial", "dose": "cumulative"}
    assert imp.levels["severity"] == ("mild", "moderate", "severe")
    assert not imp.fallbacks
    for data in imp:
        assert set(data["stage"]) <= {"I", "II", "III", "IV"}
        assert set(data["severity"]) <= {"mild", "moderate", "severe"}
        assert set(data["colour"]) <= {"red", "green", "blue"} and not data["colour"].cat.ordered
        assert set(data["dose"]) <= {10.0, 20.0, 40.0} and data["dose"].dtype == np.float64
        # the ordered models carry the association with x: imputed higher stages have higher x
        rows = frame["stage"].isna()
        codes = data.loc[rows, "stage"].cat.codes
        assert np.corrcoef(codes, data.loc[rows, "x"])[0, 1] > 0.3


def test_multinomial_logit_matches_statsmodels_mnlogit():
    # Reference: statsmodels 0.14/0.15 MNLogit (Newton, first level the reference) on the same standardised columns.
    # Tolerance 1e-3: the ridge of 1e-6 per row moves the estimates by about 1e-6 times their inverse information,
    # and L-BFGS stops at a gradient of 1e-7; 1e-3 leaves room for both, far below the estimates' standard errors (~0.1).
    rng = np.random.default_rng(6)
    n = 500
    X = rng.normal(size=(n, 2)) * [1.0, 3.0] + [0.0, 5.0]
    eta = np.column_stack([np.zeros(n), 0.5 + X[:, 0], -0.5 - 0.3 * (X[:, 1] - 5.0)])
    prob = np.exp(eta) / np.exp(eta).sum(axis=1, keepdims=True)
    y = (rng.random(n)[:, None] > np.cumsum(prob, axis=1)).sum(axis=1)
    _centre, _scale, B = _fit_multinomial(X, y, 3, np.ones(n))
    Z = sm.add_constant((X - X.mean(axis=0)) / X.std(axis=0))
    reference = sm.MNLogit(y, Z).fit(disp=0, tol=1e-12).params
    np.testing.assert_allclose(B[:, 1:], np.asarray(reference), atol=1e-3)
    # frequency weights equal duplicated rows
    w = rng.integers(0, 3, n).astype(float)
    keep = np.repeat(np.arange(n), w.astype(int))
    _, _, Bw = _fit_multinomial(X[w > 0], y[w > 0], 3, w[w > 0])
    _, _, Bd = _fit_multinomial(X[keep], y[keep], 3, np.ones(keep.size))
    np.testing.assert_allclose(Bw, Bd, atol=1e-4)


def test_fallback_recorded_when_a_category_model_cannot_be_fitted():
    # c is "a" exactly when z > 0 and k is a step function of z: both are separated by z, so no finite
    # logistic or multinomial fit exists and every draw must fall back, loudly.
    rng = np.random.default_rng(9)
    n = 300
    z = rng.normal(size=n)
    frame = pd.DataFrame({"z": z, "c": np.where(z > 0, "a", "b").astype(object), "k": pd.Categorical(np.select([z < -0.5, z < 0.5], ["p", "q"], "r"))})
    frame.loc[rng.random(n) < 0.2, "c"] = np.nan
    frame.loc[rng.random(n) < 0.2, "k"] = np.nan
    with pytest.warns(RiskvetWarning, match="fell back"):
        imp = impute(frame, m=2, seed=1, iterations=2)
    assert len(imp.fallbacks) == 2 * 2 * 2
    assert sum("'c'" in f and "separation" in f for f in imp.fallbacks) == 4
    assert sum("'k'" in f and "multinomial" in f for f in imp.fallbacks) == 4
    table = imp.to_frame().set_index("column")
    assert table.loc["c", "n_fallbacks"] == 4 and table.loc["k", "n_fallbacks"] == 4
    for data in imp:
        assert set(data["c"]) <= {"a", "b"} and set(data["k"]) <= {"p", "q", "r"}
    assert json.loads(json.dumps(imp.to_dict(), allow_nan=False))["fallbacks"] == list(imp.fallbacks)


# ---- diagnostics ------------------------------------------------------------------------------------


def test_diagnostics_tables_and_to_dict():
    frame = mixed_frame(n=200, seed=7)
    imp = impute(frame, m=2, seed=4, iterations=3, outcome="y", methods={"id": "none"})
    missing = imp.missing.set_index("column")
    assert missing.loc["x", "n_missing"] == frame["x"].isna().sum() and missing.loc["y", "n_missing"] == 0
    np.testing.assert_allclose(missing["share"], frame.isna().mean().to_numpy())
    assert imp.complete_share == pytest.approx(float(frame.notna().all(axis=1).mean()))
    assert len(imp.patterns) <= 10 and imp.patterns["n_rows"].is_monotonic_decreasing
    incomplete = [c for c in frame.columns if frame[c].isna().any()]
    full_counts = frame[incomplete].isna().value_counts()
    assert imp.patterns["n_rows"].iloc[0] == full_counts.iloc[0]
    assert len(imp.chain) == imp.m * imp.iterations * len(imp.columns_imputed)
    assert list(imp.chain.columns) == ["imputation", "iteration", "column", "mean", "sd"]
    record = json.loads(json.dumps(imp.to_dict(), allow_nan=False))
    assert record["m"] == 2 and record["columns_imputed"] == [str(c) for c in imp.columns_imputed]
    assert "values" not in record and "frame" not in record
    # only the imputed cells are stored, once per imputation
    for j in range(imp.m):
        assert {k: v.size for k, v in imp.values[j].items()} == {c: int(frame[c].isna().sum()) for c in imp.columns_imputed}


# ---- statistical behaviour -------------------------------------------------------------------------


# Standard deviation, over 200 replicate data sets, of (pooled MI coefficient - full-data coefficient) with
# m = 10 and 10 iterations: the larger of the MCAR and MAR values of bias_study(mechanism) (seeds 1000-1199),
# rounded up, for const, x1, x2, x3, c.  It is the spread of what the incomplete data can tell about the
# full-data estimate plus the Monte Carlo error of m = 10.  In those replicates the mean difference was at
# most 0.004 in absolute value for every coefficient under both mechanisms (Monte Carlo standard errors
# 0.001-0.007): no detectable bias.  The complete cases under MAR were off by -0.34 (x2) and -0.45 (x3) on
# average (SD 0.085 and 0.092), and by 0.003-0.009 under MCAR.
MI_MINUS_FULL_SD = np.array([0.047, 0.071, 0.026, 0.027, 0.099])
# Four of those standard deviations per coefficient: a false alarm probability of about 6e-5 per coefficient
# for proper imputations, yet less than a third of the complete-case bias of x2 and x3 under MAR.
TOLERANCE = 4.0 * MI_MINUS_FULL_SD


def test_mcar_pooled_coefficients_close_to_full_data_fit():
    full, incomplete = simulate(3, "mcar")
    imp = impute(incomplete, m=10, seed=1, iterations=10, outcome="y")
    assert not imp.fallbacks
    q_bar, _, _ = pooled(imp)
    q_full, _ = logit_fit(full)
    assert np.all(np.abs(q_bar - q_full) < TOLERANCE), (q_bar - q_full) / MI_MINUS_FULL_SD


def test_mar_on_outcome_complete_cases_biased_multiple_imputation_not():
    # The MAR setting of simulate(): missingness depends on y jointly with x3 (for x1) and with x2 (for c).
    full, incomplete = simulate(3, "mar")
    assert 0.2 < incomplete["x1"].isna().mean() < 0.3 and 0.25 < incomplete["c"].isna().mean() < 0.35
    q_full, _ = logit_fit(full)
    q_bar, _, _ = pooled(impute(incomplete, m=10, seed=1, iterations=10, outcome="y"))
    q_cc, _ = logit_fit(incomplete.dropna())
    assert np.all(np.abs(q_bar - q_full) < TOLERANCE), (q_bar - q_full) / MI_MINUS_FULL_SD
    # the same tolerance rejects the complete cases: x2 and x3 are visibly biased
    assert np.all(np.abs(q_cc - q_full)[[2, 3]] > TOLERANCE[[2, 3]]), (q_cc - q_full) / MI_MINUS_FULL_SD
    # Leaving the outcome out of the imputation models attenuates the coefficient of the imputed x1 (Moons et
    # al. 2006): here by about 0.2, three of the SDs above, while with the outcome x1 is within two of them.
    q_no_outcome, _, _ = pooled(impute(incomplete, m=10, seed=1, iterations=10, methods={"y": "none"}))
    assert q_no_outcome[1] < q_full[1] - 0.1 < q_bar[1]


def test_agrees_with_statsmodels_mice_on_mar_data():
    # Reference: statsmodels.imputation.mice (0.14/0.15), MICEData with predictive mean matching (k_pmm=5) of
    # every incomplete column (c as 0/1), MICE with a Logit analysis model, 5 burn-in cycles, 10 imputations:
    #     data = MICEData(numeric_frame, k_pmm=5)
    #     mice = MICE("y ~ x1 + x2 + x3 + c", sm.Logit, data, fit_kwds={"disp": 0})
    #     mice.fit(n_burnin=5, n_imputations=10)
    # Both pooled estimates approximate the same quantity (the limit of the pooled estimate as m grows, a
    # function of the observed data only), so they differ by Monte Carlo error, whose variance is
    # B_riskvet / m + B_statsmodels / m (between-imputation variances).  Tolerance: 4 of those standard
    # errors per coefficient (a false alarm probability of about 6e-5 each).  The imputation models differ (PMM
    # for c in statsmodels, logistic here; normal versus bootstrap parameter draws), but both are
    # approximately unbiased for the full-data fit, so a systematic difference is small next to that Monte
    # Carlo error: with statsmodels 0.15.0 the differences were -0.18, 0.03, -0.63, 0.52, -0.07 of it.
    from statsmodels.imputation.mice import MICE, MICEData

    _, incomplete = simulate(7, "mar")
    m = 10
    imp = impute(incomplete, m=m, seed=2, iterations=10, outcome="y")
    q_ours, _, b_ours = pooled(imp)

    numeric = pd.DataFrame(
        {"x1": incomplete["x1"], "x2": incomplete["x2"], "x3": incomplete["x3"], "c": incomplete["c"].map({"no": 0.0, "yes": 1.0}).astype(float), "y": incomplete["y"].astype(float)}
    )
    if "rng" in inspect.signature(MICEData.__init__).parameters:
        data = MICEData(numeric, k_pmm=5, rng=np.random.default_rng(11))
    else:  # statsmodels 0.14 draws from numpy's global state
        np.random.seed(11)
        data = MICEData(numeric, k_pmm=5)
    mice = MICE("y ~ x1 + x2 + x3 + c", sm.Logit, data, fit_kwds={"disp": 0})
    result = mice.fit(n_burnin=5, n_imputations=m)
    q_sm = np.asarray(result.params)
    b_sm = np.array([np.asarray(r.params) for r in mice.results_list]).var(axis=0, ddof=1)
    mc_se = np.sqrt(b_ours / m + b_sm / m)
    assert np.all(np.abs(q_ours - q_sm) < 4.0 * mc_se), (q_ours - q_sm) / mc_se


# ---- bad input --------------------------------------------------------------------------------------


# Six rows: the category models of these tiny frames are separated and fall back, with a RiskvetWarning that
# the tests of bad input do not examine.
quiet_fallbacks = pytest.mark.filterwarnings("ignore::riskvet.errors.RiskvetWarning")


def _small() -> pd.DataFrame:
    frame = pd.DataFrame(
        {
            "x": [1.0, np.nan, 3.0, 4.0, 5.0, 2.0],
            "g": pd.Categorical(["a", "b", None, "c", "a", "b"]),
            "s": np.array(["u", "v", "u", None, "v", "u"], dtype=object),
            "y": [0, 1, 0, 1, 1, 0],
        }
    )
    return frame


@pytest.mark.parametrize(
    "change, where",
    [
        ({"m": 0}, "m="),
        ({"m": 2.0}, "m="),
        ({"iterations": 0}, "iterations="),
        ({"donors": 0}, "donors="),
        ({"seed": -1}, "seed="),
        ({"auxiliary": ["nope"]}, "auxiliary="),
        ({"outcome": "nope"}, "outcome="),
        ({"methods": {"nope": "pmm"}}, "methods="),
        ({"methods": ["x"]}, "methods="),
        ({"donors": 2.5}, "donors="),
        ({"ordered": {"nope": ["a", "b"]}}, "ordered="),
        ({"methods": {"x": "magic"}}, "column 'x'"),
        ({"methods": {"g": "pmm"}}, "column 'g'"),
        ({"methods": {"g": "logistic"}}, "column 'g'"),
        ({"methods": {"g": "cumulative"}}, "column 'g'"),
        ({"ordered": {"s": ["u"]}}, "column 's'"),
        ({"ordered": {"s": ["u", "w"]}}, "column 's'"),
        ({"auxiliary": ["x"]}, "auxiliary=) column 'x'"),
        ({"outcome": "y", "methods": {"y": "none"}}, "column 'y'"),
    ],
)
def test_bad_arguments_are_refused_naming_the_argument(change, where):
    options = {"m": 2, "seed": 0, "iterations": 1}
    options.update(change)
    with pytest.raises(DataError, match=re.escape(where)) as info:
        impute(_small(), **options)
    assert "expected" in str(info.value) and "received" in str(info.value)


@quiet_fallbacks
def test_numeric_column_with_a_category_method_is_a_category_of_its_values():
    imp = impute(_small(), m=1, seed=0, iterations=1, methods={"x": "multinomial"})
    assert imp.methods["x"] == "multinomial" and imp.levels["x"] == (1.0, 2.0, 3.0, 4.0, 5.0)
    assert imp.completed(0)["x"].dtype == np.float64
    with pytest.raises(DataError, match="column 'x'.*'logistic' only"):
        impute(_small(), m=1, seed=0, methods={"x": "logistic"})


@quiet_fallbacks
def test_entirely_missing_column_unsupported_dtype_and_missing_outcome_are_refused():
    frame = _small().assign(empty=np.nan)
    with pytest.raises(DataError, match="column 'empty'.*all 6 values missing"):
        impute(frame, m=1, seed=0)
    impute(frame, m=1, seed=0, iterations=1, methods={"empty": "none"})  # carried as a passenger: allowed
    dated = _small().assign(when=pd.date_range("2020-01-01", periods=6))
    with pytest.raises(DataError, match="column 'when'.*dtype"):
        impute(dated, m=1, seed=0)
    lost = _small()
    lost.loc[[2, 4], "y"] = np.nan
    with pytest.raises(DataError, match=r"outcome='y'.*2 missing, rows \[2, 4\]"):
        impute(lost, m=1, seed=0, outcome="y")
    with pytest.raises(DataError, match="frame="):
        impute(_small().to_numpy(), m=1, seed=0)
    imp = impute(_small(), m=2, seed=0, iterations=1)
    for bad in (2, -1, 1.0, True):
        with pytest.raises(DataError, match=r"completed\(j=\)"):
            imp.completed(bad)


def test_least_squares_equals_numpy_lstsq_full_rank_rank_deficient_and_ill_conditioned():
    """The normal-equations shortcut of predictive mean matching gives numpy's SVD least-squares solution
    (numpy.linalg.lstsq, numpy 2.x) to rounding on a well-conditioned design, and numpy's own minimum-norm
    solution where the design is rank deficient (a level absent from a resample) or nearly collinear
    (invented test data)."""
    from riskvet.imputation import chained

    rng = np.random.default_rng(8)
    n = 400
    Z = np.c_[np.ones(n), rng.normal(size=(n, 5)), rng.binomial(1, 0.3, size=(n, 2))]
    y = Z @ rng.normal(size=Z.shape[1]) + rng.normal(size=n)
    reference = np.linalg.lstsq(Z, y, rcond=None)[0]
    assert np.allclose(chained._least_squares(Z, y), reference, rtol=1e-12, atol=1e-13)
    deficient = Z.copy()
    deficient[:, 6] = 0.0  # an indicator with no row at its level
    assert np.array_equal(chained._least_squares(deficient, y), np.linalg.lstsq(deficient, y, rcond=None)[0])
    collinear = np.c_[Z, Z[:, 1] + 1e-7 * rng.normal(size=n)]
    assert np.array_equal(chained._least_squares(collinear, y), np.linalg.lstsq(collinear, y, rcond=None)[0])
