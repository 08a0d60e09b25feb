"""Checks of the proportional-odds assumption of a cumulative logit model.

Two tests of the hypothesis that one coefficient vector serves every cut:
Brant's Wald test built from the K-1 separate binary logistic fits of
``Y > j`` (overall and per predictor), and the likelihood-ratio test of the
proportional model against the non-proportional cumulative model.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from typing import Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import special

from .._jsonable import to_jsonable
from ..errors import FitError, SeparationWarning, problem
from .fitter import (
    CumulativeFit,
    _as_matrix,
    _as_outcome,
    _as_vector,
    _check_levels,
    _fit_arrays,
    _separation_check,
    fit_cumulative,
)

__all__ = ["brant_test", "proportional_odds_lr_test", "BrantTest", "ProportionalOddsLRTest"]


def _chi2_p(stat: float, df: int) -> float:
    return float(special.chdtrc(df, stat)) if df > 0 and np.isfinite(stat) else float("nan")


@dataclasses.dataclass(frozen=True, eq=False)
class BrantTest:
    """Brant's test of proportional odds.

    Attributes
    ----------
    statistic : float
        Overall Wald statistic for equal slopes across the K-1 cuts.
    df : int
        ``p (K - 2)``.
    p : float
        Chi-squared upper tail.
    terms : pandas.DataFrame
        One row per term (a column, or a group of columns): term, columns,
        statistic, df (``n_columns (K - 2)``), p.
    coef_by_cut : pandas.DataFrame
        Slopes of the separate binary fits of ``Y > j``, one column per cut;
        under proportional odds every row is roughly constant.
    n : float
        Sum of the weights.
    n_levels : int
        Number of outcome levels K.
    warnings : tuple of str
        Trouble in the separate binary fits (separation, non-convergence).
    separation : tuple of str
        ``"y > level: column"`` for each column that separates a binary fit.
    valid : bool
        False when a binary fit is separated: its slopes and their
        covariance are not finite in the limit, so ``statistic`` and ``p``
        (overall and per term) are NaN and ``reason`` says why.
    reason : str
        Why the test is not valid (empty when it is).
    """

    statistic: float
    df: int
    p: float
    terms: pd.DataFrame
    coef_by_cut: pd.DataFrame
    n: float
    n_levels: int
    warnings: tuple
    separation: tuple = ()
    valid: bool = True
    reason: str = ""

    def to_frame(self) -> pd.DataFrame:
        """Overall test then one row per term: term, statistic, df, p.

        A test that is not valid adds the columns valid (False) and reason.
        """
        overall = pd.DataFrame([{"term": "overall", "statistic": self.statistic, "df": self.df, "p": self.p}])
        frame = pd.concat([overall, self.terms[["term", "statistic", "df", "p"]]], ignore_index=True)
        return frame if self.valid else frame.assign(valid=False, reason=self.reason)

    def to_dict(self) -> dict:
        return to_jsonable(
            {
                "test": "brant",
                "statistic": self.statistic,
                "df": self.df,
                "p": self.p,
                "terms": self.terms,
                "coef_by_cut": {str(k): v for k, v in self.coef_by_cut.to_dict(orient="index").items()},
                "n": self.n,
                "n_levels": self.n_levels,
                "warnings": list(self.warnings),
                "separation": list(self.separation),
                "valid": self.valid,
                "reason": self.reason,
            }
        )


def _term_groups(columns: tuple[str, ...], groups) -> list[tuple[str, list[int]]]:
    if groups is None:
        return [(c, [j]) for j, c in enumerate(columns)]
    if not isinstance(groups, Mapping):
        raise FitError(problem("groups", allowed="a mapping of term name to a list of column names", received=type(groups).__name__))
    out = []
    for term, cols in groups.items():
        cols = [cols] if isinstance(cols, str) else list(cols)
        missing = [c for c in cols if c not in columns]
        if missing or not cols:
            raise FitError(problem(f"groups[{term!r}]", allowed=f"names among the columns of X {list(columns)}", received=cols))
        out.append((str(term), [columns.index(c) for c in cols]))
    return out


def _brant_covariance(X1: np.ndarray, w: np.ndarray, pis: list, m: int, p: int) -> np.ndarray:
    """Covariance of the stacked slopes of the separate binary fits (see :func:`brant_test`)."""
    V = [None] * m
    for j in range(m):
        info = X1.T @ (X1 * (w * pis[j] * (1.0 - pis[j]))[:, None])
        V[j] = np.linalg.inv(info)
    big = np.empty((m * p, m * p))
    for j in range(m):
        for l in range(j, m):
            if l == j:
                block = V[j]
            else:
                cross = X1.T @ (X1 * (w * (pis[l] - pis[j] * pis[l]))[:, None])
                block = V[j] @ cross @ V[l]
            big[j * p : (j + 1) * p, l * p : (l + 1) * p] = block[1:, 1:]
            big[l * p : (l + 1) * p, j * p : (j + 1) * p] = block[1:, 1:].T
    return big


def brant_test(X, y, *, weights=None, groups: Mapping[str, Sequence[str]] | None = None) -> BrantTest:
    """Brant's Wald test of the proportional-odds assumption.

    Parameters
    ----------
    X : pandas.DataFrame or 2-D array
        Model matrix without intercept (as for :func:`riskvet.models.fit_cumulative`).
    y : array-like of int or ordered Categorical
        Outcome with K >= 3 levels.
    weights : array-like, optional, keyword-only
        Frequency weights.
    groups : mapping, optional, keyword-only
        Term name -> column names, to test a multi-column term (a spline, a
        categorical predictor) jointly; default one test per column.

    Returns
    -------
    BrantTest

    Notes
    -----
    For each cut j = 0..K-2 a binary logistic model
    ``logit P(Y > j) = alpha_j + x beta_j`` is fitted separately, giving
    fitted ``pi_ij``.  With ``X1 = [1, X]`` and
    ``V_jj = (X1' W_jj X1)^{-1}``, the estimated covariance of the separate
    estimates is ``Cov(b_j, b_l) = V_jj (X1' W_jl X1) V_ll`` with
    ``W_jl = diag(w_i (pi_il - pi_ij pi_il))`` for ``j <= l`` (so ``W_jj``
    holds ``pi (1 - pi)``).  The slopes are stacked,
    ``b* = (beta_0', ..., beta_{K-2}')'``, and with ``D`` the contrasts
    ``beta_0 - beta_j`` (j = 1..K-2) the statistic is
    ``(D b*)' (D V* D')^{-1} (D b*)``, chi-squared with ``p (K - 2)`` df under
    proportional odds.  The per-term statistic restricts ``b*`` and ``V*`` to
    the term's columns (``n_columns (K - 2)`` df).

    References
    ----------
    Brant, R. (1990). Assessing proportionality in the proportional odds model
    for ordinal logistic regression. Biometrics, 46(4), 1171-1178.
    """
    codes, K, levels = _as_outcome(y, None)
    n = codes.shape[0]
    Xa, columns = _as_matrix(X, n)
    p = Xa.shape[1]
    if K < 3:
        raise FitError(problem("y", allowed="at least 3 outcome levels (with 2 there is nothing to compare)", received=f"{K} levels"))
    if p == 0:
        raise FitError(problem("X", allowed="at least one column", received="no columns"))
    w = np.ones(n) if weights is None else _as_vector(weights, "weights", n)
    if np.any(w < 0):
        raise FitError(problem("weights", allowed="non-negative weights", received=f"{int(np.sum(w < 0))} negative"))
    terms = _term_groups(columns, groups)
    _check_levels(codes, K, w, levels)
    keep = w > 0
    Xa, codes, w = Xa[keep], codes[keep], w[keep]
    m = K - 1
    X1 = np.hstack([np.ones((Xa.shape[0], 1)), Xa])
    pis = []
    slopes = np.empty((p, m))
    msgs: list[str] = []
    separated: list[str] = []
    for j in range(m):
        z = (codes > j).astype(np.int64)
        raw = _fit_arrays(Xa, z, 2, weights=w, names=columns, level_names=(f"y<={levels[j]}", f"y>{levels[j]}"))
        theta, beta = raw.params[0], raw.params[1:]
        # Always checked: a quasi-complete separation can converge with no
        # probability near one (see fitter._separation_screen).
        sep = _separation_check(raw.design)
        if sep:
            separated += [f"y > {levels[j]}: {columns[c]}" for c in sep]
            msg = f"separation in the binary fit of y > {levels[j]}: columns {[columns[c] for c in sep]}"
            msgs.append(msg)
            warnings.warn(msg, SeparationWarning, stacklevel=2)
        pis.append(special.expit(X1 @ np.r_[-theta, beta]))
        slopes[:, j] = beta
    big = None if separated else _brant_covariance(X1, w, pis, m, p)
    bstar = slopes.T.reshape(-1)  # cut-major: beta_0, beta_1, ...

    def wald(cols: list[int]) -> tuple[float, int]:
        idx = np.array([j * p + c for j in range(m) for c in cols])
        b = bstar[idx]
        Vs = big[np.ix_(idx, idx)]
        k = len(cols)
        D = np.zeros(((m - 1) * k, m * k))
        for r in range(1, m):
            D[(r - 1) * k : r * k, :k] = np.eye(k)
            D[(r - 1) * k : r * k, r * k : (r + 1) * k] = -np.eye(k)
        db = D @ b
        stat = float(db @ np.linalg.solve(D @ Vs @ D.T, db))
        return stat, (m - 1) * k

    stat, df = wald(list(range(p))) if not separated else (np.nan, p * (m - 1))
    rows = []
    for term, cols in terms:
        s, k = wald(cols) if not separated else (np.nan, len(cols) * (m - 1))
        rows.append({"term": term, "columns": ", ".join(columns[c] for c in cols), "statistic": s, "df": k, "p": _chi2_p(s, k)})
    cut_names = [f"y>{lev}" for lev in levels[:-1]]
    reason = ""
    if separated:
        reason = f"not valid: separated binary fit(s) ({'; '.join(separated)}); their slopes are not finite"
    return BrantTest(
        separation=tuple(separated),
        valid=not separated,
        reason=reason,
        statistic=stat,
        df=df,
        p=_chi2_p(stat, df),
        terms=pd.DataFrame(rows, columns=["term", "columns", "statistic", "df", "p"]),
        coef_by_cut=pd.DataFrame(slopes, index=list(columns), columns=cut_names),
        n=float(w.sum()),
        n_levels=K,
        warnings=tuple(msgs),
    )


@dataclasses.dataclass(frozen=True, eq=False)
class ProportionalOddsLRTest:
    """Likelihood-ratio test of the proportional against the non-proportional model.

    Attributes
    ----------
    statistic : float
        ``2 (loglik_nonproportional - loglik_proportional)``.
    df : int
        ``p (K - 2)``.
    p : float
        Chi-squared upper tail.
    loglik_proportional, loglik_nonproportional : float
        Maximised log-likelihoods of the two models.
    n_crossing : int
        Rows of the data where the non-proportional model's cumulative
        probabilities cross (the test is then less trustworthy).
    proportional_fit, nonproportional_fit : CumulativeFit
        The two fits.
    warnings : tuple of str
        Trouble met by either fit.
    separation : tuple of str
        ``"proportional fit: column"`` / ``"non-proportional fit: column"``
        for each column the separation check names in either fit.
    valid : bool
        False when either fit is separated: a maximised log-likelihood is
        then a limit, not attained, so ``statistic`` and ``p`` are NaN and
        ``reason`` says why.
    reason : str
        Why the test is not valid (empty when it is).
    """

    statistic: float
    df: int
    p: float
    loglik_proportional: float
    loglik_nonproportional: float
    n_crossing: int
    proportional_fit: CumulativeFit
    nonproportional_fit: CumulativeFit
    warnings: tuple
    separation: tuple = ()
    valid: bool = True
    reason: str = ""

    def to_frame(self) -> pd.DataFrame:
        """One row: statistic, df, p, both log-likelihoods, n_crossing.

        A test that is not valid adds the columns valid (False) and reason.
        """
        frame = pd.DataFrame(
            [
                {
                    "statistic": self.statistic,
                    "df": self.df,
                    "p": self.p,
                    "loglik_proportional": self.loglik_proportional,
                    "loglik_nonproportional": self.loglik_nonproportional,
                    "n_crossing": self.n_crossing,
                }
            ]
        )
        return frame if self.valid else frame.assign(valid=False, reason=self.reason)

    def to_dict(self) -> dict:
        return to_jsonable(
            {
                "test": "likelihood ratio, proportional vs non-proportional",
                "statistic": self.statistic,
                "df": self.df,
                "p": self.p,
                "loglik_proportional": self.loglik_proportional,
                "loglik_nonproportional": self.loglik_nonproportional,
                "n_crossing": self.n_crossing,
                "link": self.proportional_fit.link,
                "warnings": list(self.warnings),
                "separation": list(self.separation),
                "valid": self.valid,
                "reason": self.reason,
            }
        )


def proportional_odds_lr_test(X, y, *, link: str = "logit", weights=None, offset=None) -> ProportionalOddsLRTest:
    """Likelihood-ratio test of proportional odds (parallel cumulative links).

    Parameters
    ----------
    X : pandas.DataFrame or 2-D array
        Model matrix without intercept.
    y : array-like of int or ordered Categorical
        Outcome with K >= 3 levels.
    link : {"logit", "probit", "cloglog", "loglog"}, keyword-only
        Link of both models.
    weights, offset : array-like, optional, keyword-only
        As for :func:`riskvet.models.fit_cumulative`.

    Returns
    -------
    ProportionalOddsLRTest

    Notes
    -----
    ``LR = 2 (l_1 - l_0)`` with ``l_0`` the proportional model
    ``P(Y <= j) = F(theta_j - x beta)`` and ``l_1`` the model with a
    coefficient vector per cut, ``F(theta_j - x beta_j)``; chi-squared with
    ``p (K - 2)`` df under proportionality.  The non-proportional model is
    warm-started from the proportional fit.  When its cumulative
    probabilities cross on the data (``n_crossing > 0``) the larger model is
    not a proper probability model there and the test should be read with
    care.  When either fit is separated (the fitter's separation check names
    the columns) the test is marked not valid (``valid``, ``reason``) and its
    statistic and p-value are NaN.

    References
    ----------
    Peterson, B., & Harrell, F. E. (1990). Partial proportional odds models for
    ordinal response variables. Applied Statistics, 39(2), 205-217.

    Agresti, A. (2010). Analysis of Ordinal Categorical Data (2nd ed.),
    section 3.5. Wiley.
    """
    codes, K, levels = _as_outcome(y, None)
    if K < 3:
        raise FitError(problem("y", allowed="at least 3 outcome levels (with 2 the models coincide)", received=f"{K} levels"))
    Xa, columns = _as_matrix(X, codes.shape[0])
    if Xa.shape[1] == 0:
        raise FitError(problem("X", allowed="at least one column", received="no columns"))
    frame = pd.DataFrame(Xa, columns=list(columns))
    y_cat = pd.Categorical.from_codes(codes, categories=list(levels), ordered=True)
    prop = fit_cumulative(frame, y_cat, link=link, weights=weights, offset=offset)
    nonprop = fit_cumulative(frame, y_cat, link=link, weights=weights, offset=offset, proportional=False, start=prop)
    stat = max(0.0, 2.0 * (nonprop.loglik - prop.loglik))
    df = Xa.shape[1] * (K - 2)
    separated = tuple(f"proportional fit: {c}" for c in prop.separation) + tuple(
        f"non-proportional fit: {c}" for c in nonprop.separation
    )
    reason = ""
    if separated:
        stat = math.nan
        reason = (
            f"not valid: separation ({'; '.join(separated)}); the maximised log-likelihood is a limit that is not "
            "attained, so the likelihood ratio is not a chi-squared statistic"
        )
    return ProportionalOddsLRTest(
        separation=separated,
        valid=not separated,
        reason=reason,
        statistic=float(stat),
        df=int(df),
        p=_chi2_p(stat, df),
        loglik_proportional=prop.loglik,
        loglik_nonproportional=nonprop.loglik,
        n_crossing=nonprop.n_crossing,
        proportional_fit=prop,
        nonproportional_fit=nonprop,
        warnings=tuple(f"proportional fit: {m}" for m in prop.warnings) + tuple(f"non-proportional fit: {m}" for m in nonprop.warnings),
    )
