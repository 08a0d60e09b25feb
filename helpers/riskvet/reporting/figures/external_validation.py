"""Figures of external validation, comparison with the existing rule, and updating.

Every function takes result objects from :mod:`riskvet.casemix`,
:mod:`riskvet.external`, :mod:`riskvet.rule` or :mod:`riskvet.update` and
returns a :class:`matplotlib.figure.Figure`; none computes a statistic.
Calibration plots and decision curves are drawn by :mod:`riskvet.plots`, so
every stage shares one style (Okabe–Ito colours, a line style per series).
"""

from __future__ import annotations

from typing import Sequence

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from ...measures.calibration import merge_bins
from ...validation.casemix import CaseMix
from ..._jsonable import to_jsonable
from ...errors import RiskvetError, problem
from ..labels import cut_label
from ...validation.external import CohortValidation
from .performance import FIGURE_WIDTH, LINESTYLES, PALETTE, _LABEL_SIZE, _REFERENCE, _STYLE, _check_count, _grid, plot_calibration, plot_decision_curve
from ...validation.rule import RuleComparison
from ...validation.update import UpdateResult, method_name

__all__ = [
    "plot_case_mix",
    "published_case_mix",
    "plot_cohort_calibration",
    "plot_cohort_decision_curves",
    "plot_subgroups",
    "plot_rule_comparison",
    "plot_update_calibration",
]


def _check(value, kind, func: str, name: str):
    if not isinstance(value, kind):
        raise RiskvetError(problem(f"{func}({name}=)", allowed=f"a {kind.__name__}", received=type(value).__name__))
    return value


def _p_words(p: float) -> str:
    """A p-value for a figure: "p < 0.001" or "p = " and three decimals."""
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def plot_case_mix(results: CaseMix | Sequence[CaseMix], *, min_cell_count: int | None = None) -> Figure:
    """Distribution of the linear predictor in the derivation and each validation cohort.

    Parameters
    ----------
    results : CaseMix or sequence of CaseMix
        From :func:`riskvet.casemix.case_mix`, one panel each.
    min_cell_count : int or None, keyword-only, default None
        ``output.min_cell_count``.  With a whole number each cohort's
        histogram has adjacent bins merged until every bin holds none or at
        least that many people (:func:`riskvet.calibration.merge_bins`): a
        density with the cohort's size and the bin's width states the bin's
        count.  None draws no histogram, only the means.

    Returns
    -------
    matplotlib.figure.Figure
        Per panel (two across), the two histograms as densities (so cohorts
        of different sizes compare), the two means as vertical lines, and
        the membership C in the corner.
    """
    func = "plot_case_mix"
    items = [results] if isinstance(results, CaseMix) else list(results)
    if not items or not all(isinstance(r, CaseMix) for r in items):
        raise RiskvetError(problem(f"{func}(results=)", allowed="a CaseMix or a non-empty sequence of them", received=type(results).__name__))
    if min_cell_count is not None:
        min_cell_count = _check_count(min_cell_count, func)
    with mpl.rc_context(_STYLE):
        n_rows, n_cols = _grid(len(items))
        fig = Figure(figsize=(FIGURE_WIDTH, 3.9 * n_rows), layout="constrained")
        for i, r in enumerate(items):
            ax = fig.add_subplot(n_rows, n_cols, i + 1)
            for k, (counts, name, mean) in enumerate(
                ((r.lp_histogram_derivation, r.derivation_label, r.lp_mean_derivation), (r.lp_histogram_validation, r.validation_label, r.lp_mean_validation))
            ):
                label = f"{name} (n = {r.n_derivation if k == 0 else r.n_validation})"
                if min_cell_count is not None:
                    edges, merged = merge_bins(r.lp_histogram_edges, counts, min_count=min_cell_count)
                    total = merged.sum()
                    if merged.size:
                        ax.stairs(merged / (total * np.diff(edges)) if total else merged, edges, color=PALETTE[k], linestyle=LINESTYLES[k],
                                  linewidth=1.5, label=label)
                        label = None
                ax.axvline(mean, color=PALETTE[k], linestyle=LINESTYLES[k], linewidth=0.9, label=label)
            note = f"membership C {r.membership_c:.2f}"
            if np.isfinite(r.membership_c_null):
                note += f"\n(chance alone {r.membership_c_null:.2f})"
            ax.text(0.02, 0.97, note, transform=ax.transAxes, va="top", ha="left", fontsize=_LABEL_SIZE)
            ax.set_xlabel("linear predictor of the model")
            ax.set_ylabel("density")
            ax.set_title(f"{r.validation_label} against {r.derivation_label}")
            ax.legend(loc="upper right")
    return fig


def published_case_mix(result: CaseMix, *, min_cell_count: int) -> dict:
    """A case-mix comparison for a results file: its histograms with adjacent bins merged as the figure draws them.

    Parameters
    ----------
    result : CaseMix
    min_cell_count : int, keyword-only
        ``output.min_cell_count``.

    Returns
    -------
    dict
        JSON-ready: ``result.to_dict()`` with ``lp_histogram_edges``,
        ``lp_histogram_derivation`` and ``lp_histogram_validation`` replaced
        by ``lp_histogram`` = {"derivation": {"edges", "counts"},
        "validation": {"edges", "counts"}}, every count 0 or at least
        ``min_cell_count`` (:func:`riskvet.calibration.merge_bins`).
    """
    func = "published_case_mix"
    result = _check(result, CaseMix, func, "result")
    m = _check_count(min_cell_count, func)
    out = {k: v for k, v in result.to_dict().items() if not k.startswith("lp_histogram")}
    histogram = {}
    for name, counts in (("derivation", result.lp_histogram_derivation), ("validation", result.lp_histogram_validation)):
        edges, merged = merge_bins(result.lp_histogram_edges, counts, min_count=m)
        histogram[name] = {"edges": edges, "counts": merged}
    out["lp_histogram"] = histogram
    return to_jsonable(out)


def plot_cohort_calibration(result: CohortValidation, *, min_cell_count: int | None = None) -> Figure:
    """Calibration of one validation cohort, one panel per cut (see :func:`riskvet.reporting.figures.performance.plot_calibration`).

    Parameters
    ----------
    result : CohortValidation
    min_cell_count : int or None, keyword-only, default None
        ``output.min_cell_count``; None draws no grouped proportions and no
        distribution of predictions (nothing resting on counts of people).
    """
    result = _check(result, CohortValidation, "plot_cohort_calibration", "result")
    binary = len(result.levels) == 2
    titles = [f"{result.label}: {cut_label(result.levels, c.cut, binary=binary)}" for c in result.calibration.cuts]
    return plot_calibration(result.calibration, titles=titles, min_cell_count=min_cell_count, levels=result.levels)


def plot_cohort_decision_curves(result: CohortValidation, rule: RuleComparison | None = None) -> Figure:
    """Decision curves of one validation cohort per cut, with the existing rule when given.

    Parameters
    ----------
    result : CohortValidation
    rule : RuleComparison, optional
        Its rule curves (treating the rule's positive patients) are drawn
        beside the model's.

    Returns
    -------
    matplotlib.figure.Figure
        One panel per cut (see :func:`riskvet.plots.plot_decision_curve`).
    """
    func = "plot_cohort_decision_curves"
    result = _check(result, CohortValidation, func, "result")
    curves = list(result.decision_curves)
    labels = ["model"] * len(curves)
    if rule is not None:
        _check(rule, RuleComparison, func, "rule")
        for c in rule.rule_curves:
            curves.append(c)
            labels.append(f"rule ({rule.rule_column} >= {rule.positive_from})")
    fig = plot_decision_curve(curves, labels=labels, levels=result.levels)
    binary = len(result.levels) == 2
    for ax, cut in zip(fig.axes, dict.fromkeys(c.cut for c in curves)):
        ax.set_title(result.label if cut is None else f"{result.label}: {cut_label(result.levels, cut, binary=binary)}")
    return fig


def plot_subgroups(result: CohortValidation, *, measure: str | None = None, cut: int | None = None) -> Figure:
    """Forest plot of one measure in every subgroup, with the whole cohort for reference.

    Parameters
    ----------
    result : CohortValidation
    measure : str, optional, keyword-only
        A measure of ``result.performance`` (``average_cut_auc``,
        ``calibration_intercept``, ...); default the average dichotomised C,
        or the C statistic (``auc``) for a binary outcome.
    cut : int, optional, keyword-only
        The cut, for per-cut measures (default: the last cut).

    Returns
    -------
    matplotlib.figure.Figure
        Estimate and bootstrap percentile interval per subgroup; subgroups
        flagged small are drawn hollow with dashed intervals and marked
        "small", as a reminder not to over-read them.  Subgroup sizes are not
        written (the page's table of sizes states them under disclosure
        control).
    """
    func = "plot_subgroups"
    result = _check(result, CohortValidation, func, "result")
    perf = result.performance
    if measure is None:
        measure = "auc" if len(result.levels) == 2 else "average_cut_auc"
    known = list(dict.fromkeys(perf["measure"]))
    if measure not in known:
        raise RiskvetError(problem(f"{func}(measure=)", allowed=f"one of {known}", received=measure))
    per_cut = perf.loc[perf["measure"] == measure, "cut"].notna().any()
    if per_cut and cut is None:
        cut = len(result.levels) - 2

    def pick(table: pd.DataFrame) -> pd.DataFrame:
        rows = table[table["measure"] == measure]
        return rows[rows["cut"] == cut] if per_cut else rows

    whole = pick(perf)
    subs = pick(result.subgroups) if len(result.subgroups) else result.subgroups
    label = whole["label"].iloc[0] + (f", {cut_label(result.levels, cut, binary=len(result.levels) == 2)}" if per_cut else "")
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, 1.4 + 0.36 * (len(subs) + 1)), layout="constrained")
        ax = fig.add_subplot()
        names = [f"whole cohort (n = {result.n})"]
        est = [float(whole["estimate"].iloc[0])]
        lo = [float(whole["lower"].iloc[0])]
        hi = [float(whole["upper"].iloc[0])]
        small = [False]
        for r in subs.itertuples():
            # no size here: a subgroup's size may be small, and the page's table of sizes is under disclosure control
            names.append(f"{r.column}: {r.group}" + ("  (small)" if r.small else ""))
            est.append(float(r.estimate))
            lo.append(float(r.lower))
            hi.append(float(r.upper))
            small.append(bool(r.small))
        ypos = np.arange(len(names))[::-1]
        for y, e, a, b, s in zip(ypos, est, lo, hi, small):
            if np.isfinite(a) and np.isfinite(b):
                ax.plot([a, b], [y, y], color=PALETTE[0], linewidth=1.2, linestyle="--" if s else "-")
            ax.plot([e], [y], marker="o", markersize=5, color=PALETTE[0], markerfacecolor="white" if s else PALETTE[0], linestyle="none")
        ax.axvline(est[0], color=_REFERENCE, linewidth=0.9, linestyle=":")
        ax.set_yticks(ypos, names)
        ax.set_xlabel(f"{label}\n(estimate with {result.confidence:.0%} bootstrap percentile interval)")
        ax.set_title(f"{result.label}: subgroups")
        ax.grid(axis="y", visible=False)
    return fig


def _outcome_title(outcome: str, cut: int, levels: Sequence[str] | None) -> str:
    """A cut's event in words: from ``levels`` when given, else from its table name ``Y >= level``."""
    if levels is not None and 0 <= cut < len(levels) - 1:
        return cut_label(levels, cut, binary=len(levels) == 2)
    text = str(outcome)
    return f"{text.removeprefix('Y >= ')} or higher" if text.startswith("Y >= ") else text


def _draw_c_difference(ax, draws: np.ndarray, row, title: str) -> None:
    if draws.size:
        ax.hist(draws, bins=min(30, max(5, draws.size // 5)), color=PALETTE[1], alpha=0.75, linewidth=0)
    ax.axvline(0.0, color=_REFERENCE, linewidth=1.0)
    ax.axvline(row.difference, color=PALETTE[0], linewidth=1.2, linestyle="--")
    ax.set_title(f"{title}\nDeLong test {_p_words(row.pvalue)}", fontsize=_LABEL_SIZE + 0.5)
    ax.set_xlabel("C of the model\nminus C of the rule")
    ax.set_ylabel("bootstrap replicates")


def _draw_nb_difference(ax, result: RuleComparison, levels: Sequence[str] | None) -> None:
    nb = result.net_benefit_table.reset_index(drop=True)
    rows = np.arange(len(nb))[::-1]
    # a percentile interval need not contain the estimate, so its ends are drawn as they are
    ax.hlines(rows, nb["boot_lower"], nb["boot_upper"], color=PALETTE[0], linewidth=1.3)
    ax.plot(nb["difference"], rows, linestyle="none", marker="o", color=PALETTE[0])
    ax.axvline(0.0, color=_REFERENCE, linewidth=1.0)
    names = [f"{_outcome_title(o, int(c), levels)}, threshold {t:g}" for o, c, t in zip(nb["outcome"], nb["cut"], nb["threshold"])]
    ax.set_yticks(rows, names)
    ax.grid(axis="y", visible=False)
    ax.set_xlabel(f"net benefit of the model minus the rule\n(estimate with {result.confidence:.0%} bootstrap percentile interval)")
    ax.set_title("Net benefit at the study thresholds", loc="left")


def plot_rule_comparison(result: RuleComparison, *, levels: Sequence[str] | None = None) -> Figure:
    """Bootstrap distributions of the model's advantage over the existing rule.

    Parameters
    ----------
    result : RuleComparison
        From :func:`riskvet.rule.compare_with_rule`.
    levels : sequence of str, optional, keyword-only
        The outcome's level labels, lowest first, to name the cuts.

    Returns
    -------
    matplotlib.figure.Figure
        One panel per cut (two across) with the histogram of the difference
        in C between model and rule over the paired bootstrap replicates
        (zero marked); when net benefit was compared, a full-width panel
        beneath with the difference in net benefit at each study threshold
        and its bootstrap percentile interval.
    """
    func = "plot_rule_comparison"
    result = _check(result, RuleComparison, func, "result")
    n_cuts = len(result.concordance_table)
    has_nb = len(result.net_benefit_table) > 0
    n_rows, n_cols = _grid(max(n_cuts, 1))
    heights = [3.4] * n_rows + ([0.42 * len(result.net_benefit_table) + 1.4] if has_nb else [])
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(FIGURE_WIDTH, sum(heights)), layout="constrained")
        # separate subfigures, so the long row names of the last panel do not narrow the panels above
        parts = fig.subfigures(2, 1, height_ratios=[sum(heights[:n_rows]), heights[-1]]) if has_nb else [fig]
        top = parts[0].subplots(n_rows, n_cols, squeeze=False).ravel()
        for j, row in enumerate(result.concordance_table.itertuples()):
            draws = result.boot_c_difference[:, j] if result.boot_c_difference.ndim == 2 and result.boot_c_difference.size else np.array([])
            _draw_c_difference(top[j], draws, row, _outcome_title(row.outcome, int(row.cut), levels))
        for ax in top[n_cuts:]:
            ax.remove()
        if has_nb:
            _draw_nb_difference(parts[1].subplots(), result, levels)
    return fig


def plot_update_calibration(result: UpdateResult) -> Figure:
    """Smoothed calibration on the updating data before and after the chosen update.

    Parameters
    ----------
    result : UpdateResult
        From :func:`riskvet.update.update_model`.

    Returns
    -------
    matplotlib.figure.Figure
        One panel per cut with the original model's and the chosen update's
        smoothed calibration curves, named in a key beneath the panel (no
        statistics are written in the figure).  The "after" curve is apparent
        (optimistic): the same data fitted the update.
    """
    func = "plot_update_calibration"
    result = _check(result, UpdateResult, func, "result")
    levels = result.fits["original"].model.levels
    before, after = result.calibration_before.cuts, result.calibration_after.cuts
    chosen = method_name(result.closed_test.chosen, binary=len(levels) == 2)
    with mpl.rc_context(_STYLE):
        n_rows, n_cols = _grid(len(before))
        fig = Figure(figsize=(FIGURE_WIDTH, 4.4 * n_rows + 0.4), layout="constrained")
        for j, (b, a) in enumerate(zip(before, after)):
            ax = fig.add_subplot(n_rows, n_cols, j + 1)
            ax.plot([0, 1], [0, 1], color=_REFERENCE, linestyle=":", linewidth=1.2, label="ideal")
            ax.plot(b.curve_predicted, b.curve_observed, color=PALETTE[0], linestyle=LINESTYLES[0], label="original model")
            # the update is named in the title: a long name here would squeeze the panel
            ax.plot(a.curve_predicted, a.curve_observed, color=PALETTE[2], linestyle=LINESTYLES[1], label="after the update")
            top = float(max(np.nanmax(b.curve_predicted), np.nanmax(a.curve_predicted)))
            limit = min(1.0, top * 1.05) if top < 0.95 else 1.0
            # beneath the panel, not in a corner of it, so it covers no curve
            ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.2), borderaxespad=0.0, fontsize=_LABEL_SIZE)
            ax.set_xlim(0, limit)
            ax.set_ylim(0, limit)
            ax.set_xlabel("predicted probability")
            ax.set_ylabel("observed proportion (smoothed)")
            ax.set_title(f"{result.cohort}: {cut_label(levels, j, binary=len(levels) == 2)}")
        fig.suptitle(f"Before and after {chosen}, on the data that fitted it\n(the curve after is apparent, so optimistic)", fontsize=_LABEL_SIZE + 1)
    return fig
