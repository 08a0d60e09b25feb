"""Sentences of the updating stage: the closed test, calibration before and after, the model files."""

from __future__ import annotations

import math

from typing import Any, Mapping

from ...validation.update import METHODS, method_label, method_name
from .common import CAUTION
from .external_validation import outcome_words

__all__ = ["CORRECTED_COLUMN", "updating_texts", "update_summary", "step_decision", "closed_test_sentence", "optimism_sentence"]

#: Header of the performance table's bootstrap-corrected column.
CORRECTED_COLUMN = "chosen update, corrected for the optimism of the whole updating procedure (bootstrap)"


def step_decision(closed_test: Any, step: int, *, binary: bool) -> str:
    """What step ``step`` (0-based) of the closed test decided, in words; ``not reached`` after the procedure stopped."""
    t = closed_test.tests[step]
    most = method_name(closed_test.most_extensive, binary=binary)
    if not t.reached:
        return "not reached: the procedure had already stopped"
    if step == 0:
        return (f"the original fits significantly worse than {most}: go on" if t.significant
                else f"{most} is no significant improvement: keep the original and stop")
    if t.df == 0:
        return f"the same model as {most}: chosen, stop"
    if not t.significant:
        return "not significantly worse: chosen, stop"
    if step == len(closed_test.tests) - 1 and closed_test.chosen == closed_test.most_extensive:
        return f"significantly worse: {most} is chosen"
    return "significantly worse: go on to the next step"


def closed_test_sentence(closed_test: Any, *, binary: bool) -> str:
    """How the closed test proceeds, and which of its tests it reached."""
    most = method_name(closed_test.most_extensive, binary=binary)
    n, reached = len(closed_test.tests), sum(t.reached for t in closed_test.tests)
    text = (
        f"{n} likelihood-ratio tests at alpha = {closed_test.alpha:g}. The first asks whether the original model fits "
        f"significantly worse than the most extensive update ({most}); if it does, each simpler update is tested "
        f"against {most}, least extensive first, and the closed test stops at the first step that is not significant, "
        "choosing that update."
    )
    if reached < n:
        text += (
            f" The procedure reached {reached} of the {n} tests; the {n - reached} later "
            f"{'test is' if n - reached == 1 else 'tests are'} marked 'not reached': computed and shown for "
            "completeness, they did not decide, whatever their p-value."
        )
    else:
        text += " The procedure reached every test."
    return text


def optimism_sentence(result: Any, c_key: str, c_cut: Any, c_name: str) -> str:
    """The bootstrap correction attributed to what it measures: the whole updating procedure, whichever update each replicate chose."""
    perf = result.performance
    binary = len(result.fits["original"].model.levels) == 2
    rows = perf.table[(perf.table["method"] == result.closed_test.chosen) & (perf.table["measure"] == c_key)]
    rows = rows[rows["cut"].isna()] if c_cut is None else rows[rows["cut"] == c_cut]
    if not perf.n_boot or not len(rows):
        return f"Warning: {perf.note}"
    row = rows.iloc[0]
    used = perf.n_boot - perf.n_failed
    withheld = getattr(perf, "correction_withheld", "") or getattr(perf, "correction_notes", {}).get(c_key, "")
    if withheld or not math.isfinite(float(row["corrected"])):
        return (f"Warning: {perf.note} The bootstrap correction of {c_name} for the whole updating procedure is withheld: "
                f"{withheld or 'it could not be computed from the replicates'}.")
    order = sorted(perf.replicate_choices.items(), key=lambda kv: (-kv[1], METHODS.index(kv[0])))
    chose = ", ".join(f"{method_name(m, binary=binary)} in {k}" for m, k in order)
    name = method_name(result.closed_test.chosen, binary=binary)
    return (
        f"Warning: {perf.note} Across {used} bootstrap replicates of the whole updating procedure (every update refitted "
        f"and the closed test rerun on each resample; it chose {chose} of {used} replicates), the model the procedure "
        f"chose looked better on its own resample than on the updating data by {row['optimism']:.3f} in {c_name} on "
        f"average. Subtracted from the {c_name} of the update chosen on all the data ({name}, {row['apparent']:.3f}), "
        f"this gives {row['corrected']:.3f}: a figure for the updating procedure as a whole, not for {name} alone."
    )


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
    # The notebook states the optimism warning once, beside the performance table.
    texts = {"caution": CAUTION, "choice": update_summary(result, caution=False)}
    texts["calibration"] = (
        "Smoothed observed proportion against predicted risk on the updating data, for the original model and "
        + ("the original model again (no update was chosen)." if chosen.method == "original" else
           f"the chosen update ({method_name(chosen.method, binary=binary)}); the updated curve is drawn on the data "
           "that fitted it, so its closeness to the diagonal is optimistic.")
    )
    texts["tests"] = closed_test_sentence(ct, binary=binary)
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
        texts["optimism"] = optimism_sentence(result, *_headline(binary))
        texts["models"] = (
            f"Every update was still written as a new model file whose provenance names its parent model "
            f"({result.parent_sha256[:12]}...), the method and the data it was updated on ({result.cohort}, "
            f"{result.data_sha256[:12]}...), so that a reviewer can inspect them; the closed test chose none of them."
        )
        texts["coefficients"] = "The original model is kept; its thresholds and coefficients are unchanged."
        return texts
    for j in range(K - 1):
        parts.append(
            f"For {outcome_words(levels, j)}, calibration-in-the-large moves from {value('original', 'calibration_intercept', j):+.2f} "
            f"to {value(chosen.method, 'calibration_intercept', j):+.2f} and the slope from "
            f"{value('original', 'calibration_slope', j):.2f} to {value(chosen.method, 'calibration_slope', j):.2f}."
        )
    c_key, c_cut, c_name = _headline(binary)
    parts.append(
        f"The {c_name} is {value('original', c_key, c_cut):.3f} before and "
        f"{value(chosen.method, c_key, c_cut):.3f} after."
    )
    texts["performance"] = " ".join(parts)
    texts["optimism"] = optimism_sentence(result, c_key, c_cut, c_name)
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


def _headline(binary: bool) -> tuple[str, Any, str]:
    """(measure key, cut, name) of the headline discrimination measure."""
    return ("auc", 0, "C statistic") if binary else ("average_cut_auc", None, "average dichotomised C")


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
