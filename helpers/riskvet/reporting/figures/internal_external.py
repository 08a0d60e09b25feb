"""Figure of internal-external cross-validation.  It takes a result object and computes no statistic.

:func:`plot_cluster_performance` draws, for one cut of the outcome, one
panel per measure (C, calibration-in-the-large, calibration slope, O/E):
each left-out cluster is a row with its estimate (a square whose area grows
with the cluster's people) and its confidence interval, and below a rule
the pooled estimate is a filled bar spanning its confidence interval, set
inside a thin bracket spanning the prediction interval for a new cluster.
Clusters whose measure could not be estimated keep their row, marked "not
estimated", so that no cluster silently disappears from the figure.

The style is that of :mod:`riskvet.reporting.figures.performance`
(Okabe-Ito colours, light grey reference lines at each measure's ideal).
"""

from __future__ import annotations

import math

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure

from ...errors import RiskvetError, problem
from ...validation.iecv import MEASURES, InternalExternalValidation
from .performance import FIGURE_WIDTH, PALETTE, _REFERENCE, _STYLE

__all__ = ["plot_cluster_performance", "FOREST_MEASURES"]

#: The measures drawn, one panel each, in order.
FOREST_MEASURES = ("c", "calibration_in_the_large", "calibration_slope", "oe_ratio")

#: Panel titles, on two lines where a measure's name is long.
_TITLES = {"c": "C (AUC)", "calibration_in_the_large": "calibration-\nin-the-large", "calibration_slope": "calibration\nslope",
           "oe_ratio": "observed/\nexpected"}


def _limits(rows: dict, pooled, log: bool) -> tuple[float, float] | None:
    """The axis range: every estimate and the pooled intervals, with a margin; a cluster's wider interval is cut at it.

    A single small site can have an interval many times wider than the
    rest (a slope of 5 +- 10); drawing it whole would squeeze every other
    row into a sliver, so an interval wider than three times the median
    width stops at the edge with an arrowhead.
    """
    shown = [m for m in rows.values() if m.estimated]
    scale = (lambda v: math.log(v)) if log else (lambda v: v)
    widths = [scale(m.upper) - scale(m.lower) for m in shown]
    typical = float(np.median(widths)) if widths else 0.0
    points = [m.estimate for m in shown]
    # every interval up to three times the typical width is drawn whole; only the outliers are cut
    points += [v for m, w in zip(shown, widths) if w <= 3.0 * typical for v in (m.lower, m.upper)]
    points += [v for v in (pooled.lower, pooled.upper, pooled.prediction_lower, pooled.prediction_upper) if math.isfinite(v)]
    points = [scale(v) for v in points if math.isfinite(v) and (v > 0 or not log)]
    if not points:
        return None
    low, high = min(points), max(points)
    margin = max(0.06 * (high - low), 0.05 if log else 0.05 * max(1.0, abs(high)))
    low, high = low - margin, high + margin
    return (math.exp(low), math.exp(high)) if log else (low, high)


def _panel(ax, result: InternalExternalValidation, measure: str, cut: int, sizes: dict[str, int], show_labels: bool) -> None:
    labels = [c.label for c in result.clusters]
    rows = {m.cluster: m for m in result.measures if m.measure == measure and m.cut == cut}
    pooled = result.pooled_measure(measure, cut)
    y_pos = np.arange(len(labels))[::-1] + 2.0
    biggest = max(max(sizes.values(), default=1), 1)
    limits = _limits(rows, pooled, log=measure == "oe_ratio")
    for label, y in zip(labels, y_pos):
        m = rows.get(label)
        if m is None or not m.estimated:
            ax.text(0.5, y, "not estimated", transform=ax.get_yaxis_transform(), ha="center", va="center",
                    fontsize=8.5, color="#555555", style="italic")
            continue
        lower, upper = m.lower, m.upper
        if limits is not None:
            if lower < limits[0]:
                lower = limits[0]
                ax.plot([lower], [y], marker="<", color=PALETTE[1], markersize=5, clip_on=False)
            if upper > limits[1]:
                upper = limits[1]
                ax.plot([upper], [y], marker=">", color=PALETTE[1], markersize=5, clip_on=False)
        ax.plot([lower, upper], [y, y], color=PALETTE[1], linewidth=1.4, solid_capstyle="butt")
        ax.scatter([m.estimate], [y], marker="s", s=18 + 70 * sizes.get(label, 0) / biggest, color=PALETTE[1], zorder=3,
                   edgecolors="white", linewidths=0.5)
    ax.axhline(1.0, color="#333333", linewidth=0.6)
    if pooled.reason:
        ax.text(0.5, 0.0, "not pooled", transform=ax.get_yaxis_transform(), ha="center", va="center", fontsize=8.5, style="italic")
    else:
        if math.isfinite(pooled.prediction_lower):
            ax.plot([pooled.prediction_lower, pooled.prediction_upper], [0.0, 0.0], color=PALETTE[2], linewidth=1.0)
            for end in (pooled.prediction_lower, pooled.prediction_upper):
                ax.plot([end, end], [-0.28, 0.28], color=PALETTE[2], linewidth=1.0)
        ax.fill_between([pooled.lower, pooled.upper], -0.22, 0.22, color=PALETTE[2], linewidth=0, zorder=3)
        ax.plot([pooled.estimate, pooled.estimate], [-0.36, 0.36], color="#000000", linewidth=1.6, zorder=4)
    ideal = MEASURES[measure][2] if measure != "c" else math.nan  # C: its axis shows how far from 0.5 and 1 it lies
    if math.isfinite(ideal):
        ax.axvline(ideal, color=_REFERENCE, linewidth=0.9, linestyle="--", zorder=0)
    if measure == "oe_ratio":
        ax.set_xscale("log")
        ax.xaxis.set_major_formatter(mpl.ticker.FormatStrFormatter("%g"))
        ax.xaxis.set_minor_formatter(mpl.ticker.NullFormatter())
    if limits is not None:
        ax.set_xlim(*limits)
        if measure == "oe_ratio":  # ratios read as halves and doubles
            ticks = [t for t in (0.125, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0) if limits[0] <= t <= limits[1]]
            ax.set_xticks(ticks, [f"{t:g}" for t in ticks])
    ax.set_title(_TITLES[measure], fontsize=10.5)
    ax.set_ylim(-0.9, len(labels) + 2.6)
    ax.tick_params(axis="y", length=0, labelleft=show_labels)


def plot_cluster_performance(result: InternalExternalValidation, *, cut: int = 0, cut_label: str | None = None) -> Figure:
    """Each left-out cluster's C, calibration-in-the-large, calibration slope and O/E, with the pooled estimates.

    Parameters
    ----------
    result : InternalExternalValidation
        From :func:`riskvet.validation.iecv.internal_external_validation`.
    cut : int
        The cut of the outcome drawn (event: Y > cut).
    cut_label : str, optional
        Words for the cut, shown in the title.

    Returns
    -------
    matplotlib.figure.Figure
        Four panels sharing the cluster rows.  A blue square and line: the
        cluster's estimate and confidence interval (square area grows with
        the cluster's people); below the rule, the vermilion bar is the
        pooled confidence interval with a black tick at the pooled value,
        and the thin vermilion bracket the prediction interval for a new
        cluster.  Each axis spans the estimates and the pooled intervals; a
        cluster's interval reaching beyond it ends in an arrowhead at the
        edge (the table beside the figure gives its limits).  Dashed grey lines mark the ideal calibration (0 for
        calibration-in-the-large, 1 for the slope and O/E).
    """
    func = "plot_cluster_performance"
    if not isinstance(result, InternalExternalValidation):
        raise RiskvetError(problem(f"{func}(result)", allowed="an InternalExternalValidation", received=type(result).__name__))
    if not 0 <= cut < len(result.levels) - 1:
        raise RiskvetError(problem(f"{func}(cut=)", allowed=f"a cut 0..{len(result.levels) - 2}", received=cut))
    sizes = {c.label: c.n for c in result.clusters}
    height = 1.2 + 0.32 * (len(result.clusters) + 2)
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH * 1.25, height), layout="constrained")
        axes = fig.subplots(1, len(FOREST_MEASURES), sharey=True)
        labels = [c.label for c in result.clusters]
        # the rows are shared: ticks set once, on the first panel (sharey carries them to the others, unlabelled)
        axes[0].set_yticks([*(np.arange(len(labels))[::-1] + 2.0), 0.0], [*labels, "pooled"])
        for i, (ax, measure) in enumerate(zip(axes, FOREST_MEASURES)):
            _panel(ax, result, measure, cut, sizes, show_labels=i == 0)
        words = f" ({cut_label})" if cut_label else ""
        fig.suptitle(f"Performance in each {result.cluster_kind} left out{words}", fontsize=11.5)
    return fig
