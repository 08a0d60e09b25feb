"""The study file: one YAML document that describes an analysis.

A study file is validated by the pydantic models below, with unknown keys
forbidden.  Every problem is reported as a :class:`~riskvet.errors.StudyError`
whose message names the file, the key path (``selection.folds``), the value
received and what is allowed; a misspelt key also names the nearest valid key.
Paths in the file are resolved against the folder that holds it.

The resolved study can be exported as canonical JSON (sorted keys, no
whitespace) so that an analysis record can hash exactly what was run.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import re
import types
import typing
from pathlib import Path
from typing import Annotated, Any, Literal, Union

import yaml
from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    PrivateAttr,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)

from ..errors import RiskvetError, StudyError, problem

__all__ = [
    "Study",
    "stage_stem",
    "load_study",
    "study_from_dict",
    "STAGES",
]

#: Stages of the analysis chain, in the order they run.
STAGES = (
    "planning",
    "derivation",
    "agreement",
    "internal_validation",
    "internal_external",
    "external_validation",
    "updating",
    "summary",
)


def stage_stem(stage: str) -> str:
    """File stem of a stage's notebook and rendering: ``NN_<stage>``, NN its place in the chain."""
    if stage not in STAGES:
        raise RiskvetError(problem("stage", allowed=f"one of {list(STAGES)}", received=stage))
    return f"{STAGES.index(stage) + 1:02d}_{stage}"


def _as_text_tuple(value: Any) -> Any:
    """Level lists as text: YAML reads ``[0, 1]`` as numbers, data files compare as text."""
    if isinstance(value, (list, tuple)):
        return tuple(str(v) for v in value)
    return value


def _listed_twice(values) -> list:
    """The values that occur more than once, sorted."""
    values = list(values)
    return sorted({x for x in values if values.count(x) > 1})


class _Section(BaseModel):
    # Numbers become text where text is expected: YAML reads ``levels: [0, 1]``,
    # ``event: 1`` and ``thresholds: {1: [0.1]}`` as numbers, and level names
    # are compared as text with the data.
    model_config = ConfigDict(extra="forbid", frozen=True, coerce_numbers_to_str=True)


class _StudyLoader(yaml.SafeLoader):
    """YAML loader reading only true/false as booleans (the YAML 1.2 rule).

    YAML 1.1 also reads yes/no/on/off as booleans, which would turn
    ``levels: [no, yes]`` into ``False``/``True`` and no longer match the data.
    """


_BOOL_TAG = "tag:yaml.org,2002:bool"
_StudyLoader.yaml_implicit_resolvers = {
    first: [(tag, rx) for tag, rx in resolvers if tag != _BOOL_TAG]
    for first, resolvers in yaml.SafeLoader.yaml_implicit_resolvers.items()
}
_StudyLoader.add_implicit_resolver(
    _BOOL_TAG, re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$"), list("tTfF")
)


def _resolve(value: str | Path | None, info: ValidationInfo) -> Path | None:
    if value is None:
        return None
    path = Path(value).expanduser()
    base = (info.context or {}).get("base_dir")
    if not path.is_absolute() and base is not None:
        path = Path(base) / path
    return path.resolve() if base is not None else path


class StudyInfo(_Section):
    """Who and what: the ``study`` section."""

    name: str = Field(min_length=1, description="Short name of the analysis; used in record names.")
    description: str = ""
    analyst: str = ""

    @field_validator("name")
    @classmethod
    def _plain_name(cls, value: str) -> str:
        bad = sorted({c for c in value if not (c.isalnum() or c in "-_. ")})
        if bad:
            raise ValueError(f"letters, digits, spaces and '-_.' only; found {''.join(bad)!r}")
        return value


class ValidationCohort(_Section):
    """One external validation cohort with its label (a later season, another site)."""

    label: str = Field(min_length=1)
    path: Path

    _resolve_path = field_validator("path")(classmethod(lambda cls, v, info: _resolve(v, info)))


class DataSection(_Section):
    """Where the data are: the ``data`` section."""

    derivation: Path
    validation: tuple[ValidationCohort, ...] = ()
    ratings: Path | None = None
    id_column: str | None = None
    weight_column: str | None = Field(
        default=None,
        description="Frequency weights: the column saying how many identical people each row stands for (whole numbers >= 0).",
    )
    cluster_column: str | None = Field(
        default=None,
        description="Rows that belong together (a site, a period, a person with several rows): resampled and split "
        "whole by the bootstrap and every cross-validation; read from the derivation data.",
    )
    cluster_kind: Literal["site", "period", "person"] = Field(
        default="site",
        description="What a cluster is: a site or a period (its labels may be shown, and internal-external "
        "cross-validation can leave one out), or a person (its labels are private and never shown).",
    )
    missing_values: tuple[str, ...] = ("", "NA", "N/A", "NaN", "nan", ".")
    category_map: dict[str, dict[str, str]] = Field(
        default_factory=dict,
        description="Per column, validation-data categories mapped onto derivation categories.",
    )

    _resolve_paths = field_validator("derivation", "ratings")(
        classmethod(lambda cls, v, info: _resolve(v, info))
    )

    @field_validator("validation")
    @classmethod
    def _unique_labels(cls, value: tuple[ValidationCohort, ...]) -> tuple[ValidationCohort, ...]:
        labels = [c.label for c in value]
        twice = _listed_twice(labels)
        if twice:
            raise ValueError(f"each cohort label once; listed more than once: {twice}")
        return value


class OutcomeSection(_Section):
    """The outcome: its column, type and ordered levels."""

    column: str = Field(min_length=1)
    type: Literal["binary", "ordinal"]
    levels: tuple[str, ...] = Field(
        description="Levels as they appear in the data, lowest (least severe) first."
    )
    labels: dict[str, str] = Field(default_factory=dict, description="Display label per level.")
    event: str | None = Field(default=None, description="Binary outcomes: the level that is the event.")

    _levels_as_text = field_validator("levels", mode="before")(classmethod(lambda cls, v: _as_text_tuple(v)))

    @model_validator(mode="after")
    def _check(self) -> "OutcomeSection":
        levels = list(self.levels)
        twice = _listed_twice(levels)
        if twice:
            raise ValueError(f"levels: each level once; listed more than once: {twice}")
        if self.type == "binary":
            if len(levels) != 2:
                raise ValueError(f"levels: a binary outcome has exactly 2 levels; received {len(levels)}: {levels}")
            if self.event is None:
                raise ValueError(f"event: a binary outcome names its event level, one of {levels}")
            if self.event not in levels:
                raise ValueError(f"event: expected one of {levels}; received {self.event!r}")
        else:
            if len(levels) < 3:
                raise ValueError(
                    f"levels: an ordinal outcome has at least 3 levels (use type: binary for 2); received {levels}"
                )
            if self.event is not None:
                raise ValueError("event: only for binary outcomes; remove it for an ordinal outcome")
        unknown = sorted(set(self.labels) - set(levels))
        if unknown:
            raise ValueError(f"labels: keys must be levels {levels}; unknown: {unknown}")
        return self

    @property
    def ordered_levels(self) -> tuple[str, ...]:
        """Levels coded 0..K-1: for a binary outcome the non-event level first."""
        if self.type == "binary":
            other = [lv for lv in self.levels if lv != self.event]
            return (other[0], self.event)
        return self.levels

    def label(self, level: str) -> str:
        """Display label of a level (the level itself when none is given)."""
        return self.labels.get(level, level)


class PredictorSpec(_Section):
    """How one candidate predictor enters the model."""

    form: Literal["linear", "spline", "categorical"] = "linear"
    knots: int | None = Field(default=None, description="Spline knots, 3 to 7.")
    reference: str | None = Field(default=None, description="Categorical: the reference level.")
    levels: tuple[str, ...] | None = Field(default=None, description="Categorical: allowed levels in order.")

    _levels_as_text = field_validator("levels", mode="before")(classmethod(lambda cls, v: _as_text_tuple(v)))

    @field_validator("reference", mode="before")
    @classmethod
    def _reference_as_text(cls, value: Any) -> Any:
        return None if value is None else str(value)

    @model_validator(mode="after")
    def _check(self) -> "PredictorSpec":
        if self.form == "spline":
            if self.knots is None:
                raise ValueError("knots: a spline needs a number of knots from 3 to 7")
            if not 3 <= self.knots <= 7:
                raise ValueError(f"knots: expected a whole number from 3 to 7; received {self.knots}")
        elif self.knots is not None:
            raise ValueError(f"knots: only for form 'spline'; this predictor has form {self.form!r}")
        if self.form != "categorical" and (self.reference is not None or self.levels is not None):
            raise ValueError("reference/levels: only for form 'categorical'")
        if self.levels is not None:
            lv = list(self.levels)
            twice = _listed_twice(lv)
            if twice:
                raise ValueError(f"levels: each level once; listed more than once: {twice}")
            if self.reference is not None and self.reference not in lv:
                raise ValueError(f"reference: expected one of {lv}; received {self.reference!r}")
        return self


def _predictor_shorthand(value: Any) -> Any:
    """Accept ``linear``, ``categorical`` and ``spline N`` as shorthand."""
    if isinstance(value, str):
        words = value.split()
        if len(words) == 2 and words[0] == "spline" and words[1].isdigit():
            return {"form": "spline", "knots": int(words[1])}
        return {"form": value}
    return value


class PredictorsSection(_Section):
    """Candidate predictors and how each enters."""

    candidates: dict[str, Annotated[PredictorSpec, Field()]] = Field(min_length=1)
    forced: tuple[str, ...] = ()
    exclude: tuple[str, ...] = Field(default=(), description="Candidates kept out of this analysis.")
    interactions: tuple[tuple[str, str], ...] = ()

    @field_validator("candidates", mode="before")
    @classmethod
    def _shorthand(cls, value: Any) -> Any:
        if isinstance(value, (list, tuple)):
            return {str(name): {"form": "linear"} for name in value}
        if isinstance(value, dict):
            return {str(k): _predictor_shorthand(v if v is not None else "linear") for k, v in value.items()}
        return value

    @model_validator(mode="after")
    def _check(self) -> "PredictorsSection":
        names = set(self.candidates)
        for key in ("forced", "exclude"):
            unknown = [n for n in getattr(self, key) if n not in names]
            if unknown:
                raise ValueError(f"{key}: every name must be a candidate {sorted(names)}; unknown: {unknown}")
        both = sorted(set(self.forced) & set(self.exclude))
        if both:
            raise ValueError(f"forced/exclude: a predictor cannot be both forced in and excluded: {both}")
        for a, b in self.interactions:
            for n in (a, b):
                if n not in names:
                    raise ValueError(f"interactions: {n!r} is not a candidate; candidates are {sorted(names)}")
                if n in self.exclude:
                    raise ValueError(f"interactions: {n!r} is excluded and cannot be in an interaction")
            if a == b:
                raise ValueError(f"interactions: a predictor cannot interact with itself ({a!r})")
        return self

    @property
    def in_analysis(self) -> tuple[str, ...]:
        """Candidates in file order, less the excluded ones."""
        return tuple(n for n in self.candidates if n not in self.exclude)


class ModelSection(_Section):
    """The model family, how it is estimated, and what happens when the data are separated."""

    link: Literal["logit", "probit", "cloglog", "loglog"] = "logit"
    proportional: bool = True
    estimation: Literal["maximum_likelihood", "firth"] = Field(
        default="maximum_likelihood",
        description="maximum_likelihood, or firth: Firth's bias-reduced estimates for every fit of the derivation procedure.",
    )
    on_separation: Literal["stop", "firth"] = Field(
        default="stop",
        description="When the chosen model's maximum-likelihood fit is separated: stop with a message, or refit it with Firth's method.",
    )


#: Selection methods that choose the model by a penalty tuned by cross-validation.
PENALIZED_METHODS = ("ridge", "lasso", "elastic_net")


class SelectionSection(_Section):
    """Variable selection, repeated in every bootstrap replicate."""

    method: Literal["none", "forward", "backward", "ridge", "lasso", "elastic_net"] = "none"
    folds: int = Field(default=10, ge=2, le=50, description="k of the k-fold CV choosing the forward model size or the penalty.")
    seed: int = Field(default=0, ge=0)
    l1_ratio: float | None = Field(
        default=None, gt=0, lt=1,
        description="elastic_net only: the lasso share of the penalty, strictly between 0 (ridge) and 1 (lasso); 0.5 when not given.",
    )
    n_penalties: int = Field(default=30, ge=5, le=200, description="ridge, lasso, elastic_net: penalties tried, on a log grid.")

    @model_validator(mode="after")
    def _penalty_options(self) -> "SelectionSection":
        if self.l1_ratio is not None and self.method != "elastic_net":
            raise ValueError(f"l1_ratio: only for method elastic_net (ridge is 0 and lasso is 1); received it with method {self.method!r}")
        return self

    @property
    def penalized(self) -> bool:
        """Whether the method is ridge, lasso or elastic net."""
        return self.method in PENALIZED_METHODS

    @property
    def lasso_share(self) -> float:
        """The l1 share of the penalty: 0 for ridge, 1 for lasso, ``l1_ratio`` (0.5 by default) for elastic net."""
        return {"ridge": 0.0, "lasso": 1.0}.get(self.method, 0.5 if self.l1_ratio is None else float(self.l1_ratio))


class InternalValidationSection(_Section):
    """Bootstrap internal validation."""

    enabled: bool = True
    n_boot: int = Field(default=200, ge=1, le=100_000)
    seed: int = Field(default=1, ge=0)
    max_failed_share: float = Field(default=0.1, ge=0, le=1)
    shrink: bool = Field(default=False, description="Also write a uniformly shrunken model file.")
    cv_folds: int = Field(default=10, ge=2, le=50)
    cv_repeats: int = Field(default=1, ge=0, le=100, description="Repeats of k-fold CV as a second opinion; 0 skips it.")


class Subgroup(_Section):
    """A subgroup of a validation cohort, by a categorical column or bands of a numeric one."""

    column: str
    bands: tuple[float, ...] | None = Field(default=None, description="Cut points of a numeric column.")

    @field_validator("bands")
    @classmethod
    def _increasing(cls, value: tuple[float, ...] | None) -> tuple[float, ...] | None:
        if value is not None and (len(value) < 1 or any(b <= a for a, b in zip(value, value[1:]))):
            raise ValueError(f"strictly increasing cut points; received {list(value)}")
        return value


class InternalExternalSection(_Section):
    """Internal-external cross-validation: leave one cluster (site or period) out, in turn."""

    enabled: bool = True
    pooling: Literal["reml", "dl"] = Field(
        default="reml",
        description="Between-cluster variance estimator of the random-effects pooling: reml (restricted maximum likelihood) or dl (DerSimonian-Laird).",
    )
    hartung_knapp: bool = Field(default=False, description="Hartung-Knapp intervals for the pooled measures (t on k - 1 df, rescaled variance).")
    min_events: int = Field(
        default=5, ge=1, le=1000,
        description="A cluster's measure at a cut is estimated only with at least this many people on each side of the cut.",
    )
    seed: int = Field(default=13, ge=0, description="Seed of the selection streams of the leave-one-cluster-out derivations.")


class MissingDataSection(_Section):
    """How missing predictor values are handled: complete cases, or multiple imputation by chained equations."""

    method: Literal["complete_case", "multiple_imputation"] = "complete_case"
    m: int | None = Field(
        default=None, ge=2, le=200,
        description="Imputations; when not given, the percentage of incomplete cases rounded up, at least 5 and at most 100.",
    )
    iterations: int = Field(default=10, ge=1, le=200, description="Cycles of the chained equations.")
    seed: int = Field(default=17, ge=0, description="Seed of the imputations; imputation j draws from its own stream.")
    donors: int = Field(default=5, ge=1, le=50, description="Candidate donors of predictive mean matching.")
    auxiliary: tuple[str, ...] = Field(
        default=(),
        description="Columns of the data used only in the imputation models (imputed themselves when incomplete), never in the model.",
    )
    methods: dict[str, Literal["pmm", "logistic", "cumulative", "multinomial"]] = Field(
        default_factory=dict,
        description="Per column, the imputation method instead of the default (pmm for numbers, logistic for two levels, "
        "multinomial for more).",
    )
    complete_case_sensitivity: bool = Field(
        default=True, description="Also derive the model on the complete cases and show both, as a sensitivity analysis.",
    )

    @model_validator(mode="after")
    def _only_with_imputation(self) -> "MissingDataSection":
        if self.method == "complete_case":
            given = [k for k in ("m", "auxiliary", "methods") if getattr(self, k)]
            if given:
                raise ValueError(f"{', '.join(given)}: only for method multiple_imputation; method is complete_case")
        twice = _listed_twice(list(self.auxiliary))
        if twice:
            raise ValueError(f"auxiliary: each column once; listed more than once: {twice}")
        return self


class ExternalValidationSection(_Section):
    """Validation of the frozen model in the validation cohorts."""

    enabled: bool = True
    n_boot: int = Field(default=200, ge=1, le=100_000)
    seed: int = Field(default=2, ge=0)
    max_failed_share: float = Field(default=0.1, ge=0, le=1, description="Above this share of failed replicates the intervals are withheld.")
    subgroups: tuple[Subgroup, ...] = ()
    min_subgroup_size: int = Field(default=100, ge=1)
    pooling: Literal["reml", "dl"] = Field(
        default="reml",
        description="With two or more validation cohorts: between-cohort variance estimator of the random-effects pooling (reml or dl).",
    )
    hartung_knapp: bool = Field(default=False, description="With two or more validation cohorts: Hartung-Knapp intervals for the pooled measures.")


class UpdatingSection(_Section):
    """Model updating on a validation cohort."""

    enabled: bool = True
    cohort: str | None = Field(default=None, description="Label of the validation cohort to update on (default: the first).")
    alpha: float = Field(default=0.05, gt=0, lt=1)
    new_predictors: dict[str, PredictorSpec] = Field(default_factory=dict)

    @field_validator("new_predictors", mode="before")
    @classmethod
    def _shorthand(cls, value: Any) -> Any:
        if isinstance(value, dict):
            return {str(k): _predictor_shorthand(v if v is not None else "linear") for k, v in value.items()}
        return value


class ExistingRule(_Section):
    """The rule clinicians use today, recorded as a column in the data."""

    column: str
    kind: Literal["categories", "score"] = "categories"
    levels: tuple[str, ...] | None = Field(default=None, description="Categories, lowest risk first.")
    positive_from: str | None = Field(
        default=None, description="Categories: the lowest category that counts as a positive decision."
    )

    _levels_as_text = field_validator("levels", mode="before")(classmethod(lambda cls, v: _as_text_tuple(v)))

    @model_validator(mode="after")
    def _check(self) -> "ExistingRule":
        if self.kind == "categories":
            if not self.levels or len(self.levels) < 2:
                raise ValueError("levels: a rule of kind 'categories' lists at least 2 categories, lowest risk first")
            lv = list(self.levels)
            twice = _listed_twice(lv)
            if twice:
                raise ValueError(f"levels: each category once; listed more than once: {twice}")
            if self.positive_from is not None and self.positive_from not in lv:
                raise ValueError(f"positive_from: expected one of {lv}; received {self.positive_from!r}")
        elif self.levels is not None or self.positive_from is not None:
            raise ValueError("levels/positive_from: only for a rule of kind 'categories'")
        return self


class RatedItem(_Section):
    """One item two raters recorded independently."""

    name: str
    rater_a: str
    rater_b: str
    scale: Literal["binary", "ordinal", "continuous"] = "binary"


class AgreementSection(_Section):
    """Rater agreement on the paired-ratings file."""

    enabled: bool = True
    items: tuple[RatedItem, ...] = Field(min_length=1)


class PlanningSection(_Section):
    """Sample-size planning inputs."""

    enabled: bool = True
    n_parameters: int = Field(ge=1, description="Candidate model parameters (degrees of freedom).")
    anticipated_c: float | None = Field(default=None, gt=0.5, lt=1)
    anticipated_r2_cs: float | None = Field(default=None, gt=0, lt=1)
    shrinkage: float = Field(default=0.9, gt=0, lt=1)
    validation_oe_ci_width: float = Field(default=0.2, gt=0)
    validation_slope_ci_width: float = Field(default=0.2, gt=0)
    validation_c_ci_width: float = Field(default=0.1, gt=0)


class OutputSection(_Section):
    """Where records go and what they may show."""

    records: Path = Field(
        default=Path("records"), validate_default=True,
        description="Folder of the records, relative to the study file's folder unless absolute.",
    )
    min_cell_count: int = Field(default=5, ge=0, description="Counts below this are suppressed in descriptive tables; 0 shows all.")
    html: bool = True
    pair_level_plots: bool = Field(
        default=False,
        description="Allow Bland–Altman figures that mark single pairs of readings; by default they show bins of pairs, "
        "and bins holding fewer than min_cell_count people are not drawn.",
    )

    _resolve_path = field_validator("records")(classmethod(lambda cls, v, info: _resolve(v, info)))


class ComputeSection(_Section):
    """Where the work runs."""

    n_jobs: int = Field(default=1, ge=-1, description="Worker processes; -1 uses every core.")
    scheduler: str | None = Field(default=None, description="Address of a dask.distributed scheduler, e.g. tcp://10.0.0.5:8786.")

    @field_validator("n_jobs")
    @classmethod
    def _not_zero(cls, value: int) -> int:
        if value == 0:
            raise ValueError("a positive number of workers, or -1 for every core; received 0")
        return value


class Study(_Section):
    """A validated study file.  See ``riskvet new`` for a commented example."""

    study: StudyInfo
    data: DataSection
    outcome: OutcomeSection
    predictors: PredictorsSection
    model: ModelSection = ModelSection()
    selection: SelectionSection = SelectionSection()
    internal_validation: InternalValidationSection = InternalValidationSection()
    internal_external: InternalExternalSection | None = None
    missing_data: MissingDataSection | None = None
    external_validation: ExternalValidationSection = ExternalValidationSection()
    updating: UpdatingSection = UpdatingSection()
    thresholds: dict[str, tuple[float, ...]] = Field(
        default_factory=dict,
        description="Risk thresholds of clinical interest, keyed by the level a cut starts at (P(Y >= level)).",
    )
    existing_rule: ExistingRule | None = None
    agreement: AgreementSection | None = None
    planning: PlanningSection | None = None
    output: OutputSection = OutputSection()
    compute: ComputeSection = ComputeSection()

    #: The study file's folder (absolute), which relative paths were resolved against; None when not known.
    _base_dir: str | None = PrivateAttr(default=None)

    @model_validator(mode="before")
    @classmethod
    def _every_path_from_the_study_folder(cls, data: Any) -> Any:
        # A missing output section still holds the records folder, which is
        # resolved against the study file's folder like every other path.
        if isinstance(data, dict) and data.get("output") is None:
            return {**data, "output": {}}
        return data

    @model_validator(mode="after")
    def _cross_checks(self) -> "Study":
        levels = self.outcome.ordered_levels
        upper = list(levels[1:])
        for key, values in self.thresholds.items():
            if key not in upper:
                raise ValueError(
                    f"thresholds.{key}: keys are the levels a cut starts at, one of {upper}; received {key!r}"
                )
            outside = [v for v in values if not 0 < v < 1]
            if outside:
                raise ValueError(f"thresholds.{key}: each threshold strictly between 0 and 1; received {outside} outside")
            if len(set(values)) != len(values):
                raise ValueError(f"thresholds.{key}: each threshold once; received {list(values)}")
        columns = set(self.predictors.candidates) | set(self.updating.new_predictors)
        weight = self.data.weight_column
        if weight is not None and (weight in columns or weight in (self.outcome.column, self.data.id_column)):
            raise ValueError(f"data.weight_column: {weight!r} is also the outcome, the id column or a predictor; the weights need a column of their own")
        cluster = self.data.cluster_column
        if cluster is not None and (cluster in columns or cluster in (self.outcome.column, weight)):
            raise ValueError(f"data.cluster_column: {cluster!r} is also the outcome, the weight column or a predictor; the clusters need a column of their own")
        iecv = self.internal_external
        if iecv is not None and iecv.enabled:
            if cluster is None:
                raise ValueError("internal_external: needs data.cluster_column, the column naming each row's site or period")
            if self.data.cluster_kind == "person":
                raise ValueError(
                    "internal_external: leaves out one site or period at a time; data.cluster_kind is 'person', and leaving "
                    "one person out is not internal-external validation (set cluster_kind: site or period, or internal_external.enabled: false)"
                )
        self._check_missing_data(columns, weight, cluster)
        if self.outcome.column in columns:
            raise ValueError(f"predictors: the outcome column {self.outcome.column!r} cannot also be a predictor")
        clash = sorted(set(self.predictors.candidates) & set(self.updating.new_predictors))
        if clash:
            raise ValueError(f"updating.new_predictors: already candidates: {clash}")
        if self.updating.cohort is not None:
            labels = [c.label for c in self.data.validation]
            if self.updating.cohort not in labels:
                raise ValueError(f"updating.cohort: expected one of the validation labels {labels}; received {self.updating.cohort!r}")
        if self.selection.penalized and self.model.estimation == "firth":
            raise ValueError(
                f"model.estimation: firth is a fitting option for the methods none, forward and backward; selection.method "
                f"{self.selection.method!r} already penalises the coefficients (use one penalty or the other)"
            )
        if self.agreement is not None and self.agreement.enabled and self.data.ratings is None:
            raise ValueError("agreement: needs data.ratings, the paired-ratings file")
        return self

    def _check_missing_data(self, columns: set[str], weight: str | None, cluster: str | None) -> None:
        """The missing-data section against the rest: auxiliary columns of their own, methods for known columns."""
        section = self.missing_data
        if section is None or section.method != "multiple_imputation":
            return
        taken = {self.outcome.column: "the outcome", weight: "data.weight_column", cluster: "data.cluster_column",
                 self.data.id_column: "data.id_column"} | {c: "a predictor" for c in columns}
        for name in section.auxiliary:
            if name in taken:
                raise ValueError(f"missing_data.auxiliary: {name!r} is {taken[name]}; auxiliary columns are other columns of the data, used only to impute")
        known = list(self.predictors.in_analysis) + list(section.auxiliary)
        for name, method in section.methods.items():
            if name not in known:
                raise ValueError(f"missing_data.methods: {name!r} is not a predictor in analysis or an auxiliary column; expected one of {known}")
            spec = self.predictors.candidates.get(name)
            if spec is not None and spec.form != "categorical" and method != "pmm":
                raise ValueError(f"missing_data.methods.{name}: {name!r} is a number (form {spec.form!r}); expected pmm, received {method!r}")
            if spec is not None and spec.form == "categorical" and method == "pmm":
                raise ValueError(f"missing_data.methods.{name}: {name!r} is categorical; expected logistic, cumulative or multinomial, received 'pmm'")
        if weight is not None:
            raise ValueError("missing_data.method: multiple_imputation with data.weight_column is not supported; write the "
                             "cohort out one row per person, or use method complete_case")
        if self.selection.penalized:
            raise ValueError(f"missing_data.method: multiple_imputation with selection.method {self.selection.method!r} is not "
                             "supported (the penalised coefficients have no Rubin's-rules pooling); use none, forward or backward")

    @property
    def imputing(self) -> bool:
        """Whether missing predictor values are multiply imputed (``missing_data.method: multiple_imputation``)."""
        return self.missing_data is not None and self.missing_data.method == "multiple_imputation"

    # -- derived views ---------------------------------------------------------------
    @property
    def enabled_stages(self) -> tuple[str, ...]:
        """The stages this study runs, in order."""
        on = {"derivation", "summary"}
        if self.planning is not None and self.planning.enabled:
            on.add("planning")
        if self.agreement is not None and self.agreement.enabled:
            on.add("agreement")
        if self.internal_validation.enabled:
            on.add("internal_validation")
        if self.internal_external is not None and self.internal_external.enabled:
            on.add("internal_external")
        if self.data.validation and self.external_validation.enabled:
            on.add("external_validation")
        if self.data.validation and self.updating.enabled:
            on.add("updating")
        return tuple(s for s in STAGES if s in on)

    @property
    def updating_cohort(self) -> str | None:
        """Label of the cohort the updating stage uses."""
        if not self.data.validation:
            return None
        return self.updating.cohort or self.data.validation[0].label

    def thresholds_for_cut(self, cut: int) -> tuple[float, ...]:
        """Thresholds for cut ``cut`` (Y > cut), empty when none are given."""
        return self.thresholds.get(self.outcome.ordered_levels[cut + 1], ())

    def to_dict(self) -> dict[str, Any]:
        """The resolved study as plain JSON-ready values."""
        return self.model_dump(mode="json")

    def canonical_json(self) -> str:
        """Canonical JSON of the resolved study: sorted keys, no spaces (absolute paths, as analysed)."""
        return json.dumps(self.to_dict(), sort_keys=True, separators=(",", ":"), ensure_ascii=False)

    def portable_dict(self) -> dict[str, Any]:
        """The resolved study with every path inside the study folder relative to it, and no records folder.

        This is what the study says, whatever folder, clone or machine holds
        it: its digest is the same for a copy of the study folder anywhere.
        Paths outside the study folder stay absolute.
        """
        content = self.to_dict()
        content.get("output", {}).pop("records", None)  # where records go changes no result
        base = self._base_dir
        if base is None:
            return content

        def portable(value: Any) -> Any:
            if isinstance(value, dict):
                return {k: portable(v) for k, v in value.items()}
            if isinstance(value, list):
                return [portable(v) for v in value]
            if isinstance(value, str) and value.startswith(base + "/"):
                return Path(value).relative_to(base).as_posix()
            return value

        return portable(content)

    def digest(self) -> str:
        """SHA-256 of the canonical JSON of :meth:`portable_dict`: the same for the same study anywhere."""
        text = json.dumps(self.portable_dict(), sort_keys=True, separators=(",", ":"), ensure_ascii=False)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()


# -- loading and error reporting ---------------------------------------------------------


def _inner_model(annotation: Any) -> Any:
    """The pydantic model class reachable from a field annotation, if any."""
    origin = typing.get_origin(annotation)
    if origin is Annotated:
        return _inner_model(typing.get_args(annotation)[0])
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    if origin in (Union, types.UnionType, tuple, list, dict):
        for arg in typing.get_args(annotation):
            found = _inner_model(arg)
            if found is not None:
                return found
    return None


def _model_at(loc: tuple[Any, ...]) -> type[BaseModel] | None:
    """The model class whose fields live at ``loc`` (a pydantic error location)."""
    model: type[BaseModel] | None = Study
    for part in loc:
        if model is None:
            return None
        if isinstance(part, int) or part not in model.model_fields:
            # list index or dict key: stay on the item type of the current container
            continue
        model = _inner_model(model.model_fields[part].annotation)
    return model


def _path_text(loc: tuple[Any, ...]) -> str:
    text = ""
    for part in loc:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            text += ("." if text else "") + str(part)
    return text or "(top level)"


def _describe(error: dict[str, Any]) -> str:
    loc = tuple(p for p in error["loc"] if p not in ("function-after", "function-before"))
    kind = error["type"]
    if kind == "extra_forbidden":
        parent = _model_at(loc[:-1])
        allowed = sorted(parent.model_fields) if parent is not None else []
        near = difflib.get_close_matches(str(loc[-1]), allowed, n=1, cutoff=0.5)
        hint = f"; did you mean {near[0]!r}?" if near else "."
        return f"{_path_text(loc)}: unknown key{hint} Allowed keys here: {', '.join(allowed)}"
    if kind == "missing":
        return f"{_path_text(loc)}: required key is missing"
    message = error["msg"].removeprefix("Value error, ")
    received = error.get("input")
    # a message that names its own place or value is not given them twice
    shown = "" if isinstance(received, dict) or "received" in message else f" (received {received!r})"
    place = _path_text(loc)
    if not loc or message.split(":", 1)[0].split("[", 1)[0].split(".", 1)[0] in Study.model_fields:
        return f"{message}{shown}"
    return f"{place}: {message}{shown}"


def study_from_dict(raw: Any, *, base_dir: str | Path | None = None, source: str = "study") -> Study:
    """Validate a study given as a mapping.

    Parameters
    ----------
    raw : mapping
        The parsed study file.
    base_dir : path, optional
        Folder against which relative paths are resolved.
    source : str
        Name used in error messages (usually the file name).

    Raises
    ------
    StudyError
        Listing every problem with its key path, what was received and what
        is allowed.
    """
    if not isinstance(raw, dict):
        raise StudyError(f"{source}: expected a mapping of sections (study, data, outcome, ...); received {type(raw).__name__}")
    try:
        study = Study.model_validate(raw, context={"base_dir": str(base_dir) if base_dir is not None else None})
        study._base_dir = str(Path(base_dir).resolve()) if base_dir is not None else None
        return study
    except ValidationError as exc:
        lines = [_describe(e) for e in exc.errors()]
        raise StudyError(f"{source}: {len(lines)} problem(s)\n  - " + "\n  - ".join(lines)) from None


def load_study(path: str | Path) -> Study:
    """Read and validate a study file.

    Parameters
    ----------
    path : path
        A YAML study file.  Relative paths inside it are resolved against its folder.

    Returns
    -------
    Study
        The validated, resolved study.

    Raises
    ------
    StudyError
        If the path is a folder, the file is missing, is not UTF-8, is not
        valid YAML, or does not validate; the message names the file.
    """
    path = Path(path)
    if path.is_dir():
        inside = path / "study.yaml"
        hint = f"; did you mean {inside}?" if inside.is_file() else "; name the study's YAML file"
        raise StudyError(f"{path}: is a folder, not a study file{hint}")
    if not path.is_file():
        raise StudyError(f"{path}: study file not found")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise StudyError(
            f"{path}: not UTF-8 text (byte 0x{exc.object[exc.start]:02x} at position {exc.start}); "
            "save the study file as UTF-8"
        ) from None
    except OSError as exc:
        raise StudyError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    try:
        raw = yaml.load(text, Loader=_StudyLoader)
    except yaml.YAMLError as exc:
        detail = str(exc).replace('"<unicode string>"', f'"{path}"')
        raise StudyError(f"{path}: not valid YAML: {detail}") from None
    return study_from_dict(raw, base_dir=path.resolve().parent, source=str(path))
