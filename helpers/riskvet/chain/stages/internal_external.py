"""The internal-external cross-validation stage: does the procedure carry to a site it has not seen?

:func:`run` loads the derivation cohort with its clusters
(``data.cluster_column``, a site or a period) and

* leaves each cluster out in turn, repeats the whole derivation procedure on
  the others and measures the model in the cluster left out
  (:func:`riskvet.validation.iecv.internal_external_validation`, on
  ``compute.n_jobs`` workers or the dask.distributed scheduler);
* pools every measure over the clusters by random-effects meta-analysis,
  with the prediction interval for a new cluster;
* saves a forest-style figure per cut of the outcome;
* writes ``results/internal_external.json`` (deterministic content).

Disclosure control: the clusters' sizes by outcome level are published
through :func:`riskvet.reporting.disclosure.suppress_until_safe`
(``output.min_cell_count``), and a cluster's measures at a cut need at least
``max(internal_external.min_events, output.min_cell_count)`` people on each
side of it, so no estimate shown rests on a count the record may not show.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import pandas as pd

from ..._jsonable import to_jsonable
from ...intake.data import load_cohorts
from ...reporting.labels import cut_label
from ...reporting.disclosure import SUPPRESSED, suppress_until_safe
from ...reporting.sentences.internal_external import internal_external_texts
from ...validation.iecv import MEASURES, InternalExternalValidation, internal_external_validation

__all__ = ["InternalExternalOutput", "published_sizes", "run"]


@dataclass(frozen=True)
class InternalExternalOutput:
    """What the internal-external stage found and wrote.

    Attributes
    ----------
    result : InternalExternalValidation
        The leave-one-cluster-out validation.
    sizes : DataFrame
        Each cluster's people by outcome level and in all, small counts
        suppressed (:func:`published_sizes`).
    min_events : int
        The fewest people on each side of a cut used for a cluster's measures.
    notes : tuple of str
        What was adjusted and why.
    figures : dict of str to str
        Figure name -> PNG path relative to the record folder.
    texts : dict of str to str
        The page's sentences (:func:`riskvet.reporting.sentences.internal_external.internal_external_texts`).
    """

    result: InternalExternalValidation
    sizes: pd.DataFrame
    min_events: int
    notes: tuple[str, ...] = ()
    figures: Mapping[str, str] = field(default_factory=dict)
    texts: Mapping[str, str] = field(default_factory=dict)

    @property
    def summary_sentence(self) -> str:
        return self.texts["summary"]

    @property
    def figure_captions(self) -> list[str]:
        """One caption per figure, in the order of :attr:`figures`: the cut of the outcome it draws."""
        kind = self.result.cluster_kind
        return [f"Performance in each {kind} left out: {_event(self.result.levels, j)}" for j in range(len(self.figures))]

    def pooled_frame(self) -> pd.DataFrame:
        """The pooled measures, headers in words, one row per measure, cut and threshold."""
        level, kind = f"{self.result.confidence:.0%}", self.result.cluster_kind
        rows = []
        for p in self.result.pooled:
            at = f" at {p.threshold:g}" if p.measure == "net_benefit" else ""
            where = "" if len(self.result.levels) == 2 else f", {_event(self.result.levels, p.cut)}"
            rows.append({
                "measure": MEASURES[p.measure][0] + at + where,
                "pooled": p.estimate, "pooled_lower": p.lower, "pooled_upper": p.upper,
                f"lower, {level} prediction interval for a new {kind}": p.prediction_lower,
                f"upper, {level} prediction interval for a new {kind}": p.prediction_upper,
                "tau²": p.tau2, "I²": p.i2, f"{kind}s pooled": f"{p.n_clusters} of {p.n_clusters + len(p.left_out)}",
            })
        return pd.DataFrame(rows)

    def measures_frame(self, cut: int) -> pd.DataFrame:
        """Each cluster's measures estimated at one cut, one row per cluster and measure, with the confidence interval."""
        frame = self.result.measures_frame()
        # measures not estimated are listed with their reasons in their own section of the page
        part = frame[(frame["cut"] == cut) & (frame["measure"] != "net_benefit") & (frame["reason"] == "")]
        order = {c.label: i for i, c in enumerate(self.result.clusters)}
        part = part.assign(_order=part["cluster"].map(order)).sort_values(["_order"], kind="stable")
        return pd.DataFrame({
            self.result.cluster_kind: part["cluster"].to_numpy(),
            "measure": [MEASURES[m][0] for m in part["measure"]],
            "estimate": part["estimate"].to_numpy(), "estimate_lower": part["lower"].to_numpy(), "estimate_upper": part["upper"].to_numpy(),
        })

    def effects_frame(self) -> pd.DataFrame | None:
        """The spread of each term's effect across clusters and the test of a common effect, headers in words; None without terms."""
        if self.result.effects is None:
            return None
        kind = self.result.cluster_kind
        table = self.result.effects.pooled
        return pd.DataFrame({
            "term": table["term"], "coefficient on all data": table["on_all_data"],
            f"{kind}s estimated": table["clusters"], f"pooled over {kind}s": table["pooled"],
            f"tau (between-{kind} SD)": table["tau"], "I²": table["i2"], "p (one common effect)": table["lr_p"],
        })

    def to_dict(self) -> dict[str, Any]:
        """The results file's content: the validation with each cluster's counts as published (small ones suppressed)."""
        result = self.result.to_dict()
        for entry, row in zip(result["clusters"], self.sizes.to_dict(orient="records")):
            entry["level_counts"] = {lv: row[f"people, {lv}"] for lv in self.result.levels}
            entry["n"] = row["people, all"]
            entry["n_training"] = SUPPRESSED if entry["n"] == SUPPRESSED else entry["n_training"]
        return to_jsonable({
            "internal_external": result,
            "sizes": self.sizes.to_dict(orient="records"),
            "min_events": self.min_events,
            "notes": list(self.notes),
            "figures": dict(self.figures),
            "texts": dict(self.texts),
        })


def _event(levels, cut: int) -> str:
    """The event of a cut in the user's words, as every page names it."""
    return cut_label(levels, cut, binary=len(levels) == 2)


def published_sizes(result: InternalExternalValidation, *, min_cell_count: int) -> pd.DataFrame:
    """Each cluster's people by outcome level and in all, with small counts and their give-aways suppressed.

    The lines published are each cluster's row (its levels and its total)
    and each level's column (its clusters and the level's total, which the
    derivation page shows); :func:`~riskvet.reporting.disclosure.suppress_until_safe`
    hides counts from 1 to ``min_cell_count - 1`` and enough others that
    none can be worked out from the lines (checked by integer programming).
    """
    levels = list(result.levels)
    K, G = len(levels), len(result.clusters)
    counts: dict[tuple[int, int], int] = {}
    for g, c in enumerate(result.clusters):
        for j, lv in enumerate(levels):
            counts[(g, j)] = int(c.level_counts.get(lv, 0))
        counts[(g, K)] = int(c.n)
    for j in range(K + 1):
        counts[(G, j)] = sum(counts[(g, j)] for g in range(G))
    lines = [[(g, j) for j in range(K + 1)] for g in range(G)] + [[(g, j) for g in range(G + 1)] for j in range(K + 1)]
    # the level totals are on the derivation page: known to a reader whatever this table shows
    hidden = suppress_until_safe(counts, lines, int(min_cell_count), known=[(G, j) for j in range(K + 1)])
    rows = []
    for g, c in enumerate(result.clusters):
        row: dict[str, Any] = {"cluster": c.label}
        for j, lv in enumerate([*levels, "all"]):
            row[f"people, {lv}"] = SUPPRESSED if (g, j) in hidden else counts[(g, j)]
        row["model derived without it"] = "yes" if c.status == "ok" else f"no: {c.reason}"
        rows.append(row)
    return pd.DataFrame(rows)


def _imputation_words() -> dict[str, str]:
    """How the leave-one-cluster-out derivations met multiple imputation."""
    return {"imputed": (
        "Missing predictor values were multiply imputed within each split: the clusters a model was derived on were imputed "
        "together and the derivation repeated on their completed data sets, and the cluster left out was imputed on its own "
        "(outcome included), as a new site's data would be. Each cluster's measures were computed in each of its completed "
        "data sets and pooled by Rubin's rules (C on the logit scale, O/E on the log scale) before the pooling over clusters. "
        "The predictor-effect diagnostic is fitted on the first completed data set."
    )}


def run(ctx) -> InternalExternalOutput:
    """Run the internal-external stage: results JSON and figures.

    Parameters
    ----------
    ctx : riskvet.stagekit.StageContext
        The stage's context.

    Returns
    -------
    InternalExternalOutput

    Raises
    ------
    RecordError
        The record already holds this stage's results.
    RiskvetError
        From :func:`riskvet.validation.iecv.internal_external_validation`.
    """
    from ...reporting.figures.internal_external import plot_cluster_performance

    if ctx.results_path.exists():
        ctx.new_path(ctx.results_path)  # raises: records are write-once, checked before any work
    study = ctx.study
    section = study.internal_external
    cohort = load_cohorts(study).derivation
    m = int(study.output.min_cell_count)
    min_events = max(int(section.min_events), m)
    notes: list[str] = []
    if min_events > section.min_events:
        notes.append(f"internal_external.min_events ({section.min_events}) is below output.min_cell_count ({m}): "
                     f"a cluster's measures at a cut need {min_events} people on each side, so no estimate rests on a suppressed count")
    result = internal_external_validation(study, cohort, n_jobs=study.compute.n_jobs, min_events=min_events)
    figures: dict[str, str] = {}
    K = len(result.levels)
    for j in range(K - 1):
        name = f"clusters_cut{j + 1}" if K > 2 else "clusters"
        ctx.save_figure(plot_cluster_performance(result, cut=j, cut_label=_event(result.levels, j)), name)
        figures[name] = (ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir).as_posix()
    out = InternalExternalOutput(
        result=result, sizes=published_sizes(result, min_cell_count=m), min_events=min_events, notes=tuple(notes),
        figures=figures, texts=internal_external_texts(result) | (_imputation_words() if study.imputing else {}),
    )
    ctx.write_results(out.to_dict())
    return out
