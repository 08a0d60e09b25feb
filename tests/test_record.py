"""Record manifests, verification and comparison; the summary stage and TRIPOD table."""

from __future__ import annotations

import hashlib
import io
import json
import shutil
from pathlib import Path

import pandas as pd
import pytest

from riskvet.chain import cli
from riskvet.errors import RecordError, RiskvetError
from riskvet.chain.record import (
    MANIFEST,
    compare_records,
    manifest_digest,
    read_manifest,
    record_files,
    sha256_file,
    verify_record,
    write_manifest,
)
from riskvet.chain.runner import run_study, template_path
from riskvet.chain.scaffold import new_study_folder
from riskvet.chain.stagekit import stage_context
from riskvet.chain.stages import summary as summary_stage
from riskvet.intake.study import stage_stem
from riskvet.reporting.headlines import flatten, headline_results, key_results
from riskvet.reporting.tripod import load_checklist, notebook_headings, tripod_table

from test_runner import SMALL, write_fake_templates


# -- hashing and the manifest, on a hand-made record ------------------------------------------------


def test_sha256_matches_the_published_test_vector(tmp_path):
    # NIST FIPS 180-2, Appendix B.1: SHA-256("abc")
    path = tmp_path / "abc.txt"
    path.write_bytes(b"abc")
    assert sha256_file(path) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    big = tmp_path / "big.bin"
    big.write_bytes(bytes(range(256)) * 9000)  # crosses the 1 MiB read block
    assert sha256_file(big) == hashlib.sha256(big.read_bytes()).hexdigest()  # hashlib, standard library


def make_record(folder: Path, *, inputs: list[dict] | None = None) -> Path:
    """A small record by hand: two files, a manifest listing them."""
    (folder / "results").mkdir(parents=True)
    (folder / "results" / "derivation.json").write_text('{"auc": 0.8, "n": 400}\n')
    (folder / "notebooks").mkdir()
    (folder / "notebooks" / "02_derivation.ipynb").write_text("{}\n")
    manifest = {"run_id": folder.name, "status": "complete", "files": record_files(folder), "inputs": inputs or [], "templates": []}
    write_manifest(folder, manifest)
    return folder


def test_manifest_carries_its_own_hash(tmp_path):
    record = make_record(tmp_path / "r")
    manifest = read_manifest(record)
    assert manifest["manifest_sha256"] == manifest_digest(manifest)
    assert len(manifest["manifest_sha256"]) == 64
    assert set(manifest["files"]) == {"results/derivation.json", "notebooks/02_derivation.ipynb"}
    with pytest.raises(RecordError, match="written once"):
        write_manifest(record, manifest)


def test_verify_passes_then_detects_each_kind_of_change(tmp_path):
    record = make_record(tmp_path / "r")
    assert verify_record(record).ok

    changed = tmp_path / "changed"
    shutil.copytree(record, changed)
    (changed / "results" / "derivation.json").write_text('{"auc": 0.9, "n": 400}\n')
    v = verify_record(changed)
    assert not v.ok and [(c.path, c.status) for c in v.problems] == [("results/derivation.json", "changed")]

    removed = tmp_path / "removed"
    shutil.copytree(record, removed)
    (removed / "notebooks" / "02_derivation.ipynb").unlink()
    v = verify_record(removed)
    assert [(c.path, c.status) for c in v.problems] == [("notebooks/02_derivation.ipynb", "missing")]

    added = tmp_path / "added"
    shutil.copytree(record, added)
    (added / "results" / "extra.json").write_text("{}\n")
    v = verify_record(added)
    # an unlisted file, and one whose name is no stage of the chain
    assert [(c.path, c.status) for c in v.problems] == [("results/extra.json", "extra"), ("results/extra.json", "misplaced")]


def test_an_edited_manifest_is_detected_but_reformatting_is_not(tmp_path):
    record = make_record(tmp_path / "r")
    path = record / MANIFEST
    data = json.loads(path.read_text())
    path.write_text(json.dumps(data, indent=4))  # same content, other layout
    assert verify_record(record).ok
    data["status"] = "complete, reviewed"  # an edit that does not update the hash
    path.write_text(json.dumps(data))
    v = verify_record(record)
    assert [(c.kind, c.status) for c in v.problems] == [("manifest", "changed")]
    # hiding an altered file by editing its listed hash is caught by the manifest's own hash
    (record / "results" / "derivation.json").write_text('{"auc": 0.99}\n')
    data["files"]["results/derivation.json"]["sha256"] = sha256_file(record / "results" / "derivation.json")
    data["status"] = "complete"
    path.write_text(json.dumps(data))
    assert [c.kind for c in verify_record(record).problems] == ["manifest"]


def test_inputs_changed_or_unreachable(tmp_path):
    data = tmp_path / "data.csv"
    data.write_text("a,b\n1,2\n")
    gone = tmp_path / "gone.csv"
    gone.write_text("x\n")
    inputs = [{"role": "data.derivation", "path": str(data), "sha256": sha256_file(data)},
              {"role": "data.ratings", "path": str(gone), "sha256": sha256_file(gone)}]
    record = make_record(tmp_path / "r", inputs=inputs)
    gone.unlink()
    v = verify_record(record)
    assert v.ok and {c.path: c.status for c in v.checks if c.kind == "input"} == {str(data): "ok", str(gone): "unreachable"}
    data.write_text("a,b\n1,3\n")
    v = verify_record(record)
    assert [(c.kind, c.status) for c in v.problems] == [("input", "changed")]
    assert verify_record(record, check_inputs=False).ok


def test_verification_result_objects(tmp_path):
    record = make_record(tmp_path / "r")
    v = verify_record(record)
    frame = v.to_frame()
    assert list(frame.columns) == ["kind", "path", "status", "expected", "actual"]
    assert len(frame) == 3 and set(frame["status"]) == {"ok"}
    as_json = json.dumps(v.to_dict(), allow_nan=False)
    assert json.loads(as_json)["ok"] is True
    assert v.counts() == {"ok": 3}


def test_not_a_record(tmp_path):
    with pytest.raises(RecordError, match="no manifest.json"):
        verify_record(tmp_path)
    with pytest.raises(RecordError, match="expected a record folder"):
        verify_record(tmp_path / "absent")
    (tmp_path / MANIFEST).write_text("[1, 2]")
    with pytest.raises(RecordError, match="expected a JSON object"):
        read_manifest(tmp_path)
    (tmp_path / MANIFEST).write_text("{not json")
    with pytest.raises(RecordError, match="not valid JSON"):
        read_manifest(tmp_path)


# -- flattening and headline numbers ---------------------------------------------------------------------


def test_flatten_key_paths():
    value = {"b": [1, {"c": 2}], "a": {"x": None}, "e": [], "d": {}}
    assert list(flatten(value)) == [("a.x", None), ("b[0]", 1), ("b[1].c", 2), ("d", {}), ("e", [])]


def test_headline_results_picks_measures_and_skips_distributions():
    results = {
        "external_validation": {
            "auc": 0.81, "calibration_slope": 0.93, "label": "season", "replicates": [0.8] * 50,
            "cuts": [{"auc": 0.8 + i / 100} for i in range(10)],
        }
    }
    table = headline_results(results, max_index=3)
    assert list(table.columns) == ["stage", "key", "value"]
    assert set(table["key"]) == {"auc", "calibration_slope", "cuts[0].auc", "cuts[1].auc", "cuts[2].auc"}
    with pytest.raises(RiskvetError, match="mapping of stage"):
        headline_results([1, 2])


# -- comparison ----------------------------------------------------------------------------------------------


def _rewrite_json(path: Path, change) -> None:
    data = json.loads(path.read_text())
    change(data)
    path.write_text(json.dumps(data, indent=1, sort_keys=True))


@pytest.fixture(scope="module")
def run_record(tmp_path_factory):
    """A record of the fake derivation stage and the real summary stage on the small demo study."""
    base = tmp_path_factory.mktemp("rec")
    study = new_study_folder(base / "demo", **SMALL)
    templates = write_fake_templates(base / "templates")
    shutil.copyfile(template_path("summary"), templates / "summary.ipynb")
    result = run_study(study, stages=["derivation", "summary"], templates_dir=templates, out=io.StringIO())
    assert result.ok
    return result.record_dir


def test_cli_verify(run_record, tmp_path, capsys):
    assert cli.main(["verify", str(run_record)]) == 0
    assert "intact" in capsys.readouterr().out
    copy = tmp_path / "copy"
    shutil.copytree(run_record, copy)
    (copy / "figures" / "derivation" / "diagonal.svg").unlink()
    (copy / "results" / "derivation.json").write_text("{}\n")
    assert cli.main(["verify", str(copy)]) == 1
    out = capsys.readouterr()
    assert "ALTERED" in out.err and "diagonal.svg" in out.out and "missing" in out.out and "changed" in out.out
    assert cli.main(["verify", str(tmp_path / "nowhere")]) == 1


def test_compare_identical_and_changed_records(run_record, tmp_path, capsys):
    same = compare_records(run_record, run_record)
    assert same.differences == () and same.identical_results
    assert same.headline["same"].all()

    other = tmp_path / "other"
    shutil.copytree(run_record, other)
    _rewrite_json(other / "results" / "derivation.json", lambda d: d.update(mean_age=d["mean_age"] + 1.0))

    def edit(m):
        m["study"]["resolved"]["selection"]["seed"] = 7
        m["packages"]["numpy"] = "0.0.1"
        m["inputs"][0]["sha256"] = "0" * 64
        m["run_id"] = "another-id"  # ids and times are not differences
        m["started"] = "2000-01-01T00:00:00Z"

    _rewrite_json(other / MANIFEST, edit)
    comparison = compare_records(run_record, other)
    assert not comparison.identical_results
    keys = {(d.section, d.key) for d in comparison.differences}
    assert keys == {("results", "derivation.mean_age"), ("study", "selection.seed"), ("packages", "numpy"), ("inputs", "study")}
    seed = comparison.section("study")[0]
    assert (seed.a, seed.b) == (2024, 7)  # the demo study's selection seed, then the edited one
    frame = comparison.to_frame()
    assert list(frame.columns) == ["section", "key", "a", "b"] and len(frame) == 4
    json.dumps(comparison.to_dict(), allow_nan=False)

    assert cli.main(["compare", str(run_record), str(other)]) == 0
    printed = capsys.readouterr().out
    assert "selection.seed" in printed and "package versions: 1 difference" in printed
    # settings first, then key results, then a count per results file; the values themselves only with --all
    assert printed.index("study settings") < printed.index("key results that differ") < printed.index("other differences")
    assert "results/derivation.json: 1 value(s) differ" in printed and "derivation.mean_age" not in printed
    assert cli.main(["compare", str(run_record), str(other), "--all"]) == 0
    assert "derivation.mean_age" in capsys.readouterr().out

    assert cli.main(["compare", str(run_record), str(run_record)]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("identical: ")


def test_compare_sorts_keys_naturally_and_fits_the_terminal(monkeypatch):
    from riskvet.chain.cli import _fit_width, _natural_key

    keys = ["cuts[10].auc", "cuts[2].auc", "cuts[1].auc"]
    assert sorted(keys, key=_natural_key) == ["cuts[1].auc", "cuts[2].auc", "cuts[10].auc"]
    frame = pd.DataFrame({"key": ["k" * 30], "a": ["x" * 200], "b": ["y" * 200]})
    fitted = _fit_width(frame, 80)
    assert len(fitted.to_string(index=False).splitlines()[1]) <= 80
    assert fitted["a"].iloc[0].endswith("\u2026")


def test_compare_tolerance_absent_stages_and_nulls(run_record, tmp_path):
    other = tmp_path / "other"
    shutil.copytree(run_record, other)
    _rewrite_json(other / "results" / "derivation.json", lambda d: d.update(mean_age=d["mean_age"] * (1 + 1e-13), extra=None))
    exact = compare_records(run_record, other)
    keys = {d.key: d for d in exact.section("results")}
    assert set(keys) == {"derivation.mean_age", "derivation.extra"}
    row = exact.to_frame().set_index("key").loc["derivation.mean_age"]
    assert row["a"] != row["b"]  # shown with every digit when the rounded forms agree
    assert (keys["derivation.extra"].in_a, keys["derivation.extra"].in_b) == (False, True)
    assert exact.to_frame().set_index("key").loc["derivation.extra", "a"] == "(absent)"
    assert exact.to_frame().set_index("key").loc["derivation.extra", "b"] == "null"
    loose = compare_records(run_record, other, rtol=1e-9)
    assert [d.key for d in loose.section("results")] == ["derivation.extra"]
    (other / "results" / "summary.json").unlink()
    gone = compare_records(run_record, other, rtol=1e-9)
    assert [(d.key, d.a, d.b) for d in gone.section("results")] == [("derivation.extra", None, None), ("summary", "results/summary.json", None)]
    with pytest.raises(RiskvetError, match="rtol"):
        compare_records(run_record, other, rtol=-1)


# -- the summary stage ------------------------------------------------------------------------------------------


def test_summary_of_a_partial_record(run_record):
    summary = json.loads((run_record / "results" / "summary.json").read_text())
    status = {row["stage"]: row["status"] for row in summary["stages"]}
    assert status["derivation"] == "ran"
    assert status["internal_validation"] == "enabled, not run in this record"
    assert summary["model"]["source"] == "derived in this record"
    assert "Enabled in the study but not run in this record" in summary["texts"]["stages"]
    assert "not clearance for clinical use" in summary["texts"]["caution"]
    items = {row["item"]: row for row in summary["tripod"]["items"]}
    # the test derivation notebook has none of the real page's sections, so nothing is claimed from it
    assert items["15a"]["status"] == "for the authors to write"
    assert "the derivation page lacks the section \u201cFinal model\u201d" in items["15a"]["missing"]
    assert items["17"]["status"] == "for the authors to write" and items["17"]["missing"] == "updating did not run in this record"
    assert str(run_record) not in json.dumps(summary)  # nothing depends on where the record is


def test_summary_stage_run_directly(tmp_path):
    study = new_study_folder(tmp_path / "demo", **SMALL)
    text = study.read_text().replace("updating:\n", "updating:\n  enabled: false\n")
    study.write_text(text)
    record = tmp_path / "record"
    (record / "results").mkdir(parents=True)
    planning = {"n_development": 877, "validation": [{"label": "transferred", "size": {"n": 3374}}],
                "texts": {"development": "Developing the model needs at least 877 people."}}
    internal = {"bootstrap": {"estimates": [{"measure": "auc", "label": "AUC", "apparent": 0.84, "corrected": 0.81}],
                              "shrinkage": {"bootstrap": 0.93}, "n_boot": 5, "n_succeeded": 5},
                "texts": {"summary": "The apparent AUC of 0.840 falls to 0.810."}}
    (record / "results" / "planning.json").write_text(json.dumps(planning))
    (record / "results" / "internal_validation.json").write_text(json.dumps(internal))
    ctx = stage_context("summary", study_path=study, record_dir=record)
    out = summary_stage.run(ctx)
    frame = out.key_results
    assert dict(zip(frame["measure"], frame["value"])) == {
        "people needed to develop the model": 877,
        "people needed to validate, transferred": 3374,
        "AUC: apparent": 0.84,
        "AUC: optimism-corrected": 0.81,
        "bootstrap shrinkage factor": 0.93,
        "replicates that produced a model": "5 of 5",
    }
    assert list(out.findings["stage"]) == ["planning", "internal_validation"]
    status = dict(zip(out.stages["stage"], out.stages["status"]))
    assert status["updating"] == "not enabled in the study file"
    assert status["derivation"] == "enabled, not run in this record"
    assert out.model is None and out.texts["model"] == "The record holds no frozen model."
    tripod = out.tripod_frame()
    assert tripod.loc[tripod["item"] == "8", "status"].item() == "answered"
    assert tripod.loc[tripod["item"] == "10e", "status"].item() == "for the authors to write"
    assert tripod.loc[tripod["item"] == "10e", "what is missing"].item() == "updating is not enabled in the study"
    assert (record / "results" / "summary.json").is_file()
    with pytest.raises(RecordError, match="never overwritten"):
        summary_stage.run(ctx)


def test_key_results_fall_back_to_generic_headline():
    results = {"external_validation": {"cohorts": [{"label": "season", "auc": 0.78, "calibration_slope": 0.9}]}}
    frame = key_results(results)
    assert set(frame["key"]) == {"cohorts[0].auc", "cohorts[0].calibration_slope"}
    assert key_results({}).empty


@pytest.mark.parametrize("stage", ["planning", "agreement", "derivation", "internal_validation", "external_validation", "updating"])
def test_key_results_tolerate_unexpected_shapes(stage):
    keys = ("cohorts", "case_mix", "rule", "items", "checks", "validation", "bootstrap", "result", "cohort", "selection", "apparent", "texts")
    odd = dict.fromkeys(keys, [1, "x"])
    frame = key_results({stage: odd})
    assert list(frame.columns) == ["stage", "measure", "value", "lower", "upper", "key"]
    assert summary_stage.findings({stage: odd}).empty


def test_tripod_table_locates_sections(tmp_path):
    import nbformat

    (tmp_path / "notebooks").mkdir()
    notebook = nbformat.v4.new_notebook(cells=[
        nbformat.v4.new_markdown_cell("# Sample-size planning\n\ntext"),
        nbformat.v4.new_markdown_cell("## Developing the model"),
    ])
    nbformat.write(notebook, tmp_path / "notebooks" / f"{stage_stem('planning')}.ipynb")
    assert notebook_headings(tmp_path / "notebooks" / f"{stage_stem('planning')}.ipynb") == ["Sample-size planning", "Developing the model"]
    table = tripod_table(tmp_path, results={"planning": {"n_development": 877}}, enabled=("planning", "derivation", "summary"))
    row = {r["item"]: r for r in table.rows}["8"]
    assert row["status"] == "answered"
    assert [p["link"] for p in row["places"]] == [f"{stage_stem('planning')}.html#Developing-the-model"]
    assert [r["item"] for r in table.rows] == [i.item for i in load_checklist("TRIPOD 2015").items]
    assert isinstance(table.to_frame(), pd.DataFrame)
    with pytest.raises(RiskvetError, match="stages among"):
        tripod_table(tmp_path, results={}, enabled=("validation",))
