"""Effects of the terms of a fitted model over stated contrasts, and each term's joint Wald test.

A per-column odds ratio means nothing for a spline column (a change of one
unit in ``core_temp_nonlin1`` with the other columns of the spline held
still cannot happen), and a term with several columns (a spline, category
dummies, an interaction) is tested by all its columns together.  This
module gives, for every term of a fitted cumulative-link model,

* the change in the linear predictor between two stated values of one
  predictor, the other predictors held at stated values:
  ``c' b`` with ``c`` the difference of the two design rows, its standard
  error ``sqrt(c' V c)`` and a Wald interval (an odds ratio ``exp(c' b)``
  under the logit link);
* the joint Wald test of the term's columns, ``b_T' V_TT^{-1} b_T``,
  chi-squared on as many degrees of freedom as the term has coefficients.

Numeric predictors are compared at the 75th against the 25th percentile of
the derivation data (the 90th against the 10th, then the largest against
the smallest value, when the quartiles are equal; a two-valued predictor
compares its two values); categorical ones compare each level with the
reference.  The design rows are built by the frozen design itself
(:meth:`riskvet.intake.design.DesignSpec.transform`) from two raw values,
so the contrast follows the spline and the interactions exactly.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np
import pandas as pd
from scipy import stats

from .._jsonable import to_jsonable
from ..errors import RiskvetError, problem
from ..intake.design import DesignSpec, Term

__all__ = [
    "TermEffects",
    "term_effects",
    "term_label",
    "column_label",
    "contrast_values",
    "joint_wald_test",
    "linear_contrast",
    "EFFECT_COLUMNS",
    "TEST_COLUMNS",
]

#: Headers of :attr:`TermEffects.effects` (the effect column is named by the link).
EFFECT_COLUMNS = ("term", "compares", "held at", "cut")
#: Headers of :attr:`TermEffects.tests`.
TEST_COLUMNS = ("term", "coefficients", "chi-square", "df", "p (joint Wald test)")


def term_label(term: Term) -> str:
    """A term in words: ``age``, ``core_temp (spline)``, ``sex (categories)``, ``age × sex (interaction)``."""
    if term.kind == "spline":
        return f"{term.sources[0]} (spline)"
    if term.kind == "categorical":
        return f"{term.sources[0]} (categories)"
    if term.kind == "interaction":
        return " × ".join(p.sources[0] for p in term.parts) + " (interaction)"
    return term.sources[0]


def column_label(design: DesignSpec, column: str) -> str:
    """A design column in words: ``core_temp_nonlin1`` -> ``core_temp (spline, part 2 of 3)``, ``sex=male`` -> ``sex: male``."""
    for term in design.terms:
        if column not in term.columns:
            continue
        i = term.columns.index(column)
        if term.kind == "spline":
            return f"{term.sources[0]} (spline, part {i + 1} of {len(term.columns)})"
        if term.kind == "categorical":
            return f"{term.sources[0]}: {column.split('=', 1)[1]}"
        if term.kind == "interaction":
            parts = [column_label(DesignSpec(terms=(p,)), c) for p, c in zip(term.parts, _interaction_pair(term, i))]
            return " × ".join(parts)
        return term.sources[0]
    raise RiskvetError(problem("column_label(column)", allowed=f"a column of the design {list(design.columns)}", received=column))


def _interaction_pair(term: Term, i: int) -> tuple[str, str]:
    a, b = term.parts
    return a.columns[i // len(b.columns)], b.columns[i % len(b.columns)]


def contrast_values(x: Any, *, where: str = "contrast_values(x)") -> tuple[float, float, str]:
    """The two values a numeric predictor is compared at, and what they are in words.

    The 75th against the 25th percentile; when those are equal, the 90th
    against the 10th; then the largest against the smallest value.  A
    predictor with two distinct values compares them.

    Raises
    ------
    RiskvetError
        No finite value, or a single distinct value.
    """
    v = pd.to_numeric(pd.Series(np.asarray(x).ravel()), errors="coerce").to_numpy(dtype=float)
    v = v[np.isfinite(v)]
    distinct = np.unique(v)
    if distinct.size < 2:
        raise RiskvetError(problem(where, allowed="a numeric predictor with at least two distinct values", received=f"{distinct.size} distinct value(s)"))
    if distinct.size == 2:
        return float(distinct[0]), float(distinct[1]), "its two values"
    for lo, hi in ((25, 75), (10, 90)):
        a, b = np.percentile(v, [lo, hi])
        if b > a:
            return float(a), float(b), f"{hi}th against {lo}th percentile"
    return float(distinct[0]), float(distinct[-1]), "largest against smallest value"


def _number(value: float) -> str:
    return f"{value:.4g}"


@dataclass(frozen=True)
class TermEffects:
    """Term effects over stated contrasts, and the joint test of each term.

    Attributes
    ----------
    effects : DataFrame
        One row per contrast (and cut, for a non-proportional model): term,
        compares (the two values in words), held at (the values of the
        interacting predictors), cut (empty for a proportional model), the
        effect (``odds ratio`` for the logit link, else ``change in the
        linear predictor``) and its Wald interval.
    tests : DataFrame
        One row per term: term, coefficients (number tested), chi-square,
        df, p (joint Wald test).
    effect_name : str
        The header of the effect column.
    confidence : float
        Level of the Wald intervals.
    """

    effects: pd.DataFrame
    tests: pd.DataFrame
    effect_name: str
    confidence: float

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({"effects": self.effects, "tests": self.tests, "effect_name": self.effect_name, "confidence": self.confidence})

    def to_frame(self) -> pd.DataFrame:
        return self.effects


def _coefficient_blocks(fit: Any) -> tuple[np.ndarray, np.ndarray, int]:
    """Coefficients as (p, m) and the covariance index of coefficient (i, j); m = 1 for a proportional model."""
    m_th = fit.thresholds.size
    p = len(fit.columns)
    params = fit.params.to_numpy(dtype=float)
    cuts = 1 if fit.proportional else m_th
    index = m_th + np.arange(p * cuts).reshape(p, cuts)
    return params[index], index, cuts


def linear_contrast(fit: Any, c: Sequence[float], *, cut: int = 0) -> tuple[float, float]:
    """``c' b`` and ``sqrt(c' V c)`` for a vector ``c`` over the fit's columns (one cut's slopes if non-proportional)."""
    coef, index, cuts = _coefficient_blocks(fit)
    c = np.asarray(c, dtype=float)
    if c.shape != (len(fit.columns),):
        raise RiskvetError(problem("linear_contrast(c)", allowed=f"{len(fit.columns)} numbers, one per model column", received=f"shape {c.shape}"))
    if not 0 <= cut < cuts:
        raise RiskvetError(problem("linear_contrast(cut=)", allowed=f"a cut from 0 to {cuts - 1}", received=cut))
    V = fit.cov.to_numpy(dtype=float)
    rows = index[:, cut]
    return float(c @ coef[:, cut]), float(np.sqrt(max(c @ V[np.ix_(rows, rows)] @ c, 0.0)))


def joint_wald_test(fit: Any, columns: Sequence[str]) -> tuple[float, int, float]:
    """Joint Wald test that every coefficient of ``columns`` is 0 (every cut's, if non-proportional): chi-square, df, p."""
    unknown = [c for c in columns if c not in fit.columns]
    if unknown or not columns:
        raise RiskvetError(problem("joint_wald_test(columns)", allowed=f"columns of the fit {list(fit.columns)}", received=list(columns)))
    coef, index, _ = _coefficient_blocks(fit)
    pos = [list(fit.columns).index(c) for c in columns]
    b = coef[pos].ravel()
    idx = index[pos].ravel()
    V = fit.cov.to_numpy(dtype=float)[np.ix_(idx, idx)]
    stat = float(b @ np.linalg.solve(V, b))
    df = int(b.size)
    return stat, df, float(stats.chi2.sf(stat, df))


def _roles(design: DesignSpec) -> dict[str, Term | None]:
    """Each data column of the design -> its categorical term (levels, reference), or None when numeric."""
    roles: dict[str, Term | None] = {}
    for term in design.terms:
        for part in (term.parts or (term,)):
            roles[part.sources[0]] = part if part.kind == "categorical" else roles.get(part.sources[0])
    return roles


def _partners(design: DesignSpec, source: str) -> list[str]:
    """Data columns that interact with ``source`` in the design."""
    out = []
    for term in design.terms:
        if term.kind == "interaction" and source in term.sources:
            out += [s for s in term.sources if s != source and s not in out]
    return out


def _level_words(term: Term, level: Any) -> str:
    return f"{level} (reference)" if level == term.reference else str(level)


class _Rows:
    """Design rows of a fit from raw values: every predictor at its base value unless set."""

    def __init__(self, fit: Any, design: DesignSpec, frame: pd.DataFrame):
        self.fit, self.design, self.roles = fit, design, _roles(design)
        missing = [s for s in design.sources if s not in frame.columns]
        if missing:
            raise RiskvetError(problem("term_effects(frame)", allowed=f"the derivation data with the columns {list(design.sources)}", received={"missing_columns": missing}))
        self.base: dict[str, Any] = {}
        self.base_words: dict[str, str] = {}
        self.contrast: dict[str, tuple[float, float, str]] = {}
        for s, cat in self.roles.items():
            if cat is None:
                values = pd.to_numeric(frame[s], errors="coerce")
                self.base[s] = float(np.nanmedian(values))
                self.base_words[s] = f"{s} = {_number(self.base[s])} (median)"
                self.contrast[s] = contrast_values(values, where=f"term_effects: predictor {s!r}")
            else:
                self.base[s] = cat.reference
                self.base_words[s] = f"{s} = {_level_words(cat, cat.reference)}"

    def row(self, **values: Any) -> np.ndarray:
        setting = {**self.base, **values}
        one = pd.DataFrame({s: pd.Series([setting[s]], dtype=object if self.roles[s] is not None else float) for s in self.design.sources})
        return self.design.transform(one)[list(self.fit.columns)].to_numpy(dtype=float)[0]

    def changes(self, source: str) -> list[tuple[Any, Any, str]]:
        """(low, high, words) of each contrast of one predictor."""
        cat = self.roles[source]
        if cat is not None:
            return [(cat.reference, lv, f"{lv} against {cat.reference} (reference)") for lv in cat.levels if lv != cat.reference]
        lo, hi, how = self.contrast[source]
        return [(lo, hi, f"{_number(hi)} against {_number(lo)} ({how})")]

    def settings(self, source: str) -> list[tuple[Any, str]]:
        """The values an interacting predictor is held at: every level, or its two contrast values."""
        cat = self.roles[source]
        if cat is not None:
            return [(lv, f"{source} = {_level_words(cat, lv)}") for lv in cat.levels]
        lo, hi, _ = self.contrast[source]
        return [(v, f"{source} = {_number(v)}") for v in (lo, hi)]


def _term_contrasts(rows: _Rows, term: Term) -> list[tuple[str, str, np.ndarray]]:
    """(compares, held at, c) for each contrast of one term."""
    out = []
    if term.kind != "interaction":
        source = term.sources[0]
        held = "; ".join(rows.base_words[s] for s in _partners(rows.design, source)) or "any values (no interaction)"
        changes = rows.changes(source)
        lo, hi, how = rows.contrast.get(source, (0.0, 0.0, ""))
        if term.kind == "linear" and not (how == "its two values" and hi - lo == 1.0):
            m = rows.base[source]
            changes = [(m, m + 1.0, "one unit more")] + changes
        for lo, hi, words in changes:
            out.append((words, held, rows.row(**{source: hi}) - rows.row(**{source: lo})))
        return out
    varied, fixed = term.parts[0].sources[0], term.parts[1].sources[0]
    others = [rows.base_words[s] for s in _partners(rows.design, varied) if s != fixed]
    for value, value_words in rows.settings(fixed):
        held = "; ".join([value_words, *others])
        for lo, hi, words in rows.changes(varied):
            c = rows.row(**{varied: hi, fixed: value}) - rows.row(**{varied: lo, fixed: value})
            out.append((f"{varied}: {words}", held, c))
    return out


def term_effects(fit: Any, design: DesignSpec, frame: pd.DataFrame, *, confidence: float = 0.95,
                 cut_names: Sequence[str] | None = None) -> TermEffects:
    """Effects of every term over stated contrasts, with Wald intervals, and each term's joint Wald test.

    Parameters
    ----------
    fit : CumulativeFit
        The fitted model, columns those of ``design`` (in any order).
    design : DesignSpec
        The frozen design of the fit.
    frame : DataFrame
        The derivation data: the percentiles of numeric predictors and the
        medians at which interacting predictors are held come from it.
    confidence : float
        Level of the Wald intervals.
    cut_names : sequence of str, optional
        Names of the cuts, for a non-proportional model (default ``cut 1`` ...).

    Returns
    -------
    TermEffects

    Notes
    -----
    For two settings x_hi and x_lo of the raw predictors, ``c = d(x_hi) -
    d(x_lo)`` with ``d`` the design row.  The estimate is ``c' b``, its
    standard error ``sqrt(c' V c)`` with ``V`` the inverse observed
    information, and the Wald interval ``exp(c' b -/+ z se)`` under the logit
    link (Harrell 2015, section 9.2).  A main effect varies its predictor
    with the predictors it interacts with at their median or reference; an
    interaction varies its first predictor at each level (or at the two
    contrast values) of the second.  The joint test is ``b_T' V_TT^{-1}
    b_T`` over the term's coefficients (every cut's, for a non-proportional
    model), chi-squared on their number of degrees of freedom.

    These are Wald statistics of the final model only: after variable
    selection they ignore the selection and are too narrow, with p-values too
    small (Harrell 2015, section 4.3).

    References
    ----------
    Harrell FE Jr. Regression Modeling Strategies, 2nd ed. Springer, 2015.
    """
    if not 0 < confidence < 1:
        raise RiskvetError(problem("term_effects(confidence=)", allowed="a number strictly between 0 and 1", received=confidence))
    if sorted(fit.columns) != sorted(design.columns):
        raise RiskvetError(problem("term_effects(design)", allowed=f"the design of the fit, columns {list(fit.columns)}", received=list(design.columns)))
    _, _, cuts = _coefficient_blocks(fit)
    names = list(cut_names) if cut_names is not None else [f"cut {j + 1}" for j in range(cuts)]
    if not fit.proportional and len(names) != cuts:
        raise RiskvetError(problem("term_effects(cut_names=)", allowed=f"{cuts} names, one per cut", received=names))
    logit = fit.link == "logit"
    effect = "odds ratio" if logit else "change in the linear predictor"
    level = f"{100 * confidence:g}% Wald interval"
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    rows = _Rows(fit, design, frame)
    effect_rows, test_rows = [], []
    for term in design.terms:
        label = term_label(term)
        for words, held, c in _term_contrasts(rows, term):
            for j in range(cuts):
                est, se = linear_contrast(fit, c, cut=j)
                lo, hi = est - z * se, est + z * se
                values = (np.exp(est), np.exp(lo), np.exp(hi)) if logit else (est, lo, hi)
                effect_rows.append(dict(zip((*EFFECT_COLUMNS, effect, f"lower ({level})", f"upper ({level})"),
                                            (label, words, held, "" if fit.proportional else names[j], *values))))
        stat, df, p = joint_wald_test(fit, term.columns)
        test_rows.append(dict(zip(TEST_COLUMNS, (label, df, stat, df, p))))
    header = [*EFFECT_COLUMNS, effect, f"lower ({level})", f"upper ({level})"]
    effects = pd.DataFrame(effect_rows, columns=header)
    if fit.proportional:
        effects = effects.drop(columns="cut")
    return TermEffects(effects=effects, tests=pd.DataFrame(test_rows, columns=list(TEST_COLUMNS)), effect_name=effect, confidence=confidence)
