"""The derivation stage: from the derivation cohort to the frozen model file.

:func:`run` loads and checks the derivation cohort, shows the data flow and a
descriptive table by outcome level, runs the study's derivation procedure
(:func:`riskvet.derive.derive`: knots, selection, fit), checks proportional
odds, measures apparent performance, writes ``models/model.json`` and
``results/derivation.json`` (deterministic content) and the figures.
"""

from __future__ import annotations

import hashlib
import os
import warnings
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..._jsonable import to_jsonable
from ...measures.calibration import calibration, ordinal_calibration
from ...measures.decision import threshold_table
from ...reporting.classification import publish_thresholds
from ...measures.discrimination import dichotomise, ordinal_discrimination, roc_curve
from ...measures.overall import overall_accuracy
from ...measures.summary import performance_summary
from ...intake.data import expand_cohort, load_cohorts
from ...reporting.descriptive import descriptive_table
from ...modelling.derive import Derivation, candidate_parameters
from .imputed import (complete_case_comparison, complete_case_sentence, complete_case_words, derive_cohort, imputation_settings,
                      imputed_model_words, missing_data_section, published_counts, pooled_apparent, pooled_parameter_columns)
from ...modelling.term_effects import TermEffects, column_label, term_effects, term_label
from ...errors import RiskvetError, RiskvetWarning
from ...modelling.modelfile import PredictionModel, model_from_fit, save_model
from ...reporting.figures.performance import calibration_statistics, plot_calibration, plot_roc, published_calibration
from ...reporting.figures.derivation import plot_odds_ratios, plot_penalty_curve, plot_proportional_odds, plot_selection_curve
from ...modelling.proportional_odds import brant_test, proportional_odds_lr_test
from ...reporting.labels import cut_label, summary_label
from ...reporting.sentences.common import interval_words, measure_guide
from ...reporting.sentences.derivation import LOW_EVENTS_PER_PARAMETER, derivation_texts
from ...planning.samplesize import data_support_notes
from ...validation.external import measure_label
from ..stagekit import StageContext

__all__ = ["DerivationOutput", "PEOPLE_FLOW_WORDS", "run", "file_sha256", "creation_time"]


def file_sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def creation_time() -> str | None:
    """The creation time a model file carries: ``SOURCE_DATE_EPOCH`` when the user sets it, else none.

    A model file holds only what follows from the study, the data and the
    package, so the same study run in any folder, clone or machine writes
    the same bytes; the run's own times are in the record's manifest.
    ``SOURCE_DATE_EPOCH`` (the reproducible-builds convention) is the one
    way to stamp a time into the file, and it is the user's choice.
    """
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if not epoch:
        return None
    return datetime.fromtimestamp(int(epoch), tz=timezone.utc).replace(microsecond=0).isoformat()


@dataclass(frozen=True)
class DerivationOutput:
    """What the derivation stage found and wrote.

    Attributes
    ----------
    derivation : Derivation
        Design, selection and fit.
    model : PredictionModel
        The frozen model written to ``models/model.json``.
    tables : dict of str to DataFrame
        ``flow``, ``descriptive``, ``selection_path``, ``cv_curve``, ``model``
        (coefficients in words), ``effects`` (each term over a stated
        contrast), ``term_tests`` (joint Wald test of each term),
        ``po_terms`` (Brant's test per term, no overall row; ``po_brant`` is
        the same frame), ``po_lr``, ``apparent``, ``thresholds`` (missing
        keys: not applicable).  Plain range index, headers in words.
    figures : dict of str to str
        Figure name -> PNG path relative to the record folder.
    texts : dict of str to str
        One interpreting sentence per table or figure.
    equation : str
        The model equation in plain language.
    equation_latex : str
        The same in LaTeX.
    effects : TermEffects
        Term effects over stated contrasts and the joint Wald tests.
    parameters : DataFrame
        The fit's own parameter table (internal column names), for figures.
    inference_caution : str
        What the Wald statistics mean after variable selection (also ``texts["inference"]``).
    events_per_parameter : float
        People in the smallest outcome level per candidate parameter.
    low_events_per_parameter : bool
        Whether that is below :data:`LOW_EVENTS_PER_PARAMETER`.
    guide_measures : tuple of str
        Keys of the measures of the apparent table, for the guide of what good looks like.
    proportional_odds : dict
        ``{"brant": BrantTest, "lr": ProportionalOddsLRTest}``; empty when not checked.
    missing : dict
        Under multiple imputation, the missing-data section of the page
        (``tables``, ``figures``, ``texts``; :func:`riskvet.chain.stages.imputed.page_items`
        shows it); empty under complete cases.
    """

    derivation: Derivation
    model: PredictionModel
    tables: dict[str, pd.DataFrame] = field(repr=False)
    figures: dict[str, str]
    texts: dict[str, str]
    equation: str
    equation_latex: str
    effects: TermEffects = field(repr=False)
    parameters: pd.DataFrame = field(repr=False)
    inference_caution: str
    events_per_parameter: float
    low_events_per_parameter: bool
    guide_measures: tuple[str, ...]
    proportional_odds: dict[str, Any] = field(repr=False)
    missing: dict[str, Any] = field(default_factory=dict, repr=False)

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({"tables": self.tables, "figures": self.figures, "texts": self.texts, "equation": self.equation,
                            "events_per_parameter": self.events_per_parameter, "low_events_per_parameter": self.low_events_per_parameter})

    def to_frame(self) -> pd.DataFrame:
        return self.tables["model"]

    @property
    def guide(self) -> pd.DataFrame:
        """One line per measure of the apparent-performance table on what good looks like."""
        return measure_guide(self.guide_measures, n_levels=len(self.model.levels))

    @property
    def column_labels(self) -> dict[str, str]:
        """Each design column of the final model in words (``core_temp_nonlin1`` -> ``core_temp (spline, part 2 of 3)``)."""
        design = self.derivation.design
        return {c: column_label(design, c) for c in design.columns}


#: Headers of the exclusion table of a cohort read with frequency weights, which counts rows and people.
PEOPLE_FLOW_WORDS = {"excluded": "rows excluded", "remaining": "rows remaining",
                     "excluded_people": "people excluded", "remaining_people": "people remaining"}

#: Summary measures that only mean something for three or more levels.
_ORDINAL_ONLY = {"average_cut_auc", "ordinal_c", "generalised_c"}


def run(ctx: StageContext) -> DerivationOutput:
    """Run the derivation stage into the record of ``ctx``.

    Returns
    -------
    DerivationOutput
    """
    study = ctx.study
    levels = study.outcome.ordered_levels
    K = len(levels)
    cohort = load_cohorts(study).derivation
    # With frequency weights the model is fitted on the weighted rows; everything said about people (counts,
    # descriptions, measures, tests) is computed on the cohort written out one row per person.
    people = expand_cohort(cohort)
    frame, y = people.frame, np.asarray(people.y)
    flow = cohort.exclusions.rename(columns=PEOPLE_FLOW_WORDS) if cohort.weights is not None else cohort.exclusions.copy()
    descriptive = descriptive_table(cohort, labels={lv: study.outcome.label(lv) for lv in levels}, min_cell_count=study.output.min_cell_count)

    derivation, imputed = derive_cohort(study, cohort)
    separated = separated_terms(derivation)
    _stop_if_separated(study, derivation, separated)
    cut_labels = [cut_label(levels, j, binary=K == 2) for j in range(K - 1)]
    parameters = _parameter_table(derivation.fit, levels)
    # under imputation, contrasts come from the stacked completed data and the proportional-odds checks (a
    # diagnostic) run on the first completed data set
    effects = term_effects(derivation.fit, derivation.design, frame if imputed is None else imputed.stacked, cut_names=cut_labels)
    po = _proportional_odds_checks(study, derivation, frame if imputed is None else imputed.completed[0], y)
    settings = None if imputed is None else imputation_settings(study, imputed, derivation)
    model = _frozen_model(study, cohort, derivation, settings)
    if ctx.model_path.exists():
        raise RiskvetError(f"{ctx.model_path}: a model file already exists in this record; the derivation stage writes a new record's model only")
    save_model(model, ctx.model_path)

    if imputed is None:
        prob, pooled_summary = _per_person(model.predict_proba(cohort.frame), cohort.weights), None
    else:
        prob, pooled_summary = pooled_apparent(model, imputed, y)
    apparent, apparent_table, (rocs, threshold_tables), cal = _apparent(study, y, prob, summary=pooled_summary)
    smallest = int(min(np.bincount(y, minlength=K)))
    n_candidates = candidate_parameters(derivation.candidate_design, K)
    figures = _figures(ctx, derivation, parameters, rocs, threshold_tables, cal, cut_labels, po)
    tables = _tables(flow, descriptive, derivation, pooled_parameter_columns(_model_frame(parameters, derivation, cut_labels), derivation),
                     effects, apparent_table, po, threshold_tables, cut_labels)
    tables["calibration_statistics"] = calibration_statistics(cal, levels=levels)
    texts = derivation_texts(
        cohort=people, selection=derivation.selection, n_terms=len(derivation.terms), n_params=derivation.fit.n_params,
        smallest_level=smallest, proportional_odds=po, summary=apparent["summary"],
        n_levels=K, min_cell_count=study.output.min_cell_count, levels=levels,
        n_candidate_parameters=n_candidates, calibration=cal, link=study.model.link,
        fit=derivation.fit, separated_terms=separated, n_imputations=getattr(derivation, "m", None) or None,
    )
    texts["data_support"] = data_support_notes(
        level_counts=np.bincount(y, minlength=K).tolist(), n_parameters=len(derivation.candidate_design.columns),
        anticipated_c=None if study.planning is None else study.planning.anticipated_c,
        anticipated_r2_cs=None if study.planning is None else study.planning.anticipated_r2_cs,
        shrinkage=0.9 if study.planning is None else study.planning.shrinkage, penalized=study.selection.penalized,
        cut_names=cut_labels, events_per_parameter=False,
    )
    missing = _missing_data_parts(ctx, cohort, derivation, imputed, levels, settings)
    tables.update(missing["tables"])
    figures.update(missing["figures"])
    texts.update(missing["texts"])
    epp = smallest / max(n_candidates, 1)
    judged = {"events_per_candidate_parameter": epp, "low_events_per_parameter": epp < LOW_EVENTS_PER_PARAMETER,
              "inference_caution": texts["inference"], "separated_terms": list(separated),
              "estimation": derivation.fit.estimation, "refit_with_firth": derivation.selection.refit_with_firth}
    ctx.write_results(_results(ctx, cohort, flow, derivation, model, parameters, po, apparent, descriptive)
                      | {"term_effects": effects.to_dict(), "texts": texts, **judged, "missing_data": missing["results"]})
    return DerivationOutput(
        derivation=derivation,
        model=model,
        tables=tables,
        figures=figures,
        texts=texts,
        equation=model.equation_text(),
        equation_latex=model.equation_latex(),
        effects=effects,
        parameters=parameters,
        inference_caution=texts["inference"],
        events_per_parameter=epp,
        low_events_per_parameter=epp < LOW_EVENTS_PER_PARAMETER,
        guide_measures=tuple(apparent_table.attrs.get("keys", ())),
        proportional_odds=po,
        missing=missing.get("section", {}),
    )


def _missing_data_parts(ctx: StageContext, cohort, derivation: Derivation, imputed, levels, settings) -> dict[str, Any]:
    """Tables, figures, sentences and results of the missing-data section (a sentence only under complete cases)."""
    study = ctx.study
    parts: dict[str, Any] = {"tables": {}, "figures": {}, "texts": {}, "results": {"method": cohort.missing}}
    if imputed is None:
        parts["texts"]["missing_data"] = complete_case_words(cohort)
        return parts
    parts["results"] |= {"settings": settings, "pooling": derivation.pooling.to_dict()}
    section_parts = missing_data_section(ctx, imputed.imputations, cohort=cohort, label="derivation")
    parts["section"] = section_parts
    parts["figures"].update(section_parts["figures"])
    parts["results"]["report"] = section_parts["results"]
    parts["texts"]["missing_data"] = imputed_model_words(settings, derivation, selection_method=study.selection.method)
    if study.missing_data.complete_case_sensitivity:
        table, info = complete_case_comparison(study, cohort, derivation, parameter_table=lambda fit: _parameter_table(fit, levels))
        if table is not None:
            parts["tables"]["complete_case_comparison"] = table.reset_index(drop=True)
        parts["texts"]["complete_case_comparison"] = complete_case_sentence(info, min_cell_count=study.output.min_cell_count)
        parts["results"]["complete_case_sensitivity"] = published_counts(info, min_cell_count=study.output.min_cell_count)
    return parts


def _per_person(values: np.ndarray, weights: np.ndarray | None) -> np.ndarray:
    """Row values repeated by the rows' frequency weights (one per person); unchanged without weights."""
    return values if weights is None else np.repeat(values, weights, axis=0)


def separated_terms(derivation: Derivation) -> tuple[str, ...]:
    """The terms, in words, whose columns the separation check of the final fit named (in design order)."""
    found = set(derivation.fit.separation)
    return tuple(term_label(t) for t in derivation.design.terms if found & set(t.columns))


def _stop_if_separated(study, derivation: Derivation, separated: tuple[str, ...]) -> None:
    """Refuse a separated maximum-likelihood model when the study says ``model.on_separation: stop``, and a Firth
    fit without a maximum (possible for the model with a slope per cut, whose penalty is unbounded near crossing
    cumulative probabilities)."""
    fit = derivation.fit
    if fit.estimation == "firth" and not fit.converged:
        why = next((w for w in fit.warnings if w.startswith("convergence")), "no convergence")
        raise RiskvetError(
            f"Firth's bias-reduced fit of the chosen model found no maximum on the derivation data ({why}). "
            + ("With a slope per cut (model.proportional: false) the penalised likelihood can rise without bound; use "
               "model.proportional: true, or merge sparse categories or levels." if not fit.proportional else
               "Merge sparse categories or levels, or use fewer candidate terms.")
        )
    if not separated or fit.estimation == "firth":
        return
    raise RiskvetError(
        f"the derivation data are separated by {', '.join(separated)} (columns {list(derivation.fit.separation)}): some combination "
        "of their values predicts part of the outcome perfectly, so the maximum-likelihood estimates are infinite and the model "
        "cannot be used. The study says model.on_separation: stop. To go on, set model.on_separation: firth (refit the chosen model "
        "by Firth's bias-reduced method) or model.estimation: firth, or merge the sparse categories or levels."
    )


def _parameter_table(fit: Any, levels: tuple[str, ...]) -> pd.DataFrame:
    """The fit's parameter table, thresholds (and the cut of a per-cut coefficient) named by the cut's event."""
    table = fit.to_frame()
    K = len(levels)
    names = {name: f"threshold for {cut_label(levels, j, binary=K == 2)}" for j, name in enumerate(fit.thresholds.index)}
    cuts = {name: cut_label(levels, j, binary=K == 2) for j, name in enumerate(fit.thresholds.index)}
    table.loc[table["kind"] == "threshold", "term"] = [names[t] for t in table.loc[table["kind"] == "threshold", "term"]]
    table["cut"] = [cuts.get(c, c) for c in table["cut"]]
    return table


def _model_frame(parameters: pd.DataFrame, derivation: Derivation, cut_labels: list[str]) -> pd.DataFrame:
    """The coefficients for reading: parameters in words, Wald intervals, per-unit odds ratios of single-column linear terms only."""
    design = derivation.design
    coefficient = parameters["kind"].to_numpy() == "coefficient"
    words = [column_label(design, t) if c else t for t, c in zip(parameters["term"], coefficient)]
    frame = pd.DataFrame({"parameter": words})
    if not derivation.fit.proportional:
        frame["cut"] = parameters["cut"].to_numpy()
    frame["estimate"] = parameters["estimate"].to_numpy()
    kind = derivation.fit.interval_kind
    if kind != "none":
        # penalised estimates have no valid standard errors, so those columns are left off
        interval = interval_words("profile_penalised" if kind == "profile penalised likelihood" else "wald")
        frame["standard error"] = parameters["se"].to_numpy()
        frame[f"lower ({interval})"] = parameters["lower"].to_numpy()
        frame[f"upper ({interval})"] = parameters["upper"].to_numpy()
        frame["z"] = parameters["z"].to_numpy()
        frame["p-value"] = parameters["p"].to_numpy()
    if "odds_ratio" in parameters.columns:
        linear = {t.columns[0] for t in design.terms if t.kind == "linear"}
        keep = coefficient & parameters["term"].isin(linear).to_numpy()
        frame["odds ratio per unit"] = np.where(keep, parameters["odds_ratio"].to_numpy(dtype=float), np.nan)
    return frame


def _proportional_odds_checks(study, derivation: Derivation, frame: pd.DataFrame, y: np.ndarray) -> dict[str, Any]:
    """Brant's and the likelihood-ratio test, for an ordered outcome under a proportional model; else empty."""
    X = derivation.design.transform(frame)
    if not (len(study.outcome.ordered_levels) > 2 and study.model.proportional and X.shape[1] > 0):
        return {}
    # their statistical warnings are recorded on the results and shown as text
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        brant = brant_test(X, y, groups=derivation.design.term_columns)
        lr = proportional_odds_lr_test(X, y, link=study.model.link)
    return {"brant": brant, "lr": lr}


def _frozen_model(study, cohort, derivation: Derivation, imputation: dict[str, Any] | None = None) -> PredictionModel:
    """The model file's content: the fit and design, the outcome, and where they came from."""
    levels = study.outcome.ordered_levels
    outcome = {
        "column": study.outcome.column,
        "type": study.outcome.type,
        "levels": list(levels),
        "labels": {lv: study.outcome.label(lv) for lv in levels},
    }
    provenance = {
        "created": creation_time(),
        "study_name": study.study.name,
        "study_sha256": study.digest(),
        "derivation_data_sha256": file_sha256(study.data.derivation),
        "n_analysed": int(cohort.n_people),
        **({} if cohort.weights is None else {"weight_column": cohort.weight_column, "n_rows_analysed": int(cohort.n_analysed)}),
        "selection": study.selection.method,
        "estimation": derivation.fit.estimation,
        "penalty": None if derivation.selection.penalty is None else {"alpha": derivation.selection.penalty.alpha,
                                                                         "l1_ratio": derivation.selection.penalty.l1_ratio},
        "parent_model_sha256": None,
        "update_method": None,
        **({} if imputation is None else {"missing_data": imputation}),
    }
    return model_from_fit(derivation.fit, derivation.design, outcome=outcome, provenance=provenance)


def _apparent(study, y: np.ndarray, prob: np.ndarray, *, summary: dict[str, float] | None = None) -> tuple[dict[str, Any], pd.DataFrame, list, Any]:
    """Apparent discrimination, calibration and accuracy on the derivation data.

    ``summary`` replaces the summary measures computed from ``prob`` (under
    imputation: the measures averaged over the completed data sets, while
    ``prob`` is each person's prediction averaged over them).
    """
    K = prob.shape[1]
    disc = ordinal_discrimination(y, prob)
    # the development-data degrees of freedom of the Hosmer-Lemeshow tests were
    # derived for logistic and proportional-odds logit fits; for other model
    # forms the independent-data df (more conservative) is used
    logit_fit = study.model.link == "logit" and study.model.proportional
    if K == 2:
        cal = calibration(y, prob[:, 1], development=logit_fit)
    else:
        cal = ordinal_calibration(y, prob, development=logit_fit)
    acc = overall_accuracy(y, prob)
    summary = performance_summary(y, prob) if summary is None else summary
    keys = [k for k in summary if k != "n_fit_warnings" and (K > 2 or k not in _ORDINAL_ONLY)]
    table = pd.DataFrame({"measure": [_measure_words(k, study.outcome.ordered_levels) for k in keys],
                          "apparent (derivation data)": [summary[k] for k in keys]})
    table.attrs["keys"] = tuple(keys)
    rocs, tables = [], []
    for j in range(K - 1):
        yj, pj = dichotomise(y, prob, cut=j)
        rocs.append(roc_curve(yj, pj))
        th = study.thresholds_for_cut(j)
        # small classification counts, and the measures that would give them back, are withheld
        tables.append(publish_thresholds(threshold_table(yj, pj, thresholds=list(th)), min_cell_count=study.output.min_cell_count).table if th else None)
    # the calibration groups and prediction bins as the figure draws them: small counts merged or suppressed
    published = published_calibration(cal, min_cell_count=study.output.min_cell_count)
    results = {"discrimination": disc.to_dict(), "calibration": published, "overall": acc.to_dict(), "summary": summary}
    return results, table, [rocs, tables], cal


def _measure_words(key: str, levels: tuple[str, ...]) -> str:
    """A summary key in words, its cut named as everywhere on the page: ``auc_cut0`` -> ``C (AUC) of the cut, observed or higher``."""
    head, sep, tail = key.rpartition("_cut")
    if sep and tail.isdigit() and len(levels) > 2:
        return f"{measure_label(head, len(levels))}, {cut_label(levels, int(tail), binary=False)}"
    return summary_label(key, levels)


def _figures(ctx: StageContext, derivation: Derivation, parameters: pd.DataFrame, rocs, threshold_tables, cal, cut_labels, po) -> dict[str, str]:
    """Selection curve, odds ratios (logit, proportional), ROC and calibration; name -> PNG path in the record.

    The odds-ratio figure shows per-unit odds ratios of single-column linear
    terms and level-against-reference odds ratios of categories only; a
    spline's or an interaction's columns have no odds ratio of their own
    (their effects over stated contrasts are in the stage's ``effects``).
    """
    study = ctx.study
    figures = {}

    def save(fig, name):
        ctx.save_figure(fig, name)
        figures[name] = str((ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir))

    if derivation.selection.cv is not None:
        save(plot_selection_curve(derivation.selection), "selection_curve")
    if derivation.selection.penalty is not None:
        save(plot_penalty_curve(derivation.selection), "penalty_curve")
    if study.model.link == "logit" and study.model.proportional:
        single = {c for t in derivation.design.terms if t.kind in ("linear", "categorical") for c in t.columns}
        shown = parameters[(parameters["kind"] == "coefficient") & parameters["term"].isin(single)].copy()
        if len(shown):
            shown["term"] = [column_label(derivation.design, t) for t in shown["term"]]
            save(plot_odds_ratios(shown), "odds_ratios")
    levels = study.outcome.ordered_levels
    save(plot_roc(rocs, labels=cut_labels, operating_points=threshold_tables, levels=levels), "roc")
    save(plot_calibration(cal, titles=cut_labels if len(cut_labels) > 1 else None, min_cell_count=study.output.min_cell_count,
                          levels=levels), "calibration")
    if po:
        columns = {c: column_label(derivation.design, c) for c in po["brant"].coef_by_cut.index}
        save(plot_proportional_odds(po["brant"], po["lr"], levels=levels, column_labels=columns), "proportional_odds")
    return figures


#: Threshold-table columns in words: the classification at each threshold, then what it predicts.
_THRESHOLD_WORDS = {
    "threshold": "risk threshold", "tp": "true positives", "fp": "false positives", "fn": "false negatives", "tn": "true negatives",
    "sensitivity": "sensitivity", "sensitivity_lower": "sensitivity, lower", "sensitivity_upper": "sensitivity, upper",
    "specificity": "specificity", "specificity_lower": "specificity, lower", "specificity_upper": "specificity, upper",
}
_PREDICTIVE_WORDS = {
    "threshold": "risk threshold",
    "ppv": "positive predictive value", "ppv_lower": "positive predictive value, lower", "ppv_upper": "positive predictive value, upper",
    "npv": "negative predictive value", "npv_lower": "negative predictive value, lower", "npv_upper": "negative predictive value, upper",
    "lr_positive": "positive likelihood ratio", "lr_positive_lower": "positive likelihood ratio, lower",
    "lr_positive_upper": "positive likelihood ratio, upper", "lr_negative": "negative likelihood ratio",
    "lr_negative_lower": "negative likelihood ratio, lower", "lr_negative_upper": "negative likelihood ratio, upper",
}


def _threshold_frames(threshold_tables, cut_labels) -> dict[str, pd.DataFrame]:
    """The classification at each study threshold, in two frames narrow enough to read: counts with sensitivity and specificity; predictive values and likelihood ratios."""
    parts = []
    for j, tab in enumerate(threshold_tables):
        if tab is not None:
            t = tab.to_frame()
            t.insert(0, "outcome", cut_labels[j])
            parts.append(t)
    if not parts:
        return {}
    whole = pd.concat(parts, ignore_index=True)
    return {
        "thresholds": whole[["outcome", *_THRESHOLD_WORDS]].rename(columns=_THRESHOLD_WORDS),
        "thresholds_predictive": whole[["outcome", *_PREDICTIVE_WORDS]].rename(columns=_PREDICTIVE_WORDS),
    }


def _selection_frames(derivation: Derivation) -> dict[str, pd.DataFrame]:
    """The selection path and the cross-validation curve, headers and terms in words."""
    labels = {t.name: term_label(t) for t in derivation.candidate_design.terms}
    path = derivation.selection.path.copy()
    path["term"] = [labels.get(t, t) for t in path["term"]]
    path = path.rename(columns={"action": "action", "criterion": "entry criterion", "statistic": "test statistic",
                                "p": "p-value", "loglik": "log-likelihood", "aic": "AIC", "n_params": "parameters"})
    out = {"selection_path": path.reset_index(drop=True)}
    if derivation.selection.cv is not None:
        out["cv_curve"] = derivation.selection.cv.rename(columns={
            "size": "terms added", "mean_test_loglik": "mean held-out log-likelihood per person",
            "se": "standard error", "n_folds_reached": "folds that reached this size"}).reset_index(drop=True)
    if derivation.selection.penalty is not None:
        curve = derivation.selection.penalty.to_frame()
        out["penalty_curve"] = curve.rename(columns={
            "alpha": "penalty", "mean_test_loglik": "mean held-out log-likelihood per person", "se": "standard error",
            "n_nonzero_groups": "terms with a non-zero coefficient"}).reset_index(drop=True)
    return out


def _proportional_odds_frames(po, derivation: Derivation) -> dict[str, pd.DataFrame]:
    """Brant's test per term (no overall row: the overall tests are in a sentence) and the likelihood-ratio test, in words."""
    if not po:
        return {}
    labels = {t.name: term_label(t) for t in derivation.design.terms}
    terms = po["brant"].terms
    per_term = pd.DataFrame({
        "term": [labels.get(t, t) for t in terms["term"]],
        "chi-square": terms["statistic"].to_numpy(dtype=float),
        "df": terms["df"].to_numpy(),
        "p (Brant's test of the term)": terms["p"].to_numpy(dtype=float),
    })
    lr = po["lr"]
    lr_frame = pd.DataFrame([{
        "chi-square": lr.statistic, "df": lr.df, "p (likelihood-ratio test)": lr.p,
        "log-likelihood, one slope for all cuts": lr.loglik_proportional,
        "log-likelihood, one slope per cut": lr.loglik_nonproportional,
    }])
    return {"po_terms": per_term, "po_brant": per_term, "po_lr": lr_frame}


def _tables(flow, descriptive, derivation: Derivation, model_frame, effects: TermEffects, apparent_table, po, threshold_tables, cut_labels) -> dict[str, pd.DataFrame]:
    """The stage's tables by name (a name is missing where the table does not apply)."""
    tables = {
        "flow": flow,
        "descriptive": descriptive.to_frame(),
        **_selection_frames(derivation),
        "model": model_frame,
        "effects": effects.effects,
        "term_tests": effects.tests,
        "apparent": apparent_table,
        **_proportional_odds_frames(po, derivation),
        **_threshold_frames(threshold_tables, cut_labels),
    }
    return {name: frame.reset_index(drop=True) for name, frame in tables.items()}


def _results(ctx: StageContext, cohort, flow, derivation: Derivation, model: PredictionModel, model_table, po, apparent, descriptive) -> dict[str, Any]:
    """The content of ``results/derivation.json``: no times, run ids or record paths."""
    fit = derivation.fit
    return {
        "stage": "derivation",
        "cohort": _cohort_counts(cohort),
        "exclusions": flow,
        "selection": derivation.selection.to_dict(),
        "terms": list(derivation.terms),
        "model": {k: v for k, v in model.content().items() if k != "provenance"},
        "model_file": str(ctx.model_path.relative_to(ctx.record_dir)) if ctx.model_path.is_relative_to(ctx.record_dir) else ctx.model_path.name,
        "fit": {"loglik": fit.loglik, "aic": fit.aic, "bic": fit.bic, "n": fit.n, "converged": fit.converged, "warnings": list(fit.warnings), "lr_test": fit.lr_test.to_dict()},
        "parameters": model_table,
        "proportional_odds": {k: _small_counts_withheld(v.to_dict(), ctx.study.output.min_cell_count) for k, v in po.items()},
        "apparent": apparent,
        "descriptive_suppressed_cells": descriptive.n_suppressed,
    }


def _cohort_counts(cohort) -> dict[str, Any]:
    """The derivation cohort's counts for the results file: people screened and analysed, and people per outcome level.

    Without frequency weights a row is a person.  With them the counts are
    sums of the weights (``"counted": "people"``), and the rows of the file
    are given beside them.
    """
    counts = {"n_screened": cohort.n_people_screened, "n_analysed": cohort.n_people, "outcome_counts": cohort.outcome_counts}
    if cohort.weights is None:
        return counts
    return counts | {"counted": "people", "weight_column": cohort.weight_column, "n_rows_screened": cohort.n_screened,
                     "n_rows_analysed": cohort.n_analysed, "outcome_rows": cohort.outcome_rows}


def _small_counts_withheld(content: dict[str, Any], min_cell_count: int) -> dict[str, Any]:
    """A proportional-odds result for the results file: a count of people below the minimum is withheld."""
    crossing = content.get("n_crossing")
    if isinstance(crossing, int) and 0 < crossing < min_cell_count:
        return {**content, "n_crossing": None, "n_crossing_withheld": f"fewer than {min_cell_count}"}
    return content
