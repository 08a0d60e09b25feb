"""Multiple imputation through the chain: the study file, the cohorts, the pooled model, the validations, the record.

The shared small demo record of conftest imputes (the demo study sets
``missing_data.method: multiple_imputation``, m = 5, the auxiliary column
``event``).  These tests check what ``riskvet run`` wrote against
computations made here with general-purpose libraries: statsmodels'
``OrderedModel`` fitted on each completed data set and pooled by Rubin's
rules by hand, and scikit-learn's ``roc_auc_score`` per completed
validation set pooled on the logit scale.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
import yaml
from scipy import stats, special
from sklearn.metrics import roc_auc_score
from statsmodels.miscmodels.ordinal_model import OrderedModel

from riskvet.chain.scaffold import new_study_folder
from riskvet.errors import DataError, DesignError, StudyError
from riskvet.imputation.procedure import (cohort_seed, completed_cohort, derive_imputed, imputations_needed, impute_cohort,
                                          missing_cell_share, pool_fits)
from riskvet.intake.data import complete_rows, load_cohorts, prepare_cohort
from riskvet.intake.study import load_study
from riskvet.modelling.fitter import fit_cumulative
from riskvet.modelling.modelfile import load_model
from riskvet.validation.bootstrap import validate_internally


def _results(result, stage: str) -> dict:
    return json.loads((result.record_dir / "results" / f"{stage}.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def study(chain):
    return load_study(chain.manifest["study"]["path"])


# -- the study file --------------------------------------------------------------------------------------


def _study_with(tmp_path, missing_data: dict, **other):
    path = new_study_folder(tmp_path / "s", n_derivation=200, n_validation=150, n_ratings=30, n_boot=2)
    content = yaml.safe_load(path.read_text(encoding="utf-8"))
    content["missing_data"] = missing_data
    for key, value in other.items():
        content[key] = {**content.get(key, {}), **value}
    path.write_text(yaml.safe_dump(content), encoding="utf-8")
    return path


@pytest.mark.parametrize("section, fragment", [
    ({"method": "multiple_imputation", "m": 1}, "missing_data.m"),
    ({"method": "multiple_imputation", "mice": 3}, "missing_data.mice"),
    ({"method": "complete_case", "m": 10}, "only for method multiple_imputation"),
    ({"method": "multiple_imputation", "auxiliary": ["age"]}, "'age' is a predictor"),
    ({"method": "multiple_imputation", "auxiliary": ["disposition"]}, "'disposition' is the outcome"),
    ({"method": "multiple_imputation", "methods": {"sex": "pmm"}}, "'sex' is categorical"),
    ({"method": "multiple_imputation", "methods": {"age": "logistic"}}, "'age' is a number"),
    ({"method": "multiple_imputation", "methods": {"height": "pmm"}}, "'height' is not a predictor in analysis"),
    ({"method": "multiple_imputation", "iterations": 0}, "missing_data.iterations"),
    ({"method": "pairwise"}, "missing_data.method"),
])
def test_study_file_refuses_impossible_missing_data_settings(tmp_path, section, fragment):
    path = _study_with(tmp_path, section)
    with pytest.raises(StudyError, match=fragment.replace("(", r"\(").replace(")", r"\)")):
        load_study(path)


def test_penalised_selection_with_imputation_is_refused_with_the_reason(tmp_path):
    path = _study_with(tmp_path, {"method": "multiple_imputation"}, selection={"method": "lasso"})
    with pytest.raises(StudyError, match="no Rubin's-rules pooling"):
        load_study(path)


# -- the cohorts ----------------------------------------------------------------------------------------


def test_incomplete_rows_are_kept_and_only_a_missing_outcome_excludes(study):
    cohorts = load_cohorts(study)
    d = cohorts.derivation
    assert d.missing == "multiple_imputation"
    assert list(d.exclusions["reason"]) == ["missing outcome"]
    # pandas isna count: the incomplete rows are there, with their missing values
    assert d.n_incomplete == int(d.frame[list(d.predictors)].isna().any(axis=1).sum()) > 0
    assert "event" in d.frame.columns and d.auxiliary == ("event",)
    full = complete_rows(d)
    assert full.n_analysed == d.n_analysed - d.n_incomplete and not full.frame[list(d.predictors)].isna().any().any()


def test_rule_of_thumb_for_the_number_of_imputations():
    # White, Royston & Wood 2011, section 7: m at least the percentage of incomplete cases
    assert imputations_needed(0.77) == 23
    assert imputations_needed(0.98) == 5  # at least 5
    assert imputations_needed(0.0) == 100  # at most 100
    assert imputations_needed(0.865) == 14
    with pytest.raises(DataError):
        imputations_needed(1.5)


# -- the pooled model -----------------------------------------------------------------------------------


def _ordered_model(X: pd.DataFrame, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """statsmodels 0.15 OrderedModel (logit, Newton), as (thresholds then coefficients, their covariance)."""
    model = OrderedModel(y, X.to_numpy(dtype=float), distr="logit")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = model.fit(method="newton", disp=False, maxiter=200, tol=1e-12)
    p = X.shape[1]
    par = np.asarray(res.params)
    theta = model.transform_threshold_params(par)[1:-1]
    # statsmodels keeps the first threshold and log increments: theta_j = c_0 + sum_{i <= j} exp(u_i); delta method
    K1 = theta.size
    J = np.zeros((K1 + p, K1 + p))
    J[:K1, p] = 1.0
    for j in range(K1):
        for i in range(1, j + 1):
            J[j, p + i] = np.exp(par[p + i])
    J[K1:, :p] = np.eye(p)
    return np.r_[theta, par[:p]], J @ np.asarray(res.cov_params()) @ J.T


def test_the_frozen_model_is_the_rubin_pooling_of_statsmodels_fits_on_each_completed_data_set(chain, study):
    model = load_model(chain.record_dir / "models" / "model.json")
    provenance = model.provenance["missing_data"]
    assert provenance["m"] == 5 and provenance["outcome_in_imputation_models"] is True
    cohort = load_cohorts(study).derivation
    completed = list(impute_cohort(study, cohort))  # the same seed and m: the same imputations as the record's
    design = model.design
    fits = [_ordered_model(design.transform(c), np.asarray(cohort.y)) for c in completed]
    P = np.vstack([f[0] for f in fits])
    estimate = P.mean(axis=0)
    W = np.mean([f[1] for f in fits], axis=0)
    B = np.cov(P, rowvar=False, ddof=1)
    T = W + (1 + 1 / len(fits)) * B  # Rubin 1987, the total variance
    content = json.loads((chain.record_dir / "models" / "model.json").read_text(encoding="utf-8"))
    table = pd.DataFrame(_results(chain, "derivation")["parameters"])
    assert np.allclose(table["estimate"].to_numpy(dtype=float), estimate, rtol=1e-6, atol=1e-6), (table["estimate"].to_numpy(), estimate)
    assert np.allclose(table["se"].to_numpy(dtype=float), np.sqrt(np.diag(T)), rtol=1e-4)
    assert np.allclose(model.thresholds, estimate[: len(model.thresholds)], rtol=1e-6, atol=1e-6)
    assert content["provenance"]["missing_data"]["pooling"].startswith("Rubin's rules")


def test_pool_fits_by_hand_and_the_d1_test():
    rng = np.random.default_rng(5)
    n = 300
    X = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n)})
    y = (X["a"] * 0.8 + rng.logistic(size=n) > 0).astype(int).to_numpy()
    fits = []
    for j in range(4):
        Xj = X.copy()
        Xj["b"] = Xj["b"] + rng.normal(scale=0.3, size=n)  # stand-ins for completed data sets that differ
        fits.append(fit_cumulative(Xj, y))
    pooled, rubin = pool_fits(fits, df_complete=n - 3)
    P = np.vstack([f.params.to_numpy() for f in fits])
    W = np.mean([f.cov.to_numpy() for f in fits], axis=0)
    B = np.cov(P, rowvar=False)
    T = W + 1.25 * B
    assert np.allclose(pooled.params.to_numpy(), P.mean(axis=0)) and np.allclose(pooled.cov.to_numpy(), T)
    assert math.isnan(pooled.loglik) and math.isnan(pooled.aic)
    # Li, Raghunathan & Rubin 1991 (D1): q' W^-1 q / (k (1 + r1)), r1 = (1 + 1/m) tr(B W^-1)/k, F(k, v1)
    q, k, m = P.mean(axis=0)[1:], 2, 4
    r1 = 1.25 * np.trace(B[1:, 1:] @ np.linalg.inv(W[1:, 1:])) / k
    d1 = q @ np.linalg.solve(W[1:, 1:], q) / (k * (1 + r1))
    t = k * (m - 1)
    v1 = 4 + (t - 4) * (1 + (1 - 2 / t) / r1) ** 2
    assert pooled.lr_test.df == 2 and math.isclose(pooled.lr_test.statistic, k * d1, rel_tol=1e-10)
    assert math.isclose(pooled.lr_test.p, stats.f.sf(d1, k, v1), rel_tol=1e-8)
    assert np.allclose(rubin.estimate, P.mean(axis=0))


def test_the_stacked_selection_weights_each_row_by_the_observed_share(study):
    cohort = load_cohorts(study).derivation
    completed = list(impute_cohort(study, cohort, m=2))
    f = missing_cell_share(cohort.frame, cohort.predictors)
    # pandas isna mean over the candidate predictors' cells
    assert math.isclose(f, float(cohort.frame[list(cohort.predictors)].isna().to_numpy().mean()))
    derivation = derive_imputed(study, completed, cohort.y, missing_share=f)
    assert math.isclose(derivation.stacked_weight, (1 - f) / 2) and derivation.m == 2 and len(derivation.fits) == 2


# -- the validations ------------------------------------------------------------------------------------


def test_internal_validation_resampled_then_imputed(chain):
    content = _results(chain, "internal_validation")
    assert content["bootstrap"]["n_imputations"] == 5
    assert content["bootstrap"]["imputation_scheme"] == "resample, then impute each resample"
    assert "Wahl et al. 2016" in content["texts"]["imputation"]
    # the cross-validation (the demo's cv_repeats: 1) imputes inside every fold as well
    assert content["crossval"] is not None and "held-out fold was imputed on its own" in content["texts"]["crossval"]


def test_validation_c_is_pooled_on_the_logit_scale_as_computed_by_hand(chain, study):
    content = _results(chain, "external_validation")
    label = study.data.validation[0].label
    pooled = content["imputed"][label]
    assert pooled["m"] == 5
    rows = {(r["measure"], r["cut"]): r for r in pooled["measures"]}
    model = load_model(chain.record_dir / "models" / "model.json")
    cohorts = load_cohorts(study)
    cohort = cohorts.validation[label]
    imputations = impute_cohort(study, cohort, seed=cohort_seed(study, 1))
    y = np.asarray(cohort.y)
    for cut in range(2):
        # scikit-learn 1.9 roc_auc_score in each completed data set, pooled on the logit scale (Marshall et al. 2009)
        cs = []
        for j in range(imputations.m):
            prob = model.predict_proba(completed_cohort(cohort, imputations.completed(j)).frame)
            c = roc_auc_score(y > cut, prob[:, cut + 1:].sum(axis=1))
            cs.append(special.logit(c))
        expected = special.expit(np.mean(cs))
        assert math.isclose(rows[("c", cut)]["estimate"], expected, rel_tol=1e-9), (rows[("c", cut)], expected)
        assert rows[("c", cut)]["lower"] < expected < rows[("c", cut)]["upper"]
        assert rows[("c", cut)]["df"] > 0


def test_pages_show_the_missing_data_sections(chain):
    page = (chain.record_dir / "html" / "02_derivation.html").read_text(encoding="utf-8")
    for words in ("Missing data", "Complete cases, as a sensitivity analysis", "Rubin's rules", "Wood, White &amp; Royston 2008"):
        assert words in page, words
    assert (chain.record_dir / "figures" / "derivation" / "imputation_chains.png").is_file()
    assert "excluded for a missing outcome (missing predictor values were multiply imputed" in page
    assert "complete-case analysis)" not in page.split("Missing data")[0]
    external = (chain.record_dir / "html" / "06_external_validation.html").read_text(encoding="utf-8")
    assert "Pooled over the imputations" in external
    assert "resample first, then impute" in (chain.record_dir / "html" / "04_internal_validation.html").read_text(encoding="utf-8")
    summary = (chain.record_dir / "html" / "08_summary.html").read_text(encoding="utf-8")
    assert "rows analysed (missing predictor values multiply imputed)" in summary and "(complete cases)" not in summary
    cc = _results(chain, "derivation")["missing_data"]["complete_case_sensitivity"]
    assert cc["n_complete"] < cc["n_analysed"] and cc["terms_complete_case"] is not None


def test_one_person_missing_a_predictor_is_refused_by_name(chain):
    model = load_model(chain.record_dir / "models" / "model.json")
    values = {name: 1.0 for name in model.design.sources}
    for name in model.design.sources:
        if name == "sex":
            values[name] = "male"
    values[model.design.sources[0]] = float("nan")
    with pytest.raises(DesignError, match=f"no value for \\['{model.design.sources[0]}'\\]"):
        model.score_person(values)


def test_imputed_internal_validation_is_the_same_for_one_or_two_workers(tmp_path):
    path = _study_with(tmp_path, {"method": "multiple_imputation", "m": 2, "iterations": 3})
    study = load_study(path)
    cohort = load_cohorts(study).derivation
    one = validate_internally(study, cohort, n_boot=2, seed=3, n_jobs=1, progress=False)
    two = validate_internally(study, cohort, n_boot=2, seed=3, n_jobs=2, progress=False)
    assert one.n_imputations == 2 and one.n_succeeded == 2
    pd.testing.assert_frame_equal(one.to_frame(), two.to_frame())


def test_prepare_cohort_under_imputation_keeps_rows_a_complete_case_analysis_drops(study):
    frame = pd.read_csv(study.data.derivation)
    cc = prepare_cohort(study, frame, missing="complete_case")
    mi = prepare_cohort(study, frame, missing="multiple_imputation")
    assert mi.n_analysed - cc.n_analysed == mi.n_incomplete > 0


def test_check_says_what_the_imputation_will_do(tmp_path, capsys):
    from riskvet.chain.cli import main

    path = _study_with(tmp_path, {"method": "multiple_imputation"})
    assert main(["check", str(path)]) == 0
    printed = capsys.readouterr().out
    line = next(row for row in printed.splitlines() if row.startswith("multiple imputation:"))
    cohort = load_cohorts(load_study(path)).derivation
    share = cohort.n_incomplete / cohort.n_analysed
    # White, Royston & Wood 2011: m at least the percentage of incomplete cases (at least 5)
    assert f"{share:.1%}" in line and f"m = {imputations_needed(1 - share)} by the rule of thumb" in line
    assert "exclusions (missing outcome only: predictors are imputed)" in printed


def test_rows_alike_in_every_completed_data_set_are_kept_once_with_the_same_result(study):
    # the weighted likelihood of m identical rows of weight w is that of one row of weight m w (common practice)
    from riskvet.modelling.derive import candidate_design
    from riskvet.modelling.folds import cluster_codes
    from riskvet.modelling.selection import select_terms

    cohort = load_cohorts(study).derivation
    completed = list(impute_cohort(study, cohort, m=3))
    f = missing_cell_share(cohort.frame, cohort.predictors)
    derivation = derive_imputed(study, completed, cohort.y, missing_share=f)
    stacked = pd.concat(completed, ignore_index=True)
    design = candidate_design(study, stacked)
    n = len(cohort.y)
    full = select_terms(design.transform(stacked), np.tile(cohort.y, 3), groups=design.term_columns,
                        forced=[t for t in study.predictors.forced if t in design.term_columns], method=study.selection.method,
                        n_folds=study.selection.folds, seed=study.selection.seed, link=study.model.link,
                        proportional=study.model.proportional, weights=np.full(3 * n, (1 - f) / 3),
                        clusters=cluster_codes(np.tile(np.arange(n), 3)))
    assert full.terms == derivation.selection.terms
    np.testing.assert_allclose(derivation.selection.cv["mean_test_loglik"].to_numpy(), full.cv["mean_test_loglik"].to_numpy(),
                               rtol=1e-10, atol=1e-12)


def test_the_complete_case_counts_never_show_a_small_number():
    from riskvet.chain.stages.imputed import complete_case_sentence, published_counts

    # 996 of 1,000 complete would give away 4 incomplete people (common practice: a count below 5 is not published)
    info = {"n_complete": 996, "n_analysed": 1000, "terms_imputed": ["age"], "terms_complete_case": ["age"]}
    shown = published_counts(info, min_cell_count=5)
    assert shown["n_complete"] == shown["n_analysed"] == "suppressed"
    text = complete_case_sentence(info, min_cell_count=5)
    assert "996" not in text and "1,000" not in text and "withheld" in text
    assert published_counts(info | {"n_complete": 700}, min_cell_count=5)["n_complete"] == 700


def test_the_share_of_missing_cells_is_rounded_or_withheld():
    from riskvet.chain.stages.imputed import _share_words

    # f n p is the number of missing cells: 3 of 8,000 would show a small count, so f is not shown
    assert "not shown" in _share_words(3 / 8000, cells=3, min_cell_count=5)
    assert _share_words(0.012345, cells=98.8, min_cell_count=5) == "f = 0.012"
