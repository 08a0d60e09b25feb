"""Disclosure control: the one place small counts are suppressed.

A record holds no data rows, and no count from 1 to ``min_cell_count - 1``
(``output.min_cell_count``) may be shown or worked out from what is shown.
:func:`complementary_suppression` hides the small counts of a set of
published sums and enough further counts that none can be recovered by
subtraction (Cox 1980); :func:`publish_cross_table` applies it to a raters'
cross-table together with the agreement counts that kappa states, and checks
by integer programming that no hidden count is fixed by all the published
equations together.  :func:`publish_statistics` then decides how far the
statistics computed from such a table (kappa, its interval, specific
agreement) are rounded, or whether they are withheld, by searching for other
tables that agree with everything published: each suppressed count must be
able to take another value.  The descriptive table
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
from typing import Any, Callable, Iterator, Mapping, Sequence

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..errors import DataError, problem

__all__ = ["SUPPRESSED", "PublishedTable", "PublishedStatistics", "complementary_suppression", "determined_counts", "suppress_until_safe", "publish_cross_table",
           "publish_statistics", "consistent_tables"]

#: A cell of a table: (row, column).
Cell = tuple[int, int]


def complementary_suppression(counts: Mapping[Cell, int], lines: Sequence[Sequence[Cell]], m: int,
                              *, also: Sequence[Cell] = ()) -> set[Cell]:
    """Cells to hide: primary (1..m-1) and complementary ones.

    Each line is a list of cells whose last cell is the published total of the
    others.  If exactly one cell of a line is hidden it could be recovered by
    subtraction, so the smallest other visible part (or, when there is none,
    the total) is hidden too; this repeats until no line has exactly one
    hidden cell.  This is a heuristic: counts are never negative, so hidden
    cells whose sum is known to be 0 are each known to be 0, and lines that
    cross can then give a small count away; a table whose lines cross is
    checked with :func:`determined_counts` (as the agreement tables and the
    internal-external site sizes are).
    ``also`` names further cells to hide from the start (a caller that has
    found a count still fixed by the published equations, see
    :func:`determined_counts`, hides more and asks again).
    """
    hidden = {cell for cell, n in counts.items() if 0 < n < m} | set(also)
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
        Counts (cells or totals) suppressed for being small.  Not part of
        :meth:`to_dict`: with the table it would say which suppressed counts
        are the small ones.
    n_suppressed : int
        Every suppressed count, cells and totals.
    bands : bool
        Whether the agreement counts are per distance between categories
        (a weighted kappa is published) rather than agreeing and differing.
    agreement_counts : tuple of (int or str)
        Pairs on each agreement line: (on the diagonal, off it), or with
        ``bands`` at each distance 0, 1, ..., K − 1; :data:`SUPPRESSED` when
        shown, with the other counts, it would give a small count away.
    agreement_below_minimum : tuple of bool
        For each agreement count: the record states that it is from 1 to
        ``min_cell_count − 1`` ("fewer than 5 people"); only for suppressed
        counts, and never when ``min_cell_count`` is 2 (the statement would
        give the count).
    """

    cells: tuple[tuple[int | str, ...], ...]
    row_totals: tuple[int | str, ...]
    column_totals: tuple[int | str, ...]
    n: int
    margins_shown: bool
    min_cell_count: int
    n_small: int
    n_suppressed: int
    bands: bool = False
    agreement_counts: tuple[int | str, ...] = ()
    agreement_below_minimum: tuple[bool, ...] = ()

    @property
    def suppressed(self) -> bool:
        """Whether any count of the table (cell, total or agreement count) is suppressed."""
        return self.n_suppressed > 0 or SUPPRESSED in self.agreement_counts

    def agreement_lines(self) -> list[list[Cell]]:
        """The cells of each agreement line, in the order of ``agreement_counts``."""
        return _agreement_lines(len(self.cells), self.bands)

    def frame(self, levels: list[str] | tuple[str, ...], *, row_name: str, column_name: str) -> pd.DataFrame:
        """The table with a ``total`` row and column, for display: the first rater's categories in the first column."""
        names = [*map(str, levels), "total"]
        rows = [[name, *row, total] for name, row, total in zip(names, self.cells, self.row_totals)]
        rows.append(["total", *self.column_totals, self.n])
        columns = [f"{row_name} (rows) by {column_name} (columns)", *names]
        return pd.DataFrame(rows, columns=columns, dtype=object)

    def to_dict(self) -> dict[str, Any]:
        d = dataclasses.asdict(self)
        d.pop("n_small")
        return to_jsonable(d)


def _agreement_lines(K: int, bands: bool) -> list[list[Cell]]:
    if bands:
        return [[(i, j) for i in range(K) for j in range(K) if abs(i - j) == d] for d in range(K)]
    return [[(i, i) for i in range(K)], [(i, j) for i in range(K) for j in range(K) if i != j]]


def _determined(lines: list[list[tuple[int, int]]], hidden: set[tuple[int, int]], values: Mapping[tuple[int, int], int],
                ranges: Mapping[tuple[int, int], tuple[int, int]] | None = None) -> set[tuple[int, int]]:
    """Suppressed non-zero counts that the published equations fix exactly.

    Each line says: the sum of its parts equals its last entry.  With the
    published values moved to the right-hand side, the suppressed counts are
    whole numbers >= 0 (or in the stated ``ranges``) solving A x = b.  A
    count is fixed when its smallest and largest value over those solutions
    agree (two small integer programmes per count; the true table is always
    a solution).
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
    ranges = ranges or {}
    lower = np.array([ranges.get(c, (0, np.inf))[0] for c in unknown], dtype=float)
    upper = np.array([ranges.get(c, (0, np.inf))[1] for c in unknown], dtype=float)
    constraint = LinearConstraint(np.vstack(rows), rhs, rhs)
    fixed = set()
    for c in unknown:
        if values[c] == 0:
            continue  # a zero gives nothing away
        objective = np.zeros(len(unknown))
        objective[index[c]] = 1.0
        ends = []
        for sign in (1.0, -1.0):
            res = milp(sign * objective, constraints=constraint, integrality=np.ones(len(unknown)), bounds=Bounds(lower, upper))
            ends.append(sign * res.fun if res.status == 0 else float("nan"))
        if not ends[0] < ends[1] - 0.5:  # also fixed when the programme fails: err on the side of hiding
            fixed.add(c)
    return fixed


def determined_counts(counts: Mapping[Cell, int], lines: Sequence[Sequence[Cell]], hidden: set[Cell], *,
                      known: Sequence[Cell] = ()) -> set[Cell]:
    """Hidden non-zero counts that the published lines fix exactly (by integer programming, counts >= 0).

    ``known`` are cells published elsewhere (a level's total on another
    page): they count as visible whatever ``hidden`` says.
    """
    return _determined([list(line) for line in lines], set(hidden) - set(known), counts)


def suppress_until_safe(counts: Mapping[Cell, int], lines: Sequence[Sequence[Cell]], m: int, *,
                        known: Sequence[Cell] = (), max_rounds: int = 50) -> set[Cell]:
    """:func:`complementary_suppression`, then more cells until no hidden count is fixed by the published lines.

    While :func:`determined_counts` finds a hidden count that the lines (and
    the ``known`` cells, published elsewhere) fix, the smallest visible
    non-zero part of a line through it is hidden as well (the line's total
    when no part is left), and the suppression is redone.  Counts 1 to
    ``m - 1`` are always hidden; with ``m <= 1`` nothing is.  When no
    further cell can be hidden, every count of the table is.
    """
    if m <= 1:
        return set()
    known = set(known)
    also: set[Cell] = set()
    hidden = complementary_suppression(counts, lines, m)
    for _ in range(max_rounds):
        fixed = determined_counts(counts, lines, hidden, known=sorted(known))
        if not fixed:
            return hidden
        before = len(also | hidden)
        for cell in sorted(fixed):
            through = [line for line in lines if cell in line]
            parts = [c for line in through for c in line[:-1] if c not in hidden and c not in known and counts[c] > 0]
            totals = [line[-1] for line in through if line[-1] not in hidden and line[-1] not in known]
            if parts or totals:
                also.add(min(parts, key=lambda c: (counts[c], c)) if parts else min(totals))
        if len(also | hidden) == before:
            break
        hidden = complementary_suppression(counts, lines, m, also=sorted(also))
    # nothing more to hide line by line: the table goes out with every count hidden (the page shows that it is)
    return {c for line in lines for c in line if c not in known}


def _check_table(table: Any, min_cell_count: Any) -> np.ndarray:
    counts_in = np.asarray(table)
    if counts_in.ndim != 2 or counts_in.shape[0] != counts_in.shape[1] or counts_in.size == 0:
        raise DataError(problem("publish_cross_table(table)", allowed="a square table of counts", received=f"shape {counts_in.shape}"))
    if not np.all(np.isfinite(counts_in.astype(float))) or np.any(counts_in.astype(float) < 0) or np.any(counts_in.astype(float) % 1):
        raise DataError(problem("publish_cross_table(table)", allowed="whole counts >= 0", received=counts_in.tolist()))
    if isinstance(min_cell_count, bool) or not isinstance(min_cell_count, (int, np.integer)) or min_cell_count < 0:
        raise DataError(problem("publish_cross_table(min_cell_count=)", allowed="a whole number >= 0", received=min_cell_count))
    return counts_in.astype(int)


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
    number of pairs on which the raters agree and on which they differ (the
    agreement counts; with ``bands`` the number at each distance), and the
    raters' totals (their rates of each category) unless withheld.

    1. Primary suppression: every cell, total or agreement count from 1 to
       m − 1.  A suppressed agreement count is stated as "fewer than m"
       (when m > 2), which the check below takes into account; where that
       statement would itself fix a count, it is not made.
    2. Complementary suppression (Cox 1980): a line of counts that sums to a
       published total (a row, a column, the diagonal, the agreement counts
       adding up to n, ...) with exactly one suppressed count would give it
       away by subtraction, so the smallest other count of the line is
       suppressed too, until no line has exactly one (the rule of
       :func:`complementary_suppression`, shared with the descriptive table).
    3. Check: no suppressed count above 0 may be fixed by the published
       equations taken together (not only one line at a time) with the
       counts being whole numbers >= 0: its smallest and largest value over
       every table consistent with them, found by integer programming
       (scipy.optimize.milp), must differ.
    4. If the raters' totals fail that check, they are withheld and steps
       1–2 are redone with only the agreement counts published.  The lines
       then partition the cells (diagonal and off-diagonal, or the bands),
       and a line holding a suppressed count holds at least two, with a
       remainder R >= 1 to share between them; each can take more than one
       value, so none is fixed.

    Statistics computed from the table (kappa, its interval, specific
    agreement) are not equations of this kind; :func:`publish_statistics`
    rounds or withholds them so that they do not undo this suppression.

    References
    ----------
    Cox LH. Suppression methodology and statistical disclosure control.
    Journal of the American Statistical Association 1980; 75(370): 377–385.

    Hundepool A, Domingo-Ferrer J, Franconi L, et al. Statistical Disclosure
    Control. Wiley, 2012 (ch. 4, tabular data).
    """
    t = _check_table(table, min_cell_count)
    K, m, n = t.shape[0], int(min_cell_count), int(t.sum())
    interior = {(i, j): int(t[i, j]) for i in range(K) for j in range(K)}
    totals = {**{(i, K): int(t[i].sum()) for i in range(K)}, **{(K, j): int(t[:, j].sum()) for j in range(K)}}
    groups = _agreement_lines(K, bool(bands))
    group_keys = [(K + 1, d) for d in range(len(groups))]
    stated = {key: sum(interior[c] for c in g) for key, g in zip(group_keys, groups)}
    agreement = [[*g, key] for key, g in zip(group_keys, groups)] + [[*group_keys, (K, K)]]
    # n is always published: counted as at least m so that it is never suppressed itself
    grand = {(K, K): max(m, n)}
    margins = [[*[(i, j) for j in range(K)], (i, K)] for i in range(K)]
    margins += [[*[(i, j) for i in range(K)], (K, j)] for j in range(K)]
    margins += [[*[(K, j) for j in range(K)], (K, K)], [*[(i, K) for i in range(K)], (K, K)]]
    stated_small = m > 2  # "fewer than 2" would state the count

    def ranges_of(hidden: set[Cell]) -> dict[Cell, tuple[int, int]]:
        return {key: (1, m - 1) for key in group_keys if stated_small and key in hidden and 0 < stated[key] < m}

    hidden: set[Cell] = set()
    shown = True
    if K >= 2 and m > 1:
        lines = margins + agreement
        values = {**interior, **totals, **stated, **grand}
        hidden = complementary_suppression(values, lines, m)
        if _determined(lines, hidden, values, ranges_of(hidden)):
            shown = False
            lines = agreement
            hidden = complementary_suppression({**interior, **stated, **grand}, agreement, m)
        if ranges_of(hidden) and _determined(lines, hidden, values, ranges_of(hidden)):
            # saying which suppressed agreement counts are "fewer than m" would fix them (two such counts
            # summing to n, say): the record then only says that they are suppressed
            stated_small = False
    small = sum(1 for c, v in {**interior, **(totals if shown else {})}.items() if 0 < v < m and c in hidden)

    def show(c: Cell, value: int) -> int | str:
        return SUPPRESSED if c in hidden else value

    cells = tuple(tuple(show((i, j), interior[(i, j)]) for j in range(K)) for i in range(K))
    if shown:
        row_totals = tuple(show((i, K), totals[(i, K)]) for i in range(K))
        column_totals = tuple(show((K, j), totals[(K, j)]) for j in range(K))
    else:
        row_totals = column_totals = (SUPPRESSED,) * K
    n_suppressed = sum(v == SUPPRESSED for row in cells for v in row) + sum(v == SUPPRESSED for v in row_totals + column_totals)
    below = ranges_of(hidden)
    return PublishedTable(
        cells=cells, row_totals=row_totals, column_totals=column_totals, n=n, margins_shown=shown, min_cell_count=m,
        n_small=small, n_suppressed=n_suppressed, bands=bool(bands),
        agreement_counts=tuple(show(key, stated[key]) for key in group_keys),
        agreement_below_minimum=tuple(key in below for key in group_keys),
    )


# --------------------------------------------------------------------------
# statistics computed from a suppressed table
# --------------------------------------------------------------------------

def _published_lines(published: PublishedTable) -> list[tuple[list[Cell], int, int]]:
    """What the record states about sums of cells: (cells, smallest, largest) per line."""
    K = len(published.cells)
    lines: list[tuple[list[Cell], int, int]] = [([(i, j) for i in range(K) for j in range(K)], published.n, published.n)]
    for i in range(K):
        for cells, total in (([(i, j) for j in range(K)], published.row_totals[i]), ([(j, i) for j in range(K)], published.column_totals[i])):
            if total != SUPPRESSED:
                lines.append((cells, int(total), int(total)))
    m = published.min_cell_count
    for cells, count, below in zip(published.agreement_lines(), published.agreement_counts, published.agreement_below_minimum):
        if count != SUPPRESSED:
            lines.append((cells, int(count), int(count)))
        elif below:
            lines.append((cells, 1, m - 1))
    return lines


def consistent_tables(published: PublishedTable, *, first: Cell | None = None, start: Any = None, node_budget: int = 20_000) -> Iterator[np.ndarray]:
    """Tables of whole counts >= 0 that agree with every count and total a published table states.

    Parameters
    ----------
    published : PublishedTable
    first : (row, column), optional
        A suppressed cell to vary first (outermost): it tries its value in
        ``start`` last, so that tables where it differs come first.
    start : K × K counts, optional
        A table to search outwards from: each suppressed cell tries the values
        nearest its value in ``start`` first.  Default all zeros.
    node_budget : int
        Stop after this many steps of the search (the tables yielded so far
        are all consistent; there may be more).

    Yields
    ------
    numpy.ndarray
        K × K integer tables: visible cells as published, suppressed cells
        such that every published row, column, agreement count and n holds
        (a count stated as "fewer than m" lies from 1 to m − 1).
    """
    K = len(published.cells)
    base = np.zeros((K, K), dtype=np.int64)
    hidden = []
    for i in range(K):
        for j in range(K):
            if published.cells[i][j] == SUPPRESSED:
                hidden.append((i, j))
            else:
                base[i, j] = int(published.cells[i][j])
    centre = np.zeros((K, K), dtype=np.int64) if start is None else np.asarray(start, dtype=np.int64)
    if first is not None and first in hidden:
        hidden.remove(first)
        hidden.insert(0, first)
    lines = []
    for cells, lo, hi in _published_lines(published):
        known = int(sum(base[c] for c in cells))
        lines.append(([hidden.index(c) for c in cells if c in hidden], lo - known, hi - known))
    if any(hi < 0 or (not members and lo > 0) for members, lo, hi in lines):
        return
    member_of = [[k for k, (members, _, _) in enumerate(lines) if pos in members] for pos in range(len(hidden))]
    closing = [[k for k in member_of[pos] if max(lines[k][0]) == pos] for pos in range(len(hidden))]
    sums = [0] * len(lines)
    budget = [node_budget]

    def fill(pos: int) -> Iterator[np.ndarray]:
        if pos == len(hidden):
            yield base.copy()
            return
        top = min((lines[k][2] - sums[k] for k in member_of[pos]), default=published.n)
        c = centre[hidden[pos]]
        # the first cell tries its value in ``start`` last, so that tables where it differs come first
        outer = pos == 0 and first is not None and first == hidden[0]
        for v in sorted(range(top + 1), key=lambda v: (outer and v == c, abs(v - c), v)):
            budget[0] -= 1
            if budget[0] < 0:
                return
            for k in member_of[pos]:
                sums[k] += v
            if all(lines[k][1] <= sums[k] <= lines[k][2] for k in closing[pos]):
                base[hidden[pos]] = v
                yield from fill(pos + 1)
            for k in member_of[pos]:
                sums[k] -= v
            base[hidden[pos]] = 0

    yield from fill(0)


@dataclass(frozen=True)
class PublishedStatistics:
    """Statistics of a cross-table as the record publishes them.

    Attributes
    ----------
    values : dict of str to (float or None)
        Name -> published value (rounded to ``decimals[name]``); None when
        withheld.
    decimals : dict of str to (int or None)
        Decimals each value is rounded to; None when it is published
        unrounded (the table has no suppressed count) or withheld.
    withheld : tuple of str
        Names withheld because every rounding tried would let a reader work
        out a suppressed count.
    rounded : bool
        Whether any value was rounded for disclosure control.
    """

    values: Mapping[str, float | None]
    decimals: Mapping[str, int | None]
    withheld: tuple[str, ...]
    rounded: bool

    def __getitem__(self, name: str) -> float | None:
        return self.values[name]

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({"values": dict(self.values), "decimals": dict(self.decimals), "withheld": list(self.withheld),
                            "rounded": self.rounded})


def _rounded(value: Any, decimals: int) -> Any:
    """``value`` (a number or an array) rounded to ``decimals``; NaN stays NaN, no negative zero."""
    return np.round(value, decimals) + 0.0


def _same(a: np.ndarray, b: float) -> np.ndarray:
    return np.isnan(a) if np.isnan(b) else a == b


def _candidate_pool(t: np.ndarray, published: PublishedTable, *, limit: int = 6_000, per_cell: int = 1_500) -> list[np.ndarray]:
    """Tables consistent with the published counts: all of them when there are at most ``limit``, else the true
    table and, for each suppressed cell, tables in which it differs, nearest the truth first."""
    everything = []
    for table in consistent_tables(published, start=t, node_budget=50 * limit):
        everything.append(table)
        if len(everything) > limit:
            break
    else:
        if any(np.array_equal(table, t) for table in everything):
            return everything
    K = t.shape[0]
    hidden = [(i, j) for i in range(K) for j in range(K) if published.cells[i][j] == SUPPRESSED]
    pool = {t.tobytes(): t}
    for cell in hidden:
        taken = 0
        for table in consistent_tables(published, first=cell, start=t, node_budget=50 * per_cell):
            if table[cell] == t[cell] or taken >= per_cell:
                break  # the search has moved on to the true value of ``cell``: its alternatives are exhausted
            pool.setdefault(table.tobytes(), table)
            taken += 1
    return list(pool.values())


def _secrets(t: np.ndarray, published: PublishedTable) -> tuple[list[list[Cell]], list[list[Cell]]]:
    """What must stay uncertain: each suppressed count above 0 (cells and totals, as lists of cells), and the agreement lines holding a small suppressed cell."""
    K, m = t.shape[0], published.min_cell_count
    sums: list[list[Cell]] = [[c] for c in ((i, j) for i in range(K) for j in range(K)) if published.cells[c[0]][c[1]] == SUPPRESSED]
    for i in range(K):
        if published.row_totals[i] == SUPPRESSED:
            sums.append([(i, j) for j in range(K)])
        if published.column_totals[i] == SUPPRESSED:
            sums.append([(j, i) for j in range(K)])
    lines = published.agreement_lines()
    sums += [cells for cells, count in zip(lines, published.agreement_counts) if count == SUPPRESSED]
    sums = [cells for cells in sums if sum(t[c] for c in cells) > 0]
    splits = [[c for c in cells if published.cells[c[0]][c[1]] == SUPPRESSED] for cells in lines]
    splits = [cells for cells in splits if any(0 < t[c] < m for c in cells)]
    return sums, splits


def _protected(pool: list[np.ndarray], values: Mapping[str, np.ndarray], trial: Mapping[str, tuple[int, float]],
               sums: list[list[Cell]], splits: list[list[Cell]]) -> bool:
    """Whether, among the pool's tables that give the trial's published values, every secret takes at least two values."""
    keep = np.ones(len(pool), bool)
    for name, (d, shown) in trial.items():
        keep &= _same(_rounded(values[name], d), shown)
    tables = np.stack(pool)[keep]
    for cells in sums:
        if len(np.unique(sum(tables[:, i, j] for i, j in cells))) < 2:
            return False
    for cells in splits:
        if len(np.unique(np.sort(np.stack([tables[:, i, j] for i, j in cells], axis=1), axis=1), axis=0)) < 2:
            return False
    return True


def publish_statistics(table: Any, published: PublishedTable, compute: Callable[[np.ndarray], Mapping[str, float]], *,
                       decimals: Sequence[int] = (2, 1), groups: Sequence[Sequence[str]] = ()) -> PublishedStatistics:
    """Round or withhold the statistics of a cross-table so that they do not undo its suppression.

    Parameters
    ----------
    table : K × K counts
        The true table (the one ``published`` was made from).
    published : PublishedTable
        From :func:`publish_cross_table`.
    compute : callable
        A stack of tables (N × K × K) -> mapping of statistic name to an
        array of N numbers (NaN when undefined).  The names are taken in
        order of importance: a statistic is kept only if it stays safe
        together with those before it.
    decimals : sequence of int, default (2, 1)
        Roundings to try, finest first.
    groups : sequence of sequences of names
        Statistics published together or not at all, at one rounding (an
        estimate and its interval limits).

    Returns
    -------
    PublishedStatistics
        Unrounded when the table has no suppressed count.

    Notes
    -----
    A reader knows the visible cells, the totals, the agreement counts (or
    that a suppressed one is fewer than m) and n: many tables fit those.  A
    statistic is a function of the table, so once published it rules out the
    tables that do not give it at its published rounding.  This function
    gathers the tables consistent with the published counts
    (:func:`consistent_tables`: all of them when there are not too many, else
    the true one and, for each suppressed cell, tables in which that cell
    differs, searched outwards from the truth), and keeps a
    statistic at the finest rounding for which, among the gathered tables
    that give every kept statistic, (i) each suppressed count above 0 (cell
    or total) still takes at least two values, and (ii) on each agreement
    line holding a small suppressed count, the suppressed counts do not
    always form the same set of numbers (else a reader would know, say,
    "4 and 9", though not which cell is which).  Only tables found are
    counted, so an incomplete search can only withhold more, never less.
    """
    t = np.asarray(table).astype(np.int64)
    full = {name: float(np.asarray(v)[0]) for name, v in compute(t[None]).items()}
    if not published.suppressed:
        return PublishedStatistics(values=full, decimals={name: None for name in full}, withheld=(), rounded=False)
    pool = _candidate_pool(t, published)
    values = {name: np.asarray(v, dtype=float) for name, v in compute(np.stack(pool)).items()}
    sums, splits = _secrets(t, published)
    group_of = {name: tuple(g) for g in groups for name in g}
    units = list(dict.fromkeys(group_of.get(name, (name,)) for name in full))
    chosen: dict[str, tuple[int, float]] = {}
    for unit in units:
        for d in decimals:
            trial = {**chosen, **{name: (int(d), float(_rounded(full[name], int(d)))) for name in unit}}
            if _protected(pool, values, trial, sums, splits):
                chosen = trial
                break
    return PublishedStatistics(
        values={name: (chosen[name][1] if name in chosen else None) for name in full},
        decimals={name: (chosen[name][0] if name in chosen else None) for name in full},
        withheld=tuple(name for name in full if name not in chosen), rounded=True,
    )
