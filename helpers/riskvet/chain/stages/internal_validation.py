"""The internal validation stage: how much the derivation procedure flatters itself.

:func:`run` loads the derivation cohort and

* repeats the study's whole derivation procedure in bootstrap replicates
  (:func:`riskvet.bootstrap.validate_internally`, with the study's
  ``internal_validation`` settings, on ``compute.n_jobs`` local workers or on
  the dask.distributed scheduler at ``compute.scheduler``);
* when ``internal_validation.cv_repeats > 0``, runs (repeated) k-fold
  cross-validation of the same procedure as a second opinion
  (:func:`riskvet.crossval.cross_validate`);
* saves three figures (optimism per measure, the replicate calibration
  slopes, selection frequency);
* when ``internal_validation.shrink`` is true and the record holds the
  frozen model, writes ``models/<model>_shrunk.json``: coefficients times the
  bootstrap shrinkage factor, thresholds re-estimated;
* writes ``results/internal_validation.json`` (deterministic content: the
  same study, data and package give the same file, whatever n_jobs or
  cluster ran it, and no run time: times are in the record's manifest).

Progress lines are shown only when standard error is a terminal, so an
executed notebook holds none.
"""

from __future__ import annotations

import dataclasses
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import pandas as pd

from ..._jsonable import to_jsonable
from ...validation.bootstrap import InternalValidation, validate_internally, write_shrunken_model
from ...validation.crossval import CrossValidation, cross_validate
from ...intake.data import expand_cohort, load_cohorts
from ...modelling.modelfile import load_model
from ...reporting.sentences.common import judge_change, measure_guide
from ...reporting.sentences.internal_validation import BASE_KEYS, SHOWN_632PLUS, internal_validation_summary, internal_validation_texts

__all__ = ["InternalValidationOutput", "ESTIMATE_COLUMNS", "SHOWN_632PLUS", "crossval_seed", "run"]

#: Headers of the estimates table, in words.
ESTIMATE_COLUMNS = (
    "measure",
    "in the derivation data",
    "expected in new patients (optimism-corrected)",
    "change",
    "expected in new patients compared with the derivation data",
    "change, 2.5th percentile of replicates",
    "change, 97.5th percentile of replicates",
    ".632+ estimate",
    "replicates used",
    "can it be read?",
)


def crossval_seed(seed: int) -> int:
    """The cross-validation seed derived from ``internal_validation.seed``.

    A separate stream, so that the folds are not drawn from the same
    generator states as the bootstrap replicates.
    """
    return int(np.random.SeedSequence([int(seed), 1]).generate_state(1)[0])


@dataclass(frozen=True)
class InternalValidationOutput:
    """What the internal validation stage found and wrote.

    Attributes
    ----------
    validation : InternalValidation
        The bootstrap result.
    crossval : CrossValidation or None
        The cross-validation result, or None when ``cv_repeats`` is 0.
    shrunken_model : str or None
        Path of the shrunken model file relative to the record, or None.
    model_check : str
        Whether the record's frozen model has the terms the procedure selects
        on all data (or why that could not be checked).
    notes : tuple of str
        What was skipped and why.
    figures : dict of str to str
        Figure name -> PNG path relative to the record folder.
    texts : dict of str to str
        Interpreting sentences for the notebook: ``summary``, ``table``
        (the direction of each measure's change), ``estimator_632plus``
        (where the .632+ estimate is shown and why not elsewhere),
        ``optimism_figure``, ``shrinkage``, ``stability``, ``failures``,
        ``crossval``, ``shrunken_model``.

    The reading guide for the page's measures is :attr:`guide`.
    """

    validation: InternalValidation
    crossval: CrossValidation | None
    shrunken_model: str | None
    model_check: str
    notes: tuple[str, ...]
    figures: Mapping[str, str] = field(default_factory=dict)
    texts: Mapping[str, str] = field(default_factory=dict)

    @property
    def summary_sentence(self) -> str:
        return self.texts.get("summary", internal_validation_summary(self.validation))

    def to_frame(self) -> pd.DataFrame:
        """The estimates table, one row per measure, headers in words.

        Columns :data:`ESTIMATE_COLUMNS`: the value in the derivation data
        (apparent), the value expected in new patients (apparent minus
        optimism), the change between them, whether that is better or worse
        for the measure (higher, lower or closer to its ideal, see
        :func:`riskvet.reporting.sentences.common.judge_change`), the central
        95% of the per-replicate change (a spread of replicates, not a
        confidence interval), the .632+ estimate where it is defined
        (:data:`SHOWN_632PLUS`; missing otherwise) and the replicates averaged.
        """
        rows = []
        for e in self.validation.estimates:
            # an unstable estimate is not presented as a corrected value: its spread stays, its reason is given
            shown = float("nan") if e.unstable else e.corrected
            rows.append(dict(zip(ESTIMATE_COLUMNS, (
                e.label, e.apparent, shown, shown - e.apparent,
                judge_change(BASE_KEYS[e.kind], e.apparent, shown) if not e.unstable else "not read: unstable",
                -e.optimism_upper, -e.optimism_lower,
                e.estimate_632plus if e.kind in SHOWN_632PLUS and not e.unstable else float("nan"),
                e.n_replicates, readability(e),
            ))))
        return pd.DataFrame(rows, columns=list(ESTIMATE_COLUMNS))

    def spreads_frame(self) -> pd.DataFrame | None:
        """The replicate spread of the calibration slope and, for a penalised derivation, of the chosen penalty; headers in words."""
        frame = self.validation.spreads_frame()
        if frame.empty:
            return None
        frame = frame.drop(columns="quantity")
        frame.columns = ["quantity", "on all data", "median over replicates", "2.5th percentile of replicates",
                         "97.5th percentile of replicates", "replicates"]
        return frame

    @property
    def guide(self) -> pd.DataFrame:
        """What good looks like for each measure of the page (:func:`~riskvet.reporting.sentences.common.measure_guide`)."""
        keys = [BASE_KEYS[e.kind] if e.kind != "concordance" else e.measure for e in self.validation.estimates]
        return measure_guide(keys, n_levels=self.validation.n_levels)

    def crossval_frame(self) -> pd.DataFrame | None:
        """Cross-validated estimates beside the bootstrap-corrected ones (headers in words), or None."""
        if self.crossval is None:
            return None
        cv = self.crossval.to_frame()[["measure", "label", "apparent", "pooled", "averaged", "averaged_sd"]]
        boot = self.validation.to_frame()[["measure", "corrected"]]
        table = cv.merge(boot, on="measure", how="left").drop(columns="measure")
        table.columns = [
            "measure", "in the derivation data", "cross-validated, pooled held-out predictions",
            "cross-validated, average over folds", "standard deviation over folds", "bootstrap optimism-corrected",
        ]
        return table

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "bootstrap": self.validation.to_dict(),
                "crossval": None if self.crossval is None else self.crossval.to_dict(),
                "shrunken_model": self.shrunken_model,
                "model_check": self.model_check,
                "notes": list(self.notes),
                "figures": dict(self.figures),
                "texts": dict(self.texts),
            }
        )


def readability(e) -> str:
    """Whether a measure's corrected value can be read, in words: ``yes``, ``unstable: ...`` or ``undefined: ...``."""
    if getattr(e, "undefined_reason", ""):
        return f"undefined: {e.undefined_reason}"
    if getattr(e, "unstable", False):
        return f"unstable: {e.unstable_reason}"
    return "yes"


def _model_check(ctx, validation: InternalValidation) -> str:
    if not ctx.model_path.is_file():
        return f"no frozen model at {ctx.model_path.name}; the apparent model was derived here for comparison only"
    model = load_model(ctx.model_path)
    frozen = [t.name for t in model.design.terms]
    if set(frozen) == set(validation.stability.apparent_terms):
        return "the record's frozen model has exactly the terms the procedure selects on all data"
    return (
        f"the record's frozen model has terms {frozen}, but the procedure selects {list(validation.stability.apparent_terms)} "
        "on these data: the validation describes the procedure, not that model"
    )


def _as_shown(validation: InternalValidation) -> InternalValidation:
    """The validation as the page draws it: a .632+ estimate only for the kinds in ``SHOWN_632PLUS``, and no
    corrected value (nor .632+) for an estimate flagged unstable.

    The results file keeps every estimate; the figure and the table leave out
    the ones the page explains are not meaningful.
    """
    nan = float("nan")
    estimates = tuple(
        dataclasses.replace(e, corrected=nan, estimate_632plus=nan) if e.unstable
        else e if e.kind in SHOWN_632PLUS else dataclasses.replace(e, estimate_632plus=nan)
        for e in validation.estimates
    )
    return dataclasses.replace(validation, estimates=estimates)


def _threshold_data(study, cohort) -> tuple[pd.DataFrame, np.ndarray]:
    """The rows the shrunken model's thresholds are re-estimated on: people one row each, or under multiple
    imputation the stacked completed data sets (the same imputations as the derivation's)."""
    if not study.imputing:
        people = expand_cohort(cohort)
        return people.frame, people.y
    from ...imputation.procedure import impute_cohort

    completed = list(impute_cohort(study, cohort))
    return pd.concat(completed, ignore_index=True), np.tile(np.asarray(cohort.y), len(completed))


def _on_terminal() -> bool:
    """Whether standard error is an interactive terminal (False in a notebook kernel, a pipe or a log file)."""
    return bool(getattr(sys.stderr, "isatty", lambda: False)())


def run(ctx) -> InternalValidationOutput:
    """Run the internal validation stage: results JSON, figures, optional shrunken model.

    Parameters
    ----------
    ctx : riskvet.stagekit.StageContext
        The stage's context.

    Returns
    -------
    InternalValidationOutput

    Raises
    ------
    RecordError
        The record already holds this stage's results.
    RiskvetError
        From :func:`riskvet.bootstrap.validate_internally` (too many failed replicates).
    """
    from ...reporting.figures.internal_validation import plot_calibration_slopes, plot_optimism, plot_selection_frequency

    if ctx.results_path.exists():
        ctx.new_path(ctx.results_path)  # raises: records are write-once, checked before any work
    study = ctx.study
    cfg = study.internal_validation
    # with frequency weights the cohort brings them: rows are resampled and dealt to folds, measures are of people
    cohort = load_cohorts(study).derivation
    n_jobs = study.compute.n_jobs
    # A progress bar only on a terminal: inside a notebook it would become an
    # output of the record (with a run time), and the times belong to the
    # manifest, not the results.
    progress = _on_terminal()
    validation = validate_internally(study, cohort, n_boot=cfg.n_boot, seed=cfg.seed, n_jobs=n_jobs, progress=progress)
    crossval = None
    notes: list[str] = []
    if cfg.cv_repeats > 0:
        crossval = cross_validate(study, cohort, n_folds=cfg.cv_folds, n_repeats=cfg.cv_repeats,
                                  seed=crossval_seed(cfg.seed), n_jobs=n_jobs, progress=progress)

    shrunk: str | None = None
    if cfg.shrink:
        factor = validation.shrinkage.bootstrap
        if not ctx.model_path.is_file():
            notes.append(f"internal_validation.shrink is on but the record holds no frozen model at {ctx.model_path.name}")
        elif not (np.isfinite(factor) and 0 < factor < 2):
            notes.append(f"the bootstrap shrinkage factor {factor!r} is not usable")
        elif not load_model(ctx.model_path).proportional:
            notes.append("uniform shrinkage is written for proportional models only; the frozen model has a slope per cut")
        else:
            target = ctx.new_path(ctx.models_dir / f"{ctx.model_path.stem}_shrunk.json")
            frame, y = _threshold_data(study, cohort)
            path = write_shrunken_model(
                ctx.model_path, factor=factor, frame=frame, y=y, path=target,
                method=f"bootstrap calibration slope ({validation.n_succeeded} replicates, seed {validation.seed})",
            )
            shrunk = Path(path).resolve().relative_to(ctx.record_dir).as_posix()

    figures: dict[str, str] = {}

    def save(name: str, fig) -> None:
        ctx.save_figure(fig, name)
        figures[name] = (ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir).as_posix()

    save("optimism", plot_optimism(_as_shown(validation)))
    save("calibration_slopes", plot_calibration_slopes(validation))
    save("selection_frequency", plot_selection_frequency(validation.stability))

    check = _model_check(ctx, validation)
    out = InternalValidationOutput(
        validation=validation,
        crossval=crossval,
        shrunken_model=shrunk,
        model_check=check,
        notes=tuple(notes),
        figures=figures,
        texts=internal_validation_texts(validation, crossval, shrunk, notes, check),
    )
    ctx.write_results(out.to_dict())
    return out
