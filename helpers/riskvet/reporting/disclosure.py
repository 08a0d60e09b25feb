"""Disclosure control: the one place small counts are suppressed.

A record holds no data rows, and no count from 1 to ``min_cell_count - 1``
(``output.min_cell_count``) may be shown or worked out from what is shown.
:func:`complementary_suppression` hides the small counts of a set of
published sums and enough further counts that none can be recovered by
subtraction (Cox 1980); :func:`publish_cross_table` applies it to a raters'
cross-table together with the agreement counts that kappa states, and checks
by integer programming that no hidden count is fixed by all the published
equations together.  The descriptive table
(:mod:`riskvet.reporting.descriptive`) and the agreement stage publish their
counts through these functions.

References
----------
Cox LH. Suppression methodology and statistical disclosure control. Journal
of the American Statistical Association 1980; 75(370): 377-385.

Hundepool A, Domingo-Ferrer J, Franconi L, Giessing S, Schulte Nordholt E,
Spicer K, de Wolf P-P. Statistical Disclosure Control. Wiley, 2012.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..errors import DataError, problem

__all__ = ["SUPPRESSED", "PublishedTable", "complementary_suppression", "publish_cross_table"]

#: A cell of a table: (row, column).
Cell = tuple[int, int]


def complementary_suppression(counts: Mapping[Cell, int], lines: Sequence[Sequence[Cell]], m: int) -> set[Cell]:
    """Cells to hide: primary (1..m-1) and complementary ones.

    Each line is a list of cells whose last cell is the published total of the
    others.  If exactly one cell of a line is hidden it could be recovered by
    subtraction, so the smallest other visible part (or the total) is hidden
    too; this repeats until no line has exactly one hidden cell.
    """
    hidden = {cell for cell, n in counts.items() if 0 < n < m}
    if not hidden:
        return hidden
    changed = True
    while changed:
        changed = False
        for line in lines:
            inside = [c for c in line if c in hidden]
            if len(inside) != 1:
                continue
            parts = [c for c in line[:-1] if c not in hidden]
            pick = min(parts, key=lambda c: (counts[c], c)) if parts else line[-1]
            if pick in hidden:
                continue
            hidden.add(pick)
            changed = True
    return hidden


#: What a suppressed count or total shows.  One marker for every suppressed
#: cell, small or complementary, so the marker itself does not tell a reader
#: which of them is the small one.
SUPPRESSED = "suppressed"


@dataclass(frozen=True)
class PublishedTable:
    """A K × K cross-table of counts as the record publishes it.

    Attributes
    ----------
    cells : tuple of tuple of (int or str)
        The counts, first rater in rows; a suppressed count is
        :data:`SUPPRESSED`.
    row_totals, column_totals : tuple of (int or str)
        Totals of each row (first rater) and column (second rater); all
        :data:`SUPPRESSED` when ``margins_shown`` is False.
    n : int
        The grand total (always published).
    margins_shown : bool
        Whether the raters' totals are published.  They are withheld when,
        together with the agreement counts, they would let a reader work out
        a suppressed count.
    min_cell_count : int
        Counts from 1 to ``min_cell_count − 1`` are suppressed.
    n_small : int
        Counts (cells or totals) suppressed for being small.
    n_suppressed : int
        Every suppressed count, cells and totals.
    """

    cells: tuple[tuple[int | str, ...], ...]
    row_totals: tuple[int | str, ...]
    column_totals: tuple[int | str, ...]
    n: int
    margins_shown: bool
    min_cell_count: int
    n_small: int
    n_suppressed: int

    def frame(self, levels: list[str] | tuple[str, ...], *, row_name: str, column_name: str) -> pd.DataFrame:
        """The table with a ``total`` row and column, for display."""
        idx = pd.Index([*map(str, levels), "total"], name=row_name)
        cols = pd.Index([*map(str, levels), "total"], name=column_name)
        rows = [[*row, total] for row, total in zip(self.cells, self.row_totals)]
        rows.append([*self.column_totals, self.n])
        return pd.DataFrame(rows, index=idx, columns=cols, dtype=object)

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(dataclasses.asdict(self))


def _determined(lines: list[list[tuple[int, int]]], hidden: set[tuple[int, int]], values: Mapping[tuple[int, int], int]) -> set[tuple[int, int]]:
    """Suppressed non-zero counts that the published equations fix exactly.

    Each line says: the sum of its parts equals its last entry.  With the
    published values moved to the right-hand side, the suppressed counts are
    whole numbers >= 0 solving A x = b.  A count is fixed when its smallest
    and largest value over those solutions agree (two small integer
    programmes per count; the true table is always a solution).
    """
    from scipy.optimize import Bounds, LinearConstraint, milp

    unknown = sorted(hidden)
    if not unknown:
        return set()
    index = {c: i for i, c in enumerate(unknown)}
    rows, rhs = [], []
    for line in lines:
        coef = np.zeros(len(unknown))
        known = 0.0
        for c in line[:-1]:
            if c in index:
                coef[index[c]] += 1.0
            else:
                known += values[c]
        if line[-1] in index:
            coef[index[line[-1]]] -= 1.0
        else:
            known -= values[line[-1]]
        if coef.any():
            rows.append(coef)
            rhs.append(-known)
    if not rows:
        return set()
    constraint = LinearConstraint(np.vstack(rows), rhs, rhs)
    fixed = set()
    for c in unknown:
        if values[c] == 0:
            continue  # a zero gives nothing away
        objective = np.zeros(len(unknown))
        objective[index[c]] = 1.0
        ends = []
        for sign in (1.0, -1.0):
            res = milp(sign * objective, constraints=constraint, integrality=np.ones(len(unknown)), bounds=Bounds(0, np.inf))
            ends.append(sign * res.fun if res.status == 0 else float("nan"))
        if not ends[0] < ends[1] - 0.5:  # also fixed when the programme fails: err on the side of hiding
            fixed.add(c)
    return fixed


def publish_cross_table(table: Any, *, min_cell_count: int, bands: bool = False) -> PublishedTable:
    """Suppress a raters' cross-table so that no small count can be recovered.

    Parameters
    ----------
    table : K × K counts
        First rater in rows, second in columns (``KappaResult.table``).
    min_cell_count : int, keyword-only
        Counts from 1 to ``min_cell_count − 1`` are suppressed
        (``output.min_cell_count``); 0 or 1 suppresses nothing.
    bands : bool, keyword-only
        Whether a weighted kappa is published as well.  Its observed weighted
        agreement, with the unweighted one, states the number of pairs at
        each distance |i − j| between the categories, so each such band is
        protected rather than only the diagonal and the off-diagonal.

    Returns
    -------
    PublishedTable

    Raises
    ------
    DataError
        ``table`` is not square, or holds negative or fractional counts.

    Notes
    -----
    What the record states besides the cells: the number of pairs n, the
    number of pairs on which the raters agree (the observed agreement of
    kappa) and so the number on which they differ, with ``bands`` the number
    at each distance, and the raters' totals (their rates of each category)
    unless withheld.

    1. Primary suppression: every cell or total from 1 to m − 1.
    2. Complementary suppression (Cox 1980): a line of counts that sums to a
       published total (a row, a column, the diagonal, ...) with exactly one
       suppressed count would give it away by subtraction, so the smallest
       other count of the line is suppressed too, until no line has exactly
       one (the rule of :func:`complementary_suppression`, shared with the descriptive table).
    3. Check: no suppressed count above 0 may be fixed by the published
       equations taken together (not only one line at a time) with the
       counts being whole numbers >= 0: its smallest and largest value over
       every table consistent with them, found by integer programming
       (scipy.optimize.milp), must differ.
    4. If the raters' totals fail that check, they are withheld and steps
       1–2 are redone with only the agreement counts published.  The lines
       then partition the cells (diagonal and off-diagonal, or the bands),
       and a line holding a suppressed count holds at least two, with a
       remainder R >= 1 to share between them; each can take any value
       from 0 to R, so none is fixed.

    Statistics computed from the full table (kappa, its standard errors)
    are published unrounded as well; they are not equations of this kind
    and are not part of this check.

    References
    ----------
    Cox LH. Suppression methodology and statistical disclosure control.
    Journal of the American Statistical Association 1980; 75(370): 377–385.

    Hundepool A, Domingo-Ferrer J, Franconi L, et al. Statistical Disclosure
    Control. Wiley, 2012 (ch. 4, tabular data).
    """
    counts_in = np.asarray(table)
    if counts_in.ndim != 2 or counts_in.shape[0] != counts_in.shape[1] or counts_in.size == 0:
        raise DataError(problem("publish_cross_table(table)", allowed="a square table of counts", received=f"shape {counts_in.shape}"))
    if not np.all(np.isfinite(counts_in.astype(float))) or np.any(counts_in.astype(float) < 0) or np.any(counts_in.astype(float) % 1):
        raise DataError(problem("publish_cross_table(table)", allowed="whole counts >= 0", received=counts_in.tolist()))
    if isinstance(min_cell_count, bool) or not isinstance(min_cell_count, (int, np.integer)) or min_cell_count < 0:
        raise DataError(problem("publish_cross_table(min_cell_count=)", allowed="a whole number >= 0", received=min_cell_count))
    t = counts_in.astype(int)
    K, m, n = t.shape[0], int(min_cell_count), int(t.sum())
    interior = {(i, j): int(t[i, j]) for i in range(K) for j in range(K)}
    totals = {**{(i, K): int(t[i].sum()) for i in range(K)}, **{(K, j): int(t[:, j].sum()) for j in range(K)}}
    # Agreement lines: their totals (keys (K + 1, d)) are stated by the
    # statistics whatever is suppressed, so they take a count of at least m
    # and are never suppressed themselves.
    if bands:
        groups = [[c for c in interior if abs(c[0] - c[1]) == d] for d in range(K)]
    else:
        groups = [[c for c in interior if c[0] == c[1]], [c for c in interior if c[0] != c[1]]]
    agreement = [[*g, (K + 1, d)] for d, g in enumerate(groups) if g]
    stated = {line[-1]: max(m, sum(interior[c] for c in line[:-1])) for line in agreement}
    stated[(K, K)] = max(m, n)
    margins = [[*[(i, j) for j in range(K)], (i, K)] for i in range(K)]
    margins += [[*[(i, j) for i in range(K)], (K, j)] for j in range(K)]
    margins += [[*[(K, j) for j in range(K)], (K, K)], [*[(i, K) for i in range(K)], (K, K)]]

    hidden: set[tuple[int, int]] = set()
    shown = True
    if K >= 2 and m > 1:
        lines = margins + agreement
        values = {**interior, **totals, **stated}
        hidden = complementary_suppression(values, lines, m)
        if _determined(lines, hidden, values):
            shown = False
            hidden = complementary_suppression({**interior, **stated}, agreement, m)
    small = sum(1 for c, v in {**interior, **(totals if shown else {})}.items() if 0 < v < m and c in hidden)

    def show(c: tuple[int, int], value: int) -> int | str:
        return SUPPRESSED if c in hidden else value

    cells = tuple(tuple(show((i, j), interior[(i, j)]) for j in range(K)) for i in range(K))
    if shown:
        row_totals = tuple(show((i, K), totals[(i, K)]) for i in range(K))
        column_totals = tuple(show((K, j), totals[(K, j)]) for j in range(K))
    else:
        row_totals = column_totals = (SUPPRESSED,) * K
    n_suppressed = sum(v == SUPPRESSED for row in cells for v in row) + sum(v == SUPPRESSED for v in row_totals + column_totals)
    return PublishedTable(cells=cells, row_totals=row_totals, column_totals=column_totals, n=n, margins_shown=shown,
                          min_cell_count=m, n_small=small, n_suppressed=n_suppressed)
