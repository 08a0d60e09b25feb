"""The derivation procedure: from an analysis frame to a fitted model.

:func:`derive` is the single definition of "how the model is made" in a
study: it learns the design (spline knots, category levels) from the data it
is given, runs the study's variable selection and fits the final model.
Internal validation calls exactly this function inside every bootstrap
replicate, so every modelling decision is repeated there.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..intake.design import DesignSpec, build_design
from ..errors import DataError, DesignError, StudyError, problem
from .selection import SelectionResult, select_terms
from ..intake.study import Study

__all__ = ["Derivation", "candidate_design", "candidate_parameters", "check_before_fitting", "derive", "separating_terms"]


@dataclass(frozen=True)
class Derivation:
    """A model derived by the study's procedure.

    Attributes
    ----------
    candidate_design : DesignSpec
        The design of every candidate term, learned from the derivation data.
    design : DesignSpec
        The design restricted to the selected terms, in the order of ``candidate_design``.
    selection : SelectionResult
        The selection path, its cross-validation curve and the final fit.
    """

    candidate_design: DesignSpec
    design: DesignSpec
    selection: SelectionResult

    @property
    def fit(self):
        """The fitted final model (a :class:`riskvet.models.CumulativeFit`)."""
        return self.selection.fit

    @property
    def terms(self) -> tuple[str, ...]:
        """Selected terms, in design order."""
        return tuple(t.name for t in self.design.terms)

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(
            {
                "candidate_design": self.candidate_design.to_dict(),
                "design": self.design.to_dict(),
                "selection": self.selection.to_dict(),
            }
        )

    def to_frame(self) -> pd.DataFrame:
        """The final model's parameter table."""
        return self.fit.to_frame()


def candidate_design(study: Study, frame: pd.DataFrame) -> DesignSpec:
    """The design of every candidate term, learned from ``frame``.

    Knots are placed at the study's quantiles of ``frame``; categorical levels
    come from the study when listed, otherwise from ``frame``.
    """
    spec = study.predictors
    linear, splines, categorical, levels = [], {}, {}, {}
    for name in spec.in_analysis:
        p = spec.candidates[name]
        if p.form == "linear":
            linear.append(name)
        elif p.form == "spline":
            splines[name] = p.knots
        else:
            categorical[name] = p.reference
            if p.levels is not None:
                levels[name] = list(p.levels)
    return build_design(
        frame,
        linear=linear,
        splines=splines,
        categorical=categorical,
        interactions=[(a, b) for a, b in spec.interactions],
        levels=levels or None,
    )


def check_before_fitting(study: Study, cohort: Any, *, study_file: str | Path | None = None) -> list[str]:
    """Build everything the derivation builds before it fits, so a study fails here and not in a record.

    The design specification is learned from the derivation cohort (category
    references and levels, spline knots), the cross-validation folds are
    compared with the outcome's level counts.  Nothing is fitted.  Whether
    the data can support the candidate parameters is judged by
    :func:`riskvet.planning.data_support_notes`.

    Parameters
    ----------
    study : Study
    cohort : PreparedCohort
        The derivation cohort (:func:`riskvet.intake.data.load_cohorts`).
    study_file : path, optional
        The study file, named at the start of every message.

    Returns
    -------
    list of str
        Notes the analyst should read (none at present: every problem found
        here is an error).

    Raises
    ------
    StudyError
        Naming the study key whose value the data cannot support: a
        categorical reference that is not a level of the data (with the level
        it matches when only the case differs), knots a predictor's distinct
        values cannot place, more cross-validation folds (``selection.folds``,
        forward and penalised methods) than people in an outcome level.
    """
    try:
        return _check_before_fitting(study, cohort)
    except StudyError as exc:
        if study_file is None:
            raise
        raise StudyError(f"{study_file}: {exc}") from None


def _check_before_fitting(study: Study, cohort: Any) -> list[str]:
    design_rows = cohort
    if getattr(cohort, "missing", "complete_case") == "multiple_imputation":
        from ..intake.data import complete_rows

        # the completed data sets do not exist yet: the design is checked on the complete rows (when there are any);
        # the folds are checked on every analysed row, as every one is imputed and analysed
        design_rows = complete_rows(cohort)
    spec = study.predictors
    for name in spec.in_analysis:
        p = spec.candidates[name]
        if p.form != "categorical" or p.reference is None:
            continue
        seen = list(p.levels) if p.levels is not None else sorted(cohort.frame[name].dropna().unique().tolist())
        if p.reference not in seen:
            same = [lv for lv in seen if str(lv).casefold() == str(p.reference).casefold()]
            hint = f" (the data write it {same[0]!r}; levels are compared exactly, case included)" if same else ""
            raise StudyError(problem(f"predictors.candidates.{name}.reference", allowed=f"one of the levels in the data {seen}", received=p.reference) + hint)
    try:
        if len(design_rows.y):
            candidate_design(study, design_rows.frame)
    except DesignError as exc:
        raise StudyError(f"predictors: the design cannot be built on the derivation data ({cohort.source}): {exc}") from None
    # folds are dealt over rows (a weighted row keeps its people together), so rows, not people, are compared
    counts = {lv: int(n) for lv, n in (getattr(cohort, "outcome_rows", None) or cohort.outcome_counts).items()}
    cross_validated = study.selection.method == "forward" or study.selection.penalized
    small = {lv: n for lv, n in counts.items() if n < study.selection.folds}
    if cross_validated and small:
        # a level with fewer people than folds leaves some held-out fold without it (or empty)
        raise StudyError(problem(
            "selection.folds", allowed=f"at most {min(counts.values())}, the people in the smallest outcome level",
            received=f"{study.selection.folds}, more than the people of outcome level(s) {small}",
        ))
    iv = study.internal_validation
    small = {lv: n for lv, n in counts.items() if n < iv.cv_folds}
    if iv.enabled and iv.cv_repeats > 0 and small:
        raise StudyError(problem(
            "internal_validation.cv_folds", allowed=f"at most {min(counts.values())}, the people in the smallest outcome level (or cv_repeats: 0)",
            received=f"{iv.cv_folds}, more than the people of outcome level(s) {small}",
        ))
    _check_cluster_folds(study, cohort, cross_validated=cross_validated)
    return []


def _check_cluster_folds(study: Study, cohort: Any, *, cross_validated: bool) -> None:
    """With clusters, every fold is whole clusters: no more folds than clusters, and enough clusters to leave one out."""
    clusters = getattr(cohort, "clusters", None)
    if clusters is None:
        return
    G = int(cohort.n_clusters)
    column, kind = study.data.cluster_column, study.data.cluster_kind
    iv = study.internal_validation
    if iv.enabled and iv.cv_repeats > 0 and iv.cv_folds > G:
        raise StudyError(problem(
            "internal_validation.cv_folds", allowed=f"at most {G}, the clusters of data.cluster_column {column!r}: whole clusters are dealt to folds (or cv_repeats: 0)",
            received=iv.cv_folds,
        ))
    if kind == "person" and cross_validated and study.selection.folds > G:
        raise StudyError(problem(
            "selection.folds", allowed=f"at most {G}, the people of data.cluster_column {column!r}: a person's rows are kept in one fold",
            received=study.selection.folds,
        ))
    section = study.internal_external
    if section is not None and section.enabled and G < 3:
        raise StudyError(problem(
            "internal_external", allowed=f"at least 3 clusters in data.cluster_column {column!r} (one is left out, and pooling needs two or more)",
            received=f"{G} cluster(s)",
        ))


def derive(
    study: Study,
    frame: pd.DataFrame,
    y: np.ndarray,
    *,
    seed: int | None = None,
    weights: np.ndarray | None = None,
    clusters: np.ndarray | None = None,
) -> Derivation:
    """Run the study's whole derivation procedure on one data set.

    Parameters
    ----------
    study : Study
        The validated study settings (design, selection, model family).
    frame : DataFrame
        Complete-case analysis frame holding every predictor column.
    y : array of int
        Outcome codes 0..K-1 (see :func:`riskvet.intake.outcome.outcome_codes`).
    seed : int, optional
        Seed of the selection's cross-validation folds; the study's
        ``selection.seed`` when omitted.  Bootstrap replicates pass their own.
    weights : array of int, optional
        Frequency weights: row i stands for ``weights[i]`` people (a bootstrap
        resample given as counts).  The design is learned on the expanded
        rows, so knots equal those of the resample written out row by row;
        the fits equal the fits on the expanded rows; and the selection's
        cross-validation deals people, not copies, to folds, so no copy of a
        person is both in a training fold and in its held-out fold.
    clusters : array of int, optional
        Cluster code of every row (:func:`riskvet.modelling.folds.cluster_codes`;
        ``data.cluster_column``).  With ``data.cluster_kind: person`` the
        selection's (and the penalty's) cross-validation deals whole people
        to folds, so no person's other visits are in the data that judge a
        fit to them.  With sites or periods the procedure's own folds deal
        rows, as without clusters: the model has no site term and pools the
        patients of its sites, and a handful of sites could not fill ten
        folds; the question whether the model carries to a new site is asked
        by the validations around the procedure, which resample and leave
        out whole sites (:func:`riskvet.validation.iecv.internal_external_validation`).

    Returns
    -------
    Derivation
    """
    if clusters is not None and study.data.cluster_kind != "person":
        clusters = None  # sites and periods: the procedure's own folds deal rows (see above)
    if weights is not None:
        counts = np.asarray(weights)
        if counts.shape != (len(frame),) or np.any(counts < 0) or not np.all(counts == np.round(counts)):
            raise DataError(f"derive(weights=): expected {len(frame)} whole, non-negative counts; received shape {counts.shape}")
        keep = counts > 0
        frame, y, counts = frame.loc[keep], np.asarray(y)[keep], counts[keep].astype(np.int64)
        clusters = None if clusters is None else np.asarray(clusters)[keep]
        design = candidate_design(study, frame.iloc[np.repeat(np.arange(len(frame)), counts)])
    else:
        counts = None
        design = candidate_design(study, frame)
    X = design.transform(frame)
    forced = [t for t in study.predictors.forced if t in design.term_columns]
    result = select_terms(
        X,
        np.asarray(y),
        groups=design.term_columns,
        forced=forced,
        method=study.selection.method,
        n_folds=study.selection.folds,
        seed=study.selection.seed if seed is None else seed,
        link=study.model.link,
        proportional=study.model.proportional,
        weights=counts,
        firth=study.model.estimation == "firth",
        l1_ratio=study.selection.l1_ratio,
        n_penalties=study.selection.n_penalties,
        on_separation="firth" if study.model.on_separation == "firth" else "warn",
        clusters=clusters,
    )
    chosen = set(result.terms)
    final = design.subset([t.name for t in design.terms if t.name in chosen])
    return Derivation(candidate_design=design, design=final, selection=result)


def separating_terms(study: Study, frame: pd.DataFrame, y: np.ndarray, *, weights: np.ndarray | None = None) -> tuple[str, ...]:
    """Candidate terms whose columns separate the outcome in the model with every candidate (nothing is fitted).

    The linear-programming test of the fitter (Albert & Anderson 1984;
    Konis 2007) on the design of every candidate term, in the study's model
    form.  Adding columns cannot undo a separation, so a term named here
    separates every selected model that holds the columns named with it;
    ``riskvet check`` reports these terms before anything is fitted.

    Returns
    -------
    tuple of str
        Term names in design order (empty when the data are not separated).
    """
    from .fitter import _make_design, _separation_check

    design = candidate_design(study, frame)
    X = design.transform(frame).to_numpy(dtype=float)
    codes = np.asarray(y, dtype=np.int64)
    w = np.ones(codes.shape[0]) if weights is None else np.asarray(weights, dtype=float)
    keep = w > 0
    order = np.argsort(codes[keep], kind="stable")
    K = len(study.outcome.ordered_levels)
    if X.shape[1] == 0 or np.any(np.bincount(codes[keep], minlength=K) == 0):
        return ()
    d = _make_design(X[keep][order], codes[keep][order], K, w[keep][order], None, study.model.link,
                     study.model.proportional, weights is None)
    found = {design.columns[j] for j in _separation_check(d)}
    return tuple(t.name for t in design.terms if found & set(t.columns))


def candidate_parameters(design: DesignSpec, n_levels: int) -> int:
    """Parameters of the model with every candidate term: the design's columns and the K - 1 thresholds.

    The count :func:`check_before_fitting` divides the smallest outcome level
    by for its events-per-candidate-parameter note.
    """
    return len(design.columns) + int(n_levels) - 1
