"""The worked example of templates/README.md, done as the README says, on a small demo study.

The two cells are read from the README's fenced blocks, so the example and
this test cannot drift apart: copy the shipped templates, add the cells to
the copy of the external-validation notebook, run derivation and external
validation with the copy, and find the new output in the executed notebook,
the HTML page and the figures folder, with the changed template's hash in
the manifest.
"""

from __future__ import annotations

import base64
import csv
import io
import json
import re
import shutil
from pathlib import Path

import nbformat
import pytest

from riskvet.chain.record import read_manifest, sha256_file, verify_record
from riskvet.chain.runner import RunResult, default_templates_dir, run_study, template_path
from riskvet.chain.scaffold import new_study_folder
from riskvet.chain.stages.external_validation import figure_name
from riskvet.intake.study import load_study, stage_stem
from riskvet.reporting.html import external_references

README = Path(__file__).resolve().parents[1] / "templates" / "README.md"
SECTION = "## Worked example: one figure added to a copy of a template"
STAGE = "external_validation"
# Small data and few replicates keep the run fast; the numbers are not examined here.
SMALL = dict(n_derivation=400, n_validation=300, n_ratings=60, n_boot=5)


def readme_cells() -> tuple[str, str]:
    """The Markdown and the code of the worked example, from the README's fenced blocks."""
    lines = README.read_text(encoding="utf-8").splitlines()
    assert lines.count(SECTION) == 1, f"templates/README.md has no section {SECTION!r}"
    blocks: list[tuple[str, list[str]]] = []
    fence = None  # the open block's lines, or None outside a block
    for line in lines[lines.index(SECTION) + 1:]:
        if fence is None and line.startswith("## "):
            break  # the next section (a heading inside a fenced block does not count)
        if line.startswith("```"):
            if fence is None:
                fence = []
                blocks.append((line[3:].strip(), fence))
            else:
                fence = None
        elif fence is not None:
            fence.append(line)
    markdown = ["\n".join(body) for lang, body in blocks if lang == "markdown"]
    python = ["\n".join(body) for lang, body in blocks if lang == "python"]
    assert len(markdown) == 1 and len(python) == 1, [lang for lang, _ in blocks]
    return markdown[0].strip(), python[0].strip()


def adapt(notebook: nbformat.NotebookNode, cells: list[nbformat.NotebookNode]) -> None:
    """Insert ``cells`` below the cell that shows the subgroup figure (section *Subgroups, figure*)."""
    heading = next(i for i, c in enumerate(notebook.cells) if c.cell_type == "markdown" and c.source.startswith("## Subgroups, figure"))
    if notebook.nbformat_minor >= 5:
        for k, cell in enumerate(cells):
            cell["id"] = f"{STAGE}-added-{k}"
    else:  # cell ids arrived with nbformat 4.5
        for cell in cells:
            cell.pop("id", None)
    notebook.cells[heading + 2:heading + 2] = cells


@pytest.fixture(scope="module")
def cells() -> tuple[str, str]:
    return readme_cells()


@pytest.fixture(scope="module")
def templates(tmp_path_factory, cells) -> Path:
    copy = tmp_path_factory.mktemp("adapted") / "my-templates"
    shutil.copytree(default_templates_dir(), copy)  # cp -r templates my-templates
    path = copy / f"{STAGE}.ipynb"
    notebook = nbformat.read(path, as_version=4)
    markdown, code = cells
    adapt(notebook, [nbformat.v4.new_markdown_cell(markdown), nbformat.v4.new_code_cell(code)])
    nbformat.validate(notebook)
    nbformat.write(notebook, path)
    return copy


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    return new_study_folder(tmp_path_factory.mktemp("adapted-study") / "demo", **SMALL)


@pytest.fixture(scope="module")
def run(study, templates) -> RunResult:
    out = io.StringIO()
    result = run_study(study, stages=["derivation", STAGE], templates_dir=templates, out=out)
    if not result.ok:
        failed = result.failed_stage
        pytest.fail(f"stage {failed.stage} failed: {json.dumps(failed.error, indent=1)}\n{out.getvalue()}")
    return result


@pytest.fixture(scope="module")
def added(run, cells) -> nbformat.NotebookNode:
    """The added code cell as executed."""
    notebook = nbformat.read(run.record_dir / "notebooks" / f"{stage_stem(STAGE)}.ipynb", as_version=4)
    found = [c for c in notebook.cells if c.cell_type == "code" and c.source.strip() == cells[1]]
    assert len(found) == 1
    heading = notebook.cells[notebook.cells.index(found[0]) - 1]
    assert heading.cell_type == "markdown" and heading.source.strip() == cells[0]
    return found[0]


def _figure_names(study: Path) -> list[str]:
    return [figure_name("subgroup_calibration", c.label) for c in load_study(study).data.validation]


def test_readme_cells_follow_the_template_rules(cells):
    markdown, code = cells
    assert markdown.startswith("## ")  # a heading before the cell
    assert "http://" not in markdown + code and "https://" not in markdown + code
    assert "ctx.save_figure(" in code
    for shown_rows in (".frame", ".head(", ".sample(", "read_csv"):
        assert shown_rows not in code


def _shown_figures(added) -> list[str]:
    """The base64 SVG of each figure the added cell shows through riskvet.reporting.publish.figure."""
    html = "".join(o.data["text/html"] for o in added.outputs if "text/html" in o.get("data", {}))
    return re.findall(r'<img src="data:image/svg\+xml;base64,([^"]+)"', html)


def test_run_is_ok_and_the_notebook_holds_the_output(run, added):
    assert [s.status for s in run.stages] == ["ok", "ok"]
    assert not [o for o in added.outputs if o.output_type in ("error", "stream") and o.get("name") != "stdout"]
    images = _shown_figures(added)
    sentences = [o.data["text/markdown"] for o in added.outputs if "text/markdown" in o.get("data", {})]
    assert len(images) == len(sentences) == 1  # the demo has one validation cohort
    assert re.fullmatch(r"In season-2026, for transferred, the interval of calibration-in-the-large excludes 0 in \d+ of \d+ subgroups.*\.", sentences[0])


def test_figure_is_in_the_figures_folder_and_is_the_one_shown(run, added, study):
    names = _figure_names(study)
    shown = [base64.b64decode(encoded) for encoded in _shown_figures(added)]
    for name, svg in zip(names, shown, strict=True):
        folder = run.record_dir / "figures" / STAGE
        assert (folder / f"{name}.png").is_file()
        assert (folder / f"{name}.svg").read_bytes() == svg  # publish.figure embeds the SVG's own bytes
    files = read_manifest(run.record_dir)["files"]
    assert all(f"figures/{STAGE}/{name}.png" in files for name in names)


def test_html_page_shows_the_heading_sentence_and_figure(run, added, cells):
    text = (run.record_dir / "html" / f"{stage_stem(STAGE)}.html").read_text(encoding="utf-8")
    assert "Calibration in the subgroups" in text
    assert "the interval of calibration-in-the-large excludes 0 in" in text
    for encoded in _shown_figures(added):
        assert encoded in text  # embedded, not linked
    assert external_references(text) == []
    assert "plot_subgroups" not in text  # code hidden from reviewers


def test_no_identifier_reaches_the_added_output(run, added, study):
    with open(study.parent / "data" / "validation.csv", newline="", encoding="utf-8") as handle:
        ids = {row["attendee_id"] for row in csv.DictReader(handle)}
    shown = " ".join(o.data.get("text/markdown", "") + o.data.get("text/plain", "") for o in added.outputs if "data" in o)
    assert ids and not [i for i in ids if re.search(rf"\b{re.escape(i)}\b", shown)]


def test_manifest_shows_the_changed_template_and_the_record_verifies(run, templates):
    listed = {t["stage"]: t for t in read_manifest(run.record_dir)["templates"]}
    copy = templates / f"{STAGE}.ipynb"
    assert listed[STAGE]["path"] == str(copy.resolve())
    assert listed[STAGE]["sha256"] == sha256_file(copy)
    assert listed[STAGE]["sha256"] != sha256_file(template_path(STAGE))  # the shipped template
    assert listed["derivation"]["sha256"] == sha256_file(template_path("derivation"))  # copied unchanged
    verification = verify_record(run.record_dir)
    assert verification.ok, verification.to_frame()[lambda f: f["status"] != "ok"]
