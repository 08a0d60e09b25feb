"""Sentences of the external-validation stage: data flow, case-mix, calibration, decisions, subgroups, the rule."""

from __future__ import annotations

import math
from typing import Any, Mapping

import pandas as pd

from ..labels import cut_label
from .common import CAUTION, interval_words

__all__ = [
    "external_validation_texts", "case_mix_sentence", "cohort_summary", "rule_summary",
    "page_intervals", "interval_kind", "intervals_sentence", "outcome_words", "subgroup_sentence", "subgroup_shortfall",
]


def outcome_words(levels: Any, cut: Any) -> str:
    """The outcome a row is about, in the user's level labels: the cut's event, or "all levels"."""
    if cut is None or (not isinstance(cut, (int, float)) and pd.isna(cut)):
        return str(levels[-1]) if len(levels) == 2 else "all levels"
    return cut_label(levels, int(cut), binary=len(levels) == 2)


def interval_kind(validation: Any) -> str:
    """The interval kind the page uses for the measures the bootstrap covers: ``"bootstrap"`` when it ran, else ``"wald"``."""
    return "bootstrap" if validation.n_boot > 0 else "wald"


def page_intervals(validation: Any) -> pd.DataFrame:
    """One interval per measure and cut, of the one kind the page uses for that measure.

    Reads a :class:`~riskvet.validation.external.CohortValidation`.  The
    measures the bootstrap covers (C, calibration-in-the-large, calibration
    slope, ICI, Brier, R²) take their bootstrap percentile interval when the
    study asked for the bootstrap, otherwise calibration-in-the-large and
    slope take their model-based Wald interval; the observed/expected ratio
    always has its Wald interval on the log scale.  Columns ``measure``
    (performance key), ``cut`` (None for the whole outcome), ``estimate``,
    ``lower``, ``upper``, ``kind`` (a key of
    :data:`~riskvet.reporting.sentences.common.INTERVAL_KINDS`, or None
    without an interval).
    """
    boot = interval_kind(validation) == "bootstrap"
    rows: dict[tuple[str, Any], tuple] = {}
    for r in validation.performance.itertuples():
        cut = None if pd.isna(r.cut) else int(r.cut)
        ok = boot and math.isfinite(r.lower) and math.isfinite(r.upper)
        rows[(r.measure, cut)] = (r.estimate, r.lower if ok else math.nan, r.upper if ok else math.nan, "bootstrap" if ok else None)
    for c in validation.calibration.cuts:
        if not boot:
            rows[("calibration_intercept", c.cut)] = (c.calibration_in_the_large, c.calibration_in_the_large_lower,
                                                      c.calibration_in_the_large_upper, "wald")
            rows[("calibration_slope", c.cut)] = (c.slope, c.slope_lower, c.slope_upper, "wald")
        rows[("oe_ratio", c.cut)] = (c.oe_ratio, c.oe_lower, c.oe_upper, "wald_log")
    return pd.DataFrame([(m, cut, *v) for (m, cut), v in rows.items()],
                        columns=["measure", "cut", "estimate", "lower", "upper", "kind"])


def _interval(validation: Any, measure: str, cut: Any) -> tuple[float, float, float, str]:
    """(estimate, lower, upper, words of the kind) of one measure as the page states it."""
    t = page_intervals(validation)
    rows = t[(t["measure"] == measure) & (t["cut"].isna() if cut is None else t["cut"] == cut)]
    r = rows.iloc[0]
    kind = interval_words(r["kind"], validation.confidence) if isinstance(r["kind"], str) else ""
    return float(r["estimate"]), float(r["lower"]), float(r["upper"]), kind


def _bracket(kind: str, lo: float, hi: float, fmt: Any) -> str:
    """`` (95% bootstrap percentile interval a to b)``, or nothing without an interval."""
    return f" ({kind} {fmt(lo)} to {fmt(hi)})" if kind and math.isfinite(lo) and math.isfinite(hi) else ""


def intervals_sentence(validation: Any) -> str:
    """One line naming the kind of every interval on the page."""
    ci = interval_words(interval_kind(validation), validation.confidence)
    if interval_kind(validation) == "bootstrap":
        head = (f"Intervals on this page: {ci}s for C, calibration-in-the-large, calibration slope, ICI, Brier score and "
                f"R², from {validation.n_boot} resamples of the cohort's patients (the study asks for the bootstrap)")
    else:
        head = (f"Intervals on this page: {ci}s for calibration-in-the-large and calibration slope (the study asks for "
                "no bootstrap, so the other measures have none)")
    return (head + f"; {interval_words('wald_log', validation.confidence)} for the observed/expected ratio. Each "
            "measure has one kind of interval in every table, sentence and figure caption of the page.")



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
            f"{label}: {d['n_screened']} rows screened, {dropped} excluded "
            f"{'for a missing outcome (missing predictor values imputed)' if d.get('missing') == 'multiple_imputation' else 'by complete-case analysis'}, "
            f"{d['n_analysed']} analysed "
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
            _, lo, hi, _ = _interval(c, "calibration_intercept", r.cut)
            if hi < 0:
                where = "mostly below the diagonal (fewer events observed than predicted)"
            elif lo > 0:
                where = "mostly above the diagonal (more events observed than predicted)"
            else:
                where = "close to the diagonal on average"
            oe, oe_lo, oe_hi, oe_kind = _interval(c, "oe_ratio", r.cut)
            cal.append(
                f"In {c.label}, for {outcome_words(c.levels, r.cut)} the smoothed curve lies {where}; observed/expected is "
                f"{oe:.2f}{_bracket(oe_kind, oe_lo, oe_hi, '{:.2f}'.format)} and the mean distance between predicted and smoothed "
                f"observed risk (ICI) is {r.ici:.3f}."
            )
    texts["calibration"] = " ".join(cal)
    texts["intervals"] = " ".join(intervals_sentence(c) if len(cohorts) == 1 else f"{c.label}: {intervals_sentence(c)}" for c in cohorts.values())
    if any(c.threshold_tables for c in cohorts.values()):
        parts = []
        for c in cohorts.values():
            for cut, tab in c.threshold_tables.items():
                items = ", ".join(f"{t:g}: sensitivity {_shown(se)}, specificity {_shown(sp)}" for t, se, sp in zip(tab.threshold, tab.sensitivity, tab.specificity))
                parts.append(f"In {c.label}, for {outcome_words(c.levels, cut)} at thresholds {items}.")
        texts["thresholds"] = " ".join(parts)
    else:
        texts["thresholds"] = "The study lists no risk thresholds, so no classification table is shown."
    dec = []
    for c in cohorts.values():
        for curve in c.decision_curves:
            above = (curve.net_benefit > curve.treat_all) & (curve.net_benefit > 0)
            span = f"from {curve.threshold[above].min():.2f} to {curve.threshold[above].max():.2f}" if above.any() else "at no threshold"
            dec.append(f"In {c.label}, for {outcome_words(c.levels, curve.cut)} the model beats both treating everybody and treating nobody {span}.")
    texts["decision"] = " ".join(dec)
    if subgroups_named:
        texts["subgroups"] = " ".join(subgroup_sentence(c) for c in cohorts.values())
    else:
        texts["subgroups"] = "The study names no subgroups."
    texts["rule"] = (" ".join(rule_summary(r, outcome_levels=cohorts[label].levels) for label, r in out["rule"].items())
                     if out["rule"] else "The study records no existing rule.")
    return texts


def cohort_summary(validation: Any) -> str:
    """Sentences reading one cohort's headline numbers: C, calibration-in-the-large and slope per cut, flagged subgroups.

    Every interval is the one :func:`page_intervals` gives for its measure, named by its kind.
    """
    parts = []
    binary = len(validation.levels) == 2
    key = ("auc", 0) if binary else ("average_cut_auc", None)
    if ((validation.performance["measure"] == key[0])).any():
        est, lo, hi, kind = _interval(validation, *key)
        what = "C statistic" if binary else "average dichotomised C"
        parts.append(f"In {validation.label} (n = {validation.n}) the {what} is {est:.3f}{_bracket(kind, lo, hi, '{:.3f}'.format)}.")
    cuts = {None if pd.isna(c) else int(c) for c in validation.performance.loc[validation.performance["measure"] == "calibration_intercept", "cut"]}
    for j in range(len(validation.levels) - 1):
        if j not in cuts:
            continue
        est, lo, hi, kind = _interval(validation, "calibration_intercept", j)
        if lo > 0:
            verdict = "the model under-predicts this outcome on average"
        elif hi < 0:
            verdict = "the model over-predicts this outcome on average"
        else:
            verdict = "no systematic over- or under-prediction is shown"
        b, b_lo, b_hi, b_kind = _interval(validation, "calibration_slope", j)
        if b_hi < 1:
            spread = "predictions are too extreme"
        elif b_lo > 1:
            spread = "predictions are too moderate"
        else:
            spread = "the spread of predictions is compatible with a slope of 1"
        parts.append(
            f"For {outcome_words(validation.levels, j)}, calibration-in-the-large is {_pm(est)}{_bracket(kind, lo, hi, _pm)}: "
            f"{verdict}; the calibration slope is {b:.2f}{_bracket(b_kind, b_lo, b_hi, '{:.2f}'.format)}, so {spread}."
        )
    sizes = validation.subgroup_sizes
    small = sizes[sizes["small"] & (sizes["group"] != "(missing)")] if len(sizes) else sizes
    if len(small):
        names = ", ".join(f"{r.column} {r.group}" for r in small.itertuples())
        parts.append(f"Subgroups too small to read (see the subgroup section) are flagged and should not be over-read: {names}.")
    return " ".join(parts)


def _pm(value: float) -> str:
    """A signed number to 2 decimals with a typographic minus."""
    return f"{value:+.2f}".replace("-", "\u2212")


def subgroup_shortfall(validation: Any, row: Any) -> str:
    """Why a subgroup is flagged, in words and without its counts."""
    levels, e = validation.levels, validation.min_subgroup_events
    binary = len(levels) == 2
    why = []
    if row.n_top < e:
        why.append(f"fewer than {e} with {levels[-1]}")
    if row.n_bottom < e:
        why.append(f"fewer than {e} without {levels[1]}" if binary else f"fewer than {e} at {levels[0]}")
    if row.n < validation.min_subgroup_size:
        why.append(f"fewer than {validation.min_subgroup_size} patients")
    return " and ".join(why)


def subgroup_sentence(validation: Any) -> str:
    """Which subgroups are too small to read, and why, counting events and non-events as well as patients.

    Reads a :class:`~riskvet.validation.external.CohortValidation`: a
    subgroup's calibration needs ``min_subgroup_events`` events and as many
    non-events at every cut (after Vergouwe et al., J Clin Epidemiol 2005, and
    Collins, Ogundimu & Altman, Stat Med 2016); the scarcest are the
    patients at the top level and at the bottom level.
    """
    sizes = validation.subgroup_sizes
    measured = sizes[sizes["group"] != "(missing)"]
    e = validation.min_subgroup_events
    text = (
        f"In {validation.label}: {len(measured)} subgroup(s). A subgroup's calibration can be read only with at least {e} "
        f"events and {e} non-events for every outcome the model predicts (after Vergouwe et al. 2005 and Collins, "
        f"Ogundimu & Altman 2016), and the study asks for at least {validation.min_subgroup_size} patients."
    )
    flagged = measured[measured["small"]]
    if len(flagged):
        text += (
            f" Flagged as too small ({len(flagged)}): "
            + "; ".join(f"{r.column} {r.group} ({subgroup_shortfall(validation, r)})" for r in flagged.itertuples())
            + ". Read their intervals, not their point estimates, and do not judge their calibration."
        )
    else:
        text += " None falls short."
    counts = list(validation.level_counts.values())
    if min(counts[0], counts[-1]) < e:
        text += f" The whole cohort has fewer than {e} patients at its lowest or highest level, so no subgroup can reach this."
    return text


def rule_summary(comparison: Any, *, outcome_levels: Any = None) -> str:
    """Sentences reading the comparison with the rule: C of each and their difference, and net benefit at the study's thresholds.

    ``outcome_levels`` names the outcome's levels, so that each cut is named
    in the page's words (default: the comparison's own outcome names).  The
    interval of a difference is the bootstrap percentile interval when the
    comparison ran the bootstrap, else DeLong's.
    """
    withheld = getattr(comparison, "intervals_withheld", "")
    # with the bootstrap intervals withheld (too many failed replicates), DeLong's intervals are given instead
    boot = comparison.n_boot > 0 and not withheld
    kind = interval_words("bootstrap" if boot else "delong", comparison.confidence)
    parts = [f"In {comparison.label}, the rule '{comparison.rule_column}' was recorded for {comparison.n} patients ({comparison.n_missing_rule} without it were left out)."]
    for r in comparison.concordance_table.itertuples():
        if r.pvalue < 1 - comparison.confidence:
            verdict = "the model ranks patients better" if r.difference > 0 else "the rule ranks patients better"
        else:
            verdict = "the difference is not statistically clear"
        lo, hi = (r.boot_lower, r.boot_upper) if boot else (r.lower, r.upper)
        p = "p < 0.001" if r.pvalue < 0.001 else f"p = {r.pvalue:.3f}"
        parts.append(
            f"For {r.outcome if outcome_levels is None else outcome_words(outcome_levels, r.cut)}, C is {r.c_model:.3f} for the model and {r.c_rule:.3f} for the rule "
            f"(difference {r.difference:+.3f}, {kind} {lo:+.3f} to {hi:+.3f}; DeLong test {p}): {verdict}."
        )
    if withheld:
        parts.append(f"The bootstrap intervals are withheld ({withheld}); the intervals above are DeLong's, and the net "
                     "benefit differences have no interval.")
    elif len(comparison.net_benefit_table):
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


def _shown(value: float) -> str:
    """A measure at a threshold, or why it is not shown (withheld when it would give back a small count)."""
    return "withheld (small counts)" if value != value else f"{value:.2f}"
