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

from ..._jsonable import to_jsonable
from ...intake.data import load_cohorts
from ...errors import RiskvetError, StudyError, problem
from ...modelling.modelfile import load_model, save_model
from ...intake.study import Study
from ...validation.external import measure_label
from ...validation.update import UpdateResult, method_name, update_model
from ...modelling.term_effects import column_label
from ...reporting.sentences.common import measure_guide
from ...reporting.sentences.external_validation import outcome_words
from ...reporting.sentences.updating import CORRECTED_COLUMN, step_decision, updating_texts
from .external_validation import figure_name, label_slug

__all__ = ["UpdatingOutput", "refuse_weights", "run", "update_study_model"]

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
        ``tests``, ``performance``, ``optimism``, ``calibration``, ``models``,
        ``coefficients``, ``caution``.
    """

    result: UpdateResult = field(repr=False)
    model_files: Mapping[str, Mapping[str, str]]
    figures: Mapping[str, str]
    texts: Mapping[str, str]

    @property
    def _levels(self) -> tuple[str, ...]:
        return tuple(self.result.fits["original"].model.levels)

    def _name(self, method: str) -> str:
        return method_name(method, binary=len(self._levels) == 2)

    def tests_frame(self) -> pd.DataFrame:
        """Every likelihood-ratio test of the closed procedure, in its order, with whether the procedure reached it.

        The procedure stops at the first step that is not significant (or
        at the first test, when the most extensive update is no better than
        the original); later tests are computed but marked ``not reached``.
        """
        ct = self.result.closed_test
        rows = []
        for i, t in enumerate(ct.tests):
            rows.append({
                "step": i + 1, "simpler model": self._name(t.simpler), "tested against": self._name(t.extensive),
                "likelihood-ratio statistic": t.statistic, "degrees of freedom": t.df, "p-value": t.p,
                "reached by the procedure": "reached" if t.reached else "not reached",
                "decision": step_decision(ct, i, binary=len(self._levels) == 2),
            })
        return pd.DataFrame(rows)

    def fits_frame(self) -> pd.DataFrame:
        """One row per update: name, what it re-estimates, parameters estimated, log-likelihood, chosen, model file."""
        table = self.result.to_frame()
        return pd.DataFrame({
            "update": [self._name(m) for m in table["method"]], "what it re-estimates": table["label"],
            "parameters estimated": table["n_params"], "log-likelihood": table["loglik"], "chosen": table["chosen"].astype(bool),
            "model file": [self.model_files.get(m, {}).get("path") for m in table["method"]],
        })

    def performance_frame(self) -> pd.DataFrame:
        """Measures on the updating data: one column per model (apparent), and the bootstrap-corrected value.

        Rows are named in words (``measure``, ``outcome`` in the user's level
        labels); for a binary outcome the measures of an ordered outcome,
        which equal the C statistic, are left out.  The corrected column is
        the chosen update's apparent value minus the optimism of the whole
        updating procedure (see :func:`~riskvet.reporting.sentences.updating.optimism_sentence`).
        """
        t = self.result.performance.to_frame()
        levels = self._levels
        K = len(levels)
        chosen = self.result.closed_test.chosen
        base = t[t["method"] == "original"].reset_index(drop=True)
        cuts = [None if pd.isna(c) else int(c) for c in base["cut"]]
        rows = pd.DataFrame({"measure": [measure_label(m, K) for m in base["measure"]], "outcome": [outcome_words(levels, c) for c in cuts]})
        for method in self.result.fits:
            rows[f"{self._name(method)}, on the updating data"] = t.loc[t["method"] == method, "apparent"].to_numpy()
        if self.result.performance.n_boot:
            rows[CORRECTED_COLUMN] = t.loc[t["method"] == chosen, "corrected"].to_numpy()
        if K == 2:
            rows = rows[~base["measure"].isin(("average_cut_auc", "ordinal_c", "generalised_c")).to_numpy()].reset_index(drop=True)
        return rows

    def coefficients_frame(self) -> pd.DataFrame:
        """Thresholds and coefficients of the original and the chosen model side by side, thresholds named by their cut."""
        table = self.result.fits["original"].model.coefficient_table().rename(columns={"estimate": "original model"})
        chosen_fit = self.result.chosen
        if chosen_fit.method != "original":
            chosen = chosen_fit.model.coefficient_table().rename(columns={"estimate": self._name(chosen_fit.method)})
            table = table.merge(chosen, on="parameter", how="outer", sort=False)
        names = {f"threshold {a}|{b}": f"threshold of {outcome_words(self._levels, j)}"
                 for j, (a, b) in enumerate(zip(self._levels, self._levels[1:]))}
        design, chosen_design = self.result.fits["original"].model.design, chosen_fit.model.design
        words = {c: column_label(design, c) for c in design.columns}
        # an extension adds columns of its own design
        words.update({c: column_label(chosen_design, c) for c in chosen_design.columns if c not in words})
        table["parameter"] = [names.get(p, words.get(p, p)) for p in table["parameter"]]
        return table

    @property
    def guide(self) -> pd.DataFrame:
        """What good looks like for each measure of the performance table."""
        keys = list(dict.fromkeys(self.result.performance.table["measure"]))
        if len(self._levels) == 2:
            keys = [k for k in keys if k not in ("average_cut_auc", "ordinal_c", "generalised_c")]
        return measure_guide(keys, n_levels=len(self._levels))

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


def refuse_weights(study: Study) -> None:
    """Stop the updating stage of a study with frequency weights: updating does not use them yet.

    Refitting the updates on the weighted rows as if each were one person
    would give wrong estimates, tests and intervals, so the stage refuses
    before anything runs.
    """
    column = study.data.weight_column
    if column is not None:
        raise RiskvetError(
            f"data.weight_column is set ({column!r}): the updating stage does not use frequency weights yet, so its "
            "updates, likelihood-ratio tests and bootstrap would count rows, not people. Set updating.enabled: false, "
            "or write the data out one row per person without data.weight_column"
        )


def update_study_model(study: Study, model, cohorts) -> UpdateResult:
    """Run :func:`riskvet.update.update_model` with the study's settings on its updating cohort."""
    label = study.updating_cohort
    if label is None or label not in cohorts.validation:
        raise StudyError(problem("updating.cohort", allowed=f"a validation cohort label among {list(cohorts.validation)}", received=label))
    cohort = cohorts.validation[label]
    ev = study.external_validation
    if study.imputing:  # every completed data set, imputed as the external validation stage imputes the cohort
        from ...imputation.procedure import cohort_seed, completed_cohort, impute_cohort
        from ...validation.update_imputed import update_model_imputed

        position = 1 + list(cohorts.validation).index(label)
        frames = [completed_cohort(cohort, c).frame for c in impute_cohort(study, cohort, seed=cohort_seed(study, position))]
        return update_model_imputed(
            model, frames, cohort.y, alpha=study.updating.alpha, new_predictors=dict(study.updating.new_predictors),
            cohort=label, n_boot=ev.n_boot, seed=ev.seed, n_jobs=study.compute.n_jobs, scheduler=study.compute.scheduler,
            max_failed_share=ev.max_failed_share,
        )
    return update_model(
        model, cohort.frame, cohort.y, alpha=study.updating.alpha, new_predictors=dict(study.updating.new_predictors),
        cohort=label, n_boot=ev.n_boot, seed=ev.seed, n_jobs=study.compute.n_jobs, scheduler=study.compute.scheduler,
        max_failed_share=ev.max_failed_share,
    )


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
    RiskvetError
        The study reads frequency weights (``data.weight_column``), which
        updating does not use yet.
    """
    from ...reporting.figures.external_validation import plot_update_calibration

    refuse_weights(ctx.study)
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

    texts = updating_texts(result, files)
    if study.imputing:
        m = next((f.model.provenance.get("missing_data", {}).get("m") for f in result.fits.values() if f.method != "original"), None)
        texts["imputed"] = (
            f"The updating cohort's missing predictor values were multiply imputed (see the external validation page), and every "
            f"update was fitted in each of its completed data sets{f' ({m})' if m else ''}. Each update's model file holds the mean "
            "of its thresholds and coefficients over them (Rubin's rules), the likelihood-ratio tests of the closed test pool the "
            "statistics of the completed data sets by the D2 rule (Li, Meng, Raghunathan & Rubin 1991; the statistic shown is k "
            "times D2), and the apparent performance is the mean over them. The optimism correction is a bootstrap of the first "
            "completed data set, so it does not include the uncertainty of the imputation."
        )
    out = UpdatingOutput(result=result, model_files=files, figures=figures, texts=texts)
    ctx.write_results(out.to_dict())
    return out
