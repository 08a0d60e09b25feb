"""The summary stage: what the record found, and where a reviewer finds it.

:func:`run` gathers the results every earlier stage of the record wrote
(``results/<stage>.json``), says plainly which stages did not run and why,
picks out the key numbers of each stage, and locates each TRIPOD item the
analysis covers (:mod:`riskvet.tripod`).  It reads results only: nothing is
computed from the data, and no row of any input is shown or stored.

The content of ``results/summary.json`` depends only on the other results,
the study and the notebook templates, never on the record's location, run
id or times.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import pandas as pd

from ..._jsonable import to_jsonable
from ...reporting.headlines import key_results
from ...intake.study import STAGES
from ...reporting.sentences.common import CAUTION
from ...reporting.sentences.summary import summary_texts
from ...reporting.tripod import TripodTable, tripod_table

__all__ = ["CAUTION", "SummaryOutput", "stage_status", "findings", "run"]




#: The texts of a stage's ``texts`` that best summarise it, when it has no ``texts.summary``.
_SUMMARY_TEXT = {
    "planning": ("development", "checks"),
    "agreement": ("items",),
    "external_validation": ("performance", "rule"),
    "updating": ("choice",),
}


def findings(results: Mapping[str, Any]) -> pd.DataFrame:
    """Each stage's own summary sentences.

    ``texts.summary`` when the stage wrote one; otherwise its preferred texts
    (planning: development and checks; agreement: items; external validation:
    performance and rule; updating: choice), otherwise its first text other
    than the caution.

    Returns
    -------
    DataFrame
        Columns ``stage`` and ``finding``.
    """
    rows = []
    for stage, content in results.items():
        if not isinstance(content, Mapping):
            continue
        texts = content.get("texts") if isinstance(content.get("texts"), Mapping) else {}
        preferred = [texts[k] for k in ("summary", *_SUMMARY_TEXT.get(stage, ())) if isinstance(texts.get(k), str)]
        chosen = preferred[:2] or [v for k, v in texts.items() if isinstance(v, str) and k != "caution"][:1]
        rows.extend({"stage": stage, "finding": text} for text in chosen)
    return pd.DataFrame(rows, columns=["stage", "finding"])


def stage_status(results: Mapping[str, Any], *, enabled: tuple[str, ...]) -> pd.DataFrame:
    """Which stages ran in this record, and why the others did not.

    Returns
    -------
    DataFrame
        One row per stage before the summary: ``stage``, ``status`` (``ran``;
        ``enabled, not run in this record``; ``not enabled in the study
        file``) and ``results`` (the results file, when it exists).
    """
    rows = []
    for stage in STAGES:
        if stage == "summary":
            continue
        if stage in results:
            status, path = "ran", f"results/{stage}.json"
        elif stage in enabled:
            status, path = "enabled, not run in this record", None
        else:
            status, path = "not enabled in the study file", None
        rows.append({"stage": stage, "status": status, "results": path})
    return pd.DataFrame(rows, columns=["stage", "status", "results"])


@dataclass(frozen=True)
class SummaryOutput:
    """What the summary stage gathered.

    Attributes
    ----------
    study : dict
        Study name, outcome column, type and levels (with labels).
    model : dict or None
        The frozen model used in this record: content SHA-256, where it came
        from, outcome levels, number of design columns; None when there is none.
    stages : DataFrame
        :func:`stage_status`.
    key_results : DataFrame
        :func:`key_results`.
    findings : DataFrame
        :func:`findings`.
    tripod : TripodTable
        Where each TRIPOD item is answered in this record.
    texts : dict
        Sentences for the notebook.
    """

    study: Mapping[str, Any]
    model: Mapping[str, Any] | None
    stages: pd.DataFrame = field(repr=False)
    key_results: pd.DataFrame = field(repr=False)
    findings: pd.DataFrame = field(repr=False)
    tripod: TripodTable = field(repr=False)
    texts: Mapping[str, str] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({
            "study": dict(self.study),
            "model": None if self.model is None else dict(self.model),
            "stages": self.stages,
            "key_results": self.key_results,
            "findings": self.findings,
            "tripod": self.tripod.to_dict(),
            "texts": dict(self.texts),
        })

    def to_frame(self) -> pd.DataFrame:
        """The key results for reading: numbers to 4 significant digits, the interval as one column."""
        frame = self.key_results

        def text(v: Any) -> str:
            return f"{v:.4g}" if isinstance(v, float) else ("\u2014" if v is None else str(v))

        def number(v: Any) -> bool:
            return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)

        interval = [
            f"{text(lo)} to {text(hi)}" if number(lo) and number(hi) else "" for lo, hi in zip(frame["lower"], frame["upper"])
        ]
        return pd.DataFrame({
            "stage": frame["stage"], "measure": frame["measure"], "value": [text(v) for v in frame["value"]],
            "interval": interval, "key": frame["key"],
        })

    def stages_frame(self) -> pd.DataFrame:
        """:attr:`stages` for reading (a dash where there is no results file)."""
        return self.stages.fillna("—")

    def findings_frame(self) -> pd.DataFrame:
        return self.findings

    def tripod_frame(self) -> pd.DataFrame:
        """The TRIPOD table for reading (a dash where the item is not answered here)."""
        return self.tripod.to_frame().fillna("—")


def _model_summary(ctx, results: Mapping[str, Any]) -> dict[str, Any] | None:
    from ...modelling.modelfile import load_model

    if not ctx.model_path.is_file():
        return None
    model = load_model(ctx.model_path)
    return {
        "sha256": model.digest(),
        "source": "derived in this record" if "derivation" in results else "taken from an earlier record (see the manifest's from_record)",
        "outcome_levels": list(model.levels),
        "link": model.link,
        "proportional": bool(model.proportional),
        "n_columns": len(model.design.columns),
    }


def run(ctx) -> SummaryOutput:
    """Run the summary stage: gather, tabulate and write ``results/summary.json``.

    Parameters
    ----------
    ctx : riskvet.stagekit.StageContext
        The stage's context.

    Returns
    -------
    SummaryOutput

    Raises
    ------
    RecordError
        The record already holds a summary.
    ModelFileError
        The record's frozen model is damaged or altered.
    """
    if ctx.results_path.exists():
        ctx.new_path(ctx.results_path)  # raises: records are write-once, checked before any work
    study = ctx.study
    results = {s: r for s in STAGES if s != "summary" and (r := ctx.read_results(s)) is not None}
    stages = stage_status(results, enabled=study.enabled_stages)
    model = _model_summary(ctx, results)
    about = {
        "name": study.study.name,
        "outcome_column": study.outcome.column,
        "outcome_type": study.outcome.type,
        "outcome_levels": list(study.outcome.ordered_levels),
        "outcome_labels": {lv: study.outcome.label(lv) for lv in study.outcome.ordered_levels},
    }
    out = SummaryOutput(
        study=about,
        model=model,
        stages=stages,
        key_results=key_results(results, levels=tuple(study.outcome.ordered_levels)),
        findings=findings(results),
        tripod=tripod_table(ctx.record_dir, results=results, enabled=study.enabled_stages),
        texts=summary_texts(about, stages, model),
    )
    ctx.write_results(out.to_dict())
    return out
