"""Invented demonstration data: heat illness at a city's summer run series.

Everything here is made up: the city (Port Calder), its courses and events,
the attendees, the triage rule and the true model.  The data exist so that
every stage of riskvet (derivation, internal and external validation,
updating, rater agreement) can be shown on an example whose truth is known.

Scenario
--------
People who reach the first-aid tent at the Port Calder Summer Run Series are
examined by a tent clinician, who records about fourteen candidate
predictors, and leave with one of three ordered dispositions::

    released < observed < transferred

(released from the tent; treated and observed on site; transferred to
hospital).  The outcome column is ``disposition`` and holds those strings.

* Derivation cohort: season ``"2024"`` on the Harbourfront course.
* Validation cohort: season ``"2026"`` on the Greywater Reservoir course,
  a cooler summer with an older field.  Its predictor distributions differ
  *and* both thresholds are raised by the same amount (a lower baseline
  risk), while the coefficients are unchanged: a model derived in 2024 is
  miscalibrated in the large in 2026, and recalibration, not revision, is
  the right update.
* A paired-ratings study: two tent clinicians (``rater_a`` and ``rater_b``)
  independently record the subjective signs of the same attendees.

The true model is a proportional-odds cumulative logit,
``P(Y <= j | x) = expit(theta_j - LP)``, recorded in :func:`truth`.
"""

from __future__ import annotations

import copy
import dataclasses
import numbers
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy.special import expit

from ._jsonable import to_jsonable
from .errors import DataError, RiskvetError, problem

__all__ = [
    "LEVELS",
    "OUTCOME",
    "DEFAULT_SEED",
    "TrueTerm",
    "MissingSpec",
    "DemoTruth",
    "truth",
    "true_linear_predictor",
    "true_prob",
    "draw",
    "derivation_cohort",
    "validation_cohort",
    "paired_ratings",
    "write_demo_data",
]

#: Outcome levels, lowest first.
LEVELS: tuple[str, ...] = ("released", "observed", "transferred")
#: Name of the outcome column.
OUTCOME = "disposition"
#: Seed used when none is given.
DEFAULT_SEED = 2024

_SEASONS = ("derivation", "validation")

# Separate named streams, so that (for one seed) the derivation cohort, the
# validation cohort, their missingness and the ratings study are independent.
_STREAMS = {
    "derivation": 1,
    "validation": 2,
    "derivation-missing": 3,
    "validation-missing": 4,
    "ratings": 5,
}


# ---------------------------------------------------------------------------
# The truth
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class TrueTerm:
    """One term of the true linear predictor.

    Attributes
    ----------
    name : str
        Name of the term (for example ``"core_temp_above_39_5"``).
    column : str
        Column of the data frame the term is computed from.
    form : str
        ``"linear"``: ``x - at``; ``"above"``: ``max(0, x - at)``;
        ``"below"``: ``max(0, at - x)``; ``"level"``: ``1`` if ``x == level``
        else ``0``.
    coefficient : float
        Log cumulative odds ratio per unit of the term (positive shifts mass
        towards ``transferred``).  ``0.0`` marks an irrelevant predictor.
    at : float or None
        Centre (``"linear"``) or knot (``"above"``, ``"below"``).
    level : str or None
        The level coded 1 (``"level"``).
    unit : str
        Unit of the column.
    """

    name: str
    column: str
    form: str
    coefficient: float
    at: float | None = None
    level: str | None = None
    unit: str = ""

    def values(self, x: pd.Series) -> np.ndarray:
        """Return the term's values for a column ``x`` (no coefficient)."""
        if self.form == "level":
            return (x.astype(str).to_numpy() == self.level).astype(float)
        v = x.to_numpy(dtype=float)
        if self.form == "linear":
            return v - self.at
        if self.form == "above":
            return np.maximum(0.0, v - self.at)
        return np.maximum(0.0, self.at - v)

    def to_dict(self) -> dict[str, Any]:
        """Return the fields as a JSON-ready dict."""
        return to_jsonable({f.name: getattr(self, f.name) for f in dataclasses.fields(self)})


@dataclass(frozen=True)
class MissingSpec:
    """How values of one column are deleted in the cohorts.

    Attributes
    ----------
    column : str
        Column whose values are deleted.
    rate : float
        Expected proportion deleted.
    mechanism : str
        ``"MCAR"`` (every row has probability ``rate``) or ``"MAR"``
        (probability tilted by an always-observed column, see Notes of
        :func:`derivation_cohort`).
    depends_on : str or None
        The always-observed column driving a MAR mechanism.
    tilt : float
        Log relative risk of deletion per standard deviation of
        ``depends_on`` (0 for MCAR).
    """

    column: str
    rate: float
    mechanism: str
    depends_on: str | None = None
    tilt: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        """Return the fields as a JSON-ready dict."""
        return to_jsonable({f.name: getattr(self, f.name) for f in dataclasses.fields(self)})


@dataclass(frozen=True)
class DemoTruth:
    """The generating model behind the demonstration data.

    Attributes
    ----------
    levels : tuple of str
        Outcome levels, lowest first.
    outcome : str
        Name of the outcome column.
    terms : tuple of TrueTerm
        Terms of the linear predictor ``LP = sum(coefficient * term)``;
        the same in both seasons.
    thresholds : dict
        ``{"derivation": (theta_0, theta_1), "validation": (...)}``.
    threshold_shift : float
        ``thresholds["validation"] - thresholds["derivation"]`` (both cuts):
        the validation season's lower baseline risk.
    season_labels : dict
        ``{"derivation": "2024", "validation": "2026"}``, the values of the
        ``season`` column.
    populations : dict
        For each season, the parameters of the predictor distributions
        (course, events with their distances, shares and WBGT, age, sex).
    predictor_model : dict
        For each column, how it is drawn (the same equations in both
        seasons; only the ``populations`` parameters differ).
    missingness : tuple of MissingSpec
        Deletion applied by :func:`derivation_cohort` and
        :func:`validation_cohort` (the same specification in both).
    triage : dict
        Definition of the tent triage rule in the ``triage_rule`` column.
    ratings : dict
        Error model of the two raters in :func:`paired_ratings`.
    update : str
        Which update of a derivation model the shift calls for.
    """

    levels: tuple[str, ...]
    outcome: str
    terms: tuple[TrueTerm, ...]
    thresholds: dict[str, tuple[float, float]]
    threshold_shift: float
    season_labels: dict[str, str]
    populations: dict[str, dict[str, Any]]
    predictor_model: dict[str, str]
    missingness: tuple[MissingSpec, ...]
    triage: dict[str, Any]
    ratings: dict[str, Any]
    update: str

    @property
    def coefficients(self) -> dict[str, float]:
        """Coefficients by term name."""
        return {t.name: t.coefficient for t in self.terms}

    def to_dict(self) -> dict[str, Any]:
        """Return the truth as a JSON-ready dict."""
        return to_jsonable({f.name: getattr(self, f.name) for f in dataclasses.fields(self)})

    def to_frame(self) -> pd.DataFrame:
        """Return the numeric parameters as a tidy table.

        Columns: ``part`` (``"coefficient"``, ``"threshold"`` or
        ``"missing_rate"``), ``name``, ``season`` (``"both"`` when the value
        holds in both seasons), ``value`` and ``detail`` (the term's form, the
        cut, or the deletion mechanism).
        """
        rows: list[dict[str, Any]] = []
        for t in self.terms:
            if t.form == "level":
                detail = f"1 if {t.column} == {t.level!r}"
            elif t.form == "linear":
                detail = t.column if t.at == 0 else f"{t.column} - {t.at:g}"
            elif t.form == "above":
                detail = f"max(0, {t.column} - {t.at:g})"
            else:
                detail = f"max(0, {t.at:g} - {t.column})"
            rows.append(dict(part="coefficient", name=t.name, season="both", value=t.coefficient, detail=detail))
        for season in _SEASONS:
            for j, theta in enumerate(self.thresholds[season]):
                rows.append(
                    dict(
                        part="threshold",
                        name=f"theta_{j}",
                        season=season,
                        value=theta,
                        detail=f"{self.levels[j]} | {self.levels[j + 1]}",
                    )
                )
        for m in self.missingness:
            detail = m.mechanism if m.depends_on is None else f"{m.mechanism} on {m.depends_on}, tilt {m.tilt:g}/SD"
            rows.append(dict(part="missing_rate", name=m.column, season="both", value=m.rate, detail=detail))
        return pd.DataFrame(rows, columns=["part", "name", "season", "value", "detail"])


_TERMS = (
    TrueTerm("core_temp", "core_temp", "linear", 0.70, at=38.0, unit="degC"),
    TrueTerm("core_temp_above_39_5", "core_temp", "above", 2.10, at=39.5, unit="degC"),
    TrueTerm("age", "age", "linear", 0.015, at=40.0, unit="years"),
    TrueTerm("age_above_60", "age", "above", 0.040, at=60.0, unit="years"),
    TrueTerm("sex_male", "sex", "level", 0.20, level="male"),
    TrueTerm("heart_rate", "heart_rate", "linear", 0.015, at=100.0, unit="beats/min"),
    TrueTerm("systolic_bp_below_110", "systolic_bp", "below", 0.040, at=110.0, unit="mmHg"),
    TrueTerm("resp_rate", "resp_rate", "linear", 0.06, at=18.0, unit="breaths/min"),
    TrueTerm("confusion", "confusion", "linear", 1.40, at=0.0, unit="0/1"),
    TrueTerm("collapse", "collapse", "linear", 0.75, at=0.0, unit="0/1"),
    TrueTerm("vomiting", "vomiting", "linear", 0.28, at=0.0, unit="episodes"),
    TrueTerm("dry_skin", "dry_skin", "linear", 0.55, at=0.0, unit="0/1"),
    TrueTerm("cramps", "cramps", "linear", 0.0, at=0.0, unit="0/1"),
    TrueTerm("distance_km", "distance_km", "linear", 0.0, at=0.0, unit="km"),
    TrueTerm("wbgt", "wbgt", "linear", 0.07, at=26.0, unit="degC"),
    TrueTerm("prior_heat_illness", "prior_heat_illness", "linear", 0.65, at=0.0, unit="0/1"),
)

_THETA_DERIVATION = (1.02, 3.26)
_THRESHOLD_SHIFT = 0.50
_THRESHOLDS = {
    "derivation": _THETA_DERIVATION,
    "validation": tuple(round(t + _THRESHOLD_SHIFT, 10) for t in _THETA_DERIVATION),
}

_POPULATIONS: dict[str, dict[str, Any]] = {
    "derivation": {
        "season": "2024",
        "course": "Harbourfront",
        "id_prefix": "PC",
        "events": (
            {"event": "Harbourfront 10K", "tent": "10K", "distance_km": 10.0, "share": 0.45, "wbgt_mean": 27.6},
            {"event": "Harbourfront Half Marathon", "tent": "half", "distance_km": 21.1, "share": 0.35, "wbgt_mean": 28.4},
            {"event": "Harbourfront Marathon", "tent": "marathon", "distance_km": 42.2, "share": 0.20, "wbgt_mean": 26.9},
        ),
        "wbgt_sd": 1.3,
        "age_mean": 37.0,
        "age_sd": 12.0,
        "male_share": 0.55,
    },
    "validation": {
        "season": "2026",
        "course": "Greywater Reservoir",
        "id_prefix": "GW",
        "events": (
            {"event": "Greywater 10K", "tent": "10K", "distance_km": 10.0, "share": 0.40, "wbgt_mean": 25.6},
            {"event": "Greywater Half Marathon", "tent": "half", "distance_km": 21.1, "share": 0.38, "wbgt_mean": 26.2},
            {"event": "Greywater Marathon", "tent": "marathon", "distance_km": 42.2, "share": 0.22, "wbgt_mean": 25.1},
        ),
        "wbgt_sd": 1.3,
        "age_mean": 47.0,
        "age_sd": 14.0,
        "male_share": 0.50,
    },
}

_MISSINGNESS = (
    MissingSpec(OUTCOME, 0.01, "MCAR"),
    MissingSpec("core_temp", 0.02, "MCAR"),
    MissingSpec("systolic_bp", 0.04, "MAR", depends_on="heart_rate", tilt=0.5),
    MissingSpec("resp_rate", 0.05, "MAR", depends_on="wbgt", tilt=0.4),
    MissingSpec("dry_skin", 0.03, "MCAR"),
)

_TRIAGE = {
    "column": "triage_rule",
    "levels": ("green", "amber", "red"),
    "reading": "tent_temp = core_temp + Normal(0, 0.35 degC): a quick first reading, not stored",
    "red": "tent_temp >= 40.0 or confusion == 1 or systolic_bp < 90",
    "amber": "otherwise, tent_temp >= 39.0 or heart_rate >= 130 or vomiting >= 2 or collapse == 1",
    "green": "otherwise",
    "temp_noise_sd": 0.35,
}

# How each predictor is drawn (mirrors _simulate; e ~ Normal(0, sd) noise,
# each value rounded to the precision of a tent record).
_PREDICTOR_MODEL = {
    "event": "drawn with the event shares of the season",
    "age": "Normal(age_mean, age_sd), clipped to 16-85, whole years",
    "sex": "male with probability male_share",
    "distance_km": "event distance x 1 (40% finished) or x Uniform(0.2, 1), 0.1 km",
    "tent": "no draw: the event's finish tent (finished), early-course tent (under 55% of the distance) or late-course tent",
    "wbgt": "Normal(event wbgt_mean, wbgt_sd), 0.1 degC",
    "prior_heat_illness": "Bernoulli(clip(0.06 + 0.001 (age - 40), 0.01, 0.2))",
    "core_temp": "36.7 + Gamma(2, 0.6) + 0.08 (wbgt - 26) + 0.15 prior_heat_illness, clipped 35.8-42.4, 0.1 degC",
    "heart_rate": "92 + 10 (core_temp - 37.9) - 0.15 (age - 40) + e(14), clipped 48-195",
    "systolic_bp": "128 + 0.3 (age - 40) - 5 (core_temp - 37.9) + e(15), clipped 70-210",
    "resp_rate": "18 + 1.8 (core_temp - 37.9) + e(3.5), clipped 8-44",
    "confusion": "Bernoulli(expit(-3.2 + 1.6 (core_temp - 38.5)))",
    "collapse": "Bernoulli(expit(-1.9 + 0.8 (core_temp - 38.5) + 0.02 (age - 40)))",
    "vomiting": "min(6, Poisson(exp(-0.9 + 0.35 (core_temp - 37.9))))",
    "dry_skin": "Bernoulli(expit(-1.6 + 0.7 (core_temp - 38.5)))",
    "cramps": "Bernoulli(expit(-1.0 + 0.03 (distance_km - 15)))",
    "disposition": "drawn from true_prob of the rounded predictors",
}

_RATINGS = {
    "season": "derivation",
    "id_prefix": "RS",
    "scheme": "columns <sign>_rater_a and <sign>_rater_b for sign in confusion, dry_skin, cramps, resp_rate",
    "binary_signs": {
        # sensitivity, specificity of each rater against the true sign
        "confusion": {"rater_a": (0.88, 0.98), "rater_b": (0.82, 0.97)},
        "dry_skin": {"rater_a": (0.80, 0.95), "rater_b": (0.75, 0.93)},
        "cramps": {"rater_a": (0.90, 0.95), "rater_b": (0.86, 0.94)},
    },
    "resp_rate": {
        "method": "breaths counted over 30 s and doubled (even numbers)",
        "error_sd": 1.8,
        "bias": {"rater_a": 0.0, "rater_b": 0.8},
    },
}


def truth() -> DemoTruth:
    """Return the generating model behind the demonstration data.

    Returns
    -------
    DemoTruth
        Thresholds, coefficients and functional forms of the true
        proportional-odds model, the season shift, the predictor
        populations, the missingness, the triage rule and the rater error
        model.

    Notes
    -----
    The true model is the proportional-odds cumulative logit (McCullagh
    1980)

    .. math:: P(Y \\le j \\mid x) = \\operatorname{expit}(\\theta_j - LP),
              \\qquad LP = \\sum_k \\beta_k t_k(x),

    with terms :math:`t_k` that are linear, hinged (``max(0, x - knot)``,
    ``max(0, knot - x)``) or indicators.  Core temperature has a slope of
    0.70 per degree up to 39.5 degC and 2.80 per degree above it; age has a
    slope of 0.015 per year, rising to 0.055 after 60.  ``cramps`` and
    ``distance_km`` have coefficient 0.

    In the validation season both thresholds are
    ``threshold_shift`` higher (fewer transfers at the same predictors) and
    the coefficients are the same, so recalibration in the large (new
    thresholds, derivation LP as offset) is the correct update (Steyerberg
    et al. 2004).

    References
    ----------
    McCullagh P. Regression models for ordinal data. J R Stat Soc B.
    1980;42(2):109-142.

    Steyerberg EW, Borsboom GJJM, van Houwelingen HC, Eijkemans MJC,
    Habbema JDF. Validation and updating of predictive logistic regression
    models: a study on sample size and shrinkage. Stat Med.
    2004;23(16):2567-2586.
    """
    return DemoTruth(
        levels=LEVELS,
        outcome=OUTCOME,
        terms=_TERMS,
        thresholds=dict(_THRESHOLDS),
        threshold_shift=_THRESHOLD_SHIFT,
        season_labels={s: _POPULATIONS[s]["season"] for s in _SEASONS},
        # Copies, so that editing a returned truth cannot change the generator.
        populations=copy.deepcopy(_POPULATIONS),
        predictor_model=dict(_PREDICTOR_MODEL),
        missingness=_MISSINGNESS,
        triage=copy.deepcopy(_TRIAGE),
        ratings=copy.deepcopy(_RATINGS),
        update="recalibration in the large: thresholds shift, coefficients unchanged",
    )


# ---------------------------------------------------------------------------
# True probabilities
# ---------------------------------------------------------------------------


def _check_frame(frame: Any, columns: list[str], where: str) -> None:
    if not isinstance(frame, pd.DataFrame):
        raise DataError(problem(f"{where}: frame", allowed="a pandas DataFrame", received=type(frame).__name__))
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise DataError(
            problem(f"{where}: frame", allowed=f"columns {columns}", received=f"no column(s) {missing}")
        )
    for c in columns:
        if frame[c].isna().any():
            raise DataError(
                problem(
                    f"{where}: frame column {c!r}",
                    allowed="no missing values",
                    received=f"{int(frame[c].isna().sum())} missing",
                )
            )


def true_linear_predictor(frame: pd.DataFrame) -> np.ndarray:
    """Return the true linear predictor ``LP`` for each row of ``frame``.

    Parameters
    ----------
    frame : pandas.DataFrame
        Must hold the predictor columns of :func:`draw` without missing
        values.

    Returns
    -------
    numpy.ndarray
        ``LP = sum(beta_k * t_k(x))``, shape ``(n,)``; the same in both
        seasons.

    Notes
    -----
    See :func:`truth` for the terms.
    """
    columns = sorted({t.column for t in _TERMS})
    _check_frame(frame, columns, "true_linear_predictor")
    lp = np.zeros(len(frame))
    for t in _TERMS:
        lp += t.coefficient * t.values(frame[t.column])
    return lp


def true_prob(frame: pd.DataFrame, *, season: str | None = None) -> np.ndarray:
    """Return the true probability of each outcome level for each row.

    Parameters
    ----------
    frame : pandas.DataFrame
        Must hold the predictor columns of :func:`draw` without missing
        values, and a ``season`` column unless ``season`` is given.
    season : {"derivation", "validation"} or None
        Thresholds to use for every row.  ``None`` takes them row by row
        from the ``season`` column (``"2024"`` or ``"2026"``).

    Returns
    -------
    numpy.ndarray
        Shape ``(n, 3)``; column ``j`` is ``P(Y = LEVELS[j] | x)``; rows sum
        to 1.

    Notes
    -----
    ``P(Y <= j) = expit(theta_j - LP)``; level probabilities are the
    differences of consecutive cumulative probabilities (McCullagh 1980).

    References
    ----------
    McCullagh P. Regression models for ordinal data. J R Stat Soc B.
    1980;42(2):109-142.
    """
    lp = true_linear_predictor(frame)
    thresholds = _THRESHOLDS
    if season is None:
        _check_frame(frame, ["season"], "true_prob")
        by_label = {_POPULATIONS[s]["season"]: thresholds[s] for s in _SEASONS}
        labels = frame["season"].astype(str).to_numpy()
        unknown = sorted(set(labels) - set(by_label))
        if unknown:
            raise DataError(
                problem("true_prob: frame column 'season'", allowed=f"values in {sorted(by_label)}", received=unknown)
            )
        theta = np.array([by_label[v] for v in labels], dtype=float).reshape(len(frame), 2)
    else:
        _check_season(season, "true_prob")
        theta = np.tile(np.asarray(thresholds[season], dtype=float), (len(frame), 1))
    cum = expit(theta - lp[:, None])
    return np.column_stack([cum[:, 0], cum[:, 1] - cum[:, 0], 1.0 - cum[:, 1]])


# ---------------------------------------------------------------------------
# Drawing
# ---------------------------------------------------------------------------


def _check_season(season: Any, where: str) -> None:
    if not isinstance(season, str) or season not in _SEASONS:
        raise RiskvetError(problem(f"{where}: season", allowed=f"one of {list(_SEASONS)}", received=season))


def _check_n(n: Any, where: str, *, minimum: int = 1) -> int:
    if isinstance(n, bool) or not isinstance(n, numbers.Integral) or n < minimum:
        raise RiskvetError(problem(f"{where}: n", allowed=f"an integer >= {minimum}", received=n))
    return int(n)


def _generator(seed: Any, stream: str, where: str) -> np.random.Generator:
    """Return the generator of a named stream for an int seed or a Generator."""
    if isinstance(seed, np.random.Generator):
        # A child stream keyed by the stream name keeps streams independent.
        return np.random.default_rng([int(seed.integers(2**63)), _STREAMS[stream]])
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0:
        raise RiskvetError(
            problem(f"{where}: seed", allowed="a non-negative integer or a numpy Generator", received=seed)
        )
    return np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(_STREAMS[stream],)))


def _round(x: np.ndarray, decimals: int) -> np.ndarray:
    return np.round(x, decimals) if decimals else np.round(x).astype(np.int64)


def _simulate(n: int, season: str, rng: np.random.Generator) -> pd.DataFrame:
    pop = _POPULATIONS[season]
    events = pop["events"]
    share = np.array([e["share"] for e in events])
    k = rng.choice(len(events), size=n, p=share / share.sum())
    event = np.array([e["event"] for e in events], dtype=object)[k]
    event_km = np.array([e["distance_km"] for e in events])[k]
    wbgt_mean = np.array([e["wbgt_mean"] for e in events])[k]

    age = _round(np.clip(rng.normal(pop["age_mean"], pop["age_sd"], n), 16, 85), 0)
    sex = np.where(rng.random(n) < pop["male_share"], "male", "female")
    finished = rng.random(n) < 0.4
    fraction = np.where(finished, 1.0, rng.uniform(0.2, 1.0, n))
    distance_km = _round(event_km * fraction, 1)
    # the first-aid tent that saw the attendee: no random draw, so every other column is as before the tents
    place = np.where(finished, "finish", np.where(fraction < 0.55, "early-course", "late-course"))
    tent = np.char.add(np.char.add(np.array([e["tent"] for e in events])[k], " "), np.char.add(place, " tent"))
    wbgt = _round(rng.normal(wbgt_mean, pop["wbgt_sd"]), 1)
    prior = (rng.random(n) < np.clip(0.06 + 0.001 * (age - 40), 0.01, 0.2)).astype(np.int64)

    core_temp = _round(
        np.clip(36.7 + rng.gamma(2.0, 0.6, n) + 0.08 * (wbgt - 26.0) + 0.15 * prior, 35.8, 42.4), 1
    )
    heat = core_temp - 37.9
    heart_rate = _round(np.clip(92 + 10 * heat - 0.15 * (age - 40) + rng.normal(0, 14, n), 48, 195), 0)
    systolic_bp = _round(np.clip(128 + 0.3 * (age - 40) - 5 * heat + rng.normal(0, 15, n), 70, 210), 0)
    resp_rate = _round(np.clip(18 + 1.8 * heat + rng.normal(0, 3.5, n), 8, 44), 0)
    confusion = (rng.random(n) < expit(-3.2 + 1.6 * (core_temp - 38.5))).astype(np.int64)
    collapse = (rng.random(n) < expit(-1.9 + 0.8 * (core_temp - 38.5) + 0.02 * (age - 40))).astype(np.int64)
    vomiting = np.minimum(6, rng.poisson(np.exp(-0.9 + 0.35 * heat))).astype(np.int64)
    dry_skin = (rng.random(n) < expit(-1.6 + 0.7 * (core_temp - 38.5))).astype(np.int64)
    cramps = (rng.random(n) < expit(-1.0 + 0.03 * (distance_km - 15))).astype(np.int64)

    tent_temp = core_temp + rng.normal(0, _TRIAGE["temp_noise_sd"], n)
    red = (tent_temp >= 40.0) | (confusion == 1) | (systolic_bp < 90)
    amber = (tent_temp >= 39.0) | (heart_rate >= 130) | (vomiting >= 2) | (collapse == 1)
    triage_rule = np.where(red, "red", np.where(amber, "amber", "green"))

    frame = pd.DataFrame(
        {
            "attendee_id": [f"{pop['id_prefix']}-{i:06d}" for i in range(1, n + 1)],
            "season": pop["season"],
            "event": pd.array(event, dtype="str"),
            "tent": pd.array(tent.astype(object), dtype="str"),
            "age": age,
            "sex": sex,
            "distance_km": distance_km,
            "wbgt": wbgt,
            "core_temp": core_temp,
            "heart_rate": heart_rate,
            "systolic_bp": systolic_bp,
            "resp_rate": resp_rate,
            "confusion": confusion,
            "collapse": collapse,
            "vomiting": vomiting,
            "dry_skin": dry_skin,
            "cramps": cramps,
            "prior_heat_illness": prior,
            "triage_rule": triage_rule,
        }
    )
    prob = true_prob(frame, season=season)
    u = rng.random(n)
    level = (u[:, None] > np.cumsum(prob, axis=1)[:, :2]).sum(axis=1)
    frame[OUTCOME] = pd.array(np.array(LEVELS, dtype=object)[level], dtype="str")
    return frame


def draw(n: int, *, season: str = "derivation", seed: int | np.random.Generator) -> pd.DataFrame:
    """Draw ``n`` complete records from one season's population.

    Parameters
    ----------
    n : int
        Number of attendees, at least 1.
    season : {"derivation", "validation"}
        Population to draw from (season ``"2024"`` or ``"2026"``).
    seed : int or numpy.random.Generator
        Non-negative integer seed (same seed, same frame) or a Generator.

    Returns
    -------
    pandas.DataFrame
        One row per attendee, no missing values.  Columns: ``attendee_id``,
        ``season``, ``event``, ``tent`` (the first-aid tent that saw the
        attendee: nine tents, each event's finish, early-course and
        late-course tent, with different case-mix), ``age`` (years), ``sex`` (``"female"`` /
        ``"male"``), ``distance_km`` (distance completed), ``wbgt``
        (wet-bulb globe temperature at arrival, degC), ``core_temp`` (degC),
        ``heart_rate`` (beats/min), ``systolic_bp`` (mmHg), ``resp_rate``
        (breaths/min), ``confusion``, ``collapse`` (0/1), ``vomiting``
        (episodes, 0-6), ``dry_skin``, ``cramps``, ``prior_heat_illness``
        (0/1), ``triage_rule`` (``"green"``/``"amber"``/``"red"``) and
        ``disposition`` (one of :data:`LEVELS`).

    Notes
    -----
    Predictors are drawn first, rounded to the precision a tent record
    holds, and the outcome is then drawn from :func:`true_prob` of the
    rounded values, so the true model holds exactly for the recorded data.
    """
    n = _check_n(n, "draw")
    _check_season(season, "draw")
    return _simulate(n, season, _generator(seed, season, "draw"))


def _apply_missingness(frame: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
    out = frame.copy()
    n = len(out)
    for spec in _MISSINGNESS:
        u = rng.random(n)
        if spec.mechanism == "MCAR" or n < 2:
            p = np.full(n, spec.rate)
        else:
            z = out[spec.depends_on].to_numpy(dtype=float)
            sd = z.std()
            z = (z - z.mean()) / sd if sd > 0 else np.zeros(n)
            w = np.exp(spec.tilt * z)
            p = np.minimum(1.0, spec.rate * w / w.mean())
        gone = u < p
        if out[spec.column].dtype.kind in "iu":
            out[spec.column] = out[spec.column].astype(float)
        out.loc[gone, spec.column] = np.nan if out[spec.column].dtype.kind == "f" else pd.NA
    return out


_MISSING_NOTES = """
    Notes
    -----
    Values are deleted column by column as :attr:`DemoTruth.missingness`
    records.  MCAR: each row independently with probability ``rate``.  MAR:
    row ``i`` with probability ``rate * w_i / mean(w)``, where
    ``w_i = exp(tilt * z_i)`` and ``z_i`` is the standardised value of the
    always-observed column ``depends_on`` in this cohort, so the expected
    proportion deleted is ``rate`` and rows with high ``depends_on`` lose
    more values (Rubin 1976).  Integer columns that lose values become
    floats with NaN; a deleted outcome is ``<NA>``.

    References
    ----------
    Rubin DB. Inference and missing data. Biometrika. 1976;63(3):581-592.
"""


def derivation_cohort(*, seed: int | np.random.Generator = DEFAULT_SEED, n: int = 2000) -> pd.DataFrame:
    """Return the 2024 derivation cohort, with missing values.

    Parameters
    ----------
    seed : int or numpy.random.Generator
        Seed; the same seed gives the same frame.
    n : int
        Number of attendees.

    Returns
    -------
    pandas.DataFrame
        The columns of :func:`draw` for season ``"2024"``, with about 1% of
        outcomes and a few percent of some predictors missing.
    """
    n = _check_n(n, "derivation_cohort")
    frame = _simulate(n, "derivation", _generator(seed, "derivation", "derivation_cohort"))
    return _apply_missingness(frame, _generator(seed, "derivation-missing", "derivation_cohort"))


def validation_cohort(*, seed: int | np.random.Generator = DEFAULT_SEED, n: int = 1500) -> pd.DataFrame:
    """Return the 2026 validation cohort, with missing values.

    Parameters
    ----------
    seed : int or numpy.random.Generator
        Seed; the same seed gives the same frame.
    n : int
        Number of attendees.

    Returns
    -------
    pandas.DataFrame
        The columns of :func:`draw` for season ``"2026"`` (cooler, older
        field, fewer transfers), with missing values as in
        :func:`derivation_cohort`.
    """
    n = _check_n(n, "validation_cohort")
    frame = _simulate(n, "validation", _generator(seed, "validation", "validation_cohort"))
    return _apply_missingness(frame, _generator(seed, "validation-missing", "validation_cohort"))


derivation_cohort.__doc__ += _MISSING_NOTES
validation_cohort.__doc__ += _MISSING_NOTES


def paired_ratings(*, seed: int | np.random.Generator = DEFAULT_SEED, n: int = 150) -> pd.DataFrame:
    """Return a paired-ratings study of the subjective signs.

    Two tent clinicians, ``rater_a`` and ``rater_b``, independently examine
    the same ``n`` attendees of the 2024 season.

    Parameters
    ----------
    seed : int or numpy.random.Generator
        Seed; the same seed gives the same frame.
    n : int
        Number of attendees, at least 2.

    Returns
    -------
    pandas.DataFrame
        Columns ``attendee_id`` (``"RS-000001"``, ...), ``season``, then
        ``<sign>_rater_a`` and ``<sign>_rater_b`` for ``confusion``,
        ``dry_skin``, ``cramps`` (0/1) and ``resp_rate`` (breaths/min, even
        numbers).  No missing values.

    Notes
    -----
    True signs come from the derivation population (:func:`draw`).  Each
    rater reports a binary sign with their own sensitivity and specificity,
    independently given the true sign; each counts breaths for 30 s and
    doubles the count, with a rater-specific bias and independent counting
    error: ``2 * round((resp_rate + bias + e) / 2)``, ``e ~ Normal(0, sd)``.
    The values are in :attr:`DemoTruth.ratings`.
    """
    n = _check_n(n, "paired_ratings", minimum=2)
    rng = _generator(seed, "ratings", "paired_ratings")
    people = _simulate(n, "derivation", rng)
    out = pd.DataFrame(
        {
            "attendee_id": [f"{_RATINGS['id_prefix']}-{i:06d}" for i in range(1, n + 1)],
            "season": people["season"],
        }
    )
    for sign, raters in _RATINGS["binary_signs"].items():
        true = people[sign].to_numpy() == 1
        for rater, (sens, spec) in raters.items():
            u = rng.random(n)
            out[f"{sign}_{rater}"] = np.where(true, u < sens, u >= spec).astype(np.int64)
    rr = _RATINGS["resp_rate"]
    for rater, bias in rr["bias"].items():
        counted = people["resp_rate"].to_numpy() + bias + rng.normal(0, rr["error_sd"], n)
        out[f"resp_rate_{rater}"] = (2 * np.round(np.clip(counted, 6, 50) / 2)).astype(np.int64)
    return out


def write_demo_data(
    folder: str | Path,
    *,
    seed: int = DEFAULT_SEED,
    n_derivation: int = 2000,
    n_validation: int = 1500,
    n_ratings: int = 150,
) -> dict[str, Path]:
    """Write the three demonstration data files as CSV.

    Parameters
    ----------
    folder : str or pathlib.Path
        Folder to write into; created if absent.
    seed : int
        Non-negative integer seed; the same seed gives byte-identical files.
    n_derivation, n_validation, n_ratings : int
        Sizes of :func:`derivation_cohort`, :func:`validation_cohort` and
        :func:`paired_ratings`.

    Returns
    -------
    dict
        ``{"derivation": path, "validation": path, "ratings": path}`` for
        ``derivation.csv``, ``validation.csv`` and ``ratings.csv``.

    Raises
    ------
    RiskvetError
        If any of the three files exists already (nothing is written), or a
        parameter is invalid.

    Notes
    -----
    Comma-separated, header row, no index, ``\\n`` line ends, missing values
    as empty fields, numbers in their shortest form (``37.8``, ``1``).
    """
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0:
        raise RiskvetError(problem("write_demo_data: seed", allowed="a non-negative integer", received=seed))
    folder = Path(folder)
    paths = {name: folder / f"{name}.csv" for name in ("derivation", "validation", "ratings")}
    existing = [str(p) for p in paths.values() if p.exists()]
    if existing:
        raise RiskvetError(
            problem("write_demo_data: folder", allowed="no existing demo files (refusing to overwrite)", received=existing)
        )
    frames = {
        "derivation": derivation_cohort(seed=seed, n=n_derivation),
        "validation": validation_cohort(seed=seed, n=n_validation),
        "ratings": paired_ratings(seed=seed, n=n_ratings),
    }
    folder.mkdir(parents=True, exist_ok=True)
    for name, frame in frames.items():
        frame.to_csv(paths[name], index=False, float_format="%.10g", lineterminator="\n")
    return paths
