"""What the sentence modules share: the caution, number formats, what good looks like per measure, interval names."""

from __future__ import annotations

import math
from typing import Any

import pandas as pd

from ...errors import RiskvetError, problem

#: The caution every stage page and the summary carry.
CAUTION = (
    "Statistical evaluation is not clearance for clinical use: local validation, governance and "
    "licensed clinical judgement decide whether a model is used."
)


def decimals(value: Any, digits: int = 3, *, missing: str = "n/a") -> str:
    """``value`` to ``digits`` decimals, or ``missing`` when it is None or not finite."""
    return missing if value is None or not math.isfinite(value) else f"{value:.{digits}f}"


def signed(value: Any, digits: int = 2) -> str:
    """``value`` to ``digits`` decimals with a typographic minus; ``"undefined"`` when not finite."""
    return "undefined" if value is None or not math.isfinite(value) else f"{value:.{digits}f}".replace("-", "\u2212")


# ---------------------------------------------------------------------------
# What good looks like, per measure
# ---------------------------------------------------------------------------

#: What "better" means for each measure (a key without its ``_cut<j>`` suffix):
#: ``"higher"``, ``"lower"``, or the ideal value the measure should be close to.
BETTER: dict[str, str | float] = {
    "auc": "higher", "average_cut_auc": "higher", "ordinal_c": "higher", "generalised_c": "higher",
    "scaled_brier": "higher", "nagelkerke_r2": "higher", "net_benefit": "higher",
    "sensitivity": "higher", "specificity": "higher", "ppv": "higher", "npv": "higher",
    "brier": "lower", "ici": "lower", "e50": "lower", "e90": "lower", "emax": "lower",
    "calibration_slope": 1.0, "calibration_intercept": 0.0, "oe_ratio": 1.0,
}

_CONCORDANCE = ("0 to 1", "higher", "0.5: no discrimination (ranking by chance); 1: perfect discrimination")
_CALIBRATION_ERROR = ("0 to 1", "lower", "0: predicted risk equals the smoothed observed risk")
_PROPORTION = ("0 to 1", "higher", "read together with its partner at the same threshold")

#: measure key -> (name, or name for an ordered outcome; range; better; reference values).
_GUIDE: dict[str, tuple[tuple[str, str], tuple[str, str, str]]] = {
    "auc": (("C statistic (AUC)", "C (AUC) of each cut"), _CONCORDANCE),
    "average_cut_auc": (("average dichotomised C", "average dichotomised C"), _CONCORDANCE),
    "ordinal_c": (("ordinal c-index", "ordinal c-index"), _CONCORDANCE),
    "generalised_c": (("generalised C", "generalised C"), _CONCORDANCE),
    "calibration_slope": (("calibration slope", "calibration slope"), (
        "any number", "closer to 1",
        "1 ideal; below 1: predictions too extreme (high risks too high, low risks too low); above 1: too moderate")),
    "calibration_intercept": (("calibration-in-the-large", "calibration-in-the-large"), (
        "any number", "closer to 0",
        "0 ideal; above 0: risks under-predicted on average; below 0: over-predicted")),
    "oe_ratio": (("observed/expected ratio", "observed/expected ratio"), (
        "0 or more", "closer to 1", "1 ideal; above 1: more events than predicted; below 1: fewer")),
    "brier": (("Brier score", "Brier score"), None),
    "scaled_brier": (("scaled Brier score", "scaled Brier score"), (
        "below 0 to 1", "higher", "1 perfect; 0: no better than predicting the outcome proportion for everyone")),
    "nagelkerke_r2": (("Nagelkerke R²", "Nagelkerke R²"), ("0 to 1", "higher", "0: no explained variation; 1: perfect")),
    "ici": (("integrated calibration index (ICI)", "integrated calibration index (ICI)"), _CALIBRATION_ERROR),
    "e50": (("E50 (median calibration error)", "E50 (median calibration error)"), _CALIBRATION_ERROR),
    "e90": (("E90 (90th percentile of the calibration error)", "E90 (90th percentile of the calibration error)"), _CALIBRATION_ERROR),
    "emax": (("Emax (largest calibration error)", "Emax (largest calibration error)"), _CALIBRATION_ERROR),
    "net_benefit": (("net benefit", "net benefit"), (
        "up to the outcome proportion", "higher",
        "compare with treating everybody and with treating nobody (0) at the same threshold: useful where it beats both")),
    "sensitivity": (("sensitivity", "sensitivity"), _PROPORTION),
    "specificity": (("specificity", "specificity"), _PROPORTION),
    "ppv": (("positive predictive value", "positive predictive value"), _PROPORTION),
    "npv": (("negative predictive value", "negative predictive value"), _PROPORTION),
}

#: Column headers of :func:`measure_guide`.
GUIDE_COLUMNS = ("measure", "possible values", "better when", "reference values")


def base_measure(key: str) -> str:
    """A measure key without its cut suffix: ``"auc_cut1"`` -> ``"auc"``."""
    head, sep, tail = str(key).rpartition("_cut")
    return head if sep and tail.isdigit() else str(key)


def measure_guide(measures: Any, *, n_levels: int) -> pd.DataFrame:
    """One line per measure on what good looks like: possible values, direction, reference values.

    Parameters
    ----------
    measures : iterable of str
        Measure keys as the results use them (``auc``, ``auc_cut1``,
        ``calibration_slope``, ``brier``, ``ici``, ``oe_ratio``, ``net_benefit``
        ...); cut suffixes are dropped and each measure is listed once, in the
        order first met.
    n_levels : int, keyword-only
        Outcome levels (2 for a binary outcome); sets the names and the range
        of the Brier score.

    Returns
    -------
    DataFrame
        Columns ``measure``, ``possible values``, ``better when``,
        ``reference values``; a plain RangeIndex.

    Raises
    ------
    RiskvetError
        ``n_levels`` is not a whole number >= 2, or a measure has no entry.

    Notes
    -----
    The reference values are those of the methods' sources: C = 0.5 is chance
    ranking (Hanley & McNeil 1982); calibration slope 1 and
    calibration-in-the-large 0 (Cox 1958); the Brier score of predicting the
    outcome proportion p for everyone is p(1 − p), or 1 − Σ p_k² over K levels
    (Steyerberg et al. 2010); ICI, E50, E90, Emax are 0 for a perfectly
    calibrated model (Austin & Steyerberg 2019); net benefit is read against
    treating everybody and treating nobody (Vickers & Elkin 2006).

    References
    ----------
    Cox DR. Two further applications of a model for binary regression.
    Biometrika 1958;45(3-4):562-565.

    Hanley JA, McNeil BJ. The meaning and use of the area under a receiver
    operating characteristic (ROC) curve. Radiology 1982;143(1):29-36.

    Steyerberg EW, Vickers AJ, Cook NR, et al. Assessing the performance of
    prediction models: a framework for traditional and novel measures.
    Epidemiology 2010;21(1):128-138.

    Austin PC, Steyerberg EW. The Integrated Calibration Index (ICI) and
    related metrics for quantifying the calibration of logistic regression
    models. Statistics in Medicine 2019;38(21):4051-4065.

    Vickers AJ, Elkin EB. Decision curve analysis: a novel method for
    evaluating prediction models. Medical Decision Making 2006;26(6):565-574.
    """
    if isinstance(n_levels, bool) or not isinstance(n_levels, int) or n_levels < 2:
        raise RiskvetError(problem("measure_guide(n_levels=)", allowed="a whole number >= 2", received=n_levels))
    if isinstance(measures, str):
        measures = [measures]
    keys = list(dict.fromkeys(base_measure(m) for m in measures))
    unknown = [k for k in keys if k not in _GUIDE]
    if unknown:
        raise RiskvetError(problem("measure_guide(measures=)", allowed=f"measure keys among {sorted(_GUIDE)}", received=unknown))
    rows = []
    for key in keys:
        names, words = _GUIDE[key]
        if key == "brier":
            reference = ("the Brier score of predicting the outcome proportion p for everyone, p(1 − p)" if n_levels == 2
                         else "the Brier score of predicting the level proportions p_k for everyone, 1 − Σ p_k²")
            words = ("0 to 1" if n_levels == 2 else "0 to 2", "lower", f"0 perfect; compare with {reference}")
        rows.append(dict(zip(GUIDE_COLUMNS, (names[0] if n_levels == 2 else names[1], *words))))
    return pd.DataFrame(rows, columns=list(GUIDE_COLUMNS))


def judge_change(measure: str, before: Any, after: Any, *, tolerance: float = 0.0) -> str:
    """Whether ``after`` is ``"better"``, ``"worse"`` or ``"the same"`` as ``before`` for ``measure``.

    Uses :data:`BETTER`: higher, lower, or closer to an ideal value; a
    difference no larger than ``tolerance`` counts as the same.  Returns
    ``"not available"`` when either value is missing or not finite.
    """
    rule = BETTER.get(base_measure(measure))
    if rule is None:
        raise RiskvetError(problem("judge_change(measure=)", allowed=f"one of {sorted(BETTER)}", received=measure))
    if before is None or after is None or not (math.isfinite(before) and math.isfinite(after)):
        return "not available"
    if rule == "higher":
        gain = after - before
    elif rule == "lower":
        gain = before - after
    else:
        gain = abs(before - rule) - abs(after - rule)
    if abs(gain) <= tolerance:
        return "the same"
    return "better" if gain > 0 else "worse"


#: Words for each kind of interval, as pages name them.
INTERVAL_KINDS = {
    "bootstrap": "bootstrap percentile interval",
    "wald": "Wald interval",
    "wald_log": "Wald interval on the log scale",
    "profile": "profile-likelihood interval",
    "profile_penalised": "profile penalised-likelihood interval",
    "rubin": "interval by Rubin's rules (t on Barnard-Rubin degrees of freedom)",
    "wald_pooled": "Wald interval on the pooled (Rubin's rules) variance",
    "delong": "DeLong interval",
    "wilson": "Wilson interval",
    "replicates": "range of the central replicates",
}


def interval_words(kind: str, confidence: float = 0.95) -> str:
    """``"95% bootstrap percentile interval"``: the level and kind of an interval in words."""
    if kind not in INTERVAL_KINDS:
        raise RiskvetError(problem("interval_words(kind=)", allowed=f"one of {sorted(INTERVAL_KINDS)}", received=kind))
    if isinstance(confidence, bool) or not isinstance(confidence, (int, float)) or not 0 < confidence < 1:
        raise RiskvetError(problem("interval_words(confidence=)", allowed="a number strictly between 0 and 1", received=confidence))
    level = 100 * confidence
    return f"{level:.0f}% {INTERVAL_KINDS[kind]}" if abs(level - round(level)) < 1e-9 else f"{level:g}% {INTERVAL_KINDS[kind]}"
