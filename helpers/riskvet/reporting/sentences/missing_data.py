"""Sentences of the missing-data section: what was missing, how it was handled, what that assumes.

:func:`missing_data_texts` reads a
:class:`~riskvet.reporting.missingness.MissingDataReport` and states its
published numbers only (a count the report suppresses is never stated, and
neither is anything worked out from it); it computes no statistic beyond
the rule of thumb for the number of imputations
(:func:`~riskvet.imputation.procedure.imputations_needed`).

References
----------
White IR, Royston P, Wood AM. Multiple imputation using chained equations:
issues and guidance for practice. Statistics in Medicine
2011;30(4):377-399.

Moons KGM, Donders RART, Stijnen T, Harrell FE Jr. Using the outcome for
imputation of missing predictor values was preferred. Journal of Clinical
Epidemiology 2006;59(10):1092-1101.

Collins GS, Reitsma JB, Altman DG, Moons KGM. Transparent reporting of a
multivariable prediction model for individual prognosis or diagnosis
(TRIPOD): the TRIPOD statement. BMJ 2015;350:g7594.

Collins GS, Moons KGM, Dhiman P, Riley RD, Beam AL, Van Calster B, et al.
TRIPOD+AI statement: updated guidance for reporting clinical prediction
models that use regression or machine learning methods. BMJ
2024;385:e078378.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ...errors import RiskvetError, problem
from ..disclosure import SUPPRESSED
from ...imputation.procedure import imputations_needed
from ..missingness import METHOD_WORDS, WITHHELD, MissingDataReport

__all__ = ["missing_data_texts", "MISSING_DATA_METHODS", "M_RULES", "TRIPOD_ITEMS"]

#: The study's missing-data methods (``missing_data.method``).
MISSING_DATA_METHODS = ("multiple_imputation", "complete_case")
#: How the number of imputations was chosen: by the rule of thumb, or set in the study (``missing_data.m``).
M_RULES = ("rule_of_thumb", "fixed")
#: The checklist items on the handling of missing data, as numbered in the project's TRIPOD index
#: (``riskvet/resources/tripod_*.json``).
TRIPOD_ITEMS = (("TRIPOD 2015", "9"), ("TRIPOD+AI 2024", "11"))

_CITATION = "White, Royston & Wood 2011, Statistics in Medicine 30(4):377-399"


def _percent(share: Any) -> str:
    return f"{100.0 * float(share):.1f}%"


def _number(value: Any) -> str:
    return f"{float(value):.3g}"


def _names(items: list) -> str:
    items = [str(v) for v in items]
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def _missing_text(report: MissingDataReport) -> str:
    """What was missing: incomplete columns, the largest shares, the complete cases."""
    table = report.by_column
    incomplete = table[table["people missing"].map(lambda v: v == SUPPRESSED or v > 0)]
    head = f"In the {report.cohort_label} cohort ({report.n_people} people), "
    if incomplete.empty:
        return head + f"no analysis column had a missing value: all {report.n_people} people are complete cases."
    text = head + f"{len(incomplete)} of the {len(table)} analysis columns had missing values."
    shown = incomplete[incomplete["people missing"] != SUPPRESSED].sort_values("share missing", ascending=False, kind="stable")
    if len(shown):
        largest = [f"{c} ({_percent(s)}, {n} people)" for c, s, n in
                   zip(shown["column"][:3], shown["share missing"][:3], shown["people missing"][:3])]
        text += f" Missing most often: {_names(largest)}."
    hidden = incomplete[incomplete["people missing"] == SUPPRESSED]["column"].tolist()
    if hidden:
        text += f" The number missing is suppressed for {_names(hidden)}."
    if report.complete_people == SUPPRESSED:
        text += " The number of complete cases (people with every analysis column recorded) is suppressed."
    else:
        text += (f" {report.complete_people} people ({_percent(report.complete_share)}) had every analysis column recorded "
                 "(complete cases).")
    return text


def _suppression_text(report: MissingDataReport) -> str:
    m = report.min_cell_count
    if m <= 1:
        return "No count is suppressed (the minimum count shown is not set above 1)."
    if not report.n_suppressed:
        return (f"No count in these tables is from 1 to {m - 1}, and none could be worked out by adding and subtracting "
                "the totals (rare combinations of missing values are counted together as other patterns), so nothing is "
                "suppressed.")
    text = (f"Counts from 1 to {m - 1} are shown as suppressed, and so are further counts from which one could be worked "
            f"out (by adding and subtracting the totals); {report.n_suppressed} count(s) in these tables are suppressed.")
    if report.withheld_columns:
        text += (f" Summaries of the imputed values are withheld for {_names(list(report.withheld_columns))}, whose number "
                 "of imputed values is suppressed.")
    return text


def _methods_phrase(report: MissingDataReport) -> str:
    """Each method used, with the columns it imputed."""
    by_method: dict[str, list] = {}
    for column, method in report.methods.items():
        if method != "none":
            by_method.setdefault(method, []).append(column)
    return "; ".join(f"{METHOD_WORDS[method]} for {_names(cols)}" for method, cols in by_method.items())


def _handling_text(report: MissingDataReport, method: str) -> str:
    if method == "complete_case":
        left = ("the people with any analysis column missing were left out (their number is suppressed)"
                if report.complete_people == SUPPRESSED else
                f"the {report.n_people - int(report.complete_people)} people with any analysis column missing were left out")
        return (f"Only complete cases were analysed: {left}. This is unbiased when whether a value is missing does not "
                "depend on the outcome given the predictors, and it loses the information of every incomplete record.")
    text = (f"Missing values were imputed {report.m} times by chained equations (fully conditional specification): each "
            f"incomplete column has its own imputation model given all the other columns, and the models are visited in turn, "
            f"for {report.iterations} cycles in each imputation (seed {report.seed}, one random stream per imputation).")
    phrase = _methods_phrase(report)
    if phrase:
        text += f" Methods: {phrase}."
    if "pmm" in report.methods.values():
        text += (f" Predictive mean matching fills a cell with the observed value of one of the {report.donors} people whose "
                 "predicted values are closest, so imputed numbers are always values seen in the data.")
    text += (" Each imputation model is fitted to a bootstrap resample of the people with the column observed, so that the "
             "imputations carry the uncertainty of the model's coefficients as well as the scatter around them.")
    if report.outcome is not None:
        text += (f" The outcome ({report.outcome}) is a predictor in every imputation model: imputing without it would weaken "
                 "the association of the imputed predictors with the outcome (Moons et al. 2006).")
    if report.auxiliary:
        text += f" {_names(list(report.auxiliary))} entered the imputation models only, not the prediction model."
    none = [c for c, code in report.methods.items() if code == "none"]
    if none:
        text += f" {_names(none)} {'was' if len(none) == 1 else 'were'} not imputed."
    return text


def _imputations_text(report: MissingDataReport, m_rule: str) -> str:
    """The number of imputations and the rule of thumb behind it."""
    if report.complete_share == SUPPRESSED:
        rule, percentage = None, "a percentage not stated here, as the number of complete cases is suppressed"
    else:
        rule, percentage = imputations_needed(float(report.complete_share)), f"{_percent(1.0 - float(report.complete_share))} here"
    if m_rule == "rule_of_thumb":
        return (f"The number of imputations, m = {report.m}, follows the rule that m be at least the percentage of incomplete "
                f"cases ({percentage}), with at least 5 and at most 100 ({_CITATION}); with that many imputations, "
                "redoing them with another seed would move the pooled estimates by little compared with their standard errors.")
    text = f"The study set m = {report.m} imputations."
    if rule is None:
        return text + (f" The rule that m be at least the percentage of incomplete cases ({_CITATION}) cannot be stated "
                       "here, as the number of complete cases is suppressed.")
    text += f" The rule that m be at least the percentage of incomplete cases ({percentage}; {_CITATION}) gives {rule}"
    if report.m >= rule:
        return text + f"; m = {report.m} meets it."
    return text + ("; with fewer imputations the pooled estimates carry more Monte Carlo error: they would move more if the "
                   "imputations were redone with another seed.")


def _tripod_text(report: MissingDataReport, method: str) -> str:
    items = " and ".join(f"{name} item {item}" for name, item in TRIPOD_ITEMS)
    if method == "complete_case":
        how = "by complete-case analysis: people with any analysis column missing were left out"
    else:
        how = (f"by multiple imputation by chained equations (m = {report.m}, {report.iterations} cycles; "
               f"{_methods_phrase(report) or 'no column needed imputing'}"
               f"{'; the outcome in every imputation model' if report.outcome is not None else ''}"
               f"{'; auxiliary columns ' + _names(list(report.auxiliary)) if report.auxiliary else ''}), "
               "the analyses of the completed data sets combined by Rubin's rules")
    return (f"For {items} (how missing data were handled): missing values in the {report.cohort_label} cohort were handled "
            f"{how}. The number of people missing each analysis column is in the table of missing values by column.")


def _assumption_text(method: str) -> str:
    if method == "complete_case":
        return ("Complete-case analysis assumes that, given the predictors, whether a record is complete does not depend on "
                "the outcome. The data cannot confirm this.")
    return ("Multiple imputation assumes the values are missing at random given the variables in the imputation models: "
            "whether a value is missing may depend on what was recorded (the other columns and the outcome), but not, "
            "beyond that, on the missing value itself. The data cannot confirm this, since the values that would show it "
            "are the ones missing. It is a clinical judgement about why values were not recorded (a test not ordered "
            "because the patient seemed well is missing for a reason tied to its result), and the results hold only "
            "as far as that judgement does.")


def _checks_text(report: MissingDataReport) -> str:
    """The convergence summary and the comparison of observed with imputed values, in numbers."""
    first, last = report.last_half
    conv = report.convergence
    shown = conv[conv["mean at last iteration"] != WITHHELD]
    text = (f"For each imputed column and imputation the convergence table gives the mean and sd of the imputed values after "
            f"the last of the {report.iterations} cycles and how far each moved over cycles {first} to {last}; chains that "
            "have settled move within a similar narrow band in every imputation, with no trend.")
    parts = []
    for column in dict.fromkeys(shown["column"]):
        rows = shown[shown["column"] == column]
        means = rows["mean at last iteration"].astype(float).to_numpy()
        moved = float(np.max(rows["range of the mean over the last half"].astype(float).to_numpy()))
        parts.append(f"{column}: means {_number(means.min())} to {_number(means.max())} across imputations, "
                     f"moving by at most {_number(moved)}")
    if parts:
        text += " " + "; ".join(parts) + "."
    text += (" The comparison table sets the observed values beside the imputed ones; they may differ when values are "
             "missing at random rather than completely at random, so a difference is a prompt to ask why, not an error.")
    if report.n_fallbacks:
        text += (f" {report.n_fallbacks} draw(s) of a category model could not be fitted and drew from the level "
                 "frequencies instead.")
    return text


def missing_data_texts(report: MissingDataReport, *, method: str, m: int | None, m_rule: str | None,
                       iterations: int | None, seed: int | None) -> dict[str, str]:
    """Every sentence of the missing-data section, by name.

    Parameters
    ----------
    report : MissingDataReport
        From :func:`riskvet.reporting.missingness.missing_data_report`.
    method : str, keyword-only
        ``missing_data.method``: ``"multiple_imputation"`` or
        ``"complete_case"`` (the report then describes what was missing in
        the data the complete cases were taken from).
    m, iterations, seed : int, keyword-only
        The imputation settings the stage used; with multiple imputation they
        must be the report's (a check that the texts describe these
        imputations).  Ignored for ``"complete_case"``.
    m_rule : str, keyword-only
        ``"rule_of_thumb"`` (m was the percentage of incomplete cases, at
        least 5 and at most 100) or ``"fixed"`` (``missing_data.m`` set it);
        ignored for ``"complete_case"``.

    Returns
    -------
    dict of str to str
        ``missing`` (what was missing), ``suppression`` (what is hidden),
        ``handling`` (how it was handled), ``imputations`` (the number of
        imputations; empty for complete cases), ``tripod`` (the checklist
        items on missing data), ``assumption`` (what the method assumes) and
        ``checks`` (convergence and observed against imputed; empty for
        complete cases).

    Raises
    ------
    RiskvetError
        ``report`` not a MissingDataReport, an unknown ``method`` or
        ``m_rule``, or ``m``, ``iterations`` or ``seed`` differing from the
        report's.

    References
    ----------
    White IR, Royston P, Wood AM. Multiple imputation using chained
    equations: issues and guidance for practice. Statistics in Medicine
    2011;30(4):377-399.
    """
    func = "missing_data_texts"
    if not isinstance(report, MissingDataReport):
        raise RiskvetError(problem(f"{func}(report)", allowed="a MissingDataReport", received=type(report).__name__))
    if method not in MISSING_DATA_METHODS:
        raise RiskvetError(problem(f"{func}(method=)", allowed=f"one of {list(MISSING_DATA_METHODS)}", received=method))
    imputing = method == "multiple_imputation"
    if imputing:
        if m_rule not in M_RULES:
            raise RiskvetError(problem(f"{func}(m_rule=)", allowed=f"one of {list(M_RULES)}", received=m_rule))
        for name, given, used in (("m", m, report.m), ("iterations", iterations, report.iterations), ("seed", seed, report.seed)):
            if given != used:
                raise RiskvetError(problem(f"{func}({name}=)", allowed=f"the report's {name}, {used}", received=given))
    return {
        "missing": _missing_text(report),
        "suppression": _suppression_text(report),
        "handling": _handling_text(report, method),
        "imputations": _imputations_text(report, m_rule) if imputing else "",
        "tripod": _tripod_text(report, method),
        "assumption": _assumption_text(method),
        "checks": _checks_text(report) if imputing else "",
    }
