"""Data intake: reading cohort files, auditing them and preparing analysis sets.

:func:`read_table` reads one file (CSV, TSV, Parquet, Stata, SPSS, Excel).
:func:`audit_frame` summarises a frame column by column without showing any
row.  :func:`prepare_cohort` checks a frame against the study (columns exist,
outcome and category values are the configured ones, numeric predictors are
numbers, ids are unique), applies complete-case exclusions in a fixed order
and records each step, and codes the outcome 0..K-1.  :func:`load_cohorts`
does all of this for every file the study names.  With ``data.weight_column``
every cohort carries frequency weights (a row standing for w identical
people); :func:`expand_cohort` writes such a cohort out one row per person.
:func:`standardised_differences` compares two prepared cohorts; the
descriptive table a record publishes is built, with its small counts
suppressed, by :func:`riskvet.reporting.descriptive.descriptive_table`.

Values are compared with the study's levels as text: a number read from a
file is written without a trailing ``.0`` when it is whole (``1.0`` -> ``"1"``),
so ``levels: [0, 1]`` matches a CSV column of 0/1, a Stata byte and a Parquet
float alike.

Privacy: nothing here returns, prints or records individual rows or ids in
summaries, tables or error messages.  Errors quote offending *values* with
their counts (``'>90' (2 rows)``), never row numbers or ids.
"""

from __future__ import annotations

import dataclasses
import difflib
import importlib
import math
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..errors import DataError, problem
from .outcome import outcome_codes
from .study import DataSection, PredictorSpec, Study

__all__ = [
    "MISSING_VALUES",
    "SUFFIXES",
    "ColumnAudit",
    "FrameAudit",
    "CategoryMapping",
    "PreparedCohort",
    "Cohorts",
    "StandardisedDifferences",
    "read_table",
    "audit_frame",
    "prepare_cohort",
    "load_cohorts",
    "expand_cohort",
    "standardised_differences",
]

#: Missing-value codes used when the study file gives none (the study's own default).
MISSING_VALUES: tuple[str, ...] = tuple(DataSection.model_fields["missing_values"].default)

#: File suffixes :func:`read_table` understands, with the reader and optional extra.
SUFFIXES: dict[str, str] = {
    ".csv": "comma-separated text",
    ".tsv": "tab-separated text",
    ".parquet": "Parquet (pyarrow)",
    ".dta": "Stata, value labels kept as categories",
    ".sav": "SPSS (optional extra: pip install riskvet[spss])",
    ".xlsx": "Excel (optional extra: pip install riskvet[excel])",
    ".xls": "Excel 97-2003 (optional package xlrd)",
}

_ROLES = ("derivation", "validation")
_MISSING_METHODS = ("complete_case", "multiple_imputation")
_SHOWN_VALUES = 10  # distinct bad values quoted in an error message
_SHOWN_OUTCOME_VALUES = 5
_SHOWN_COLUMNS = 25


# -- values as text -------------------------------------------------------------------


def _scalar_text(value: Any) -> str:
    """One value as the text it is compared with study levels by."""
    if isinstance(value, (bool, np.bool_)):
        return str(bool(value))
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if math.isfinite(v) and v.is_integer():
            return str(int(v))
        return repr(v)
    return str(value)


def _as_text(series: pd.Series) -> pd.Series:
    """``series`` as text (``str`` dtype), missing values kept missing."""
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    texts = np.array([_scalar_text(u) for u in np.asarray(uniques, dtype=object)] + [None], dtype=object)
    return pd.Series(texts[codes], index=series.index, dtype="str")


def _count_text(values: pd.Series, limit: int) -> str:
    """``'a' (3 rows), 'b' (1 row)`` for the most frequent ``limit`` values."""
    counts = Counter(values.tolist())
    ordered = sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))
    parts = [f"{v!r} ({n} row{'s' if n != 1 else ''})" for v, n in ordered[:limit]]
    if len(ordered) > limit:
        parts.append(f"and {len(ordered) - limit} other value(s)")
    return ", ".join(parts)


_SHOWN_LINES = 5
_HEADED_SUFFIXES = (".csv", ".tsv", ".xlsx", ".xls")


def _file_lines(positions: Iterable[int], source: str | None) -> str:
    """Where rows are in their file, for the user to find them: ``lines 4, 9 and 2 more`` (no values).

    ``positions`` are 0-based data rows.  In a delimited or spreadsheet file
    the header is line 1, so data row i is line i + 2; other formats count
    data rows from 1.
    """
    headed = source is not None and str(source).lower().endswith(_HEADED_SUFFIXES)
    numbers = sorted(int(p) + (2 if headed else 1) for p in positions)
    word = "line" if headed else "row"
    shown = ", ".join(str(n) for n in numbers[:_SHOWN_LINES])
    more = f" and {len(numbers) - _SHOWN_LINES} more" if len(numbers) > _SHOWN_LINES else ""
    return f"{word}{'s' if len(numbers) != 1 else ''} {shown}{more} of the file"


def _bad_values(where: str, *, allowed: str, bad: pd.Series, limit: int, source: str | None = None) -> str:
    """The package message template for offending values, quoted with their counts, and where they are."""
    n = len(bad)
    return (f"{where}: expected {allowed}; received {n} row{'s' if n != 1 else ''} with other values: {_count_text(bad, limit)} "
            f"({_file_lines(bad.index, source)})")


def _to_number(series: pd.Series) -> tuple[pd.Series, pd.Series]:
    """``series`` as float64, and the text of the values that are not finite numbers.

    Values that are not finite numbers (text, ``inf``) are missing in the first
    result and listed in the second, so callers can report them.
    """
    numeric_dtype = pd.api.types.is_bool_dtype(series.dtype) or (
        pd.api.types.is_numeric_dtype(series.dtype) and not isinstance(series.dtype, pd.CategoricalDtype)
    )
    if numeric_dtype:
        numbers = pd.Series(series.to_numpy(dtype=np.float64, na_value=np.nan), index=series.index)
        present = numbers.notna()
    else:
        text = _as_text(series)
        numbers = pd.to_numeric(text.str.strip(), errors="coerce").astype(np.float64)
        present = text.notna()
    bad = present & ~np.isfinite(numbers.fillna(np.inf))
    return numbers.where(~bad), _as_text(series[bad])


# -- reading ----------------------------------------------------------------------------


def _optional(module: str, *, suffix: str, install: str) -> None:
    try:
        importlib.import_module(module)
    except ImportError:
        raise DataError(
            f"reading {suffix} files needs the optional package {module}, which is not installed; "
            f"install it with: {install}"
        ) from None


def _blank_missing(frame: pd.DataFrame, missing_values: Sequence[str]) -> pd.DataFrame:
    """Set values whose text is a missing-value code to missing (typed formats)."""
    codes = set(missing_values)
    if not codes:
        return frame
    out = {}
    for column in frame.columns:
        series = frame[column]
        uniques = pd.unique(series.dropna())
        hits = [u for u in uniques if _scalar_text(u) in codes]
        if hits:
            if isinstance(series.dtype, pd.CategoricalDtype):
                series = series.cat.remove_categories([h for h in hits if h in series.cat.categories])
            else:
                series = series.mask(series.isin(hits))
        out[column] = series
    return pd.DataFrame(out, index=frame.index)


def read_table(path: str | Path, *, missing_values: Sequence[str] = MISSING_VALUES) -> pd.DataFrame:
    """Read one data file into a DataFrame.

    Parameters
    ----------
    path : path
        The file.  Its suffix picks the reader (case does not matter):
        ``.csv``, ``.tsv``, ``.parquet``, ``.dta`` (Stata), ``.sav`` (SPSS,
        needs ``pip install riskvet[spss]``), ``.xlsx`` (Excel, needs
        ``pip install riskvet[excel]``) or ``.xls`` (needs ``xlrd``).
    missing_values : sequence of str
        Codes that mean "missing".  Only these are read as missing: text such
        as ``"None"`` or ``"null"`` stays text unless listed.  In typed formats
        (Parquet, Stata, SPSS, Excel) a value whose text is a code is set
        missing as well (``-99`` matches a numeric -99).

    Returns
    -------
    DataFrame
        CSV and TSV columns are all text (pandas ``str`` dtype): no type is
        guessed, so codes such as ``"01"`` keep their leading zero;
        :func:`prepare_cohort` converts the columns the study declares numeric.
        Stata and SPSS value labels become categories with the labels as
        category names.

    Raises
    ------
    DataError
        If the file does not exist, its suffix is not one of the allowed
        ones, an optional reader is not installed, or the file cannot be parsed.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in SUFFIXES:
        allowed = ", ".join(SUFFIXES)
        raise DataError(problem(f"{path}: file type", allowed=f"one of the suffixes {allowed}", received=path.suffix or "(no suffix)"))
    if not path.is_file():
        raise DataError(f"{path}: data file not found" + (" (it is a folder)" if path.is_dir() else ""))
    missing_values = tuple(str(v) for v in missing_values)
    if suffix in (".csv", ".tsv"):
        _check_separator(path, "," if suffix == ".csv" else "\t")
    try:
        if suffix in (".csv", ".tsv"):
            return pd.read_csv(
                path,
                sep="," if suffix == ".csv" else "\t",
                dtype=str,
                keep_default_na=False,
                na_values=list(missing_values),
                encoding="utf-8",
            )
        if suffix == ".parquet":
            frame = pd.read_parquet(path, engine="pyarrow")
        elif suffix == ".dta":
            frame = pd.read_stata(path, convert_categoricals=True)
        elif suffix == ".sav":
            _optional("pyreadstat", suffix=".sav", install="pip install riskvet[spss]")
            frame = pd.read_spss(path, convert_categoricals=True)
        elif suffix == ".xlsx":
            _optional("openpyxl", suffix=".xlsx", install="pip install riskvet[excel]")
            frame = pd.read_excel(path, engine="openpyxl", keep_default_na=False, na_values=list(missing_values))
        else:
            _optional("xlrd", suffix=".xls", install="pip install xlrd")
            frame = pd.read_excel(path, engine="xlrd", keep_default_na=False, na_values=list(missing_values))
    except DataError:
        raise
    except UnicodeDecodeError as exc:
        raise DataError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start}); save the file as UTF-8") from None
    except (ValueError, OSError, ImportError) as exc:
        raise DataError(f"{path}: cannot be read as {SUFFIXES[suffix]}: {exc}") from None
    return _blank_missing(frame, missing_values)


_SEPARATOR_NAMES = {",": "commas", "\t": "tabs", ";": "semicolons", "|": "vertical bars"}


def _check_separator(path: Path, expected: str) -> None:
    """Refuse a delimited file whose header line is split by another character than its suffix says.

    A semicolon-separated ``.csv`` (common where the comma is the decimal
    mark) would otherwise read as one column, and every study column would be
    reported missing.
    """
    try:
        with open(path, encoding="utf-8", errors="replace", newline="") as handle:
            header = handle.readline()
    except OSError:
        return  # the reader reports it
    if expected in header:
        return
    seen = {sep: header.count(sep) for sep in _SEPARATOR_NAMES if sep != expected and header.count(sep)}
    if not seen:
        return  # one column: the study's column checks say what is missing
    sep, n = max(seen.items(), key=lambda kv: kv[1])
    raise DataError(
        f"{path}: the header line holds no {_SEPARATOR_NAMES[expected]} but {n} {_SEPARATOR_NAMES[sep]}: the file looks "
        f"separated by {_SEPARATOR_NAMES[sep]}; save it as a comma-separated .csv (with a point as the decimal mark) "
        "or as a tab-separated .tsv"
    )


# -- auditing ---------------------------------------------------------------------------


@dataclass(frozen=True)
class ColumnAudit:
    """Summary of one column; no individual row is shown.

    Attributes
    ----------
    column : str
        Column name.
    dtype : str
        pandas dtype as read.
    kind : {"numeric", "categorical", "text"}
        ``numeric``: a numeric dtype, or text whose every value reads as a
        number; ``categorical``: a category or boolean dtype, or text with at
        most ``max_levels`` distinct values; ``text``: anything else (free
        text, codes, dates).
    n_missing : int
        Missing values.
    n_unique : int
        Distinct non-missing values.
    minimum, maximum : float or None
        Numeric columns only.
    levels : tuple of (str, int), or None
        Categorical columns only: each level with its count, in category order
        (declared categories with no rows included) or sorted; at most
        ``max_levels`` of them (the most frequent) when there are more.
    levels_truncated : bool
        True when ``levels`` lists only some of the levels.
    private : bool
        True for an id column: only ``n_missing`` and ``n_unique`` are given.
    """

    column: str
    dtype: str
    kind: str
    n_missing: int
    n_unique: int
    minimum: float | None = None
    maximum: float | None = None
    levels: tuple[tuple[str, int], ...] | None = None
    levels_truncated: bool = False
    private: bool = False

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready fields; levels as a list of ``{"level", "count"}``."""
        out = {
            "column": self.column,
            "dtype": self.dtype,
            "kind": self.kind,
            "n_missing": self.n_missing,
            "n_unique": self.n_unique,
            "minimum": self.minimum,
            "maximum": self.maximum,
            "levels": None if self.levels is None else [{"level": lv, "count": n} for lv, n in self.levels],
            "levels_truncated": self.levels_truncated,
            "private": self.private,
        }
        return to_jsonable(out)


@dataclass(frozen=True)
class FrameAudit:
    """Column-by-column summary of a frame (see :func:`audit_frame`).

    Attributes
    ----------
    name : str
        What was audited (a file name or cohort label).
    rows : int
        Number of rows.
    columns : tuple of ColumnAudit
        One summary per column, in frame order.
    max_levels : int
        The cap on listed levels used.
    """

    name: str
    rows: int
    columns: tuple[ColumnAudit, ...]
    max_levels: int

    def column(self, name: str) -> ColumnAudit:
        """The summary of column ``name``."""
        for c in self.columns:
            if c.column == name:
                return c
        raise DataError(problem(f"audit of {self.name}: column", allowed=f"one of {[c.column for c in self.columns]}", received=name))

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary."""
        return {
            "name": self.name,
            "rows": self.rows,
            "n_columns": len(self.columns),
            "max_levels": self.max_levels,
            "columns": [c.to_dict() for c in self.columns],
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per column: column, dtype, kind, missing, unique, minimum, maximum, levels.

        ``levels`` is text such as ``"a: 3; b: 5"`` (ending ``"; ..."`` when truncated).
        """
        rows = []
        for c in self.columns:
            levels = None
            if c.levels is not None:
                levels = "; ".join(f"{lv}: {n}" for lv, n in c.levels) + ("; ..." if c.levels_truncated else "")
            rows.append({
                "column": c.column,
                "dtype": c.dtype,
                "kind": c.kind,
                "missing": c.n_missing,
                "unique": c.n_unique,
                "minimum": c.minimum,
                "maximum": c.maximum,
                "levels": levels,
            })
        return pd.DataFrame(rows, columns=["column", "dtype", "kind", "missing", "unique", "minimum", "maximum", "levels"])


def _audit_column(series: pd.Series, *, name: str, max_levels: int, private: bool) -> ColumnAudit:
    n_missing = int(series.isna().sum())
    present = series.dropna()
    n_unique = int(present.nunique())
    dtype = str(series.dtype)
    is_category = isinstance(series.dtype, pd.CategoricalDtype)
    if is_category or pd.api.types.is_bool_dtype(series.dtype):
        kind = "categorical"
    elif pd.api.types.is_numeric_dtype(series.dtype):
        kind = "numeric"
    elif pd.api.types.is_datetime64_any_dtype(series.dtype) or pd.api.types.is_timedelta64_dtype(series.dtype):
        kind = "text"
    else:
        numbers, bad = _to_number(present) if len(present) else (present, present)
        if len(present) and len(bad) == 0:
            kind = "numeric"
        elif n_unique <= max_levels:
            kind = "categorical"
        else:
            kind = "text"
    if private:
        return ColumnAudit(column=name, dtype=dtype, kind=kind, n_missing=n_missing, n_unique=n_unique, private=True)
    if kind == "numeric":
        numbers, _ = _to_number(present)
        numbers = numbers.dropna()
        lo = float(numbers.min()) if len(numbers) else None
        hi = float(numbers.max()) if len(numbers) else None
        return ColumnAudit(column=name, dtype=dtype, kind=kind, n_missing=n_missing, n_unique=n_unique, minimum=lo, maximum=hi)
    if kind == "categorical":
        if is_category:
            counts = present.value_counts(sort=False).reindex(series.cat.categories, fill_value=0)
            pairs = [(_scalar_text(k), int(v)) for k, v in counts.items()]
        else:
            counts = _as_text(present).value_counts(sort=False)
            pairs = sorted((str(k), int(v)) for k, v in counts.items())
        truncated = len(pairs) > max_levels
        if truncated:
            keep = {lv for lv, _ in sorted(pairs, key=lambda p: (-p[1], p[0]))[:max_levels]}
            pairs = [p for p in pairs if p[0] in keep]
        return ColumnAudit(column=name, dtype=dtype, kind=kind, n_missing=n_missing, n_unique=n_unique,
                           levels=tuple(pairs), levels_truncated=truncated)
    return ColumnAudit(column=name, dtype=dtype, kind=kind, n_missing=n_missing, n_unique=n_unique)


def audit_frame(
    frame: pd.DataFrame,
    *,
    name: str,
    max_levels: int = 20,
    private_columns: Iterable[str] = (),
) -> FrameAudit:
    """Summarise every column of ``frame`` without showing any row.

    Parameters
    ----------
    frame : DataFrame
        The data, as read.
    name : str
        What is audited (file name or cohort label), for display.
    max_levels : int
        Text columns with more distinct values than this are reported as
        ``text`` (free text or codes, no levels listed), and category columns
        list only their ``max_levels`` most frequent levels.
    private_columns : iterable of str
        Columns (ids) for which only missing and distinct counts are given.

    Returns
    -------
    FrameAudit

    Raises
    ------
    DataError
        If ``frame`` is not a DataFrame, ``max_levels`` is not a positive
        integer or a private column is not in the frame.
    """
    if not isinstance(frame, pd.DataFrame):
        raise DataError(problem("audit_frame: frame", allowed="a pandas DataFrame", received=type(frame).__name__))
    if isinstance(max_levels, bool) or not isinstance(max_levels, (int, np.integer)) or max_levels < 1:
        raise DataError(problem("audit_frame: max_levels", allowed="a whole number >= 1", received=max_levels))
    private = set(private_columns)
    unknown = sorted(private - {str(c) for c in frame.columns})
    if unknown:
        raise DataError(problem("audit_frame: private_columns", allowed=f"columns of {name}", received=unknown))
    columns = tuple(
        _audit_column(frame.iloc[:, i], name=str(c), max_levels=int(max_levels), private=str(c) in private)
        for i, c in enumerate(frame.columns)
    )
    return FrameAudit(name=str(name), rows=int(len(frame)), columns=columns, max_levels=int(max_levels))


# -- preparing cohorts ----------------------------------------------------------------------


@dataclass(frozen=True)
class CategoryMapping:
    """One entry of ``data.category_map`` and how many rows it recoded.

    Attributes
    ----------
    column : str
    source_level : str
        The category as it appears in the validation data.
    target_level : str
        The derivation category it was recoded to.
    count : int
        Rows recoded (of the rows screened, before exclusions).
    """

    column: str
    source_level: str
    target_level: str
    count: int

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready fields."""
        return {"column": self.column, "source_level": self.source_level, "target_level": self.target_level, "count": self.count}


@dataclass(frozen=True)
class PreparedCohort:
    """A cohort checked against the study, with complete-case exclusions applied.

    Attributes
    ----------
    role : {"derivation", "validation"}
    label : str
        Cohort label (``"derivation"`` or the validation label).
    source : str
        The file (or name) the rows came from; used in messages.
    frame : DataFrame
        The analysed rows (index 0..n-1) and only the needed columns: the id
        column if configured, the outcome (as level text), the predictors in
        analysis (numbers for linear/spline, level text for categorical), new
        predictors for updating when present (validation only, not used for
        exclusions, may hold missing values), the existing rule column and
        subgroup columns when present (may hold missing values).
    y : ndarray of int
        Outcome codes 0..K-1, aligned with ``frame``.
    outcome_levels : tuple of str
        The level coded 0, 1, ..., K-1.
    predictors : tuple of str
        Predictors in analysis, in study order.
    new_predictors : tuple of str
        Updating candidates carried in ``frame``.
    forms : dict
        Form of each predictor and new predictor (``linear``/``spline``/``categorical``).
    category_levels : dict
        Level order of each categorical predictor: the study's ``levels`` if
        given, else those of the derivation cohort (sorted as text).
    id_column, rule_column : str or None
    subgroup_columns : tuple of str
    exclusions : DataFrame
        Sequential exclusion steps with columns ``reason``, ``column``,
        ``excluded`` (rows removed at this step) and ``remaining`` (rows).
        Steps: with frequency weights, rows of weight 0 (``"weight 0"``:
        they stand for no one, and are counted, never dropped silently);
        missing outcome, then missing value of each predictor in study order.
        Every step is listed, with 0 when nothing was removed.  With
        frequency weights two more columns count people:
        ``excluded_people`` and ``remaining_people``.
    n_screened, n_analysed : int
        Rows received and rows kept (rows of the file, not people).
    outcome_counts : dict
        Analysed PEOPLE per outcome level: with frequency weights the sum of
        the weights of the level's rows, without them its rows.  Rows per
        level are in ``outcome_rows``.
    category_mappings : tuple of CategoryMapping
        ``data.category_map`` entries applied (validation only), with counts.
    missing : str
        The missing-data method: ``"complete_case"`` (rows missing a
        predictor are excluded) or ``"multiple_imputation"`` (only rows
        missing the outcome are excluded; predictors may hold missing values).
    audit : FrameAudit
        Audit of the needed columns as received (before exclusions), the id
        column private.
    weights : ndarray of int or None
        Frequency weights of the analysed rows (each at least 1), aligned
        with ``frame`` and ``y``: row i stands for ``weights[i]`` identical
        people.  None without ``data.weight_column`` (every row is one person).
    weight_column : str or None
        ``data.weight_column``; the column is not carried in ``frame``.
    n_people, n_people_screened : int
        People analysed and screened: the sums of the weights, or the row
        counts without weights.
    outcome_rows : dict
        Analysed rows per outcome level (equal to ``outcome_counts``
        without weights).
    clusters : ndarray of str or None
        The cluster label of every analysed row (``data.cluster_column``, as
        text), aligned with ``frame``; None without a cluster column or for a
        validation cohort.  The column is not carried in ``frame``.
    cluster_column, cluster_kind : str or None
        ``data.cluster_column`` and ``data.cluster_kind`` (None without clusters).
    auxiliary : tuple of str
        ``missing_data.auxiliary`` columns carried in ``frame`` (numbers, or
        level text), used only by the imputation models; empty under
        complete-case analysis.
    """

    role: str
    label: str
    source: str
    frame: pd.DataFrame = field(repr=False)
    y: np.ndarray = field(repr=False)
    outcome_levels: tuple[str, ...]
    predictors: tuple[str, ...]
    new_predictors: tuple[str, ...]
    forms: dict[str, str]
    category_levels: dict[str, tuple[str, ...]]
    id_column: str | None
    rule_column: str | None
    subgroup_columns: tuple[str, ...]
    exclusions: pd.DataFrame = field(repr=False)
    n_screened: int
    n_analysed: int
    outcome_counts: dict[str, int]
    category_mappings: tuple[CategoryMapping, ...]
    missing: str
    audit: FrameAudit = field(repr=False)
    weights: np.ndarray | None = field(default=None, repr=False)
    weight_column: str | None = None
    n_people: int | None = None
    n_people_screened: int | None = None
    outcome_rows: dict[str, int] | None = None
    clusters: np.ndarray | None = field(default=None, repr=False)
    cluster_column: str | None = None
    cluster_kind: str | None = None
    auxiliary: tuple[str, ...] = ()

    @property
    def n_incomplete(self) -> int:
        """Analysed rows missing at least one predictor (always 0 under complete-case analysis)."""
        return int(self.frame[list(self.predictors)].isna().any(axis=1).sum()) if self.predictors else 0

    @property
    def n_clusters(self) -> int | None:
        """Distinct clusters among the analysed rows, or None without ``data.cluster_column``."""
        return None if self.clusters is None else int(len(set(self.clusters.tolist())))

    def __post_init__(self) -> None:
        # without frequency weights a row is a person: the people counts are the row counts
        if self.n_people is None:
            object.__setattr__(self, "n_people", self.n_analysed)
        if self.n_people_screened is None:
            object.__setattr__(self, "n_people_screened", self.n_screened)
        if self.outcome_rows is None:
            object.__setattr__(self, "outcome_rows", dict(self.outcome_counts))

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary (no rows)."""
        return to_jsonable({
            "role": self.role,
            "label": self.label,
            "source": self.source,
            "missing": self.missing,
            "n_incomplete": self.n_incomplete,
            "auxiliary": list(self.auxiliary),
            "n_screened": self.n_screened,
            "n_analysed": self.n_analysed,
            "weight_column": self.weight_column,
            "cluster_column": self.cluster_column,
            "cluster_kind": self.cluster_kind,
            "n_clusters": self.n_clusters,
            "n_people_screened": self.n_people_screened,
            "n_people": self.n_people,
            "outcome_levels": list(self.outcome_levels),
            "outcome_counts": self.outcome_counts,
            "outcome_rows": self.outcome_rows,
            "predictors": list(self.predictors),
            "new_predictors": list(self.new_predictors),
            "forms": self.forms,
            "category_levels": {k: list(v) for k, v in self.category_levels.items()},
            "id_column": self.id_column,
            "rule_column": self.rule_column,
            "subgroup_columns": list(self.subgroup_columns),
            "exclusions": self.exclusions.to_dict(orient="records"),
            "category_mappings": [m.to_dict() for m in self.category_mappings],
            "audit": self.audit.to_dict(),
        })

    def to_frame(self) -> pd.DataFrame:
        """The exclusion steps with the cohort label: cohort, step, reason, column, excluded, remaining.

        Step 0 is the rows screened.
        """
        first = {"reason": "rows screened", "column": None, "excluded": 0, "remaining": self.n_screened}
        if "remaining_people" in self.exclusions.columns:
            first |= {"excluded_people": 0, "remaining_people": self.n_people_screened}
        head = pd.DataFrame([first])
        table = pd.concat([head, self.exclusions], ignore_index=True)
        table.insert(0, "step", range(len(table)))
        table.insert(0, "cohort", self.label)
        return table


@dataclass(frozen=True)
class _Need:
    column: str
    purpose: str
    required: bool


def _close(name: str, columns: Sequence[str]) -> list[str]:
    lowered = {c.lower(): c for c in columns}
    near = difflib.get_close_matches(name.lower(), list(lowered), n=3, cutoff=0.6)
    return [lowered[n] for n in near]


def _missing_column_line(need: _Need, columns: Sequence[str]) -> str:
    near = _close(need.column, columns)
    hint = f"; did you mean {', '.join(repr(n) for n in near)}?" if near else "."
    shown = list(columns[:_SHOWN_COLUMNS])
    more = f" and {len(columns) - _SHOWN_COLUMNS} more" if len(columns) > _SHOWN_COLUMNS else ""
    return f"column {need.column!r} ({need.purpose}) not found{hint} The file has columns {shown}{more}"


def _needs(study: Study, frame_columns: set[str], *, role: str, label: str) -> list[_Need]:
    needs: list[_Need] = []
    if study.data.id_column is not None:
        needs.append(_Need(study.data.id_column, "data.id_column", True))
    needs.append(_Need(study.outcome.column, "outcome.column", True))
    if study.data.weight_column is not None:
        needs.append(_Need(study.data.weight_column, "data.weight_column, frequency weights", True))
    if study.data.cluster_column is not None and role == "derivation":
        needs.append(_Need(study.data.cluster_column, f"data.cluster_column, clusters of kind {study.data.cluster_kind!r}", True))
    for name in study.predictors.in_analysis:
        form = study.predictors.candidates[name].form
        needs.append(_Need(name, f"predictor, form {form!r}", True))
    if role == "validation":
        updating_here = study.updating.enabled and study.updating_cohort == label
        for name, spec in study.updating.new_predictors.items():
            if updating_here or name in frame_columns:
                needs.append(_Need(name, f"updating.new_predictors, form {spec.form!r}", updating_here))
    if study.imputing:
        for name in study.missing_data.auxiliary:
            needs.append(_Need(name, "missing_data.auxiliary, used only to impute", True))
    rule = study.existing_rule
    if rule is not None:
        compared_here = role == "validation" or not study.data.validation
        needs.append(_Need(rule.column, f"existing_rule, kind {rule.kind!r}", compared_here))
    for sub in study.external_validation.subgroups:
        needs.append(_Need(sub.column, "external_validation.subgroups", role == "validation"))
    seen: set[str] = set()
    unique = []
    for need in needs:
        if need.column in seen:
            continue
        seen.add(need.column)
        if need.required or need.column in frame_columns:
            unique.append(need)
    return unique


def _check_study(study: Any, where: str) -> Study:
    if not isinstance(study, Study):
        raise DataError(problem(f"{where}: study", allowed="a Study from load_study or study_from_dict", received=type(study).__name__))
    return study


def prepare_cohort(
    study: Study,
    frame: pd.DataFrame,
    *,
    role: str = "derivation",
    label: str | None = None,
    source: str | None = None,
    reference: PreparedCohort | None = None,
    missing: str = "complete_case",
) -> PreparedCohort:
    """Check a cohort against the study and apply the exclusions.

    Parameters
    ----------
    study : Study
        The validated study.
    frame : DataFrame
        The cohort as read by :func:`read_table` (or any DataFrame).
    role : {"derivation", "validation"}
        Derivation data fit the model; validation data are compared with them.
    label : str, optional
        Cohort label; defaults to ``role``.  For a validation cohort, the label
        decides whether ``updating.new_predictors`` are required (the cohort
        the updating stage uses) or only carried when present.
    source : str, optional
        File name shown in messages; defaults to the label.
    reference : PreparedCohort, optional
        The prepared derivation cohort.  For a validation cohort, categories
        of a categorical predictor that do not occur in it are errors (unless
        ``data.category_map`` recodes them); without it that check is skipped.
    missing : {"complete_case", "multiple_imputation"}
        Missing-data method.  Complete-case analysis excludes the rows missing
        the outcome or any predictor in analysis, each step recorded.  For
        multiple imputation only rows missing the outcome are excluded; the
        predictors keep their missing values and ``missing_data.auxiliary``
        columns are carried, for :func:`riskvet.imputation.impute_cohort`.

    Returns
    -------
    PreparedCohort

    Raises
    ------
    DataError
        Listing every problem found, each naming the file, the column, what is
        allowed and what was received (values with counts, never rows):
        a configured column is missing (with close matches); outcome values
        that are not the configured levels; numeric predictors with values that
        are not numbers; categorical values outside the predictor's ``levels``;
        validation categories unseen in the derivation data; existing-rule
        values outside its levels; duplicated ids (counts only); frequency
        weights (``data.weight_column``) that are missing, not numbers,
        negative or not whole numbers (fractional case or sampling weights
        are not supported); no rows left.

    Notes
    -----
    Checks run on every screened row, before exclusions.  Exclusions are
    sequential, so ``remaining`` of a step is ``remaining`` of the step
    before less ``excluded``; the participant flow of TRIPOD item 13a
    (Collins et al. 2015) can be read off the table.  Complete-case analysis
    is unbiased only when missingness does not depend on the outcome given
    the predictors; multiple imputation (White, Royston & Wood 2011) is the
    better choice when many rows are excluded.

    References
    ----------
    Collins GS, Reitsma JB, Altman DG, Moons KGM. Transparent reporting of a
    multivariable prediction model for individual prognosis or diagnosis
    (TRIPOD): the TRIPOD statement. BMJ 2015;350:g7594.

    White IR, Royston P, Wood AM. Multiple imputation using chained equations:
    issues and guidance for practice. Statistics in Medicine 2011;30(4):377-399.
    """
    study = _check_study(study, "prepare_cohort")
    _check_prepare_arguments(role=role, missing=missing, frame=frame, reference=reference)
    label = str(label) if label is not None else role
    where = str(source) if source is not None else label
    needs, raw = _needed_frame(study, frame, role=role, label=label, where=where)
    id_column = study.data.id_column
    private = [id_column] if id_column else []
    cluster_column = study.data.cluster_column if role == "derivation" else None
    if cluster_column is not None and study.data.cluster_kind == "person" and cluster_column not in private:
        private.append(cluster_column)  # a person's cluster label identifies them like an id
    audit = audit_frame(raw, name=where, private_columns=private)
    needed = {n.column: n for n in needs}

    specs: dict[str, PredictorSpec] = {name: study.predictors.candidates[name] for name in study.predictors.in_analysis}
    new_names = tuple(name for name in study.updating.new_predictors if name in needed and role == "validation")
    specs.update({name: study.updating.new_predictors[name] for name in new_names})
    rule = study.existing_rule
    rule_column = rule.column if rule is not None and rule.column in needed else None
    subgroup_columns = list(dict.fromkeys(s.column for s in study.external_validation.subgroups if s.column in needed))

    # every problem is found before any is reported, so one run lists them all
    out: dict[str, pd.Series] = {}
    problems = _check_ids(raw, id_column, out, source=where)
    problems += _check_outcome(study, raw, out, source=where)
    found, mappings = _check_predictors(study, raw, specs, needed, role=role, reference=reference, out=out, source=where)
    problems += found
    problems += _check_rule(study, raw, needed, out, source=where)
    auxiliary = _carry_auxiliary(study, raw, out) if missing == "multiple_imputation" else ()
    problems += _check_subgroups(study, raw, needed, out, source=where)
    screened_weights = _check_weights(study, raw, problems, source=where)
    screened_clusters = _check_clusters(cluster_column, raw, problems, source=where)
    if problems:
        _raise(where, problems)

    keep, exclusions = _complete_cases(study, raw, out, where, weights=screened_weights, impute=missing == "multiple_imputation")
    kept = pd.DataFrame({c: s[keep.to_numpy()] for c, s in out.items()}).reset_index(drop=True)
    y = outcome_codes(study, kept[study.outcome.column], source=where)
    category_levels = _category_levels(specs, reference, kept)
    levels = study.outcome.ordered_levels
    rows = np.bincount(y, minlength=len(levels))
    weights = None if screened_weights is None else screened_weights[keep.to_numpy()]
    counts = rows if weights is None else np.bincount(y, weights=weights, minlength=len(levels)).astype(np.int64)
    clusters = None if screened_clusters is None else screened_clusters[keep.to_numpy()]
    return PreparedCohort(
        role=role,
        label=label,
        source=where,
        frame=kept,
        y=y,
        outcome_levels=tuple(levels),
        predictors=tuple(study.predictors.in_analysis),
        new_predictors=new_names,
        forms={name: spec.form for name, spec in specs.items()},
        category_levels=category_levels,
        id_column=id_column,
        rule_column=rule_column,
        subgroup_columns=tuple(subgroup_columns),
        exclusions=exclusions,
        n_screened=int(len(raw)),
        n_analysed=int(keep.sum()),
        outcome_counts={lv: int(n) for lv, n in zip(levels, counts)},
        category_mappings=tuple(mappings),
        missing=missing,
        audit=audit,
        weights=weights,
        weight_column=study.data.weight_column,
        n_people=int(keep.sum()) if weights is None else int(weights.sum()),
        n_people_screened=int(len(raw)) if screened_weights is None else int(screened_weights.sum()),
        outcome_rows={lv: int(n) for lv, n in zip(levels, rows)},
        clusters=clusters,
        cluster_column=cluster_column,
        cluster_kind=study.data.cluster_kind if cluster_column is not None else None,
        auxiliary=auxiliary,
    )


def _carry_auxiliary(study: Study, raw: pd.DataFrame, out: dict[str, pd.Series]) -> tuple[str, ...]:
    """Carry ``missing_data.auxiliary`` into ``out``: numbers when every value present is one, else level text."""
    names = tuple(study.missing_data.auxiliary) if study.imputing else ()
    for name in names:
        numbers, bad = _to_number(raw[name])
        out[name] = numbers if not len(bad) else _as_text(raw[name])
    return names


def _check_prepare_arguments(*, role: str, missing: str, frame: Any, reference: Any) -> None:
    """Refuse a role, missing-data method, frame or reference :func:`prepare_cohort` cannot use."""
    if role not in _ROLES:
        raise DataError(problem("prepare_cohort: role", allowed="'derivation' or 'validation'", received=role))
    if missing not in _MISSING_METHODS:
        raise DataError(problem("prepare_cohort: missing", allowed="'complete_case' or 'multiple_imputation'", received=missing))
    if not isinstance(frame, pd.DataFrame):
        raise DataError(problem("prepare_cohort: frame", allowed="a pandas DataFrame", received=type(frame).__name__))
    if reference is not None:
        if role != "validation":
            raise DataError(problem("prepare_cohort: reference", allowed="None for role 'derivation' (a reference is the derivation cohort a validation cohort is compared with)", received=type(reference).__name__))
        if not isinstance(reference, PreparedCohort) or reference.role != "derivation":
            raise DataError(problem("prepare_cohort: reference", allowed="the PreparedCohort of the derivation data", received=getattr(reference, "role", type(reference).__name__)))


def _needed_frame(study: Study, frame: pd.DataFrame, *, role: str, label: str, where: str) -> tuple[list[_Need], pd.DataFrame]:
    """The columns the study needs from ``frame``, and those columns (names as text, index 0..n-1).

    Refuses a needed column that is absent or appears more than once.
    """
    columns = [str(c) for c in frame.columns]
    twice = sorted({c for c in columns if columns.count(c) > 1})
    needs = _needs(study, set(columns), role=role, label=label)
    absent = [n for n in needs if n.column not in columns]
    if absent or any(n.column in twice for n in needs):
        lines = [_missing_column_line(n, columns) for n in absent]
        lines += [f"column {c!r} appears more than once" for c in twice if c in {n.column for n in needs}]
        _raise(where, lines)
    raw = frame.set_axis(columns, axis=1)[[n.column for n in needs]].reset_index(drop=True)
    return needs, raw


def _check_ids(raw: pd.DataFrame, id_column: str | None, out: dict[str, pd.Series], *, source: str | None = None) -> list[str]:
    """Carry the id column into ``out``; a problem if ids repeat (counted, never quoted)."""
    problems = []
    if id_column is not None:
        ids = raw[id_column]
        duplicated = ids.notna() & ids.duplicated(keep=False)
        if duplicated.any():
            n_ids = int(ids[duplicated].nunique())
            problems.append(
                f"column {id_column!r} (data.id_column): expected one row per id; "
                f"{int(duplicated.sum())} rows share {n_ids} id value(s) with another row, at "
                f"{_file_lines(np.flatnonzero(duplicated.to_numpy()), source)} (values not shown)"
            )
        out[id_column] = ids
    return problems


def _check_outcome(study: Study, raw: pd.DataFrame, out: dict[str, pd.Series], *, source: str | None = None) -> list[str]:
    """Carry the outcome into ``out`` as level text; a problem for values that are not its levels."""
    problems = []
    outcome = study.outcome
    y_text = _numerically_equal_levels(_as_text(raw[outcome.column]), outcome.ordered_levels)
    unknown = y_text[y_text.notna() & ~y_text.isin(outcome.ordered_levels)]
    if len(unknown):
        problems.append(
            _bad_values(f"column {outcome.column!r} (outcome.column)", allowed=f"one of the levels {list(outcome.levels)} or a missing-value code", bad=unknown, limit=_SHOWN_OUTCOME_VALUES, source=source)
        )
    out[outcome.column] = y_text
    return problems


def _numerically_equal_levels(values: pd.Series, levels: Sequence[str]) -> pd.Series:
    """Values written as another form of a numeric level (``4.0``, ``04`` for ``4``) as that level.

    Only when every level is a number; text levels are compared exactly.
    """
    numbers = pd.to_numeric(pd.Series(list(levels), dtype=object), errors="coerce")
    if numbers.isna().any():
        return values
    by_number = dict(zip(numbers.tolist(), levels))
    odd = values.dropna()
    odd = odd[~odd.isin(levels)].unique()
    if not len(odd):
        return values
    as_numbers = pd.to_numeric(pd.Series(odd, dtype=object), errors="coerce")
    recode = {v: by_number[x] for v, x in zip(odd, as_numbers.tolist()) if x in by_number}
    return values.replace(recode) if recode else values


def _check_predictors(
    study: Study,
    raw: pd.DataFrame,
    specs: Mapping[str, PredictorSpec],
    needed: Mapping[str, _Need],
    *,
    role: str,
    reference: PreparedCohort | None,
    out: dict[str, pd.Series],
    source: str | None = None,
) -> tuple[list[str], list[CategoryMapping]]:
    """Carry each predictor into ``out``: numbers, or level text after ``data.category_map``.

    Returns the problems found and the category-map entries applied.
    """
    problems = []
    mappings: list[CategoryMapping] = []
    category_map = study.data.category_map
    if role == "validation":
        for column in category_map:
            if column not in specs or specs[column].form != "categorical":
                cats = sorted(n for n, s in specs.items() if s.form == "categorical")
                problems.append(problem(f"data.category_map.{column}", allowed=f"a categorical predictor of this cohort, one of {cats}", received=column))
    for name, spec in specs.items():
        purpose = needed[name].purpose
        if spec.form in ("linear", "spline"):
            numbers, bad = _to_number(raw[name])
            if len(bad):
                hint = " (the column has value labels; the study reads it as a number)" if isinstance(raw[name].dtype, pd.CategoricalDtype) else ""
                problems.append(
                    _bad_values(f"column {name!r} ({purpose})", allowed="finite numbers or a missing-value code", bad=bad, limit=_SHOWN_VALUES, source=source) + hint
                )
            out[name] = numbers
            continue
        text = _as_text(raw[name])
        if role == "validation" and name in category_map:
            recode = category_map[name]
            for source_level, target_level in recode.items():
                count = int((text == source_level).sum())
                mappings.append(CategoryMapping(name, source_level, target_level, count))
            text = text.replace(recode)
        problems += _category_problems(text, name, spec, purpose, reference, source=source)
        out[name] = text
    return problems, mappings


def _category_problems(text: pd.Series, name: str, spec: PredictorSpec, purpose: str, reference: PreparedCohort | None, *, source: str | None = None) -> list[str]:
    """Problems with a categorical predictor's values: outside its ``levels``, or unseen in the derivation data."""
    problems = []
    if spec.levels is not None:
        outside = text[text.notna() & ~text.isin(spec.levels)]
        if len(outside):
            problems.append(
                _bad_values(f"column {name!r} ({purpose})", allowed=f"one of the levels {list(spec.levels)} or a missing-value code", bad=outside, limit=_SHOWN_VALUES, source=source)
            )
    if reference is not None and name in reference.category_levels:
        seen = set(reference.frame[name].dropna().unique())
        unseen = text[text.notna() & ~text.isin(seen)]
        if spec.levels is not None:
            unseen = unseen[unseen.isin(spec.levels)]  # values outside the levels are reported above
        for level, count in sorted(Counter(unseen.tolist()).items()):
            problems.append(
                f"column {name!r} ({purpose}): level {level!r} ({count} row{'s' if count != 1 else ''}) does not occur in the "
                f"derivation data ({reference.source}), whose levels are {sorted(seen)}; recode it onto one of them "
                f"with data.category_map.{name}, or correct the file"
            )
    return problems


def _check_rule(study: Study, raw: pd.DataFrame, needed: Mapping[str, _Need], out: dict[str, pd.Series], *, source: str | None = None) -> list[str]:
    """Carry the existing rule's column into ``out``; problems for values outside its categories or not numbers."""
    problems = []
    rule = study.existing_rule
    if rule is not None and rule.column in needed:
        purpose = needed[rule.column].purpose
        if rule.kind == "categories":
            text = _as_text(raw[rule.column])
            outside = text[text.notna() & ~text.isin(rule.levels)]
            if len(outside):
                problems.append(
                    _bad_values(f"column {rule.column!r} ({purpose})", allowed=f"one of the categories {list(rule.levels)} or a missing-value code", bad=outside, limit=_SHOWN_VALUES, source=source)
                )
            out.setdefault(rule.column, text)
        elif rule.column not in out:
            numbers, bad = _to_number(raw[rule.column])
            if len(bad):
                problems.append(
                    _bad_values(f"column {rule.column!r} ({purpose})", allowed="finite numbers or a missing-value code", bad=bad, limit=_SHOWN_VALUES, source=source)
                )
            out[rule.column] = numbers
    return problems


def _check_subgroups(study: Study, raw: pd.DataFrame, needed: Mapping[str, _Need], out: dict[str, pd.Series], *, source: str | None = None) -> list[str]:
    """Carry each subgroup column into ``out`` (numbers when banded); problems when bands meet a non-number."""
    problems = []
    for sub in study.external_validation.subgroups:
        if sub.column not in needed:
            continue
        if sub.column in out:
            if sub.bands is not None and not pd.api.types.is_float_dtype(out[sub.column].dtype):
                problems.append(f"column {sub.column!r} (external_validation.subgroups): bands need a numeric column, "
                                f"but the study reads it as categories")
            continue
        if sub.bands is not None:
            numbers, bad = _to_number(raw[sub.column])
            if len(bad):
                problems.append(
                    _bad_values(f"column {sub.column!r} (external_validation.subgroups, bands)", allowed="finite numbers or a missing-value code", bad=bad, limit=_SHOWN_VALUES, source=source)
                )
            out[sub.column] = numbers
        else:
            out[sub.column] = _as_text(raw[sub.column])
    return problems


_WEIGHT_ALLOWED = "frequency weights: whole numbers >= 0, each row standing for that many identical people"
_WEIGHT_MEANING = (
    f"{_WEIGHT_ALLOWED} (fractional case or sampling weights are not supported, because the model's standard errors "
    "and the bootstrap assume each row is w identical people)"
)


def _check_weights(study: Study, raw: pd.DataFrame, problems: list[str], *, source: str | None = None) -> np.ndarray | None:
    """The frequency weight of every screened row (int64), or None without ``data.weight_column``.

    Missing values, values that are not numbers, negative and fractional
    values are appended to ``problems`` (with the file lines holding them).
    """
    column = study.data.weight_column
    if column is None:
        return None
    where = f"column {column!r} (data.weight_column)"
    numbers, bad = _to_number(raw[column])
    if len(bad):
        problems.append(_bad_values(where, allowed=_WEIGHT_ALLOWED, bad=bad, limit=_SHOWN_VALUES, source=source))
    absent = numbers.isna() & ~numbers.index.isin(bad.index)
    if absent.any():
        problems.append(f"{where}: expected {_WEIGHT_ALLOWED}; received {int(absent.sum())} missing value(s) "
                        f"({_file_lines(np.flatnonzero(absent.to_numpy()), source)}); a row standing for no one has weight 0")
    present = numbers.dropna()
    checks = ((present < 0, "negative", _WEIGHT_ALLOWED),
              ((present >= 0) & (present != np.floor(present)), "not whole numbers", _WEIGHT_MEANING))
    for test, words, allowed in checks:
        if test.any():
            shown = _as_text(present[test])
            problems.append(_bad_values(f"{where}, {words}", allowed=allowed, bad=shown, limit=_SHOWN_VALUES, source=source))
    if numbers.notna().all() and (present >= 0).all() and (present == np.floor(present)).all():
        if (present >= 2.0**62).any():
            problems.append(problem(where, allowed="weights below 2^62", received=f"{float(present.max()):g}"))
            return None
        return present.to_numpy(dtype=np.int64)
    return None


def _check_clusters(column: str | None, raw: pd.DataFrame, problems: list[str], *, source: str | None = None) -> np.ndarray | None:
    """The cluster label (text) of every screened row, or None without a cluster column.

    A row without a cluster is a problem appended to ``problems`` (with its
    file lines): which cluster it belongs to cannot be guessed, and dropping
    it silently would change the analysis.
    """
    if column is None:
        return None
    labels = _as_text(raw[column])
    absent = labels.isna().to_numpy()
    if absent.any():
        problems.append(
            f"column {column!r} (data.cluster_column): expected the cluster of every row; received {int(absent.sum())} "
            f"missing value(s) ({_file_lines(np.flatnonzero(absent), source)}); fill them in or remove those rows from the file"
        )
        return None
    return labels.to_numpy(dtype=object).astype(str)


def expand_cohort(cohort: "PreparedCohort") -> "PreparedCohort":
    """The cohort written out one row per person: row i repeated ``weights[i]`` times.

    Parameters
    ----------
    cohort : PreparedCohort
        A cohort read with frequency weights (``data.weight_column``); a
        cohort without weights is returned as it is.

    Returns
    -------
    PreparedCohort
        ``frame`` and ``y`` with every row repeated by its weight (in row
        order, copies side by side), ``weights`` None, ``n_screened`` and
        ``n_analysed`` in people, and the exclusion table in people.  What
        is computed on it is what the same data written out row by row
        would give; it is the view counts and descriptions of people are
        taken from.
    """
    cohort = _check_cohort(cohort, "expand_cohort: cohort")
    if cohort.weights is None:
        return cohort
    rows = np.repeat(np.arange(len(cohort.y)), cohort.weights)
    clusters = None if cohort.clusters is None else cohort.clusters[rows]
    exclusions = cohort.exclusions.drop(columns=["excluded", "remaining"]).rename(
        columns={"excluded_people": "excluded", "remaining_people": "remaining"})
    return dataclasses.replace(
        cohort,
        frame=cohort.frame.iloc[rows].reset_index(drop=True),
        y=cohort.y[rows],
        exclusions=exclusions,
        n_screened=cohort.n_people_screened,
        n_analysed=cohort.n_people,
        weights=None,
        outcome_rows=dict(cohort.outcome_counts),
        clusters=clusters,
    )


def complete_rows(cohort: "PreparedCohort") -> "PreparedCohort":
    """The cohort's rows with every predictor recorded (the cohort itself when none is missing).

    Under multiple imputation the checks made before anything is fitted
    (the design, separation, folds) look at these rows: the completed data
    sets do not exist yet.
    """
    cohort = _check_cohort(cohort, "complete_rows: cohort")
    keep = ~cohort.frame[list(cohort.predictors)].isna().any(axis=1).to_numpy() if cohort.predictors else np.ones(len(cohort.y), bool)
    if keep.all():
        return cohort
    return dataclasses.replace(
        cohort, frame=cohort.frame.loc[keep].reset_index(drop=True), y=cohort.y[keep], n_analysed=int(keep.sum()),
        weights=None if cohort.weights is None else cohort.weights[keep],
        clusters=None if cohort.clusters is None else cohort.clusters[keep],
        n_people=None if cohort.weights is None else int(cohort.weights[keep].sum()),
        outcome_counts={lv: int(n) for lv, n in zip(cohort.outcome_levels, np.bincount(cohort.y[keep], minlength=len(cohort.outcome_levels)))},
        outcome_rows=None,
    )


def _complete_cases(study: Study, raw: pd.DataFrame, out: Mapping[str, pd.Series], where: str, *,
                    weights: np.ndarray | None = None, impute: bool = False) -> tuple[pd.Series, pd.DataFrame]:
    """The rows kept by complete-case exclusion, and the table of exclusion steps.

    Steps run in a fixed order: rows of weight 0 (with frequency weights),
    the outcome, then each predictor in study order.  With ``weights`` the
    table also counts people (``excluded_people``, ``remaining_people``).
    With ``impute`` (multiple imputation) only the outcome excludes: rows
    missing a predictor are kept, their values imputed later.
    Refuses a cohort with no row left.
    """
    keep = pd.Series(True, index=raw.index)
    steps = []
    order = [("missing outcome", study.outcome.column)]
    if not impute:
        order += [("missing predictor", p) for p in study.predictors.in_analysis]
    if weights is not None:
        order.insert(0, ("weight 0", study.data.weight_column))
    for reason, column in order:
        gone = keep & (pd.Series(weights == 0, index=raw.index) if reason == "weight 0" else out[column].isna())
        keep &= ~gone
        step = {"reason": reason, "column": column, "excluded": int(gone.sum()), "remaining": int(keep.sum())}
        if weights is not None:
            step |= {"excluded_people": int(weights[gone.to_numpy()].sum()), "remaining_people": int(weights[keep.to_numpy()].sum())}
        steps.append(step)
    columns = ["reason", "column", "excluded", "remaining"] + (["excluded_people", "remaining_people"] if weights is not None else [])
    exclusions = pd.DataFrame(steps, columns=columns)
    if int(keep.sum()) == 0:
        flow = "; ".join(f"{s['reason']} {s['column']!r}: {s['excluded']}" for s in steps if s["excluded"])
        raise DataError(f"{where}: no rows remain after complete-case exclusions ({len(raw)} screened; {flow or 'the file has no rows'})")
    return keep, exclusions


def _category_levels(specs: Mapping[str, PredictorSpec], reference: PreparedCohort | None, kept: pd.DataFrame) -> dict[str, tuple[str, ...]]:
    """Level order of each categorical predictor.

    The derivation cohort's order when it has one, so both cohorts code
    categories alike; else the study's ``levels``; else the analysed values sorted.
    """
    category_levels: dict[str, tuple[str, ...]] = {}
    if reference is not None:
        for name, spec in specs.items():
            if spec.form not in ("linear", "spline") and name in reference.category_levels:
                category_levels[name] = reference.category_levels[name]
    for name, spec in specs.items():
        if spec.form == "categorical" and name not in category_levels:
            category_levels[name] = tuple(spec.levels) if spec.levels is not None else tuple(sorted(kept[name].dropna().unique()))
    return category_levels


def _raise(where: str, lines: list[str]) -> None:
    if len(lines) == 1:
        raise DataError(f"{where}: {lines[0]}")
    raise DataError(f"{where}: {len(lines)} problems\n  - " + "\n  - ".join(lines))


# -- all cohorts of a study --------------------------------------------------------------


@dataclass(frozen=True)
class Cohorts:
    """Every data set a study names, read and checked.

    Attributes
    ----------
    derivation : PreparedCohort
    validation : dict of str to PreparedCohort
        By label, in study order.
    ratings : DataFrame or None
        The paired-ratings file (if configured), with the rater columns of
        ``agreement.items`` checked: numbers for continuous items, text
        otherwise.  All its rows are kept; pairs with a missing rating are for
        the agreement stage to handle.
    ratings_audit : FrameAudit or None
        Audit of the rater columns.
    """

    derivation: PreparedCohort
    validation: dict[str, PreparedCohort]
    ratings: pd.DataFrame | None = field(default=None, repr=False)
    ratings_audit: FrameAudit | None = field(default=None, repr=False)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary of every cohort (no rows)."""
        return {
            "derivation": self.derivation.to_dict(),
            "validation": {k: v.to_dict() for k, v in self.validation.items()},
            "ratings": None if self.ratings_audit is None else self.ratings_audit.to_dict(),
        }

    def to_frame(self) -> pd.DataFrame:
        """Exclusion steps of every cohort, stacked (see :meth:`PreparedCohort.to_frame`)."""
        parts = [self.derivation.to_frame()] + [c.to_frame() for c in self.validation.values()]
        return pd.concat(parts, ignore_index=True)


def _prepare_ratings(study: Study, frame: pd.DataFrame, where: str) -> pd.DataFrame:
    columns = [str(c) for c in frame.columns]
    frame = frame.set_axis(columns, axis=1)
    items = study.agreement.items if study.agreement is not None else ()
    needs = []
    for item in items:
        for key in ("rater_a", "rater_b"):
            column = getattr(item, key)
            if column not in {n.column for n in needs}:
                needs.append(_Need(column, f"agreement item {item.name!r}, {key}, scale {item.scale!r}", True))
    absent = [n for n in needs if n.column not in columns]
    if absent:
        _raise(where, [_missing_column_line(n, columns) for n in absent])
    if not needs:
        return frame
    out: dict[str, pd.Series] = {}
    problems = []
    for item in items:
        for column in (item.rater_a, item.rater_b):
            if column in out:
                continue
            if item.scale == "continuous":
                numbers, bad = _to_number(frame[column])
                if len(bad):
                    problems.append(
                        _bad_values(f"column {column!r} (agreement item {item.name!r}, scale 'continuous')", allowed="finite numbers or a missing-value code", bad=bad, limit=_SHOWN_VALUES, source=where)
                    )
                out[column] = numbers
            else:
                out[column] = _as_text(frame[column])
        if item.scale == "binary":
            values = pd.concat([out[item.rater_a], out[item.rater_b]]).dropna()
            seen = values.value_counts()
            if len(seen) > 2:
                problems.append(
                    f"columns {item.rater_a!r} and {item.rater_b!r} (agreement item {item.name!r}, scale 'binary'): "
                    f"expected at most 2 distinct values between them; received {len(seen)}: "
                    + "; ".join(f"{v!r}: {n}" for v, n in seen.head(_SHOWN_VALUES).items())
                    + " (use scale 'ordinal' for more categories)"
                )
    if problems:
        _raise(where, problems)
    return pd.DataFrame(out)


def load_cohorts(study: Study) -> Cohorts:
    """Read and prepare every data file the study names.

    Parameters
    ----------
    study : Study

    Returns
    -------
    Cohorts
        The derivation cohort, each validation cohort (checked against the
        derivation cohort's categories) and the ratings file.

    Raises
    ------
    DataError
        From :func:`read_table` or :func:`prepare_cohort`, naming the file.
    """
    study = _check_study(study, "load_cohorts")
    missing_values = study.data.missing_values
    missing = "multiple_imputation" if study.imputing else "complete_case"
    path = study.data.derivation
    derivation = prepare_cohort(study, read_table(path, missing_values=missing_values),
                                role="derivation", label="derivation", source=str(path), missing=missing)
    validation = {}
    for cohort in study.data.validation:
        validation[cohort.label] = prepare_cohort(
            study, read_table(cohort.path, missing_values=missing_values),
            role="validation", label=cohort.label, source=str(cohort.path), reference=derivation, missing=missing,
        )
    ratings = ratings_audit = None
    if study.data.ratings is not None:
        ratings = _prepare_ratings(study, read_table(study.data.ratings, missing_values=missing_values), str(study.data.ratings))
        ratings_audit = audit_frame(ratings, name=str(study.data.ratings))
    for cohort in [derivation, *validation.values()]:
        _require_every_level(study, cohort)
    return Cohorts(derivation=derivation, validation=validation, ratings=ratings, ratings_audit=ratings_audit)


def _require_every_level(study: Study, cohort: "PreparedCohort") -> None:
    """Refuse a cohort in which an outcome level has no analysed row.

    Every stage needs each level: a cumulative model has a threshold per
    level boundary, and each cut's discrimination and calibration need both
    sides.  Found here, before any record is written.
    """
    empty = [level for level, n in cohort.outcome_counts.items() if n == 0]
    if empty:
        counts = ", ".join(f"{level!r}: {n}" for level, n in cohort.outcome_counts.items())
        raise DataError(
            f"{cohort.source}: column {study.outcome.column!r}: expected at least one analysed row in every outcome level "
            f"{list(study.outcome.ordered_levels)}; the {cohort.label} cohort has none in {empty} after exclusions (counts {counts}). "
            "Merge the empty level with a neighbour in the study's outcome levels, or use more data"
        )


def _check_cohort(cohort: Any, where: str) -> PreparedCohort:
    if not isinstance(cohort, PreparedCohort):
        raise DataError(problem(where, allowed="a PreparedCohort from prepare_cohort or load_cohorts", received=type(cohort).__name__))
    return cohort


def _is_binary_number(values: pd.Series) -> bool:
    present = values.dropna()
    return len(present) > 0 and bool(present.isin([0.0, 1.0]).all())


@dataclass(frozen=True)
class StandardisedDifferences:
    """Standardised differences of predictors between two cohorts.

    Attributes
    ----------
    table : DataFrame
        Columns ``predictor``, ``level`` (empty for numeric predictors),
        ``statistic`` (``mean`` or ``proportion``), ``a``, ``b`` (the
        statistic in each cohort) and ``difference`` (a minus b, standardised;
        NaN when both spreads are zero).
    label_a, label_b : str
        Labels of the cohorts compared.
    """

    table: pd.DataFrame = field(repr=False)
    label_a: str
    label_b: str

    def to_frame(self) -> pd.DataFrame:
        """The table."""
        return self.table.copy()

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready table."""
        return to_jsonable({"label_a": self.label_a, "label_b": self.label_b, "rows": self.table.to_dict(orient="records")})


def standardised_differences(a: PreparedCohort, b: PreparedCohort) -> StandardisedDifferences:
    """Standardised differences of each predictor of ``a`` between cohorts ``a`` and ``b``.

    Parameters
    ----------
    a, b : PreparedCohort
        Usually the derivation and a validation cohort.

    Returns
    -------
    StandardisedDifferences

    Notes
    -----
    Numeric predictor: d = (mean_a - mean_b) / sqrt((s_a^2 + s_b^2) / 2),
    with sample variances (n - 1).  Each level of a categorical predictor, and
    a numeric predictor taking only 0 and 1, as a proportion:
    d = (p_a - p_b) / sqrt((p_a(1 - p_a) + p_b(1 - p_b)) / 2) (Austin 2009).
    Missing values (new predictors) are left out of both.  Differences above
    0.1 in absolute value are often read as meaningful imbalance (common
    practice); case-mix differences between development and validation
    samples help interpret validation results (Debray et al. 2015).

    References
    ----------
    Austin PC. Balance diagnostics for comparing the distribution of baseline
    covariates between treatment groups in propensity-score matched samples.
    Statistics in Medicine 2009;28(25):3083-3107.

    Debray TPA, Vergouwe Y, Koffijberg H, Nieboer D, Steyerberg EW, Moons KGM.
    A new framework to enhance the interpretation of external validation
    studies of clinical prediction models. Journal of Clinical Epidemiology
    2015;68(3):279-289.
    """
    a = _check_cohort(a, "standardised_differences: a")
    b = _check_cohort(b, "standardised_differences: b")
    absent = [p for p in a.predictors if p not in b.frame.columns]
    if absent:
        raise DataError(problem(f"standardised_differences: b ({b.label})", allowed=f"the predictors of a ({a.label}) {list(a.predictors)}", received=f"missing {absent}"))
    rows = []
    for name in a.predictors:
        xa, xb = a.frame[name], b.frame[name]
        if a.forms[name] == "categorical":
            order = list(a.category_levels.get(name, ()))
            order += sorted((set(xa.dropna()) | set(xb.dropna())) - set(order))
            for level in order:
                pa = float((xa.dropna() == level).mean())
                pb = float((xb.dropna() == level).mean())
                rows.append((name, level, "proportion", pa, pb, _prop_difference(pa, pb)))
            continue
        va = xa.dropna().to_numpy(dtype=np.float64)
        vb = xb.dropna().to_numpy(dtype=np.float64)
        if _is_binary_number(xa) and _is_binary_number(xb):
            pa, pb = float(va.mean()), float(vb.mean())
            rows.append((name, "1", "proportion", pa, pb, _prop_difference(pa, pb)))
            continue
        ma, mb = float(va.mean()), float(vb.mean())
        sa = float(np.var(va, ddof=1)) if len(va) > 1 else float("nan")
        sb = float(np.var(vb, ddof=1)) if len(vb) > 1 else float("nan")
        pooled = math.sqrt((sa + sb) / 2)
        rows.append((name, "", "mean", ma, mb, (ma - mb) / pooled if pooled > 0 else float("nan")))
    table = pd.DataFrame(rows, columns=["predictor", "level", "statistic", "a", "b", "difference"])
    return StandardisedDifferences(table=table, label_a=a.label, label_b=b.label)


def _prop_difference(pa: float, pb: float) -> float:
    pooled = math.sqrt((pa * (1 - pa) + pb * (1 - pb)) / 2)
    return (pa - pb) / pooled if pooled > 0 else float("nan")


# -- values that look like missing-value codes --------------------------------------------------

#: Numbers commonly used as missing-value codes (common practice, no published list).
SUSPECT_CODES = (-99999.0, -9999.0, -999.0, -99.0, -9.0, 999.0, 9999.0, 99999.0)


def suspect_codes(cohort: "PreparedCohort") -> list[str]:
    """Warnings about numeric predictor values that look like missing-value codes.

    A value is flagged when it equals one of :data:`SUSPECT_CODES` and lies more
    than three interquartile ranges outside the quartiles of the column's
    other values.  Nothing is changed: if the value is a code, the study
    lists it under ``data.missing_values``.

    Returns
    -------
    list of str
        One sentence per flagged column and code (empty when none).
    """
    notes = []
    for column in cohort.predictors:
        if cohort.forms.get(column) == "categorical":
            continue
        values = pd.to_numeric(cohort.frame[column], errors="coerce").dropna()
        for code in SUSPECT_CODES:
            hits = int((values == code).sum())
            if not hits:
                continue
            rest = values[values != code]
            if rest.empty:
                continue
            q1, q3 = rest.quantile([0.25, 0.75])
            spread = max(q3 - q1, 1e-12)
            if code < q1 - 3 * spread or code > q3 + 3 * spread:
                notes.append(
                    f"{cohort.source}: column {column!r} holds {hits} value(s) of {code:g}, far outside its other values "
                    f"({rest.min():g} to {rest.max():g}); if {code:g} is a missing-value code, add it to data.missing_values"
                )
    return notes
