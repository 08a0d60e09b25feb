"""Where a record answers the items of the TRIPOD reporting checklists.

Two checklists are indexed, each from a data file in ``riskvet/resources``:

- ``TRIPOD 2015`` (``tripod_2015.json``): the TRIPOD statement (Collins,
  Reitsma, Altman & Moons, BMJ 2015) and its explanation and elaboration
  (Moons et al., Ann Intern Med 2015), 37 items;
- ``TRIPOD+AI 2024`` (``tripod_ai_2024.json``): the TRIPOD+AI statement
  (Collins et al., BMJ 2024), which replaces the 2015 checklist, 52 items.

Each data file gives every item's number, section of the paper, whether it
concerns development, validation (evaluation) or both, a short topic in the
project's own words (marked as a paraphrase: read the published checklist
for the exact wording), and a rule saying which record pages and sections
hold its content and whether they hold all of it or part of it.
:func:`tripod_table` applies the rules to one record: an item is
*answered* when the record holds its content, *partly answered* when it
holds some of it (the row says what is missing), and *for the authors to
write* when the record holds none of it (title, background, dates, setting,
funding, discussion) or the stage that would answer it did not run.  Each
answered item links to the section of the HTML page where it is answered:
pages are ``html/<stem>.html`` and sections are the markdown headings of
the stage notebooks, with the anchors nbconvert gives them
(:func:`heading_anchor`).

References
----------
Collins GS, Reitsma JB, Altman DG, Moons KGM. Transparent reporting of a
multivariable prediction model for individual prognosis or diagnosis
(TRIPOD): the TRIPOD statement. BMJ 2015;350:g7594.

Moons KGM, Altman DG, Reitsma JB, Ioannidis JPA, Macaskill P, Steyerberg EW,
Vickers AJ, Ransohoff DF, Collins GS. Transparent reporting of a
multivariable prediction model for individual prognosis or diagnosis
(TRIPOD): explanation and elaboration. Ann Intern Med 2015;162:W1-W73.

Collins GS, Moons KGM, Dhiman P, Riley RD, Beam AL, Van Calster B, et al.
TRIPOD+AI statement: updated guidance for reporting clinical prediction
models that use regression or machine learning methods. BMJ
2024;385:e078378.
"""

from __future__ import annotations

import html
import json
import re
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any, Mapping, Sequence
from urllib.parse import quote

import pandas as pd

from ..errors import RiskvetError, problem
from ..intake.study import STAGES, stage_stem
from .html import STAGE_TITLES as PAGE_TITLES
from .sentences.summary import STAGE_TITLES as STAGE_WORDS

__all__ = [
    "CHECKLISTS", "STATUSES", "ChecklistItem", "Checklist", "load_checklist", "TripodTable", "tripod_table",
    "notebook_headings", "heading_anchor",
]

#: The checklists indexed, and their data files in ``riskvet/resources``.
CHECKLISTS = {"TRIPOD 2015": "tripod_2015.json", "TRIPOD+AI 2024": "tripod_ai_2024.json"}

#: What a row's status may say.
STATUSES = ("answered", "partly answered", "for the authors to write")

#: Conditions a rule may depend on (see :func:`_conditions`).
_CONDITIONS = ("thresholds", "subgroups")


@dataclass(frozen=True)
class ChecklistItem:
    """One item of a checklist and the rule that finds it in a record.

    Attributes
    ----------
    item : str
        Item number as the checklist numbers it (``"10b"``).
    section : str
        Section of the paper the checklist puts it in (``"Methods"``).
    applies_to : str
        ``development``, ``validation`` (``evaluation`` in TRIPOD+AI) or both.
    topic : str
        What the item asks for, in the project's own short words.
    wording : str
        ``paraphrase``: the topic is not the checklist's wording.
    rule : dict or None
        ``status`` (answered or partly answered, when every stage it needs
        ran), ``places`` (stage and section heading pairs), optionally
        ``missing`` (what the record lacks), ``needs`` (stages without which
        the item is only partly answered) with ``needs_missing``, and
        ``when`` (a condition) with ``when_unmet`` (status and missing when
        the condition does not hold).  None: the record holds none of it.
    note : str
        Why the record does not answer an item it might seem to answer.
    """

    item: str
    section: str
    applies_to: str
    topic: str
    wording: str
    rule: Mapping[str, Any] | None = None
    note: str = ""


@dataclass(frozen=True)
class Checklist:
    """A reporting checklist as the project indexes it.

    Attributes
    ----------
    name : str
        ``TRIPOD 2015`` or ``TRIPOD+AI 2024``.
    citation : str
        Short citation of the statement.
    references : tuple of str
        Full references.
    checked : str
        What the item numbers were checked against, and that the topics are paraphrases.
    items : tuple of ChecklistItem
        In the checklist's order.
    """

    name: str
    citation: str
    references: tuple[str, ...]
    checked: str
    items: tuple[ChecklistItem, ...]


def _check_rule(where: str, rule: Mapping[str, Any]) -> None:
    if rule.get("status") not in STATUSES[:2]:
        raise RiskvetError(problem(f"{where}.status", allowed=list(STATUSES[:2]), received=rule.get("status")))
    places = rule.get("places")
    if not places or any(len(p) != 2 or p[0] not in STAGES or not str(p[1]).strip() for p in places):
        raise RiskvetError(problem(f"{where}.places", allowed="a list of [stage, section heading] pairs", received=places))
    if any(s not in STAGES for s in rule.get("needs", ())):
        raise RiskvetError(problem(f"{where}.needs", allowed=f"stages among {list(STAGES)}", received=rule.get("needs")))
    if "when" in rule:
        unmet = rule.get("when_unmet") or {}
        if rule["when"] not in _CONDITIONS or unmet.get("status") not in STATUSES or not unmet.get("missing"):
            raise RiskvetError(problem(f"{where}.when", allowed=f"one of {list(_CONDITIONS)} with when_unmet status and missing",
                                       received=[rule["when"], unmet]))
    if rule["status"] == "partly answered" and not rule.get("missing"):
        raise RiskvetError(problem(f"{where}.missing", allowed="what the record lacks, for a partly answered item", received=None))


@lru_cache(maxsize=None)
def load_checklist(name: str = "TRIPOD 2015") -> Checklist:
    """Read and check a checklist's data file.

    Parameters
    ----------
    name : str, default ``"TRIPOD 2015"``
        One of :data:`CHECKLISTS`.

    Raises
    ------
    RiskvetError
        Unknown checklist, or a data file whose items repeat a number or
        whose rules name an unknown stage, status or condition.
    """
    if name not in CHECKLISTS:
        raise RiskvetError(problem("checklist", allowed=f"one of {list(CHECKLISTS)}", received=name))
    text = resources.files("riskvet").joinpath(f"resources/{CHECKLISTS[name]}").read_text(encoding="utf-8")
    data = json.loads(text)
    items = []
    for entry in data["items"]:
        where = f"{CHECKLISTS[name]}: item {entry.get('item')!r}"
        if entry.get("rule") is not None:
            _check_rule(where, entry["rule"])
        items.append(ChecklistItem(
            item=str(entry["item"]), section=entry["section"], applies_to=entry["applies_to"], topic=entry["topic"],
            wording=entry["wording"], rule=entry.get("rule"), note=entry.get("note", ""),
        ))
    numbers = [i.item for i in items]
    twice = sorted({n for n in numbers if numbers.count(n) > 1})
    if twice:
        raise RiskvetError(problem(f"{CHECKLISTS[name]}: items", allowed="each item number once", received=twice))
    return Checklist(name=data["checklist"], citation=data["citation"], references=tuple(data["references"]),
                     checked=data["checked"], items=tuple(items))


def notebook_headings(path: str | Path) -> list[str]:
    """Markdown headings (``#`` lines) of a notebook, in order, without the ``#`` marks."""
    path = Path(path)
    try:
        notebook = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError, UnicodeDecodeError):
        return []
    out = []
    for cell in notebook.get("cells", []):
        if cell.get("cell_type") != "markdown":
            continue
        source = cell.get("source", "")
        text = "".join(source) if isinstance(source, list) else str(source)
        for line in text.splitlines():
            match = re.match(r"^\s{0,3}#{1,6}\s+(.*?)(?:\s+#+)?\s*$", line)
            if match:
                out.append(match.group(1))
    return out


_CODE_SPAN = re.compile(r"(`+)(.+?)\1")
_IMAGE = re.compile(r"!\[([^\]]*)\]\([^)]*\)")
_LINK = re.compile(r"\[([^\]]*)\]\([^)]*\)")
_EMPHASIS = re.compile(r"(?<![\w*])(\*\*|__|\*|_)(?=\S)(.+?)(?<=\S)\1(?![\w*])")
_ESCAPE = re.compile(r"\\([!\"#$%&'()*+,\-./:;<=>?@\[\\\]^_`{|}~])")
_INLINE_HTML = re.compile(r"</?[A-Za-z][\w-]*(?:\s[^<>]*)?/?>")


def heading_anchor(heading: str) -> str:
    """The ``id`` nbconvert gives the HTML heading of a markdown heading.

    nbconvert (7.x, ``filters.strings.add_anchor``) takes the text of the
    rendered heading, replaces each space by ``-`` and percent-encodes what
    a URL fragment may not hold (non-ASCII letters and dashes become UTF-8
    ``%XX`` sequences).  Inline markup (code spans, emphasis, links,
    images, HTML tags) contributes only its text, as in the rendering.

    Parameters
    ----------
    heading : str
        The heading's markdown text without the ``#`` marks.

    Returns
    -------
    str
        The anchor, without ``#``; a link to the section is ``page.html#anchor``.
    """
    if not isinstance(heading, str) or not heading.strip():
        raise RiskvetError(problem("heading_anchor(heading)", allowed="a heading text", received=heading))
    held: list[str] = []

    def hold(value: str) -> str:
        # Code spans and escaped characters are literal text: set them aside from the markup rules.
        held.append(value)
        return f"\x00{len(held) - 1}\x00"

    text = _CODE_SPAN.sub(lambda m: hold(m.group(2).strip()), heading.strip())
    text = _ESCAPE.sub(lambda m: hold(m.group(1)), text)
    text = _INLINE_HTML.sub("", _IMAGE.sub("", text))
    text = _LINK.sub(lambda m: m.group(1), text)
    while _EMPHASIS.search(text):
        text = _EMPHASIS.sub(lambda m: m.group(2), text)
    text = re.sub("\x00(\\d+)\x00", lambda m: held[int(m.group(1))], html.unescape(text))
    return quote(text.replace(" ", "-"), safe="?/:@!$&'()*+,;=")


def _conditions(results: Mapping[str, Any], study: Mapping[str, Any]) -> dict[str, bool]:
    """Whether the study sets risk thresholds and names subgroups (from the study, else the results)."""
    external = results.get("external_validation")
    cohorts = external.get("cohorts") if isinstance(external, Mapping) else None
    cohorts = list(cohorts.values()) if isinstance(cohorts, Mapping) else list(cohorts) if isinstance(cohorts, list) else []
    cohorts = [c for c in cohorts if isinstance(c, Mapping)]
    thresholds = study.get("thresholds") if isinstance(study.get("thresholds"), Mapping) else {}
    subgroups = (study.get("external_validation") or {}).get("subgroups") if isinstance(study.get("external_validation"), Mapping) else None
    return {
        "thresholds": any(bool(v) for v in thresholds.values()) or any(bool(c.get("threshold_tables")) for c in cohorts),
        "subgroups": bool(subgroups) or any(bool(c.get("subgroups")) for c in cohorts),
    }


def _absent(stages: Sequence[str], enabled: Sequence[str]) -> str:
    """Why the pages of ``stages`` are not in the record, in words."""
    off = [STAGE_WORDS.get(s, s) for s in stages if s not in enabled]
    not_run = [STAGE_WORDS.get(s, s) for s in stages if s in enabled]
    parts = []
    if not_run:
        parts.append(f"{_join(not_run)} did not run in this record")
    if off:
        parts.append(f"{_join(off)} {'is' if len(off) == 1 else 'are'} not enabled in the study")
    return "; ".join(parts)


def _join(words: Sequence[str]) -> str:
    words = list(dict.fromkeys(words))
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]


def _place(stage: str, section: str) -> dict[str, str]:
    title = PAGE_TITLES.get(stage, stage.replace("_", " "))
    anchor = heading_anchor(section)
    return {
        "stage": stage,
        "page": f"html/{stage_stem(stage)}.html",
        "section": section,
        "anchor": anchor,
        "link": f"{stage_stem(stage)}.html#{anchor}",
        "where": title if section.lower() == title.lower() else f"{title}: {section}",
    }


def _locate(item: ChecklistItem, record: Path, ran: set[str], enabled: Sequence[str], conditions: Mapping[str, bool]) -> dict[str, Any]:
    """Status, what is missing and the places of one item in one record."""
    rule = item.rule
    if rule is None:
        return {"status": STATUSES[2], "missing": item.note or None, "places": []}
    if "when" in rule and not conditions[rule["when"]]:
        unmet = rule["when_unmet"]
        if unmet["status"] == STATUSES[2]:
            return {"status": STATUSES[2], "missing": unmet["missing"], "places": []}
    else:
        unmet = None
    headings: dict[str, list[str] | None] = {}
    places, lacking = [], []
    for stage, section in rule["places"]:
        if stage not in ran:
            continue
        if stage not in headings:
            notebook = record / "notebooks" / f"{stage_stem(stage)}.ipynb"
            headings[stage] = notebook_headings(notebook) if notebook.is_file() else None
        if headings[stage] is None or section in headings[stage]:
            places.append(_place(stage, section))
        else:
            lacking.append(f"the {STAGE_WORDS.get(stage, stage)} page lacks the section \u201c{section}\u201d")
    if not places:
        missing = [_absent(list(dict.fromkeys(s for s, _ in rule["places"] if s not in ran)), enabled), *lacking]
        return {"status": STATUSES[2], "missing": "; ".join(m for m in missing if m), "places": []}
    status, missing = rule["status"], [rule.get("missing")]
    short = [s for s in rule.get("needs", ()) if s not in ran]
    if short:
        status = STATUSES[1]
        missing.append(rule.get("needs_missing") or _absent(short, enabled))
    if unmet is not None:
        status = STATUSES[1]
        missing.append(unmet["missing"])
    return {"status": status, "missing": "; ".join(m for m in missing if m) or None, "places": places}


@dataclass(frozen=True)
class TripodTable:
    """Result of :func:`tripod_table`: one checklist located in one record.

    Attributes
    ----------
    checklist : str
        ``TRIPOD 2015`` or ``TRIPOD+AI 2024``.
    citation : str
        Short citation of the statement.
    rows : tuple of dict
        One per checklist item, in the checklist's order: ``item``,
        ``section``, ``applies_to``, ``topic``, ``status`` (one of
        :data:`STATUSES`), ``missing`` (what the record lacks, in one
        phrase, or None) and ``places`` (each with ``stage``, ``page``
        (``html/<stem>.html``), ``section`` (the heading), ``anchor``,
        ``link`` (``<stem>.html#<anchor>``, relative to the pages folder)
        and ``where`` (page title and section in words)).
    """

    checklist: str
    citation: str
    rows: tuple[Mapping[str, Any], ...]

    @property
    def left_to_the_report(self) -> tuple[str, ...]:
        """Item numbers the authors write in full."""
        return tuple(r["item"] for r in self.rows if r["status"] == STATUSES[2])

    @property
    def sentence(self) -> str:
        """What the index covers and how the items fall, in one paragraph."""
        count = {s: sum(r["status"] == s for r in self.rows) for s in STATUSES}
        return (
            f"Checklist: {self.checklist} ({self.citation}); item topics are paraphrased, so read the published "
            f"checklist for its wording. Of its {len(self.rows)} items this record answers {count[STATUSES[0]]}, "
            f"answers {count[STATUSES[1]]} in part (the table says what is missing) and leaves "
            f"{count[STATUSES[2]]} for the authors to write."
        )

    def to_dict(self) -> dict[str, Any]:
        return {
            "checklist": self.checklist,
            "citation": self.citation,
            "items": [{**r, "places": [dict(p) for p in r["places"]]} for r in self.rows],
            "left_to_the_report": list(self.left_to_the_report),
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per item: item, topic, applies to, status, what is missing, where in the record."""
        return pd.DataFrame(
            [{
                "item": r["item"],
                "topic": r["topic"],
                "applies to": r["applies_to"],
                "status": r["status"],
                "what is missing": r["missing"],
                "where in the record": "; ".join(p["where"] for p in r["places"]) or None,
            } for r in self.rows],
            columns=["item", "topic", "applies to", "status", "what is missing", "where in the record"],
        )

    def links_markdown(self) -> str:
        """A markdown list linking each answered or partly answered item to its sections (for the summary page).

        Each link is ``<stem>.html#<anchor>``, relative to the record's
        ``html/`` folder where the summary page is, and its fragment is the
        heading's ``id`` exactly.
        """
        lines = []
        for r in self.rows:
            if r["places"]:
                # HTML links, so the markdown renderer passes the address through unchanged.
                links = "; ".join(f'<a href="{html.escape(p["link"], quote=True)}">{html.escape(p["where"])}</a>' for p in r["places"])
                lines.append(f"- Item {r['item']} ({_md(r['topic'])}, {r['status']}): {links}")
        return "\n".join(lines) if lines else "No item of this checklist is answered on the pages of this record."


def _md(text: str) -> str:
    """Text with the characters markdown would read as markup escaped."""
    return re.sub(r"([\\`*_\[\]<>#|])", r"\\\1", text)


def tripod_table(
    record_dir: str | Path,
    *,
    results: Mapping[str, Any],
    enabled: Sequence[str],
    checklist: str = "TRIPOD 2015",
    study: Mapping[str, Any] | None = None,
) -> TripodTable:
    """Locate each item of a TRIPOD checklist in a record.

    Parameters
    ----------
    record_dir : path
        The record folder (its ``notebooks/`` are read for the section headings).
    results : mapping
        Stage -> results of the stages that ran in this record.
    enabled : sequence of str
        The stages the study enables.
    checklist : str, default ``"TRIPOD 2015"``
        One of :data:`CHECKLISTS`.
    study : mapping, optional
        The resolved study (``study.json``); read from the record when
        omitted.  Says whether the study sets risk thresholds and names
        subgroups.

    Returns
    -------
    TripodTable
        Links in it are relative to the record, so the table is the same
        for every run of the same study.

    Raises
    ------
    RiskvetError
        ``results`` is not a mapping, ``enabled`` names an unknown stage, or
        ``checklist`` is unknown.
    """
    if not isinstance(results, Mapping):
        raise RiskvetError(problem("tripod_table(results)", allowed="a mapping of stage -> results", received=type(results).__name__))
    unknown = [s for s in enabled if s not in STAGES]
    if unknown:
        raise RiskvetError(problem("tripod_table(enabled)", allowed=f"stages among {list(STAGES)}", received=unknown))
    items = load_checklist(checklist)
    record = Path(record_dir)
    if study is None:
        try:
            study = json.loads((record / "study.json").read_text(encoding="utf-8"))
        except (OSError, json.JSONDecodeError, UnicodeDecodeError):
            study = {}
    conditions = _conditions(results, study if isinstance(study, Mapping) else {})
    ran = {s for s in results if s in STAGES} | {"summary"}
    rows = []
    for item in items.items:
        found = _locate(item, record, ran, enabled, conditions)
        rows.append({"item": item.item, "section": item.section, "applies_to": item.applies_to, "topic": item.topic, **found})
    return TripodTable(checklist=items.name, citation=items.citation, rows=tuple(rows))
