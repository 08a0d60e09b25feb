"""Figures for rater agreement.  They take result objects and never compute statistics.

Colours are the Okabe–Ito palette, which stays distinguishable for the common
forms of colour blindness; every element also differs by line style or
marker, so the figures read in greyscale.

References
----------
Okabe M, Ito K. Color universal design (CUD): how to make figures and
presentations that are friendly to colorblind people. 2008.
https://jfly.uni-koeln.de/color/
"""

from __future__ import annotations

from typing import Sequence

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .agreement import BlandAltmanResult
from .errors import RiskvetError, problem

__all__ = ["OKABE_ITO", "bland_altman_figure"]

#: The Okabe–Ito colours by name.
OKABE_ITO: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky blue": "#56B4E9",
    "bluish green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish purple": "#CC79A7",
}

_RC = {
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 8,
    "axes.spines.top": False,
    "axes.spines.right": False,
}


def bland_altman_figure(
    result: BlandAltmanResult,
    *,
    title: str | None = None,
    measure: str = "reading",
    units: str = "",
    raters: Sequence[str] = ("rater A", "rater B"),
    percent: bool = False,
) -> Figure:
    """Bland–Altman plot: difference against mean of each pair, with bias and limits.

    Parameters
    ----------
    result : BlandAltmanResult
        From :func:`riskvet.agreement.bland_altman`.
    title : str, optional
        Figure title.
    measure : str, default "reading"
        What was measured, for the axis labels ("respiratory rate").
    units : str, default ""
        Units shown in the axis labels ("breaths/min").
    raters : pair of str, default ("rater A", "rater B")
        Names of the two raters, in the order of the difference (first − second).
    percent : bool, default False
        Show values multiplied by 100 (risks as percentages, differences in
        percentage points).

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Identical pairs are drawn once, with marker area proportional to their
    number, so rounded readings are not hidden behind one another.  The
    solid line is the bias (mean difference), the dashed lines the limits
    of agreement, and the shaded bands their confidence intervals; the
    dotted line marks no difference.

    References
    ----------
    Bland JM, Altman DG. Statistical methods for assessing agreement between
    two methods of clinical measurement. Lancet 1986; 327(8476): 307–310.
    """
    if not isinstance(result, BlandAltmanResult):
        raise RiskvetError(problem("bland_altman_figure(result)", allowed="a BlandAltmanResult", received=type(result).__name__))
    if len(raters) != 2:
        raise RiskvetError(problem("bland_altman_figure(raters)", allowed="two names", received=list(raters)))
    k = 100.0 if percent else 1.0
    mean_units = "%" if percent else units
    diff_units = "percentage points" if percent else units
    with matplotlib.rc_context(_RC):
        fig = Figure(figsize=(6.4, 4.2), layout="constrained")
        ax = fig.add_subplot()
        points, counts = np.unique(np.column_stack([result.means, result.differences]) * k, axis=0, return_counts=True)
        ax.scatter(points[:, 0], points[:, 1], s=14 * counts, color=OKABE_ITO["blue"], alpha=0.6, edgecolor=OKABE_ITO["black"], linewidth=0.4, zorder=3)
        ax.axhline(0.0, color="0.45", linestyle=":", linewidth=0.9, zorder=1)
        grey = "0.82"
        for interval in (result.bias_interval, result.lower_interval, result.upper_interval):
            lo, hi = (v * k for v in interval)
            if np.isfinite(lo) and np.isfinite(hi):
                ax.axhspan(lo, hi, color=grey, alpha=0.8, linewidth=0, zorder=0)
        ax.axhline(result.bias * k, color=OKABE_ITO["black"], linestyle="-", linewidth=1.4, zorder=2)
        for value in (result.lower, result.upper):
            ax.axhline(value * k, color=OKABE_ITO["vermillion"], linestyle="--", linewidth=1.4, zorder=2)
        ax.margins(x=0.08, y=0.12)
        ax.grid(True, color="0.92", linewidth=0.6, zorder=0)
        ax.set_axisbelow(True)
        for label, value in (("bias", result.bias), ("upper limit", result.upper), ("lower limit", result.lower)):
            ax.annotate(f"{label} {value * k:.3g}".replace("-", "\u2212"), xy=(1.0, value * k), xycoords=("axes fraction", "data"), xytext=(4, 0),
                        textcoords="offset points", va="center", ha="left", fontsize=8)
        unit = f" ({mean_units})" if mean_units else ""
        dunit = f" ({diff_units})" if diff_units else ""
        ax.set_xlabel(f"Mean of the two {measure}s{unit}")
        ax.set_ylabel(f"Difference, {raters[0]} − {raters[1]}{dunit}")
        if title:
            ax.set_title(title, loc="left")
        handles = [
            Line2D([], [], linestyle="none", marker="o", color=OKABE_ITO["blue"], markeredgecolor=OKABE_ITO["black"], alpha=0.6,
                   label=f"pairs (n = {result.n}; area ∝ count)"),
            Line2D([], [], color=OKABE_ITO["black"], linestyle="-", label="bias (mean difference)"),
            Line2D([], [], color=OKABE_ITO["vermillion"], linestyle="--", label=f"limits of agreement (bias ± {result.limits:g} SD)"),
            Patch(color=grey, label=f"{result.confidence:.0%} confidence intervals"),
        ]
        ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=2, frameon=False)
    return fig
