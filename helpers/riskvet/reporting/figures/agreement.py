"""Figures of the agreement stage.  They take its result objects and compute no statistics.

Both are Bland–Altman plots of differences against means.  By default they
show bins of pairs, not single pairs: rectangles of a grid over the mean and
the difference, shaded by how many people fall in each, with bins holding
fewer than ``min_cell_count`` people left out, so that no small group can be
picked out of the figure; the bias and limits-of-agreement lines use every
pair.  Where the study allows pair-level plots
(``output.pair_level_plots``) they are drawn by
:func:`riskvet.reporting.figures.performance.plot_bland_altman` instead.
The axes are named after the raters and predicted risks are shown in percent.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure
from matplotlib.patches import Patch, Rectangle

from ...errors import RiskvetError, problem
from ...measures.agreement import BlandAltmanResult
from .performance import PALETTE, _REFERENCE, _STYLE, _new_figure, plot_bland_altman

__all__ = ["PairBins", "bin_pairs", "plot_item_agreement", "plot_risk_agreement"]

#: Bins across each axis tried for the grid; grids are tried finest first (most bins in all).
GRID_SIZES = (14, 12, 10, 8, 6, 5, 4, 3)

#: The finest grid is used whose drawn bins hold at least this share of the pairs.
DRAWN_SHARE = 0.8


@dataclass(frozen=True)
class PairBins:
    """Bins of (mean, difference) pairs as a figure draws them.

    Attributes
    ----------
    x_edges, y_edges : ndarray
        Bin edges of the means and of the differences (multiples of a round step).
    counts : ndarray
        People per bin, shape (len(x_edges) − 1, len(y_edges) − 1).
    drawn : ndarray of bool
        Bins drawn: those holding at least ``min_cell_count`` people.
    min_cell_count : int
        Bins holding fewer people are not drawn.
    """

    x_edges: np.ndarray
    y_edges: np.ndarray
    counts: np.ndarray
    drawn: np.ndarray
    min_cell_count: int

    def rectangles(self) -> list[tuple[float, float, float, float, int]]:
        """The drawn bins: (mean from, mean to, difference from, difference to, people)."""
        out = []
        for i, j in zip(*np.nonzero(self.drawn)):
            out.append((float(self.x_edges[i]), float(self.x_edges[i + 1]), float(self.y_edges[j]), float(self.y_edges[j + 1]),
                        int(self.counts[i, j])))
        return out


def _round_step(span: float, bins: int) -> float:
    raw = span / bins if span > 0 else 1.0
    power = 10.0 ** math.floor(math.log10(raw))
    return next(mult * power for mult in (1.0, 2.0, 2.5, 5.0, 10.0) if mult * power >= raw * (1 - 1e-12))


#: Spacings checked for readings on a lattice (whole numbers, halves, ...), largest first.
_LATTICES = (1.0, 0.5, 0.25, 0.2, 0.1, 0.05, 0.01)


def _lattice(values: np.ndarray) -> float | None:
    """The largest spacing of :data:`_LATTICES` that every value is a multiple of, if any."""
    for r in _LATTICES:
        if np.allclose(values / r, np.round(values / r), rtol=0, atol=1e-9):
            return r
    return None


def _edges(values: np.ndarray, bins: int) -> np.ndarray:
    """Bin edges a round step apart that never fall on a reading.

    Readings on a lattice (whole numbers, halves, ...) get a step that is a
    multiple of the lattice and edges half a lattice spacing off it; other
    readings get edges half a step either side of the step's multiples, so
    that a common value such as 0 is a bin's centre.
    """
    step = _round_step(float(np.ptp(values)), bins)
    r = _lattice(values)
    if r is not None:
        step = max(r, math.ceil(step / r - 1e-9) * r)
        shift = -r / 2
    else:
        shift = -step / 2
    first = math.floor((float(values.min()) - shift) / step)
    edges = shift + step * np.arange(first, first + 2 + math.ceil((float(values.max()) - float(values.min())) / step) + 1)
    while edges[-2] > float(values.max()):
        edges = edges[:-1]
    return edges


def bin_pairs(means: Any, differences: Any, *, min_cell_count: int) -> PairBins:
    """Bin (mean, difference) pairs for a Bland–Altman figure.

    Parameters
    ----------
    means, differences : array_like
        One value per pair.
    min_cell_count : int
        Bins holding fewer people are not drawn; 0 or 1 draws every bin that
        holds someone.

    Returns
    -------
    PairBins
        On the finest grid (:data:`GRID_SIZES` bins across each axis, most
        bins in all first) whose drawn bins hold at least
        :data:`DRAWN_SHARE` of the pairs, else the coarsest.  Edges are a
        round step apart (1, 2, 2.5 or 5 times a power of ten, or a multiple
        of the readings' spacing when they lie on one, such as whole
        numbers), placed so that they never fall on a reading and do not mark
        the smallest or largest one.
    """
    if isinstance(min_cell_count, bool) or not isinstance(min_cell_count, (int, np.integer)) or min_cell_count < 0:
        raise RiskvetError(problem("bin_pairs(min_cell_count=)", allowed="a whole number >= 0", received=min_cell_count))
    x = np.asarray(means, dtype=float)
    y = np.asarray(differences, dtype=float)
    if x.shape != y.shape or x.ndim != 1 or x.size == 0 or not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise RiskvetError(problem("bin_pairs(means, differences)", allowed="finite values of equal length, at least one",
                                   received=f"shapes {x.shape} and {y.shape}"))
    m = max(int(min_cell_count), 1)
    chosen = None
    grids = sorted(((nx, ny) for nx in GRID_SIZES for ny in GRID_SIZES), key=lambda g: (-g[0] * g[1], -g[1]))
    for nx, ny in grids:
        x_edges, y_edges = _edges(x, nx), _edges(y, ny)
        counts, _, _ = np.histogram2d(x, y, bins=(x_edges, y_edges))
        counts = counts.astype(np.int64)
        chosen = PairBins(x_edges=x_edges, y_edges=y_edges, counts=counts, drawn=counts >= m, min_cell_count=int(min_cell_count))
        if counts[counts >= m].sum() >= DRAWN_SHARE * x.size:
            break
    return chosen


def _classes(m: int) -> list[tuple[int, float]]:
    """Ranges of people per bin that share a shade: m to 2m − 1, 2m to 4m − 1, 4m to 8m − 1, 8m or more."""
    base = max(m, 1)
    return [(base, 2 * base), (2 * base, 4 * base), (4 * base, 8 * base), (8 * base, math.inf)]


def _class_label(lo: int, hi: float) -> str:
    return f"{lo} or more" if math.isinf(hi) else (f"{lo}" if hi - 1 == lo else f"{lo}–{int(hi) - 1}")


def _plot_binned(means: np.ndarray, differences: np.ndarray, lines: tuple[float, float, float], *, min_cell_count: int,
                 labels: tuple[str, str], units: str | None) -> Figure:
    bins = bin_pairs(means, differences, min_cell_count=min_cell_count)
    classes = _classes(min_cell_count)
    shades = (0.25, 0.45, 0.7, 0.95)
    unit = f" ({units})" if units else ""
    a, b = labels
    with mpl.rc_context(_STYLE):
        fig, axes = _new_figure(None, (5.8, 3.9))
        used = set()
        for x0, x1, y0, y1, count in bins.rectangles():
            k = next(i for i, (lo, hi) in enumerate(classes) if lo <= count < hi)
            used.add(k)
            axes.add_patch(Rectangle((x0, y0), x1 - x0, y1 - y0, facecolor=PALETTE[1], alpha=shades[k], edgecolor="white",
                                     linewidth=0.6, gid=f"bin:{count}", zorder=2))
        axes.axhline(0.0, color=_REFERENCE, linewidth=0.8, linestyle=":")
        bias, lower, upper = lines
        for name, value, style, colour in (("bias", bias, "-", PALETTE[0]), ("limits of agreement", lower, "--", PALETTE[2]),
                                           (None, upper, "--", PALETTE[2])):
            axes.axhline(value, color=colour, linestyle=style, linewidth=1.4, label=name, zorder=3)
            axes.annotate(f"{value:.3g}", xy=(1.0, value), xycoords=("axes fraction", "data"), xytext=(3, 0),
                          textcoords="offset points", va="center", fontsize=7.5, color=colour)
        xs = [x for r in bins.rectangles() for x in r[:2]] or [float(np.median(means))]
        ys = [y for r in bins.rectangles() for y in r[2:4]] + [0.0, bias, lower, upper]
        pad_x = 0.05 * (max(xs) - min(xs) or 1.0)
        pad_y = 0.08 * (max(ys) - min(ys) or 1.0)
        axes.set_xlim(min(xs) - pad_x, max(xs) + pad_x)
        axes.set_ylim(min(ys) - pad_y, max(ys) + pad_y)
        axes.set_xlabel(f"mean of {a} and {b}{unit}")
        axes.set_ylabel(f"{a} - {b}{unit}")
        lines_legend = axes.legend(loc="lower left", bbox_to_anchor=(0.0, 1.01), ncol=2, borderaxespad=0.0)
        axes.add_artist(lines_legend)
        handles = [Patch(facecolor=PALETTE[1], alpha=shades[k], label=_class_label(*classes[k])) for k in sorted(used)]
        if handles:
            axes.legend(handles=handles, title="people per bin", loc="upper left", bbox_to_anchor=(1.06, 1.0), borderaxespad=0.0)
    return fig


@dataclass(frozen=True)
class _Percent:
    """A Bland–Altman result on the percent scale (values × 100), for display only."""

    means: object
    differences: object
    bias: float
    lower: float
    upper: float
    bias_interval: tuple[float, float]
    lower_interval: tuple[float, float]
    upper_interval: tuple[float, float]
    confidence: float

    @classmethod
    def of(cls, r: BlandAltmanResult) -> "_Percent":
        return cls(
            means=r.means * 100, differences=r.differences * 100, bias=r.bias * 100, lower=r.lower * 100, upper=r.upper * 100,
            bias_interval=tuple(v * 100 for v in r.bias_interval), lower_interval=tuple(v * 100 for v in r.lower_interval),
            upper_interval=tuple(v * 100 for v in r.upper_interval), confidence=r.confidence,
        )


def _draw(result: Any, *, pair_level: bool, min_cell_count: int, labels: tuple[str, str], units: str | None) -> Figure:
    if pair_level:
        return plot_bland_altman(result, units=units, labels=labels)
    return _plot_binned(np.asarray(result.means, dtype=float), np.asarray(result.differences, dtype=float),
                        (float(result.bias), float(result.lower), float(result.upper)),
                        min_cell_count=min_cell_count, labels=labels, units=units)


def plot_item_agreement(item: Any, *, pair_level: bool = False) -> Figure:
    """Bland–Altman plot of a continuous rated item, rater_a − rater_b.

    Parameters
    ----------
    item : ItemAgreement
        A continuous item from :func:`riskvet.chain.stages.agreement.assess`
        (any object with ``name``, ``rater_a``, ``rater_b``,
        ``min_cell_count`` and a ``bland_altman`` result).
    pair_level : bool, default False
        Mark single pairs (only where the study allows pair-level plots);
        by default bins of pairs, bins under ``item.min_cell_count`` people
        not drawn (:func:`bin_pairs`).

    Returns
    -------
    matplotlib.figure.Figure

    References
    ----------
    Bland JM, Altman DG. Statistical methods for assessing agreement between
    two methods of clinical measurement. Lancet 1986; 327(8476): 307–310.
    """
    ba = getattr(item, "bland_altman", None)
    if not isinstance(ba, BlandAltmanResult) or not all(hasattr(item, a) for a in ("name", "rater_a", "rater_b", "min_cell_count")):
        known = all(hasattr(item, a) for a in ("name", "scale"))
        received = f"item {item.name!r} of scale {item.scale!r}" if known else type(item).__name__
        raise RiskvetError(problem("plot_item_agreement(item)", allowed="the ItemAgreement of a continuous item", received=received))
    fig = _draw(ba, pair_level=pair_level, min_cell_count=item.min_cell_count, labels=(item.rater_a, item.rater_b), units=None)
    fig.axes[0].set_title(f"{item.name} (n = {ba.n})", loc="left", pad=28)
    return fig


def plot_risk_agreement(cut: Any, *, pair_level: bool = False) -> Figure:
    """Bland–Altman plot of the predicted risk of one cut from each rater's readings, in percent.

    Parameters
    ----------
    cut : CutRiskAgreement
        One cut of :attr:`riskvet.chain.stages.agreement.RiskAgreement.cuts`
        (any object with a ``label``, ``min_cell_count`` and a ``risks``
        Bland–Altman result).
    pair_level : bool, default False
        Mark single pairs; by default bins of pairs (:func:`bin_pairs`).

    Returns
    -------
    matplotlib.figure.Figure
        Means in percent, differences in percentage points.

    References
    ----------
    Bland JM, Altman DG. Statistical methods for assessing agreement between
    two methods of clinical measurement. Lancet 1986; 327(8476): 307–310.
    """
    if not isinstance(getattr(cut, "risks", None), BlandAltmanResult) or not hasattr(cut, "label") or not hasattr(cut, "min_cell_count"):
        raise RiskvetError(problem("plot_risk_agreement(cut)", allowed="a CutRiskAgreement", received=type(cut).__name__))
    fig = _draw(_Percent.of(cut.risks), pair_level=pair_level, min_cell_count=cut.min_cell_count,
                labels=("risk from rater_a", "risk from rater_b"), units="%")
    fig.axes[0].set_title(f"Predicted risk of '{cut.label}' (n = {cut.risks.n})", loc="left", pad=28)
    return fig
