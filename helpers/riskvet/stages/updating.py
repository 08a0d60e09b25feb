"""The updating stage: update the frozen model on one validation cohort.

:func:`run` fits the whole updating hierarchy on the cohort named by
``updating.cohort`` (the first validation cohort by default), chooses among
the updates by the closed testing procedure at ``updating.alpha``
(:func:`riskvet.update.update_model`), writes every update as a new model
file into the record's ``models/`` folder (never overwriting one), and
writes ``results/updating.json`` with every test, the choice, the
performance before and after, and the figure.

Performance of an update on the data that fitted it is optimistic; the stage
says so in its results and its notebook, and adds bootstrap-corrected
figures for the chosen update (``external_validation.n_boot`` replicates,
seed ``external_validation.seed``, repeating the whole procedure in each).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import pandas as pd

from .._jsonable import to_jsonable
from ..data import load_cohorts
from ..errors import StudyError, problem
from ..modelfile import load_model, save_model
from ..study import Study
from ..update import METHOD_LABELS, UpdateResult, update_model
from .external_validation import figure_name, label_slug

__all__ = ["UpdatingOutput", "run", "update_study_model"]

_CAUTION = (
    "Statistical evaluation is not clearance for clinical use: local validation, governance and "
    "licensed clinical judgement decide whether a model is used."
)


@dataclass(frozen=True)
class UpdatingOutput:
    """Everything the updating stage did.

    Attributes
    ----------
    result : UpdateResult
        Every update, the closed test and the performance.
    model_files : dict of str to dict
        Method -> ``{"path": relative to the record, "sha256": digest}`` of
        the model file written for it.
    figures : dict of str to str
        Figure name -> PNG path relative to the record.
    texts : dict of str to str
        One interpreting paragraph per notebook table or figure: ``choice``,
        ``tests``, ``performance``, ``optimism``, ``models``, ``coefficients``,
        ``caution``.
    """

    result: UpdateResult = field(repr=False)
    model_files: Mapping[str, Mapping[str, str]]
    figures: Mapping[str, str]
    texts: Mapping[str, str]

    def tests_frame(self) -> pd.DataFrame:
        """Every likelihood-ratio test of the closed procedure."""
        return self.result.closed_test.to_frame()

    def fits_frame(self) -> pd.DataFrame:
        """One row per update with its model file."""
        table = self.result.to_frame()
        table["model_file"] = [self.model_files.get(m, {}).get("path", "") for m in table["method"]]
        return table

    def performance_frame(self) -> pd.DataFrame:
        """Measures on the updating data: one column per model (apparent), and the chosen model's corrected value."""
        t = self.result.performance.to_frame()
        chosen = self.result.closed_test.chosen
        rows = t[t["method"] == "original"][["measure", "cut"]].reset_index(drop=True)
        for method in self.result.fits:
            rows[method] = t.loc[t["method"] == method, "apparent"].to_numpy()
        rows[f"{chosen} (bootstrap-corrected)"] = t.loc[t["method"] == chosen, "corrected"].to_numpy()
        return rows

    def coefficients_frame(self) -> pd.DataFrame:
        """Thresholds and coefficients of the original and the chosen model side by side."""
        table = self.result.fits["original"].model.coefficient_table().rename(columns={"estimate": "original"})
        chosen_fit = self.result.chosen
        if chosen_fit.method != "original":
            chosen = chosen_fit.model.coefficient_table().rename(columns={"estimate": chosen_fit.method})
            table = table.merge(chosen, on="parameter", how="outer", sort=False)
        return table

    def to_frame(self) -> pd.DataFrame:
        return self.fits_frame()

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "result": self.result.to_dict(),
                "model_files": {k: dict(v) for k, v in self.model_files.items()},
                "figures": dict(self.figures),
                "texts": dict(self.texts),
            }
        )


def update_study_model(study: Study, model, cohorts) -> UpdateResult:
    """Run :func:`riskvet.update.update_model` with the study's settings on its updating cohort."""
    label = study.updating_cohort
    if label is None or label not in cohorts.validation:
        raise StudyError(problem("updating.cohort", allowed=f"a validation cohort label among {list(cohorts.validation)}", received=label))
    cohort = cohorts.validation[label]
    ev = study.external_validation
    return update_model(
        model, cohort.frame, cohort.y, alpha=study.updating.alpha, new_predictors=dict(study.updating.new_predictors),
        cohort=label, n_boot=ev.n_boot, seed=ev.seed, n_jobs=study.compute.n_jobs, scheduler=study.compute.scheduler,
    )


def _texts(result: UpdateResult, files: Mapping[str, Mapping[str, str]]) -> dict[str, str]:
    ct = result.closed_test
    chosen = result.chosen
    texts = {"caution": _CAUTION, "choice": result.summary()}
    reached = [t for t in ct.tests if t.reached]
    texts["tests"] = (
        f"{len(ct.tests)} likelihood-ratio tests at alpha = {ct.alpha:g}; the procedure used {len(reached)} of them "
        f"(the rest are shown for completeness). Each test asks whether the simpler model fits significantly worse than "
        f"{ct.most_extensive}, after the first has shown that the original fits worse than it."
        if ct.tests[0].significant
        else f"The first test found no evidence that {ct.most_extensive} fits better than the original model, so "
        "no update is needed on these data; the other tests are shown for completeness."
    )
    perf = result.performance.to_frame()

    def value(method: str, measure: str, cut: int | None, column: str = "apparent") -> float:
        rows = perf[(perf["method"] == method) & (perf["measure"] == measure)]
        rows = rows[rows["cut"].isna()] if cut is None else rows[rows["cut"] == cut]
        return float(rows[column].iloc[0]) if len(rows) else float("nan")

    K = len(result.fits["original"].model.levels)
    parts = []
    if chosen.method == "original":
        texts["performance"] = (
            "The original model is kept, so its performance on these data is the external validation's: "
            "the columns of the other updates show what each would have changed, on the data that fitted it."
        )
        texts["optimism"] = f"Warning: {result.performance.note}"
        texts["models"] = (
            f"Every update was still written as a new model file whose provenance names its parent model "
            f"({result.parent_sha256[:12]}...), the method and the data it was updated on ({result.cohort}, "
            f"{result.data_sha256[:12]}...), so that a reviewer can inspect them; the closed test chose none of them."
        )
        texts["coefficients"] = "The original model is kept; its thresholds and coefficients are unchanged."
        return texts
    for j in range(K - 1):
        level = result.fits["original"].model.levels[j + 1]
        parts.append(
            f"For Y >= {level}, calibration-in-the-large moves from {value('original', 'calibration_intercept', j):+.2f} "
            f"to {value(chosen.method, 'calibration_intercept', j):+.2f} and the slope from "
            f"{value('original', 'calibration_slope', j):.2f} to {value(chosen.method, 'calibration_slope', j):.2f}."
        )
    parts.append(
        f"The average dichotomised C is {value('original', 'average_cut_auc', None):.3f} before and "
        f"{value(chosen.method, 'average_cut_auc', None):.3f} after."
    )
    texts["performance"] = " ".join(parts)
    if result.performance.n_boot and chosen.method != "original":
        texts["optimism"] = (
            f"Warning: {result.performance.note} With {result.performance.n_boot} bootstrap replicates repeating the whole "
            f"procedure, the optimism-corrected average dichotomised C of the chosen update is "
            f"{value(chosen.method, 'average_cut_auc', None, 'corrected'):.3f}."
        )
    else:
        texts["optimism"] = f"Warning: {result.performance.note}"
    texts["models"] = (
        f"Every update was written as a new model file whose provenance names its parent model "
        f"({result.parent_sha256[:12]}...), the method and the data it was updated on ({result.cohort}, "
        f"{result.data_sha256[:12]}...). The chosen file is {files.get(chosen.method, {}).get('path', 'the original model')}."
    )
    texts["coefficients"] = (
        f"{METHOD_LABELS[chosen.method].capitalize()}: thresholds and coefficients of the chosen model beside the original. "
        "A recalibration keeps every coefficient's ratio to the others; a revision or extension re-estimates each one."
    )
    return texts


def run(ctx) -> UpdatingOutput:
    """Run the updating stage: model files, results JSON and figure.

    Parameters
    ----------
    ctx : riskvet.stagekit.StageContext
        The stage's context; the model updated is ``ctx.model_path``.

    Returns
    -------
    UpdatingOutput

    Raises
    ------
    RecordError
        The record already holds this stage's results or one of its model files.
    """
    from ..plots_external import plot_update_calibration

    if ctx.results_path.exists():
        ctx.new_path(ctx.results_path)  # raises: records are write-once, checked before any work
    study = ctx.study
    model = load_model(ctx.model_path)
    cohorts = load_cohorts(study)
    result = update_study_model(study, model, cohorts)

    stem = ctx.model_path.stem
    targets = {
        method: ctx.models_dir / f"{stem}_{label_slug(result.cohort)}_{method}.json"
        for method in result.fits
        if method != "original"
    }
    for path in targets.values():
        ctx.new_path(path)  # every file checked before any is written
    files = {}
    for method, path in targets.items():
        saved = save_model(result.fits[method].model, path)
        files[method] = {"path": saved.resolve().relative_to(ctx.record_dir).as_posix(), "sha256": result.fits[method].model.digest()}

    figures: dict[str, str] = {}
    name = figure_name("update_calibration", result.cohort)
    ctx.save_figure(plot_update_calibration(result), name)
    figures[name] = (ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir).as_posix()

    out = UpdatingOutput(result=result, model_files=files, figures=figures, texts=_texts(result, files))
    ctx.write_results(out.to_dict())
    return out
