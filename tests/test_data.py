"""Tests of riskvet.intake.data on small invented frames.

Counts are checked against hand counts written beside each frame; summaries
against numpy/pandas; file formats by writing with pandas (to_csv, to_parquet
with pyarrow, to_stata) and reading back.
"""

from __future__ import annotations

import json
import math
import sys

import numpy as np
import pandas as pd
import pytest

from riskvet.intake.data import (
    MISSING_VALUES,
    SUFFIXES,
    Cohorts,
    FrameAudit,
    PreparedCohort,
    audit_frame,
    load_cohorts,
    prepare_cohort,
    read_table,
    standardised_differences,
)
from riskvet.errors import DataError, RiskvetError
from riskvet.reporting.descriptive import descriptive_table
from riskvet.intake.study import study_from_dict


def make_study(base_dir=None, **changes):
    raw = {
        "study": {"name": "intake"},
        "data": {
            "derivation": "derivation.csv",
            "validation": [{"label": "later", "path": "later.parquet"}],
            "id_column": "pid",
        },
        "outcome": {"column": "died", "type": "binary", "levels": [0, 1], "event": 1, "labels": {0: "alive", 1: "died"}},
        "predictors": {"candidates": {"age": "linear", "sbp": "spline 3", "region": "categorical",
                                      "sex": {"form": "categorical", "levels": ["F", "M"]}}},
    }
    for key, value in changes.items():
        section, _, name = key.partition("__")
        if name:
            raw[section] = {**raw.get(section, {}), name: value}
        else:
            raw[section] = value
    return study_from_dict(raw, base_dir=base_dir)


def hand_frame() -> pd.DataFrame:
    """Ten invented rows.  Hand counts used below:

    missing: died 1 (p03), age 3 (p03, p04, p09), sbp 1 (p05), region 1 (p06), sex 0.
    Sequential exclusions: outcome -1 (p03) -> 9; age -2 (p04, p09; p03 already gone) -> 7;
    sbp -1 (p05) -> 6; region -1 (p06) -> 5; sex -0 -> 5.  Kept: p01 p02 p07 p08 p10,
    died 0 1 1 0 1.  region of all 10 rows: N 5, S 4, missing 1.
    """
    return pd.DataFrame({
        "pid": ["p01", "p02", "p03", "p04", "p05", "p06", "p07", "p08", "p09", "p10"],
        "died": ["0", "1", None, "0", "1", "0", "1", "0", "0", "1"],
        "age": ["50", "61", None, None, "66", "45", "72", "58", None, "80"],
        "sbp": ["120", "130", "140", "150", None, "110", "125", "135", "145", "160"],
        "region": ["N", "S", "N", "S", "N", None, "S", "N", "S", "N"],
        "sex": ["F", "M", "F", "M", "F", "M", "F", "M", "F", "M"],
        "notes": [f"free text {i}" for i in range(10)],
    }).astype("str")


# -- read_table -------------------------------------------------------------------------


def test_csv_keeps_text_and_reads_only_listed_missing_codes(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("code,word,x\n01,None,1\n02,null,NA\n,n/a,.\n10,NaN,2.5\n", encoding="utf-8")
    frame = read_table(path)
    assert frame["code"].tolist()[:2] == ["01", "02"]  # leading zeros kept: no type guessing
    assert frame["code"].isna().tolist() == [False, False, True, False]
    # "None", "null" and "n/a" are not in the default codes, so they stay text; "NaN" is listed
    assert frame["word"].tolist()[:3] == ["None", "null", "n/a"] and pd.isna(frame["word"][3])
    assert frame["x"].isna().tolist() == [False, True, True, False]
    assert set(MISSING_VALUES) == {"", "NA", "N/A", "NaN", "nan", "."}


def test_csv_custom_missing_codes(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("x\n-99\n3\nNA\n", encoding="utf-8")
    frame = read_table(path, missing_values=["-99"])
    assert frame["x"].isna().tolist() == [True, False, False]  # "NA" is text when not listed
    assert frame["x"][2] == "NA"


def test_tsv_round_trip(tmp_path):
    original = pd.DataFrame({"a": ["x y", "z"], "b": ["1", "2"]})
    path = tmp_path / "d.tsv"
    original.to_csv(path, sep="\t", index=False)
    pd.testing.assert_frame_equal(read_table(path), original.astype("str"))


def test_parquet_round_trip_keeps_types_and_blanks_missing_codes(tmp_path):
    original = pd.DataFrame({
        "died": [0.0, 1.0, np.nan, 1.0],
        "age": [50, -99, 70, 61],
        "site": ["A", "NA", "B", "A"],
    })
    path = tmp_path / "d.parquet"
    original.to_parquet(path, engine="pyarrow")
    frame = read_table(path, missing_values=["NA", "-99"])
    assert frame["age"].isna().tolist() == [False, True, False, False]
    assert frame["site"].isna().tolist() == [False, True, False, False]
    assert frame["died"].dtype == np.float64
    assert frame["age"].iloc[[0, 2, 3]].tolist() == [50, 70, 61]


def test_stata_value_labels_become_category_labels(tmp_path):
    original = pd.DataFrame({
        "sex": pd.Series([1, 2, 2, 1], dtype="int8"),
        "grade": pd.Categorical(["low", "high", "low", "low"], categories=["low", "high"]),
        "age": [40.5, np.nan, 61.0, 33.0],
    })
    path = tmp_path / "d.dta"
    original.to_stata(path, write_index=False, value_labels={"sex": {1: "female", 2: "male"}})
    frame = read_table(path)
    assert isinstance(frame["sex"].dtype, pd.CategoricalDtype)
    assert frame["sex"].tolist() == ["female", "male", "male", "female"]
    assert frame["grade"].tolist() == ["low", "high", "low", "low"]
    assert list(frame["grade"].cat.categories) == ["low", "high"]
    assert frame["age"].isna().tolist() == [False, True, False, False]
    audit = audit_frame(frame, name="d.dta")
    assert audit.column("sex").levels == (("female", 2), ("male", 2))


def test_stata_labels_match_study_levels(tmp_path):
    original = pd.DataFrame({
        "pid": [1, 2, 3, 4],
        "died": pd.Series([0, 1, 1, 0], dtype="int8"),
        "age": [50.0, 60.0, 70.0, 80.0],
        "sbp": [120.0, 130.0, 140.0, 150.0],
        "region": ["N", "S", "N", "S"],
        "sex": pd.Series([1, 2, 2, 1], dtype="int8"),
    })
    path = tmp_path / "d.dta"
    original.to_stata(path, write_index=False, value_labels={"sex": {1: "F", 2: "M"}})
    cohort = prepare_cohort(make_study(), read_table(path), source=str(path))
    assert cohort.frame["sex"].tolist() == ["F", "M", "M", "F"]
    assert cohort.y.tolist() == [0, 1, 1, 0]  # int8 0/1 compared with the text levels "0", "1"


@pytest.mark.parametrize("suffix, module, extra", [(".sav", "pyreadstat", "pip install riskvet[spss]"),
                                                    (".xlsx", "openpyxl", "pip install riskvet[excel]")])
def test_missing_optional_reader_names_the_extra(tmp_path, monkeypatch, suffix, module, extra):
    path = tmp_path / f"d{suffix}"
    path.write_bytes(b"")
    monkeypatch.setitem(sys.modules, module, None)  # makes `import module` fail
    with pytest.raises(DataError) as info:
        read_table(path)
    assert module in str(info.value) and extra in str(info.value)


def test_unknown_suffix_lists_allowed_ones(tmp_path):
    path = tmp_path / "d.json"
    path.write_text("{}")
    with pytest.raises(DataError) as info:
        read_table(path)
    for suffix in SUFFIXES:
        assert suffix in str(info.value)
    assert "'.json'" in str(info.value)


def test_missing_file_is_named(tmp_path):
    with pytest.raises(DataError, match="nope.csv: data file not found"):
        read_table(tmp_path / "nope.csv")


def test_suffix_case_does_not_matter(tmp_path):
    path = tmp_path / "D.CSV"
    path.write_text("a\n1\n")
    assert read_table(path)["a"].tolist() == ["1"]


# -- audit_frame ------------------------------------------------------------------------


def test_audit_counts_by_hand():
    audit = audit_frame(hand_frame(), name="hand", private_columns=["pid"])
    assert isinstance(audit, FrameAudit) and audit.rows == 10
    age = audit.column("age")
    assert (age.kind, age.n_missing, age.n_unique, age.minimum, age.maximum) == ("numeric", 3, 7, 45.0, 80.0)
    region = audit.column("region")
    assert (region.kind, region.n_missing, region.levels) == ("categorical", 1, (("N", 5), ("S", 4)))
    assert audit.column("died").n_missing == 1
    notes = audit.column("notes")
    assert notes.kind == "categorical" and notes.n_unique == 10  # 10 distinct <= default cap of 20
    table = audit.to_frame()
    assert table.loc[table["column"] == "region", "levels"].item() == "N: 5; S: 4"
    assert list(table.columns) == ["column", "dtype", "kind", "missing", "unique", "minimum", "maximum", "levels"]


def test_audit_shows_no_rows_or_ids():
    frame = hand_frame()
    audit = audit_frame(frame, name="hand", max_levels=5, private_columns=["pid"])
    pid = audit.column("pid")
    assert pid.private and pid.levels is None and pid.minimum is None and pid.n_unique == 10
    assert audit.column("notes").kind == "text" and audit.column("notes").levels is None  # 10 > cap 5
    text = json.dumps(audit.to_dict(), allow_nan=False)
    assert "p01" not in text and "free text" not in text


def test_audit_truncates_category_levels():
    frame = pd.DataFrame({"c": pd.Categorical(["a"] * 3 + ["b"] * 2 + ["c"], categories=["a", "b", "c", "d"])})
    col = audit_frame(frame, name="f", max_levels=2).column("c")
    assert col.levels == (("a", 3), ("b", 2)) and col.levels_truncated
    col = audit_frame(frame, name="f").column("c")
    assert col.levels == (("a", 3), ("b", 2), ("c", 1), ("d", 0))  # declared but empty category shown


def test_audit_rejects_bad_input():
    with pytest.raises(DataError, match="audit_frame: frame"):
        audit_frame([[1, 2]], name="x")
    with pytest.raises(DataError, match="max_levels"):
        audit_frame(hand_frame(), name="x", max_levels=0)
    with pytest.raises(DataError, match="private_columns"):
        audit_frame(hand_frame(), name="x", private_columns=["id"])


# -- prepare_cohort -------------------------------------------------------------------------


def test_exclusion_counts_by_hand():
    cohort = prepare_cohort(make_study(), hand_frame(), source="hand.csv")
    assert isinstance(cohort, PreparedCohort)
    assert cohort.exclusions.to_dict(orient="records") == [
        {"reason": "missing outcome", "column": "died", "excluded": 1, "remaining": 9},
        {"reason": "missing predictor", "column": "age", "excluded": 2, "remaining": 7},
        {"reason": "missing predictor", "column": "sbp", "excluded": 1, "remaining": 6},
        {"reason": "missing predictor", "column": "region", "excluded": 1, "remaining": 5},
        {"reason": "missing predictor", "column": "sex", "excluded": 0, "remaining": 5},
    ]
    assert (cohort.n_screened, cohort.n_analysed) == (10, 5)
    assert cohort.frame["pid"].tolist() == ["p01", "p02", "p07", "p08", "p10"]
    assert cohort.y.tolist() == [0, 1, 1, 0, 1]
    assert cohort.outcome_counts == {"0": 2, "1": 3}
    assert list(cohort.frame.columns) == ["pid", "died", "age", "sbp", "region", "sex"]  # "notes" dropped
    assert cohort.frame["age"].dtype == np.float64 and cohort.frame["age"].tolist() == [50, 61, 72, 58, 80]
    assert cohort.category_levels == {"region": ("N", "S"), "sex": ("F", "M")}
    flow = cohort.to_frame()
    assert flow["remaining"].tolist() == [10, 9, 7, 6, 5, 5]
    assert (flow["remaining"].shift() - flow["excluded"]).iloc[1:].tolist() == flow["remaining"].iloc[1:].tolist()


def test_prepared_cohort_dict_is_json_and_has_no_rows():
    cohort = prepare_cohort(make_study(), hand_frame())
    text = json.dumps(cohort.to_dict(), allow_nan=False)
    assert "p01" not in text and '"n_analysed": 5' in text


def test_event_level_coded_last_whatever_the_file_order():
    study = make_study(outcome={"column": "died", "type": "binary", "levels": ["yes", "no"], "event": "yes"})
    frame = hand_frame().assign(died=["no", "yes", None, "no", "yes", "no", "yes", "no", "no", "yes"])
    assert prepare_cohort(study, frame).y.tolist() == [0, 1, 1, 0, 1]


def test_ordinal_levels_coded_in_study_order():
    study = make_study(outcome={"column": "grade", "type": "ordinal", "levels": ["none", "mild", "severe"]})
    frame = hand_frame().assign(grade=["severe", "none", "mild", "mild", "none", "none", "mild", "severe", "none", "none"])
    cohort = prepare_cohort(study, frame)
    assert cohort.y.tolist() == [2, 0, 1, 2, 0]  # rows p01 p02 p07 p08 p10
    assert cohort.outcome_levels == ("none", "mild", "severe")


def test_unknown_outcome_values_with_counts():
    frame = hand_frame().assign(died=["0", "2", "2", "yes", "1", "2", "1", "0", "0", "1"])
    with pytest.raises(DataError) as info:
        prepare_cohort(make_study(), frame, source="d.csv")
    message = str(info.value)
    assert message.startswith("d.csv: column 'died' (outcome.column)")
    assert "['0', '1']" in message and "4 rows with other values" in message
    assert "'2' (3 rows), 'yes' (1 row)" in message


def test_outcome_numbers_match_text_levels():
    # 1.0 and 0.0 from a float column (a missing value makes integers float) are the levels "1" and "0"
    frame = hand_frame().assign(died=[0.0, 1.0, np.nan, 0.0, 1.0, 0.0, 1.0, 0.0, 0.0, 1.0])
    assert prepare_cohort(make_study(), frame).y.tolist() == [0, 1, 1, 0, 1]


def test_unparseable_numeric_values_listed_with_counts():
    frame = hand_frame().assign(age=["50", ">90", "61", ">90", "unknown", "45", " 72 ", "58", "inf", "80"])
    with pytest.raises(DataError) as info:
        prepare_cohort(make_study(), frame, source="d.csv")
    message = str(info.value)
    assert "column 'age' (predictor, form 'linear')" in message and "finite numbers" in message
    assert "4 rows with other values: '>90' (2 rows), 'inf' (1 row), 'unknown' (1 row) (lines 3, 5, 6, 10 of the file)" in message
    assert "' 72 '" not in message  # surrounding spaces are not an error


def test_missing_column_suggests_close_matches():
    frame = hand_frame().rename(columns={"age": "Age", "region": "regoin"})
    with pytest.raises(DataError) as info:
        prepare_cohort(make_study(), frame, source="d.csv")
    message = str(info.value)
    assert "2 problems" in message
    assert "column 'age' (predictor, form 'linear') not found; did you mean 'Age'?" in message
    assert "column 'region' (predictor, form 'categorical') not found; did you mean 'regoin'?" in message


def test_missing_id_column_is_reported():
    with pytest.raises(DataError, match=r"column 'pid' \(data.id_column\) not found"):
        prepare_cohort(make_study(), hand_frame().drop(columns="pid"))


def test_duplicate_ids_counted_without_values():
    frame = hand_frame()
    frame.loc[[1, 4, 7], "pid"] = "p01"  # 4 rows share p01
    frame.loc[9, "pid"] = "p09"  # 2 rows share p09
    with pytest.raises(DataError) as info:
        prepare_cohort(make_study(), frame)
    message = str(info.value)
    assert "6 rows share 2 id value(s)" in message
    assert "p01" not in message and "p09" not in message
    # where they are in the file, so the user can find them (the header is line 1 of a .csv)
    with pytest.raises(DataError) as info:
        prepare_cohort(make_study(), frame, source="cohort.csv")
    duplicated = frame["pid"].duplicated(keep=False).to_numpy().nonzero()[0].tolist()
    assert duplicated == [0, 1, 4, 7, 8, 9]  # data rows 0.. ; in a .csv, data row i is line i + 2
    assert "at lines 2, 3, 6, 9, 10 and 1 more of the file (values not shown)" in str(info.value)
    with pytest.raises(DataError) as info:
        prepare_cohort(make_study(), frame, source="cohort.parquet")
    assert "at rows 1, 2, 5, 8, 9 and 1 more of the file" in str(info.value)  # other formats count data rows from 1


def test_categorical_values_outside_levels():
    frame = hand_frame().assign(sex=["F", "M", "X", "M", "f", "M", "F", "X", "F", "M"])
    with pytest.raises(DataError) as info:
        prepare_cohort(make_study(), frame)
    message = str(info.value)
    assert "column 'sex'" in message and "['F', 'M']" in message
    assert "'X' (2 rows), 'f' (1 row)" in message


def test_all_value_problems_reported_together():
    frame = hand_frame().assign(died=["0", "9"] * 5, sbp=["x"] * 10)
    with pytest.raises(DataError) as info:
        prepare_cohort(make_study(), frame)
    assert "2 problems" in str(info.value) and "'died'" in str(info.value) and "'sbp'" in str(info.value)


def validation_frame() -> pd.DataFrame:
    """Six invented rows; region East appears twice (rows v2, v5), West once (v6)."""
    return pd.DataFrame({
        "pid": [f"v{i}" for i in range(1, 7)],
        "died": [0, 1, 0, 1, 0, 1],
        "age": [55.0, 64.0, 71.0, 48.0, 69.0, 77.0],
        "sbp": [118.0, 141.0, 133.0, 127.0, 150.0, 139.0],
        "region": ["N", "East", "S", "N", "East", "West"],
        "sex": ["M", "F", "F", "M", "M", "F"],
    })


def test_unseen_validation_category_names_column_level_and_count():
    study = make_study()
    derivation = prepare_cohort(study, hand_frame())
    with pytest.raises(DataError) as info:
        prepare_cohort(study, validation_frame(), role="validation", label="later", source="later.parquet", reference=derivation)
    message = str(info.value)
    assert message.startswith("later.parquet: 2 problems")
    assert "column 'region' (predictor, form 'categorical'): level 'East' (2 rows) does not occur" in message
    assert "level 'West' (1 row)" in message
    assert "['N', 'S']" in message and "data.category_map.region" in message


def test_category_map_applied_and_counted():
    study = make_study(data={"derivation": "d.csv", "validation": [{"label": "later", "path": "v.csv"}],
                             "id_column": "pid", "category_map": {"region": {"East": "S", "West": "N", "Mid": "N"}}})
    derivation = prepare_cohort(study, hand_frame())
    cohort = prepare_cohort(study, validation_frame(), role="validation", label="later", reference=derivation)
    assert cohort.frame["region"].tolist() == ["N", "S", "S", "N", "S", "N"]
    assert [(m.source_level, m.target_level, m.count) for m in cohort.category_mappings] == [
        ("East", "S", 2), ("West", "N", 1), ("Mid", "N", 0)]
    assert cohort.to_dict()["category_mappings"][0] == {"column": "region", "source_level": "East", "target_level": "S", "count": 2}


def test_category_map_only_for_categorical_predictors():
    study = make_study(data={"derivation": "d.csv", "category_map": {"age": {"old": "80"}}})
    with pytest.raises(DataError, match="data.category_map.age"):
        prepare_cohort(study, validation_frame(), role="validation")


def test_without_reference_unseen_check_is_skipped():
    cohort = prepare_cohort(make_study(), validation_frame(), role="validation", label="later")
    assert cohort.frame["region"].tolist()[:2] == ["N", "East"]


def test_existing_rule_values_within_levels():
    rule = {"column": "triage", "kind": "categories", "levels": ["green", "amber", "red"]}
    study = make_study(existing_rule=rule)
    frame = validation_frame().assign(triage=["green", "red", "blue", "amber", None, "blue"])
    with pytest.raises(DataError) as info:
        prepare_cohort(study, frame, role="validation", label="later")
    assert "column 'triage' (existing_rule, kind 'categories')" in str(info.value)
    assert "'blue' (2 rows)" in str(info.value)
    frame = frame.assign(triage=["green", "red", "red", "amber", None, "green"])
    cohort = prepare_cohort(study, frame, role="validation", label="later")
    assert cohort.rule_column == "triage" and cohort.n_analysed == 6  # a missing rule value excludes nothing


def test_existing_rule_required_where_it_is_compared():
    rule = {"column": "triage", "kind": "score"}
    study = make_study(existing_rule=rule)
    # derivation with validation cohorts configured: optional; validation: required
    assert prepare_cohort(study, hand_frame()).rule_column is None
    with pytest.raises(DataError, match="'triage' .*not found"):
        prepare_cohort(study, validation_frame(), role="validation", label="later")


def test_new_predictors_required_only_in_the_updating_cohort():
    study = make_study(updating={"new_predictors": {"lactate": "linear"}})
    frame = validation_frame()
    with pytest.raises(DataError, match="'lactate' \\(updating.new_predictors"):
        prepare_cohort(study, frame, role="validation", label="later")
    other = prepare_cohort(study, frame, role="validation", label="elsewhere")
    assert other.new_predictors == ()
    with_new = frame.assign(lactate=[1.2, None, 2.5, 3.1, 0.9, 4.0])
    cohort = prepare_cohort(study, with_new, role="validation", label="later")
    assert cohort.new_predictors == ("lactate",) and cohort.n_analysed == 6  # carried, not used to exclude
    assert prepare_cohort(study, with_new.assign(pid=[f"d{i}" for i in range(6)])).new_predictors == ()


def test_subgroup_columns_required_in_validation():
    study = make_study(external_validation={"subgroups": [{"column": "ward"}, {"column": "age", "bands": [60]}]})
    with pytest.raises(DataError, match="'ward' \\(external_validation.subgroups\\) not found"):
        prepare_cohort(study, validation_frame(), role="validation", label="later")
    cohort = prepare_cohort(study, validation_frame().assign(ward=list("ABABAB")), role="validation", label="later")
    assert cohort.subgroup_columns == ("ward", "age")


def test_no_rows_left_is_an_error():
    frame = hand_frame().assign(sbp=[None] * 10)
    with pytest.raises(DataError, match="no rows remain.*missing predictor 'sbp': 7"):
        prepare_cohort(make_study(), frame)


@pytest.mark.parametrize("kwargs, fragment", [
    ({"role": "test"}, "prepare_cohort: role"),
    ({"missing": "pairwise"}, "prepare_cohort: missing: expected 'complete_case' or 'multiple_imputation'"),
])
def test_prepare_cohort_rejects_bad_options(kwargs, fragment):
    with pytest.raises(DataError, match=fragment):
        prepare_cohort(make_study(), hand_frame(), **kwargs)


def test_prepare_cohort_rejects_bad_arguments():
    study = make_study()
    with pytest.raises(DataError, match="prepare_cohort: study"):
        prepare_cohort({"study": {}}, hand_frame())
    with pytest.raises(DataError, match="prepare_cohort: frame"):
        prepare_cohort(study, hand_frame().to_dict())
    derivation = prepare_cohort(study, hand_frame())
    with pytest.raises(DataError, match="prepare_cohort: reference"):
        prepare_cohort(study, hand_frame(), reference=derivation)
    with pytest.raises(DataError, match="prepare_cohort: reference"):
        prepare_cohort(study, validation_frame(), role="validation", reference="derivation")
    assert issubclass(DataError, RiskvetError)


# -- load_cohorts ---------------------------------------------------------------------------


def test_load_cohorts_reads_every_file(tmp_path):
    hand_frame().to_csv(tmp_path / "derivation.csv", index=False)
    validation_frame().assign(region=["N", "S", "S", "N", "S", "N"]).to_parquet(tmp_path / "later.parquet")
    pd.DataFrame({"a": ["1", "2", "NA"], "b": ["1.5", "x", "2"]}).to_csv(tmp_path / "ratings.csv", index=False)
    study = make_study(
        base_dir=tmp_path,
        data={"derivation": "derivation.csv", "validation": [{"label": "later", "path": "later.parquet"}],
              "id_column": "pid", "ratings": "ratings.csv"},
        agreement={"items": [{"name": "temp", "rater_a": "a", "rater_b": "b", "scale": "continuous"}]},
    )
    with pytest.raises(DataError, match=r"ratings.csv: column 'b' .*'x' \(1 row\)"):
        load_cohorts(study)
    pd.DataFrame({"a": ["1", "2", "NA"], "b": ["1.5", "3", "2"]}).to_csv(tmp_path / "ratings.csv", index=False)
    cohorts = load_cohorts(study)
    assert isinstance(cohorts, Cohorts)
    assert cohorts.derivation.n_analysed == 5 and list(cohorts.validation) == ["later"]
    assert cohorts.validation["later"].n_analysed == 6
    assert cohorts.ratings["b"].tolist() == [1.5, 3.0, 2.0] and cohorts.ratings["a"].isna().sum() == 1
    assert cohorts.derivation.source == str(tmp_path / "derivation.csv")
    assert cohorts.to_frame()["cohort"].unique().tolist() == ["derivation", "later"]
    json.dumps(cohorts.to_dict(), allow_nan=False)


def test_load_cohorts_names_a_missing_file(tmp_path):
    hand_frame().to_csv(tmp_path / "derivation.csv", index=False)
    with pytest.raises(DataError, match="later.parquet: data file not found"):
        load_cohorts(make_study(base_dir=tmp_path))


# -- descriptive_table, standardised_differences -------------------------------------------------


def described_cohort():
    """Twelve invented rows: outcome 0 x7, 1 x5.

    site by outcome (hand counts): 0: A 5, B 2; 1: A 1, B 4; overall A 6, B 6.
    age: outcome 0 = 40..100 by 10 (median 70, quartiles 55 and 85, mean 70,
    SD 21.602); outcome 1 = 30..50 by 5 (median 40, quartiles 35 and 45,
    mean 40, SD 7.906).
    """
    study = study_from_dict({
        "study": {"name": "describe"},
        "data": {"derivation": "d.csv"},
        "outcome": {"column": "y", "type": "binary", "levels": [0, 1], "event": 1, "labels": {0: "no", 1: "yes"}},
        "predictors": {"candidates": {"age": "linear", "site": "categorical", "smoker": "linear"}},
    })
    frame = pd.DataFrame({
        "y": [0] * 7 + [1] * 5,
        "age": [40, 50, 60, 70, 80, 90, 100, 30, 35, 40, 45, 50],
        "site": ["A"] * 5 + ["B"] * 2 + ["A"] + ["B"] * 4,
        "smoker": [0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 1, 1],
    })
    return study, prepare_cohort(study, frame)


def test_descriptive_table_counts_summaries_and_suppression():
    study, cohort = described_cohort()
    table = descriptive_table(cohort, levels=study.outcome.ordered_levels, labels=study.outcome.labels, min_cell_count=0).to_frame()
    assert list(table.columns) == ["predictor", "level", "statistic", "no", "yes", "overall"]
    rows = {(r.predictor, r.level, r.statistic): (r.no, r.yes, r.overall) for r in table.itertuples()}
    assert rows[("n", "", "n")] == ("7", "5", "12")
    assert rows[("site", "A", "n (%)")] == ("5 (71.4%)", "1 (20.0%)", "6 (50.0%)")  # 5/7, 1/5, 6/12
    assert rows[("age", "", "median [IQR]")][:2] == ("70.0 [55.0, 85.0]", "40.0 [35.0, 45.0]")
    assert rows[("age", "", "mean (SD)")][:2] == ("70.0 (21.6)", "40.0 (7.9)")
    # reference: pandas quantile (linear interpolation) and std (n - 1), pandas 3.1
    ages = cohort.frame["age"]
    q = ages.quantile([0.25, 0.5, 0.75])
    assert rows[("age", "", "median [IQR]")][2] == f"{q[0.5]:.1f} [{q[0.25]:.1f}, {q[0.75]:.1f}]"
    assert rows[("age", "", "mean (SD)")][2] == f"{ages.mean():.1f} ({ages.std():.1f})"
    # a numeric 0/1 predictor is shown as counts of each value
    assert rows[("smoker", "1", "n (%)")] == ("1 (14.3%)", "5 (100.0%)", "6 (50.0%)")


def test_descriptive_table_suppresses_small_counts_and_their_complements():
    _, cohort = described_cohort()
    result = descriptive_table(cohort, min_cell_count=5)
    rows = {(r.predictor, r.level): (r[4], r[5], r[6]) for r in result.to_frame().itertuples()}
    # site: yes-A = 1, no-B = 2, yes-B = 4 are below 5; no-A (5) is hidden as well, else 6 - 1 = 5 reveals yes-A
    assert rows[("site", "A")] == ("suppressed", "suppressed", "6 (50.0%)")
    assert rows[("site", "B")] == ("suppressed", "suppressed", "6 (50.0%)")
    # smoker: no-1 = 1 is hidden; then no-0 (6) too, else 7 - 6 reveals it, and the
    # yes column (0 and 5) gets a second hidden cell so yes-0 or yes-1 cannot be recovered
    assert rows[("smoker", "1")][0] == "suppressed" and rows[("smoker", "0")][0] == "suppressed"
    assert_no_line_with_one_hidden_cell(result)
    assert result.n_suppressed == 8
    wider = descriptive_table(cohort, min_cell_count=6)
    assert_no_line_with_one_hidden_cell(wider)
    table = wider.to_frame()
    assert table.loc[table["statistic"] == "mean (SD)", "1"].item() == "n<6"  # outcome 1 has 5 rows
    assert wider.n_suppressed_summaries == 2
    # both outcome totals are hidden (5 < 6, then 7 as its complement), so the shown
    # smoker count has no percentage: 6 (85.7%) would reveal the total 7
    assert table.loc[0, ["0", "1", "overall"]].tolist() == ["suppressed", "suppressed", "12"]
    assert table.loc[(table["predictor"] == "smoker") & (table["level"] == "0"), "0"].item() == "6"


def assert_no_line_with_one_hidden_cell(result):
    """Every published sum (a block's levels plus the n row per column; each row
    across outcome columns plus overall) has zero or at least two hidden cells."""
    table = result.to_frame()
    hidden = table.iloc[:, 3:].apply(lambda c: c.eq("suppressed")).to_numpy()
    counted = (table["statistic"] != "median [IQR]") & (table["statistic"] != "mean (SD)")
    assert not (hidden[counted.to_numpy()].sum(axis=1) == 1).any()
    for name in table.loc[table["statistic"] == "n (%)", "predictor"].unique():
        block = np.vstack([hidden[0], hidden[(table["predictor"] == name).to_numpy()]])
        assert not (block.sum(axis=0) == 1).any()
    assert result.n_suppressed == int(hidden.sum())
    json.dumps(result.to_dict(), allow_nan=False)


def test_descriptive_table_rejects_bad_input():
    _, cohort = described_cohort()
    with pytest.raises(DataError, match="descriptive_table: levels"):
        descriptive_table(cohort, levels=["1", "0"])
    with pytest.raises(DataError, match="min_cell_count"):
        descriptive_table(cohort, min_cell_count=-1)
    with pytest.raises(DataError, match="descriptive_table: cohort"):
        descriptive_table(pd.DataFrame())


def test_standardised_differences_hand_worked():
    study = study_from_dict({
        "study": {"name": "smd"},
        "data": {"derivation": "d.csv"},
        "outcome": {"column": "y", "type": "binary", "levels": [0, 1], "event": 1},
        "predictors": {"candidates": {"x": "linear", "flag": "linear", "site": "categorical"}},
    })
    a = prepare_cohort(study, pd.DataFrame({"y": [0, 1, 0, 1], "x": [1, 2, 3, 2], "flag": [1, 1, 0, 0], "site": ["A", "A", "B", "B"]}))
    b = prepare_cohort(study, pd.DataFrame({"y": [1, 0, 1, 0], "x": [2, 3, 4, 3], "flag": [1, 0, 0, 0], "site": ["A", "B", "B", "B"]}),
                       role="validation")
    table = standardised_differences(a, b).to_frame()
    d = dict(zip(zip(table["predictor"], table["level"]), table["difference"]))
    # x: means 2 and 3, sample variances 2/3 and 2/3, so d = -1 / sqrt(2/3) (Austin, Stat Med 2009, eq. for continuous)
    assert d[("x", "")] == pytest.approx(-1 / math.sqrt(2 / 3), rel=1e-12)  # exact arithmetic, float rounding only
    # flag: proportions 0.5 and 0.25: d = 0.25 / sqrt((0.25 + 0.1875) / 2) (Austin 2009, binary)
    assert d[("flag", "1")] == pytest.approx(0.25 / math.sqrt(0.21875), rel=1e-12)
    assert d[("site", "A")] == pytest.approx(0.25 / math.sqrt(0.21875), rel=1e-12)
    assert d[("site", "B")] == pytest.approx(-0.25 / math.sqrt(0.21875), rel=1e-12)
    json.dumps(standardised_differences(a, b).to_dict(), allow_nan=False)


def test_load_cohorts_refuses_an_outcome_level_with_no_rows(tmp_path):
    """Every stage needs every outcome level; a cohort without one is refused before anything runs."""
    from riskvet.intake.data import load_cohorts
    from riskvet.chain.scaffold import new_study_folder
    from riskvet.intake.study import load_study

    study_path = new_study_folder(tmp_path / "s", n_derivation=200, n_validation=150, n_ratings=20, n_boot=2)
    derivation = tmp_path / "s" / "data" / "derivation.csv"
    lines = derivation.read_text().splitlines(keepends=True)
    derivation.write_text("".join([lines[0]] + [line for line in lines[1:] if ",transferred" not in line]))
    with pytest.raises(DataError, match=r"derivation\.csv.*'disposition'.*none in \['transferred'\]"):
        load_cohorts(load_study(study_path))


def test_binary_rated_item_with_a_third_value_is_refused(tmp_path):
    from riskvet.intake.data import load_cohorts
    from riskvet.chain.scaffold import new_study_folder
    from riskvet.intake.study import load_study

    study_path = new_study_folder(tmp_path / "s", n_derivation=200, n_validation=150, n_ratings=20, n_boot=2)
    ratings = tmp_path / "s" / "data" / "ratings.csv"
    frame = pd.read_csv(ratings, dtype=str)
    frame.loc[3, "confusion_rater_a"] = "x"
    frame.to_csv(ratings, index=False)
    with pytest.raises(DataError, match=r"confusion_rater_a.*scale 'binary'.*at most 2 distinct values.*'x': 1"):
        load_cohorts(load_study(study_path))


def test_descriptive_table_hides_a_count_that_zeros_would_give_away():
    # A block where the old one-subtraction rule hid only zeros beside a small count: with the
    # group totals shown, the zeros are known (counts are never negative) and the small count follows.
    # Checked here by integer programming (scipy milp): no hidden non-zero count has a single value.
    from riskvet.reporting.disclosure import determined_counts, suppress_until_safe

    counts = {}
    table = [[0, 18, 3], [0, 6, 0], [3, 22, 58], [1, 5, 18], [3, 5, 9], [2, 10, 16]]  # rows: groups; columns: levels
    G, K = len(table), 3
    for g, row in enumerate(table):
        for j, n in enumerate(row):
            counts[(g, j)] = n
        counts[(g, K)] = sum(row)
    for j in range(K + 1):
        counts[(G, j)] = sum(counts[(g, j)] for g in range(G))
    lines = [[(g, j) for j in range(K + 1)] for g in range(G)] + [[(g, j) for g in range(G + 1)] for j in range(K + 1)]
    known = [(G, j) for j in range(K + 1)]
    hidden = suppress_until_safe(counts, lines, 5, known=known)
    assert {c for c, n in counts.items() if 0 < n < 5} <= hidden
    assert not determined_counts(counts, lines, hidden, known=known)
