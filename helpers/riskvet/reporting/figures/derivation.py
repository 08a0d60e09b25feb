"""Figures of the derivation stage: the selection curve, the model's odds ratios, proportional odds.

Like every riskvet figure they take result objects and return a matplotlib
Figure; they compute no statistics.  :func:`proportional_odds_table` and
:func:`proportional_odds_sentence` give the page's table and sentence of the
proportional-odds checks that the figure :func:`plot_proportional_odds`
draws.
"""

from __future__ import annotations

from typing import Mapping, Sequence

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import FuncFormatter

from ...errors import RiskvetError, problem
from ...modelling.proportional_odds import BrantTest, ProportionalOddsLRTest
from ...modelling.selection import SelectionResult
from ..labels import cut_label
from .performance import FIGURE_WIDTH, MARKERS, PALETTE, _BAND, _REFERENCE, _STYLE

__all__ = ["plot_selection_curve", "plot_penalty_curve", "plot_odds_ratios", "plot_proportional_odds", "proportional_odds_table", "proportional_odds_sentence"]


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
        fig = Figure(figsize=(FIGURE_WIDTH, 4.0), layout="constrained")
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


def plot_penalty_curve(result: SelectionResult, *, title: str | None = None) -> Figure:
    """Cross-validated test log-likelihood by penalty (log axis, strongest penalty on the left), the chosen one marked.

    Parameters
    ----------
    result : SelectionResult
        From a penalised method (``result.penalty`` holds the curve: ``alpha``,
        ``mean_test_loglik``, ``se`` and ``n_nonzero_groups`` per penalty).
    title : str, optional
        Axes title.
    """
    choice = getattr(result, "penalty", None)
    if not isinstance(result, SelectionResult) or choice is None:
        raise RiskvetError(problem("plot_penalty_curve(result=)", allowed="a SelectionResult of ridge, lasso or elastic net", received=type(result).__name__))
    cv = choice.to_frame().sort_values("alpha", ascending=False)
    x = cv["alpha"].to_numpy(dtype=float)
    m = cv["mean_test_loglik"].to_numpy(dtype=float)
    s = cv["se"].to_numpy(dtype=float)
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, 4.0), layout="constrained")
        ax = fig.add_subplot()
        ax.fill_between(x, m - s, m + s, color="#d9d9d9", linewidth=0, label="mean ± 1 SE across folds")
        ax.plot(x, m, color=PALETTE[0], marker="o", markersize=3.5, label="mean over folds")
        ax.axvline(float(choice.alpha), color=PALETTE[2], linestyle="--", linewidth=1.2, label=f"chosen penalty {choice.alpha:.3g}")
        ax.set_xscale("log")
        ax.invert_xaxis()  # from the strongest penalty (fewest terms) to the weakest, as terms enter
        ax.set_xlabel("penalty (standardised columns; log scale, strongest on the left)")
        ax.set_ylabel("test log-likelihood per person")
        ax.legend(loc="lower right")
        ax.set_title(title or f"{result.n_folds}-fold cross-validated penalty")
    return fig


def plot_odds_ratios(table, *, title: str | None = None, column_labels: Mapping[str, str] | None = None) -> Figure:
    """Odds ratios with their Wald intervals on a log axis, one row per model column.

    Parameters
    ----------
    table : DataFrame
        A :meth:`riskvet.models.CumulativeFit.to_frame` table (logit link).
    title : str, optional
        Axes title.
    column_labels : mapping, optional, keyword-only
        Design column -> words for the row names (default: ``sex=male`` is
        written ``sex: male``).
    """
    if "odds_ratio" not in getattr(table, "columns", ()):
        raise RiskvetError(problem("plot_odds_ratios(table=)", allowed="a logit fit's parameter table with odds_ratio columns", received=type(table).__name__))
    rows = table[table["kind"] == "coefficient"].iloc[::-1]
    # a per-cut coefficient's cut is named "y<=level": its event is a level above that one
    labels = [f"{_column_words(str(t), column_labels)}, above {str(c).removeprefix('y<=')}" if c else _column_words(str(t), column_labels)
              for t, c in zip(rows["term"], rows["cut"])]
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, 0.36 * len(rows) + 1.4), layout="constrained")
        ax = fig.add_subplot()
        yy = np.arange(len(rows))
        ax.hlines(yy, rows["odds_ratio_lower"], rows["odds_ratio_upper"], color=PALETTE[0], linewidth=1.4)
        ax.plot(rows["odds_ratio"], yy, linestyle="none", marker="s", color=PALETTE[0], markersize=4)
        ax.axvline(1.0, color=_REFERENCE, linewidth=1.0)
        ax.set_xscale("log")
        # plain numbers on the log axis, never powers of ten
        plain = FuncFormatter(lambda v, _: f"{v:g}")
        ax.xaxis.set_major_formatter(plain)
        ax.xaxis.set_minor_formatter(plain)
        ax.grid(axis="y", visible=False)
        ax.set_yticks(yy, labels)
        ax.set_xlabel("odds ratio of a higher level per unit (log scale)")
        ax.set_title(title or "Final model: odds ratios with 95% Wald intervals")
    return fig


def _column_words(column: str, column_labels: Mapping[str, str] | None) -> str:
    """A design column in words: the caller's label, else ``sex=male`` -> ``sex: male``, ``a:b`` -> ``a by b``."""
    if column_labels and column in column_labels:
        return str(column_labels[column])
    words = " by ".join(part.replace("=", ": ") for part in column.split(":"))
    head, sep, tail = words.rpartition("_nonlin")
    return f"{head} (spline, nonlinear part {tail})" if sep and tail.isdigit() else words


def _cut_words(brant: BrantTest, levels: Sequence[str] | None) -> list[str]:
    """The event of each cut, in the user's level labels when given."""
    cuts = list(brant.coef_by_cut.columns)
    if levels is None or len(levels) != brant.n_levels:
        return [f"above {str(c).removeprefix('y>')}" for c in cuts]
    return [cut_label(levels, j, binary=False) for j in range(len(cuts))]


def _check_po(brant, lr, func: str) -> None:
    if not isinstance(brant, BrantTest):
        raise RiskvetError(problem(f"{func}(brant=)", allowed="a BrantTest (riskvet.modelling.proportional_odds.brant_test)", received=type(brant).__name__))
    if lr is not None and not isinstance(lr, ProportionalOddsLRTest):
        raise RiskvetError(problem(f"{func}(lr=)", allowed="None or a ProportionalOddsLRTest", received=type(lr).__name__))


def _po_legend(fig: Figure, confidence: float, with_lr: bool) -> None:
    conf = f"{confidence:.0%}"
    handles = [Line2D([], [], linestyle="none", marker=MARKERS[0], markerfacecolor="white", markeredgecolor=PALETTE[2],
                      markeredgewidth=1.3, label="separate binary fit at the cut")]
    if with_lr:
        handles = [
            Line2D([], [], color=PALETTE[1], marker=MARKERS[1], markersize=5, label=f"coefficient at the cut, {conf} Wald interval"),
            *handles,
            Patch(facecolor=_BAND, edgecolor=PALETTE[0], label=f"common coefficient, {conf} Wald interval"),
        ]
    fig.legend(handles=handles, loc="outside lower center", ncols=1, fontsize=10)


def plot_proportional_odds(
    brant: BrantTest,
    lr: ProportionalOddsLRTest | None = None,
    *,
    levels: Sequence[str] | None = None,
    column_labels: Mapping[str, str] | None = None,
    confidence: float = 0.95,
) -> Figure:
    """Per-cut coefficients against the common proportional-odds coefficient, one panel per model column.

    Parameters
    ----------
    brant : BrantTest
        From :func:`riskvet.modelling.proportional_odds.brant_test`: the
        slopes of the separate binary fits of each cut.
    lr : ProportionalOddsLRTest, optional
        From :func:`riskvet.modelling.proportional_odds.proportional_odds_lr_test`:
        its model with one coefficient per cut gives each cut's coefficient
        with a Wald interval, and its proportional model the common
        coefficient with a Wald interval.
    levels : sequence of str, optional, keyword-only
        The outcome's level labels, lowest first, to name each cut's event.
    column_labels : mapping, optional, keyword-only
        Design column -> words for the panel titles.
    confidence : float, default 0.95, keyword-only
        Level of the Wald intervals.

    Returns
    -------
    matplotlib.figure.Figure
        One panel per column of the model, each on its own scale (log odds
        of a higher level per unit of the column): a row per cut with the
        coefficient of the model with one coefficient per cut and its
        interval (filled square) and the separate binary fit (hollow
        circle), and the common coefficient as a vertical line with its
        interval shaded.  Under proportional odds the rows line up on the
        common coefficient.
    """
    func = "plot_proportional_odds"
    _check_po(brant, lr, func)
    if isinstance(confidence, bool) or not isinstance(confidence, (int, float)) or not 0 < confidence < 1:
        raise RiskvetError(problem(f"{func}(confidence=)", allowed="a number strictly between 0 and 1", received=confidence))
    separate = brant.coef_by_cut
    columns, cuts = list(separate.index), _cut_words(brant, levels)
    per_cut = common = None
    if lr is not None:
        frame = lr.nonproportional_fit.to_frame(confidence)
        per_cut = frame[frame["kind"] == "coefficient"]
        frame = lr.proportional_fit.to_frame(confidence)
        common = frame[frame["kind"] == "coefficient"].set_index("term")
    rows = np.arange(len(cuts))[::-1]
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, len(columns) * (0.42 * len(cuts) + 0.75) + 1.3), layout="constrained")
        axes = fig.subplots(len(columns), 1, squeeze=False)[:, 0]
        for ax, column in zip(axes, columns):
            if common is not None and column in common.index:
                c = common.loc[column]
                ax.axvspan(float(c["lower"]), float(c["upper"]), color=_BAND, alpha=0.6, linewidth=0)
                ax.axvline(float(c["estimate"]), color=PALETTE[0], linewidth=1.3)
            if per_cut is not None:
                mine = per_cut[per_cut["term"] == column]
                ax.hlines(rows + 0.12, mine["lower"], mine["upper"], color=PALETTE[1], linewidth=1.5)
                ax.plot(mine["estimate"], rows + 0.12, linestyle="none", marker=MARKERS[1], markersize=5, color=PALETTE[1])
            ax.plot(separate.loc[column].to_numpy(dtype=float), rows - (0.12 if per_cut is not None else 0.0), linestyle="none",
                    marker=MARKERS[0], markersize=6, markerfacecolor="white", markeredgecolor=PALETTE[2], markeredgewidth=1.3)
            ax.axvline(0.0, color=_REFERENCE, linestyle=":", linewidth=1.0)
            ax.set_yticks(rows, cuts)
            ax.set_ylim(-0.6, len(cuts) - 0.4)
            ax.grid(axis="y", visible=False)
            ax.set_title(_column_words(column, column_labels), loc="left", fontsize=11)
        axes[-1].set_xlabel("coefficient: log odds of a higher level per unit")
        _po_legend(fig, confidence, lr is not None)
    return fig


def proportional_odds_table(brant: BrantTest, lr: ProportionalOddsLRTest | None = None, *, levels: Sequence[str] | None = None,
                            column_labels: Mapping[str, str] | None = None) -> pd.DataFrame:
    """The proportional-odds checks per term, as a table of words (the overall tests are a sentence).

    Parameters
    ----------
    brant : BrantTest
    lr : ProportionalOddsLRTest, optional
        Its per-cut coefficients are added, one column per cut.
    levels, column_labels
        As for :func:`plot_proportional_odds`.

    Returns
    -------
    pandas.DataFrame
        One row per term of the model: ``term``, ``model columns`` (in
        words), ``chi-square (Brant)``, ``degrees of freedom``,
        ``p (terms differ between cuts)``, and with ``lr`` one column per
        cut, ``coefficient, <event of the cut>``, and ``common
        coefficient`` (single-column terms only; a dash for multi-column
        terms, whose columns the figure shows one by one).
    """
    _check_po(brant, lr, "proportional_odds_table")
    terms = brant.terms.reset_index(drop=True)
    out = pd.DataFrame({
        "term": [str(t) for t in terms["term"]],
        "model columns": [", ".join(_column_words(c.strip(), column_labels) for c in str(cols).split(",")) for cols in terms["columns"]],
        "chi-square (Brant)": terms["statistic"].astype(float),
        "degrees of freedom": terms["df"].astype(int),
        "p (terms differ between cuts)": terms["p"].astype(float),
    })
    if lr is not None:
        single = [str(cols) if "," not in str(cols) else None for cols in terms["columns"]]
        per_cut = lr.nonproportional_fit.coef
        for j, name in enumerate(_cut_words(brant, levels)):
            out[f"coefficient, {name}"] = [float(per_cut.loc[c].iloc[j]) if c in per_cut.index else float("nan") for c in single]
        common = lr.proportional_fit.coef
        out["common coefficient"] = [float(common.loc[c]) if c in common.index else float("nan") for c in single]
    return out


def _p_words(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def proportional_odds_sentence(brant: BrantTest, lr: ProportionalOddsLRTest | None = None) -> str:
    """The overall tests of proportional odds in one or two plain sentences.

    Parameters
    ----------
    brant : BrantTest
    lr : ProportionalOddsLRTest, optional

    Returns
    -------
    str
    """
    _check_po(brant, lr, "proportional_odds_sentence")
    invalid = [test.reason for test in (brant, lr) if test is not None and not getattr(test, "valid", True)]
    if invalid:
        return "The tests of proportional odds are not valid here (" + "; ".join(invalid) + "), so no statistic is given."
    text = (f"Taking every column of the model together, Brant's test of one common coefficient for all cuts gives "
            f"chi-square {brant.statistic:.2f} on {brant.df} degrees of freedom ({_p_words(brant.p)}).")
    if lr is not None:
        text += (f" The likelihood-ratio test of the proportional-odds model against the model with one coefficient per cut "
                 f"gives chi-square {lr.statistic:.2f} on {lr.df} degrees of freedom ({_p_words(lr.p)})")
        if lr.n_crossing:
            # no count here: it could be a small number of people
            text += "; the larger model's cumulative probabilities cross for some people in the data, so this test should be read with care"
        text += "."
    text += " A small p-value says the coefficients differ between cuts; the figure shows by how much, for each column."
    return text
