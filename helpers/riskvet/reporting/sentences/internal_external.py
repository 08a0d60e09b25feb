"""Sentences of the internal-external cross-validation stage.

Each function reads an :class:`~riskvet.validation.iecv.InternalExternalValidation`
and states its numbers; none computes one.
"""

from __future__ import annotations

import math
from collections import Counter

import numpy as np

from ..labels import cut_label
from ...validation.iecv import MEASURES, InternalExternalValidation, PooledMeasure
from .common import decimals

__all__ = ["internal_external_summary", "internal_external_texts", "pooled_sentence", "cohorts_pooled_text", "PLURAL"]

#: Plural words of each cluster kind.
PLURAL = {"site": "sites", "period": "periods"}


def _plural(result: InternalExternalValidation) -> str:
    return PLURAL.get(result.cluster_kind, "clusters")


def _interval(lower: float, upper: float) -> str:
    return f"{decimals(lower)} to {decimals(upper)}"


def pooled_sentence(p: PooledMeasure, *, levels, confidence: float, kind: str) -> str:
    """One pooled measure in words: estimate, confidence and prediction intervals, spread."""
    label = MEASURES[p.measure][0]
    where = f"'{cut_label(levels, p.cut, binary=len(levels) == 2)}'"
    at = f" at a threshold of {p.threshold:g}" if p.measure == "net_benefit" else ""
    if p.reason:
        return f"The {label} for {where}{at} was not pooled: {p.reason}."
    level = f"{confidence:.0%}"
    text = (f"The pooled {label} for {where}{at} was {decimals(p.estimate)} ({level} confidence interval "
            f"{_interval(p.lower, p.upper)}, over {p.n_clusters} {PLURAL.get(kind, 'clusters')})")
    if math.isfinite(p.prediction_lower):
        text += (f"; in a new {kind} it is expected, with {level} probability, between "
                 f"{decimals(p.prediction_lower)} and {decimals(p.prediction_upper)}")
    return text + "."


def internal_external_summary(result: InternalExternalValidation) -> str:
    """The stage's headline: what was left out, and the pooled C and calibration slope at the first cut."""
    kind, plural = result.cluster_kind, _plural(result)
    ok = sum(c.status == "ok" for c in result.clusters)
    head = (f"Each of the {result.n_clusters} {plural} was left out in turn, the whole derivation procedure was repeated "
            f"on the others, and the model it gave was measured in the {kind} left out ({ok} of {result.n_clusters} "
            "derivations gave a model).")
    parts = [head]
    for measure in ("c", "calibration_slope"):
        parts.append(pooled_sentence(result.pooled_measure(measure, 0), levels=result.levels, confidence=result.confidence, kind=kind))
    return " ".join(parts)


def _method_text(result: InternalExternalValidation) -> str:
    kind, plural = result.cluster_kind, _plural(result)
    estimator = "restricted maximum likelihood" if result.method == "reml" else "DerSimonian and Laird's moment estimator"
    hk = ("Hartung and Knapp's adjustment (a t distribution on k - 1 degrees of freedom with a rescaled variance)"
          if result.hartung_knapp else "normal-theory confidence intervals (internal_external.hartung_knapp is off)")
    return (
        f"Internal-external cross-validation asks whether the procedure's models carry to a {kind} they have not seen: "
        f"each {kind} is predicted by a model whose knots, selected terms and coefficients were found without it. "
        f"Each measure is pooled over the {plural} by a random-effects meta-analysis, the between-{kind} variance "
        f"estimated by {estimator}, with {hk}. The C statistic is pooled on the logit scale and the observed/expected "
        "ratio on the log scale, where their sampling distributions are close to normal; calibration-in-the-large, "
        "the calibration slope and net benefit are pooled as they are. The prediction interval (a t distribution on "
        f"k - 2 degrees of freedom) is where the measure is expected to lie in a new {kind} like these; it is the "
        "interval to read when deciding whether the model can be used elsewhere, and it is wide when the "
        f"{plural} are few. The model of the record is the one derived on all {plural}; these models are its siblings."
    )


def _left_out_text(result: InternalExternalValidation) -> str:
    reasons: Counter[str] = Counter()
    binary = len(result.levels) == 2
    for m in result.measures:
        if not m.estimated:
            where = "" if binary else f" at '{cut_label(result.levels, m.cut, binary=False)}'"
            reasons[f"{m.cluster}{where}: {m.reason}"] += 1
    failed = [c for c in result.clusters if c.status != "ok"]
    if not reasons and not failed:
        return f"Every measure was estimated in every {result.cluster_kind}."
    lines = [f"Not estimated, and left out of the pooling of that measure ({result.min_events} people or more are needed "
             "on each side of a cut):"]
    lines += [f"- {what} ({n} measure{'s' if n != 1 else ''})" for what, n in sorted(reasons.items())]
    return "\n".join(lines)


def _effects_text(result: InternalExternalValidation) -> str:
    kind, plural = result.cluster_kind, _plural(result)
    if result.effects is None:
        return f"The model derived on all {plural} has no predictor, so there is no effect whose spread could be shown."
    table = result.effects.pooled
    text = (f"A diagnostic, not a modelling choice: each term of the model derived on all {plural} was given its own "
            f"coefficient in every {kind}, the other terms shared and the intercepts shifted by {kind}, and compared with "
            f"one common coefficient by a likelihood-ratio test. For a term of one column the table shows the spread of its "
            f"{kind} coefficients (tau, the between-{kind} standard deviation, and I², the share of the spread beyond chance). "
            f"With few or small {plural} these tests have little power and the coefficients are noisy; a large spread is a "
            "question for the clinical team, not a reason to change the model here.")
    tested = table[np.isfinite(table["lr_p"].to_numpy(dtype=float))]
    low = tested[tested["lr_p"] < 0.05]["term"].tolist()
    if len(tested):
        text += (f" Tests with p below 0.05 (not corrected for the {len(tested)} tests): {', '.join(low)}." if low
                 else f" No test of a common effect had p below 0.05 ({len(tested)} tests).")
    untested = table[table["reason"].astype(str) != ""]
    if len(untested):
        text += " Not tested: " + "; ".join(f"{t} ({r})" for t, r in zip(untested["term"], untested["reason"])) + "."
    return text


def _selection_text(result: InternalExternalValidation) -> str:
    ok = [c for c in result.clusters if c.status == "ok"]
    if not ok:
        return ""
    counts = Counter(t for c in ok for t in c.terms)
    always = [t for t, n in counts.items() if n == len(ok)]
    sometimes = sorted((t for t, n in counts.items() if n < len(ok)), key=lambda t: (-counts[t], t))
    text = f"Across the {len(ok)} leave-one-out derivations, {len(always)} term(s) were selected every time"
    if sometimes:
        text += "; selected only sometimes: " + ", ".join(f"{t} ({counts[t]} of {len(ok)})" for t in sometimes)
    all_terms = set(result.terms_on_all_data)
    missing = sorted(all_terms - set(counts))
    if missing:
        text += f"; never selected when a {result.cluster_kind} was left out, though selected on all data: {', '.join(missing)}"
    return text + "."


def internal_external_texts(result: InternalExternalValidation, *, notes=()) -> dict[str, str]:
    """Every sentence of the page, by name: summary, method, left_out, effects, selection, failures, pooled."""
    failed = [c for c in result.clusters if c.status != "ok"]
    failures = ("Every leave-one-out derivation gave a model." if not failed else
                "No model when leaving out: " + "; ".join(f"{c.label} ({c.reason}: {c.message})" for c in failed) + ".")
    kind, plural = result.cluster_kind, _plural(result)
    pooled = (f"tau² is the between-{kind} variance on the scale pooled (logit C, log O/E, the others as they are) and I² "
              f"the share of the spread between {plural} beyond what chance would give. A prediction interval needs at "
              f"least three {plural}; a measure estimated in fewer than two {plural} is not pooled. Net benefit is in "
              "true positives per person, net of the false positives weighted by the threshold's odds.")
    return {
        "summary": internal_external_summary(result),
        "method": _method_text(result),
        "left_out": _left_out_text(result),
        "effects": _effects_text(result),
        "selection": _selection_text(result),
        "failures": failures,
        "pooled": pooled,
    }


def cohorts_pooled_text(pooled, *, n_cohorts: int, method: str, hartung_knapp: bool) -> str:
    """The external validation page's sentence on the measures pooled over its cohorts."""
    if n_cohorts < 2:
        return "The study names one validation cohort, so there is nothing to pool across cohorts."
    estimator = "restricted maximum likelihood" if method == "reml" else "DerSimonian and Laird's moment estimator"
    text = (f"The {n_cohorts} validation cohorts' measures are pooled by a random-effects meta-analysis (between-cohort "
            f"variance by {estimator}{', Hartung-Knapp intervals' if hartung_knapp else ''}): C on the logit scale, O/E "
            "on the log scale, the others as they are. The pooled value describes cohorts like these on average; the "
            "prediction interval says where a new cohort's value is expected to lie.")
    if n_cohorts == 2:
        text += " With two cohorts there is no prediction interval (it needs at least three) and the between-cohort variance is barely estimable."
    not_pooled = [p for p in pooled if p.reason]
    if not_pooled:
        text += f" {len(not_pooled)} measure(s) could not be pooled (estimated in fewer than two cohorts)."
    return text
