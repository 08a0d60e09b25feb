"""Sentences of the derivation stage: data flow, selection, the model, proportional odds, apparent performance."""

from __future__ import annotations

from typing import Any, Mapping

from .common import decimals

__all__ = ["derivation_texts", "selection_sentence", "proportional_odds_sentence"]


def derivation_texts(
    *,
    cohort: Any,
    selection: Any,
    n_terms: int,
    n_params: int,
    smallest_level: int,
    proportional_odds: Mapping[str, Any],
    summary: Mapping[str, float],
    n_levels: int,
    min_cell_count: int,
) -> dict[str, str]:
    """One interpreting sentence per table and figure of the derivation stage.

    Parameters
    ----------
    cohort : PreparedCohort
        The derivation cohort (its screened and analysed counts).
    selection : SelectionResult
        The selection of the derivation procedure.
    n_terms, n_params : int
        Terms and parameters of the final model.
    smallest_level : int
        People in the smallest outcome level.
    proportional_odds : mapping
        ``{"brant": BrantResult, "lr": LRTest}``, empty when not checked.
    summary : mapping
        Apparent :func:`riskvet.measures.summary.performance_summary`.
    n_levels : int
        Outcome levels.
    min_cell_count : int
        ``output.min_cell_count``.
    """
    K = n_levels
    return {
        "flow": (
            f"{cohort.n_screened} people were screened and {cohort.n_analysed} analysed; "
            f"{cohort.n_screened - cohort.n_analysed} were excluded (complete-case analysis), each counted under the first reason that applied."
        ),
        "descriptive": (
            f"Predictors by outcome level; counts below {min_cell_count} are suppressed."
            if min_cell_count > 1 else "Predictors by outcome level."
        ),
        "selection": selection_sentence(selection),
        "model": (
            f"The final model has {n_terms} terms and {n_params} parameters "
            f"({smallest_level} people in the smallest outcome level, {smallest_level / max(n_params, 1):.1f} per parameter). "
            "Odds ratios are per unit of each column; a value above 1 shifts risk towards higher levels. "
            "Spline columns are read together, not one by one, and are left out of the odds-ratio figure."
        ),
        "po": proportional_odds_sentence(proportional_odds),
        "apparent": (
            f"Apparent performance on the derivation data (optimistic by construction): "
            + ", ".join(f"C of cut {j} {decimals(summary[f'auc_cut{j}'])}" for j in range(K - 1))
            + (f", ordinal c-index {decimals(summary['ordinal_c'])}" if K > 2 else "")
            + f", Brier {decimals(summary['brier'])}, Nagelkerke R² {decimals(summary['nagelkerke_r2'])}. "
            "Internal validation estimates how much of this is optimism."
        ),
        "calibration": (
            "On its own data a maximum-likelihood binary model has calibration-in-the-large 0 and slope 1 by construction "
            "(for an ordered outcome each cut is close to, not exactly at, these values); "
            "the curve shows whether the model's form (link, splines) fits across the range of risk."
        ),
        "roc": "ROC curve per cut, with the operating points of the study's thresholds marked.",
    }


def selection_sentence(selection: Any) -> str:
    """What the selection procedure chose, and how the bootstrap treats it."""
    chosen = ", ".join(selection.terms) or "none"
    if selection.method == "forward":
        return (
            f"Forward selection with {selection.n_folds}-fold cross-validation chose {selection.size} term(s) beyond the forced ones "
            f"(the size with the highest mean test log-likelihood); the path re-run on all data gives: {chosen}. "
            "The bootstrap repeats this whole procedure, so its instability is part of the optimism estimate."
        )
    if selection.method == "backward":
        return f"Backward elimination by AIC kept: {chosen}."
    return f"No selection: the pre-specified model with {chosen}."


def proportional_odds_sentence(po: Mapping[str, Any]) -> str:
    """Brant's test and the likelihood-ratio test of proportional odds, with any fitting trouble."""
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
