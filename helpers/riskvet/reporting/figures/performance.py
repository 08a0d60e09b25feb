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
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from ...measures.calibration import CalibrationResult, OrdinalCalibration
from ...measures.decision import NetBenefitResult, ThresholdTable
from ...measures.discrimination import RocCurveResult
from ...errors import RiskvetError, problem

__all__ = [
    "PALETTE",
    "LINESTYLES",
    "MARKERS",
    "AgreementLike",
    "plot_roc",
    "plot_calibration",
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

_STYLE = {
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "axes.labelsize": 9.0,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.edgecolor": "#333333",
    "axes.linewidth": 0.8,
    "axes.grid": True,
    "axes.axisbelow": True,
    "grid.color": "#e6e6e6",
    "grid.linewidth": 0.6,
    "legend.frameon": False,
    "legend.fontsize": 8.0,
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
) -> Figure:
    """ROC curves (one per cut or per model) with operating points at chosen thresholds.

    Parameters
    ----------
    curves : RocCurveResult or sequence of RocCurveResult
        From :func:`riskvet.discrimination.roc_curve`, for example one per
        cut of an ordered outcome.
    labels : sequence of str, optional
        Legend labels, one per curve (default ``"cut 0"``, ``"cut 1"``, ...);
        the curve's C is appended.
    operating_points : ThresholdTable or sequence of (ThresholdTable or None), optional
        From :func:`riskvet.decision.threshold_table` on the same data, one
        per curve (``None`` to skip one); each threshold's (1 - specificity,
        sensitivity) is marked and labelled with the threshold.
    title : str, optional
        Axes title.
    ax : matplotlib Axes, optional
        Draw into this axes instead of a new figure.

    Returns
    -------
    matplotlib.figure.Figure
    """
    func = "plot_roc"
    items = _as_list(curves, RocCurveResult, "curves", func)
    names = _labels(labels, len(items), [f"cut {j}" for j in range(len(items))] if len(items) > 1 else ["model"], func)
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
        fig, axes = _new_figure(ax, (4.2, 4.2))
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
                            fontsize=7,
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


def _draw_calibration(axes: Axes, hist_ax: Axes, result: CalibrationResult, title: str | None) -> None:
    axes.plot([0, 1], [0, 1], color=_REFERENCE, linestyle=":", linewidth=1.0, label="ideal")
    axes.fill_between(
        result.curve_predicted,
        result.curve_lower,
        result.curve_upper,
        color=_BAND,
        alpha=0.55,
        linewidth=0,
        label=f"{result.confidence:.0%} pointwise band",
    )
    axes.plot(result.curve_predicted, result.curve_observed, label="smoothed", **_series_style(0))
    err = np.vstack([result.group_observed - result.group_observed_lower, result.group_observed_upper - result.group_observed])
    axes.errorbar(
        result.group_mean_predicted,
        result.group_observed,
        yerr=err,
        linestyle="none",
        marker=_marker(1),
        markersize=4.5,
        color=PALETTE[1],
        markerfacecolor="white",
        elinewidth=1.0,
        capsize=2,
        label=f"{result.n_groups} groups ({result.confidence:.0%} Wilson)",
    )
    summary = (
        f"intercept {result.calibration_in_the_large:.2f} ({result.calibration_in_the_large_lower:.2f} to {result.calibration_in_the_large_upper:.2f})\n"
        f"slope {result.slope:.2f} ({result.slope_lower:.2f} to {result.slope_upper:.2f})\n"
        f"O/E {result.oe_ratio:.2f}   ICI {result.ici:.3f}"
    )
    axes.text(0.03, 0.97, summary, transform=axes.transAxes, va="top", ha="left", fontsize=7.5)
    upper = float(max(1e-9, np.nanmax(result.curve_predicted), np.nanmax(result.group_max_predicted)))
    limit = min(1.0, upper * 1.05) if upper < 0.95 else 1.0
    axes.set_xlim(0.0, limit)
    axes.set_ylim(0.0, min(1.0, max(limit, float(np.nanmax(result.group_observed_upper)) * 1.05)))
    axes.set_ylabel("observed proportion")
    axes.legend(loc="lower right")
    if title:
        axes.set_title(title)
    # Distribution of predictions: events above the line, non-events below.
    edges = result.histogram_edges
    width = np.diff(edges)
    hist_ax.bar(edges[:-1], result.histogram_events, width=width, align="edge", color=PALETTE[0], linewidth=0, label="events")
    hist_ax.bar(edges[:-1], -result.histogram_nonevents, width=width, align="edge", color=PALETTE[5], linewidth=0, label="non-events")
    hist_ax.axhline(0.0, color="#333333", linewidth=0.6)
    hist_ax.set_yticks([])
    hist_ax.grid(False)
    hist_ax.spines["left"].set_visible(False)
    hist_ax.set_xlabel("predicted probability")
    # Labelled beside the axis rather than by a legend, which would cover bars.
    hist_ax.text(1.01, 0.75, "events", transform=hist_ax.transAxes, ha="left", va="center", fontsize=7, color=PALETTE[0])
    hist_ax.text(1.01, 0.25, "non-\nevents", transform=hist_ax.transAxes, ha="left", va="center", fontsize=7, color="#8a6100")
    tallest = max(1, int(result.histogram_events.max(initial=0)), int(result.histogram_nonevents.max(initial=0)))
    hist_ax.set_ylim(-tallest * 1.05, tallest * 1.05)


def plot_calibration(
    result: CalibrationResult | OrdinalCalibration,
    *,
    titles: Sequence[str] | None = None,
) -> Figure:
    """Calibration plot: smoothed curve with band, grouped points, distribution of predictions.

    Parameters
    ----------
    result : CalibrationResult or OrdinalCalibration
        From :func:`riskvet.calibration.calibration` (one panel) or
        :func:`riskvet.calibration.ordinal_calibration` (one panel per cut).
    titles : sequence of str, optional
        Panel titles (default ``"cut j: Y > j"`` for ordered outcomes).

    Returns
    -------
    matplotlib.figure.Figure
        Each panel shows the ideal diagonal, the smoothed curve and its
        pointwise band, the quantile groups with their Wilson intervals, the
        recalibration intercept, slope, O/E and ICI, and beneath it a
        histogram of the predictions (events up, non-events down).
    """
    func = "plot_calibration"
    if isinstance(result, OrdinalCalibration):
        panels = list(result.cuts)
        default = [f"cut {c.cut}: Y > {c.cut}" for c in panels]
    elif isinstance(result, CalibrationResult):
        panels = [result]
        default = [""] if result.cut is None else [f"cut {result.cut}: Y > {result.cut}"]
    else:
        raise RiskvetError(problem(f"{func}(result=)", allowed="a CalibrationResult or OrdinalCalibration", received=type(result).__name__))
    names = _labels(titles, len(panels), default, func)
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(4.2 * len(panels), 5.0), layout="constrained")
        grid = fig.add_gridspec(2, len(panels), height_ratios=(4, 1))
        for i, (panel, name) in enumerate(zip(panels, names)):
            axes = fig.add_subplot(grid[0, i])
            hist_ax = fig.add_subplot(grid[1, i], sharex=axes)
            _draw_calibration(axes, hist_ax, panel, name or None)
            axes.tick_params(labelbottom=False)
    return fig


def plot_decision_curve(
    results: NetBenefitResult | Sequence[NetBenefitResult],
    *,
    labels: Sequence[str] | None = None,
    y_min: float | None = None,
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
        fig = Figure(figsize=(4.6 * len(cuts), 3.8), layout="constrained")
        for c_index, cut in enumerate(cuts):
            axes = fig.add_subplot(1, len(cuts), c_index + 1)
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
            axes.set_xlabel("threshold probability" if cut is None else f"threshold probability for Y > {cut}")
            axes.set_ylabel("net benefit")
            if cut is not None:
                axes.set_title(f"cut {cut}: Y > {cut}")
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
