"""Rubin's rules: pooling m completed-data analyses of multiply imputed data.

After multiple imputation each of the m completed data sets is analysed as
if it had no missing values, giving for every parameter an estimate Q_i and
its squared standard error U_i.  :func:`pool` combines them by Rubin's rules
(Rubin 1987; van Buuren 2018, section 2.3): the pooled estimate is their
mean, and its variance adds the mean within-imputation variance to the
between-imputation variance inflated for the finite number of imputations.
Intervals use the t distribution on Rubin's large-sample degrees of freedom
or, given the complete-data degrees of freedom, on Barnard and Rubin's
small-sample degrees of freedom (Barnard & Rubin 1999; van Buuren 2018,
section 5.2).

Parameters are pooled one by one (scalar rules, the diagonal of the
covariance); the multivariate rules for a covariance matrix and Wald tests
of several parameters (Li, Raghunathan & Rubin 1991) are not here.
Measures whose sampling distribution is far from normal are transformed
before pooling (the C statistic on the logit scale, Marshall et al. 2009).

Only numpy, scipy, pandas and the package core are imported.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Union

import numpy as np
import pandas as pd
from scipy import stats

from .._jsonable import to_jsonable
from ..errors import DataError, RiskvetError, problem

__all__ = ["PooledImputations", "pool"]

DF_METHODS = ("rubin 1987", "barnard-rubin 1999")

# A value per parameter: a float for 1-D input, a read-only array of shape (p,) for 2-D input.
PerParameter = Union[float, np.ndarray]

# Columns of PooledImputations.to_frame(), in order; "lambda" is the attribute lambda_.
_FRAME_COLUMNS = ("estimate", "se", "df", "lower", "upper", "riv", "fmi", "lambda")


@dataclass(frozen=True)
class PooledImputations:
    """Rubin's rules applied to m completed-data analyses.

    Every per-parameter attribute is a float when :func:`pool` was given
    1-D arrays (one parameter) and a read-only array of shape (p,) when it
    was given arrays of shape (m, p).

    Attributes
    ----------
    estimate : float or ndarray
        Q-bar, the mean of the m completed-data estimates.
    within : float or ndarray
        U-bar, the mean of the m completed-data variances.
    between : float or ndarray
        B, the variance of the m estimates (divisor m - 1); exactly 0 when
        the m estimates are identical.
    total : float or ndarray
        T = U-bar + (1 + 1/m) B, the variance of ``estimate``.
    se : float or ndarray
        sqrt(T).
    riv : float or ndarray
        Relative increase in variance due to nonresponse,
        r = (1 + 1/m) B / U-bar; 0 when B = 0.
    lambda_ : float or ndarray
        Proportion of the total variance due to missing data,
        (1 + 1/m) B / T, in [0, 1); 0 when B = 0.
    fmi : float or ndarray
        Fraction of missing information, (r + 2/(df_rubin + 3)) / (r + 1),
        with Rubin's df_rubin = (m - 1) / lambda^2 (see :func:`pool`).
    df : float or ndarray
        Degrees of freedom of the t reference distribution: Rubin's
        (``df_complete`` None) or Barnard and Rubin's; ``inf`` when B = 0
        and ``df_complete`` is None.
    lower, upper : float or ndarray
        Interval estimate +- t_{df} se at ``confidence``; with df infinite
        the normal quantile is used.
    m : int
        Number of imputations pooled.
    df_complete : float or None
        Complete-data degrees of freedom given to :func:`pool`.
    df_method : str
        ``"rubin 1987"`` or ``"barnard-rubin 1999"``.
    confidence : float
        Level of the interval.
    notes : tuple of str
        Parameters met by an edge case (B = 0, so df infinite or equal to
        df_obs), since ``to_dict`` writes an infinite df as null.
    """

    estimate: PerParameter
    within: PerParameter
    between: PerParameter
    total: PerParameter
    se: PerParameter
    riv: PerParameter
    lambda_: PerParameter
    fmi: PerParameter
    df: PerParameter
    lower: PerParameter
    upper: PerParameter
    m: int
    df_complete: float | None
    df_method: str
    confidence: float
    notes: tuple[str, ...] = field(default=())

    def to_frame(self) -> pd.DataFrame:
        """One row per parameter (numbered from 0 in the order given).

        Columns ``estimate``, ``se``, ``df``, ``lower``, ``upper``, ``riv``,
        ``fmi`` and ``lambda`` (the attribute ``lambda_``); an infinite df
        stays ``inf`` here.
        """
        columns = {name: np.atleast_1d(getattr(self, "lambda_" if name == "lambda" else name)) for name in _FRAME_COLUMNS}
        return pd.DataFrame(columns, columns=list(_FRAME_COLUMNS))

    def to_dict(self) -> dict[str, Any]:
        """Every attribute as JSON-ready values; a non-finite number (an infinite df) becomes None."""
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


def _frozen(values: np.ndarray) -> np.ndarray:
    """A read-only copy, so a frozen result cannot be changed through its arrays."""
    out = np.array(values, dtype=float, copy=True)
    out.setflags(write=False)
    return out


def _as_draws(values: Any, name: str) -> np.ndarray:
    """A finite float array of shape (m, p), m >= 2, p >= 1; 1-D input becomes (m, 1)."""
    where = f"pool({name}=)"
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise DataError(problem(where, allowed="an array of numbers of shape (m,) or (m, p)", received=values)) from None
    if arr.ndim not in (1, 2) or (arr.ndim == 2 and arr.shape[1] == 0):
        raise DataError(problem(where, allowed="shape (m,) or (m, p) with p >= 1, one row per imputation", received=f"shape {arr.shape}"))
    if arr.shape[0] < 2:
        raise DataError(
            problem(where, allowed="at least 2 imputations (rows): with one there is no between-imputation variance", received=f"{arr.shape[0]} rows, shape {arr.shape}")
        )
    if not np.all(np.isfinite(arr)):
        raise DataError(problem(where, allowed="finite numbers, no missing values", received=f"{int(np.sum(~np.isfinite(arr)))} non-finite values"))
    return arr.reshape(arr.shape[0], -1)


def _check_df_complete(df_complete: Any) -> float | None:
    if df_complete is None:
        return None
    if isinstance(df_complete, (bool, np.bool_)) or not isinstance(df_complete, (int, float, np.integer, np.floating)):
        raise DataError(problem("pool(df_complete=)", allowed="None or a finite number > 0", received=df_complete))
    value = float(df_complete)
    if not (math.isfinite(value) and value > 0):
        raise DataError(
            problem("pool(df_complete=)", allowed="None (large-sample, Rubin 1987) or a finite number > 0 (Barnard-Rubin 1999)", received=df_complete)
        )
    return value


def _check_confidence(confidence: Any) -> float:
    if isinstance(confidence, (bool, np.bool_)) or not isinstance(confidence, (int, float, np.integer, np.floating)) or not 0.0 < float(confidence) < 1.0:
        raise RiskvetError(problem("pool(confidence=)", allowed="a number strictly between 0 and 1", received=confidence))
    return float(confidence)


def _check_inputs(estimates: Any, variances: Any, df_complete: Any, confidence: Any) -> tuple[np.ndarray, np.ndarray, float | None, float, bool]:
    q = _as_draws(estimates, "estimates")
    u = _as_draws(variances, "variances")
    if np.ndim(variances) != np.ndim(estimates) or u.shape != q.shape:
        raise DataError(
            problem("pool(variances=)", allowed=f"the shape of estimates, {np.shape(estimates)} (one variance per estimate)", received=f"shape {np.shape(variances)}")
        )
    if np.any(u < 0):
        raise DataError(problem("pool(variances=)", allowed="variances (squared standard errors) >= 0", received=f"values such as {u[u < 0][:3].tolist()}"))
    return q, u, _check_df_complete(df_complete), _check_confidence(confidence), np.ndim(estimates) == 1


def _between(q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Q-bar and B per column, independent of the order of the rows to the last bit.

    Each column is sorted before summing, so permuting the imputations gives
    identical floats; a column of identical estimates gets B = 0 exactly
    (its mean can differ from the values by rounding).
    """
    ordered = np.sort(q, axis=0)
    qbar = ordered.mean(axis=0)
    b = np.sum((ordered - qbar) ** 2, axis=0) / (q.shape[0] - 1)
    return qbar, np.where(np.ptp(q, axis=0) == 0, 0.0, b)


def _edge_notes(b: np.ndarray, df_complete: float | None) -> tuple[str, ...]:
    constant = np.flatnonzero(b == 0).tolist()
    if not constant:
        return ()
    if df_complete is None:
        return (
            f"parameters {constant}: the m estimates are identical (B = 0), so riv = lambda = fmi = 0, "
            "df is infinite (null in to_dict) and the interval uses the normal quantile",
        )
    return (
        f"parameters {constant}: the m estimates are identical (B = 0), so riv = lambda = fmi = 0 and "
        "df = df_obs = df_complete (df_complete + 1) / (df_complete + 3)",
    )


def pool(estimates: Any, variances: Any, *, df_complete: Any = None, confidence: float = 0.95) -> PooledImputations:
    """Pool m completed-data analyses by Rubin's rules.

    Parameters
    ----------
    estimates : array_like, shape (m,) or (m, p)
        The estimate of each of p parameters in each of m completed data
        sets, one row per imputation; m >= 2, finite.
    variances : array_like, same shape as ``estimates``
        Their squared standard errors (the diagonal of each completed-data
        covariance); finite, >= 0.
    df_complete : float, optional
        Complete-data degrees of freedom (for a linear regression n - k),
        finite and > 0, the same for every parameter.  Given, the interval
        uses Barnard and Rubin's small-sample degrees of freedom; None
        (default) uses Rubin's large-sample ones.
    confidence : float
        Level of the interval, in (0, 1).

    Returns
    -------
    PooledImputations
        Floats for 1-D input, read-only arrays of shape (p,) for 2-D input.

    Raises
    ------
    DataError
        ``estimates`` or ``variances`` not of shape (m,) or (m, p), of
        different shapes, with fewer than 2 imputations, not finite, a
        negative variance, a parameter whose variances are all 0 while its
        estimates differ, or ``df_complete`` not a finite number > 0.
    RiskvetError
        ``confidence`` outside (0, 1).

    Notes
    -----
    With Q_i, U_i the estimate and variance from completed data set i
    (Rubin 1987, section 3.1; van Buuren 2018, section 2.3):

        Q-bar = (1/m) sum Q_i,          U-bar = (1/m) sum U_i,
        B = (1/(m - 1)) sum (Q_i - Q-bar)^2,
        T = U-bar + (1 + 1/m) B,        se = sqrt(T),
        r = (1 + 1/m) B / U-bar,        lambda = (1 + 1/m) B / T,

    and (Q - Q-bar) / se is referred to a t distribution on Rubin's

        df_rubin = (m - 1) (1 + 1/r)^2 = (m - 1) / lambda^2

    degrees of freedom.  With the complete-data degrees of freedom nu_com
    (Barnard & Rubin 1999; van Buuren 2018, section 5.2),

        df_obs = (nu_com + 1) / (nu_com + 3) nu_com (1 - lambda),
        df = df_rubin df_obs / (df_rubin + df_obs),

    computed as 1 / (1/df_rubin + 1/df_obs), with 1 - lambda = U-bar / T.
    This df is below both df_obs and nu_com and tends to df_rubin as
    nu_com grows.  The fraction of missing information is Rubin's

        fmi = (r + 2 / (df_rubin + 3)) / (r + 1),

    always with Rubin's df_rubin, as in Rubin (1987, eq. 3.1.10); the
    small-sample df is used for the interval only, and lambda is not
    floored before df is computed.

    Edge cases, decided here:

    * B = 0 (the m estimates identical, no information lost to the missing
      values): r = lambda = 0, df_rubin is infinite, so fmi = 0, Rubin's
      df is ``inf`` and the interval uses the normal quantile (the limit
      of t); with ``df_complete``, df = df_obs = nu_com (nu_com + 1) /
      (nu_com + 3), the limit of the formula.  This holds also when
      U-bar = 0 (a parameter fixed by design): se = 0 and the interval is
      the point.  Such parameters are listed in ``notes``.
    * U-bar = 0 with B > 0 is refused: r is infinite, lambda = 1, and the
      Barnard-Rubin df is 0 (an infinite interval).  Completed-data
      analyses that claim no sampling variance while their estimates
      differ almost always mean the variances passed are wrong (standard
      errors left out, or placeholders).

    References
    ----------
    Rubin DB. Multiple Imputation for Nonresponse in Surveys. New York:
    Wiley, 1987.

    Barnard J, Rubin DB. Small-sample degrees of freedom with multiple
    imputation. Biometrika 1999;86(4):948-955.

    van Buuren S. Flexible Imputation of Missing Data, 2nd ed. Boca Raton:
    CRC Press, 2018; section 2.3 (pooling) and section 5.2 (degrees of
    freedom).

    Marshall A, Altman DG, Holder RL, Royston P. Combining estimates of
    interest in prognostic modelling studies after multiple imputation:
    current practice and guidelines. BMC Medical Research Methodology
    2009;9:57.

    Examples
    --------
    >>> result = pool([1.0, 1.2, 0.9, 1.1, 1.3], [0.04, 0.05, 0.04, 0.06, 0.05])
    >>> round(result.estimate, 3), round(result.se, 4), round(result.df, 2)
    (1.1, 0.2793, 27.04)
    """
    q, u, df_complete, confidence, one_dimensional = _check_inputs(estimates, variances, df_complete, confidence)
    m = q.shape[0]
    qbar, b = _between(q)
    ubar = np.sort(u, axis=0).mean(axis=0)
    refused = np.flatnonzero((ubar == 0) & (b > 0))
    if refused.size:
        raise DataError(
            problem(
                "pool(variances=)",
                allowed="a within-imputation variance > 0 for every parameter whose estimates differ between imputations "
                "(with U-bar = 0 the relative increase in variance is infinite)",
                received=f"all variances 0 for parameters {refused.tolist()}",
            )
        )
    inflated = (1.0 + 1.0 / m) * b
    total = ubar + inflated
    moved = b > 0  # B > 0 implies U-bar > 0 and T > 0 here
    safe_u, safe_t = np.where(moved, ubar, 1.0), np.where(moved, total, 1.0)
    riv = np.where(moved, inflated / safe_u, 0.0)
    lam = np.where(moved, inflated / safe_t, 0.0)
    with np.errstate(divide="ignore", over="ignore"):  # lambda below ~1e-154: df_rubin is infinite in floats
        df_rubin = np.where(moved, (m - 1) / np.where(moved, lam, 1.0) ** 2, math.inf)
    if df_complete is None:
        df, method = df_rubin, DF_METHODS[0]
    else:
        observed = (df_complete + 1.0) / (df_complete + 3.0) * df_complete * np.where(moved, ubar / safe_t, 1.0)
        df, method = 1.0 / (1.0 / df_rubin + 1.0 / observed), DF_METHODS[1]
    fmi = (riv + 2.0 / (df_rubin + 3.0)) / (riv + 1.0)
    level = 0.5 + confidence / 2.0
    crit = np.where(np.isinf(df), stats.norm.ppf(level), stats.t.ppf(level, np.where(np.isinf(df), 1.0, df)))
    se = np.sqrt(total)
    values = {
        "estimate": qbar, "within": ubar, "between": b, "total": total, "se": se, "riv": riv, "lambda_": lam,
        "fmi": fmi, "df": df, "lower": qbar - crit * se, "upper": qbar + crit * se,
    }
    shaped = {k: float(v[0]) if one_dimensional else _frozen(v) for k, v in values.items()}
    return PooledImputations(
        **shaped, m=int(m), df_complete=df_complete, df_method=method, confidence=confidence, notes=_edge_notes(b, df_complete)
    )
