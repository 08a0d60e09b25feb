"""Display names a record uses for outcome events and summary measures.

The name of a cut in tables (``Y >= level``) is
:func:`riskvet.intake.outcome.cut_name`; the names here are the ones pages
and sentences use: the event of a cut in words (:func:`cut_label`) and a key
of :func:`riskvet.measures.summary.performance_summary` in words
(:func:`summary_label`).
"""

from __future__ import annotations

from typing import Sequence

from ..intake.outcome import cut_name
from ..validation.external import measure_label

__all__ = ["cut_label", "summary_label"]


def cut_label(levels: Sequence[str], cut: int, *, binary: bool) -> str:
    """The event of cut ``cut`` in words: the event level, or "<level> or higher"."""
    if binary or cut == len(levels) - 2:
        return str(levels[cut + 1])
    return f"{levels[cut + 1]} or higher"


def summary_label(key: str, levels: Sequence[str]) -> str:
    """``auc_cut1`` -> ``C (AUC) of the cut, Y >= <level 2>`` (binary: the measure alone)."""
    head, sep, tail = key.rpartition("_cut")
    if sep and tail.isdigit():
        words = measure_label(head, len(levels))
        return words if len(levels) == 2 else f"{words}, {cut_name(levels, int(tail))}"
    return measure_label(key, len(levels))
