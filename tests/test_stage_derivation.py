"""The derivation stage on a small demo study folder."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from riskvet.intake.data import load_cohorts
from riskvet.errors import RecordError, RiskvetError
from riskvet.modelling.modelfile import load_model
from riskvet.modelling.fitter import fit_cumulative
from riskvet.chain.scaffold import new_study_folder
from riskvet.chain.stagekit import stage_context
from riskvet.chain.stages import derivation


@pytest.fixture(scope="module")
def stage_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("study")
    study_path = new_study_folder(folder, n_derivation=500, n_validation=300, n_ratings=40, n_boot=5, missing_data="complete_case")
    ctx = stage_context("derivation", study_path=study_path, record_dir=folder / "records" / "r1")
    return ctx, derivation.run(ctx)


def test_stage_writes_model_results_and_figures(stage_run):
    ctx, out = stage_run
    results = json.loads(ctx.results_path.read_text())
    assert results["cohort"]["n_analysed"] == out.derivation.fit.n_rows
    assert results["terms"] == list(out.derivation.terms)
    for name in ("selection_curve", "roc", "calibration"):
        assert (ctx.record_dir / out.figures[name]).is_file()
        assert (ctx.figures_dir / f"{name}.svg").is_file()
    model = load_model(ctx.model_path)
    assert model.digest() == out.model.digest()


def test_frozen_model_equals_a_direct_refit_of_the_selected_terms(stage_run):
    """The model file holds the maximum-likelihood fit of the chosen design on the analysed rows."""
    ctx, out = stage_run
    cohort = load_cohorts(ctx.study).derivation
    X = out.derivation.design.transform(cohort.frame)
    direct = fit_cumulative(X, cohort.y)
    np.testing.assert_allclose(out.model.thresholds, direct.thresholds.to_numpy(), rtol=0, atol=1e-9)
    np.testing.assert_allclose(out.model.coef, direct.coef.reindex(list(X.columns)).to_numpy(), rtol=0, atol=1e-9)
    # apparent predictions from the file agree with the fitter's
    np.testing.assert_allclose(load_model(ctx.model_path).predict_proba(cohort.frame), direct.predict_proba(X), atol=1e-9)


def test_stage_never_overwrites_a_record(stage_run):
    ctx, _ = stage_run
    with pytest.raises((RecordError, RiskvetError), match="already exists"):
        derivation.run(ctx)


def test_results_hold_no_row_level_data(stage_run):
    ctx, _ = stage_run
    text = ctx.results_path.read_text()
    ids = load_cohorts(ctx.study).derivation.frame[ctx.study.data.id_column].astype(str)
    assert not any(i in text for i in ids)


def _worded(frame):
    """A frame a page can show: range index, headers without internal names."""
    return isinstance(frame.index, pd.RangeIndex) and not any("_" in str(c) for c in frame.columns)


def test_page_frames_are_in_words_and_spline_columns_have_no_odds_ratio(stage_run):
    _, out = stage_run
    for name, frame in out.tables.items():
        if name not in ("flow", "descriptive"):
            assert _worded(frame), name
    model = out.tables["model"]
    assert not model["parameter"].str.contains("nonlin|\\|").any()
    spline_rows = model["parameter"].str.contains("(spline", regex=False)
    assert spline_rows.any() and model.loc[spline_rows, "odds ratio per unit"].isna().all()
    assert "core_temp (spline)" in set(out.tables["effects"]["term"])
    assert out.tables["term_tests"].set_index("term").loc["core_temp (spline)", "df"] == 3


def test_proportional_odds_per_term_frame_has_no_overall_row(stage_run):
    _, out = stage_run
    terms = out.tables["po_terms"]
    assert "overall" not in set(terms["term"]) and len(terms) == len(out.derivation.terms)
    brant = out.tables["po_terms"]
    assert list(brant.columns) == ["term", "chi-square", "df", "p (Brant's test of the term)"]
    assert "overall chi-squared" in out.texts["po"]


def test_cautions_are_on_the_stage_result_and_in_the_results(stage_run):
    ctx, out = stage_run
    results = json.loads(ctx.results_path.read_text())
    assert out.inference_caution == out.texts["inference"] == results["inference_caution"]
    assert "ignore the selection" in out.inference_caution
    assert results["low_events_per_parameter"] is out.low_events_per_parameter is (out.events_per_parameter < 10)
    if out.low_events_per_parameter:
        assert "This is low" in out.texts["events_per_parameter"]
    assert "Kramer & Zimmerman" in out.texts["hosmer_lemeshow"]
    assert "|" not in out.equation and "transferred or higher" not in out.equation
    assert "C for observed or higher" in out.texts["apparent"] and "cut 0" not in out.texts["apparent"]
    assert list(out.guide["measure"])[:1] == ["C (AUC) of each cut"]


def test_column_labels_cover_the_design(stage_run):
    _, out = stage_run
    labels = out.column_labels
    assert set(labels) == set(out.derivation.design.columns)
    assert labels["core_temp_nonlin1"] == "core_temp (spline, part 2 of 3)"
    assert set(out.proportional_odds) == {"brant", "lr"}
