"""The whole chain of real stage notebooks on the invented demo study, kept small.

Checks that every stage runs in order into one record, that the record
verifies, that the reviewer renderings load nothing from the network, and
that no row of the input data (identifiers, raw lines) reaches the record's
notebooks or HTML.
"""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import pytest

from riskvet.reporting.html import external_references
from riskvet.chain.record import read_manifest, verify_record
from riskvet.intake.study import stage_stem
from riskvet.chain.runner import run_study
from riskvet.intake.study import STAGES

def test_every_enabled_stage_ran_in_order(chain):
    manifest = read_manifest(chain.record_dir)
    assert [s["stage"] for s in manifest["stages"]] == list(STAGES)  # the demo study enables every stage
    assert all(s["status"] == "ok" for s in manifest["stages"])
    for stage in STAGES:
        assert (chain.record_dir / "results" / f"{stage}.json").is_file(), stage
        assert (chain.record_dir / "html" / f"{stage_stem(stage)}.html").is_file(), stage
    assert (chain.record_dir / "models" / "model.json").is_file()


def test_chain_record_verifies(chain):
    verification = verify_record(chain.record_dir)
    assert verification.ok, verification.to_frame()[lambda f: f["status"] != "ok"]


def test_results_and_models_do_not_depend_on_the_record(chain):
    # what makes two runs differ would be the record's place or name; times are
    # checked by running twice (tests/test_runner.py, fake stages)
    files = sorted((chain.record_dir / "results").glob("*.json")) + sorted((chain.record_dir / "models").glob("*.json"))
    assert len(files) >= 8
    for path in files:
        text = path.read_text(encoding="utf-8")
        assert str(chain.record_dir) not in text and chain.run_id not in text, path.name


def test_html_is_offline_and_shows_no_code(chain):
    for html in sorted((chain.record_dir / "html").glob("*.html")):
        text = html.read_text(encoding="utf-8")
        assert external_references(text) == [], html.name
        body = re.sub(r"<style.*?</style>", "", text, flags=re.S)
        assert "jp-InputArea-editor" not in body and "jp-InputPrompt" not in body, html.name


def test_every_saved_figure_is_shown_in_its_notebook(chain):
    import base64

    import nbformat

    shown = 0
    for folder in sorted((chain.record_dir / "figures").iterdir()):
        notebook = nbformat.read(chain.record_dir / "notebooks" / f"{stage_stem(folder.name)}.ipynb", as_version=4)
        pages = "".join(
            o["data"]["text/html"] if isinstance(o["data"]["text/html"], str) else "".join(o["data"]["text/html"])
            for cell in notebook.cells if cell.cell_type == "code"
            for o in cell.get("outputs", []) if "text/html" in o.get("data", {})
        )
        for svg in sorted(folder.glob("*.svg")):
            # riskvet.reporting.publish.figure embeds the SVG file's own bytes
            assert base64.b64encode(svg.read_bytes()).decode("ascii") in pages, f"{folder.name}/{svg.name} not shown"
            assert svg.with_suffix(".png").is_file()
            shown += 1
    assert shown >= 5


def _data_files(record: Path) -> list[Path]:
    manifest = read_manifest(record)
    return [Path(e["path"]) for e in manifest["inputs"] if e["role"].startswith("data.")]


def test_no_row_level_data_anywhere_in_the_record(chain):
    ids: set[str] = set()
    lines: list[str] = []
    for path in _data_files(chain.record_dir):
        rows = path.read_text(encoding="utf-8").splitlines()
        header = rows[0].split(",")
        at = header.index("attendee_id")
        for row in rows[1:]:
            fields = row.split(",")
            ids.add(fields[at])
            rest = ",".join(fields[:at] + fields[at + 1:])  # the row without its identifier
            lines += [text for text in (row, rest) if len(text) > 20]
    assert ids and all(re.fullmatch(r"[A-Z]{2}-\d{6}", i) for i in ids)  # the demo's identifier format, e.g. PC-000123
    # every text file of the record: notebooks, HTML, results, figures (SVG), models, manifest
    files = sorted(p for p in chain.record_dir.rglob("*") if p.is_file() and p.suffix != ".png")
    assert {p.suffix for p in files} >= {".html", ".ipynb", ".json", ".svg"}
    pattern = re.compile(r"[A-Z]{2}-\d{6}")
    for path in files:
        text = path.read_text(encoding="utf-8")
        found = set(pattern.findall(text)) & ids
        assert not found, f"{path.name} shows identifiers {sorted(found)[:5]}"
        shown = [line for line in lines if line in text]
        assert not shown, f"{path.name} shows input rows, e.g. {shown[0][:60]!r}"


def test_a_second_run_reproduces_results_and_model_bytes(chain):
    """Two runs of the same study on the same data give identical results and model files
    (the derivation stage is rerun; the first record stays intact)."""
    before = verify_record(chain.record_dir)
    study = chain.record_dir.parent.parent / "study.yaml"  # records live in the study folder's records/
    again = run_study(study, stages=["derivation"], out=io.StringIO())
    assert again.ok and again.record_dir != chain.record_dir
    for name in ("results/derivation.json", "models/model.json"):
        assert (again.record_dir / name).read_bytes() == (chain.record_dir / name).read_bytes(), name
    assert verify_record(chain.record_dir).ok and before.ok


def test_later_stages_run_against_an_earlier_records_model(chain):
    """--stages with --from: the new record uses the earlier record's frozen model, unchanged."""
    study = chain.record_dir.parent.parent / "study.yaml"
    later = run_study(study, stages=["external_validation"], from_record=chain.record_dir, out=io.StringIO())
    assert later.ok
    first = json.loads((chain.record_dir / "results" / "external_validation.json").read_text())
    second = json.loads((later.record_dir / "results" / "external_validation.json").read_text())
    assert first == second
    assert not (later.record_dir / "results" / "derivation.json").exists()


def test_from_a_record_whose_model_reads_other_predictors_is_refused(chain, tmp_path):
    """An earlier model that reads a column this study does not name as a predictor is refused
    before any record is written."""
    from riskvet.errors import RecordError

    study = chain.record_dir.parent.parent / "study.yaml"  # the model forces core_temp in
    text = study.read_text().replace("data/", str(study.parent / "data") + "/")
    text = text.replace("    core_temp: spline 4\n", "").replace("forced: [core_temp]", "forced: []")
    other = tmp_path / "other.yaml"
    other.write_text(text)
    with pytest.raises(RecordError, match=r"reads columns \['core_temp'\]"):
        run_study(other, stages=["external_validation"], from_record=chain.record_dir, out=io.StringIO())
    assert not (tmp_path / "records").exists()
