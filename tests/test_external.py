"""Tests for riskvet.validation.external and the external validation stage.

References: the demo's known truth (riskvet.demo: the validation season
raises both thresholds by 0.5, so a model derived in the derivation season
over-predicts there: calibration-in-the-large near -0.5 at both cuts);
scikit-learn 1.9 roc_auc_score and confusion_matrix for a bootstrap redone by
hand and for the classification counts; pandas value counts for subgroup
sizes; riskvet.measures.summary.performance_summary for the point estimates.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import confusion_matrix, roc_auc_score

from riskvet.reporting.sentences.external_validation import cohort_summary
from riskvet import demo
from riskvet.intake.design import build_design
from riskvet.errors import DataError, DesignError, RecordError, RiskvetError
from riskvet.validation.external import SubgroupSpec, apply_model, decision_grid, subgroup_masks, validate_cohort
from riskvet.measures.summary import performance_summary
from riskvet.modelling.modelfile import model_from_fit, save_model
from riskvet.modelling.fitter import fit_cumulative

LINEAR = ["heart_rate", "systolic_bp", "resp_rate", "confusion", "collapse", "vomiting", "dry_skin", "wbgt", "prior_heat_illness"]
OUTCOME = {"column": "disposition", "type": "ordinal", "levels": list(demo.LEVELS), "labels": {}}
TEMPLATES = Path(__file__).resolve().parents[1] / "templates"
THRESHOLDS = {0: (0.2, 0.4), 1: (0.05, 0.1, 0.2)}


def codes(frame: pd.DataFrame) -> np.ndarray:
    return pd.Categorical(frame["disposition"], categories=demo.LEVELS).codes.astype(np.int64)


def fit_model(frame, y):
    design = build_design(frame, linear=LINEAR, splines={"core_temp": 4, "age": 4}, categorical={"sex": "female"})
    return model_from_fit(fit_cumulative(design.transform(frame), y), design, outcome=OUTCOME)


@pytest.fixture(scope="module")
def model():
    d = demo.draw(8000, season="derivation", seed=31)
    return fit_model(d, codes(d))


@pytest.fixture(scope="module")
def shifted(model):
    v = demo.draw(1000, season="validation", seed=32)
    y = codes(v)
    subgroups = [SubgroupSpec("age", (30, 50)), SubgroupSpec("sex")]
    return v, y, validate_cohort(model, v, y, label="season 2026", thresholds=THRESHOLDS, subgroups=subgroups, n_boot=40, seed=7)


def _row(result, measure, cut=None):
    t = result.performance
    rows = t[(t["measure"] == measure) & (t["cut"].isna() if cut is None else t["cut"] == cut)]
    assert len(rows) == 1
    return rows.iloc[0]


def test_calibration_in_the_large_detects_the_known_shift(shifted):
    _, _, result = shifted
    for cut in (0, 1):
        row = _row(result, "calibration_intercept", cut)
        # the bootstrap interval excludes 0, on the side of over-prediction
        assert row["upper"] < 0
        # and the estimate is near the truth's -0.5: 0.25 allows three bootstrap
        # standard errors (about 0.08) plus the derivation model's own error
        assert abs(row["estimate"] + demo.truth().threshold_shift) < 0.25
        # the bootstrap SE is close to the model-based SE of the recalibration
        # fit (0.5 to 2 times: 40 replicates estimate an SE to about +-11%)
        wald = result.calibration.cuts[cut].calibration_in_the_large_se
        assert 0.5 < row["se"] / wald < 2.0
    assert "over-predicts" in cohort_summary(result)


def test_no_shift_in_the_derivation_population(model):
    v = demo.draw(1000, season="derivation", seed=33)
    result = validate_cohort(model, v, codes(v), n_boot=40, seed=8)
    for cut in (0, 1):
        row = _row(result, "calibration_intercept", cut)
        assert row["lower"] < 0 < row["upper"]


def test_estimates_are_the_metrics_summary(shifted, model):
    v, y, result = shifted
    apparent = performance_summary(y, model.predict_proba(v))
    for row in result.performance.itertuples():
        key = row.measure if pd.isna(row.cut) else f"{row.measure}_cut{int(row.cut)}"
        assert row.estimate == apparent[key]
    assert result.discrimination.cuts[1].estimate == apparent["auc_cut1"]
    assert result.calibration.cuts[0].calibration_in_the_large == pytest.approx(apparent["calibration_intercept_cut0"])


def test_bootstrap_interval_redone_by_hand(shifted, model):
    v, y, result = shifted
    prob = model.predict_proba(v)
    p_cut = prob[:, 1:].sum(axis=1)
    draws = []
    for stream in np.random.SeedSequence(7).spawn(40):
        idx = np.random.default_rng(stream).integers(0, len(y), len(y))
        draws.append(roc_auc_score((y[idx] > 0).astype(int), p_cut[idx]))  # scikit-learn 1.9
    row = _row(result, "auc", 0)
    lo, hi = np.percentile(draws, [2.5, 97.5])
    assert row["lower"] == pytest.approx(lo, abs=1e-12) and row["upper"] == pytest.approx(hi, abs=1e-12)
    assert row["se"] == pytest.approx(np.std(draws, ddof=1), abs=1e-12)


@pytest.fixture(scope="module")
def binary():
    d = demo.draw(3000, season="derivation", seed=41)
    design = build_design(d, linear=LINEAR, splines={"core_temp": 4}, categorical={"sex": "female"})
    outcome = {"column": "disposition", "type": "binary", "levels": ["not transferred", "transferred"], "labels": {}}
    model = model_from_fit(fit_cumulative(design.transform(d), (codes(d) == 2).astype(np.int64)), design, outcome=outcome)
    v = demo.draw(800, season="validation", seed=42)
    y = (codes(v) == 2).astype(np.int64)
    return model, v, y, validate_cohort(model, v, y, label="site B", thresholds={0: (0.1,)}, subgroups=[SubgroupSpec("sex")], n_boot=8, seed=3)


def test_binary_cohort_is_read_in_words(binary):
    model, v, y, result = binary
    p1 = model.predict_proba(v)[:, 1]
    apparent = performance_summary(y, model.predict_proba(v))
    # For two levels the measures of an ordered outcome are the C statistic
    # itself (reference: scikit-learn 1.9 roc_auc_score), so they are not shown twice.
    for key in ("average_cut_auc", "ordinal_c", "generalised_c", "auc_cut0"):
        assert apparent[key] == pytest.approx(roc_auc_score(y, p1), abs=1e-12)
    perf = result.performance
    assert not perf["measure"].isin(["average_cut_auc", "ordinal_c", "generalised_c"]).any()
    assert perf.loc[perf["measure"] == "auc", "label"].tolist() == ["C statistic (AUC)"]
    # the outcome is the event level, not "Y >= transferred" or "all levels"
    assert set(perf["outcome"]) == set(result.subgroups["outcome"]) == {"transferred"}
    calibration = result.calibration_frame()
    assert set(calibration["outcome"]) == {"transferred"} and not calibration["measure"].str.contains("ordinal|_").any()
    assert list(calibration.columns) == ["cohort", "outcome", "measure", "estimate", "se", "lower", "upper"]
    text = cohort_summary(result)
    assert "the C statistic is" in text and "For transferred, calibration-in-the-large" in text and "Y >=" not in text
    assert set(result.threshold_frame()["outcome"]) == {"transferred"}
    # the subgroup figure defaults to the C statistic for a binary outcome
    import matplotlib

    matplotlib.use("Agg")
    from riskvet.reporting.figures.external_validation import plot_cohort_calibration, plot_subgroups

    assert "C statistic" in plot_subgroups(result).axes[0].get_xlabel()
    assert plot_cohort_calibration(result).axes[0].get_title().endswith(": transferred")


def test_results_do_not_depend_on_the_number_of_workers(model):
    v = demo.draw(300, season="validation", seed=34)
    y = codes(v)
    one = validate_cohort(model, v, y, n_boot=6, seed=3, subgroups=[SubgroupSpec("sex")], n_jobs=1)
    two = validate_cohort(model, v, y, n_boot=6, seed=3, subgroups=[SubgroupSpec("sex")], n_jobs=2)
    pd.testing.assert_frame_equal(one.performance, two.performance)
    pd.testing.assert_frame_equal(one.subgroups, two.subgroups)


def test_subgroup_sizes_and_flags(shifted, model):
    v, y, result = shifted
    sizes = result.subgroup_sizes.set_index(["column", "group"])
    bands = pd.cut(v["age"], [-np.inf, 30, 50, np.inf], right=False, labels=["< 30", "30 to < 50", ">= 50"]).value_counts()
    for label, n in bands.items():
        assert sizes.loc[("age", label), "n"] == n
    for label, n in v["sex"].value_counts().items():
        in_group = (v["sex"] == label).to_numpy()
        top, bottom = int((y[in_group] == 2).sum()), int((y[in_group] == 0).sum())
        assert sizes.loc[("sex", label), "n"] == n
        assert (sizes.loc[("sex", label), "n_top"], sizes.loc[("sex", label), "n_bottom"]) == (top, bottom)
        # too small when fewer than 100 patients, or fewer than 100 events or non-events at some cut:
        # the scarcest are the top level (events of the top cut) and the bottom level (non-events of the lowest)
        assert sizes.loc[("sex", label), "few_events"] == (min(top, bottom) < 100)
        assert sizes.loc[("sex", label), "small"] == (n < 100 or min(top, bottom) < 100)
    assert sizes.loc[("age", "< 30"), "n_top"] == int(((v["age"] < 30) & (y == 2)).sum())
    # every subgroup has every measure; small ones are flagged on every row
    assert set(result.subgroups.groupby(["column", "group"]).size()) == {len(result.performance)}
    small = validate_cohort(model, v, y, subgroups=[SubgroupSpec("age", (30, 50))], min_subgroup_size=200, min_subgroup_events=1, n_boot=0)
    flagged = small.subgroup_sizes.set_index("group")["small"]
    assert flagged["< 30"] == (bands["< 30"] < 200) and flagged["30 to < 50"] == (bands["30 to < 50"] < 200)
    assert "flagged" in cohort_summary(small)


def test_a_subgroup_with_many_patients_but_few_events_is_flagged(model):
    # 600 patients of whom about 5% reach the top level: enough people, too few events to read calibration
    v = demo.draw(3000, season="validation", seed=35)
    y = codes(v)
    loose = validate_cohort(model, v, y, subgroups=[SubgroupSpec("sex")], min_subgroup_size=10, min_subgroup_events=10, n_boot=0)
    strict = validate_cohort(model, v, y, subgroups=[SubgroupSpec("sex")], min_subgroup_size=10, n_boot=0)
    tops = strict.subgroup_sizes["n_top"]
    assert (strict.subgroup_sizes["n"] >= 10).all() and (tops < 100).any()
    assert strict.subgroup_sizes["few_events"].tolist() == (np.minimum(tops, strict.subgroup_sizes["n_bottom"]) < 100).tolist()
    assert not loose.subgroup_sizes["small"].any()
    from riskvet.reporting.sentences.external_validation import subgroup_sentence

    text = subgroup_sentence(strict)
    assert "at least 100 events and 100 non-events" in text and f"fewer than 100 with {demo.LEVELS[-1]}" in text
    with pytest.raises(RiskvetError, match="min_subgroup_events"):
        validate_cohort(model, v, y, min_subgroup_events=0, n_boot=0)


def test_subgroup_masks_with_missing_values():
    f = pd.DataFrame({"x": [1.0, 5.0, np.nan, 10.0], "g": pd.array(["a", None, "b", "a"], dtype="string")})
    groups, missing = subgroup_masks(f, SubgroupSpec("x", (5.0,)))
    assert [g for g, _ in groups] == ["< 5", ">= 5"] and missing == 1
    np.testing.assert_array_equal(groups[1][1], [False, True, False, True])
    groups, missing = subgroup_masks(f, SubgroupSpec("g"))
    assert [g for g, _ in groups] == ["a", "b"] and missing == 1
    with pytest.raises(DataError, match="column"):
        subgroup_masks(f, SubgroupSpec("nope"))


def test_threshold_tables_against_scikit_learn(shifted, model):
    v, y, result = shifted
    prob = model.predict_proba(v)
    assert set(result.threshold_tables) == {0, 1}
    for cut, table in result.threshold_tables.items():
        event = (y > cut).astype(int)
        p_cut = prob[:, cut + 1:].sum(axis=1)
        for i, t in enumerate(THRESHOLDS[cut]):
            tn, fp, fn, tp = confusion_matrix(event, (p_cut >= t).astype(int)).ravel()  # scikit-learn 1.9
            assert (table.tp[i], table.fp[i], table.fn[i], table.tn[i]) == (tp, fp, fn, tn)
    assert len(result.threshold_frame()) == 5


def test_decision_curves_cover_the_study_thresholds(shifted):
    _, _, result = shifted
    assert [c.cut for c in result.decision_curves] == [0, 1]
    for cut, curve in enumerate(result.decision_curves):
        assert set(THRESHOLDS[cut]) <= set(np.round(curve.threshold, 10))
    grid = decision_grid((0.8,))
    assert grid.max() == 0.99 and grid.min() == 0.01


def test_apply_model_refuses_a_cohort_it_cannot_encode(model):
    v = demo.draw(50, season="validation", seed=35)
    bad = v.assign(sex=np.where(np.arange(50) < 3, "other", v["sex"]))
    with pytest.raises(DesignError) as info:
        apply_model(model, bad, label="site B")
    text = str(info.value)
    assert "site B" in text and "sex" in text and "other" in text
    with pytest.raises(DesignError, match="wbgt"):
        apply_model(model, v.drop(columns="wbgt"), label="site B")
    with pytest.raises(RiskvetError, match="PredictionModel"):
        apply_model("model", v)


def test_validate_cohort_refuses_bad_input(model):
    v = demo.draw(200, season="validation", seed=36)
    y = codes(v)
    with pytest.raises(RiskvetError, match="n_boot"):
        validate_cohort(model, v, y, n_boot=-1)
    with pytest.raises(RiskvetError, match="seed"):
        validate_cohort(model, v, y, seed=-3)
    with pytest.raises(RiskvetError, match="confidence"):
        validate_cohort(model, v, y, confidence=1.0)
    with pytest.raises(RiskvetError, match="min_subgroup_size"):
        validate_cohort(model, v, y, min_subgroup_size=0)
    with pytest.raises(RiskvetError, match="thresholds"):
        validate_cohort(model, v, y, thresholds={5: (0.1,)}, n_boot=0)
    with pytest.raises(DataError, match="y"):
        validate_cohort(model, v, y[:-1], n_boot=0)
    with pytest.raises(DataError, match="every outcome level"):
        validate_cohort(model, v, np.minimum(y, 1), n_boot=0)


def test_json_and_figures(shifted):
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    from riskvet.reporting.figures.external_validation import plot_cohort_calibration, plot_cohort_decision_curves, plot_subgroups

    _, _, result = shifted
    json.dumps(result.to_dict(), allow_nan=False)
    assert isinstance(plot_cohort_calibration(result), Figure)
    assert isinstance(plot_cohort_decision_curves(result), Figure)
    assert isinstance(plot_subgroups(result, measure="calibration_intercept", cut=0), Figure)
    with pytest.raises(RiskvetError, match="measure"):
        plot_subgroups(result, measure="kappa")
    with pytest.raises(RiskvetError, match="CohortValidation"):
        plot_cohort_calibration("result")


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
    study_path.write_text(study_path.read_text().replace("n_jobs: 2", "n_jobs: 1"))
    cohort = load_cohorts(load_study(study_path)).derivation
    record_dir = folder / "records" / "r1"
    save_model(fit_model(cohort.frame, cohort.y), record_dir / "models" / "model.json")
    return study_path, record_dir


def test_external_validation_stage(record):
    import matplotlib

    matplotlib.use("Agg")
    from riskvet.chain.stagekit import stage_context
    from riskvet.chain.stages import external_validation

    study_path, record_dir = record
    ctx = stage_context("external_validation", study_path=study_path, record_dir=record_dir)
    out = external_validation.run(ctx)
    assert list(out.cohorts) == ["season-2026"]
    assert set(out.texts) >= {"summary", "flow", "case_mix", "membership", "linear_predictor", "performance", "calibration", "thresholds", "decision", "subgroups", "rule", "caution", "intervals"}
    assert "season-2026" in out.rule and out.rule["season-2026"].positive_from == "red"
    for path in out.figures.values():
        assert (record_dir / path).is_file() and (record_dir / path).with_suffix(".svg").is_file()
    saved = json.loads(ctx.results_path.read_text())
    assert saved["model_sha256"] == out.model_sha256
    # tables for the notebook
    assert saved["data"]["season-2026"]["n_analysed"] == out.cohorts["season-2026"].n
    assert str(record_dir.parent.parent) not in ctx.results_path.read_text()  # no file paths
    for frame in (out.flow_frame(), out.case_mix_frame(), out.membership_frame(), out.performance_frame(), out.calibration_frame(),
                  out.threshold_frame(), out.subgroup_frame(), out.subgroup_sizes_frame(), out.rule_frame(), out.rule_net_benefit_frame(),
                  out.guide, out.calibration_statistics("season-2026")):
        assert isinstance(frame, pd.DataFrame) and len(frame) > 0 and isinstance(frame.index, pd.RangeIndex)
        # for reading: measures by name, outcomes in words, no cut numbers or missing-value markers
        assert "cut" not in frame.columns
        if "measure" in frame.columns:
            assert not frame["measure"].str.contains("_").any()
        if "outcome" in frame.columns:
            assert not frame["outcome"].isna().any()
    # the rule sentence never reads as if 0 were a threshold
    assert "at 0." not in out.texts["rule"]
    # no row of the data in the results: no attendee id appears
    assert "GW-0" not in ctx.results_path.read_text()
    with pytest.raises(RecordError, match="never overwritten"):
        external_validation.run(ctx)


def test_external_validation_notebook_template():
    nb = json.loads((TEMPLATES / "external_validation.ipynb").read_text(encoding="utf-8"))
    cells = [{**c, "source": "".join(c["source"])} for c in nb["cells"]]
    assert cells[0]["cell_type"] == "markdown" and cells[0]["source"].startswith("# External validation")
    assert "not clearance for clinical use" in cells[0]["source"]
    assert cells[1]["metadata"].get("tags") == ["parameters"]
    assert cells[1]["source"] == 'study_path = ""\nrecord_dir = ""\nmodel_path = ""'
    assert 'stagekit.open_stage("external_validation", globals())' in cells[2]["source"]
    assert "stage.run(ctx)" in cells[3]["source"]
    for cell in cells:
        if cell["cell_type"] == "code":
            assert cell["outputs"] == [] and cell["execution_count"] is None
    # every text a cell shows is one the stage writes
    keys = {k for c in cells for k in re.findall(r'out\.texts\["(\w+)"\]', c["source"])}
    assert keys <= {"summary", "flow", "case_mix", "membership", "linear_predictor", "performance", "calibration", "thresholds", "decision", "subgroups", "rule", "caution", "intervals", "pooled"}
    # each text is shown once, and the caution only in the first cell's markdown
    shown = [k for c in cells if c["cell_type"] == "code" for k in re.findall(r'out\.texts\["(\w+)"\]', c["source"])]
    assert len(shown) == len(set(shown)) and "caution" not in shown
