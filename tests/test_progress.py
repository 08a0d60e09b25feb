"""Long stages show their progress on the runner's terminal, never in the notebook or the record."""

from __future__ import annotations

import io
import json


from riskvet.chain.runner import progress_line, run_study
from riskvet.chain.scaffold import new_study_folder
from riskvet.validation.bootstrap import PROGRESS_ENV, _FileProgress

from test_runner import SMALL, write_fake_templates

_SLOW = """\
import time
from riskvet.validation.bootstrap import _progress_bar
bar = _progress_bar(8, "bootstrap", False)
for _ in range(8):
    time.sleep(0.4)
    bar.update(1)
bar.close()"""


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_file_lines_read_in_words(tmp_path, monkeypatch):
    path = tmp_path / "stage.progress"
    clock = iter([2.0, 4.0])  # the times of the two updates below
    bar = _FileProgress(10, "bootstrap", str(path))
    bar._clock = lambda: next(clock)
    bar.start = 0.0
    bar.update(4)
    assert progress_line(path) == "bootstrap 4/10, 2.0 per s, about 3 s left"
    bar.update(6)
    assert progress_line(path) == "bootstrap 10/10, 2.5 per s"
    assert progress_line(tmp_path / "absent") is None


def test_a_stage_shows_progress_on_a_terminal_and_not_in_its_notebook(tmp_path, monkeypatch):
    monkeypatch.delenv(PROGRESS_ENV, raising=False)
    study = new_study_folder(tmp_path / "demo", **SMALL)
    templates = write_fake_templates(tmp_path / "templates", extra={"derivation": _SLOW})
    out = _Terminal()
    result = run_study(study, stages=["derivation"], templates_dir=templates, out=out)
    assert result.ok
    text = out.getvalue()
    assert "\r[1/1] derivation: bootstrap " in text and "/8" in text
    notebook = json.loads((result.record_dir / "notebooks" / "02_derivation.ipynb").read_text())
    shown = json.dumps([c.get("outputs", []) for c in notebook["cells"]])
    assert "bootstrap" not in shown and "of 8 done" not in shown
    assert not any(p.suffix == ".progress" for p in result.record_dir.rglob("*"))


def test_no_progress_lines_when_the_output_is_not_a_terminal(tmp_path):
    study = new_study_folder(tmp_path / "demo", **SMALL)
    templates = write_fake_templates(tmp_path / "templates", extra={"derivation": _SLOW})
    out = io.StringIO()
    assert run_study(study, stages=["derivation"], templates_dir=templates, out=out).ok
    assert "\r" not in out.getvalue() and "bootstrap" not in out.getvalue()
