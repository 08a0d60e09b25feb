"""Sentences of the internal-validation stage: optimism, shrinkage, stability, cross-validation.

Each function reads a result of :mod:`riskvet.validation.bootstrap` or
:mod:`riskvet.validation.crossval` and states its numbers; none computes one.
"""

from __future__ import annotations

import math
from typing import Any

from .common import judge_change, signed

__all__ = [
    "BASE_KEYS",
    "SHOWN_632PLUS",
    "estimates_sentence",
    "estimator_632plus_sentence",
    "internal_validation_texts",
    "internal_validation_summary",
    "failure_sentence",
    "shrinkage_sentence",
    "stability_sentence",
    "crossval_sentence",
    "resampling_sentence",
]


#: Each kind of bootstrap measure as a measure key of the reading guide and of
#: :func:`~riskvet.reporting.sentences.common.judge_change`.
BASE_KEYS = {
    "concordance": "auc", "brier": "brier", "scaled_brier": "scaled_brier", "r2": "nagelkerke_r2",
    "ici": "ici", "slope": "calibration_slope", "intercept": "calibration_intercept",
}

#: Kinds of measure whose .632+ estimate a page shows: those with a
#: no-information value in Efron & Tibshirani (1997) -- 0.5 for a C statistic,
#: predictions paired at random with outcomes for the additive losses (Brier
#: score, scaled Brier, R²).  Calibration slope and calibration-in-the-large
#: are not error rates, and the ICI has no such value there.
SHOWN_632PLUS = ("concordance", "brier", "scaled_brier", "r2")


def estimates_sentence(validation: Any) -> str:
    """What the estimates table shows, which way each measure moves, and where it moves the unexpected way.

    Reads an :class:`~riskvet.validation.bootstrap.InternalValidation`: for
    each measure, whether the value expected in new patients (apparent minus
    optimism) is worse or better than in the derivation data, by the
    measure's own direction (higher, lower, or closer to its ideal value).
    """
    text = (
        f"Each row sets a measure in the derivation data beside the value expected in new patients from the same "
        f"population: the derivation value minus its optimism, the average amount by which {validation.n_succeeded} "
        "bootstrap replicates of the whole procedure looked better on their own sample than on the original data. "
        "Which way is better depends on the measure: for the C statistics, the scaled Brier score and R² higher is "
        "better, so optimism lowers the expected value; for the Brier score and the ICI lower is better, so optimism "
        "means the derivation value is lower than the value expected in new patients; for a calibration slope 1 is "
        "ideal and for calibration-in-the-large 0. A column says in words whether each measure is expected to be "
        "worse or better in new patients than in the derivation data, and the 2.5th and 97.5th percentiles of the "
        "replicates' change show how much the change varies between replicates (a spread of replicates, not a "
        "confidence interval)."
    )
    unexpected = []
    for e in validation.estimates:
        # an unstable estimate is not read as a corrected value (the readability sentence names it)
        if getattr(e, "unstable", False) or judge_change(BASE_KEYS[e.kind], e.apparent, e.corrected) != "better":
            continue
        low, high = -e.optimism_upper, -e.optimism_lower
        across = math.isfinite(low) and math.isfinite(high) and low <= 0 <= high
        unexpected.append(
            f"{_lower_first(e.label)} ({signed(e.apparent, 3)} in the derivation data, {signed(e.corrected, 3)} expected; "
            f"the replicates' change runs from {signed(low, 3)} to {signed(high, 3)}{', across 0' if across else ''})"
        )
    if unexpected:
        text += (
            " The value expected in new patients comes out better than in the derivation data for "
            + "; ".join(unexpected) + ". The replicates showed no optimism on "
            + ("this measure" if len(unexpected) == 1 else "these measures")
            + ": read the correction as no sign of flattery, not as a gain to expect in new patients."
        )
    else:
        text += " Every measure is expected to be the same or worse in new patients than in the derivation data."
    return text


def estimator_632plus_sentence(validation: Any) -> str:
    """Where the .632+ estimate is shown, and why it is left out for the other measures."""
    left_out = sorted({e.kind for e in validation.estimates} - set(SHOWN_632PLUS))
    words = {"ici": "the ICI", "slope": "calibration slopes", "intercept": "calibration-in-the-large"}
    text = (
        "The .632+ estimate (Efron & Tibshirani 1997) weighs the derivation value against the value in patients "
        "left out of each bootstrap sample, using the value the measure takes when predictions carry no information "
        "(0.5 for a C statistic; predictions paired at random with outcomes for the Brier score, scaled Brier and R²)."
    )
    if left_out:
        text += (
            " That paper defines no such value for "
            + _either(words[k] for k in left_out if k in words)
            + ", so the .632+ column shows a dash for them."
        )
    return text


def internal_validation_texts(validation: Any, crossval: Any, shrunk: str | None, notes: list[str], model_check: str) -> dict[str, str]:
    """One sentence per table and figure of the internal-validation stage.

    ``validation`` is an :class:`~riskvet.validation.bootstrap.InternalValidation`,
    ``crossval`` a :class:`~riskvet.validation.crossval.CrossValidation` or None,
    ``shrunk`` the shrunken model file written (or None, ``notes`` saying why)
    and ``model_check`` how the frozen model relates to the procedure.
    """
    texts = {
        "summary": internal_validation_summary(validation),
        "table": estimates_sentence(validation),
        "estimator_632plus": estimator_632plus_sentence(validation),
        "optimism_figure": (
            "Each row joins the value in the derivation data (circle) to the value expected in new patients (square); "
            "the longer the line, the more the derivation data flatter the model on that measure. The triangle is the "
            ".632+ estimate, shown only where it is defined (see the table)."
        ),
        "shrinkage": shrinkage_sentence(validation.shrinkage),
        "stability": stability_sentence(validation.stability),
        "failures": failure_sentence(validation),
        "readability": readability_sentence(validation),
        "tuning": tuning_sentence(validation),
    }
    texts["imputation"] = imputation_scheme_sentence(validation)
    if crossval is not None:
        imputed = getattr(validation, "n_imputations", None) is not None
        texts["crossval"] = crossval_sentence(crossval) + (
            " Under multiple imputation each fold's training rows were imputed and the procedure run on their completed data "
            "sets, and the held-out fold was imputed on its own (outcome included); a fold's measures are averages over its "
            "completed data sets, and the pooled held-out predictions are each person's averaged over them." if imputed else "") + (
            " Cross-validation and the bootstrap estimate the same thing by different routes; close agreement "
            "makes either figure more credible."
        )
    else:
        texts["crossval"] = "Cross-validation was not requested (internal_validation.cv_repeats is 0)."
    if shrunk is not None:
        texts["shrunken_model"] = (
            f"A uniformly shrunken model was written to {shrunk}: its coefficients are the frozen model's times "
            f"{validation.shrinkage.bootstrap:.3f}, and its thresholds were re-fitted on the derivation data with "
            "the shrunken linear predictor held fixed, so that the overall level of risk stays anchored to the data. "
            "Use it instead of the original only by a documented decision."
        )
    else:
        texts["shrunken_model"] = "No shrunken model was written" + (f": {notes[-1]}." if notes else ".")
    texts["shrunken_model"] += f" Model check: {model_check}."
    return texts


def imputation_scheme_sentence(validation: Any) -> str:
    """How resampling and multiple imputation were combined (empty under complete cases)."""
    m = getattr(validation, "n_imputations", None)
    if m is None:
        return ""
    return (
        f"Missing predictor values were multiply imputed ({m} completed data sets). Each replicate drew its resample from "
        f"all the rows as recorded, missing values included, and imputed that resample {m} times on its own before the whole "
        "procedure ran on it (resample first, then impute: the scheme the comparison of Wahl et al. 2016 recommends), so the "
        "imputation of the rows a replicate's model is derived from uses those rows only; the original data it is tested on "
        "were imputed separately, once for the whole analysis. The replicate model was then measured in each "
        "completed data set of its resample and of the original data, and each measure averaged over them; the values in the "
        "derivation data are averages over the original data's completed data sets in the same way."
    )


def readability_sentence(validation: Any) -> str:
    """Which corrected values the table leaves out as unstable or undefined, and the rules behind them."""
    unstable = [e.label for e in validation.estimates if getattr(e, "unstable", False) and not getattr(e, "undefined_reason", "")]
    undefined = [e.label for e in validation.estimates if getattr(e, "undefined_reason", "")]
    parts = []
    if unstable:
        parts.append(
            f"Not read, because unstable: {', '.join(unstable)}. Their replicates cannot pin the value down (too few people on "
            "the smaller side of a cut of the ordered outcome, a central 95% of replicate values too wide for the measure, or "
            "a value in fewer than half of the replicates), so no corrected value is shown for them, only the spread of the "
            "change; the reason for each is in the last column."
        )
    if undefined:
        parts.append(f"Undefined: {', '.join(undefined)}; the reason is in the last column.")
    if not parts:
        return "Every corrected value in the table can be read: none was flagged unstable or undefined."
    return " ".join(parts)


def tuning_sentence(validation: Any) -> str:
    """How much the tuned penalty and the calibration slope vary over replicates, with the published cautions.

    References
    ----------
    Van Calster B, van Smeden M, De Cock B, Steyerberg EW. Regression
    shrinkage methods for clinical prediction models do not guarantee
    improved performance: simulation study. Statistical Methods in Medical
    Research 2020;29(11):3166–3178.

    Riley RD, Snell KIE, Martin GP, et al. Penalization and shrinkage methods
    produced unreliable clinical prediction models especially when sample
    size was small. Journal of Clinical Epidemiology 2021;132:88–96.
    """
    pen = getattr(validation, "penalty_spread", None)
    slope = getattr(validation, "slope_spread", None)
    if pen is None:
        if slope is None or not math.isfinite(slope.median):
            return "No replicate spread of the calibration slope could be computed (no replicate model had one)."
        return (f"Over {slope.n_replicates} replicates the calibration slope of the derived models on the original data had median "
                f"{slope.median:.2f} (central 95% {slope.lower:.2f} to {slope.upper:.2f}).")
    text = (
        f"Each replicate tuned its own penalty by cross-validation: on all data the penalty is {pen.apparent:.3g}; over "
        f"{pen.n_replicates} replicates its median was {pen.median:.3g} (central 95% {pen.lower:.3g} to {pen.upper:.3g})."
    )
    if slope is not None and math.isfinite(slope.median):
        text += (f" The calibration slope of the replicate models on the original data had median {slope.median:.2f} "
                 f"(central 95% {slope.lower:.2f} to {slope.upper:.2f}).")
    return text + (
        " Caution: a penalty tuned on the data is itself estimated, and in small samples it varies so much that shrinkage "
        "chosen this way does not reliably give well-calibrated predictions (Van Calster et al., Statistical Methods in "
        "Medical Research 2020; Riley et al., Journal of Clinical Epidemiology 2021); a wide spread here means the amount of "
        "shrinkage the model carries is uncertain."
    )


def stability_sentence(stability: Any) -> str:
    """Selection stability in one or two sentences: how often the replicates chose the same terms."""
    if stability.method == "none":
        return (
            f"The model was pre-specified (no variable selection), so every one of the "
            f"{stability.n_replicates} replicates kept all {len(stability.candidate_terms)} candidate terms."
        )
    share = stability.share_selected
    unstable = [t for t in stability.candidate_terms if t not in stability.forced_terms and 0.2 <= share[t] <= 0.8]
    sizes = sorted(stability.model_sizes)
    text = (
        f"The {stability.method} selection chose the same set of terms as on all data in "
        f"{stability.apparent_set_share:.0%} of {stability.n_replicates} replicates; model size ranged from "
        f"{sizes[0] if sizes else 0} to {sizes[-1] if sizes else 0} terms."
    )
    if unstable:
        text += (
            f" {len(unstable)} term(s) were selected in between 20% and 80% of replicates "
            f"({', '.join(unstable)}): whether they belong in the model is not settled by these data."
        )
    else:
        text += " Every term was selected either in most replicates or in few."
    return text


def shrinkage_sentence(shrinkage: Any) -> str:
    """The bootstrap shrinkage factor and what it means for predictions in new patients."""
    s = shrinkage.bootstrap
    if not math.isfinite(s):
        return "No bootstrap shrinkage factor could be estimated."
    direction = "too extreme" if s < 1 else "too cautious"
    return (
        f"The bootstrap calibration slope is {s:.2f} (central 95% of replicates {shrinkage.bootstrap_lower:.2f} to "
        f"{shrinkage.bootstrap_upper:.2f}, a spread of replicates rather than a confidence interval): predictions from a model derived this way are expected to be "
        f"{direction} in new patients from the same population, and multiplying the coefficients by "
        f"{s:.2f} is the uniform correction; the heuristic formula gives {shrinkage.heuristic_candidates:.2f} "
        f"counting all {shrinkage.df_candidates} candidate degrees of freedom."
    )


def internal_validation_summary(validation: Any) -> str:
    """Two or three sentences summarising the internal validation: the headline measure, its optimism and the calibration slope.

    An estimate flagged unstable is not given as a corrected value, and an
    undefined one (a model without terms has no calibration slope) says why.
    """
    head = validation.estimate(validation.headline_measure)
    slope = validation.estimate("calibration_slope")
    lead = (f"Across {validation.n_succeeded} bootstrap replicates that each repeated the whole derivation "
            f"({_method_words(validation.stability.method)}, knot placement and fitting), the {_lower_first(head.label)} is "
            f"{head.apparent:.3f} in the derivation data")
    if getattr(head, "unstable", False) or not math.isfinite(head.corrected):
        text = lead + f"; its value expected in new patients is not given ({readable_reason(head)})."
    else:
        plus = f"; the .632+ estimate is {head.estimate_632plus:.3f}" if math.isfinite(head.estimate_632plus) else ""
        text = (lead + f" and {head.corrected:.3f} expected in new patients from the same population (optimism "
                f"{head.optimism:.3f}){plus}.")
    if getattr(slope, "undefined_reason", "") or not math.isfinite(slope.corrected):
        text += f" The calibration slope is undefined: {readable_reason(slope)}."
    elif getattr(slope, "unstable", False):
        text += f" The calibration slope expected in new patients is not given ({readable_reason(slope)})."
    else:
        reading = (" (below 1: predictions from a model derived this way are expected to be too extreme in new patients)"
                   if slope.corrected < 1 else
                   " (above 1: predictions are expected to be too moderate in new patients)" if slope.corrected > 1 else "")
        text += f" The calibration slope of the linear predictor expected in new patients is {slope.corrected:.2f}{reading}."
    return text + " " + resampling_sentence(validation) + failure_sentence(validation)


#: A cluster kind's plural, as the resampling sentences say it.
_UNITS = {"site": "sites", "period": "periods", "person": "people"}


def resampling_sentence(validation: Any) -> str:
    """What each replicate resampled: rows, or whole clusters (sites, periods or people), and what that means."""
    clusters = getattr(validation, "n_clusters", None)
    if clusters is None:
        return ""
    kind = getattr(validation, "cluster_kind", None) or "site"
    units = _UNITS.get(kind, "clusters")
    text = (f"Each replicate drew whole {units} (the {clusters} {units} of data.cluster_column, with replacement, each "
            "bringing all its rows), so the rows of one " + ("person" if kind == "person" else kind) +
            " are never split between a replicate's data and the data it is tested on. ")
    if kind != "person" and clusters < 20:  # project convention for "few": the cluster bootstrap's theory is for many clusters (Field & Welsh 2007)
        text += (f"With {clusters} {units} the bootstrap rests on few independent units and its intervals and "
                 "corrections are rough; the internal-external cross-validation asks the between-" + kind + " question directly. ")
    return text


def readable_reason(e: Any) -> str:
    """Why an estimate's corrected value is not given: undefined, or unstable, with the reason recorded on it."""
    if getattr(e, "undefined_reason", ""):
        return e.undefined_reason
    if getattr(e, "unstable", False):
        return f"unstable: {e.unstable_reason}"
    return "the replicates gave no value"


def failure_sentence(validation: Any) -> str:
    """How many replicates produced no model, and why."""
    if not validation.failures:
        return f"All {validation.n_boot} replicates produced a model."
    parts = ", ".join(f"{c} {r}" for r, c in validation.failure_counts.items())
    return (
        f"{validation.n_failed} of {validation.n_boot} replicates produced no model ({parts}); they are listed in the "
        f"results and left out of the averages, which is acceptable up to the study's limit of "
        f"{validation.max_failed_share:.0%}."
    )


def crossval_sentence(crossval: Any) -> str:
    """The cross-validated headline measure and calibration slope against the apparent ones."""
    key = "auc" if crossval.n_levels == 2 else "average_cut_auc"
    e = crossval.estimate(key)
    slope = crossval.estimate("calibration_slope")
    reps = f"{crossval.n_repeats} repeats of " if crossval.n_repeats > 1 else ""
    clusters = getattr(crossval, "n_clusters", None)
    text = (
        f"In {reps}{crossval.n_folds}-fold cross-validation the {_lower_first(e.label)} of models derived without the "
        f"held-out patients is {e.pooled:.3f} on pooled held-out predictions ({e.averaged:.3f} averaged over "
        f"folds), against {e.apparent:.3f} apparent; the pooled calibration slope is {slope.pooled:.2f}."
    )
    if clusters is not None:
        text += f" Whole clusters of data.cluster_column ({clusters} of them) were dealt to folds, never split between training and held-out data."
    if crossval.failures:
        text += f" {len(crossval.failures)} fold(s) produced no model and are listed in the results."
    return text


def _either(items: Any) -> str:
    """``a``, ``a or b``, ``a, b or c``."""
    items = list(items)
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " or " + items[-1]


def _method_words(method: str) -> str:
    return {"none": "no variable selection", "forward": "forward selection", "backward": "backward elimination"}.get(method, f"{method} selection")


def _lower_first(label: str) -> str:
    """``label`` with its first word in lower case, unless that word is an acronym or a single letter."""
    first, _, rest = label.partition(" ")
    if len(first) == 1 or first.isupper():
        return label
    return f"{first.lower()} {rest}" if rest else first.lower()
