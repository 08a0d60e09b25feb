"""The notebook chain runner, on small fake stage templates.

The fake templates follow the stage conventions (parameters cell, then
``open_stage``) and write a results JSON, a figure and (derivation) a model
file, so these tests do not depend on the real stage notebooks.  The data are
the invented demo cohorts, kept small.
"""

from __future__ import annotations

import io
import os
import json
import re
import shutil
from pathlib import Path

import nbformat
import pytest

from riskvet.chain import cli
from riskvet.errors import DataError, RecordError, RiskvetError, StudyError
from riskvet.reporting.html import external_references
from riskvet.chain.record import read_manifest, record_files, sha256_file, verify_record
from riskvet.chain.runner import RunResult, environment, run_study, template_path
from riskvet.chain.scaffold import new_study_folder
from riskvet.intake.study import STAGES, stage_stem

# -- fake stage templates ------------------------------------------------------------------------

_OPEN = 'from riskvet.chain import stagekit\nctx = stagekit.open_stage("{stage}", globals())'

_DERIVE = """\
import numpy as np
from riskvet.intake.data import load_cohorts
from riskvet.intake.design import build_design
from riskvet.modelling.modelfile import PredictionModel, save_model
cohorts = load_cohorts(ctx.study)
frame = cohorts.derivation.frame
design = build_design(frame, linear=["age"])
model = PredictionModel(design=design, thresholds=np.array([-1.0, 1.0]), coef=np.array([0.02]), link="logit",
                        outcome={"column": "disposition", "type": "ordinal", "levels": list(cohorts.derivation.outcome_levels), "labels": {}})
save_model(model, ctx.model_path)
import os
numbers = {"n_analysed": cohorts.derivation.n_analysed, "mean_age": float(frame["age"].mean()),
           "kernel": {k: os.environ.get(k) for k in ("PYTHONHASHSEED", "OPENBLAS_NUM_THREADS", "SOURCE_DATE_EPOCH")}}"""

_USE = """\
from riskvet.intake.data import load_cohorts
from riskvet.modelling.modelfile import load_model
model = load_model(ctx.model_path)
cohort = next(iter(load_cohorts(ctx.study).validation.values()))
mean_lp = float(model.linear_predictor(cohort.frame).mean())
numbers = {"n_analysed": cohort.n_analysed, "mean_lp": mean_lp, "model_sha256": model.digest()}"""

_SUMMARY = """\
numbers = {s: ctx.read_results(s) for s in ("derivation", "external_validation")}"""

_FIGURE = """\
import matplotlib.pyplot as plt
fig, ax = plt.subplots(figsize=(3, 2))
ax.plot([0, 1], [0, 1])
ctx.save_figure(fig, "diagonal")"""

_WRITE = 'ctx.write_results({"stage": ctx.stage, **numbers})'


def fake_template(stage: str, *, extra: str | None = None) -> nbformat.NotebookNode:
    """A stage notebook following the conventions; ``extra`` is a cell run after open_stage."""
    body = {"derivation": _DERIVE, "summary": _SUMMARY}.get(stage, _USE)
    cells = [
        nbformat.v4.new_markdown_cell(f"# Fake {stage} stage\n\nA test template."),
        nbformat.v4.new_code_cell('study_path = ""\nrecord_dir = ""\nmodel_path = ""', metadata={"tags": ["parameters"]}),
        nbformat.v4.new_code_cell(_OPEN.format(stage=stage)),
    ]
    if extra is not None:
        cells.append(nbformat.v4.new_code_cell(extra))
    cells += [
        nbformat.v4.new_code_cell(body),
        nbformat.v4.new_markdown_cell("## A figure\n\nThe diagonal."),
        nbformat.v4.new_code_cell(_FIGURE),
        nbformat.v4.new_code_cell(_WRITE),
    ]
    notebook = nbformat.v4.new_notebook(cells=cells)
    notebook.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    notebook.metadata["language_info"] = {"name": "python"}
    return notebook


def write_fake_templates(folder: Path, *, extra: dict[str, str] | None = None) -> Path:
    """Fake templates for every stage in ``folder``; ``extra`` maps stage -> an extra cell."""
    folder.mkdir(parents=True, exist_ok=True)
    for stage in STAGES:
        path = folder / f"{stage}.ipynb"
        if path.exists():
            path.unlink()
        nbformat.write(fake_template(stage, extra=(extra or {}).get(stage)), path)
    return folder


SMALL = dict(n_derivation=400, n_validation=300, n_ratings=60, n_boot=5)
STAGES_RUN = ["derivation", "external_validation"]


def run_quietly(study, **options) -> RunResult:
    return run_study(study, out=io.StringIO(), **options)


def result_texts(record: Path) -> dict[str, str]:
    return {p.name: p.read_text(encoding="utf-8") for p in sorted((record / "results").glob("*.json"))}


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    return new_study_folder(tmp_path_factory.mktemp("study") / "demo", **SMALL)


@pytest.fixture(scope="module")
def templates(tmp_path_factory) -> Path:
    return write_fake_templates(tmp_path_factory.mktemp("templates"))


@pytest.fixture(scope="module")
def first(study, templates) -> RunResult:
    return run_quietly(study, stages=STAGES_RUN, templates_dir=templates)


@pytest.fixture(scope="module")
def first_hashes(first) -> dict:
    # taken before any other run, to show later runs leave this record untouched
    return record_files(first.record_dir)


@pytest.fixture(scope="module")
def second(study, templates, first, first_hashes) -> RunResult:
    return run_quietly(study, stages=STAGES_RUN, templates_dir=templates)


# -- a good run -------------------------------------------------------------------------------------


def test_record_holds_every_part(first):
    record = first.record_dir
    assert first.ok and first.status == "complete"
    assert re.fullmatch(r"\d{8}T\d{6}Z-[0-9a-f]{8}", first.run_id)
    assert record.parent == first.record_dir.parent and record.parent.name == "records"
    for stage in STAGES_RUN:
        assert (record / "notebooks" / f"{stage_stem(stage)}.ipynb").is_file()
        assert (record / "html" / f"{stage_stem(stage)}.html").is_file()
        assert (record / "results" / f"{stage}.json").is_file()
        assert (record / "figures" / stage / "diagonal.png").is_file()
        assert (record / "figures" / stage / "diagonal.svg").is_file()
    assert (record / "models" / "model.json").is_file()
    assert json.loads((record / "study.json").read_text())["study"]["name"] == "heat-illness-tent"
    assert [s.status for s in first.stages] == ["ok"] * len(STAGES_RUN)
    assert all(s.seconds is not None and s.seconds > 0 for s in first.stages)


def test_manifest_lists_hashes_versions_and_seeds(first, study, templates):
    manifest = read_manifest(first.record_dir)
    assert manifest["status"] == "complete" and manifest["run_id"] == first.run_id
    assert manifest["started"] <= manifest["finished"]
    # every file of the record, with its SHA-256 (hashlib, standard library)
    assert manifest["files"] == record_files(first.record_dir)
    assert manifest["files"]["models/model.json"]["sha256"] == sha256_file(first.record_dir / "models" / "model.json")
    roles = {e["role"]: e for e in manifest["inputs"]}
    assert set(roles) == {"study", "data.derivation", "data.validation.season-2026", "data.ratings"}
    assert roles["study"]["sha256"] == sha256_file(study)
    assert roles["data.derivation"]["sha256"] == sha256_file(study.parent / "data" / "derivation.csv")
    assert [t["stage"] for t in manifest["templates"]] == STAGES_RUN
    assert manifest["templates"][0]["sha256"] == sha256_file(templates / "derivation.ipynb")
    assert manifest["study"]["sha256"] == json.loads(json.dumps(manifest["study"]["sha256"]))
    assert set(manifest["packages"]) >= {"numpy", "scipy", "pandas", "statsmodels", "matplotlib", "papermill", "nbconvert", "joblib", "pydantic"}
    assert manifest["packages"]["numpy"] == environment()["packages"]["numpy"]
    # the BLAS numpy runs on, by kind and version (threadpoolctl), without file paths
    assert manifest["numerical_libraries"] and all(set(lib) == {"user_api", "internal_api", "version", "architecture"} for lib in manifest["numerical_libraries"])
    assert "/" not in json.dumps(manifest["numerical_libraries"])
    assert re.fullmatch(r"[0-9a-f]{64}", manifest["riskvet_source"]["sha256"]) and manifest["riskvet_source"]["files"] > 20
    assert manifest["seeds"] == {"selection": 2024, "internal_validation": 11, "internal_external": 13, "external_validation": 12}  # demo study file values
    assert [s["status"] for s in manifest["stages"]] == ["ok"] * len(STAGES_RUN)
    assert manifest["kernel"]["environment"]["PYTHONHASHSEED"] == "0"
    # no time reaches the stages unless the user sets one (the test environment does not)
    assert "SOURCE_DATE_EPOCH" not in manifest["kernel"]["environment"] or os.environ.get("SOURCE_DATE_EPOCH")
    assert "git" not in manifest  # the study folder is in a temporary folder, outside any repository


def test_git_commit_of_the_study_folder(tmp_path):
    import subprocess

    if shutil.which("git") is None:
        pytest.skip("git is not installed")
    from riskvet.chain.runner import git_commit

    assert git_commit(tmp_path) is None  # not a repository
    run = lambda *a: subprocess.run(["git", "-C", str(tmp_path), *a], check=True, capture_output=True, text=True)  # noqa: E731
    run("init", "-q")
    (tmp_path / "study.yaml").write_text("x: 1\n")
    run("add", "study.yaml")
    run("-c", "user.name=t", "-c", "user.email=t@example.invalid", "commit", "-q", "-m", "study")
    head = run("rev-parse", "HEAD").stdout.strip()
    (tmp_path / "records" / "r1").mkdir(parents=True)
    (tmp_path / "records" / "r1" / "manifest.json").write_text("{}")
    assert git_commit(tmp_path, ignore=tmp_path / "records") == {"commit": head, "dirty": False}
    assert git_commit(tmp_path) == {"commit": head, "dirty": True}  # the untracked records count without ignore
    (tmp_path / "study.yaml").write_text("x: 2\n")
    assert git_commit(tmp_path, ignore=tmp_path / "records")["dirty"] is True


def test_manifest_study_is_the_resolved_study(first, study):
    from riskvet.intake.study import load_study

    loaded = load_study(study)
    manifest = read_manifest(first.record_dir)
    assert manifest["study"]["resolved"] == loaded.to_dict()
    assert manifest["study"]["sha256"] == loaded.digest()
    assert (first.record_dir / "study.json").read_text().strip() == loaded.canonical_json()


def test_verify_passes_on_a_fresh_record(first):
    verification = verify_record(first.record_dir)
    assert verification.ok, verification.to_frame()
    assert verification.run_status == "complete"


def test_kernel_is_this_interpreter_with_fixed_environment(first):
    import os
    import sys

    seen = json.loads((first.record_dir / "results" / "derivation.json").read_text())["kernel"]
    assert seen == {k: read_manifest(first.record_dir)["kernel"]["environment"].get(k) for k in seen}
    assert seen["SOURCE_DATE_EPOCH"] == os.environ.get("SOURCE_DATE_EPOCH")  # no time is set for the stages
    assert seen["PYTHONHASHSEED"] == "0"
    assert seen["OPENBLAS_NUM_THREADS"] == os.environ.get("OPENBLAS_NUM_THREADS", "1")

    notebook = nbformat.read(first.record_dir / "notebooks" / f"{stage_stem('derivation')}.ipynb", as_version=4)
    assert notebook.metadata["papermill"]["parameters"]["record_dir"] == str(first.record_dir)
    assert read_manifest(first.record_dir)["kernel"]["python"] == sys.executable


def test_html_hides_code_and_loads_nothing_from_the_network(first):
    for html in sorted((first.record_dir / "html").glob("[0-9][0-9]_*.html")):
        text = html.read_text(encoding="utf-8")
        body = re.sub(r"<style.*?</style>", "", text, flags=re.S)
        # nbconvert 7 "lab" markup: a code cell's input is a jp-InputArea-editor holding
        # highlighted source, preceded by a jp-InputPrompt ("In [n]:")
        assert "jp-InputArea-editor" not in body and "hl-ipython3" not in body
        assert "jp-InputPrompt" not in body and "jp-OutputPrompt" not in body
        assert "save_figure" not in text and "open_stage" not in text  # the code itself is absent
        assert external_references(text) == []
        assert not re.search(r"""(?:src|href)\s*=\s*["']?\s*https?://""", text)
        assert "data:image/png;base64," in text  # the figure, embedded


def test_figure_cells_have_image_outputs(first):
    notebook = nbformat.read(first.record_dir / "notebooks" / f"{stage_stem('derivation')}.ipynb", as_version=4)
    figure_cells = [c for c in notebook.cells if c.cell_type == "code" and "save_figure" in c.source]
    assert figure_cells
    for cell in figure_cells:
        assert any("image/png" in o.get("data", {}) for o in cell.outputs)


def test_two_runs_give_identical_results_and_models(first, second):
    assert second.record_dir != first.record_dir
    assert result_texts(first.record_dir) == result_texts(second.record_dir)
    assert result_texts(first.record_dir)  # not vacuous
    assert sha256_file(first.record_dir / "models" / "model.json") == sha256_file(second.record_dir / "models" / "model.json")
    for figure in ("png", "svg"):
        path = Path("figures") / "derivation" / f"diagonal.{figure}"
        assert sha256_file(first.record_dir / path) == sha256_file(second.record_dir / path)


def test_an_earlier_record_is_left_intact(first, first_hashes, second):
    assert record_files(first.record_dir) == first_hashes
    assert verify_record(first.record_dir).ok


# -- failures ------------------------------------------------------------------------------------------


def test_failing_stage_marks_the_record_failed(study, tmp_path, first, first_hashes):
    templates = write_fake_templates(tmp_path / "t", extra={"derivation": "x = 1\nraise ValueError('deliberate failure')"})
    out = io.StringIO()
    result = run_study(study, stages=["derivation", "external_validation", "summary"], templates_dir=templates, out=out)
    assert result.status == "failed" and not result.ok
    assert [s.status for s in result.stages] == ["failed", "skipped", "skipped"]
    error = result.stages[0].error
    assert error["kind"] == "cell error" and error["ename"] == "ValueError" and error["evalue"] == "deliberate failure"
    assert "raise ValueError('deliberate failure')" in error["cell_source"]
    assert error["template_cell_index"] == 3  # markdown, parameters, open_stage, then the failing cell
    saved = nbformat.read(result.record_dir / result.stages[0].notebook, as_version=4)
    assert saved.cells[error["cell_index"]].source == error["cell_source"]
    manifest = read_manifest(result.record_dir)
    assert manifest["status"] == "failed"
    assert [s["status"] for s in manifest["stages"]] == ["failed", "skipped", "skipped"]
    assert manifest["stages"][0]["error"]["ename"] == "ValueError"
    page = (result.record_dir / "html" / f"{stage_stem('derivation')}.html").read_text()  # the partial notebook, rendered
    # one numbering on the page and on the command line: code cells of the executed notebook, from 1
    # (parameters, injected parameters, open_stage, then the failing cell)
    assert error["code_cell"] == 4
    assert "This stage failed. It stopped in code cell 4: deliberate failure." in page
    assert "ValueError" not in re.sub(r"<script.*?</script>", "", page, flags=re.S)  # the message, not the class name
    assert "FAILED after" in out.getvalue() and "in code cell 4: ValueError: deliberate failure" in out.getvalue()
    assert not (result.record_dir / "results").exists()
    assert verify_record(result.record_dir).ok  # a failed record is still a complete, hashed record
    assert "FAILED" in out.getvalue() and "skipped" in out.getvalue()
    assert record_files(first.record_dir) == first_hashes


def test_dead_kernel_is_reported(study, tmp_path):
    templates = write_fake_templates(tmp_path / "t", extra={"derivation": "import os\nos._exit(3)"})
    result = run_quietly(study, stages=["derivation", "summary"], templates_dir=templates)
    assert result.status == "failed"
    error = result.stages[0].error
    assert error["kind"] == "kernel died" and error["ename"] == "DeadKernelError"
    assert "kernel died" in error["evalue"]
    assert "os._exit(3)" in error.get("cell_source", "")
    assert result.stages[1].status == "skipped"


def test_cli_run_exits_nonzero_on_a_failed_stage(study, tmp_path, capsys):
    templates = write_fake_templates(tmp_path / "t", extra={"derivation": "raise RuntimeError('early failure')"})
    status = cli.main(["run", str(study), "--stages", "derivation,summary", "--templates", str(templates)])
    assert status == 1
    captured = capsys.readouterr()
    assert "derivation: FAILED" in captured.out and "early failure" in captured.out
    assert "summary: skipped" in captured.out and "stage 'derivation' failed" in captured.err


def _records(study: Path) -> list[Path]:
    folder = study.parent / "records"
    return sorted(folder.iterdir()) if folder.is_dir() else []


def test_bad_study_fails_before_any_record(tmp_path, templates, capsys):
    study = new_study_folder(tmp_path / "s", **SMALL)
    text = study.read_text().replace("folds: 10", "fold: 10")
    study.write_text(text)
    with pytest.raises(StudyError, match="did you mean 'folds'"):
        run_quietly(study, stages=STAGES_RUN, templates_dir=templates)
    assert cli.main(["run", str(study)]) == 1
    assert "fold" in capsys.readouterr().err
    assert _records(study) == []


def test_bad_data_fails_before_any_record(tmp_path, templates):
    study = new_study_folder(tmp_path / "s", **SMALL)
    data = study.parent / "data" / "derivation.csv"
    lines = data.read_text().splitlines()
    data.write_text("\n".join([lines[0].replace("core_temp", "core_temperature")] + lines[1:]) + "\n")
    with pytest.raises(DataError, match="core_temp"):
        run_quietly(study, stages=STAGES_RUN, templates_dir=templates)
    assert _records(study) == []


def test_missing_template_or_bad_selection_fails_before_any_record(tmp_path, templates):
    study = new_study_folder(tmp_path / "s", **SMALL)
    with pytest.raises(RecordError, match="template .* not found"):
        run_quietly(study, stages=STAGES_RUN, templates_dir=tmp_path / "nowhere")
    with pytest.raises(RiskvetError, match="expected a comma-separated subset"):
        run_quietly(study, stages=["derivation", "validation"], templates_dir=templates)
    with pytest.raises(RiskvetError, match="use the frozen model"):
        run_quietly(study, stages=["external_validation"], templates_dir=templates)
    with pytest.raises(RecordError, match="no manifest|not a riskvet record|expected a record folder"):
        run_quietly(study, stages=["external_validation"], from_record=tmp_path, templates_dir=templates)
    no_tag = fake_template("derivation")
    no_tag.cells[1].metadata["tags"] = []
    nbformat.write(no_tag, tmp_path / "derivation.ipynb")
    shutil.copy(templates / "summary.ipynb", tmp_path / "summary.ipynb")
    with pytest.raises(RecordError, match="tagged 'parameters'"):
        run_quietly(study, stages=["derivation", "summary"], templates_dir=tmp_path)
    assert _records(study) == []


def test_disabled_stage_is_refused(tmp_path, templates):
    study = new_study_folder(tmp_path / "s", **SMALL)
    study.write_text(study.read_text().replace("internal_validation:\n", "internal_validation:\n  enabled: false\n"))
    with pytest.raises(StudyError, match="not enabled in the study file"):
        run_quietly(study, stages=["derivation", "internal_validation"], templates_dir=templates)


# -- a subset against an earlier record's model -------------------------------------------------------


def test_stages_from_an_earlier_record(study, templates, first, first_hashes):
    result = run_quietly(study, stages=["external_validation"], from_record=first.record_dir, templates_dir=templates)
    assert result.ok
    manifest = read_manifest(result.record_dir)
    model = {e["role"]: e for e in manifest["inputs"]}["model"]
    assert model["sha256"] == first_hashes["models/model.json"]["sha256"]
    assert model["path"] == str(first.record_dir / "models" / "model.json")
    assert manifest["from_record"]["run_id"] == first.run_id
    assert manifest["parameters"]["model_path"] == model["path"]
    assert sha256_file(result.record_dir / "models" / "model.json") == model["sha256"]  # copied in
    # the stage used that model: same numbers as in the first record
    assert (result.record_dir / "results" / "external_validation.json").read_text() == (
        first.record_dir / "results" / "external_validation.json"
    ).read_text()
    assert record_files(first.record_dir) == first_hashes
    with pytest.raises(RiskvetError, match="no 'derivation' with from_record"):
        run_quietly(study, stages=["derivation"], from_record=first.record_dir, templates_dir=templates)


def test_altered_earlier_model_is_refused(study, templates, first, tmp_path):
    copy = tmp_path / "copy"
    shutil.copytree(first.record_dir, copy)
    model = copy / "models" / "model.json"
    model.write_text(model.read_text().replace('"logit"', '"probit"'))
    with pytest.raises(RecordError, match="does not match the earlier record's manifest"):
        run_quietly(study, stages=["external_validation"], from_record=copy, templates_dir=templates)


def test_template_path_and_defaults():
    assert template_path("summary").name == "summary.ipynb"
    assert template_path("summary").parent.name == "templates"
    with pytest.raises(RiskvetError, match="one of"):
        template_path("validation")


# -- HTML renderings, without a kernel ----------------------------------------------------------------


def _executed_like(tmp_path: Path, *, markdown: str = "# Title\n\nText.") -> Path:
    notebook = nbformat.v4.new_notebook(cells=[
        nbformat.v4.new_markdown_cell(markdown),
        nbformat.v4.new_code_cell("marker = 'code-of-the-cell'\nmarker", outputs=[
            nbformat.v4.new_output("execute_result", data={"text/plain": "output-of-the-cell"}, execution_count=1)
        ], execution_count=1),
    ])
    path = tmp_path / "nb.ipynb"
    nbformat.write(notebook, path)
    return path


def test_render_html_hides_code_unless_asked(tmp_path):
    from riskvet.reporting.html import render_html

    notebook = _executed_like(tmp_path)
    hidden = render_html(notebook, tmp_path / "hidden.html").read_text(encoding="utf-8")
    shown = render_html(notebook, tmp_path / "shown.html", show_code=True).read_text(encoding="utf-8")
    assert "code-of-the-cell" not in hidden and "output-of-the-cell" in hidden
    assert "code-of-the-cell" in shown and "output-of-the-cell" in shown
    assert "<script src=" not in hidden and "mathjax" not in hidden.lower()
    with pytest.raises(RecordError, match="never overwritten"):
        render_html(notebook, tmp_path / "hidden.html")
    with pytest.raises(RecordError, match="not found"):
        render_html(tmp_path / "absent.ipynb", tmp_path / "x.html")


def test_render_html_refuses_network_resources_but_allows_links(tmp_path):
    from riskvet.reporting.html import render_html

    linked = _executed_like(tmp_path, markdown="See [the checklist](https://example.org/list).")
    text = render_html(linked, tmp_path / "linked.html").read_text(encoding="utf-8")
    assert external_references(text) == ["https://example.org/list"]
    assert external_references(text, links=False) == []
    (tmp_path / "nb.ipynb").unlink()
    fetched = _executed_like(tmp_path, markdown='<img src="https://example.org/logo.png">')
    with pytest.raises(RecordError, match="open offline"):
        render_html(fetched, tmp_path / "fetched.html")
    assert not (tmp_path / "fetched.html").exists()


def test_external_references_finds_every_kind():
    text = (
        '<a href="https://a.example">a</a><img alt=">" src="//cdn.example/i.png">'
        '<link rel="stylesheet" href="http://c.example/s.css"><script src=https://d.example/x.js></script>'
        '<style>@import "https://e.example/f.css"; p {background: url(http://f.example/g.png)}</style>'
        '<svg xmlns="http://www.w3.org/2000/svg"></svg><img src="data:image/png;base64,AAAA">'
    )
    assert external_references(text) == [
        "https://a.example", "//cdn.example/i.png", "http://c.example/s.css", "https://d.example/x.js",
        "https://e.example/f.css", "http://f.example/g.png",
    ]
    assert "https://a.example" not in external_references(text, links=False)
    with pytest.raises(RiskvetError, match="HTML text"):
        external_references(b"<html>")
