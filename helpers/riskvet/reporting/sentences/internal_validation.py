"""Sentences of the internal-validation stage: optimism, shrinkage, stability, cross-validation.

Each function reads a result of :mod:`riskvet.validation.bootstrap` or
:mod:`riskvet.validation.crossval` and states its numbers; none computes one.
"""

from __future__ import annotations

import math
from typing import Any

__all__ = [
    "internal_validation_texts",
    "internal_validation_summary",
    "failure_sentence",
    "shrinkage_sentence",
    "stability_sentence",
    "crossval_sentence",
]


def internal_validation_texts(validation: Any, crossval: Any, shrunk: str | None, notes: list[str], model_check: str) -> dict[str, str]:
    """One sentence per table and figure of the internal-validation stage.

    ``validation`` is an :class:`~riskvet.validation.bootstrap.InternalValidation`,
    ``crossval`` a :class:`~riskvet.validation.crossval.CrossValidation` or None,
    ``shrunk`` the shrunken model file written (or None, ``notes`` saying why)
    and ``model_check`` how the frozen model relates to the procedure.
    """
    texts = {
        "summary": internal_validation_summary(validation),
        "table": (
            "Optimism is the average amount by which a model derived by this procedure looks better on the "
            "data it was derived from than on the original data; subtracting it from the apparent value "
            "estimates how the model will perform in new patients from the same population. For the Brier "
            "score and the ICI lower is better, so their optimism is negative."
        ),
        "optimism_figure": (
            "Each row joins the apparent value (circle) to the optimism-corrected value (square); the longer the "
            "line, the more the apparent figure overstates performance. The triangle is the .632+ estimate, "
            "a second bootstrap estimate that weighs apparent and out-of-bag performance."
        ),
        "shrinkage": shrinkage_sentence(validation.shrinkage),
        "stability": stability_sentence(validation.stability),
        "failures": failure_sentence(validation),
    }
    if crossval is not None:
        texts["crossval"] = crossval_sentence(crossval) + (
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
        f"The bootstrap calibration slope is {s:.2f} (middle 95% of replicates {shrinkage.bootstrap_lower:.2f} to "
        f"{shrinkage.bootstrap_upper:.2f}): predictions from a model derived this way are expected to be "
        f"{direction} in new patients from the same population, and multiplying the coefficients by "
        f"{s:.2f} is the uniform correction; the heuristic formula gives {shrinkage.heuristic_candidates:.2f} "
        f"counting all {shrinkage.df_candidates} candidate degrees of freedom."
    )


def internal_validation_summary(validation: Any) -> str:
    """Two or three sentences summarising the internal validation: the headline measure, its optimism and the calibration slope."""
    head = validation.estimate(validation.headline_measure)
    slope = validation.estimate("calibration_slope")
    text = (
        f"Across {validation.n_succeeded} bootstrap replicates that each repeated the whole derivation "
        f"({_method_words(validation.stability.method)}, knot placement and fitting), the apparent "
        f"{_lower_first(head.label)} of {head.apparent:.3f} falls to {head.corrected:.3f} after correction for "
        f"optimism ({head.optimism:.3f}); the .632+ estimate is {head.estimate_632plus:.3f}. "
        f"The optimism-corrected calibration slope is {slope.corrected:.2f}"
        f"{' (below 1: predictions too extreme for new patients)' if slope.corrected < 1 else ''}."
    )
    text += " " + failure_sentence(validation)
    return text


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
    text = (
        f"In {reps}{crossval.n_folds}-fold cross-validation the {_lower_first(e.label)} of models derived without the "
        f"held-out patients is {e.pooled:.3f} on pooled held-out predictions ({e.averaged:.3f} averaged over "
        f"folds), against {e.apparent:.3f} apparent; the pooled calibration slope is {slope.pooled:.2f}."
    )
    if crossval.failures:
        text += f" {len(crossval.failures)} fold(s) produced no model and are listed in the results."
    return text


def _method_words(method: str) -> str:
    return {"none": "no variable selection", "forward": "forward selection", "backward": "backward elimination"}.get(method, f"{method} selection")


def _lower_first(label: str) -> str:
    """``label`` with its first word in lower case, unless that word is an acronym or a single letter."""
    first, _, rest = label.partition(" ")
    if len(first) == 1 or first.isupper():
        return label
    return f"{first.lower()} {rest}" if rest else first.lower()
