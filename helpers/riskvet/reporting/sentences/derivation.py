"""Sentences of the derivation stage: data flow, selection, the model, proportional odds, apparent performance."""

from __future__ import annotations

import math

from typing import Any, Mapping, Sequence

from ..labels import cut_label
from .common import decimals, interval_words

__all__ = [
    "derivation_texts",
    "selection_sentence",
    "proportional_odds_sentence",
    "post_selection_sentence",
    "events_per_parameter_sentence",
    "hosmer_lemeshow_sentence",
    "effects_sentence",
]

#: Events per candidate parameter below which the page flags the data as small (common practice: 10).
LOW_EVENTS_PER_PARAMETER = 10


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
    levels: Sequence[str] | None = None,
    n_candidate_parameters: int | None = None,
    calibration: Any = None,
    link: str = "logit",
    fit: Any = None,
    separated_terms: Sequence[str] = (),
    n_imputations: int | None = None,
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
    levels : sequence of str, optional
        The outcome levels, lowest first, to name the cuts (default ``level 0`` ...).
    n_candidate_parameters : int, optional
        Parameters of the model with every candidate term (thresholds
        included); gives the events-per-candidate-parameter sentence.
    calibration : CalibrationResult or OrdinalCalibration, optional
        Apparent calibration; gives the Hosmer–Lemeshow sentence.
    link : str
        The model's link (odds ratios only for the logit link).
    fit : CumulativeFit, optional
        The final fit: how it was estimated (maximum likelihood, Firth,
        penalised) and what its intervals are.
    separated_terms : sequence of str
        Terms, in words, that separate the derivation data (empty if none).
    n_imputations : int, optional
        Under multiple imputation, the completed data sets the model was
        pooled over (Rubin's rules): the sentences then say t statistics
        and intervals by Rubin's rules.
    """
    K = n_levels
    fit_interval_kind = getattr(fit, "interval_kind", "Wald")
    levels = list(levels) if levels is not None else [f"level {k}" for k in range(K)]
    cuts = [cut_label(levels, j, binary=K == 2) for j in range(K - 1)]
    texts = {
        "flow": (
            f"{cohort.n_screened} people were screened and {cohort.n_analysed} analysed; "
            + (f"{cohort.n_screened - cohort.n_analysed} were excluded for a missing outcome (missing predictor values were "
               "multiply imputed, so no one was excluded for them)." if getattr(cohort, "missing", "") == "multiple_imputation" else
               f"{cohort.n_screened - cohort.n_analysed} were excluded (complete-case analysis), each counted under the first reason that applied.")
        ),
        "descriptive": (
            f"Predictors by outcome level; counts below {min_cell_count} are suppressed."
            if min_cell_count > 1 else "Predictors by outcome level."
        ),
        "selection": selection_sentence(selection),
        "inference": post_selection_sentence(selection, pooled=n_imputations is not None),
        "model": (
            f"The final model has {n_terms} terms and {n_params} parameters "
            f"({smallest_level} people in the smallest outcome level, {smallest_level / max(n_params, 1):.1f} per parameter). "
            + coefficient_interval_words(fit_interval_kind, pooled=n_imputations is not None)
            + ("a single-column term also shows its odds ratio per unit (above 1: risk shifts towards higher levels). "
               if link == "logit" else "")
            + "A spline, a categorical predictor or an interaction has several coefficients that are read together, "
            "not one by one: its effect over stated values and its joint test are in the next two tables."
        ),
        "effects": effects_sentence(link, interval_kind=fit_interval_kind, pooled=n_imputations is not None),
        "estimation": estimation_sentence(fit, selection) + ("" if n_imputations is None else (
            f" Each is the mean of the estimates in the {n_imputations} completed data sets (Rubin's rules); its standard "
            "error adds the spread between the imputations to the mean variance within them.")),
        "separation": separation_sentence(separated_terms, refit=getattr(selection, "refit_with_firth", False),
                                          firth=getattr(fit, "estimation", "") == "firth"),
        "term_tests": (
            "Joint Wald test of each term: all its coefficients zero together (chi-square on as many degrees of freedom "
            "as the term has coefficients). A spline's test asks whether the predictor matters at all, not whether it is curved."
        ),
        "po": proportional_odds_sentence(proportional_odds),
        "po_terms": (
            "Brant's test for each term: whether its slope differs between the cuts (the overall test is in the sentence above)."
            if proportional_odds else "Proportional odds is not checked, so there are no per-term tests."
        ),
        "apparent": (
            "Apparent performance on the derivation data (optimistic by construction): "
            + ", ".join(f"C for {cuts[j]} {decimals(summary[f'auc_cut{j}'])}" for j in range(K - 1))
            + (f", ordinal c-index {decimals(summary['ordinal_c'])}" if K > 2 else "")
            + f", Brier score {decimals(summary['brier'])}, Nagelkerke R² {decimals(summary['nagelkerke_r2'])}. "
            "Internal validation estimates how much of this is optimism."
        ),
        "calibration": apparent_calibration_sentence(getattr(fit, "estimation", "maximum likelihood"), n_terms=n_terms),
        "roc": "ROC curve for each outcome, with the operating points of the study's thresholds marked.",
    }
    summary_parts = [f"{cohort.n_analysed} people analysed; the final model has {n_terms} terms and {n_params} parameters."]
    if n_candidate_parameters is not None:
        texts["events_per_parameter"] = events_per_parameter_sentence(smallest_level, n_candidate_parameters)
        epp = smallest_level / max(n_candidate_parameters, 1)
        if epp < LOW_EVENTS_PER_PARAMETER:
            summary_parts.append(f"Events per candidate parameter are low ({epp:.1f}, below {LOW_EVENTS_PER_PARAMETER}).")
    if separated_terms:
        summary_parts.append(f"The data are separated by {', '.join(separated_terms)}; the model was fitted by Firth's method.")
    if getattr(selection, "method", "none") in PENALIZED_WORDS:
        summary_parts.append(f"The coefficients were shrunk by a {PENALIZED_WORDS[selection.method]} penalty tuned by cross-validation.")
    elif getattr(selection, "method", "none") != "none":
        summary_parts.append("Its p-values and intervals ignore the variable selection and are too optimistic.")
    texts["summary"] = " ".join(summary_parts)
    if calibration is not None:
        texts["hosmer_lemeshow"] = hosmer_lemeshow_sentence(calibration, n_levels=K)
    return texts


def post_selection_sentence(selection: Any, *, pooled: bool = False) -> str:
    """What the model's z statistics, p-values and Wald intervals mean after (or without) variable selection.

    ``pooled``: the model is pooled over imputations, so its statistics are
    t statistics and its intervals those of Rubin's rules.

    References
    ----------
    Harrell FE Jr. Regression Modeling Strategies, 2nd ed. Springer, 2015,
    chapter 4 (section 4.3, variable selection).

    Heinze G, Wallisch C, Dunkler D. Variable selection – a review and
    recommendations for the practicing statistician. Biometrical Journal
    2018;60(3):431–449.
    """
    if getattr(selection, "method", "none") in PENALIZED_WORDS:
        return (
            f"The coefficients are {PENALIZED_WORDS[selection.method]} estimates: shrunk towards zero by a penalty chosen on these "
            "same data. Penalised estimates have no valid standard errors, z statistics or p-values, so none are shown; how "
            "stable the chosen penalty and the calibration slope are over bootstrap replicates is on the internal-validation page."
        )
    statistics = "t statistics, p-values and intervals" if pooled else "z statistics, p-values and Wald intervals"
    if getattr(selection, "method", "none") == "none":
        return (
            f"No variable selection was done, so the {statistics} are those of the "
            "pre-specified model; they still assume its form (link, splines, interactions) is right."
        )
    how = {"forward": "forward selection", "backward": "backward elimination"}.get(selection.method, "variable selection")
    return (
        f"Caution: the terms were chosen by {how} on these same data. The {statistics} "
        "below are those of the selected model as if it had been fixed in advance: they ignore the selection, so the "
        "intervals are too narrow, the p-values too small, and the coefficients of the selected terms tend to be too far "
        "from zero (Harrell, Regression Modeling Strategies, 2015, chapter 4; Heinze, Wallisch & Dunkler, Biometrical "
        "Journal 2018). How often each term would be chosen again is shown by the selection frequencies over the "
        "bootstrap replicates on the internal-validation page."
    )


def events_per_parameter_sentence(smallest_level: int, n_candidate_parameters: int, *, low: int = LOW_EVENTS_PER_PARAMETER) -> str:
    """Events per candidate parameter, flagged in words when below ``low``.

    References
    ----------
    Riley RD, Ensor J, Snell KIE, et al. Calculating the sample size required
    for developing a clinical prediction model. BMJ 2020;368:m441.
    """
    if n_candidate_parameters < 1:
        return "The model has no candidate parameters, so events per candidate parameter do not apply."
    epp = smallest_level / n_candidate_parameters
    head = (
        f"Events per candidate parameter: {smallest_level} people in the smallest outcome level for "
        f"{n_candidate_parameters} candidate parameters (every candidate term's coefficients and the thresholds), "
        f"{epp:.1f} per parameter."
    )
    guide = (
        " Events per parameter is only a rough guide; the sample-size criteria of Riley et al. (BMJ 2020), "
        "on the planning page, say what these data can support."
    )
    if epp < low:
        return (
            head + f" This is low: below {low}, a common rule of thumb, expect a model that is overfitted "
            "(optimistic apparent performance, predictions too extreme) and a selection that would change with other data."
            + guide
        )
    return head + f" That is at least {low}, a common rule of thumb." + guide


def apparent_calibration_sentence(estimation: str, *, n_terms: int) -> str:
    """What apparent calibration can show, given how the model was estimated and whether it has any term."""
    if n_terms == 0:
        return ("The model has no terms, so every person gets the same predicted risk (the observed proportion of each "
                "level): the calibration slope is undefined (shown as a dash) and the C statistic is 0.5 by construction.")
    if estimation == "penalized":
        return ("Penalised estimates are shrunk towards zero on purpose, so on its own data the model's calibration slope is "
                "above 1 by design (predictions more moderate than the data alone would give); the curve shows whether the "
                "model's form fits across the range of risk.")
    if estimation == "firth":
        return ("Firth's estimates pull predictions slightly towards one half, so on its own data calibration-in-the-large "
                "and slope are close to, not exactly at, 0 and 1; the curve shows whether the model's form (link, splines) "
                "fits across the range of risk.")
    return ("On its own data a maximum-likelihood binary model has calibration-in-the-large 0 and slope 1 by construction "
            "(for an ordered outcome each cut is close to, not exactly at, these values); "
            "the curve shows whether the model's form (link, splines) fits across the range of risk.")


def hosmer_lemeshow_sentence(calibration: Any, *, n_levels: int) -> str:
    """The Hosmer–Lemeshow test and what its p-value means at this sample size.

    References
    ----------
    Kramer AA, Zimmerman JE. Assessing the calibration of mortality
    benchmarks in critical care: the Hosmer-Lemeshow test revisited.
    Critical Care Medicine 2007;35(9):2052–2056.

    Paul P, Pennell ML, Lemeshow S. Standardizing the power of the
    Hosmer–Lemeshow goodness of fit test in large data sets. Statistics in
    Medicine 2013;32(1):67–80.
    """
    name = "Hosmer–Lemeshow test" if n_levels == 2 else "ordinal Hosmer–Lemeshow test"
    stat, df, p = calibration.hosmer_lemeshow, calibration.hosmer_lemeshow_df, calibration.hosmer_lemeshow_pvalue
    if not (df > 0 and math.isfinite(stat) and math.isfinite(p)):
        return (f"The {name} is not computed: it needs at least three groups of distinct predicted risk, and these "
                f"predictions form {calibration.n_groups} (as when every person gets the same predicted risk).")
    p_text = "p < 0.001" if p < 0.001 else f"p = {p:.3f}"
    return (
        f"The {name} on {calibration.n_groups} groups of predicted risk gives chi-square {stat:.2f} on {df:g} degrees of freedom, "
        f"{p_text} ({calibration.n} people). Its p-value says whether miscalibration can be detected, not how large it is: "
        "with many thousands of people it rejects for miscalibration too small to matter, and with a few hundred it has "
        "little power to find miscalibration that does matter (Kramer & Zimmerman, Critical Care Medicine 2007; Paul, "
        "Pennell & Lemeshow, Statistics in Medicine 2013). Read the calibration curve, slope and calibration-in-the-large for the size."
    )


def effects_sentence(link: str, *, interval_kind: str = "Wald", pooled: bool = False) -> str:
    """How to read the table of term effects over stated contrasts (``pooled``: a model pooled over imputations)."""
    effect = "odds ratio of a higher outcome level" if link == "logit" else "change in the linear predictor"
    with_interval = "" if interval_kind == "none" else f", with its {interval_words('wald_pooled' if pooled else 'wald')}"
    return (
        f"The effect of each term as the {effect} between two stated values of its predictor{with_interval}: for a numeric predictor the 75th against the 25th percentile of the derivation data "
        "(the same contrast for every numeric predictor, so their effects can be compared), for a categorical one each "
        "level against the reference. Predictors that interact with it are held at the stated values; all others do not "
        "change the effect. Like the coefficients, these intervals ignore the variable selection."
    )


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
    if selection.method in PENALIZED_WORDS and getattr(selection, "penalty", None) is not None:
        pen = selection.penalty
        dropped = "" if selection.method == "ridge" else " A term whose coefficients the penalty set to zero is left out; a multi-column term is penalised as a group, so it enters or leaves whole."
        return (
            f"{PENALIZED_WORDS[selection.method].capitalize()} regression on every candidate term, the penalty chosen by "
            f"{selection.n_folds}-fold cross-validated log-likelihood on standardised columns (penalty {pen.alpha:.4g}); "
            f"coefficients are reported on the original scale.{dropped} The model keeps: {chosen}. The bootstrap repeats the "
            "tuning in every replicate."
        )
    return f"No selection: the pre-specified model with {chosen}."


#: The penalised selection methods in words.
PENALIZED_WORDS = {"ridge": "ridge", "lasso": "lasso", "elastic_net": "elastic-net"}


def coefficient_interval_words(interval_kind: str, *, pooled: bool = False) -> str:
    """How each row of the coefficient table is qualified, by the kind of its interval (``pooled``: Rubin's rules)."""
    if interval_kind == "none":
        return "Each row is one coefficient; penalised estimates have no standard errors or intervals. "
    kind = "rubin" if pooled else "profile_penalised" if interval_kind == "profile penalised likelihood" else "wald"
    return f"Each row is one coefficient with its {interval_words(kind)}; "


def estimation_sentence(fit: Any, selection: Any) -> str:
    """How the final model's coefficients were estimated, with the sources.

    References
    ----------
    Firth D. Bias reduction of maximum likelihood estimates. Biometrika
    1993;80(1):27–38.

    Heinze G, Schemper M. A solution to the problem of separation in logistic
    regression. Statistics in Medicine 2002;21(16):2409–2419.

    Van Calster B, van Smeden M, De Cock B, Steyerberg EW. Regression
    shrinkage methods for clinical prediction models do not guarantee
    improved performance: simulation study. Statistical Methods in Medical
    Research 2020;29(11):3166–3178.

    Riley RD, Snell KIE, Martin GP, et al. Penalization and shrinkage methods
    produced unreliable clinical prediction models especially when sample
    size was small. Journal of Clinical Epidemiology 2021;132:88–96.
    """
    estimation = getattr(fit, "estimation", "maximum likelihood")
    if estimation == "firth":
        intervals = ("profile penalised-likelihood intervals" if getattr(fit, "interval_kind", "") == "profile penalised likelihood"
                     else "Wald intervals from the inverse information")
        return (
            "The coefficients are Firth's bias-reduced estimates: the likelihood penalised by half the log-determinant of the "
            "information (Firth, Biometrika 1993), which removes the first-order small-sample bias and stays finite when the "
            f"data are separated (Heinze & Schemper, Statistics in Medicine 2002). The intervals are {intervals}. "
            "Firth's predictions are pulled slightly towards one half; the calibration-in-the-large on the derivation data is "
            "then close to, not exactly, zero."
        )
    if estimation == "penalized":
        return (
            "The coefficients are penalised estimates, so they are biased towards zero on purpose, to offset overfitting. "
            "Caution: a penalty tuned on small data is itself unstable, and shrinkage chosen this way does not guarantee "
            "better-calibrated predictions in new data (Van Calster et al., Statistical Methods in Medical Research 2020; "
            "Riley et al., Journal of Clinical Epidemiology 2021); the internal-validation page shows how much the chosen "
            "penalty and the calibration slope vary over bootstrap replicates."
        )
    return "The coefficients are maximum-likelihood estimates."


def separation_sentence(terms: Sequence[str], *, refit: bool, firth: bool) -> str:
    """Whether the derivation data are separated, by which terms, and what was done about it.

    References
    ----------
    Albert A, Anderson JA. On the existence of maximum likelihood estimates in
    logistic regression models. Biometrika 1984;71(1):1–10.
    """
    if not terms:
        return ("The separation check (a linear programme after the fit) found no term whose coefficients could grow "
                "without bound: the estimates exist.")
    named = ", ".join(terms)
    head = (f"The derivation data are separated by {named}: some combination of its values predicts part of the outcome "
            "perfectly, so the maximum-likelihood estimates would be infinite (Albert & Anderson, Biometrika 1984).")
    if refit:
        return head + " As the study asks (model.on_separation: firth), the chosen model was refitted by Firth's method, whose estimates are finite."
    if firth:
        return head + " The model is fitted by Firth's method, whose estimates are finite."
    return head


def proportional_odds_sentence(po: Mapping[str, Any]) -> str:
    """Brant's test and the likelihood-ratio test of proportional odds, with any fitting trouble."""
    if not po:
        return "Proportional odds is not checked: the outcome is binary or the model is non-proportional."
    brant, lr = po["brant"], po["lr"]
    trouble = list(brant.warnings) + list(lr.warnings)
    note = (" Fitting trouble met on the way: " + "; ".join(trouble) + ".") if trouble else ""
    invalid = [f"{name} is {test.reason}" for name, test in (("Brant's test", brant), ("the likelihood-ratio test", lr))
               if not getattr(test, "valid", True)]
    if invalid:
        return (
            "Proportional odds could not be checked: " + "; ".join(invalid) + ". A separated fit has no finite estimates, so "
            "a test built on it has no meaning; merge sparse categories or levels to test proportional odds." + note
        )
    verdict = "gives little evidence against" if brant.p >= 0.05 else "suggests departures from"
    return (
        f"Brant's test (overall chi-squared {brant.statistic:.2f} on {brant.df} df, p = {brant.p:.3f}) {verdict} proportional odds; "
        f"the likelihood-ratio test against the non-proportional model gives chi-squared {lr.statistic:.2f} on {lr.df} df, p = {lr.p:.3f}. "
        "With large samples small departures are significant; read the per-term rows and the per-cut slopes for their size."
        + note
    )
