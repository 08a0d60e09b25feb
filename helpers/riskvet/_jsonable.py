"""Conversion of result objects to plain JSON-ready Python values."""

from __future__ import annotations

import dataclasses
import math
import re
from typing import Any

import numpy as np

__all__ = ["to_jsonable", "positional_numbers"]


def to_jsonable(value: Any) -> Any:
    """Return ``value`` as plain dicts, lists, str, int, float, bool and None.

    numpy scalars and arrays become Python numbers and lists, pandas objects
    become dicts/lists, dataclasses become dicts of their fields, and
    non-finite floats become ``None`` (JSON has no NaN), so that
    ``json.dumps(to_jsonable(x), allow_nan=False)`` always succeeds.
    """
    import pandas as pd

    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, (np.bool_,)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return v if math.isfinite(v) else None
    if hasattr(value, "to_dict") and not isinstance(value, (pd.DataFrame, pd.Series)) and not isinstance(value, type):
        return to_jsonable(value.to_dict())
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, pd.DataFrame):
        # a meaningful index (not 0..n-1) is kept as a column
        table = value if isinstance(value.index, pd.RangeIndex) else value.reset_index()
        return [to_jsonable(r) for r in table.to_dict(orient="records")]
    if isinstance(value, pd.Series):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, np.ndarray):
        return [to_jsonable(v) for v in value.tolist()]
    if isinstance(value, dict):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, set, frozenset)):
        return [to_jsonable(v) for v in value]
    if hasattr(value, "isoformat"):
        return value.isoformat()
    raise TypeError(f"to_jsonable: cannot convert a {type(value).__name__} to JSON")


_JSON_TOKEN = re.compile(r'"(?:[^"\\]|\\.)*"|(-?\d+(?:\.\d+)?[eE][-+]?\d+)')


def positional_numbers(text: str) -> str:
    """A JSON text with every number in scientific notation written positionally.

    ``1.8e-07`` becomes ``0.00000018`` (the same float, read back exactly:
    numpy's shortest positional representation); strings are left alone.
    Records publish their results files this way, so no reader meets
    scientific notation there either.
    """
    def rewrite(match: re.Match) -> str:
        number = match.group(1)
        if number is None:
            return match.group(0)
        return np.format_float_positional(float(number), trim="0")

    return _JSON_TOKEN.sub(rewrite, text)
