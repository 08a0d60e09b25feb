"""Performance measures of a frozen model in a multiply imputed cohort, pooled by Rubin's rules.

Each measure of :func:`riskvet.validation.iecv.cluster_measures` (C, with
DeLong's standard error; calibration-in-the-large and slope, with likelihood
standard errors; O/E, with the binomial standard error of log O/E; net
benefit, with its multinomial standard error) is computed in every completed
data set and the m estimates pooled by Rubin's rules on a scale where the
measure is close to normal: C on the logit scale (Marshall et al. 2009;
Debray et al. 2017), O/E on the log scale (Debray et al. 2017), the
calibration intercept and slope and net benefit as they are.  The interval
is t on Barnard and Rubin's (1999) degrees of freedom with n - 1
complete-data degrees of freedom (n the people of the cohort), built on
that scale and returned to the measure's own.

References
----------
Rubin DB. Multiple Imputation for Nonresponse in Surveys. Wiley, 1987.

Barnard J, Rubin DB. Small-sample degrees of freedom with multiple
imputation. Biometrika 1999;86(4):948-955.

Marshall A, Altman DG, Holder RL, Royston P. Combining estimates of interest
in prognostic modelling studies after multiple imputation: current practice
and guidelines. BMC Medical Research Methodology 2009;9:57.

Debray TPA, Damen JAAG, Snell KIE, et al. A guide to systematic review and
meta-analysis of prediction model performance. BMJ 2017;356:i6460.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..errors import DataError, problem
from ..imputation.rubin import pool
from .cluster_rows import MEASURES, ClusterMeasure, cluster_measures

__all__ = ["ImputedMeasures", "imputed_cohort_measures", "pool_measure_rows"]

#: What the interval of a pooled measure is, in words.
INTERVAL_KIND = ("Rubin's rules over the completed data sets: t on Barnard-Rubin degrees of freedom (C on the logit scale, "
                 "O/E on the log scale)")


def _to_scale(estimate: float, se: float, scale: str) -> tuple[float, float]:
    """An estimate and its standard error moved to the pooling scale (delta method)."""
    if scale == "logit":
        return math.log(estimate / (1.0 - estimate)), se / (estimate * (1.0 - estimate))
    if scale == "log":
        return math.log(estimate), se / estimate
    return estimate, se


def _from_scale(value: float, scale: str) -> float:
    if not math.isfinite(value):
        return math.nan
    if scale == "logit":
        return 1.0 / (1.0 + math.exp(-value))
    if scale == "log":
        return math.exp(value)
    return value


def _pool_one(rows: Sequence[ClusterMeasure], confidence: float, df_complete: float | None) -> tuple[ClusterMeasure, dict[str, Any]]:
    first = rows[0]
    scale = MEASURES[first.measure][1]
    reason = next((r.reason for r in rows if r.reason), "")
    usable = not reason and all(math.isfinite(r.estimate) and math.isfinite(r.se) and r.se > 0 for r in rows)
    if scale == "logit" and usable:
        usable = all(0.0 < r.estimate < 1.0 for r in rows)
    if scale == "log" and usable:
        usable = all(r.estimate > 0 for r in rows)
    info = {"measure": first.measure, "cut": first.cut, "threshold": first.threshold, "scale": scale, "m": len(rows)}
    if not usable:
        why = reason or "not estimated in every completed data set"
        return (ClusterMeasure(first.cluster, first.measure, first.cut, first.threshold, math.nan, math.nan, math.nan, math.nan, why),
                info | {"df": math.nan, "fmi": math.nan, "riv": math.nan})
    moved = [_to_scale(r.estimate, r.se, scale) for r in rows]
    pooled = pool(np.array([q for q, _ in moved]), np.array([s * s for _, s in moved]), confidence=confidence, df_complete=df_complete)
    centre = float(pooled.estimate)
    estimate = _from_scale(centre, scale)
    slope = {"logit": estimate * (1.0 - estimate), "log": estimate}.get(scale, 1.0)
    measure = ClusterMeasure(first.cluster, first.measure, first.cut, first.threshold, estimate, float(pooled.se) * slope,
                             _from_scale(float(pooled.lower), scale), _from_scale(float(pooled.upper), scale))
    return measure, info | {"df": float(pooled.df), "fmi": float(pooled.fmi), "riv": float(pooled.riv)}


def pool_measure_rows(per_imputation: Sequence[Sequence[ClusterMeasure]], *, confidence: float = 0.95,
                      df_complete: float | None = None) -> tuple[list[ClusterMeasure], pd.DataFrame]:
    """Pool the same measures computed in each of m completed data sets.

    Parameters
    ----------
    per_imputation : sequence of sequences of ClusterMeasure
        For each completed data set, the rows of
        :func:`~riskvet.validation.iecv.cluster_measures` (the same rows in
        the same order).
    confidence : float
        Level of the pooled intervals.
    df_complete : float, optional
        Complete-data degrees of freedom for Barnard and Rubin's degrees of
        freedom (the people of the group less 1); Rubin's without it.

    Returns
    -------
    (list of ClusterMeasure, DataFrame)
        The pooled rows (natural scale; ``se`` by the delta method from the
        pooling scale), and per row the pooling scale, m, Rubin's degrees of
        freedom, the relative increase in variance and the fraction of
        missing information.
    """
    sets = [list(rows) for rows in per_imputation]
    if len(sets) < 2 or len({len(rows) for rows in sets}) != 1:
        raise DataError(problem("pool_measure_rows: per_imputation", allowed="the same measures from two or more completed data sets",
                                received=[len(rows) for rows in sets]))
    for rows in zip(*sets):
        if len({(r.measure, r.cut, r.threshold if math.isfinite(r.threshold) else None) for r in rows}) != 1:
            raise DataError("pool_measure_rows: the completed data sets' measures are not in the same order")
    pooled, info = zip(*(_pool_one(rows, confidence, df_complete) for rows in zip(*sets))) if sets[0] else ((), ())
    return list(pooled), pd.DataFrame(list(info), columns=["measure", "cut", "threshold", "scale", "m", "df", "fmi", "riv"])


@dataclass(frozen=True)
class ImputedMeasures:
    """A frozen model's measures in one multiply imputed cohort, pooled by Rubin's rules.

    Attributes
    ----------
    label : str
        The cohort.
    measures : tuple of ClusterMeasure
        Pooled measures per cut (natural scale).
    pooling : DataFrame
        Per measure: pooling scale, m, degrees of freedom, relative increase
        in variance, fraction of missing information.
    m : int
        Completed data sets.
    confidence : float
    interval_kind : str
    """

    label: str
    measures: tuple[ClusterMeasure, ...]
    pooling: pd.DataFrame = field(repr=False)
    m: int
    confidence: float
    interval_kind: str = INTERVAL_KIND

    def to_frame(self) -> pd.DataFrame:
        """One row per measure and cut: measure, cut, threshold, estimate, lower, upper, df, fmi, reason."""
        rows = [{"measure": r.measure, "cut": r.cut, "threshold": r.threshold, "estimate": r.estimate, "lower": r.lower,
                 "upper": r.upper, "reason": r.reason} for r in self.measures]
        frame = pd.DataFrame(rows, columns=["measure", "cut", "threshold", "estimate", "lower", "upper", "reason"])
        frame.insert(6, "df", self.pooling["df"].to_numpy(dtype=float) if len(self.pooling) else [])
        frame.insert(7, "fmi", self.pooling["fmi"].to_numpy(dtype=float) if len(self.pooling) else [])
        return frame

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({"label": self.label, "m": self.m, "confidence": self.confidence, "interval_kind": self.interval_kind,
                            "measures": self.to_frame()})


def imputed_cohort_measures(label: str, y: np.ndarray, probs: Sequence[np.ndarray], *, thresholds: dict[int, Sequence[float]],
                            min_events: int, confidence: float = 0.95) -> ImputedMeasures:
    """Every measure of a frozen model in a cohort, from its predictions in each completed data set, pooled.

    Parameters
    ----------
    label : str
    y : array of int
        Outcome codes (complete: only predictors are imputed).
    probs : sequence of arrays (n, K)
        The model's predicted probabilities in each completed data set.
    thresholds : dict of int to sequence of float
        Risk thresholds by cut, for net benefit.
    min_events : int
        Fewest people on each side of a cut for that cut's measures.
    """
    per = [cluster_measures(label, np.asarray(y), np.asarray(p), thresholds=thresholds, min_events=min_events, confidence=confidence)
           for p in probs]
    pooled, info = pool_measure_rows(per, confidence=confidence, df_complete=max(len(np.asarray(y)) - 1, 1))
    return ImputedMeasures(label=label, measures=tuple(pooled), pooling=info, m=len(per), confidence=confidence)
