"""Figures of multiple imputation: the chains of the imputed values, and observed against imputed values.

:func:`plot_imputation_chains` draws, for each imputed column, the mean and
the sd of its imputed values after each cycle of the chained equations, one
line per imputation: chains that have settled wander within one band with
no trend, and the lines of the imputations mingle.
:func:`plot_observed_imputed` sets the distribution of the observed values
of each imputed column beside that of its imputed values (pooled over the
imputations): outline histograms of equal area for numbers, paired bars of
level shares for categories.

Both take an :class:`~riskvet.imputation.Imputations` and draw what it
holds; neither fits anything.  A column with fewer than ``min_cell_count``
imputed values, or named in ``withhold`` (the columns a
:class:`~riskvet.reporting.missingness.MissingDataReport` withholds), is
not drawn: with predictive mean matching the imputed values are other
people's observed values, so a handful of them would show individuals.
The histograms are drawn on bins that each hold 0 or at least
``min_cell_count`` observed people
(:func:`riskvet.measures.calibration.merge_bins`), and the imputed values on
the same bins.  The style is that of
:mod:`riskvet.reporting.figures.performance`.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import matplotlib as mpl
import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from ...errors import RiskvetError, problem
from ...imputation import Imputations
from ...measures.calibration import merge_bins
from .performance import _LABEL_SIZE, _STYLE, FIGURE_WIDTH, LINESTYLES, PALETTE

__all__ = ["plot_imputation_chains", "plot_observed_imputed", "MAX_CHAIN_COLUMNS"]

#: Imputed columns drawn at most by :func:`plot_imputation_chains` (those with the most imputed values).
MAX_CHAIN_COLUMNS = 8
# Panels across in :func:`plot_observed_imputed`.
_ACROSS = 3
# Bins of a numeric column before bins with too few people are merged.
_BINS = 20
_NOTE_COLOUR = "#555555"


def _checked(imputations: Any, min_cell_count: Any, withhold: Any, func: str) -> tuple[int, set]:
    if not isinstance(imputations, Imputations):
        raise RiskvetError(problem(f"{func}(imputations)", allowed="an Imputations from riskvet.imputation.impute", received=type(imputations).__name__))
    if isinstance(min_cell_count, bool) or not isinstance(min_cell_count, (int, np.integer)) or min_cell_count < 0:
        raise RiskvetError(problem(f"{func}(min_cell_count=)", allowed="a whole number >= 0", received=min_cell_count))
    if isinstance(withhold, (str, bytes)) or not isinstance(withhold, (Sequence, set, frozenset)):
        raise RiskvetError(problem(f"{func}(withhold=)", allowed="a sequence of column names", received=withhold))
    unknown = [c for c in withhold if c not in imputations.frame.columns]
    if unknown:
        raise RiskvetError(problem(f"{func}(withhold=)", allowed=f"columns of the imputed frame {list(imputations.frame.columns)}", received=unknown))
    return int(min_cell_count), set(withhold)


def _drawable(imputations: Imputations, m: int, withhold: set) -> tuple[list, list]:
    """Imputed columns that may be drawn and those that may not, the most imputed values first."""
    order = list(reversed(imputations.columns_imputed))  # visited in increasing missingness
    hidden = [c for c in order if c in withhold or 0 < len(imputations.rows[c]) < m]
    return [c for c in order if c not in hidden], hidden


def _note(ax: Axes, text: str) -> None:
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", fontsize=_LABEL_SIZE, color=_NOTE_COLOUR, wrap=True)
    ax.set_xticks([])
    ax.set_yticks([])
    ax.grid(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_visible(False)


def _not_drawn_text(hidden: list, left_out: list) -> str:
    parts = []
    if hidden:
        parts.append("not drawn (too few imputed values to show, or their number is suppressed): " + ", ".join(map(str, hidden)))
    if left_out:
        parts.append(f"left out (only the {MAX_CHAIN_COLUMNS} columns with the most imputed values are drawn): " + ", ".join(map(str, left_out)))
    return "; ".join(parts)


def plot_imputation_chains(imputations: Imputations, *, min_cell_count: int = 0, withhold: Sequence[Any] = ()) -> Figure:
    """The mean and sd of each column's imputed values after each cycle, one line per imputation.

    Parameters
    ----------
    imputations : Imputations
        From :func:`riskvet.imputation.impute` (its ``chain`` table).
    min_cell_count : int, keyword-only
        Columns with 1 to ``min_cell_count - 1`` imputed values are not
        drawn (``output.min_cell_count``); default 0 draws every column.
    withhold : sequence of column names, keyword-only
        Columns not to draw either (``MissingDataReport.withheld_columns``).

    Returns
    -------
    matplotlib.figure.Figure
        One row of two panels (mean, sd) per drawn column, the column with
        the most imputed values first, at most :data:`MAX_CHAIN_COLUMNS`
        rows; the columns not drawn are named beneath.  Categories are drawn
        on their level positions (0 for the lowest level).  With no column
        to draw, one panel says so.
    """
    m, withhold = _checked(imputations, min_cell_count, withhold, "plot_imputation_chains")
    drawn, hidden = _drawable(imputations, m, withhold)
    drawn, left_out = drawn[:MAX_CHAIN_COLUMNS], drawn[MAX_CHAIN_COLUMNS:]
    chain = imputations.chain
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, 1.4 + 1.7 * max(len(drawn), 1)), layout="constrained")
        if not drawn:
            _note(fig.add_subplot(), "no imputed column to draw")
        else:
            axes = fig.subplots(len(drawn), 2, sharex=True, squeeze=False)
            for row, column in zip(axes, drawn):
                mine = chain[chain["column"] == column]
                for j in range(imputations.m):
                    one = mine[mine["imputation"] == j].sort_values("iteration")
                    style = {"color": PALETTE[j % len(PALETTE)], "linestyle": LINESTYLES[j % len(LINESTYLES)], "linewidth": 1.1}
                    row[0].plot(one["iteration"], one["mean"], **style)
                    row[1].plot(one["iteration"], one["sd"], **style)
                scale = " (level position)" if column in imputations.levels else ""
                row[0].set_ylabel(f"{column}{scale}", fontsize=_LABEL_SIZE)
            axes[0, 0].set_title("mean of the imputed values")
            axes[0, 1].set_title("sd of the imputed values")
            for ax in axes[-1]:
                ax.set_xlabel("cycle")
                ax.xaxis.set_major_locator(mpl.ticker.MaxNLocator(integer=True))
        fig.suptitle(f"Chains of the imputed values ({imputations.m} imputations, one line each)", fontsize=11.5)
        note = _not_drawn_text(hidden, left_out)
        if note:
            fig.supxlabel(note, fontsize=_LABEL_SIZE - 1, color=_NOTE_COLOUR, wrap=True)
    return fig


def _numeric_panel(ax: Axes, observed: np.ndarray, imputed: np.ndarray, m: int) -> None:
    """Outline histograms of equal area; bins merged until each holds 0 or at least ``m`` observed people."""
    edges = np.histogram_bin_edges(observed, bins=_BINS)
    if edges[0] == edges[-1]:
        edges = np.array([edges[0] - 0.5, edges[0] + 0.5])
    edges, _ = merge_bins(edges, np.histogram(observed, bins=edges)[0], min_count=m)
    if not edges.size:
        _note(ax, "too few observed values to show")
        return
    width = np.diff(edges)
    for values, colour, style, label in ((observed, PALETTE[1], "-", "observed"), (imputed, PALETTE[2], "--", "imputed")):
        counts = np.histogram(np.clip(values, edges[0], edges[-1]), bins=edges)[0]
        ax.stairs(counts / (counts.sum() * width), edges, color=colour, linestyle=style, linewidth=1.6, label=label)
    ax.set_yticks([])
    ax.set_ylabel("density")


def _category_panel(ax: Axes, observed: np.ndarray, imputed: np.ndarray, levels: tuple, m: int) -> None:
    """Paired bars of level shares; not drawn when a level holds 1 to ``m - 1`` observed people."""
    seen = np.bincount(observed, minlength=len(levels))
    if np.any((seen > 0) & (seen < m)):
        _note(ax, "not drawn: a level has too few\nobserved people to show")
        return
    x = np.arange(len(levels))
    made = np.bincount(imputed, minlength=len(levels))
    ax.bar(x - 0.2, seen / seen.sum(), width=0.4, color=PALETTE[1], label="observed")
    ax.bar(x + 0.2, made / made.sum(), width=0.4, color="white", edgecolor=PALETTE[2], hatch="////", label="imputed")
    ax.set_xticks(x, [str(v) for v in levels], rotation=30 if len(levels) > 3 else 0)
    ax.set_ylabel("share")


def plot_observed_imputed(imputations: Imputations, *, min_cell_count: int, withhold: Sequence[Any] = ()) -> Figure:
    """Observed against imputed values of each imputed column.

    Parameters
    ----------
    imputations : Imputations
        From :func:`riskvet.imputation.impute`.
    min_cell_count : int, keyword-only
        ``output.min_cell_count``: a column with 1 to ``min_cell_count - 1``
        imputed values is not drawn, histogram bins are merged until each
        holds 0 or at least this many observed people, and a category with a
        level of 1 to ``min_cell_count - 1`` observed people is not drawn.
    withhold : sequence of column names, keyword-only
        Columns not to draw either (``MissingDataReport.withheld_columns``).

    Returns
    -------
    matplotlib.figure.Figure
        One panel per imputed column, the column with the most imputed
        values first, three across.  Numbers: outline histograms of the
        observed values (solid blue) and of the imputed values pooled over
        the imputations (dashed vermilion), each of area 1, on the same
        bins.  Categories: the share of each level among the observed values
        (solid blue bars) and the imputed values (hatched bars).  A column
        not drawn keeps its panel, with a note saying so.
    """
    m, withhold = _checked(imputations, min_cell_count, withhold, "plot_observed_imputed")
    hidden = _drawable(imputations, m, withhold)[1]
    columns = list(reversed(imputations.columns_imputed))
    n_rows = max(1, -(-len(columns) // _ACROSS))
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH * 1.15, 0.9 + 2.5 * n_rows), layout="constrained")
        if not columns:
            _note(fig.add_subplot(), "no column was imputed")
            return fig
        grid = fig.add_gridspec(n_rows, min(_ACROSS, len(columns)))
        legend_from = None
        for i, column in enumerate(columns):
            ax = fig.add_subplot(grid[i // _ACROSS, i % _ACROSS])
            ax.set_title(str(column), fontsize=_LABEL_SIZE + 0.5)
            if column in hidden:
                _note(ax, "not drawn: too few imputed\nvalues to show, or their\nnumber is suppressed")
                continue
            rows = imputations.rows[column]
            observed_rows = np.setdiff1d(np.arange(len(imputations.frame)), rows)
            pooled = np.concatenate([np.asarray(v[column]) for v in imputations.values])
            if column in imputations.levels:
                levels = imputations.levels[column]
                position = {level: k for k, level in enumerate(levels)}
                observed = np.array([position[v] for v in imputations.frame[column].iloc[observed_rows]], dtype=np.int64)
                _category_panel(ax, observed, pooled.astype(np.int64), levels, m)
            else:
                observed = imputations.frame[column].iloc[observed_rows].to_numpy(dtype=np.float64)
                _numeric_panel(ax, observed, pooled.astype(np.float64), m)
            if legend_from is None and ax.get_legend_handles_labels()[0]:
                legend_from = ax
        if legend_from is not None:
            fig.legend(*legend_from.get_legend_handles_labels(), loc="outside lower center", ncols=2)
        fig.suptitle(f"Observed and imputed values ({imputations.m} imputations pooled)", fontsize=11.5)
    return fig
