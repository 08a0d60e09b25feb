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
from ...measures.discrimination import dichotomise, ordinal_discrimination, roc_curve
from ...measures.overall import overall_accuracy
from ...measures.summary import performance_summary
from ...intake.data import load_cohorts
from ...reporting.descriptive import descriptive_table
from ...modelling.derive import Derivation, derive
from ...errors import RiskvetError, RiskvetWarning
from ...modelling.modelfile import PredictionModel, model_from_fit, save_model
from ...reporting.figures.performance import plot_calibration, plot_roc
from ...reporting.figures.derivation import plot_odds_ratios, plot_selection_curve
from ...modelling.proportional_odds import brant_test, proportional_odds_lr_test
from ...reporting.labels import summary_label
from ...reporting.sentences.derivation import derivation_texts
from ..stagekit import StageContext

__all__ = ["DerivationOutput", "run", "file_sha256", "creation_time"]


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
        ``flow``, ``descriptive``, ``selection_path``, ``cv_curve``, ``model``,
        ``po_brant``, ``po_lr``, ``apparent``, ``thresholds`` (missing keys: not applicable).
    figures : dict of str to str
        Figure name -> PNG path relative to the record folder.
    texts : dict of str to str
        One interpreting sentence per table or figure.
    equation : str
        The model equation in plain language.
    equation_latex : str
        The same in LaTeX.
    """

    derivation: Derivation
    model: PredictionModel
    tables: dict[str, pd.DataFrame] = field(repr=False)
    figures: dict[str, str]
    texts: dict[str, str]
    equation: str
    equation_latex: str

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({"tables": self.tables, "figures": self.figures, "texts": self.texts, "equation": self.equation})

    def to_frame(self) -> pd.DataFrame:
        return self.tables["model"]


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
    frame, y = cohort.frame, np.asarray(cohort.y)
    flow = cohort.exclusions.copy()
    descriptive = descriptive_table(cohort, labels={lv: study.outcome.label(lv) for lv in levels}, min_cell_count=study.output.min_cell_count)

    derivation = derive(study, frame, y)
    model_table = _parameter_table(derivation.fit, levels)
    po = _proportional_odds_checks(study, derivation, frame, y)
    model = _frozen_model(study, cohort, derivation)
    if ctx.model_path.exists():
        raise RiskvetError(f"{ctx.model_path}: a model file already exists in this record; the derivation stage writes a new record's model only")
    save_model(model, ctx.model_path)

    apparent, apparent_table, (rocs, threshold_tables), cal = _apparent(study, y, model.predict_proba(frame))
    cut_labels = [f"{levels[j + 1]} or higher" for j in range(K - 1)]
    figures = _figures(ctx, derivation, model_table, rocs, threshold_tables, cal, cut_labels)
    tables = _tables(flow, descriptive, derivation, model_table, apparent_table, po, threshold_tables, cut_labels)
    texts = derivation_texts(
        cohort=cohort, selection=derivation.selection, n_terms=len(derivation.terms), n_params=derivation.fit.n_params,
        smallest_level=int(min(np.bincount(y, minlength=K))), proportional_odds=po, summary=apparent["summary"],
        n_levels=K, min_cell_count=study.output.min_cell_count,
    )
    ctx.write_results(_results(ctx, cohort, flow, derivation, model, model_table, po, apparent, descriptive))
    return DerivationOutput(
        derivation=derivation,
        model=model,
        tables=tables,
        figures=figures,
        texts=texts,
        equation=model.equation_text(),
        equation_latex=model.equation_latex(),
    )


def _parameter_table(fit: Any, levels: tuple[str, ...]) -> pd.DataFrame:
    """The fitted parameters, thresholds named by the two levels they separate."""
    table = fit.to_frame()
    table.loc[table["kind"] == "threshold", "term"] = [f"threshold {levels[j]} | {levels[j + 1]}" for j in range(len(levels) - 1)]
    return table


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


def _frozen_model(study, cohort, derivation: Derivation) -> PredictionModel:
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
        "n_analysed": int(cohort.n_analysed),
        "selection": study.selection.method,
        "parent_model_sha256": None,
        "update_method": None,
    }
    return model_from_fit(derivation.fit, derivation.design, outcome=outcome, provenance=provenance)


def _apparent(study, y: np.ndarray, prob: np.ndarray) -> tuple[dict[str, Any], pd.DataFrame, list, Any]:
    """Apparent discrimination, calibration and accuracy on the derivation data."""
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
    summary = performance_summary(y, prob)
    rows = [{"measure": summary_label(k, study.outcome.ordered_levels), "apparent": v}
            for k, v in summary.items() if k != "n_fit_warnings" and (K > 2 or k not in _ORDINAL_ONLY)]
    rocs, tables = [], []
    for j in range(K - 1):
        yj, pj = dichotomise(y, prob, cut=j)
        rocs.append(roc_curve(yj, pj))
        th = study.thresholds_for_cut(j)
        tables.append(threshold_table(yj, pj, thresholds=list(th)) if th else None)
    results = {"discrimination": disc.to_dict(), "calibration": cal.to_dict(), "overall": acc.to_dict(), "summary": summary}
    return results, pd.DataFrame(rows), [rocs, tables], cal


def _figures(ctx: StageContext, derivation: Derivation, model_table: pd.DataFrame, rocs, threshold_tables, cal, cut_labels) -> dict[str, str]:
    """Selection curve, odds ratios (logit, proportional), ROC and calibration; name -> PNG path in the record."""
    study = ctx.study
    figures = {}

    def save(fig, name):
        ctx.save_figure(fig, name)
        figures[name] = str((ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir))

    if derivation.selection.cv is not None:
        save(plot_selection_curve(derivation.selection), "selection_curve")
    if study.model.link == "logit" and study.model.proportional:
        spline_columns = {c for t in derivation.design.terms if t.kind == "spline" for c in t.columns}
        if set(model_table["term"]) - spline_columns - set(model_table.loc[model_table["kind"] == "threshold", "term"]):
            save(plot_odds_ratios(model_table[~model_table["term"].isin(spline_columns)]), "odds_ratios")
    save(plot_roc(rocs, labels=cut_labels, operating_points=threshold_tables), "roc")
    save(plot_calibration(cal, titles=cut_labels if len(cut_labels) > 1 else None), "calibration")
    return figures


def _tables(flow, descriptive, derivation: Derivation, model_table, apparent_table, po, threshold_tables, cut_labels) -> dict[str, pd.DataFrame]:
    """The stage's tables by name (a name is missing where the table does not apply)."""
    tables = {
        "flow": flow,
        "descriptive": descriptive.to_frame(),
        "selection_path": derivation.selection.path,
        "model": model_table,
        "apparent": apparent_table,
    }
    if derivation.selection.cv is not None:
        tables["cv_curve"] = derivation.selection.cv
    if po:
        tables["po_brant"] = po["brant"].to_frame()
        tables["po_lr"] = po["lr"].to_frame()
    th_rows = []
    for j, tab in enumerate(threshold_tables):
        if tab is not None:
            t = tab.to_frame()
            t.insert(0, "cut", cut_labels[j])
            th_rows.append(t)
    if th_rows:
        tables["thresholds"] = pd.concat(th_rows, ignore_index=True)
    return tables


def _results(ctx: StageContext, cohort, flow, derivation: Derivation, model: PredictionModel, model_table, po, apparent, descriptive) -> dict[str, Any]:
    """The content of ``results/derivation.json``: no times, run ids or record paths."""
    fit = derivation.fit
    return {
        "stage": "derivation",
        "cohort": {"n_screened": cohort.n_screened, "n_analysed": cohort.n_analysed, "outcome_counts": cohort.outcome_counts},
        "exclusions": flow,
        "selection": derivation.selection.to_dict(),
        "terms": list(derivation.terms),
        "model": {k: v for k, v in model.content().items() if k != "provenance"},
        "model_file": str(ctx.model_path.relative_to(ctx.record_dir)) if ctx.model_path.is_relative_to(ctx.record_dir) else ctx.model_path.name,
        "fit": {"loglik": fit.loglik, "aic": fit.aic, "bic": fit.bic, "n": fit.n, "converged": fit.converged, "warnings": list(fit.warnings), "lr_test": fit.lr_test.to_dict()},
        "parameters": model_table,
        "proportional_odds": {k: v.to_dict() for k, v in po.items()},
        "apparent": apparent,
        "descriptive_suppressed_cells": descriptive.n_suppressed,
    }
