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
from ..stagekit import StageContext

__all__ = ["DerivationOutput", "run", "file_sha256", "creation_time"]


def file_sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def creation_time() -> str:
    """UTC creation time for a model file.

    ``SOURCE_DATE_EPOCH`` (the reproducible-builds convention), when set,
    fixes it, so that two runs write byte-identical model files.  The runner
    sets it to the latest modification time of the study and data files
    unless the user has set it, so inside a record ``created`` is the time
    the inputs were last changed; the manifest holds the run's own times.
    """
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    moment = datetime.fromtimestamp(int(epoch), tz=timezone.utc) if epoch else datetime.now(timezone.utc)
    return moment.replace(microsecond=0).isoformat()


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


def _fmt(value: float, digits: int = 3) -> str:
    return "n/a" if value is None or not np.isfinite(value) else f"{value:.{digits}f}"


#: Summary measures that only mean something for three or more levels.
_ORDINAL_ONLY = {"average_cut_auc", "ordinal_c", "generalised_c"}


def _summary_label(key: str, levels) -> str:
    """``auc_cut1`` -> ``C statistic (AUC), Y >= transferred`` (binary: the measure alone)."""
    from ...intake.outcome import cut_name
    from ...validation.external import measure_label

    head, sep, tail = key.rpartition("_cut")
    if sep and tail.isdigit():
        words = measure_label(head, len(levels))
        return words if len(levels) == 2 else f"{words}, {cut_name(levels, int(tail))}"
    return measure_label(key, len(levels))


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
    rows = [{"measure": _summary_label(k, study.outcome.ordered_levels), "apparent": v}
            for k, v in summary.items() if k != "n_fit_warnings" and (K > 2 or k not in _ORDINAL_ONLY)]
    rocs, tables = [], []
    for j in range(K - 1):
        yj, pj = dichotomise(y, prob, cut=j)
        rocs.append(roc_curve(yj, pj))
        th = study.thresholds_for_cut(j)
        tables.append(threshold_table(yj, pj, thresholds=list(th)) if th else None)
    results = {"discrimination": disc.to_dict(), "calibration": cal.to_dict(), "overall": acc.to_dict(), "summary": summary}
    return results, pd.DataFrame(rows), [rocs, tables], cal


def run(ctx: StageContext) -> DerivationOutput:
    """Run the derivation stage into the record of ``ctx``.

    Returns
    -------
    DerivationOutput
    """
    study = ctx.study
    levels = study.outcome.ordered_levels
    labels = [study.outcome.label(lv) for lv in levels]
    K = len(levels)
    cohort = load_cohorts(study).derivation
    frame, y = cohort.frame, np.asarray(cohort.y)

    # -- data flow and description ------------------------------------------------------
    flow = cohort.exclusions.copy()
    descriptive = descriptive_table(cohort, labels=dict(zip(levels, labels)), min_cell_count=study.output.min_cell_count)

    # -- the derivation procedure ---------------------------------------------------------
    derivation = derive(study, frame, y)
    fit = derivation.fit
    X = derivation.design.transform(frame)
    model_table = fit.to_frame()
    model_table.loc[model_table["kind"] == "threshold", "term"] = [
        f"threshold {levels[j]} | {levels[j + 1]}" for j in range(K - 1)
    ]

    # -- proportional-odds checks (ordered outcomes, proportional model) ------------------
    po = {}
    if K > 2 and study.model.proportional and X.shape[1] > 0:
        # their statistical warnings are recorded on the results and shown as text
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RiskvetWarning)
            brant = brant_test(X, y, groups=derivation.design.term_columns)
            lr = proportional_odds_lr_test(X, y, link=study.model.link)
        po = {"brant": brant, "lr": lr}

    # -- the frozen model -------------------------------------------------------------------
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
    model = model_from_fit(fit, derivation.design, outcome=outcome, provenance=provenance)
    if ctx.model_path.exists():
        raise RiskvetError(f"{ctx.model_path}: a model file already exists in this record; the derivation stage writes a new record's model only")
    save_model(model, ctx.model_path)

    # -- apparent performance -----------------------------------------------------------------
    prob = model.predict_proba(frame)
    apparent, apparent_table, (rocs, threshold_tables), cal = _apparent(study, y, prob)

    # -- figures ------------------------------------------------------------------------------
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
    cut_labels = [f"{levels[j + 1]} or higher" for j in range(K - 1)]
    save(plot_roc(rocs, labels=cut_labels, operating_points=threshold_tables), "roc")
    save(plot_calibration(cal, titles=cut_labels if K > 2 else None), "calibration")

    # -- tables and sentences -----------------------------------------------------------------
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

    summary = apparent["summary"]
    n_params = fit.n_params
    events = int(min(np.bincount(y, minlength=K)))
    texts = {
        "flow": (
            f"{cohort.n_screened} people were screened and {cohort.n_analysed} analysed; "
            f"{cohort.n_screened - cohort.n_analysed} were excluded (complete-case analysis), each counted under the first reason that applied."
        ),
        "descriptive": (
            f"Predictors by outcome level; counts below {study.output.min_cell_count} are suppressed."
            if study.output.min_cell_count > 1 else "Predictors by outcome level."
        ),
        "selection": _selection_sentence(derivation, study),
        "model": (
            f"The final model has {len(derivation.terms)} terms and {n_params} parameters "
            f"({events} people in the smallest outcome level, {events / max(n_params, 1):.1f} per parameter). "
            "Odds ratios are per unit of each column; a value above 1 shifts risk towards higher levels. "
            "Spline columns are read together, not one by one, and are left out of the odds-ratio figure."
        ),
        "po": _po_sentence(po),
        "apparent": (
            f"Apparent performance on the derivation data (optimistic by construction): "
            + ", ".join(f"C of cut {j} {_fmt(summary[f'auc_cut{j}'])}" for j in range(K - 1))
            + (f", ordinal c-index {_fmt(summary['ordinal_c'])}" if K > 2 else "")
            + f", Brier {_fmt(summary['brier'])}, Nagelkerke R² {_fmt(summary['nagelkerke_r2'])}. "
            "Internal validation estimates how much of this is optimism."
        ),
        "calibration": (
            "On its own data a maximum-likelihood binary model has calibration-in-the-large 0 and slope 1 by construction "
            "(for an ordered outcome each cut is close to, not exactly at, these values); "
            "the curve shows whether the model's form (link, splines) fits across the range of risk."
        ),
        "roc": "ROC curve per cut, with the operating points of the study's thresholds marked.",
    }

    results = {
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
    ctx.write_results(results)
    return DerivationOutput(
        derivation=derivation,
        model=model,
        tables=tables,
        figures=figures,
        texts=texts,
        equation=model.equation_text(),
        equation_latex=model.equation_latex(),
    )


def _selection_sentence(derivation: Derivation, study) -> str:
    sel = derivation.selection
    chosen = ", ".join(sel.terms) or "none"
    if sel.method == "forward":
        return (
            f"Forward selection with {sel.n_folds}-fold cross-validation chose {sel.size} term(s) beyond the forced ones "
            f"(the size with the highest mean test log-likelihood); the path re-run on all data gives: {chosen}. "
            "The bootstrap repeats this whole procedure, so its instability is part of the optimism estimate."
        )
    if sel.method == "backward":
        return f"Backward elimination by AIC kept: {chosen}."
    return f"No selection: the pre-specified model with {chosen}."


def _po_sentence(po: dict) -> str:
    if not po:
        return "Proportional odds is not checked: the outcome is binary or the model is non-proportional."
    brant, lr = po["brant"], po["lr"]
    verdict = "gives little evidence against" if brant.p >= 0.05 else "suggests departures from"
    trouble = list(brant.warnings) + list(lr.warnings)
    note = (" Fitting trouble met on the way: " + "; ".join(trouble) + ".") if trouble else ""
    return (
        f"Brant's test (overall chi-squared {brant.statistic:.2f} on {brant.df} df, p = {brant.p:.3f}) {verdict} proportional odds; "
        f"the likelihood-ratio test against the non-proportional model gives chi-squared {lr.statistic:.2f} on {lr.df} df, p = {lr.p:.3f}. "
        "With large samples small departures are significant; read the per-term rows and the per-cut slopes for their size."
        + note
    )
