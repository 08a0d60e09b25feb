"""Tests for riskvet.validation.update and the updating stage.

References: statsmodels 0.15 (GLM Binomial with offset, Logit, OrderedModel
with offset) for the fits; the demo's known truth (riskvet.demo: the
validation season shifts both thresholds by +0.5 with unchanged
coefficients) for the choice of the closed test.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize, stats
from statsmodels.miscmodels.ordinal_model import OrderedModel

from riskvet.reporting.sentences.updating import update_summary
from riskvet import demo
from riskvet.intake.design import build_design
from riskvet.errors import DataError, ModelFileError, RecordError, RiskvetError
from riskvet.modelling.modelfile import load_model, model_from_fit, save_model
from riskvet.modelling.fitter import fit_cumulative
from riskvet.intake.study import PredictorSpec
from riskvet.validation.update import (
    METHOD_NAMES,
    METHODS,
    UpdateFit,
    closed_test,
    extend,
    frame_digest,
    method_label,
    method_name,
    recalibrate,
    recalibrate_in_the_large,
    revise,
    update_model,
)

LINEAR = ["heart_rate", "systolic_bp", "resp_rate", "confusion", "collapse", "vomiting", "dry_skin", "wbgt", "prior_heat_illness"]
TEMPLATES = Path(__file__).resolve().parents[1] / "templates"
OUTCOME = {"column": "disposition", "type": "ordinal", "levels": list(demo.LEVELS), "labels": {}}


def codes(frame: pd.DataFrame) -> np.ndarray:
    return pd.Categorical(frame["disposition"], categories=demo.LEVELS).codes.astype(np.int64)


def fit_model(frame: pd.DataFrame, y: np.ndarray, outcome=OUTCOME):
    design = build_design(frame, linear=LINEAR, splines={"core_temp": 4, "age": 4}, categorical={"sex": "female"})
    return model_from_fit(fit_cumulative(design.transform(frame), y), design, outcome=outcome, provenance={"note": "test"})


@pytest.fixture(scope="module")
def model():
    # A large derivation sample (20,000) keeps the model's own estimation
    # error small: an LR test of an update against revision on n = 1,000 new
    # patients has its type I error inflated by roughly (1 + 1000/20000) when
    # the original coefficients are estimates, so the closed test behaves
    # close to its nominal level here (common practice; see the module notes).
    d = demo.draw(20000, season="derivation", seed=11)
    return fit_model(d, codes(d))


@pytest.fixture(scope="module")
def binary_model():
    d = demo.draw(4000, season="derivation", seed=12)
    y = (codes(d) == 2).astype(np.int64)  # transferred vs not
    outcome = {"column": "transferred", "type": "binary", "levels": ["no", "yes"], "labels": {}}
    return fit_model(d, y, outcome)


def validation(n: int, seed: int, season: str = "validation"):
    v = demo.draw(n, season=season, seed=seed)
    return v, codes(v)


# ---------------------------------------------------------------------------
# Against statsmodels
# ---------------------------------------------------------------------------


def test_binary_in_the_large_matches_statsmodels_glm_with_offset(binary_model):
    v = demo.draw(800, season="validation", seed=3)
    y = (codes(v) == 2).astype(np.int64)
    fit = recalibrate_in_the_large(binary_model, v, y)
    lp = binary_model.linear_predictor(v)
    theta = binary_model.thresholds[0]
    # P(y = 1) = 1 - expit(theta + d - lp) = expit(lp - theta - d): a GLM with
    # an intercept c and offset lp - theta has c = -d.  statsmodels 0.15 GLM
    # (IRLS, tol 1e-10).
    ref = sm.GLM(y, np.ones((y.size, 1)), family=sm.families.Binomial(), offset=lp - theta).fit(tol=1e-12)
    # 1e-7: both fitters converge to about 1e-10 in the score.
    assert fit.parameters["shift"] == pytest.approx(-ref.params[0], abs=1e-7)
    assert fit.parameters["shift_se"] == pytest.approx(ref.bse[0], rel=1e-5)
    assert fit.loglik == pytest.approx(ref.llf, abs=1e-7)
    assert fit.n_params == 1


def test_binary_update_has_one_recalibration_in_the_large(binary_model):
    v = demo.draw(800, season="validation", seed=15)
    y = (codes(v) == 2).astype(np.int64)
    result = update_model(binary_model, v, y)
    # for K = 2 the common shift and the re-estimated threshold are one model
    assert list(result.fits) == ["original", "in_the_large", "recalibration", "revision"]
    assert [t.simpler for t in result.closed_test.tests] == ["original", "in_the_large", "recalibration"]


def test_updates_are_named_in_words(model, binary_model):
    # Sentences, labels and legends name the updates in words, never by their keys.
    keys = [m for m in METHODS if "_" in m]
    v, y = validation(600, 21)
    ordinal = update_model(model, v, y)
    vb = demo.draw(600, season="validation", seed=22)
    binary = update_model(binary_model, vb, (codes(vb) == 2).astype(np.int64))
    for result in (ordinal, binary):
        words = update_summary(result) + " " + result.closed_test.reason + " " + " ".join(f.label for f in result.fits.values())
        assert not any(k in words for k in keys)
        assert " LP" not in words and "(lp" not in words.lower()
    # a binary model has one threshold: its recalibrations re-estimate "the intercept"
    assert binary.fits["in_the_large"].label == method_label("in_the_large", binary=True)
    assert "intercept" in binary.fits["recalibration"].label and "intercept" not in ordinal.fits["recalibration"].label
    assert method_name("in_the_large", binary=True) == "recalibration in the large"
    assert set(METHOD_NAMES) == set(METHODS)
    # the optimism warning can be left to the notebook
    assert "optimistic" not in update_summary(ordinal, caution=False)


def test_binary_recalibration_matches_statsmodels_logit(binary_model):
    v = demo.draw(800, season="validation", seed=4)
    y = (codes(v) == 2).astype(np.int64)
    fit = recalibrate(binary_model, v, y)
    lp = binary_model.linear_predictor(v)
    # logit P(y = 1) = b lp - a: statsmodels 0.15 Logit on [1, lp] has
    # const = -a and slope = b.
    ref = sm.Logit(y, np.column_stack([np.ones(y.size), lp])).fit(disp=0, tol=1e-12, maxiter=100)
    assert fit.parameters["slope"] == pytest.approx(ref.params[1], abs=1e-6)
    assert fit.parameters["thresholds"][0] == pytest.approx(-ref.params[0], abs=1e-5)
    assert fit.parameters["slope_se"] == pytest.approx(ref.bse[1], rel=1e-4)
    assert fit.loglik == pytest.approx(ref.llf, abs=1e-7)
    # the updated model's coefficients are b * beta
    np.testing.assert_allclose(fit.model.coef, fit.parameters["slope"] * binary_model.coef, rtol=1e-12)


def test_ordinal_thresholds_with_offset_match_statsmodels_orderedmodel(model):
    v, y = validation(800, 5)
    fit = recalibrate_in_the_large(model, v, y, thresholds=True)
    lp = model.linear_predictor(v)
    # statsmodels 0.15 OrderedModel states P(Y <= j) = F(cut_j - x b - offset)
    # as riskvet does; with no exog and the LP as offset it re-estimates the
    # thresholds only.  The offset is centred (the uncentred LP puts the
    # thresholds near 44, far from BFGS's start at 0) and the centre added
    # back.  BFGS to gtol 1e-10; 1e-5 allows for its stopping rule.
    centre = lp.mean()
    om = OrderedModel(y, None, offset=lp - centre, distr="logit")
    res = om.fit(method="bfgs", disp=0, gtol=1e-10, maxiter=1000)
    ref = om.transform_threshold_params(res.params)[1:-1] + centre
    np.testing.assert_allclose(fit.model.thresholds, ref, atol=1e-5)
    assert fit.loglik == pytest.approx(res.llf, abs=1e-6)
    assert fit.n_params == 2


def test_ordinal_common_shift_maximises_the_statsmodels_likelihood(model):
    v, y = validation(800, 6)
    fit = recalibrate_in_the_large(model, v, y)
    lp = model.linear_predictor(v)
    theta = model.thresholds
    # The common-shift model is OrderedModel's likelihood with the LP as its
    # one column, coefficient fixed at 1 and thresholds theta + d.  statsmodels
    # 0.15 parameterises thresholds as (first, log increments).
    om = OrderedModel(y, lp[:, None], distr="logit")

    def negll(d):
        t = theta + d
        return -om.loglike(np.r_[1.0, t[0], np.log(np.diff(t))])

    ref = optimize.minimize_scalar(negll, bounds=(-3, 3), method="bounded", options={"xatol": 1e-10})
    # 1e-6: the bounded scalar search stops at xatol 1e-10 on a smooth, concave function.
    assert fit.parameters["shift"] == pytest.approx(ref.x, abs=1e-6)
    assert fit.loglik == pytest.approx(-ref.fun, abs=1e-8)
    np.testing.assert_allclose(fit.model.thresholds, theta + fit.parameters["shift"], rtol=0, atol=1e-12)


def test_revision_matches_statsmodels_orderedmodel(model):
    v, y = validation(1000, 7)
    fit = revise(model, v, y)
    X = model.design.transform(v)
    # statsmodels 0.15 OrderedModel on the same design columns, centred (which
    # moves the thresholds only), BFGS to gtol 1e-8.
    om = OrderedModel(y, X - X.mean(), distr="logit")
    res = om.fit(method="bfgs", disp=0, gtol=1e-8, maxiter=5000)
    # 1e-4 on the log-likelihood and 1e-3 on the coefficients: BFGS stops
    # near, not at, the maximum.
    assert fit.loglik == pytest.approx(res.llf, abs=1e-4)
    np.testing.assert_allclose(fit.model.coef, res.params[: X.shape[1]], atol=1e-3)
    assert fit.n_params == 2 + X.shape[1]


# ---------------------------------------------------------------------------
# The closed test on the demo's known shift
# ---------------------------------------------------------------------------


def test_closed_test_chooses_recalibration_in_the_large_for_the_known_shift(model):
    # Demo truth: the validation season raises both thresholds by 0.5 with the
    # same coefficients, so the right update is one common shift of +0.5.
    v, y = validation(1000, 1000)
    result = update_model(model, v, y, cohort="season 2026")
    test = result.closed_test
    assert test.tests[0].simpler == "original" and test.tests[0].extensive == "revision"
    assert test.tests[0].significant  # the shift is detected
    assert test.chosen == "in_the_large"
    shift = result.fits["in_the_large"].parameters
    # the estimate is within 3 standard errors of the true 0.5
    assert abs(shift["shift"] - demo.truth().threshold_shift) < 3 * shift["shift_se"]
    # every test is reported with its statistic, df and p (chi-squared upper tail)
    for t in test.tests:
        simpler, extensive = result.fits[t.simpler], result.fits[t.extensive]
        assert t.df == extensive.n_params - simpler.n_params
        assert t.statistic == pytest.approx(2 * (extensive.loglik - simpler.loglik))
        assert t.p == pytest.approx(stats.chi2.sf(t.statistic, t.df))
    assert [t.reached for t in test.tests] == [True, True, False, False]


def test_closed_test_choices_over_seeds(model):
    # Deterministic given the seeds; the bounds guard the procedure, and are
    # set from its behaviour under the demo truth.  Validation season: the
    # second test (in the large vs revision, 17 df) has type I error near 5%
    # in theory; on these seeds 16 of 20 choose in the large (4 revision:
    # the spline approximation of the truth's hinges fits the older, cooler
    # season a little differently).  Derivation population: 18 of 20 keep
    # the original (alpha 0.05 plus the inflation noted above).
    shifted = [update_model(model, *validation(1000, s)).closed_test.chosen for s in range(1000, 1020)]
    same = [update_model(model, *validation(1000, s, "derivation")).closed_test.chosen for s in range(1000, 1020)]
    assert shifted.count("in_the_large") >= 14
    assert shifted.count("original") == 0
    assert same.count("original") >= 16


def test_closed_test_keeps_the_original_on_the_derivation_population(model):
    v, y = validation(1000, 1000, "derivation")
    result = update_model(model, v, y)
    assert result.closed_test.chosen == "original"
    assert not result.closed_test.tests[0].significant
    assert [t.reached for t in result.closed_test.tests] == [True, False, False, False]
    assert "kept" in result.closed_test.reason


def _fit(method: str, n_params: int, loglik: float, model) -> UpdateFit:
    return UpdateFit(method, model, n_params, loglik, {}, True, ())


def test_closed_test_logic_on_set_likelihoods(model):
    # chi2 critical values at 0.05 (scipy): 1 df 3.84, 3 df 7.81, 10 df 18.31
    fits = [
        _fit("original", 0, -500.0, model),
        _fit("in_the_large", 1, -490.0, model),
        _fit("recalibration", 2, -489.9, model),
        _fit("revision", 12, -480.0, model),
    ]
    # revision vs original: LR 40 on 12 df (significant); in the large vs
    # revision: LR 20 on 11 df, p = 0.045 (significant); recalibration vs
    # revision: LR 19.8 on 10 df, p = 0.031 (significant) -> revision.
    t = closed_test(fits, alpha=0.05)
    assert t.chosen == "revision"
    assert [x.significant for x in t.tests] == [True, True, True]
    # at alpha 0.04 recalibration in the large is no longer significantly worse
    assert closed_test(fits, alpha=0.04).chosen == "in_the_large"
    # at alpha 0.01 the first test still rejects (p = 7e-5) but in the large does not
    assert closed_test(fits, alpha=0.01).chosen == "in_the_large"
    assert closed_test(fits, alpha=1e-6).chosen == "original"
    # a simpler update with the same number of parameters is the same model
    same = [_fit("original", 0, -500.0, model), _fit("recalibration", 3, -480.0, model), _fit("revision", 3, -480.0, model)]
    t = closed_test(same, alpha=0.05)
    assert t.chosen == "recalibration"
    assert t.tests[1].df == 0 and np.isnan(t.tests[1].p)


def test_closed_test_refuses_bad_input(model):
    with pytest.raises(RiskvetError, match="alpha"):
        closed_test([_fit("original", 0, -1.0, model), _fit("revision", 3, -0.5, model)], alpha=1.5)
    with pytest.raises(RiskvetError, match="original"):
        closed_test([_fit("revision", 3, -0.5, model)])
    with pytest.raises(RiskvetError, match="UpdateFit"):
        closed_test(["original", "revision"])


# ---------------------------------------------------------------------------
# Extension, performance, bootstrap
# ---------------------------------------------------------------------------


def test_extension_with_new_predictor_and_missing_rows(model):
    v, y = validation(800, 8)
    v = v.copy()
    v["cramps"] = v["cramps"].astype(float)
    v.loc[:9, "cramps"] = np.nan
    result = update_model(model, v, y, new_predictors={"cramps": PredictorSpec(form="linear")})
    assert result.n_dropped == 10 and result.n == 790
    ext = result.fits["extension"]
    assert result.closed_test.most_extensive == "extension"
    assert "cramps" in ext.model.design.columns
    assert ext.n_params == result.fits["revision"].n_params + 1
    assert ext.model.provenance["new_predictors"] == ["cramps"]
    # every update was fitted on the same 790 rows
    assert {f.model.provenance["updated_on"]["n"] for m, f in result.fits.items() if m != "original"} == {790}


def test_extend_refuses_known_or_no_columns(model):
    v, y = validation(300, 9)
    with pytest.raises(RiskvetError, match="new_predictors"):
        extend(model, v, y, new_predictors={})
    with pytest.raises(RiskvetError, match="already"):
        extend(model, v, y, new_predictors={"age": "linear"})


def test_performance_before_after_and_bootstrap_correction(model):
    v, y = validation(600, 10)
    result = update_model(model, v, y, n_boot=8, seed=4)
    table = result.performance.to_frame()
    chosen = result.closed_test.chosen
    assert set(table["method"]) == set(result.fits)
    # only the chosen update is corrected
    assert table.loc[table["method"] == chosen, "corrected"].notna().all()
    assert table.loc[table["method"] != chosen, "corrected"].isna().all()
    rows = table[table["method"] == chosen]
    np.testing.assert_allclose(rows["corrected"], rows["apparent"] - rows["optimism"])
    # the optimism warning is in the result
    assert any("optimistic" in w for w in result.warnings)
    assert "optimistic" in result.performance.note
    # the same seed gives the same correction
    again = update_model(model, v, y, n_boot=8, seed=4).performance.to_frame()
    pd.testing.assert_frame_equal(table, again)
    json.dumps(result.to_dict(), allow_nan=False)


# ---------------------------------------------------------------------------
# Model files
# ---------------------------------------------------------------------------


def test_updated_model_files_record_parent_method_and_data(model, tmp_path):
    v, y = validation(600, 11)
    result = update_model(model, v, y, cohort="season 2026")
    for method, fit in result.fits.items():
        if method == "original":
            assert fit.model is model
            continue
        prov = fit.model.provenance
        assert prov["parent_model_sha256"] == model.digest()
        assert prov["update_method"] == method
        assert prov["updated_on"]["cohort"] == "season 2026"
        assert prov["updated_on"]["data_sha256"] == frame_digest(v, y, columns=fit.model.design.sources)
        path = save_model(fit.model, tmp_path / f"{method}.json")
        with pytest.raises(ModelFileError, match="never overwritten"):
            save_model(fit.model, path)
        loaded = load_model(path)
        assert loaded.digest() == fit.model.digest()
        np.testing.assert_array_equal(loaded.predict_proba(v), fit.model.predict_proba(v))
    assert result.parent_sha256 == model.digest()


def test_frame_digest_depends_on_values_only():
    f = pd.DataFrame({"a": [1.0, 2.0], "b": ["x", "y"]})
    y = np.array([0, 1])
    assert frame_digest(f, y, columns=["a", "b"]) == frame_digest(f[["b", "a"]].set_axis([5, 6]), y, columns=["b", "a"])
    assert frame_digest(f, y, columns=["a", "b"]) != frame_digest(f, np.array([1, 0]), columns=["a", "b"])
    assert frame_digest(f, y, columns=["a"]) != frame_digest(f.assign(a=[1.0, 2.5]), y, columns=["a"])


# ---------------------------------------------------------------------------
# Bad input
# ---------------------------------------------------------------------------


def test_update_refuses_bad_input(model):
    v, y = validation(300, 12)
    with pytest.raises(RiskvetError, match="alpha"):
        update_model(model, v, y, alpha=0)
    with pytest.raises(RiskvetError, match="seed"):
        update_model(model, v, y, n_boot=5)
    with pytest.raises(RiskvetError, match="n_boot"):
        update_model(model, v, y, n_boot=-1)
    with pytest.raises(DataError, match="y"):
        update_model(model, v, y[:-1])
    with pytest.raises(DataError, match="every outcome level"):
        update_model(model, v, np.zeros(len(v), dtype=int))
    with pytest.raises(DataError, match="new predictors"):
        update_model(model, v, y, new_predictors={"not_there": "linear"})
    with pytest.raises(RiskvetError, match="PredictionModel"):
        update_model("model.json", v, y)


def test_non_proportional_model_is_refused(model):
    d = demo.draw(1500, season="derivation", seed=13)
    design = build_design(d, linear=["confusion", "wbgt"])
    fit = fit_cumulative(design.transform(d), codes(d), proportional=False)
    npo = model_from_fit(fit, design, outcome=OUTCOME)
    v, y = validation(300, 14)
    with pytest.raises(RiskvetError, match="non-proportional"):
        recalibrate_in_the_large(npo, v, y)


def test_methods_are_ordered_least_to_most_extensive():
    assert METHODS[0] == "original" and METHODS[-1] == "extension"


# ---------------------------------------------------------------------------
# The stage
# ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def record(tmp_path_factory):
    from riskvet.intake.data import load_cohorts
    from riskvet.chain.scaffold import new_study_folder
    from riskvet.intake.study import load_study

    folder = tmp_path_factory.mktemp("study")
    study_path = new_study_folder(folder, n_derivation=1500, n_validation=900, n_ratings=40, n_boot=5, missing_data="complete_case")
    text = study_path.read_text().replace("n_jobs: 2", "n_jobs: 1")
    study_path.write_text(text)
    study = load_study(study_path)
    cohort = load_cohorts(study).derivation
    record_dir = folder / "records" / "r1"
    save_model(fit_model(cohort.frame, cohort.y), record_dir / "models" / "model.json")
    return study_path, record_dir


def test_updating_stage_writes_new_model_files_and_refuses_a_second_run(record):
    import matplotlib

    matplotlib.use("Agg")
    from riskvet.chain.stagekit import stage_context
    from riskvet.chain.stages import updating

    study_path, record_dir = record
    ctx = stage_context("updating", study_path=study_path, record_dir=record_dir)
    parent = load_model(ctx.model_path)
    out = updating.run(ctx)
    assert set(out.model_files) == set(out.result.fits) - {"original"}
    for method, info in out.model_files.items():
        loaded = load_model(record_dir / info["path"])
        assert loaded.digest() == info["sha256"]
        assert loaded.provenance["parent_model_sha256"] == parent.digest()
        assert loaded.provenance["update_method"] == method
    saved = json.loads(ctx.results_path.read_text())
    assert saved["result"]["closed_test"]["chosen"] == out.result.closed_test.chosen
    assert "optimistic" in saved["texts"]["optimism"]
    assert all((record_dir / p).is_file() for p in out.figures.values())
    # tables for the notebook: updates, measures and outcomes in words, no missing-value markers
    assert list(out.tests_frame().columns[:3]) == ["step", "simpler model", "tested against"]
    perf = out.performance_frame()
    assert "original, on the updating data" in perf.columns and "original model" in out.coefficients_frame().columns
    assert not out.coefficients_frame()["parameter"].str.contains("|", regex=False).any()
    assert list(perf.columns[:2]) == ["measure", "outcome"] and not perf[["measure", "outcome"]].isna().any().any()
    assert not perf["measure"].str.contains("_").any() and "cut" not in perf.columns
    keys = [m for m in out.result.fits if "_" in m]
    shown = " ".join([*out.texts.values(), *map(str, out.tests_frame()[["simpler model", "tested against"]].to_numpy().ravel()),
                      *map(str, out.fits_frame()["update"]), *map(str, perf.columns), *map(str, out.coefficients_frame().columns)])
    assert not any(k in shown for k in keys)
    from riskvet.reporting.figures.external_validation import plot_update_calibration

    fig = plot_update_calibration(out.result)
    legend = " ".join(t.get_text() for ax in fig.axes for t in ax.get_legend().get_texts())
    assert not any(k in legend for k in keys) and "_" not in fig.get_suptitle()
    with pytest.raises(RecordError, match="never overwritten"):
        updating.run(ctx)
    # no row of the data in the results: no attendee id appears
    assert "GW-0" not in ctx.results_path.read_text()


def _cells(name: str) -> list[dict]:
    nb = json.loads((TEMPLATES / name).read_text(encoding="utf-8"))
    return [{**c, "source": "".join(c["source"])} for c in nb["cells"]]


def test_updating_notebook_template():
    cells = _cells("updating.ipynb")
    first = cells[0]
    assert first["cell_type"] == "markdown" and first["source"].startswith("# ")
    assert "not clearance for clinical use" in first["source"]
    assert "optimistic" in first["source"]
    params = cells[1]
    assert params["metadata"].get("tags") == ["parameters"]
    assert params["source"] == 'study_path = ""\nrecord_dir = ""\nmodel_path = ""'
    assert 'stagekit.open_stage("updating", globals())' in cells[2]["source"]
    assert "updating.run(ctx)" in cells[3]["source"] or "stage.run(ctx)" in cells[3]["source"]
    for cell in cells:
        if cell["cell_type"] == "code":
            assert cell["outputs"] == [] and cell["execution_count"] is None
    # each text is shown once (the optimism warning among them)
    import re

    shown = [k for c in cells if c["cell_type"] == "code" for k in re.findall(r'out\.texts\["(\w+)"\]', c["source"])]
    assert len(shown) == len(set(shown)) and shown.count("optimism") == 1


def test_a_withheld_correction_is_said_so_not_printed_as_nan(model):
    """Too many failed replicates of the updating procedure: the optimism sentence gives the reason, never 'nan'."""
    import dataclasses

    from riskvet.reporting.sentences.updating import optimism_sentence

    v, y = validation(600, 10)
    result = update_model(model, v, y, n_boot=8, seed=4)
    table = result.performance.table.assign(optimism=np.nan, corrected=np.nan)
    perf = dataclasses.replace(result.performance, table=table, correction_withheld="3 of 8 replicates failed, more than the allowed share 0.1")
    text = optimism_sentence(dataclasses.replace(result, performance=perf), "average_cut_auc", None, "average C over the cuts")
    assert "is withheld: 3 of 8 replicates failed" in text and "nan" not in text.lower()
