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

Bootstrap replicate i resamples the patients with stream i of
``numpy.random.SeedSequence(seed).spawn(n_boot)``, so results do not depend
on how many workers ran them.  A resample that cannot be measured (an
outcome level absent, or any error met while measuring it) is a counted
failure with its reason; when more than ``max_failed_share`` of them fail,
the bootstrap intervals are not reported (NaN, with the reason stated).
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
from .bootstrap import _PROPAGATE, ReplicateFailure, _failure_message, _failure_reason
from .external import _Unmeasured, _check_boot, decision_grid, run_replicates

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
        ``se``, ``lower``, ``upper``, ``pvalue`` (DeLong; never resting on
        the replicates) and ``boot_lower``, ``boot_upper`` (bootstrap
        percentiles), ``n_boot_used`` (replicates behind them).
    net_benefit_table : DataFrame
        ``cut``, ``outcome``, ``threshold``, ``nb_model``, ``nb_rule``,
        ``nb_treat_all``, ``difference`` (model minus rule), ``boot_lower``,
        ``boot_upper``, ``n_boot_used``; empty without ``positive_from`` or
        thresholds.
    boot_c_difference : ndarray, shape (n_ok, K-1)
        Bootstrap distribution of C_model - C_rule per cut.
    boot_nb_difference : dict of int to ndarray
        By cut, the bootstrap distribution of NB_model - NB_rule, one column
        per threshold.
    model_curves, rule_curves : tuple of NetBenefitResult
        Decision curves of the model and of the rule per cut over
        :func:`riskvet.external.decision_grid` (empty without
        ``positive_from``), for the figure.
    n_boot, seed : int
        Bootstrap replicates and seed.
    n_failed : int
        Replicates that could not be evaluated (an outcome level absent from
        the resample, or an error met while measuring it).
    confidence : float
    warnings : tuple of str
    failures : tuple of ReplicateFailure
        Every replicate that could not be evaluated, with its reason
        (``empty outcome level``, ``arithmetic error``, ``numerical error``,
        ...; the names of :class:`riskvet.validation.bootstrap.ReplicateFailure`)
        and the first line of the message.
    max_failed_share : float
        The share of failed replicates above which the bootstrap intervals
        are not reported.
    intervals_withheld : str
        Why ``boot_lower`` and ``boot_upper`` of both tables are NaN (more
        failed replicates than ``max_failed_share`` allows); empty when they
        are reported.  The replicates that were measured stay in
        ``boot_c_difference`` and ``boot_nb_difference``.
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
    failures: tuple[ReplicateFailure, ...] = ()
    max_failed_share: float = 0.1
    intervals_withheld: str = ""

    @property
    def failure_counts(self) -> dict[str, int]:
        """Failed replicates by reason."""
        return _count_reasons(self.failures)

    def failure_frame(self) -> pd.DataFrame:
        """One row per failed replicate: ``cohort``, ``replicate``, ``reason``, ``message``."""
        rows = [{"cohort": self.label, **f.to_dict()} for f in self.failures]
        return pd.DataFrame(rows, columns=["cohort", "replicate", "reason", "message"])

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
                "failures": [f.to_dict() for f in self.failures],
                "failure_counts": self.failure_counts,
                "max_failed_share": self.max_failed_share,
                "intervals_withheld": self.intervals_withheld,
            }
        )


def _count_reasons(failures: Sequence[ReplicateFailure]) -> dict[str, int]:
    counts: dict[str, int] = {}
    for f in failures:
        counts[f.reason] = counts.get(f.reason, 0) + 1
    return dict(sorted(counts.items()))


class _RuleReplicate:
    """One paired bootstrap replicate: C and NB differences per cut, or why there are none."""

    def __init__(self, y, prob, score, positive, thresholds, names):
        self.y, self.prob, self.score, self.positive, self.thresholds = y, prob, score, positive, thresholds
        self.names = names

    def __call__(self, stream):
        """The differences on resample ``stream``; any error but ``_PROPAGATE`` makes it a counted failure."""
        try:
            return self.differences(stream)
        except _PROPAGATE:
            raise
        except Exception as exc:  # an error of one resample is that replicate's failure, not the run's
            return _Unmeasured(_failure_reason(exc), _failure_message(exc, "measuring the resample"))

    def differences(self, stream):
        rng = np.random.default_rng(stream)
        n = self.y.shape[0]
        idx = rng.integers(0, n, n)
        yb, pb, sb = self.y[idx], self.prob[idx], self.score[idx]
        K = self.prob.shape[1]
        counts = np.bincount(yb, minlength=K)
        if counts.min() == 0:
            empty = [self.names[j] for j in np.flatnonzero(counts == 0)]
            tally = {str(lv): int(c) for lv, c in zip(self.names, counts.tolist())}
            return _Unmeasured("empty outcome level", f"no one in outcome level(s) {empty} of the resample; people by level {tally}")
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
    max_failed_share: float = 0.1,
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
    max_failed_share : float, keyword-only
        Largest share of the ``n_boot`` replicates that may fail (an outcome
        level absent from the resample, or any error met while measuring it)
        before the bootstrap intervals are withheld: above it ``boot_lower``
        and ``boot_upper`` are NaN and ``intervals_withheld`` says why; at
        or below it the failed replicates are left out and listed in
        ``failures``.  The DeLong comparison does not rest on the replicates
        and is always reported.  The default, 0.1, is that of
        :func:`riskvet.validation.external.validate_cohort`.

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
    evaluates both on each resample (paired); intervals are the
    (1 - confidence)/2 and (1 + confidence)/2 percentiles of the differences
    over the B_ok replicates that could be measured (Efron & Tibshirani
    1993, ch. 13), reported only when B - B_ok <= max_failed_share * B.

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

    Efron B, Tibshirani RJ. An Introduction to the Bootstrap. Chapman & Hall, 1993.
    """
    func = "compare_with_rule"
    yy, prob, score_all = _check_inputs(y, prob, rule_values, kind=kind, levels=levels, positive_from=positive_from,
                                        n_boot=n_boot, seed=seed, confidence=confidence, func=func)
    if isinstance(max_failed_share, bool) or not isinstance(max_failed_share, (int, float, np.floating)) or not 0.0 <= float(max_failed_share) <= 1.0:
        raise RiskvetError(problem(f"{func}(max_failed_share=)", allowed="a share between 0 and 1", received=max_failed_share))
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

    replicate = _RuleReplicate(yy, prob, score, positive, thresholds, names)
    reps = run_replicates(replicate, n_boot=int(n_boot), seed=int(seed), n_jobs=n_jobs, scheduler=scheduler) if n_boot else []
    failures = tuple(ReplicateFailure(i, r.reason, r.message) for i, r in enumerate(reps) if isinstance(r, _Unmeasured))
    ok = [r for r in reps if not isinstance(r, _Unmeasured)]
    withheld, failure_notes = _failure_limit(failures, n_boot=int(n_boot), max_failed_share=float(max_failed_share))
    notes += failure_notes
    tail = 100 * (1 - float(confidence)) / 2
    boot_c = np.array([r[0] for r in ok], dtype=float).reshape(len(ok), K - 1)
    c_table = _concordance_table(c_rows, boot_c, tail=tail, withheld=bool(withheld))
    boot_nb = {j: np.array([r[1][j] for r in ok], dtype=float).reshape(len(ok), len(thresholds[j])) for j in thresholds if positive is not None}
    nb_table = _net_benefit_table(nb_rows, boot_nb, thresholds, tail=tail, withheld=bool(withheld))
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
        n_failed=len(failures),
        confidence=float(confidence),
        warnings=tuple(notes),
        failures=failures,
        max_failed_share=float(max_failed_share),
        intervals_withheld=withheld,
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


def _failure_limit(failures: Sequence[ReplicateFailure], *, n_boot: int, max_failed_share: float) -> tuple[str, list[str]]:
    """Why the bootstrap intervals are withheld (empty when they are not) and the notes to issue."""
    notes: list[str] = []
    if not failures:
        return "", notes
    by_reason = ", ".join(f"{c} {r}" for r, c in _count_reasons(failures).items())
    notes.append(f"bootstrap: {len(failures)} of {n_boot} resamples could not be evaluated and were left out ({by_reason})")
    if len(failures) <= max_failed_share * n_boot:
        return "", notes
    withheld = (f"{len(failures)} of {n_boot} resamples could not be evaluated, more than the "
                f"{max_failed_share:.0%} allowed (max_failed_share); bootstrap intervals are not reported")
    notes.append(f"bootstrap: {withheld}")
    return withheld, notes


def _concordance_table(c_rows: list[dict[str, Any]], boot_c: np.ndarray, *, tail: float, withheld: bool = False) -> pd.DataFrame:
    """The concordance rows with the bootstrap percentile interval of each cut's difference (NaN when withheld)."""
    c_table = pd.DataFrame(c_rows)
    if boot_c.shape[0] >= 2 and not withheld:
        lo, hi = np.percentile(boot_c, [tail, 100 - tail], axis=0)
    else:
        lo = hi = np.full(boot_c.shape[1], np.nan)
    c_table["boot_lower"], c_table["boot_upper"] = lo, hi
    c_table["n_boot_used"] = boot_c.shape[0]
    return c_table


def _net_benefit_table(nb_rows: list[dict[str, Any]], boot_nb: Mapping[int, np.ndarray],
                       thresholds: Mapping[int, tuple[float, ...]], *, tail: float, withheld: bool = False) -> pd.DataFrame:
    """The net benefit rows with the bootstrap percentile interval of each difference (NaN when withheld)."""
    nb_table = pd.DataFrame(nb_rows, columns=["cut", "outcome", "threshold", "nb_model", "nb_rule", "nb_treat_all", "difference"])
    nb_lo, nb_hi = [], []
    for r in nb_table.itertuples():
        draws = boot_nb[r.cut][:, list(thresholds[r.cut]).index(r.threshold)]
        if draws.size >= 2 and not withheld:
            a, b = np.percentile(draws, [tail, 100 - tail])
        else:
            a = b = float("nan")
        nb_lo.append(a)
        nb_hi.append(b)
    nb_table["boot_lower"], nb_table["boot_upper"] = nb_lo, nb_hi
    nb_table["n_boot_used"] = pd.Series([boot_nb[c].shape[0] for c in nb_table["cut"]], dtype="int64")
    return nb_table
