"""Frequency weights (``data.weight_column``): a row standing for w identical people.

The reference for every check is the same data written out one row per
person (an invariant, not a published value): a weighted cohort must give
the fit, the apparent measures, the counts and the sentences of that
written-out file.  Fits and measures are compared to 1e-10 (absolute): the
weighted fit sums each row's log-likelihood contribution times w instead of
adding w equal terms, so the two differ only by floating-point rounding of
sums (about 1e-15 relative here); 1e-10 leaves room for the Newton
iterations' stopping point, which the same rounding can move by a few ulps.
The bootstrap is checked by properties: with every weight 1 it equals the
unweighted run bit for bit, and each replicate's counts are whole multiples
of the row weights (a drawn row brings all its people).

All data are invented test data drawn from fixed seeds, kept small so the
file runs in seconds (but for the one end-to-end run of the chain).
"""

from __future__ import annotations

import io
import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

import riskvet.modelling.derive as derive_module
from riskvet.chain.runner import run_study
from riskvet.chain.stagekit import stage_context
from riskvet.chain.stages import derivation as derivation_stage
from riskvet.chain.stages import updating as updating_stage
from riskvet.chain.stages.external_validation import validate_external
from riskvet.errors import DataError, RiskvetError, RiskvetWarning
from riskvet.intake.data import expand_cohort, load_cohorts
from riskvet.intake.study import load_study
from riskvet.modelling.derive import derive
from riskvet.modelling.modelfile import load_model
from riskvet.reporting.descriptive import descriptive_table
from riskvet.validation.bootstrap import bootstrap_indices, validate_internally
from riskvet.validation.crossval import cross_validate
from riskvet.validation.external import validate_cohort

#: Absolute tolerance of weighted-against-written-out comparisons (see the module notes).
TOL = 1e-10

_BINARY = {"column": "outcome", "type": "binary", "levels": ["no", "yes"], "event": "yes"}
_ORDINAL = {"column": "grade", "type": "ordinal", "levels": ["none", "mild", "severe"]}
_CANDIDATES = {"age": {"form": "spline", "knots": 3}, "site": {"form": "categorical", "reference": "a"}}


def _weighted_frame(n: int = 70, seed: int = 4, *, zero_rows: int = 3) -> pd.DataFrame:
    """Invented test data: a binary and an ordered outcome, age and site, weights 1..4 with some rows of weight 0."""
    rng = np.random.default_rng(seed)
    age = rng.integers(20, 80, n).astype(float)
    site = rng.choice(["a", "b", "c"], n, p=[0.4, 0.35, 0.25])
    u = 0.06 * (age - 50) + 0.6 * (site == "b") + rng.logistic(size=n)
    weight = rng.integers(1, 5, n)
    weight[rng.choice(n, zero_rows, replace=False)] = 0
    return pd.DataFrame({
        "age": age, "site": site,
        "outcome": np.where(u > 0.2, "yes", "no"),
        "grade": np.array(["none", "mild", "severe"])[np.digitize(u, [-0.5, 1.2])],
        "count": weight,
    })


def _written_out(frame: pd.DataFrame) -> pd.DataFrame:
    """The same data one row per person (rows of weight 0 gone), without the weight column."""
    return frame.loc[frame.index.repeat(frame["count"])].drop(columns="count").reset_index(drop=True)


def _study_file(folder: Path, frame: pd.DataFrame, *, weighted: bool, outcome: dict = _BINARY, selection: str = "none",
                internal: dict | None = None, extra: dict | None = None) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "derivation.csv", index=False)
    data = {"derivation": "derivation.csv", **({"weight_column": "count"} if weighted else {})}
    study = {
        "study": {"name": folder.name},
        "data": data,
        "outcome": outcome,
        "predictors": {"candidates": _CANDIDATES},
        "selection": {"method": selection, "folds": 3},
        "internal_validation": {"n_boot": 4, "seed": 3, "cv_repeats": 0, "shrink": False, **(internal or {})},
        "output": {"min_cell_count": 1},
        **(extra or {}),
    }
    path = folder / "study.yaml"
    path.write_text(yaml.safe_dump(study, sort_keys=False))
    return path


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """The weighted study and the same data written out row by row, each as a study folder."""
    root = tmp_path_factory.mktemp("weights")
    frame = _weighted_frame()
    weighted = _study_file(root / "weighted", frame, weighted=True)
    plain = _study_file(root / "plain", _written_out(frame), weighted=False)
    return frame, load_study(weighted), load_study(plain), root


# -- intake ------------------------------------------------------------------------------


def test_cohort_carries_weights_and_counts_people(pair):
    frame, weighted, plain, _ = pair
    cohort = load_cohorts(weighted).derivation
    people = load_cohorts(plain).derivation
    kept = frame[frame["count"] > 0]
    np.testing.assert_array_equal(cohort.weights, kept["count"].to_numpy())
    assert cohort.weights.dtype == np.int64 and len(cohort.weights) == len(cohort.frame) == len(cohort.y)
    assert "count" not in cohort.frame.columns
    assert cohort.n_analysed == len(kept) and cohort.n_people == int(frame["count"].sum()) == people.n_analysed
    assert cohort.n_screened == len(frame) and cohort.n_people_screened == people.n_screened
    assert cohort.outcome_counts == people.outcome_counts  # people
    assert cohort.outcome_rows == kept["outcome"].value_counts().reindex(["no", "yes"]).to_dict()
    # without weights, rows are people
    assert people.weights is None and people.n_people == people.n_analysed and people.outcome_rows == people.outcome_counts
    summary = cohort.to_dict()
    assert summary["n_people"] == cohort.n_people and summary["outcome_rows"] == cohort.outcome_rows


def test_rows_of_weight_zero_are_an_exclusion_step(pair):
    frame, weighted, _, _ = pair
    cohort = load_cohorts(weighted).derivation
    table = cohort.to_frame()
    step = table[table["reason"] == "weight 0"]
    assert len(step) == 1 and step["column"].item() == "count"
    assert step["excluded"].item() == int((frame["count"] == 0).sum()) == 3
    assert step["excluded_people"].item() == 0
    assert step["step"].item() == 1  # the first step, after the rows screened
    assert table["remaining"].iloc[-1] == cohort.n_analysed and table["remaining_people"].iloc[-1] == cohort.n_people


def test_expand_cohort_is_the_written_out_file(pair):
    _, weighted, plain, _ = pair
    expanded = expand_cohort(load_cohorts(weighted).derivation)
    people = load_cohorts(plain).derivation
    pd.testing.assert_frame_equal(expanded.frame, people.frame)
    np.testing.assert_array_equal(expanded.y, people.y)
    assert expanded.weights is None and expanded.n_analysed == people.n_analysed
    assert expanded.n_screened == people.n_screened
    unweighted = load_cohorts(plain).derivation
    assert expand_cohort(unweighted) is unweighted


def test_descriptive_table_counts_people(pair):
    _, weighted, plain, _ = pair
    a = descriptive_table(load_cohorts(weighted).derivation, min_cell_count=1)
    b = descriptive_table(load_cohorts(plain).derivation, min_cell_count=1)
    pd.testing.assert_frame_equal(a.to_frame(), b.to_frame())


@pytest.mark.parametrize(
    ("value", "words"),
    [
        ("1.5", "fractional case or sampling weights are not supported, because the model's standard errors and the bootstrap"),
        ("-2", "negative"),
        ("NA", "missing value"),
        ("many", "whole numbers >= 0"),
    ],
)
def test_bad_weight_values_are_refused_naming_file_column_and_line(tmp_path, value, words):
    frame = _weighted_frame().astype(object)
    frame.loc[6, "count"] = value  # line 8 of the file (header is line 1)
    path = _study_file(tmp_path / "bad", frame, weighted=True)
    with pytest.raises(DataError) as caught:
        load_cohorts(load_study(path))
    message = str(caught.value)
    assert "derivation.csv" in message and "'count' (data.weight_column" in message
    assert words in message and "line 8 of the file" in message


def test_a_missing_weight_column_is_refused(tmp_path):
    path = _study_file(tmp_path / "absent", _weighted_frame().drop(columns="count"), weighted=True)
    with pytest.raises(DataError, match=r"derivation\.csv.*column 'count' \(data\.weight_column, frequency weights\) not found"):
        load_cohorts(load_study(path))


# -- fitting and apparent measures ---------------------------------------------------------


@pytest.mark.parametrize(("outcome", "selection"), [(_BINARY, "backward"), (_ORDINAL, "forward")])
def test_weighted_fit_equals_the_written_out_fit(tmp_path, outcome, selection):
    frame = _weighted_frame(n=90, seed=8)
    weighted = load_cohorts(load_study(_study_file(tmp_path / "w", frame, weighted=True, outcome=outcome, selection=selection))).derivation
    plain_study = load_study(_study_file(tmp_path / "p", _written_out(frame), weighted=False, outcome=outcome, selection=selection))
    plain = load_cohorts(plain_study).derivation
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        a = derive(plain_study, weighted.frame, weighted.y, weights=weighted.weights)
        b = derive(plain_study, plain.frame, plain.y)
    assert a.candidate_design.to_dict() == b.candidate_design.to_dict()  # knots learned on people
    assert a.terms == b.terms
    np.testing.assert_allclose(np.asarray(a.fit.coef, dtype=float), np.asarray(b.fit.coef, dtype=float), rtol=0, atol=TOL)
    np.testing.assert_allclose(np.asarray(a.fit.thresholds, dtype=float), np.asarray(b.fit.thresholds, dtype=float), rtol=0, atol=TOL)
    assert a.fit.loglik == pytest.approx(b.fit.loglik, abs=TOL)


@pytest.fixture(scope="module")
def stage_pair(pair):
    _, weighted, plain, root = pair
    out = {}
    for name, study in (("weighted", weighted), ("plain", plain)):
        ctx = stage_context("derivation", study_path=root / name / "study.yaml", record_dir=root / name / "record")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RiskvetWarning)
            result = derivation_stage.run(ctx)
        out[name] = (ctx, result, json.loads(ctx.results_path.read_text()))
    return out


def test_derivation_stage_fit_and_apparent_measures_equal_the_written_out_data(stage_pair):
    (ctx_w, out_w, res_w), (ctx_p, out_p, res_p) = stage_pair["weighted"], stage_pair["plain"]
    a, b = load_model(ctx_w.model_path), load_model(ctx_p.model_path)
    np.testing.assert_allclose(a.coef, b.coef, rtol=0, atol=TOL)
    np.testing.assert_allclose(a.thresholds, b.thresholds, rtol=0, atol=TOL)
    assert a.provenance["n_analysed"] == b.provenance["n_analysed"]  # people
    summary_w, summary_p = res_w["apparent"]["summary"], res_p["apparent"]["summary"]
    assert summary_w.keys() == summary_p.keys()
    for key in summary_p:
        assert summary_w[key] == pytest.approx(summary_p[key], abs=TOL, nan_ok=True), key
    pd.testing.assert_frame_equal(out_w.tables["descriptive"], out_p.tables["descriptive"])
    pd.testing.assert_frame_equal(out_w.tables["apparent"], out_p.tables["apparent"], atol=TOL, check_exact=False)


def test_derivation_stage_counts_and_sentences_are_of_people(stage_pair):
    (_, out_w, res_w), (_, out_p, res_p) = stage_pair["weighted"], stage_pair["plain"]
    cohort_w, cohort_p = res_w["cohort"], res_p["cohort"]
    assert cohort_w["counted"] == "people" and "counted" not in cohort_p
    for key in ("n_screened", "n_analysed", "outcome_counts"):
        assert cohort_w[key] == cohort_p[key], key
    assert cohort_w["n_rows_analysed"] < cohort_w["n_analysed"]
    assert res_w["events_per_candidate_parameter"] == pytest.approx(res_p["events_per_candidate_parameter"], abs=TOL)
    # every interpreting sentence carries the numbers of the written-out file (a number rounded for reading may
    # differ only where the estimate itself differs beyond the tolerance, which it does not here)
    assert out_w.texts == out_p.texts


# -- bootstrap, cross-validation, external validation ---------------------------------------------


def _cohort_arrays(study):
    cohort = load_cohorts(study).derivation
    return cohort, cohort.frame, cohort.y, cohort.weights


def _without_count_keys(d: dict) -> dict:
    return {k: v for k, v in d.items() if k not in ("counted", "n_rows")}


def test_bootstrap_with_every_weight_one_is_the_unweighted_run_bit_for_bit(pair):
    _, weighted, _, _ = pair
    _, frame, y, _ = _cohort_arrays(weighted)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        plain = validate_internally(weighted, (frame, y), n_boot=4, seed=9, progress=False)
        ones = validate_internally(weighted, (frame, y), n_boot=4, seed=9, progress=False, weights=np.ones(len(y), dtype=np.int64))
    assert _without_count_keys(ones.to_dict()) == plain.to_dict()
    pd.testing.assert_frame_equal(ones.replicate_values, plain.replicate_values, check_exact=True)


def test_bootstrap_replicate_counts_are_multiples_of_the_row_weights(pair, monkeypatch):
    """Each replicate's resample reaches the derivation as bincount(rows drawn) * w: a row comes with all its people."""
    _, weighted, _, _ = pair
    cohort, _, _, w = _cohort_arrays(weighted)
    seen = []
    real = derive_module.derive

    def recording(study, frame, y, *, seed=None, weights=None, clusters=None):
        seen.append(None if weights is None else np.asarray(weights).copy())
        return real(study, frame, y, seed=seed, weights=weights, clusters=clusters)

    monkeypatch.setattr(derive_module, "derive", recording)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        result = validate_internally(weighted, cohort, n_boot=4, seed=9, n_jobs=1, progress=False)
    np.testing.assert_array_equal(seen[0], w)  # the model on all data: the cohort's own weights
    drawn = bootstrap_indices(len(w), n_boot=4, seed=9)
    for i, counts in enumerate(seen[1:]):
        np.testing.assert_array_equal(counts, np.bincount(drawn[i], minlength=len(w)) * w)
        assert np.all(counts % w == 0)
    assert result.n == cohort.n_people and result.n_rows == cohort.n_analysed
    assert result.to_dict()["counted"] == "people"


def test_weighted_bootstrap_does_not_depend_on_n_jobs(pair):
    _, weighted, _, _ = pair
    cohort = load_cohorts(weighted).derivation
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        one = validate_internally(weighted, cohort, n_boot=4, seed=2, n_jobs=1, progress=False)
        two = validate_internally(weighted, cohort, n_boot=4, seed=2, n_jobs=2, progress=False)
    assert one.to_dict() == two.to_dict()


def test_weighted_bootstrap_apparent_values_equal_the_written_out_data(pair):
    _, weighted, plain, _ = pair
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        a = validate_internally(weighted, load_cohorts(weighted).derivation, n_boot=2, seed=1, progress=False)
        b = validate_internally(plain, load_cohorts(plain).derivation, n_boot=2, seed=1, progress=False)
    np.testing.assert_allclose(a.to_frame()["apparent"], b.to_frame()["apparent"], rtol=0, atol=TOL)
    assert a.n == b.n


def test_cross_validation_with_weights(pair):
    """Weights 1 give the unweighted folds bit for bit; real weights give the written-out apparent values and people."""
    _, weighted, plain, _ = pair
    cohort, frame, y, _ = _cohort_arrays(weighted)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        unweighted = cross_validate(weighted, (frame, y), n_folds=3, seed=5, progress=False)
        ones = cross_validate(weighted, (frame, y), n_folds=3, seed=5, progress=False, weights=np.ones(len(y), dtype=np.int64))
        with_weights = cross_validate(weighted, cohort, n_folds=3, seed=5, progress=False)
        written = cross_validate(plain, load_cohorts(plain).derivation, n_folds=3, seed=5, progress=False)
    assert _without_count_keys(ones.to_dict()) == unweighted.to_dict()
    np.testing.assert_allclose(with_weights.to_frame()["apparent"], written.to_frame()["apparent"], rtol=0, atol=TOL)
    assert with_weights.n == cohort.n_people and with_weights.n_rows == cohort.n_analysed


def test_external_validation_measures_people_and_resamples_rows(stage_pair):
    ctx, _, _ = stage_pair["weighted"]
    model = load_model(ctx.model_path)
    frame = _weighted_frame(n=60, seed=21)
    keep = frame["count"] > 0
    rows = frame[keep].reset_index(drop=True)
    people = _written_out(frame)
    codes = lambda f: (f["outcome"] == "yes").to_numpy().astype(np.int64)  # noqa: E731
    options = dict(thresholds={0: (0.3, 0.5)}, n_boot=0, min_subgroup_size=5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        a = validate_cohort(model, frame, codes(frame), weights=frame["count"].to_numpy(), **options)
        b = validate_cohort(model, people, codes(people), **options)
        plain = validate_cohort(model, rows, codes(rows), n_boot=3, seed=4)
        ones = validate_cohort(model, rows, codes(rows), n_boot=3, seed=4, weights=np.ones(len(rows), dtype=np.int64))
    assert a.n == b.n == int(frame["count"].sum()) and a.level_counts == b.level_counts and a.n_rows == int(keep.sum())
    np.testing.assert_allclose(a.performance["estimate"], b.performance["estimate"], rtol=0, atol=TOL)
    pd.testing.assert_frame_equal(a.threshold_frame(), b.threshold_frame(), atol=TOL, check_exact=False)
    pd.testing.assert_frame_equal(ones.performance, plain.performance, check_exact=True)


# -- stages that do not use weights yet ------------------------------------------------------------


def test_updating_stage_refuses_weights_before_it_runs(pair):
    _, _, _, root = pair
    ctx = stage_context("updating", study_path=root / "weighted" / "study.yaml", record_dir=root / "weighted" / "upd")
    with pytest.raises(RiskvetError, match=r"data\.weight_column is set \('count'\): the updating stage does not use frequency weights yet"):
        updating_stage.run(ctx)


def test_rule_comparison_refuses_weights(tmp_path):
    frame = _weighted_frame()
    frame["rule"] = np.where(frame["age"] > 50, "high", "low")
    (tmp_path / "r").mkdir()
    frame.to_csv(tmp_path / "r" / "validation.csv", index=False)
    path = _study_file(tmp_path / "r", frame, weighted=True, extra={
        "existing_rule": {"column": "rule", "kind": "categories", "levels": ["low", "high"], "positive_from": "high"},
    })
    raw = yaml.safe_load(path.read_text())
    raw["data"]["validation"] = [{"label": "later", "path": "validation.csv"}]
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    study = load_study(path)
    with pytest.raises(RiskvetError, match="comparison with today's rule does not use frequency weights yet"):
        validate_external(study, None, load_cohorts(study))


# -- the chain, end to end -----------------------------------------------------------------------


def test_a_weighted_study_through_the_chain_says_people(tmp_path):
    frame = _weighted_frame()
    path = _study_file(tmp_path / "chain", frame, weighted=True)
    result = run_study(path, out=io.StringIO())
    assert result.ok, result.failed_stage and result.failed_stage.error
    results = result.record_dir / "results"
    derivation = json.loads((results / "derivation.json").read_text())
    people = int(frame["count"].sum())
    assert derivation["cohort"]["counted"] == "people"
    assert derivation["cohort"]["n_analysed"] == people and derivation["cohort"]["n_rows_analysed"] == int((frame["count"] > 0).sum())
    assert sum(derivation["cohort"]["outcome_counts"].values()) == people
    assert any(step["reason"] == "weight 0" and step["rows excluded"] == 3 and step["people excluded"] == 0
               for step in derivation["exclusions"])
    assert derivation["exclusions"][-1]["people remaining"] == people
    bootstrap = json.loads((results / "internal_validation.json").read_text())["bootstrap"]
    assert bootstrap["counted"] == "people" and bootstrap["n"] == people
    assert f"{people} people analysed" in derivation["texts"]["summary"]
