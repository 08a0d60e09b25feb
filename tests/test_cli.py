"""The riskvet command: new, check and plan, with their exit codes."""

from __future__ import annotations

from pathlib import Path

import pytest

from riskvet.chain.cli import main
from riskvet.planning.samplesize import development_size
from riskvet.chain.scaffold import new_study_folder


@pytest.fixture(scope="module")
def study_path(tmp_path_factory) -> Path:
    return new_study_folder(tmp_path_factory.mktemp("study"), n_derivation=300, n_validation=200, n_ratings=30, n_boot=2)


def test_new_refuses_to_overwrite(tmp_path, capsys):
    assert main(["new", str(tmp_path / "s")]) == 0
    assert (tmp_path / "s" / "study.yaml").is_file() and (tmp_path / "s" / "data" / "derivation.csv").is_file()
    assert main(["new", str(tmp_path / "s")]) == 1
    assert "never overwrites" in capsys.readouterr().err


def test_check_prints_the_audit_and_exits_zero(study_path, capsys):
    assert main(["check", str(study_path)]) == 0
    out = capsys.readouterr().out
    assert "rows screened 300" in out and "missing outcome" in out and "usable" in out
    assert "PC-0" not in out  # no identifiers in the audit


def test_check_fails_on_a_misspelt_key(study_path, tmp_path, capsys):
    bad = tmp_path / "study.yaml"
    bad.write_text(study_path.read_text().replace("  folds: 10", "  folsd: 10"))
    assert main(["check", str(bad)]) == 1
    err = capsys.readouterr().err
    assert "selection.folsd" in err and "did you mean 'folds'" in err


def test_plan_prints_the_binding_criterion(study_path, capsys):
    assert main(["plan", str(study_path), "--proportions", "0.7,0.2,0.1"]) == 0
    out = capsys.readouterr().out
    # per-cut extension: the cut 'transferred' has prevalence 0.1; the study's 16 parameters and C 0.82
    from riskvet.planning.samplesize import r2_from_c

    direct = development_size(n_parameters=16, prevalence=0.1, r2_cs=r2_from_c(0.82, 0.1))
    assert f"{direct.n:,}" in out
    assert "Protocol text" in out


def test_plan_rejects_bad_proportions(study_path, capsys):
    assert main(["plan", str(study_path), "--proportions", "0.7,x"]) == 1
    assert "--proportions" in capsys.readouterr().err


def test_check_warns_about_a_value_that_looks_like_a_missing_code(study_path, tmp_path, capsys):
    """-999 in core temperature is flagged (a common missing-value code; common practice), not changed."""
    import shutil

    folder = tmp_path / "s"
    shutil.copytree(study_path.parent, folder)
    data = folder / "data" / "derivation.csv"
    lines = data.read_text().splitlines()
    header = lines[0].split(",")
    col = header.index("core_temp")
    first_complete = next(i for i, line in enumerate(lines[1:], start=1) if "" not in line.split(","))
    row = lines[first_complete].split(",")
    row[col] = "-999"
    lines[first_complete] = ",".join(row)
    data.write_text("\n".join(lines) + "\n")
    assert main(["check", str(folder / "study.yaml")]) == 0
    out = capsys.readouterr().out
    assert "warning:" in out and "'core_temp' holds 1 value(s) of -999" in out and "data.missing_values" in out
