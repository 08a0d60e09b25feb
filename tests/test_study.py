"""Tests of the study-file schema (riskvet.intake.study): every kind of error names its key.

The expected behaviour is the schema's own specification (key paths, nearest
valid key, allowed values); the studies are small invented ones.
"""

from __future__ import annotations

import copy
import json
import textwrap
from pathlib import Path

import pytest
import yaml

from riskvet.errors import RiskvetError, StudyError
from riskvet.intake.study import Study, load_study, study_from_dict


def minimal() -> dict:
    """A small valid study (invented)."""
    return {
        "study": {"name": "demo study"},
        "data": {"derivation": "derivation.csv", "validation": [{"label": "later", "path": "later.csv"}]},
        "outcome": {"column": "admitted", "type": "binary", "levels": ["no", "yes"], "event": "yes"},
        "predictors": {"candidates": {"age": "spline 4", "temp": "linear", "site": "categorical"}},
    }


def ordinal() -> dict:
    raw = minimal()
    raw["outcome"] = {"column": "grade", "type": "ordinal", "levels": ["none", "mild", "severe"]}
    return raw


def error_of(raw: dict) -> str:
    with pytest.raises(StudyError) as info:
        study_from_dict(raw, source="s.yaml")
    return str(info.value)


def test_minimal_study_validates_with_defaults():
    study = study_from_dict(minimal())
    assert isinstance(study, Study)
    assert study.predictors.candidates["age"].form == "spline"
    assert study.predictors.candidates["age"].knots == 4
    assert study.outcome.ordered_levels == ("no", "yes")
    assert study.internal_validation.n_boot == 200
    assert study.enabled_stages == ("derivation", "internal_validation", "external_validation", "updating", "summary")


def test_study_error_is_a_riskvet_value_error():
    assert issubclass(StudyError, RiskvetError) and issubclass(StudyError, ValueError)


@pytest.mark.parametrize(
    "section, bad, near",
    [
        ("top", "outcom", "outcome"),
        ("internal_validation", "nboot", "n_boot"),
        ("selection", "fold", "folds"),
    ],
)
def test_misspelt_key_names_key_path_and_nearest_key(section, bad, near):
    raw = minimal()
    if section == "top":
        raw[bad] = raw.pop("outcome")
        path = bad
    else:
        raw[section] = {bad: 3}
        path = f"{section}.{bad}"
    message = error_of(raw)
    assert f"{path}: unknown key" in message
    assert f"did you mean {near!r}" in message
    assert "s.yaml" in message


def test_misspelt_key_inside_a_predictor_spec_suggests_nearest():
    raw = minimal()
    raw["predictors"]["candidates"]["age"] = {"form": "spline", "knot": 4}
    message = error_of(raw)
    assert "predictors.candidates.age.knot: unknown key" in message
    assert "did you mean 'knots'" in message


def test_missing_required_key_is_named():
    raw = minimal()
    del raw["outcome"]["column"]
    assert "outcome.column: required key is missing" in error_of(raw)


@pytest.mark.parametrize(
    "section, key, value, fragment",
    [
        ("internal_validation", "n_boot", "many", "internal_validation.n_boot"),
        ("selection", "folds", [10], "selection.folds"),
        ("model", "proportional", "sometimes", "model.proportional"),
        ("outcome", "type", "continuous", "outcome.type"),
    ],
)
def test_wrong_type_names_key_and_received_value(section, key, value, fragment):
    raw = minimal()
    raw[section] = {**raw.get(section, {}), key: value}
    message = error_of(raw)
    assert fragment in message
    assert repr(value) in message


def test_outcome_levels_listed_twice():
    raw = ordinal()
    raw["outcome"]["levels"] = ["none", "mild", "none", "severe"]
    message = error_of(raw)
    assert "outcome" in message and "listed more than once: ['none']" in message


def test_categorical_levels_listed_twice():
    raw = minimal()
    raw["predictors"]["candidates"]["site"] = {"form": "categorical", "levels": ["A", "B", "A"]}
    message = error_of(raw)
    assert "predictors.candidates.site" in message and "listed more than once: ['A']" in message


@pytest.mark.parametrize("value", [0, 1, -0.1, 1.5])
def test_thresholds_outside_open_unit_interval(value):
    raw = minimal()
    raw["thresholds"] = {"yes": [0.1, value]}
    message = error_of(raw)
    assert "thresholds.yes" in message and "strictly between 0 and 1" in message and str(value) in message


def test_threshold_key_must_be_an_upper_level():
    raw = ordinal()
    raw["thresholds"] = {"none": [0.2]}
    message = error_of(raw)
    assert "thresholds.none" in message and "['mild', 'severe']" in message


def test_thresholds_inside_interval_are_kept_per_cut():
    raw = ordinal()
    raw["thresholds"] = {"mild": [0.2, 0.4], "severe": [0.05]}
    study = study_from_dict(raw)
    assert study.thresholds_for_cut(0) == (0.2, 0.4)
    assert study.thresholds_for_cut(1) == (0.05,)


@pytest.mark.parametrize("n_boot", [0, -5])
def test_n_boot_below_one(n_boot):
    raw = minimal()
    raw["internal_validation"] = {"n_boot": n_boot}
    message = error_of(raw)
    assert "internal_validation.n_boot" in message and "greater than or equal to 1" in message


def test_external_n_boot_below_one():
    raw = minimal()
    raw["external_validation"] = {"n_boot": 0}
    assert "external_validation.n_boot" in error_of(raw)


def test_predictor_both_forced_and_excluded():
    raw = minimal()
    raw["predictors"]["forced"] = ["age"]
    raw["predictors"]["exclude"] = ["age", "site"]
    message = error_of(raw)
    assert "predictors" in message and "both forced in and excluded: ['age']" in message


def test_unknown_forced_name():
    raw = minimal()
    raw["predictors"]["forced"] = ["agee"]
    message = error_of(raw)
    assert "forced" in message and "unknown: ['agee']" in message and "'age'" in message


def test_unknown_excluded_name():
    raw = minimal()
    raw["predictors"]["exclude"] = ["weight"]
    message = error_of(raw)
    assert "exclude" in message and "unknown: ['weight']" in message


def test_binary_without_event():
    raw = minimal()
    del raw["outcome"]["event"]
    message = error_of(raw)
    assert "outcome" in message and "event" in message and "['no', 'yes']" in message


def test_binary_event_not_a_level():
    raw = minimal()
    raw["outcome"]["event"] = "Yes"
    message = error_of(raw)
    assert "event: expected one of ['no', 'yes']; received 'Yes'" in message


def test_binary_event_coded_as_number():
    raw = minimal()
    raw["outcome"] = {"column": "died", "type": "binary", "levels": [0, 1], "event": 1, "labels": {0: "alive", 1: "died"}}
    raw["thresholds"] = {1: [0.1]}
    study = study_from_dict(raw)
    assert study.outcome.ordered_levels == ("0", "1")
    assert study.outcome.label("1") == "died"
    assert study.thresholds_for_cut(0) == (0.1,)


def test_binary_event_first_is_coded_last():
    raw = minimal()
    raw["outcome"]["levels"] = ["yes", "no"]
    assert study_from_dict(raw).outcome.ordered_levels == ("no", "yes")


def test_ordinal_needs_three_levels_and_no_event():
    raw = ordinal()
    raw["outcome"]["levels"] = ["none", "severe"]
    assert "at least 3 levels" in error_of(raw)
    raw = ordinal()
    raw["outcome"]["event"] = "severe"
    assert "only for binary outcomes" in error_of(raw)


def test_spline_knots_out_of_range():
    raw = minimal()
    raw["predictors"]["candidates"]["age"] = "spline 9"
    message = error_of(raw)
    assert "predictors.candidates.age" in message and "from 3 to 7" in message and "9" in message


def test_outcome_cannot_be_a_predictor():
    raw = minimal()
    raw["predictors"]["candidates"]["admitted"] = "linear"
    assert "cannot also be a predictor" in error_of(raw)


def test_duplicate_validation_labels():
    raw = minimal()
    raw["data"]["validation"] = [{"label": "v", "path": "a.csv"}, {"label": "v", "path": "b.csv"}]
    assert "data.validation" in error_of(raw) and "['v']" in error_of(raw)


def test_updating_cohort_must_be_a_validation_label():
    raw = minimal()
    raw["updating"] = {"cohort": "laterr"}
    message = error_of(raw)
    assert "updating.cohort" in message and "['later']" in message and "'laterr'" in message


def test_all_problems_are_reported_together():
    raw = minimal()
    raw["selection"] = {"folds": 1}
    raw["internal_validation"] = {"n_boot": 0}
    message = error_of(raw)
    assert "2 problem(s)" in message
    assert "selection.folds" in message and "internal_validation.n_boot" in message


def test_top_level_must_be_a_mapping():
    with pytest.raises(StudyError, match="expected a mapping of sections"):
        study_from_dict(["study"], source="s.yaml")


def write(path: Path, text: str) -> Path:
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


STUDY_YAML = """\
    study:
      name: demo
    data:
      derivation: data/derivation.csv
      validation:
        - label: later
          path: data/later.csv
      ratings: ../elsewhere/ratings.csv
    outcome:
      column: admitted
      type: binary
      levels: [no, yes]
      event: yes
    predictors:
      candidates:
        age: spline 4
        temp: linear
    output:
      records: out
"""

REORDERED_YAML = """\
    predictors:
      candidates:
        age: spline 4
        temp: linear
    output:
      records: out
    outcome:
      event: yes
      levels: [no, yes]
      type: binary
      column: admitted
    data:
      ratings: ../elsewhere/ratings.csv
      validation:
        - path: data/later.csv
          label: later
      derivation: data/derivation.csv
    study:
      name: demo
"""


def test_paths_resolved_against_the_study_file_folder(tmp_path, monkeypatch):
    folder = tmp_path / "project"
    folder.mkdir()
    path = write(folder / "study.yaml", STUDY_YAML)
    monkeypatch.chdir(tmp_path)  # the working folder must not matter
    study = load_study(Path("project") / "study.yaml")
    assert study.data.derivation == (folder / "data" / "derivation.csv").resolve()
    assert study.data.validation[0].path == (folder / "data" / "later.csv").resolve()
    assert study.data.ratings == (tmp_path / "elsewhere" / "ratings.csv").resolve()
    assert study.output.records == (folder / "out").resolve()
    assert path.is_file()


def test_yes_no_levels_stay_text_in_yaml(tmp_path):
    study = load_study(write(tmp_path / "study.yaml", STUDY_YAML))
    assert study.outcome.levels == ("no", "yes")
    assert study.outcome.event == "yes"


def test_load_study_missing_file_and_bad_yaml(tmp_path):
    with pytest.raises(StudyError, match="study file not found"):
        load_study(tmp_path / "nope.yaml")
    bad = write(tmp_path / "bad.yaml", "study: [unclosed\n")
    with pytest.raises(StudyError, match="not valid YAML"):
        load_study(bad)


def test_load_study_error_names_the_file(tmp_path):
    path = write(tmp_path / "typo.yaml", STUDY_YAML.replace("    outcome:", "    outcomes:"))
    with pytest.raises(StudyError) as info:
        load_study(path)
    assert str(path) in str(info.value) and "did you mean 'outcome'" in str(info.value)


def test_canonical_json_stable_and_key_order_free(tmp_path):
    a = load_study(write(tmp_path / "a.yaml", STUDY_YAML))
    b = load_study(write(tmp_path / "b.yaml", REORDERED_YAML))
    again = load_study(tmp_path / "a.yaml")
    assert a.canonical_json() == b.canonical_json()
    assert a.digest() == b.digest() == again.digest()
    assert len(a.digest()) == 64 and int(a.digest(), 16) >= 0
    # canonical form: sorted keys, no whitespace between tokens, and it parses back
    text = a.canonical_json()
    assert json.loads(text) == a.to_dict()
    assert text == json.dumps(json.loads(text), sort_keys=True, separators=(",", ":"), ensure_ascii=False)


def test_digest_changes_with_content(tmp_path):
    a = load_study(write(tmp_path / "a.yaml", STUDY_YAML))
    changed = load_study(write(tmp_path / "c.yaml", STUDY_YAML.replace("age: spline 4", "age: spline 5")))
    assert a.digest() != changed.digest()


def test_digest_of_dict_and_file_agree(tmp_path):
    path = write(tmp_path / "a.yaml", STUDY_YAML)
    raw = yaml.safe_load(path.read_text())
    raw["outcome"]["levels"] = ["no", "yes"]  # safe_load reads yes/no as booleans
    raw["outcome"]["event"] = "yes"
    assert study_from_dict(copy.deepcopy(raw), base_dir=tmp_path).digest() == load_study(path).digest()


def test_study_is_frozen():
    study = study_from_dict(minimal())
    with pytest.raises(Exception):
        study.outcome.column = "other"  # type: ignore[misc]
