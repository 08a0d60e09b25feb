"""Figures of external validation, comparison with the existing rule, and updating.

Every function takes result objects from :mod:`riskvet.casemix`,
:mod:`riskvet.external`, :mod:`riskvet.rule` or :mod:`riskvet.update` and
returns a :class:`matplotlib.figure.Figure`; none computes a statistic.
Calibration plots and decision curves are drawn by :mod:`riskvet.plots`, so
every stage shares one style (Okabe–Ito colours, a line style per series).
"""

from __future__ import annotations

import dataclasses
from typing import Sequence

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from ...measures.calibration import OrdinalCalibration
from ...validation.casemix import CaseMix
from ...errors import RiskvetError, problem
from ...intake.outcome import cut_name
from ...validation.external import CohortValidation
from .performance import LINESTYLES, PALETTE, _REFERENCE, _STYLE, plot_calibration, plot_decision_curve
from ...validation.rule import RuleComparison
from ...validation.update import UpdateResult, method_name

__all__ = [
    "plot_case_mix",
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


def plot_case_mix(results: CaseMix | Sequence[CaseMix]) -> Figure:
    """Distribution of the linear predictor in the derivation and each validation cohort.

    Parameters
    ----------
    results : CaseMix or sequence of CaseMix
        From :func:`riskvet.casemix.case_mix`, one panel each.

    Returns
    -------
    matplotlib.figure.Figure
        Per panel, the two histograms as densities (so cohorts of different
        sizes compare), the two means as vertical lines, and the membership
        C in the corner.
    """
    func = "plot_case_mix"
    items = [results] if isinstance(results, CaseMix) else list(results)
    if not items or not all(isinstance(r, CaseMix) for r in items):
        raise RiskvetError(problem(f"{func}(results=)", allowed="a CaseMix or a non-empty sequence of them", received=type(results).__name__))
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(4.6 * len(items), 3.4), layout="constrained")
        for i, r in enumerate(items):
            ax = fig.add_subplot(1, len(items), i + 1)
            edges = r.lp_histogram_edges
            width = np.diff(edges)
            for k, (counts, name, mean) in enumerate(
                ((r.lp_histogram_derivation, r.derivation_label, r.lp_mean_derivation), (r.lp_histogram_validation, r.validation_label, r.lp_mean_validation))
            ):
                total = counts.sum()
                density = counts / (total * width) if total else counts
                ax.stairs(density, edges, color=PALETTE[k], linestyle=LINESTYLES[k], linewidth=1.5, label=f"{name} (n = {r.n_derivation if k == 0 else r.n_validation})")
                ax.axvline(mean, color=PALETTE[k], linestyle=LINESTYLES[k], linewidth=0.9)
            note = f"membership C {r.membership_c:.2f}"
            if np.isfinite(r.membership_c_null):
                note += f"\n(chance alone {r.membership_c_null:.2f})"
            ax.text(0.02, 0.97, note, transform=ax.transAxes, va="top", ha="left", fontsize=7.5)
            ax.set_xlabel("linear predictor of the model")
            ax.set_ylabel("density")
            ax.set_title(f"{r.validation_label} against {r.derivation_label}")
            ax.legend(loc="upper right")
    return fig


def plot_cohort_calibration(result: CohortValidation) -> Figure:
    """Calibration plots of one validation cohort, one panel per cut (see :func:`riskvet.plots.plot_calibration`)."""
    result = _check(result, CohortValidation, "plot_cohort_calibration", "result")
    titles = [f"{result.label}: {cut_name(result.levels, c.cut)}" for c in result.calibration.cuts]
    return plot_calibration(_tidy_limits(result.calibration), titles=titles)


def _tidy_limits(calibration: OrdinalCalibration) -> OrdinalCalibration:
    """Group limits nudged to enclose their proportion.

    A Wilson limit of a group with no events can come out as 3e-18 rather
    than 0 in floating point, which matplotlib refuses as a negative error
    bar; the nudge is at most a few ulps and changes nothing visible.
    """
    cuts = []
    for c in calibration.cuts:
        lower = np.minimum(c.group_observed_lower, c.group_observed)
        upper = np.maximum(c.group_observed_upper, c.group_observed)
        cuts.append(dataclasses.replace(c, group_observed_lower=lower, group_observed_upper=upper))
    return dataclasses.replace(calibration, cuts=tuple(cuts))


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
    fig = plot_decision_curve(curves, labels=labels)
    for ax, cut in zip(fig.axes, sorted({c.cut for c in curves})):
        ax.set_title(f"{result.label}: {cut_name(result.levels, cut)}")
        ax.set_xlabel(f"threshold probability for {cut_name(result.levels, cut)}")
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
        Estimate and bootstrap interval per subgroup; subgroups flagged small
        are drawn hollow and marked "small", as a reminder not to over-read
        them.
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
    label = whole["label"].iloc[0] + (f", {cut_name(result.levels, cut)}" if per_cut else "")
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(6.0, 1.2 + 0.32 * (len(subs) + 1)), layout="constrained")
        ax = fig.add_subplot()
        names = [f"whole cohort (n = {result.n})"]
        est = [float(whole["estimate"].iloc[0])]
        lo = [float(whole["lower"].iloc[0])]
        hi = [float(whole["upper"].iloc[0])]
        small = [False]
        for r in subs.itertuples():
            names.append(f"{r.column}: {r.group} (n = {r.n})" + ("  [small]" if r.small else ""))
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
        ax.set_xlabel(f"{label} ({result.confidence:.0%} bootstrap interval)")
        ax.set_title(f"{result.label}: subgroups")
        ax.grid(axis="y", visible=False)
    return fig


def plot_rule_comparison(result: RuleComparison) -> Figure:
    """Bootstrap distributions of the model's advantage over the existing rule.

    Parameters
    ----------
    result : RuleComparison
        From :func:`riskvet.rule.compare_with_rule`.

    Returns
    -------
    matplotlib.figure.Figure
        One panel per cut with the histogram of C_model - C_rule over the
        paired bootstrap replicates (zero marked); when net benefit was
        compared, a last panel with NB_model - NB_rule at each study
        threshold and its bootstrap interval.
    """
    func = "plot_rule_comparison"
    result = _check(result, RuleComparison, func, "result")
    n_cuts = result.boot_c_difference.shape[1] if result.boot_c_difference.ndim == 2 else 0
    n_cuts = max(n_cuts, len(result.concordance_table))
    has_nb = len(result.net_benefit_table) > 0
    panels = n_cuts + (1 if has_nb else 0)
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(3.6 * panels, 3.2), layout="constrained")
        for j, row in enumerate(result.concordance_table.itertuples()):
            ax = fig.add_subplot(1, panels, j + 1)
            draws = result.boot_c_difference[:, j] if result.boot_c_difference.size else np.array([])
            if draws.size:
                ax.hist(draws, bins=min(30, max(5, draws.size // 5)), color=PALETTE[1], alpha=0.75, linewidth=0)
            ax.axvline(0.0, color=_REFERENCE, linewidth=1.0)
            ax.axvline(row.difference, color=PALETTE[0], linewidth=1.2, linestyle="--")
            ax.set_title(f"{row.outcome}")
            ax.set_xlabel("C model - C rule")
            ax.set_ylabel("bootstrap replicates")
            ax.text(0.02, 0.97, f"DeLong p = {row.pvalue:.2g}", transform=ax.transAxes, va="top", ha="left", fontsize=7.5)
        if has_nb:
            ax = fig.add_subplot(1, panels, panels)
            nb = result.net_benefit_table.reset_index(drop=True)
            x = np.arange(len(nb))
            # a percentile interval need not contain the estimate, so its ends are drawn as they are
            ax.vlines(x, nb["boot_lower"], nb["boot_upper"], color=PALETTE[0], linewidth=1.2)
            ax.plot(x, nb["difference"], linestyle="none", marker="o", color=PALETTE[0])
            ax.axhline(0.0, color=_REFERENCE, linewidth=1.0)
            ax.set_xticks(x, [f"{o.removeprefix('Y >= ')}\n{t:g}" for o, t in zip(nb["outcome"], nb["threshold"])], fontsize=7)
            ax.set_ylabel("NB model - NB rule")
            ax.set_title("net benefit at the study thresholds")
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
        smoothed calibration curves.  The "after" curve is apparent
        (optimistic): the same data fitted the update.
    """
    func = "plot_update_calibration"
    result = _check(result, UpdateResult, func, "result")
    levels = result.fits["original"].model.levels
    before, after = result.calibration_before.cuts, result.calibration_after.cuts
    chosen = method_name(result.closed_test.chosen, binary=len(levels) == 2)
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(4.0 * len(before), 3.8), layout="constrained")
        for j, (b, a) in enumerate(zip(before, after)):
            ax = fig.add_subplot(1, len(before), j + 1)
            ax.plot([0, 1], [0, 1], color=_REFERENCE, linestyle=":", linewidth=1.0, label="ideal")
            ax.plot(b.curve_predicted, b.curve_observed, color=PALETTE[0], linestyle=LINESTYLES[0], label=f"original (calibration-in-the-large {b.calibration_in_the_large:+.2f})")
            ax.plot(a.curve_predicted, a.curve_observed, color=PALETTE[2], linestyle=LINESTYLES[1], label=f"{chosen} ({a.calibration_in_the_large:+.2f})")
            top = float(max(np.nanmax(b.curve_predicted), np.nanmax(a.curve_predicted)))
            limit = min(1.0, top * 1.05) if top < 0.95 else 1.0
            ax.set_xlim(0, limit)
            ax.set_ylim(0, limit)
            ax.set_xlabel("predicted probability")
            ax.set_ylabel("observed proportion (smoothed)")
            ax.set_title(f"{result.cohort}: {cut_name(levels, j)}")
            ax.legend(loc="upper left", fontsize=7)
        fig.suptitle(f"Calibration before and after {chosen}, on the data that fitted it (apparent: optimistic)", fontsize=9)
    return fig
