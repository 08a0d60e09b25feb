"""The agreement stage: do two raters record the same predictors, and does it matter?

For each rated item of the study's ``agreement`` section, :func:`assess`
computes Cohen's kappa (binary and ordinal items; quadratic-weighted kappa as
well for ordinal items) or the intraclass correlations and Bland–Altman limits
of agreement (continuous items), on the pairs where both raters recorded a
value.

The second question, whether the raters' readings lead to the same predicted
risk and the same decision, needs the frozen model.  When it is given, each
rater's readings are put into the model in turn.  Predictors the ratings file
does not hold are fixed at the derivation cohort's median (numbers) or most
frequent category, so the comparison is a sensitivity device that isolates the
effect of the raters' differences; it is not an estimate of risk for the
people rated.  At each cut, the two sets of risks are compared by
Bland–Altman, and at each of the study's thresholds for that cut the two sets
of decisions by kappa (:func:`riskvet.agreement.decision_agreement`).

:func:`run` does this for a stage notebook: results JSON, one Bland–Altman
figure per continuous item and per cut.

Every cross-table the record publishes (the raters' categories, and the
decisions at each threshold) goes through :func:`publish_cross_table`: counts
from 1 to ``min_cell_count − 1`` are suppressed, and so is any further count
or total from which a suppressed count could be worked out with the totals
and agreement counts the record states.  The statistics of such a table
(kappa, PABAK, specific agreement) go through :func:`publish_statistics`,
which rounds them, or withholds them, so that they give no suppressed count
away; the sentences and the results file state only those published values.
Bland–Altman figures show bins of pairs (bins holding fewer than
``min_cell_count`` people are not drawn) unless the study allows pair-level
plots (``output.pair_level_plots``).
"""

from __future__ import annotations

import dataclasses
import re
import warnings
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping

import numpy as np
import pandas as pd

from ..._jsonable import to_jsonable
from ...measures.agreement import (
    UNINFORMATIVE_REASONS, BlandAltmanResult, DecisionAgreement, ICCTable, KappaResult, agreement_statistics, bland_altman,
    decision_agreement, icc_table, kappa,
)
from ...intake.data import Cohorts, load_cohorts, read_table
from ...reporting.disclosure import PublishedStatistics, PublishedTable, publish_cross_table, publish_statistics
from ...errors import DataError, ModelFileError, RiskvetWarning, StudyError, problem
from ...modelling.modelfile import PredictionModel, load_model
from ...intake.study import RatedItem, Study
from ...reporting.labels import cut_label
from ...reporting.sentences.agreement import (
    DEVICE_NOTE,
    NO_MODEL_NOTE,
    agreement_summary,
    continuous_sentence,
    differing_count,
    figures_sentence,
    items_sentence,
    kappa_sentence,
    missing_rows_sentence,
    risk_sentence,
    statistic_rows,
)

__all__ = ["ItemAgreement", "CutRiskAgreement", "RiskAgreement",
           "AgreementOutput", "table_statistics", "assess", "run"]

#: The ICC forms reported for two fixed raters: absolute agreement and consistency.
PRIMARY_ICC_FORMS = ("2,1", "3,1")


# --------------------------------------------------------------------------
# statistics of a published cross-table
# --------------------------------------------------------------------------

def table_statistics(*, weighted: bool, confidence: float = 0.95) -> Callable[[np.ndarray], dict[str, np.ndarray]]:
    """The statistics a raters' cross-table publishes, as a function of a stack of tables, in order of importance.

    :func:`riskvet.measures.agreement.agreement_statistics` (kappa, with
    ``weighted`` the quadratic-weighted kappa, PABAK, specific agreement);
    :func:`riskvet.reporting.disclosure.publish_statistics` rounds or
    withholds them.
    """
    def compute(tables: np.ndarray) -> dict[str, np.ndarray]:
        return agreement_statistics(tables, weighted=weighted, confidence=confidence)

    return compute


def _publish(table: Any, *, min_cell_count: int, weighted: bool, confidence: float) -> tuple[PublishedTable, PublishedStatistics]:
    published = publish_cross_table(table, min_cell_count=min_cell_count, bands=weighted)
    together = [(key, f"{key}_lower", f"{key}_upper") for key in ("kappa", "weighted_kappa")]
    return published, publish_statistics(table, published, table_statistics(weighted=weighted, confidence=confidence), groups=together)


def _kappa_dict(k: KappaResult, stats: PublishedStatistics, published: PublishedTable, key: str) -> dict[str, Any]:
    """Kappa as the results file holds it: everything when no count is suppressed, else only the published values."""
    cells = [list(row) for row in published.cells]
    if not published.suppressed:
        d = k.to_dict()
        d.update(table=cells, rounded_to=None)
        return d
    withheld = stats[key] is None
    return {"weights": k.weights, "value": stats[key], "lower": stats[f"{key}_lower"], "upper": stats[f"{key}_upper"],
            "confidence": k.confidence, "n": k.n, "levels": list(k.levels), "rounded_to": stats.decimals[key],
            "withheld": withheld, "warnings": [] if withheld else list(k.warnings), "table": cells}


def _indices_dict(stats: PublishedStatistics) -> dict[str, Any]:
    names = ("observed_agreement", "pabak", "positive_agreement", "negative_agreement", "prevalence_index", "bias_index")
    reason = stats["uninformative_reason"]
    return {
        **{name: stats.values.get(name) for name in names},
        "kappa_informative": None if reason is None else reason == 0,
        "kappa_uninformative_reason": None if reason is None else UNINFORMATIVE_REASONS.get(int(reason), ""),
    }


# --------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class ItemAgreement:
    """Agreement of the two raters on one item.

    Attributes
    ----------
    name, scale, rater_a, rater_b : str
        As in the study's ``agreement.items``.
    n_rows : int
        Rows of the ratings file.
    n_pairs : int
        Rows where both raters recorded a value (the pairs analysed).
    levels : tuple of str
        Categories in order (binary and ordinal items); empty for continuous.
    level_order : str
        How that order was decided: ``"numeric"``, ``"study levels"``,
        ``"derivation levels"`` or ``"sorted as text"``; empty for continuous items.
    kappa : KappaResult or None
        Unweighted kappa (binary and ordinal), unrounded; the record holds
        ``statistics`` instead.
    weighted_kappa : KappaResult or None
        Quadratic-weighted kappa (ordinal).
    icc : ICCTable or None
        All six intraclass correlations (continuous).
    bland_altman : BlandAltmanResult or None
        Limits of agreement of rater_a − rater_b (continuous).
    min_cell_count : int
        Cross-table counts from 1 to ``min_cell_count − 1`` are suppressed.
    text : str
        One interpreting sentence.
    warnings : tuple of str
        Statistical trouble and statistics that could not be computed.
    published : PublishedTable or None
        The cross-table as published (:func:`publish_cross_table`); None for
        continuous items.
    statistics : PublishedStatistics or None
        Kappa, PABAK and specific agreement as published
        (:func:`publish_statistics`: rounded or withheld when the
        cross-table has suppressed counts); None for continuous items.
    """

    name: str
    scale: str
    rater_a: str
    rater_b: str
    n_rows: int
    n_pairs: int
    levels: tuple[str, ...]
    level_order: str
    kappa: KappaResult | None
    weighted_kappa: KappaResult | None
    icc: ICCTable | None
    bland_altman: BlandAltmanResult | None
    min_cell_count: int
    text: str
    warnings: tuple[str, ...] = ()
    published: PublishedTable | None = None
    statistics: PublishedStatistics | None = None

    def agreement_table(self) -> pd.DataFrame | None:
        """The raters' cross-table (rater_a in rows) with totals, as published; None for continuous items."""
        if self.published is None:
            return None
        return self.published.frame(self.levels, row_name=f"{self.name}: {self.rater_a}", column_name=self.rater_b)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary: published statistics, the suppressed cross-table, no per-pair values."""
        out: dict[str, Any] = {
            "name": self.name, "scale": self.scale, "rater_a": self.rater_a, "rater_b": self.rater_b,
            "n_rows": self.n_rows, "n_pairs": self.n_pairs, "levels": list(self.levels), "level_order": self.level_order,
            "min_cell_count": self.min_cell_count, "text": self.text, "warnings": list(self.warnings),
            "kappa": None, "weighted_kappa": None, "agreement_indices": None, "statistics": None,
        }
        if self.kappa is not None and self.statistics is not None:
            out["kappa"] = _kappa_dict(self.kappa, self.statistics, self.published, "kappa")
            if self.weighted_kappa is not None:
                out["weighted_kappa"] = _kappa_dict(self.weighted_kappa, self.statistics, self.published, "weighted_kappa")
            out["agreement_indices"] = _indices_dict(self.statistics)
            out["statistics"] = self.statistics.to_dict()
        out["cross_table"] = None if self.published is None else self.published.to_dict()
        out["icc"] = None if self.icc is None else self.icc.to_dict()
        out["bland_altman"] = None if self.bland_altman is None else _ba_summary(self.bland_altman)
        return to_jsonable(out)

    def to_frame(self) -> pd.DataFrame:
        """One row per statistic as published: item (with its pairs), statistic, estimate, lower and upper limit, interval, note."""
        rows = []
        if self.statistics is not None:
            binary = len(self.levels) == 2
            rows += statistic_rows(self.statistics, confidence=self.kappa.confidence, weighted=self.weighted_kappa is not None, binary=binary)
        if self.icc is not None:
            for form in PRIMARY_ICC_FORMS:
                r = self.icc[form]
                kind = "approximate F-based" if form.startswith("2") else "F-based"
                rows.append({"statistic": f"ICC({form})", "estimate": r.value, "lower limit": r.lower, "upper limit": r.upper,
                             "interval": f"{r.confidence:.0%} {kind} interval", "note": ""})
        if self.bland_altman is not None:
            rows += _ba_rows(self.bland_altman, units="in the item's units")
        out = pd.DataFrame(rows, columns=["statistic", "estimate", "lower limit", "upper limit", "interval", "note"])
        out.insert(0, "item", f"{self.name} ({self.n_pairs} pairs)")
        return out


def _ba_rows(ba: BlandAltmanResult, *, units: str, scale: float = 1.0, prefix: str = "", slope: bool = True) -> list[dict[str, Any]]:
    """Frame rows of a Bland–Altman result: bias, limits (and the proportional-bias slope), with the kind of interval."""
    rows = []
    frame = ba.to_frame()[["quantity", "estimate", "ci_lower", "ci_upper"]]
    for q, e, lo, hi in frame.itertuples(index=False):
        if q == "proportional bias slope":
            if not slope:
                continue
            factor, note = 1.0, ""
        else:
            factor, note = scale, units
        kind = "t" if q in ("bias", "proportional bias slope") else "approximate (Bland and Altman 1986)"
        rows.append({"statistic": f"{prefix}{q}", "estimate": e * factor, "lower limit": lo * factor, "upper limit": hi * factor,
                     "interval": f"{ba.confidence:.0%} {kind} interval", "note": note})
    return rows


def _ba_summary(ba: BlandAltmanResult) -> dict[str, Any]:
    d = ba.to_dict()
    d.pop("means")
    d.pop("differences")
    return d


@dataclass(frozen=True)
class CutRiskAgreement:
    """Agreement of the predicted risk of one cut, and of the decisions at its thresholds.

    Attributes
    ----------
    cut : int
        Cut j: the risk is P(Y > j).
    label : str
        The event in words.
    risks : BlandAltmanResult
        Risk from rater_a's readings minus risk from rater_b's.
    decisions : tuple of DecisionAgreement
        One per threshold the study gives for this cut (may be empty),
        unrounded; the record holds ``published_tables`` and ``statistics``.
    min_cell_count : int
        The decision cross-tables are published through
        :func:`publish_cross_table` with this minimum.
    text : str
        One interpreting sentence.
    published_tables : tuple of PublishedTable
        The decision cross-table at each threshold, as published.
    statistics : tuple of PublishedStatistics
        Kappa, PABAK and specific agreement of the decisions at each threshold, as published.
    """

    cut: int
    label: str
    risks: BlandAltmanResult
    decisions: tuple[DecisionAgreement, ...]
    min_cell_count: int
    text: str
    published_tables: tuple[PublishedTable, ...] = ()
    statistics: tuple[PublishedStatistics, ...] = ()

    def published(self, threshold_index: int) -> PublishedTable:
        """The decision cross-table at the study's ``threshold_index``-th threshold, as published."""
        return self.published_tables[threshold_index]

    def to_dict(self) -> dict[str, Any]:
        decisions = []
        for d, table, stats in zip(self.decisions, self.published_tables, self.statistics):
            decisions.append({
                "threshold": d.threshold, "n": d.n,
                # the raters' totals of the "at or above" row and column, and the pairs decided differently, as published
                "positive_a": table.row_totals[-1], "positive_b": table.column_totals[-1],
                "different_decisions": differing_count(table),
                "decisions": _kappa_dict(d.decisions, stats, table, "kappa"),
                "agreement_indices": _indices_dict(stats), "statistics": stats.to_dict(), "cross_table": table.to_dict(),
            })
        return to_jsonable({"cut": self.cut, "label": self.label, "risks": _ba_summary(self.risks), "decisions": decisions,
                            "min_cell_count": self.min_cell_count, "text": self.text})


@dataclass(frozen=True)
class RiskAgreement:
    """Do the raters' readings give the same predicted risk and decision?

    Attributes
    ----------
    model_sha256 : str
        Content hash of the model file used.
    items_in_model : tuple of str
        Rated items the model uses (their readings vary between the raters).
    items_not_in_model : tuple of str
        Rated items the model does not use (they cannot change its risk).
    from_ratings_file : tuple of str
        Other predictors read from the ratings file.
    fixed : dict
        Other predictors fixed for everyone, with the value used.
    n : int
        People with a complete scoring row from both raters.
    cuts : tuple of CutRiskAgreement
        One per cut of the outcome.
    device_note : str
        What the comparison is and is not.
    """

    model_sha256: str
    items_in_model: tuple[str, ...]
    items_not_in_model: tuple[str, ...]
    from_ratings_file: tuple[str, ...]
    fixed: Mapping[str, Any]
    n: int
    cuts: tuple[CutRiskAgreement, ...]
    device_note: str

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({
            "model_sha256": self.model_sha256,
            "items_in_model": list(self.items_in_model),
            "items_not_in_model": list(self.items_not_in_model),
            "from_ratings_file": list(self.from_ratings_file),
            "fixed": dict(self.fixed),
            "n": self.n,
            "cuts": [c.to_dict() for c in self.cuts],
            "device_note": self.device_note,
        })

    def to_frame(self) -> pd.DataFrame:
        """One row per cut and quantity, as published: the risks' bias and limits (percentage points), then per
        threshold the people decided differently and the decisions' kappa, PABAK and specific agreement."""
        rows = []
        for c in self.cuts:
            for row in _ba_rows(c.risks, units="percentage points", scale=100.0, prefix="risk ", slope=False):
                rows.append({"cut": c.cut, "event": c.label, "quantity": row.pop("statistic"), **row})
            for d, table, stats in zip(c.decisions, c.published_tables, c.statistics):
                at = f"at threshold {d.threshold:g}"
                rows.append({"cut": c.cut, "event": c.label, "quantity": f"people decided differently {at}, of {d.n}",
                             "estimate": differing_count(table), "lower limit": None, "upper limit": None, "interval": "", "note": ""})
                for row in statistic_rows(stats, confidence=d.decisions.confidence, weighted=False, binary=True, indices=False):
                    rows.append({"cut": c.cut, "event": c.label, "quantity": f"decision {row.pop('statistic')} {at}", **row})
        return pd.DataFrame(rows, columns=["cut", "event", "quantity", "estimate", "lower limit", "upper limit", "interval", "note"])


@dataclass(frozen=True)
class AgreementOutput:
    """Everything the agreement stage found.

    Attributes
    ----------
    items : tuple of ItemAgreement
        One per rated item, in study order.
    risk : RiskAgreement or None
        The risk and decision comparison, or None when it was not possible
        (``risk_note`` says why).
    risk_note : str
        Why the risk comparison was skipped, or what it is.
    figures : dict of str to str
        Figure name -> PNG path relative to the record folder (filled by :func:`run`).
    texts : dict of str to str
        Interpreting sentences: ``"summary"`` (one line per stage for the
        record's summary), ``"items"``, ``"risk"`` and ``"figures"`` (what
        the Bland–Altman figures draw: bins or single pairs).
    notes : tuple of str
        Statistical warnings met while :func:`run` assessed the study (each
        is also recorded on the result it concerns).
    pair_level_plots : bool
        Whether the Bland–Altman figures mark single pairs
        (``output.pair_level_plots``) rather than bins of pairs.
    """

    items: tuple[ItemAgreement, ...]
    risk: RiskAgreement | None
    risk_note: str
    texts: Mapping[str, str]
    figures: Mapping[str, str] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    pair_level_plots: bool = False

    def item(self, name: str) -> ItemAgreement:
        """The result of one rated item."""
        for it in self.items:
            if it.name == name:
                return it
        raise StudyError(problem("AgreementOutput.item(name)", allowed=f"one of {[i.name for i in self.items]}", received=name))

    @property
    def figure_note(self) -> str:
        """What the Bland–Altman figures draw (bins of pairs, or single pairs), for the page."""
        return self.texts.get("figures", "")

    def item_figure(self, name: str) -> str | None:
        """The Bland–Altman figure of a continuous item (PNG path relative to the record), if drawn."""
        return self.figures.get(_figure_name("bland_altman", name))

    def risk_figure(self, cut: int) -> str | None:
        """The Bland–Altman figure of the predicted risks at cut ``cut``, if drawn."""
        return self.figures.get(f"risk_bland_altman_cut{cut}")

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready content of the stage's results file (no per-pair values)."""
        return to_jsonable({
            "items": [i.to_dict() for i in self.items],
            "risk": None if self.risk is None else self.risk.to_dict(),
            "risk_note": self.risk_note,
            "figures": dict(self.figures),
            "pair_level_plots": self.pair_level_plots,
            "texts": dict(self.texts),
            "notes": list(self.notes),
        })

    def to_frame(self) -> pd.DataFrame:
        """Every item's statistics, stacked (see :meth:`ItemAgreement.to_frame`)."""
        return pd.concat([i.to_frame() for i in self.items], ignore_index=True)

    def risk_frame(self) -> pd.DataFrame | None:
        """The risk and decision comparison table (the event in words, no cut number), or None."""
        return None if self.risk is None else self.risk.to_frame().drop(columns="cut")


# --------------------------------------------------------------------------
# predictor agreement
# --------------------------------------------------------------------------

def _level_order(values: pd.Series, item: RatedItem, study: Study, cohorts: Cohorts) -> tuple[list[str], str]:
    seen = sorted(set(values.tolist()))
    numbers = pd.to_numeric(pd.Series(seen, dtype=object), errors="coerce")
    if len(seen) and numbers.notna().all():
        return [s for _, s in sorted(zip(numbers.tolist(), seen))], "numeric"
    spec = study.predictors.candidates.get(item.name)
    if spec is not None and spec.levels is not None and set(seen) <= set(spec.levels):
        return list(spec.levels), "study levels"
    known = cohorts.derivation.category_levels.get(item.name)
    if known is not None and set(seen) <= set(known):
        return list(known), "derivation levels"
    return seen, "sorted as text"


def _item_agreement(item: RatedItem, ratings: pd.DataFrame, study: Study, cohorts: Cohorts) -> ItemAgreement:
    a, b = ratings[item.rater_a], ratings[item.rater_b]
    both = (a.notna() & b.notna()).to_numpy()
    a, b = a[both].reset_index(drop=True), b[both].reset_index(drop=True)
    notes: list[str] = []
    k = wk = table = ba = published = None
    levels: list[str] = []
    order = "numeric"
    text = ""
    m = study.output.min_cell_count
    stats = None
    if len(a) < len(ratings):
        notes.append(missing_rows_sentence(len(ratings) - len(a), len(ratings), m))
    try:
        if item.scale == "continuous":
            table = icc_table(pd.DataFrame({"a": a, "b": b}))
            ba = bland_altman(a, b)
            text = continuous_sentence(item, table, ba)
        else:
            levels, order = _level_order(pd.concat([a, b]), item, study, cohorts)
            k = kappa(a, b, levels=levels)
            if item.scale == "ordinal":
                wk = kappa(a, b, levels=levels, weights="quadratic")
                if order == "sorted as text":
                    notes.append(f"The order of the categories of {item.name} is not known (not numbers, no study levels); they were sorted as text, which the weighted kappa depends on.")
            published, stats = _publish(k.table, min_cell_count=m, weighted=wk is not None, confidence=k.confidence)
            if stats["kappa"] is not None:
                notes.extend(k.warnings)
            text = kappa_sentence(item, levels, published, stats, confidence=k.confidence)
    except DataError as exc:
        notes.append(f"Not computed: {exc}")
        text = f"{item.name}: agreement could not be computed ({exc})."
    return ItemAgreement(
        name=item.name, scale=item.scale, rater_a=item.rater_a, rater_b=item.rater_b,
        n_rows=len(ratings), n_pairs=int(both.sum()), levels=tuple(levels), level_order=order if levels else "",
        kappa=k, weighted_kappa=wk, icc=table, bland_altman=ba,
        min_cell_count=m, text=text, warnings=tuple(notes), published=published, statistics=stats,
    )


# --------------------------------------------------------------------------
# risk and decision agreement
# --------------------------------------------------------------------------

def _as_form(values: pd.Series, form: str, where: str) -> pd.Series:
    if form == "categorical":
        return values.astype("object").where(values.notna(), None)
    numbers = pd.to_numeric(values, errors="coerce")
    bad = values.notna() & numbers.isna()
    if bad.any():
        shown = sorted({str(v) for v in values[bad]})[:5]
        raise DataError(problem(where, allowed="numbers (the predictor is numeric in the model)", received=f"{int(bad.sum())} value(s) such as {shown}"))
    return numbers.astype(float)


def _fixed_value(cohorts: Cohorts, name: str) -> Any:
    d = cohorts.derivation
    column = d.frame[name]
    if d.forms.get(name) == "categorical":
        counts = column.value_counts()
        order = list(d.category_levels.get(name, sorted(counts.index)))
        return max(order, key=lambda lv: (int(counts.get(lv, 0)), -order.index(lv)))
    return float(np.median(column.to_numpy(dtype=float)))


def _risk_agreement(study: Study, cohorts: Cohorts, model: PredictionModel, ratings: pd.DataFrame) -> tuple[RiskAgreement | None, str]:
    levels = tuple(study.outcome.ordered_levels)
    if tuple(model.levels) != levels:
        raise ModelFileError(problem("agreement: model outcome levels", allowed=f"the study's levels {list(levels)}", received=list(model.levels)))
    items = study.agreement.items
    sources = list(model.design.sources)
    in_model = [it for it in items if it.name in sources]
    not_in = tuple(it.name for it in items if it.name not in sources)
    if not in_model:
        return None, "None of the rated items is a predictor of the model, so the raters' readings cannot change its predicted risk."
    raw = read_table(study.data.ratings, missing_values=study.data.missing_values)
    forms = cohorts.derivation.forms
    rated = {it.name for it in in_model}
    unknown = [s for s in sources if s not in rated and s not in raw.columns and s not in cohorts.derivation.frame.columns]
    if unknown:
        return None, f"The model uses {unknown}, which neither the ratings file nor the derivation cohort holds, so the risks could not be computed."
    from_file = tuple(s for s in sources if s not in rated and s in raw.columns)
    fixed = {s: _fixed_value(cohorts, s) for s in sources if s not in rated and s not in raw.columns}
    frames = []
    for key in ("rater_a", "rater_b"):
        columns = {}
        for s in sources:
            form = forms.get(s, "linear")
            if s in rated:
                column = getattr(next(it for it in in_model if it.name == s), key)
                columns[s] = _as_form(ratings[column], form, f"{study.data.ratings}: column {column!r}")
            elif s in from_file:
                columns[s] = _as_form(raw[s].reset_index(drop=True), form, f"{study.data.ratings}: column {s!r}")
            else:
                columns[s] = pd.Series([fixed[s]] * len(ratings), dtype=object if forms.get(s) == "categorical" else float)
        frames.append(pd.DataFrame(columns))
    complete = (frames[0].notna().all(axis=1) & frames[1].notna().all(axis=1)).to_numpy()
    if complete.sum() < 3:
        return None, f"Only {int(complete.sum())} people have every reading the model uses from both raters; at least 3 are needed to compare risks."
    prob_a = model.predict_proba(frames[0][complete].reset_index(drop=True))
    prob_b = model.predict_proba(frames[1][complete].reset_index(drop=True))
    binary = study.outcome.type == "binary"
    cuts = []
    for j in range(len(levels) - 1):
        risk_a, risk_b = prob_a[:, j + 1 :].sum(axis=1), prob_b[:, j + 1 :].sum(axis=1)
        decisions = tuple(decision_agreement(risk_a, risk_b, threshold=t) for t in study.thresholds_for_cut(j))
        published = [_publish(d.decisions.table, min_cell_count=study.output.min_cell_count, weighted=False,
                              confidence=d.decisions.confidence) for d in decisions]
        draft = CutRiskAgreement(cut=j, label=cut_label(levels, j, binary=binary), risks=bland_altman(risk_a, risk_b), decisions=decisions,
                                 min_cell_count=study.output.min_cell_count, text="",
                                 published_tables=tuple(p for p, _ in published), statistics=tuple(s for _, s in published))
        cuts.append(dataclasses.replace(draft, text=risk_sentence(draft)))
    note = DEVICE_NOTE
    if from_file:
        note = note.replace("predictors the ratings file does not hold are fixed", f"predictors read from the ratings file ({', '.join(from_file)}) are used as recorded; the others are fixed")
    if not fixed:
        note = "Every predictor of the model comes from the ratings file, so these are the risks the model gives the people rated, once with each rater's readings."
    result = RiskAgreement(
        model_sha256=model.digest(), items_in_model=tuple(it.name for it in in_model), items_not_in_model=not_in,
        from_ratings_file=from_file, fixed=fixed, n=int(complete.sum()), cuts=tuple(cuts), device_note=note,
    )
    return result, note


# --------------------------------------------------------------------------
# public functions
# --------------------------------------------------------------------------

def assess(study: Study, *, cohorts: Cohorts | None = None, model: PredictionModel | None = None) -> AgreementOutput:
    """Agreement of the raters on each rated item and, given a model, on risk and decision.

    Parameters
    ----------
    study : Study
        A study with an ``agreement`` section and ``data.ratings``.
    cohorts : Cohorts, optional
        The study's data (:func:`riskvet.data.load_cohorts`); read when omitted.
    model : PredictionModel, optional
        The frozen model.  Without it only the predictors' agreement is assessed.

    Returns
    -------
    AgreementOutput

    Raises
    ------
    StudyError
        No ``agreement`` section.
    ModelFileError
        A model whose outcome levels are not the study's.
    DataError
        From reading the data, or a rated reading the model cannot use.

    Notes
    -----
    Binary and ordinal items: Cohen's kappa (1960), with quadratic weights
    (Cohen 1968) as well for ordinal items; categories are ordered as
    numbers when they all are numbers, otherwise by the study's or the
    derivation cohort's levels.  Continuous items: all six intraclass
    correlations of Shrout & Fleiss (1979), of which ICC(2,1) and ICC(3,1)
    are shown, since the same two raters rated everyone; and Bland–Altman
    95% limits of agreement of rater_a − rater_b (1986).  Only pairs with
    both readings are used; the number left out is recorded.  Beside kappa:
    the prevalence- and bias-adjusted kappa (Byrt, Bishop & Carlin 1993),
    and for two categories positive and negative agreement (Cicchetti &
    Feinstein 1990), with kappa called uninformative when one category holds
    nearly all readings (:func:`riskvet.measures.agreement.agreement_indices`).
    Statistics of a cross-table with suppressed counts are rounded or
    withheld (:func:`riskvet.reporting.disclosure.publish_statistics`).

    Risk and decision: the model's P(Y > j) from each rater's readings, other
    predictors as in the ratings file when it holds them, else fixed at the
    derivation cohort's median or most frequent category.

    References
    ----------
    Cohen J. A coefficient of agreement for nominal scales. Educational and
    Psychological Measurement 1960; 20(1): 37–46.

    Cohen J. Weighted kappa: nominal scale agreement with provision for scaled
    disagreement or partial credit. Psychological Bulletin 1968; 70(4): 213–220.

    Shrout PE, Fleiss JL. Intraclass correlations: uses in assessing rater
    reliability. Psychological Bulletin 1979; 86(2): 420–428.

    Bland JM, Altman DG. Statistical methods for assessing agreement between
    two methods of clinical measurement. Lancet 1986; 327(8476): 307–310.

    Byrt T, Bishop J, Carlin JB. Bias, prevalence and kappa. Journal of
    Clinical Epidemiology 1993; 46(5): 423–429.

    Cicchetti DV, Feinstein AR. High agreement but low kappa: II. Resolving
    the paradoxes. Journal of Clinical Epidemiology 1990; 43(6): 551–558.
    """
    if not isinstance(study, Study):
        raise StudyError(problem("assess(study)", allowed="a Study from load_study", received=type(study).__name__))
    if study.agreement is None:
        raise StudyError(problem("agreement", allowed="an agreement section listing the rated items", received="no agreement section"))
    cohorts = load_cohorts(study) if cohorts is None else cohorts
    ratings = cohorts.ratings
    if ratings is None:
        raise StudyError(problem("data.ratings", allowed="the paired-ratings file", received=None))
    ratings = ratings.reset_index(drop=True)
    items = tuple(_item_agreement(it, ratings, study, cohorts) for it in study.agreement.items)
    items_text = items_sentence(len(items), len(ratings))
    if model is None:
        risk, note = None, NO_MODEL_NOTE
        risk_text = note
    else:
        risk, note = _risk_agreement(study, cohorts, model, ratings)
        risk_text = note if risk is None else note + " " + " ".join(c.text for c in risk.cuts)
    pair_level = bool(getattr(study.output, "pair_level_plots", False))
    texts = {"summary": agreement_summary(items, risk), "items": items_text, "risk": risk_text,
             "figures": figures_sentence(pair_level=pair_level, min_cell_count=study.output.min_cell_count)}
    return AgreementOutput(items=items, risk=risk, risk_note=note, texts=texts, pair_level_plots=pair_level)


def _figure_name(prefix: str, name: str) -> str:
    return f"{prefix}_{re.sub(r'[^A-Za-z0-9_-]+', '_', name)}"


def run(ctx) -> AgreementOutput:
    """Run the agreement stage: results JSON and Bland–Altman figures.

    Parameters
    ----------
    ctx : riskvet.stagekit.StageContext
        The stage's context.  The model at ``ctx.model_path`` is used when
        that file exists.

    Returns
    -------
    AgreementOutput
        With ``figures`` naming the PNG files written (SVG beside each):
        binned Bland–Altman plots, or pair-level ones when the study sets
        ``output.pair_level_plots``.

    Raises
    ------
    RecordError
        The record already holds this stage's results.
    """
    from ...reporting.figures.agreement import plot_item_agreement, plot_risk_agreement

    if ctx.results_path.exists():
        ctx.new_path(ctx.results_path)  # raises: records are write-once, checked before any work
    model = load_model(ctx.model_path) if ctx.model_path.is_file() else None
    # Warnings are recorded on the results and listed in the notebook's notes,
    # rather than printed into the reviewer's page as they arise.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", RiskvetWarning)
        out = assess(ctx.study, model=model)
    notes = tuple(dict.fromkeys(str(w.message) for w in caught if issubclass(w.category, RiskvetWarning)))
    figures: dict[str, str] = {}

    def save(name: str, fig) -> None:
        ctx.save_figure(fig, name)
        figures[name] = (ctx.figures_dir / f"{name}.png").relative_to(ctx.record_dir).as_posix()

    for item in out.items:
        if item.bland_altman is not None:
            name = _figure_name("bland_altman", item.name)
            save(name, plot_item_agreement(item, pair_level=out.pair_level_plots))
    if out.risk is not None:
        for c in out.risk.cuts:
            name = f"risk_bland_altman_cut{c.cut}"
            save(name, plot_risk_agreement(c, pair_level=out.pair_level_plots))
    out = dataclasses.replace(out, figures=figures, notes=notes)
    ctx.write_results(out.to_dict())
    return out
