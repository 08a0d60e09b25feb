"""Figures of internal validation.  They take result objects and never compute statistics.

* :func:`plot_optimism` - apparent versus optimism-corrected (and .632+)
  value of each measure, on one panel per measure scale;
* :func:`plot_calibration_slopes` - the distribution of the replicate
  models' calibration slopes on the original data, with the bootstrap and
  heuristic shrinkage factors;
* :func:`plot_selection_frequency` - how often each candidate term was selected.

The visual style is that of :mod:`riskvet.plots` (Okabe–Ito colours, every
series also told apart by marker or line style, light grey reference lines).
"""

from __future__ import annotations

from typing import Sequence

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ...validation.bootstrap import InternalValidation, SelectionStability
from ...errors import RiskvetError, problem
from .performance import FIGURE_WIDTH, PALETTE, _REFERENCE, _STYLE

__all__ = ["plot_optimism", "plot_calibration_slopes", "plot_selection_frequency"]

#: Measures drawn on the "higher is better, 0.5 to 1" panel and on the "0 to 1, either way" panel.
_DISCRIMINATION_KINDS = ("concordance",)
_OVERALL_KINDS = ("brier", "scaled_brier", "r2", "ici")


def _check(result, kind, func: str, name: str = "result"):
    if not isinstance(result, kind):
        raise RiskvetError(problem(f"{func}({name})", allowed=f"a {kind.__name__}", received=type(result).__name__))


def plot_optimism(result: InternalValidation, *, measures: Sequence[str] | None = None, title: str | None = None) -> Figure:
    """Apparent, optimism-corrected and .632+ value of each measure.

    Parameters
    ----------
    result : InternalValidation
        From :func:`riskvet.bootstrap.validate_internally`.
    measures : sequence of str, optional
        Measure keys to draw (default: every discrimination, overall and
        calibration-slope measure).
    title : str, optional
        Figure title.

    Returns
    -------
    matplotlib.figure.Figure
        Up to three panels (discrimination; overall accuracy and ICI;
        calibration slopes, with the ideal 1 marked).  Each row is a measure:
        a hollow circle for the apparent value, a filled square for the
        optimism-corrected value joined to it by a line (the optimism), and a
        triangle for the .632+ estimate where one exists.
    """
    func = "plot_optimism"
    _check(result, InternalValidation, func)
    wanted = list(measures) if measures is not None else None
    if wanted is not None:
        known = {e.measure for e in result.estimates}
        unknown = [m for m in wanted if m not in known]
        if unknown:
            raise RiskvetError(problem(f"{func}(measures=)", allowed=f"keys among {sorted(known)}", received=unknown))
    chosen = [e for e in result.estimates if (wanted is None and e.kind != "intercept") or (wanted is not None and e.measure in wanted)]
    panels = [
        ("Discrimination", [e for e in chosen if e.kind in _DISCRIMINATION_KINDS], None),
        ("Overall accuracy and calibration error", [e for e in chosen if e.kind in _OVERALL_KINDS], None),
        ("Calibration", [e for e in chosen if e.kind in ("slope", "intercept")], 1.0),
    ]
    panels = [p for p in panels if p[1]]
    heights = [max(1.4, 0.38 * len(p[1]) + 0.7) for p in panels]
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, sum(heights) + 0.9), layout="constrained")
        axes = fig.subplots(len(panels), 1, gridspec_kw={"height_ratios": heights}, squeeze=False)[:, 0]
        for ax, (name, items, ideal) in zip(axes, panels):
            rows = np.arange(len(items))[::-1]
            for r, e in zip(rows, items):
                ax.plot([e.apparent, e.corrected], [r, r], color=PALETTE[1], linewidth=1.2)
                ax.plot(e.apparent, r, linestyle="none", marker="o", markersize=6, markerfacecolor="white",
                        markeredgecolor=PALETTE[0], markeredgewidth=1.3)
                ax.plot(e.corrected, r, linestyle="none", marker="s", markersize=5.5, color=PALETTE[1])
                if np.isfinite(e.estimate_632plus):
                    ax.plot(e.estimate_632plus, r, linestyle="none", marker="^", markersize=5.5, color=PALETTE[2])
            if ideal is not None:
                ax.axvline(ideal, color=_REFERENCE, linestyle=":", linewidth=1.0)
            # an unstable estimate is drawn without a corrected value, and says so
            ax.set_yticks(rows, [e.label + (" (unstable: not corrected)" if getattr(e, "unstable", False) else "") for e in items])
            ax.set_ylim(-0.7, len(items) - 0.3)
            ax.set_title(name, loc="left")
            ax.grid(axis="y", visible=False)
        handles = [
            Line2D([], [], linestyle="none", marker="o", markerfacecolor="white", markeredgecolor=PALETTE[0], label="apparent"),
            Line2D([], [], color=PALETTE[1], marker="s", label="optimism-corrected"),
            Line2D([], [], linestyle="none", marker="^", color=PALETTE[2], label=".632+"),
        ]
        fig.legend(handles=handles, loc="outside lower center", ncols=3, fontsize=10)
        fig.suptitle(title or f"Internal validation: {result.n_succeeded} bootstrap replicates")
    return fig


def plot_calibration_slopes(result: InternalValidation, *, bins: int = 30, title: str | None = None) -> Figure:
    """Distribution of the replicate models' calibration slopes on the original data.

    Parameters
    ----------
    result : InternalValidation
    bins : int, default 30
        Histogram bins.
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        Histogram of the slopes, the bootstrap shrinkage factor (their mean,
        solid), the heuristic factor counting every candidate degree of
        freedom (dashed) and the ideal slope 1 (dotted).
    """
    func = "plot_calibration_slopes"
    _check(result, InternalValidation, func)
    if isinstance(bins, bool) or not isinstance(bins, int) or bins < 1:
        raise RiskvetError(problem(f"{func}(bins=)", allowed="a whole number of at least 1", received=bins))
    slopes = result.values("calibration_slope", "original")
    slopes = slopes[np.isfinite(slopes)]
    s = result.shrinkage
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, 4.0), layout="constrained")
        ax = fig.add_subplot()
        if slopes.size:
            ax.hist(slopes, bins=bins, color=PALETTE[6], edgecolor="white", linewidth=0.5, label="replicate models")
        ax.axvline(1.0, color=_REFERENCE, linestyle=":", linewidth=1.2, label="ideal (1)")
        if np.isfinite(s.bootstrap):
            ax.axvline(s.bootstrap, color=PALETTE[0], linestyle="-", linewidth=1.6, label=f"bootstrap factor {s.bootstrap:.2f}")
        if np.isfinite(s.heuristic_candidates):
            ax.axvline(s.heuristic_candidates, color=PALETTE[2], linestyle="--", linewidth=1.6,
                       label=f"heuristic factor {s.heuristic_candidates:.2f}")
        ax.set_xlabel("calibration slope of the replicate model on the original data")
        ax.set_ylabel("replicates")
        ax.legend(loc="upper left")
        ax.set_title(title or "How much the derivation procedure overfits")
    return fig


def plot_selection_frequency(stability: SelectionStability, *, title: str | None = None) -> Figure:
    """Share of bootstrap replicates that selected each candidate term.

    Parameters
    ----------
    stability : SelectionStability
        ``InternalValidation.stability``.
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        Horizontal bars, one per candidate term in design order; terms in the
        model derived on all data are filled, the others hatched, forced
        terms are labelled so.
    """
    func = "plot_selection_frequency"
    _check(stability, SelectionStability, func, "stability")
    share = stability.share_selected
    terms = list(stability.candidate_terms)
    rows = np.arange(len(terms))[::-1]
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, 0.34 * len(terms) + 1.6), layout="constrained")
        ax = fig.add_subplot()
        for r, t in zip(rows, terms):
            chosen = t in stability.apparent_terms
            ax.barh(r, share[t], height=0.7, color=PALETTE[1] if chosen else "white", edgecolor=PALETTE[1],
                    hatch=None if chosen else "///", linewidth=0.9)
        ax.set_yticks(rows, [f"{t} (forced)" if t in stability.forced_terms else t for t in terms])
        ax.set_xlim(0, 1.0)
        ax.axvline(0.5, color=_REFERENCE, linestyle=":", linewidth=1.0)
        ax.set_xlabel(f"share of {stability.n_replicates} replicates selecting the term")
        ax.grid(axis="y", visible=False)
        handles = [
            Patch(facecolor=PALETTE[1], edgecolor=PALETTE[1], label="in the model derived on all data"),
            Patch(facecolor="white", edgecolor=PALETTE[1], hatch="///", label="not in that model"),
        ]
        fig.legend(handles=handles, loc="outside lower center", ncols=1, fontsize=10)
        ax.set_title(title or "Variable-selection stability")
    return fig
