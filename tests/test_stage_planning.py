"""The planning stage: results against direct calls of the planning functions, cohort checks, record rules."""

from __future__ import annotations

import json

import pandas as pd
import pytest
import yaml

from riskvet.intake.data import load_cohorts
from riskvet.errors import RecordError, StudyError
from riskvet.planning.samplesize import (
    development_size,
    justification_text,
    ordinal_development_size,
    validation_size,
)
from riskvet.chain.scaffold import new_study_folder
from riskvet.chain.stagekit import stage_context
from riskvet.chain.stages import planning as stage
from riskvet.intake.study import load_study, study_from_dict


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    root = tmp_path_factory.mktemp("planning_study")
    new_study_folder(root, n_derivation=300, n_validation=200, n_ratings=30, n_boot=2)
    return root


@pytest.fixture(scope="module")
def study(folder):
    return load_study(folder / "study.yaml")


@pytest.fixture(scope="module")
def cohorts(study):
    return load_cohorts(study)


def _raw(folder):
    return yaml.safe_load((folder / "study.yaml").read_text(encoding="utf-8"))


def _binary_study(folder, tmp_path, planning=None):
    """The demo study with the outcome 'transferred to hospital' (yes/no), written beside a copy of the data."""
    data = pd.read_csv(folder / "data" / "derivation.csv", dtype=str, keep_default_na=False)
    data["transferred"] = (data["disposition"] == "transferred").map({True: "yes", False: "no"})
    data.to_csv(tmp_path / "derivation.csv", index=False)
    raw = _raw(folder)
    raw["data"] = {"derivation": str(tmp_path / "derivation.csv")}
    raw.pop("internal_external")  # no cluster column here
    raw["outcome"] = {"column": "transferred", "type": "binary", "levels": ["no", "yes"], "event": "yes"}
    raw["thresholds"] = {"yes": [0.1]}
    raw.pop("agreement")
    raw["updating"] = {"enabled": False}
    raw["external_validation"] = {"enabled": False}
    if planning is not None:
        raw["planning"] = planning
    return study_from_dict(raw, base_dir=folder)


def test_run_ordinal_matches_direct_calls(study, cohorts, folder, tmp_path):
    ctx = stage_context("planning", study_path=folder / "study.yaml", record_dir=tmp_path / "rec")
    out = stage.run(ctx)
    saved = json.loads(ctx.results_path.read_text(encoding="utf-8"))
    assert saved == json.loads(json.dumps(out.to_dict()))

    levels = study.outcome.ordered_levels
    counts = [cohorts.derivation.outcome_counts[lv] for lv in levels]
    props = [c / sum(counts) for c in counts]
    p = study.planning
    direct = ordinal_development_size(n_parameters=p.n_parameters, proportions=props, c_statistic=p.anticipated_c, shrinkage=p.shrinkage)
    assert saved["n_development"] == direct.n
    assert saved["development"]["binding_cut"] == direct.binding_cut
    assert [c["binding"] for c in saved["development"]["cuts"]] == [c.binding for c in direct.cuts]
    assert saved["proportions"] == pytest.approx(props, rel=1e-15)

    # Validation at each cut: validation_size with the cut's event proportion and the study's widths.
    assert [v["cut"] for v in saved["validation"]] == [0, 1]
    for j, v in enumerate(saved["validation"]):
        ref = validation_size(
            prevalence=sum(props[j + 1 :]), c_statistic=p.anticipated_c, oe_ci_width=p.validation_oe_ci_width,
            slope_ci_width=p.validation_slope_ci_width, c_ci_width=p.validation_c_ci_width,
        )
        assert v["size"]["n"] == ref.n and v["size"]["binding"] == ref.binding
    assert saved["validation"][1]["label"] == "transferred"
    assert saved["validation"][0]["label"] == "observed or higher"

    # Cohort checks: analysed sizes and events of each cohort against the plan.
    checks = {(c["cohort"], c["purpose"], c["cut"]): c for c in saved["checks"]}
    dev = checks[("derivation", "development", direct.binding_cut)]
    assert dev["n_available"] == cohorts.derivation.n_analysed
    assert dev["n_required"] == direct.n
    assert dev["n_met"] is (cohorts.derivation.n_analysed >= direct.n)
    assert dev["events_available"] == sum(cohorts.derivation.outcome_counts[lv] for lv in levels[direct.binding_cut + 1 :])
    val = cohorts.validation["season-2026"]
    for j in (0, 1):
        c = checks[("season-2026", "validation", j)]
        assert c["n_available"] == val.n_analysed
        assert c["events_available"] == sum(val.outcome_counts[lv] for lv in levels[j + 1 :])
        assert c["n_met"] is (val.n_analysed >= c["n_required"])
    # 300 invented people are far fewer than the plan asks for, and the text says so.
    assert not dev["n_met"] and "Smaller than planned" in saved["texts"]["checks"]
    assert f"{direct.n:,}" in saved["texts"]["development"]
    assert saved["justification"].startswith(justification_text(direct, levels=levels))


def test_run_is_deterministic_and_write_once(folder, tmp_path):
    a = stage_context("planning", study_path=folder / "study.yaml", record_dir=tmp_path / "a")
    b = stage_context("planning", study_path=folder / "study.yaml", record_dir=tmp_path / "b")
    stage.run(a)
    stage.run(b)
    assert a.results_path.read_bytes() == b.results_path.read_bytes()
    with pytest.raises(RecordError, match="never overwritten"):
        stage.run(a)


def test_binary_outcome_matches_development_size(folder, tmp_path):
    study = _binary_study(folder, tmp_path)
    out = stage.plan(study)
    cohorts = load_cohorts(study)
    phi = cohorts.derivation.outcome_counts["yes"] / cohorts.derivation.n_analysed
    direct = development_size(n_parameters=study.planning.n_parameters, prevalence=phi, c_statistic=study.planning.anticipated_c, shrinkage=study.planning.shrinkage)
    assert out.development.n == direct.n and out.development.binding == direct.binding
    assert out.proportions == pytest.approx((1 - phi, phi), rel=1e-15)
    assert len(out.validation) == 1 and out.validation[0].label == "yes"
    assert [c.purpose for c in out.checks] == ["development"]
    assert out.checks[0].cut is None


def test_published_worked_example_through_the_stage(folder, tmp_path):
    # Riley et al., BMJ 2020;368:m441, binary worked example: 24 candidate
    # parameters, outcome proportion 0.174, anticipated Cox-Snell R2 0.288;
    # criterion (i) needs 623 (recalled from memory, as in tests/test_planning.py)
    # and the optimism criterion binds.  Proportions are given, not read.
    study = _binary_study(folder, tmp_path, planning={"n_parameters": 24, "anticipated_r2_cs": 0.288, "anticipated_c": 0.8})
    out = stage.plan(study, proportions=[1 - 0.174, 0.174])
    assert out.development.criteria[0].n == 623
    assert out.development.binding == "optimism"
    assert out.proportion_source == "given"
    # With both R2 and C given, R2 drives development and C drives validation.
    assert out.development.r2_source == "given"
    assert out.validation[0].size.c_statistic == 0.8
    assert any("R² is used for development" in n for n in out.notes)


def test_given_proportions_before_data_exist(folder, tmp_path):
    raw = _raw(folder)
    raw["data"]["derivation"] = str(tmp_path / "not-collected-yet.csv")
    study = study_from_dict(raw, base_dir=folder)
    out = stage.plan(study, proportions=[0.6, 0.3, 0.1])
    assert out.checks == ()
    assert "does not exist yet" in " ".join(out.notes)
    assert "not compared with the data" in out.texts["checks"]
    text = stage.plan_text(study, proportions=[0.6, 0.3, 0.1])
    assert f"{out.development.n:,}" in text and "Protocol text" in text and "released 0.600" in text


def test_plan_text_states_the_plan(study):
    text = stage.plan_text(study)
    out = stage.plan(study)
    for piece in (out.texts["development"], out.texts["validation"], out.texts["checks"], out.justification):
        assert piece in text


def test_bad_input(study, folder):
    with pytest.raises(StudyError, match="plan\\(proportions\\)"):
        stage.plan(study, proportions=[0.5, 0.5])
    with pytest.raises(StudyError, match="plan\\(proportions\\)"):
        stage.plan(study, proportions=[0.5, 0.6, -0.1])
    with pytest.raises(StudyError, match="plan\\(study\\)"):
        stage.plan({"planning": {}})
    raw = _raw(folder)
    raw.pop("planning")
    with pytest.raises(StudyError, match="planning"):
        stage.plan(study_from_dict(raw, base_dir=folder))


def test_no_validation_size_without_anticipated_c(folder, tmp_path):
    study = _binary_study(folder, tmp_path, planning={"n_parameters": 10, "anticipated_r2_cs": 0.1})
    out = stage.plan(study)
    assert out.validation == ()
    assert "anticipated_c" in out.texts["validation"]
    assert out.validation_frame().empty


def test_justification_names_cuts_by_level():
    r = ordinal_development_size(n_parameters=8, proportions=[0.6, 0.3, 0.1], c_statistic=0.8)
    text = justification_text(r, levels=["released", "observed", "transferred"])
    assert "the cut observed or higher versus lower" in text and "the cut transferred versus lower" in text
    assert "cut 1" not in text
    with pytest.raises(StudyError, match="justification_text\\(levels\\)"):
        justification_text(r, levels=["a", "b"])


def test_planning_page_frames_say_what_each_criterion_protects_against(study):
    out = stage.plan(study)
    dev = out.development_frame()
    assert isinstance(dev.index, pd.RangeIndex) and not any("_" in c for c in dev.columns)
    assert dev["protects against"].str.contains("overfitting").any()
    # every criterion's n at every cut is kept, and the row that sets the size is the binding one
    kept = {int(v) for c in dev.columns if c.startswith("people needed for") for v in dev[c]}
    assert kept == {c.n for cut in out.development.cuts for c in cut.criteria}
    binding = out.development.cuts[out.development.binding_cut]
    sets = dev.loc[dev["sets the required size"] != "no"]
    names = [c.name for c in binding.criteria]
    assert len(sets) == 1 and sets.index.item() == names.index(binding.binding)
    assert sets["sets the required size"].item() == f"yes, for {stage.cut_label(out.levels, out.development.binding_cut, binary=False)}"
    events = out.development_events_frame().set_index("quantity")
    assert events.loc["people needed (largest criterion)"].tolist() == [c.n for c in out.development.cuts]
    assert events.loc["events per candidate parameter"].tolist() == pytest.approx([c.events_per_parameter for c in out.development.cuts])
    val = out.validation_frame()
    assert {int(v) for c in val.columns if c.startswith("people needed for") for v in val[c]} == {
        c.n for v in out.validation for c in v.size.criteria}
    assert "protects against" in out.texts["development"] and "sets this size" in out.texts["development"]
    checks = out.checks_frame()
    assert list(checks.columns)[:3] == ["cohort", "for", "outcome"] and checks["enough people"].dtype == bool
