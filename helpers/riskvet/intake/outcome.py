"""The outcome: its codes 0..K-1, and the name of each cut.

Levels are coded 0..K-1 lowest first, in the study's order; a binary
outcome's event is 1.  Cut j of an ordered outcome is Y > j, that is
Y >= level j+1.  Every layer that names a cut in a table or a figure uses
:func:`cut_name`, so the cut reads the same everywhere.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from ..errors import DataError
from .study import Study

__all__ = ["outcome_codes", "cut_name"]


def outcome_codes(study: Study, values: pd.Series, *, source: str = "data") -> np.ndarray:
    """Code the outcome column as integers 0..K-1 in the study's order.

    The one place outcome values become codes: the cohort checks of
    :func:`riskvet.intake.data.prepare_cohort` and every analysis frame
    given directly to the bootstrap use it.  Values are compared as text,
    so ``1`` and ``"1"`` are the same level.

    Parameters
    ----------
    study : Study
        Its ``outcome.ordered_levels`` give the order, lowest first.
    values : Series
        The outcome column; every value must be a configured level.
    source : str
        Where the values come from, for the message.

    Returns
    -------
    ndarray of int64
        Codes 0..K-1, aligned with ``values``.

    Raises
    ------
    DataError
        Naming the values that are not configured levels, with their counts.
    """
    levels = list(study.outcome.ordered_levels)
    text = values.astype("string")
    codes = np.full(len(values), -1, dtype=np.int64)
    for k, level in enumerate(levels):
        codes[(text == level).fillna(False).to_numpy()] = k
    bad = codes < 0
    if bad.any():
        counts = text[bad].value_counts(dropna=False).head(5).to_dict()
        raise DataError(
            f"{source}: column {study.outcome.column!r}: expected the levels {levels}; "
            f"{int(bad.sum())} value(s) are not among them: {counts}"
        )
    return codes


def cut_name(levels: Sequence[str], cut: int | None) -> str:
    """Display name of cut j: ``"Y >= <level j+1>"``, or the event level for a binary outcome.

    ``cut`` None names the outcome as a whole: ``"all levels"`` (binary: the event level).
    """
    if len(levels) == 2:
        return str(levels[1])
    if cut is None:
        return "all levels"
    return f"Y >= {levels[cut + 1]}"
