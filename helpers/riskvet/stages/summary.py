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
import re
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping

import pandas as pd

from .._jsonable import to_jsonable
from ..record import headline_results
from ..study import STAGES
from ..tripod import TripodTable, tripod_table

__all__ = ["CAUTION", "SummaryOutput", "stage_status", "key_results", "findings", "run"]

CAUTION = (
    "Statistical evaluation is not clearance for clinical use: local validation, governance and "
    "licensed clinical judgement decide whether a model is used."
)

_STAGE_TITLES = {
    "planning": "sample-size planning",
    "agreement": "rater agreement",
    "derivation": "derivation",
    "internal_validation": "internal validation",
    "external_validation": "external validation",
    "updating": "updating",
}


def _get(value: Any, *path: Any) -> Any:
    for part in path:
        if isinstance(part, int):
            if not isinstance(value, list) or not -len(value) <= part < len(value):
                return None
            value = value[part]
        else:
            if not isinstance(value, Mapping) or part not in value:
                return None
            value = value[part]
    return value


def _mapping(value: Any) -> Mapping[str, Any]:
    return value if isinstance(value, Mapping) else {}


def _list(value: Any) -> list[Any]:
    return value if isinstance(value, list) else []


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


# -- key numbers per stage ------------------------------------------------------------------------
# Each reader takes a stage's results and the outcome levels and returns rows
# (measure, value, lower, upper, key); it returns nothing when the results do
# not have the expected shape, and the generic headline selection
# (riskvet.record.headline_results) is used instead.

Row = tuple[str, Any, Any, Any, str]


def _cut_name(cut: Any, levels: tuple[str, ...]) -> str:
    from ..external import cut_name

    if len(levels) >= 2:
        return cut_name(levels, cut if isinstance(cut, int) and 0 <= cut < len(levels) - 1 else None)
    return "all levels"


def _planning(results: Mapping[str, Any], levels: tuple[str, ...]) -> list[Row]:
    rows: list[Row] = []
    if _number(results.get("n_development")):
        rows.append(("people needed to develop the model", results["n_development"], None, None, "n_development"))
    for i, entry in enumerate(_list(results.get("validation"))):
        n = _get(entry, "size", "n")
        if _number(n):
            rows.append((f"people needed to validate, {entry.get('label', f'cut {i}')}", n, None, None, f"validation[{i}].size.n"))
    for i, check in enumerate(_list(results.get("checks"))):
        if isinstance(check, Mapping) and _number(check.get("n_available")) and _number(check.get("n_required")):
            rows.append((
                f"{check.get('cohort')} ({check.get('purpose')}, {check.get('label')}): available of required",
                f"{check['n_available']} of {check['n_required']}", None, None, f"checks[{i}]",
            ))
    return rows


def _agreement(results: Mapping[str, Any], levels: tuple[str, ...]) -> list[Row]:
    rows: list[Row] = []
    for i, item in enumerate(_list(results.get("items"))):
        if not isinstance(item, Mapping):
            continue
        name = item.get("name", f"item {i}")
        for measure, label in (("kappa", "Cohen's kappa"), ("weighted_kappa", "weighted kappa")):
            value = _get(item, measure, "value")
            if _number(value):
                rows.append((f"{name}: {label}", value, _get(item, measure, "lower"), _get(item, measure, "upper"), f"items[{i}].{measure}.value"))
        for j, icc in enumerate(_list(_get(item, "icc", "results"))):
            # two-way random effects, absolute agreement, single rating: the form that
            # asks whether one rater's reading can stand in for another's
            if isinstance(icc, Mapping) and icc.get("form") == "2,1" and _number(icc.get("value")):
                rows.append((f"{name}: ICC (absolute agreement, single rating)", icc["value"], icc.get("lower"), icc.get("upper"),
                             f"items[{i}].icc.results[{j}].value"))
        ba = item.get("bland_altman")
        if isinstance(ba, Mapping) and _number(ba.get("bias")):
            rows.append((f"{name}: mean difference (rater a minus rater b)", ba["bias"], *(list(ba.get("bias_interval") or [None, None])[:2]),
                         f"items[{i}].bland_altman.bias"))
            rows.append((f"{name}: limits of agreement", f"{ba.get('lower'):.4g} to {ba.get('upper'):.4g}" if _number(ba.get("lower")) and _number(ba.get("upper")) else None,
                         None, None, f"items[{i}].bland_altman.lower"))
    return rows


# Measures shown from the derivation's apparent summary and the internal validation.
_HEADLINE_MEASURES = ("auc", "average_cut_auc", "ordinal_c", "calibration_slope", "calibration_intercept", "brier", "scaled_brier", "nagelkerke_r2")


_MEASURE_WORDS = {
    "auc": "AUC", "average_cut_auc": "average dichotomised C", "ordinal_c": "ordinal c-index",
    "calibration_slope": "calibration slope", "calibration_intercept": "calibration-in-the-large",
    "brier": "Brier score", "scaled_brier": "scaled Brier score", "nagelkerke_r2": "Nagelkerke R2",
}


def _measure_label(key: str, levels: tuple[str, ...]) -> str:
    """``auc_cut1`` -> ``AUC, Y >= <level 2>``."""
    match = re.fullmatch(r"(.+)_cut(\d+)", key)
    base = match.group(1) if match else key
    from ..external import measure_label

    if len(levels) == 2:
        return measure_label(base, 2)  # a binary outcome has one cut: its event
    words = _MEASURE_WORDS.get(base, base.replace("_", " "))
    return f"{words}, {_cut_name(int(match.group(2)), levels)}" if match else words


def _headline_measure(key: str) -> bool:
    return any(key == m or key.startswith(m + "_cut") for m in _HEADLINE_MEASURES)


def _derivation(results: Mapping[str, Any], levels: tuple[str, ...]) -> list[Row]:
    rows: list[Row] = []
    cohort = results.get("cohort") if isinstance(results.get("cohort"), Mapping) else {}
    for key, words in (("n_screened", "rows in the derivation file"), ("n_analysed", "rows analysed (complete cases)")):
        if _number(cohort.get(key)):
            rows.append((words, cohort[key], None, None, f"cohort.{key}"))
    counts = _mapping(cohort.get("outcome_counts"))
    for level in sorted(counts, key=lambda lv: levels.index(lv) if lv in levels else len(levels)):
        if _number(counts[level]):
            rows.append((f"outcome {level}", counts[level], None, None, f"cohort.outcome_counts.{level}"))
    selection = results.get("selection") if isinstance(results.get("selection"), Mapping) else {}
    if isinstance(selection.get("method"), str):
        rows.append(("selection method", selection["method"], None, None, "selection.method"))
    if isinstance(results.get("terms"), list):
        rows.append(("terms in the model", ", ".join(map(str, results["terms"])), None, None, "terms"))
    for key, value in _mapping(_get(results, "apparent", "summary")).items():
        if _headline_measure(key) and _number(value):
            rows.append((f"apparent {_measure_label(key, levels)}", value, None, None, f"apparent.summary.{key}"))
    for test, words in (("brant", "Brant test of proportional odds, p"), ("lr", "likelihood-ratio test of proportional odds, p")):
        p = _get(results, "proportional_odds", test, "p")
        if _number(p):
            rows.append((words, p, None, None, f"proportional_odds.{test}.p"))
    return rows


def _internal_validation(results: Mapping[str, Any], levels: tuple[str, ...]) -> list[Row]:
    rows: list[Row] = []
    boot = results.get("bootstrap") if isinstance(results.get("bootstrap"), Mapping) else {}
    for i, estimate in enumerate(_list(boot.get("estimates"))):
        if not isinstance(estimate, Mapping) or not _headline_measure(str(estimate.get("measure"))):
            continue
        label = estimate.get("label") or estimate.get("measure")
        for field_, words in (("apparent", "apparent"), ("corrected", "optimism-corrected")):
            if _number(estimate.get(field_)):
                rows.append((f"{label}: {words}", estimate[field_], None, None, f"bootstrap.estimates[{i}].{field_}"))
    factor = _get(boot, "shrinkage", "bootstrap")
    if _number(factor):
        rows.append(("bootstrap shrinkage factor", factor, _get(boot, "shrinkage", "bootstrap_lower"), _get(boot, "shrinkage", "bootstrap_upper"),
                     "bootstrap.shrinkage.bootstrap"))
    if _number(boot.get("n_succeeded")) and _number(boot.get("n_boot")):
        rows.append(("replicates that produced a model", f"{boot['n_succeeded']} of {boot['n_boot']}", None, None, "bootstrap.n_succeeded"))
    return rows


def _external_validation(results: Mapping[str, Any], levels: tuple[str, ...]) -> list[Row]:
    rows: list[Row] = []
    for label, cohort in _mapping(results.get("cohorts")).items():
        if not isinstance(cohort, Mapping):
            continue
        if _number(cohort.get("n")):
            rows.append((f"{label}: patients analysed", cohort["n"], None, None, f"cohorts.{label}.n"))
        for i, row in enumerate(_list(cohort.get("performance"))):
            if isinstance(row, Mapping) and _headline_measure(str(row.get("measure"))) and _number(row.get("estimate")):
                rows.append((f"{label}: {row.get('label')}, {row.get('outcome')}", row["estimate"], row.get("lower"), row.get("upper"),
                             f"cohorts.{label}.performance[{i}].estimate"))
    for label, mix in _mapping(results.get("case_mix")).items():
        if isinstance(mix, Mapping) and _number(mix.get("membership_c")):
            rows.append((f"{label}: C of the cohort-membership model", mix["membership_c"], mix.get("membership_c_lower"),
                         mix.get("membership_c_upper"), f"case_mix.{label}.membership_c"))
    for label, rule in _mapping(results.get("rule")).items():
        for i, row in enumerate(_list(_mapping(rule).get("concordance_table"))):
            if isinstance(row, Mapping) and _number(row.get("difference")):
                rows.append((f"{label}: C of the model minus C of the rule, {row.get('outcome')}", row["difference"], row.get("lower"),
                             row.get("upper"), f"rule.{label}.concordance_table[{i}].difference"))
    return rows


def _updating(results: Mapping[str, Any], levels: tuple[str, ...]) -> list[Row]:
    rows: list[Row] = []
    result = results.get("result") if isinstance(results.get("result"), Mapping) else {}
    chosen = _get(result, "closed_test", "chosen")
    if isinstance(chosen, str):
        label = _get(result, "fits", chosen, "label") or chosen
        rows.append((f"update chosen on {result.get('cohort')}", label, None, None, "result.closed_test.chosen"))
    for when in ("before", "after"):
        for i, row in enumerate(_list(result.get(f"calibration_{when}"))):
            if isinstance(row, Mapping) and row.get("measure") in ("calibration_in_the_large", "slope", "oe_ratio") and _number(row.get("estimate")):
                words = {"calibration_in_the_large": "calibration-in-the-large", "slope": "calibration slope", "oe_ratio": "O/E"}[row["measure"]]
                rows.append((f"{words}, {_cut_name(row.get('cut'), levels)}, {when} the update", row["estimate"], row.get("lower"),
                             row.get("upper"), f"result.calibration_{when}[{i}].estimate"))
    return rows


_READERS: dict[str, Callable[[Mapping[str, Any], tuple[str, ...]], list[Row]]] = {
    "planning": _planning,
    "agreement": _agreement,
    "derivation": _derivation,
    "internal_validation": _internal_validation,
    "external_validation": _external_validation,
    "updating": _updating,
}


def key_results(results: Mapping[str, Any], *, levels: tuple[str, ...] = (), generic_rows: int = 15) -> pd.DataFrame:
    """The key numbers of each stage's results.

    Parameters
    ----------
    results : mapping
        Stage -> results (content of ``results/<stage>.json``), in chain order.
    levels : tuple of str
        Outcome levels coded 0..K-1, to name the cuts (``Y >= level``).
    generic_rows : int, default 15
        For a stage without a dedicated reader (or whose results it does not
        recognise), at most this many rows from
        :func:`riskvet.record.headline_results`.

    Returns
    -------
    DataFrame
        Columns ``stage``, ``measure``, ``value``, ``lower`` and ``upper``
        (the stage's interval, when it gives one) and ``key`` (where the value
        is in ``results/<stage>.json``).
    """
    rows = []
    for stage, content in results.items():
        if not isinstance(content, Mapping):
            continue
        reader = _READERS.get(stage)
        found = reader(content, tuple(levels)) if reader is not None else []
        if not found:
            generic = headline_results({stage: content}, per_stage=generic_rows)
            found = [(k, v, None, None, k) for k, v in zip(generic["key"], generic["value"])]
        for measure, value, lower, upper, key in found:
            rows.append({
                "stage": stage, "measure": measure, "value": value,
                "lower": lower if _number(lower) else None, "upper": upper if _number(upper) else None, "key": key,
            })
    return pd.DataFrame(rows, columns=["stage", "measure", "value", "lower", "upper", "key"])


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

        interval = [
            f"{text(lo)} to {text(hi)}" if _number(lo) and _number(hi) else "" for lo, hi in zip(frame["lower"], frame["upper"])
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
    from ..modelfile import load_model

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


def _texts(study: Mapping[str, Any], stages: pd.DataFrame, model: Mapping[str, Any] | None) -> dict[str, str]:
    ran = stages.loc[stages["status"] == "ran", "stage"].map(_STAGE_TITLES).tolist()
    not_run = stages.loc[stages["status"] == "enabled, not run in this record", "stage"].map(_STAGE_TITLES).tolist()
    off = stages.loc[stages["status"] == "not enabled in the study file", "stage"].map(_STAGE_TITLES).tolist()
    parts = [f"This record holds the results of {_join(ran) if ran else 'no earlier stage'}."]
    if not_run:
        parts.append(f"Enabled in the study but not run in this record: {_join(not_run)} (a partial run; see the manifest).")
    if off:
        parts.append(f"Not enabled in the study file: {_join(off)}.")
    if model is None:
        model_text = "The record holds no frozen model."
    else:
        model_text = (
            f"The frozen model was {model['source']}; its content SHA-256 is {model['sha256'][:12]}… "
            f"({model['n_columns']} design columns, {model['link']} link, "
            f"{'proportional' if model['proportional'] else 'non-proportional'} cumulative model "
            f"over {len(model['outcome_levels'])} levels)."
        )
    levels = ", ".join(study["outcome_labels"].get(lv, lv) for lv in study["outcome_levels"])
    return {
        "caution": CAUTION,
        "study": f"Study {study['name']!r}: {study['outcome_type']} outcome {study['outcome_column']!r} with levels {levels}.",
        "stages": " ".join(parts),
        "model": model_text,
        "key_results": (
            "The numbers below are copied from each stage's results file (the key column says where), with the "
            "interval that stage reports, if any (its notebook says which kind); the stage notebooks interpret them."
        ),
        "tripod": (
            "For each TRIPOD item the analysis covers, where this record answers it: the executed notebook and "
            "section, and the results key. Items about the writing itself are left to the authors' report."
        ),
    }


def _join(words: list[str]) -> str:
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]


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
        texts=_texts(about, stages, model),
    )
    ctx.write_results(out.to_dict())
    return out
