"""Sentences of the agreement stage: each rated item, the predicted risk from each rater's readings, the summary line.

Counts and statistics in these sentences come from the published
(disclosure-controlled) tables and statistics, never from the raw
cross-tables: a suppressed count is stated as "fewer than 5" (or not at all),
and a statistic is written at the rounding it was published with.
"""

from __future__ import annotations

import math
from typing import Any, Sequence

from ...measures.agreement import PREVALENCE_LIMIT, UNINFORMATIVE_REASONS
from ..disclosure import SUPPRESSED, PublishedStatistics, PublishedTable
from .common import signed as _f

__all__ = [
    "DEVICE_NOTE",
    "NO_MODEL_NOTE",
    "SHORT_REASONS",
    "items_sentence",
    "kappa_sentence",
    "continuous_sentence",
    "decision_sentence",
    "risk_sentence",
    "agreement_summary",
    "figures_sentence",
    "missing_rows_sentence",
    "agreeing_phrase",
    "differing_count",
    "statistic_rows",
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

#: Why kappa is uninformative, in a few words for a table's note column.
SHORT_REASONS = {1: "one category holds nearly all readings", 2: "one rater used a single category"}

_WITHHELD = "withheld: with the counts shown it would let a reader work out a suppressed count"


def missing_rows_sentence(missing: int, total: int, min_cell_count: int) -> str:
    """How many rows lack a reading; a count from 1 to ``min_cell_count − 1`` is stated as "fewer than"."""
    count = f"Fewer than {min_cell_count}" if 0 < missing < min_cell_count and min_cell_count > 2 else (
        "Some" if 0 < missing < min_cell_count else str(missing))
    return f"{count} of {total} rows lack a reading from one or both raters and are left out."


def _shown(value: Any, stats: PublishedStatistics, name: str) -> str:
    digits = stats.decimals.get(name)
    return _f(value, 2 if digits is None else digits)


def agreeing_phrase(published: PublishedTable, stats: PublishedStatistics) -> str:
    """How many pairs the raters agree on, as published: a count, "fewer than m", "all but fewer than m" or a rounded share."""
    n, m = published.n, published.min_cell_count
    count = published.agreement_counts[0]
    if count != SUPPRESSED:
        return f"{count} of {n} people ({count / n:.0%})"
    if published.agreement_below_minimum[0]:
        return f"fewer than {m} of {n} people"
    if not published.bands and published.agreement_below_minimum[1]:
        return f"all but fewer than {m} of {n} people"
    share = stats["observed_agreement"]
    if share is None:
        return f"a number of the {n} people that is not shown (small counts)"
    return f"about {share:.0%} of {n} people (the count is not shown: small counts)"


def differing_count(published: PublishedTable) -> int | str:
    """People on whom the raters (or their decisions) differ, as published: a count or words."""
    m = published.min_cell_count
    diagonal = published.agreement_counts[0]
    if diagonal != SUPPRESSED:
        return published.n - int(diagonal)
    if not published.bands and published.agreement_below_minimum[1]:
        return f"fewer than {m}"
    if published.agreement_below_minimum[0]:
        return f"all but fewer than {m}"
    return "not shown (small counts)"


def _note(stats: PublishedStatistics, name: str, *, kappa: bool = False) -> str:
    if name in stats.withheld:
        return _WITHHELD
    parts = []
    value = stats[name]
    if value is not None and not math.isfinite(value):
        parts.append("undefined: both raters used a single category" if kappa else "undefined: no pair in that category")
    reason = stats["uninformative_reason"]
    if kappa and reason:
        parts.append(f"uninformative: {SHORT_REASONS.get(int(reason), '')}")
    if stats.rounded and stats.decimals.get(name) is not None:
        places = stats.decimals[name]
        parts.append(f"rounded to {places} decimal{'s' if places != 1 else ''} because the cross-table has suppressed counts")
    return "; ".join(parts)


def statistic_rows(stats: PublishedStatistics, *, confidence: float, weighted: bool, binary: bool,
                   indices: bool = True) -> list[dict[str, Any]]:
    """Frame rows of a cross-table's published statistics: statistic, estimate, lower and upper limit, interval, note.

    ``indices``: with the prevalence and bias indices (2 × 2 tables).
    """
    wald = f"{confidence:.0%} Wald interval"
    rows = []

    def shown(name: str) -> Any:
        """A rounded statistic as text with exactly its published decimals (0.47 stays 0.47, not 0.470)."""
        value, places = stats[name], stats.decimals.get(name)
        if places is None or value is None or value != value:
            return value
        return f"{value:.{places}f}"

    def add(label: str, name: str, interval: bool, kappa: bool = False) -> None:
        interval = interval and name not in stats.withheld
        rows.append({"statistic": label, "estimate": shown(name),
                     "lower limit": shown(f"{name}_lower") if interval else None,
                     "upper limit": shown(f"{name}_upper") if interval else None,
                     "interval": wald if interval else "", "note": _note(stats, name, kappa=kappa)})

    add("kappa", "kappa", True, kappa=True)
    if weighted:
        add("quadratic-weighted kappa", "weighted_kappa", True, kappa=True)
    add("prevalence- and bias-adjusted kappa (PABAK)", "pabak", False)
    if binary:
        add("positive agreement", "positive_agreement", False)
        add("negative agreement", "negative_agreement", False)
        if indices:
            add("prevalence index", "prevalence_index", False)
            add("bias index", "bias_index", False)
    return rows


def _kappa_words(stats: PublishedStatistics, *, confidence: float, label: str) -> str:
    value = stats["kappa"]
    if value is None:
        return f" {label} is not given: with the counts shown it would let a reader work out a suppressed count."
    if not math.isfinite(value):
        return f" {label} is undefined because both raters used a single category."
    text = (f" {label}, the agreement beyond what the rates alone would give by chance, is {_shown(value, stats, 'kappa')}"
            f" ({confidence:.0%} Wald interval {_shown(stats['kappa_lower'], stats, 'kappa_lower')} to "
            f"{_shown(stats['kappa_upper'], stats, 'kappa_upper')}).")
    reason = stats["uninformative_reason"]
    if reason:
        text += f" This kappa is uninformative: {UNINFORMATIVE_REASONS[int(reason)]}."
    return text


def _adjusted_words(stats: PublishedStatistics, levels: Sequence[str], categories: int) -> str:
    text = ""
    pabak = stats["pabak"]
    if pabak is not None:
        text += (f" The prevalence- and bias-adjusted kappa (PABAK), which takes chance agreement as 1/{categories} whatever "
                 f"the raters' rates, is {_shown(pabak, stats, 'pabak')}.")
    if categories == 2:
        pa, na = stats["positive_agreement"], stats["negative_agreement"]
        words = []
        for value, name, level in ((pa, "positive", levels[-1]), (na, "negative", levels[0])):
            if value is not None:
                words.append(f"{name} agreement (the chance that one records {level!r} when the other does) is "
                             f"{_shown(value, stats, f'{name}_agreement')}")
        if words:
            sentence = "; ".join(words)
            text += f" {sentence[0].upper()}{sentence[1:]}."
    return text


def _rounding_words(stats: PublishedStatistics) -> str:
    if not stats.rounded:
        return ""
    text = (" Because the cross-table has suppressed counts, these statistics are rounded (to 2 decimals, or 1 where 2 "
            "would give a count away)")
    shown = {"kappa": "kappa", "weighted_kappa": "weighted kappa", "pabak": "PABAK", "positive_agreement": "positive agreement",
             "negative_agreement": "negative agreement", "observed_agreement": "the share agreeing"}
    withheld = [words for name, words in shown.items() if name in stats.withheld]
    if withheld:
        one = len(withheld) == 1
        names = withheld[0] if one else f"{', '.join(withheld[:-1])} and {withheld[-1]}"
        text += (f", and {names} {'is' if one else 'are'} withheld, since {'it' if one else 'they'} would let a reader work out "
                 "a suppressed count")
    return text + "."


def kappa_sentence(item: Any, levels: Sequence[str], published: PublishedTable, stats: PublishedStatistics, *, confidence: float) -> str:
    """A binary or ordinal item: how often the raters agree, their rates (unless withheld), kappa, PABAK, specific agreement."""
    if item.scale == "binary" and not published.margins_shown:
        rates = (f" How often each rater recorded {levels[-1]!r} is not shown: with the number of people on whom they agree, "
                 f"it would let a reader work out a count below {published.min_cell_count}.")
    elif item.scale == "binary":
        pa, pb = (("a share not shown (small counts)" if t == SUPPRESSED else f"{t / published.n:.0%}")
                  for t in (published.row_totals[-1], published.column_totals[-1]))
        rates = f" {item.rater_a} recorded {levels[-1]!r} for {pa} and {item.rater_b} for {pb}."
    else:
        rates = ""
    text = f"{item.name}: the raters recorded the same value for {agreeing_phrase(published, stats)}.{rates}"
    text += _kappa_words(stats, confidence=confidence, label="Cohen's kappa")
    wk = stats.values.get("weighted_kappa")
    if wk is not None and math.isfinite(wk):
        text += (" With quadratic weights, which count near misses between ordered categories as part agreement, it is "
                 f"{_shown(wk, stats, 'weighted_kappa')} ({_shown(stats['weighted_kappa_lower'], stats, 'weighted_kappa_lower')} to "
                 f"{_shown(stats['weighted_kappa_upper'], stats, 'weighted_kappa_upper')}).")
    return text + _adjusted_words(stats, levels, len(levels)) + _rounding_words(stats)


def continuous_sentence(item: Any, table: Any, ba: Any) -> str:
    """A continuous item: ICC(2,1), ICC(3,1), the bias and the limits of agreement."""
    a, c = table["2,1"], table["3,1"]
    return (
        f"{item.name}: for {ba.n} people, ICC(2,1) (absolute agreement of single readings) is {_f(a.value)} "
        f"({a.confidence:.0%} approximate F-based interval {_f(a.lower)} to {_f(a.upper)}) and ICC(3,1) (consistency, ignoring a fixed offset) {_f(c.value)}. "
        f"On average {item.rater_a} reads {_f(abs(ba.bias), 3)} {'higher' if ba.bias >= 0 else 'lower'} than {item.rater_b} "
        f"({ba.confidence:.0%} t interval of the bias {_f(ba.bias_interval[0], 3)} to {_f(ba.bias_interval[1], 3)}); "
        f"for 95% of people the difference is expected between {_f(ba.lower, 3)} and {_f(ba.upper, 3)} in the item's units. "
        "Whether differences this large matter is a clinical judgement."
    )


def decision_sentence(threshold: float, published: PublishedTable, stats: PublishedStatistics, *, confidence: float) -> str:
    """One threshold: how many people the raters' readings put on different sides, and the decisions' agreement."""
    differ = differing_count(published)
    if isinstance(differ, str) and differ.startswith("not shown"):
        count = f"a number of the {published.n} people that is not shown (small counts)"
    else:
        count = f"{differ} of {published.n} people"
    text = f" At the threshold {threshold:g}, the raters' readings lead to different decisions for {count}."
    value = stats["kappa"]
    if value is not None and not math.isfinite(value):
        text += " Everyone falls on the same side of the threshold with both raters' readings, so kappa on the decisions is undefined."
    else:
        text += _kappa_words(stats, confidence=confidence, label="Kappa on the decisions")
    return text + _adjusted_words(stats, ("below", "at or above"), 2) + _rounding_words(stats)


def risk_sentence(c: Any) -> str:
    """One cut: how far the raters' readings move the predicted risk, and the decisions at each threshold."""
    ba = c.risks
    text = (
        f"Risk of '{c.label}': the rater_a readings give risks {_f(abs(ba.bias) * 100, 1)} percentage points "
        f"{'higher' if ba.bias >= 0 else 'lower'} than the rater_b readings on average; for 95% of people the two risks differ by between "
        f"{_f(ba.lower * 100, 1)} and {_f(ba.upper * 100, 1)} percentage points."
    )
    for d, table, stats in zip(c.decisions, c.published_tables, c.statistics):
        text += decision_sentence(d.threshold, table, stats, confidence=d.decisions.confidence)
    if not c.decisions:
        text += " The study gives no threshold for this cut, so decisions were not compared."
    return text


def _summary_kappa(it: Any) -> str | None:
    stats = it.statistics
    key = "weighted_kappa" if it.weighted_kappa is not None else "kappa"
    kind = "quadratic-weighted kappa" if key == "weighted_kappa" else "kappa"
    value = stats[key]
    if value is None:
        return f"{it.name} {kind} withheld (small counts)"
    if not math.isfinite(value):
        return f"{it.name} {kind} undefined"
    text = f"{it.name} {kind} {_shown(value, stats, key)} ({_shown(stats[f'{key}_lower'], stats, f'{key}_lower')} to {_shown(stats[f'{key}_upper'], stats, f'{key}_upper')})"
    if stats["uninformative_reason"]:
        pabak = stats["pabak"]
        text += " (uninformative: " + SHORT_REASONS[int(stats["uninformative_reason"])]
        text += f"; PABAK {_shown(pabak, stats, 'pabak')})" if pabak is not None else ")"
    return text


def agreement_summary(items: Sequence[Any], risk: Any) -> str:
    """The stage in one line for the record's summary: each item's agreement, and the risk's limits of agreement."""
    parts = []
    for it in items:
        if it.kappa is not None and it.statistics is not None:
            parts.append(_summary_kappa(it))
        elif it.icc is not None:
            r = it.icc["2,1"]
            parts.append(f"{it.name} ICC(2,1) {_f(r.value)} ({_f(r.lower)} to {_f(r.upper)}), "
                         f"limits of agreement {_f(it.bland_altman.lower, 3)} to {_f(it.bland_altman.upper, 3)}")
    text = "Rater agreement (95% intervals): " + "; ".join(parts) + "." if parts else "Rater agreement could not be computed for any item."
    if risk is None:
        return text + " Agreement of predicted risk was not assessed."
    limits = "; ".join(f"'{c.label}' {_f(c.risks.lower * 100, 1)} to {_f(c.risks.upper * 100, 1)}" for c in risk.cuts)
    fixed = ", other predictors fixed" if risk.fixed else ""
    return text + f" Limits of agreement of the predicted risk from each rater's readings (percentage points{fixed}): {limits}."


def items_sentence(n_items: int, n_people: int) -> str:
    """How many items and people, and how to read kappa, PABAK, specific agreement, the ICC and the limits of agreement."""
    return (
        f"Agreement of the two raters was assessed for {n_items} item(s) in {n_people} people rated by both. "
        "Kappa and the intraclass correlation are 1 for perfect agreement and 0 for agreement no better than chance "
        "(negative values: worse than chance). "
        f"When one category holds nearly all readings (at least {PREVALENCE_LIMIT:.0%}), kappa can be low despite high agreement, "
        "so it is marked uninformative; the prevalence- and bias-adjusted kappa (PABAK, also from −1 to 1) and, for two "
        "categories, positive and negative agreement (0 to 1, higher is better) say how often the raters agree on each category. "
        "The limits of agreement are in the item's own units; narrower is better."
    )


def figures_sentence(*, pair_level: bool, min_cell_count: int) -> str:
    """What the Bland–Altman figures draw: bins of pairs (the default) or single pairs (``output.pair_level_plots``)."""
    if pair_level:
        return ("The Bland–Altman figures mark single pairs of readings (one circle per distinct pair, its size by the number of "
                "people there), because the study allows pair-level plots.")
    if min_cell_count > 1:
        sparse = (f"Bins holding fewer than {min_cell_count} people are not drawn, so that no small group of people can be "
                  "picked out; the lines use every pair.")
    else:
        sparse = "The lines use every pair."
    return ("The Bland–Altman figures show bins of pairs rather than single pairs: each rectangle covers a range of the mean of "
            f"the two readings and of their difference, shaded by how many people fall in it. {sparse}")
