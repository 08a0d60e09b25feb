"""Figures of performance results: ROC curves, calibration, decision curves, Bland–Altman.

Every function takes result objects computed elsewhere in the package and
returns a :class:`matplotlib.figure.Figure`; none computes a statistic.  The
figures are built on :class:`~matplotlib.figure.Figure` directly (no pyplot
state), so they work with any backend, including the non-interactive Agg.

Visual style
------------
One style throughout, chosen to survive greyscale printing and colour-vision
deficiency: the Okabe–Ito palette (Okabe & Ito, Color Universal Design,
2008), a distinct line style and marker for every series so that no series
is told apart by colour alone, light reference lines (the ideal diagonal,
treat none) in grey, and a light grid behind the data.

References
----------
.. [1] Okabe M, Ito K. Color Universal Design (CUD): how to make figures and
   presentations that are friendly to colorblind people. 2008.
.. [2] Vickers AJ, Elkin EB. Decision curve analysis: a novel method for
   evaluating prediction models. Medical Decision Making 2006;26(6):565-574.
.. [3] Bland JM, Altman DG. Statistical methods for assessing agreement
   between two methods of clinical measurement. Lancet 1986;1(8476):307-310.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, Protocol

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from ...measures.calibration import CalibrationResult, MergedGroups, OrdinalCalibration, merge_bins, merge_groups
from ...measures.decision import NetBenefitResult, ThresholdTable
from ...measures.discrimination import RocCurveResult
from ...errors import RiskvetError, problem
from ..._jsonable import to_jsonable
from ..disclosure import SUPPRESSED, _determined, complementary_suppression
from ..labels import cut_label

__all__ = [
    "PALETTE",
    "LINESTYLES",
    "MARKERS",
    "AgreementLike",
    "plot_roc",
    "plot_calibration",
    "calibration_statistics",
    "published_calibration",
    "published_groups",
    "plot_decision_curve",
    "plot_bland_altman",
]

#: Okabe–Ito colours, in the order series use them (black first: it prints best).
PALETTE: tuple[str, ...] = ("#000000", "#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442")
#: Line styles, cycled with the colours, so series differ in greyscale too.
LINESTYLES: tuple[Any, ...] = ("-", "--", "-.", (0, (1, 1.5)), (0, (5, 1.5, 1, 1.5, 1, 1.5)), (0, (8, 2)))
#: Marker shapes, cycled with the colours.
MARKERS: tuple[str, ...] = ("o", "s", "^", "D", "v", "P")

_REFERENCE = "#9a9a9a"  # ideal lines and zero lines
_BAND = "#bdbdbd"

#: Width of a full-width figure, inches.  Pages scale figures to the text
#: column; at a 390 px screen a 6.4 in figure shows at about 0.57 of its
#: size, so the fonts below are chosen to stay at 8 px or more there.
FIGURE_WIDTH = 6.4
#: Size of the labels written on lines and of small notes in figures.
_LABEL_SIZE = 10.0

_STYLE = {
    "font.size": 11.0,
    "axes.titlesize": 11.5,
    "axes.labelsize": 11.0,
    "xtick.labelsize": 10.0,
    "ytick.labelsize": 10.0,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.edgecolor": "#333333",
    "axes.linewidth": 0.8,
    "axes.grid": True,
    "axes.axisbelow": True,
    "grid.color": "#e6e6e6",
    "grid.linewidth": 0.6,
    "legend.frameon": False,
    "legend.fontsize": 10.0,
    "lines.linewidth": 1.6,
    "xtick.direction": "out",
    "ytick.direction": "out",
}


def _series_style(i: int) -> dict[str, Any]:
    return {"color": PALETTE[i % len(PALETTE)], "linestyle": LINESTYLES[i % len(LINESTYLES)]}


def _marker(i: int) -> str:
    return MARKERS[i % len(MARKERS)]


def _as_list(value: Any, kind: type, name: str, func: str) -> list[Any]:
    items = [value] if isinstance(value, kind) else list(value) if isinstance(value, Sequence) else None
    if not items or not all(isinstance(v, kind) for v in items):
        raise RiskvetError(problem(f"{func}({name}=)", allowed=f"a {kind.__name__} or a non-empty sequence of them", received=type(value).__name__))
    return items


def _labels(labels: Sequence[str] | None, n: int, default: list[str], func: str) -> list[str]:
    if labels is None:
        return default
    labels = list(labels)
    if len(labels) != n:
        raise RiskvetError(problem(f"{func}(labels=)", allowed=f"{n} labels, one per result", received=labels))
    return [str(v) for v in labels]


def _new_figure(ax: Axes | None, size: tuple[float, float]) -> tuple[Figure, Axes]:
    if ax is not None:
        fig = ax.figure
        assert isinstance(fig, Figure)
        return fig, ax
    fig = Figure(figsize=size, layout="constrained")
    return fig, fig.add_subplot()


def plot_roc(
    curves: RocCurveResult | Sequence[RocCurveResult],
    *,
    labels: Sequence[str] | None = None,
    operating_points: ThresholdTable | Sequence[ThresholdTable | None] | None = None,
    title: str | None = None,
    ax: Axes | None = None,
    levels: Sequence[str] | None = None,
) -> Figure:
    """ROC curves (one per cut or per model) with operating points at chosen thresholds.

    Parameters
    ----------
    curves : RocCurveResult or sequence of RocCurveResult
        From :func:`riskvet.discrimination.roc_curve`, for example one per
        cut of an ordered outcome.
    labels : sequence of str, optional
        Legend labels, one per curve (default the event of each cut in the
        words of ``levels``, or ``"cut 1"``, ``"cut 2"``, ... without them);
        the curve's C is appended.
    operating_points : ThresholdTable or sequence of (ThresholdTable or None), optional
        From :func:`riskvet.decision.threshold_table` on the same data, one
        per curve (``None`` to skip one); each threshold's (1 - specificity,
        sensitivity) is marked and labelled with the threshold.
    title : str, optional
        Axes title.
    ax : matplotlib Axes, optional
        Draw into this axes instead of a new figure.
    levels : sequence of str, optional, keyword-only
        The outcome's level labels, lowest first, to name the cuts.

    Returns
    -------
    matplotlib.figure.Figure
    """
    func = "plot_roc"
    items = _as_list(curves, RocCurveResult, "curves", func)
    default = [_cut_title(levels, j, len(items)) or "model" for j in range(len(items))] if len(items) > 1 else ["model"]
    names = _labels(labels, len(items), default, func)
    points: list[ThresholdTable | None]
    if operating_points is None:
        points = [None] * len(items)
    elif isinstance(operating_points, ThresholdTable):
        points = [operating_points] + [None] * (len(items) - 1)
    else:
        points = list(operating_points)
        if len(points) != len(items) or not all(p is None or isinstance(p, ThresholdTable) for p in points):
            raise RiskvetError(problem(f"{func}(operating_points=)", allowed=f"{len(items)} ThresholdTable results (or None), one per curve", received=operating_points))
    with mpl.rc_context(_STYLE):
        fig, axes = _new_figure(ax, (5.2, 5.0))
        axes.plot([0, 1], [0, 1], color=_REFERENCE, linestyle=":", linewidth=1.0, label="no discrimination")
        for i, (curve, name, table) in enumerate(zip(items, names, points)):
            style = _series_style(i)
            axes.plot(1.0 - curve.specificity, curve.sensitivity, drawstyle="default", label=f"{name} (C = {curve.auc:.3f})", **style)
            if table is not None:
                axes.plot(
                    1.0 - table.specificity,
                    table.sensitivity,
                    linestyle="none",
                    marker=_marker(i),
                    markersize=6,
                    markerfacecolor="white",
                    markeredgecolor=style["color"],
                    markeredgewidth=1.4,
                    label=f"{name}: thresholds",
                )
                for t, fx, sy in zip(table.threshold, 1.0 - table.specificity, table.sensitivity):
                    if np.isfinite(fx) and np.isfinite(sy):
                        axes.annotate(
                            f"{t:g}",
                            (fx, sy),
                            textcoords="offset points",
                            xytext=(5, -10),
                            fontsize=_LABEL_SIZE - 1,
                            color=style["color"],
                            bbox={"boxstyle": "round,pad=0.1", "facecolor": "white", "edgecolor": "none", "alpha": 0.8},
                        )
        axes.set_xlim(-0.01, 1.01)
        axes.set_ylim(-0.01, 1.01)
        axes.set_aspect("equal")
        axes.set_xlabel("1 - specificity")
        axes.set_ylabel("sensitivity")
        if title:
            axes.set_title(title)
        axes.legend(loc="lower right")
    return fig


#: Calibration panels side by side at most; more cuts wrap onto further rows.
_MAX_COLUMNS = 2


def _grid(n_panels: int) -> tuple[int, int]:
    """Rows and columns of a grid of ``n_panels`` panels, at most :data:`_MAX_COLUMNS` across."""
    columns = min(n_panels, _MAX_COLUMNS)
    return -(-n_panels // columns), columns


def _outcome_words(levels: Sequence[str] | None, cut: int | None) -> tuple[str, str]:
    """The event and the non-event of a cut in the user's level labels (plain words without them)."""
    if levels is None or len(levels) < 2:
        return "events", "non-events"
    j = 0 if cut is None else int(cut)
    binary = len(levels) == 2
    event = cut_label(levels, j, binary=binary)
    nonevent = str(levels[0]) if binary or j == 0 else f"{levels[j]} or lower"
    return event, nonevent


def _calibration_limits(result: CalibrationResult, groups: MergedGroups | None) -> tuple[float, float]:
    upper = float(max(1e-9, np.nanmax(result.curve_predicted), np.nanmax(result.group_max_predicted)))
    x_limit = min(1.0, upper * 1.05) if upper < 0.95 else 1.0
    top = x_limit
    if groups is not None and groups.n.size:
        top = max(top, float(np.nanmax(groups.observed_upper)) * 1.05)
    return x_limit, min(1.0, max(top, float(np.nanmax(result.curve_upper)) * 1.02))


def _label_line(axes: Axes, text: str, xy: tuple[float, float], corner: tuple[float, float], colour: str) -> None:
    """A direct label of a line: ``text`` at ``corner`` (axes fraction) joined by a thin leader to the point ``xy``."""
    axes.annotate(text, xy, xycoords="data", xytext=corner, textcoords="axes fraction", ha="right" if corner[0] > 0.5 else "left",
                  va="bottom" if corner[1] < 0.5 else "top", color=colour, fontsize=_LABEL_SIZE,
                  arrowprops={"arrowstyle": "-", "color": colour, "linewidth": 0.7, "shrinkA": 1, "shrinkB": 3},
                  bbox={"boxstyle": "round,pad=0.15", "facecolor": "white", "edgecolor": "none", "alpha": 0.85})


def _draw_curve_panel(axes: Axes, result: CalibrationResult, groups: MergedGroups | None) -> None:
    """Identity line, smoothed curve with its band, and the merged groups, each named on the panel.

    The curve is named in the lower right (where predictions above the
    observed proportions would lie) and the groups in the upper left, each
    joined to its line by a leader, so the names keep clear of the data for
    a model that is roughly calibrated.
    """
    x_limit, y_limit = _calibration_limits(result, groups)
    axes.plot([0, 1], [0, 1], color=_REFERENCE, linestyle=":", linewidth=1.2)
    axes.fill_between(result.curve_predicted, result.curve_lower, result.curve_upper, color=_BAND, alpha=0.55, linewidth=0)
    axes.plot(result.curve_predicted, result.curve_observed, **_series_style(0))
    at = 0.8 * float(np.nanmax(result.curve_predicted))
    curve_y = float(np.interp(at, result.curve_predicted, result.curve_observed))
    if np.isfinite(curve_y):
        _label_line(axes, "smoothed curve", (at, min(curve_y, y_limit)), (0.97, 0.04), PALETTE[0])
    end = 0.97 * min(x_limit, y_limit)
    axes.annotate("ideal", (end, end), textcoords="offset points", xytext=(-3, 3), ha="right", va="bottom", color="#555555",
                  fontsize=_LABEL_SIZE)
    if groups is not None and groups.n.size:
        err = np.vstack([groups.observed - groups.observed_lower, groups.observed_upper - groups.observed])
        axes.errorbar(groups.mean_predicted, groups.observed, yerr=err, linestyle="none", marker=_marker(3), markersize=5.5,
                      color=PALETTE[1], markerfacecolor="white", markeredgewidth=1.3, elinewidth=1.1, capsize=2.5)
        first = int(np.argmin(groups.mean_predicted))
        point = (float(groups.mean_predicted[first]), float(groups.observed_upper[first]))
        _label_line(axes, "grouped proportions", point, (0.03, 0.97), PALETTE[1])
    axes.set_xlim(0.0, x_limit)
    axes.set_ylim(0.0, y_limit)
    axes.set_ylabel("observed proportion")
    axes.tick_params(labelbottom=False)


def _interval_note(result: CalibrationResult, grouped: bool) -> str:
    """The kinds of the figure's band and intervals, in words, for beneath it."""
    conf = f"{result.confidence:.0%}"
    note = f"Shaded band: {conf} pointwise confidence band of the smoothed curve."
    if grouped:
        note += f"\nVertical bars: {conf} Wilson intervals of the grouped proportions."
    return note


def _draw_distribution(axes: Axes, edges: np.ndarray, counts: np.ndarray, name: str, colour: str, hatch: str | None) -> None:
    """One outcome's predictions as bars whose area is the number of people in the bin."""
    axes.set_title(name, loc="left", fontsize=_LABEL_SIZE, pad=2, color="#333333")
    axes.set_yticks([])
    axes.grid(False)
    axes.spines["left"].set_visible(False)
    if not counts.size:
        axes.text(0.5, 0.5, "too few people to show", transform=axes.transAxes, ha="center", va="center", fontsize=_LABEL_SIZE, color="#555555")
        return
    width = np.diff(edges)
    axes.bar(edges[:-1], counts / width, width=width, align="edge", color=colour, edgecolor="white" if hatch is None else colour,
             linewidth=0.4, hatch=hatch, fill=hatch is None)
    axes.set_ylim(0.0, float(np.max(counts / width)) * 1.08 or 1.0)


def _draw_calibration(fig: Figure, cell: Any, result: CalibrationResult, title: str | None, min_cell_count: int | None,
                      levels: Sequence[str] | None) -> list[Axes]:
    """The curve panel and, when counts may be drawn, one distribution row per outcome beneath it."""
    if min_cell_count is None:
        axes = fig.add_subplot(cell)
        _draw_curve_panel(axes, result, None)
        axes.tick_params(labelbottom=True)
        axes.set_xlabel("predicted probability")
        if title:
            axes.set_title(title)
        return [axes]
    inner = cell.subgridspec(3, 1, height_ratios=(4.2, 1, 1), hspace=0.05)
    axes = fig.add_subplot(inner[0])
    _draw_curve_panel(axes, result, merge_groups(result, min_count=min_cell_count))
    if title:
        axes.set_title(title)
    event, nonevent = _outcome_words(levels, result.cut)
    rows = [axes]
    for k, (counts, name, colour, hatch) in enumerate(((result.histogram_events, event, PALETTE[2], None),
                                                       (result.histogram_nonevents, nonevent, PALETTE[1], "////"))):
        strip = fig.add_subplot(inner[k + 1], sharex=axes)
        edges, merged = merge_bins(result.histogram_edges, counts, min_count=min_cell_count)
        _draw_distribution(strip, edges, merged, name, colour, hatch)
        strip.tick_params(labelbottom=k == 1)
        rows.append(strip)
    rows[-1].set_xlabel("predicted probability")
    return rows


def _calibration_panels(result: CalibrationResult | OrdinalCalibration, func: str) -> list[CalibrationResult]:
    """One calibration result per panel: each cut of an ordinal result, or the binary result itself."""
    if isinstance(result, OrdinalCalibration):
        return list(result.cuts)
    if isinstance(result, CalibrationResult):
        return [result]
    raise RiskvetError(problem(f"{func}(result=)", allowed="a CalibrationResult or OrdinalCalibration", received=type(result).__name__))


def plot_calibration(
    result: CalibrationResult | OrdinalCalibration,
    *,
    titles: Sequence[str] | None = None,
    min_cell_count: int | None = None,
    levels: Sequence[str] | None = None,
) -> Figure:
    """Calibration: smoothed curve with its band and grouped proportions, the predictions' distribution apart.

    Parameters
    ----------
    result : CalibrationResult or OrdinalCalibration
        From :func:`riskvet.calibration.calibration` (one panel) or
        :func:`riskvet.calibration.ordinal_calibration` (one panel per cut,
        two across, further cuts on further rows).
    titles : sequence of str, optional
        Panel titles; default the event of each cut in the words of
        ``levels`` (:func:`riskvet.reporting.labels.cut_label`).
    min_cell_count : int or None, keyword-only, default None
        The smallest number of people a drawn count may stand for
        (``output.min_cell_count``).  None draws nothing that rests on
        counts of people: only the smoothed curve, its band and the ideal
        line.  A whole number draws the grouped proportions, adjacent
        quantile groups merged until each holds that many events and as many
        non-events (:func:`riskvet.calibration.merge_groups`), and the
        distribution of predictions, adjacent bins merged until each holds
        none or that many people (:func:`riskvet.calibration.merge_bins`);
        0 or 1 merges nothing.
    levels : sequence of str, optional, keyword-only
        The outcome's level labels, lowest first, to name the cuts and the
        two rows of the distribution.

    Returns
    -------
    matplotlib.figure.Figure
        Each cut's calibration panel shows the ideal line, the smoothed curve
        with its pointwise band and the grouped event proportions with their
        Wilson intervals, each named on the line itself; beneath it, one row
        per outcome (event first) shows how the predictions are spread, as
        bars whose area is the number of people (each row scaled to its own
        tallest bar).  No statistic is written in the figure:
        :func:`calibration_statistics` gives them as a table for beside it.
    """
    func = "plot_calibration"
    panels = _calibration_panels(result, func)
    if min_cell_count is not None:
        min_cell_count = _check_count(min_cell_count, func)
    default = [_cut_title(levels, p.cut, len(panels)) for p in panels]
    names = _labels(titles, len(panels), default, func)
    n_rows, n_cols = _grid(len(panels))
    panel_height = (3.4 if n_cols > 1 else 3.9) + (1.4 if min_cell_count is not None else 0.0)
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, panel_height * n_rows + 0.3), layout="constrained")
        grid = fig.add_gridspec(n_rows, n_cols)
        for i, (panel, name) in enumerate(zip(panels, names)):
            _draw_calibration(fig, grid[i // n_cols, i % n_cols], panel, name or None, min_cell_count, levels)
        fig.supxlabel(_interval_note(panels[0], min_cell_count is not None), fontsize=_LABEL_SIZE, color="#333333")
    return fig


def _cut_title(levels: Sequence[str] | None, cut: int | None, n_panels: int) -> str:
    if cut is None or (n_panels == 1 and (levels is None or len(levels) == 2)):
        return ""
    if levels is None:
        return f"cut {cut + 1}"
    return cut_label(levels, cut, binary=len(levels) == 2)


def calibration_statistics(result: CalibrationResult | OrdinalCalibration, *, levels: Sequence[str] | None = None) -> pd.DataFrame:
    """The statistics of a calibration figure, as a table to show beside it.

    Parameters
    ----------
    result : CalibrationResult or OrdinalCalibration
        The result the figure draws.
    levels : sequence of str, optional, keyword-only
        The outcome's level labels, to name each cut's event.

    Returns
    -------
    pandas.DataFrame
        One row per measure and cut: ``outcome``, ``measure``, ``estimate``,
        ``lower limit``, ``upper limit``, ``interval`` (its kind in words),
        ``ideal value``.  Calibration-in-the-large and slope carry Wald
        intervals from the recalibration fits, the observed/expected ratio an
        interval from the log scale, the integrated calibration index none.
    """
    func = "calibration_statistics"
    panels = _calibration_panels(result, func)
    nan = float("nan")
    rows = []
    for r in panels:
        outcome = _outcome_words(levels, r.cut)[0] if levels is not None else ("the event" if r.cut is None else f"cut {r.cut + 1}")
        wald = f"{r.confidence:.0%} Wald interval"
        rows += [
            (outcome, "calibration-in-the-large", r.calibration_in_the_large, r.calibration_in_the_large_lower, r.calibration_in_the_large_upper, wald, 0.0),
            (outcome, "calibration slope", r.slope, r.slope_lower, r.slope_upper, wald, 1.0),
            (outcome, "observed/expected ratio", r.oe_ratio, r.oe_lower, r.oe_upper, f"{wald} on the log scale", 1.0),
            (outcome, "integrated calibration index (ICI)", r.ici, nan, nan, None, 0.0),
        ]
    return pd.DataFrame(rows, columns=["outcome", "measure", "estimate", "lower limit", "upper limit", "interval", "ideal value"])


def _suppressed_table(counts: np.ndarray, m: int) -> list[list[int | str]]:
    """A table of counts whose row and column totals are stated elsewhere, with small counts suppressed.

    Counts from 1 to ``m - 1`` are hidden, then further counts by
    complementary suppression (:func:`riskvet.reporting.disclosure.complementary_suppression`)
    so that no row or column gives one back by subtraction; if the totals
    taken together still fix a hidden count (checked by integer
    programming), every count is hidden.
    """
    table = np.asarray(counts).astype(np.int64)
    n_rows, n_cols = table.shape
    if m <= 1:
        return table.tolist()
    cells = {(i, j): int(table[i, j]) for i in range(n_rows) for j in range(n_cols)}
    # the totals are stated by other numbers of the record, so they stay shown
    totals = {**{(i, n_cols): max(m, int(table[i].sum())) for i in range(n_rows)},
              **{(n_rows, j): max(m, int(table[:, j].sum())) for j in range(n_cols)}}
    lines = [[*[(i, j) for j in range(n_cols)], (i, n_cols)] for i in range(n_rows)]
    lines += [[*[(i, j) for i in range(n_rows)], (n_rows, j)] for j in range(n_cols)]
    values = {**cells, **totals}
    hidden = complementary_suppression(values, lines, m)
    if hidden and _determined(lines, hidden, values):
        hidden = {c for c, v in cells.items() if v > 0}
    return [[SUPPRESSED if (i, j) in hidden else cells[(i, j)] for j in range(n_cols)] for i in range(n_rows)]


def published_groups(result: CalibrationResult, *, min_cell_count: int) -> list[dict[str, Any]]:
    """The quantile groups of a calibration result as a results file may hold them.

    Parameters
    ----------
    result : CalibrationResult
    min_cell_count : int, keyword-only
        ``output.min_cell_count``: counts of events or non-events from 1 to
        ``min_cell_count - 1`` are suppressed.

    Returns
    -------
    list of dict
        One per group, in order of prediction: ``group`` (from 1),
        ``people``, ``events``, ``non_events``, ``observed`` with
        ``observed_lower`` and ``observed_upper`` (Wilson limits),
        ``mean_predicted``, ``min_predicted``, ``max_predicted``.  A group's
        size and the totals of events and non-events are stated elsewhere,
        so a small count is suppressed together with the counts that would
        give it back (complementary suppression); where a group's events
        are suppressed its observed proportion and limits are too, since
        with its size they state the count.
    """
    func = "published_groups"
    if not isinstance(result, CalibrationResult):
        raise RiskvetError(problem(f"{func}(result=)", allowed="a CalibrationResult", received=type(result).__name__))
    m = _check_count(min_cell_count, func)
    n = np.asarray(result.group_n).astype(np.int64)
    events = np.asarray(result.group_events).astype(np.int64)
    shown = _suppressed_table(np.column_stack([events, n - events]), m)
    rows = []
    for g in range(n.shape[0]):
        hide = SUPPRESSED in shown[g]
        rows.append({
            "group": g + 1, "people": int(n[g]), "events": shown[g][0], "non_events": shown[g][1],
            **{key: SUPPRESSED if hide else float(value[g]) for key, value in (
                ("observed", result.group_observed), ("observed_lower", result.group_observed_lower),
                ("observed_upper", result.group_observed_upper))},
            "mean_predicted": float(result.group_mean_predicted[g]), "min_predicted": float(result.group_min_predicted[g]),
            "max_predicted": float(result.group_max_predicted[g]),
        })
    return rows


def _check_count(value: Any, func: str) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
        raise RiskvetError(problem(f"{func}(min_cell_count=)", allowed="a whole number >= 0 (or None where a figure allows it)", received=value))
    return int(value)


#: Fields of a calibration result that hold counts of people by group or bin; a results file gets them published instead.
_COUNT_FIELDS = ("group_n", "group_events", "group_observed", "group_observed_lower", "group_observed_upper",
                 "group_mean_predicted", "group_min_predicted", "group_max_predicted",
                 "histogram_edges", "histogram_events", "histogram_nonevents")


def published_calibration(result: CalibrationResult | OrdinalCalibration, *, min_cell_count: int) -> dict[str, Any]:
    """A calibration result for a results file: every measure, and its counts under disclosure control.

    Parameters
    ----------
    result : CalibrationResult or OrdinalCalibration
    min_cell_count : int, keyword-only
        ``output.min_cell_count``.

    Returns
    -------
    dict
        JSON-ready: the result's ``to_dict()`` without its raw group and
        histogram arrays, and instead ``groups`` (:func:`published_groups`),
        ``groups_drawn`` (the merged groups the figure draws, each with at
        least ``min_cell_count`` events and non-events), ``distribution``
        (the merged bins the figure draws, per outcome: ``edges`` and
        ``counts``, each count 0 or at least ``min_cell_count``) and
        ``min_cell_count``.  For an ordered outcome, ``cuts`` holds one such
        dict per cut and the ordinal test's table of observed counts by
        group and level is suppressed like the groups.
    """
    func = "published_calibration"
    m = _check_count(min_cell_count, func)
    if isinstance(result, OrdinalCalibration):
        out = result.to_dict()
        out["cuts"] = [published_calibration(c, min_cell_count=m) for c in result.cuts]
        out["observed"] = _suppressed_table(np.asarray(result.observed), m)
        out["min_cell_count"] = m
        return to_jsonable(out)
    if not isinstance(result, CalibrationResult):
        raise RiskvetError(problem(f"{func}(result=)", allowed="a CalibrationResult or OrdinalCalibration", received=type(result).__name__))
    out = {k: v for k, v in result.to_dict().items() if k not in _COUNT_FIELDS}
    distribution = {}
    for name, counts in (("events", result.histogram_events), ("non_events", result.histogram_nonevents)):
        edges, merged = merge_bins(result.histogram_edges, counts, min_count=m)
        distribution[name] = {"edges": edges, "counts": merged}
    merged_groups = merge_groups(result, min_count=m).to_dict()
    out.update(groups=published_groups(result, min_cell_count=m), groups_drawn=merged_groups, distribution=distribution, min_cell_count=m)
    return to_jsonable(out)


def plot_decision_curve(
    results: NetBenefitResult | Sequence[NetBenefitResult],
    *,
    labels: Sequence[str] | None = None,
    y_min: float | None = None,
    levels: Sequence[str] | None = None,
) -> Figure:
    """Decision curves: net benefit of each strategy against treat all and treat none.

    Parameters
    ----------
    results : NetBenefitResult or sequence of NetBenefitResult
        From :func:`riskvet.decision.net_benefit`, :func:`rule_net_benefit`
        or :func:`ordinal_net_benefit`.  Results for different cuts go to
        separate panels; results for the same cut share a panel and its
        treat-all curve (taken from the first result of the panel).
    labels : sequence of str, optional
        One per result (default: the result's ``strategy``).
    y_min : float, optional
        Lower limit of the net-benefit axis.  Default: -0.15 times the
        largest prevalence, since treat all falls steeply and would
        otherwise flatten the region of interest.
    levels : sequence of str, optional, keyword-only
        The outcome's level labels, lowest first, to name the cuts.

    Returns
    -------
    matplotlib.figure.Figure
    """
    func = "plot_decision_curve"
    items = _as_list(results, NetBenefitResult, "results", func)
    names = _labels(labels, len(items), [r.strategy for r in items], func)
    cuts: list[int | None] = []
    for r in items:
        if r.cut not in cuts:
            cuts.append(r.cut)
    with mpl.rc_context(_STYLE):
        n_rows, n_cols = _grid(len(cuts))
        fig = Figure(figsize=(FIGURE_WIDTH if n_cols > 1 else 5.6, 4.2 * n_rows), layout="constrained")
        for c_index, cut in enumerate(cuts):
            axes = fig.add_subplot(n_rows, n_cols, c_index + 1)
            members = [(i, r) for i, r in enumerate(items) if r.cut == cut]
            first = members[0][1]
            axes.plot(first.threshold, first.treat_none, color=_REFERENCE, linestyle="-", linewidth=1.0, label="treat none")
            axes.plot(first.threshold, first.treat_all, color=PALETTE[5], linestyle=(0, (1, 1.5)), linewidth=1.4, label="treat all")
            top = first.prevalence
            for series, (i, r) in enumerate(members):
                axes.plot(r.threshold, r.net_benefit, label=names[i], **_series_style(series))
                top = max(top, float(np.nanmax(r.net_benefit)))
            low = -0.15 * max(r.prevalence for _, r in members) if y_min is None else float(y_min)
            axes.set_ylim(low, top * 1.08 if top > 0 else 0.05)
            axes.set_xlim(float(first.threshold.min()), float(first.threshold.max()))
            axes.set_xlabel("threshold probability")
            axes.set_ylabel("net benefit")
            name = "" if cut is None else _cut_title(levels, cut, len(cuts))
            if name:
                axes.set_title(name)
            axes.legend(loc="upper right")
    return fig


class AgreementLike(Protocol):
    """What :func:`plot_bland_altman` reads from an agreement result.

    :class:`riskvet.agreement.BlandAltmanResult` satisfies it; so does any
    object with these attributes (``*_interval`` may be absent).

    Attributes
    ----------
    means, differences : array-like
        Per pair, (a + b) / 2 and a - b.
    bias, lower, upper : float
        Mean difference and the limits of agreement.
    bias_interval, lower_interval, upper_interval : tuple of float, optional
        Confidence intervals of the three lines, drawn as shaded bands.
    confidence : float, optional
        Confidence level of those intervals (for the legend).
    """

    means: Any
    differences: Any
    bias: float
    lower: float
    upper: float


def _distinct_pairs(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Distinct (x, y) points and how many pairs sit at each, in order of first appearance.

    Values equal to about nine significant digits of the largest one count as
    the same point, so that ties computed by different floating-point routes
    are not drawn apart.
    """
    scale = np.array([max(np.max(np.abs(x), initial=0.0), 1e-300), max(np.max(np.abs(y), initial=0.0), 1e-300)])
    keys = np.round(np.column_stack([x, y]) / scale, 9)
    _, first, counts = np.unique(keys, axis=0, return_index=True, return_counts=True)
    order = np.argsort(first, kind="stable")
    first, counts = first[order], counts[order]
    return x[first], y[first], counts


def _size_levels(most: int) -> list[int]:
    """Pair counts for the size legend: 1, the largest, and between them round numbers (1-2-5) spaced evenly on a log scale."""
    if most <= 3:
        return list(range(1, most + 1))
    nice = []
    for step in (1 / 3, 2 / 3):
        target = most**step
        power = 10 ** np.floor(np.log10(target))
        nice.append(int(min((power * f for f in (1, 2, 5, 10)), key=lambda v: abs(np.log(v / target)))))
    return sorted({1, *(v for v in nice if 1 < v < most), most})


def plot_bland_altman(
    result: AgreementLike,
    *,
    units: str | None = None,
    labels: tuple[str, str] = ("a", "b"),
    ax: Axes | None = None,
) -> Figure:
    """Bland–Altman plot: differences against means with bias and limits of agreement.

    Parameters
    ----------
    result : AgreementLike
        An agreement result such as :class:`riskvet.agreement.BlandAltmanResult`.
    units : str, optional
        Measurement units for the axis labels.
    labels : (str, str), default ("a", "b")
        Names of the two measurements, for the axis labels.
    ax : matplotlib Axes, optional
        Draw into this axes instead of a new figure.

    Returns
    -------
    matplotlib.figure.Figure
        One hollow circle per distinct (mean, difference) point, its area
        proportional to the number of pairs there (readings on a coarse
        scale tie often, and one marker per pair would hide how many), with
        a legend of sizes; a solid bias line, dashed limits, each with its
        confidence interval as a shaded band when the result carries one,
        and the values written at the right edge.

    References
    ----------
    .. [1] Bland JM, Altman DG. Statistical methods for assessing agreement
       between two methods of clinical measurement. Lancet 1986;1(8476):307-310.
    .. [2] Bland JM, Altman DG. Measuring agreement in method comparison
       studies. Statistical Methods in Medical Research 1999;8(2):135-160.
    """
    func = "plot_bland_altman"
    missing = [name for name in ("means", "differences", "bias", "lower", "upper") if not hasattr(result, name)]
    if missing:
        raise RiskvetError(problem(f"{func}(result=)", allowed="an object with means, differences, bias, lower, upper", received=f"{type(result).__name__} lacking {missing}"))
    means = np.asarray(result.means, dtype=float)
    diffs = np.asarray(result.differences, dtype=float)
    if means.shape != diffs.shape or means.ndim != 1:
        raise RiskvetError(problem(f"{func}(result=)", allowed="means and differences of equal length", received=(means.shape, diffs.shape)))
    unit = f" ({units})" if units else ""
    a, b = labels
    conf = getattr(result, "confidence", None)
    x, y, counts = _distinct_pairs(means, diffs)
    most = int(counts.max(initial=1))
    # Area per pair: about 16 pt^2 for a lone pair, less when many pairs tie, so
    # the largest marker stays readable; never under 5 pt^2.
    unit_area = max(5.0, min(16.0, 700.0 / most))
    with mpl.rc_context(_STYLE):
        fig, axes = _new_figure(ax, (5.8, 3.9))
        axes.axhline(0.0, color=_REFERENCE, linewidth=0.8, linestyle=":")
        axes.scatter(x, y, s=unit_area * counts, facecolors="none", edgecolors=PALETTE[0], linewidths=0.9, alpha=0.85, zorder=3)
        axes.margins(x=0.07, y=0.07)  # room for the largest markers at the edges
        lines = (
            ("bias", float(result.bias), getattr(result, "bias_interval", None), "-", PALETTE[1]),
            ("limits of agreement", float(result.lower), getattr(result, "lower_interval", None), "--", PALETTE[2]),
            (None, float(result.upper), getattr(result, "upper_interval", None), "--", PALETTE[2]),
        )
        banded = False
        for name, value, interval, style, colour in lines:
            axes.axhline(value, color=colour, linestyle=style, linewidth=1.4, label=name)
            if interval is not None and all(np.isfinite(interval)):
                band_label = None if banded else (f"{conf:.0%} CI of each line" if conf else "CI of each line")
                axes.axhspan(float(interval[0]), float(interval[1]), color=colour, alpha=0.12, linewidth=0, label=band_label)
                banded = True
            axes.annotate(f"{value:.3g}", xy=(1.0, value), xycoords=("axes fraction", "data"), xytext=(3, 0), textcoords="offset points", va="center", fontsize=7.5, color=colour)
        axes.set_xlabel(f"mean of {a} and {b}{unit}")
        axes.set_ylabel(f"{a} - {b}{unit}")
        # Outside the axes: a legend inside would cover points.  Lines above,
        # marker sizes to the right (clear of the values at the right edge).
        lines_legend = axes.legend(loc="lower left", bbox_to_anchor=(0.0, 1.01), ncol=3, borderaxespad=0.0)
        levels = _size_levels(most)
        sizes = [axes.scatter([], [], s=unit_area * k, facecolors="none", edgecolors=PALETTE[0], linewidths=0.9) for k in levels]
        # Room for the largest marker: its diameter is sqrt(area) points.
        font = float(_STYLE["legend.fontsize"])
        widest = float(np.sqrt(unit_area * levels[-1]))
        axes.legend(sizes, [f"{k} pair" if k == 1 else f"{k} pairs" for k in levels], title="pairs at\na point",
                    loc="upper left", bbox_to_anchor=(1.09, 1.0), borderaxespad=0.0, borderpad=0.6, scatterpoints=1,
                    labelspacing=max(0.8, widest / font - 0.4), handlelength=max(1.0, widest / font), handletextpad=0.6,
                    title_fontsize=7.5)
        axes.add_artist(lines_legend)
    return fig
