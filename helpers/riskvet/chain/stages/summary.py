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
from ...reporting.headlines import headline_measure_keys, key_results
from ...intake.study import STAGES
from ...reporting.sentences.common import CAUTION
from ...reporting.sentences.common import measure_guide
from ...reporting.sentences.summary import STAGE_TITLES, selection_stability_sentence, summary_texts
from ...reporting.tripod import TripodTable, tripod_table

__all__ = ["CAUTION", "SummaryOutput", "stage_status", "findings", "run"]




#: The texts of a stage's ``texts`` that best summarise it, after its ``texts.summary``.
_SUMMARY_TEXT = {
    "planning": ("development", "checks"),
    "agreement": ("items",),
    "external_validation": ("performance", "decision", "rule"),
    "updating": ("choice",),
}

#: How many of a stage's texts the findings keep (external validation: its summary, performance, net benefit, the rule).
_KEEP = {"external_validation": 4}


def findings(results: Mapping[str, Any]) -> pd.DataFrame:
    """Each stage's own summary sentences, and the stability of the variable selection.

    ``texts.summary`` when the stage wrote one, then its preferred texts
    (planning: development and checks; agreement: items; external
    validation: performance, net benefit (``decision``) and the comparison
    with today's rule; updating: choice), otherwise its first text other than
    the caution.  Internal validation also gets a sentence on how often the
    bootstrap replicates chose each term again
    (:func:`riskvet.reporting.sentences.summary.selection_stability_sentence`).

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
        keys = list(dict.fromkeys(("summary", *_SUMMARY_TEXT.get(stage, ()))))
        preferred = [texts[k] for k in keys if isinstance(texts.get(k), str)]
        chosen = preferred[: _KEEP.get(stage, 2)] or [v for k, v in texts.items() if isinstance(v, str) and k != "caution"][:1]
        if stage == "internal_validation":
            stability = selection_stability_sentence(_stability(content))
            chosen += [stability] if stability else []
        rows.extend({"stage": stage, "finding": text} for text in chosen)
    return pd.DataFrame(rows, columns=["stage", "finding"])


def _stability(content: Mapping[str, Any]) -> Mapping[str, Any]:
    boot = content.get("bootstrap")
    stability = boot.get("stability") if isinstance(boot, Mapping) else None
    return stability if isinstance(stability, Mapping) else {}


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
        Where each TRIPOD 2015 item is answered in this record.
    tripod_ai : TripodTable
        The same for the TRIPOD+AI 2024 checklist.
    texts : dict
        Sentences for the notebook.
    guide_measures : tuple of str
        Keys of the measures among the key results, for :attr:`guide`.
    """

    study: Mapping[str, Any]
    model: Mapping[str, Any] | None
    stages: pd.DataFrame = field(repr=False)
    key_results: pd.DataFrame = field(repr=False)
    findings: pd.DataFrame = field(repr=False)
    tripod: TripodTable = field(repr=False)
    tripod_ai: TripodTable = field(repr=False)
    texts: Mapping[str, str] = field(default_factory=dict)
    guide_measures: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({
            "study": dict(self.study),
            "model": None if self.model is None else dict(self.model),
            "stages": self.stages,
            "key_results": self.key_results,
            "findings": self.findings,
            "tripod": self.tripod.to_dict(),
            "tripod_ai_2024": self.tripod_ai.to_dict(),
            "texts": dict(self.texts),
        })

    def to_frame(self) -> pd.DataFrame:
        """The key results for reading: stage in words, plain numbers (never scientific notation), the interval as one column.

        The place of each number in its stage's results file stays in
        :attr:`key_results` (and ``results/summary.json``).
        """
        frame = self.key_results
        is_p = [_is_p_value(m) for m in frame["measure"]]
        interval = [
            f"{_plain(lo)} to {_plain(hi)}" if _finite(lo) and _finite(hi) else "" for lo, hi in zip(frame["lower"], frame["upper"])
        ]
        return pd.DataFrame({
            "stage": [_stage_words(s) for s in frame["stage"]], "measure": frame["measure"],
            "value": [_plain(v, p_value=p) for v, p in zip(frame["value"], is_p)],
            "interval (its kind is named on the stage's page)": interval,
        })

    def stages_frame(self) -> pd.DataFrame:
        """:attr:`stages` for reading: stage in words, a dash where there is no results file."""
        return pd.DataFrame({"stage": [_stage_words(s) for s in self.stages["stage"]], "status": self.stages["status"],
                             "results file": self.stages["results"].fillna("—")})

    def findings_frame(self) -> pd.DataFrame:
        """:attr:`findings` for reading: stage in words."""
        return pd.DataFrame({"stage": [_stage_words(s) for s in self.findings["stage"]], "finding": self.findings["finding"]})

    @property
    def guide(self) -> pd.DataFrame:
        """One line per measure of the key results on what good looks like (:func:`measure_guide`)."""
        return measure_guide(self.guide_measures, n_levels=len(self.study["outcome_levels"]))

    def tripod_frame(self) -> pd.DataFrame:
        """The TRIPOD 2015 table for reading (missing cells are shown as a dash by the publishing layer)."""
        return self.tripod.to_frame()

    def tripod_ai_frame(self) -> pd.DataFrame:
        """The TRIPOD+AI 2024 table for reading."""
        return self.tripod_ai.to_frame()


def _stage_words(stage: str) -> str:
    words = STAGE_TITLES.get(stage, str(stage).replace("_", " "))
    return words[:1].upper() + words[1:]


def _finite(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _is_p_value(measure: Any) -> bool:
    text = str(measure)
    return text.endswith(", p") or text.endswith(" p-value")


def _plain(v: Any, *, p_value: bool = False) -> str:
    """A number as a reviewer reads it: p-values as "<0.001" or 3 decimals, whole numbers as they are, else 3 decimals (1 from 100 on)."""
    if v is None:
        return "\u2014"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if not _finite(v):
        return str(v)
    if p_value:
        return "<0.001" if v < 0.001 else f"{v:.3f}"
    if isinstance(v, int) or float(v).is_integer() and abs(v) >= 1:
        return f"{v:,.0f}"
    return f"{v:,.1f}" if abs(v) >= 100 else f"{v:.3f}"


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
        tripod_ai=tripod_table(ctx.record_dir, results=results, enabled=study.enabled_stages, checklist="TRIPOD+AI 2024"),
        texts=summary_texts(about, stages, model),
        guide_measures=headline_measure_keys(results),
    )
    ctx.write_results(out.to_dict())
    return out
