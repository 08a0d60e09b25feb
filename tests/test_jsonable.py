"""JSON conversion of result values."""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np
import pandas as pd

from riskvet._jsonable import to_jsonable


@dataclass(frozen=True)
class _Point:
    x: float
    tags: tuple


def test_numpy_pandas_and_dataclasses_become_plain_json():
    value = {
        "a": np.float64(1.5),
        "b": np.int32(3),
        "c": np.array([1.0, np.nan]),
        "d": pd.DataFrame({"x": [1, 2]}, index=pd.Index(["r", "s"], name="row")),
        "e": pd.Series({"k": np.inf}),
        "f": _Point(x=np.float32(0.25), tags=("u", np.bool_(True))),
    }
    out = to_jsonable(value)
    assert out == {
        "a": 1.5,
        "b": 3,
        "c": [1.0, None],
        "d": [{"row": "r", "x": 1}, {"row": "s", "x": 2}],
        "e": {"k": None},
        "f": {"x": 0.25, "tags": ["u", True]},
    }
    json.dumps(out, allow_nan=False)
    assert type(out["b"]) is int and type(out["a"]) is float
