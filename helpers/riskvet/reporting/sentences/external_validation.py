"""Sentences of the external-validation stage: data flow, case-mix, calibration, decisions, subgroups, the rule."""

from __future__ import annotations

from typing import Any, Mapping

from ...intake.outcome import cut_name
from .common import CAUTION

__all__ = ["external_validation_texts"]



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
        "membership": " ".join(cm.interpretation for cm in out["case_mix"].values()),
        "performance": " ".join(c.summary() for c in cohorts.values()),
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
    texts["rule"] = " ".join(r.summary() for r in out["rule"].values()) if out["rule"] else "The study records no existing rule."
    return texts
