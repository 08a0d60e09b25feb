"""Internal-external cross-validation: leave one site (or period) out, in turn.

For each cluster g of the derivation data (``data.cluster_column``, a site
or a period), the study's whole derivation procedure
(:func:`riskvet.modelling.derive.derive`: knots, selection, fit) runs on the
other clusters and the model it gives predicts the people of g, who took no
part in it.  Every cluster in turn is the one left out (Royston, Parmar &
Sylvester 2004; Steyerberg & Harrell 2016).  In each left-out cluster, at
every cut of the outcome (Y > j), riskvet measures

* the C statistic with DeLong's standard error (DeLong et al. 1988);
* calibration-in-the-large and the calibration slope with their
  likelihood standard errors (Cox 1958; Van Calster et al. 2016);
* the observed/expected ratio, its log having the binomial standard error
  sqrt((1 - O/n) / O) (Debray et al. 2017);
* net benefit at the study's thresholds for that cut (Vickers & Elkin
  2006), with the multinomial standard error of TP/n - FP/n t/(1 - t)
  (common practice: TP/n and FP/n are multinomial shares of one sample);

and pools each measure over the clusters by random-effects meta-analysis
(:func:`riskvet.pooling.random_effects`): C on the logit scale, O/E on the
log scale, the others as they are (Debray et al. 2017; Riley, Higgins &
Deeks 2011 on the prediction interval; Wynants et al. 2018 on pooling net
benefit, recalled from memory).  A cluster with fewer than ``min_events``
people on either side of a cut is too small to estimate that cut's
measures: it is named, with the reason, and left out of their pooling.

As a diagnostic, not a modelling choice, each term of the final model is
given its own coefficient in every cluster (the other terms shared, and the
intercepts shifted by cluster), each coefficient's spread across clusters is
summarised by the same pooling (its tau and I^2), and a likelihood-ratio
test asks whether one common coefficient would do (:class:`EffectSpread`).

Reproducibility: the derivation leaving out cluster g takes its selection
seed from stream g of ``numpy.random.SeedSequence(seed).spawn(G)``, clusters
numbered in order of first appearance; results are gathered in cluster
order, so they do not depend on ``n_jobs`` or a dask.distributed cluster.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import pandas as pd
from scipy import stats

from .._jsonable import to_jsonable
from ..errors import DataError, RiskvetError, StudyError, problem
from .bootstrap import (
    _SEED_CEILING,
    _PROPAGATE,
    ReplicateFailure,
    _as_clusters,
    _as_weighted_data,
    _check_n_jobs,
    _check_seed,
    _check_study,
    _execute,
    _failure_message,
    _failure_reason,
    _fit_and_predict,
    _imputed_original,
    _imputed_split,
    _people,
    _ReplicateFailed,
)
from .imputed_measures import pool_measure_rows
from .cluster_rows import MEASURES, ClusterMeasure, _row, cluster_measures
from .pooling import PooledEstimate, back_transform, logit_c, random_effects

__all__ = [
    "ClusterMeasure",
    "HeldOutCluster",
    "PooledMeasure",
    "EffectSpread",
    "InternalExternalValidation",
    "internal_external_validation",
    "cluster_measures",
    "pool_measures",
    "MEASURES",
]

@dataclass(frozen=True)
class HeldOutCluster:
    """A cluster left out: its size and what the derivation on the others gave.

    Attributes
    ----------
    label : str
        The cluster's label.
    n : int
        People in the cluster (rows written out by their frequency weights).
    level_counts : dict of str to int
        People by outcome level.
    n_training : int
        People the model leaving it out was derived on.
    status : str
        ``"ok"``, or ``"failed"`` when the derivation on the other clusters
        produced no model (``reason``, ``message`` say why).
    terms : tuple of str
        Terms the derivation on the other clusters selected.
    """

    label: str
    n: int
    level_counts: dict[str, int]
    n_training: int
    status: str
    terms: tuple[str, ...] = ()
    reason: str = ""
    message: str = ""

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


@dataclass(frozen=True)
class PooledMeasure:
    """One measure at one cut (and threshold), pooled over the left-out clusters.

    Attributes
    ----------
    measure, cut, threshold : str, int, float
        As in :class:`ClusterMeasure`.
    scale : str
        Pooling scale: ``"logit"`` (C), ``"log"`` (O/E) or ``"identity"``.
    n_clusters : int
        Clusters pooled.
    estimate, lower, upper : float
        Pooled value and its confidence interval, on the measure's scale.
    prediction_lower, prediction_upper : float
        95% (``confidence``) prediction interval for the measure in a new
        cluster (t on k - 2 df, Riley, Higgins & Deeks 2011); NaN below
        three clusters.
    tau2, i2 : float
        Between-cluster variance (on the pooling scale) and I^2.
    left_out : tuple of (str, str)
        Clusters not pooled, each with its reason.
    reason : str
        Why the measure was not pooled (fewer than two clusters); empty when it was.
    pooled : PooledEstimate or None
        The result on the pooling scale.
    """

    measure: str
    cut: int
    threshold: float
    scale: str
    n_clusters: int
    estimate: float
    lower: float
    upper: float
    prediction_lower: float
    prediction_upper: float
    tau2: float
    i2: float
    left_out: tuple[tuple[str, str], ...] = ()
    reason: str = ""
    pooled: PooledEstimate | None = field(default=None, repr=False)

    def to_dict(self) -> dict[str, Any]:
        out = {f: getattr(self, f) for f in self.__dataclass_fields__ if f != "pooled"}
        out["left_out"] = [{"cluster": c, "reason": r} for c, r in self.left_out]
        out["pooled"] = None if self.pooled is None else self.pooled.to_dict()
        return to_jsonable(out)


@dataclass(frozen=True)
class EffectSpread:
    """Heterogeneity of the final model's predictor effects across clusters (a diagnostic).

    For each term of the model derived on all data, the model is refitted
    on all data with a shift of the intercepts for each cluster (so that a
    difference in baseline risk between clusters is not read as a
    difference in effect) and the term's coefficient(s) free in each
    cluster, the other terms' coefficients shared; it is compared with the
    same model with one common coefficient by a likelihood-ratio test on
    (G - 1) x (columns of the term) degrees of freedom.  Sharing the other
    coefficients keeps the per-cluster estimates estimable in clusters far
    too small to fit the whole model alone.

    Attributes
    ----------
    columns : tuple of str
        The terms of the model derived on all data.
    on_all_data : dict of str to float
        Each single-column term's coefficient on all data (NaN for terms of
        several columns, or a model with a slope per cut).
    per_cluster : DataFrame
        Columns ``cluster``, ``term``, ``estimate``, ``se``, ``reason``:
        each single-column term's coefficient in each cluster (``reason``
        says why one is missing).
    pooled : DataFrame
        Per term: its coefficient on all data, the clusters estimated, the
        random-effects pooled coefficient, tau (the between-cluster
        standard deviation), I^2, the lowest and highest cluster
        coefficient, and the likelihood-ratio test of a common effect
        (``lr_statistic``, ``lr_df``, ``lr_p``; ``reason`` when it could
        not be computed).
    """

    columns: tuple[str, ...]
    on_all_data: dict[str, float]
    per_cluster: pd.DataFrame
    pooled: pd.DataFrame

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({
            "columns": list(self.columns),
            "on_all_data": dict(self.on_all_data),
            "per_cluster": self.per_cluster.to_dict(orient="records"),
            "pooled": self.pooled.to_dict(orient="records"),
        })


@dataclass(frozen=True)
class InternalExternalValidation:
    """What the internal-external cross-validation found.

    Attributes
    ----------
    clusters : tuple of HeldOutCluster
        Every cluster, in order of first appearance in the data.
    measures : tuple of ClusterMeasure
        Every measure of every left-out cluster (estimated or not, with the reason).
    pooled : tuple of PooledMeasure
        Every measure pooled over the clusters.
    effects : EffectSpread or None
        The coefficient heterogeneity diagnostic (None when the model on all
        data has no coefficient).
    levels : tuple of str
        Outcome levels, lowest first.
    cluster_column, cluster_kind : str
        ``data.cluster_column`` and ``data.cluster_kind``.
    method : str
        ``"reml"`` or ``"dl"``.
    hartung_knapp : bool
        Whether the pooled intervals are Hartung-Knapp's.
    min_events : int
        Fewest people on each side of a cut for a cluster's measures at that cut.
    confidence : float
        Level of every interval.
    seed : int
        Seed of the selection streams.
    terms_on_all_data : tuple of str
        The terms the procedure selects on all the derivation data.
    """

    clusters: tuple[HeldOutCluster, ...]
    measures: tuple[ClusterMeasure, ...]
    pooled: tuple[PooledMeasure, ...]
    effects: EffectSpread | None
    levels: tuple[str, ...]
    cluster_column: str
    cluster_kind: str
    method: str
    hartung_knapp: bool
    min_events: int
    confidence: float
    seed: int
    terms_on_all_data: tuple[str, ...] = ()

    @property
    def n_clusters(self) -> int:
        return len(self.clusters)

    @property
    def failures(self) -> tuple[ReplicateFailure, ...]:
        """Clusters whose leave-out derivation gave no model, as counted failures."""
        return tuple(ReplicateFailure(i, c.reason, c.message) for i, c in enumerate(self.clusters) if c.status != "ok")

    def pooled_measure(self, measure: str, cut: int = 0, threshold: float | None = None) -> PooledMeasure:
        """The pooled result of one measure at one cut (and, for net benefit, one threshold)."""
        for p in self.pooled:
            if p.measure == measure and p.cut == cut and (threshold is None or math.isclose(p.threshold, threshold)):
                return p
        raise KeyError((measure, cut, threshold))

    def to_frame(self) -> pd.DataFrame:
        """The pooled measures, one row per measure, cut and threshold."""
        rows = [{k: v for k, v in p.to_dict().items() if k not in ("pooled", "left_out")} | {"clusters_left_out": len(p.left_out)}
                for p in self.pooled]
        return pd.DataFrame(rows)

    def measures_frame(self) -> pd.DataFrame:
        """Every cluster's measures, one row each."""
        return pd.DataFrame([m.to_dict() for m in self.measures])

    def clusters_frame(self) -> pd.DataFrame:
        """The clusters: size by level, training size, status and selected terms."""
        rows = []
        for c in self.clusters:
            rows.append({"cluster": c.label, "n": c.n, **{f"n_{lv}": c.level_counts.get(lv, 0) for lv in self.levels},
                         "n_training": c.n_training, "status": c.status, "reason": c.reason, "terms": ", ".join(c.terms)})
        return pd.DataFrame(rows)

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({
            "clusters": [c.to_dict() for c in self.clusters],
            "measures": [m.to_dict() for m in self.measures],
            "pooled": [p.to_dict() for p in self.pooled],
            "effects": None if self.effects is None else self.effects.to_dict(),
            "levels": list(self.levels),
            "cluster_column": self.cluster_column,
            "cluster_kind": self.cluster_kind,
            "n_clusters": self.n_clusters,
            "method": self.method,
            "hartung_knapp": self.hartung_knapp,
            "min_events": self.min_events,
            "confidence": self.confidence,
            "seed": self.seed,
            "terms_on_all_data": list(self.terms_on_all_data),
            "n_failed": len(self.failures),
        })


# ----------------------------------------------------------------------------
# measures of one cluster


# ----------------------------------------------------------------------------
# pooling over clusters


def _pool_one(rows: list[ClusterMeasure], *, method: str, hartung_knapp: bool, confidence: float) -> PooledMeasure:
    """Pool one measure's estimated clusters; name the others with their reasons."""
    first = rows[0]
    scale = MEASURES[first.measure][1]
    used = [r for r in rows if r.estimated]
    left_out = tuple((r.cluster, r.reason) for r in rows if not r.estimated)
    nan = math.nan
    if len(used) < 2:
        reason = f"estimated in {len(used)} cluster(s): pooling needs at least two"
        return PooledMeasure(first.measure, first.cut, first.threshold, scale, len(used), nan, nan, nan, nan, nan, nan, nan,
                             left_out=left_out, reason=reason)
    est = np.array([r.estimate for r in used])
    var = np.array([r.se for r in used]) ** 2
    if scale == "logit":
        est, var = logit_c(est, var)
    elif scale == "log":
        est, var = np.log(est), var / est**2
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # an REML non-convergence is carried in the result's own notes
        pooled = random_effects(est, var, method=method, hartung_knapp=hartung_knapp, confidence=confidence,
                                labels=[r.cluster for r in used])
    back = back_transform(pooled, scale=scale)
    return PooledMeasure(first.measure, first.cut, first.threshold, scale, len(used), back.estimate, back.lower, back.upper,
                         back.prediction_lower, back.prediction_upper, pooled.tau2, pooled.i2, left_out=left_out, pooled=pooled)


def pool_measures(measures: Sequence[ClusterMeasure], *, method: str = "reml", hartung_knapp: bool = False,
                  confidence: float = 0.95) -> tuple[PooledMeasure, ...]:
    """Pool every measure (and cut, and threshold) of :func:`cluster_measures` rows over their clusters or cohorts.

    Each measure is pooled by :func:`riskvet.pooling.random_effects` on its
    scale (:data:`MEASURES`: C on the logit scale, O/E on the log scale);
    rows not estimated are named in ``left_out`` with their reasons, and a
    measure estimated in fewer than two places is not pooled (``reason``).
    """
    groups: dict[tuple[str, int, float], list[ClusterMeasure]] = {}
    for m in measures:
        key = (m.measure, m.cut, -1.0 if math.isnan(m.threshold) else m.threshold)
        groups.setdefault(key, []).append(m)
    order = list(MEASURES)
    keys = sorted(groups, key=lambda k: (k[1], order.index(k[0]), k[2]))
    return tuple(_pool_one(groups[k], method=method, hartung_knapp=hartung_knapp, confidence=confidence) for k in keys)


# ----------------------------------------------------------------------------
# the leave-one-cluster-out derivations


@dataclass(frozen=True)
class _IECVPayload:
    study: Any
    frame: pd.DataFrame
    y: np.ndarray
    K: int
    codes: np.ndarray
    weights: np.ndarray | None = None
    #: multiple imputation: the imputations of every derivation and of every left-out cluster
    m: int = 0


def _left_out(payload: _IECVPayload, item: tuple[int, int]) -> dict[str, Any]:
    """Derive on every cluster but g; predict g.  Any error is the cluster's counted failure, with its reason."""
    g, sel_seed = item
    held = payload.codes == g
    train, test = np.flatnonzero(~held), np.flatnonzero(held)
    w = payload.weights
    try:
        if payload.m:
            derivation, _, predicted = _imputed_split(payload.study, payload.frame, payload.y, train, test, m=payload.m,
                                                      K=payload.K, sel_seed=sel_seed)
            return {"cluster": g, "status": "ok", "probs": [p for p, _ in predicted], "terms": tuple(derivation.terms)}
        derivation, prob, _, _ = _fit_and_predict(
            payload.study, payload.frame.iloc[train].reset_index(drop=True), payload.y[train],
            payload.frame.iloc[test].reset_index(drop=True), sel_seed, payload.K,
            weights=None if w is None else w[train], clusters=payload.codes[train],
        )
    except _ReplicateFailed as exc:
        message = exc.message
        if exc.reason == "empty outcome level":  # the tally of people by level would give the left-out cluster's counts away
            message = message.split("; people by level")[0].replace("of the resample", "among the other clusters")
        return {"cluster": g, "status": "failed", "reason": exc.reason, "message": message}
    except _PROPAGATE:
        raise
    except Exception as exc:
        return {"cluster": g, "status": "failed", "reason": _failure_reason(exc), "message": _failure_message(exc, "predicting the cluster")}
    return {"cluster": g, "status": "ok", "prob": prob, "terms": tuple(derivation.terms)}


def _check_settings(study, method: Any, hartung_knapp: Any, min_events: Any, confidence: Any, func: str):
    section = study.internal_external
    method = (section.pooling if section is not None else "reml") if method is None else method
    hartung_knapp = (section.hartung_knapp if section is not None else False) if hartung_knapp is None else hartung_knapp
    min_events = (section.min_events if section is not None else 5) if min_events is None else min_events
    if method not in ("reml", "dl"):
        raise RiskvetError(problem(f"{func}(method=)", allowed="'reml' or 'dl'", received=method))
    if not isinstance(hartung_knapp, bool):
        raise RiskvetError(problem(f"{func}(hartung_knapp=)", allowed="True or False", received=hartung_knapp))
    if isinstance(min_events, bool) or not isinstance(min_events, (int, np.integer)) or min_events < 1:
        raise RiskvetError(problem(f"{func}(min_events=)", allowed="a whole number >= 1", received=min_events))
    if isinstance(confidence, bool) or not isinstance(confidence, float) or not 0.0 < confidence < 1.0:
        raise RiskvetError(problem(f"{func}(confidence=)", allowed="a level strictly between 0 and 1", received=confidence))
    return method, hartung_knapp, int(min_events)


def _labels_and_codes(data: Any, clusters: Any, n: int, func: str) -> tuple[np.ndarray, list[str], str | None]:
    codes, kind = _as_clusters(data, clusters, n, func)
    if codes is None:
        raise DataError(problem(f"{func}(clusters=)", allowed="the cluster of every row (data.cluster_column, or clusters=)", received=None))
    if kind == "person":
        raise StudyError(problem("data.cluster_kind", allowed="'site' or 'period' for internal-external cross-validation", received=kind))
    labels: list[str] = [""] * (int(codes.max()) + 1)
    for code, label in zip(codes.tolist(), np.asarray(data.clusters if clusters is None else clusters, dtype=object).tolist()):
        labels[code] = str(label)  # codes number clusters in order of first appearance
    if len(labels) < 3:
        raise DataError(problem(f"{func}: clusters", allowed="at least 3 clusters (a site or period is left out, and the pooling needs two or more)",
                                received=f"{len(labels)}: {labels}"))
    return codes, labels, kind


def internal_external_validation(study, data, *, seed: int | None = None, n_jobs: int = 1, progress: bool = False,
                                 clusters: Any = None, weights: Any = None, method: str | None = None,
                                 hartung_knapp: bool | None = None, min_events: int | None = None,
                                 confidence: float = 0.95) -> InternalExternalValidation:
    """Leave each cluster out in turn, derive on the rest, and measure the model in the cluster left out.

    Parameters
    ----------
    study : Study
        The validated study: the derivation procedure, the thresholds, and
        the ``internal_external`` section (pooling, Hartung-Knapp, minimum
        events, seed) unless overridden here.
    data : PreparedCohort or (DataFrame, y)
        The derivation data.  A PreparedCohort read with
        ``data.cluster_column`` brings its clusters and frequency weights.
    seed : int, optional
        Seed of the selection streams; ``internal_external.seed`` when omitted.
    n_jobs : int
        Worker processes for the G derivations (-1: every core);
        ``compute.scheduler`` sends them to a dask.distributed cluster.
    progress : bool
        Show a progress bar.
    clusters, weights : array-like, optional
        With a (frame, y) pair: the cluster label and frequency weight of every row.
    method : {"reml", "dl"}, optional
        Estimator of the between-cluster variance (``internal_external.pooling``).
    hartung_knapp : bool, optional
        Hartung-Knapp intervals for the pooled measures.
    min_events : int, optional
        Fewest people on each side of a cut for a cluster's measures at that cut.
    confidence : float
        Level of every interval.

    Returns
    -------
    InternalExternalValidation

    Raises
    ------
    DataError
        No clusters, or fewer than three.
    RiskvetError
        Every leave-one-out derivation failed.

    Notes
    -----
    The procedure, not one model, is validated: every left-out cluster is
    predicted by a model whose knots, selected terms and coefficients were
    found without it, so the pooled measures describe how the procedure's
    models carry to a site (or period) they have not seen.  The model of
    the record is the one derived on all clusters (Steyerberg & Harrell
    2016).  Measures are of people: with frequency weights the cluster's
    rows are written out one per person.

    References
    ----------
    .. [1] Royston P, Parmar MKB, Sylvester R. Construction and validation
       of a prognostic model across several studies, with an application
       in superficial bladder cancer. Statistics in Medicine
       2004;23(6):907-926.
    .. [2] Steyerberg EW, Harrell FE Jr. Prediction models need appropriate
       internal, internal-external, and external validation. Journal of
       Clinical Epidemiology 2016;69:245-247.
    .. [3] Debray TPA, Damen JAAG, Snell KIE, et al. A guide to systematic
       review and meta-analysis of prediction model performance. BMJ
       2017;356:i6460.
    .. [4] Riley RD, Higgins JPT, Deeks JJ. Interpretation of random effects
       meta-analyses. BMJ 2011;342:d549.
    .. [5] DeLong ER, DeLong DM, Clarke-Pearson DL. Comparing the areas
       under two or more correlated receiver operating characteristic
       curves: a nonparametric approach. Biometrics 1988;44(3):837-845.
    .. [6] Vickers AJ, Elkin EB. Decision curve analysis: a novel method
       for evaluating prediction models. Medical Decision Making
       2006;26(6):565-574.
    .. [7] Wynants L, Riley RD, Timmerman D, Van Calster B. Random-effects
       meta-analysis of the clinical utility of tests and prediction
       models. Statistics in Medicine 2018;37(12):2034-2052 (recalled from
       memory).
    """
    func = "internal_external_validation"
    study = _check_study(study, func)
    frame, y, w = _as_weighted_data(study, data, weights, func)
    codes, labels, kind = _labels_and_codes(data, clusters, len(frame), func)
    method, hartung_knapp, min_events = _check_settings(study, method, hartung_knapp, min_events, confidence, func)
    section = study.internal_external
    seed = _check_seed((section.seed if section is not None else 13) if seed is None else seed, func)
    n_jobs = _check_n_jobs(n_jobs, func)
    levels = tuple(study.outcome.ordered_levels)
    K = len(levels)
    G = len(labels)
    items = [(g, int(np.random.default_rng(child).integers(0, _SEED_CEILING)))
             for g, child in enumerate(np.random.SeedSequence(seed).spawn(G))]
    imputing = _imputed_original(study, frame, y, data, w, func) if study.imputing else None
    payload = _IECVPayload(study=study, frame=frame, y=y, K=K, codes=codes, weights=w,
                           m=0 if imputing is None else len(imputing["completed"]))
    results = list(_execute(_left_out, payload, items, n_jobs=n_jobs, scheduler=study.compute.scheduler,
                            desc="internal-external", progress=progress))
    if all(r["status"] != "ok" for r in results):
        reasons = sorted({r["reason"] for r in results})
        raise RiskvetError(f"{func}: the derivation failed with every cluster left out ({', '.join(reasons)}); nothing to validate")
    thresholds = {j: study.thresholds_for_cut(j) for j in range(K - 1)}
    held, measures = _measure_clusters(results, codes, labels, y, w, levels, thresholds=thresholds, min_events=min_events,
                                       confidence=confidence)
    # under multiple imputation the effect diagnostic is fitted on the first completed data set
    effect_frame = frame if imputing is None else imputing["completed"][0][list(frame.columns)]
    effects, all_terms = _effect_spread(study, effect_frame, y, w, codes, labels, confidence=confidence, method=method)
    return InternalExternalValidation(
        clusters=tuple(held), measures=tuple(measures),
        pooled=pool_measures(measures, method=method, hartung_knapp=hartung_knapp, confidence=confidence),
        effects=effects, levels=levels, cluster_column=str(getattr(data, "cluster_column", None) or "clusters"),
        cluster_kind=str(kind or "site"), method=method, hartung_knapp=hartung_knapp, min_events=min_events,
        confidence=confidence, seed=seed, terms_on_all_data=all_terms,
    )


def _measure_clusters(results: list[dict[str, Any]], codes: np.ndarray, labels: list[str], y: np.ndarray, w: np.ndarray | None,
                      levels: tuple[str, ...], *, thresholds: dict[int, Sequence[float]], min_events: int,
                      confidence: float) -> tuple[list[HeldOutCluster], list[ClusterMeasure]]:
    """Each cluster's size, its derivation's outcome and its measures (on people)."""
    K = len(levels)
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    people_w = np.ones(y.size, dtype=np.int64) if w is None else w
    total = int(people_w.sum())
    held: list[HeldOutCluster] = []
    measures: list[ClusterMeasure] = []
    for r in results:
        g = r["cluster"]
        rows = np.flatnonzero(codes == g)
        people = _people(rows.size, None if w is None else w[rows])
        y_g = y[rows][people]
        counts = np.bincount(y_g, minlength=K)
        n_g = int(y_g.size)
        label = labels[g]
        info = dict(label=label, n=n_g, level_counts={lv: int(c) for lv, c in zip(levels, counts.tolist())}, n_training=total - n_g)
        if r["status"] != "ok":
            held.append(HeldOutCluster(status="failed", reason=r["reason"], message=r["message"], **info))
            reason = f"no model: the derivation without this cluster failed ({r['reason']})"
            for j in range(K - 1):
                keys = [(m, math.nan) for m in MEASURES if m != "net_benefit"] + [("net_benefit", t) for t in thresholds.get(j, ())]
                measures += [_row(label, m, j, math.nan, math.nan, z, threshold=t, reason=reason) for m, t in keys]
            continue
        held.append(HeldOutCluster(status="ok", terms=r["terms"], **info))
        if "probs" in r:  # imputed: the cluster's measures in each completed data set, pooled by Rubin's rules
            per = [cluster_measures(label, y_g, p, thresholds=thresholds, min_events=min_events, confidence=confidence) for p in r["probs"]]
            measures += pool_measure_rows(per, confidence=confidence, df_complete=max(y_g.size - 1, 1))[0]
            continue
        measures += cluster_measures(label, y_g, r["prob"][people], thresholds=thresholds, min_events=min_events,
                                     confidence=confidence)
    return held, measures


def _effect_spread(study, frame: pd.DataFrame, y: np.ndarray, w: np.ndarray | None, codes: np.ndarray, labels: list[str], *,
                   confidence: float, method: str = "reml") -> tuple[EffectSpread | None, tuple[str, ...]]:
    """The model derived on all data, each term's effect let vary by cluster in turn, and its spread and test."""
    from ..modelling.derive import derive

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the derivation stage shows this model's own warnings
        derivation = derive(study, frame, y, weights=w, clusters=codes)
    terms = tuple(derivation.terms)
    if not terms:
        return None, terms
    X = derivation.design.transform(frame).astype(float)
    dummies = pd.DataFrame({f"cluster={labels[g]}": (codes == g).astype(float) for g in range(1, len(labels))}, index=X.index)
    fit_options = dict(link=study.model.link, proportional=study.model.proportional, weights=w,
                       n_levels=len(study.outcome.ordered_levels))
    base = _quiet_fit(pd.concat([X, dummies], axis=1), y, fit_options)
    per_cluster: list[dict[str, Any]] = []
    tests: list[dict[str, Any]] = []
    for term, columns in derivation.design.term_columns.items():
        rows, test = _vary_by_cluster(X, dummies, y, codes, labels, term, columns, base, fit_options)
        per_cluster += rows
        tests.append(test)
    frame_pc = pd.DataFrame(per_cluster, columns=["cluster", "term", "estimate", "se", "reason"]).astype(
        {"estimate": float, "se": float, "reason": str})
    fit = derivation.fit
    on_all = {t: float(fit.params[c[0]]) if len(c) == 1 and study.model.proportional else math.nan
              for t, c in derivation.design.term_columns.items()}
    return EffectSpread(columns=terms, on_all_data=on_all, per_cluster=frame_pc,
                        pooled=_effect_table(frame_pc, tests, on_all, confidence, method)), terms


def _quiet_fit(X: pd.DataFrame, y: np.ndarray, options: dict[str, Any]):
    """fit_cumulative without warnings on the page, or the reason it gave no usable fit."""
    from ..modelling.fitter import fit_cumulative

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            fit = fit_cumulative(X, y, **options)
        except _PROPAGATE:
            raise
        except Exception as exc:  # a model the clusters cannot carry is a diagnostic finding, not an error
            return f"the model could not be fitted ({_failure_reason(exc)})"
    if not fit.converged:
        return "the fit did not converge"
    return fit


def _vary_by_cluster(X: pd.DataFrame, dummies: pd.DataFrame, y: np.ndarray, codes: np.ndarray, labels: list[str], term: str,
                     columns: Sequence[str], base: Any, options: dict[str, Any]) -> tuple[list[dict[str, Any]], dict[str, Any]]:
    """One term's columns given a coefficient per cluster (the rest shared, cluster intercept shifts in both fits).

    Returns each cluster's coefficient (single-column terms of a
    proportional model) and the likelihood-ratio test of a common effect.
    """
    varying: dict[str, np.ndarray] = {}
    flat: dict[str, str] = {}
    for g, label in enumerate(labels):
        inside = codes == g
        for c in columns:
            values = X[c].to_numpy()
            if np.ptp(values[inside]) == 0:
                flat[label] = f"{c} takes a single value in this cluster"
                continue
            varying[f"{c}@{g}"] = np.where(inside, values, 0.0)
    shown = len(columns) == 1 and options["proportional"]
    test = {"term": term, "statistic": math.nan, "df": 0, "p": math.nan, "reason": ""}
    rows = [{"cluster": label, "term": term, "estimate": math.nan, "se": math.nan, "reason": why} for label, why in flat.items()] if shown else []
    if isinstance(base, str):
        test["reason"] = f"no common model with cluster shifts: {base}"
        return rows, test
    shifted = pd.concat([X.drop(columns=list(columns)), dummies, pd.DataFrame(varying, index=X.index)], axis=1)
    alt = _quiet_fit(shifted, y, options)
    if isinstance(alt, str):
        test["reason"] = alt
        return rows, test
    if alt.separation:
        def words(name: str) -> str:
            column, _, g = str(name).rpartition("@")
            return f"{column} in {labels[int(g)]}" if column and g.isdigit() else str(name)

        test["reason"] = f"separated with a coefficient per cluster ({', '.join(words(n) for n in alt.separation)})"
        return rows, test
    df = len(varying) - len(columns)
    statistic = max(0.0, 2.0 * (alt.loglik - base.loglik))
    test.update(statistic=statistic, df=df, p=float(stats.chi2.sf(statistic, df)) if df > 0 else math.nan)
    if shown:
        for name in varying:
            g = int(name.rsplit("@", 1)[1])
            rows.append({"cluster": labels[g], "term": term, "estimate": float(alt.params[name]), "se": float(alt.se[name]), "reason": ""})
    return rows, test


def _effect_table(per_cluster: pd.DataFrame, tests: list[dict[str, Any]], on_all: dict[str, float], confidence: float,
                  method: str) -> pd.DataFrame:
    """Per term: the common effect, the per-cluster effects' pooled value, tau, I^2 and range, and the test of a common effect."""
    rows = []
    for test in tests:
        term = test["term"]
        part = per_cluster[(per_cluster["term"] == term) & (per_cluster["reason"] == "")]
        row = {"term": term, "on_all_data": on_all.get(term, math.nan), "clusters": int(len(part)), "pooled": math.nan,
               "tau": math.nan, "i2": math.nan, "lowest": math.nan, "highest": math.nan,
               "lr_statistic": test["statistic"], "lr_df": test["df"], "lr_p": test["p"], "reason": test["reason"]}
        ok = part[np.isfinite(part["se"]) & (part["se"] > 0)]
        if len(ok):
            row.update(lowest=float(ok["estimate"].min()), highest=float(ok["estimate"].max()))
        if len(ok) >= 2:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                pooled = random_effects(ok["estimate"].to_numpy(), ok["se"].to_numpy() ** 2, method=method, confidence=confidence)
            row.update(pooled=pooled.estimate, tau=math.sqrt(pooled.tau2), i2=pooled.i2)
        rows.append(row)
    return pd.DataFrame(rows)
