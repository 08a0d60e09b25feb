"""Sentences of the agreement stage: each rated item, the predicted risk from each rater's readings, the summary line.

Counts in these sentences come from the published (disclosure-controlled)
tables, never from the raw cross-tables.
"""

from __future__ import annotations

import math
from typing import Any, Sequence

from ..disclosure import SUPPRESSED, PublishedTable
from .common import signed as _f

__all__ = [
    "DEVICE_NOTE",
    "NO_MODEL_NOTE",
    "items_sentence",
    "kappa_sentence",
    "continuous_sentence",
    "risk_sentence",
    "agreement_summary",
]

#: Why the risk comparison is missing when the stage ran before a model existed.
NO_MODEL_NOTE = (
    "Whether the raters' readings give the same predicted risk and decision needs the frozen model, "
    "which did not exist when this stage ran; only the predictors' agreement is reported."
)

#: What the risk comparison is and is not.
DEVICE_NOTE = (
    "These risks are a sensitivity device, not estimates for the people rated: predictors the ratings file does not hold "
    "are fixed at the derivation cohort's median (numbers) or most frequent category, so the comparison shows how far the "
    "raters' differences alone move the predicted risk and the decision."
)




def _rate(total: int | str, n: int) -> str:
    if total == SUPPRESSED:
        return "a share not shown (small counts)"
    return f"{total / n:.0%}"


def kappa_sentence(item: Any, k: Any, wk: Any, levels: list[str], published: PublishedTable) -> str:
    """A binary or ordinal item: how often the raters agree, their rates (unless withheld), kappa and weighted kappa."""
    share = k.observed_agreement
    if item.scale == "binary" and not published.margins_shown:
        rates = (f"How often each rater recorded {levels[-1]!r} is not shown: with the number of people on whom they agree, "
                 f"it would let a reader work out a count below {published.min_cell_count}. ")
    elif item.scale == "binary":
        pa, pb = _rate(published.row_totals[-1], k.n), _rate(published.column_totals[-1], k.n)
        rates = f"{item.rater_a} recorded {levels[-1]!r} for {pa} and {item.rater_b} for {pb}. "
    else:
        rates = ""
    if not math.isfinite(k.value):
        return (f"{item.name}: the raters recorded the same value for {share:.0%} of {k.n} people. {rates}"
                "Kappa is undefined because both raters used a single category.")
    text = (f"{item.name}: the raters recorded the same value for {share:.0%} of {k.n} people. {rates}"
            f"Cohen's kappa, the agreement beyond what the raters' own rates would give by chance, is {_f(k.value)} "
            f"({k.confidence:.0%} CI {_f(k.lower)} to {_f(k.upper)}).")
    if wk is not None and math.isfinite(wk.value):
        text += f" With quadratic weights, which count near misses between ordered categories as part agreement, it is {_f(wk.value)} ({_f(wk.lower)} to {_f(wk.upper)})."
    return text


def continuous_sentence(item: Any, table: Any, ba: Any) -> str:
    """A continuous item: ICC(2,1), ICC(3,1), the bias and the limits of agreement."""
    a, c = table["2,1"], table["3,1"]
    return (
        f"{item.name}: for {ba.n} people, ICC(2,1) (absolute agreement of single readings) is {_f(a.value)} "
        f"({a.confidence:.0%} CI {_f(a.lower)} to {_f(a.upper)}) and ICC(3,1) (consistency, ignoring a fixed offset) {_f(c.value)}. "
        f"On average {item.rater_a} reads {_f(abs(ba.bias), 3)} {'higher' if ba.bias >= 0 else 'lower'} than {item.rater_b} "
        f"({ba.confidence:.0%} CI of the bias {_f(ba.bias_interval[0], 3)} to {_f(ba.bias_interval[1], 3)}); "
        f"for 95% of people the difference is expected between {_f(ba.lower, 3)} and {_f(ba.upper, 3)} in the item's units. "
        "Whether differences this large matter is a clinical judgement."
    )


def risk_sentence(c: Any) -> str:
    """One cut: how far the raters' readings move the predicted risk, and the decisions at each threshold."""
    ba = c.risks
    text = (
        f"Risk of '{c.label}': the rater_a readings give risks {_f(abs(ba.bias) * 100, 1)} percentage points "
        f"{'higher' if ba.bias >= 0 else 'lower'} than the rater_b readings on average; for 95% of people the two risks differ by between "
        f"{_f(ba.lower * 100, 1)} and {_f(ba.upper * 100, 1)} percentage points."
    )
    for d in c.decisions:
        text += f" At the threshold {d.threshold:g}, the raters' readings lead to different decisions for {d.discordant} of {d.n} people"
        if math.isfinite(d.decisions.value):
            text += f" (kappa on the decisions {_f(d.decisions.value)})."
        else:
            text += "; everyone falls on the same side of the threshold with both raters' readings, so kappa on the decisions is undefined."
    if not c.decisions:
        text += " The study gives no threshold for this cut, so decisions were not compared."
    return text


def agreement_summary(items: Sequence[Any], risk: Any) -> str:
    """The stage in one line for the record's summary: each item's agreement, and the risk's limits of agreement."""
    parts = []
    for it in items:
        if it.kappa is not None:
            k = it.weighted_kappa if it.weighted_kappa is not None else it.kappa
            kind = "quadratic-weighted kappa" if it.weighted_kappa is not None else "kappa"
            parts.append(f"{it.name} {kind} {_f(k.value)} ({_f(k.lower)} to {_f(k.upper)})")
        elif it.icc is not None:
            r = it.icc["2,1"]
            parts.append(f"{it.name} ICC(2,1) {_f(r.value)} ({_f(r.lower)} to {_f(r.upper)}), "
                         f"limits of agreement {_f(it.bland_altman.lower, 3)} to {_f(it.bland_altman.upper, 3)}")
    text = "Rater agreement: " + "; ".join(parts) + "." if parts else "Rater agreement could not be computed for any item."
    if risk is None:
        return text + " Agreement of predicted risk was not assessed."
    limits = "; ".join(f"'{c.label}' {_f(c.risks.lower * 100, 1)} to {_f(c.risks.upper * 100, 1)}" for c in risk.cuts)
    fixed = ", other predictors fixed" if risk.fixed else ""
    return text + f" Limits of agreement of the predicted risk from each rater's readings (percentage points{fixed}): {limits}."


def items_sentence(n_items: int, n_people: int) -> str:
    """How many items and people, and how to read kappa, the ICC and the limits of agreement."""
    return (
        f"Agreement of the two raters was assessed for {n_items} item(s) in {n_people} people rated by both. "
        "Kappa and the intraclass correlation are 1 for perfect agreement and 0 for agreement no better than chance; "
        "the limits of agreement are in the item's own units."
    )
