"""The derivation procedure on multiply imputed data.

:func:`impute_cohort` imputes a prepared cohort the way the study says
(``missing_data``); :func:`derive_imputed` runs the study's derivation on the
m completed data sets and returns one model whose coefficients are pooled by
Rubin's rules.

Variable selection respects the imputations by the *stacked* approach of
Wood, White & Royston (2008): the m completed data sets are stacked into one
of m n rows (a row the same in every completed data set kept once, with m
times the weight), each row weighted (1 - f) / m, with f the share of the
candidate predictors' cells that were missing, so that the stacked data
carry about the information of the observed data; the study's selection
(forward with cross-validation, backward by AIC, or none) then runs once on
the stacked rows.  The cross-validation folds keep the m copies of a person
together, so no person's imputed copy judges a fit to their other copies.
The design (spline knots, category levels) is learned on the stacked rows.
The chosen terms are then fitted on each completed data set, and their
estimates and covariances pooled (Rubin 1987): the mean of the estimates,
and the total covariance ``W + (1 + 1/m) B``.  The model's overall test is
the pooled Wald test D1 of Li, Raghunathan & Rubin (1991) with its F
reference distribution.

Splines, interactions and category codings are computed from the imputed
raw values in every completed data set, never imputed themselves.

References
----------
Rubin DB. Multiple Imputation for Nonresponse in Surveys. Wiley, 1987.

Li KH, Raghunathan TE, Rubin DB. Large-sample significance levels from
multiply imputed data using moment-based statistics and an F reference
distribution. Journal of the American Statistical Association
1991;86(416):1065-1073.

Wood AM, White IR, Royston P. How should variable selection be performed
with multiply imputed data? Statistics in Medicine 2008;27(17):3227-3246.

White IR, Royston P, Wood AM. Multiple imputation using chained equations:
issues and guidance for practice. Statistics in Medicine
2011;30(4):377-399.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from .._jsonable import to_jsonable
from ..errors import DataError, problem
from ..modelling.derive import Derivation, candidate_design
from ..modelling.fitter import CumulativeFit, LRTest, fit_cumulative
from ..modelling.folds import cluster_codes
from ..modelling.selection import select_terms
from .chained import Imputations, impute
from .rubin import PooledImputations, pool

__all__ = ["ImputedDerivation", "cohort_seed", "completed_cohort", "incomplete_share", "derive_imputed", "impute_cohort", "impute_rows", "imputations_needed",
           "missing_cell_share", "pool_fits"]

#: Fewest and most imputations the rule of thumb gives.
_FEWEST, _MOST = 5, 100


def imputations_needed(complete_share: float, *, minimum: int = _FEWEST, maximum: int = _MOST) -> int:
    """Number of imputations: at least the percentage of incomplete cases.

    Parameters
    ----------
    complete_share : float
        Share of people with every analysis column recorded, 0 to 1.
    minimum, maximum : int, keyword-only
        Fewest and most imputations returned (default 5 and 100).

    Returns
    -------
    int
        ``min(maximum, max(minimum, ceil(100 (1 - complete_share))))``.

    Raises
    ------
    DataError
        ``complete_share`` not a number from 0 to 1, or ``minimum`` and
        ``maximum`` not whole numbers with 1 <= minimum <= maximum.

    Notes
    -----
    With m imputations the Monte Carlo error of a pooled estimate shrinks
    like 1/sqrt(m); taking m at least the percentage of incomplete cases
    keeps it to about a tenth of the estimate's standard error for the
    amounts of missing data usually met (White, Royston & Wood 2011,
    section 7).  The percentage is rounded to 9 decimals before rounding up,
    so that 1 - 0.77 gives 23, not 24.

    Examples
    --------
    >>> imputations_needed(0.77)
    23
    >>> imputations_needed(0.98)
    5
    """
    for name, value in (("minimum", minimum), ("maximum", maximum)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
            raise DataError(problem(f"imputations_needed({name}=)", allowed="a whole number >= 1", received=value))
    if minimum > maximum:
        raise DataError(problem("imputations_needed(minimum=, maximum=)", allowed="minimum <= maximum", received=(minimum, maximum)))
    if isinstance(complete_share, bool) or not isinstance(complete_share, (int, float, np.integer, np.floating)) \
            or not 0.0 <= float(complete_share) <= 1.0:
        raise DataError(problem("imputations_needed(complete_share)", allowed="a share from 0 to 1", received=complete_share))
    percent = math.ceil(round(100.0 * (1.0 - float(complete_share)), 9))
    return int(min(maximum, max(minimum, percent)))


def cohort_seed(study, position: int) -> int:
    """The imputation seed of a study's cohort: ``missing_data.seed`` for the derivation cohort (position 0), and
    for the k-th validation cohort a seed drawn from ``SeedSequence([missing_data.seed, k])``, so that each cohort
    is imputed from a stream of its own and every stage imputes it alike."""
    seed = study.missing_data.seed
    return int(seed) if position == 0 else int(np.random.SeedSequence([int(seed), int(position)]).generate_state(1)[0])


def incomplete_share(study, frame: pd.DataFrame) -> float:
    """The share of rows missing any column of the imputation models other than the outcome (predictors and auxiliary
    columns): the share the rule of thumb for m is applied to."""
    columns = list(study.predictors.in_analysis) + [c for c in study.missing_data.auxiliary if c in frame.columns]
    return float(frame[columns].isna().any(axis=1).mean()) if len(frame) else 0.0


def missing_cell_share(frame: pd.DataFrame, columns: Sequence[str]) -> float:
    """The share f of the cells of ``columns`` that are missing (the f of the stacked weights (1 - f) / m)."""
    cells = frame[list(columns)]
    return float(cells.isna().to_numpy().mean()) if cells.size else 0.0


def _imputation_frame(study, frame: pd.DataFrame, y: np.ndarray) -> tuple[pd.DataFrame, dict]:
    """Predictors, auxiliary columns and the outcome (as an ordered category), and the category methods."""
    section = study.missing_data
    columns = list(study.predictors.in_analysis) + [c for c in section.auxiliary if c not in study.predictors.in_analysis]
    columns += [c for c in study.updating.new_predictors if c in frame.columns and c not in columns]  # an updating cohort's
    data = frame[columns].copy()
    outcome = study.outcome.column
    data[outcome] = pd.Categorical(np.asarray(y, dtype=np.int64), categories=range(len(study.outcome.ordered_levels)), ordered=True)
    methods = {name: method for name, method in section.methods.items() if data[name].isna().any()}
    return data, methods


def _ordered_levels(study, data: pd.DataFrame, methods: dict) -> dict:
    """Level order of each category imputed by the cumulative model: the study's ``levels`` when listed, else as sorted text."""
    out = {}
    for name, method in methods.items():
        spec = study.predictors.candidates.get(name)
        if method == "cumulative" and not pd.api.types.is_numeric_dtype(data[name]):
            out[name] = list(spec.levels) if spec is not None and spec.levels else sorted(data[name].dropna().astype(str).unique())
    return out


def impute_rows(study, frame: pd.DataFrame, y: np.ndarray, *, m: int, seed: int) -> Imputations:
    """Impute the predictors and auxiliary columns of ``frame`` m times, the outcome ``y`` in every model.

    Parameters
    ----------
    study : Study
        With ``missing_data.method: multiple_imputation``: its iterations,
        donors, auxiliary columns and per-column methods are used.
    frame : DataFrame
        Rows of a prepared cohort (predictors may be missing).
    y : array of int
        Outcome codes 0..K-1 (complete).
    m, seed : int
        Imputations and the seed of their streams.
    """
    if not study.imputing:
        raise DataError("impute_rows: the study's missing_data.method is not multiple_imputation")
    section = study.missing_data
    data, methods = _imputation_frame(study, frame, y)
    return impute(data, m=m, seed=seed, iterations=section.iterations, donors=section.donors, methods=methods or None,
                  outcome=study.outcome.column, ordered=_ordered_levels(study, data, methods) or None)


def impute_cohort(study, cohort, *, m: int | None = None, seed: int | None = None) -> Imputations:
    """Multiply impute a prepared cohort as the study's ``missing_data`` section says.

    Parameters
    ----------
    study : Study
    cohort : PreparedCohort
        Read with ``missing="multiple_imputation"`` (:func:`riskvet.intake.data.load_cohorts`
        does so when the study imputes).
    m : int, optional
        Imputations; ``missing_data.m``, else :func:`imputations_needed` of
        the cohort's share of complete cases.
    seed : int, optional
        ``missing_data.seed`` when omitted.

    Returns
    -------
    Imputations
    """
    if getattr(cohort, "missing", None) != "multiple_imputation":
        raise DataError(problem("impute_cohort: cohort", allowed="a cohort prepared with missing='multiple_imputation'",
                                received=getattr(cohort, "missing", type(cohort).__name__)))
    section = study.missing_data
    if m is None:
        m = section.m if section.m is not None else imputations_needed(1.0 - incomplete_share(study, cohort.frame))
    try:
        return impute_rows(study, cohort.frame, np.asarray(cohort.y), m=int(m), seed=section.seed if seed is None else int(seed))
    except DataError as exc:
        raise DataError(f"{cohort.source} ({cohort.label} cohort): cannot impute: {exc}") from None


def _pooled_wald(P: np.ndarray, U: np.ndarray, B: np.ndarray, first: int) -> LRTest:
    """The D1 test (Li, Raghunathan & Rubin 1991) that every coefficient (from column ``first``) is 0, as a chi-squared-like statistic k D1.

    ``D1 = q' W^-1 q / (k (1 + r1))`` with ``r1 = (1 + 1/m) tr(B W^-1) / k``
    (W the mean within-imputation covariance, B the between-imputation
    covariance), referred to ``F(k, v1)``.
    """
    m, k = P.shape[0], P.shape[1] - first
    if k == 0:
        return LRTest(statistic=0.0, df=0, p=math.nan)
    q = P[:, first:].mean(axis=0)
    Us, Bs = U[first:, first:], B[first:, first:]
    try:
        r1 = (1.0 + 1.0 / m) * float(np.trace(Bs @ np.linalg.inv(Us))) / k
        d1 = float(q @ np.linalg.solve(Us, q)) / (k * (1.0 + r1))
    except np.linalg.LinAlgError:
        return LRTest(statistic=math.nan, df=k, p=math.nan)
    t = k * (m - 1)
    if r1 <= 0:
        df2 = math.inf
    elif t > 4:
        df2 = 4.0 + (t - 4.0) * (1.0 + (1.0 - 2.0 / t) / r1) ** 2
    else:
        df2 = t * (1.0 + 1.0 / k) * (1.0 + 1.0 / r1) ** 2 / 2.0
    p = float(stats.chi2.sf(k * d1, k)) if math.isinf(df2) else float(stats.f.sf(d1, k, df2))
    return LRTest(statistic=k * d1, df=k, p=p)


def pool_fits(fits: Sequence[CumulativeFit], *, df_complete: float | None = None) -> tuple[CumulativeFit, PooledImputations]:
    """One fit from the fits of the same model on m completed data sets, by Rubin's rules.

    The estimates are the means over the fits, the covariance the total
    covariance ``W + (1 + 1/m) B`` (W the mean of the fits' covariances, B
    the covariance of their estimates between imputations).  The
    likelihood, AIC and BIC of a pooled model are not defined (NaN);
    ``lr_test`` holds the pooled Wald test D1 of all coefficients.

    Returns
    -------
    (CumulativeFit, PooledImputations)
        The pooled fit (prediction, parameter table with intervals on the
        total variance) and the per-parameter pooling (degrees of freedom,
        relative increase in variance, fraction of missing information).
    """
    fits = list(fits)
    if len(fits) < 2:
        raise DataError(problem("pool_fits: fits", allowed="the fits of one model on two or more completed data sets", received=len(fits)))
    first = fits[0]
    index = first.params.index
    if any(list(f.params.index) != list(index) for f in fits):
        raise DataError("pool_fits: the fits have different parameters; fit the same terms on every completed data set")
    m = len(fits)
    P = np.vstack([f.params.to_numpy(dtype=float) for f in fits])
    U = np.mean([f.cov.to_numpy(dtype=float) for f in fits], axis=0)
    B = np.atleast_2d(np.cov(P, rowvar=False, ddof=1))
    T = U + (1.0 + 1.0 / m) * B
    rubin = pool(P, np.vstack([np.diag(f.cov.to_numpy(dtype=float)) for f in fits]), df_complete=df_complete)
    est = P.mean(axis=0)
    n_thresholds = first.thresholds.shape[0]
    thresholds = pd.Series(est[:n_thresholds], index=first.thresholds.index)
    if first.proportional:
        coef = pd.Series(est[n_thresholds:], index=first.coef.index)
    else:
        coef = pd.DataFrame(est[n_thresholds:].reshape(first.coef.shape), index=first.coef.index, columns=first.coef.columns)
    separation = tuple(c for c in first.columns if any(c in f.separation for f in fits))
    messages = tuple(dict.fromkeys(w for f in fits for w in f.warnings))
    pooled = dataclasses.replace(
        first, thresholds=thresholds, coef=coef, params=pd.Series(est, index=index),
        cov=pd.DataFrame(T, index=index, columns=index), se=pd.Series(np.sqrt(np.diag(T)), index=index),
        loglik=math.nan, loglik_null=math.nan, aic=math.nan, bic=math.nan, lr_test=_pooled_wald(P, U, B, n_thresholds),
        converged=all(f.converged for f in fits), iterations=max(f.iterations for f in fits),
        n_crossing=max(f.n_crossing for f in fits), separation=separation, warnings=messages,
        loglik_penalized=math.nan, profile=None, profile_confidence=math.nan,
        interval_kind="none" if first.interval_kind == "none" else "Wald",
    )
    return pooled, rubin


@dataclass(frozen=True)
class ImputedDerivation(Derivation):
    """A model derived by the study's procedure on m completed data sets.

    Attributes (besides those of :class:`~riskvet.modelling.derive.Derivation`,
    whose ``fit`` is the pooled fit)
    ----------
    fits : tuple of CumulativeFit
        The chosen terms fitted on each completed data set.
    pooling : PooledImputations
        Rubin's rules per parameter (order of ``fit.params``).
    m : int
        Completed data sets.
    missing_share : float
        f, the share of the candidate predictors' cells that were missing.
    stacked_weight : float
        (1 - f) / m, the weight of every stacked row in the selection.
    """

    fits: tuple = ()
    pooling: PooledImputations | None = None
    m: int = 0
    missing_share: float = 0.0
    stacked_weight: float = 1.0

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(super().to_dict() | {
            "imputations": self.m, "missing_share": self.missing_share, "stacked_weight": self.stacked_weight,
            "pooling": None if self.pooling is None else self.pooling.to_dict(),
        })


def _fit_each(study, design, completed: Sequence[pd.DataFrame], y: np.ndarray, *, firth: bool) -> list[CumulativeFit]:
    return [fit_cumulative(design.transform(frame), y, link=study.model.link, proportional=study.model.proportional,
                           n_levels=len(study.outcome.ordered_levels), firth=firth) for frame in completed]


def _stacked_rows(designs: Sequence[pd.DataFrame], y: np.ndarray, ids: np.ndarray, weight: float):
    """The stacked design rows with their weights, a row the same in every completed data set kept once.

    A person with nothing imputed (or imputed alike every time) has m
    identical stacked rows of weight (1 - f)/m; one row of weight m times
    that has the same likelihood, score and information, and the same
    fold (folds are dealt by person).  On the demo data (13% of people
    incomplete) the selection runs on 3,052 rows instead of 9,920 for
    m = 5; measured, ``derive_imputed`` with m = 10 there went from 1.26 s
    to 0.52 s (under the profiler), and in ``bench_imputation.py`` a
    replicate's derivation from 2.13 s to 0.94 s.  Returns the rows, outcome
    codes, weights and the person of each row.
    """
    m = len(designs)
    first = designs[0].to_numpy(dtype=float)
    same = np.ones(first.shape[0], dtype=bool)
    for other in designs[1:]:
        same &= np.all(other.to_numpy(dtype=float) == first, axis=1)
    parts = [first[same]] + [d.to_numpy(dtype=float)[~same] for d in designs]
    X = pd.DataFrame(np.vstack(parts), columns=designs[0].columns)
    y_stacked = np.concatenate([y[same]] + [y[~same]] * m)
    w = np.concatenate([np.full(int(same.sum()), m * weight), np.full(m * int((~same).sum()), weight)])
    who = np.concatenate([ids[same]] + [ids[~same]] * m)
    return X, y_stacked, w, who


def derive_imputed(
    study,
    completed: Sequence[pd.DataFrame],
    y: np.ndarray,
    *,
    missing_share: float,
    seed: int | None = None,
    persons: np.ndarray | None = None,
) -> ImputedDerivation:
    """Run the study's derivation procedure on m completed data sets (see the module description).

    Parameters
    ----------
    study : Study
    completed : sequence of DataFrame
        The m >= 2 completed data sets (the same rows in the same order).
    y : array of int
        Outcome codes 0..K-1 of those rows.
    missing_share : float, keyword-only
        f, the share of the candidate predictors' cells missing before
        imputation (:func:`missing_cell_share`).
    seed : int, optional, keyword-only
        Seed of the selection's folds; ``selection.seed`` when omitted.
    persons : array, optional, keyword-only
        The person of every row (default: each row its own person).  A
        bootstrap resample passes the original row of each drawn row, and a
        study with ``data.cluster_kind: person`` the person's label, so that
        every copy of a person falls in one fold.

    Returns
    -------
    ImputedDerivation
    """
    completed = list(completed)
    m = len(completed)
    y = np.asarray(y, dtype=np.int64)
    if m < 2 or any(len(frame) != y.shape[0] for frame in completed):
        raise DataError(problem("derive_imputed: completed", allowed=f"two or more completed data sets of {y.shape[0]} rows each",
                                received=[len(frame) for frame in completed]))
    if not 0.0 <= float(missing_share) < 1.0:
        raise DataError(problem("derive_imputed: missing_share", allowed="a share from 0 up to (not including) 1", received=missing_share))
    design = candidate_design(study, pd.concat(completed, ignore_index=True))  # knots at quantiles of the stacked rows
    ids = np.arange(y.shape[0]) if persons is None else np.asarray(persons)
    weight = (1.0 - float(missing_share)) / m
    firth = study.model.estimation == "firth"
    # persons numbered in order of first appearance in one data set, so the folds are those of the full stacking
    X, y_stacked, w, who = _stacked_rows([design.transform(frame) for frame in completed], y, cluster_codes(ids), weight)
    result = select_terms(
        X, y_stacked, groups=design.term_columns,
        forced=[t for t in study.predictors.forced if t in design.term_columns], method=study.selection.method,
        n_folds=study.selection.folds, seed=study.selection.seed if seed is None else seed, link=study.model.link,
        proportional=study.model.proportional, weights=w, firth=firth, on_separation="warn", clusters=who,
    )
    chosen = set(result.terms)
    final = design.subset([t.name for t in design.terms if t.name in chosen])
    fits = _fit_each(study, final, completed, y, firth=firth)
    refit = False
    if not firth and study.model.on_separation == "firth" and any(f.separation for f in fits):
        fits, refit = _fit_each(study, final, completed, y, firth=True), True
    pooled, rubin = pool_fits(fits, df_complete=max(y.shape[0] - fits[0].n_params, 1))
    selection = dataclasses.replace(result, fit=pooled, refit_with_firth=result.refit_with_firth or refit)
    return ImputedDerivation(candidate_design=design, design=final, selection=selection, fits=tuple(fits), pooling=rubin,
                             m=m, missing_share=float(missing_share), stacked_weight=weight)


def completed_cohort(cohort, completed: pd.DataFrame):
    """The cohort with its predictor and auxiliary columns taken from one completed data set (every other column kept)."""
    frame = cohort.frame.copy()
    for name in list(cohort.predictors) + list(getattr(cohort, "auxiliary", ())) + list(getattr(cohort, "new_predictors", ())):
        frame[name] = completed[name].to_numpy()
    return dataclasses.replace(cohort, frame=frame)
