"""The frozen model file: everything needed to predict for a new person.

A model file is a JSON document of riskvet's own design (schema tag
``riskvet.model/1``).  It holds the design specification (terms, knots,
levels, references, interactions), the thresholds and coefficients, the link,
the outcome levels and labels, and provenance: hashes of the derivation data
and of the study, the parent model's hash for an updated model, the package
version and the creation time.  A SHA-256 of the canonical JSON of the content
is stored beside it; :func:`load_model` refuses a file whose content does not
match its hash or whose schema it does not know.

Floats are written with Python's shortest round-trip representation, so a
loaded model predicts bit-identical probabilities to the model that was saved.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from .links import link_cdf
from .equation import latex_equation, plain_equation
from ..intake.design import DesignSpec
from ..errors import DesignError, ModelFileError, RiskvetError, problem

__all__ = ["SCHEMA", "PredictionModel", "model_from_fit", "save_model", "load_model"]

SCHEMA = "riskvet.model/1"


def _canonical(value: Any) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


@dataclass(frozen=True)
class PredictionModel:
    """A frozen cumulative-link prediction model on raw data columns.

    Attributes
    ----------
    design : DesignSpec
        Turns raw columns into the model matrix.
    thresholds : ndarray, shape (K-1,)
        theta_j of P(Y <= j | x) = F(theta_j - x beta), increasing.
    coef : ndarray, shape (p,) or (p, K-1)
        beta, one per design column (one column per cut when not proportional).
    link : str
        ``logit``, ``probit``, ``cloglog`` or ``loglog``.
    outcome : dict
        ``column``, ``type``, ``levels`` (coded 0..K-1) and ``labels``.
    provenance : dict
        Hashes, version, creation time, parent and update method.
    """

    design: DesignSpec
    thresholds: np.ndarray
    coef: np.ndarray
    link: str
    outcome: Mapping[str, Any]
    provenance: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        th = np.asarray(self.thresholds, dtype=float)
        b = np.asarray(self.coef, dtype=float)
        object.__setattr__(self, "thresholds", th)
        object.__setattr__(self, "coef", b)
        p = len(self.design.columns)
        if b.shape[0] != p or (b.ndim == 2 and b.shape[1] != th.size) or b.ndim > 2:
            raise ModelFileError(
                problem("PredictionModel.coef", allowed=f"{p} coefficients (or {p} x {th.size})", received=b.shape)
            )
        # a non-proportional model's thresholds are cumulative logits at x = 0, which
        # may lie outside the data and need not increase; only the proportional ones must
        if th.size != len(self.outcome["levels"]) - 1 or (b.ndim == 1 and np.any(np.diff(th) <= 0)):
            raise ModelFileError(
                problem("PredictionModel.thresholds", allowed="K-1 values, strictly increasing for a proportional model", received=th.tolist())
            )

    # -- prediction ---------------------------------------------------------------
    @property
    def proportional(self) -> bool:
        return self.coef.ndim == 1

    @property
    def levels(self) -> tuple[str, ...]:
        return tuple(self.outcome["levels"])

    def matrix(self, frame: pd.DataFrame) -> np.ndarray:
        """The model matrix of ``frame`` (refuses data the design cannot encode)."""
        return self.design.transform(frame).to_numpy()

    def linear_predictor(self, frame: pd.DataFrame) -> np.ndarray:
        """x beta for each row (n, or n x (K-1) when not proportional)."""
        return self.matrix(frame) @ self.coef

    def predict_proba(self, frame: pd.DataFrame, *, offset: np.ndarray | None = None) -> np.ndarray:
        """Predicted probability of each outcome level, n x K."""
        return self.proba_from_lp(self.linear_predictor(frame) if offset is None else self.linear_predictor(frame) + offset)

    def proba_from_lp(self, lp: np.ndarray) -> np.ndarray:
        """Level probabilities from a linear predictor."""
        lp = np.asarray(lp, dtype=float)
        eta = self.thresholds[None, :] - (lp[:, None] if lp.ndim == 1 else lp)
        cum = link_cdf(self.link, eta)
        n = cum.shape[0]
        cum = np.hstack([np.zeros((n, 1)), cum, np.ones((n, 1))])
        return np.diff(cum, axis=1)

    def score_person(self, values: Mapping[str, Any]) -> dict[str, float]:
        """Predicted level probabilities for one person given raw values.

        Parameters
        ----------
        values : mapping
            Raw value of every predictor the design reads, by column name.

        Returns
        -------
        dict
            Level name -> probability, and ``P(>= level)`` for each cut.
        """
        missing = [c for c in self.design.sources if c not in values]
        if missing:
            raise DesignError(problem("score_person(values)", allowed=f"a value for each of {list(self.design.sources)}", received=f"missing {missing}"))
        absent = [c for c in self.design.sources if values[c] is None or (isinstance(values[c], float) and math.isnan(values[c]))
                  or (isinstance(values[c], str) and not values[c].strip())]
        if absent:
            raise DesignError(problem(
                "score_person(values)", allowed=f"a recorded value for each of {list(self.design.sources)}: a missing predictor "
                "is never imputed or given a default for one person (imputation is for the analysis of a cohort)",
                received=f"no value for {absent}"))
        frame = pd.DataFrame({c: [values[c]] for c in self.design.sources})
        prob = self.predict_proba(frame)[0]
        out = {lv: float(p) for lv, p in zip(self.levels, prob)}
        for j, lv in enumerate(self.levels[1:], start=1):
            out[f"P(>= {lv})"] = float(prob[j:].sum())
        return out

    # -- description ----------------------------------------------------------------
    def coefficient_table(self) -> pd.DataFrame:
        """Thresholds and coefficients on the scale users read."""
        rows = [{"parameter": f"threshold {self.levels[j]}|{self.levels[j + 1]}", "estimate": float(t)} for j, t in enumerate(self.thresholds)]
        if self.proportional:
            rows += [{"parameter": c, "estimate": float(b)} for c, b in zip(self.design.columns, self.coef)]
        else:
            for j in range(self.thresholds.size):
                rows += [{"parameter": f"{c} [cut {j}]", "estimate": float(b)} for c, b in zip(self.design.columns, self.coef[:, j])]
        return pd.DataFrame(rows)

    def to_frame(self) -> pd.DataFrame:
        return self.coefficient_table()

    def equation_text(self, *, digits: int = 4) -> str:
        """The model equation in plain language."""
        return plain_equation(self, digits=digits)

    def equation_latex(self, *, digits: int = 4) -> str:
        """The model equation as LaTeX, for a paper's appendix."""
        return latex_equation(self, digits=digits)

    # -- serialisation ---------------------------------------------------------------
    def content(self) -> dict[str, Any]:
        """The JSON content of the model file (without its hash)."""
        return to_jsonable(
            {
                "schema": SCHEMA,
                "outcome": dict(self.outcome),
                "link": self.link,
                "proportional": self.proportional,
                "design": self.design.to_dict(),
                "thresholds": [float(t) for t in self.thresholds],
                "coefficients": self.coef.tolist(),
                "columns": list(self.design.columns),
                "provenance": dict(self.provenance),
            }
        )

    def digest(self) -> str:
        """SHA-256 of the canonical JSON of :meth:`content`."""
        return hashlib.sha256(_canonical(self.content()).encode("utf-8")).hexdigest()

    def to_dict(self) -> dict[str, Any]:
        return {**self.content(), "content_sha256": self.digest()}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], *, source: str = "model") -> "PredictionModel":
        if not isinstance(data, Mapping):
            raise ModelFileError(f"{source}: not a riskvet model file (expected a JSON object)")
        schema = data.get("schema")
        if schema != SCHEMA:
            raise ModelFileError(problem(f"{source}: schema", allowed=f"{SCHEMA!r} (this riskvet reads only that)", received=schema))
        stored = data.get("content_sha256")
        content = {k: v for k, v in data.items() if k != "content_sha256"}
        actual = hashlib.sha256(_canonical(content).encode("utf-8")).hexdigest()
        if stored != actual:
            raise ModelFileError(
                f"{source}: content does not match its hash (stored {stored!r}, computed {actual!r}); "
                "the file was altered or damaged after it was written"
            )
        try:
            design = DesignSpec.from_dict(content["design"])
            columns = list(content["columns"])
            if columns != list(design.columns):
                raise ModelFileError(f"{source}: coefficient columns {columns} differ from the design columns {list(design.columns)}")
            model = cls(
                design=design,
                thresholds=np.asarray(content["thresholds"], dtype=float),
                coef=np.asarray(content["coefficients"], dtype=float).reshape((len(columns),) if content["proportional"] else (len(columns), -1)),
                link=content["link"],
                outcome=content["outcome"],
                provenance=content.get("provenance", {}),
            )
        except KeyError as exc:
            raise ModelFileError(f"{source}: required field {exc.args[0]!r} is missing") from None
        return model


def model_from_fit(
    fit: Any,
    design: DesignSpec,
    *,
    outcome: Mapping[str, Any],
    provenance: Mapping[str, Any] | None = None,
) -> PredictionModel:
    """Freeze a fitted cumulative model with its design.

    Parameters
    ----------
    fit : CumulativeFit
        From :func:`riskvet.models.fit_cumulative` on ``design.transform(data)``
        (columns may be in any order; they are matched by name).
    design : DesignSpec
        The design of the fitted columns.
    outcome : mapping
        ``column``, ``type``, ``levels`` (coded order) and ``labels``.
    provenance : mapping, optional
        Hashes and notes stored with the model.
    """
    coef = fit.coef
    names = list(design.columns)
    if isinstance(coef, pd.DataFrame):
        values = coef.reindex(names).to_numpy(dtype=float)
    else:
        values = pd.Series(coef).reindex(names).to_numpy(dtype=float)
    if np.isnan(values).any():
        raise RiskvetError(problem("model_from_fit(fit, design)", allowed=f"a coefficient for every design column {names}", received=list(pd.Series(coef).index) if not isinstance(coef, pd.DataFrame) else list(coef.index)))
    from .. import __version__

    prov = {"riskvet_version": __version__, **(provenance or {})}
    return PredictionModel(
        design=design,
        thresholds=np.asarray(fit.thresholds, dtype=float),
        coef=values,
        link=fit.link,
        outcome=dict(outcome),
        provenance=prov,
    )


def save_model(model: PredictionModel, path: str | Path) -> Path:
    """Write a model file; refuses to overwrite an existing file."""
    path = Path(path)
    if path.exists():
        raise ModelFileError(f"{path}: already exists; a model file is never overwritten")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(model.to_dict(), indent=1, sort_keys=True, allow_nan=False) + "\n", encoding="utf-8")
    return path


def load_model(path: str | Path) -> PredictionModel:
    """Read a model file, checking its schema and content hash.

    Raises
    ------
    ModelFileError
        The file is missing, not JSON, of an unknown schema, or altered.
    """
    path = Path(path)
    if not path.is_file():
        raise ModelFileError(f"{path}: model file not found")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except json.JSONDecodeError as exc:
        raise ModelFileError(f"{path}: not valid JSON ({exc})") from None
    return PredictionModel.from_dict(data, source=str(path))
