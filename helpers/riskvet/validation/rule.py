"""Comparison of the model with the rule clinicians use today, on the same patients.

The existing rule is a column of the validation data: graded categories
listed lowest risk first (green < amber < red), or a numeric score.
:func:`compare_with_rule` compares it with the model's predictions

* by the C statistic of each cut, the rule ranked by its category code (or
  score), with the paired DeLong test (the two C statistics are correlated
  because they are computed on the same patients);
* by net benefit: treating the patients the rule calls positive (categories
  from ``positive_from`` up) against treating those whose predicted risk
  reaches each of the study's thresholds, both weighed at that threshold;
* by the bootstrap distribution of both differences (paired: the model and
  the rule are evaluated on the same resampled patients).
"""

from __future__ import annotations

import dataclasses
import warnings
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..measures.decision import NetBenefitResult, net_benefit, rule_net_benefit
from ..measures.discrimination import ConcordanceComparison, compare_concordance, concordance, dichotomise
from ..errors import DataError, RiskvetError, RiskvetWarning, problem
from ..intake.outcome import cut_name
from .external import _check_boot, decision_grid, run_replicates

__all__ = ["RuleComparison", "rule_score", "rule_positive", "compare_with_rule"]


def rule_score(values: Any, *, kind: str = "categories", levels: Sequence[str] | None = None) -> np.ndarray:
    """The rule as a number per patient: the category's code 0..L-1, or the score.

    Parameters
    ----------
    values : sequence or Series
        The rule column.
    kind : {"categories", "score"}, keyword-only
    levels : sequence of str, keyword-only
        Categories lowest risk first (``kind="categories"``).

    Returns
    -------
    ndarray of float
        NaN where the rule is missing.

    Raises
    ------
    DataError
        A category not among ``levels``, or a score that is not a number.
    """
    func = "rule_score"
    series = pd.Series(values).reset_index(drop=True)
    if kind == "categories":
        if not levels or len(levels) < 2:
            raise RiskvetError(problem(f"{func}(levels=)", allowed="at least 2 categories, lowest risk first", received=levels))
        text = series.astype("string")
        code = {str(lv): float(i) for i, lv in enumerate(levels)}
        unknown = sorted(set(text.dropna()) - set(code))
        if unknown:
            raise DataError(problem(f"{func}(values=)", allowed=f"the categories {list(levels)} or missing", received=unknown[:10]))
        return text.map(code).astype("Float64").to_numpy(dtype=float, na_value=np.nan)
    if kind == "score":
        numbers = pd.to_numeric(series, errors="coerce")
        bad = numbers.isna() & series.notna()
        if bad.any():
            raise DataError(problem(f"{func}(values=)", allowed="numbers or missing", received=sorted(set(series[bad].astype(str)))[:10]))
        return numbers.to_numpy(dtype=float, na_value=np.nan)
    raise RiskvetError(problem(f"{func}(kind=)", allowed="'categories' or 'score'", received=kind))


def rule_positive(score: np.ndarray, *, levels: Sequence[str], positive_from: str) -> np.ndarray:
    """Patients the rule calls positive: category code at or above that of ``positive_from``."""
    if positive_from not in levels:
        raise RiskvetError(problem("rule_positive(positive_from=)", allowed=f"one of {list(levels)}", received=positive_from))
    return np.asarray(score) >= list(levels).index(positive_from)


@dataclass(frozen=True)
class RuleComparison:
    """The model against the existing rule on the same patients.

    Attributes
    ----------
    label : str
        Cohort label.
    rule_column : str
    kind : str
        ``"categories"`` or ``"score"``.
    positive_from : str or None
        Lowest category counted as a positive decision (net benefit needs it).
    n : int
        Patients with a recorded rule (compared).
    n_missing_rule : int
        Patients left out because the rule was not recorded.
    rule_positive_share : float
        Share the rule calls positive (NaN without ``positive_from``).
    concordance : tuple of ConcordanceComparison
        Per cut: model (a) against rule (b), paired DeLong test.
    concordance_table : DataFrame
        ``cut``, ``outcome``, ``c_model``, ``c_rule``, ``difference``,
        ``se``, ``lower``, ``upper``, ``pvalue`` (DeLong) and
        ``boot_lower``, ``boot_upper`` (bootstrap percentiles).
    net_benefit_table : DataFrame
        ``cut``, ``outcome``, ``threshold``, ``nb_model``, ``nb_rule``,
        ``nb_treat_all``, ``difference`` (model minus rule), ``boot_lower``,
        ``boot_upper``; empty without ``positive_from`` or thresholds.
    boot_c_difference : ndarray, shape (n_ok, K-1)
        Bootstrap distribution of C_model - C_rule per cut.
    boot_nb_difference : dict of int to ndarray
        By cut, the bootstrap distribution of NB_model - NB_rule, one column
        per threshold.
    model_curves, rule_curves : tuple of NetBenefitResult
        Decision curves of the model and of the rule per cut over
        :func:`riskvet.external.decision_grid` (empty without
        ``positive_from``), for the figure.
    n_boot, seed, n_failed : int
    confidence : float
    warnings : tuple of str
    """

    label: str
    rule_column: str
    kind: str
    positive_from: str | None
    levels: tuple[str, ...]
    n: int
    n_missing_rule: int
    rule_positive_share: float
    concordance: tuple[ConcordanceComparison, ...] = field(repr=False)
    concordance_table: pd.DataFrame = field(repr=False)
    net_benefit_table: pd.DataFrame = field(repr=False)
    boot_c_difference: np.ndarray = field(repr=False)
    boot_nb_difference: Mapping[int, np.ndarray] = field(repr=False)
    model_curves: tuple[NetBenefitResult, ...] = field(repr=False)
    rule_curves: tuple[NetBenefitResult, ...] = field(repr=False)
    n_boot: int
    seed: int
    n_failed: int
    confidence: float
    warnings: tuple[str, ...]

    def to_frame(self) -> pd.DataFrame:
        """The concordance comparison, one row per cut."""
        table = self.concordance_table.copy()
        table.insert(0, "cohort", self.label)
        return table

    def net_benefit_frame(self) -> pd.DataFrame:
        table = self.net_benefit_table.copy()
        table.insert(0, "cohort", self.label)
        return table

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "label": self.label,
                "rule_column": self.rule_column,
                "kind": self.kind,
                "positive_from": self.positive_from,
                "levels": list(self.levels),
                "n": self.n,
                "n_missing_rule": self.n_missing_rule,
                "rule_positive_share": self.rule_positive_share,
                "concordance": [c.to_dict() for c in self.concordance],
                "concordance_table": self.concordance_table,
                "net_benefit_table": self.net_benefit_table,
                "boot_c_difference": self.boot_c_difference,
                "boot_nb_difference": {str(k): v for k, v in self.boot_nb_difference.items()},
                "model_curves": [c.to_dict() for c in self.model_curves],
                "rule_curves": [c.to_dict() for c in self.rule_curves],
                "n_boot": self.n_boot,
                "seed": self.seed,
                "n_failed": self.n_failed,
                "confidence": self.confidence,
                "warnings": list(self.warnings),
            }
        )


class _RuleReplicate:
    """One paired bootstrap replicate: C and NB differences per cut."""

    def __init__(self, y, prob, score, positive, thresholds):
        self.y, self.prob, self.score, self.positive, self.thresholds = y, prob, score, positive, thresholds

    def __call__(self, stream):
        rng = np.random.default_rng(stream)
        n = self.y.shape[0]
        idx = rng.integers(0, n, n)
        yb, pb, sb = self.y[idx], self.prob[idx], self.score[idx]
        K = self.prob.shape[1]
        if np.bincount(yb, minlength=K).min() == 0:
            return None
        c_diff, nb_diff = [], {}
        for j in range(K - 1):
            y_cut, p_cut = dichotomise(yb, pb, cut=j)
            c_diff.append(concordance(y_cut, p_cut).estimate - concordance(y_cut, sb).estimate)
            if self.positive is not None and j in self.thresholds:
                t = list(self.thresholds[j])
                nb_m = net_benefit(y_cut, p_cut, thresholds=t).net_benefit
                nb_r = rule_net_benefit(y_cut, self.positive[idx], thresholds=t).net_benefit
                nb_diff[j] = np.asarray(nb_m) - np.asarray(nb_r)
        return np.asarray(c_diff), nb_diff


def compare_with_rule(
    y: Any,
    prob: Any,
    rule_values: Any,
    *,
    kind: str = "categories",
    levels: Sequence[str] | None = None,
    positive_from: str | None = None,
    thresholds: Mapping[int, Sequence[float]] | None = None,
    outcome_levels: Sequence[str] | None = None,
    label: str = "validation",
    rule_column: str = "rule",
    n_boot: int = 200,
    seed: int = 0,
    confidence: float = 0.95,
    n_jobs: int = 1,
    scheduler: str | None = None,
) -> RuleComparison:
    """Compare the model's predictions with an existing rule on the same patients.

    Parameters
    ----------
    y : array of int
        Outcome codes 0..K-1.
    prob : array, shape (n, K)
        The model's predicted level probabilities.
    rule_values : sequence
        The rule column (categories or score; missing allowed, those
        patients are left out).
    kind : {"categories", "score"}, keyword-only
    levels : sequence of str, keyword-only
        Rule categories, lowest risk first.
    positive_from : str, optional, keyword-only
        Lowest category counting as a positive decision; needed for net
        benefit.
    thresholds : mapping of int to sequence of float, optional, keyword-only
        The study's risk thresholds by cut; net benefit is compared there.
    outcome_levels : sequence of str, optional, keyword-only
        Names of the outcome levels (for the tables).
    label, rule_column : str, keyword-only
        Cohort label and rule column name, for the tables.
    n_boot, seed, confidence, n_jobs, scheduler : keyword-only
        Paired bootstrap replicates, seed, interval level, worker processes
        and dask scheduler (see :func:`riskvet.external.run_replicates`).

    Returns
    -------
    RuleComparison

    Notes
    -----
    The rule's score is its category code 0..L-1 (lowest risk 0), so its C
    for cut j counts the pairs of a patient with Y > j and one with Y <= j
    that the rule grades in the right order, ties 1/2.  Paired DeLong test of
    C_model - C_rule (DeLong et al. 1988) via
    :func:`riskvet.discrimination.compare_concordance`.  Net benefit at
    threshold pt: NB = TP/n - FP/n * pt/(1 - pt), for the model treating
    patients with P(Y > j) >= pt, for the rule treating its positive
    patients (Vickers & Elkin 2006).  The bootstrap resamples patients and
    evaluates both on each resample (paired); intervals are percentiles.

    References
    ----------
    DeLong ER, DeLong DM, Clarke-Pearson DL. Comparing the areas under two or
    more correlated receiver operating characteristic curves: a
    nonparametric approach. Biometrics 1988;44(3):837-845.

    Vickers AJ, Elkin EB. Decision curve analysis: a novel method for
    evaluating prediction models. Medical Decision Making 2006;26(6):565-574.

    Vickers AJ, Van Calster B, Steyerberg EW. Net benefit approaches to the
    evaluation of prediction models, molecular markers, and diagnostic tests.
    BMJ 2016;352:i6.
    """
    func = "compare_with_rule"
    yy, prob, score_all = _check_inputs(y, prob, rule_values, kind=kind, levels=levels, positive_from=positive_from,
                                        n_boot=n_boot, seed=seed, confidence=confidence, func=func)
    K = prob.shape[1]
    names = tuple(outcome_levels) if outcome_levels is not None else tuple(str(k) for k in range(K))
    keep = np.isfinite(score_all)
    n_missing = int((~keep).sum())
    yy, prob, score = yy[keep].astype(np.int64), prob[keep], score_all[keep]
    counts = np.bincount(yy, minlength=K)
    if np.any(counts == 0):
        raise DataError(problem(f"{func}(y=) among patients with the rule recorded", allowed="every outcome level present", received=f"level counts {counts.tolist()}"))
    thresholds = {int(k): tuple(v) for k, v in (thresholds or {}).items() if len(v)}
    positive = rule_positive(score, levels=levels, positive_from=positive_from) if positive_from is not None else None
    notes: list[str] = []

    comparisons, c_rows, nb_rows, model_curves, rule_curves = _compare_by_cut(
        yy, prob, score, positive, thresholds, names=names, confidence=confidence
    )

    reps = run_replicates(_RuleReplicate(yy, prob, score, positive, thresholds), n_boot=int(n_boot), seed=int(seed), n_jobs=n_jobs, scheduler=scheduler) if n_boot else []
    ok = [r for r in reps if r is not None]
    n_failed = len(reps) - len(ok)
    if n_failed:
        notes.append(f"bootstrap: {n_failed} of {n_boot} resamples lacked an outcome level and were left out")
    tail = 100 * (1 - float(confidence)) / 2
    boot_c = np.array([r[0] for r in ok], dtype=float).reshape(len(ok), K - 1)
    c_table = _concordance_table(c_rows, boot_c, tail=tail)
    boot_nb = {j: np.array([r[1][j] for r in ok], dtype=float).reshape(len(ok), len(thresholds[j])) for j in thresholds if positive is not None}
    nb_table = _net_benefit_table(nb_rows, boot_nb, thresholds, tail=tail)
    for note in notes:
        warnings.warn(note, RiskvetWarning, stacklevel=2)
    return RuleComparison(
        label=str(label),
        rule_column=str(rule_column),
        kind=kind,
        positive_from=positive_from,
        levels=tuple(levels or ()),
        n=int(yy.size),
        n_missing_rule=n_missing,
        rule_positive_share=float(positive.mean()) if positive is not None else float("nan"),
        concordance=tuple(comparisons),
        concordance_table=c_table,
        net_benefit_table=nb_table,
        boot_c_difference=boot_c,
        boot_nb_difference=boot_nb,
        model_curves=tuple(model_curves),
        rule_curves=tuple(rule_curves),
        n_boot=int(n_boot),
        seed=int(seed),
        n_failed=n_failed,
        confidence=float(confidence),
        warnings=tuple(notes),
    )


def _check_inputs(y: Any, prob: Any, rule_values: Any, *, kind: str, levels: Sequence[str] | None, positive_from: str | None,
                  n_boot: Any, seed: Any, confidence: Any, func: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Outcome codes, probabilities and the rule's score of every patient, after checking the inputs."""
    _check_boot(n_boot, seed, confidence, func)
    prob = np.asarray(prob, dtype=float)
    yy = np.asarray(y)
    if prob.ndim != 2 or yy.ndim != 1 or prob.shape[0] != yy.shape[0]:
        raise DataError(problem(f"{func}(y=, prob=)", allowed="n outcome codes and an n x K probability matrix", received=f"shapes {yy.shape} and {prob.shape}"))
    score_all = rule_score(rule_values, kind=kind, levels=levels)
    if score_all.shape[0] != yy.shape[0]:
        raise DataError(problem(f"{func}(rule_values=)", allowed=f"one value per patient ({yy.shape[0]})", received=score_all.shape[0]))
    if positive_from is not None and kind != "categories":
        raise RiskvetError(problem(f"{func}(positive_from=)", allowed="None for a rule of kind 'score'", received=positive_from))
    return yy, prob, score_all


def _compare_by_cut(yy: np.ndarray, prob: np.ndarray, score: np.ndarray, positive: np.ndarray | None,
                    thresholds: Mapping[int, tuple[float, ...]], *, names: Sequence[str], confidence: float):
    """Per cut: the paired DeLong comparison, net benefit at the study's thresholds and both decision curves.

    Returns the comparisons, the concordance rows, the net benefit rows and
    the model's and the rule's decision curves (none without ``positive``).
    """
    comparisons, c_rows, nb_rows = [], [], []
    model_curves, rule_curves = [], []
    for j in range(prob.shape[1] - 1):
        y_cut, p_cut = dichotomise(yy, prob, cut=j)
        if positive is not None:
            grid = decision_grid(thresholds.get(j, ()))
            model_curves.append(dataclasses.replace(net_benefit(y_cut, p_cut, thresholds=grid), cut=j))
            rule_curves.append(dataclasses.replace(rule_net_benefit(y_cut, positive, thresholds=grid), cut=j))
        comp = compare_concordance(y_cut, p_cut, score, confidence=confidence)
        comparisons.append(comp)
        c_rows.append(
            {
                "cut": j,
                "outcome": cut_name(names, j),
                "c_model": comp.estimate_a,
                "c_rule": comp.estimate_b,
                "difference": comp.difference,
                "se": comp.se,
                "lower": comp.lower,
                "upper": comp.upper,
                "pvalue": comp.pvalue,
            }
        )
        if positive is not None and j in thresholds:
            nb_rows += _net_benefit_rows(y_cut, p_cut, positive, list(thresholds[j]), cut=j, outcome=cut_name(names, j))
    return comparisons, c_rows, nb_rows, model_curves, rule_curves


def _net_benefit_rows(y_cut: np.ndarray, p_cut: np.ndarray, positive: np.ndarray, cut_thresholds: list[float], *, cut: int,
                      outcome: str) -> list[dict[str, Any]]:
    """Net benefit of the model, of the rule and of treating all at each of one cut's thresholds."""
    nb_m = net_benefit(y_cut, p_cut, thresholds=cut_thresholds)
    nb_r = rule_net_benefit(y_cut, positive, thresholds=cut_thresholds)
    rows = []
    for i, pt in enumerate(cut_thresholds):
        rows.append(
            {
                "cut": cut,
                "outcome": outcome,
                "threshold": float(pt),
                "nb_model": float(nb_m.net_benefit[i]),
                "nb_rule": float(nb_r.net_benefit[i]),
                "nb_treat_all": float(nb_m.treat_all[i]),
                "difference": float(nb_m.net_benefit[i] - nb_r.net_benefit[i]),
            }
        )
    return rows


def _concordance_table(c_rows: list[dict[str, Any]], boot_c: np.ndarray, *, tail: float) -> pd.DataFrame:
    """The concordance rows with the bootstrap percentile interval of each cut's difference."""
    c_table = pd.DataFrame(c_rows)
    if boot_c.shape[0] >= 2:
        lo, hi = np.percentile(boot_c, [tail, 100 - tail], axis=0)
    else:
        lo = hi = np.full(boot_c.shape[1], np.nan)
    c_table["boot_lower"], c_table["boot_upper"] = lo, hi
    return c_table


def _net_benefit_table(nb_rows: list[dict[str, Any]], boot_nb: Mapping[int, np.ndarray],
                       thresholds: Mapping[int, tuple[float, ...]], *, tail: float) -> pd.DataFrame:
    """The net benefit rows with the bootstrap percentile interval of each difference."""
    nb_table = pd.DataFrame(nb_rows, columns=["cut", "outcome", "threshold", "nb_model", "nb_rule", "nb_treat_all", "difference"])
    nb_lo, nb_hi = [], []
    for r in nb_table.itertuples():
        draws = boot_nb[r.cut][:, list(thresholds[r.cut]).index(r.threshold)]
        if draws.size >= 2:
            a, b = np.percentile(draws, [tail, 100 - tail])
        else:
            a = b = float("nan")
        nb_lo.append(a)
        nb_hi.append(b)
    nb_table["boot_lower"], nb_table["boot_upper"] = nb_lo, nb_hi
    return nb_table
