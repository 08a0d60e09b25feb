"""Sentences of the internal-validation stage: optimism, shrinkage, stability, cross-validation."""

from __future__ import annotations

from typing import Any

__all__ = ["internal_validation_texts"]


def internal_validation_texts(validation: Any, crossval: Any, shrunk: str | None, notes: list[str], model_check: str) -> dict[str, str]:
    """One sentence per table and figure of the internal-validation stage.

    ``validation`` is an :class:`~riskvet.validation.bootstrap.InternalValidation`,
    ``crossval`` a :class:`~riskvet.validation.crossval.CrossValidation` or None,
    ``shrunk`` the shrunken model file written (or None, ``notes`` saying why)
    and ``model_check`` how the frozen model relates to the procedure.
    """
    texts = {
        "summary": validation.summary_sentence,
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
        "shrinkage": validation.shrinkage.summary_sentence,
        "stability": validation.stability.summary_sentence,
        "failures": validation.failure_sentence,
    }
    if crossval is not None:
        texts["crossval"] = crossval.summary_sentence + (
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
