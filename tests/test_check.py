"""``riskvet check`` catches what ``riskvet run`` would: a study that passes it fails in a run only on a modelling outcome."""

from __future__ import annotations

import pandas as pd
import pytest
import yaml

from riskvet.chain import cli
from riskvet.chain.scaffold import new_study_folder
from riskvet.errors import DataError, StudyError
from riskvet.intake.data import load_cohorts, prepare_cohort, read_table
from riskvet.intake.study import load_study
from riskvet.modelling.derive import check_before_fitting

from test_runner import SMALL, run_quietly, write_fake_templates


@pytest.fixture()
def study(tmp_path):
    return new_study_folder(tmp_path / "demo", **SMALL, missing_data="complete_case")


def _edit(study, change):
    raw = yaml.safe_load(study.read_text(encoding="utf-8"))
    change(raw)
    study.write_text(yaml.safe_dump(raw, sort_keys=False), encoding="utf-8")


def _first_error_line(capsys, *argv) -> tuple[int, str]:
    status = cli.main(list(argv))
    return status, capsys.readouterr().err.splitlines()[0]


def test_a_reference_level_in_the_wrong_case_fails_check_and_run_before_any_record(study, capsys, tmp_path):
    _edit(study, lambda raw: raw["predictors"]["candidates"]["sex"].update(reference="Female"))
    status, line = _first_error_line(capsys, "check", str(study))
    assert status == 1
    assert line == (
        f"riskvet check: {study}: predictors.candidates.sex.reference: expected one of the levels in the data ['female', 'male']; "
        "received 'Female' (the data write it 'female'; levels are compared exactly, case included)"
    )
    templates = write_fake_templates(tmp_path / "templates")
    with pytest.raises(StudyError, match="predictors.candidates.sex.reference"):
        run_quietly(study, stages=["derivation"], templates_dir=templates)
    assert not (study.parent / "records").exists() or not list((study.parent / "records").iterdir())


def test_a_semicolon_separated_csv_is_named_once(study, capsys):
    path = study.parent / "data" / "derivation.csv"
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    frame.to_csv(path, sep=";", index=False)
    status, line = _first_error_line(capsys, "check", str(study))
    assert status == 1
    assert line == (
        f"riskvet check: {path}: the header line holds no commas but {frame.shape[1] - 1} semicolons: the file looks separated "
        "by semicolons; save it as a comma-separated .csv (with a point as the decimal mark) or as a tab-separated .tsv"
    )


def test_an_outcome_written_as_4_0_matches_the_level_4(study):
    path = study.parent / "data" / "derivation.csv"
    frame = read_table(path)
    code = {"released": "1", "observed": "2", "transferred": "3"}
    as_numbers = [code.get(v, v) if isinstance(v, str) else v for v in frame["disposition"]]
    frame["disposition"] = [f"{v}.0" if isinstance(v, str) and i % 2 else v for i, v in enumerate(as_numbers)]

    def levels(raw):
        raw["outcome"]["levels"] = ["1", "2", "3"]
        raw["outcome"]["labels"] = {"1": "released", "2": "observed", "3": "transferred"}
        raw.pop("thresholds", None)
    _edit(study, levels)
    written = prepare_cohort(load_study(study), frame)
    plain = frame.copy()
    plain["disposition"] = as_numbers
    reference = prepare_cohort(load_study(study), plain)
    assert written.outcome_counts == reference.outcome_counts and (written.y == reference.y).all()
    assert any(isinstance(v, str) and v.endswith(".0") for v in frame["disposition"])
    with pytest.raises(DataError, match="'2.5'"):
        bad = frame.copy()
        bad.loc[bad["disposition"].notna().idxmax(), "disposition"] = "2.5"
        prepare_cohort(load_study(study), bad)


def test_low_events_per_parameter_is_a_warning_of_check(study, capsys):
    s = load_study(study)
    notes = cli.support_notes(s, load_cohorts(s).derivation)
    # the small demo has about 44 people in its smallest level for 18 candidate parameters
    assert any(n.startswith("low events per candidate parameter: ") and "below 10" in n for n in notes)
    assert cli.main(["check", str(study)]) == 0
    out = capsys.readouterr().out
    assert "design: every candidate term can be built on the derivation data" in out
    for note in notes:
        assert f"warning: {note}" in out


def test_a_failing_sample_size_criterion_is_named_with_its_remedy(study, capsys):
    """The development criteria (Riley et al., Stat Med 2019) at the data's own level proportions: the 15-row
    check names the criterion that fails, how many people it needs, and suggests fewer candidates or a penalty."""
    from riskvet.planning import data_support_notes, ordinal_development_size

    notes = data_support_notes(level_counts=[9, 6], n_parameters=6)
    shrink = next(n for n in notes if n.startswith("sample-size criterion 'shrinkage' fails"))
    needed = next(c.n for c in ordinal_development_size(n_parameters=6, proportions=[0.6, 0.4]).cuts[0].criteria if c.name == "shrinkage")
    assert f"needs at least {needed} people" in shrink and "the derivation data hold 15" in shrink
    assert "fewer candidate parameters" in shrink and "penalised method" in shrink
    # with a penalised method already chosen, the advice is fewer candidates only
    assert all("penalised method" not in n for n in data_support_notes(level_counts=[9, 6], n_parameters=6, penalized=True))
    # ample data for few parameters: nothing to say
    assert data_support_notes(level_counts=[4000, 1000], n_parameters=4) == []


def test_more_folds_than_people_in_a_level_is_refused(study):
    _edit(study, lambda raw: raw.setdefault("selection", {}).update(method="forward", folds=50))
    s = load_study(study)
    cohort = load_cohorts(s).derivation
    smallest = min(cohort.outcome_counts.values())
    assert smallest < 50
    with pytest.raises(StudyError, match=rf"selection.folds: expected at most {smallest}, the people in the smallest outcome level"):
        check_before_fitting(s, cohort)
