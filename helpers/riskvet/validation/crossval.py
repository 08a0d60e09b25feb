"""k-fold and repeated k-fold cross-validation of the whole derivation procedure.

A second opinion beside the bootstrap (:mod:`riskvet.bootstrap`): the data
are split into k folds stratified by outcome level; for each fold the study's
whole derivation procedure (:func:`riskvet.derive.derive`) runs on the other
k - 1 folds and the resulting model predicts the held-out fold.  The split is
repeated ``n_repeats`` times with fresh random folds.  k may not exceed the
rows of the smallest outcome level, so that no fold lacks a level; a fold
that meets any error is counted as failed with its reason.

Two summaries are reported for every measure, because they answer slightly
different questions:

* averaged: the measure on each held-out fold, averaged over all k x
  n_repeats folds (its SD across folds shows how much a single small test set
  varies);
* pooled: within each repeat the held-out predictions of all folds are
  pooled into one prediction per patient and the measure is computed once on
  all n patients, then averaged over repeats.  Pooling uses n patients per
  estimate, which steadies C statistics and calibration measures, but mixes
  predictions from k different models.

Reproducibility: repeat r takes its folds and the selection seeds of its
folds from ``numpy.random.SeedSequence(seed).spawn(n_repeats)[r]``; results
are combined in fold order in the calling process, so they do not depend on
``n_jobs`` or on a dask.distributed cluster.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from collections import Counter
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from .bootstrap import (
    _SEED_CEILING,
    ReplicateFailure,
    _as_clusters,
    _as_weighted_data,
    _check_count,
    _check_n_jobs,
    _check_seed,
    _check_study,
    _derive_on_all_data,
    _execute,
    _failure_message,
    _failure_reason,
    _fit_and_predict,
    _imputed_original,
    _imputed_split,
    _mean,
    _measure_specs,
    _measures,
    _people,
    _PROPAGATE,
    _ReplicateFailed,
    _spread,
)
from ..errors import DesignError, RiskvetError, problem
from ..measures.summary import average_summaries
from ..modelling.folds import cluster_folds

__all__ = ["CrossValidationEstimate", "CrossValidation", "cross_validate", "stratified_folds"]


@dataclass(frozen=True)
class CrossValidationEstimate:
    """Cross-validated estimate of one performance measure.

    Attributes
    ----------
    measure, label, kind : str
        As in :class:`riskvet.bootstrap.MeasureEstimate`.
    apparent : float
        The measure of the model derived on all data, on the same data.
    averaged : float
        Mean over held-out folds of the measure on each fold.
    averaged_sd : float
        SD of the per-fold values.
    pooled : float
        Mean over repeats of the measure on the pooled held-out predictions.
    pooled_sd : float
        SD over repeats of the pooled value (NaN for one repeat).
    n_folds_used : int
        Folds with a value (folds whose model failed, or whose held-out rows
        cannot define the measure, have none).
    """

    measure: str
    label: str
    kind: str
    apparent: float
    averaged: float
    averaged_sd: float
    pooled: float
    pooled_sd: float
    n_folds_used: int

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


@dataclass(frozen=True)
class CrossValidation:
    """Result of (repeated) k-fold cross-validation of the derivation procedure.

    Attributes
    ----------
    estimates : tuple of CrossValidationEstimate
        One per measure, in report order.
    n_folds, n_repeats, seed : int
        Settings.
    failures : tuple of ReplicateFailure
        Folds that produced no model or could not be measured, with their
        reason; ``replicate`` is the fold number ``r * n_folds + f``
        (repeat r, fold f).
    n, n_levels : int
        People (rows without frequency weights) and outcome levels.
    levels : tuple of str
        Outcome levels coded 0 .. K-1.
    fold_warnings : dict
        Statistical warnings met inside the folds' derivations and measures,
        by class name (counted, not re-issued).
    apparent_warnings : tuple of str
        Statistical warnings of the derivation on all data (also issued).
    fold_values : DataFrame
        Per-fold measures: ``repeat``, ``fold``, ``measure``, ``value``.
    n_rows : int or None
        With frequency weights, the rows dealt to folds (``n`` is then the
        people, the sum of the weights); None without weights.
    n_clusters : int or None
        With clusters, the clusters dealt whole to folds; None otherwise.
    """

    estimates: tuple[CrossValidationEstimate, ...]
    n_folds: int
    n_repeats: int
    seed: int
    failures: tuple[ReplicateFailure, ...]
    n: int
    n_levels: int
    levels: tuple[str, ...]
    fold_warnings: dict[str, int]
    apparent_warnings: tuple[str, ...]
    fold_values: pd.DataFrame = field(repr=False)
    n_rows: int | None = None
    n_clusters: int | None = None

    def estimate(self, measure: str) -> CrossValidationEstimate:
        for e in self.estimates:
            if e.measure == measure:
                return e
        raise RiskvetError(problem("CrossValidation.estimate(measure)", allowed=f"one of {[e.measure for e in self.estimates]}", received=measure))

    def to_frame(self) -> pd.DataFrame:
        """One row per measure."""
        return pd.DataFrame([dataclasses.asdict(e) for e in self.estimates])  # NaN kept (to_dict makes it None)

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "estimates": [e.to_dict() for e in self.estimates],
                "n_folds": self.n_folds,
                "n_repeats": self.n_repeats,
                "seed": self.seed,
                "failures": [f.to_dict() for f in self.failures],
                "n": self.n,
                "n_levels": self.n_levels,
                "levels": self.levels,
                "fold_warnings": self.fold_warnings,
                "apparent_warnings": self.apparent_warnings,
                **({} if self.n_rows is None else {"counted": "people", "n_rows": self.n_rows}),
                **({} if self.n_clusters is None else {"n_clusters": self.n_clusters}),
            }
        )


def stratified_folds(y: np.ndarray, *, n_folds: int, rng: np.random.Generator) -> np.ndarray:
    """Fold number 0..n_folds-1 of every row, stratified by outcome level.

    The rows of each level, in random order, are dealt to the folds in turn,
    continuing from one level to the next, so fold sizes differ by at most one
    and every fold holds about the same share of each level.
    """
    y = np.asarray(y)
    fold = np.empty(y.shape[0], dtype=np.int64)
    position = 0
    for level in np.unique(y):
        rows = rng.permutation(np.flatnonzero(y == level))
        fold[rows] = (position + np.arange(rows.size)) % n_folds
        position += rows.size
    return fold


@dataclass(frozen=True)
class _CVPayload:
    study: Any
    frame: pd.DataFrame
    y: np.ndarray
    K: int
    link: str
    folds: np.ndarray  # n_repeats x n
    weights: np.ndarray | None = None
    clusters: np.ndarray | None = None  # cluster code of every row, or None
    m: int = 0  # multiple imputation: completed data sets of each fold's training rows and of its held-out rows


def _fold(payload: _CVPayload, item: tuple[int, int, int]) -> dict[str, Any]:
    """Derive on one fold's training rows and measure on its held-out rows.

    Every error met (other than those in ``_PROPAGATE`` and the interrupts)
    makes the fold a counted failure with its reason.
    """
    r, f, sel_seed = item
    record: dict[str, Any] = {"repeat": r, "fold": f}
    try:
        record.update(_fold_values(payload, r, f, sel_seed))
    except _ReplicateFailed as exc:
        record.update(status="failed", reason=exc.reason, message=exc.message)
    except _PROPAGATE:
        raise
    except Exception as exc:
        record.update(status="failed", reason=_failure_reason(exc), message=_failure_message(exc, "measuring the fold's model"))
    return record


def _imputed_fold_values(payload: _CVPayload, train: np.ndarray, test: np.ndarray, sel_seed: int) -> dict[str, Any]:
    """One fold under multiple imputation (:func:`riskvet.validation.bootstrap._imputed_split`): the measures in each of
    the held-out rows' completed data sets averaged; the pooled held-out predictions are each person's averaged over them."""
    study = payload.study
    # a person's visits stay in one fold of the procedure's own cross-validation (data.cluster_kind: person)
    persons = payload.clusters[train] if payload.clusters is not None and study.data.cluster_kind == "person" else None
    _, caught, predicted = _imputed_split(study, payload.frame, payload.y, train, test, m=payload.m, K=payload.K,
                                          sel_seed=sel_seed, persons=persons)
    y_h = payload.y[test]
    values = []
    for prob, lp in predicted:
        v, measure_warnings = _measures(y_h, prob, lp if lp.ndim == 1 else None, K=payload.K, link=payload.link)
        values.append(v)
        caught.update({f"measure:{k}": n for k, n in measure_warnings.items()})
    return dict(status="ok", rows=test, prob=np.mean([p for p, _ in predicted], axis=0), lp=np.mean([q for _, q in predicted], axis=0),
                values=average_summaries(values), warnings=dict(caught))


def _fold_values(payload: _CVPayload, r: int, f: int, sel_seed: int) -> dict[str, Any]:
    held = payload.folds[r] == f
    train, test = np.flatnonzero(~held), np.flatnonzero(held)
    if payload.m:
        return _imputed_fold_values(payload, train, test, sel_seed)
    w = payload.weights
    _, prob, lp, caught = _fit_and_predict(
        payload.study,
        payload.frame.iloc[train].reset_index(drop=True),
        payload.y[train],
        payload.frame.iloc[test].reset_index(drop=True),
        sel_seed,
        payload.K,
        weights=None if w is None else w[train],
        clusters=None if payload.clusters is None else payload.clusters[train],
    )
    # the held-out rows written out one per person (frequency weights); unchanged without weights
    people = _people(test.size, None if w is None else w[test])
    values, measure_warnings = _measures(payload.y[test][people], prob[people], lp[people] if lp.ndim == 1 else None,
                                         K=payload.K, link=payload.link)
    caught.update({f"measure:{k}": v for k, v in measure_warnings.items()})
    return dict(status="ok", rows=test, prob=prob, lp=lp, values=values, warnings=dict(caught))


def cross_validate(study, data, *, n_folds: int, n_repeats: int = 1, seed: int, n_jobs: int = 1, progress: bool = True,
                   weights: np.ndarray | None = None, clusters: Any = None) -> CrossValidation:
    """(Repeated) k-fold cross-validation of the study's whole derivation procedure.

    Parameters
    ----------
    study : Study
        The validated study (derivation procedure, failure limit
        ``internal_validation.max_failed_share``, ``compute.scheduler``).
    data : PreparedCohort or (DataFrame, array of int)
        The derivation cohort.
    n_folds : int
        k, at least 2.
    n_repeats : int, default 1
        Repeats with fresh random folds.
    seed : int
        Seed of the repeat streams.
    n_jobs : int, default 1
        Local worker processes (-1: every core); the result does not depend on it.
    progress : bool, default True
        Show a progress bar on standard error.
    weights : array of int, optional
        Frequency weights of a (frame, y) pair (row i stands for
        ``weights[i]`` identical people); a PreparedCohort read with
        ``data.weight_column`` brings its own.
    clusters : array-like, optional
        The cluster label of every row of a (frame, y) pair; a PreparedCohort
        read with ``data.cluster_column`` brings its own.  Whole clusters are
        then dealt to folds (:func:`riskvet.modelling.folds.cluster_folds`).

    Returns
    -------
    CrossValidation

    Raises
    ------
    DesignError
        More folds than rows in the smallest outcome level: some fold would
        hold none of that level (the message gives the counts by level).
    RiskvetError
        Bad input, or more failed folds than ``max_failed_share`` allows.

    Notes
    -----
    See the module notes for the averaged and pooled summaries.  Folds are
    stratified by outcome level (:func:`stratified_folds`).  Measures are those
    of :func:`riskvet.bootstrap.validate_internally`.  With frequency weights
    the folds are dealt over rows, so a person's copies are never split
    between training and held-out data; each fold's model is derived on its
    training rows with their weights, and every measure (apparent, per fold,
    pooled) is computed on the rows written out one per person.  With
    clusters, whole clusters are dealt to folds (in random order, then by
    their mean outcome, an approximate stratification), so a cluster is
    never both in a fold's training data and in its held-out data.

    References
    ----------
    .. [1] Stone M. Cross-validatory choice and assessment of statistical
       predictions. J R Stat Soc B 1974;36(2):111-147.
    .. [2] Steyerberg EW, Harrell FE, Borsboom GJJM, Eijkemans MJC, Vergouwe
       Y, Habbema JDF. Internal validation of predictive models: efficiency
       of some procedures for logistic regression analysis. Journal of
       Clinical Epidemiology 2001;54(8):774-781.
    """
    func = "cross_validate"
    study = _check_study(study, func)
    frame, y, w = _as_weighted_data(study, data, weights, func)
    codes, _ = _as_clusters(data, clusters, len(frame), func)
    n_folds = _check_count(n_folds, "n_folds", func, minimum=2)
    n_repeats = _check_count(n_repeats, "n_repeats", func)
    seed = _check_seed(seed, func)
    n_jobs = _check_n_jobs(n_jobs, func)
    n = len(frame)
    levels = tuple(study.outcome.ordered_levels)
    K = len(levels)
    link = study.model.link
    _check_folds_fit_levels(y, levels, n_folds=n_folds, func=func)

    folds, items = _draw_folds(y, n_folds=n_folds, n_repeats=n_repeats, seed=seed, clusters=codes, func=func)

    imputing = _imputed_original(study, frame, y, data, w, func) if study.imputing else None
    _, prob_all, lp_all, trouble = _derive_on_all_data(study, frame, y, weights=w, clusters=codes, imputing=imputing)
    apparent_warnings = tuple(dict.fromkeys(f"{m.category.__name__}: {m.message}" for m in trouble))
    for m in trouble:
        warnings.warn(str(m.message), m.category, stacklevel=2)
    people = _people(n, w)
    if imputing is None:
        apparent, _ = _measures(y[people], prob_all[people], lp_all[people] if lp_all.ndim == 1 else None, K=K, link=link)
    else:  # measured in each completed data set of the original data and averaged, as the bootstrap does
        apparent = average_summaries([_measures(y, pj, lj if lj.ndim == 1 else None, K=K, link=link)[0] for pj, lj in zip(prob_all, lp_all)])
        lp_all = lp_all[0]

    specs = _measure_specs(levels)
    keys = [k for k, _, _ in specs]
    tally = _run_folds(
        _CVPayload(study=study, frame=frame, y=y, K=K, link=link, folds=folds, weights=w, clusters=codes,
                   m=0 if imputing is None else len(imputing["completed"])), items, keys=keys, n_folds=n_folds,
        n_repeats=n_repeats, pool_lp=lp_all.ndim == 1, n_jobs=n_jobs, scheduler=study.compute.scheduler, progress=progress,
    )
    _check_fold_failures(tally.failures, total=n_folds * n_repeats, max_failed=study.internal_validation.max_failed_share, func=func)
    pooled = _pooled_values(tally, y, keys=keys, K=K, link=link, weights=w)

    return CrossValidation(
        estimates=tuple(_cv_estimates(specs, apparent, tally.per_fold, pooled, n_repeats=n_repeats)),
        n_folds=n_folds,
        n_repeats=n_repeats,
        seed=seed,
        failures=tally.failures,
        n=int(people.size),
        n_levels=K,
        levels=levels,
        fold_warnings=dict(sorted(tally.fold_warnings.items())),
        apparent_warnings=apparent_warnings,
        fold_values=pd.DataFrame(tally.fold_rows, columns=["repeat", "fold", "measure", "value"]),
        n_rows=None if w is None else n,
        n_clusters=None if codes is None else int(codes.max()) + 1,
    )


def _check_folds_fit_levels(y: np.ndarray, levels: Sequence[str], *, n_folds: int, func: str) -> None:
    """Refuse more folds than rows in the smallest outcome level: every fold must hold every level."""
    counts = np.bincount(y, minlength=len(levels))
    if n_folds > int(counts.min()):
        by_level = {str(lv): int(c) for lv, c in zip(levels, counts.tolist())}
        raise DesignError(problem(
            f"{func}(n_folds=)",
            allowed=f"at most the rows of the smallest outcome level ({int(counts.min())}), so that every fold holds every level",
            received=f"n_folds = {n_folds} with rows by outcome level {by_level}",
        ))


def _draw_folds(y: np.ndarray, *, n_folds: int, n_repeats: int, seed: int, clusters: np.ndarray | None = None,
                func: str = "cross_validate") -> tuple[np.ndarray, list[tuple[int, int, int]]]:
    """Every repeat's folds and the (repeat, fold, selection seed) of every fold, from the repeat's own stream (whole clusters per fold when given)."""
    folds = np.empty((n_repeats, y.shape[0]), dtype=np.int64)
    items = []
    for r, child in enumerate(np.random.SeedSequence(seed).spawn(n_repeats)):
        rng = np.random.default_rng(child)
        folds[r] = (stratified_folds(y, n_folds=n_folds, rng=rng) if clusters is None
                    else cluster_folds(clusters, y, n_folds, rng, where=f"{func}(n_folds=)"))
        seeds = rng.integers(0, _SEED_CEILING, size=n_folds)
        items += [(r, f, int(seeds[f])) for f in range(n_folds)]
    return folds, items


@dataclass(frozen=True)
class _FoldTally:
    """What the folds returned, gathered in fold order.

    ``per_fold`` maps measure key to the successful folds' values;
    ``pooled_prob`` (n_repeats x n x K) and ``pooled_lp`` (n_repeats x n, or
    None for a non-proportional model) hold every row's held-out prediction,
    NaN where its fold failed.
    """

    failures: tuple[ReplicateFailure, ...]
    fold_warnings: dict[str, int]
    per_fold: dict[str, list[float]]
    fold_rows: list[dict[str, Any]]
    pooled_prob: np.ndarray
    pooled_lp: np.ndarray | None


def _run_folds(payload: _CVPayload, items: list[tuple[int, int, int]], *, keys: list[str], n_folds: int, n_repeats: int,
               pool_lp: bool, n_jobs: int, scheduler: str | None, progress: bool) -> _FoldTally:
    """Derive on every fold's training rows, predict its held-out rows, and gather the results in fold order."""
    n, K = payload.y.shape[0], payload.K
    failures: list[ReplicateFailure] = []
    warn_counts: Counter[str] = Counter()
    per_fold: dict[str, list[float]] = {k: [] for k in keys}
    fold_rows: list[dict[str, Any]] = []
    pooled_prob = np.full((n_repeats, n, K), np.nan)
    pooled_lp: np.ndarray | None = np.full((n_repeats, n), np.nan) if pool_lp else None
    for rec in _execute(_fold, payload, items, n_jobs=n_jobs, scheduler=scheduler,
                        desc="cross-validation", progress=progress):
        r, f = rec["repeat"], rec["fold"]
        if rec["status"] != "ok":
            failures.append(ReplicateFailure(r * n_folds + f, rec["reason"], rec["message"]))
            continue
        warn_counts.update(rec["warnings"])
        for k in keys:
            per_fold[k].append(rec["values"][k])
            fold_rows.append({"repeat": r, "fold": f, "measure": k, "value": rec["values"][k]})
        pooled_prob[r, rec["rows"]] = rec["prob"]
        if pooled_lp is not None:
            pooled_lp[r, rec["rows"]] = rec["lp"]
    return _FoldTally(
        failures=tuple(failures), fold_warnings=dict(warn_counts), per_fold=per_fold, fold_rows=fold_rows,
        pooled_prob=pooled_prob, pooled_lp=pooled_lp,
    )


def _check_fold_failures(failures: Sequence[ReplicateFailure], *, total: int, max_failed: float, func: str) -> None:
    """Stop when more folds failed than the study allows, or all of them."""
    if len(failures) > max_failed * total or len(failures) == total:
        counts = dict(sorted(Counter(x.reason for x in failures).items()))
        raise RiskvetError(
            problem(
                f"{func}: failed folds",
                allowed=f"at most internal_validation.max_failed_share = {max_failed:g} of {total} ({math.floor(max_failed * total)})",
                received=f"{len(failures)} failed, by reason {counts}",
            )
        )


def _pooled_values(tally: _FoldTally, y: np.ndarray, *, keys: list[str], K: int, link: str,
                   weights: np.ndarray | None = None) -> dict[str, list[float]]:
    """Each repeat's measures on its pooled held-out predictions (rows of failed folds left out), one per person."""
    pooled: dict[str, list[float]] = {k: [] for k in keys}
    for r in range(tally.pooled_prob.shape[0]):
        have = np.all(np.isfinite(tally.pooled_prob[r]), axis=1)
        rows = _people(y.shape[0], weights, np.flatnonzero(have)) if weights is not None else have
        lp_r = tally.pooled_lp[r, rows] if tally.pooled_lp is not None else None
        try:
            values, _ = _measures(y[rows], tally.pooled_prob[r, rows], lp_r, K=K, link=link)
        except _PROPAGATE:
            raise
        except Exception:  # a repeat whose pooled predictions cannot be measured has no pooled value
            values = {k: float("nan") for k in keys}
        for k in keys:
            pooled[k].append(values[k])
    return pooled


def _cv_estimates(specs: list[tuple[str, str, str]], apparent: dict[str, float], per_fold: dict[str, list[float]],
                  pooled: dict[str, list[float]], *, n_repeats: int) -> list[CrossValidationEstimate]:
    """The averaged and pooled summary of every measure."""
    estimates = []
    for key, label, kind in specs:
        fv = np.asarray(per_fold[key], dtype=float)
        pv = np.asarray(pooled[key], dtype=float)
        estimates.append(
            CrossValidationEstimate(
                measure=key, label=label, kind=kind, apparent=apparent[key],
                averaged=_mean(fv), averaged_sd=_spread(fv)[0],
                pooled=_mean(pv), pooled_sd=_spread(pv)[0] if n_repeats > 1 else float("nan"),
                n_folds_used=int(np.isfinite(fv).sum()),
            )
        )
    return estimates
