"""Sentences of the planning stage: development and validation sample sizes, and the cohorts against the plan."""

from __future__ import annotations

from typing import Any, Sequence

from ...planning.samplesize import OrdinalDevelopmentSize
from ..labels import cut_label

__all__ = [
    "development_sentence",
    "validation_sentence",
    "checks_sentence",
    "development_protects",
    "development_asks",
    "validation_protects",
    "development_events_sentence",
]

#: What each development criterion of Riley et al. (BMJ 2020) protects against, in words.
_DEVELOPMENT_PROTECTS = {
    "shrinkage": "overfitting, which makes predictions too extreme for new patients and calls for heavy shrinkage",
    "optimism": "a model that fits its own data much better than it will fit new data (optimism in R²)",
    "overall risk": "an imprecise estimate of the overall risk of the outcome",
}

#: What each validation criterion of Riley et al. (Stat Med 2021) protects against, in words.
_VALIDATION_PROTECTS = {
    "O/E": "an observed/expected ratio too imprecise to tell whether the model over- or under-predicts overall",
    "calibration slope": "a calibration slope too imprecise to tell whether predictions are too extreme or too moderate",
    "C statistic": "a C statistic too imprecise to tell how well the model ranks patients",
    "net benefit": "a net benefit too imprecise to tell whether using the model does more good than harm",
}


def development_protects(name: str) -> str:
    """What a development criterion protects against, in words (the criterion's name when unknown)."""
    return _DEVELOPMENT_PROTECTS.get(name, name)


def development_asks(name: str, size: Any) -> str:
    """What a development criterion asks for, with the study's targets."""
    words = {
        "shrinkage": f"expected uniform shrinkage of at least {size.shrinkage:g}",
        "optimism": f"optimism in Nagelkerke R² of at most {size.delta:g}",
        "overall risk": f"overall risk estimated within ±{size.margin:g} (95% confidence)",
    }
    return words.get(name, name)


def validation_protects(name: str) -> str:
    """What a validation criterion protects against, in words (the criterion's name when unknown)."""
    return _VALIDATION_PROTECTS.get(name, name)


def development_sentence(dev: Any, levels: Sequence[str], binary: bool) -> str:
    """The development sample size, the criterion and outcome that set it and what that criterion protects against, events per candidate parameter."""
    if isinstance(dev, OrdinalDevelopmentSize):
        cut = dev.cuts[dev.binding_cut]
        return (
            f"Developing the model needs at least {dev.n:,} people. The {cut.binding} criterion sets this size, at the outcome "
            f"'{cut_label(levels, dev.binding_cut, binary=binary)}' (outcome proportion {cut.prevalence:.3f}): it protects against "
            f"{development_protects(cut.binding)}. That is about {cut.events:.0f} events, "
            f"{cut.events_per_parameter:.1f} per candidate parameter. The table shows the people each criterion needs for each outcome."
        )
    return (
        f"Developing the model needs at least {dev.n:,} people. The {dev.binding} criterion sets this size: it protects against "
        f"{development_protects(dev.binding)}. That is about {dev.events:.0f} events "
        f"at an outcome proportion of {dev.prevalence:.3f}, or {dev.events_per_parameter:.1f} events per candidate parameter."
    )


def validation_sentence(validation: Sequence[Any]) -> str:
    """The validation sample size, set by the event that needs the most people."""
    if not validation:
        return "No validation sample size was computed (it needs planning.anticipated_c)."
    top = max(validation, key=lambda v: (v.size.n, -v.cut))
    parts = [f"'{v.label}' {v.size.n:,} ({v.size.binding})" for v in validation]
    return (
        f"Validating the model needs at least {top.size.n:,} people, set by the {top.size.binding} criterion at the outcome "
        f"'{top.label}' (about {top.size.events:.0f} events): it protects against {validation_protects(top.size.binding)}. "
        "By outcome: " + "; ".join(parts) + "."
    )


def checks_sentence(checks: Sequence[Any]) -> str:
    """Which cohorts are smaller than planned, or have fewer events than planned."""
    if not checks:
        return "No cohort was read, so the plan was not compared with the data."
    short = [c for c in checks if not c.n_met]
    few_events = [c for c in checks if c.n_met and not c.events_met]
    if not short:
        text = "Every cohort is at least as large as planned."
    else:
        text = "Smaller than planned: " + "; ".join(
            f"{c.cohort} for {c.purpose}{'' if c.purpose == 'development' else f' (event {c.label!r})'}, {c.n_available:,} of {c.n_required:,}"
            for c in short
        ) + ". Estimates from a cohort below its planned size are less precise than the plan intended; say so when reporting them."
    if few_events:
        text += " Large enough but with fewer events than planned (a lower event proportion): " + "; ".join(
            f"{c.cohort} ({c.label!r}), {c.events_available} events of {c.events_planned:.0f}" for c in few_events
        ) + "."
    return text


def development_events_sentence(dev: Any, levels: Sequence[str], binary: bool) -> str:
    """Where the anticipated R² comes from, and which criterion needs the most people for each outcome."""
    cuts = list(dev.cuts) if isinstance(dev, OrdinalDevelopmentSize) else [dev]
    words = {"given": "given in the study", "from C statistic": "derived from the anticipated C statistic"}
    sources = {words.get(c.r2_source, f"the {c.r2_source}") for c in cuts}
    source = sources.pop() if len(sources) == 1 else "set per outcome"
    per = "; ".join(f"'{cut_label(levels, j, binary=binary)}' {c.n:,} ({c.binding})" for j, c in enumerate(cuts))
    return (
        f"The anticipated Cox–Snell R² is {source} (Riley et al., BMJ 2020). People needed for each outcome, "
        f"by the criterion that needs the most: {per}."
    )
