"""Case-mix: how a validation cohort differs from the derivation cohort.

Performance in a validation cohort depends on the model and on who is in the
cohort.  :func:`case_mix` sets the two cohorts side by side so that a
validation result can be read in that light (Debray et al. 2015):

* every predictor and the outcome in each cohort, with standardised
  differences;
* the mean and standard deviation of the model's linear predictor in each
  cohort (a shifted mean says the validation patients are more or less
  severe by the model's own reckoning; a wider spread makes higher
  discrimination expected from case-mix alone);
* a membership model: a logistic regression of cohort membership on the
  model's predictors and the outcome.  Its C statistic says how well the two
  cohorts can be told apart -- near 0.5 they look alike (the validation tests
  reproducibility), near 1 they differ strongly (it tests transportability).
  Because an apparent C always exceeds 0.5 in finite samples, the C expected
  when membership is unrelated to the data is estimated by refitting the
  membership model after permuting the membership labels.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..intake.data import PreparedCohort, standardised_differences
from ..measures.discrimination import concordance
from ..errors import DataError, FitError, RiskvetError, RiskvetWarning, problem
from ..modelling.modelfile import PredictionModel
from ..modelling.fitter import fit_cumulative

__all__ = ["CaseMix", "case_mix", "linear_predictor_summary"]

_N_HIST_BINS = 30


@dataclass(frozen=True)
class CaseMix:
    """Derivation and validation cohorts compared.

    Attributes
    ----------
    derivation_label, validation_label : str
    n_derivation, n_validation : int
        Rows analysed in each cohort.
    table : DataFrame
        Side by side: ``variable``, ``level`` (empty for a numeric
        variable), ``statistic`` (``mean`` or ``proportion``),
        ``derivation``, ``derivation_sd``, ``validation``, ``validation_sd``
        (SDs for means only) and ``standardised_difference`` (validation
        minus derivation).  Rows: every predictor of the model, each outcome
        level, and the linear predictor (``variable = "linear predictor"``).
    lp_mean_derivation, lp_sd_derivation, lp_mean_validation, lp_sd_validation : float
        Mean and SD (n - 1) of the linear predictor x beta in each cohort.
    lp_sd_ratio : float
        ``lp_sd_validation / lp_sd_derivation``.
    lp_histogram_edges : ndarray
        Common bin edges of the linear predictor.
    lp_histogram_derivation, lp_histogram_validation : ndarray
        Counts per bin (an aggregate; no row is shown).
    membership_c : float
        Apparent C of the membership model (validation = event).
    membership_c_lower, membership_c_upper : float
        DeLong interval of ``membership_c``.
    membership_c_null : float
        Mean apparent C of the membership model refitted after permuting the
        membership labels: what chance alone gives with these sizes and
        predictors.
    n_permutations : int
        Permutations behind ``membership_c_null``.
    membership_coefficients : DataFrame
        The membership model's coefficients (``term``, ``estimate``, ``se``,
        ``z``, ``p``): the columns that tell the cohorts apart most.
    warnings : tuple of str
        Trouble met (for example separation in the membership model).
    """

    derivation_label: str
    validation_label: str
    n_derivation: int
    n_validation: int
    table: pd.DataFrame = field(repr=False)
    lp_mean_derivation: float
    lp_sd_derivation: float
    lp_mean_validation: float
    lp_sd_validation: float
    lp_sd_ratio: float
    lp_histogram_edges: np.ndarray = field(repr=False)
    lp_histogram_derivation: np.ndarray = field(repr=False)
    lp_histogram_validation: np.ndarray = field(repr=False)
    membership_c: float
    membership_c_lower: float
    membership_c_upper: float
    membership_c_null: float
    n_permutations: int
    membership_coefficients: pd.DataFrame = field(repr=False)
    warnings: tuple[str, ...]

    def to_frame(self) -> pd.DataFrame:
        """The side-by-side table."""
        return self.table.copy()

    def summary_frame(self) -> pd.DataFrame:
        """One row: the linear predictor and membership-model summaries."""
        return pd.DataFrame(
            [
                {
                    "derivation": self.derivation_label,
                    "validation": self.validation_label,
                    "n_derivation": self.n_derivation,
                    "n_validation": self.n_validation,
                    "lp_mean_derivation": self.lp_mean_derivation,
                    "lp_mean_validation": self.lp_mean_validation,
                    "lp_sd_derivation": self.lp_sd_derivation,
                    "lp_sd_validation": self.lp_sd_validation,
                    "membership_c": self.membership_c,
                    "membership_c_lower": self.membership_c_lower,
                    "membership_c_upper": self.membership_c_upper,
                    "membership_c_null": self.membership_c_null,
                }
            ]
        )

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


def linear_predictor_summary(model: PredictionModel, frame: pd.DataFrame) -> tuple[np.ndarray, float, float]:
    """The linear predictor of every row, its mean and its SD.

    For a model with one coefficient vector per cut the mean over cuts,
    x mean_j(beta_j), is used.
    """
    lp = np.asarray(model.linear_predictor(frame), dtype=float)
    if lp.ndim == 2:
        lp = lp.mean(axis=1)
    sd = float(np.std(lp, ddof=1)) if lp.size > 1 else float("nan")
    return lp, float(np.mean(lp)), sd


def _outcome_rows(der: PreparedCohort, val: PreparedCohort, labels: dict[str, str]) -> list[dict[str, Any]]:
    rows = []
    K = len(der.outcome_levels)
    for k, level in enumerate(der.outcome_levels):
        pa = float(np.mean(der.y == k))
        pb = float(np.mean(val.y == k))
        pooled = math.sqrt((pa * (1 - pa) + pb * (1 - pb)) / 2)
        rows.append(
            {
                "variable": "outcome",
                "level": labels.get(level, level),
                "statistic": "proportion",
                "derivation": pa,
                "derivation_sd": float("nan"),
                "validation": pb,
                "validation_sd": float("nan"),
                "standardised_difference": (pb - pa) / pooled if pooled > 0 else float("nan"),
            }
        )
    assert len(rows) == K
    return rows


def _membership_matrix(model: PredictionModel, der: PreparedCohort, val: PreparedCohort) -> pd.DataFrame:
    X = pd.concat([model.design.transform(der.frame), model.design.transform(val.frame)], ignore_index=True)
    y = np.r_[der.y, val.y]
    for k, level in enumerate(der.outcome_levels[1:], start=1):
        X[f"outcome={level}"] = (y == k).astype(float)
    return X


def _membership_c(X: pd.DataFrame, member: np.ndarray) -> tuple[float, float, float, Any]:
    fit = fit_cumulative(X, member)
    lp = fit.linear_predictor(X)
    c = concordance(member, lp)
    return c.estimate, c.lower, c.upper, fit


def case_mix(
    model: PredictionModel,
    derivation: PreparedCohort,
    validation: PreparedCohort,
    *,
    outcome_labels: dict[str, str] | None = None,
    n_permutations: int = 20,
    seed: int = 0,
) -> CaseMix:
    """Compare the case-mix of a validation cohort with the derivation cohort.

    Parameters
    ----------
    model : PredictionModel
        The frozen model whose predictors and linear predictor are compared.
    derivation, validation : PreparedCohort
        From :func:`riskvet.data.load_cohorts`.
    outcome_labels : dict, optional, keyword-only
        Display label per outcome level (``study.outcome.labels``).
    n_permutations : int, keyword-only
        Label permutations estimating the membership C expected by chance (0
        skips it).
    seed : int, keyword-only
        Seed of the permutations.

    Returns
    -------
    CaseMix

    Notes
    -----
    Standardised difference of a mean: (m_v - m_d) / sqrt((s_v^2 + s_d^2)/2);
    of a proportion: (p_v - p_d) / sqrt((p_v(1 - p_v) + p_d(1 - p_d))/2)
    (Austin 2009; computed by :func:`riskvet.data.standardised_differences`
    for the predictors).  The membership model is
    logit P(validation | x, y) = c + x gamma + sum_k delta_k I(y = k) with
    the model's design columns x, fitted by
    :func:`riskvet.models.fit_cumulative` with K = 2; its C is the apparent
    C of its linear predictor, with a DeLong interval (DeLong et al. 1988).
    Reading aids (our own, not from the source): a C within 0.05 of the
    chance value reads as similar case-mix, below 0.75 as moderately
    different, otherwise as clearly different; a standardised difference of
    the mean linear predictor of at least 0.1 in absolute value (common
    practice for imbalance) as a higher or lower average risk; an SD ratio
    of the linear predictor outside 0.9-1.1 as a wider or narrower spread.

    References
    ----------
    Debray TPA, Vergouwe Y, Koffijberg H, Nieboer D, Steyerberg EW, Moons KGM.
    A new framework to enhance the interpretation of external validation
    studies of clinical prediction models. Journal of Clinical Epidemiology
    2015;68(3):279-289.

    Austin PC. Balance diagnostics for comparing the distribution of baseline
    covariates between treatment groups in propensity-score matched samples.
    Statistics in Medicine 2009;28(25):3083-3107.

    DeLong ER, DeLong DM, Clarke-Pearson DL. Comparing the areas under two or
    more correlated receiver operating characteristic curves: a nonparametric
    approach. Biometrics 1988;44(3):837-845.
    """
    func = "case_mix"
    _check_inputs(model, derivation, validation, n_permutations=n_permutations, func=func)
    labels = dict(outcome_labels or {})

    rows = _predictor_rows(model, derivation, validation)
    rows += _outcome_rows(derivation, validation, labels)
    lp_d, m_d, s_d = linear_predictor_summary(model, derivation.frame)
    lp_v, m_v, s_v = linear_predictor_summary(model, validation.frame)
    pooled = math.sqrt((s_d**2 + s_v**2) / 2)
    lp_difference = (m_v - m_d) / pooled if pooled > 0 else float("nan")
    rows.append(
        {
            "variable": "linear predictor",
            "level": "",
            "statistic": "mean",
            "derivation": m_d,
            "derivation_sd": s_d,
            "validation": m_v,
            "validation_sd": s_v,
            "standardised_difference": lp_difference,
        }
    )
    table = pd.DataFrame(rows)
    lo, hi = float(min(lp_d.min(), lp_v.min())), float(max(lp_d.max(), lp_v.max()))
    edges = np.linspace(lo, hi if hi > lo else lo + 1.0, _N_HIST_BINS + 1)

    c, c_lo, c_hi, c_null, coefficients, notes = _membership(model, derivation, validation, n_permutations=n_permutations, seed=seed)
    for note in notes:
        warnings.warn(note, RiskvetWarning, stacklevel=2)

    return CaseMix(
        derivation_label=derivation.label,
        validation_label=validation.label,
        n_derivation=int(len(derivation.y)),
        n_validation=int(len(validation.y)),
        table=table,
        lp_mean_derivation=m_d,
        lp_sd_derivation=s_d,
        lp_mean_validation=m_v,
        lp_sd_validation=s_v,
        lp_sd_ratio=s_v / s_d if s_d > 0 else float("nan"),
        lp_histogram_edges=edges,
        lp_histogram_derivation=np.histogram(lp_d, bins=edges)[0],
        lp_histogram_validation=np.histogram(lp_v, bins=edges)[0],
        membership_c=c,
        membership_c_lower=c_lo,
        membership_c_upper=c_hi,
        membership_c_null=c_null,
        n_permutations=int(n_permutations),
        membership_coefficients=coefficients,
        warnings=tuple(notes),
    )


def _check_inputs(model: Any, derivation: Any, validation: Any, *, n_permutations: Any, func: str) -> None:
    """Refuse anything but a model, two cohorts with the same outcome levels and a count of permutations."""
    if not isinstance(model, PredictionModel):
        raise RiskvetError(problem(f"{func}(model=)", allowed="a PredictionModel", received=type(model).__name__))
    for name, cohort in (("derivation", derivation), ("validation", validation)):
        if not isinstance(cohort, PreparedCohort):
            raise DataError(problem(f"{func}({name}=)", allowed="a PreparedCohort from riskvet.data.load_cohorts", received=type(cohort).__name__))
    if derivation.outcome_levels != validation.outcome_levels:
        raise DataError(problem(f"{func}(validation=)", allowed=f"outcome levels {list(derivation.outcome_levels)}", received=list(validation.outcome_levels)))
    if isinstance(n_permutations, bool) or not isinstance(n_permutations, (int, np.integer)) or n_permutations < 0:
        raise RiskvetError(problem(f"{func}(n_permutations=)", allowed="a whole number >= 0", received=n_permutations))


def _predictor_rows(model: PredictionModel, der: PreparedCohort, val: PreparedCohort) -> list[dict[str, Any]]:
    """The predictors the model reads, side by side, standardised as validation minus derivation."""
    sd = standardised_differences(der, val).to_frame()
    sd = sd[sd["predictor"].isin(model.design.sources)]
    rows = []
    for r in sd.itertuples(index=False):
        row = {
            "variable": r.predictor,
            "level": r.level,
            "statistic": r.statistic,
            "derivation": float(r.a),
            "derivation_sd": float("nan"),
            "validation": float(r.b),
            "validation_sd": float("nan"),
            # the shared helper reports derivation minus validation
            "standardised_difference": -float(r.difference) if r.difference == r.difference else float("nan"),
        }
        if r.statistic == "mean":
            row["derivation_sd"] = float(der.frame[r.predictor].dropna().std(ddof=1))
            row["validation_sd"] = float(val.frame[r.predictor].dropna().std(ddof=1))
        rows.append(row)
    return rows


def _membership(model: PredictionModel, der: PreparedCohort, val: PreparedCohort, *, n_permutations: int,
                seed: int) -> tuple[float, float, float, float, pd.DataFrame, list[str]]:
    """The membership model: its C with interval, the C chance alone gives, its coefficients and the trouble met.

    A membership model that cannot be fitted leaves every C NaN and is noted,
    not raised: the rest of the case-mix comparison still stands.
    """
    X = _membership_matrix(model, der, val)
    member = np.r_[np.zeros(len(der.y), dtype=np.int64), np.ones(len(val.y), dtype=np.int64)]
    c = c_lo = c_hi = c_null = float("nan")
    coefficients = pd.DataFrame(columns=["term", "estimate", "se", "z", "p"])
    notes: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", RiskvetWarning)
        try:
            c, c_lo, c_hi, fit = _membership_c(X, member)
            frame = fit.to_frame()
            coefficients = frame.loc[frame["kind"] == "coefficient", ["term", "estimate", "se", "z", "p"]].reset_index(drop=True)
            if n_permutations:
                rng = np.random.default_rng(np.random.SeedSequence(int(seed)))
                null = [_membership_c(X, rng.permutation(member))[0] for _ in range(int(n_permutations))]
                c_null = float(np.mean(null))
        except FitError as exc:
            notes.append(f"membership model: could not be fitted ({exc})")
    notes += [f"membership model: {w.message}" for w in caught if issubclass(w.category, RiskvetWarning)]
    return c, c_lo, c_hi, c_null, coefficients, notes
