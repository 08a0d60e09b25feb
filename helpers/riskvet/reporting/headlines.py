"""The headline numbers of a record: per stage, and for comparing two records.

:func:`headline_results` picks the scalar leaves of any stage's results
whose key names a measure, a count or a choice; :func:`key_results` reads the
key numbers of each known stage with their intervals, in words, and falls
back on :func:`headline_results` for results it does not recognise.  The
summary stage shows them, and :func:`riskvet.chain.record.compare_records`
sets two records side by side with them.  Nothing here computes a statistic:
it reads results files.
"""

from __future__ import annotations

import math
import re
from typing import Any, Callable, Iterator, Mapping

import pandas as pd

from ..errors import RiskvetError, problem
from ..validation.external import measure_label
from .labels import cut_label

__all__ = ["flatten", "headline_results", "key_results", "headline_measure_keys"]


# -- flattening and headline results ---------------------------------------------------------


def flatten(value: Any, prefix: str = "") -> Iterator[tuple[str, Any]]:
    """Leaves of a JSON value as ``(key path, value)``: ``a.b[2].c``.

    Empty dicts and lists are leaves of their own (shown as ``{}`` / ``[]``).
    """
    if isinstance(value, dict):
        if not value:
            yield prefix, {}
        for key in sorted(value, key=str):
            yield from flatten(value[key], f"{prefix}.{key}" if prefix else str(key))
    elif isinstance(value, list):
        if not value:
            yield prefix, []
        for i, item in enumerate(value):
            yield from flatten(item, f"{prefix}[{i}]")
    else:
        yield prefix, value


# Words that mark a headline number in any stage's results (last key of the path).
_HEADLINE_WORDS = (
    "auc", "c_statistic", "concordance", "c_index", "somers_d", "slope", "calibration_in_the_large", "citl",
    "intercept", "oe", "o_e", "observed_expected", "brier", "scaled_brier", "r2", "nagelkerke", "cox_snell",
    "optimism", "corrected", "apparent", "shrinkage", "ici", "e50", "e90", "emax", "net_benefit", "chosen", "selected",
    "update", "method", "icc", "kappa", "n_required", "n", "n_events", "n_analysed", "events", "p_value", "statistic",
)
_SKIPPED_WORDS = ("replicate", "replicates", "distribution", "bootstrap_values", "curve", "points", "roc", "grid", "rows")


def _last_key(path: str) -> str:
    last = path.rsplit(".", 1)[-1]
    return last.split("[", 1)[0].lower()


def _headline_path(path: str, value: Any, *, max_index: int) -> bool:
    if isinstance(value, (dict, list)):
        return False
    if any(w in path.lower().replace("[", ".").split(".") for w in _SKIPPED_WORDS):
        return False
    for part in path.split("[")[1:]:
        index = part.split("]", 1)[0]
        if index.isdigit() and int(index) >= max_index:
            return False
    last = _last_key(path)
    words = last.split("_")
    return any(last == w or last.startswith(w + "_") or last.endswith("_" + w) or w in words for w in _HEADLINE_WORDS)


def headline_results(results: Mapping[str, Any], *, max_index: int = 8, per_stage: int = 40) -> pd.DataFrame:
    """The headline numbers of each stage's results, as a tidy table.

    Parameters
    ----------
    results : mapping
        Stage name -> that stage's results (the content of ``results/<stage>.json``).
    max_index : int, default 8
        Leaves inside a list are kept only for the first ``max_index`` items
        (per-cut or per-cohort entries), which keeps resampled distributions out.
    per_stage : int, default 40
        At most this many rows per stage, in key-path order.

    Returns
    -------
    DataFrame
        Columns ``stage``, ``key`` (key path inside the stage's results) and
        ``value``: scalar leaves whose last key names a performance measure,
        a count or a choice (AUC, calibration slope, Brier score, optimism,
        chosen update, ...).
    """
    if not isinstance(results, Mapping):
        raise RiskvetError(problem("headline_results(results)", allowed="a mapping of stage -> results", received=type(results).__name__))
    rows = []
    for stage, content in results.items():
        if content is None:
            continue
        kept = [(k, v) for k, v in flatten(content) if _headline_path(k, v, max_index=max_index)]
        rows.extend({"stage": stage, "key": k, "value": v} for k, v in kept[:per_stage])
    return pd.DataFrame(rows, columns=["stage", "key", "value"])


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
# (:func:`headline_results`) is used instead.

Row = tuple[str, Any, Any, Any, str]


def _cut_name(cut: Any, levels: tuple[str, ...]) -> str:
    """The event of a cut as every page names it (:func:`riskvet.reporting.labels.cut_label`); "all levels" without a cut."""
    if len(levels) >= 2 and isinstance(cut, int) and not isinstance(cut, bool) and 0 <= cut < len(levels) - 1:
        return cut_label(levels, cut, binary=len(levels) == 2)
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
                f"{check['n_available']:,} of {check['n_required']:,}", None, None, f"checks[{i}]",
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
    if len(levels) == 2:
        return measure_label(base, 2)  # a binary outcome has one cut: its event
    words = _MEASURE_WORDS.get(base, base.replace("_", " "))
    return f"{words}, {_cut_name(int(match.group(2)), levels)}" if match else words


def _headline_measure(key: str) -> bool:
    return any(key == m or key.startswith(m + "_cut") for m in _HEADLINE_MEASURES)


def _derivation(results: Mapping[str, Any], levels: tuple[str, ...]) -> list[Row]:
    rows: list[Row] = []
    cohort = results.get("cohort") if isinstance(results.get("cohort"), Mapping) else {}
    imputed = _get(results, "missing_data", "method") == "multiple_imputation"
    analysed = "rows analysed (missing predictor values multiply imputed)" if imputed else "rows analysed (complete cases)"
    for key, words in (("n_screened", "rows in the derivation file"), ("n_analysed", analysed)):
        if _number(cohort.get(key)):
            rows.append((words, cohort[key], None, None, f"cohort.{key}"))
    m = _get(results, "missing_data", "settings", "m")
    if imputed and _number(m):
        rows.append(("imputations (completed data sets)", m, None, None, "missing_data.settings.m"))
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


def _internal_external(results: Mapping[str, Any], levels: tuple[str, ...]) -> list[Row]:
    """Pooled C, calibration-in-the-large, calibration slope and O/E over the clusters left out, with the prediction interval's ends."""
    rows: list[Row] = []
    iecv = results.get("internal_external") if isinstance(results.get("internal_external"), Mapping) else {}
    words = {"c": "C (AUC)", "calibration_in_the_large": "calibration-in-the-large", "calibration_slope": "calibration slope",
             "oe_ratio": "O/E"}
    kind = str(iecv.get("cluster_kind") or "cluster")
    for i, pooled in enumerate(_list(iecv.get("pooled"))):
        if not isinstance(pooled, Mapping) or pooled.get("measure") not in words or not _number(pooled.get("estimate")):
            continue
        where = f"internal_external.pooled[{i}]"
        name = f"{words[pooled['measure']]}, {_cut_name(pooled.get('cut'), levels)}, pooled over {kind}s left out"
        rows.append((name, pooled["estimate"], pooled.get("lower"), pooled.get("upper"), f"{where}.estimate"))
        if _number(pooled.get("prediction_lower")):
            rows.append((f"{name}: prediction interval for a new {kind}", None, pooled["prediction_lower"],
                         pooled.get("prediction_upper"), f"{where}.prediction_lower"))
    return rows


def _outcome(row: Mapping[str, Any], levels: tuple[str, ...]) -> str:
    """The outcome of a results row: its cut named as on every page, else the row's own words."""
    cut = row.get("cut")
    if isinstance(cut, int) and not isinstance(cut, bool):
        return _cut_name(cut, levels)
    return str(row.get("outcome") or "all levels")


def _external_validation(results: Mapping[str, Any], levels: tuple[str, ...]) -> list[Row]:
    rows: list[Row] = []
    for label, cohort in _mapping(results.get("cohorts")).items():
        if not isinstance(cohort, Mapping):
            continue
        if _number(cohort.get("n")):
            rows.append((f"{label}: patients analysed", cohort["n"], None, None, f"cohorts.{label}.n"))
        for i, row in enumerate(_list(cohort.get("performance"))):
            if isinstance(row, Mapping) and _headline_measure(str(row.get("measure"))) and _number(row.get("estimate")):
                rows.append((f"{label}: {row.get('label')}, {_outcome(row, levels)}", row["estimate"], row.get("lower"), row.get("upper"),
                             f"cohorts.{label}.performance[{i}].estimate"))
    for label, mix in _mapping(results.get("case_mix")).items():
        if isinstance(mix, Mapping) and _number(mix.get("membership_c")):
            rows.append((f"{label}: C of the cohort-membership model", mix["membership_c"], mix.get("membership_c_lower"),
                         mix.get("membership_c_upper"), f"case_mix.{label}.membership_c"))
    for label, rule in _mapping(results.get("rule")).items():
        for i, row in enumerate(_list(_mapping(rule).get("concordance_table"))):
            if isinstance(row, Mapping) and _number(row.get("difference")):
                rows.append((f"{label}: C of the model minus C of the rule, {_outcome(row, levels)}", row["difference"], row.get("lower"),
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
    "internal_external": _internal_external,
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
        :func:`headline_results`.

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


def headline_measure_keys(results: Mapping[str, Any]) -> tuple[str, ...]:
    """Keys of the performance measures :func:`key_results` shows, without cut suffixes, in order first met.

    For the guide to what good looks like on the summary page
    (:func:`riskvet.reporting.sentences.common.measure_guide`).
    """
    found: list[str] = []

    def add(key: Any) -> None:
        key = re.sub(r"_cut\d+$", "", str(key))
        if _headline_measure(key) and key not in found:
            found.append(key)

    for key in _mapping(_get(results.get("derivation"), "apparent", "summary")):
        add(key)
    for estimate in _list(_get(results.get("internal_validation"), "bootstrap", "estimates")):
        add(_mapping(estimate).get("measure"))
    for cohort in _mapping(_get(results.get("external_validation"), "cohorts")).values():
        for row in _list(_mapping(cohort).get("performance")):
            add(_mapping(row).get("measure"))
    return tuple(found)
