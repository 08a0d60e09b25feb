"""The headline performance numbers in one lean pass, for resampling.

:func:`performance_summary` computes the measures a bootstrap replicate
reports (the bootstrap calls it about a thousand times) from the fast
kernels of the family modules; :func:`summary_keys` names its keys.

Conventions: outcome levels 0 .. K-1; ``prob`` is the n x K matrix of
predicted level probabilities (or a vector of event probabilities for a
binary outcome); cut j is Y > j versus Y <= j with predicted probability
``prob[:, j+1:].sum(axis=1)``.  Data lacking an outcome level that a measure
needs raise :class:`riskvet.errors.DataError`, everywhere.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ._checks import _as_outcome, _as_prob_matrix, _cut_probs
from .calibration import (
    DEFAULT_FRAC,
    _logit,
    _recalibrate,
    _smooth,
)
from .discrimination import (
    _auc_only,
    _pairwise_c,
)
from ..errors import DataError, problem
from .overall import _brier_parts, _log_likelihoods, _r2, _scaled

__all__ = ["average_summaries", "performance_summary", "summary_keys"]


def summary_keys(n_levels: int) -> tuple[str, ...]:
    """The keys :func:`performance_summary` returns for an outcome with ``n_levels`` levels, in order."""
    cuts = range(n_levels - 1)
    return (
        *(f"auc_cut{j}" for j in cuts),
        "average_cut_auc",
        "ordinal_c",
        "generalised_c",
        "brier",
        "scaled_brier",
        "nagelkerke_r2",
        *(f"calibration_intercept_cut{j}" for j in cuts),
        *(f"calibration_slope_cut{j}" for j in cuts),
        *(f"ici_cut{j}" for j in cuts),
        "n_fit_warnings",
    )


def performance_summary(y: Any, prob: Any) -> dict[str, float]:
    """Headline performance measures in one lean pass, for resampling.

    Parameters
    ----------
    y : array-like of int, shape (n,)
        Outcome levels 0 .. K-1; every level must occur.
    prob : array-like of float, shape (n, K) or (n,)
        Predicted level probabilities, or event probabilities of a binary
        outcome.

    Returns
    -------
    dict of str to float
        In the order of :func:`summary_keys`:

        ``auc_cut{j}``
            C of P(Y > j) for cut j (:func:`concordance`).
        ``average_cut_auc``, ``ordinal_c``, ``generalised_c``
            As ``average_cut_c``, ``ordinal_c``, ``generalised_c`` of
            :func:`ordinal_discrimination` (ranking on the expected level).
        ``brier``, ``scaled_brier``, ``nagelkerke_r2``
            As in :func:`overall_accuracy` (multi-category Brier for K > 2).
        ``calibration_intercept_cut{j}``, ``calibration_slope_cut{j}``, ``ici_cut{j}``
            Calibration-in-the-large, calibration slope and ICI of cut j, as
            in :func:`calibration` with its default smoother (local quadratic, frac = 0.75).
            The slope is NaN when the cut's predictions are constant (a
            model with no predictors; why is
            :data:`riskvet.measures.calibration.SLOPE_UNDEFINED_CONSTANT`)
            or its regression cannot be fitted; every other value is
            computed (C = 0.5 for constant predictions).
        ``n_fit_warnings``
            Number of warnings the recalibration fits met (separation,
            non-convergence); the warnings themselves are issued as usual.

    Raises
    ------
    DataError
        Bad input, or an outcome level with no patients.

    Notes
    -----
    Every value equals the corresponding field of the full result functions
    (tested); no standard errors, intervals, tables or curves are computed.
    """
    func = "performance_summary"
    y_arr = _as_outcome(y, func)
    matrix = _as_prob_matrix(prob, y_arr.shape[0], func)
    k = matrix.shape[1]
    _as_outcome(y_arr, func, n_levels=k)
    counts = np.bincount(y_arr, minlength=k)
    if np.any(counts == 0):
        raise DataError(problem(f"{func}(y=)", allowed=f"patients at every level 0 .. {k - 1}", received=f"level counts {counts.tolist()}"))
    n = y_arr.shape[0]
    cut_p = _cut_probs(matrix)
    out: dict[str, float] = {}
    aucs = [_auc_only(y_arr > j, cut_p[:, j]) for j in range(k - 1)]
    for j, value in enumerate(aucs):
        out[f"auc_cut{j}"] = value
    out["average_cut_auc"] = float(np.mean(aucs))
    if k == 2:
        out["ordinal_c"] = out["generalised_c"] = aucs[0]
    else:
        _, pair_c, pair_n = _pairwise_c(y_arr, matrix @ np.arange(k, dtype=float), k)
        out["ordinal_c"] = float(np.mean(pair_c))
        out["generalised_c"] = float(np.dot(pair_c, pair_n) / pair_n.sum())
    score, null, _ = _brier_parts(y_arr, matrix)
    out["brier"] = score
    out["scaled_brier"] = _scaled(score, null)
    ll, ll0, _ = _log_likelihoods(y_arr, matrix)
    out["nagelkerke_r2"] = float(_r2(ll, ll0, n)[3])
    intercepts, slopes, icis = [], [], []
    n_warn = 0
    for j in range(k - 1):
        y_cut = (y_arr > j).astype(np.int64)
        p = cut_p[:, j]
        lp, _ = _logit(p)
        rec = _recalibrate(y_cut, lp)
        n_warn += len(rec.notes)
        intercepts.append(rec.citl)
        slopes.append(rec.slope)
        order = np.argsort(p, kind="stable")
        sm = _smooth(y_cut[order].astype(float), p[order], DEFAULT_FRAC, with_se=False)
        icis.append(float(np.mean(np.abs(sm.per_patient - p[order]))))
    for j in range(k - 1):
        out[f"calibration_intercept_cut{j}"] = intercepts[j]
    for j in range(k - 1):
        out[f"calibration_slope_cut{j}"] = slopes[j]
    for j in range(k - 1):
        out[f"ici_cut{j}"] = icis[j]
    out["n_fit_warnings"] = float(n_warn)
    return out


def average_summaries(summaries: Sequence[Mapping[str, float]]) -> dict[str, float]:
    """Measures computed in each of several completed data sets, averaged key by key (Rubin's rule for a point estimate).

    Every summary must hold the same keys; a measure undefined (NaN) in one
    completed data set is undefined in the average.
    """
    summaries = list(summaries)
    if not summaries or any(set(s) != set(summaries[0]) for s in summaries):
        raise DataError(problem("average_summaries(summaries=)", allowed="one or more summaries with the same measures",
                                received=[sorted(s) for s in summaries][:2]))
    return {key: float(np.mean([s[key] for s in summaries])) for key in summaries[0]}
