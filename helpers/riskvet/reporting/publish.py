"""The publishing layer: what a record page shows passes through here.

A stage computes result objects; its notebook shows them with the four
functions of this module, so every page formats, labels and words its
content the same way and no stage can put raw program output in front of a
reader:

- :func:`table` turns a pandas DataFrame into a :class:`Table`: no index
  column, a dash for a missing value, yes/no for a flag, p-values as
  ``<0.001`` or three decimals, fixed decimals otherwise (never scientific
  notation), thousands separators for counts, a caption and a sentence in
  place of an empty table;
- :func:`text` shows a paragraph (markdown) after the same scrubbing;
- :func:`figure` embeds a record figure (its SVG, so it scales to any screen)
  with a caption and a text alternative;
- :func:`notes` turns the statistical warnings a stage met into a list in
  words: no Python class name, no file path, no source line.

Disclosure control is not done here: counts reach a table already through
:mod:`riskvet.reporting.disclosure`.  What this module guarantees is the
form, which :func:`scan_text` checks on finished pages.
"""

from __future__ import annotations

import base64
import html
import math
import re
from dataclasses import dataclass
from numbers import Integral, Real
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from ..errors import RiskvetError, problem

__all__ = ["Table", "Figure", "Notes", "Text", "Equation", "table", "text", "figure", "notes", "equation", "format_value", "scrub", "scan_text", "DASH"]

#: What a missing value shows.
DASH = "–"

#: Kinds of number a column may hold (see :func:`format_value`).
KINDS = ("auto", "count", "p", "estimate", "percent", "share", "text", "flag", "integer")

_SCIENTIFIC = re.compile(r"(?<![\w.])([-+]?\d+(?:\.\d+)?)[eE]([-+]?\d+)(?![\w.])")
_ABSOLUTE_PATH = re.compile(r"(?:(?<=[\s\"'(=])|^)((?:/[\w.@+-]+){2,}/?|[A-Za-z]:\\[^\s\"'<>]+)")
_WARNING_CLASS = re.compile(r"\b(?:[A-Za-z_][\w.]*\.)?[A-Z]\w*(?:Warning|Error|Exception)\b:?\s*")
_SOURCE_LINE = re.compile(r"(?:[A-Za-z]:)?[\w./\\-]*\.py:\d+(?::\s*)?")
_P_HEADER = re.compile(r"^(?:p|p-value|p value)(?:\b|$)", re.IGNORECASE)


def scrub(value: str) -> str:
    """A text with what a page must not show rewritten.

    Numbers in scientific notation are written with fixed decimals (``1.8e-07``
    becomes ``0.000``, ``2.3e+06`` becomes ``2,300,000``), absolute file paths
    are cut to the file name, and Python warning or error class names and
    source-line references are removed.
    """
    if not isinstance(value, str):
        raise RiskvetError(problem("scrub(value)", allowed="a text (str)", received=type(value).__name__))
    out = _SCIENTIFIC.sub(lambda m: _text_number(float(m.group(0))), value)
    out = _SOURCE_LINE.sub("", out)
    out = _WARNING_CLASS.sub("", out)
    return _ABSOLUTE_PATH.sub(lambda m: Path(m.group(1).rstrip("/\\")).name or "a file", out)


def _text_number(number: float) -> str:
    """A number met in scientific notation inside a sentence, in fixed decimals."""
    if number != 0 and abs(number) < 0.0005:
        return "less than 0.001" if number > 0 else "minus less than 0.001"
    return format_value(number)


def _is_missing(value: Any) -> bool:
    if value is None or value is pd.NA or value is pd.NaT:
        return True
    return isinstance(value, float) and math.isnan(value)


def format_value(value: Any, kind: str = "auto", *, decimals: int = 3) -> str:
    """One cell as a page shows it.

    Parameters
    ----------
    value : any
        The cell.
    kind : str, default "auto"
        ``count``/``integer`` (whole number with thousands separators), ``p``
        (``<0.001`` or three decimals), ``estimate`` (``decimals`` fixed
        decimals), ``percent`` (a value already in percent, one decimal and
        ``%``), ``share`` (a proportion shown in percent), ``flag``
        (yes/no), ``text``; ``auto`` picks by type: whole numbers as counts,
        other numbers as estimates, booleans as flags.
    decimals : int, default 3
        Decimals of an estimate.

    Returns
    -------
    str
        Never scientific notation, never ``nan``, ``None``, ``True`` or
        ``False``: a missing value is :data:`DASH`.
    """
    if kind not in KINDS:
        raise RiskvetError(problem("format_value(kind)", allowed=f"one of {list(KINDS)}", received=kind))
    if _is_missing(value):
        return DASH
    if isinstance(value, (bool, np.bool_)) or kind == "flag":
        if isinstance(value, str):
            return scrub(value)
        return "yes" if bool(value) else "no"
    if isinstance(value, str) or kind == "text" or not isinstance(value, Real):
        return scrub(str(value))
    number = float(value)
    if math.isinf(number):
        return "infinite" if number > 0 else "minus infinite"
    if kind == "p":
        return "<0.001" if number < 0.001 else f"{number:.3f}"
    if kind == "share":
        return f"{100 * number:.1f}%"
    if kind == "percent":
        return f"{number:.1f}%"
    if kind in ("count", "integer") or (kind == "auto" and isinstance(value, Integral)):
        return f"{round(number):,}"
    if abs(number) >= 1000:
        return f"{number:,.0f}"
    if abs(number) >= 100:
        return f"{number:,.1f}"
    shown = f"{number:.{decimals}f}"
    return shown[1:] if shown.startswith("-") and float(shown) == 0 else shown


#: Headers that are abbreviations or program names, in words.
_HEADER_WORDS = {
    "tp": "true positives", "fp": "false positives", "fn": "false negatives", "tn": "true negatives",
    "ppv": "positive predictive value", "npv": "negative predictive value", "se": "standard error",
    "lr_positive": "positive likelihood ratio", "lr_negative": "negative likelihood ratio",
    "or": "odds ratio", "ci": "interval", "df": "degrees of freedom", "auc": "C (AUC)", "ici": "ICI",
}


def header_words(name: str) -> str:
    """A column header in words: abbreviations spelled out, ``_lower``/``_upper`` as limits, no underscores."""
    key = str(name).strip()
    if key.lower() in _HEADER_WORDS:
        return _HEADER_WORDS[key.lower()]
    for suffix, words in (("_lower", "lower limit"), ("_upper", "upper limit"), ("_se", "standard error")):
        if key.endswith(suffix) and len(key) > len(suffix):
            return f"{header_words(key[: -len(suffix)])}, {words}"
    if key.startswith("n_") and len(key) > 2:
        return f"n, {header_words(key[2:])}"
    return key.replace("_", " ") if "_" in key and " " not in key else key


def _column_kind(name: str, values: pd.Series, kinds: Mapping[str, str]) -> str:
    if name in kinds:
        return kinds[name]
    if _P_HEADER.match(name.strip()):
        return "p"
    numeric = pd.to_numeric(values, errors="coerce")
    present = values[~values.map(_is_missing)]
    if len(present) and present.map(lambda v: isinstance(v, (Integral, float)) and not isinstance(v, bool)).all():
        if numeric.notna().all() and (numeric.dropna() % 1 == 0).all() and values.dtype.kind in "iu":
            return "count"
    return "auto"


@dataclass(frozen=True)
class Table:
    """A table as a page shows it: formatted cells, headers in words, no index.

    Attributes
    ----------
    columns : tuple of str
        Column headers.
    rows : tuple of tuple of str
        Formatted cells.
    numeric : tuple of bool
        Which columns hold numbers (aligned right).
    caption : str or None
        A sentence above the table.
    empty : str
        The sentence shown instead of a table without rows.
    part : bool
        A part of a wider table (see :meth:`parts`): it takes the page's
        width, as tables of four or more columns do.
    """

    columns: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    numeric: tuple[bool, ...]
    caption: str | None
    empty: str
    part: bool = False

    def to_frame(self) -> pd.DataFrame:
        """The formatted cells as strings (no index)."""
        return pd.DataFrame(list(self.rows), columns=list(self.columns))

    def to_dict(self) -> dict[str, Any]:
        return {"caption": self.caption, "columns": list(self.columns), "rows": [list(r) for r in self.rows]}

    def _repr_html_(self) -> str:
        if not self.rows:
            return f'<p class="rv-empty">{html.escape(self.empty)}</p>'
        if len(self.columns) > MAX_COLUMNS:
            return "".join(part._repr_html_() for part in self.parts())
        head = "".join(f'<th scope="col"{_align(n)}>{html.escape(c)}</th>' for c, n in zip(self.columns, self.numeric))
        body = "".join(
            "<tr>"
            + "".join(
                f'<td data-label="{html.escape(c, quote=True)}"{_align(n)}>{html.escape(v)}</td>'
                for c, v, n in zip(self.columns, row, self.numeric)
            )
            + "</tr>"
            for row in self.rows
        )
        caption = f"<caption>{html.escape(self.caption)}</caption>" if self.caption else ""
        layout = ' class="rv-fixed"' if len(self.columns) >= 4 or self.part else ""
        return f'<div class="rv-table"><table{layout}>{caption}<thead><tr>{head}</tr></thead><tbody>{body}</tbody></table></div>'

    def _repr_markdown_(self) -> str | None:
        return None

    def parts(self) -> list["Table"]:
        """The table split into tables of at most :data:`MAX_COLUMNS` columns, each repeating the row labels.

        The row labels are the leading columns that hold words (at most two).
        """
        labels = 0
        while labels < min(2, len(self.columns) - 1) and not self.numeric[labels]:
            labels += 1
        labels = max(labels, 1)
        width = max(1, MAX_COLUMNS - labels)
        rest = list(range(labels, len(self.columns)))
        chunks = [rest[i: i + width] for i in range(0, len(rest), width)]
        out = []
        for number, chunk in enumerate(chunks, start=1):
            keep = [*range(labels), *chunk]
            lead = f"{self.caption} " if self.caption and number == 1 else ""
            caption = f"{lead}(Part {number} of {len(chunks)} of a table too wide to show at once.)"
            out.append(Table(
                columns=tuple(self.columns[i] for i in keep), rows=tuple(tuple(r[i] for i in keep) for r in self.rows),
                numeric=tuple(self.numeric[i] for i in keep), caption=caption, empty=self.empty, part=True,
            ))
        return out


#: More columns than this are shown as several tables (see :meth:`Table.parts`).
MAX_COLUMNS = 7


def _align(numeric: bool) -> str:
    return ' class="rv-num"' if numeric else ""


def table(
    frame: pd.DataFrame | None,
    *,
    caption: str | None = None,
    kinds: Mapping[str, str] | None = None,
    decimals: int | Mapping[str, int] = 3,
    empty: str = "There is nothing to show in this table for this study.",
    interval: str | Mapping[str, str] | None = None,
) -> Table:
    """A DataFrame as a page shows it.

    Parameters
    ----------
    frame : DataFrame or None
        Columns are shown under their names (which should be words); a named
        or non-default index becomes the first column(s), a plain range index
        is dropped.  None shows ``empty``.
    caption : str, optional
        A sentence shown above the table.
    kinds : mapping, optional
        Column name -> kind of number (see :func:`format_value`).  Without
        one, a column whose header starts with "p" as a word (``p``,
        ``p-value``, ``p (joint test)``) holds p-values, integer columns hold
        counts and other numbers are estimates.
    decimals : int or mapping, default 3
        Decimals of estimates, for all columns or per column name.
    empty : str
        The sentence shown when the table has no rows.
    interval : str, optional
        The kind of the intervals the table holds ("95% bootstrap percentile
        interval"): columns of lower and upper limits (``X_lower`` and
        ``X_upper``, ``lower`` and ``upper``) are joined into one column
        ``X, <interval>`` showing "lower to upper".  A mapping gives the kind
        per estimate column (``{"sensitivity": "95% Wilson interval"}``).

    Returns
    -------
    Table
    """
    kinds = dict(kinds or {})
    for name, kind in kinds.items():
        if kind not in KINDS:
            raise RiskvetError(problem(f"table(kinds[{name!r}])", allowed=f"one of {list(KINDS)}", received=kind))
    if frame is None:
        return Table(columns=(), rows=(), numeric=(), caption=caption, empty=empty)
    if not isinstance(frame, pd.DataFrame):
        raise RiskvetError(problem("table(frame)", allowed="a pandas DataFrame or None", received=type(frame).__name__))
    shown, pairs = _intervals(_flatten(frame), interval)
    columns, cells, numeric = [], [], []
    for position, name in enumerate(shown.columns):
        values = shown.iloc[:, position]
        places = decimals.get(str(name), 3) if isinstance(decimals, Mapping) else decimals
        if name in pairs:
            lower, upper = pairs[name]
            columns.append(scrub(str(name)))
            cells.append([_interval_cell(lo, hi, places) for lo, hi in zip(lower, upper)])
            numeric.append(True)
            continue
        kind = _column_kind(str(name), values, kinds)
        columns.append(scrub(header_words(str(name))))
        cells.append([format_value(v, kind, decimals=places) for v in values])
        numeric.append(kind not in ("text", "flag") and bool(len(values)) and values.map(
            lambda v: _is_missing(v) or (isinstance(v, Real) and not isinstance(v, bool))).all())
    rows = tuple(zip(*cells)) if cells else ()
    return Table(columns=tuple(columns), rows=tuple(tuple(r) for r in rows), numeric=tuple(numeric), caption=caption, empty=empty)


_LIMIT_NAMES = ((", lower limit", ", upper limit"), (" lower limit", " upper limit"), ("_lower", "_upper"), (", lower", ", upper"),
                (" lower", " upper"), (" (lower)", " (upper)"))


def _intervals(frame: pd.DataFrame, interval: str | Mapping[str, str] | None) -> tuple[pd.DataFrame, dict[str, tuple[list, list]]]:
    """Columns of lower and upper limits joined into one interval column ("0.872 to 0.979") after their estimate.

    ``X_lower``/``X_upper`` (or ``X lower``, ``X, lower limit`` ...) become
    ``X, <interval>`` right after ``X``; plain ``lower``/``upper`` become one
    column named ``<interval>``.  ``interval`` names the kind ("95% Wilson
    interval"); without it the header says "interval".
    """
    kinds = dict(interval) if isinstance(interval, Mapping) else {}
    interval = None if isinstance(interval, Mapping) else interval
    words = interval or "interval"
    names = [str(c) for c in frame.columns]
    out, pairs, used = {}, {}, set()
    for name in names:
        if name in used:
            continue
        for low_suffix, high_suffix in ((low, high) for low, high in _LIMIT_NAMES):
            low, high = f"{name}{low_suffix}", f"{name}{high_suffix}"
            if low in names and high in names:
                out[name] = frame[name]
                joined = f"{header_words(name)}, {kinds.get(name, words)}"
                pairs[joined] = (list(frame[low]), list(frame[high]))
                out[joined] = frame[name]
                used.update({low, high})
                break
        else:
            rest = name[5:] if name.lower().startswith("lower") else None
            high = next((n for n in names if rest is not None and n.lower() == "upper" + rest.lower()), None)
            if high is not None:
                named = rest.strip(" ,()").removeprefix("limit").strip(" ,()")
                header = interval or named or _kind_header(frame, None)
                pairs[header] = (list(frame[name]), list(frame[high]))
                out[header] = frame[name]
                used.update({name, high})
                if "interval" in names and frame["interval"].nunique(dropna=True) <= 1:
                    used.add("interval")  # its one kind is the header now
            elif name not in used:
                out[name] = frame[name]
    out = {k: v for k, v in out.items() if k not in used or k in pairs}
    return pd.DataFrame(out).reset_index(drop=True), pairs


def _kind_header(frame: pd.DataFrame, given: str | None) -> str:
    """The header of a joined interval column: the kind given, else the one kind an ``interval`` column names."""
    if given:
        return given
    if "interval" in frame.columns:
        kinds = frame["interval"].dropna().unique()
        if len(kinds) == 1 and isinstance(kinds[0], str):
            return kinds[0]
    return "limits of the interval" if "interval" in frame.columns else "interval"


def _interval_cell(lower: Any, upper: Any, decimals: int) -> str:
    if _is_missing(lower) or _is_missing(upper):
        return DASH
    return f"{format_value(lower, decimals=decimals)} to {format_value(upper, decimals=decimals)}"


def _flatten(frame: pd.DataFrame) -> pd.DataFrame:
    """Index levels with names become columns; column levels are joined in words."""
    out = frame.copy()
    if isinstance(out.columns, pd.MultiIndex):
        out.columns = [", ".join(str(p) for p in parts if str(p) and not str(p).startswith("Unnamed")) for parts in out.columns]
    keep_index = any(n is not None for n in out.index.names) or not isinstance(out.index, pd.RangeIndex)
    if keep_index and not (isinstance(out.index, pd.RangeIndex) or _is_default(out.index)):
        names = [n if n is not None else "" for n in out.index.names]
        out.index.names = [n or (" " if len(names) == 1 else f"level {i + 1}") for i, n in enumerate(names)]
        out = out.reset_index()
    return out.reset_index(drop=True)


def _is_default(index: pd.Index) -> bool:
    return index.names == [None] and index.dtype.kind in "iu" and list(index) == list(range(len(index)))


@dataclass(frozen=True)
class Text:
    """A paragraph (markdown) as a page shows it."""

    markdown: str

    def _repr_markdown_(self) -> str:
        return self.markdown

    def to_dict(self) -> dict[str, Any]:
        return {"markdown": self.markdown}


def text(markdown: str | Sequence[str]) -> Text:
    """A paragraph, or several joined by blank lines, scrubbed (see :func:`scrub`)."""
    if isinstance(markdown, (list, tuple)):
        markdown = "\n\n".join(str(m) for m in markdown if m)
    if not isinstance(markdown, str):
        raise RiskvetError(problem("text(markdown)", allowed="a text or a list of texts", received=type(markdown).__name__))
    return Text(markdown=scrub(markdown))


@dataclass(frozen=True)
class Figure:
    """A record figure embedded in its page.

    Attributes
    ----------
    data : bytes
        The SVG (or PNG) file.
    media_type : str
        ``image/svg+xml`` or ``image/png``.
    caption : str
        What the figure shows, in words; also its text alternative.
    """

    data: bytes
    media_type: str
    caption: str

    def _repr_html_(self) -> str:
        encoded = base64.b64encode(self.data).decode("ascii")
        alt = html.escape(self.caption, quote=True)
        return (
            f'<figure class="rv-figure"><img src="data:{self.media_type};base64,{encoded}" alt="{alt}">'
            f"<figcaption>{html.escape(self.caption)}</figcaption></figure>"
        )

    def to_dict(self) -> dict[str, Any]:
        return {"media_type": self.media_type, "caption": self.caption, "bytes": len(self.data)}


def figure(record_dir: str | Path, relative_path: str | Path, *, caption: str) -> Figure:
    """A figure of the record (``figures/<stage>/<name>.png``), embedded as its SVG.

    Parameters
    ----------
    record_dir : path
        The record folder.
    relative_path : path
        The figure's path inside the record, as a stage result names it; the
        SVG beside a PNG of the same name is preferred (it scales to a narrow
        screen without blurring).
    caption : str
        What the figure shows, in words.
    """
    path = Path(record_dir) / relative_path
    svg = path.with_suffix(".svg")
    chosen = svg if svg.is_file() else path
    if not chosen.is_file():
        raise RiskvetError(problem("figure(relative_path)", allowed="a figure file of the record", received=str(relative_path)))
    media = "image/svg+xml" if chosen.suffix == ".svg" else "image/png"
    return Figure(data=chosen.read_bytes(), media_type=media, caption=scrub(caption))


@dataclass(frozen=True)
class Notes:
    """The statistical notes of a page, in words."""

    items: tuple[str, ...]
    empty: str

    def _repr_markdown_(self) -> str:
        if not self.items:
            return self.empty
        return "\n".join(f"- {item}" for item in self.items)

    def to_dict(self) -> dict[str, Any]:
        return {"items": list(self.items)}


def notes(items: Iterable[Any], *, empty: str = "No statistical warnings were met in this stage.") -> Notes:
    """Warnings and remarks as a list in words, each once, in the order met.

    Each item is a text or a warning object; class names, file paths and
    source lines are removed (see :func:`scrub`), and the first letter is
    capitalised.
    """
    seen: dict[str, None] = {}
    for item in items:
        message = str(item.message if hasattr(item, "message") else item)
        words = scrub(message).strip()
        if words:
            seen.setdefault(words[0].upper() + words[1:], None)
    return Notes(items=tuple(seen), empty=empty)


#: What :func:`scan_text` looks for, by name.
_FORBIDDEN = {
    "scientific notation": re.compile(r"(?<![\w.#&-])\d+(?:\.\d+)?[eE][-+]?\d+(?![\w.])"),
    "missing-value word": re.compile(r"(?<![\w-])(?:NaN|nan|None|NaT|<NA>)(?![\w-])(?!\s+(?:of|is|are|was|were)\b)"),
    "Python flag": re.compile(r"(?<![\w-])(?:True|False)(?![\w-])"),
    "absolute path": re.compile(r"(?:(?<=[\s\"'(>])|^)(?:/(?:home|tmp|usr|work|var|root|Users|opt|mnt)/[\w./-]+|[A-Za-z]:\\\w+)"),
    "warning class name": re.compile(r"\b\w+(?:Warning|Error|Exception)\b(?=:|\s*\()"),
    "source line": re.compile(r"\b[\w/-]+\.py:\d+"),
}


def scan_text(value: str, *, internal_names: Iterable[str] = ()) -> list[tuple[str, str]]:
    """What a page's visible text shows that it must not.

    Parameters
    ----------
    value : str
        Visible text of a page (tags removed) or of a results file.
    internal_names : iterable of str
        Names that are the program's own and must not reach a reader (for
        example design column names that differ from the user's words).

    Returns
    -------
    list of (str, str)
        (kind of problem, the offending text with a little context).
    """
    found = []
    for kind, pattern in _FORBIDDEN.items():
        for m in pattern.finditer(value):
            found.append((kind, value[max(0, m.start() - 30): m.end() + 30]))
    for name in internal_names:
        for m in re.finditer(rf"(?<![\w=.-]){re.escape(name)}(?![\w=-])", value):
            found.append(("internal name", value[max(0, m.start() - 30): m.end() + 30]))
    return found


@dataclass(frozen=True)
class Equation:
    """A model equation as a block that wraps between terms, never inside a number."""

    plain: str

    def _repr_html_(self) -> str:
        lines = []
        for line in self.plain.splitlines():
            parts = re.split(r"(?<=\S)\s+(?=[+\-−]\s)", line.strip())
            lines.append(" ".join(
                f'<span class="rv-term">{html.escape(p)}</span>' if len(p) <= 40 else html.escape(p) for p in parts if p
            ))
        return '<div class="rv-equation">' + "<br>".join(lines) + "</div>"

    def to_dict(self) -> dict[str, Any]:
        return {"plain": self.plain}


def equation(plain: str) -> Equation:
    """The model equation (plain text, one line per linear predictor) as a block for the page."""
    if not isinstance(plain, str):
        raise RiskvetError(problem("equation(plain)", allowed="the plain-text equation (str)", received=type(plain).__name__))
    return Equation(plain=scrub(plain))
