"""Tests of riskvet.validation.bootstrap and the internal validation stage.

References checked against: Steyerberg et al., J Clin Epidemiol 2001 (the
optimism-corrected estimate is closer to performance in new data than the
apparent one), van Houwelingen & le Cessie, Stat Med 1990 (heuristic
shrinkage), Efron & Tibshirani, JASA 1997 (.632+ formulas, worked by hand),
statsmodels OrderedModel (frequency-weighted fit = fit on duplicated rows),
brute-force all-pairs no-information values, and the demo generator's known
population (a large fresh sample).
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import numpy as np
import pytest
import yaml

from riskvet import demo
from riskvet.validation.bootstrap import (
    InternalValidation,
    _estimator_632,
    _no_information,
    bootstrap_indices,
    heuristic_shrinkage,
    shrink_model,
    validate_internally,
    write_shrunken_model,
)
from riskvet.intake.data import load_cohorts
from riskvet.intake.outcome import outcome_codes
from riskvet.reporting.sentences.internal_validation import failure_sentence, internal_validation_summary, stability_sentence
from riskvet.modelling.derive import derive
from riskvet.errors import RiskvetError
from riskvet.measures.summary import performance_summary
from riskvet.modelling.modelfile import load_model, model_from_fit, save_model
from riskvet.modelling.fitter import fit_cumulative
from riskvet.measures.overall import brier, overall_accuracy
from riskvet.chain.scaffold import new_study_folder
from riskvet.intake.study import load_study

# Binary predictors that are rare in the demo data and separate in small
# resamples; the tests that are not about failures leave them out.
RARE = ["confusion", "collapse", "prior_heat_illness"]


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("iv")
    new_study_folder(path, n_derivation=400, n_validation=60, n_ratings=20, n_boot=10, missing_data="complete_case")
    return path


def make_study(folder: Path, name: str, **changes):
    """A variant of the demo study: ``changes`` maps 'section.key' to a value."""
    raw = yaml.safe_load((folder / "study.yaml").read_text(encoding="utf-8"))
    # rows are resampled here (the cluster bootstrap has tests of its own, in test_clusters.py)
    raw["data"].pop("cluster_column", None)
    raw.pop("internal_external", None)
    for dotted, value in changes.items():
        section, key = dotted.split(".")
        raw.setdefault(section, {})[key] = value
    path = folder / f"{name}.yaml"
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    return load_study(path)


def outcome_of(study) -> dict:
    levels = list(study.outcome.ordered_levels)
    return {"column": study.outcome.column, "type": study.outcome.type, "levels": levels, "labels": {}}


@pytest.fixture(scope="module")
def small_study(folder):
    """Five linear predictors, no selection: fast and free of separation."""
    return make_study(
        folder, "small",
        **{
            "selection.method": "none",
            "predictors.candidates": {"age": "linear", "core_temp": "linear", "heart_rate": "linear", "resp_rate": "linear", "wbgt": "linear"},
            "predictors.forced": [],
            "internal_validation.max_failed_share": 0.2,
        },
    )


@pytest.fixture(scope="module")
def small_result(small_study):
    cohort = load_cohorts(small_study).derivation
    return validate_internally(small_study, cohort, n_boot=40, seed=7, progress=False)


# --------------------------------------------------------------------------
# Against the known population
# --------------------------------------------------------------------------


def fresh_performance(study, derivation, fresh):
    X = derivation.design.transform(fresh)
    prob = derivation.fit.predict_proba(X)
    y = outcome_codes(study, fresh[study.outcome.column])
    lp = np.asarray(derivation.fit.linear_predictor(X), dtype=float)
    slope = float(np.asarray(fit_cumulative(lp[:, None], y).coef, dtype=float)[0])
    return performance_summary(y, prob), slope


def test_corrected_is_closer_to_new_data_than_apparent(folder):
    # Steyerberg et al., J Clin Epidemiol 2001;54:774-781: over repeated
    # derivation samples, the bootstrap optimism-corrected C and calibration
    # slope are closer to the model's performance in new patients than the
    # apparent values are.  Here the truth is known: each model is measured
    # on the same 20,000 fresh patients from the demo population.  Eight
    # derivation samples of 400, 11 candidate terms (one spline), no
    # selection, 20 replicates each.  As in that paper the comparison is over
    # samples: the bias (mean error) of the C statistic, which the correction
    # exists to remove, and the mean absolute error of the calibration slope.
    # (A single sample's model can do better or worse than the procedure's
    # expected performance, so one sample alone does not decide.)  Fixed seeds.
    study = make_study(folder, "overfit", **{"selection.method": "none", "predictors.exclude": RARE,
                                             "internal_validation.max_failed_share": 0.3})
    fresh = demo.draw(20000, seed=2024)
    errors = {"auc_apparent": [], "auc_corrected": [], "auc_632plus": [], "slope_apparent": [], "slope_corrected": []}
    new_slopes = []
    for s in range(8):
        frame = demo.draw(400, seed=100 + s)
        y = outcome_codes(study, frame[study.outcome.column])
        result = validate_internally(study, (frame, y), n_boot=20, seed=s, progress=False)
        new, new_slope = fresh_performance(study, derive(study, frame, y), fresh)
        auc = result.estimate("average_cut_auc")
        slope = result.estimate("calibration_slope")
        errors["auc_apparent"].append(auc.apparent - new["average_cut_auc"])
        errors["auc_corrected"].append(auc.corrected - new["average_cut_auc"])
        errors["auc_632plus"].append(auc.estimate_632plus - new["average_cut_auc"])
        assert slope.apparent == pytest.approx(1.0, abs=1e-6)  # ML fit: slope 1 on its own data (score equations)
        errors["slope_apparent"].append(abs(slope.apparent - new_slope))
        errors["slope_corrected"].append(abs(slope.corrected - new_slope))
        new_slopes.append(new_slope)
    mean = {k: float(np.mean(v)) for k, v in errors.items()}
    assert mean["auc_apparent"] > 0  # the apparent C is optimistic on average
    assert abs(mean["auc_corrected"]) < mean["auc_apparent"]
    assert abs(mean["auc_632plus"]) < mean["auc_apparent"]
    assert mean["slope_corrected"] < mean["slope_apparent"]
    assert np.mean(new_slopes) < 1.0  # the models do overfit


def test_bootstrap_slope_near_heuristic_shrinkage(small_result):
    # van Houwelingen & le Cessie, Stat Med 1990;9:1303-1325: with a
    # pre-specified model (no selection), (chi2 - df) / chi2 approximates the
    # expected calibration slope in new data, which the bootstrap estimates.
    # Tolerance 0.05: the mean of 40 replicate slopes has a Monte-Carlo SE of
    # sd / sqrt(40) < 0.024 (sd below 0.15, checked in the test), so 0.05 is
    # two such SEs plus room for the heuristic being a first-order
    # approximation.
    s = small_result.shrinkage
    assert s.df_final == s.df_candidates == 5
    assert s.heuristic == pytest.approx((s.model_chi2 - 5) / s.model_chi2, rel=1e-12)
    assert s.bootstrap_sd < 0.15
    assert s.bootstrap == pytest.approx(s.heuristic, abs=0.05)
    assert s.bootstrap == pytest.approx(small_result.estimate("calibration_slope").test_mean, rel=1e-12)


# --------------------------------------------------------------------------
# Resampling rows versus frequency weights
# --------------------------------------------------------------------------


def test_weights_equal_duplicated_rows(small_study):
    import statsmodels.api as sm
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    cohort = load_cohorts(small_study).derivation
    derivation = derive(small_study, cohort.frame, cohort.y)
    X = derivation.design.transform(cohort.frame)
    y = cohort.y
    idx = bootstrap_indices(len(y), n_boot=2, seed=5)[0]
    counts = np.bincount(idx, minlength=len(y))
    by_rows = fit_cumulative(X.iloc[idx].reset_index(drop=True), y[idx])
    by_weights = fit_cumulative(X, y, weights=counts)
    # Same likelihood, so the same maximum: Newton converges to ~1e-10 in both.
    np.testing.assert_allclose(by_weights.params.to_numpy(), by_rows.params.to_numpy(), rtol=1e-7, atol=1e-9)
    assert by_weights.loglik == pytest.approx(by_rows.loglik, rel=1e-10)
    # statsmodels 0.15 OrderedModel (logit) on the duplicated rows: same
    # coefficients; tolerance 1e-4 for its BFGS optimiser's stopping rule.
    sm_fit = OrderedModel(y[idx], X.iloc[idx].to_numpy(), distr="logit").fit(method="bfgs", maxiter=2000, gtol=1e-8, disp=False)
    np.testing.assert_allclose(by_rows.coef.to_numpy(), sm_fit.params[: X.shape[1]], rtol=1e-4, atol=1e-4)
    # Replicate 0 of validate_internally is this resample: its measures on the
    # original data equal those of the weighted fit.
    result = validate_internally(small_study, cohort, n_boot=2, seed=5, progress=False)
    expected = performance_summary(y, by_weights.predict_proba(X))
    for key in ("auc_cut0", "brier", "calibration_slope_cut1", "ici_cut0"):
        assert result.values(key, "original")[0] == pytest.approx(expected[key], rel=1e-7, abs=1e-9)


# --------------------------------------------------------------------------
# Reproducibility
# --------------------------------------------------------------------------


def test_bootstrap_indices_follow_the_documented_streams():
    rows = bootstrap_indices(50, n_boot=3, seed=9)
    children = np.random.SeedSequence(9).spawn(3)
    for i, child in enumerate(children):
        np.testing.assert_array_equal(rows[i], np.random.default_rng(child).integers(0, 50, size=50))
    np.testing.assert_array_equal(bootstrap_indices(50, n_boot=5, seed=9)[:3], rows)  # more replicates: same first ones


def _same(a: InternalValidation, b: InternalValidation) -> None:
    assert json.dumps(a.to_dict(), sort_keys=True) == json.dumps(b.to_dict(), sort_keys=True)
    assert np.array_equal(a.replicate_values["value"].to_numpy(), b.replicate_values["value"].to_numpy(), equal_nan=True)


@pytest.fixture(scope="module")
def selecting_study(folder):
    """Forward selection with 3-fold CV among six candidates (with one spline)."""
    return make_study(
        folder, "selecting",
        **{
            "selection.method": "forward",
            "selection.folds": 3,
            "predictors.candidates": {"age": "linear", "core_temp": "spline 3", "heart_rate": "linear", "cramps": "linear",
                                      "distance_km": "linear", "wbgt": "linear"},
            "predictors.forced": [],
            "internal_validation.max_failed_share": 0.3,
        },
    )


def test_identical_for_one_two_workers_and_a_dask_cluster(selecting_study):
    distributed = pytest.importorskip("distributed")
    cohort = load_cohorts(selecting_study).derivation
    one = validate_internally(selecting_study, cohort, n_boot=12, seed=3, n_jobs=1, progress=False)
    two = validate_internally(selecting_study, cohort, n_boot=12, seed=3, n_jobs=2, progress=False)
    _same(one, two)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        on_cluster = selecting_study.model_copy(
            update={"compute": selecting_study.compute.model_copy(update={"scheduler": cluster.scheduler_address})}
        )
        dask = validate_internally(on_cluster, cohort, n_boot=12, seed=3, n_jobs=1, progress=False)
    _same(one, dask)
    other = validate_internally(selecting_study, cohort, n_boot=12, seed=4, n_jobs=1, progress=False)
    assert other.selection_seeds != one.selection_seeds


def test_selection_is_repeated_in_every_replicate(selecting_study):
    cohort = load_cohorts(selecting_study).derivation
    result = validate_internally(selecting_study, cohort, n_boot=12, seed=3, progress=False)
    st = result.stability
    assert st.method == "forward"
    assert sum(st.model_sizes.values()) == st.n_replicates == result.n_succeeded
    assert sum(c for _, c in st.top_sets) <= st.n_replicates
    assert set(st.candidate_terms) == {"age", "core_temp", "heart_rate", "cramps", "distance_km", "wbgt"}
    assert all(0 <= v <= st.n_replicates for v in st.times_selected.values())
    # core_temp dominates the demo truth; cramps has coefficient 0 there.
    assert st.times_selected["core_temp"] >= st.times_selected["cramps"]
    table = st.to_frame()
    assert list(table["term"]) == list(st.candidate_terms)
    assert "replicates" in stability_sentence(st)


# --------------------------------------------------------------------------
# Failure accounting
# --------------------------------------------------------------------------


def rare_top_level(study, n_top: int = 1):
    cohort = load_cohorts(study).derivation
    y = cohort.y.copy()
    top = np.flatnonzero(y == 2)
    y[top[n_top:]] = 1  # keep n_top patients at the top level (invented, for the mechanics only)
    return cohort.frame, y, top[:n_top]


def test_empty_outcome_level_is_counted_with_its_reason(small_study):
    study = small_study.model_copy(update={"internal_validation": small_study.internal_validation.model_copy(update={"max_failed_share": 0.9})})
    frame, y, rare = rare_top_level(study)
    result = validate_internally(study, (frame, y), n_boot=10, seed=21, progress=False)
    rows = bootstrap_indices(len(y), n_boot=10, seed=21)
    expected = [i for i in range(10) if not np.isin(rare, rows[i]).any()]
    assert expected, "the seed must give at least one resample without the rare level"
    assert [f.replicate for f in result.failures] == expected
    assert {f.reason for f in result.failures} == {"empty outcome level"}
    assert result.failure_counts == {"empty outcome level": len(expected)}
    assert result.n_succeeded == 10 - len(expected)
    assert sorted(result.replicate_values["replicate"].unique().tolist()) == [i for i in range(10) if i not in expected]
    assert list(result.failures_frame()["reason"]) == ["empty outcome level"] * len(expected)
    assert "produced no model" in failure_sentence(result)
    top = study.outcome.ordered_levels[2]
    for f in result.failures:  # the level as the study names it, never its internal code
        assert f.message.startswith(f"no one in outcome level(s) ['{top}'] of the resample; people by level {{")
        assert "[2]" not in f.message


def test_too_many_failures_raise(small_study):
    study = small_study.model_copy(update={"internal_validation": small_study.internal_validation.model_copy(update={"max_failed_share": 0.05})})
    frame, y, _ = rare_top_level(study)
    with pytest.raises(RiskvetError, match="empty outcome level"):
        validate_internally(study, (frame, y), n_boot=10, seed=21, progress=False)


# --------------------------------------------------------------------------
# Estimators worked by hand
# --------------------------------------------------------------------------


def test_632_plus_by_hand():
    # Efron & Tibshirani, JASA 1997, eqs 28-32, on the loss scale:
    # err = 0.1, Err1 = 0.3, gamma = 0.5 -> R = 0.2 / 0.4 = 0.5,
    # w = 0.632 / (1 - 0.368 * 0.5) = 0.774509..., .632+ = 0.1 + 0.2 w.
    est632, plus, rate = _estimator_632(0.1, 0.3, 0.5, higher=False)
    assert est632 == pytest.approx(0.368 * 0.1 + 0.632 * 0.3, rel=1e-12)
    assert rate == pytest.approx(0.5, rel=1e-12)
    assert plus == pytest.approx(0.1 + 0.2 * 0.632 / (1 - 0.368 * 0.5), rel=1e-12)
    # No overfitting (Err1 <= err): R = 0 and .632+ = .632.
    est632, plus, rate = _estimator_632(0.3, 0.2, 0.5, higher=False)
    assert rate == 0 and plus == pytest.approx(est632, rel=1e-12)
    # Err1 beyond the no-information rate: Err1' = gamma, R = 1, w = 1, .632+ = gamma.
    _, plus, rate = _estimator_632(0.1, 0.7, 0.5, higher=False)
    assert rate == 1 and plus == pytest.approx(0.5, rel=1e-12)
    # A higher-is-better measure (AUC) mirrors the loss: apparent 0.9, OOB 0.7, gamma 0.5.
    est632, plus, rate = _estimator_632(0.9, 0.7, 0.5, higher=True)
    assert est632 == pytest.approx(0.368 * 0.9 + 0.632 * 0.7, rel=1e-12)
    assert rate == pytest.approx(0.5, rel=1e-12)
    assert plus == pytest.approx(0.9 - 0.2 * 0.632 / (1 - 0.368 * 0.5), rel=1e-12)


def test_no_information_values_equal_all_pairs_brute_force():
    # gamma = (1/n^2) sum_i sum_j L(y_i, p_j) (Efron & Tibshirani 1997, eq. 27),
    # computed here by building all n^2 pairs explicitly.
    rng = np.random.default_rng(3)
    n = 60
    prob = rng.dirichlet([2.0, 1.0, 1.0], size=n)
    y = rng.integers(0, 3, size=n)
    y_pairs = np.repeat(y, n)
    p_pairs = np.tile(prob, (n, 1))
    assert _no_information("brier", "brier", y, prob) == pytest.approx(brier(y_pairs, p_pairs).brier, rel=1e-12)
    assert _no_information("scaled_brier", "scaled_brier", y, prob) == pytest.approx(brier(y_pairs, p_pairs).scaled_brier, rel=1e-10)
    # R2 scales with n through both log-likelihoods, so the n^2 pairs give the same value.
    assert _no_information("nagelkerke_r2", "r2", y, prob) == pytest.approx(overall_accuracy(y_pairs, p_pairs).nagelkerke_r2, rel=1e-10)
    # ICI of a flat calibration curve at the observed proportion of Y > 1.
    cut = prob[:, 2]
    assert _no_information("ici_cut1", "ici", y, prob) == pytest.approx(np.mean(np.abs(np.mean(y > 1) - cut)), rel=1e-12)
    # Binary form of the Brier score.
    pb = np.column_stack([1 - prob[:, 0], prob[:, 0]])
    yb = (y > 0).astype(int)
    assert _no_information("brier", "brier", yb, pb) == pytest.approx(brier(np.repeat(yb, n), np.tile(pb, (n, 1))).brier, rel=1e-12)


def test_heuristic_shrinkage_by_hand():
    # (chi2 - df) / chi2, van Houwelingen & le Cessie 1990: 100 on 10 df -> 0.9.
    assert heuristic_shrinkage(100.0, 10) == pytest.approx(0.9, rel=1e-15)
    assert math.isnan(heuristic_shrinkage(0.0, 3))


def test_estimates_are_internally_consistent(small_result):
    r = small_result
    for e in r.estimates:
        assert e.corrected == pytest.approx(e.apparent - e.optimism, rel=1e-12, abs=1e-15)
        if e.n_replicates:
            assert e.optimism == pytest.approx(e.bootstrap_mean - e.test_mean, rel=1e-9, abs=1e-12)
    boot = r.values("average_cut_auc", "bootstrap")
    test = r.values("average_cut_auc", "original")
    assert r.estimate("average_cut_auc").optimism == pytest.approx(np.mean(boot - test), rel=1e-12)
    # The spread is the central 95% of replicates (no confidence setting exists for it):
    # numpy 2.4 percentile, default linear interpolation, on the same replicate values.
    est = r.estimate("average_cut_auc")
    assert est.optimism_lower == pytest.approx(np.percentile(boot - test, 2.5), rel=1e-12)
    assert est.optimism_upper == pytest.approx(np.percentile(boot - test, 97.5), rel=1e-12)
    assert (est.test_lower, est.test_upper) == pytest.approx(tuple(np.percentile(test, [2.5, 97.5])), rel=1e-12)
    frame = r.to_frame()
    assert list(frame["measure"]) == [e.measure for e in r.estimates]
    # Calibration slope and intercept are not error rates: no .632 estimates (NaN in the table, null in JSON).
    slope_rows = frame[frame["kind"].isin(["slope", "intercept"])]
    assert frame["estimate_632plus"].dtype == float and slope_rows["estimate_632plus"].isna().all()
    assert frame[frame["kind"] == "concordance"]["estimate_632plus"].notna().all()
    assert frame.shape[0] == 15  # 3 levels: 2 cut AUCs, 3 ordinal C's, 3 overall, 1 + 2 slopes, 2 CITL, 2 ICI
    text = json.dumps(r.to_dict(), allow_nan=False)
    assert "replicate_values" in text
    assert "optimism" in internal_validation_summary(r)


# --------------------------------------------------------------------------
# Shrunken model
# --------------------------------------------------------------------------


def test_shrunken_model_file(small_study, small_result, tmp_path):
    cohort = load_cohorts(small_study).derivation
    derivation = derive(small_study, cohort.frame, cohort.y)
    parent_path = save_model(model_from_fit(derivation.fit, derivation.design, outcome=outcome_of(small_study)), tmp_path / "model.json")
    parent = load_model(parent_path)
    factor = small_result.shrinkage.bootstrap
    path = write_shrunken_model(parent_path, factor=factor, frame=cohort.frame, y=cohort.y)
    assert path == tmp_path / "model_shrunk.json"
    shrunk = load_model(path)
    np.testing.assert_allclose(shrunk.coef, factor * parent.coef, rtol=1e-15)
    assert shrunk.provenance["parent_sha256"] == parent.digest()
    assert shrunk.provenance["shrinkage_factor"] == factor
    # Thresholds re-estimated by ML with the shrunken LP as offset, checked
    # against a direct maximisation of the same likelihood with scipy 1.17's
    # Nelder-Mead (tolerance 1e-5 for its stopping rule).
    from scipy import optimize, special

    lp = factor * parent.linear_predictor(cohort.frame)
    y = cohort.y

    def negloglik(theta):
        cum = np.column_stack([np.zeros_like(lp), special.expit(theta[None, :] - lp[:, None]), np.ones_like(lp)])
        p = cum[np.arange(y.size), y + 1] - cum[np.arange(y.size), y]
        return -np.sum(np.log(p)) if np.all(p > 0) else np.inf  # thresholds out of order

    best = optimize.minimize(negloglik, parent.thresholds, method="Nelder-Mead", options={"xatol": 1e-9, "fatol": 1e-12, "maxiter": 10000})
    np.testing.assert_allclose(shrunk.thresholds, best.x, atol=1e-5)
    with pytest.raises(Exception, match="already exists"):
        write_shrunken_model(parent_path, factor=factor, frame=cohort.frame, y=cohort.y)
    with pytest.raises(RiskvetError, match="factor"):
        shrink_model(parent, factor=0.0, frame=cohort.frame, y=cohort.y)


# --------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------


def test_bad_input(small_study):
    cohort = load_cohorts(small_study).derivation
    with pytest.raises(RiskvetError, match="study"):
        validate_internally({"study": 1}, cohort, n_boot=2, seed=1)
    with pytest.raises(RiskvetError, match="n_boot"):
        validate_internally(small_study, cohort, n_boot=0, seed=1)
    with pytest.raises(RiskvetError, match="seed"):
        validate_internally(small_study, cohort, n_boot=2, seed=-1)
    with pytest.raises(RiskvetError, match="n_jobs"):
        validate_internally(small_study, cohort, n_boot=2, seed=1, n_jobs=0)
    with pytest.raises(RiskvetError, match="data"):
        validate_internally(small_study, [1, 2, 3], n_boot=2, seed=1)
    with pytest.raises(RiskvetError, match="y"):
        validate_internally(small_study, (cohort.frame, cohort.y[:-1]), n_boot=2, seed=1)
    with pytest.raises(RiskvetError, match="missing columns"):
        validate_internally(small_study, (cohort.frame.drop(columns="age"), cohort.y), n_boot=2, seed=1)
    with pytest.raises(RiskvetError, match="n_rows"):
        bootstrap_indices(0, n_boot=2, seed=1)
    with pytest.raises(RiskvetError, match="measure"):
        validate_internally(small_study, cohort, n_boot=2, seed=1, progress=False).estimate("accuracy")


# --------------------------------------------------------------------------
# The stage and its notebook
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def stage_folder(tmp_path_factory):
    path = tmp_path_factory.mktemp("stage")
    study_path = new_study_folder(path, n_derivation=300, n_validation=60, n_ratings=20, n_boot=6, missing_data="complete_case")
    raw = yaml.safe_load(study_path.read_text(encoding="utf-8"))
    raw["selection"]["method"] = "none"
    raw["predictors"]["exclude"] = RARE
    raw["internal_validation"].update({"cv_folds": 3, "cv_repeats": 1, "shrink": True, "max_failed_share": 0.5})
    raw["compute"]["n_jobs"] = 1
    study_path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    return study_path


def frozen_model(study_path: Path, record: Path) -> Path:
    study = load_study(study_path)
    cohort = load_cohorts(study).derivation
    derivation = derive(study, cohort.frame, cohort.y)
    return save_model(model_from_fit(derivation.fit, derivation.design, outcome=outcome_of(study)), record / "models" / "model.json")


def test_stage_writes_results_figures_and_shrunken_model(stage_folder, tmp_path):
    from riskvet.chain.stagekit import stage_context
    from riskvet.chain.stages import internal_validation as stage

    record = tmp_path / "record"
    frozen_model(stage_folder, record)
    ctx = stage_context("internal_validation", study_path=stage_folder, record_dir=record)
    out = stage.run(ctx)
    results = json.loads((record / "results" / "internal_validation.json").read_text(encoding="utf-8"))
    assert set(results) >= {"bootstrap", "crossval", "shrunken_model", "figures", "texts", "model_check"}
    assert results["bootstrap"]["n_boot"] == 6
    assert results["crossval"]["n_folds"] == 3
    assert results["shrunken_model"] == "models/model_shrunk.json"
    assert "exactly the terms" in results["model_check"]
    for name in ("optimism", "calibration_slopes", "selection_frequency"):
        assert (record / "figures" / "internal_validation" / f"{name}.png").stat().st_size > 1000
        assert (record / "figures" / "internal_validation" / f"{name}.svg").is_file()
    assert load_model(record / "models" / "model_shrunk.json").provenance["parent_sha256"] == load_model(record / "models" / "model.json").digest()
    assert out.to_frame().shape[0] == 15
    assert out.crossval_frame().shape[0] == 15
    # Deterministic content: a second record from the same study has the same results file.
    record2 = tmp_path / "record2"
    frozen_model(stage_folder, record2)
    stage.run(stage_context("internal_validation", study_path=stage_folder, record_dir=record2))
    assert (record2 / "results" / "internal_validation.json").read_text() == (record / "results" / "internal_validation.json").read_text()
    with pytest.raises(RiskvetError, match="already exists"):
        stage.run(ctx)


def test_stage_shows_progress_on_a_terminal_only(monkeypatch):
    import io
    import sys

    from riskvet.chain.stages import internal_validation as stage

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    monkeypatch.setattr(sys, "stderr", io.StringIO())
    assert stage._on_terminal() is False
    monkeypatch.setattr(sys, "stderr", Terminal())
    assert stage._on_terminal() is True


def test_notebook_template_is_stored_clean():
    import nbformat

    path = Path(__file__).resolve().parents[1] / "templates" / "internal_validation.ipynb"
    nb = nbformat.read(path, as_version=4)
    nbformat.validate(nb)
    assert nb.cells[0].cell_type == "markdown" and "not clearance for clinical use" in nb.cells[0].source
    params = nb.cells[1]
    assert "parameters" in params.metadata.get("tags", [])
    assert params.source.splitlines() == ['study_path = ""', 'record_dir = ""', 'model_path = ""']
    assert 'open_stage("internal_validation", globals())' in nb.cells[2].source
    for cell in nb.cells:
        if cell.cell_type == "code":
            assert cell.outputs == [] and cell.execution_count is None


def test_notebook_runs_with_short_output(stage_folder, tmp_path):
    papermill = pytest.importorskip("papermill")
    record = tmp_path / "record"
    frozen_model(stage_folder, record)
    template = Path(__file__).resolve().parents[1] / "templates" / "internal_validation.ipynb"
    executed = tmp_path / "executed.ipynb"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        papermill.execute_notebook(
            str(template), str(executed),
            parameters={"study_path": str(stage_folder), "record_dir": str(record), "model_path": ""},
            kernel_name="python3", progress_bar=False, cwd=str(tmp_path),
        )
    import nbformat

    nb = nbformat.read(executed, as_version=4)
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs]
    streams = "".join(o["text"] for o in outputs if o.get("output_type") == "stream")
    progress = [o for o in outputs if "done" in o.get("data", {}).get("text/plain", "")]
    # The stage shows progress only on a terminal: the reviewer's notebook
    # holds no progress line and no run time (times are in the manifest).
    assert progress == []
    assert " s left" not in streams and "done in" not in streams
    assert streams.count("\n") < 5
    assert (record / "results" / "internal_validation.json").is_file()
