"""Design specification: raw data columns turned into model-matrix terms.

A :class:`DesignSpec` is learned once, on the development data, by
:func:`build_design`: spline knots are placed and category levels fixed
there.  Afterwards it is frozen, and :meth:`DesignSpec.transform` encodes any
data set (development, bootstrap resample, validation sample) into exactly
the same float64 columns in the same order, or refuses data it cannot encode
faithfully.  Its JSON form stores knots as exact binary floats, so a design
read back from a model file encodes data bit for bit as the original did.

Terms and their output columns
------------------------------
linear
    One column, named after the data column (binary 0/1 and boolean
    predictors are linear terms).
spline
    A restricted cubic spline with ``k`` knots: the column itself, then
    ``k - 2`` nonlinear columns ``"<col>_nonlin1"``, ``"<col>_nonlin2"``, ...
    (see :func:`rcs_basis`).
categorical
    One indicator per level except the reference level, named
    ``"<col>=<level>"``.
interaction
    The product of every column of one term with every column of the other,
    named ``"<a>:<b>"`` (for example ``"age:sex=female"``); the term itself is
    named ``"<term a>:<term b>"``.

There is no intercept column; the fitting stage adds intercepts/thresholds.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Union

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..errors import DesignError, ModelFileError, problem

__all__ = [
    "KNOT_QUANTILES",
    "Term",
    "DesignSpec",
    "harrell_knots",
    "rcs_basis",
    "build_design",
]

#: Schema tag written by :meth:`DesignSpec.to_dict`.
SCHEMA = "riskvet.design/1"

#: Quantiles at which :func:`harrell_knots` places knots, by number of knots
#: (Harrell 2015, Table 2.3).
KNOT_QUANTILES: Mapping[int, tuple[float, ...]] = {
    3: (0.10, 0.5, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.5, 0.725, 0.95),
    6: (0.05, 0.23, 0.41, 0.59, 0.77, 0.95),
    7: (0.025, 0.1833, 0.3417, 0.5, 0.6583, 0.8167, 0.975),
}

# Below this many observations the outer knots move in to the 5th smallest and
# 5th largest values (Harrell 2015, section 2.4.6).
_SMALL_SAMPLE = 100
_OUTER_RANK = 5

_KINDS = ("linear", "spline", "categorical", "interaction")
_NONLINEAR_SUFFIX = "_nonlin"

Level = Union[str, int, float, bool]

_SHOW = 5  # how many offending rows / values an error message lists


# --------------------------------------------------------------------------
# Spline knots and basis
# --------------------------------------------------------------------------


def harrell_knots(x: Any, n_knots: int) -> np.ndarray:
    """Knot locations for a restricted cubic spline at the standard quantiles.

    Parameters
    ----------
    x : array_like of float
        The predictor's values, one-dimensional, finite, no missing values.
    n_knots : int
        Number of knots, 3 to 7.

    Returns
    -------
    numpy.ndarray
        ``n_knots`` strictly increasing knot locations.

    Raises
    ------
    DesignError
        If ``n_knots`` is not an integer from 3 to 7, ``x`` is not finite, or
        ``x`` has too few distinct values to give ``n_knots`` distinct knots
        (use fewer knots, or a linear term).

    Notes
    -----
    Knots are the sample quantiles of ``x`` at the probabilities in
    :data:`KNOT_QUANTILES` (Harrell 2015, Table 2.3)::

        k = 3: .10  .5  .90
        k = 4: .05  .35  .65  .95
        k = 5: .05  .275 .5  .725 .95
        k = 6: .05  .23  .41  .59  .77  .95
        k = 7: .025 .1833 .3417 .5 .6583 .8167 .975

    Sample quantiles are Hyndman & Fan's definition 7 (linear interpolation
    between order statistics, ``numpy.quantile``'s default).

    When ``x`` has fewer than 100 values the outer two knots are the 5th
    smallest and the 5th largest value instead of the outer quantiles, as
    Harrell (2015, section 2.4.6) recommends, so that each tail beyond an
    outer knot holds a few observations; this needs at least 5 values.

    References
    ----------
    Harrell FE Jr. Regression Modeling Strategies: With Applications to Linear
    Models, Logistic and Ordinal Regression, and Survival Analysis. 2nd ed.
    New York: Springer; 2015. Section 2.4.6 and Table 2.3.

    Hyndman RJ, Fan Y. Sample quantiles in statistical packages. The American
    Statistician. 1996;50(4):361-365.
    """
    return _harrell_knots(x, n_knots, where="harrell_knots")


def _harrell_knots(x: Any, n_knots: Any, *, where: str) -> np.ndarray:
    _check_n_knots(n_knots, where=f"{where}: n_knots")
    values = _finite_vector(x, where=f"{where}: x")
    probs = np.asarray(KNOT_QUANTILES[n_knots], dtype=float)
    n = values.size
    if n < _OUTER_RANK:
        raise DesignError(
            problem(f"{where}: x", allowed=f"at least {_OUTER_RANK} values to place spline knots",
                    received={"n_values": n})
        )
    knots = np.quantile(values, probs)
    if n < _SMALL_SAMPLE:
        ordered = np.sort(values)
        knots[0] = ordered[_OUTER_RANK - 1]
        knots[-1] = ordered[n - _OUTER_RANK]
    if not np.all(np.diff(knots) > 0):
        raise DesignError(
            problem(
                f"{where}: x",
                allowed=(f"values spread enough for {n_knots} distinct knots at quantiles "
                         f"{list(KNOT_QUANTILES[n_knots])} (use fewer knots or a linear term)"),
                received={"knots": knots.tolist(), "n_values": n,
                          "n_distinct_values": int(np.unique(values).size)},
            )
        )
    return knots


def rcs_basis(x: Any, knots: Any) -> np.ndarray:
    """Restricted cubic spline basis in the truncated-power form.

    Parameters
    ----------
    x : array_like of float
        Values at which to evaluate the basis; one-dimensional and finite.
    knots : array_like of float
        ``k >= 3`` strictly increasing, finite knot locations.

    Returns
    -------
    numpy.ndarray
        Array of shape ``(n, k - 1)``: column 0 is ``x`` itself, columns 1 to
        ``k - 2`` are the nonlinear terms.

    Raises
    ------
    DesignError
        If ``x`` or ``knots`` is not finite and one-dimensional, there are
        fewer than 3 knots, or the knots do not increase strictly.

    Notes
    -----
    With knots :math:`t_1 < \\dots < t_k` and :math:`(u)_+ = \\max(u, 0)`,
    nonlinear term :math:`j = 1, \\dots, k - 2` is

    .. math::

        X_{j+1} = \\frac{1}{(t_k - t_1)^2} \\Big[ (x - t_j)_+^3
            - (x - t_{k-1})_+^3 \\frac{t_k - t_j}{t_k - t_{k-1}}
            + (x - t_k)_+^3 \\frac{t_{k-1} - t_j}{t_k - t_{k-1}} \\Big]

    (Harrell 2015, section 2.4.5; Stone & Koo 1985; Devlin & Weeks 1986).
    Every term is zero below :math:`t_1`, and the cubic and quadratic parts
    cancel beyond :math:`t_k`, so any linear combination of the columns (plus
    an intercept) is a cubic spline with continuous second derivative that is
    linear below :math:`t_1` and above :math:`t_k`: together with a constant
    the columns span the natural cubic splines with these knots (Hastie,
    Tibshirani & Friedman 2009, section 5.2.1).

    Dividing by :math:`(t_k - t_1)^2` turns a cubed distance into a distance,
    so the nonlinear terms are on the scale of ``x`` (for ``x`` in years they
    are in years), which keeps the design matrix well conditioned and the
    coefficients readable.

    Each output element depends on its own ``x`` value only, through the same
    floating-point operations, so the basis of a subset of rows is bit for bit
    the subset of the basis.

    References
    ----------
    Harrell FE Jr. Regression Modeling Strategies. 2nd ed. New York:
    Springer; 2015. Section 2.4.5.

    Stone CJ, Koo CY. Additive splines in statistics. Proceedings of the
    Statistical Computing Section, American Statistical Association; 1985:
    45-48.

    Devlin TF, Weeks BJ. Spline functions for logistic regression modeling.
    Proceedings of the Eleventh Annual SAS Users Group International
    Conference; 1986:646-651.

    Hastie T, Tibshirani R, Friedman J. The Elements of Statistical Learning.
    2nd ed. New York: Springer; 2009. Section 5.2.1.
    """
    values = _finite_vector(x, where="rcs_basis: x")
    t = _check_knots(knots, where="rcs_basis: knots")
    return _rcs(values, t)


def _rcs(x: np.ndarray, t: np.ndarray) -> np.ndarray:
    k = t.size
    last, penultimate = t[-1], t[-2]
    gap = last - penultimate
    scale = (last - t[0]) ** 2
    tail_last = np.maximum(x - last, 0.0) ** 3
    tail_penultimate = np.maximum(x - penultimate, 0.0) ** 3
    out = np.empty((x.size, k - 1), dtype=np.float64)
    out[:, 0] = x
    for j in range(k - 2):
        own = np.maximum(x - t[j], 0.0) ** 3
        out[:, j + 1] = (
            own
            - tail_penultimate * ((last - t[j]) / gap)
            + tail_last * ((penultimate - t[j]) / gap)
        ) / scale
    return out


def _check_n_knots(n_knots: Any, *, where: str) -> None:
    if isinstance(n_knots, bool) or not isinstance(n_knots, (int, np.integer)) or n_knots not in KNOT_QUANTILES:
        raise DesignError(problem(where, allowed="an integer number of knots from 3 to 7", received=n_knots))


def _check_knots(knots: Any, *, where: str) -> np.ndarray:
    try:
        t = np.asarray(knots, dtype=np.float64)
    except (TypeError, ValueError):
        raise DesignError(problem(where, allowed="a sequence of numbers", received=knots)) from None
    if t.ndim != 1 or t.size < 3 or not np.all(np.isfinite(t)) or not np.all(np.diff(t) > 0):
        raise DesignError(
            problem(where, allowed="at least 3 finite, strictly increasing knots",
                    received=t.tolist() if t.ndim <= 1 else knots)
        )
    return t


def _finite_vector(x: Any, *, where: str) -> np.ndarray:
    try:
        values = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError):
        raise DesignError(problem(where, allowed="numbers", received=type(x).__name__)) from None
    if values.ndim != 1:
        raise DesignError(problem(where, allowed="a one-dimensional array", received={"shape": values.shape}))
    bad = ~np.isfinite(values)
    if bad.any():
        raise DesignError(
            problem(where, allowed="finite values (no NaN or infinity)",
                    received={"n_not_finite": int(bad.sum()), "first_positions": np.flatnonzero(bad)[:_SHOW].tolist()})
        )
    return values


# --------------------------------------------------------------------------
# Terms
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class Term:
    """One term of a design: how one or two data columns become model columns.

    Attributes
    ----------
    name : str
        Term name: the data column for linear, spline and categorical terms,
        ``"<term a>:<term b>"`` for an interaction.
    kind : {"linear", "spline", "categorical", "interaction"}
        How the term is encoded.
    sources : tuple of str
        The data columns the term reads, in order.
    columns : tuple of str
        The output column names, in order.
    knots : tuple of float
        Spline knots (``kind == "spline"``); empty otherwise.
    levels : tuple
        All allowed levels in order, reference included
        (``kind == "categorical"``); empty otherwise.
    reference : str, int, float, bool or None
        The reference level, which has no column (``kind == "categorical"``).
    parts : tuple of Term
        The two component terms of an interaction; empty otherwise.  An
        interaction carries its components, so it can be encoded on its own.
    """

    name: str
    kind: str
    sources: tuple[str, ...]
    columns: tuple[str, ...]
    knots: tuple[float, ...] = ()
    levels: tuple[Level, ...] = ()
    reference: Level | None = None
    parts: tuple["Term", ...] = field(default=())

    def __post_init__(self) -> None:
        # Normalise containers so that equal terms compare equal and hash.
        object.__setattr__(self, "sources", tuple(self.sources))
        object.__setattr__(self, "columns", tuple(self.columns))
        object.__setattr__(self, "knots", tuple(float(v) for v in self.knots))
        object.__setattr__(self, "levels", tuple(self.levels))
        object.__setattr__(self, "parts", tuple(self.parts))
        self._validate()

    def _validate(self) -> None:
        where = f"Term {self.name!r}"
        if not isinstance(self.name, str) or not self.name:
            raise DesignError(problem("Term: name", allowed="a non-empty string", received=self.name))
        if self.kind not in _KINDS:
            raise DesignError(problem(f"{where}: kind", allowed=f"one of {list(_KINDS)}", received=self.kind))
        for label, names in (("sources", self.sources), ("columns", self.columns)):
            if not names or not all(isinstance(c, str) and c for c in names):
                raise DesignError(problem(f"{where}: {label}", allowed="non-empty strings", received=list(names)))
        if self.kind != "spline" and self.knots:
            raise DesignError(problem(f"{where}: knots", allowed="no knots for a non-spline term", received=list(self.knots)))
        if self.kind != "categorical" and (self.levels or self.reference is not None):
            raise DesignError(problem(f"{where}: levels", allowed="no levels for a non-categorical term",
                                      received=list(self.levels)))
        if self.kind != "interaction" and self.parts:
            raise DesignError(problem(f"{where}: parts", allowed="no parts for a non-interaction term",
                                      received=[p.name for p in self.parts]))
        if self.kind in ("linear", "spline", "categorical") and len(self.sources) != 1:
            raise DesignError(problem(f"{where}: sources", allowed="exactly one data column",
                                      received=list(self.sources)))
        if self.kind == "linear":
            expected = (self.sources[0],)
        elif self.kind == "spline":
            t = _check_knots(self.knots, where=f"{where}: knots")
            expected = _spline_columns(self.sources[0], t.size)
        elif self.kind == "categorical":
            _check_levels(self.levels, where=f"{where}: levels")
            if not _contains(self.levels, self.reference):
                raise DesignError(problem(f"{where}: reference", allowed=f"one of the levels {list(self.levels)!r}",
                                          received=self.reference))
            expected = _dummy_columns(self.sources[0], self.levels, self.reference)
        else:
            if len(self.parts) != 2 or not all(isinstance(p, Term) and p.kind != "interaction" for p in self.parts):
                raise DesignError(problem(f"{where}: parts", allowed="two non-interaction terms",
                                          received=[getattr(p, "name", p) for p in self.parts]))
            a, b = self.parts
            expected = _interaction_columns(a, b)
            if self.sources != _union(a.sources + b.sources):
                raise DesignError(problem(f"{where}: sources", allowed=repr(list(_union(a.sources + b.sources))),
                                          received=list(self.sources)))
        if self.columns != expected:
            raise DesignError(problem(f"{where}: columns", allowed=repr(list(expected)), received=list(self.columns)))

    def to_dict(self) -> dict[str, Any]:
        """The term as JSON-ready values; knots also as exact ``float.hex`` strings."""
        return {
            "name": self.name,
            "kind": self.kind,
            "sources": list(self.sources),
            "columns": list(self.columns),
            "knots": [float(v) for v in self.knots],
            "knots_hex": [float(v).hex() for v in self.knots],
            "levels": to_jsonable(list(self.levels)),
            "reference": to_jsonable(self.reference),
            "parts": [p.to_dict() for p in self.parts],
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "Term":
        """Rebuild a term written by :meth:`to_dict`.

        Raises
        ------
        ModelFileError
            If the mapping is not a term written by :meth:`to_dict`.
        """
        where = "design file: term"
        if not isinstance(data, Mapping):
            raise ModelFileError(problem(where, allowed="a mapping", received=type(data).__name__))
        required = ("name", "kind", "sources", "columns")
        missing = [k for k in required if k not in data]
        if missing:
            raise ModelFileError(problem(where, allowed=f"keys {list(required)}", received={"missing": missing}))
        name = data["name"]
        where = f"design file: term {name!r}"
        knots = list(data.get("knots", []))
        if "knots_hex" in data:
            try:
                exact = [float.fromhex(h) for h in data["knots_hex"]]
            except (TypeError, ValueError):
                raise ModelFileError(problem(f"{where}: knots_hex", allowed="float.hex strings",
                                             received=data["knots_hex"])) from None
            if len(exact) != len(knots) or any(not math.isclose(e, float(k), rel_tol=1e-12, abs_tol=0.0)
                                               for e, k in zip(exact, knots)):
                raise ModelFileError(problem(f"{where}: knots", allowed=f"the values of knots_hex {exact!r}",
                                             received=knots))
            knots = exact
        try:
            return cls(
                name=name,
                kind=data["kind"],
                sources=tuple(data["sources"]),
                columns=tuple(data["columns"]),
                knots=tuple(knots),
                levels=tuple(data.get("levels", [])),
                reference=data.get("reference"),
                parts=tuple(cls.from_dict(p) for p in data.get("parts", [])),
            )
        except DesignError as exc:
            raise ModelFileError(f"{where}: {exc}") from None
        except TypeError as exc:
            raise ModelFileError(problem(where, allowed="a term written by Term.to_dict", received=str(exc))) from None

    def _encode(self, frame: pd.DataFrame) -> np.ndarray:
        if self.kind == "linear":
            return _numeric_column(frame, self.sources[0])[:, None]
        if self.kind == "spline":
            return _rcs(_numeric_column(frame, self.sources[0]), np.asarray(self.knots, dtype=np.float64))
        if self.kind == "categorical":
            return _encode_categorical(frame, self.sources[0], self.levels, self.reference)
        a, b = (p._encode(frame) for p in self.parts)
        out = np.empty((a.shape[0], a.shape[1] * b.shape[1]), dtype=np.float64)
        for i in range(a.shape[1]):
            for j in range(b.shape[1]):
                out[:, i * b.shape[1] + j] = a[:, i] * b[:, j]
        return out


def _spline_columns(source: str, n_knots: int) -> tuple[str, ...]:
    return (source,) + tuple(f"{source}{_NONLINEAR_SUFFIX}{j}" for j in range(1, n_knots - 1))


def _level_text(level: Level) -> str:
    return level if isinstance(level, str) else repr(level) if isinstance(level, float) else str(level)


def _dummy_columns(source: str, levels: Sequence[Level], reference: Level) -> tuple[str, ...]:
    return tuple(f"{source}={_level_text(v)}" for v in levels if not _same_level(v, reference))


def _interaction_columns(a: Term, b: Term) -> tuple[str, ...]:
    return tuple(f"{ca}:{cb}" for ca in a.columns for cb in b.columns)


def _union(names: Iterable[str]) -> tuple[str, ...]:
    return tuple(dict.fromkeys(names))


def _same_level(a: Any, b: Any) -> bool:
    # Levels match by value within numbers (1 == 1.0) but never across types
    # (1 != "1", True != 1), so a code read as text is not silently recoded.
    if isinstance(a, str) or isinstance(b, str):
        return isinstance(a, str) and isinstance(b, str) and a == b
    if isinstance(a, bool) or isinstance(b, bool):
        return isinstance(a, bool) and isinstance(b, bool) and a == b
    return a == b


def _contains(levels: Sequence[Level], value: Any) -> bool:
    return any(_same_level(v, value) for v in levels)


def _check_levels(levels: Sequence[Any], *, where: str) -> None:
    ok_type = all(isinstance(v, (str, int, float)) and not (isinstance(v, float) and not math.isfinite(v))
                  for v in levels)
    if not ok_type:
        raise DesignError(problem(where, allowed="strings, integers, finite floats or booleans",
                                  received=list(levels)))
    if len(levels) < 2:
        raise DesignError(problem(where, allowed="at least 2 levels", received=list(levels)))
    for i, v in enumerate(levels):
        if _contains(levels[:i], v):
            raise DesignError(problem(where, allowed="distinct levels", received=list(levels)))


def _plain_level(value: Any) -> Any:
    """A level as a plain Python value; integral floats become ints."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and math.isfinite(value) and value.is_integer():
        return int(value)
    return value


# --------------------------------------------------------------------------
# Reading values from a frame
# --------------------------------------------------------------------------


def _rows(frame: pd.DataFrame, mask: np.ndarray) -> list[Any]:
    return [to_jsonable(v) if not isinstance(v, str) else v for v in frame.index[mask][:_SHOW].tolist()]


def _check_complete(frame: pd.DataFrame, column: str) -> pd.Series:
    series = frame[column]
    if isinstance(series, pd.DataFrame):
        raise DesignError(problem(f"column {column!r}", allowed="a single column of that name",
                                  received={"n_columns": series.shape[1]}))
    missing = series.isna().to_numpy()
    if missing.any():
        raise DesignError(
            problem(f"column {column!r}",
                    allowed="no missing values (exclude incomplete rows before encoding)",
                    received={"n_missing": int(missing.sum()), "n_rows": len(series), "rows": _rows(frame, missing)})
        )
    return series


def _numeric_column(frame: pd.DataFrame, column: str) -> np.ndarray:
    series = _check_complete(frame, column)
    dtype = series.dtype
    if pd.api.types.is_bool_dtype(dtype) or (pd.api.types.is_numeric_dtype(dtype)
                                             and not pd.api.types.is_complex_dtype(dtype)):
        values = series.to_numpy(dtype=np.float64)
    else:
        # Text that reads as a number (a column read as text) is accepted;
        # anything else is refused.
        as_object = series.astype(object)
        coerced = pd.to_numeric(as_object, errors="coerce")
        bad = coerced.isna().to_numpy()
        if bad.any():
            examples = list(dict.fromkeys(as_object[bad].tolist()))[:_SHOW]
            raise DesignError(
                problem(f"column {column!r}", allowed="numbers",
                        received={"n_not_numeric": int(bad.sum()), "values": examples, "rows": _rows(frame, bad)})
            )
        values = coerced.to_numpy(dtype=np.float64)
    bad = ~np.isfinite(values)
    if bad.any():
        raise DesignError(
            problem(f"column {column!r}", allowed="finite numbers",
                    received={"n_not_finite": int(bad.sum()), "rows": _rows(frame, bad)})
        )
    return values


def _category_values(frame: pd.DataFrame, column: str) -> pd.Series:
    series = _check_complete(frame, column)
    if isinstance(series.dtype, pd.CategoricalDtype):
        series = series.astype(object)
    return series


def _level_masks(values: pd.Series, levels: Sequence[Level]) -> list[np.ndarray]:
    """One boolean row mask per level, matching by :func:`_same_level`."""
    raw = values.to_numpy(dtype=object)
    dtype = values.dtype
    if pd.api.types.is_string_dtype(dtype) and dtype != object:
        kinds = np.zeros(raw.size, dtype=int)
    elif pd.api.types.is_bool_dtype(dtype):
        kinds = np.ones(raw.size, dtype=int)
    elif pd.api.types.is_numeric_dtype(dtype):
        kinds = np.full(raw.size, 2)
    else:
        kinds = np.array([0 if isinstance(v, str) else 1 if isinstance(v, (bool, np.bool_)) else 2 for v in raw],
                         dtype=int)
    masks = []
    for level in levels:
        kind = 0 if isinstance(level, str) else 1 if isinstance(level, bool) else 2
        same_kind = kinds == kind
        mask = np.zeros(raw.size, dtype=bool)
        if same_kind.any():
            mask[same_kind] = pd.Series(raw[same_kind], dtype=object).isin([level]).to_numpy()
        masks.append(mask)
    return masks


def _encode_categorical(frame: pd.DataFrame, column: str, levels: Sequence[Level], reference: Level) -> np.ndarray:
    values = _category_values(frame, column)
    masks = _level_masks(values, levels)
    known = np.logical_or.reduce(masks) if masks else np.zeros(len(values), dtype=bool)
    if not known.all():
        unseen = values[~known].astype(object)
        counts: dict[Any, int] = {}
        for v in unseen.tolist():
            key = _plain_level(v) if not isinstance(v, str) else v
            counts[key] = counts.get(key, 0) + 1
        shown = dict(sorted(counts.items(), key=lambda kv: -kv[1])[:_SHOW])
        raise DesignError(
            problem(f"column {column!r}", allowed=f"one of the levels {list(levels)!r} fixed when the design was built",
                    received={"unseen_levels": shown, "n_rows": int((~known).sum()), "rows": _rows(frame, ~known)})
        )
    kept = [m for v, m in zip(levels, masks) if not _same_level(v, reference)]
    return np.column_stack(kept).astype(np.float64) if kept else np.empty((len(values), 0))


# --------------------------------------------------------------------------
# The design specification
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class DesignSpec:
    """A frozen recipe turning data columns into model-matrix columns.

    Attributes
    ----------
    terms : tuple of Term
        The terms in model order; term names and output column names are
        unique.

    Notes
    -----
    Build one with :func:`build_design`; store it with :meth:`to_dict` or
    :meth:`to_json` and read it back with :meth:`from_dict` or
    :meth:`from_json`.
    """

    terms: tuple[Term, ...]

    def __post_init__(self) -> None:
        object.__setattr__(self, "terms", tuple(self.terms))
        if not all(isinstance(t, Term) for t in self.terms):
            raise DesignError(problem("DesignSpec: terms", allowed="Term objects",
                                      received=[type(t).__name__ for t in self.terms]))
        names = [t.name for t in self.terms]
        repeated = sorted({n for n in names if names.count(n) > 1})
        if repeated:
            raise DesignError(problem("DesignSpec: terms", allowed="distinct term names", received=repeated))
        columns = [c for t in self.terms for c in t.columns]
        repeated = sorted({c for c in columns if columns.count(c) > 1})
        if repeated:
            raise DesignError(problem("DesignSpec: terms", allowed="distinct output column names (rename a data "
                                      "column that clashes with a generated name)", received=repeated))

    @property
    def columns(self) -> tuple[str, ...]:
        """All output column names, in order."""
        return tuple(c for t in self.terms for c in t.columns)

    @property
    def term_columns(self) -> dict[str, tuple[str, ...]]:
        """Term name -> its output column names (a fresh dict each call)."""
        return {t.name: t.columns for t in self.terms}

    @property
    def sources(self) -> tuple[str, ...]:
        """The data columns the design reads, in order of first use."""
        return _union(c for t in self.terms for c in t.sources)

    def transform(self, frame: pd.DataFrame) -> pd.DataFrame:
        """Encode a data frame into the design's columns.

        Parameters
        ----------
        frame : pandas.DataFrame
            Must contain every column in :attr:`sources` (others are ignored),
            complete (no missing values) in those columns.

        Returns
        -------
        pandas.DataFrame
            float64 values, columns :attr:`columns` in that order, the index of
            ``frame``.

        Raises
        ------
        DesignError
            Naming the column and what is wrong: a source column is absent;
            it has missing values (count and first row labels; exclude those
            rows first); a numeric column has values that are not finite
            numbers (count, examples, rows); a categorical column has a level
            not among the design's levels (the levels and their counts).

        Notes
        -----
        Numeric columns may be numeric, boolean, or text whose every value
        reads as a number.  Categorical values match the stored levels by
        value within numbers (code 1 matches level 1.0) but never across
        types (text "1" does not match level 1).
        """
        if not isinstance(frame, pd.DataFrame):
            raise DesignError(problem("DesignSpec.transform: frame", allowed="a pandas DataFrame",
                                      received=type(frame).__name__))
        absent = [c for c in self.sources if c not in frame.columns]
        if absent:
            raise DesignError(problem("DesignSpec.transform: frame", allowed=f"the columns {list(self.sources)!r}",
                                      received={"missing_columns": absent}))
        blocks = [t._encode(frame) for t in self.terms]
        matrix = np.hstack(blocks) if blocks else np.empty((len(frame), 0), dtype=np.float64)
        return pd.DataFrame(matrix.astype(np.float64, copy=False), index=frame.index, columns=list(self.columns))

    def subset(self, term_names: str | Iterable[str]) -> "DesignSpec":
        """The design restricted to some terms, in this design's order.

        Parameters
        ----------
        term_names : str or iterable of str
            Names of terms to keep (a single string is one name).  Main
            effects are not added for a kept interaction; an interaction
            carries its own encoding.

        Raises
        ------
        DesignError
            If a name is not a term of this design.
        """
        wanted = [term_names] if isinstance(term_names, str) else list(term_names)
        known = [t.name for t in self.terms]
        unknown = [n for n in wanted if n not in known]
        if unknown:
            raise DesignError(problem("DesignSpec.subset: term_names", allowed=f"term names among {known!r}",
                                      received=unknown))
        keep = set(wanted)
        return DesignSpec(terms=tuple(t for t in self.terms if t.name in keep))

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form: ``{"schema": ..., "terms": [term dicts]}``."""
        return {"schema": SCHEMA, "terms": [t.to_dict() for t in self.terms]}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "DesignSpec":
        """Rebuild a design written by :meth:`to_dict`.

        Raises
        ------
        ModelFileError
            If the schema tag is unknown or a term is damaged.
        """
        if not isinstance(data, Mapping) or data.get("schema") != SCHEMA:
            received = data.get("schema") if isinstance(data, Mapping) else type(data).__name__
            raise ModelFileError(problem("design file: schema", allowed=repr(SCHEMA), received=received))
        terms = data.get("terms")
        if not isinstance(terms, list):
            raise ModelFileError(problem("design file: terms", allowed="a list of terms",
                                         received=type(terms).__name__))
        built = tuple(Term.from_dict(t) for t in terms)
        try:
            return cls(terms=built)
        except DesignError as exc:
            raise ModelFileError(f"design file: {exc}") from None

    def to_json(self) -> str:
        """The :meth:`to_dict` form as JSON text (knots exact)."""
        return json.dumps(self.to_dict(), indent=2, allow_nan=False)

    @classmethod
    def from_json(cls, text: str) -> "DesignSpec":
        """Rebuild a design from :meth:`to_json` text.

        Raises
        ------
        ModelFileError
            If the text is not JSON or not a design.
        """
        try:
            data = json.loads(text)
        except (TypeError, ValueError) as exc:
            raise ModelFileError(problem("design file", allowed="JSON text", received=str(exc))) from None
        return cls.from_dict(data)

    def to_frame(self) -> pd.DataFrame:
        """One row per term: name, kind, sources, columns, knots, levels, reference, parts."""
        rows = [
            {
                "name": t.name,
                "kind": t.kind,
                "sources": t.sources,
                "columns": t.columns,
                "knots": t.knots,
                "levels": t.levels,
                "reference": t.reference,
                "parts": tuple(p.name for p in t.parts),
            }
            for t in self.terms
        ]
        return pd.DataFrame(rows, columns=["name", "kind", "sources", "columns", "knots", "levels", "reference",
                                           "parts"])


# --------------------------------------------------------------------------
# Building a design from development data
# --------------------------------------------------------------------------


def _names(value: Any, *, where: str) -> list[str]:
    if value is None:
        return []
    items = [value] if isinstance(value, str) else list(value)
    bad = [v for v in items if not isinstance(v, str) or not v]
    if bad:
        raise DesignError(problem(where, allowed="column names (non-empty strings)", received=bad))
    repeated = sorted({v for v in items if items.count(v) > 1})
    if repeated:
        raise DesignError(problem(where, allowed="each name once", received=repeated))
    return items


def _mapping(value: Any, *, where: str) -> dict[str, Any]:
    if value is None:
        return {}
    if not isinstance(value, Mapping):
        raise DesignError(problem(where, allowed="a mapping from column name to a setting",
                                  received=type(value).__name__))
    _names(list(value), where=where)
    return dict(value)


def _learned_levels(frame: pd.DataFrame, column: str, *, where: str) -> tuple[Level, ...]:
    series = _check_complete(frame, column)
    if isinstance(series.dtype, pd.CategoricalDtype):
        observed = set(series.cat.codes.unique().tolist())
        found = [c for i, c in enumerate(series.cat.categories.tolist()) if i in observed]
    else:
        found = pd.unique(series.astype(object).to_numpy())
        try:
            found = sorted(found.tolist())
        except TypeError:
            raise DesignError(problem(where, allowed="values of one type that can be sorted, or an explicit "
                                      "list in levels", received=[type(v).__name__ for v in found[:_SHOW]])) from None
    plain = tuple(_plain_level(v) for v in found)
    _check_levels(plain, where=where)
    return plain


def build_design(
    frame: pd.DataFrame,
    *,
    linear: str | Sequence[str] = (),
    splines: Mapping[str, int] | None = None,
    categorical: Mapping[str, Level | None] | None = None,
    interactions: Sequence[tuple[str, str]] = (),
    levels: Mapping[str, Sequence[Level]] | None = None,
) -> DesignSpec:
    """Learn a design specification from development data.

    Parameters
    ----------
    frame : pandas.DataFrame
        The development data, complete in every column the design uses.
    linear : str or sequence of str
        Columns entered as one linear term each (a single string is one
        column).  Binary 0/1 or boolean predictors belong here.
    splines : mapping of str to int, optional
        Column -> number of knots (3 to 7) of a restricted cubic spline.
        Knots are placed once, on ``frame``, by :func:`harrell_knots`.
    categorical : mapping of str to level or None, optional
        Column -> reference level; ``None`` takes the first level.  The column
        may hold text, a pandas Categorical, or numeric codes.
    interactions : sequence of (str, str)
        Pairs of term names (columns named in ``linear``, ``splines`` or
        ``categorical``); the interaction holds the product of every column
        of one term with every column of the other.
    levels : mapping of str to sequence, optional
        Column -> the ordered, allowed levels (from the study file).  Without
        it the levels are those observed in ``frame``: in category order for
        a pandas Categorical, sorted otherwise (integral numeric codes become
        integers).  Entries for columns that are not categorical terms are
        ignored, so a study's whole level table can be passed.

    Returns
    -------
    DesignSpec
        Terms in the order: linear, splines, categorical (each in the order
        given), then interactions.

    Raises
    ------
    DesignError
        A name in two roles or twice in one; a column absent from ``frame``;
        an interaction of an unknown term, of a term with itself, or given
        twice; a number of knots outside 3 to 7 or too few distinct values for
        it; a reference level not among the levels; fewer than 2 levels;
        missing, non-numeric or unseen values in a used column.

    Notes
    -----
    The design has no intercept column.  Categorical terms use reference
    (treatment) coding: one 0/1 indicator per non-reference level.

    References
    ----------
    Harrell FE Jr. Regression Modeling Strategies. 2nd ed. New York:
    Springer; 2015. Sections 2.4.5-2.4.6 (splines), 2.3 (categorical
    predictors and interactions).
    """
    if not isinstance(frame, pd.DataFrame):
        raise DesignError(problem("build_design: frame", allowed="a pandas DataFrame", received=type(frame).__name__))
    linear_names = _names(linear, where="build_design: linear")
    spline_knots = _mapping(splines, where="build_design: splines")
    if categorical is not None and not isinstance(categorical, Mapping):
        references = {n: None for n in _names(categorical, where="build_design: categorical")}
    else:
        references = _mapping(categorical, where="build_design: categorical")
    declared = _mapping(levels, where="build_design: levels")

    roles: dict[str, str] = {}
    for role, names in (("linear", linear_names), ("splines", list(spline_knots)), ("categorical", list(references))):
        for name in names:
            if name in roles:
                raise DesignError(problem(f"build_design: {role}", allowed=f"a column in one role only "
                                          f"({name!r} is already in {roles[name]})", received=name))
            roles[name] = role
    absent = [n for n in roles if n not in frame.columns]
    if absent:
        shown = [str(c) for c in frame.columns[:20]]
        raise DesignError(problem("build_design: frame", allowed=f"columns of the data frame {shown!r}"
                                  + (" ..." if frame.shape[1] > 20 else ""), received={"unknown_columns": absent}))
    for name, n_knots in spline_knots.items():
        _check_n_knots(n_knots, where=f"build_design: splines[{name!r}]")

    terms: dict[str, Term] = {}
    for name in linear_names:
        _numeric_column(frame, name)
        terms[name] = Term(name=name, kind="linear", sources=(name,), columns=(name,))
    for name, n_knots in spline_knots.items():
        knots = _harrell_knots(_numeric_column(frame, name), n_knots, where=f"build_design: splines[{name!r}]")
        terms[name] = Term(name=name, kind="spline", sources=(name,), columns=_spline_columns(name, n_knots),
                           knots=tuple(knots.tolist()))
    for name, reference in references.items():
        terms[name] = _categorical_term(frame, name, reference, declared.get(name))

    main = list(terms)
    seen_pairs: set[frozenset[str]] = set()
    pairs = [] if interactions is None else list(interactions)
    for pair in pairs:
        if isinstance(pair, str) or not isinstance(pair, Sequence) or len(pair) != 2:
            raise DesignError(problem("build_design: interactions", allowed="pairs of term names", received=pair))
        a, b = pair
        unknown = [n for n in (a, b) if n not in main]
        if unknown:
            raise DesignError(problem("build_design: interactions", allowed=f"term names among {main!r}",
                                      received=unknown))
        if a == b:
            raise DesignError(problem("build_design: interactions", allowed="two different terms", received=list(pair)))
        key = frozenset((a, b))
        if key in seen_pairs:
            raise DesignError(problem("build_design: interactions", allowed="each pair once", received=list(pair)))
        seen_pairs.add(key)
        ta, tb = terms[a], terms[b]
        name = f"{a}:{b}"
        terms[name] = Term(name=name, kind="interaction", sources=_union(ta.sources + tb.sources),
                           columns=_interaction_columns(ta, tb), parts=(ta, tb))
    return DesignSpec(terms=tuple(terms.values()))


def _categorical_term(frame: pd.DataFrame, name: str, reference: Any, declared: Any) -> Term:
    where = f"build_design: levels[{name!r}]"
    if declared is None:
        allowed = _learned_levels(frame, name, where=where)
    else:
        if isinstance(declared, str) or not isinstance(declared, Iterable):
            raise DesignError(problem(where, allowed="a list of levels", received=declared))
        allowed = tuple(v.item() if isinstance(v, np.generic) else v for v in declared)
        _check_levels(allowed, where=where)
    ref = reference.item() if isinstance(reference, np.generic) else reference
    if ref is None:
        ref = allowed[0]
    elif not _contains(allowed, ref):
        raise DesignError(problem(f"build_design: categorical[{name!r}]", allowed=f"one of the levels {list(allowed)!r}",
                                  received=ref))
    ref = next(v for v in allowed if _same_level(v, ref))
    term = Term(name=name, kind="categorical", sources=(name,), columns=_dummy_columns(name, allowed, ref),
                levels=allowed, reference=ref)
    term._encode(frame)  # refuse development data the design could not encode later
    return term
