"""Sentences of the updating stage: the closed test, calibration before and after, the model files."""

from __future__ import annotations

from typing import Any, Mapping

from ...intake.outcome import cut_name
from ...validation.update import method_label, method_name
from .common import CAUTION

__all__ = ["updating_texts", "update_summary"]


def _capital(text: str) -> str:
    return text[:1].upper() + text[1:]


def updating_texts(result: Any, files: Mapping[str, Mapping[str, str]]) -> dict[str, str]:
    """One sentence per table and figure of the updating stage.

    ``result`` is an :class:`~riskvet.validation.update.UpdateResult`;
    ``files`` maps each update method to the model file written for it.
    """
    ct = result.closed_test
    chosen = result.chosen
    levels = tuple(result.fits["original"].model.levels)
    binary = len(levels) == 2
    most = method_name(ct.most_extensive, binary=binary)
    # The notebook states the optimism warning once, beside the performance table.
    texts = {"caution": CAUTION, "choice": update_summary(result, caution=False)}
    texts["calibration"] = (
        "Smoothed observed proportion against predicted risk on the updating data, for the original model and "
        + ("the original model again (no update was chosen)." if chosen.method == "original" else
           f"the chosen update ({method_name(chosen.method, binary=binary)}); the updated curve is drawn on the data "
           "that fitted it, so its closeness to the diagonal is optimistic.")
    )
    reached = [t for t in ct.tests if t.reached]
    texts["tests"] = (
        f"{len(ct.tests)} likelihood-ratio tests at alpha = {ct.alpha:g}; the procedure used {len(reached)} of them "
        f"(the rest are shown for completeness). Each test asks whether the simpler model fits significantly worse than "
        f"{most}, after the first has shown that the original fits worse than it."
        if ct.tests[0].significant
        else f"The first test found no evidence that {most} fits better than the original model, so "
        "no update is needed on these data; the other tests are shown for completeness."
    )
    perf = result.performance.to_frame()

    def value(method: str, measure: str, cut: int | None, column: str = "apparent") -> float:
        rows = perf[(perf["method"] == method) & (perf["measure"] == measure)]
        rows = rows[rows["cut"].isna()] if cut is None else rows[rows["cut"] == cut]
        return float(rows[column].iloc[0]) if len(rows) else float("nan")

    K = len(result.fits["original"].model.levels)
    parts = []
    if chosen.method == "original":
        texts["performance"] = (
            "The original model is kept, so its performance on these data is the external validation's: "
            "the columns of the other updates show what each would have changed, on the data that fitted it."
        )
        texts["optimism"] = f"Warning: {result.performance.note}"
        texts["models"] = (
            f"Every update was still written as a new model file whose provenance names its parent model "
            f"({result.parent_sha256[:12]}...), the method and the data it was updated on ({result.cohort}, "
            f"{result.data_sha256[:12]}...), so that a reviewer can inspect them; the closed test chose none of them."
        )
        texts["coefficients"] = "The original model is kept; its thresholds and coefficients are unchanged."
        return texts
    for j in range(K - 1):
        parts.append(
            f"For {cut_name(levels, j)}, calibration-in-the-large moves from {value('original', 'calibration_intercept', j):+.2f} "
            f"to {value(chosen.method, 'calibration_intercept', j):+.2f} and the slope from "
            f"{value('original', 'calibration_slope', j):.2f} to {value(chosen.method, 'calibration_slope', j):.2f}."
        )
    c_key, c_cut, c_name = ("auc", 0, "C statistic") if binary else ("average_cut_auc", None, "average dichotomised C")
    parts.append(
        f"The {c_name} is {value('original', c_key, c_cut):.3f} before and "
        f"{value(chosen.method, c_key, c_cut):.3f} after."
    )
    texts["performance"] = " ".join(parts)
    if result.performance.n_boot and chosen.method != "original":
        texts["optimism"] = (
            f"Warning: {result.performance.note} With {result.performance.n_boot} bootstrap replicates repeating the whole "
            f"procedure, the optimism-corrected {c_name} of the chosen update is "
            f"{value(chosen.method, c_key, c_cut, 'corrected'):.3f}."
        )
    else:
        texts["optimism"] = f"Warning: {result.performance.note}"
    texts["models"] = (
        f"Every update was written as a new model file whose provenance names its parent model "
        f"({result.parent_sha256[:12]}...), the method and the data it was updated on ({result.cohort}, "
        f"{result.data_sha256[:12]}...). The chosen file is {files.get(chosen.method, {}).get('path', 'the original model')}."
    )
    texts["coefficients"] = (
        f"{_capital(method_label(chosen.method, binary=binary))}: thresholds and coefficients of the chosen model beside the original. "
        "A recalibration keeps every coefficient's ratio to the others; a revision or extension re-estimates each one."
    )
    return texts


def update_summary(result: Any, *, caution: bool = True) -> str:
    """A sentence naming the chosen update and what it changed.

    Parameters
    ----------
    caution : bool, keyword-only
        End with the warning that performance on the updating data is
        optimistic (when an update was chosen); a notebook that states it
        elsewhere passes False.
    """
    chosen = result.chosen
    first = result.closed_test.tests[0]
    text = (
        f"On {result.cohort} (n = {result.n}) the closed test at alpha = {result.closed_test.alpha:g} chose "
        f"{chosen.label}. {result.closed_test.reason}"
    )
    if chosen.method == "in_the_large":
        d = chosen.parameters["shift"]
        what = "The threshold moves" if len(chosen.model.levels) == 2 else "The thresholds move"
        text += (
            f" {what} by {d:+.3f} on the link scale "
            f"({'lower' if d > 0 else 'higher'} predicted risks at the same predictor values)."
        )
    elif chosen.method == "recalibration":
        text += f" The calibration slope on the linear predictor is {chosen.parameters['slope']:.3f}."
    if caution and first.reached and chosen.method != "original":
        text += " " + result.performance.note  # the optimism warning the update stores
    return text
