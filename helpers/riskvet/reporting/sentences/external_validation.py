"""Sentences of the external-validation stage: data flow, case-mix, calibration, decisions, subgroups, the rule."""

from __future__ import annotations

import math
from typing import Any, Mapping

import pandas as pd

from ...intake.outcome import cut_name
from .common import CAUTION

__all__ = ["external_validation_texts", "case_mix_sentence", "cohort_summary", "rule_summary"]



def external_validation_texts(out: Mapping[str, Any], *, subgroups_named: bool) -> dict[str, str]:
    """One sentence per table and figure of the external-validation stage.

    ``out`` is what :func:`riskvet.chain.stages.external_validation.validate_external`
    returns: per cohort its data counts, case-mix, validation and rule
    comparison; ``subgroups_named`` says whether the study names subgroups.
    """
    cohorts = out["cohorts"]
    flow = []
    for label, d in out["data"].items():
        dropped = d["n_screened"] - d["n_analysed"]
        flow.append(
            f"{label}: {d['n_screened']} rows screened, {dropped} excluded by complete-case analysis, {d['n_analysed']} analysed "
            f"({', '.join(f'{k} {v}' for k, v in d['outcome_counts'].items())})."
        )
    n_cohorts = len(out["data"])
    texts = {
        "summary": (
            f"The frozen model was applied unchanged to {n_cohorts} validation cohort{'s' if n_cohorts != 1 else ''}: "
            + "; ".join(f"{label} ({d['n_analysed']} of {d['n_screened']} rows analysed)" for label, d in out["data"].items())
            + ". Nothing was refitted; updating is the next stage."
        ),
        "caution": CAUTION,
        "flow": " ".join(flow),
        "membership": " ".join(case_mix_sentence(cm) for cm in out["case_mix"].values()),
        "performance": " ".join(cohort_summary(c) for c in cohorts.values()),
    }
    largest, spread = [], []
    for label, cm in out["case_mix"].items():
        t = cm.to_frame()
        t = t[(t["variable"] != "linear predictor") & t["standardised_difference"].notna()]
        top = t.reindex(t["standardised_difference"].abs().sort_values(ascending=False).index).head(3)
        items = ", ".join(f"{' '.join(p for p in (r.variable, r.level) if p)} ({r.standardised_difference:+.2f})" for r in top.itertuples())
        n_big = int((t["standardised_difference"].abs() >= 0.1).sum())
        largest.append(
            f"In {label}, {n_big} of {len(t)} rows differ from the derivation cohort by a standardised difference of at "
            f"least 0.1 (a common reading of meaningful imbalance); the largest are {items}."
        )
        spread.append(
            f"In {label} the linear predictor has mean {cm.lp_mean_validation:.2f} and SD {cm.lp_sd_validation:.2f}, "
            f"against {cm.lp_mean_derivation:.2f} and {cm.lp_sd_derivation:.2f} at derivation (SD ratio {cm.lp_sd_ratio:.2f})."
        )
    texts["case_mix"] = " ".join(largest)
    texts["linear_predictor"] = " ".join(spread)
    cal = []
    for c in cohorts.values():
        for r in c.calibration.cuts:
            if r.calibration_in_the_large_upper < 0:
                where = "mostly below the diagonal (fewer events observed than predicted)"
            elif r.calibration_in_the_large_lower > 0:
                where = "mostly above the diagonal (more events observed than predicted)"
            else:
                where = "close to the diagonal on average"
            cal.append(
                f"In {c.label}, for {cut_name(c.levels, r.cut)} the smoothed curve lies {where}; observed/expected is "
                f"{r.oe_ratio:.2f} and the mean distance between predicted and smoothed observed risk (ICI) is {r.ici:.3f}."
            )
    texts["calibration"] = " ".join(cal)
    if any(c.threshold_tables for c in cohorts.values()):
        parts = []
        for c in cohorts.values():
            for cut, tab in c.threshold_tables.items():
                items = ", ".join(f"{t:g}: sensitivity {se:.2f}, specificity {sp:.2f}" for t, se, sp in zip(tab.threshold, tab.sensitivity, tab.specificity))
                parts.append(f"In {c.label}, for {cut_name(c.levels, cut)} at thresholds {items}.")
        texts["thresholds"] = " ".join(parts)
    else:
        texts["thresholds"] = "The study lists no risk thresholds, so no classification table is shown."
    dec = []
    for c in cohorts.values():
        for curve in c.decision_curves:
            above = (curve.net_benefit > curve.treat_all) & (curve.net_benefit > 0)
            span = f"from {curve.threshold[above].min():.2f} to {curve.threshold[above].max():.2f}" if above.any() else "at no threshold"
            dec.append(f"In {c.label}, for {cut_name(c.levels, curve.cut)} the model beats both treating everybody and treating nobody {span}.")
    texts["decision"] = " ".join(dec)
    if subgroups_named:
        texts["subgroups"] = " ".join(
            f"In {c.label}: {len(c.subgroup_sizes)} subgroup(s), {int(c.subgroup_sizes['small'].sum())} below "
            f"{c.min_subgroup_size} patients and flagged (read their intervals, not their point estimates)."
            for c in cohorts.values()
        )
    else:
        texts["subgroups"] = "The study names no subgroups."
    texts["rule"] = " ".join(rule_summary(r) for r in out["rule"].values()) if out["rule"] else "The study records no existing rule."
    return texts


def cohort_summary(validation: Any) -> str:
    """Sentences reading one cohort's headline numbers: C, calibration-in-the-large and slope per cut, flagged subgroups."""
    perf = {(r["measure"], None if pd.isna(r["cut"]) else int(r["cut"])): r for r in validation.performance.to_dict(orient="records")}
    ci = f"{round(100 * validation.confidence)}%"
    parts = []
    binary = len(validation.levels) == 2
    avg = perf.get(("auc", 0) if binary else ("average_cut_auc", None))
    if avg is not None:
        what = "C statistic" if binary else "average dichotomised C"
        parts.append(
            f"In {validation.label} (n = {validation.n}) the {what} is {avg['estimate']:.3f} "
            f"({ci} interval {avg['lower']:.3f} to {avg['upper']:.3f})."
        )
    for j in range(len(validation.levels) - 1):
        key = ("calibration_intercept", j)
        if key not in perf:
            continue
        row = perf[key]
        est, lo, hi = row["estimate"], row["lower"], row["upper"]
        if lo > 0:
            verdict = "the model under-predicts this outcome on average"
        elif hi < 0:
            verdict = "the model over-predicts this outcome on average"
        else:
            verdict = "no systematic over- or under-prediction is shown"
        slope = perf[("calibration_slope", j)]
        if slope["upper"] < 1:
            spread = "predictions are too extreme"
        elif slope["lower"] > 1:
            spread = "predictions are too moderate"
        else:
            spread = "the spread of predictions is compatible with a slope of 1"
        parts.append(
            f"For {cut_name(validation.levels, j)}, calibration-in-the-large is {est:+.2f} ({lo:+.2f} to {hi:+.2f}): "
            f"{verdict}; the calibration slope is {slope['estimate']:.2f} ({slope['lower']:.2f} to "
            f"{slope['upper']:.2f}), so {spread}."
        )
    small = validation.subgroup_sizes[validation.subgroup_sizes["small"]] if len(validation.subgroup_sizes) else validation.subgroup_sizes
    if len(small):
        names = ", ".join(f"{r.column} {r.group} (n = {r.n})" for r in small.itertuples())
        parts.append(f"Subgroups below {validation.min_subgroup_size} patients are flagged and should not be over-read: {names}.")
    return " ".join(parts)


def rule_summary(comparison: Any) -> str:
    """Sentences reading the comparison with the rule: C of each and their difference, and net benefit at the study's thresholds."""
    ci = f"{round(100 * comparison.confidence)}%"
    parts = [f"In {comparison.label}, the rule '{comparison.rule_column}' was recorded for {comparison.n} patients ({comparison.n_missing_rule} without it were left out)."]
    for r in comparison.concordance_table.itertuples():
        if r.pvalue < 1 - comparison.confidence:
            verdict = "the model ranks patients better" if r.difference > 0 else "the rule ranks patients better"
        else:
            verdict = "the difference is not statistically clear"
        parts.append(
            f"For {r.outcome}, C is {r.c_model:.3f} for the model and {r.c_rule:.3f} for the rule "
            f"(difference {r.difference:+.3f}, {ci} interval {r.lower:+.3f} to {r.upper:+.3f}, DeLong p = {r.pvalue:.3g}): {verdict}."
        )
    if len(comparison.net_benefit_table):
        better = comparison.net_benefit_table[comparison.net_benefit_table["boot_lower"] > 0]
        worse = comparison.net_benefit_table[comparison.net_benefit_table["boot_upper"] < 0]
        total = len(comparison.net_benefit_table)

        def how_many(k: int) -> str:
            if k == 0:
                return "none of them"
            if k == total:
                return "all of them" if total > 1 else "it"
            return f"{k} of them"

        noun = "threshold" if total == 1 else f"{total} thresholds"
        parts.append(
            f"At the study's {noun}, the model's net benefit is above the rule's, with the bootstrap interval of the "
            f"difference above 0, at {how_many(len(better))}, and below it, with the interval below 0, at {how_many(len(worse))}."
        )
    elif comparison.positive_from is None:
        parts.append("Net benefit of the rule needs positive_from (the lowest category that counts as a positive decision).")
    return " ".join(parts)


def case_mix_sentence(case_mix: Any) -> str:
    """Sentences reading a case-mix comparison: how well membership is told apart, the linear predictor's mean and spread.

    ``case_mix`` is a :class:`~riskvet.validation.casemix.CaseMix`; the
    standardised difference of the linear predictor is read from its table.
    """
    lp_row = case_mix.table[case_mix.table["variable"] == "linear predictor"]
    result = {
        "derivation_label": case_mix.derivation_label,
        "validation_label": case_mix.validation_label,
        "membership_c": case_mix.membership_c,
        "membership_c_null": case_mix.membership_c_null,
        "lp_mean_derivation": case_mix.lp_mean_derivation,
        "lp_sd_derivation": case_mix.lp_sd_derivation,
        "lp_mean_validation": case_mix.lp_mean_validation,
        "lp_sd_validation": case_mix.lp_sd_validation,
        "lp_standardised_difference": float(lp_row["standardised_difference"].iloc[0]) if len(lp_row) else float("nan"),
    }
    der, val = result["derivation_label"], result["validation_label"]
    c, c0 = result["membership_c"], result["membership_c_null"]
    parts = []
    if math.isfinite(c):
        excess = c - c0 if math.isfinite(c0) else c - 0.5
        chance = f" ({c0:.2f} is what chance alone gives with these sizes and predictors)" if math.isfinite(c0) else ""
        if excess < 0.05:
            reading = (
                "The two cohorts are hard to tell apart, so this validation mainly tests reproducibility: "
                "performance close to that at derivation is expected."
            )
        elif c < 0.75:
            reading = (
                "The cohorts differ moderately in case-mix, so this validation tests the model partly beyond "
                "its derivation population."
            )
        else:
            reading = (
                "The cohorts differ clearly in case-mix, so this validation tests transportability: a change in "
                "performance may reflect who the patients are as much as how good the model is."
            )
        parts.append(f"A model of cohort membership tells {val} from {der} with C = {c:.2f}{chance}. {reading}")
    m0, m1 = result["lp_mean_derivation"], result["lp_mean_validation"]
    s0, s1 = result["lp_sd_derivation"], result["lp_sd_validation"]
    smd = result["lp_standardised_difference"]
    if math.isfinite(smd) and abs(smd) >= 0.1:
        direction = "higher" if m1 > m0 else "lower"
        severity = f"{direction} predicted risk on average, by the model's own reckoning"
    else:
        severity = "about the same average predicted risk"
    parts.append(f"The mean linear predictor is {m1:.2f} in {val} against {m0:.2f} in {der} ({severity}).")
    ratio = s1 / s0 if s0 > 0 else float("nan")
    if math.isfinite(ratio):
        if ratio > 1.1:
            spread = "wider, so somewhat better discrimination is expected from case-mix alone"
        elif ratio < 0.9:
            spread = "narrower, so somewhat poorer discrimination is expected from case-mix alone"
        else:
            spread = "about the same, so case-mix alone does not predict a change in discrimination"
        parts.append(f"Its spread (SD {s1:.2f} against {s0:.2f}) is {spread}.")
    return " ".join(parts)
