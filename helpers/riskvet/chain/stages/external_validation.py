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

import re
from dataclasses import dataclass, field
from typing import Any, Mapping

import pandas as pd

from ..._jsonable import to_jsonable
from ...validation.casemix import CaseMix, case_mix
from ...intake.data import Cohorts, load_cohorts
from ...errors import StudyError, problem
from ...validation.external import CohortValidation, apply_model, validate_cohort
from ...modelling.modelfile import PredictionModel, load_model
from ...validation.rule import RuleComparison, compare_with_rule
from ...intake.study import Study
from ...reporting.sentences.external_validation import case_mix_sentence, cohort_summary, external_validation_texts, rule_summary

__all__ = ["ExternalValidationOutput", "validate_external", "run", "figure_name", "label_slug"]


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
        ``performance``, ``calibration``, ``thresholds``, ``decision``,
        ``subgroups``, ``rule``, ``caution``.
    notes : tuple of str
        Statistical warnings met, by cohort.
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

    # The frames below are for reading: measures by name, the outcome in
    # words rather than cut numbers (the results JSON keeps the keys).

    def performance_frame(self) -> pd.DataFrame:
        """Headline measures with bootstrap intervals, every cohort stacked.

        Columns ``cohort``, ``measure`` (display name), ``outcome``,
        ``estimate``, ``se``, ``lower``, ``upper``, ``n_boot_used``.
        """
        return pd.concat([_readable(c.to_frame()) for c in self.cohorts.values()], ignore_index=True)

    def calibration_frame(self) -> pd.DataFrame:
        """Per-cut calibration summaries with model-based intervals, every cohort."""
        return pd.concat([c.calibration_frame() for c in self.cohorts.values()], ignore_index=True)

    def threshold_frame(self) -> pd.DataFrame:
        """Classification at the study's thresholds, every cohort."""
        return pd.concat([c.threshold_frame().drop(columns="cut") for c in self.cohorts.values()], ignore_index=True)

    def subgroup_frame(self) -> pd.DataFrame:
        """Subgroup measures (``small`` flags subgroups too small to read), every cohort.

        ``n_top`` is named after the highest outcome level (``n <level>``).
        """
        parts = []
        for label, c in self.cohorts.items():
            t = _readable(c.subgroups).rename(columns={"n_top": f"n {c.levels[-1]}"})
            t.insert(0, "cohort", label)
            parts.append(t)
        return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()

    def rule_frame(self) -> pd.DataFrame:
        """Model against rule: C per cut with the DeLong test and bootstrap interval."""
        if not self.rule:
            return pd.DataFrame()
        return pd.concat([r.to_frame().drop(columns="cut") for r in self.rule.values()], ignore_index=True)

    def rule_net_benefit_frame(self) -> pd.DataFrame:
        """Model against rule: net benefit at the study's thresholds."""
        if not self.rule:
            return pd.DataFrame()
        return pd.concat([r.net_benefit_frame().drop(columns="cut") for r in self.rule.values()], ignore_index=True)

    def to_frame(self) -> pd.DataFrame:
        return self.performance_frame()

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "model_sha256": self.model_sha256,
                "data": {k: dict(v) for k, v in self.data.items()},
                "cohorts": {k: {**v.to_dict(), "summary": cohort_summary(v)} for k, v in self.cohorts.items()},
                "case_mix": {k: {**v.to_dict(), "interpretation": case_mix_sentence(v)} for k, v in self.case_mix.items()},
                "rule": {k: {**v.to_dict(), "summary": rule_summary(v)} for k, v in self.rule.items()},
                "figures": dict(self.figures),
                "texts": dict(self.texts),
                "notes": list(self.notes),
            }
        )


def _readable(table: pd.DataFrame) -> pd.DataFrame:
    """A performance table for reading: the display name as ``measure``, no key or cut number."""
    return table.drop(columns=["measure", "cut"]).rename(columns={"label": "measure"})


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
    """
    if not cohorts.validation:
        raise StudyError(problem("data.validation", allowed="at least one validation cohort for external validation", received=[]))
    ev = study.external_validation
    thresholds = _thresholds(study)
    rule = study.existing_rule
    results: dict[str, Any] = {"cohorts": {}, "case_mix": {}, "rule": {}, "data": {}}
    for label, cohort in cohorts.validation.items():
        summary = cohort.to_dict()
        results["data"][label] = {k: summary[k] for k in ("n_screened", "n_analysed", "outcome_counts", "exclusions", "category_mappings", "missing")}
        prob = apply_model(model, cohort.frame, label=label)  # refuse early, naming the cohort
        results["case_mix"][label] = case_mix(model, cohorts.derivation, cohort, outcome_labels=dict(study.outcome.labels), seed=ev.seed)
        results["cohorts"][label] = validate_cohort(
            model, cohort.frame, cohort.y, label=label, thresholds=thresholds, subgroups=ev.subgroups,
            min_subgroup_size=ev.min_subgroup_size, n_boot=ev.n_boot, seed=ev.seed,
            n_jobs=study.compute.n_jobs, scheduler=study.compute.scheduler,
        )
        if rule is not None and cohort.rule_column is not None:
            results["rule"][label] = compare_with_rule(
                cohort.y, prob, cohort.frame[rule.column], kind=rule.kind, levels=rule.levels,
                positive_from=rule.positive_from, thresholds=thresholds, outcome_levels=cohort.outcome_levels,
                label=label, rule_column=rule.column, n_boot=ev.n_boot, seed=ev.seed,
                n_jobs=study.compute.n_jobs, scheduler=study.compute.scheduler,
            )
    return results


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
    results = validate_external(study, model, cohorts)

    figures: dict[str, str] = {}

    def save(name: str, fig) -> None:
        ctx.save_figure(fig, name)
        figures[name] = (ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir).as_posix()

    save("case_mix", plot_case_mix(list(results["case_mix"].values())))
    for label, c in results["cohorts"].items():
        save(figure_name("calibration", label), plot_cohort_calibration(c))
        save(figure_name("decision", label), plot_cohort_decision_curves(c, results["rule"].get(label)))
        if len(c.subgroups):
            save(figure_name("subgroups", label), plot_subgroups(c))
    for label, r in results["rule"].items():
        save(figure_name("rule", label), plot_rule_comparison(r))

    notes = []
    for label, c in results["cohorts"].items():
        notes += [f"{label}: {w}" for w in c.warnings]
        notes += [f"{label}: case-mix: {w}" for w in results["case_mix"][label].warnings]
    for label, r in results["rule"].items():
        notes += [f"{label}: rule: {w}" for w in r.warnings]
    out = ExternalValidationOutput(
        model_sha256=model.digest(),
        flow=pd.concat([c.to_frame() for c in cohorts.validation.values()], ignore_index=True),
        data=results["data"],
        cohorts=results["cohorts"],
        case_mix=results["case_mix"],
        rule=results["rule"],
        figures=figures,
        texts=external_validation_texts(results, subgroups_named=bool(study.external_validation.subgroups)),
        notes=tuple(notes),
    )
    ctx.write_results(out.to_dict())
    return out
