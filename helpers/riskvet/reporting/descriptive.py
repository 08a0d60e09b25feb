"""The descriptive table of a cohort: predictors by outcome level, as published.

:func:`descriptive_table` counts and summarises each predictor within each
outcome level, then publishes the table through disclosure control
(:func:`riskvet.reporting.disclosure.suppress_until_safe`): small
counts and the counts that would give them away are hidden (each shown as
"suppressed", whether small or hidden to protect one), percentages that
would reveal a hidden total are left out, and numeric summaries of groups
smaller than ``min_cell_count`` are withheld.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..errors import DataError, problem
from ..intake.data import PreparedCohort, _as_text, _check_cohort, _is_binary_number, expand_cohort
from .disclosure import SUPPRESSED, suppress_until_safe

__all__ = ["DescriptiveTable", "descriptive_table"]

@dataclass(frozen=True)
class DescriptiveTable:
    """Predictors by outcome level, with small counts suppressed.

    Attributes
    ----------
    table : DataFrame
        Text cells; columns ``predictor``, ``level``, ``statistic``, one
        column per outcome level (its display label) and ``overall``.
    min_cell_count : int
        Counts from 1 to ``min_cell_count - 1`` are shown as ``"<m"``; 0 or 1
        shows every count.
    n_suppressed : int
        Count cells suppressed, including complementary suppressions.
    n_suppressed_summaries : int
        Numeric summaries withheld because their group has fewer than
        ``min_cell_count`` rows.
    """

    table: pd.DataFrame = field(repr=False)
    min_cell_count: int
    n_suppressed: int
    n_suppressed_summaries: int

    def to_frame(self) -> pd.DataFrame:
        """The table."""
        return self.table.copy()

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready table and suppression counts."""
        return to_jsonable({
            "min_cell_count": self.min_cell_count,
            "n_suppressed": self.n_suppressed,
            "n_suppressed_summaries": self.n_suppressed_summaries,
            "rows": self.table.to_dict(orient="records"),
        })


def descriptive_table(
    cohort: PreparedCohort,
    *,
    levels: Sequence[str] | None = None,
    labels: Mapping[str, str] | None = None,
    min_cell_count: int = 5,
    digits: int = 1,
) -> DescriptiveTable:
    """Predictors of a prepared cohort by outcome level.

    Parameters
    ----------
    cohort : PreparedCohort
    levels : sequence of str, optional
        Outcome levels in code order 0..K-1 (``study.outcome.ordered_levels``);
        defaults to ``cohort.outcome_levels`` and must match it.
    labels : mapping, optional
        Display label per outcome level (``study.outcome.labels``).
    min_cell_count : int
        Counts from 1 to ``min_cell_count - 1`` are shown as ``"<m"``
        (``study.output.min_cell_count``); 0 shows every count.
    digits : int
        Decimals of summaries and percentages.

    Returns
    -------
    DescriptiveTable
        Numeric predictors: ``median [Q1, Q3]`` and ``mean (SD)``; categorical
        predictors and numeric predictors taking only 0 and 1: ``n (%)`` per
        level, the percentage of the column's rows (the count alone when the
        column's total is hidden).  The first row gives the number of rows
        per column.  For a cohort with frequency weights every count and
        summary is of people: the table of the cohort written out one row
        per person (:func:`riskvet.intake.data.expand_cohort`).

    Notes
    -----
    Quartiles are numpy's default (linear interpolation, definition 7 of
    Hyndman & Fan 1996); SD uses n - 1.  A hidden count can be recovered by
    subtraction when it is the only one hidden among cells with a published
    total (the levels of one predictor within a column; the outcome columns
    of one row against ``overall``), so further cells are hidden until no such
    line has exactly one hidden cell (complementary suppression, Hundepool
    et al. 2012, ch. 5).  Numeric summaries of a group with fewer than
    ``min_cell_count`` rows are withheld.

    References
    ----------
    Hyndman RJ, Fan Y. Sample quantiles in statistical packages. The American
    Statistician 1996;50(4):361-365.

    Hundepool A, Domingo-Ferrer J, Franconi L, Giessing S, Schulte Nordholt E,
    Spicer K, de Wolf P-P. Statistical Disclosure Control. Wiley, 2012.
    """
    # with frequency weights the table describes people: the cohort written out one row per person
    cohort = expand_cohort(_check_cohort(cohort, "descriptive_table: cohort"))
    levels, names, m = _checked_options(cohort, levels=levels, labels=labels, min_cell_count=min_cell_count, digits=digits)
    K = len(levels)
    groups = [cohort.y == k for k in range(K)] + [np.ones(len(cohort.y), dtype=bool)]
    group_n = [int(g.sum()) for g in groups]
    rows, count_blocks = _described_rows(cohort, groups, group_n, m=m, digits=digits)
    counts = {(r, c): n for r, row in enumerate(rows) if "counts" in row for c, n in enumerate(row["counts"])}
    # hidden until no count can be worked out from the row and column sums (integer programming), not only by one subtraction
    hidden = suppress_until_safe(counts, _published_sums(rows, count_blocks, K), m)
    table_rows, n_summaries_hidden = _published_cells(rows, hidden, group_n, m=m, digits=digits)
    table = pd.DataFrame(table_rows, columns=["predictor", "level", "statistic", *names, "overall"])
    return DescriptiveTable(table=table, min_cell_count=m, n_suppressed=len(hidden), n_suppressed_summaries=n_summaries_hidden)


def _checked_options(cohort: PreparedCohort, *, levels, labels, min_cell_count, digits) -> tuple[tuple[str, ...], list[str], int]:
    """The outcome levels, their display names and the minimum count, after checking each option."""
    if levels is None:
        levels = cohort.outcome_levels
    levels = tuple(str(v) for v in levels)
    if levels != cohort.outcome_levels:
        raise DataError(problem("descriptive_table: levels", allowed=f"the cohort's outcome levels in code order {list(cohort.outcome_levels)}", received=list(levels)))
    labels = dict(labels or {})
    if isinstance(min_cell_count, bool) or not isinstance(min_cell_count, (int, np.integer)) or min_cell_count < 0:
        raise DataError(problem("descriptive_table: min_cell_count", allowed="a whole number >= 0", received=min_cell_count))
    if isinstance(digits, bool) or not isinstance(digits, (int, np.integer)) or not 0 <= digits <= 6:
        raise DataError(problem("descriptive_table: digits", allowed="a whole number from 0 to 6", received=digits))
    names = [labels.get(lv, lv) for lv in levels]
    if len(set(names)) != len(names) or "overall" in names:
        raise DataError(problem("descriptive_table: labels", allowed="distinct display labels other than 'overall'", received=names))
    return levels, names, int(min_cell_count)


def _described_rows(cohort: PreparedCohort, groups: list[np.ndarray], group_n: list[int], *, m: int, digits: int) -> tuple[list[dict[str, Any]], list[list[int]]]:
    """Rows of counts (categories) or summaries (numbers) per group, and each categorical predictor's rows.

    A row is ``{"predictor", "level", "statistic"}`` with ``"counts"`` (one
    whole number per group) or ``"cells"`` (one text per group, None where the
    group is too small to summarise).
    """
    rows: list[dict[str, Any]] = [{"predictor": "n", "level": "", "statistic": "n", "counts": group_n}]
    count_blocks: list[list[int]] = []
    for name in cohort.predictors + cohort.new_predictors:
        values = cohort.frame[name]
        form = cohort.forms[name]
        if form == "categorical" or _is_binary_number(values):
            if form == "categorical":
                order = list(cohort.category_levels.get(name, sorted(values.dropna().unique())))
                order += sorted(set(values.dropna().unique()) - set(order))
                text = values
            else:
                order = ["0", "1"]
                text = _as_text(values)
            block = []
            for level in order:
                hit = (text == level).to_numpy(dtype=bool, na_value=False)
                block.append(len(rows))
                rows.append({"predictor": name, "level": level, "statistic": "n (%)",
                             "counts": [int((hit & g).sum()) for g in groups]})
            if text.isna().any():
                block.append(len(rows))
                rows.append({"predictor": name, "level": "(missing)", "statistic": "n (%)",
                             "counts": [int((text.isna().to_numpy() & g).sum()) for g in groups]})
            count_blocks.append(block)
        else:
            medians, means = _numeric_summaries(values.to_numpy(dtype=np.float64, na_value=np.nan), groups, group_n, m=m, digits=digits)
            rows.append({"predictor": name, "level": "", "statistic": "median [IQR]", "cells": medians})
            rows.append({"predictor": name, "level": "", "statistic": "mean (SD)", "cells": means})
    return rows, count_blocks


def _numeric_summaries(x: np.ndarray, groups: list[np.ndarray], group_n: list[int], *, m: int, digits: int) -> tuple[list[str | None], list[str | None]]:
    """``median [Q1, Q3]`` and ``mean (SD)`` per group; None for a group of fewer than ``m`` rows."""
    medians: list[str | None] = []
    means: list[str | None] = []
    for g, n in zip(groups, group_n):
        v = x[g & ~np.isnan(x)]
        if n < m or len(v) == 0:
            medians.append(None)
            means.append(None)
            continue
        q1, q2, q3 = np.quantile(v, [0.25, 0.5, 0.75])
        sd = float(np.std(v, ddof=1)) if len(v) > 1 else float("nan")
        medians.append(f"{q2:.{digits}f} [{q1:.{digits}f}, {q3:.{digits}f}]")
        means.append(f"{float(np.mean(v)):.{digits}f} ({sd:.{digits}f})")
    return medians, means


def _published_sums(rows: list[dict[str, Any]], count_blocks: list[list[int]], K: int) -> list[list[tuple[int, int]]]:
    """The sums a reader can form: each row's groups against ``overall``, each predictor's levels against the group's n."""
    lines = [[(r, c) for c in range(K + 1)] for r, row in enumerate(rows) if "counts" in row]
    lines += [[(r, c) for r in block] + [(0, c)] for block in count_blocks for c in range(K + 1)]
    return lines


def _published_cells(rows: list[dict[str, Any]], hidden: set[tuple[int, int]], group_n: list[int], *, m: int, digits: int) -> tuple[list[list[Any]], int]:
    """The table's text rows, and how many numeric summaries were withheld."""
    n_summaries_hidden = 0
    table_rows = []
    for r, row in enumerate(rows):
        cells = []
        for c in range(len(group_n)):
            if "counts" in row:
                n = row["counts"][c]
                if (r, c) in hidden:
                    # one marker for every hidden count: a complementary one is not below the minimum, and "<5" would say it was
                    cells.append(SUPPRESSED)
                elif r == 0:
                    cells.append(str(n))
                elif (0, c) in hidden or not group_n[c]:
                    cells.append(str(n))  # a percentage would reveal the hidden column total
                else:
                    cells.append(f"{n} ({100.0 * n / group_n[c]:.{digits}f}%)")
            else:
                cell = row["cells"][c]
                if cell is None and group_n[c] > 0:
                    n_summaries_hidden += 1
                cells.append(cell if cell is not None else (f"n<{m}" if group_n[c] else ""))
        table_rows.append([row["predictor"], row["level"], row["statistic"], *cells])
    return table_rows, n_summaries_hidden
