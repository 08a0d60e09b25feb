"""The external validation stage: the frozen model in every validation cohort.

For each validation cohort the study names, :func:`run`

* refuses a cohort the model's design cannot encode (naming the column and
  the values);
* compares its case-mix with the derivation cohort
  (:func:`riskvet.casemix.case_mix`);
* measures the model's performance with bootstrap intervals, at the study's
  thresholds and in its subgroups (:func:`riskvet.external.validate_cohort`);
* compares the model with the existing rule when the study records one
  (:func:`riskvet.rule.compare_with_rule`);

then writes ``results/external_validation.json`` and the figures.  The model
is never refitted here; updating is the next stage.
"""

from __future__ import annotations

import dataclasses

import re
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
import pandas as pd

from ..._jsonable import to_jsonable
from ...validation.casemix import CaseMix, case_mix
from ...intake.data import Cohorts, expand_cohort, load_cohorts
from .derivation import PEOPLE_FLOW_WORDS
from ...errors import RiskvetError, StudyError, problem
from ...validation.external import CohortValidation, apply_model, calibration_label, validate_cohort
from ...validation.iecv import MEASURES, PooledMeasure, cluster_measures, pool_measures
from ...reporting.labels import cut_label
from ...modelling.modelfile import PredictionModel, load_model
from ...validation.rule import RuleComparison, compare_with_rule
from ...intake.study import Study
from ...reporting.classification import publish_thresholds
from ...reporting.figures.external_validation import published_case_mix
from ...reporting.figures.performance import published_calibration
from ...reporting.disclosure import SUPPRESSED, complementary_suppression
from ...reporting.sentences.common import INTERVAL_KINDS, interval_words, measure_guide
from ...reporting.sentences.internal_external import cohorts_pooled_text
from ...reporting.sentences.external_validation import (
    subgroup_shortfall, case_mix_sentence, cohort_summary, external_validation_texts, outcome_words, page_intervals, rule_summary,
)

__all__ = ["ExternalValidationOutput", "validate_external", "pool_cohorts", "run", "figure_name", "label_slug"]


def label_slug(label: str) -> str:
    """A cohort label made file-safe: characters other than letters, digits and ``.-_`` become ``-``."""
    return re.sub(r"[^A-Za-z0-9._-]+", "-", label).strip("-") or "cohort"


def figure_name(kind: str, label: str) -> str:
    """File-safe figure name ``<kind>_<label>``."""
    return f"{kind}_{label_slug(label)}"


@dataclass(frozen=True)
class ExternalValidationOutput:
    """Everything the external validation stage found.

    Attributes
    ----------
    model_sha256 : str
        Digest of the frozen model validated.
    flow : DataFrame
        Participant flow of every validation cohort: rows screened, each
        complete-case exclusion step, rows analysed
        (:meth:`riskvet.data.PreparedCohort.to_frame`).
    data : dict of str to dict
        Per cohort: ``n_screened``, ``n_analysed``, ``outcome_counts``,
        ``exclusions``, ``category_mappings`` and ``missing`` (no rows, no
        file paths).
    cohorts : dict of str to CohortValidation
        Performance by cohort label, in study order.
    case_mix : dict of str to CaseMix
        Case-mix against the derivation cohort, by label.
    rule : dict of str to RuleComparison
        Comparison with the existing rule, by label (empty without a rule).
    figures : dict of str to str
        Figure name -> PNG path relative to the record.
    texts : dict of str to str
        One interpreting paragraph per notebook table or figure:
        ``summary``, ``flow``, ``case_mix``, ``membership``, ``linear_predictor``,
        ``performance``, ``calibration``, ``intervals`` (the kind of every
        interval on the page), ``thresholds``, ``decision``, ``subgroups``,
        ``rule``, ``caution``.
    notes : tuple of str
        Statistical warnings met, by cohort.
    min_cell_count : int
        ``output.min_cell_count``: subgroup counts from 1 to this minus 1 are
        suppressed on the page and in the results file.
    pooled : tuple of PooledMeasure
        With two or more validation cohorts: C, calibration-in-the-large,
        calibration slope, O/E and net benefit pooled over the cohorts by
        random-effects meta-analysis (:func:`pool_cohorts`); empty with one.
    """

    model_sha256: str
    flow: pd.DataFrame = field(repr=False)
    data: Mapping[str, Mapping[str, Any]] = field(repr=False)
    cohorts: Mapping[str, CohortValidation] = field(repr=False)
    case_mix: Mapping[str, CaseMix] = field(repr=False)
    rule: Mapping[str, RuleComparison] = field(repr=False)
    figures: Mapping[str, str]
    texts: Mapping[str, str]
    notes: tuple[str, ...]
    min_cell_count: int = 0
    pooled: tuple[PooledMeasure, ...] = ()
    imputed: Mapping[str, Any] = field(default_factory=dict, repr=False)
    missing: Mapping[str, Any] = field(default_factory=dict, repr=False)

    def imputed_frame(self) -> pd.DataFrame | None:
        """Under multiple imputation: each cohort's measures pooled over its completed data sets (headers in words), or None."""
        if not self.imputed:
            return None
        rows = []
        for label, result in self.imputed.items():
            levels = self.cohorts[label].levels
            for r, info in zip(result.measures, result.pooling.itertuples()):
                at = f" at {r.threshold:g}" if r.measure == "net_benefit" else ""
                where = "" if len(levels) == 2 else f", {cut_label(levels, r.cut, binary=False)}"
                rows.append({"cohort": label, "measure": MEASURES[r.measure][0] + at + where, "estimate": r.estimate,
                             "lower (95%, Rubin's rules)": r.lower, "upper (95%, Rubin's rules)": r.upper,
                             "degrees of freedom": info.df, "fraction of missing information": info.fmi,
                             "not estimated because": r.reason})
        return pd.DataFrame(rows)

    def pooled_frame(self) -> pd.DataFrame | None:
        """The measures pooled over the validation cohorts (headers in words), or None with one cohort."""
        if not self.pooled:
            return None
        levels = next(iter(self.cohorts.values())).levels
        rows = []
        for p in self.pooled:
            at = f" at {p.threshold:g}" if p.measure == "net_benefit" else ""
            where = "" if len(levels) == 2 else f", {cut_label(levels, p.cut, binary=False)}"
            rows.append({
                "measure": MEASURES[p.measure][0] + at + where, "pooled": p.estimate, "pooled_lower": p.lower, "pooled_upper": p.upper,
                "lower, 95% prediction interval for a new cohort": p.prediction_lower,
                "upper, 95% prediction interval for a new cohort": p.prediction_upper,
                "tau²": p.tau2, "I²": p.i2, "cohorts pooled": f"{p.n_clusters} of {p.n_clusters + len(p.left_out)}",
            })
        return pd.DataFrame(rows)

    # -- tables for the notebook ------------------------------------------------------
    def flow_frame(self) -> pd.DataFrame:
        """Participant flow of every validation cohort."""
        return self.flow.copy()

    def case_mix_frame(self) -> pd.DataFrame:
        """Derivation and each validation cohort side by side (``cohort`` column first)."""
        parts = []
        for label, cm in self.case_mix.items():
            t = cm.to_frame()
            t.insert(0, "cohort", label)
            parts.append(t)
        return pd.concat(parts, ignore_index=True)

    def membership_frame(self) -> pd.DataFrame:
        """Linear predictor and membership-model summary, one row per cohort."""
        return pd.concat([cm.summary_frame() for cm in self.case_mix.values()], ignore_index=True)

    # The frames below are for reading: measures by name, the outcome in the
    # user's level labels, headers in words, every interval named by its
    # kind (one kind per measure, see page_intervals); the results JSON keeps the keys.

    def performance_frame(self) -> pd.DataFrame:
        """Headline measures with their intervals, every cohort stacked.

        Columns ``cohort``, ``measure``, ``outcome``, ``estimate``, ``lower
        limit``, ``upper limit``, ``interval`` (its kind in words),
        ``resamples used``.
        """
        return pd.concat([_performance_rows(c) for c in self.cohorts.values()], ignore_index=True)

    def calibration_frame(self) -> pd.DataFrame:
        """Per-outcome calibration summaries, every cohort, with the page's interval for each measure."""
        return pd.concat([_calibration_rows(c) for c in self.cohorts.values()], ignore_index=True)

    def calibration_statistics(self, label: str) -> pd.DataFrame:
        """What a calibration figure's caption table states for cohort ``label``: calibration-in-the-large,
        slope, observed/expected ratio and ICI per outcome, with the same intervals as the tables."""
        if label not in self.cohorts:
            raise StudyError(problem("calibration_statistics(label=)", allowed=f"a validation cohort among {list(self.cohorts)}", received=label))
        rows = _calibration_rows(self.cohorts[label])
        keep = rows["measure"].isin([calibration_label(m) for m in _CAPTION_MEASURES])
        return rows[keep].drop(columns="cohort").reset_index(drop=True)

    def threshold_frame(self) -> pd.DataFrame:
        """Classification at the study's thresholds, every cohort, headers in words."""
        parts = []
        for c in self.cohorts.values():
            for cut, tab in c.threshold_tables.items():
                f = tab.to_frame().rename(columns=_THRESHOLD_COLUMNS)
                f.insert(0, "outcome", outcome_words(c.levels, cut))
                f.insert(0, "cohort", c.label)
                f["interval"] = interval_words(tab.interval, tab.confidence) if tab.interval in INTERVAL_KINDS else tab.interval
                parts.append(f)
        return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=["cohort", "outcome", "threshold"])

    def subgroup_sizes_frame(self) -> pd.DataFrame:
        """One row per subgroup: patients and patients at the top level (counts below
        ``output.min_cell_count`` suppressed, with what would reveal them), and whether it is too small to read, and why."""
        return pd.concat([_published_sizes(c, self.min_cell_count) for c in self.cohorts.values()], ignore_index=True)

    def subgroup_frame(self) -> pd.DataFrame:
        """Subgroup measures with the page's intervals (counts are in :meth:`subgroup_sizes_frame`), every cohort."""
        parts = [_subgroup_rows(c) for c in self.cohorts.values() if len(c.subgroups)]
        return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()

    def rule_frame(self) -> pd.DataFrame:
        """Model against rule: C per outcome with the difference, its interval (kind named) and DeLong's test."""
        parts = []
        for label, r in self.rule.items():
            levels = self.cohorts[label].levels
            boot = r.n_boot > 0
            for row in r.concordance_table.itertuples():
                parts.append({
                    "cohort": label, "outcome": outcome_words(levels, row.cut), "C of the model": row.c_model, "C of the rule": row.c_rule,
                    "difference": row.difference, "lower limit": row.boot_lower if boot else row.lower,
                    "upper limit": row.boot_upper if boot else row.upper,
                    "interval": interval_words("bootstrap" if boot else "delong", r.confidence), "p (DeLong test)": row.pvalue,
                })
        return pd.DataFrame(parts)

    def rule_net_benefit_frame(self) -> pd.DataFrame:
        """Model against rule: net benefit at the study's thresholds, with the bootstrap interval of the difference."""
        parts = []
        for label, r in self.rule.items():
            levels = self.cohorts[label].levels
            for row in r.net_benefit_table.itertuples():
                parts.append({
                    "cohort": label, "outcome": outcome_words(levels, row.cut), "threshold": row.threshold,
                    "net benefit of the model": row.nb_model, "net benefit of the rule": row.nb_rule,
                    "net benefit of treating everybody": row.nb_treat_all, "difference": row.difference,
                    "lower limit": row.boot_lower, "upper limit": row.boot_upper,
                    "interval": interval_words("bootstrap", r.confidence),
                })
        return pd.DataFrame(parts)

    @property
    def guide(self) -> pd.DataFrame:
        """What good looks like for each measure on the page (:func:`~riskvet.reporting.sentences.common.measure_guide`)."""
        first = next(iter(self.cohorts.values()))
        keys = list(dict.fromkeys(first.performance["measure"]))
        keys += ["oe_ratio", "e50", "e90", "emax", "net_benefit"]
        if any(c.threshold_tables for c in self.cohorts.values()):
            keys += ["sensitivity", "specificity", "ppv", "npv"]
        return measure_guide(keys, n_levels=len(first.levels))

    def to_frame(self) -> pd.DataFrame:
        return self.performance_frame()

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "model_sha256": self.model_sha256,
                "data": {k: dict(v) for k, v in self.data.items()},
                "cohorts": {k: {**v.to_dict(), "calibration": published_calibration(v.calibration, min_cell_count=self.min_cell_count),
                                **_published_subgroups(v, self.min_cell_count), "summary": cohort_summary(v)}
                            for k, v in self.cohorts.items()},
                "min_cell_count": self.min_cell_count,
                "case_mix": {k: {**published_case_mix(v, min_cell_count=self.min_cell_count), "interpretation": case_mix_sentence(v)}
                             for k, v in self.case_mix.items()},
                "rule": {k: {**v.to_dict(), "summary": rule_summary(v, outcome_levels=self.cohorts[k].levels)} for k, v in self.rule.items()},
                "pooled": [p.to_dict() for p in self.pooled],
                "imputed": {k: v.to_dict() for k, v in self.imputed.items()},
                "missing_data": {k: v["results"] for k, v in self.missing.items()},
                "figures": dict(self.figures),
                "texts": dict(self.texts),
                "notes": list(self.notes),
            }
        )


#: Calibration summaries a figure caption states.
_CAPTION_MEASURES = ("calibration_in_the_large", "slope", "oe_ratio", "ici")

#: Calibration summaries (``OrdinalCalibration.to_frame`` measures) under the performance key of their interval.
_CALIBRATION_KEYS = {"calibration_in_the_large": "calibration_intercept", "slope": "calibration_slope", "ici": "ici", "oe_ratio": "oe_ratio"}

_THRESHOLD_COLUMNS = {
    "threshold": "threshold", "tp": "true positives", "fp": "false positives", "fn": "false negatives", "tn": "true negatives",
    **{f"{m}{end}": f"{words}{tail}" for m, words in (
        ("sensitivity", "sensitivity"), ("specificity", "specificity"), ("ppv", "positive predictive value"),
        ("npv", "negative predictive value"), ("lr_positive", "positive likelihood ratio"), ("lr_negative", "negative likelihood ratio"))
       for end, tail in (("", ""), ("_lower", ", lower limit"), ("_upper", ", upper limit"))},
}

_INTERVAL_COLUMNS = ["lower limit", "upper limit", "interval"]


def _lookup(intervals: pd.DataFrame, measure: str, cut: Any) -> tuple[float, float, str | None]:
    rows = intervals[(intervals["measure"] == measure) & (intervals["cut"].isna() if cut is None else intervals["cut"] == cut)]
    if not len(rows):
        return float("nan"), float("nan"), None
    r = rows.iloc[0]
    return float(r["lower"]), float(r["upper"]), r["kind"]


def _words(kind: str | None, confidence: float) -> str | None:
    return interval_words(kind, confidence) if kind else None


def _performance_rows(c: CohortValidation) -> pd.DataFrame:
    intervals = page_intervals(c)
    rows = []
    for r in c.performance.itertuples():
        cut = None if pd.isna(r.cut) else int(r.cut)
        lo, hi, kind = _lookup(intervals, r.measure, cut)
        rows.append({"cohort": c.label, "measure": r.label, "outcome": outcome_words(c.levels, cut), "estimate": r.estimate,
                     "lower limit": lo, "upper limit": hi, "interval": _words(kind, c.confidence),
                     "resamples used": r.n_boot_used if kind == "bootstrap" else None})
    return pd.DataFrame(rows, columns=["cohort", "measure", "outcome", "estimate", *_INTERVAL_COLUMNS, "resamples used"])


def _calibration_rows(c: CohortValidation) -> pd.DataFrame:
    table = c.calibration.to_frame()
    if len(c.levels) == 2:
        table = table[~table["measure"].str.startswith("ordinal_")]
    intervals = page_intervals(c)
    rows = []
    for r in table.itertuples():
        cut = None if pd.isna(r.cut) else int(r.cut)
        key = _CALIBRATION_KEYS.get(r.measure)
        lo, hi, kind = _lookup(intervals, key, cut) if key else (float("nan"), float("nan"), None)
        rows.append({"cohort": c.label, "outcome": outcome_words(c.levels, cut), "measure": calibration_label(r.measure),
                     "estimate": r.estimate, "lower limit": lo, "upper limit": hi, "interval": _words(kind, c.confidence)})
    return pd.DataFrame(rows, columns=["cohort", "outcome", "measure", "estimate", *_INTERVAL_COLUMNS])


def _subgroup_rows(c: CohortValidation) -> pd.DataFrame:
    t = c.subgroups
    kind = _words("bootstrap", c.confidence) if c.n_boot > 0 else None
    has = t["lower"].notna().to_numpy() & t["upper"].notna().to_numpy()
    return pd.DataFrame({
        "cohort": c.label, "subgroup": t["column"].to_numpy(), "group": t["group"].to_numpy(),
        "too small to read": t["small"].to_numpy(dtype=bool), "measure": t["label"].to_numpy(),
        "outcome": [outcome_words(c.levels, None if pd.isna(x) else int(x)) for x in t["cut"]],
        "estimate": t["estimate"].to_numpy(), "lower limit": t["lower"].to_numpy() if kind else float("nan"),
        "upper limit": t["upper"].to_numpy() if kind else float("nan"),
        "interval": [kind if ok else None for ok in has],
    })


def _suppressed_counts(c: CohortValidation, m: int) -> dict[tuple[int, int], int | str]:
    """Subgroup counts as published: (row of subgroup_sizes, 0 = patients / 1 = at the top level) -> count or SUPPRESSED.

    Lines for :func:`~riskvet.reporting.disclosure.complementary_suppression`:
    each group's patients are its top-level patients plus the rest, and each
    subgroup definition's groups add up to the cohort (published in the
    participant flow), so a hidden count cannot be recovered by subtraction.
    """
    sizes = c.subgroup_sizes.reset_index(drop=True)
    counts: dict[tuple[int, int], int] = {}
    lines: list[list[tuple[int, int]]] = []
    totals: set[tuple[int, int]] = set()
    for i, r in sizes.iterrows():
        counts[(i, 0)] = int(r["n"])
        if r["n_top"] >= 0:
            counts[(i, 1)], counts[(i, 2)] = int(r["n_top"]), int(r["n"] - r["n_top"])
            lines.append([(i, 1), (i, 2), (i, 0)])
    for d, (_, group) in enumerate(sizes.groupby("column", sort=False)):
        rows = list(group.index)
        total = (-1 - d, 0)
        counts[total] = int(group["n"].sum())
        totals.add(total)
        lines.append([(i, 0) for i in rows] + [total])
        if (group["n_top"] >= 0).all():
            for col in (1, 2):
                counts[(-1 - d, col)] = sum(counts[(i, col)] for i in rows)
                totals.add((-1 - d, col))
                lines.append([(i, col) for i in rows] + [(-1 - d, col)])
    hidden = complementary_suppression(counts, lines, m) if m > 1 else set()
    if hidden & totals:  # a cohort total is published elsewhere: hide the whole definition's counts instead
        hidden |= {cell for cell in counts if cell[0] >= 0}
    return {cell: (SUPPRESSED if cell in hidden else n) for cell, n in counts.items() if cell[0] >= 0 and cell[1] < 2}


def _published_sizes(c: CohortValidation, m: int) -> pd.DataFrame:
    sizes = c.subgroup_sizes.reset_index(drop=True)
    shown = _suppressed_counts(c, m)
    return pd.DataFrame({
        "cohort": c.label, "subgroup": sizes["column"], "group": sizes["group"],
        "patients": [shown[(i, 0)] for i in range(len(sizes))],
        f"patients with {c.levels[-1]}": [shown.get((i, 1)) for i in range(len(sizes))],
        "too small to read": sizes["small"].astype(bool),
        "why": [("not measured" if r.group == "(missing)" else subgroup_shortfall(c, r)) or None for r in sizes.itertuples()],
    }, dtype=object)


def _published_subgroups(c: CohortValidation, m: int) -> dict[str, Any]:
    """The results file's subgroup tables with the counts suppressed as on the page (and no bottom-level counts)."""
    shown = _suppressed_counts(c, m)
    sizes = c.subgroup_sizes.reset_index(drop=True).drop(columns="n_bottom").astype(object)
    sizes["n"] = [shown[(i, 0)] for i in range(len(sizes))]
    sizes["n_top"] = [shown.get((i, 1)) for i in range(len(sizes))]
    by_group = {(r.column, r.group): (r.n, r.n_top) for r in sizes.itertuples()}
    subgroups = c.subgroups.drop(columns="n_bottom").astype(object)
    subgroups["n"] = [by_group[(a, b)][0] for a, b in zip(subgroups["column"], subgroups["group"])]
    subgroups["n_top"] = [by_group[(a, b)][1] for a, b in zip(subgroups["column"], subgroups["group"])]
    return {"subgroup_sizes": to_jsonable(sizes), "subgroups": to_jsonable(subgroups)}


def _thresholds(study: Study) -> dict[int, tuple[float, ...]]:
    K = len(study.outcome.ordered_levels)
    return {j: tuple(study.thresholds_for_cut(j)) for j in range(K - 1) if study.thresholds_for_cut(j)}


def validate_external(study: Study, model: PredictionModel, cohorts: Cohorts) -> dict[str, Any]:
    """Case-mix, performance and rule comparison in every validation cohort.

    Parameters
    ----------
    study : Study
    model : PredictionModel
        The frozen model.
    cohorts : Cohorts
        From :func:`riskvet.data.load_cohorts`.

    Returns
    -------
    dict
        ``cohorts``, ``case_mix``, ``rule`` and ``data`` (cohort summaries
        without rows or paths), each by cohort label.

    Raises
    ------
    StudyError
        The study names no validation cohort.
    DesignError
        A cohort the model cannot encode (naming the cohort, column and values).
    RiskvetError
        Frequency weights (``data.weight_column``) with a comparison with
        today's rule (``existing_rule``), which does not use weights yet.

    Notes
    -----
    With frequency weights every count and measure is of people (the
    cohorts written out one row per person); the bootstrap resamples rows.
    """
    if not cohorts.validation:
        raise StudyError(problem("data.validation", allowed="at least one validation cohort for external validation", received=[]))
    ev = study.external_validation
    thresholds = _thresholds(study)
    rule = study.existing_rule
    results: dict[str, Any] = {"cohorts": {}, "case_mix": {}, "rule": {}, "data": {}}
    if rule is not None and study.data.weight_column is not None:
        raise RiskvetError(
            f"data.weight_column is set ({study.data.weight_column!r}) and the study compares the model with today's rule "
            "(existing_rule): the comparison with today's rule does not use frequency weights yet, so its counts and "
            "intervals would be of rows, not people. Remove existing_rule, or write the data out one row per person "
            "without data.weight_column"
        )
    for label, cohort in cohorts.validation.items():
        results["data"][label] = _cohort_summary(cohort)
        prob = apply_model(model, cohort.frame, label=label)  # refuse early, naming the cohort
        # case-mix is described for people: both cohorts written out one row per person
        results["case_mix"][label] = case_mix(model, expand_cohort(cohorts.derivation), expand_cohort(cohort),
                                              outcome_labels=dict(study.outcome.labels), seed=ev.seed)
        validated = validate_cohort(
            model, cohort.frame, cohort.y, label=label, thresholds=thresholds, subgroups=ev.subgroups,
            min_subgroup_size=ev.min_subgroup_size, n_boot=ev.n_boot, seed=ev.seed,
            n_jobs=study.compute.n_jobs, scheduler=study.compute.scheduler, max_failed_share=ev.max_failed_share,
            weights=cohort.weights,
        )
        # Small classification counts (and the measures that give them back) never reach the record.
        published = {cut: publish_thresholds(t, min_cell_count=study.output.min_cell_count).table for cut, t in validated.threshold_tables.items()}
        results["cohorts"][label] = dataclasses.replace(validated, threshold_tables=published)
        if rule is not None and cohort.rule_column is not None:
            results["rule"][label] = compare_with_rule(
                cohort.y, prob, cohort.frame[rule.column], kind=rule.kind, levels=rule.levels,
                positive_from=rule.positive_from, thresholds=thresholds, outcome_levels=cohort.outcome_levels,
                label=label, rule_column=rule.column, n_boot=ev.n_boot, seed=ev.seed,
                n_jobs=study.compute.n_jobs, scheduler=study.compute.scheduler, max_failed_share=ev.max_failed_share,
            )
    return results


def pool_cohorts(study: Study, model: PredictionModel, cohorts: Cohorts, *, imputed: Mapping[str, Any] | None = None,
                 ) -> tuple[PooledMeasure, ...]:
    """With two or more validation cohorts, each measure pooled over them by random-effects meta-analysis.

    Each cohort's C (DeLong standard error), calibration-in-the-large and
    slope, O/E and net benefit at the study's thresholds are computed per
    cut on its people (:func:`riskvet.validation.iecv.cluster_measures`) and
    pooled by :func:`riskvet.validation.iecv.pool_measures` with
    ``external_validation.pooling`` and ``hartung_knapp``: C on the logit
    scale and O/E on the log scale (Debray et al. 2017), the prediction
    interval on k - 2 degrees of freedom (Riley, Higgins & Deeks 2011;
    undefined with two cohorts).  A cohort with fewer than
    ``output.min_cell_count`` people on a side of a cut is left out of that
    cut's pooling, with the reason.  Empty with one cohort.  Under multiple
    imputation (``imputed``: each cohort's
    :class:`~riskvet.validation.imputed_measures.ImputedMeasures`) a
    cohort's measures are first pooled over its completed data sets by
    Rubin's rules, and those are pooled over the cohorts.

    References
    ----------
    Debray TPA, Damen JAAG, Snell KIE, et al. A guide to systematic review
    and meta-analysis of prediction model performance. BMJ 2017;356:i6460.

    Riley RD, Higgins JPT, Deeks JJ. Interpretation of random effects
    meta-analyses. BMJ 2011;342:d549.
    """
    if len(cohorts.validation) < 2:
        return ()
    ev = study.external_validation
    thresholds = _thresholds(study)
    rows = []
    if imputed:
        rows = [row for label in cohorts.validation for row in imputed[label].measures]
        return pool_measures(rows, method=ev.pooling, hartung_knapp=ev.hartung_knapp)
    for label, cohort in cohorts.validation.items():
        people = expand_cohort(cohort)
        prob = apply_model(model, people.frame, label=label)
        rows += cluster_measures(label, people.y, prob, thresholds=thresholds, min_events=max(1, study.output.min_cell_count))
    return pool_measures(rows, method=ev.pooling, hartung_knapp=ev.hartung_knapp)


def _cohort_summary(cohort) -> dict[str, Any]:
    """A validation cohort's counts for the record: people screened and analysed, people per outcome level, the exclusions.

    Without frequency weights a row is a person and the summary is the
    cohort's own.  With them the counts are people (``"counted": "people"``),
    the rows of the file beside them, and the exclusion table counts both.
    """
    summary = cohort.to_dict()
    data = {k: summary[k] for k in ("n_screened", "n_analysed", "outcome_counts", "exclusions", "category_mappings", "missing")}
    if cohort.weights is None:
        return data
    return data | {"n_screened": cohort.n_people_screened, "n_analysed": cohort.n_people, "counted": "people",
                   "weight_column": cohort.weight_column, "n_rows_screened": cohort.n_screened,
                   "n_rows_analysed": cohort.n_analysed, "outcome_rows": cohort.outcome_rows}


def _impute_cohorts(study: Study, cohorts: Cohorts) -> dict[str, dict[str, Any]]:
    """Every cohort imputed on its own, the outcome in its imputation models: the derivation cohort as the
    derivation stage imputes it, each validation cohort with its own m (``missing_data.m`` or the rule of thumb)
    and its own seed."""
    from ...imputation.procedure import cohort_seed, completed_cohort, impute_cohort

    out = {}
    for k, (label, cohort) in enumerate([("derivation", cohorts.derivation), *cohorts.validation.items()]):
        imputations = impute_cohort(study, cohort, seed=cohort_seed(study, k))
        completed = list(imputations)
        out[label] = {"imputations": imputations, "completed": completed, "cohort": cohort,
                      "first": completed_cohort(cohort, completed[0])}
    return out


def _imputed_parts(ctx, model: PredictionModel, cohorts: Cohorts, imputed: dict[str, dict[str, Any]]):
    """Under multiple imputation: each validation cohort's measures pooled over its completed data sets, its
    missing-data section, and the sentences saying what the page's other tables are computed on."""
    from ...imputation.procedure import completed_cohort
    from ...validation.imputed_measures import imputed_cohort_measures
    from .imputed import missing_data_section

    if not imputed:
        return {}, {}, {}
    study = ctx.study
    pooled, missing = {}, {}
    for label in cohorts.validation:
        part = imputed[label]
        probs = [apply_model(model, completed_cohort(part["cohort"], c).frame, label=label) for c in part["completed"]]
        pooled[label] = imputed_cohort_measures(label, np.asarray(part["cohort"].y), probs, thresholds=_thresholds(study),
                                                min_events=max(1, study.output.min_cell_count))
        missing[label] = missing_data_section(ctx, part["imputations"], cohort=part["cohort"], label=label)
    m = {label: (f"{imputed[label]['imputations'].m} completed data sets" if imputed[label]["cohort"].n_incomplete
                 else "nothing was missing, so its completed data sets are the data as recorded") for label in cohorts.validation}
    texts = {"imputed": (
        "Missing predictor values of each validation cohort were multiply imputed on that cohort alone, with the outcome in "
        f"every imputation model ({'; '.join(f'{label}: {words}' for label, words in m.items())}). The table "
        "'Pooled over the imputations' is the primary estimate: each measure was computed in every completed data set "
        "and pooled by Rubin's rules, C on the logit scale and O/E on the log scale (Marshall et al. 2009; Debray et al. "
        "2017), with t intervals on Barnard-Rubin degrees of freedom; with several cohorts, the pooling over them starts from "
        "these. The other tables and figures of this page, with their "
        "bootstrap intervals, the case-mix comparison and the comparison with today's rule, are computed on each cohort's "
        "first completed data set: they show the shape of the results, and their intervals do not include the "
        "uncertainty of the imputation."
    )}
    for label, part in missing.items():
        texts.update({f"{k}": v for k, v in part["texts"].items()})
    return pooled, missing, texts


def run(ctx) -> ExternalValidationOutput:
    """Run the external validation stage: results JSON and figures.

    Parameters
    ----------
    ctx : riskvet.stagekit.StageContext
        The stage's context; the model validated is ``ctx.model_path``.

    Returns
    -------
    ExternalValidationOutput

    Raises
    ------
    RecordError
        The record already holds this stage's results.
    ModelFileError
        The model file is missing or altered.
    """
    from ...reporting.figures.external_validation import plot_case_mix, plot_cohort_calibration, plot_cohort_decision_curves, plot_rule_comparison, plot_subgroups

    if ctx.results_path.exists():
        ctx.new_path(ctx.results_path)  # raises: records are write-once, checked before any work
    study = ctx.study
    model = load_model(ctx.model_path)
    cohorts = load_cohorts(study)
    imputed = _impute_cohorts(study, cohorts) if study.imputing else {}
    if imputed:  # tables, figures and the rule comparison on each cohort's first completed data set
        cohorts = dataclasses.replace(cohorts, derivation=imputed["derivation"]["first"],
                                      validation={label: imputed[label]["first"] for label in cohorts.validation})
    results = validate_external(study, model, cohorts)

    figures: dict[str, str] = {}

    def save(name: str, fig) -> None:
        ctx.save_figure(fig, name)
        figures[name] = (ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir).as_posix()

    save("case_mix", plot_case_mix(list(results["case_mix"].values()), min_cell_count=study.output.min_cell_count))
    for label, c in results["cohorts"].items():
        save(figure_name("calibration", label), plot_cohort_calibration(c, min_cell_count=study.output.min_cell_count))
        save(figure_name("decision", label), plot_cohort_decision_curves(c, results["rule"].get(label)))
        if len(c.subgroups):
            save(figure_name("subgroups", label), plot_subgroups(c))
    for label, r in results["rule"].items():
        save(figure_name("rule", label), plot_rule_comparison(r, levels=results["cohorts"][label].levels))

    notes = []
    for label, c in results["cohorts"].items():
        notes += [f"{label}: {w}" for w in c.warnings]
        if c.failures:
            counts = ", ".join(f"{n} {reason}" for reason, n in c.failure_counts.items())
            notes.append(f"{label}: {len(c.failures)} of {c.n_boot} bootstrap replicates failed ({counts})")
        if c.intervals_withheld:
            notes.append(f"{label}: intervals withheld: {c.intervals_withheld}")
        notes += [f"{label}: {key}: {why}" for key, why in c.interval_notes.items()]
        notes += [f"{label}: case-mix: {w}" for w in results["case_mix"][label].warnings]
    for label, r in results["rule"].items():
        notes += [f"{label}: rule: {w}" for w in r.warnings]
    pooled_imputed, missing, extra_texts = _imputed_parts(ctx, model, cohorts, imputed)
    pooled = pool_cohorts(study, model, cohorts, imputed=pooled_imputed)
    figures.update({k: v for part in missing.values() for k, v in part["figures"].items()})
    out = ExternalValidationOutput(
        model_sha256=model.digest(),
        flow=pd.concat([c.to_frame().rename(columns=PEOPLE_FLOW_WORDS) if c.weights is not None else c.to_frame()
                        for c in cohorts.validation.values()], ignore_index=True),
        data=results["data"],
        cohorts=results["cohorts"],
        case_mix=results["case_mix"],
        rule=results["rule"],
        figures=figures,
        texts={**external_validation_texts(results, subgroups_named=bool(study.external_validation.subgroups)),
               "pooled": cohorts_pooled_text(pooled, n_cohorts=len(cohorts.validation), method=study.external_validation.pooling,
                                             hartung_knapp=study.external_validation.hartung_knapp), **extra_texts},
        notes=tuple(notes),
        min_cell_count=study.output.min_cell_count,
        pooled=pooled,
        imputed=pooled_imputed,
        missing=missing,
    )
    ctx.write_results(out.to_dict())
    return out
