"""Where a record answers the TRIPOD reporting items the analysis covers.

TRIPOD (Collins, Reitsma, Altman & Moons, 2015) lists what a report of a
prediction model study should contain.  Many items are about writing (title,
background, limitations, funding); the items below are those a riskvet record
itself answers.  For each, :data:`TRIPOD_ITEMS` names the stage that answers
it, words that identify the section of that stage's notebook, and patterns of
the results keys that hold the numbers.  :func:`tripod_table` looks each up in
an actual record: the executed notebook's headings and the stage's results.

The item numbers and the short topics are the analysis team's paraphrase of
the 2015 checklist (numbers recalled from memory; check them against the
published checklist before citing an item number in a report).

References
----------
Collins GS, Reitsma JB, Altman DG, Moons KGM. Transparent reporting of a
multivariable prediction model for individual prognosis or diagnosis
(TRIPOD): the TRIPOD statement. BMJ 2015;350:g7594.

Moons KGM, Altman DG, Reitsma JB, et al. Transparent reporting of a
multivariable prediction model for individual prognosis or diagnosis
(TRIPOD): explanation and elaboration. Ann Intern Med 2015;162:W1-W73.
"""

from __future__ import annotations

import fnmatch
import json
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

import pandas as pd

from ..errors import RiskvetError, problem
from ..intake.study import STAGES, stage_stem

__all__ = ["TripodItem", "TRIPOD_ITEMS", "LEFT_TO_THE_REPORT", "TripodTable", "tripod_table", "notebook_headings"]


@dataclass(frozen=True)
class TripodItem:
    """One reporting item and where the record answers it.

    Attributes
    ----------
    item : str
        Item number (``"10b"``).
    topic : str
        What the item asks for, in brief.
    stages : tuple of str
        Stages whose notebooks answer it, in order of preference.
    heading_words : tuple of str
        Lower-case words; the first notebook heading containing one of them
        (in the order given) is the section that answers the item.
    result_keys : tuple of str
        Glob patterns (``fnmatch``; ``*`` also spans dots) over the stage's
        flattened results keys, list indices written as ``.0``; for the first
        pattern that matches, the shortest matching key is shown.
    study_keys : tuple of str
        Sections of the resolved study (``study.json``) that also answer it.
    """

    item: str
    topic: str
    stages: tuple[str, ...]
    heading_words: tuple[str, ...] = ()
    result_keys: tuple[str, ...] = ()
    study_keys: tuple[str, ...] = ()


#: The TRIPOD 2015 items a riskvet record answers.
TRIPOD_ITEMS: tuple[TripodItem, ...] = (
    TripodItem("4a", "source of data (cohort) for development and validation", ("derivation", "external_validation"),
               ("data flow", "cohort", "data"), ("cohort", "cohorts"), ("data",)),
    TripodItem("5b", "eligibility: which rows were analysed and why others were excluded", ("derivation", "external_validation"),
               ("data flow", "exclu", "cohort"), ("exclusions", "*.exclusions", "cohort.n_analysed", "cohorts.*.n")),
    TripodItem("6a", "the outcome predicted: its levels and how they are coded", ("derivation",),
               ("data flow", "outcome"), ("cohort.outcome_counts", "model.outcome"), ("outcome",)),
    TripodItem("7a", "the candidate predictors and how each enters", ("derivation",),
               ("predictor", "candidate"), ("selection.candidates", "model.design", "terms"), ("predictors",)),
    TripodItem("8", "how the study size was arrived at", ("planning",),
               ("developing", "size", "validating"), ("development.n", "n_development", "validation")),
    TripodItem("9", "how missing data were handled", ("derivation", "external_validation"),
               ("missing", "data flow", "exclu"), ("exclusions", "*.exclusions", "*missing_data*")),
    TripodItem("10a", "how predictors were handled (splines, categories)", ("derivation",),
               ("spline", "final model", "model equation", "predictor"), ("model.design", "terms"), ("predictors",)),
    TripodItem("10b", "type of model, model building and predictor selection, internal validation", ("derivation", "internal_validation"),
               ("variable selection", "optimism", "selection"), ("selection", "bootstrap.estimates"), ("model", "selection", "internal_validation")),
    TripodItem("10c", "how predictions were calculated for the validation data", ("external_validation",),
               ("linear predictor", "prediction"), ("model_sha256", "case_mix.*.lp_mean_validation")),
    TripodItem("10d", "measures used to assess performance", ("internal_validation", "external_validation"),
               ("performance", "calibration", "discrimination"), ("bootstrap.estimates", "cohorts.*.performance")),
    TripodItem("10e", "how the model was updated", ("updating",),
               ("closed test", "the updates", "updat"), ("result.closed_test", "result.fits"), ("updating",)),
    TripodItem("11", "decision thresholds and the classification and net benefit at them", ("external_validation",),
               ("threshold", "decision"), ("cohorts.*.threshold_tables", "*net_benefit*"), ("thresholds",)),
    TripodItem("12", "differences between the development and validation data", ("external_validation",),
               ("case-mix", "case mix", "related"), ("case_mix.*.membership_c", "case_mix")),
    TripodItem("13a", "flow of participants: numbers screened, excluded, analysed", ("derivation", "external_validation"),
               ("data flow", "flow", "exclu"), ("cohort.n_screened", "cohorts.*.n", "exclusions")),
    TripodItem("13b", "characteristics of the participants", ("derivation", "external_validation"),
               ("predictors by outcome", "characteristic", "descriptive", "case-mix"), ("descriptive*", "case_mix.*.table")),
    TripodItem("13c", "comparison of the validation data with the development data", ("external_validation",),
               ("case-mix", "case mix", "related"), ("case_mix.*.table", "case_mix")),
    TripodItem("14a", "participants and outcome events in each analysis", ("derivation", "external_validation"),
               ("data flow", "performance", "outcome"), ("cohort.outcome_counts", "cohorts.*.level_counts")),
    TripodItem("15a", "the full model: every coefficient and threshold (intercept)", ("derivation",),
               ("final model", "coefficient", "equation"), ("model.coefficients", "parameters")),
    TripodItem("16", "performance measures with confidence intervals", ("internal_validation", "external_validation"),
               ("optimism-corrected", "performance", "calibration"), ("bootstrap.estimates", "cohorts.*.performance")),
    TripodItem("17", "results of model updating: the updated model and its performance", ("updating",),
               ("chosen", "before and after", "updat"), ("result.closed_test.chosen", "result.calibration_after")),
)

#: Items a report needs that the record does not answer: the authors write them.
LEFT_TO_THE_REPORT: tuple[str, ...] = (
    "1", "2", "3a", "3b", "4b", "5a", "5c", "6b", "7b", "14b", "15b", "18", "19a", "19b", "20", "21", "22",
)


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
            match = re.match(r"^\s{0,3}#{1,6}\s+(.*?)\s*#*\s*$", line)
            if match:
                out.append(match.group(1))
    return out


def _keys(results: Any, prefix: str = "") -> list[str]:
    if isinstance(results, dict):
        out = [prefix] if prefix else []
        for key in sorted(results, key=str):
            out += _keys(results[key], f"{prefix}.{key}" if prefix else str(key))
        return out
    if isinstance(results, list):
        out = [prefix] if prefix else []
        for i, item in enumerate(results[:50]):
            out += _keys(item, f"{prefix}.{i}")
        return out
    return [prefix] if prefix else []


def _first_key(results: Any, patterns: Sequence[str]) -> str | None:
    """The shortest key (fewest parts) matching the first pattern that matches any key."""
    keys = _keys(results)
    for pattern in patterns:
        found = [key for key in keys if fnmatch.fnmatchcase(key.lower(), pattern.lower())]
        if found:
            best = min(found, key=lambda k: (k.count("."), keys.index(k)))
            return re.sub(r"\.(\d+)(?=\.|$)", r"[\1]", best)
    return None


def _first_heading(headings: Sequence[str], words: Sequence[str]) -> str | None:
    for word in words:
        for heading in headings:
            if word in heading.lower():
                return heading
    return None


@dataclass(frozen=True)
class TripodTable:
    """Result of :func:`tripod_table`.

    Attributes
    ----------
    rows : tuple of dict
        One per item of :data:`TRIPOD_ITEMS`: ``item``, ``topic``, ``status``
        (``answered``; ``stage not run in this record``; ``stage not enabled
        in the study``), ``stages`` (those that answered it, else those that
        would), ``notebook`` and ``section`` (relative path and heading),
        ``results_key`` (``results/<stage>.json: key``), each joined by
        ``"; "`` when several stages answer the item, and ``study_keys``
        (sections of ``study.json`` that also answer it).
    left_to_the_report : tuple of str
        Item numbers the authors answer in their report.
    """

    rows: tuple[Mapping[str, Any], ...]
    left_to_the_report: tuple[str, ...] = LEFT_TO_THE_REPORT

    def to_dict(self) -> dict[str, Any]:
        return {"items": [dict(r) for r in self.rows], "left_to_the_report": list(self.left_to_the_report)}

    def to_frame(self) -> pd.DataFrame:
        """One row per item: item, topic, status, notebook, section, results key."""
        columns = ["item", "topic", "status", "notebook", "section", "results_key"]
        return pd.DataFrame([{k: r[k] for k in columns} for r in self.rows], columns=columns)


def tripod_table(
    record_dir: str | Path,
    *,
    results: Mapping[str, Any],
    enabled: Sequence[str],
) -> TripodTable:
    """Locate each TRIPOD item in a record.

    Parameters
    ----------
    record_dir : path
        The record folder (its ``notebooks/`` are searched for headings).
    results : mapping
        Stage -> results of the stages that ran in this record.
    enabled : sequence of str
        The stages the study enables.

    Returns
    -------
    TripodTable
        Paths in it are relative to the record, so the table is the same
        for every run of the same study.
    """
    if not isinstance(results, Mapping):
        raise RiskvetError(problem("tripod_table(results)", allowed="a mapping of stage -> results", received=type(results).__name__))
    unknown = [s for s in enabled if s not in STAGES]
    if unknown:
        raise RiskvetError(problem("tripod_table(enabled)", allowed=f"stages among {list(STAGES)}", received=unknown))
    record = Path(record_dir)
    rows = []
    for item in TRIPOD_ITEMS:
        ran = [s for s in item.stages if s in results]
        if ran:
            status = "answered"
            places = []
            for stage in ran:
                notebook = f"notebooks/{stage_stem(stage)}.ipynb"
                headings = notebook_headings(record / notebook)
                section = _first_heading(headings, item.heading_words) or (headings[0] if headings else None)
                key = _first_key(results[stage], item.result_keys)
                places.append((notebook, section or "", f"results/{stage}.json" + (f": {key}" if key else "")))
            notebook, section, results_key = ("; ".join(p[i] for p in places) for i in range(3))
        else:
            on = [s for s in item.stages if s in enabled]
            status = "stage not run in this record" if on else "stage not enabled in the study"
            notebook = section = results_key = None
        rows.append({
            "item": item.item,
            "topic": item.topic,
            "status": status,
            "stages": list(ran or item.stages),
            "notebook": notebook,
            "section": section,
            "results_key": results_key,
            "study_keys": [f"study.json: {k}" for k in item.study_keys],
        })
    return TripodTable(rows=tuple(rows))
