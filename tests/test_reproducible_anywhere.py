"""The same study, data, templates and package give the same result and model bytes in any folder or clone.

A git clone of the study folder (another path, new modification times) is
run with the real stage templates; their ``results/*.json`` and
``models/*.json`` must equal the original run's byte for byte.
"""

from __future__ import annotations

import io
import shutil
import subprocess
from pathlib import Path

import pytest

from riskvet.chain.record import read_manifest
from riskvet.chain.runner import run_study
from riskvet.chain.scaffold import new_study_folder
from riskvet.intake.study import load_study

from test_runner import SMALL

STAGES = ["derivation", "external_validation", "updating"]


def _run(study: Path) -> Path:
    result = run_study(study, stages=STAGES, out=io.StringIO())
    assert result.ok, result.failed_stage
    return result.record_dir


def _bytes(record: Path) -> dict[str, bytes]:
    files = sorted([*record.glob("results/*.json"), *record.glob("models/*.json")])
    return {p.relative_to(record).as_posix(): p.read_bytes() for p in files}


@pytest.fixture(scope="module")
def original(tmp_path_factory) -> tuple[Path, Path]:
    study = new_study_folder(tmp_path_factory.mktemp("here") / "demo", **SMALL)
    return study, _run(study)


def test_a_git_clone_elsewhere_gives_the_same_bytes(original, tmp_path):
    # a clone has another path and new modification times for every file
    if shutil.which("git") is None:
        pytest.skip("git is not installed")
    study, record = original
    source = tmp_path / "repo"
    shutil.copytree(study.parent, source, ignore=shutil.ignore_patterns("records"))
    env = {"GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.invalid", "GIT_COMMITTER_NAME": "t",
           "GIT_COMMITTER_EMAIL": "t@example.invalid", "PATH": "/usr/bin:/bin"}
    for args in (["init", "-q"], ["add", "-A"], ["commit", "-q", "-m", "study"]):
        subprocess.run(["git", "-C", str(source), *args], check=True, env=env, capture_output=True)
    clone = tmp_path / "clone"
    subprocess.run(["git", "clone", "-q", str(source), str(clone)], check=True, env=env, capture_output=True)
    assert (clone / "study.yaml").stat().st_mtime != study.stat().st_mtime
    again = _run(clone / "study.yaml")
    assert _bytes(again) == _bytes(record) and len(_bytes(record)) >= 4
    assert read_manifest(again)["study"]["sha256"] == read_manifest(record)["study"]["sha256"]
    assert load_study(clone / "study.yaml").digest() == load_study(study).digest()


def test_model_files_carry_no_time_or_path(original):
    study, record = original
    for name, content in _bytes(record).items():
        text = content.decode("utf-8")
        assert str(study.parent) not in text, name
        if name.startswith("models/"):
            assert '"created": "' not in text, name  # no creation time unless the user sets SOURCE_DATE_EPOCH


def test_reproduce_with_the_real_templates_is_identical(original):
    from riskvet.chain.reproduce import reproduce

    study, record = original
    result = reproduce(record, out=io.StringIO())
    assert result.verdict == "identical" and result.exit_status == 0
    assert _bytes(result.rerun) == _bytes(record)
