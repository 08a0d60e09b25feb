"""Updating a frozen model on a multiply imputed cohort.

:func:`update_model_imputed` fits every update of
:func:`riskvet.validation.update.update_model` (recalibration in the large,
recalibration, revision, extension) in each completed data set of the
updating cohort.  Each update's parameters are pooled by Rubin's rule for a
point estimate, their mean over the completed data sets; the closed test
compares the updates by likelihood-ratio statistics pooled over the
imputations with the D2 rule of Li, Meng, Raghunathan & Rubin (1991)
(the m chi-squared statistics combined, with an F reference distribution);
apparent performance is the mean over the completed data sets.  The
bootstrap correction for optimism repeats the whole update procedure on
resamples of the first completed data set, so it does not carry the
imputation's uncertainty (said in the result's warnings).

References
----------
Li KH, Meng XL, Raghunathan TE, Rubin DB. Significance levels from repeated
p-values with multiply-imputed data. Statistica Sinica 1991;1(1):65-92.

Rubin DB. Multiple Imputation for Nonresponse in Surveys. Wiley, 1987.

Vergouwe Y, Nieboer D, Oostenbrink R, et al. A closed testing procedure to
select an appropriate method for updating prediction models. Statistics in
Medicine 2017;36(28):4529-4539.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import DataError, RiskvetError, RiskvetWarning, problem
from ..imputation.rubin import pool
from ..measures.calibration import ordinal_calibration
from ..measures.summary import average_summaries
from .update import (
    _OPTIMISM_NOTE,
    LRComparison,
    UpdateFit,
    UpdateResult,
    _bootstrap_correction,
    _check_alpha,
    _check_boot_options,
    _check_model,
    _check_y,
    _closed_test_by,
    _fit_all,
    _performance_table,
    _replace,
    _summary,
    _summary_rows,
    _UpdateReplicate,
    frame_digest,
)

__all__ = ["pooled_lr_test", "update_model_imputed"]

#: What the result's warnings say about the bootstrap under imputation.
_BOOTSTRAP_NOTE = ("under multiple imputation the optimism of the chosen update is estimated by bootstrap on the first completed "
                   "data set: it does not include the uncertainty of the imputation")


def pooled_lr_test(statistics: Sequence[float], df: int) -> tuple[float, float]:
    """The D2 pooling of m likelihood-ratio statistics on ``df`` degrees of freedom.

    ``D2 = (mean(d)/k - (m + 1)/(m - 1) r) / (1 + r)`` with
    ``r = (1 + 1/m) var(sqrt(d))``, referred to ``F(k, v)`` with
    ``v = k^(-3/m) (m - 1) (1 + 1/r)^2`` (Li, Meng, Raghunathan & Rubin
    1991); a negative D2 is set to 0, and with identical statistics
    (r = 0) the reference is chi-squared on ``k``.

    Returns
    -------
    (float, float)
        ``k D2`` (on the chi-squared scale of one statistic) and its p-value.
    """
    d = np.maximum(np.asarray(statistics, dtype=float), 0.0)
    m, k = d.size, int(df)
    if m < 2 or k < 1:
        raise DataError(problem("pooled_lr_test", allowed="two or more statistics on df >= 1", received=(m, k)))
    r = (1.0 + 1.0 / m) * float(np.var(np.sqrt(d), ddof=1))
    d2 = max(0.0, (float(d.mean()) / k - (m + 1.0) / (m - 1.0) * r) / (1.0 + r))
    if r <= 0:
        return k * d2, float(stats.chi2.sf(k * d2, k))
    v = k ** (-3.0 / m) * (m - 1.0) * (1.0 + 1.0 / r) ** 2
    return k * d2, float(stats.f.sf(d2, k, v))


def _pooled_compare(per_imputation: Sequence[Mapping[str, UpdateFit]], a: float):
    def compare(simpler: UpdateFit, extensive: UpdateFit, reached: bool) -> LRComparison:
        df = int(extensive.n_params - simpler.n_params)
        if df <= 0:
            return LRComparison(simpler.method, extensive.method, 0.0, df, math.nan, False, reached)
        d = [2.0 * (fits[extensive.method].loglik - fits[simpler.method].loglik) for fits in per_imputation]
        statistic, p = pooled_lr_test(d, df)
        return LRComparison(simpler.method, extensive.method, statistic, df, p, bool(p < a), reached)

    return compare


def _pool_fit(method: str, fits: Sequence[UpdateFit], m: int) -> UpdateFit:
    """One update pooled over the completed data sets: the mean of its thresholds and coefficients."""
    first = fits[0].model
    if any(f.model.design.to_dict() != first.design.to_dict() for f in fits[1:]):
        raise RiskvetError(
            f"updating: the {method} update has a different design in different completed data sets (a new predictor's spline "
            "knots or categories are learned from imputed values), so its coefficients cannot be pooled; give new predictors "
            "the form linear, or update on complete cases (missing_data.method: complete_case)")
    thresholds = np.mean([f.model.thresholds for f in fits], axis=0)
    coef = np.mean([f.model.coef for f in fits], axis=0)
    provenance = dict(first.provenance) | {"missing_data": {
        "m": m, "pooling": "Rubin's rules: the mean of the update's thresholds and coefficients over the completed data sets"}}
    model = first if method == "original" else _replace(first, thresholds=thresholds, coef=coef, provenance=provenance)
    return UpdateFit(method, model, fits[0].n_params, float(np.mean([f.loglik for f in fits])), _pooled_parameters(fits),
                     all(f.converged for f in fits), tuple(dict.fromkeys(w for f in fits for w in f.warnings)))


def _pooled_parameters(fits: Sequence[UpdateFit]) -> dict[str, Any]:
    """An update's own parameters (a shift, a slope, thresholds) pooled by Rubin's rules: the mean estimate, and for an
    estimate given with its standard error (``shift`` and ``shift_se``) the standard error of the total variance."""
    first = fits[0].parameters
    numeric = [k for k, v in first.items() if not isinstance(v, bool) and isinstance(v, (int, float, np.floating, list, tuple, np.ndarray))]
    values = {k: np.array([np.asarray(f.parameters[k], dtype=float) for f in fits]) for k in numeric}
    out: dict[str, Any] = {}
    for key, draws in values.items():
        if key.endswith("_se") and key[:-3] in values:
            out[key] = np.asarray(pool(values[key[:-3]], draws ** 2).se).tolist()
        else:
            out[key] = draws.mean(axis=0).tolist()
    return out


def update_model_imputed(
    model,
    frames: Sequence[pd.DataFrame],
    y: Any,
    *,
    alpha: float = 0.05,
    new_predictors: Mapping[str, Any] | None = None,
    cohort: str = "updating data",
    n_boot: int = 0,
    seed: int | None = None,
    n_jobs: int = 1,
    scheduler: str | None = None,
    max_failed_share: float = 0.1,
) -> UpdateResult:
    """Fit the updating hierarchy on every completed data set of a cohort, pool, and choose by the pooled closed test.

    Parameters are those of :func:`riskvet.validation.update.update_model`,
    with ``frames`` the m >= 2 completed data sets of the updating cohort
    (the same rows, outcome ``y``; every predictor and new predictor
    complete).

    Returns
    -------
    UpdateResult
        ``fits`` pooled over the completed data sets (each update's model
        file holds the mean of its parameters, with the imputation in its
        provenance; ``loglik`` the mean log-likelihood), ``closed_test`` on
        the D2-pooled likelihood-ratio statistics (``statistic`` is k D2),
        ``performance`` apparent as the mean over the completed data sets,
        optimism from the bootstrap of the first completed data set.
    """
    func = "update_model_imputed"
    model = _check_model(model, func)
    a = _check_alpha(alpha, func)
    _check_boot_options(n_boot, seed, max_failed_share, func)
    frames = list(frames)
    if len(frames) < 2 or any(not isinstance(f, pd.DataFrame) or len(f) != len(frames[0]) for f in frames):
        raise DataError(problem(f"{func}(frames=)", allowed="two or more completed data sets with the same rows",
                                received=[len(f) if isinstance(f, pd.DataFrame) else type(f).__name__ for f in frames]))
    new_predictors = dict(new_predictors or {})
    K = len(model.levels)
    yy = _check_y(np.asarray(y), len(frames[0]), K, func)
    per = [_fit_all(model, f, yy, new_predictors=new_predictors, cohort=cohort) for f in frames]
    fits = {method: _pool_fit(method, [p[method] for p in per], len(frames)) for method in per[0]}
    test = _closed_test_by(fits, a, _pooled_compare(per, a))
    rows: list[dict[str, Any]] = []
    for method in fits:
        rows += _summary_rows(method, average_summaries(_summary(yy, p[method].model.predict_proba(f)) for p, f in zip(per, frames)))
    table = _performance_table(rows)
    performance, boot_notes = _bootstrap_correction(
        _UpdateReplicate(model, frames[0], yy, new_predictors, a, cohort), table, chosen=test.chosen, methods=list(fits),
        n_boot=int(n_boot), seed=seed, n_jobs=n_jobs, scheduler=scheduler, max_failed_share=float(max_failed_share),
    )
    for note in boot_notes:
        warnings.warn(note, RiskvetWarning, stacklevel=2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        before = ordinal_calibration(yy, np.mean([model.predict_proba(f) for f in frames], axis=0))
        after = ordinal_calibration(yy, np.mean([fits[test.chosen].model.predict_proba(f) for f in frames], axis=0))
    notes = [f"{m}: {w}" for m, f in fits.items() for w in f.warnings] + boot_notes + [_BOOTSTRAP_NOTE, _OPTIMISM_NOTE]
    columns = list(model.design.sources) + list(new_predictors)
    return UpdateResult(
        cohort=cohort, data_sha256=frame_digest(frames[0], yy, columns=columns), n=int(yy.size), n_dropped=0,
        parent_sha256=model.digest(), fits=fits, closed_test=test, performance=performance,
        calibration_before=before, calibration_after=after, warnings=tuple(notes),
    )
