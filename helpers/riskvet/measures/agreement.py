"""Agreement between raters: intraclass correlation, kappa, Bland–Altman.

A validation study asks two questions of its raters.  Do they agree on the
predictors they record (an intraclass correlation for measurements, a kappa
for categories)?  And do their readings lead to the same predicted risk and
the same decision at a risk threshold (:func:`decision_agreement`)?

Every function returns a frozen result with ``to_dict()`` (JSON-ready) and
``to_frame()`` (a tidy table).
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import DataError, RiskvetWarning, StudyError, problem
from ._checks import _fields_dict, _frozen

__all__ = [
    "ICC_FORMS",
    "ICCResult",
    "ICCTable",
    "icc",
    "icc_table",
    "KappaResult",
    "kappa",
    "kappa_from_table",
    "PREVALENCE_LIMIT",
    "UNINFORMATIVE_REASONS",
    "AgreementIndices",
    "agreement_indices",
    "agreement_statistics",
    "BlandAltmanResult",
    "bland_altman",
    "DecisionAgreement",
    "decision_agreement",
]

#: The six Shrout–Fleiss forms, with their model and McGraw–Wong names.
ICC_FORMS: dict[str, str] = {
    "1,1": "one-way random, single rating",
    "2,1": "two-way random, absolute agreement, single rating (McGraw-Wong ICC(A,1))",
    "3,1": "two-way mixed, consistency, single rating (McGraw-Wong ICC(C,1))",
    "1,k": "one-way random, mean of k ratings",
    "2,k": "two-way random, absolute agreement, mean of k ratings (McGraw-Wong ICC(A,k))",
    "3,k": "two-way mixed, consistency, mean of k ratings (McGraw-Wong ICC(C,k))",
}


# --------------------------------------------------------------------------
# shared input checks
# --------------------------------------------------------------------------

def _check_confidence(where: str, confidence: Any) -> float:
    if isinstance(confidence, bool) or not isinstance(confidence, (int, float, np.floating)) or not 0 < float(confidence) < 1:
        raise StudyError(problem(f"{where}(confidence)", allowed="a number strictly between 0 and 1", received=confidence))
    return float(confidence)


def _missing_labels(values: pd.Series) -> list[Any]:
    return [lab for lab, miss in zip(values.index, values.isna()) if miss]


def _as_series(where: str, name: str, values: Any) -> pd.Series:
    if isinstance(values, pd.DataFrame):
        raise DataError(problem(f"{where}({name})", allowed="a one-dimensional sequence (list, array or Series)", received=f"a DataFrame with columns {list(values.columns)}"))
    if isinstance(values, pd.Series):
        series = values
    else:
        arr = np.asarray(values, dtype=object)
        if arr.ndim != 1:
            raise DataError(problem(f"{where}({name})", allowed="a one-dimensional sequence", received=f"an array of shape {arr.shape}"))
        series = pd.Series(list(arr), dtype=object)
    return series


def _paired(where: str, a: Any, b: Any, names: tuple[str, str] = ("a", "b")) -> tuple[pd.Series, pd.Series]:
    sa = _as_series(where, names[0], a)
    sb = _as_series(where, names[1], b)
    if len(sa) != len(sb):
        raise DataError(problem(f"{where}({names[0]}, {names[1]})", allowed="two sequences of the same length (one pair per subject)", received=f"lengths {len(sa)} and {len(sb)}"))
    for nm, s in zip(names, (sa, sb)):
        miss = _missing_labels(s)
        if miss:
            shown = miss[:10]
            more = f" and {len(miss) - 10} more" if len(miss) > 10 else ""
            raise DataError(problem(f"{where}({nm})", allowed="no missing values (drop incomplete pairs first)", received=f"missing at rows {shown}{more}"))
    return sa.reset_index(drop=True), sb.reset_index(drop=True)


def _numeric(where: str, name: str, s: pd.Series) -> np.ndarray:
    try:
        x = pd.to_numeric(s, errors="raise").to_numpy(dtype=float)
    except (TypeError, ValueError):
        bad = [v for v in s.tolist() if not isinstance(v, (int, float, np.number)) or isinstance(v, bool)][:5]
        raise DataError(problem(f"{where}({name})", allowed="numbers", received=f"values such as {bad}")) from None
    if not np.all(np.isfinite(x)):
        rows = np.flatnonzero(~np.isfinite(x))[:10].tolist()
        raise DataError(problem(f"{where}({name})", allowed="finite numbers", received=f"infinite values at positions {rows}"))
    return x


class _Result:
    """``to_dict`` shared by the result classes below."""

    def to_dict(self) -> dict[str, Any]:
        """Return the fields as JSON-ready plain values."""
        return _fields_dict(self)


# --------------------------------------------------------------------------
# intraclass correlation
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class _MeanSquares:
    n: int
    k: int
    subjects: float
    raters: float
    residual: float
    within: float


def _ratings_matrix(ratings: Any) -> np.ndarray:
    where = "icc(ratings)"
    if isinstance(ratings, pd.DataFrame):
        frame = ratings
    else:
        arr = np.asarray(ratings, dtype=object)
        if arr.ndim != 2:
            raise DataError(problem(where, allowed="a table of n subjects (rows) by k raters (columns)", received=f"an array of shape {arr.shape}"))
        frame = pd.DataFrame(arr)
    n, k = frame.shape
    if n < 2 or k < 2:
        raise DataError(problem(where, allowed="at least 2 subjects (rows) and 2 raters (columns)", received=f"{n} rows by {k} columns"))
    miss = frame.isna().any(axis=1)
    if miss.any():
        rows = list(frame.index[miss.to_numpy()])
        shown = rows[:10]
        more = f" and {len(rows) - 10} more" if len(rows) > 10 else ""
        raise DataError(problem(where, allowed="complete ratings (every rater rates every subject)", received=f"missing values in rows {shown}{more}"))
    try:
        x = frame.apply(pd.to_numeric, errors="raise").to_numpy(dtype=float)
    except (TypeError, ValueError):
        raise DataError(problem(where, allowed="numeric ratings", received=f"columns of types {[str(t) for t in frame.dtypes]}")) from None
    if not np.all(np.isfinite(x)):
        raise DataError(problem(where, allowed="finite ratings", received="infinite values"))
    return x


def _mean_squares(x: np.ndarray) -> _MeanSquares:
    n, k = x.shape
    grand = x.mean()
    ss_subjects = k * float(np.sum((x.mean(axis=1) - grand) ** 2))
    ss_raters = n * float(np.sum((x.mean(axis=0) - grand) ** 2))
    ss_total = float(np.sum((x - grand) ** 2))
    # Rounding can leave a tiny negative residual sum of squares.
    ss_residual = max(ss_total - ss_subjects - ss_raters, 0.0)
    if ss_total <= 0:
        raise DataError(problem("icc(ratings)", allowed="ratings that vary", received="every rating equal"))
    return _MeanSquares(
        n=n,
        k=k,
        subjects=ss_subjects / (n - 1),
        raters=ss_raters / (k - 1),
        residual=ss_residual / ((n - 1) * (k - 1)),
        within=(ss_raters + ss_residual) / (n * (k - 1)),
    )


@dataclass(frozen=True)
class ICCResult(_Result):
    """One intraclass correlation with its F test and confidence interval.

    Attributes
    ----------
    form : str
        Shrout–Fleiss form: ``"1,1"``, ``"2,1"``, ``"3,1"``, ``"1,k"``, ``"2,k"`` or ``"3,k"``.
    description : str
        The model and the unit (single rating or mean of k ratings) in words.
    value : float
        The estimate.
    lower, upper : float
        Confidence limits (exact F-based for forms 1 and 3, Satterthwaite-type
        approximation for form 2).
    confidence : float
        Confidence level of the interval.
    f_statistic : float
        F statistic for the hypothesis that the ICC is 0.
    df1, df2 : float
        Its degrees of freedom.
    p_value : float
        One-sided p value of that F test (upper tail).
    ms_subjects, ms_raters, ms_residual, ms_within : float
        ANOVA mean squares: between subjects (rows), between raters (columns),
        residual of the two-way model, and within subjects of the one-way model.
    n, k : int
        Subjects and raters.
    """

    form: str
    description: str
    value: float
    lower: float
    upper: float
    confidence: float
    f_statistic: float
    df1: float
    df2: float
    p_value: float
    ms_subjects: float
    ms_raters: float
    ms_residual: float
    ms_within: float
    n: int
    k: int

    def to_frame(self) -> pd.DataFrame:
        """Return a one-row table of the estimate, interval and test."""
        return pd.DataFrame([self.to_dict()])


def _ratio_to_icc(f: float, k: int) -> float:
    """(F − 1)/(F + k − 1), the ICC implied by a variance ratio F; 1 when F is infinite."""
    if math.isinf(f):
        return 1.0
    return (f - 1.0) / (f + k - 1.0)


def _ratio_to_icc_mean(f: float) -> float:
    """1 − 1/F, the ICC of a mean of k ratings implied by F."""
    if math.isinf(f):
        return 1.0
    return 1.0 - 1.0 / f


def _icc_from(ms: _MeanSquares, form: str, confidence: float) -> ICCResult:
    n, k = ms.n, ms.k
    alpha = 1.0 - confidence
    msr, msc, mse, msw = ms.subjects, ms.raters, ms.residual, ms.within
    model, unit = form.split(",")
    with np.errstate(divide="ignore", invalid="ignore"):
        if model == "1":
            df1, df2 = float(n - 1), float(n * (k - 1))
            f = msr / msw if msw > 0 else math.inf
        else:
            df1, df2 = float(n - 1), float((n - 1) * (k - 1))
            f = msr / mse if mse > 0 else math.inf
        p = float(stats.f.sf(f, df1, df2)) if math.isfinite(f) else 0.0

        if model in ("1", "3"):
            err = msw if model == "1" else mse
            value = (msr - err) / (msr + (k - 1) * err) if unit == "1" else (msr - err) / msr
            f_lo = f / stats.f.ppf(1 - alpha / 2, df1, df2)
            f_hi = f * stats.f.ppf(1 - alpha / 2, df2, df1)
            if unit == "1":
                lower, upper = _ratio_to_icc(f_lo, k), _ratio_to_icc(f_hi, k)
            else:
                lower, upper = _ratio_to_icc_mean(f_lo), _ratio_to_icc_mean(f_hi)
        else:
            single = (msr - mse) / (msr + (k - 1) * mse + k * (msc - mse) / n)
            value = single if unit == "1" else (msr - mse) / (msr + (msc - mse) / n)
            if mse == 0:
                lower = upper = 1.0
            else:
                # Satterthwaite degrees of freedom for the denominator
                # (Shrout & Fleiss 1979; McGraw & Wong 1996).
                fj = msc / mse
                a_coef = k * single
                b_coef = n * (1 + (k - 1) * single) - k * single
                v = (k - 1) * (n - 1) * (a_coef * fj + b_coef) ** 2 / ((n - 1) * (a_coef * fj) ** 2 + b_coef**2)
                f_star = stats.f.ppf(1 - alpha / 2, n - 1, v)
                f_star_inv = stats.f.ppf(1 - alpha / 2, v, n - 1)
                lower = n * (msr - f_star * mse) / (f_star * (k * msc + (k * n - k - n) * mse) + n * msr)
                upper = n * (f_star_inv * msr - mse) / (k * msc + (k * n - k - n) * mse + n * f_star_inv * msr)
                if unit == "k":
                    # Spearman–Brown step-up of the single-rating limits.
                    lower = k * lower / (1 + (k - 1) * lower)
                    upper = k * upper / (1 + (k - 1) * upper)
    return ICCResult(
        form=form,
        description=ICC_FORMS[form],
        value=float(value),
        lower=float(lower),
        upper=float(upper),
        confidence=confidence,
        f_statistic=float(f),
        df1=df1,
        df2=df2,
        p_value=p,
        ms_subjects=float(msr),
        ms_raters=float(msc),
        ms_residual=float(mse),
        ms_within=float(msw),
        n=n,
        k=k,
    )


def icc(ratings: Any, *, form: Literal["1,1", "2,1", "3,1", "1,k", "2,k", "3,k"], confidence: float = 0.95) -> ICCResult:
    """Intraclass correlation of one Shrout–Fleiss form.

    Parameters
    ----------
    ratings : DataFrame or array_like, shape (n, k)
        One row per subject, one column per rater; complete (no missing values).
    form : {"1,1", "2,1", "3,1", "1,k", "2,k", "3,k"}
        Model and unit.  1: one-way random (raters differ per subject);
        2: two-way random, absolute agreement (the same raters, seen as a
        sample of raters); 3: two-way mixed, consistency (these raters only).
        ``",1"``: reliability of a single rating; ``",k"``: of the mean of the
        k ratings.
    confidence : float, default 0.95
        Confidence level of the interval.

    Returns
    -------
    ICCResult

    Raises
    ------
    DataError
        Missing, non-numeric or constant ratings, fewer than 2 rows or columns;
        the message names the rows with missing values.
    StudyError
        Unknown ``form`` or a confidence outside (0, 1).

    Notes
    -----
    With mean squares between subjects (BMS, n − 1 df), between raters
    (JMS, k − 1 df), residual (EMS, (n − 1)(k − 1) df) and within subjects
    (WMS = (SS_raters + SS_residual)/(n(k − 1))):

    * ICC(1,1) = (BMS − WMS)/(BMS + (k − 1)WMS); ICC(1,k) = (BMS − WMS)/BMS
    * ICC(2,1) = (BMS − EMS)/(BMS + (k − 1)EMS + k(JMS − EMS)/n);
      ICC(2,k) = (BMS − EMS)/(BMS + (JMS − EMS)/n)
    * ICC(3,1) = (BMS − EMS)/(BMS + (k − 1)EMS); ICC(3,k) = (BMS − EMS)/BMS

    The test of ICC = 0 is F = BMS/WMS on (n − 1, n(k − 1)) df for form 1
    and F = BMS/EMS on (n − 1, (n − 1)(k − 1)) df for forms 2 and 3.
    Intervals for forms 1 and 3 are exact: with F_L = F/F_{1−α/2}(df1, df2)
    and F_U = F·F_{1−α/2}(df2, df1), the limits are (F_L − 1)/(F_L + k − 1)
    and (F_U − 1)/(F_U + k − 1) for a single rating, 1 − 1/F_L and
    1 − 1/F_U for the mean.  For form 2 the interval uses Satterthwaite's
    approximate degrees of freedom ν for a linear combination of JMS and EMS
    (Shrout & Fleiss 1979; McGraw & Wong 1996), and the
    mean-of-k limits are the single-rating limits stepped up by
    Spearman–Brown, kL/(1 + (k − 1)L).

    References
    ----------
    Shrout PE, Fleiss JL. Intraclass correlations: uses in assessing rater
    reliability. Psychological Bulletin 1979; 86(2): 420–428.

    McGraw KO, Wong SP. Forming inferences about some intraclass correlation
    coefficients. Psychological Methods 1996; 1(1): 30–46.

    Examples
    --------
    The 6 targets × 4 judges of Shrout & Fleiss (1979), Table 2:

    >>> x = [[9, 2, 5, 8], [6, 1, 3, 2], [8, 4, 6, 8],
    ...      [7, 1, 2, 6], [10, 5, 6, 9], [6, 2, 4, 7]]
    >>> round(icc(x, form="3,1").value, 2)
    0.71
    """
    if form not in ICC_FORMS:
        raise StudyError(problem("icc(form)", allowed=f"one of {list(ICC_FORMS)}", received=form))
    confidence = _check_confidence("icc", confidence)
    return _icc_from(_mean_squares(_ratings_matrix(ratings)), form, confidence)


@dataclass(frozen=True)
class ICCTable(_Result):
    """All six intraclass correlations of one ratings table.

    Attributes
    ----------
    results : tuple of ICCResult
        In the order ``"1,1", "2,1", "3,1", "1,k", "2,k", "3,k"``.
    n, k : int
        Subjects and raters.
    confidence : float
        Confidence level of the intervals.
    """

    results: tuple[ICCResult, ...]
    n: int
    k: int
    confidence: float

    def __getitem__(self, form: str) -> ICCResult:
        for r in self.results:
            if r.form == form:
                return r
        raise StudyError(problem("ICCTable[form]", allowed=f"one of {list(ICC_FORMS)}", received=form))

    def to_frame(self) -> pd.DataFrame:
        """Return one row per form: estimate, interval, F test, mean squares."""
        return pd.DataFrame([r.to_dict() for r in self.results])


def icc_table(ratings: Any, *, confidence: float = 0.95) -> ICCTable:
    """All six Shrout–Fleiss intraclass correlations at once.

    Parameters
    ----------
    ratings : DataFrame or array_like, shape (n, k)
        One row per subject, one column per rater; complete.
    confidence : float, default 0.95
        Confidence level of the intervals.

    Returns
    -------
    ICCTable

    Notes
    -----
    Each row is :func:`icc` for one form; the formulas are given there.

    References
    ----------
    Shrout PE, Fleiss JL. Intraclass correlations: uses in assessing rater
    reliability. Psychological Bulletin 1979; 86(2): 420–428.

    McGraw KO, Wong SP. Forming inferences about some intraclass correlation
    coefficients. Psychological Methods 1996; 1(1): 30–46.
    """
    confidence = _check_confidence("icc_table", confidence)
    ms = _mean_squares(_ratings_matrix(ratings))
    return ICCTable(results=tuple(_icc_from(ms, f, confidence) for f in ICC_FORMS), n=ms.n, k=ms.k, confidence=confidence)


# --------------------------------------------------------------------------
# Cohen's kappa
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class KappaResult(_Result):
    """Cohen's kappa, unweighted or weighted, with its standard errors.

    Attributes
    ----------
    weights : str or None
        ``None`` (unweighted), ``"linear"`` or ``"quadratic"``.
    value : float
        Kappa.  NaN when chance agreement is 1 (both raters used one
        category), with a warning recorded in ``warnings``.
    se : float
        Large-sample standard error when kappa is not 0 (used for the interval).
    se_null : float
        Standard error under the hypothesis kappa = 0 (used for the z test).
    lower, upper : float
        Wald confidence limits, value ± z·se.
    confidence : float
        Confidence level.
    z : float
        value / se_null.
    p_value : float
        Two-sided p value of the z test.
    observed_agreement, expected_agreement : float
        Weighted proportions of agreement observed and expected by chance.
    n : int
        Pairs of ratings.
    levels : tuple
        Ordered categories (rows and columns of ``table``).
    table : tuple of tuple of int
        Counts; rows are the first rater's categories, columns the second's.
    warnings : tuple of str
        Statistical trouble met.
    """

    weights: str | None
    value: float
    se: float
    se_null: float
    lower: float
    upper: float
    confidence: float
    z: float
    p_value: float
    observed_agreement: float
    expected_agreement: float
    n: int
    levels: tuple[Any, ...]
    table: tuple[tuple[int, ...], ...]
    warnings: tuple[str, ...] = ()

    def agreement_table(self) -> pd.DataFrame:
        """Return the counts as a labelled cross-table (first rater in rows)."""
        idx = pd.Index(list(self.levels), name="rater a")
        cols = pd.Index(list(self.levels), name="rater b")
        return pd.DataFrame(np.array(self.table, dtype=int), index=idx, columns=cols)

    def to_frame(self) -> pd.DataFrame:
        """Return a one-row table of the statistics (the counts are in :meth:`agreement_table`)."""
        d = self.to_dict()
        d.pop("table")
        d["levels"] = ", ".join(str(v) for v in self.levels)
        d["warnings"] = "; ".join(self.warnings)
        return pd.DataFrame([d])


def _weight_matrix(weights: str | None, c: int) -> np.ndarray:
    i = np.arange(c)
    if weights is None:
        return np.eye(c)
    dist = np.abs(i[:, None] - i[None, :]) / (c - 1)
    return 1.0 - dist if weights == "linear" else 1.0 - dist**2


def _plain(v: Any) -> Any:
    return v.item() if isinstance(v, np.generic) else v


def kappa(
    a: Any,
    b: Any,
    *,
    weights: Literal["linear", "quadratic"] | None = None,
    confidence: float = 0.95,
    levels: Any = None,
) -> KappaResult:
    """Cohen's kappa for two raters, unweighted or weighted.

    Parameters
    ----------
    a, b : array_like or Series
        The two raters' categories, one pair per subject, no missing values.
    weights : {None, "linear", "quadratic"}, default None
        Agreement weights for ordered categories; None counts only exact agreement.
    confidence : float, default 0.95
        Confidence level of the interval.
    levels : sequence, optional
        The categories in their order (lowest first).  Needed when a category
        was used by neither rater or when the order is not the sorted order.
        Default: the sorted union of the observed values.

    Returns
    -------
    KappaResult

    Raises
    ------
    DataError
        Different lengths, missing values, a value not in ``levels``, values
        that cannot be sorted, fewer than 2 levels.
    StudyError
        Unknown ``weights`` or a confidence outside (0, 1).

    Notes
    -----
    With cell proportions p_ij, margins p_i. and p_.j and agreement weights
    w_ij (identity; linear 1 − |i − j|/(c − 1); quadratic
    1 − (i − j)²/(c − 1)²):

    p_o = Σ w_ij p_ij,  p_e = Σ w_ij p_i. p_.j,  κ = (p_o − p_e)/(1 − p_e).

    With w̄_i. = Σ_j p_.j w_ij and w̄_.j = Σ_i p_i. w_ij, the large-sample
    variances of Fleiss, Cohen & Everitt (1969) are

    var(κ) = [Σ p_ij (w_ij − (w̄_i. + w̄_.j)(1 − κ))² − (κ − p_e(1 − κ))²] / (n(1 − p_e)²)

    var₀(κ) = [Σ p_i. p_.j (w_ij − (w̄_i. + w̄_.j))² − p_e²] / (n(1 − p_e)²)

    The interval is κ ± z_{1−α/2} √var(κ); the test of κ = 0 is
    z = κ/√var₀(κ).  Unweighted kappa is the case w = identity.

    References
    ----------
    Cohen J. A coefficient of agreement for nominal scales. Educational and
    Psychological Measurement 1960; 20(1): 37–46.

    Cohen J. Weighted kappa: nominal scale agreement with provision for scaled
    disagreement or partial credit. Psychological Bulletin 1968; 70(4): 213–220.

    Fleiss JL, Cohen J, Everitt BS. Large sample standard errors of kappa and
    weighted kappa. Psychological Bulletin 1969; 72(5): 323–327.
    """
    if weights not in (None, "linear", "quadratic"):
        raise StudyError(problem("kappa(weights)", allowed="None, 'linear' or 'quadratic'", received=weights))
    confidence = _check_confidence("kappa", confidence)
    sa, sb = _paired("kappa", a, b)
    n = len(sa)
    if n < 1:
        raise DataError(problem("kappa(a, b)", allowed="at least one pair of ratings", received="no pairs"))
    va = [_plain(v) for v in sa.tolist()]
    vb = [_plain(v) for v in sb.tolist()]
    if levels is None:
        try:
            lv = sorted(set(va) | set(vb))
        except TypeError:
            raise DataError(problem("kappa(a, b)", allowed="categories that can be sorted, or an explicit levels=", received=f"mixed values {sorted(map(repr, set(va) | set(vb)))[:10]}")) from None
    else:
        lv = [_plain(v) for v in list(levels)]
        if len(set(lv)) != len(lv):
            raise DataError(problem("kappa(levels)", allowed="each category once", received=lv))
        known = set(lv)
        for nm, vals in (("a", va), ("b", vb)):
            unknown = sorted({repr(v) for v in vals if v not in known})
            if unknown:
                raise DataError(problem(f"kappa({nm})", allowed=f"values among levels {lv}", received=f"other values {unknown[:10]}"))
    c = len(lv)
    if c < 2:
        raise DataError(problem("kappa(levels)", allowed="at least 2 categories (pass levels= to name an unused one)", received=lv))
    pos = {v: i for i, v in enumerate(lv)}
    counts = np.zeros((c, c), dtype=int)
    np.add.at(counts, (np.array([pos[v] for v in va]), np.array([pos[v] for v in vb])), 1)
    return _kappa_result(counts, weights=weights, confidence=confidence, levels=tuple(lv))


def _kappa_statistics(counts: np.ndarray, w: np.ndarray, confidence: float) -> dict[str, np.ndarray]:
    """Kappa, its standard errors, interval and test of a stack of tables (N × K × K; formulas in :func:`kappa`).

    No checks, no warnings: NaN where chance agreement is 1.
    """
    counts = np.asarray(counts, dtype=float)
    n = counts.sum(axis=(1, 2))
    p = counts / n[:, None, None]
    row = p.sum(axis=2)
    col = p.sum(axis=1)
    expected = row[:, :, None] * col[:, None, :]
    po = np.einsum("ij,nij->n", w, p)
    pe = np.einsum("ij,nij->n", w, expected)
    defined = pe < 1 - 1e-12
    safe = np.where(defined, pe, 0.0)
    k = np.where(defined, (po - safe) / (1 - safe), np.nan)
    wbar_row = np.einsum("ij,nj->ni", w, col)  # w̄_i. = Σ_j p_.j w_ij
    wbar_col = np.einsum("ni,ij->nj", row, w)  # w̄_.j = Σ_i p_i. w_ij
    spread = wbar_row[:, :, None] + wbar_col[:, None, :]
    kk = k[:, None, None]
    scale = n * (1 - safe) ** 2
    var = (np.sum(p * (w - spread * (1 - kk)) ** 2, axis=(1, 2)) - (k - safe * (1 - k)) ** 2) / scale
    var0 = (np.sum(expected * (w - spread) ** 2, axis=(1, 2)) - safe**2) / scale
    se = np.where(defined, np.sqrt(np.maximum(var, 0.0)), np.nan)
    se0 = np.where(defined, np.sqrt(np.maximum(var0, 0.0)), np.nan)
    zq = float(stats.norm.ppf(0.5 + confidence / 2))
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(se0 > 0, k / se0, np.nan)
    return {"value": k, "se": se, "se_null": se0, "lower": k - zq * se, "upper": k + zq * se, "z": z,
            "p_value": 2 * stats.norm.sf(np.abs(z)), "observed_agreement": po, "expected_agreement": pe}


def _kappa_result(counts: np.ndarray, *, weights: str | None, confidence: float, levels: tuple[Any, ...]) -> KappaResult:
    s = {key: float(v[0]) for key, v in _kappa_statistics(counts[None], _weight_matrix(weights, counts.shape[0]), confidence).items()}
    notes: list[str] = []
    if not math.isfinite(s["value"]):
        msg = "kappa: chance agreement is 1 (both raters used a single category); kappa is undefined"
        warnings.warn(msg, RiskvetWarning, stacklevel=3)
        notes.append(msg)
    return KappaResult(
        weights=weights, value=float(s["value"]), se=float(s["se"]), se_null=float(s["se_null"]),
        lower=float(s["lower"]), upper=float(s["upper"]), confidence=confidence, z=float(s["z"]),
        p_value=float(s["p_value"]), observed_agreement=s["observed_agreement"],
        expected_agreement=s["expected_agreement"], n=int(counts.sum()), levels=levels,
        table=tuple(tuple(int(v) for v in r) for r in counts), warnings=tuple(notes),
    )


def _count_table(where: str, table: Any) -> np.ndarray:
    counts = np.asarray(table)
    if counts.ndim != 2 or counts.shape[0] != counts.shape[1] or counts.shape[0] < 2:
        raise DataError(problem(f"{where}(table)", allowed="a square table of counts with at least 2 categories", received=f"shape {counts.shape}"))
    try:
        numbers = counts.astype(float)
    except (TypeError, ValueError):
        raise DataError(problem(f"{where}(table)", allowed="whole counts >= 0", received=counts.tolist())) from None
    if not np.all(np.isfinite(numbers)) or np.any(numbers < 0) or np.any(numbers % 1) or numbers.sum() < 1:
        raise DataError(problem(f"{where}(table)", allowed="whole counts >= 0, at least one pair", received=counts.tolist()))
    return numbers.astype(np.int64)


def kappa_from_table(
    table: Any,
    *,
    weights: Literal["linear", "quadratic"] | None = None,
    confidence: float = 0.95,
    levels: Any = None,
) -> KappaResult:
    """Cohen's kappa from a K × K table of counts (first rater in rows).

    The same statistic as :func:`kappa` on the pairs the table counts; see
    there for the formulas and references.

    Parameters
    ----------
    table : K × K counts
        Whole counts >= 0, K >= 2.
    weights : {None, "linear", "quadratic"}, default None
    confidence : float, default 0.95
    levels : sequence of K labels, optional
        Default 0..K−1.

    Returns
    -------
    KappaResult

    Raises
    ------
    DataError
        Not a square table of whole counts, or no pairs; ``levels`` of the wrong length.
    StudyError
        Unknown ``weights`` or a confidence outside (0, 1).
    """
    if weights not in (None, "linear", "quadratic"):
        raise StudyError(problem("kappa_from_table(weights)", allowed="None, 'linear' or 'quadratic'", received=weights))
    confidence = _check_confidence("kappa_from_table", confidence)
    counts = _count_table("kappa_from_table", table)
    lv = tuple(range(counts.shape[0])) if levels is None else tuple(_plain(v) for v in levels)
    if len(lv) != counts.shape[0] or len(set(lv)) != len(lv):
        raise DataError(problem("kappa_from_table(levels)", allowed=f"{counts.shape[0]} distinct labels", received=list(lv)))
    return _kappa_result(counts, weights=weights, confidence=confidence, levels=lv)


# --------------------------------------------------------------------------
# kappa's paradoxes: prevalence- and bias-adjusted kappa, specific agreement
# --------------------------------------------------------------------------

#: Kappa is called uninformative when one category holds at least this share of all readings.
PREVALENCE_LIMIT = 0.95


@dataclass(frozen=True)
class AgreementIndices(_Result):
    """Indices that read a raters' cross-table where kappa alone misleads.

    Attributes
    ----------
    n : int
        Pairs of ratings.
    categories : int
        K, the number of categories.
    observed_agreement : float
        Share of pairs on the diagonal, p_o.
    expected_agreement : float
        Chance agreement of unweighted kappa, p_e.
    pabak : float
        Prevalence- and bias-adjusted kappa, (K·p_o − 1)/(K − 1).
    prevalence_index : float
        2 × 2 tables: (n₁₁ − n₀₀)/n, both raters positive minus both negative
        (NaN for larger tables).
    bias_index : float
        2 × 2 tables: (n₁₀ − n₀₁)/n, the first rater's share positive minus
        the second's (NaN for larger tables).
    positive_agreement, negative_agreement : float
        2 × 2 tables: 2n₁₁/(2n₁₁ + n₀₁ + n₁₀) and 2n₀₀/(2n₀₀ + n₀₁ + n₁₀),
        NaN when their denominator is 0 or the table is larger.
    largest_share : float
        Share of all 2n readings (both raters) in the most used category.
    largest_category : int
        Its position (0 = first level).
    informative : bool
        False when kappa cannot be read as agreement beyond chance (``reason``).
    reason_code : int
        0 when informative, else the key of :data:`UNINFORMATIVE_REASONS`.
    reason : str
        Why kappa is uninformative, in words; empty when it is informative.
    """

    n: int
    categories: int
    observed_agreement: float
    expected_agreement: float
    pabak: float
    prevalence_index: float
    bias_index: float
    positive_agreement: float
    negative_agreement: float
    largest_share: float
    largest_category: int
    informative: bool
    reason_code: int
    reason: str

    def to_frame(self) -> pd.DataFrame:
        """One row per index: index, value."""
        rows = [("observed agreement", self.observed_agreement), ("prevalence- and bias-adjusted kappa", self.pabak)]
        if self.categories == 2:
            rows += [("positive agreement", self.positive_agreement), ("negative agreement", self.negative_agreement),
                     ("prevalence index", self.prevalence_index), ("bias index", self.bias_index)]
        return pd.DataFrame(rows, columns=["index", "value"])


#: Why kappa is uninformative, by code (0: informative).
UNINFORMATIVE_REASONS: dict[int, str] = {
    1: (f"one category holds at least {PREVALENCE_LIMIT:.0%} of all readings, so the agreement expected by chance is close to 1 "
        "and kappa moves a long way with the readings of a few people (the prevalence effect)"),
    2: ("one rater used a single category, so kappa is 0 or undefined whatever the other rater recorded, "
        "and its interval says nothing about agreement"),
}


def _uninformative_reason(counts: np.ndarray, share: float) -> int:
    if share >= PREVALENCE_LIMIT:
        return 1
    if (counts.sum(axis=1) > 0).sum() == 1 or (counts.sum(axis=0) > 0).sum() == 1:
        return 2
    return 0


def agreement_indices(table: Any) -> AgreementIndices:
    """Prevalence- and bias-adjusted kappa, specific agreement and whether kappa is informative.

    Parameters
    ----------
    table : K × K counts
        First rater in rows, second in columns, categories in their order; for
        a 2 × 2 table the second category is the positive one.

    Returns
    -------
    AgreementIndices

    Raises
    ------
    DataError
        Not a square table of whole counts >= 0, or no pairs.

    Notes
    -----
    With n pairs, K categories and p_o the share on the diagonal:

    PABAK = (K·p_o − 1)/(K − 1), kappa with chance agreement taken as 1/K
    (Brennan & Prediger 1981); for K = 2 it is 2p_o − 1, which Byrt, Bishop &
    Carlin (1993) call the prevalence- and bias-adjusted kappa.  With the
    2 × 2 cells n₀₀ (both negative), n₁₁ (both positive), n₁₀ (first rater
    positive only) and n₀₁ (second rater positive only), their prevalence
    index is (n₁₁ − n₀₀)/n and bias index (n₁₀ − n₀₁)/n.

    Specific agreement (Cicchetti & Feinstein 1990; de Vet et al. 2013):
    positive agreement 2n₁₁/(2n₁₁ + n₀₁ + n₁₀), the chance that one rater
    records positive given the other does; negative agreement
    2n₀₀/(2n₀₀ + n₀₁ + n₁₀).

    Kappa is called uninformative (a project rule, from the paradoxes
    Feinstein & Cicchetti 1990 describe) when one category holds at least
    :data:`PREVALENCE_LIMIT` of the 2n readings, so that the chance
    agreement p_e is close to 1 and kappa divides by 1 − p_e close to 0, or
    when a rater used a single category (kappa is then 0 or undefined, and
    its standard error near 0, whatever the other rater did).  The first that
    applies is the reason given.  (A chance agreement p_e of at least the
    limit needs such a category: p_e = Σ r_i c_i is at most the largest
    share of either rater.)

    References
    ----------
    Byrt T, Bishop J, Carlin JB. Bias, prevalence and kappa. Journal of
    Clinical Epidemiology 1993; 46(5): 423–429.

    Brennan RL, Prediger DJ. Coefficient kappa: some uses, misuses, and
    alternatives. Educational and Psychological Measurement 1981; 41(3): 687–699.

    Feinstein AR, Cicchetti DV. High agreement but low kappa: I. The problems
    of two paradoxes. Journal of Clinical Epidemiology 1990; 43(6): 543–549.

    Cicchetti DV, Feinstein AR. High agreement but low kappa: II. Resolving
    the paradoxes. Journal of Clinical Epidemiology 1990; 43(6): 551–558.

    de Vet HCW, Mokkink LB, Terwee CB, Hoekstra OS, Knol DL. Clinicians are
    right not to like Cohen's κ. BMJ 2013; 346: f2125.

    de Vet HCW, Dikmans RE, Eekhout I. Specific agreement on dichotomous
    outcomes can be calculated for more than two raters. Journal of Clinical
    Epidemiology 2017; 83: 85–89.
    """
    counts = _count_table("agreement_indices", table)
    v = {key: value[0] for key, value in _indices(counts[None]).items()}
    code = int(v["reason_code"])
    return AgreementIndices(
        n=int(counts.sum()), categories=counts.shape[0], observed_agreement=float(v["observed_agreement"]),
        expected_agreement=float(v["expected_agreement"]), pabak=float(v["pabak"]), prevalence_index=float(v["prevalence_index"]),
        bias_index=float(v["bias_index"]), positive_agreement=float(v["positive_agreement"]),
        negative_agreement=float(v["negative_agreement"]), largest_share=float(v["largest_share"]),
        largest_category=int(v["largest_category"]), informative=code == 0, reason_code=code,
        reason=UNINFORMATIVE_REASONS.get(code, ""),
    )


def _indices(counts: np.ndarray) -> dict[str, np.ndarray]:
    """The indices of :func:`agreement_indices` for a stack of tables (N × K × K), as arrays."""
    counts = np.asarray(counts, dtype=float)
    N, K = counts.shape[0], counts.shape[1]
    n = counts.sum(axis=(1, 2))
    rows, cols = counts.sum(axis=2), counts.sum(axis=1)
    po = np.trace(counts, axis1=1, axis2=2) / n
    pe = np.sum(rows * cols, axis=1) / n**2
    readings = rows + cols
    largest = np.argmax(readings, axis=1)
    share = readings.max(axis=1) / (2 * n)
    single = ((rows > 0).sum(axis=1) == 1) | ((cols > 0).sum(axis=1) == 1)
    nan = np.full(N, np.nan)
    out = {"observed_agreement": po, "expected_agreement": pe, "pabak": (K * po - 1) / (K - 1), "largest_share": share,
           "largest_category": largest, "reason_code": np.where(share >= PREVALENCE_LIMIT, 1, np.where(single, 2, 0)),
           "prevalence_index": nan, "bias_index": nan, "positive_agreement": nan, "negative_agreement": nan}
    if K == 2:
        both_no, both_yes = counts[:, 0, 0], counts[:, 1, 1]
        off = counts[:, 0, 1] + counts[:, 1, 0]
        with np.errstate(divide="ignore", invalid="ignore"):
            out.update(prevalence_index=(both_yes - both_no) / n, bias_index=(counts[:, 1, 0] - counts[:, 0, 1]) / n,
                       positive_agreement=np.where(2 * both_yes + off > 0, 2 * both_yes / (2 * both_yes + off), np.nan),
                       negative_agreement=np.where(2 * both_no + off > 0, 2 * both_no / (2 * both_no + off), np.nan))
    return out


def agreement_statistics(tables: Any, *, weighted: bool = False, confidence: float = 0.95) -> dict[str, np.ndarray]:
    """Kappa, PABAK and specific agreement of many cross-tables at once, in order of importance.

    Parameters
    ----------
    tables : N × K × K counts, or one K × K table
        First rater in rows; every table with at least one pair.
    weighted : bool, default False
        Also the quadratic-weighted kappa.
    confidence : float, default 0.95
        Confidence level of the Wald limits.

    Returns
    -------
    dict of str to ndarray (N,)
        ``uninformative_reason`` (0, or the key of
        :data:`UNINFORMATIVE_REASONS`), ``observed_agreement``, ``kappa``
        with ``kappa_lower`` and ``kappa_upper``, with ``weighted`` the same
        for ``weighted_kappa``, ``pabak``, and for 2 × 2 tables
        ``positive_agreement``, ``negative_agreement``, ``prevalence_index``
        and ``bias_index``; NaN where undefined.  The formulas are those of
        :func:`kappa` and :func:`agreement_indices`.

    Raises
    ------
    DataError
        Not a stack of square tables of whole counts >= 0, or a table without pairs.
    """
    confidence = _check_confidence("agreement_statistics", confidence)
    counts = np.asarray(tables)
    if counts.ndim == 2:
        counts = counts[None]
    if counts.ndim != 3 or counts.shape[1] != counts.shape[2] or counts.shape[1] < 2 or counts.shape[0] < 1:
        raise DataError(problem("agreement_statistics(tables)", allowed="square tables of counts (N × K × K, K >= 2)", received=f"shape {counts.shape}"))
    numbers = counts.astype(float)
    if not np.all(np.isfinite(numbers)) or np.any(numbers < 0) or np.any(numbers % 1) or np.any(numbers.sum(axis=(1, 2)) < 1):
        raise DataError(problem("agreement_statistics(tables)", allowed="whole counts >= 0, at least one pair per table", received="other values"))
    K = counts.shape[1]
    ind = _indices(numbers)
    k = _kappa_statistics(numbers, np.eye(K), confidence)
    out = {"uninformative_reason": ind["reason_code"].astype(float), "observed_agreement": ind["observed_agreement"],
           "kappa": k["value"], "kappa_lower": k["lower"], "kappa_upper": k["upper"]}
    if weighted:
        wk = _kappa_statistics(numbers, _weight_matrix("quadratic", K), confidence)
        out.update(weighted_kappa=wk["value"], weighted_kappa_lower=wk["lower"], weighted_kappa_upper=wk["upper"])
    out["pabak"] = ind["pabak"]
    if K == 2:
        out.update({name: ind[name] for name in ("positive_agreement", "negative_agreement", "prevalence_index", "bias_index")})
    return out


# --------------------------------------------------------------------------
# Bland–Altman
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class BlandAltmanResult(_Result):
    """Limits of agreement between two measurements of the same quantity.

    Attributes
    ----------
    n : int
        Pairs.
    means, differences : ndarray (read-only)
        Per pair, (a + b)/2 and a − b, for plotting.
    bias : float
        Mean difference a − b.
    sd : float
        Standard deviation of the differences (n − 1 denominator).
    lower, upper : float
        Limits of agreement, bias ∓ limits·sd.
    limits : float
        The multiplier of the SD (1.96 for 95% limits).
    bias_interval, lower_interval, upper_interval : tuple of float
        Confidence intervals of the bias and of each limit.
    confidence : float
        Confidence level of those intervals.
    interval_method : str
        ``"approximate"`` (SE √(3s²/n), t quantile) or ``"exact"`` (non-central t).
    slope, intercept : float
        Proportional bias: ordinary least-squares line of differences on means.
    slope_interval : tuple of float
        Its t-based confidence interval.
    slope_p_value : float
        Two-sided p value for slope = 0.
    """

    n: int
    means: np.ndarray
    differences: np.ndarray
    bias: float
    sd: float
    lower: float
    upper: float
    limits: float
    bias_interval: tuple[float, float]
    lower_interval: tuple[float, float]
    upper_interval: tuple[float, float]
    confidence: float
    interval_method: str
    slope: float
    intercept: float
    slope_interval: tuple[float, float]
    slope_p_value: float

    def to_frame(self) -> pd.DataFrame:
        """Return rows bias, lower limit, upper limit, proportional-bias slope with intervals."""
        rows = [
            ("bias", self.bias, *self.bias_interval),
            ("lower limit of agreement", self.lower, *self.lower_interval),
            ("upper limit of agreement", self.upper, *self.upper_interval),
            ("proportional bias slope", self.slope, *self.slope_interval),
        ]
        out = pd.DataFrame(rows, columns=["quantity", "estimate", "ci_lower", "ci_upper"])
        out["confidence"] = self.confidence
        out["n"] = self.n
        return out

    def points_frame(self) -> pd.DataFrame:
        """Return the per-pair means and differences as a table."""
        return pd.DataFrame({"mean": self.means, "difference": self.differences})


def bland_altman(
    a: Any,
    b: Any,
    *,
    confidence: float = 0.95,
    limits: float = 1.96,
    interval: Literal["approximate", "exact"] = "approximate",
) -> BlandAltmanResult:
    """Bland–Altman bias and limits of agreement of a − b.

    Parameters
    ----------
    a, b : array_like or Series
        Two measurements per subject (same units), no missing values; n ≥ 3.
    confidence : float, default 0.95
        Confidence level of the intervals for the bias and the limits.
    limits : float, default 1.96
        SD multiplier of the limits of agreement (1.96 for 95% limits; the
        1986 paper used 2).
    interval : {"approximate", "exact"}, default "approximate"
        Interval for each limit.  ``"approximate"``: limit ± t_{n−1}·√(3s²/n)
        as in Bland & Altman (1986).  ``"exact"``: from the non-central t
        distribution of the estimated normal quantile; exact under normality.

    Returns
    -------
    BlandAltmanResult

    Raises
    ------
    DataError
        Different lengths, missing or non-numeric values, fewer than 3 pairs.
    StudyError
        Bad ``confidence``, ``limits`` or ``interval``.

    Notes
    -----
    With differences d_i = a_i − b_i, mean d̄ and SD s, the limits are
    d̄ ∓ z·s (z = ``limits``).  The bias interval is d̄ ± t_{n−1,1−α/2}·s/√n.
    Approximate limit intervals: limit ± t_{n−1,1−α/2}·√(3s²/n), the
    published approximation to √(s²/n + z²s²/(2(n − 1))) for z ≈ 2.
    Exact limit intervals: √n(μ + zσ − d̄)/s follows a non-central t with
    n − 1 df and non-centrality z√n, so with its quantiles t_{α/2} and
    t_{1−α/2} the upper limit's interval is (d̄ + s·t_{α/2}/√n,
    d̄ + s·t_{1−α/2}/√n) and the lower limit's is its mirror image.
    Proportional bias is the least-squares slope of d on (a + b)/2
    (Bland & Altman 1999).

    References
    ----------
    Bland JM, Altman DG. Statistical methods for assessing agreement between
    two methods of clinical measurement. Lancet 1986; 327(8476): 307–310.

    Bland JM, Altman DG. Measuring agreement in method comparison studies.
    Statistical Methods in Medical Research 1999; 8(2): 135–160.
    """
    confidence = _check_confidence("bland_altman", confidence)
    if isinstance(limits, bool) or not isinstance(limits, (int, float, np.floating)) or not float(limits) > 0 or not math.isfinite(float(limits)):
        raise StudyError(problem("bland_altman(limits)", allowed="a positive SD multiplier such as 1.96", received=limits))
    if interval not in ("approximate", "exact"):
        raise StudyError(problem("bland_altman(interval)", allowed="'approximate' or 'exact'", received=interval))
    sa, sb = _paired("bland_altman", a, b)
    x = _numeric("bland_altman", "a", sa)
    y = _numeric("bland_altman", "b", sb)
    n = len(x)
    if n < 3:
        raise DataError(problem("bland_altman(a, b)", allowed="at least 3 pairs", received=f"{n} pairs"))
    z = float(limits)
    diff = x - y
    mean = (x + y) / 2
    bias = float(diff.mean())
    sd = float(diff.std(ddof=1))
    lo, hi = bias - z * sd, bias + z * sd
    alpha = 1 - confidence
    tq = float(stats.t.ppf(1 - alpha / 2, n - 1))
    half = tq * sd / math.sqrt(n)
    bias_ci = (bias - half, bias + half)
    if interval == "approximate":
        h = tq * math.sqrt(3 * sd**2 / n)
        lo_ci, hi_ci = (lo - h, lo + h), (hi - h, hi + h)
    else:
        nc = z * math.sqrt(n)
        q_lo = float(stats.nct.ppf(alpha / 2, n - 1, nc))
        q_hi = float(stats.nct.ppf(1 - alpha / 2, n - 1, nc))
        hi_ci = (bias + sd * q_lo / math.sqrt(n), bias + sd * q_hi / math.sqrt(n))
        lo_ci = (bias - sd * q_hi / math.sqrt(n), bias - sd * q_lo / math.sqrt(n))
    if np.ptp(mean) > 0:
        fit = stats.linregress(mean, diff)
        ts = float(stats.t.ppf(1 - alpha / 2, n - 2))
        slope, intercept = float(fit.slope), float(fit.intercept)
        slope_ci = (slope - ts * float(fit.stderr), slope + ts * float(fit.stderr))
        slope_p = float(fit.pvalue)
    else:
        slope = intercept = slope_p = math.nan
        slope_ci = (math.nan, math.nan)
    return BlandAltmanResult(
        n=n,
        means=_frozen(mean),
        differences=_frozen(diff),
        bias=bias,
        sd=sd,
        lower=float(lo),
        upper=float(hi),
        limits=z,
        bias_interval=tuple(map(float, bias_ci)),  # type: ignore[arg-type]
        lower_interval=tuple(map(float, lo_ci)),  # type: ignore[arg-type]
        upper_interval=tuple(map(float, hi_ci)),  # type: ignore[arg-type]
        confidence=confidence,
        interval_method=interval,
        slope=slope,
        intercept=intercept,
        slope_interval=tuple(map(float, slope_ci)),  # type: ignore[arg-type]
        slope_p_value=slope_p,
    )


# --------------------------------------------------------------------------
# agreement of predicted risks and decisions
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class DecisionAgreement(_Result):
    """Do two raters' readings give the same predicted risk and decision?

    Attributes
    ----------
    threshold : float
        Risk at or above which a patient is classed positive (acted on).
    n : int
        Patients.
    positive_a, positive_b : int
        Patients classed positive from each rater's readings.
    discordant : int
        Patients classed differently.
    decisions : KappaResult
        Unweighted kappa of the two decisions (levels 0 = below, 1 = at or above).
    risks : BlandAltmanResult
        Bland–Altman of the two predicted risks (a − b, risk scale).
    """

    threshold: float
    n: int
    positive_a: int
    positive_b: int
    discordant: int
    decisions: KappaResult
    risks: BlandAltmanResult

    def to_frame(self) -> pd.DataFrame:
        """Return rows for decision kappa, risk bias and both limits, with intervals."""
        ba = self.risks.to_frame().iloc[:3]
        rows = [("decision kappa", self.decisions.value, self.decisions.lower, self.decisions.upper)]
        rows += [(f"risk {q}", e, lo, hi) for q, e, lo, hi in ba[["quantity", "estimate", "ci_lower", "ci_upper"]].itertuples(index=False)]
        out = pd.DataFrame(rows, columns=["quantity", "estimate", "ci_lower", "ci_upper"])
        out["threshold"] = self.threshold
        out["n"] = self.n
        out["discordant"] = self.discordant
        return out


def decision_agreement(risk_a: Any, risk_b: Any, *, threshold: float, confidence: float = 0.95) -> DecisionAgreement:
    """Agreement of predicted risks and of the decisions they lead to.

    Parameters
    ----------
    risk_a, risk_b : array_like or Series
        Predicted risks (0 to 1) computed from each rater's readings of the
        same patients.
    threshold : float
        Decision threshold in (0, 1); risk ≥ threshold is positive.
    confidence : float, default 0.95
        Confidence level of all intervals.

    Returns
    -------
    DecisionAgreement

    Notes
    -----
    The decisions are compared by unweighted Cohen's kappa (:func:`kappa`,
    both levels always present) and the risks by :func:`bland_altman` with
    95% limits (1.96 SD) and the approximate limit intervals.

    References
    ----------
    Cohen J. A coefficient of agreement for nominal scales. Educational and
    Psychological Measurement 1960; 20(1): 37–46.

    Bland JM, Altman DG. Statistical methods for assessing agreement between
    two methods of clinical measurement. Lancet 1986; 327(8476): 307–310.
    """
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float, np.floating)) or not 0 < float(threshold) < 1:
        raise StudyError(problem("decision_agreement(threshold)", allowed="a risk strictly between 0 and 1", received=threshold))
    confidence = _check_confidence("decision_agreement", confidence)
    sa, sb = _paired("decision_agreement", risk_a, risk_b, names=("risk_a", "risk_b"))
    x = _numeric("decision_agreement", "risk_a", sa)
    y = _numeric("decision_agreement", "risk_b", sb)
    for nm, v in (("risk_a", x), ("risk_b", y)):
        if np.any((v < 0) | (v > 1)):
            bad = v[(v < 0) | (v > 1)][:5].tolist()
            raise DataError(problem(f"decision_agreement({nm})", allowed="risks between 0 and 1", received=f"values such as {bad}"))
    da = (x >= threshold).astype(int)
    db = (y >= threshold).astype(int)
    if len(da) and np.all(da == da[0]) and np.all(db == da[0]):
        # Kappa's own warning speaks of raters' categories; say what it means for a decision.
        msg = (f"decision_agreement: at threshold {float(threshold):g} every risk from both raters is on the same side "
               f"({'at or above' if da[0] else 'below'}); kappa on the decisions is undefined")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RiskvetWarning)
            decisions = kappa(da, db, levels=[0, 1], confidence=confidence)
        warnings.warn(msg, RiskvetWarning, stacklevel=2)
        decisions = dataclasses.replace(decisions, warnings=(msg,))
    else:
        decisions = kappa(da, db, levels=[0, 1], confidence=confidence)
    return DecisionAgreement(
        threshold=float(threshold),
        n=len(x),
        positive_a=int(da.sum()),
        positive_b=int(db.sum()),
        discordant=int(np.sum(da != db)),
        decisions=decisions,
        risks=bland_altman(x, y, confidence=confidence),
    )
