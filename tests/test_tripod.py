"""The TRIPOD indexes of a record: the checklists, the statuses, the links to the pages."""

from __future__ import annotations

import json
import re
from html.parser import HTMLParser
from pathlib import Path

import nbformat
import pandas as pd
import pytest

from riskvet.chain.runner import template_path
from riskvet.errors import RiskvetError
from riskvet.intake.study import STAGES, stage_stem
from riskvet.reporting.html import render_html
from riskvet.reporting.tripod import (
    CHECKLISTS, STATUSES, _check_rule, heading_anchor, load_checklist, notebook_headings, tripod_table,
)

# Item numbers as the published checklists number them, in their order.
# TRIPOD 2015: Collins GS, Reitsma JB, Altman DG, Moons KGM, BMJ 2015;350:g7594, the checklist (37 items).
TRIPOD_2015_ITEMS = (
    "1 2 3a 3b 4a 4b 5a 5b 5c 6a 6b 7a 7b 8 9 10a 10b 10c 10d 10e 11 12 13a 13b 13c 14a 14b 15a 15b "
    "16 17 18 19a 19b 20 21 22"
).split()
# The same checklist's column "D;V": items for development only, and for validation only.
TRIPOD_2015_DEVELOPMENT = {"10a", "10b", "14a", "14b", "15a", "15b"}
TRIPOD_2015_VALIDATION = {"10c", "10e", "12", "13c", "17", "19a"}
# TRIPOD+AI: Collins GS, Moons KGM, Dhiman P, et al., BMJ 2024;385:e078378, the checklist (27 items, 52 sub-items).
TRIPOD_AI_ITEMS = (
    "1 2 3a 3b 3c 4 5a 5b 6a 6b 6c 7 8a 8b 8c 9a 9b 9c 10 11 12a 12b 12c 12d 12e 12f 12g 13 14 15 16 17 "
    "18a 18b 18c 18d 18e 18f 19 20a 20b 20c 21 22 23a 23b 24 25 26 27a 27b 27c"
).split()
# The same checklist's column "D;E": items for development only, and for evaluation only.
TRIPOD_AI_DEVELOPMENT = {"9a", "12a", "12b", "12c", "15", "22", "27a", "27b"}
TRIPOD_AI_EVALUATION = {"12f", "12g", "20c", "24"}


@pytest.mark.parametrize("name, numbers, development, validation, other", [
    ("TRIPOD 2015", TRIPOD_2015_ITEMS, TRIPOD_2015_DEVELOPMENT, TRIPOD_2015_VALIDATION, "validation"),
    ("TRIPOD+AI 2024", TRIPOD_AI_ITEMS, TRIPOD_AI_DEVELOPMENT, TRIPOD_AI_EVALUATION, "evaluation"),
])
def test_every_published_item_appears_once_in_order(name, numbers, development, validation, other):
    checklist = load_checklist(name)
    assert checklist.name == name
    assert [i.item for i in checklist.items] == numbers
    both = f"development and {other}"
    applies = {i.item: i.applies_to for i in checklist.items}
    assert {k for k, v in applies.items() if v == "development"} == development
    assert {k for k, v in applies.items() if v == other} == validation
    assert all(v == both for k, v in applies.items() if k not in development | validation)
    assert all(i.wording == "paraphrase" for i in checklist.items)


def test_the_2015_sections_are_those_of_the_checklist():
    # Collins et al., BMJ 2015;350:g7594, the checklist's "Section/Topic" column.
    sections = {i.item: i.section for i in load_checklist("TRIPOD 2015").items}
    expected = {"1": "Title and abstract", "3b": "Introduction", "4a": "Methods", "12": "Methods",
                "13a": "Results", "17": "Results", "18": "Discussion", "20": "Discussion", "21": "Other information", "22": "Other information"}
    assert {k: sections[k] for k in expected} == expected


def test_the_data_files_state_version_references_and_paraphrase():
    data = json.loads((Path(__file__).parents[1] / "helpers/riskvet/resources/tripod_2015.json").read_text())
    assert data["checklist"] == "TRIPOD 2015" and data["wording"] == "paraphrase"
    assert any("BMJ 2015;350:g7594" in r for r in data["references"])
    assert any("Ann Intern Med 2015;162:W1-W73" in r for r in data["references"])
    assert "BMJ 2024;385:e078378" in load_checklist("TRIPOD+AI 2024").citation


@pytest.mark.parametrize("name", list(CHECKLISTS))
def test_every_section_a_rule_names_is_a_heading_of_its_stage_template(name):
    for item in load_checklist(name).items:
        for stage, section in (item.rule or {}).get("places", ()):
            assert section in notebook_headings(template_path(stage)), (name, item.item, stage, section)


def test_rules_are_checked_when_read():
    good = {"status": "answered", "places": [["derivation", "Data flow"]]}
    _check_rule("x", good)
    with pytest.raises(RiskvetError, match="x.status"):
        _check_rule("x", {**good, "status": "stage not run"})
    with pytest.raises(RiskvetError, match="x.places"):
        _check_rule("x", {**good, "places": [["validation", "Data flow"]]})
    with pytest.raises(RiskvetError, match="x.missing"):
        _check_rule("x", {**good, "status": "partly answered"})
    with pytest.raises(RiskvetError, match="x.when"):
        _check_rule("x", {**good, "when": "weather", "when_unmet": {"status": "answered", "missing": "rain"}})
    with pytest.raises(RiskvetError, match="checklist"):
        load_checklist("TRIPOD 2013")


class _Anchors(HTMLParser):
    """Heading ids and link targets of an HTML page."""

    def __init__(self):
        super().__init__()
        self.ids: list[str] = []
        self.links: list[str] = []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if re.fullmatch(r"h[1-6]", tag) and "id" in attrs:
            self.ids.append(attrs["id"])
        if tag == "a" and attrs.get("href") and not attrs["href"].startswith("#"):
            self.links.append(attrs["href"])


def _parse(path: Path) -> _Anchors:
    parser = _Anchors()
    parser.feed(path.read_text(encoding="utf-8"))
    return parser


def test_anchors_are_those_nbconvert_gives(tmp_path):
    headings = [h for stage in STAGES for h in notebook_headings(template_path(stage))]
    headings += ["Bland–Altman plots", "`code` and **bold** _it_", "A & B <span>c</span>", "Ünïcode “quotes” 50%",
                 "snake_case name", "What? (yes) #1", r"Star \*escaped\*", "[a link](https://example.org) text"]
    cells = [nbformat.v4.new_markdown_cell(f"## {h}") for h in headings]
    nbformat.write(nbformat.v4.new_notebook(cells=cells), tmp_path / "n.ipynb")
    page = _parse(render_html(tmp_path / "n.ipynb", tmp_path / "n.html"))
    assert page.ids == [heading_anchor(h) for h in headings]
    assert heading_anchor("Bland–Altman plots") == "Bland%E2%80%93Altman-plots"
    with pytest.raises(RiskvetError, match="heading_anchor"):
        heading_anchor("  ")


def test_a_partial_record(tmp_path):
    enabled = ("planning", "derivation", "internal_validation", "summary")
    table = tripod_table(tmp_path, results={"derivation": {}}, enabled=enabled, study={"thresholds": {}})
    rows = {r["item"]: r for r in table.rows}
    assert {r["status"] for r in table.rows} <= set(STATUSES)
    assert rows["10b"]["status"] == "partly answered" and rows["10b"]["missing"] == "internal validation did not run in this record"
    assert rows["8"]["status"] == "for the authors to write" and "sample-size planning did not run" in rows["8"]["missing"]
    assert rows["17"]["status"] == "for the authors to write" and rows["17"]["missing"] == "updating is not enabled in the study"
    assert rows["11"]["status"] == "for the authors to write" and "no risk thresholds" in rows["11"]["missing"]
    assert rows["15a"]["status"] == "answered"
    assert [p["link"] for p in rows["15a"]["places"]] == [f"{stage_stem('derivation')}.html#Final-model", f"{stage_stem('derivation')}.html#Model-equation"]
    assert rows["15a"]["places"][0]["page"] == f"html/{stage_stem('derivation')}.html"
    assert rows["6a"]["places"][0]["link"] == f"{stage_stem('summary')}.html#Summary-of-the-record"
    assert table.left_to_the_report == tuple(r["item"] for r in table.rows if r["status"] == "for the authors to write")
    with_thresholds = tripod_table(tmp_path, results={"derivation": {}}, enabled=enabled, study={"thresholds": {"observed": [0.2]}})
    assert {r["item"]: r["status"] for r in with_thresholds.rows}["11"] == "partly answered"


def test_a_section_missing_from_the_page_is_not_claimed(tmp_path):
    (tmp_path / "notebooks").mkdir()
    notebook = nbformat.v4.new_notebook(cells=[nbformat.v4.new_markdown_cell("# Derivation\n\n## Final model")])
    nbformat.write(notebook, tmp_path / "notebooks" / f"{stage_stem('derivation')}.ipynb")
    rows = {r["item"]: r for r in tripod_table(tmp_path, results={"derivation": {}}, enabled=STAGES).rows}
    assert [p["section"] for p in rows["15a"]["places"]] == ["Final model"]
    assert rows["9"]["status"] == "for the authors to write"
    assert rows["9"]["missing"] == ("external validation did not run in this record; the derivation page lacks the section "
                                    "\u201cMissing data\u201d; the derivation page lacks the section \u201cData flow\u201d")


def test_frames_and_dicts_are_for_reading(tmp_path):
    for name in CHECKLISTS:
        table = tripod_table(tmp_path, results={"derivation": {}, "external_validation": {}}, enabled=STAGES, checklist=name)
        frame = table.to_frame()
        assert isinstance(frame.index, pd.RangeIndex)
        assert list(frame.columns) == ["item", "topic", "applies to", "status", "what is missing", "where in the record"]
        assert set(frame["status"]) <= set(STATUSES)
        assert len(frame) == len(load_checklist(name).items)
        text = json.dumps(table.to_dict())
        assert "notebooks/" not in text and ".ipynb" not in text
        assert table.checklist in table.sentence and str(len(frame)) in table.sentence
        assert "Derivation: Final model" in " ".join(frame["where in the record"].dropna())


def test_links_render_to_the_anchors_given(tmp_path):
    table = tripod_table(tmp_path, results={s: {} for s in STAGES if s != "summary"}, enabled=STAGES, checklist="TRIPOD+AI 2024")
    nbformat.write(nbformat.v4.new_notebook(cells=[nbformat.v4.new_markdown_cell(table.links_markdown())]), tmp_path / "n.ipynb")
    links = _parse(render_html(tmp_path / "n.ipynb", tmp_path / "n.html")).links
    assert links == [p["link"] for r in table.rows for p in r["places"]]
    assert "06_external_validation.html#How-related-are-the-cohorts?" in links


def test_bad_arguments_are_named(tmp_path):
    with pytest.raises(RiskvetError, match="tripod_table\\(results\\)"):
        tripod_table(tmp_path, results=[], enabled=())
    with pytest.raises(RiskvetError, match="stages among"):
        tripod_table(tmp_path, results={}, enabled=("validation",))
    with pytest.raises(RiskvetError, match="checklist"):
        tripod_table(tmp_path, results={}, enabled=(), checklist="TRIPOD")


def _record_results(record: Path) -> dict:
    return {s: json.loads(p.read_text()) for s in STAGES if s != "summary" and (p := record / "results" / f"{s}.json").is_file()}


def test_demo_record_claims_only_what_it_holds(chain):
    record = chain.record_dir
    summary = json.loads((record / "results" / "summary.json").read_text())
    rows = {r["item"]: r for r in summary["tripod"]["items"]}
    assert summary["tripod"]["checklist"] == "TRIPOD 2015"
    for item in ("4a", "5b", "12"):
        assert rows[item]["status"] == "for the authors to write", item
    for item in ("6a", "7a", "11"):
        assert rows[item]["status"] == "partly answered", item
    assert "risk groups" in rows["11"]["topic"] and "net benefit" not in rows["11"]["topic"]
    ai = {r["item"]: r for r in tripod_table(record, results=_record_results(record), enabled=STAGES, checklist="TRIPOD+AI 2024").rows}
    assert ai["16"]["status"] == "for the authors to write" and ai["6b"]["status"] == "for the authors to write"
    assert ai["8a"]["status"] == ai["9b"]["status"] == "partly answered"


def test_demo_record_links_reach_a_heading_of_the_page(chain):
    record = chain.record_dir
    results = _record_results(record)
    for name in CHECKLISTS:
        for row in tripod_table(record, results=results, enabled=STAGES, checklist=name).rows:
            for place in row["places"]:
                page = record / place["page"]
                assert page.is_file(), place
                assert place["anchor"] in _parse(page).ids, (name, row["item"], place)
