"""Figures of the derivation stage: the selection curve and the model's odds ratios.

Like every riskvet figure they take result objects and return a matplotlib
Figure; they compute no statistics.
"""

from __future__ import annotations

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure

from ...errors import RiskvetError, problem
from .performance import PALETTE, _REFERENCE, _STYLE
from ...modelling.selection import SelectionResult

__all__ = ["plot_selection_curve", "plot_odds_ratios"]


def plot_selection_curve(result: SelectionResult, *, title: str | None = None) -> Figure:
    """Cross-validated test log-likelihood by model size, with the chosen size marked.

    Parameters
    ----------
    result : SelectionResult
        From forward selection (``result.cv`` holds the curve).
    title : str, optional
        Axes title.
    """
    if not isinstance(result, SelectionResult) or result.cv is None:
        raise RiskvetError(problem("plot_selection_curve(result=)", allowed="a forward SelectionResult with a CV curve", received=type(result).__name__))
    cv = result.cv
    size_col = "size"
    mean_col = next(c for c in cv.columns if c.startswith("mean"))
    se_col = next((c for c in cv.columns if c.startswith("se")), None)
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(5.2, 3.4), layout="constrained")
        ax = fig.add_subplot()
        x = cv[size_col].to_numpy(dtype=float)
        m = cv[mean_col].to_numpy(dtype=float)
        if se_col is not None:
            s = cv[se_col].to_numpy(dtype=float)
            ax.fill_between(x, m - s, m + s, color="#d9d9d9", linewidth=0, label="mean ± 1 SE across folds")
        ax.plot(x, m, color=PALETTE[0], marker="o", markersize=3.5, label="mean over folds")
        if result.size is not None:
            ax.axvline(result.size, color=PALETTE[2], linestyle="--", linewidth=1.2, label=f"chosen size {result.size}")
        ax.set_xlabel("terms entered beyond the forced ones")
        ax.set_ylabel("test log-likelihood per person")
        ax.legend(loc="lower right")
        ax.set_title(title or f"{result.n_folds}-fold cross-validated forward path")
    return fig


def plot_odds_ratios(table, *, title: str | None = None) -> Figure:
    """Odds ratios with their Wald intervals on a log axis, one row per model column.

    Parameters
    ----------
    table : DataFrame
        A :meth:`riskvet.models.CumulativeFit.to_frame` table (logit link).
    title : str, optional
        Axes title.
    """
    if "odds_ratio" not in getattr(table, "columns", ()):
        raise RiskvetError(problem("plot_odds_ratios(table=)", allowed="a logit fit's parameter table with odds_ratio columns", received=type(table).__name__))
    rows = table[table["kind"] == "coefficient"].iloc[::-1]
    labels = [f"{t} [{c}]" if c else str(t) for t, c in zip(rows["term"], rows["cut"])]
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(5.6, 0.32 * len(rows) + 1.2), layout="constrained")
        ax = fig.add_subplot()
        yy = np.arange(len(rows))
        ax.hlines(yy, rows["odds_ratio_lower"], rows["odds_ratio_upper"], color=PALETTE[0], linewidth=1.4)
        ax.plot(rows["odds_ratio"], yy, linestyle="none", marker="s", color=PALETTE[0], markersize=4)
        ax.axvline(1.0, color=_REFERENCE, linewidth=1.0)
        ax.set_xscale("log")
        ax.set_yticks(yy, labels)
        ax.set_xlabel("odds ratio of a higher level per unit of the column (log scale)")
        ax.set_title(title or "Final model: odds ratios with 95% intervals")
    return fig
