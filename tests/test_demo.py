"""Tests of the invented demonstration data (riskvet.demo).

The generator is checked against things outside it: statsmodels 0.15
``OrderedModel`` recovers the true coefficients and thresholds from a large
draw, scikit-learn 1.9 ``roc_auc_score`` and ``cohen_kappa_score`` measure
discrimination and rater agreement, patsy's natural cubic regression spline
builds the 4-knot core temperature model, and binomial standard errors set
the tolerances of every proportion.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pandas as pd
import pytest
from patsy import dmatrix
from scipy.special import expit
from sklearn.metrics import cohen_kappa_score, roc_auc_score
from statsmodels.miscmodels.ordinal_model import OrderedModel

from riskvet import demo
from riskvet.errors import DataError, RiskvetError

PREDICTORS = [
    "age", "sex", "distance_km", "wbgt", "core_temp", "heart_rate", "systolic_bp", "resp_rate",
    "confusion", "collapse", "vomiting", "dry_skin", "cramps", "prior_heat_illness",
]
COLUMNS = ["attendee_id", "season", "event", "tent", *PREDICTORS, "triage_rule", "disposition"]
BIG = 20_000


def level_index(frame: pd.DataFrame) -> np.ndarray:
    return frame["disposition"].map({level: j for j, level in enumerate(demo.LEVELS)}).to_numpy()


def binomial_se(p: float, n: int) -> float:
    return math.sqrt(p * (1 - p) / n)


@pytest.fixture(scope="module")
def big_derivation() -> pd.DataFrame:
    return demo.draw(BIG, season="derivation", seed=11)


@pytest.fixture(scope="module")
def big_validation() -> pd.DataFrame:
    return demo.draw(BIG, season="validation", seed=12)


# --------------------------------------------------------------------------
# Determinism and shape
# --------------------------------------------------------------------------


@pytest.mark.parametrize(
    "make",
    [
        lambda seed: demo.draw(300, season="derivation", seed=seed),
        lambda seed: demo.draw(300, season="validation", seed=seed),
        lambda seed: demo.derivation_cohort(seed=seed, n=300),
        lambda seed: demo.validation_cohort(seed=seed, n=300),
        lambda seed: demo.paired_ratings(seed=seed, n=100),
    ],
)
def test_same_seed_same_frame_other_seed_other_frame(make):
    pd.testing.assert_frame_equal(make(5), make(5))
    assert not make(5).equals(make(6))


def test_generator_seed_is_reproducible():
    a = demo.draw(200, seed=np.random.default_rng(3))
    b = demo.draw(200, seed=np.random.default_rng(3))
    pd.testing.assert_frame_equal(a, b)


def test_derivation_and_validation_streams_are_distinct():
    # Same seed, different seasons: the uniform draws must not be shared,
    # or the two cohorts would be the same people under two thresholds.
    d = demo.draw(500, season="derivation", seed=1)
    v = demo.draw(500, season="validation", seed=1)
    assert abs(np.corrcoef(d["heart_rate"], v["heart_rate"])[0, 1]) < 0.2


@pytest.mark.parametrize("season", ["derivation", "validation"])
def test_draw_shape_columns_and_ranges(season):
    frame = demo.draw(1000, season=season, seed=2)
    assert list(frame.columns) == COLUMNS
    assert len(frame) == 1000
    assert not frame.isna().any().any()
    assert frame["attendee_id"].is_unique
    assert set(frame["disposition"]) <= set(demo.LEVELS)
    assert set(frame["sex"]) == {"female", "male"}
    assert set(frame["triage_rule"]) == {"green", "amber", "red"}
    assert (frame["season"] == demo.truth().season_labels[season]).all()
    for column in ["confusion", "collapse", "dry_skin", "cramps", "prior_heat_illness"]:
        assert set(frame[column]) <= {0, 1}
    # Ranges a tent record can hold (common practice for adult runners).
    assert frame["core_temp"].between(35.5, 42.5).all()
    assert frame["age"].between(16, 85).all()
    assert frame["vomiting"].between(0, 6).all()
    assert frame["systolic_bp"].between(70, 210).all()
    assert frame["heart_rate"].between(40, 200).all()
    assert frame["resp_rate"].between(8, 45).all()


def test_cohort_sizes_and_default_sizes():
    assert len(demo.derivation_cohort()) == 2000
    assert len(demo.validation_cohort()) == 1500
    assert len(demo.paired_ratings()) == 150
    assert list(demo.derivation_cohort(n=50).columns) == COLUMNS


# --------------------------------------------------------------------------
# Level proportions and the season shift
# --------------------------------------------------------------------------


@pytest.mark.parametrize("season", ["derivation", "validation"])
def test_observed_levels_match_true_probabilities(season, big_derivation, big_validation):
    # The drawn outcomes must follow true_prob: observed proportion of each
    # level within 4 binomial standard errors of the mean true probability
    # (a 4-SE band is exceeded by chance with probability about 6e-5).
    frame = big_derivation if season == "derivation" else big_validation
    expected = demo.true_prob(frame).mean(axis=0)
    observed = np.bincount(level_index(frame), minlength=3) / len(frame)
    for j in range(3):
        assert abs(observed[j] - expected[j]) < 4 * binomial_se(expected[j], len(frame))


def test_population_level_proportions_are_near_the_targets(big_derivation, big_validation):
    # Design targets of the scenario: about 60/28/12% in 2024 and fewer
    # transfers (about 8%) in 2026; +-0.02 allows for the rounding of the
    # published thresholds to two decimals.
    d = demo.true_prob(big_derivation).mean(axis=0)
    v = demo.true_prob(big_validation).mean(axis=0)
    np.testing.assert_allclose(d, [0.60, 0.28, 0.12], atol=0.02)
    assert abs(v[2] - 0.08) < 0.02
    assert 0.64 < v[0] < 0.75


def test_default_cohort_proportions_are_plausible():
    # Bands of about +-4 binomial SE (n = 2000 / 1500) around the targets.
    d = demo.derivation_cohort()["disposition"].value_counts(normalize=True)
    v = demo.validation_cohort()["disposition"].value_counts(normalize=True)
    assert 0.55 < d["released"] < 0.65 and 0.23 < d["observed"] < 0.33 and 0.09 < d["transferred"] < 0.15
    assert 0.64 < v["released"] < 0.76 and 0.17 < v["observed"] < 0.28 and 0.05 < v["transferred"] < 0.11


def test_validation_is_older_cooler_with_fewer_transfers(big_derivation, big_validation):
    d, v = big_derivation, big_validation
    assert v["age"].mean() - d["age"].mean() > 7
    assert d["wbgt"].mean() - v["wbgt"].mean() > 1.5
    p_d = (d["disposition"] == "transferred").mean()
    p_v = (v["disposition"] == "transferred").mean()
    assert p_d - p_v > 4 * math.hypot(binomial_se(p_d, BIG), binomial_se(p_v, BIG))
    assert set(d["event"]).isdisjoint(v["event"])


def test_truth_records_a_threshold_only_shift():
    t = demo.truth()
    shift = np.subtract(t.thresholds["validation"], t.thresholds["derivation"])
    np.testing.assert_allclose(shift, [t.threshold_shift] * 2, rtol=0, atol=1e-12)
    assert t.threshold_shift > 0
    assert "recalibration" in t.update


# --------------------------------------------------------------------------
# True probabilities
# --------------------------------------------------------------------------


def test_true_prob_rows_sum_to_one_and_seasons_agree(big_derivation):
    frame = big_derivation.head(2000)
    prob = demo.true_prob(frame)
    assert prob.shape == (2000, 3)
    assert (prob >= 0).all() and (prob <= 1).all()
    np.testing.assert_allclose(prob.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(prob, demo.true_prob(frame, season="derivation"))
    # The same people under the validation thresholds: fewer transfers each.
    later = demo.true_prob(frame, season="validation")
    assert (later[:, 2] < prob[:, 2]).all()
    assert (later[:, 0] > prob[:, 0]).all()


def test_true_prob_hand_worked_case():
    # One attendee worked by hand from the documented truth (truth()
    # docstring and terms): a pin so that the demo data cannot change
    # silently under the analyses that use it.
    person = pd.DataFrame(
        {
            "season": ["2024"], "age": [65], "sex": ["male"], "distance_km": [21.1], "wbgt": [29.0],
            "core_temp": [40.5], "heart_rate": [130], "systolic_bp": [95], "resp_rate": [26],
            "confusion": [1], "collapse": [0], "vomiting": [2], "dry_skin": [1], "cramps": [1],
            "prior_heat_illness": [0],
        }
    )
    lp = (
        0.70 * 2.5 + 2.10 * 1.0  # core temp 40.5: 2.5 above 38, 1.0 above 39.5
        + 0.015 * 25 + 0.040 * 5  # age 65
        + 0.20  # male
        + 0.015 * 30  # heart rate 130
        + 0.040 * 15  # systolic 95, 15 below 110
        + 0.06 * 8  # resp rate 26
        + 1.40 + 0.28 * 2 + 0.55  # confusion, two vomits, dry skin
        + 0.07 * 3  # WBGT 29
    )
    np.testing.assert_allclose(demo.true_linear_predictor(person), [lp], rtol=1e-12)
    c0, c1 = expit(1.02 - lp), expit(3.26 - lp)
    np.testing.assert_allclose(demo.true_prob(person), [[c0, c1 - c0, 1 - c1]], rtol=1e-12)


def test_true_prob_refuses_missing_values_and_columns():
    cohort = demo.derivation_cohort(n=400)
    with pytest.raises(DataError, match="core_temp"):
        demo.true_prob(cohort)
    with pytest.raises(DataError, match="wbgt"):
        demo.true_prob(demo.draw(5, seed=1).drop(columns="wbgt"))
    with pytest.raises(DataError, match="season"):
        demo.true_prob(demo.draw(5, seed=1).assign(season="1999"))
    with pytest.raises(DataError, match="DataFrame"):
        demo.true_prob(np.zeros((3, 3)))


# --------------------------------------------------------------------------
# Recovery of the truth by a reference fit
# --------------------------------------------------------------------------


def true_design(frame: pd.DataFrame, truth: demo.DemoTruth) -> pd.DataFrame:
    """Terms of the true model, written out from their documented forms."""
    columns = {}
    for term in truth.terms:
        x = frame[term.column]
        if term.form == "level":
            columns[term.name] = (x == term.level).astype(float)
        elif term.form == "linear":
            columns[term.name] = x.astype(float) - term.at
        elif term.form == "above":
            columns[term.name] = np.maximum(0.0, x.astype(float) - term.at)
        else:
            columns[term.name] = np.maximum(0.0, term.at - x.astype(float))
    return pd.DataFrame(columns)


def ordered_outcome(frame: pd.DataFrame) -> pd.Series:
    return pd.Series(pd.Categorical(frame["disposition"], categories=demo.LEVELS, ordered=True))


def test_ordered_model_recovers_true_coefficients_and_thresholds(big_derivation):
    # Reference: statsmodels 0.15 OrderedModel (logit, BFGS) fitted to
    # n = 20,000 draws with the true functional form.  The model is correctly
    # specified, so each estimate is approximately Normal(true, SE^2) with
    # SE from the inverse Hessian; a 4-SE band fails by chance with
    # probability about 6e-5 per parameter (about 1e-3 for all 18), so a
    # failure points at the generator, not at chance.  At this n the SEs are
    # 0.001-0.17, so a wrong sign or a misplaced term is caught; a small
    # error in a weakly identified term (age above 60, SE 0.015) is not.
    truth = demo.truth()
    X = true_design(big_derivation, truth)
    fit = OrderedModel(ordered_outcome(big_derivation), X, distr="logit").fit(
        method="bfgs", disp=False, maxiter=5000
    )
    assert fit.mle_retvals["converged"]
    k = X.shape[1]
    estimate = fit.params.iloc[:k].to_numpy()
    se = fit.bse.iloc[:k].to_numpy()
    true = np.array([t.coefficient for t in truth.terms])
    z = (estimate - true) / se
    assert np.all(np.abs(z) < 4), dict(zip(X.columns, np.round(z, 2)))
    # statsmodels holds thresholds as the first one and log increments;
    # theta_1 = p0 + exp(p1), its SE by the delta method.
    p0, p1 = fit.params.iloc[k:].to_numpy()
    cov = fit.cov_params().to_numpy()[k:, k:]
    grad = np.array([1.0, math.exp(p1)])
    theta = np.array([p0, p0 + math.exp(p1)])
    theta_se = np.array([math.sqrt(cov[0, 0]), math.sqrt(grad @ cov @ grad)])
    assert np.all(np.abs(theta - truth.thresholds["derivation"]) < 4 * theta_se)


def test_validation_thresholds_recovered_with_true_lp_as_offset(big_validation):
    # Reference: statsmodels 0.15 OrderedModel with the true LP as offset and
    # no other predictors (recalibration in the large).  The re-estimated
    # thresholds must match the validation thresholds within 4 SE (reason as
    # above) and differ from the derivation thresholds by more than 4 SE, so
    # calibration in the large can detect the shift.
    truth = demo.truth()
    lp = demo.true_linear_predictor(big_validation)
    fit = OrderedModel(ordered_outcome(big_validation), None, offset=lp, distr="logit").fit(
        method="bfgs", disp=False
    )
    p0, p1 = fit.params.to_numpy()
    cov = fit.cov_params().to_numpy()
    grad = np.array([1.0, math.exp(p1)])
    theta = np.array([p0, p0 + math.exp(p1)])
    theta_se = np.array([math.sqrt(cov[0, 0]), math.sqrt(grad @ cov @ grad)])
    assert np.all(np.abs(theta - truth.thresholds["validation"]) < 4 * theta_se)
    assert np.all(np.abs(theta - truth.thresholds["derivation"]) > 4 * theta_se)


def test_spline_model_reaches_the_intended_discrimination():
    # A proportional-odds model with a 4-knot natural cubic spline for core
    # temperature (patsy 1.0 cr, df=3 after centring = 2 inner + 2 boundary
    # knots) and the other predictors linear, fitted by statsmodels 0.15
    # OrderedModel to the complete cases of the default derivation cohort.
    # Design target of the scenario: AUC for transferred vs rest in
    # 0.80-0.88 (scikit-learn 1.9 roc_auc_score).
    frame = demo.derivation_cohort().dropna().reset_index(drop=True)
    frame["male"] = (frame["sex"] == "male").astype(float)
    formula = (
        "cr(core_temp, df=3, constraints='center') + age + male + heart_rate + systolic_bp"
        " + resp_rate + confusion + collapse + vomiting + dry_skin + cramps + distance_km"
        " + wbgt + prior_heat_illness - 1"
    )
    X = dmatrix(formula, frame, return_type="dataframe")
    fit = OrderedModel(ordered_outcome(frame), X, distr="logit").fit(method="bfgs", disp=False, maxiter=5000)
    score = X.to_numpy() @ fit.params.iloc[: X.shape[1]].to_numpy()
    auc = roc_auc_score(frame["disposition"] == "transferred", score)
    assert 0.80 <= auc <= 0.88


def test_true_model_beats_the_triage_rule_modestly(big_derivation):
    # scikit-learn 1.9 roc_auc_score, transferred vs rest.  "Modestly": the
    # true LP is better by 0.02-0.15 (scenario design; at n = 20,000 the SE
    # of an AUC difference is below 0.01).
    transferred = big_derivation["disposition"] == "transferred"
    triage = big_derivation["triage_rule"].map({"green": 0, "amber": 1, "red": 2})
    gap = roc_auc_score(transferred, demo.true_linear_predictor(big_derivation)) - roc_auc_score(
        transferred, triage
    )
    assert 0.02 < gap < 0.15


# --------------------------------------------------------------------------
# Missingness
# --------------------------------------------------------------------------


def test_missingness_rates_and_columns():
    cohort = demo.derivation_cohort(n=BIG, seed=3)
    specs = {m.column: m for m in demo.truth().missingness}
    for column in COLUMNS:
        rate = cohort[column].isna().mean()
        if column in specs:
            # 4 binomial SE around the stated rate (the MAR mechanism keeps
            # the expected rate, see derivation_cohort Notes).
            expected = specs[column].rate
            assert abs(rate - expected) < 4 * binomial_se(expected, BIG), column
        else:
            assert rate == 0, column
    assert cohort["disposition"].isna().mean() > 0.005


def test_mar_mechanism_tilts_towards_high_driver():
    # MAR with tilt 0.5 per SD on heart rate: rows above the median heart
    # rate lose systolic_bp about twice as often (ratio > 1.4 is far outside
    # chance: about 400 deletions per half).  The MCAR column core_temp shows
    # no such tilt (ratio within 0.67-1.5, about 4 SE of the log ratio).
    cohort = demo.derivation_cohort(n=BIG, seed=4)
    high = cohort["heart_rate"] > cohort["heart_rate"].median()
    sbp = cohort["systolic_bp"].isna()
    temp = cohort["core_temp"].isna()
    assert sbp[high].mean() / sbp[~high].mean() > 1.4
    assert 0.67 < temp[high].mean() / temp[~high].mean() < 1.5


def test_cohort_equals_draw_where_observed():
    # Missingness only deletes: every observed value equals the complete
    # population draw made from the same stream.
    cohort = demo.derivation_cohort(seed=8, n=500)
    rng_draw = demo._generator(8, "derivation", "test")
    full = demo._simulate(500, "derivation", rng_draw)
    observed = cohort.notna()
    assert (~observed).any().any()
    for column in COLUMNS:
        kept = observed[column]
        pd.testing.assert_series_equal(cohort.loc[kept, column], full.loc[kept, column], check_dtype=False)


# --------------------------------------------------------------------------
# Paired ratings
# --------------------------------------------------------------------------


def test_paired_ratings_layout():
    ratings = demo.paired_ratings(n=150)
    signs = ["confusion", "dry_skin", "cramps", "resp_rate"]
    expected = ["attendee_id", "season"] + [f"{s}_{r}" for s in signs for r in ("rater_a", "rater_b")]
    assert list(ratings.columns) == expected
    assert len(ratings) == 150 and ratings["attendee_id"].is_unique
    assert not ratings.isna().any().any()
    for sign in signs[:3]:
        assert set(ratings[f"{sign}_rater_a"]) | set(ratings[f"{sign}_rater_b"]) <= {0, 1}
    assert (ratings[["resp_rate_rater_a", "resp_rate_rater_b"]] % 2 == 0).all().all()
    # Realistic disagreement: raters differ on some people, agree on most.
    disagree = (ratings["confusion_rater_a"] != ratings["confusion_rater_b"]).mean()
    assert 0.0 < disagree < 0.25


@pytest.mark.parametrize("sign", ["confusion", "dry_skin", "cramps"])
def test_rater_agreement_matches_error_model(sign):
    # Cohen's kappa (scikit-learn 1.9 cohen_kappa_score) on n = 20,000 pairs
    # against the kappa implied by the recorded sensitivities and
    # specificities (raters independent given the true sign, Cohen 1960):
    # p_o = sum over true state of P(state) P(a agrees b | state),
    # p_e = P(a=1)P(b=1) + P(a=0)P(b=0).  Prevalence from a 200,000 draw.
    # Tolerance 0.04: about 4 SE of kappa at this n (SE about 0.01).
    ratings = demo.paired_ratings(n=BIG, seed=9)
    prevalence = demo.draw(200_000, seed=10)[sign].mean()
    (sa, pa), (sb, pb) = demo.truth().ratings["binary_signs"][sign].values()
    p11 = prevalence * sa * sb + (1 - prevalence) * (1 - pa) * (1 - pb)
    p00 = prevalence * (1 - sa) * (1 - sb) + (1 - prevalence) * pa * pb
    a1 = prevalence * sa + (1 - prevalence) * (1 - pa)
    b1 = prevalence * sb + (1 - prevalence) * (1 - pb)
    pe = a1 * b1 + (1 - a1) * (1 - b1)
    kappa = (p11 + p00 - pe) / (1 - pe)
    observed = cohen_kappa_score(ratings[f"{sign}_rater_a"], ratings[f"{sign}_rater_b"])
    assert abs(observed - kappa) < 0.04
    assert 0.3 < observed < 0.9  # moderate to good agreement, not perfect


def test_rater_b_counts_higher_by_the_recorded_bias():
    # Mean difference b - a equals the recorded bias within 4 SE (SD of the
    # difference of two counts with error SD 1.8 plus rounding to even
    # numbers is about 2.9, SE about 0.02 at n = 20,000).
    ratings = demo.paired_ratings(n=BIG, seed=9)
    diff = ratings["resp_rate_rater_b"] - ratings["resp_rate_rater_a"]
    bias = demo.truth().ratings["resp_rate"]["bias"]
    assert abs(diff.mean() - (bias["rater_b"] - bias["rater_a"])) < 4 * diff.std() / math.sqrt(BIG)


# --------------------------------------------------------------------------
# Files
# --------------------------------------------------------------------------


def test_write_demo_data_is_byte_identical_and_refuses_to_overwrite(tmp_path):
    sizes = dict(n_derivation=300, n_validation=200, n_ratings=50)
    first = demo.write_demo_data(tmp_path / "a", seed=4, **sizes)
    second = demo.write_demo_data(tmp_path / "b", seed=4, **sizes)
    other = demo.write_demo_data(tmp_path / "c", seed=5, **sizes)
    assert sorted(first) == ["derivation", "ratings", "validation"]
    assert {p.name for p in first.values()} == {"derivation.csv", "validation.csv", "ratings.csv"}
    for name in first:
        assert first[name].read_bytes() == second[name].read_bytes()
        assert first[name].read_bytes() != other[name].read_bytes()
    with pytest.raises(RiskvetError, match="derivation.csv"):
        demo.write_demo_data(tmp_path / "a", seed=4, **sizes)


def test_write_demo_data_writes_nothing_if_any_file_exists(tmp_path):
    (tmp_path / "ratings.csv").write_text("keep me\n")
    with pytest.raises(RiskvetError, match="ratings.csv"):
        demo.write_demo_data(tmp_path)
    assert not (tmp_path / "derivation.csv").exists()
    assert (tmp_path / "ratings.csv").read_text() == "keep me\n"


def test_written_files_read_back_as_the_cohorts(tmp_path):
    paths = demo.write_demo_data(tmp_path, seed=6, n_derivation=300, n_validation=200, n_ratings=50)
    text = {"attendee_id": str, "season": str}
    for name, frame in [
        ("derivation", demo.derivation_cohort(seed=6, n=300)),
        ("validation", demo.validation_cohort(seed=6, n=200)),
        ("ratings", demo.paired_ratings(seed=6, n=50)),
    ]:
        back = pd.read_csv(paths[name], dtype=text)
        pd.testing.assert_frame_equal(back, frame, check_dtype=False)
    # Missing values are empty fields, not "nan".
    assert "nan" not in paths["derivation"].read_text().lower()


# --------------------------------------------------------------------------
# The truth object and bad input
# --------------------------------------------------------------------------


def test_truth_to_dict_and_to_frame():
    t = demo.truth()
    payload = json.dumps(t.to_dict(), allow_nan=False)
    assert "core_temp_above_39_5" in payload
    table = t.to_frame()
    assert list(table.columns) == ["part", "name", "season", "value", "detail"]
    assert (table["part"] == "coefficient").sum() == len(t.terms) == 16
    assert (table["part"] == "threshold").sum() == 4
    assert (table["part"] == "missing_rate").sum() == len(t.missingness)
    assert set(t.predictor_model) == set(PREDICTORS) | {"event", "tent", "disposition"}
    zero = {term.name for term in t.terms if term.coefficient == 0}
    assert zero == {"cramps", "distance_km"}
    with pytest.raises(dataclasses.FrozenInstanceError):
        t.threshold_shift = 0.0
    # Editing a returned truth does not change the generator.
    t.populations["validation"]["age_mean"] = 90
    assert demo.truth().populations["validation"]["age_mean"] == 47.0


@pytest.mark.parametrize(
    ("call", "word"),
    [
        (lambda: demo.draw(0, seed=1), "n"),
        (lambda: demo.draw(2.5, seed=1), "n"),
        (lambda: demo.draw(True, seed=1), "n"),
        (lambda: demo.draw(10, season="training", seed=1), "season"),
        (lambda: demo.draw(10, seed=-1), "seed"),
        (lambda: demo.draw(10, seed=1.5), "seed"),
        (lambda: demo.derivation_cohort(n=-3), "n"),
        (lambda: demo.validation_cohort(seed="x"), "seed"),
        (lambda: demo.paired_ratings(n=1), "n"),
        (lambda: demo.write_demo_data("/nonexistent-never-written", seed=np.random.default_rng(1)), "seed"),
        (lambda: demo.true_prob(demo.draw(5, seed=1), season="2024"), "season"),
        (lambda: demo.true_linear_predictor(demo.draw(5, seed=1).drop(columns="age")), "age"),
    ],
)
def test_bad_input_is_refused_with_a_named_parameter(call, word):
    with pytest.raises(RiskvetError, match=word) as info:
        call()
    assert "expected" in str(info.value) and "received" in str(info.value)
