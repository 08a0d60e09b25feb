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

import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import pandas as pd

from ..._jsonable import to_jsonable
from ...validation.bootstrap import InternalValidation, validate_internally, write_shrunken_model
from ...validation.crossval import CrossValidation, cross_validate
from ...intake.data import load_cohorts
from ...modelling.modelfile import load_model
from ...reporting.sentences.internal_validation import internal_validation_summary, internal_validation_texts

__all__ = ["InternalValidationOutput", "crossval_seed", "run"]

#: Columns of the concise estimates table shown in the notebook.
_TABLE_COLUMNS = {
    "label": "measure",
    "apparent": "apparent",
    "optimism": "optimism",
    "corrected": "optimism-corrected",
    "estimate_632plus": ".632+",
    "optimism_lower": "optimism 2.5%",
    "optimism_upper": "optimism 97.5%",
    "n_replicates": "replicates",
}


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
        Interpreting sentences for the notebook.
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
        """Concise estimates table: one row per measure, rounded for reading."""
        table = self.validation.to_frame()[list(_TABLE_COLUMNS)].rename(columns=_TABLE_COLUMNS)
        numeric = [c for c in table.columns if c not in ("measure", "replicates")]
        table[numeric] = table[numeric].round(3)
        return table

    def crossval_frame(self) -> pd.DataFrame | None:
        """Cross-validated estimates beside the bootstrap-corrected ones, or None."""
        if self.crossval is None:
            return None
        cv = self.crossval.to_frame()[["measure", "label", "apparent", "pooled", "averaged", "averaged_sd"]]
        boot = self.validation.to_frame()[["measure", "corrected"]].rename(columns={"corrected": "bootstrap corrected"})
        table = cv.merge(boot, on="measure", how="left").drop(columns="measure").rename(
            columns={"label": "measure", "pooled": "CV pooled", "averaged": "CV averaged", "averaged_sd": "CV fold SD"}
        )
        numeric = [c for c in table.columns if c != "measure"]
        table[numeric] = table[numeric].round(3)
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
    cohort = load_cohorts(study).derivation
    n_jobs = study.compute.n_jobs
    # A progress bar only on a terminal: inside a notebook it would become an
    # output of the record (with a run time), and the times belong to the
    # manifest, not the results.
    progress = _on_terminal()
    validation = validate_internally(study, cohort, n_boot=cfg.n_boot, seed=cfg.seed, n_jobs=n_jobs, progress=progress)
    crossval = None
    if cfg.cv_repeats > 0:
        crossval = cross_validate(study, cohort, n_folds=cfg.cv_folds, n_repeats=cfg.cv_repeats,
                                  seed=crossval_seed(cfg.seed), n_jobs=n_jobs, progress=progress)

    notes: list[str] = []
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
            path = write_shrunken_model(
                ctx.model_path, factor=factor, frame=cohort.frame, y=cohort.y, path=target,
                method=f"bootstrap calibration slope ({validation.n_succeeded} replicates, seed {validation.seed})",
            )
            shrunk = Path(path).resolve().relative_to(ctx.record_dir).as_posix()

    figures: dict[str, str] = {}

    def save(name: str, fig) -> None:
        ctx.save_figure(fig, name)
        figures[name] = (ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir).as_posix()

    save("optimism", plot_optimism(validation))
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
