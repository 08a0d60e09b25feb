"""The parts of the derivation stage that differ under multiple imputation.

:func:`derive_cohort` runs the study's procedure on the derivation cohort: on
its complete cases, or (``missing_data.method: multiple_imputation``) on its m
completed data sets with the model pooled by Rubin's rules
(:func:`riskvet.imputation.procedure.derive_imputed`).  The apparent
measures of an imputed analysis are computed in each completed data set and
averaged (Rubin's rule for a point estimate; Wood, Royston & White 2015);
its figures show each person's predicted risks averaged over the completed
data sets.  :func:`complete_case_comparison` derives the model again on the
complete cases, the sensitivity analysis shown beside the imputed one.

References
----------
Wood AM, Royston P, White IR. The estimation and use of predictions for the
assessment of model performance using large samples with multiply imputed
data. Biometrical Journal 2015;57(4):614-632.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from ...errors import RiskvetError, RiskvetWarning
from ...imputation.chained import Imputations
from ...imputation.procedure import derive_imputed, impute_cohort, missing_cell_share
from ...measures.summary import average_summaries, performance_summary
from ...modelling.derive import Derivation, derive
from ...modelling.folds import cluster_codes
from ...modelling.term_effects import column_label

__all__ = ["ImputedData", "complete_case_comparison", "complete_case_sentence", "complete_case_words", "derive_cohort",
           "imputation_settings", "imputed_model_words", "missing_data_section", "page_items", "pooled_apparent",
           "pooled_parameter_columns", "published_counts"]


@dataclass(frozen=True)
class ImputedData:
    """The imputations of the derivation cohort and its completed data sets (None under complete cases)."""

    imputations: Imputations
    completed: tuple[pd.DataFrame, ...]

    @property
    def stacked(self) -> pd.DataFrame:
        """The m completed data sets one under the other (the frame term contrasts are taken from)."""
        return pd.concat(self.completed, ignore_index=True)


def derive_cohort(study, cohort) -> tuple[Derivation, ImputedData | None]:
    """The study's derivation procedure on the derivation cohort, imputed first when the study says so."""
    persons = cohort.clusters if cohort.clusters is not None and cohort.cluster_kind == "person" else None
    if not study.imputing:
        codes = None if cohort.clusters is None else cluster_codes(cohort.clusters)
        return derive(study, cohort.frame, np.asarray(cohort.y), weights=cohort.weights, clusters=codes), None
    imputations = impute_cohort(study, cohort)
    completed = tuple(imputations)
    derivation = derive_imputed(study, completed, np.asarray(cohort.y), missing_share=missing_cell_share(cohort.frame, cohort.predictors),
                                persons=persons)
    return derivation, ImputedData(imputations=imputations, completed=completed)


def imputation_settings(study, imputed: ImputedData, derivation) -> dict[str, Any]:
    """What the model file's provenance and the results say about the imputation."""
    section = study.missing_data
    imp = imputed.imputations
    return {
        "method": "multiple imputation by chained equations",
        "m": imp.m, "m_rule": "given in the study" if section.m is not None else "percentage of incomplete cases, at least 5",
        "iterations": imp.iterations, "seed": imp.seed, "donors": imp.donors,
        "methods": {str(k): v for k, v in imp.methods.items()}, "auxiliary": list(section.auxiliary),
        "outcome_in_imputation_models": True,
        "selection": "stacked completed data sets, each row weighted (1 - f) / m, f the share of missing predictor cells",
        "missing_share_words": _share_words(
            derivation.missing_share, cells=derivation.missing_share * len(imputed.imputations.frame) * len(study.predictors.in_analysis),
            min_cell_count=study.output.min_cell_count),
        "pooling": "Rubin's rules: mean estimate, total covariance W + (1 + 1/m) B",
    }


def pooled_apparent(model, imputed: ImputedData, y: np.ndarray) -> tuple[np.ndarray, dict[str, float]]:
    """Each person's predicted risks averaged over the completed data sets, and the measures averaged over them."""
    probs = np.stack([model.predict_proba(frame) for frame in imputed.completed])
    return probs.mean(axis=0), average_summaries(performance_summary(y, p) for p in probs)


def pooled_parameter_columns(frame: pd.DataFrame, derivation, *, confidence: float = 0.95) -> pd.DataFrame:
    """The model table of an imputed derivation: t intervals and p-values on Rubin's degrees of freedom, with the fractions of missing information."""
    pooling = getattr(derivation, "pooling", None)
    if pooling is None:
        return frame
    est, se, df = (np.atleast_1d(np.asarray(getattr(pooling, a), dtype=float)) for a in ("estimate", "se", "df"))
    out = frame.copy()
    lower = next(c for c in out.columns if c.startswith("lower ("))
    upper = next(c for c in out.columns if c.startswith("upper ("))
    words = ("95% interval, t on Barnard-Rubin degrees of freedom" if abs(confidence - 0.95) < 1e-12
             else f"{confidence:.0%} interval, t on Barnard-Rubin degrees of freedom")
    with np.errstate(divide="ignore", invalid="ignore"):
        t = est / se
    out = out.rename(columns={lower: f"lower ({words})", upper: f"upper ({words})", "z": "t"})
    out[f"lower ({words})"] = np.asarray(pooling.lower, dtype=float)
    out[f"upper ({words})"] = np.asarray(pooling.upper, dtype=float)
    out["t"] = t
    out["p-value"] = 2.0 * stats.t.sf(np.abs(t), df)
    out["degrees of freedom (Barnard-Rubin)"] = df
    out["fraction of missing information"] = np.atleast_1d(np.asarray(pooling.fmi, dtype=float))
    return out


def complete_case_comparison(study, cohort, derivation, *, parameter_table: Callable[[Any], pd.DataFrame]) -> tuple[pd.DataFrame | None, dict[str, Any]]:
    """The procedure again on the complete cases, its estimates beside the pooled ones.

    ``parameter_table`` turns a fit into the stage's parameter table
    (thresholds named by their cut).  Returns the table (None when the
    complete cases cannot be analysed) and what the sentence and the results
    need: people, terms chosen, and the reason when it could not run.
    """
    keep = cohort.frame[list(cohort.predictors)].notna().all(axis=1).to_numpy()
    info: dict[str, Any] = {"n_complete": int(keep.sum()), "n_analysed": int(len(keep)), "terms_imputed": list(derivation.terms)}
    person = cohort.clusters is not None and cohort.cluster_kind == "person"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RiskvetWarning)
            cc = derive(study, cohort.frame.loc[keep].reset_index(drop=True), np.asarray(cohort.y)[keep],
                        clusters=cluster_codes(cohort.clusters[keep]) if person else None)
    except RiskvetError as exc:
        return None, info | {"terms_complete_case": None, "reason": str(exc).splitlines()[0]}
    info["terms_complete_case"] = list(cc.terms)
    mi, cc_table = parameter_table(derivation.fit), parameter_table(cc.fit)
    key = lambda t: list(zip(t["term"], t["cut"]))  # noqa: E731 - a parameter is its column and its cut
    cc_values = dict(zip(key(cc_table), zip(cc_table["estimate"], cc_table["se"])))
    design = derivation.design
    words = [column_label(design, t) if k == "coefficient" else t for t, k in zip(mi["term"], mi["kind"])]
    table = pd.DataFrame({
        "parameter": words,
        "estimate (multiple imputation)": mi["estimate"].to_numpy(dtype=float),
        "standard error (multiple imputation)": mi["se"].to_numpy(dtype=float),
        "estimate (complete cases)": [cc_values.get(k, (np.nan, np.nan))[0] for k in key(mi)],
        "standard error (complete cases)": [cc_values.get(k, (np.nan, np.nan))[1] for k in key(mi)],
    })
    if not derivation.fit.proportional:
        table.insert(1, "cut", mi["cut"].to_numpy())
    return table, info


def complete_case_words(cohort) -> str:
    """What a complete-case analysis did with missing predictor values, for the missing-data section."""
    steps = cohort.exclusions
    gone = int(steps.loc[steps["reason"] == "missing predictor", "excluded"].sum()) if len(steps) else 0
    if gone == 0:
        return ("No analysed person was missing a predictor value, so nothing was imputed and no one was excluded for a "
                "missing predictor.")
    return (
        "People missing any predictor value were excluded (complete-case analysis; missing_data.method: complete_case); "
        "the data flow above counts them step by step. Complete-case analysis loses precision, and is biased when whether a "
        "value is missing depends on the outcome or on other predictors; multiple imputation (missing_data.method: "
        "multiple_imputation) keeps everyone and is the usual choice unless very few values are missing "
        "(White, Royston & Wood 2011)."
    )


def published_counts(info: dict[str, Any], *, min_cell_count: int) -> dict[str, Any]:
    """The complete-case counts as the record may show them: both withheld when either the complete or the incomplete
    people number from 1 to ``min_cell_count - 1`` (one gives the other away by subtraction)."""
    n, total = info["n_complete"], info["n_analysed"]
    if 0 < n < min_cell_count or 0 < total - n < min_cell_count:
        return info | {"n_complete": "suppressed", "n_analysed": "suppressed"}
    return info


def complete_case_sentence(info: dict[str, Any], *, min_cell_count: int) -> str:
    """The sensitivity analysis on the complete cases, in words (counts that would show a small number withheld)."""
    shown = published_counts(info, min_cell_count=min_cell_count)
    n, total = shown["n_complete"], shown["n_analysed"]
    people = ("the people with every predictor recorded; their number is withheld, as it would show a count below the "
              "minimum cell count" if n == "suppressed" else f"{n:,} of the {total:,} people analysed")
    if info.get("terms_complete_case") is None:
        return (f"As a sensitivity analysis the procedure was to run again on the complete cases ({people}), but it could not: "
                f"{info.get('reason', 'no reason was given')}.")
    same = set(info["terms_complete_case"]) == set(info["terms_imputed"])
    chosen = ("it chose the same terms as the imputed analysis" if same else
              f"it chose {', '.join(info['terms_complete_case']) or 'no term'} (the imputed analysis: {', '.join(info['terms_imputed']) or 'no term'})")
    return (
        f"As a sensitivity analysis the whole procedure ran again on the complete cases alone ({people}"
        f"{'' if n == 'suppressed' else ' with every predictor recorded'}); {chosen}. The table sets the estimates side by side (an empty cell: the term was not chosen there). The "
        "imputed analysis is the primary one: complete cases are fewer, and are a biased sample unless values are missing "
        "completely at random; large differences between the two say that the way values went missing matters."
    )


def missing_data_section(ctx, imputations: Imputations, *, cohort, label: str) -> dict[str, Any]:
    """The missing-data section of one cohort's page: tables, figures and sentences, with disclosure control."""
    from ...reporting.figures.missing_data import plot_imputation_chains, plot_observed_imputed
    from ...reporting.missingness import missing_data_report
    from ...reporting.sentences.missing_data import missing_data_texts

    study = ctx.study
    min_cell = study.output.min_cell_count
    columns = list(cohort.predictors) + [c for c in cohort.auxiliary if c not in cohort.predictors]
    columns += [c for c in getattr(cohort, "new_predictors", ()) if c in imputations.frame.columns and c not in columns]
    report = missing_data_report(imputations, columns=columns, min_cell_count=min_cell, cohort_label=label,
                                 auxiliary=tuple(cohort.auxiliary))
    suffix = "" if label == "derivation" else f"_{_safe(label)}"
    figures = {}
    withhold = tuple(report.withheld_columns)
    for name, fig in ((f"imputation_chains{suffix}", plot_imputation_chains(imputations, min_cell_count=min_cell, withhold=withhold)),
                      (f"observed_imputed{suffix}", plot_observed_imputed(imputations, min_cell_count=min_cell, withhold=withhold))):
        ctx.save_figure(fig, name)
        figures[name] = (ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir).as_posix()
    section = study.missing_data
    texts = missing_data_texts(report, method="multiple_imputation", m=imputations.m,
                               m_rule="fixed" if section.m is not None else "rule_of_thumb",
                               iterations=imputations.iterations, seed=imputations.seed)
    tables = {f"missing_{name}{suffix}": getattr(report, attr).reset_index(drop=True)
              for name, attr in (("columns", "by_column"), ("patterns", "patterns"), ("convergence", "convergence"),
                                 ("observed_imputed", "observed_imputed"))}
    return {"tables": tables, "figures": figures, "texts": {f"{k}{suffix}": v for k, v in texts.items()}, "results": report.to_dict()}


def _safe(label: str) -> str:
    """A cohort label as part of a file or key name."""
    return "".join(c if c.isalnum() or c in "-_" else "_" for c in label)


def _share_words(share: float, *, cells: float, min_cell_count: int) -> str:
    """The share of missing predictor cells in words, to two significant figures, or withheld when the number of
    missing cells it stands for is from 1 to ``min_cell_count - 1``."""
    count = int(round(cells))
    if 0 < count < min_cell_count:
        return "fewer than the minimum cell count of values were missing, so f is not shown"
    return f"f = {float(f'{share:.2g}'):g}"


def imputed_model_words(settings: dict[str, Any], derivation, *, selection_method: str) -> str:
    """How the model was derived on the imputed data, for the derivation page."""
    m = settings["m"]
    rule = ("the number of imputations is the percentage of people with a missing value, at least 5 (White, Royston "
            "& Wood 2011)" if settings["m_rule"] != "given in the study" else "the number of imputations is the study file's missing_data.m")
    folds = (", with the cross-validation folds keeping a person's copies together" if selection_method == "forward" else "")
    how = {"forward": "Forward selection ran once", "backward": "Backward elimination by AIC ran once"}.get(selection_method)
    selection = (f"{how} on the {m} completed data sets stacked, every row weighted (1 - f)/m, f the share of the candidate "
                 f"predictors' values that were missing ({settings['missing_share_words']}; Wood, White & Royston 2008){folds}. "
                 "The chosen terms were then" if how else "Every candidate term is in the model (selection.method: none); the terms were")
    return (
        f"Missing predictor values were multiply imputed by chained equations ({m} completed data sets, {settings['iterations']} "
        f"cycles, seed {settings['seed']}; {rule}). {selection} fitted in each completed data set and the estimates pooled by "
        "Rubin's rules: the mean estimate, and a variance adding the spread between imputations to the mean variance within "
        "them. Spline bases and category codes were computed from the imputed values in each completed data set, never imputed "
        "themselves. Apparent measures are averages over the completed data sets; the figures show each person's predicted "
        "risks averaged over them; the proportional-odds checks (a diagnostic) ran on the first completed data set."
    )


#: Captions of the missing-data section's tables and figures, by the start of their names.
_CAPTIONS = {
    "missing_columns": "Missing values of each column, and how each was imputed.",
    "missing_patterns": "The most frequent combinations of missing values (a pattern lists the columns missing together).",
    "missing_convergence": "Imputed values at the last cycle of each imputation, and their range over the last half of the cycles.",
    "missing_observed_imputed": "Observed against imputed values of each imputed column.",
    "imputation_chains": "Mean and spread of the imputed values at each cycle, one line per imputation: lines that mix and level off show settled chains.",
    "observed_imputed": "Observed values against imputed values, column by column.",
}


def _caption(name: str) -> str:
    return next((text for start, text in _CAPTIONS.items() if name.startswith(start)), "")


def page_items(ctx, part: dict[str, Any], *, heading: str | None = None) -> list[Any]:
    """The missing-data section of a page as displayable items: sentences, then tables, then figures (empty when no imputation ran)."""
    from ...reporting import publish

    if not part:
        return []
    items: list[Any] = [publish.text(f"**{heading}**")] if heading else []
    items += [publish.text(text) for text in part["texts"].values() if text]
    items += [publish.table(frame, caption=_caption(name)) for name, frame in part["tables"].items()]
    items += [publish.figure(ctx.record_dir, path, caption=_caption(name)) for name, path in part["figures"].items()]
    return items
