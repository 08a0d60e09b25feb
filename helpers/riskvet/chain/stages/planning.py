"""The planning stage: how many people the study needs, and whether it has them.

:func:`plan` computes, from the study's ``planning`` section and the outcome
proportions of the derivation cohort (or proportions given explicitly):

* the minimum n to develop the model (:func:`riskvet.planning.development_size`
  for a binary outcome, :func:`riskvet.planning.ordinal_development_size`
  for an ordered one);
* the minimum n to validate it externally at each event cut
  (:func:`riskvet.planning.validation_size`), when an anticipated C
  statistic is given;
* a protocol paragraph (:func:`riskvet.planning.justification_text`);
* a comparison of each planned n with the analysed size of the derivation
  and validation cohorts.

:func:`run` does this for a stage notebook and writes ``results/planning.json``;
:func:`plan_text` renders the same numbers as plain text for a terminal.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import pandas as pd

from ..._jsonable import to_jsonable
from ...intake.data import Cohorts, load_cohorts
from ...errors import DataError, StudyError, problem
from ...planning.samplesize import (
    DevelopmentSize,
    OrdinalDevelopmentSize,
    ValidationSize,
    development_size,
    justification_text,
    ordinal_development_size,
    validation_size,
)
from ...intake.study import Study
from ...reporting.labels import cut_label
from ...reporting.sentences.planning import (
    checks_sentence,
    development_asks,
    development_events_sentence,
    development_protects,
    development_sentence,
    validation_protects,
    validation_sentence,
)

__all__ = ["CutValidationSize", "CohortCheck", "PlanningOutput", "plan", "plan_text", "run"]


@dataclass(frozen=True)
class CutValidationSize:
    """The validation sample size for one event cut.

    Attributes
    ----------
    cut : int
        Cut j: the event is Y > j.
    label : str
        The event in words (``"observed or higher"``).
    size : ValidationSize
        :func:`riskvet.planning.validation_size` for this cut.
    """

    cut: int
    label: str
    size: ValidationSize

    def to_dict(self) -> dict[str, Any]:
        return {"cut": self.cut, "label": self.label, "size": self.size.to_dict()}


@dataclass(frozen=True)
class CohortCheck:
    """Is a cohort as large as the plan asks?

    Attributes
    ----------
    cohort : str
        ``"derivation"`` or a validation cohort's label.
    purpose : str
        ``"development"`` or ``"validation"``.
    cut : int or None
        The event cut of a validation requirement; for development, the
        binding cut of an ordered outcome (None for a binary outcome).
    label : str
        The event in words.
    n_required : int
        Planned minimum n.
    n_available : int
        Analysed rows of the cohort (complete cases).
    n_met : bool
        ``n_available >= n_required``.
    events_planned : float
        Events expected at ``n_required`` with the planning proportion.
    events_available : int
        Events (Y > cut) among the analysed rows.
    events_met : bool
        ``events_available >= events_planned``: false when the cohort's event
        proportion is lower than the one planned for, even if n is met.
    """

    cohort: str
    purpose: str
    cut: int | None
    label: str
    n_required: int
    n_available: int
    n_met: bool
    events_planned: float
    events_available: int
    events_met: bool

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(dict(self.__dict__))


@dataclass(frozen=True)
class PlanningOutput:
    """Everything the planning stage found.

    Attributes
    ----------
    outcome_type : str
        ``"binary"`` or ``"ordinal"``.
    levels : tuple of str
        Outcome levels coded 0..K-1.
    proportions : tuple of float
        Planning proportion of each level.
    proportion_source : str
        Where the proportions came from, in words.
    inputs : dict
        The study's ``planning`` section.
    development : DevelopmentSize or OrdinalDevelopmentSize
        The development requirement.
    validation : tuple of CutValidationSize
        The validation requirement at each cut (empty without an anticipated C).
    checks : tuple of CohortCheck
        Planned against available n (empty when no data were read).
    justification : str
        Protocol paragraph: development, then validation.
    notes : tuple of str
        Choices made and parts skipped, each in one sentence.
    texts : dict of str to str
        One interpreting sentence per notebook table: ``"proportions"``,
        ``"development"``, ``"validation"``, ``"checks"``.
    """

    outcome_type: str
    levels: tuple[str, ...]
    proportions: tuple[float, ...]
    proportion_source: str
    inputs: Mapping[str, Any]
    development: DevelopmentSize | OrdinalDevelopmentSize
    validation: tuple[CutValidationSize, ...]
    checks: tuple[CohortCheck, ...]
    justification: str
    notes: tuple[str, ...]
    texts: Mapping[str, str]

    @property
    def n_development(self) -> int:
        """Minimum n to develop the model."""
        return self.development.n

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready content of the stage's results file."""
        return to_jsonable(
            {
                "outcome_type": self.outcome_type,
                "levels": list(self.levels),
                "proportions": list(self.proportions),
                "proportion_source": self.proportion_source,
                "inputs": dict(self.inputs),
                "development": self.development.to_dict(),
                "n_development": self.n_development,
                "validation": [v.to_dict() for v in self.validation],
                "checks": [c.to_dict() for c in self.checks],
                "justification": self.justification,
                "notes": list(self.notes),
                "texts": dict(self.texts),
            }
        )

    def _development_long(self) -> pd.DataFrame:
        """Development criteria, tidy: one row per criterion (and cut), internal names (terminal text, :meth:`to_frame`)."""
        frame = self.development.to_frame()
        if "cut" in frame.columns:
            frame.insert(1, "event", [cut_label(self.levels, int(j), binary=False) for j in frame["cut"]])
        return frame

    def _validation_long(self) -> pd.DataFrame:
        """Validation criteria, tidy: one row per cut and criterion."""
        parts = []
        for v in self.validation:
            f = v.size.to_frame()
            f.insert(0, "event", v.label)
            f.insert(0, "cut", v.cut)
            f.insert(2, "prevalence", v.size.prevalence)
            parts.append(f)
        if not parts:
            return pd.DataFrame(columns=["cut", "event", "prevalence", "name", "target", "n_exact", "n", "events", "ci_width", "binding"])
        return pd.concat(parts, ignore_index=True)

    def _development_cuts(self) -> list[tuple[str, DevelopmentSize]]:
        if isinstance(self.development, OrdinalDevelopmentSize):
            return [(cut_label(self.levels, j, binary=False), c) for j, c in enumerate(self.development.cuts)]
        return [(cut_label(self.levels, 0, binary=True), self.development)]

    def development_frame(self) -> pd.DataFrame:
        """What each development criterion protects against, and the people it needs for each outcome.

        One row per criterion, in words (what it protects against, what it
        asks for); one column of people needed per outcome (each cut of an
        ordered outcome); the last column says which criterion and outcome
        set the required size.  Events, R² and the shrinkage the optimism
        criterion needs are in :meth:`development_events_frame`.
        """
        cuts = self._development_cuts()
        first = cuts[0][1]
        rows = []
        for i, name in enumerate(c.name for c in first.criteria):
            row = {"protects against": development_protects(name), "asks for": development_asks(name, first)}
            for label, size in cuts:
                row[f"people needed for {label}"] = size.criteria[i].n
            binding = [label for label, size in cuts if size.binding == name and size.n == self.development.n]
            row["sets the required size"] = f"yes, for {binding[0]}" if binding else "no"
            rows.append(row)
        return pd.DataFrame(rows)

    def development_events_frame(self) -> pd.DataFrame:
        """For each outcome (a column each): its proportion, the anticipated R², and the people and events its largest criterion needs.

        Rows are the quantities in words; which criterion needs the people
        and where the R² comes from are in ``texts["development_events"]``.
        """
        cuts = self._development_cuts()
        quantities = {
            "outcome proportion": lambda d: d.prevalence,
            "anticipated Cox–Snell R²": lambda d: d.r2_cs,
            "largest possible Cox–Snell R²": lambda d: d.max_r2_cs,
            "anticipated Nagelkerke R²": lambda d: d.r2_nagelkerke,
            "shrinkage the optimism criterion needs": lambda d: d.shrinkage_for_optimism,
            "people needed (largest criterion)": lambda d: d.n,
            "events expected": lambda d: d.events,
            "events per candidate parameter": lambda d: d.events_per_parameter,
        }
        frame = pd.DataFrame({"quantity": list(quantities)})
        for label, size in cuts:
            frame[f"for {label}"] = [float(get(size)) for get in quantities.values()]
        return frame

    def validation_frame(self) -> pd.DataFrame:
        """What each validation criterion protects against, and the people it needs for each outcome (empty without validation sizes)."""
        if not self.validation:
            return pd.DataFrame(columns=["protects against", "asks for"])
        top = max(self.validation, key=lambda v: (v.size.n, -v.cut))
        rows = []
        for i, criterion in enumerate(self.validation[0].size.criteria):
            row = {"protects against": validation_protects(criterion.name), "asks for": criterion.target}
            for v in self.validation:
                row[f"people needed for {v.label}"] = v.size.criteria[i].n
            row["sets the required size"] = f"yes, for {top.label}" if top.size.binding == criterion.name else "no"
            rows.append(row)
        return pd.DataFrame(rows)

    def validation_events_frame(self) -> pd.DataFrame:
        """For each outcome (a column each): its proportion, the anticipated C, and the people and events its largest criterion needs."""
        quantities = {
            "outcome proportion": lambda v: v.size.prevalence,
            "anticipated C statistic": lambda v: v.size.c_statistic,
            "people needed (largest criterion)": lambda v: v.size.n,
            "events expected": lambda v: v.size.events,
        }
        frame = pd.DataFrame({"quantity": list(quantities)})
        for v in self.validation:
            frame[f"for {v.label}"] = [float(get(v)) for get in quantities.values()]
        return frame

    def checks_frame(self) -> pd.DataFrame:
        """Planned against available people and events per cohort, in words."""
        rows = [{
            "cohort": c.cohort, "for": c.purpose, "outcome": c.label,
            "people needed": c.n_required, "people available": c.n_available, "enough people": c.n_met,
            "events planned": c.events_planned, "events available": c.events_available, "enough events": c.events_met,
        } for c in self.checks]
        return pd.DataFrame(rows, columns=["cohort", "for", "outcome", "people needed", "people available", "enough people",
                                           "events planned", "events available", "enough events"])

    def to_frame(self) -> pd.DataFrame:
        """Every criterion, development and validation, stacked (tidy, internal names: for export, not for a page)."""
        dev = self._development_long()
        if "cut" not in dev.columns:
            dev.insert(0, "cut", 0)
        dev.insert(0, "purpose", "development")
        val = self._validation_long()
        val.insert(0, "purpose", "validation")
        keep = ["purpose", "cut", "prevalence", "name", "target", "n", "events", "binding"]
        return pd.concat([dev[keep], val[keep]], ignore_index=True)


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------

def _cohort_proportions(study: Study, cohorts: Cohorts) -> tuple[tuple[float, ...], str]:
    d = cohorts.derivation
    levels = study.outcome.ordered_levels
    counts = [int(d.outcome_counts.get(lv, 0)) for lv in levels]
    empty = [lv for lv, c in zip(levels, counts) if c == 0]
    if empty:
        raise DataError(
            problem(
                f"planning: outcome column {study.outcome.column!r} of the derivation cohort ({d.source})",
                allowed=f"at least one analysed row in every level {list(levels)} to plan from its proportions",
                received=f"no rows in {empty}",
            )
        )
    total = sum(counts)
    return tuple(c / total for c in counts), f"derivation cohort, {total:,} analysed rows, complete cases"


def _given_proportions(study: Study, proportions: Any) -> tuple[float, ...]:
    levels = study.outcome.ordered_levels
    try:
        values = tuple(float(v) for v in proportions)
    except (TypeError, ValueError):
        values = ()
    if len(values) != len(levels) or any(not 0 < v < 1 for v in values) or abs(sum(values) - 1) > 1e-6:
        raise StudyError(
            problem(
                "plan(proportions)",
                allowed=f"{len(levels)} proportions, one per level {list(levels)} in that order, each in (0, 1), summing to 1",
                received=proportions,
            )
        )
    return values


def _events(counts: Mapping[str, int], levels: Sequence[str], cut: int) -> int:
    return int(sum(int(counts.get(lv, 0)) for lv in levels[cut + 1 :]))


def _development(study: Study, proportions: tuple[float, ...]) -> DevelopmentSize | OrdinalDevelopmentSize:
    p = study.planning
    # A Cox–Snell R² is the criteria's own input; a C statistic is only a way to anticipate it.
    r2 = p.anticipated_r2_cs
    c = None if r2 is not None else p.anticipated_c
    if study.outcome.type == "binary":
        return development_size(n_parameters=p.n_parameters, prevalence=proportions[1], r2_cs=r2, c_statistic=c, shrinkage=p.shrinkage)
    return ordinal_development_size(n_parameters=p.n_parameters, proportions=proportions, r2_cs=r2, c_statistic=c, shrinkage=p.shrinkage)


def _validation(study: Study, proportions: tuple[float, ...]) -> tuple[CutValidationSize, ...]:
    p = study.planning
    levels = study.outcome.ordered_levels
    binary = study.outcome.type == "binary"
    out = []
    for j in range(len(levels) - 1):
        size = validation_size(
            prevalence=float(sum(proportions[j + 1 :])),
            c_statistic=p.anticipated_c,
            oe_ci_width=p.validation_oe_ci_width,
            slope_ci_width=p.validation_slope_ci_width,
            c_ci_width=p.validation_c_ci_width,
        )
        out.append(CutValidationSize(cut=j, label=cut_label(levels, j, binary=binary), size=size))
    return tuple(out)


def _checks(study: Study, cohorts: Cohorts, development, validation) -> tuple[CohortCheck, ...]:
    levels = study.outcome.ordered_levels
    binary = study.outcome.type == "binary"
    out = []
    d = cohorts.derivation
    if isinstance(development, OrdinalDevelopmentSize):
        cut = development.binding_cut
        planned = development.cuts[cut].events
    else:
        cut = 0
        planned = development.events
    available = _events(d.outcome_counts, levels, cut)
    out.append(
        CohortCheck(
            cohort=d.label, purpose="development", cut=None if binary else cut, label=cut_label(levels, cut, binary=binary),
            n_required=development.n, n_available=d.n_analysed, n_met=d.n_analysed >= development.n,
            events_planned=float(planned), events_available=available, events_met=available >= planned,
        )
    )
    for label, cohort in cohorts.validation.items():
        for v in validation:
            available = _events(cohort.outcome_counts, levels, v.cut)
            out.append(
                CohortCheck(
                    cohort=label, purpose="validation", cut=v.cut, label=v.label,
                    n_required=v.size.n, n_available=cohort.n_analysed, n_met=cohort.n_analysed >= v.size.n,
                    events_planned=float(v.size.events), events_available=available, events_met=available >= v.size.events,
                )
            )
    return tuple(out)


# --------------------------------------------------------------------------
# public functions
# --------------------------------------------------------------------------

def plan(study: Study, *, cohorts: Cohorts | None = None, proportions: Sequence[float] | None = None) -> PlanningOutput:
    """Sample-size plan of a study, compared with its cohorts.

    Parameters
    ----------
    study : Study
        A study with a ``planning`` section.
    cohorts : Cohorts, optional
        The study's data (:func:`riskvet.data.load_cohorts`); read when
        omitted, unless ``proportions`` is given and the derivation file does
        not exist yet (planning before data collection).
    proportions : sequence of float, optional
        Anticipated proportion of each outcome level, in the study's level
        order (for a binary outcome: non-event, event).  Default: the
        proportions among the derivation cohort's analysed rows.

    Returns
    -------
    PlanningOutput

    Raises
    ------
    StudyError
        No ``planning`` section, or bad ``proportions``, or planning inputs the
        criteria cannot use (e.g. an R² above its maximum).
    DataError
        From reading the data, or an outcome level without any analysed row.

    Notes
    -----
    Development: the criteria of Riley et al. (2019, 2020), applied at every
    cut of an ordered outcome and the largest taken.  When the study gives
    both ``anticipated_r2_cs`` and ``anticipated_c``, the R² is used for
    development and the C statistic for validation.  Validation: the
    criteria of Riley et al. (2021) at every cut, with the study's target
    interval widths, O/E 1 and calibration slope 1 anticipated, and the same
    anticipated C at every cut.

    References
    ----------
    Riley RD, Ensor J, Snell KIE, et al. Calculating the sample size required
    for developing a clinical prediction model. BMJ 2020; 368: m441.

    Riley RD, Debray TPA, Collins GS, et al. Minimum sample size for external
    validation of a clinical prediction model with a binary outcome.
    Statistics in Medicine 2021; 40(19): 4230–4251.
    """
    if not isinstance(study, Study):
        raise StudyError(problem("plan(study)", allowed="a Study from load_study", received=type(study).__name__))
    if study.planning is None:
        raise StudyError(problem("planning", allowed="a planning section with at least n_parameters", received="no planning section"))
    notes = []
    if proportions is None:
        cohorts = load_cohorts(study) if cohorts is None else cohorts
        props, source = _cohort_proportions(study, cohorts)
    else:
        props = _given_proportions(study, proportions)
        source = "given"
        if cohorts is None:
            if study.data.derivation.is_file():
                cohorts = load_cohorts(study)
            else:
                notes.append(f"The derivation file {study.data.derivation.name} does not exist yet, so the plan is not compared with data.")
    p = study.planning
    if p.anticipated_r2_cs is not None and p.anticipated_c is not None:
        notes.append("Both an anticipated Cox–Snell R² and a C statistic are given: the R² is used for development, the C statistic for validation.")
    development = _development(study, props)
    if p.anticipated_c is None:
        validation: tuple[CutValidationSize, ...] = ()
        notes.append("No validation sample size: it needs an anticipated C statistic (planning.anticipated_c).")
    else:
        validation = _validation(study, props)
        notes.append("Validation sizes assume the model is calibrated in the validation population (O/E 1, slope 1) with the anticipated C at every cut, and the same outcome proportions as planned for development.")
    checks = _checks(study, cohorts, development, validation) if cohorts is not None else ()
    levels = study.outcome.ordered_levels
    binary = study.outcome.type == "binary"
    paragraphs = [justification_text(development, levels=None if binary else levels)]
    for v in validation:
        text = justification_text(v.size)
        paragraphs.append(text if binary else f"For the event '{v.label}': {text}")
    return PlanningOutput(
        outcome_type=study.outcome.type,
        levels=tuple(levels),
        proportions=props,
        proportion_source=source,
        inputs=p.model_dump(mode="json"),
        development=development,
        validation=validation,
        checks=checks,
        justification="\n\n".join(paragraphs),
        notes=tuple(notes),
        texts={
            "proportions": "Planning proportions ("
            + source
            + "): "
            + ", ".join(f"{lv} {v:.3f}" for lv, v in zip(levels, props))
            + ".",
            "development": development_sentence(development, levels, binary),
            "validation": validation_sentence(validation),
            "checks": checks_sentence(checks),
            "development_events": development_events_sentence(development, levels, binary),
        },
    )


def plan_text(study: Study, *, proportions: Sequence[float] | None = None) -> str:
    """The plan as plain text for a terminal (``riskvet plan STUDY.yaml``).

    Parameters
    ----------
    study : Study
        A study with a ``planning`` section.
    proportions : sequence of float, optional
        As in :func:`plan`.

    Returns
    -------
    str
        The outcome proportions used, the development and validation
        requirements, the comparison with the cohorts, the notes and the
        protocol paragraph.
    """
    out = plan(study, proportions=proportions)
    width = 160
    with pd.option_context("display.max_rows", 200, "display.max_columns", 20, "display.width", width):
        long = out._development_long()
        dev = long[[c for c in ("cut", "event", "name", "n", "events", "events_per_parameter", "binding") if c in long.columns]]
        blocks = [
            f"Sample-size plan for {study.study.name}",
            out.texts["proportions"],
            "",
            "Development",
            dev.to_string(index=False, float_format=lambda x: f"{x:.1f}"),
            out.texts["development"],
            "",
            "Validation",
        ]
        if out.validation:
            val = out._validation_long()[["cut", "event", "name", "n", "events", "binding"]]
            blocks.append(val.to_string(index=False, float_format=lambda x: f"{x:.1f}"))
        blocks += [out.texts["validation"], "", "Cohorts"]
        if out.checks:
            chk = pd.DataFrame([c.to_dict() for c in out.checks])[["cohort", "purpose", "label", "n_required", "n_available", "n_met", "events_planned", "events_available", "events_met"]]
            blocks.append(chk.to_string(index=False, float_format=lambda x: f"{x:.0f}"))
        blocks.append(out.texts["checks"])
    if out.notes:
        blocks += ["", "Notes"] + [f"- {n}" for n in out.notes]
    blocks += ["", "Protocol text", out.justification]
    return "\n".join(blocks) + "\n"


def run(ctx) -> PlanningOutput:
    """Run the planning stage: compute the plan and write ``results/planning.json``.

    Parameters
    ----------
    ctx : riskvet.stagekit.StageContext
        The stage's context.

    Returns
    -------
    PlanningOutput

    Raises
    ------
    RecordError
        The record already holds this stage's results.
    """
    if ctx.results_path.exists():
        ctx.new_path(ctx.results_path)  # raises: records are write-once, checked before any work
    out = plan(ctx.study)
    ctx.write_results(out.to_dict())
    return out
