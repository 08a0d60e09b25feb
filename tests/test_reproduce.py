"""``riskvet reproduce``: a record reruns from what it holds, beside itself, with one verdict."""

from __future__ import annotations

import json
import shutil

import pytest

from riskvet.chain import cli
from riskvet.chain.record import read_manifest, record_files, verify_record
from riskvet.chain.reproduce import reproduce
from riskvet.chain.scaffold import new_study_folder
from riskvet.errors import RecordError

from test_runner import SMALL, run_quietly, write_fake_templates

STAGES = ["derivation", "external_validation"]


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    base = tmp_path_factory.mktemp("reproduce")
    study = new_study_folder(base / "demo", **SMALL)
    templates = write_fake_templates(base / "templates")
    result = run_quietly(study, stages=STAGES, templates_dir=templates)
    assert result.ok
    return study, templates, result.record_dir


def test_a_record_reproduces_identically_beside_itself(made, capsys):
    study, _, record = made
    before = record_files(record)
    assert cli.main(["reproduce", str(record)]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[-1].startswith("identical: the rerun ") and str(record) in lines[-1]
    reruns = [p for p in record.parent.iterdir() if p != record]
    assert reruns and all(p.parent == record.parent for p in reruns)
    assert record_files(record) == before and verify_record(record).complete  # the original is untouched
    newest = max(reruns)
    assert read_manifest(newest)["study"]["sha256"] == read_manifest(record)["study"]["sha256"]


def test_data_found_in_another_folder(made, tmp_path):
    study, _, record = made
    elsewhere = tmp_path / "reviewer-data"
    shutil.copytree(study.parent / "data", elsewhere)
    assert reproduce(record, data=elsewhere).verdict == "identical"


def test_a_changed_data_file_stops_the_rerun_naming_it(made, tmp_path, capsys):
    study, _, record = made
    elsewhere = tmp_path / "changed"
    shutil.copytree(study.parent / "data", elsewhere)
    path = elsewhere / "derivation.csv"
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    lines[1] = lines[1].replace(",45,", ",46,", 1) if ",45," in lines[1] else lines[1].rstrip("\n") + "\n"
    lines.append(lines[1])  # one more row: the content certainly differs
    path.write_text("".join(lines), encoding="utf-8")
    n_before = len(list(record.parent.iterdir()))
    assert cli.main(["reproduce", str(record), "--data", str(elsewhere)]) == 1
    first = capsys.readouterr().err.splitlines()[0]
    assert first.startswith(f"riskvet reproduce: reproduce: {path}: its SHA-256 ") and "is not the" in first
    assert len(list(record.parent.iterdir())) == n_before  # nothing ran


def test_an_unfinished_record_is_refused(made, tmp_path):
    _, _, record = made
    copy = tmp_path / "unfinished"
    shutil.copytree(record, copy)
    manifest = read_manifest(copy)
    manifest["status"] = "running"
    (copy / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(RecordError, match="never finished"):
        reproduce(copy)


def test_a_different_result_is_reported_with_tolerance(made, monkeypatch, capsys):
    # A deliberate change of a numerical setting: the fake derivation's mean age shifted by one part in 1e12.
    study, templates, record = made
    import riskvet.chain.reproduce as module

    real_run = module.run_study

    def nudged(*args, **kwargs):
        result = real_run(*args, **kwargs)
        path = result.record_dir / "results" / "derivation.json"
        content = json.loads(path.read_text())
        content["mean_age"] *= 1 + 1e-12
        path.write_text(json.dumps(content, indent=1, sort_keys=True) + "\n")
        return result

    monkeypatch.setattr(module, "run_study", nudged)
    assert cli.main(["reproduce", str(record), "--rtol", "1e-9"]) == 2
    out = capsys.readouterr().out
    assert "equal within rtol 1e-09: the largest relative difference is 1e-12, at derivation.mean_age" in out
    assert cli.main(["reproduce", str(record)]) == 1
    assert "different: 1 result value(s) differ beyond rtol 0" in capsys.readouterr().out
