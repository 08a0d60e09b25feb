"""Records that cannot be damaged: where records go, what verify accepts, and runs that are killed.

The fake stage templates of ``test_runner`` keep each run to a few seconds.
The fault-injection tests run ``riskvet run`` as a separate process and stop
it with SIGINT, SIGTERM, SIGHUP or SIGKILL at several points of every stage;
afterwards the earlier record must still verify, the killed one must never
verify as complete, and the next run must work.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import nbformat
import pytest
import yaml

from riskvet.chain import cli
from riskvet.chain.record import enclosing_record, layout_problem, read_manifest, record_files, verify_record, write_manifest
from riskvet.chain.scaffold import new_study_folder
from riskvet.errors import RecordError
from riskvet.intake.study import load_study

from test_runner import SMALL, fake_template, run_quietly, write_fake_templates

STAGES_RUN = ["derivation", "external_validation", "summary"]


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    return new_study_folder(tmp_path_factory.mktemp("integrity") / "demo", **SMALL)


@pytest.fixture(scope="module")
def templates(tmp_path_factory) -> Path:
    return write_fake_templates(tmp_path_factory.mktemp("fake-templates"))


@pytest.fixture(scope="module")
def earlier(study, templates) -> Path:
    result = run_quietly(study, stages=STAGES_RUN, templates_dir=templates)
    assert result.ok
    return result.record_dir


def _without_records_key(study: Path, folder: Path) -> Path:
    """A copy of the study folder whose study file has no output.records."""
    copy = folder / "no-records-key"
    shutil.copytree(study.parent, copy, ignore=shutil.ignore_patterns("records"))
    raw = yaml.safe_load((copy / "study.yaml").read_text(encoding="utf-8"))
    raw.get("output", {}).pop("records", None)
    (copy / "study.yaml").write_text(yaml.safe_dump(raw, sort_keys=False), encoding="utf-8")
    return copy / "study.yaml"


# -- where records go -----------------------------------------------------------------------------


def test_default_records_folder_is_the_study_folders(study, tmp_path, monkeypatch):
    path = _without_records_key(study, tmp_path)
    monkeypatch.chdir(tmp_path / "..")  # anywhere but the study folder
    assert load_study(path).output.records == (path.parent / "records").resolve()
    raw = yaml.safe_load(path.read_text(encoding="utf-8"))
    raw.pop("output", None)  # no output section at all
    path.write_text(yaml.safe_dump(raw, sort_keys=False), encoding="utf-8")
    assert load_study(path).output.records == (path.parent / "records").resolve()


def test_run_without_records_key_from_elsewhere_writes_one_flat_record(study, templates, tmp_path, monkeypatch):
    path = _without_records_key(study, tmp_path)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    result = run_quietly(path, stages=["derivation", "external_validation"], templates_dir=templates)
    assert result.ok
    assert result.record_dir.parent == path.parent / "records"
    assert not (elsewhere / "records").exists()
    assert not (result.record_dir / "records").exists()  # results are not nested a second time
    assert {p.name for p in result.record_dir.iterdir()} >= {"manifest.json", "results", "models", "notebooks"}
    assert verify_record(result.record_dir).complete
    again = run_quietly(path, stages=["external_validation"], from_record=result.record_dir, templates_dir=templates)
    assert again.ok


@pytest.mark.parametrize("where", ["the record", "inside the record"])
def test_records_folder_in_an_earlier_record_is_refused(study, templates, earlier, tmp_path, where, capsys):
    before = record_files(earlier)
    copy = tmp_path / "study"
    shutil.copytree(study.parent, copy, ignore=shutil.ignore_patterns("records"))
    raw = yaml.safe_load((copy / "study.yaml").read_text(encoding="utf-8"))
    target = earlier if where == "the record" else earlier / "results"
    raw.setdefault("output", {})["records"] = str(target)
    (copy / "study.yaml").write_text(yaml.safe_dump(raw, sort_keys=False), encoding="utf-8")
    with pytest.raises(RecordError, match="would write into an earlier record"):
        run_quietly(copy / "study.yaml", stages=STAGES_RUN, templates_dir=templates)
    assert cli.main(["check", str(copy / "study.yaml")]) == 1
    first_line = capsys.readouterr().err.splitlines()[0]
    assert first_line.startswith("riskvet check: output.records:") and "would write into an earlier record" in first_line
    assert cli.main(["run", str(copy / "study.yaml"), "--templates", str(templates)]) == 1
    assert record_files(earlier) == before and verify_record(earlier).complete


def test_enclosing_record_finds_a_record_and_only_a_record(earlier, tmp_path):
    assert enclosing_record(earlier) == earlier
    assert enclosing_record(earlier / "results" / "deeper") == earlier
    assert enclosing_record(earlier.parent) is None  # the folder of records is not a record
    (tmp_path / "manifest.json").write_text('{"schema": "something else"}')
    assert enclosing_record(tmp_path) is None


# -- what verify accepts --------------------------------------------------------------------------


def test_verify_refuses_a_nested_layout_even_when_listed(earlier, tmp_path, capsys):
    bad = tmp_path / "nested"
    shutil.copytree(earlier, bad)
    inner = bad / "records" / earlier.name / "results"
    inner.mkdir(parents=True)
    shutil.move(str(bad / "results" / "derivation.json"), inner / "derivation.json")
    manifest = read_manifest(bad)
    manifest.pop("manifest_sha256")
    manifest["files"] = record_files(bad)  # listed, hashes right: only the layout is wrong
    (bad / "manifest.json").unlink()
    write_manifest(bad, manifest)
    v = verify_record(bad)
    assert not v.ok and not v.complete
    assert [(c.kind, c.status) for c in v.problems] == [("layout", "misplaced")]
    assert cli.main(["verify", str(bad)]) == 1
    assert "ALTERED" in capsys.readouterr().err


@pytest.mark.parametrize(
    "rel, fine",
    [
        ("study.json", True), ("notebooks/02_derivation.ipynb", True), ("html/08_summary.html", True),
        ("results/updating.json", True), ("figures/derivation/roc.svg", True), ("models/model_shrunk.json", True),
        ("records/x/results/derivation.json", False), ("notebooks/09_derivation.ipynb", False),
        ("results/notes.json", False), ("figures/derivation/extra/roc.png", False), ("kernel.log", False),
    ],
)
def test_layout_rule(rel, fine):
    assert (layout_problem(rel) is None) == fine


@pytest.mark.parametrize("status", ["running", "interrupted"])
def test_an_unfinished_record_never_verifies_as_complete(earlier, tmp_path, status, capsys):
    copy = tmp_path / status
    shutil.copytree(earlier, copy)
    manifest = read_manifest(copy)
    manifest.pop("manifest_sha256")
    manifest["status"] = status
    (copy / "manifest.json").unlink()
    write_manifest(copy, manifest)
    v = verify_record(copy)
    assert v.ok and not v.finished and not v.complete
    assert cli.main(["verify", str(copy)]) == 1
    assert capsys.readouterr().err.startswith("NOT COMPLETE: the files are as listed, but the run never finished")


def test_from_an_unfinished_record_says_the_run_never_finished(study, templates, earlier, tmp_path):
    copy = tmp_path / "unfinished"
    shutil.copytree(earlier, copy)
    manifest = read_manifest(copy)
    manifest.pop("manifest_sha256")
    manifest["status"] = "running"
    (copy / "manifest.json").unlink()
    write_manifest(copy, manifest)
    with pytest.raises(RecordError, match="that run never finished") as info:
        run_quietly(study, stages=["external_validation"], from_record=copy, templates_dir=templates)
    assert "None" not in str(info.value)


# -- runs that are killed -------------------------------------------------------------------------

_PAUSE = """\
import os, pathlib, time
mark = pathlib.Path(os.environ["RISKVET_TEST_MARKS"]) / f"{ctx.stage}-{os.getpid()}"
mark.write_text(str(os.getpid()))
time.sleep(60)"""


@pytest.fixture(scope="module")
def pausing_templates(tmp_path_factory) -> Path:
    """Fake templates whose every stage pauses in a cell after opening its context, leaving a mark."""
    folder = tmp_path_factory.mktemp("pausing-templates")
    for stage in ("planning", "derivation", "agreement", "internal_validation", "external_validation", "updating", "summary"):
        nbformat.write(fake_template(stage, extra=_PAUSE), folder / f"{stage}.ipynb")
    return folder


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


_POINTS = {
    # where in a stage the signal comes: as the stage starts its kernel, or in a running cell
    "starting": lambda marks, stage: None,
    "in a cell": lambda marks, stage: next(iter(marks.glob(f"{stage}-*")), None),
}

_CASES = [
    (stage, sig, point)
    for i, stage in enumerate(STAGES_RUN)
    for j, sig in enumerate(("SIGINT", "SIGTERM", "SIGKILL"))
    for point in (["starting", "in a cell"][(i + j) % 2],)
] + [("external_validation", "SIGHUP", "in a cell")]  # a closed terminal, once


@pytest.mark.parametrize("stage, sig, point", _CASES)
def test_a_killed_run_leaves_earlier_records_intact_and_never_verifies(study, templates, earlier, pausing_templates, tmp_path, stage, sig, point):
    before = record_files(earlier)
    marks, scratch = tmp_path / "marks", tmp_path / "tmp"
    marks.mkdir()
    scratch.mkdir()
    # the earlier stages run quickly (the plain fake templates); the chosen one pauses
    mixed = tmp_path / "templates"
    shutil.copytree(templates, mixed)
    shutil.copyfile(pausing_templates / f"{stage}.ipynb", mixed / f"{stage}.ipynb")
    env = {**os.environ, "RISKVET_TEST_MARKS": str(marks), "TMPDIR": str(scratch), "MPLBACKEND": "Agg"}
    records_before = set((study.parent / "records").iterdir())
    # start at the chosen stage (later stages take the earlier record's model), so one kernel starts before the signal
    chosen = STAGES_RUN[STAGES_RUN.index(stage):]
    command = [sys.executable, "-m", "riskvet.chain.cli", "run", str(study), "--stages", ",".join(chosen), "--templates", str(mixed)]
    if stage != "derivation":
        command += ["--from", str(earlier)]
    process = subprocess.Popen(
        command,
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
    )
    seen = []
    for line in process.stdout:
        seen.append(line)
        if f"] {stage}: running" in line:
            break
    else:
        pytest.fail("the run ended before the stage started:\n" + "".join(seen) + process.stderr.read())
    deadline = time.monotonic() + 60
    mark = None
    if point == "in a cell":
        while mark is None and time.monotonic() < deadline:
            mark = _POINTS[point](marks, stage)
            time.sleep(0.05)
        assert mark is not None, "the pausing cell never started"
    else:
        time.sleep(0.3)
    process.send_signal(getattr(signal, sig))
    out, err = process.communicate(timeout=90)

    new = sorted(set((study.parent / "records").iterdir()) - records_before)
    if sig == "SIGKILL":
        assert process.returncode == -signal.SIGKILL
    else:
        assert process.returncode == 128 + getattr(signal, sig), err
        lines = [ln for ln in err.splitlines() if ln.strip()]
        assert len(lines) == 1 and "Traceback" not in err, err
        assert lines[0].startswith(f"riskvet run: interrupted ({sig})")
        assert "FAILED" not in out
        assert not list(scratch.glob("riskvet-kernel-*")), "the kernel's scratch folder was left behind"
        assert len(new) == 1 and str(new[0]) in lines[0]
        manifest = read_manifest(new[0])
        assert manifest["status"] == "interrupted"
        statuses = {s["stage"]: s["status"] for s in manifest["stages"]}
        assert statuses[stage] == "interrupted"
        assert all(statuses[s] == "not run" for s in chosen[1:])
    for record in new:
        try:
            assert not verify_record(record).complete
        except RecordError:
            pass  # no readable manifest: not a record at all
    if mark is not None:
        pid = int(mark.read_text())
        for _ in range(100):
            if not _alive(pid):
                break
            time.sleep(0.1)
        assert not _alive(pid), "the stage's kernel outlived the run"
    assert record_files(earlier) == before and verify_record(earlier).complete


def test_the_next_run_after_kills_works(study, templates, earlier):
    result = run_quietly(study, stages=STAGES_RUN, templates_dir=templates)
    assert result.ok and verify_record(result.record_dir).complete
    assert verify_record(earlier).complete
    assert json.loads((result.record_dir / "results" / "derivation.json").read_text()) == json.loads(
        (earlier / "results" / "derivation.json").read_text()
    )
