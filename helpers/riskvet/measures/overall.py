"""Overall accuracy of predicted probabilities: Brier score, log-likelihood, R².

Conventions as in :mod:`riskvet.discrimination`: outcome levels 0 .. K-1,
``prob`` an n x K matrix of level probabilities or, for a binary outcome, a
vector of event probabilities.  Data with a single observed outcome level
raise :class:`riskvet.errors.DataError` (the comparison with the observed
proportions behind the scaled Brier score and the R² is then empty).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ._checks import _as_outcome, _as_prob_matrix, _cut_probs, _fields_dict, _frozen
from ..errors import DataError, RiskvetWarning, problem

__all__ = ["BrierResult", "OverallAccuracy", "brier", "overall_accuracy"]


@dataclass(frozen=True)
class BrierResult:
    """Brier score of predicted probabilities against the observed outcome.

    Attributes
    ----------
    brier : float
        Binary outcome: mean (y - p)^2, in [0, 1].  K > 2 levels: the
        multi-category form mean sum_k (I(y = k) - p_k)^2, in [0, 2].
    null_brier : float
        The same score of a model predicting the observed level proportions
        for everybody: pi (1 - pi) for a binary outcome, 1 - sum_k pi_k^2
        for K levels.
    scaled_brier : float
        1 - brier / null_brier (1 is perfect, 0 no better than the
        proportions, negative worse).
    form : str
        ``"binary"`` or ``"multi-category"``.
    cut_brier : ndarray
        Binary Brier score of P(Y > j) for each cut j = 0 .. K-2 (one value
        for a binary outcome).
    n : int
        Patients.
    """

    brier: float
    null_brier: float
    scaled_brier: float
    form: str
    cut_brier: np.ndarray
    n: int

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """Tidy table: measure, value."""
        rows = [("brier", self.brier), ("null_brier", self.null_brier), ("scaled_brier", self.scaled_brier)]
        rows += [(f"brier_cut{j}", float(v)) for j, v in enumerate(self.cut_brier)]
        return pd.DataFrame(rows, columns=["measure", "value"])


@dataclass(frozen=True)
class OverallAccuracy:
    """Brier scores, log-likelihood and likelihood-based R² of predictions.

    Attributes
    ----------
    brier : BrierResult
        See :func:`brier`.
    log_likelihood : float
        sum_i log prob[i, y_i]; ``-inf`` if an observed level had predicted
        probability 0.
    null_log_likelihood : float
        sum_k n_k log(n_k / n): the log-likelihood of the observed level
        proportions.
    lr_statistic : float
        2 (log_likelihood - null_log_likelihood).  On new data it can be
        negative (predictions worse than the proportions).
    cox_snell_r2 : float
        1 - exp(-lr_statistic / n).
    max_cox_snell_r2 : float
        1 - exp(2 null_log_likelihood / n), the largest attainable value.
    nagelkerke_r2 : float
        cox_snell_r2 / max_cox_snell_r2.
    n : int
        Patients.
    n_levels : int
        K.
    n_impossible : int
        Patients whose observed level had predicted probability 0.
    warnings : tuple of str
        Statistical warnings met (also issued as :class:`RiskvetWarning`).
    """

    brier: BrierResult
    log_likelihood: float
    null_log_likelihood: float
    lr_statistic: float
    cox_snell_r2: float
    max_cox_snell_r2: float
    nagelkerke_r2: float
    n: int
    n_levels: int
    n_impossible: int
    warnings: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of the fields (the Brier result nested)."""
        return _fields_dict(self)

    def to_frame(self) -> pd.DataFrame:
        """Tidy table: measure, value."""
        rows = list(self.brier.to_frame().itertuples(index=False, name=None))
        rows += [
            ("log_likelihood", self.log_likelihood),
            ("null_log_likelihood", self.null_log_likelihood),
            ("lr_statistic", self.lr_statistic),
            ("cox_snell_r2", self.cox_snell_r2),
            ("max_cox_snell_r2", self.max_cox_snell_r2),
            ("nagelkerke_r2", self.nagelkerke_r2),
        ]
        return pd.DataFrame(rows, columns=["measure", "value"])


def _inputs(y: Any, prob: Any, func: str) -> tuple[np.ndarray, np.ndarray]:
    y_arr = _as_outcome(y, func)
    matrix = _as_prob_matrix(prob, y_arr.shape[0], func)
    _as_outcome(y_arr, func, n_levels=matrix.shape[1])
    if np.unique(y_arr).shape[0] < 2:
        # The scaled Brier score and both R² compare with the observed proportions,
        # which predict a single observed level perfectly.
        raise DataError(problem(f"{func}(y=)", allowed="at least two observed outcome levels", received=f"only level {int(y_arr[0])}"))
    return y_arr, matrix


def _brier_parts(y: np.ndarray, matrix: np.ndarray) -> tuple[float, float, np.ndarray]:
    n, k = matrix.shape
    indicator = np.zeros_like(matrix)
    indicator[np.arange(n), y] = 1.0
    props = np.bincount(y, minlength=k) / n
    if k == 2:
        score = float(np.mean((indicator[:, 1] - matrix[:, 1]) ** 2))
        null = float(props[1] * props[0])
    else:
        score = float(np.mean(np.sum((indicator - matrix) ** 2, axis=1)))
        null = float(1.0 - np.sum(props**2))
    cut_p = _cut_probs(matrix)
    cut_y = (y[:, None] > np.arange(k - 1)[None, :]).astype(float)
    return score, null, np.mean((cut_y - cut_p) ** 2, axis=0)


def _scaled(score: float, null: float) -> float:
    return float(1.0 - score / null) if null > 0 else float("nan")


def brier(y: Any, prob: Any) -> BrierResult:
    """Brier score and scaled Brier score.

    Parameters
    ----------
    y : array-like of int, shape (n,)
        Outcome levels 0 .. K-1 (0/1 for binary).
    prob : array-like of float, shape (n, K) or (n,)
        Level probabilities, or event probabilities of a binary outcome.

    Returns
    -------
    BrierResult

    Notes
    -----
    Binary: B = (1/n) sum (y_i - p_i)^2.  K levels: B = (1/n) sum_i sum_k
    (I(y_i = k) - p_ik)^2 (Brier's original form; for K = 2 it is twice the
    binary form, so the binary form is reported then).  Scaled Brier
    1 - B / B_null with B_null the score of the observed proportions; it is
    ``nan`` when only one level occurs.

    References
    ----------
    .. [1] Brier GW. Verification of forecasts expressed in terms of
       probability. Monthly Weather Review 1950;78(1):1-3.
    .. [2] Steyerberg EW, Vickers AJ, Cook NR, Gerds T, Gonen M, Obuchowski N,
       Pencina MJ, Kattan MW. Assessing the performance of prediction models:
       a framework for traditional and novel measures. Epidemiology
       2010;21(1):128-138.
    """
    y_arr, matrix = _inputs(y, prob, "brier")
    score, null, cut = _brier_parts(y_arr, matrix)
    return BrierResult(
        brier=score,
        null_brier=null,
        scaled_brier=_scaled(score, null),
        form="binary" if matrix.shape[1] == 2 else "multi-category",
        cut_brier=_frozen(cut),
        n=int(y_arr.shape[0]),
    )


def _log_likelihoods(y: np.ndarray, matrix: np.ndarray) -> tuple[float, float, int]:
    n, k = matrix.shape
    p_obs = matrix[np.arange(n), y]
    n_impossible = int(np.count_nonzero(p_obs <= 0.0))
    with np.errstate(divide="ignore"):
        ll = float(np.sum(np.log(p_obs)))
    counts = np.bincount(y, minlength=k)
    present = counts[counts > 0]
    ll0 = float(np.sum(present * np.log(present / n)))
    return ll, ll0, n_impossible


def _r2(ll: float, ll0: float, n: int) -> tuple[float, float, float, float]:
    lr = 2.0 * (ll - ll0)
    cs = float(-np.expm1(-lr / n))
    cs_max = float(-np.expm1(2.0 * ll0 / n))
    nagelkerke = cs / cs_max if cs_max > 0 else float("nan")
    return lr, cs, cs_max, nagelkerke


def overall_accuracy(y: Any, prob: Any) -> OverallAccuracy:
    """Brier scores, log-likelihood, Cox–Snell and Nagelkerke R² of predictions.

    Parameters
    ----------
    y : array-like of int, shape (n,)
        Outcome levels 0 .. K-1.
    prob : array-like of float, shape (n, K) or (n,)
        Level probabilities, or event probabilities of a binary outcome.

    Returns
    -------
    OverallAccuracy

    Warns
    -----
    RiskvetWarning
        When an observed level had predicted probability 0 (log-likelihood
        ``-inf``); also recorded in ``warnings``.

    Notes
    -----
    ln L = sum_i ln p_i,y_i; ln L0 = sum_k n_k ln(n_k / n); LR = 2 (ln L - ln L0).
    Cox–Snell R² = 1 - exp(-LR / n); its maximum is 1 - exp(2 ln L0 / n), and
    Nagelkerke's R² divides by it.  On the development data of a model with
    intercepts these are the usual likelihood-ratio R²; on validation data
    the "model" is the fixed predictions, so LR and both R² may be negative.

    References
    ----------
    .. [1] Cox DR, Snell EJ. Analysis of Binary Data, 2nd ed. Chapman and
       Hall, 1989.
    .. [2] Nagelkerke NJD. A note on a general definition of the coefficient
       of determination. Biometrika 1991;78(3):691-692.
    .. [3] Steyerberg EW, Vickers AJ, Cook NR, et al. Assessing the
       performance of prediction models: a framework for traditional and
       novel measures. Epidemiology 2010;21(1):128-138.
    """
    y_arr, matrix = _inputs(y, prob, "overall_accuracy")
    n = int(y_arr.shape[0])
    score, null, cut = _brier_parts(y_arr, matrix)
    ll, ll0, n_impossible = _log_likelihoods(y_arr, matrix)
    lr, cs, cs_max, nagelkerke = _r2(ll, ll0, n)
    notes: list[str] = []
    if n_impossible:
        notes.append(f"{n_impossible} patients had predicted probability 0 for their observed level; log-likelihood is -inf")
        warnings.warn(notes[-1], RiskvetWarning, stacklevel=2)
    return OverallAccuracy(
        brier=BrierResult(score, null, _scaled(score, null), "binary" if matrix.shape[1] == 2 else "multi-category", _frozen(cut), n),
        log_likelihood=ll,
        null_log_likelihood=ll0,
        lr_statistic=float(lr),
        cox_snell_r2=cs,
        max_cox_snell_r2=cs_max,
        nagelkerke_r2=float(nagelkerke),
        n=n,
        n_levels=int(matrix.shape[1]),
        n_impossible=n_impossible,
        warnings=tuple(notes),
    )
