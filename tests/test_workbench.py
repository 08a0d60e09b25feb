"""Working on a study in JupyterLab: the workbench, its drafts, and the way back to a record.

The server test starts a real JupyterLab with ``riskvet lab --no-browser``
on the loopback address with a token, opens every workbench notebook as a
session through the server's REST interface (jupyter_server 2), executes its
code cells over the kernel's websocket channel (the Jupyter messaging
protocol 5.3), checks what the draft folder holds, and shuts the server down
through its REST interface.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
import time
import urllib.request
import uuid
from pathlib import Path

import pytest

from riskvet.chain.record import read_manifest, verify_record
from riskvet.chain.runner import run_study, template_path
from riskvet.chain.scaffold import new_study_folder
from riskvet.chain.stagekit import stage_context
from riskvet.chain.workbench import WORKBENCH, is_draft, open_workbench, template_changes
from riskvet.errors import RecordError, RiskvetError

SMALL = dict(n_derivation=300, n_validation=200, n_ratings=30, n_boot=3)


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    return new_study_folder(tmp_path_factory.mktemp("lab") / "demo", **SMALL)


def _cells(path: Path) -> list[dict]:
    return json.loads(path.read_text(encoding="utf-8"))["cells"]


def _parameters(path: Path) -> str:
    return next("".join(c["source"]) for c in _cells(path) if "parameters" in c.get("metadata", {}).get("tags", []))


# -- the workbench -------------------------------------------------------------------------


def test_workbench_holds_every_enabled_stage_with_its_parameters_set(study):
    bench = open_workbench(study)
    assert bench.folder == study.parent / WORKBENCH
    assert [p.stem for p in bench.notebooks] == ["planning", "derivation", "agreement", "internal_validation",
                                                   "internal_external", "external_validation", "updating", "summary"]
    params = _parameters(bench.templates / "derivation.ipynb")
    assert f'study_path = "{study.resolve()}"' in params and f'record_dir = "{bench.draft}"' in params
    assert is_draft(bench.draft)
    readme = (bench.templates / "README.md").read_text(encoding="utf-8")
    assert bench.run_command in readme and "not clearance for clinical use" in readme


def test_reopening_keeps_the_analysts_edits(study):
    bench = open_workbench(study)
    path = bench.templates / "summary.ipynb"
    notebook = json.loads(path.read_text(encoding="utf-8"))
    notebook["cells"].append({"cell_type": "markdown", "id": "local-note", "metadata": {}, "source": "A note of our own"})
    path.write_text(json.dumps(notebook), encoding="utf-8")
    again = open_workbench(study)
    assert "summary" not in again.written
    assert _cells(path)[-1]["source"] == "A note of our own"
    assert f'record_dir = "{again.draft}"' in _parameters(path)
    notebook["cells"].pop()  # leave the workbench as it was for the other tests
    path.write_text(json.dumps(notebook), encoding="utf-8")


def test_a_draft_is_never_taken_for_a_record(study, capsys):
    from riskvet.chain.cli import main

    bench = open_workbench(study)
    with pytest.raises(RecordError, match="DRAFT"):
        read_manifest(bench.draft)
    with pytest.raises(RecordError, match="DRAFT"):
        verify_record(bench.draft)
    assert main(["verify", str(bench.draft)]) == 1
    assert "DRAFT" in capsys.readouterr().err
    with pytest.raises(RecordError, match="DRAFT"):
        run_study(study, stages=["external_validation"], from_record=bench.draft)


def test_a_template_opened_directly_says_how_to_open_it():
    with pytest.raises(RiskvetError) as caught:
        stage_context("derivation", study_path="", record_dir="")
    message = str(caught.value)
    assert "riskvet lab STUDY.yaml" in message and "\n" not in message


def test_draft_files_may_be_written_again_and_a_missing_model_names_the_stage_to_run(study):
    bench = open_workbench(study)
    ctx = stage_context("planning", study_path=study, record_dir=bench.draft)
    assert ctx.draft
    target = ctx.new_path(bench.draft / "results" / "scratch.json")
    target.write_text("{}")
    assert ctx.new_path(target) == target and not target.exists()  # a record's file would be refused here
    with pytest.raises(RiskvetError, match=r"run the derivation notebook \(templates/derivation.ipynb\)"):
        stage_context("external_validation", study_path=study, record_dir=bench.draft)


def test_template_changes_count_cells_added_removed_and_changed(tmp_path):
    shipped = template_path("summary")
    same = tmp_path / "same.ipynb"
    notebook = json.loads(shipped.read_text(encoding="utf-8"))
    same.write_text(json.dumps(notebook), encoding="utf-8")
    assert template_changes(same, shipped)["same_as_shipped"]
    code = [i for i, c in enumerate(notebook["cells"]) if c["cell_type"] == "code" and "parameters" not in c["metadata"].get("tags", [])]
    assert code[0] == 2  # the cell that opens the stage, after the title and the parameters
    notebook["cells"][code[0]]["source"] += "\n# changed"
    notebook["cells"].insert(2, {"cell_type": "markdown", "id": "new", "metadata": {}, "source": "added"})
    del notebook["cells"][-1]
    notebook["cells"][1]["source"] = 'study_path = "/elsewhere/study.yaml"'  # parameter values are not a change
    changed = tmp_path / "changed.ipynb"
    changed.write_text(json.dumps(notebook), encoding="utf-8")
    found = template_changes(changed, shipped)
    assert (found["cells_added"], found["cells_removed"], found["cells_changed"]) == (1, 1, 1)
    assert not found["same_as_shipped"] and found["changed_cells"] == [3, 4]


# -- JupyterLab --------------------------------------------------------------------------------


class _Lab:
    """``riskvet lab --no-browser`` in a subprocess; REST and kernel channels with its token."""

    def __init__(self, study: Path, port: int):
        self.proc = subprocess.Popen([sys.executable, "-m", "riskvet.chain.cli", "lab", str(study), "--no-browser", "--port", str(port)],
                                     stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        self.lines: list[str] = []
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline:
            line = self.proc.stdout.readline()
            if not line and self.proc.poll() is not None:
                raise AssertionError("riskvet lab stopped:\n" + "".join(self.lines))
            self.lines.append(line)
            match = re.search(r"JupyterLab: (http://127\.0\.0\.1:(\d+))/lab/tree/templates\?token=(\w+)", line)
            if match:
                self.base, self.token = match.group(1), match.group(3)
                break
        else:
            raise AssertionError("no JupyterLab address printed:\n" + "".join(self.lines))
        self.lines += [self.proc.stdout.readline() for _ in range(3)]  # the record command and the caution

    def rest(self, method: str, path: str, body: dict | None = None) -> dict:
        data = None if body is None else json.dumps(body).encode()
        request = urllib.request.Request(f"{self.base}{path}", data=data, method=method,
                                         headers={"Authorization": f"token {self.token}", "Content-Type": "application/json"})
        with urllib.request.urlopen(request, timeout=30) as reply:
            text = reply.read().decode()
        return json.loads(text) if text else {}

    def run_notebook(self, relative: str) -> list[str]:
        """Execute every code cell of a workbench notebook in its own kernel; return the errors met."""
        import websocket

        session = self.rest("POST", "/api/sessions", {"path": relative, "type": "notebook", "name": relative,
                                                       "kernel": {"name": "python3"}})
        kernel = session["kernel"]["id"]
        ws = websocket.create_connection(f"{self.base.replace('http', 'ws')}/api/kernels/{kernel}/channels?token={self.token}",
                                         timeout=300)
        errors = []
        try:
            notebook = self.rest("GET", f"/api/contents/{relative}?content=1")["content"]
            for cell in notebook["cells"]:
                if cell["cell_type"] != "code":
                    continue
                reply = _execute(ws, "".join(cell["source"]))
                if reply.get("status") != "ok":
                    errors.append(f"{relative}: {reply.get('ename')}: {reply.get('evalue')}")
                    break
        finally:
            ws.close()
            self.rest("DELETE", f"/api/sessions/{session['id']}")
        return errors

    def stop(self) -> int:
        try:
            self.rest("POST", "/api/shutdown")
        except OSError:
            pass
        try:
            return self.proc.wait(timeout=60)
        finally:
            if self.proc.poll() is None:
                self.proc.kill()


def _execute(ws, code: str) -> dict:
    msg_id = uuid.uuid4().hex
    ws.send(json.dumps({
        "header": {"msg_id": msg_id, "username": "test", "session": uuid.uuid4().hex, "msg_type": "execute_request", "version": "5.3"},
        "parent_header": {}, "metadata": {}, "channel": "shell",
        "content": {"code": code, "silent": False, "store_history": True, "user_expressions": {}, "allow_stdin": False, "stop_on_error": True},
    }))
    while True:
        message = json.loads(ws.recv())
        if message.get("channel") == "shell" and message.get("parent_header", {}).get("msg_id") == msg_id:
            return message["content"]


def _port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_every_workbench_notebook_runs_in_a_real_jupyterlab(study):
    pytest.importorskip("websocket")
    lab = _Lab(study, _port())
    try:
        assert any("riskvet run" in line and "--templates" in line for line in lab.lines), lab.lines
        bench = study.parent / WORKBENCH
        errors = []
        for stage in ("planning", "derivation", "agreement", "internal_validation", "internal_external", "external_validation",
                      "updating", "summary"):
            errors += lab.run_notebook(f"templates/{stage}.ipynb")
        assert not errors, errors
        for stage in ("planning", "derivation", "internal_external", "external_validation", "summary"):
            assert (bench / "draft" / "results" / f"{stage}.json").is_file(), stage
        assert (bench / "draft" / "models" / "model.json").is_file()
        assert not lab.run_notebook("templates/planning.ipynb")  # rerunning a notebook writes its draft files again
    finally:
        status = lab.stop()
    assert status == 0
    assert is_draft(study.parent / WORKBENCH / "draft")


def test_an_adapted_workbench_notebook_reaches_the_record_and_its_manifest(study):
    bench = open_workbench(study)
    path = bench.templates / "summary.ipynb"
    notebook = json.loads(path.read_text(encoding="utf-8"))
    notebook["cells"] += [
        {"cell_type": "markdown", "id": "site-note", "metadata": {}, "source": "## A note from the hospital's analyst"},
        {"cell_type": "code", "id": "site-code", "metadata": {}, "execution_count": None, "outputs": [],
         "source": 'publish.text("Adapted in the workbench: reviewed with the local team.")'},
    ]
    path.write_text(json.dumps(notebook), encoding="utf-8")
    import io

    result = run_study(study, templates_dir=bench.templates, stages=["derivation", "summary"], out=io.StringIO())
    assert result.ok
    executed = (result.record_dir / "notebooks" / "08_summary.ipynb").read_text(encoding="utf-8")
    assert "Adapted in the workbench: reviewed with the local team." in executed
    manifest = read_manifest(result.record_dir)
    entries = {e["stage"]: e for e in manifest["templates"]}
    assert entries["summary"]["changes_from_shipped"]["cells_added"] == 2
    assert not entries["summary"]["changes_from_shipped"]["same_as_shipped"]
    assert entries["derivation"]["changes_from_shipped"]["same_as_shipped"]
    assert verify_record(result.record_dir).ok
