"""The command line answers bad input in the user's terms: one message naming the place, never a traceback."""

from __future__ import annotations


import pytest

from riskvet.chain import cli
from riskvet.chain.scaffold import new_study_folder


def _run(capsys, *argv: str) -> tuple[int, str, str]:
    status = cli.main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_new_refuses_an_empty_name(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    status, out, err = _run(capsys, "new", "")
    assert status == 1 and err.splitlines()[0] == "riskvet new: the folder name is empty; name a new or empty folder for the study"
    assert not list(tmp_path.iterdir())  # nothing was written in the working folder


def test_new_refuses_an_existing_study_and_a_file(capsys, tmp_path):
    new_study_folder(tmp_path / "s", n_derivation=60, n_validation=40, n_ratings=20)
    status, _, err = _run(capsys, "new", str(tmp_path / "s"))
    assert status == 1 and err.startswith(f"riskvet new: {tmp_path / 's' / 'study.yaml'}: already exists; riskvet new never overwrites")
    (tmp_path / "f.txt").write_text("x")
    status, _, err = _run(capsys, "new", str(tmp_path / "f.txt"))
    assert status == 1 and "is a file; riskvet new writes a study folder" in err.splitlines()[0]


def test_new_into_an_unwritable_place_says_so(capsys, tmp_path):
    blocker = tmp_path / "blocker"
    blocker.write_text("a file where a folder would go")
    status, _, err = _run(capsys, "new", str(blocker / "study"))
    assert status == 1 and "cannot write the study folder there" in err.splitlines()[0]
    assert "Traceback" not in err


def test_new_writes_a_gitignore_for_records(tmp_path):
    study = new_study_folder(tmp_path / "s", n_derivation=60, n_validation=40, n_ratings=20)
    assert (study.parent / ".gitignore").read_text() == "records/\nworkbench/draft/\nworkbench/jupyterlab.log\n"  # drafts stay out; adapted notebooks may be versioned


def test_a_folder_given_for_a_study_file_suggests_the_file(capsys, tmp_path):
    study = new_study_folder(tmp_path / "s", n_derivation=60, n_validation=40, n_ratings=20)
    status, _, err = _run(capsys, "check", str(study.parent))
    assert status == 1 and err.splitlines()[0] == f"riskvet check: {study.parent}: is a folder, not a study file; did you mean {study}?"


def test_a_study_file_that_is_not_utf8(capsys, tmp_path):
    path = tmp_path / "latin1.yaml"
    path.write_bytes("study:\n  name: café\n".encode("latin-1"))
    status, _, err = _run(capsys, "check", str(path))
    assert status == 1 and err.splitlines()[0] == f"riskvet check: {path}: not UTF-8 text (byte 0xe9 at position 18); save the study file as UTF-8"


def test_yaml_errors_name_the_study_file(capsys, tmp_path):
    path = tmp_path / "broken.yaml"
    path.write_text("study: [\n")
    status, _, err = _run(capsys, "check", str(path))
    assert status == 1 and err.startswith(f"riskvet check: {path}: not valid YAML")
    assert f'in "{path}", line 2' in err and "<unicode string>" not in err


@pytest.mark.parametrize("command", ["new", "check", "run", "plan", "verify", "compare", "demo"])
def test_positional_arguments_have_help(command, capsys):
    with pytest.raises(SystemExit):
        cli.main([command, "--help"])
    text = capsys.readouterr().out
    positional = text.split("positional arguments:")[1].split("options:")[0]
    for line in [ln for ln in positional.splitlines() if ln.startswith("  ") and not ln.startswith("   ")]:
        assert len(line.split()) > 1, f"riskvet {command}: positional argument without help: {line.strip()}"


def test_check_audit_reads_in_words(capsys, tmp_path):
    study = new_study_folder(tmp_path / "s", n_derivation=200, n_validation=50, n_ratings=20)
    assert cli.main(["check", str(study)]) == 0
    out = capsys.readouterr().out
    audit = out.split("columns as received:")[1].split("\n\n")[0]
    header = audit.strip().splitlines()[0].split()
    assert header[:3] == ["column", "reads", "as"] and "dtype" not in header
    assert "NaN" not in audit and "None" not in audit
    words = {line.split()[1] for line in audit.strip().splitlines()[1:]}
    assert words <= {"number", "category", "text"} and "number" in words and "category" in words
    assert "\u2014" in audit  # empty cells as a dash
