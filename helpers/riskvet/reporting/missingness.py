"""What was missing in a cohort and how it was imputed, as a record publishes it.

:func:`missing_data_report` reads an :class:`~riskvet.imputation.Imputations`
and lays out four tables: each analysis column's missing count, share and
imputation method; the most frequent combinations of missing columns
(patterns); a convergence summary of the chained equations; and the
observed against the imputed values of each imputed column.  Every count
goes through disclosure control
(:func:`riskvet.reporting.disclosure.suppress_until_safe`): counts from 1 to
``min_cell_count - 1`` are shown as "suppressed", together with further
counts that would let them be worked out from the totals, and summaries of
imputed values are withheld for a column whose number of imputed values is
suppressed.  :func:`rule_of_thumb_m` gives the number of imputations the
percentage of incomplete cases calls for.

References
----------
White IR, Royston P, Wood AM. Multiple imputation using chained equations:
issues and guidance for practice. Statistics in Medicine
2011;30(4):377-399.

Hundepool A, Domingo-Ferrer J, Franconi L, Giessing S, Schulte Nordholt E,
Spicer K, de Wolf P-P. Statistical Disclosure Control. Wiley, 2012.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy.optimize import Bounds, LinearConstraint, milp

from .._jsonable import to_jsonable
from ..errors import DataError, problem
from ..imputation import Imputations
from .disclosure import SUPPRESSED, complementary_suppression, suppress_until_safe

__all__ = ["MissingDataReport", "missing_data_report", "METHOD_WORDS", "TABLES", "WITHHELD", "MAX_PATTERNS"]

#: Imputation methods in words, by the codes of :data:`riskvet.imputation.METHODS`.
METHOD_WORDS = {
    "pmm": "predictive mean matching",
    "logistic": "logistic regression",
    "cumulative": "proportional-odds (cumulative logit) model",
    "multinomial": "multinomial logit model",
    "none": "not imputed (left missing)",
}
#: The method column of a column with nothing missing.
COMPLETE_WORDS = "none needed (complete)"
#: The tables of a report, by the names :meth:`MissingDataReport.to_frame` takes.
TABLES = ("columns", "patterns", "convergence", "observed_imputed")
#: What a summary withheld for disclosure control shows.
WITHHELD = "withheld"
#: Patterns of missingness listed one by one (the complete cases among them); the rest share one row.
MAX_PATTERNS = 10
#: The pattern row of people with every column recorded, and the row of the patterns not listed.
COMPLETE_PATTERN = "none (complete)"
OTHER_PATTERNS = "other patterns"

_WITHHELD_NOTE = "withheld: the number of imputed values is suppressed"
_SHOWN_NOTE = "shown"
_SHARE_DIGITS = 4

# Cells of the disclosure problem: (0, k) pattern k, (1, 0) the other patterns, (1, 1) everyone,
# (2, i) missing in column i, (3, i) observed in column i, (4 + i, l) observed at level l of column i,
# (-1, i) the people of the patterns folded into "other patterns" who miss column i.
_OTHER, _EVERYONE = (1, 0), (1, 1)


@dataclass(frozen=True)
class MissingDataReport:
    """Missing data of a cohort and their imputation, with small counts suppressed.

    Attributes
    ----------
    cohort_label : str
        The cohort's name in the record.
    n_people : int
        People in the cohort (rows of the imputed frame).
    min_cell_count : int
        Counts from 1 to ``min_cell_count - 1`` are suppressed.
    columns : tuple
        The analysis columns reported, in order.
    outcome : object
        The outcome column (a predictor in every imputation model), or None.
    auxiliary : tuple
        Columns used in the imputation models only.
    methods : dict
        Column -> method code (:data:`riskvet.imputation.METHODS`) for each
        reported column with missing values.
    m, iterations, seed, donors : int
        The imputation settings.
    complete_people : int or str
        People with every reported column recorded (:data:`SUPPRESSED` when hidden).
    complete_share : float or str
        Their share of ``n_people`` (:data:`SUPPRESSED` when hidden).
    by_column : DataFrame
        ``column``, ``used as``, ``people missing``, ``share missing``,
        ``imputation method``.
    patterns : DataFrame
        ``columns missing``, ``people``, ``share``: the complete cases
        first, then the other listed patterns by number of columns missing
        and column order, then the patterns not listed together.
    convergence : DataFrame
        ``column``, ``imputation`` (1..m), ``summarised as``, ``mean at
        last iteration``, ``sd at last iteration``, ``range of the mean
        over the last half``, ``range of the sd over the last half``.
    observed_imputed : DataFrame
        ``column``, ``summary``, ``observed``, ``imputed``, ``note``.
    last_half : tuple of int
        First and last iteration of the ranges in ``convergence``.
    withheld_columns : tuple
        Imputed columns whose summaries of imputed values are withheld
        (their number of imputed values is suppressed); figures leave them out.
    n_suppressed : int
        Published counts shown as suppressed (columns, patterns, level shares).
    n_fallbacks : int
        Draws of a category model that fell back to level frequencies.
    notes : tuple of str
        Other things a reader should know.
    """

    cohort_label: str
    n_people: int
    min_cell_count: int
    columns: tuple
    outcome: Any
    auxiliary: tuple
    methods: dict
    m: int
    iterations: int
    seed: int
    donors: int
    complete_people: int | str
    complete_share: float | str
    by_column: pd.DataFrame = field(repr=False)
    patterns: pd.DataFrame = field(repr=False)
    convergence: pd.DataFrame = field(repr=False)
    observed_imputed: pd.DataFrame = field(repr=False)
    last_half: tuple[int, int] = (1, 1)
    withheld_columns: tuple = ()
    n_suppressed: int = 0
    n_fallbacks: int = 0
    notes: tuple[str, ...] = ()

    def to_frame(self, table: str = "columns") -> pd.DataFrame:
        """One of the tables (:data:`TABLES`): ``"columns"`` (default), ``"patterns"``, ``"convergence"`` or ``"observed_imputed"``."""
        frames = {"columns": self.by_column, "patterns": self.patterns, "convergence": self.convergence,
                  "observed_imputed": self.observed_imputed}
        if table not in frames:
            raise DataError(problem("MissingDataReport.to_frame(table=)", allowed=f"one of {list(TABLES)}", received=table))
        return frames[table].copy()

    def to_dict(self) -> dict[str, Any]:
        """The settings, counts and every table as JSON-ready values."""
        return to_jsonable({
            "cohort_label": self.cohort_label, "n_people": self.n_people, "min_cell_count": self.min_cell_count,
            "columns": [str(c) for c in self.columns], "outcome": None if self.outcome is None else str(self.outcome),
            "auxiliary": [str(c) for c in self.auxiliary], "methods": {str(k): v for k, v in self.methods.items()},
            "m": self.m, "iterations": self.iterations, "seed": self.seed, "donors": self.donors,
            "complete_people": self.complete_people, "complete_share": self.complete_share,
            "tables": {name: self.to_frame(name) for name in TABLES},
            "last_half": list(self.last_half), "withheld_columns": [str(c) for c in self.withheld_columns],
            "n_suppressed": self.n_suppressed, "n_fallbacks": self.n_fallbacks, "notes": list(self.notes),
        })


# ---- checks ----------------------------------------------------------------------------------------


def _checked(imputations: Any, columns: Any, min_cell_count: Any, cohort_label: Any, n_people: Any) -> tuple[tuple, int]:
    """The reported columns and the minimum count, after checking every argument."""
    func = "missing_data_report"
    if not isinstance(imputations, Imputations):
        raise DataError(problem(f"{func}(imputations)", allowed="an Imputations from riskvet.imputation.impute", received=type(imputations).__name__))
    frame = imputations.frame
    if isinstance(columns, (str, bytes)) or not isinstance(columns, Sequence) or not columns:
        raise DataError(problem(f"{func}(columns=)", allowed="a non-empty list of column names", received=columns))
    columns = tuple(columns)
    unknown = [c for c in columns if c not in frame.columns]
    if unknown:
        raise DataError(problem(f"{func}(columns=)", allowed=f"columns of the imputed frame {list(frame.columns)}", received=unknown))
    twice = sorted({str(c) for c in columns if columns.count(c) > 1})
    if twice:
        raise DataError(problem(f"{func}(columns=)", allowed="each column once", received=f"listed more than once: {twice}"))
    if imputations.outcome is not None and imputations.outcome in columns:
        raise DataError(problem(f"{func}(columns=)", allowed="the predictors and auxiliary columns, not the outcome (it is complete)",
                                received=imputations.outcome))
    left_out = [c for c in imputations.columns_imputed if c not in columns]
    if left_out:
        raise DataError(problem(f"{func}(columns=)", allowed="every imputed column among the reported columns", received=f"missing {left_out}"))
    if isinstance(min_cell_count, bool) or not isinstance(min_cell_count, (int, np.integer)) or min_cell_count < 0:
        raise DataError(problem(f"{func}(min_cell_count=)", allowed="a whole number >= 0", received=min_cell_count))
    if not isinstance(cohort_label, str) or not cohort_label.strip():
        raise DataError(problem(f"{func}(cohort_label=)", allowed="a non-empty text", received=cohort_label))
    if n_people is not None and (isinstance(n_people, bool) or not isinstance(n_people, (int, np.integer)) or n_people != len(frame)):
        raise DataError(problem(
            f"{func}(n_people=)",
            allowed=f"the number of rows imputed, {len(frame)} (impute the cohort written out one row per person), or None",
            received=n_people,
        ))
    return columns, int(min_cell_count)


# ---- counting --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Counts:
    """What is counted in the frame, before disclosure control."""

    patterns: np.ndarray  # distinct patterns (bool, one column per reported column), the complete one included
    people: np.ndarray  # people per pattern
    listed: tuple  # pattern positions listed one by one, in display order (complete first)
    other: tuple  # pattern positions folded into the "other patterns" row
    missing: np.ndarray  # people missing per reported column
    levels: dict  # reported column position -> people observed at each level (imputed categories)


def _listed_patterns(patterns: np.ndarray, people: np.ndarray, incomplete: list, m: int) -> tuple[list, list]:
    """Which incomplete patterns are listed one by one, and which are folded into "other patterns".

    Only patterns of at least ``m`` people are listed (at most
    ``MAX_PATTERNS - 1``, the most frequent).  Then, while a column's
    people among the folded patterns (its missing count less the listed
    patterns holding it) or the folded total is from 1 to ``m - 1``, the
    smallest listed pattern holding that column (or the smallest listed
    pattern) is folded too.  Folding rare combinations, rather than
    suppressing the counts around them, keeps each column's missing count
    and the complete cases on the page.
    """
    listed = [k for k in incomplete if people[k] >= max(m, 1)][: MAX_PATTERNS - 1]
    other = [k for k in incomplete if k not in listed]
    while m > 1:
        small = [i for i in range(patterns.shape[1]) if 0 < sum(people[k] for k in other if patterns[k, i]) < m]
        if not small and not 0 < sum(people[k] for k in other) < m:
            break
        holding = [k for k in listed if not small or patterns[k, small[0]]]
        if not holding:
            break
        k = min(holding, key=lambda k: (people[k], -patterns[k].sum()))
        listed.remove(k)
        other.append(k)
    return listed, other


def _count(imputations: Imputations, columns: tuple, m: int = 0) -> _Counts:
    frame = imputations.frame
    miss = np.column_stack([np.asarray(pd.isna(frame[c]), dtype=bool) for c in columns])
    patterns, people = np.unique(miss, axis=0, return_counts=True)
    if not (~patterns).all(axis=1).any():  # nobody complete: the complete row is still shown, with 0
        patterns = np.vstack([np.zeros((1, len(columns)), dtype=bool), patterns])
        people = np.concatenate([[0], people])
    complete = int(np.flatnonzero(~patterns.any(axis=1))[0])
    incomplete = [k for k in range(len(people)) if k != complete]
    # the most frequent first (ties: fewer columns missing, then column order) decides which are listed
    incomplete.sort(key=lambda k: (-people[k], patterns[k].sum(), tuple(~patterns[k])))
    chosen, other = _listed_patterns(patterns, people, incomplete, m)
    # shown in an order that says nothing about the size of a suppressed count
    chosen.sort(key=lambda k: (patterns[k].sum(), tuple(~patterns[k])))
    levels = {}
    for i, c in enumerate(columns):
        if c in imputations.levels:
            observed = frame[c].dropna().astype(object)
            levels[i] = np.array([int((observed == lv).sum()) for lv in imputations.levels[c]], dtype=np.int64)
    return _Counts(patterns, people.astype(np.int64), (complete, *chosen), tuple(other), miss.sum(axis=0).astype(np.int64), levels)


@dataclass(frozen=True)
class _Problem:
    """The disclosure problem: cells, the sums a reader can form, and what the reader knows besides.

    ``lines`` are the sums of what is published; ``inner`` adds how the
    patterns folded into "other patterns" make up that row and each column's
    share of it (cells a reader never sees).  ``ranges`` are the bounds a
    reader knows beyond ``>= 0``; ``never_shown`` are the cells that are
    never published; ``not_secret`` those among them whose own value need
    not stay uncertain: each folded pattern (no reader knows which patterns
    those are) and a column's share of them when it is not small.
    ``folded`` are the folded patterns themselves.
    """

    cells: dict
    lines: list
    inner: list
    ranges: dict
    never_shown: frozenset
    not_secret: frozenset
    folded: frozenset


def _disclosure_problem(counts: _Counts, n: int, imputed: set[int], m: int) -> _Problem:
    """Cells (keyed as set out above :data:`_OTHER`), the sums a reader can form, and what the reader knows besides.

    Listed patterns other than the complete cases, the "other patterns" row,
    the levels shown and the missing count of a column named with a method
    each hold at least one person: a reader knows that much.
    """
    cells = {(0, k): int(v) for k, v in enumerate(counts.people)}
    cells[_EVERYONE] = n
    lines = [[(0, k) for k in counts.listed] + ([_OTHER] if counts.other else []) + [_EVERYONE]]
    inner = [[(0, k) for k in counts.other] + [_OTHER]] if counts.other else []
    ranges = {(0, k): (1, np.inf) for k in counts.listed[1:]}
    if counts.other:
        cells[_OTHER] = int(sum(counts.people[k] for k in counts.other))
        ranges[_OTHER] = (1, np.inf)
    folded = set()
    for i, n_missing in enumerate(counts.missing):
        if not n_missing:
            continue
        cells[(2, i)], cells[(3, i)] = int(n_missing), n - int(n_missing)
        line = [(0, k) for k in counts.listed if counts.patterns[k, i]]
        others = [(0, k) for k in counts.other if counts.patterns[k, i]]
        if others:
            cells[(-1, i)] = int(sum(cells[c] for c in others))
            inner.append(others + [(-1, i)])
            line.append((-1, i))
            folded.add((-1, i))
        lines.append(line + [(2, i)])
        lines.append([(2, i), (3, i), _EVERYONE])
        ranges[(2, i)] = (1, np.inf)
        if i in imputed:
            ranges[(3, i)] = (1, np.inf)
    for i, per_level in counts.levels.items():
        cells.update({(4 + i, j): int(v) for j, v in enumerate(per_level)})
        lines.append([(4 + i, j) for j in range(len(per_level))] + [(3, i)])
        ranges.update({(4 + i, j): (1, np.inf) for j in range(len(per_level))})
    patterns = frozenset((0, k) for k in counts.other)
    # a column's share of the folded patterns is a count of people: it must stay uncertain only when small
    large = frozenset(c for c in folded if cells[c] >= m)
    return _Problem(cells, lines, inner, ranges, patterns | folded, patterns | large, patterns)


def _fixed(problem: _Problem, hidden: set, checked: dict) -> set:
    """Hidden counts that every solution of the sums gives the same value (two small mixed-integer programmes each).

    The sums, with the visible counts moved to the right-hand side, are
    linear equations in the hidden counts; each lies in its known range
    (``>= 0`` unless stated).  A count whose smallest and largest value over
    the solutions agree is fixed (also when a programme fails: better to
    hide more).  Counts checked as zero are skipped.  The folded patterns
    are taken to be known to exist (a reader knows less), and their counts
    as real numbers rather than whole ones, which keeps the programmes small
    when there are hundreds of them; every published count is a whole
    number.
    """
    unknown = sorted(hidden)
    index = {c: i for i, c in enumerate(unknown)}
    rows, rhs = [], []
    for line in problem.lines + problem.inner:
        coef = np.zeros(len(unknown))
        for c in line[:-1]:
            if c in index:
                coef[index[c]] += 1.0
        if line[-1] in index:
            coef[index[line[-1]]] -= 1.0
        if coef.any():
            visible = sum(problem.cells[c] for c in line[:-1] if c not in index)
            rows.append(coef)
            rhs.append((0.0 if line[-1] in index else problem.cells[line[-1]]) - visible)
    if not rows:
        return set()
    constraint = LinearConstraint(np.vstack(rows), rhs, rhs)
    bounds = Bounds([problem.ranges.get(c, (0, np.inf))[0] for c in unknown], [problem.ranges.get(c, (0, np.inf))[1] for c in unknown])
    integrality = np.array([0 if c in problem.folded else 1 for c in unknown])
    fixed = set()
    for c in unknown:
        if not checked[c]:
            continue  # a zero gives nothing away
        goal = np.zeros(len(unknown))
        goal[index[c]] = 1.0
        ends = []
        for sign in (1.0, -1.0):
            res = milp(sign * goal, constraints=constraint, integrality=integrality, bounds=bounds)
            ends.append(sign * res.fun if res.status == 0 else math.nan)
        if not ends[0] < ends[1] - 0.5:
            fixed.add(c)
    return fixed


def _tier(cell: tuple[int, int], complete: tuple[int, int]) -> int:
    """How much hiding a cell costs the reader: patterns least, then the observed counts behind the comparison
    table, then the complete cases, then a column's missing count (the number a reader most needs)."""
    if cell == complete:
        return 2
    return {0: 0, 1: 0, 2: 3, 3: 1}.get(cell[0], 1)


def _partner(cell: tuple[int, int], cells: dict, lines: list, hidden: set, known: set, complete: tuple[int, int]) -> tuple[int, int] | None:
    """The visible non-zero cell to hide next for a count the published sums still fix.

    The cheapest (by :func:`_tier`, then the smallest) on a line through the
    count; when every cell there is hidden, on a line through the hidden
    cells those lines reach, and so on outwards.
    """
    reached, frontier = {cell}, {cell}
    while frontier:
        touching = [line for line in lines if frontier.intersection(line)]
        near = {c for line in touching for c in line if c not in hidden and c not in known and cells[c] > 0}
        if near:
            return min(near, key=lambda c: (_tier(c, complete), cells[c], c))
        frontier = {c for line in touching for c in line if c in hidden} - reached
        reached |= frontier
    return None


def _grow(problem: _Problem, m: int, start: set, known: set, complete: tuple[int, int]) -> set:
    """Hide more, starting from ``start``, until no hidden count is fixed given what a reader knows.

    Each round hides what :func:`complementary_suppression` adds to the
    cells hidden so far; then, for each hidden count the sums still fix,
    one more visible non-zero cell near it (:func:`_partner`).  When nothing
    more can be hidden every count is.
    """
    cells, lines = problem.cells, problem.lines + problem.inner
    # a cell whose own value need not stay uncertain is checked as a zero (which gives nothing away), and
    # needs no partner by subtraction either
    checked = {c: (0 if c in problem.not_secret else v) for c, v in cells.items()}
    also = set(start) - problem.not_secret
    for _ in range(50):
        hidden = complementary_suppression(cells, problem.lines, m, also=sorted(also)) | problem.never_shown
        fixed = _fixed(problem, hidden - known, checked)
        if not fixed:
            return hidden - known
        also |= hidden - problem.not_secret
        before = len(also)
        for cell in sorted(fixed):
            partner = _partner(cell, cells, lines, also | problem.never_shown, known, complete)
            if partner is not None:
                also.add(partner)
        if len(also) == before:
            break
    return {c for line in lines for c in line if c not in known}


def _hidden(problem: _Problem, m: int, *, known: Sequence, complete: tuple[int, int]) -> set:
    """The cells to hide: :func:`suppress_until_safe`, checked and if need be extended knowing what a reader
    knows, or a cheaper safe set grown from the small counts alone, whichever costs the reader less.

    :func:`suppress_until_safe` sees the published sums only, with every
    count ``>= 0`` (the people of the folded patterns missing each column
    as if published).  A reader knows more (a listed pattern holds at least
    one person), and the folded patterns are never shown, so its result is
    checked again with all of that and grown where a count is still fixed.
    A second set is grown from the small counts alone, preferring to hide
    patterns over the complete cases and those over a column's missing
    count; of the two the one hiding fewer of the costlier cells is kept.
    """
    if m <= 1:
        return set()
    known = set(known)
    on_lines = {c for line in problem.lines for c in line}
    published = {c: v for c, v in problem.cells.items() if c in on_lines}
    package = suppress_until_safe(published, problem.lines, m, known=sorted(known))
    small = {c for c, v in problem.cells.items() if 0 < v < m}
    options = [_grow(problem, m, package, known, complete), _grow(problem, m, small, known, complete)]

    def cost(hidden: set) -> tuple[int, ...]:
        tiers = [_tier(c, complete) for c in hidden if c not in problem.never_shown]
        return tuple(tiers.count(level) for level in (3, 2, 1, 0))

    return min(options, key=cost)  # on a tie, the package's own rule


# ---- the tables ------------------------------------------------------------------------------------


def _shown(count: int, n: int, hidden: bool) -> tuple[Any, Any]:
    """A count and its share of ``n`` as published."""
    if hidden:
        return SUPPRESSED, SUPPRESSED
    return int(count), round(count / n, _SHARE_DIGITS) if n else float("nan")


def _column_table(imputations: Imputations, columns: tuple, counts: _Counts, hidden: set, n: int, auxiliary: tuple = ()) -> pd.DataFrame:
    rows = []
    for i, c in enumerate(columns):
        people, share = _shown(int(counts.missing[i]), n, (2, i) in hidden)
        method = METHOD_WORDS[imputations.methods[c]] if counts.missing[i] and c in imputations.methods else COMPLETE_WORDS
        role = "auxiliary (imputation models only)" if c in imputations.auxiliary or c in auxiliary else "predictor"
        rows.append([c, role, people, share, method])
    return pd.DataFrame(rows, columns=["column", "used as", "people missing", "share missing", "imputation method"])


def _pattern_table(columns: tuple, counts: _Counts, hidden: set, n: int) -> pd.DataFrame:
    rows = []
    for k in counts.listed:
        names = [str(c) for c, gone in zip(columns, counts.patterns[k]) if gone]
        rows.append([", ".join(names) or COMPLETE_PATTERN, *_shown(int(counts.people[k]), n, (0, k) in hidden)])
    if counts.other:
        rows.append([OTHER_PATTERNS, *_shown(int(sum(counts.people[k] for k in counts.other)), n, _OTHER in hidden)])
    return pd.DataFrame(rows, columns=["columns missing", "people", "share"])


def _last_half(iterations: int) -> tuple[int, int]:
    """First and last iteration of the second half of the chain (the last ceil(iterations / 2))."""
    return iterations - (iterations + 1) // 2 + 1, iterations


def _convergence_table(imputations: Imputations, columns: tuple, withheld: set) -> pd.DataFrame:
    chain = imputations.chain
    first, last = _last_half(imputations.iterations)
    rows = []
    for c in [c for c in columns if c in imputations.columns_imputed]:
        scale = f"level position (0 = {imputations.levels[c][0]!r})" if c in imputations.levels else "value"
        for j in range(imputations.m):
            mine = chain[(chain["column"] == c) & (chain["imputation"] == j)]
            tail = mine[mine["iteration"] >= first]
            end = mine[mine["iteration"] == last]
            if c in withheld:
                numbers = [WITHHELD] * 4
            else:
                numbers = [float(end["mean"].iloc[0]), float(end["sd"].iloc[0]),
                           float(tail["mean"].max() - tail["mean"].min()), float(tail["sd"].max() - tail["sd"].min())]
            rows.append([c, j + 1, scale, *numbers])
    return pd.DataFrame(rows, columns=["column", "imputation", "summarised as", "mean at last iteration", "sd at last iteration",
                                       "range of the mean over the last half", "range of the sd over the last half"])


def _numeric_summaries(values: np.ndarray) -> list[float]:
    """Mean, sd (n - 1) and quartiles (numpy's default, linear interpolation) of ``values``."""
    if values.size == 0:
        return [float("nan")] * 5
    sd = float(np.std(values, ddof=1)) if values.size > 1 else float("nan")
    return [float(np.mean(values)), sd, *(float(q) for q in np.quantile(values, [0.25, 0.5, 0.75]))]


def _observed_imputed_table(imputations: Imputations, columns: tuple, counts: _Counts, hidden: set, withheld: set) -> pd.DataFrame:
    rows = []
    for c in [c for c in columns if c in imputations.columns_imputed]:
        i = columns.index(c)
        note = _WITHHELD_NOTE if c in withheld else _SHOWN_NOTE
        pooled = np.concatenate([np.asarray(v[c]) for v in imputations.values])
        if c in imputations.levels:
            levels = imputations.levels[c]
            imputed_share = np.bincount(pooled.astype(np.int64), minlength=len(levels)) / pooled.size
            observed_n = int(counts.levels[i].sum())
            for j, level in enumerate(levels):
                if c in withheld:
                    observed, imputed = WITHHELD, WITHHELD
                else:
                    shown = (4 + i, j) not in hidden
                    observed = round(int(counts.levels[i][j]) / observed_n, _SHARE_DIGITS) if shown else SUPPRESSED
                    imputed = round(float(imputed_share[j]), _SHARE_DIGITS)
                rows.append([c, f"share {level}", observed, imputed, note])
        else:
            observed_values = imputations.frame[c].dropna().to_numpy(dtype=np.float64)
            names = ("mean", "sd", "25th percentile", "median", "75th percentile")
            obs, imp = _numeric_summaries(observed_values), _numeric_summaries(pooled.astype(np.float64))
            for name, o, v in zip(names, obs, imp):
                rows.append([c, name, WITHHELD if c in withheld else o, WITHHELD if c in withheld else v, note])
    return pd.DataFrame(rows, columns=["column", "summary", "observed", "imputed", "note"])


def _notes(imputations: Imputations, columns: tuple, counts: _Counts) -> tuple[str, ...]:
    notes = []
    if imputations.fallbacks:
        notes.append(f"{len(imputations.fallbacks)} draw(s) of a category imputation model could not be fitted; each drew from "
                     "the level frequencies of its bootstrap resample instead, losing that column's link with the others for that draw.")
    for i, c in enumerate(columns):
        if counts.missing[i] and imputations.methods.get(c) == "none":
            notes.append(f"{c} is not imputed: its missing values stay missing in every completed data set.")
    return tuple(notes)


# ---- the public function ---------------------------------------------------------------------------


def missing_data_report(imputations: Imputations, *, columns: Sequence[Any], min_cell_count: int, cohort_label: str,
                        n_people: int | None = None, auxiliary: Sequence[Any] = ()) -> MissingDataReport:
    """What was missing in a cohort and how it was imputed, with small counts suppressed.

    Parameters
    ----------
    imputations : Imputations
        From :func:`riskvet.imputation.impute`, on the cohort written out one
        row per person.
    columns : sequence of column names, keyword-only
        The analysis columns to report, in order: the predictors and the
        auxiliary columns (the outcome is complete and not listed).  Every
        imputed column must be among them.
    min_cell_count : int, keyword-only
        Counts from 1 to ``min_cell_count - 1`` are suppressed
        (``output.min_cell_count``); 0 or 1 shows every count.
    cohort_label : str, keyword-only
        The cohort's name in the record.
    n_people : int, optional, keyword-only
        People in the cohort, as the record states elsewhere: checked
        against the rows imputed, so that every count here is of people.
    auxiliary : sequence of column names, keyword-only
        Columns of ``columns`` used only in the imputation models
        (``missing_data.auxiliary``), besides those the imputation itself
        took as auxiliary; the table says so.

    Returns
    -------
    MissingDataReport

    Raises
    ------
    DataError
        ``imputations`` not an :class:`~riskvet.imputation.Imputations`;
        ``columns`` empty, a text, with unknown or repeated names, naming the
        outcome or leaving out an imputed column; ``min_cell_count`` not a
        whole number >= 0; ``cohort_label`` empty; ``n_people`` different
        from the rows imputed.

    Notes
    -----
    *Patterns.*  A pattern is the set of reported columns missing for a
    person.  The complete cases are always a row; the 9 most frequent other
    patterns are listed (ties: fewer columns missing, then column order), by
    number of columns missing and column order rather than by size, so the
    order gives away nothing of a suppressed count; the rest are one row,
    "other patterns", so that the rows add up to everyone.

    *Disclosure control.*  A reader can add up: the pattern rows to
    everyone; the patterns in which a column is missing (those listed, and
    its people among the other patterns) to its missing count; a column's
    missing and observed people to everyone; and its observed people at
    each level (whose shares the comparison table shows) to its observed
    people.  A reader also knows that each listed pattern, level and
    incomplete column holds at least one person.  Counts from 1 to
    ``min_cell_count - 1`` are hidden, then further counts, until no hidden
    count is fixed by all of that together: the cells
    :func:`~riskvet.reporting.disclosure.suppress_until_safe` hides from the
    published sums are checked again by mixed-integer programming with what
    a reader knows besides, and grown where needed; a second set is grown
    from the small counts alone, hiding patterns before the complete cases
    and those before a column's missing count, and the one that hides less
    of what a reader most needs is kept.  The people of the other patterns
    who miss a column are never shown, and are kept uncertain where they
    are few.  Each share is shown only with its count.  Where a column's
    number of imputed values is suppressed, its comparison and convergence
    summaries are withheld: the quartiles of three imputed values are three
    people's values (predictive mean matching imputes observed values), and
    shares of imputed or observed values would give the suppressed number
    back through their denominators.  Many small patterns together can
    leave most of the pattern table suppressed: the table partitions
    everyone, so a small count can only be protected by hiding large ones.

    *Convergence.*  For each imputed column and imputation: the mean and sd
    of the imputed values after the last cycle, and how far each moved over
    the last half of the cycles (largest minus smallest).  Categories are
    summarised by level position (0 for the lowest level).  Chains that
    have converged move within a similar band in every imputation, with no
    trend (van Buuren 2018, section 6.5.2).

    *Observed against imputed.*  Numbers: mean, sd (n - 1) and quartiles
    (numpy's default, definition 7 of Hyndman & Fan 1996) of the observed
    values and of the imputed values pooled over the m imputations.
    Categories: the share of each level among the observed and among the
    pooled imputed values.  Differences are expected when values are
    missing at random rather than completely at random; they are a prompt
    to ask why, not a test.

    References
    ----------
    van Buuren S. Flexible Imputation of Missing Data, 2nd ed. Boca Raton:
    Chapman & Hall/CRC, 2018.

    Hyndman RJ, Fan Y. Sample quantiles in statistical packages. The
    American Statistician 1996;50(4):361-365.

    Hundepool A, Domingo-Ferrer J, Franconi L, Giessing S, Schulte Nordholt
    E, Spicer K, de Wolf P-P. Statistical Disclosure Control. Wiley, 2012.
    """
    columns, m = _checked(imputations, columns, min_cell_count, cohort_label, n_people)
    n = len(imputations.frame)
    counts = _count(imputations, columns, m)
    imputed = {i for i, c in enumerate(columns) if c in imputations.columns_imputed}
    hidden = _hidden(_disclosure_problem(counts, n, imputed, m), m, known=[_EVERYONE], complete=(0, counts.listed[0]))
    withheld = {c for i, c in enumerate(columns) if i in imputed and ((2, i) in hidden or (3, i) in hidden)}
    complete = counts.listed[0]
    complete_people, complete_share = _shown(int(counts.people[complete]), n, (0, complete) in hidden)
    observed_imputed = _observed_imputed_table(imputations, columns, counts, hidden, withheld)
    published = [(2, i) for i in range(len(columns))] + [(0, k) for k in counts.listed] + ([_OTHER] if counts.other else [])
    published += [(4 + i, j) for i, per_level in counts.levels.items() if columns[i] not in withheld for j in range(len(per_level))]
    return MissingDataReport(
        cohort_label=cohort_label, n_people=n, min_cell_count=m, columns=columns, outcome=imputations.outcome,
        auxiliary=tuple(c for c in columns if c in imputations.auxiliary or c in tuple(auxiliary)),
        methods={c: imputations.methods[c] for i, c in enumerate(columns) if counts.missing[i] and c in imputations.methods},
        m=imputations.m, iterations=imputations.iterations, seed=imputations.seed, donors=imputations.donors,
        complete_people=complete_people, complete_share=complete_share,
        by_column=_column_table(imputations, columns, counts, hidden, n, tuple(auxiliary)),
        patterns=_pattern_table(columns, counts, hidden, n),
        convergence=_convergence_table(imputations, columns, withheld),
        observed_imputed=observed_imputed,
        last_half=_last_half(imputations.iterations),
        withheld_columns=tuple(c for c in columns if c in withheld),
        n_suppressed=sum(1 for cell in published if cell in hidden),
        n_fallbacks=len(imputations.fallbacks),
        notes=_notes(imputations, columns, counts),
    )
