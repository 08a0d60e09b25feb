"""Sentences of the planning stage: development and validation sample sizes, and the cohorts against the plan."""

from __future__ import annotations

from typing import Any, Sequence

from ...planning.samplesize import OrdinalDevelopmentSize
from ..labels import cut_label

__all__ = ["development_sentence", "validation_sentence", "checks_sentence"]


def development_sentence(dev: Any, levels: Sequence[str], binary: bool) -> str:
    """The development sample size: people, events and events per candidate parameter, and the binding criterion."""
    if isinstance(dev, OrdinalDevelopmentSize):
        cut = dev.cuts[dev.binding_cut]
        return (
            f"Developing the model needs at least {dev.n:,} people. The requirement is largest at the cut "
            f"'{cut_label(levels, dev.binding_cut, binary=binary)}' (outcome proportion {cut.prevalence:.3f}), "
            f"where the {cut.binding} criterion binds; that is about {cut.events:.0f} events, "
            f"{cut.events_per_parameter:.1f} per candidate parameter."
        )
    return (
        f"Developing the model needs at least {dev.n:,} people ({dev.binding} criterion), about {dev.events:.0f} events "
        f"at an outcome proportion of {dev.prevalence:.3f}, or {dev.events_per_parameter:.1f} events per candidate parameter."
    )


def validation_sentence(validation: Sequence[Any]) -> str:
    """The validation sample size, set by the event that needs the most people."""
    if not validation:
        return "No validation sample size was computed (it needs planning.anticipated_c)."
    top = max(validation, key=lambda v: (v.size.n, -v.cut))
    parts = [f"'{v.label}' {v.size.n:,} ({v.size.binding})" for v in validation]
    return (
        f"Validating the model needs at least {top.size.n:,} people, set by the event '{top.label}' "
        f"(about {top.size.events:.0f} events). By event: " + "; ".join(parts) + "."
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
