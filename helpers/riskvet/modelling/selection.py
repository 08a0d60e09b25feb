"""Variable selection for cumulative-link models, on a model matrix grouped by term.

A term (a predictor) owns one or more columns of the model matrix: a
spline basis or the indicators of a categorical predictor enter and leave
together.  Three methods are offered, as the field uses them (and warns about
them; Harrell 2015, section 4.3):

* ``"forward"``: a forward stepwise path by score tests, the model size
  chosen by k-fold cross-validated test log-likelihood, the path then re-run
  on all data up to that size;
* ``"backward"``: backward elimination by AIC from the full model;
* ``"none"``: the pre-specified model with every term;
* ``"ridge"``, ``"lasso"``, ``"elastic_net"``: every term in one penalised
  fit, the penalty chosen by k-fold cross-validated log-likelihood on
  standardised columns (:func:`riskvet.modelling.penalized.tune_penalty`);
  a term whose coefficients the lasso part sets to zero is left out, and a
  multi-column term is penalised as a group, so it enters or leaves whole.

Firth's bias-reduced estimation (``firth=True``) is a fitting option for
``"forward"``, ``"backward"`` and ``"none"``: every fit of the procedure is
then a Firth fit.

Selection is a deterministic function of the data, the options and the
seed, so that a bootstrap can repeat it in every resample.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import special
from scipy.linalg import lapack

from .._jsonable import to_jsonable
from ..errors import ConvergenceWarning, DesignError, FitError, RiskvetWarning, SeparationWarning, problem
from .fitter import (
    CumulativeFit,
    _RawFit,
    _as_matrix,
    _as_outcome,
    _as_vector,
    DEFAULT_MAX_ITER,
    DEFAULT_TOL,
    _check_levels,
    _chol_scaled,
    _chol_solve,
    _column_screen,
    _Design,
    _evaluate,
    _fit_design,
    _grad_hess,
    _level_layout,
    _raise_if_collinear,
    _separated_columns,
    _sorted_design,
    fit_cumulative,
    one_blas_thread,
)
from .folds import cluster_folds
from .links import LINKS

__all__ = ["select_terms", "SelectionResult", "METHODS"]

METHODS = ("forward", "backward", "none", "ridge", "lasso", "elastic_net")
#: The methods whose model is one penalised fit, and the l1 share of their penalty (elastic net: the caller's).
PENALIZED = {"ridge": 0.0, "lasso": 1.0, "elastic_net": None}
#: What happens when the chosen model's maximum-likelihood fit is separated.
ON_SEPARATION = ("warn", "firth")

_PATH_COLUMNS = ["step", "action", "term", "criterion", "statistic", "df", "p", "loglik", "aic", "n_params"]


@dataclasses.dataclass(frozen=True, eq=False)
class SelectionResult:
    """Outcome of :func:`select_terms`.

    Attributes
    ----------
    method : str
        ``"forward"``, ``"backward"`` or ``"none"``.
    terms : tuple of str
        Terms of the chosen model: forced terms first, then the others in
        entry order (forward) or in the order of ``groups`` (backward, none).
    forced : tuple of str
        Terms kept in every model.
    columns : tuple of str
        Model-matrix columns of the chosen model, in the order of ``terms``.
    path : pandas.DataFrame
        One row per step on all data: step, action ("start", "add",
        "remove"), term, criterion ("score" or "aic"), statistic (score
        statistic, or the AIC after the removal), df, p (score test, or the
        likelihood-ratio test of the removal), loglik, aic and n_params of
        the model after the step.
    cv : pandas.DataFrame or None
        Forward method: for each model size (number of terms entered beyond
        the forced ones) the mean over folds of the test log-likelihood per
        observation, its standard error across folds, and the number of folds
        whose path reached that size.  None for the other methods.
    cv_by_fold : pandas.DataFrame or None
        Long table: fold, size, test log-likelihood per observation.
    size : int or None
        Chosen number of non-forced terms (forward).
    fit : CumulativeFit
        The chosen model fitted on all data.
    seed : int or None
        Seed of the fold assignment (None if a Generator was given or no
        cross-validation was run).
    n_folds : int or None
        Number of folds (forward).
    link : str
        Link of every fit.
    proportional : bool
        Model form of every fit.
    warnings : tuple of str
        Trouble met along the way (fold paths cut short, fits that did not
        converge or hinted at separation) and the final fit's warnings.
    penalty : PenaltyChoice or None
        The penalised methods: the cross-validated choice of the penalty
        (its curve, the chosen ``alpha``); None for the other methods.
    refit_with_firth : bool
        Whether the chosen model's maximum-likelihood fit was separated and
        ``on_separation="firth"`` refitted it with Firth's method.
    """

    method: str
    terms: tuple
    forced: tuple
    columns: tuple
    path: pd.DataFrame
    cv: pd.DataFrame | None
    cv_by_fold: pd.DataFrame | None
    size: int | None
    fit: CumulativeFit
    seed: int | None
    n_folds: int | None
    link: str
    proportional: bool
    warnings: tuple
    penalty: Any = None
    refit_with_firth: bool = False

    def to_frame(self) -> pd.DataFrame:
        """The selection path (see ``path``)."""
        return self.path.copy()

    def to_dict(self) -> dict:
        return to_jsonable(
            {
                "method": self.method,
                "terms": list(self.terms),
                "forced": list(self.forced),
                "columns": list(self.columns),
                "size": self.size,
                "seed": self.seed,
                "n_folds": self.n_folds,
                "link": self.link,
                "proportional": self.proportional,
                "path": self.path,
                "cv": self.cv,
                "warnings": list(self.warnings),
                "penalty": None if self.penalty is None else self.penalty.to_dict(),
                "refit_with_firth": self.refit_with_firth,
                "fit": self.fit.to_dict(),
            }
        )


# ---------------------------------------------------------------------------
# Pieces
# ---------------------------------------------------------------------------


def _log_chi2_sf(stat: float, df: int) -> float:
    """log P(chi2_df > stat), finite far into the tail.

    Notes
    -----
    Below 1e-300 the upper incomplete gamma function is replaced by its
    asymptotic form ``Gamma(s, x) ~ x^(s-1) e^(-x) (1 + (s-1)/x)`` with
    ``s = df/2``, ``x = stat/2`` (Abramowitz & Stegun 1964, section 6.5), good enough to
    rank terms whose p-values underflow.
    """
    sf = special.chdtrc(df, stat)
    if sf > 1e-300:
        return math.log(sf)
    s = df / 2.0
    x = stat / 2.0
    return (s - 1.0) * math.log(x) - x - special.gammaln(s) + math.log1p((s - 1.0) / x)


def _log_chi2_sf_many(stats: np.ndarray, df: np.ndarray) -> np.ndarray:
    """:func:`_log_chi2_sf` of each statistic (0 where the statistic is not positive or NaN)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        sf = special.chdtrc(df, stats)
        out = np.where(stats > 0, np.log(sf), 0.0)
    for i in np.flatnonzero((stats > 0) & ~(sf > 1e-300)):
        out[i] = _log_chi2_sf(float(stats[i]), int(df[i]))
    return out


class _Problem:
    """The data of one selection, rows sorted by outcome level."""

    def __init__(self, X, y, K, w, unit, link, proportional, term_cols, names, term_names, firth=False):
        # Columns are taken from the transposed copy: a design's columns are
        # then C-ordered rows of it, and the fitter's transposed copy is free.
        self.XT = np.ascontiguousarray(X.T)
        self.y = y
        self.K = K
        self.w = w
        self.unit = unit
        self.link = link
        self.proportional = proportional
        self.term_cols = term_cols  # list of column-index lists, by term position
        self.names = names  # column names
        self.term_names = term_names
        self.m = K - 1
        self.firth = bool(firth)
        self._all_rows = None

    def per_col(self) -> int:
        return 1 if self.proportional else self.m

    def rows(self, rows) -> "_Rows":
        """The fit set of ``rows`` (None: all rows, kept for every later call)."""
        if rows is not None:
            return _Rows(self, rows)
        if self._all_rows is None:
            self._all_rows = _Rows(self, None)
        return self._all_rows

    def fit(self, rows, cols, start=None):
        return self.rows(rows).fit(cols, start)


class _Rows:
    """The rows of one fit set (all rows, or a fold's training rows), prepared once for all its fits.

    A forward path fits the same rows again and again, one term more each
    time.  What depends on the rows alone is computed here once: the level
    layout, the columns centred at their weighted means (the fitter's own
    parameterisation, see :func:`riskvet.modelling.fitter._fit_arrays`) and
    the separation screen's column summaries.  Building the design at every
    fit took about 0.17 ms and the screen's passes over the columns about
    0.12 ms, of about 1 ms for a warm-started fit (1,800 rows, 15 columns,
    measured on the project's 2-core machine).

    Centring all columns at once gives each column the centre it gets when
    centred alone: its weighted mean over these rows.
    """

    def __init__(self, prob: _Problem, rows):
        self.prob = prob
        self.y = prob.y if rows is None else prob.y[rows]
        self.w = prob.w if rows is None else prob.w[rows]
        _check_levels(self.y, prob.K, self.w, None)
        self.XT = prob.XT if rows is None else np.ascontiguousarray(prob.XT[:, rows])  # natural scale
        self.mu = (self.XT @ self.w) / float(self.w.sum())
        self.XTc = self.XT - self.mu[:, None]
        self.layout = _level_layout(self.y, prob.K)
        self.screen = _column_screen(self.XTc, self.layout[0], prob.K, prob.proportional)
        self.last_scores = None  # (fit, score, information, first position of each candidate) of the last score tests

    def design(self, cols) -> _Design:
        """The centred design of ``cols`` on these rows."""
        p = self.prob
        if not cols:
            return _sorted_design(np.empty((0, self.y.shape[0])), self.y, p.K, self.w, None, None, p.link, p.proportional,
                                  p.unit, None, self.layout)
        return _sorted_design(self.XTc[cols], self.y, p.K, self.w, None, None, p.link, p.proportional, p.unit, self.mu[cols],
                              self.layout)

    def fit(self, cols, start=None, extends=None):
        """Fit ``cols`` from ``start``; ``extends`` is ``(raw, term)`` when ``start`` is the fit ``raw``
        with ``term`` added at zero (its log-likelihood and pieces are then those at ``start``, and
        :meth:`first_step` may hold the first step)."""
        p = self.prob
        names = [p.names[c] for c in cols]
        seed = None
        if extends is not None:
            raw, term = extends
            step = self.first_step(raw, term)
            if step is not None:
                seed = ((raw.loglik, raw.pieces), step)
        return _fit_design(
            self.design(cols), start=start, max_iter=DEFAULT_MAX_ITER, tol=DEFAULT_TOL, need_cov=False, firth=p.firth,
            check_collinear=lambda: _raise_if_collinear(self.XT[cols].T, self.w, names),
            screen=(self.screen[0][cols], self.screen[1][cols]), seed=seed,
        )

    def first_step(self, raw, term) -> np.ndarray | None:
        """Newton's first step for the model of ``raw`` with ``term`` added, from the last score tests.

        Notes
        -----
        Started at the current estimates with the new coefficients zero,
        Newton's first step solves ``I d = U`` with the score and
        information of the larger model at that point, which the score
        tests have just computed (for every candidate at once).  Handing the
        step to the fit saves it one evaluation, one gradient and Hessian and
        one factorisation: over three bootstrap replicates of the benchmark
        (641 fits), 3,037 evaluations and 1,829 Hessians instead of 3,579 and
        2,365 (counted by cProfile).  The step is
        the one the fit would compute, to rounding (Newton steps do not
        depend on the centring of the columns).  None when the tests were
        for another model, under Firth's likelihood, or when the block is
        not positive definite (the fit then computes its own step).
        """
        last = self.last_scores
        if last is None or last[0] is not raw or self.prob.firth:
            return None
        _, g, info, offsets = last
        q = raw.params.shape[0]
        width = len(self.prob.term_cols[term]) * self.prob.per_col()
        idx = np.concatenate([np.arange(q), np.arange(offsets[term], offsets[term] + width)])
        fac = _chol_scaled(info[idx][:, idx])
        if fac is None:
            return None
        return _chol_solve(fac, g[idx])

    def test_loglik(self, test_rows, cols, params) -> float:
        """Weighted mean log-probability of the observed levels of ``test_rows`` (a :class:`_Held`)."""
        p = self.prob
        d = _sorted_design(test_rows.XT[cols], test_rows.y, p.K, test_rows.w, None, None, p.link, p.proportional, p.unit,
                           None, test_rows.layout)
        ll = _evaluate(d, params)[0]
        return ll / test_rows.total if np.isfinite(ll) else -math.inf

    def score_tests(self, raw, cols, candidates):
        """Score statistic, df and log p-value of adding each candidate term.

        Notes
        -----
        At the current estimates (candidate coefficients zero) with score
        ``U`` and observed information ``I`` of the model holding every
        candidate column, the statistic of candidate ``g`` is
        ``U_g' S_g^{-1} U_g`` with ``S_g = I_gg - I_gc I_cc^{-1} I_cg`` the
        information of ``g`` adjusted for the current parameters ``c`` (Rao
        1948), chi-squared with ``n_columns(g)`` (times K-1 if
        non-proportional) df.  A candidate whose adjusted information is
        numerically zero (a column collinear with the model, in this subset
        of rows) cannot enter.

        The score and information are kept (``self.last_scores``): they are
        also the first Newton step of the model with the chosen term added
        (:meth:`first_step`).
        """
        term_cols = self.prob.term_cols
        cand_cols = [c for t in candidates for c in term_cols[t]]
        Xs = self.XT[cols + cand_cols].T
        g, H = _grad_hess(raw.design, raw.pieces, X=Xs)
        info = -H
        q = raw.params.shape[0]
        # LAPACK's Cholesky and triangular solve directly: the same factor and
        # solution as np.linalg.cholesky and a general solve, in fewer calls.
        L, status = lapack.dpotrf(info[:q, :q], lower=1, clean=1)
        if status != 0:
            return [(t, math.nan, 0, math.nan) for t in candidates]
        Z = lapack.dtrtrs(L, info[:q, q:], lower=1)[0]
        S = info[q:, q:] - Z.T @ Z
        U = g[q:]
        k = self.prob.per_col()
        widths = np.array([len(term_cols[t]) * k for t in candidates], dtype=np.int64)
        begins = np.cumsum(widths) - widths
        self.last_scores = (raw, g, info, dict(zip(candidates, (q + begins).tolist())))
        s_diag = S.diagonal()
        # Adjusted information numerically zero relative to the unadjusted one:
        # the column is (in these rows) a combination of the model's columns.
        degenerate = np.logical_or.reduceat(s_diag <= 1e-10 * np.maximum(info.diagonal()[q:], 1e-300), begins)
        # Single-column terms all at once (the statistic U^2 / S); the loop
        # over candidates cost more than the arithmetic.
        with np.errstate(divide="ignore", invalid="ignore"):
            stats = np.where(widths == 1, U[begins] * U[begins] / s_diag[begins], math.nan)
        for i in np.flatnonzero((widths > 1) & ~degenerate):
            sl = slice(begins[i], begins[i] + widths[i])
            try:
                stats[i] = U[sl] @ np.linalg.solve(S[sl, sl], U[sl])
            except np.linalg.LinAlgError:
                degenerate[i] = True
        stats = np.maximum(stats, 0.0)
        logp = _log_chi2_sf_many(stats, widths)
        return [(t, math.nan, int(wd), math.nan) if bad else (t, float(st), int(wd), float(lp))
                for t, st, wd, lp, bad in zip(candidates, stats, widths, logp, degenerate)]


class _Held:
    """Held-out rows of a fold, prepared once for the test log-likelihood of every model on its path."""

    def __init__(self, prob: _Problem, rows):
        self.y = prob.y[rows]
        self.w = np.ones(len(rows)) if prob.unit else prob.w[rows]
        self.total = float(self.w.sum())
        self.XT = np.ascontiguousarray(prob.XT[:, rows])
        self.layout = _level_layout(self.y, prob.K)


def _aic(raw) -> float:
    return -2.0 * raw.loglik + 2.0 * raw.params.shape[0]


def _trouble(raw, cols: list[int], known: list[frozenset]) -> tuple[int, int]:
    """(did not converge, separated) for one fit.

    The separation check (a linear programme) runs only on suspicion, and
    not at all when the model holds a set of columns already found to
    separate these rows: adding columns cannot undo a separation, since the
    separating direction remains available.
    """
    separated = 0
    if raw.suspect_separation:
        if any(k <= set(cols) for k in known):
            separated = 1
        else:
            found = _separated_columns(raw.design)
            if found:
                known.append(frozenset(cols[j] for j in found))
                separated = 1
    return int(not raw.converged and not separated), separated


def _forward(prob: _Problem, rows, forced, free, max_size, test_rows=None):
    """Forward path from the forced terms; returns steps, test log-likelihoods, trouble."""
    terms = list(forced)
    cols = [c for t in terms for c in prob.term_cols[t]]
    fitset = prob.rows(rows)
    held = _Held(prob, test_rows) if test_rows is not None else None
    raw = fitset.fit(cols)
    steps = [("start", None, math.nan, 0, math.nan, raw)]
    tests = [fitset.test_loglik(held, cols, raw.params)] if held is not None else []
    known_separations: list[frozenset] = []
    trouble = np.array(_trouble(raw, cols, known_separations))
    stop_reason = None
    remaining = list(free)
    while len(terms) - len(forced) < max_size and remaining:
        scores = [s for s in fitset.score_tests(raw, cols, remaining) if not math.isnan(s[1])]
        if not scores:
            stop_reason = "no remaining term could enter (collinear with the model)"
            break
        # Smallest p-value; underflowing p-values are ranked by the log tail,
        # then by statistic per df, then by term order (stable).
        best = min(scores, key=lambda s: (s[3], -s[1] / max(s[2], 1)))
        t = best[0]
        new_cols = cols + list(prob.term_cols[t])
        start = np.r_[raw.params, np.zeros(len(prob.term_cols[t]) * prob.per_col())]
        try:
            new_raw = fitset.fit(new_cols, start=start, extends=(raw, t))
        except FitError as exc:
            stop_reason = f"fit after adding {prob.term_names[t]!r} failed: {exc}"
            break
        raw, cols = new_raw, new_cols
        terms.append(t)
        remaining.remove(t)
        trouble += _trouble(raw, cols, known_separations)
        steps.append(("add", t, best[1], best[2], best[3], raw))
        if held is not None:
            tests.append(fitset.test_loglik(held, cols, raw.params))
    return terms, cols, raw, steps, tests, trouble, stop_reason


def _path_frame(prob: _Problem, steps, criterion: str) -> pd.DataFrame:
    rows = []
    for i, (action, t, stat, df, logp, raw) in enumerate(steps):
        if criterion == "score":
            pval = math.exp(logp) if not math.isnan(logp) else math.nan
        else:
            pval = logp  # backward steps carry the LR p-value directly
        rows.append(
            {
                "step": i,
                "action": action,
                "term": "" if t is None else prob.term_names[t],
                "criterion": "" if action == "start" else criterion,
                "statistic": stat,
                "df": int(df),
                "p": pval,
                "loglik": raw.loglik,
                "aic": _aic(raw),
                "n_params": int(raw.params.shape[0]),
            }
        )
    return pd.DataFrame(rows, columns=_PATH_COLUMNS)


def _folds(y: np.ndarray, n_folds: int, rng: np.random.Generator) -> np.ndarray:
    """Fold labels stratified by level: each level's rows shuffled and dealt in turn."""
    fold = np.empty(y.shape[0], dtype=np.int64)
    offset = 0
    for k in range(int(y.max()) + 1):
        idx = np.flatnonzero(y == k)
        idx = idx[rng.permutation(idx.shape[0])]
        fold[idx] = (offset + np.arange(idx.shape[0])) % n_folds
        offset += idx.shape[0]
    return fold


# ---------------------------------------------------------------------------
# Public function
# ---------------------------------------------------------------------------


def _validate_groups(columns: tuple[str, ...], groups, forced) -> tuple[list[str], list[list[int]], list[int]]:
    if not isinstance(groups, Mapping) or not groups:
        raise DesignError(problem("groups", allowed="a non-empty mapping of term name to a list of column names", received=groups if not isinstance(groups, Mapping) else "an empty mapping"))
    names, cols = [], []
    owner: dict[str, str] = {}
    for term, members in groups.items():
        members = [members] if isinstance(members, str) else list(members)
        if not members:
            raise DesignError(problem(f"groups[{term!r}]", allowed="at least one column name", received=members))
        missing = [c for c in members if c not in columns]
        if missing:
            raise DesignError(problem(f"groups[{term!r}]", allowed=f"column names of X {list(columns)}", received=f"unknown {missing}"))
        for c in members:
            if c in owner:
                raise DesignError(problem(f"groups[{term!r}]", allowed="each column in one term only", received=f"{c!r} also in term {owner[c]!r}"))
            owner[c] = str(term)
        names.append(str(term))
        cols.append([columns.index(c) for c in members])
    loose = [c for c in columns if c not in owner]
    if loose:
        raise DesignError(problem("groups", allowed="every column of X in some term", received=f"columns in no term {loose}"))
    if isinstance(forced, str):
        forced = [forced]
    forced = list(forced)
    unknown = [t for t in forced if t not in names]
    if unknown:
        raise DesignError(problem("forced", allowed=f"term names among {names}", received=unknown))
    forced_idx = []
    for t in forced:
        i = names.index(t)
        if i not in forced_idx:
            forced_idx.append(i)
    return names, cols, forced_idx


def select_terms(
    X,
    y,
    *,
    groups: Mapping[str, Sequence[str]],
    forced: Sequence[str] = (),
    method: str = "forward",
    n_folds: int = 10,
    seed=0,
    link: str = "logit",
    proportional: bool = True,
    weights=None,
    firth: bool = False,
    l1_ratio: float | None = None,
    n_penalties: int = 30,
    on_separation: str = "warn",
    clusters=None,
) -> SelectionResult:
    """Select terms of a cumulative-link model.

    Parameters
    ----------
    X : pandas.DataFrame
        Model matrix without intercept; every column belongs to one term.
    y : array-like of int or ordered Categorical
        Outcome levels ``0..K-1`` (K >= 2).
    groups : mapping, keyword-only
        Term name -> list of column names.  A term enters or leaves whole.
    forced : sequence of str, keyword-only
        Terms kept in every model.
    method : {"forward", "backward", "none"}, keyword-only
        See the module description.
    n_folds : int, keyword-only
        Folds of the cross-validation choosing the forward model size.
    seed : int or numpy.random.Generator, keyword-only
        Source of the fold assignment.
    link : {"logit", "probit", "cloglog", "loglog"}, keyword-only
        Link of every fit.
    proportional : bool, keyword-only
        Model form of every fit.
    weights : array-like, optional, keyword-only
        Frequency weights.  Folds are dealt over rows, so all copies that a
        weight stands for fall in the same fold; rows of weight 0 are dropped.
    firth : bool, keyword-only
        Fit every model of the procedure by Firth's bias-reduced likelihood
        (methods forward, backward and none).
    clusters : array of int, optional, keyword-only
        Cluster code of every row (:func:`riskvet.modelling.folds.cluster_codes`):
        the cross-validation (forward size, penalty) then deals whole
        clusters to folds (:func:`riskvet.modelling.folds.cluster_folds`).
    l1_ratio : float, optional, keyword-only
        ``"elastic_net"``: the lasso share of the penalty, in (0, 1); 0.5
        when omitted.  Not used by the other methods.
    n_penalties : int, keyword-only
        Penalised methods: the number of penalties on the log grid tried.
    on_separation : {"warn", "firth"}, keyword-only
        When the chosen model's maximum-likelihood fit is separated: keep it
        and warn (its separation is on ``fit.separation``), or refit the
        chosen terms by Firth's method (``refit_with_firth`` is then set).

    Returns
    -------
    SelectionResult

    Notes
    -----
    Forward: from the forced terms, each step computes for every remaining
    term the score (Rao) statistic for adding it at the current estimates
    and adds the term with the smallest p-value (chi-squared with as many df
    as the term adds parameters, so multi-column terms are compared on the
    p-value rather than the raw statistic); the enlarged model is then
    fitted once, warm-started from the current estimates with the new
    coefficients at zero.  The path runs until every term is in.  In each of
    ``n_folds`` folds (stratified by outcome level) the path is run on the
    other folds and the test log-likelihood per observation of the held-out
    fold is recorded at every size; the size with the largest mean over
    folds is chosen (the smallest among ties; a size that some fold's path
    did not reach is not eligible), and the path is re-run on all data up to
    that size.

    Backward: from the model with every term, each step refits the model
    without each non-forced term and removes the term whose removal gives
    the lowest AIC ``-2 l + 2 k``, as long as that AIC is below the current
    one (ties go to the earlier term in ``groups``).

    References
    ----------
    Harrell, F. E. (2015). Regression Modeling Strategies (2nd ed.), section
    4.3 (variable selection). Springer.

    Rao, C. R. (1948). Large sample tests of statistical hypotheses concerning
    several parameters with applications to problems of estimation.
    Proceedings of the Cambridge Philosophical Society, 44, 50-57.

    Akaike, H. (1974). A new look at the statistical model identification.
    IEEE Transactions on Automatic Control, 19(6), 716-723.

    Steyerberg, E. W. (2019). Clinical Prediction Models (2nd ed.), chapter 11.
    Springer.

    Firth, D. (1993). Bias reduction of maximum likelihood estimates.
    Biometrika, 80(1), 27-38.

    Tibshirani, R. (1996). Regression shrinkage and selection via the lasso.
    Journal of the Royal Statistical Society, Series B, 58(1), 267-288.

    Yuan, M., & Lin, Y. (2006). Model selection and estimation in regression
    with grouped variables. Journal of the Royal Statistical Society, Series B,
    68(1), 49-67.
    """
    with one_blas_thread():
        return _select_terms(
            X, y, groups=groups, forced=forced, method=method, n_folds=n_folds, seed=seed,
            link=link, proportional=proportional, weights=weights, firth=firth, l1_ratio=l1_ratio,
            n_penalties=n_penalties, on_separation=on_separation, clusters=clusters,
        )


def _warn(msgs: list[str], msg: str, category: type[Warning], stacklevel: int) -> None:
    """Issue a warning and record it for the result's ``warnings``.

    ``stacklevel`` counts from the function calling this one, as in
    :func:`warnings.warn`; each step passes the depth that points the warning
    at the caller of :func:`select_terms`.
    """
    msgs.append(msg)
    warnings.warn(msg, category, stacklevel=stacklevel + 1)


def _check_options(method: str, link: str, proportional, firth=False, l1_ratio=None, on_separation="warn") -> None:
    """Refuse an unknown method or link, a model form that is not a bool, or penalty options that do not go together."""
    if method not in METHODS:
        raise DesignError(problem("method", allowed=f"one of {list(METHODS)}", received=method))
    if not isinstance(firth, (bool, np.bool_)):
        raise FitError(problem("firth", allowed="True or False", received=firth))
    if firth and method in PENALIZED:
        raise DesignError(problem("firth", allowed=f"False with method {method!r} (its penalty already shrinks the coefficients)", received=firth))
    if l1_ratio is not None and (method != "elastic_net" or isinstance(l1_ratio, bool) or not isinstance(l1_ratio, (int, float)) or not 0.0 < l1_ratio < 1.0):
        raise DesignError(problem("l1_ratio", allowed="a number strictly between 0 and 1, with method 'elastic_net' only", received=f"{l1_ratio!r} with method {method!r}"))
    if on_separation not in ON_SEPARATION:
        raise DesignError(problem("on_separation", allowed=f"one of {list(ON_SEPARATION)}", received=on_separation))
    if link not in LINKS:
        raise FitError(problem("link", allowed=f"one of {list(LINKS)}", received=link))
    if not isinstance(proportional, (bool, np.bool_)):
        raise FitError(problem("proportional", allowed="True or False", received=proportional))


def _fold_source(n_folds, seed) -> tuple[np.random.Generator, int | None]:
    """Check the forward method's cross-validation options; the fold generator and the seed to report."""
    if isinstance(n_folds, bool) or not isinstance(n_folds, (int, np.integer)) or n_folds < 2:
        raise DesignError(problem("n_folds", allowed="an integer >= 2", received=n_folds))
    if isinstance(seed, np.random.Generator):
        return seed, None
    if isinstance(seed, (int, np.integer)) and not isinstance(seed, bool) and seed >= 0:
        return np.random.default_rng(int(seed)), int(seed)
    raise DesignError(problem("seed", allowed="a non-negative integer or a numpy Generator", received=seed))


@dataclasses.dataclass(frozen=True)
class _Selected:
    """The model one selection method arrived at, and the record of how."""

    terms: list[int]
    cols: list[int]
    raw: _RawFit  # the array-level fit of ``cols``, the final fit's start
    path: pd.DataFrame
    cv: pd.DataFrame | None = None
    cv_by_fold: pd.DataFrame | None = None
    size: int | None = None


def _sorted_folds(prob: _Problem, codes: np.ndarray, keep: np.ndarray, order: np.ndarray, n_folds: int, rng: np.random.Generator, levels,
                  *, clusters: np.ndarray | None = None) -> np.ndarray:
    """Fold of each sorted row, for the cross-validation of the forward path (whole clusters per fold when given)."""
    if clusters is not None:
        fold_in = np.full(codes.shape[0], -1, dtype=np.int64)
        fold_in[keep] = cluster_folds(clusters[keep], codes[keep], n_folds, rng, levels, where="selection.folds")
        return fold_in[order]
    counts = np.bincount(prob.y, minlength=prob.K)
    if np.min(counts) < max(2, n_folds):
        # a level with fewer rows than folds leaves some held-out fold without it
        raise DesignError(problem(
            "n_folds", allowed=f"at most the number of rows in the smallest outcome level ({int(np.min(counts))}), and at least 2 rows in every level",
            received=f"{n_folds} folds; rows by level {dict(zip(levels, counts.tolist()))}",
        ))
    # Folds are drawn over the input row order, then carried to the sorted rows.
    fold_in = np.full(codes.shape[0], -1, dtype=np.int64)
    fold_in[keep] = _folds(codes[keep], n_folds, rng)
    return fold_in[order]


def _cross_validated_path(prob: _Problem, fold: np.ndarray, n_folds: int, forced: list[int], free: list[int], msgs: list[str]) -> np.ndarray:
    """Held-out test log-likelihood per observation, fold by model size, of forward paths run on the other folds."""
    max_size = len(free)
    table = np.full((n_folds, max_size + 1), np.nan)
    trouble = np.zeros(2, dtype=np.int64)
    # stacklevel 5: here, _forward_selection, _select_terms, select_terms, its caller
    for f in range(n_folds):
        train = np.flatnonzero(fold != f)
        test = np.flatnonzero(fold == f)
        try:
            _, _, _, _, tests, tr, stop = _forward(prob, train, forced, free, max_size, test_rows=test)
        except FitError as exc:
            _warn(msgs, f"fold {f + 1}: the starting model could not be fitted ({exc})", RiskvetWarning, 5)
            continue
        table[f, : len(tests)] = tests
        trouble += tr
        if stop:
            _warn(msgs, f"fold {f + 1}: path stopped after {len(tests) - 1} terms: {stop}", RiskvetWarning, 5)
    if trouble[0]:
        _warn(msgs, f"cross-validation: {trouble[0]} fold fit(s) did not converge", ConvergenceWarning, 5)
    if trouble[1]:
        _warn(msgs, f"cross-validation: {trouble[1]} fold fit(s) met separation", SeparationWarning, 5)
    return table


def _choose_size(table: np.ndarray, n_folds: int) -> tuple[int, pd.DataFrame, pd.DataFrame]:
    """The size with the best mean test log-likelihood over the folds that all reached it, and the tables behind it."""
    max_size = table.shape[1] - 1
    reached = np.sum(~np.isnan(table), axis=0)
    with np.errstate(invalid="ignore"):
        mean = np.where(reached == n_folds, np.mean(table, axis=0), np.nan)
        se = np.where(reached == n_folds, np.std(table, axis=0, ddof=1) / math.sqrt(n_folds), np.nan)
    eligible = np.flatnonzero(~np.isnan(mean))
    if eligible.size == 0:
        raise FitError(problem("select_terms", allowed="a forward path that every fold can follow", received="no model size reached in all folds"))
    best_val = np.max(mean[eligible])
    size = int(eligible[np.flatnonzero(mean[eligible] == best_val)[0]])
    cv = pd.DataFrame({"size": np.arange(max_size + 1), "mean_test_loglik": mean, "se": se, "n_folds_reached": reached})
    f_idx, s_idx = np.meshgrid(np.arange(n_folds), np.arange(max_size + 1), indexing="ij")
    cv_by_fold = pd.DataFrame({"fold": f_idx.ravel() + 1, "size": s_idx.ravel(), "test_loglik": table.ravel()})
    return size, cv, cv_by_fold


def _forward_selection(prob: _Problem, fold: np.ndarray, n_folds: int, forced: list[int], free: list[int], msgs: list[str]) -> _Selected:
    """Size the forward path by cross-validation, then run it on all data up to that size."""
    table = _cross_validated_path(prob, fold, n_folds, forced, free, msgs)
    size, cv, cv_by_fold = _choose_size(table, n_folds)
    terms, cols, raw, steps, _, _, stop = _forward(prob, None, forced, free, size)
    if stop:
        # stacklevel 4: here, _select_terms, select_terms, its caller
        _warn(msgs, f"all data: path stopped early: {stop}", RiskvetWarning, 4)
    return _Selected(terms, cols, raw, _path_frame(prob, steps, "score"), cv, cv_by_fold, size)


def _backward_elimination(prob: _Problem, forced: list[int], free: list[int]) -> _Selected:
    """From every term, drop the non-forced term whose removal gives the lowest AIC, while that lowers it."""
    term_cols = prob.term_cols
    terms = list(forced) + free
    cols = [c for t in terms for c in term_cols[t]]
    raw = prob.fit(None, cols)
    steps = [("start", None, math.nan, 0, math.nan, raw)]
    while True:
        candidates = [t for t in terms if t not in forced]
        best = None
        for t in candidates:
            keep_terms = [u for u in terms if u != t]
            keep_cols = [c for u in keep_terms for c in term_cols[u]]
            start = _drop_params(raw.params, cols, term_cols[t], prob)
            sub = prob.fit(None, keep_cols, start=start)
            aic = _aic(sub)
            if best is None or aic < best[1]:
                best = (t, aic, sub, keep_terms, keep_cols)
        if best is None or not best[1] < _aic(raw):
            break
        t, aic, sub, keep_terms, keep_cols = best
        df = raw.params.shape[0] - sub.params.shape[0]
        lr = max(0.0, 2.0 * (raw.loglik - sub.loglik))
        steps.append(("remove", t, aic, df, float(special.chdtrc(df, lr)), sub))
        raw, terms, cols = sub, keep_terms, keep_cols
    return _Selected(terms, cols, raw, _path_frame(prob, steps, "aic"))


def _full_model(prob: _Problem, forced: list[int], free: list[int]) -> _Selected:
    """The pre-specified model with every term."""
    terms = list(forced) + free
    cols = [c for t in terms for c in prob.term_cols[t]]
    raw = prob.fit(None, cols)
    return _Selected(terms, cols, raw, _path_frame(prob, [("start", None, math.nan, 0, math.nan, raw)], ""))


def _select_terms(
    X,
    y,
    *,
    groups: Mapping[str, Sequence[str]],
    forced: Sequence[str] = (),
    method: str = "forward",
    n_folds: int = 10,
    seed=0,
    link: str = "logit",
    proportional: bool = True,
    weights=None,
    firth: bool = False,
    l1_ratio: float | None = None,
    n_penalties: int = 30,
    on_separation: str = "warn",
    clusters=None,
) -> SelectionResult:
    """:func:`select_terms` itself, run by it with one BLAS thread."""
    _check_options(method, link, proportional, firth, l1_ratio, on_separation)
    codes, K, levels = _as_outcome(y, None)
    n = codes.shape[0]
    Xa, columns = _as_matrix(X, n)
    names, term_cols, forced_idx = _validate_groups(columns, groups, forced)
    unit = weights is None
    w = np.ones(n) if unit else _as_vector(weights, "weights", n)
    if np.any(w < 0):
        raise FitError(problem("weights", allowed="non-negative weights", received=f"{int(np.sum(w < 0))} negative"))
    _check_levels(codes, K, w, levels)
    if clusters is not None:
        clusters = np.asarray(clusters, dtype=np.int64)
        if clusters.shape != (n,) or (n and clusters.min() < 0):
            raise DesignError(problem("clusters", allowed=f"{n} cluster codes >= 0 (riskvet.modelling.folds.cluster_codes), one per row", received=f"shape {clusters.shape}"))
    rng = None
    seed_used = None
    if method == "forward" or method in PENALIZED:
        rng, seed_used = _fold_source(n_folds, seed)
    # Keep rows with positive weight and sort them by level once: every
    # design below is then already sorted and its rows line up with X.
    keep = np.flatnonzero(w > 0)
    if method in PENALIZED:
        share = PENALIZED[method] if PENALIZED[method] is not None else (0.5 if l1_ratio is None else float(l1_ratio))
        return _penalized_selection(
            pd.DataFrame(Xa[keep], columns=list(columns)), codes[keep], None if unit else w[keep], levels=levels,
            names=names, term_cols=term_cols, forced_idx=forced_idx, method=method, l1_ratio=share, n_folds=int(n_folds),
            rng=rng, seed_used=seed_used, n_penalties=int(n_penalties), link=link, proportional=bool(proportional),
            clusters=None if clusters is None else clusters[keep],
        )
    order = keep[np.argsort(codes[keep], kind="stable")]
    Xs = np.ascontiguousarray(Xa[order])
    ys = codes[order]
    ws = w[order]
    prob = _Problem(Xs, ys, K, ws, unit, link, bool(proportional), term_cols, list(columns), names, firth=bool(firth))
    free = [i for i in range(len(names)) if i not in forced_idx]
    msgs: list[str] = []

    if method == "forward":
        fold = _sorted_folds(prob, codes, keep, order, int(n_folds), rng, levels, clusters=clusters)
        chosen = _forward_selection(prob, fold, int(n_folds), forced_idx, free, msgs)
    elif method == "backward":
        chosen = _backward_elimination(prob, forced_idx, free)
    else:
        chosen = _full_model(prob, forced_idx, free)

    # The chosen model through the public fitter: full table, warnings, checks.
    chosen_cols = [columns[c] for c in chosen.cols]
    frame = pd.DataFrame(Xs[:, chosen.cols], columns=chosen_cols)
    y_cat = pd.Categorical.from_codes(ys, categories=list(levels), ordered=True)
    final, refit = _final_fit(frame, y_cat, start=chosen.raw.params, link=link, proportional=bool(proportional),
                              weights=None if unit else ws, firth=bool(firth), on_separation=on_separation, msgs=msgs)
    return SelectionResult(
        method=method,
        terms=tuple(names[t] for t in chosen.terms),
        forced=tuple(names[t] for t in forced_idx),
        columns=tuple(chosen_cols),
        path=chosen.path,
        cv=chosen.cv,
        cv_by_fold=chosen.cv_by_fold,
        size=chosen.size,
        fit=final,
        seed=seed_used,
        n_folds=int(n_folds) if method == "forward" else None,
        link=link,
        proportional=bool(proportional),
        warnings=tuple(msgs),
        refit_with_firth=refit,
    )


def _final_fit(frame, y_cat, *, start, link, proportional, weights, firth, on_separation, msgs) -> tuple[CumulativeFit, bool]:
    """The chosen model through the public fitter (full table, warnings, the separation check); a separated
    maximum-likelihood fit is refitted by Firth's method when ``on_separation="firth"``.

    Its warnings are issued by the fitter and recorded on it and in ``msgs``.
    """
    options = {"firth": True} if firth else {}
    final = fit_cumulative(frame, y_cat, link=link, proportional=proportional, weights=weights, start=start, **options)
    msgs.extend(f"final model: {m}" for m in final.warnings)
    if not (final.separation and not firth and on_separation == "firth"):
        return final, False
    with warnings.catch_warnings():
        # the separation was found and reported on the maximum-likelihood fit
        warnings.simplefilter("ignore", SeparationWarning)
        refit = fit_cumulative(frame, y_cat, link=link, proportional=proportional, weights=weights, firth=True)
    msgs.append(f"final model: separated by {list(final.separation)}; refitted by Firth's bias-reduced likelihood, whose estimates are finite")
    msgs.extend(f"final model (Firth): {m}" for m in refit.warnings)
    return refit, True


def _penalized_selection(frame, codes, weights, *, levels, names, term_cols, forced_idx, method, l1_ratio, n_folds, rng,
                         seed_used, n_penalties, link, proportional, clusters=None) -> SelectionResult:
    """Ridge, lasso or elastic net: one penalised fit, the penalty tuned by cross-validation; a term whose
    coefficients are all zero is left out (the forced terms are not penalised)."""
    from .penalized import tune_penalty

    columns = list(frame.columns)
    groups = {names[t]: [columns[c] for c in cols] for t, cols in enumerate(term_cols)}
    unpenalized = [columns[c] for t in forced_idx for c in term_cols[t]]
    y_cat = pd.Categorical.from_codes(codes, categories=list(levels), ordered=True)
    choice = tune_penalty(frame, y_cat, l1_ratio=l1_ratio, groups=groups, unpenalized=unpenalized, n_folds=n_folds, seed=rng,
                          n_alphas=n_penalties, link=link, proportional=proportional, weights=weights, clusters=clusters)
    fit = choice.fit
    coef = np.asarray(fit.coef, dtype=float).reshape(len(columns), -1)
    nonzero = np.any(coef != 0.0, axis=1)
    kept = [t for t in range(len(names)) if t in forced_idx or any(nonzero[c] for c in term_cols[t])]
    kept = forced_idx + [t for t in kept if t not in forced_idx]
    kept_cols = [columns[c] for t in kept for c in term_cols[t]]
    fit = _restrict(fit, kept_cols)
    rows = [{"step": 0, "action": "penalised fit", "term": "", "criterion": "cross-validated log-likelihood",
             "statistic": float(choice.alpha), "df": int(fit.n_params), "p": math.nan, "loglik": fit.loglik, "aic": fit.aic,
             "n_params": int(fit.n_params)}]
    for t in range(len(names)):
        if t not in kept:
            rows.append({**rows[0], "step": len(rows), "action": "set to zero", "term": names[t], "statistic": math.nan})
    msgs = [f"final model: {m}" for m in fit.warnings]
    return SelectionResult(
        method=method, terms=tuple(names[t] for t in kept), forced=tuple(names[t] for t in forced_idx),
        columns=tuple(kept_cols), path=pd.DataFrame(rows, columns=_PATH_COLUMNS), cv=None, cv_by_fold=None, size=None,
        fit=fit, seed=seed_used, n_folds=n_folds, link=link, proportional=proportional, warnings=tuple(msgs), penalty=choice,
    )


def _restrict(fit: CumulativeFit, keep: list[str]) -> CumulativeFit:
    """A penalised fit without the columns whose coefficients are zero (the same model, fewer columns)."""
    if list(fit.columns) == keep:
        return fit
    cuts = list(fit.thresholds.index)
    # parameter names as the fitter gives them: a column's name, or ``column[cut]`` per cut
    names = cuts + (keep if fit.proportional else [f"{c}[{cut}]" for c in keep for cut in cuts])
    coef = fit.coef.loc[keep]
    params = fit.params.loc[names]
    return dataclasses.replace(fit, columns=tuple(keep), coef=coef, params=params, se=fit.se.loc[names],
                               cov=fit.cov.loc[names, names])


def _drop_params(params: np.ndarray, cols: list[int], drop_cols: list[int], prob: _Problem) -> np.ndarray:
    """Current estimates without the coefficients of ``drop_cols`` (a warm start)."""
    m = prob.m
    k = prob.per_col()
    keep = list(range(m))
    for i, c in enumerate(cols):
        if c not in drop_cols:
            keep.extend(range(m + i * k, m + (i + 1) * k))
    return params[keep]
