"""Input checks and small helpers shared by the measures of predicted probabilities.

Every metric module (:mod:`~riskvet.measures.discrimination`,
:mod:`~riskvet.measures.calibration`, :mod:`~riskvet.measures.overall`,
:mod:`~riskvet.measures.decision`, :mod:`~riskvet.measures.summary`) reads
its ``y``, ``score``, ``prob``, ``weights`` and ``confidence`` through the
checks here, so that bad input is reported with the same wording
everywhere.  Also here: the cut probabilities P(Y > j) of a matrix of level
probabilities, the normal quantile of a confidence level, and the read-only
arrays and JSON-ready dicts behind the frozen result classes (which
:mod:`~riskvet.measures.agreement` uses too).

Conventions: outcome levels are coded 0 .. K-1; ``prob`` is the n x K matrix
of predicted level probabilities or, for a binary outcome, a vector of event
probabilities.  Only the package core is imported.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from .._jsonable import to_jsonable
from ..errors import DataError, RiskvetError, problem

# Tolerance for "rows of prob sum to one"; predictions written to text files
# with 8 or more significant digits pass, anything cruder is a mistake.
_ROW_SUM_TOLERANCE = 1e-6


def _fields_dict(result: Any) -> dict[str, Any]:
    """JSON-ready dict of a result dataclass's fields."""
    return {f.name: to_jsonable(getattr(result, f.name)) for f in dataclasses.fields(result)}


def _frozen(values: Any, dtype: Any = float) -> np.ndarray:
    """A read-only copy, so a frozen result cannot be changed through its arrays."""
    out = np.array(values, dtype=dtype, copy=True)
    out.setflags(write=False)
    return out


def _check_confidence(confidence: Any, func: str) -> float:
    """The confidence level as a float strictly between 0 and 1."""
    if not isinstance(confidence, (int, float, np.floating)) or isinstance(confidence, bool) or not 0.0 < float(confidence) < 1.0:
        raise RiskvetError(problem(f"{func}(confidence=)", allowed="a number strictly between 0 and 1", received=confidence))
    return float(confidence)


def _z(confidence: float) -> float:
    """Two-sided standard normal quantile of a confidence level."""
    return float(stats.norm.ppf(0.5 + confidence / 2.0))


def _as_outcome(y: Any, func: str, *, n_levels: int | None = None) -> np.ndarray:
    """Integer outcome levels 0 .. K-1 as a 1-D int array.

    An ordered pandas Categorical (or Series of one) gives its codes, levels
    in category order; a numeric pandas Series with missing values is
    reported as missing values.
    """
    dtype = getattr(y, "dtype", None)
    if isinstance(dtype, pd.CategoricalDtype):
        if not dtype.ordered:
            raise DataError(problem(f"{func}(y=)", allowed="levels 0, 1, ... or an ordered Categorical", received="an unordered Categorical"))
        codes = np.asarray(y.cat.codes if isinstance(y, pd.Series) else y.codes, dtype=float)
        y = np.where(codes < 0, np.nan, codes)
    elif isinstance(y, (pd.Series, pd.Index)) and pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype):
        y = y.to_numpy(dtype=float, na_value=np.nan)
    arr = np.asarray(y)
    if arr.ndim != 1 or arr.size == 0:
        raise DataError(problem(f"{func}(y=)", allowed="a non-empty 1-D array of outcome levels 0, 1, ...", received=f"shape {arr.shape}"))
    if arr.dtype == bool:
        arr = arr.astype(np.int64)
    if not np.issubdtype(arr.dtype, np.number):
        raise DataError(problem(f"{func}(y=)", allowed="numeric outcome levels 0, 1, ... (recode labels first)", received=f"dtype {arr.dtype}"))
    values = arr.astype(float)
    if not np.all(np.isfinite(values)) or np.any(values != np.round(values)) or np.any(values < 0):
        bad = values[~np.isfinite(values) | (values != np.round(values)) | (values < 0)][:3]
        raise DataError(problem(f"{func}(y=)", allowed="whole numbers 0, 1, ..., no missing values", received=f"values such as {bad.tolist()}"))
    out = values.astype(np.int64)
    if n_levels is not None and out.max() >= n_levels:
        raise DataError(
            problem(f"{func}(y=)", allowed=f"levels 0 .. {n_levels - 1} (prob has {n_levels} columns)", received=f"level {int(out.max())}")
        )
    return out


def _as_score(score: Any, n: int, func: str, name: str = "score") -> np.ndarray:
    """Finite scores, one per row of ``y``, as a 1-D float array."""
    arr = np.asarray(score, dtype=float)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise DataError(problem(f"{func}({name}=)", allowed=f"a 1-D array of length {n} (one value per row of y)", received=f"shape {arr.shape}"))
    if not np.all(np.isfinite(arr)):
        raise DataError(problem(f"{func}({name}=)", allowed="finite numbers, no missing values", received=f"{int(np.sum(~np.isfinite(arr)))} non-finite values"))
    return arr


def _as_weights(weights: Any, n: int, func: str) -> np.ndarray | None:
    """Finite non-negative row weights as a 1-D float array, or None."""
    if weights is None:
        return None
    arr = np.asarray(weights, dtype=float)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise DataError(problem(f"{func}(weights=)", allowed=f"a 1-D array of length {n}", received=f"shape {arr.shape}"))
    if not np.all(np.isfinite(arr)) or np.any(arr < 0):
        raise DataError(problem(f"{func}(weights=)", allowed="finite non-negative numbers", received=f"values such as {arr[~np.isfinite(arr) | (arr < 0)][:3].tolist()}"))
    return arr


def _as_binary(y: Any, func: str) -> np.ndarray:
    """A 0/1 outcome as a 1-D int array."""
    out = _as_outcome(y, func)
    if out.max() > 1:
        raise DataError(problem(f"{func}(y=)", allowed="a binary outcome coded 0/1", received=f"levels {np.unique(out).tolist()[:6]}"))
    return out


def _as_prob_vector(prob: Any, n: int, func: str) -> np.ndarray:
    """Event probabilities of a binary outcome; an n x 2 matrix gives its second column."""
    arr = np.asarray(prob, dtype=float)
    if arr.ndim == 2 and arr.shape == (n, 2):
        arr = _as_prob_matrix(arr, n, func)[:, 1]
    if arr.ndim != 1 or arr.shape[0] != n:
        raise DataError(problem(f"{func}(prob=)", allowed=f"a vector of {n} event probabilities (or an {n} x 2 matrix)", received=f"shape {arr.shape}"))
    if not np.all(np.isfinite(arr)) or np.any(arr < 0) or np.any(arr > 1):
        raise DataError(problem(f"{func}(prob=)", allowed="probabilities in [0, 1], no missing values", received=f"values such as {arr[~np.isfinite(arr) | (arr < 0) | (arr > 1)][:3].tolist()}"))
    return arr


def _as_prob_matrix(prob: Any, n: int, func: str) -> np.ndarray:
    """n x K level probabilities; a vector is read as binary event probabilities."""
    arr = np.asarray(prob, dtype=float)
    if arr.ndim == 1:
        arr = np.column_stack([1.0 - arr, arr]) if arr.shape[0] == n else arr
    if arr.ndim != 2 or arr.shape[0] != n or arr.shape[1] < 2:
        raise DataError(problem(f"{func}(prob=)", allowed=f"an {n} x K matrix of level probabilities (K >= 2) or a vector of {n} event probabilities", received=f"shape {arr.shape}"))
    if not np.all(np.isfinite(arr)) or np.any(arr < -1e-12) or np.any(arr > 1 + 1e-12):
        raise DataError(problem(f"{func}(prob=)", allowed="probabilities in [0, 1], no missing values", received="values outside [0, 1] or missing"))
    row_sums = arr.sum(axis=1)
    worst = float(np.max(np.abs(row_sums - 1.0)))
    if worst > _ROW_SUM_TOLERANCE:
        raise DataError(problem(f"{func}(prob=)", allowed=f"rows summing to 1 (within {_ROW_SUM_TOLERANCE:g})", received=f"a row summing to {float(row_sums[np.argmax(np.abs(row_sums - 1.0))])!r}"))
    return np.clip(arr, 0.0, 1.0)


def _cut_probs(prob_matrix: np.ndarray) -> np.ndarray:
    """n x (K-1) matrix of P(Y > j), j = 0 .. K-2."""
    tail = np.cumsum(prob_matrix[:, ::-1], axis=1)[:, ::-1]
    return np.clip(tail[:, 1:], 0.0, 1.0)


def _require_two_classes(event: np.ndarray, func: str, what: str = "y") -> None:
    """Refuse data without both an event and a non-event."""
    n_events = int(np.count_nonzero(event))
    if n_events == 0 or n_events == event.shape[0]:
        raise DataError(
            problem(f"{func}({what}=)", allowed="both events and non-events", received=f"{n_events} events among {event.shape[0]} rows")
        )

