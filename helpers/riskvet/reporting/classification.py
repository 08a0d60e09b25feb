"""Classification counts at risk thresholds as a record publishes them.

At each threshold the four counts (true and false positives and negatives)
form a 2 × 2 table whose margins, the numbers with and without the event,
the page states.  A count from 1 to ``min_cell_count - 1`` is suppressed
together with its partner in the same margin (the partner is the margin
minus the count), and every measure computed from a suppressed pair
(sensitivity, specificity, predictive values, likelihood ratios, with their
limits) is withheld, because with the margins known each of them gives the
count back (for example TP = sensitivity × events).

References
----------
Hundepool A, Domingo-Ferrer J, Franconi L, Giessing S, Schulte Nordholt E,
Spicer K, de Wolf P-P. Statistical Disclosure Control. Wiley, 2012 (primary
and secondary suppression of magnitude and frequency tables).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..errors import RiskvetError, problem
from ..measures.decision import ThresholdTable

__all__ = ["PublishedThresholds", "publish_thresholds"]

_EVENT_SIDE = ("sensitivity", "sensitivity_lower", "sensitivity_upper")
_NONEVENT_SIDE = ("specificity", "specificity_lower", "specificity_upper")
_BOTH_SIDES = (
    "ppv", "ppv_lower", "ppv_upper", "npv", "npv_lower", "npv_upper",
    "lr_positive", "lr_positive_lower", "lr_positive_upper", "lr_negative", "lr_negative_lower", "lr_negative_upper",
)


@dataclass(frozen=True)
class PublishedThresholds:
    """A :class:`~riskvet.measures.decision.ThresholdTable` with small counts suppressed.

    Attributes
    ----------
    table : ThresholdTable
        The measures, with every suppressed count and every withheld
        measure set to ``nan``.
    suppressed : ndarray of bool, shape (thresholds, 4)
        Which of TP, FP, FN, TN are suppressed at each threshold.
    min_cell_count : int
        Counts from 1 to ``min_cell_count - 1`` are suppressed.
    """

    table: ThresholdTable
    suppressed: np.ndarray
    min_cell_count: int

    @property
    def n_suppressed(self) -> int:
        return int(self.suppressed.sum())

    @property
    def sentence(self) -> str:
        """What the page says about suppression (empty when nothing was suppressed)."""
        if not self.n_suppressed:
            return ""
        return (
            f"Counts below {self.min_cell_count} are not shown, nor the count beside them in the same outcome group "
            "(it would give the small one back by subtraction), nor the measures computed from them; such cells show a dash."
        )

    def to_frame(self) -> pd.DataFrame:
        """The published table, one row per threshold (a suppressed count or withheld measure is missing)."""
        skip = ("confidence", "interval", "n_events", "n_nonevents")
        frame = pd.DataFrame({n: getattr(self.table, n) for n in self.table.__dataclass_fields__ if n not in skip})
        for name in ("tp", "fp", "fn", "tn"):
            frame[name] = pd.array([None if v != v else int(v) for v in frame[name]], dtype="Int64")
        return frame

    def to_dict(self) -> dict[str, Any]:
        content = self.table.to_dict()
        content.update(suppressed=self.suppressed, min_cell_count=self.min_cell_count)
        return to_jsonable(content)


def publish_thresholds(table: ThresholdTable, *, min_cell_count: int) -> PublishedThresholds:
    """Suppress small classification counts and the measures that would give them back.

    Parameters
    ----------
    table : ThresholdTable
        Counts and measures at each threshold
        (:func:`riskvet.measures.decision.threshold_table`).
    min_cell_count : int
        ``output.min_cell_count``; 0 or 1 suppresses nothing.

    Returns
    -------
    PublishedThresholds
    """
    if not isinstance(table, ThresholdTable):
        raise RiskvetError(problem("publish_thresholds(table)", allowed="a ThresholdTable", received=type(table).__name__))
    if isinstance(min_cell_count, bool) or not isinstance(min_cell_count, (int, np.integer)) or min_cell_count < 0:
        raise RiskvetError(problem("publish_thresholds(min_cell_count)", allowed="a whole number >= 0", received=min_cell_count))
    counts = np.column_stack([table.tp, table.fp, table.fn, table.tn])
    small = (counts > 0) & (counts < min_cell_count)
    events_side = small[:, 0] | small[:, 2]  # TP + FN = events
    nonevents_side = small[:, 1] | small[:, 3]  # FP + TN = non-events
    suppressed = np.column_stack([events_side, nonevents_side, events_side, nonevents_side])
    changes: dict[str, np.ndarray] = {}
    for position, name in enumerate(("tp", "fp", "fn", "tn")):
        changes[name] = np.where(suppressed[:, position], np.nan, counts[:, position])
    for name in _EVENT_SIDE:
        changes[name] = np.where(events_side, np.nan, getattr(table, name))
    for name in _NONEVENT_SIDE:
        changes[name] = np.where(nonevents_side, np.nan, getattr(table, name))
    for name in _BOTH_SIDES:
        changes[name] = np.where(events_side | nonevents_side, np.nan, getattr(table, name))
    return PublishedThresholds(
        table=dataclasses.replace(table, **changes), suppressed=suppressed, min_cell_count=int(min_cell_count)
    )
