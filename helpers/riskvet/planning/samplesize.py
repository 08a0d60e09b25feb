"""Sample-size planning for developing and validating a prediction model.

* :func:`development_size` – the minimum n to develop a model for a binary
  outcome (Riley et al. 2019, 2020): shrinkage, optimism and overall-risk
  criteria; :func:`ordinal_development_size` applies them to every cut of an
  ordered outcome.
* :func:`r2_from_c` – an anticipated Cox–Snell R² from a reported C statistic.
* :func:`validation_size` – the minimum n to validate a model externally
  (Riley et al. 2021): precision of O/E, calibration slope, C statistic and,
  optionally, standardised net benefit.
* :func:`justification_text` – a paragraph a protocol can quote.

Every criterion's n is rounded up; the binding criterion is the one needing
the largest n.  Expected events (n·φ) are reported beside it; events per
candidate parameter is given for information only, not as the criterion.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any, Literal, Sequence

import numpy as np
import pandas as pd
from scipy import integrate, optimize, special, stats

from .._jsonable import to_jsonable
from ..errors import StudyError, problem

__all__ = [
    "SizeCriterion",
    "DevelopmentSize",
    "OrdinalDevelopmentSize",
    "ValidationSize",
    "max_r2_cs",
    "r2_from_c",
    "development_size",
    "ordinal_development_size",
    "validation_size",
    "justification_text",
]

#: Nagelkerke R² assumed when nothing better is known (a conservative choice
#: suggested by Riley et al., BMJ 2020 — recalled from memory).
DEFAULT_NAGELKERKE_R2 = 0.15

_Z95 = 1.96  # the published criteria (iii) and (for intervals) are written for 95%


# --------------------------------------------------------------------------
# checks and results
# --------------------------------------------------------------------------

def _number(where: str, value: Any, *, low: float | None = None, high: float | None = None, low_open: bool = True, high_open: bool = True, allowed: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)) or not math.isfinite(float(value)):
        raise StudyError(problem(where, allowed=allowed, received=value))
    v = float(value)
    if low is not None and (v <= low if low_open else v < low):
        raise StudyError(problem(where, allowed=allowed, received=value))
    if high is not None and (v >= high if high_open else v > high):
        raise StudyError(problem(where, allowed=allowed, received=value))
    return v


def _prevalence(where: str, value: Any) -> float:
    return _number(where, value, low=0, high=1, allowed="an outcome proportion strictly between 0 and 1")


def _ceil(x: float) -> int:
    # Guard against 385.0000000001 from rounding becoming 386.
    return int(math.ceil(x - 1e-9))


class _Result:
    def to_dict(self) -> dict[str, Any]:
        """Return the fields as JSON-ready plain values."""
        return {f.name: to_jsonable(getattr(self, f.name)) for f in dataclasses.fields(self)}  # type: ignore[arg-type]


@dataclass(frozen=True)
class SizeCriterion(_Result):
    """One sample-size criterion.

    Attributes
    ----------
    name : str
        Short name, e.g. ``"shrinkage"``, ``"optimism"``, ``"overall risk"``,
        ``"O/E"``, ``"calibration slope"``, ``"C statistic"``, ``"net benefit"``.
    target : str
        What the criterion secures, in words.
    n_exact : float
        The n from the formula before rounding up.
    n : int
        ``n_exact`` rounded up.
    events : float
        Expected events at ``n`` (n·φ).
    """

    name: str
    target: str
    n_exact: float
    n: int
    events: float


def _binding(criteria: Sequence[SizeCriterion]) -> SizeCriterion:
    return max(criteria, key=lambda c: (c.n, -list(criteria).index(c)))


# --------------------------------------------------------------------------
# R² helpers
# --------------------------------------------------------------------------

def max_r2_cs(prevalence: float) -> float:
    """Largest Cox–Snell R² possible for an outcome proportion.

    Parameters
    ----------
    prevalence : float
        Outcome proportion φ in (0, 1).

    Returns
    -------
    float
        1 − exp(2·lnL₀/n) with lnL₀/n = φ ln φ + (1 − φ) ln(1 − φ), the
        null model's log-likelihood per person.

    References
    ----------
    Nagelkerke NJD. A note on a general definition of the coefficient of
    determination. Biometrika 1991; 78(3): 691–692.
    """
    phi = _prevalence("max_r2_cs(prevalence)", prevalence)
    ll0 = phi * math.log(phi) + (1 - phi) * math.log(1 - phi)
    return 1.0 - math.exp(2.0 * ll0)


# Expectations over a standard normal Z by the trapezoidal rule on a fine
# grid over ±12 SD; unlike Gauss–Hermite it stays accurate when the
# integrand is nearly a step (a wide linear predictor through expit).
_Z_NODES = np.linspace(-12.0, 12.0, 6001)
_Z_WEIGHTS = stats.norm.pdf(_Z_NODES) * np.gradient(_Z_NODES)
_Z_WEIGHTS[[0, -1]] /= 2
_Z_WEIGHTS = _Z_WEIGHTS / _Z_WEIGHTS.sum()


def r2_from_c(
    c_statistic: float,
    prevalence: float,
    *,
    method: Literal["quadrature", "simulation"] = "quadrature",
    n_sim: int = 1_000_000,
    seed: int | np.random.Generator = 0,
) -> float:
    """Anticipated Cox–Snell R² of a model with a given C statistic.

    Parameters
    ----------
    c_statistic : float
        Anticipated C statistic (area under the ROC curve), in (0.5, 1).
    prevalence : float
        Outcome proportion φ in (0, 1).
    method : {"quadrature", "simulation"}, default "quadrature"
        ``"simulation"`` follows the published procedure: one large data set
        with ``round(n_sim·φ)`` events, a logistic regression of the outcome
        on the linear predictor (statsmodels ``Logit``), and
        R² = 1 − exp(−LR/n).  ``"quadrature"`` computes the limit of that
        procedure as n_sim → ∞ by numerical integration over the normal
        distributions (trapezoidal rule, 6001 points over ±12 SD), with no
        Monte Carlo error.
    n_sim : int, default 1_000_000
        Size of the simulated data set (``method="simulation"`` only).
    seed : int or numpy.random.Generator, default 0
        Randomness of the simulation (``method="simulation"`` only); the
        result is a deterministic function of the seed.

    Returns
    -------
    float
        Anticipated Cox–Snell R².

    Notes
    -----
    The linear predictor is taken as normal with unit variance in
    non-events and in events, means 0 and Δ = √2·Φ⁻¹(C), which gives
    C = Φ(Δ/√2).  Then the true log odds are linear in the predictor,
    logit P(Y = 1 | x) = logit φ + Δx − Δ²/2, so the logistic fit converges
    to them, and LR/n → 2{E[log P(Y | x)] − (φ ln φ + (1 − φ) ln(1 − φ))},
    the expectation taken over the mixture.

    References
    ----------
    Riley RD, Van Calster B, Collins GS. A note on estimating the Cox–Snell R²
    from a reported C statistic (AUROC) to inform sample size calculations for
    developing a prediction model with a binary outcome. Statistics in
    Medicine 2021; 40(4): 859–864.
    """
    c = _number("r2_from_c(c_statistic)", c_statistic, low=0.5, high=1, low_open=False, allowed="a C statistic in [0.5, 1)")
    phi = _prevalence("r2_from_c(prevalence)", prevalence)
    if method not in ("quadrature", "simulation"):
        raise StudyError(problem("r2_from_c(method)", allowed="'quadrature' or 'simulation'", received=method))
    delta = math.sqrt(2.0) * float(stats.norm.ppf(c))
    ll0 = phi * math.log(phi) + (1 - phi) * math.log(1 - phi)
    if method == "quadrature":
        base = math.log(phi / (1 - phi)) - delta**2 / 2
        eta_events = base + delta * (delta + _Z_NODES)
        eta_non = base + delta * _Z_NODES
        # log expit(t) = -log(1 + exp(-t)); log(1 - expit(t)) = -log(1 + exp(t))
        ll = phi * float(np.sum(_Z_WEIGHTS * -np.logaddexp(0.0, -eta_events))) + (1 - phi) * float(np.sum(_Z_WEIGHTS * -np.logaddexp(0.0, eta_non)))
        lr_per_person = max(2.0 * (ll - ll0), 0.0)
        return float(-np.expm1(-lr_per_person))
    if isinstance(n_sim, bool) or not isinstance(n_sim, (int, np.integer)) or n_sim < 100:
        raise StudyError(problem("r2_from_c(n_sim)", allowed="an integer of at least 100", received=n_sim))
    if not isinstance(seed, (int, np.integer, np.random.Generator)) or isinstance(seed, bool):
        raise StudyError(problem("r2_from_c(seed)", allowed="an integer or a numpy Generator", received=seed))
    import statsmodels.api as sm

    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(int(seed))
    n_events = int(round(n_sim * phi))
    if n_events < 1 or n_events >= n_sim:
        raise StudyError(problem("r2_from_c(n_sim)", allowed="enough people for at least one event and one non-event", received=n_sim))
    x = np.concatenate([rng.normal(delta, 1.0, n_events), rng.normal(0.0, 1.0, n_sim - n_events)])
    y = np.concatenate([np.ones(n_events), np.zeros(n_sim - n_events)])
    fit = sm.Logit(y, sm.add_constant(x)).fit(disp=0)
    return float(-np.expm1(-float(fit.llr) / n_sim))


# --------------------------------------------------------------------------
# development
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class DevelopmentSize(_Result):
    """Minimum sample size to develop a model for a binary outcome.

    Attributes
    ----------
    n_parameters : int
        Candidate predictor parameters p (degrees of freedom, not variables).
    prevalence : float
        Anticipated outcome proportion φ.
    r2_cs : float
        Anticipated Cox–Snell R² used.
    r2_source : str
        Where ``r2_cs`` came from: ``"given"``, ``"from C statistic"`` or
        ``"default: Nagelkerke R² 0.15"``.
    c_statistic : float or None
        The C statistic it was derived from, if any.
    max_r2_cs : float
        Largest Cox–Snell R² possible at this φ.
    r2_nagelkerke : float
        ``r2_cs / max_r2_cs``.
    shrinkage : float
        Target expected uniform shrinkage S of criterion (i).
    delta : float
        Largest acceptable optimism in Nagelkerke's R² (criterion ii).
    margin : float
        Absolute margin of error for the overall risk (criterion iii).
    shrinkage_for_optimism : float
        The shrinkage S_ii that criterion (ii) requires.
    criteria : tuple of SizeCriterion
        Criteria (i), (ii), (iii) in that order.
    binding : str
        Name of the criterion needing the largest n.
    n : int
        Minimum sample size: the largest of the criteria.
    events : float
        Expected events n·φ.
    events_per_parameter : float
        events / n_parameters (for information).
    """

    n_parameters: int
    prevalence: float
    r2_cs: float
    r2_source: str
    c_statistic: float | None
    max_r2_cs: float
    r2_nagelkerke: float
    shrinkage: float
    delta: float
    margin: float
    shrinkage_for_optimism: float
    criteria: tuple[SizeCriterion, ...]
    binding: str
    n: int
    events: float
    events_per_parameter: float

    def to_frame(self) -> pd.DataFrame:
        """Return one row per criterion, with the binding one flagged."""
        rows = [dict(c.to_dict(), events_per_parameter=c.events / self.n_parameters, binding=c.name == self.binding) for c in self.criteria]
        out = pd.DataFrame(rows)
        out.insert(0, "prevalence", self.prevalence)
        return out


def _shrinkage_n(p: int, r2: float, s: float) -> float:
    return p / ((s - 1.0) * math.log(1.0 - r2 / s))


def _development(n_parameters: int, phi: float, r2: float | None, c: float | None, shrinkage: float, delta: float, margin: float, where: str) -> DevelopmentSize:
    mx = max_r2_cs(phi)
    if r2 is not None:
        source = "given"
    elif c is not None:
        r2 = r2_from_c(c, phi)
        source = "from C statistic"
    else:
        r2 = DEFAULT_NAGELKERKE_R2 * mx
        source = f"default: Nagelkerke R² {DEFAULT_NAGELKERKE_R2:g}"
    if not 0 < r2 < mx:
        raise StudyError(problem(f"{where}(r2_cs)", allowed=f"a Cox–Snell R² above 0 and below its maximum {mx:.4f} at prevalence {phi:g}", received=r2))
    if r2 >= shrinkage:
        raise StudyError(problem(f"{where}(shrinkage)", allowed=f"a target shrinkage above the anticipated R² {r2:.4f}", received=shrinkage))
    s_ii = r2 / (r2 + delta * mx)
    n_i = _shrinkage_n(n_parameters, r2, shrinkage)
    n_ii = _shrinkage_n(n_parameters, r2, s_ii)
    n_iii = (_Z95 / margin) ** 2 * phi * (1 - phi)
    crit = (
        SizeCriterion("shrinkage", f"expected uniform shrinkage of at least {shrinkage:g}", n_i, _ceil(n_i), _ceil(n_i) * phi),
        SizeCriterion("optimism", f"optimism in Nagelkerke R² of at most {delta:g} (shrinkage {s_ii:.3f})", n_ii, _ceil(n_ii), _ceil(n_ii) * phi),
        SizeCriterion("overall risk", f"overall risk within ±{margin:g} (95% confidence)", n_iii, _ceil(n_iii), _ceil(n_iii) * phi),
    )
    top = _binding(crit)
    return DevelopmentSize(
        n_parameters=n_parameters,
        prevalence=phi,
        r2_cs=float(r2),
        r2_source=source,
        c_statistic=c,
        max_r2_cs=mx,
        r2_nagelkerke=float(r2) / mx,
        shrinkage=shrinkage,
        delta=delta,
        margin=margin,
        shrinkage_for_optimism=s_ii,
        criteria=crit,
        binding=top.name,
        n=top.n,
        events=top.n * phi,
        events_per_parameter=top.n * phi / n_parameters,
    )


def _common_development_checks(where: str, n_parameters: Any, r2_cs: Any, c_statistic: Any, shrinkage: Any, delta: Any, margin: Any) -> tuple[int, float, float, float]:
    if isinstance(n_parameters, bool) or not isinstance(n_parameters, (int, np.integer)) or n_parameters < 1:
        raise StudyError(problem(f"{where}(n_parameters)", allowed="a whole number of candidate parameters, at least 1", received=n_parameters))
    if r2_cs is not None and c_statistic is not None:
        raise StudyError(problem(f"{where}(r2_cs, c_statistic)", allowed="at most one of r2_cs and c_statistic", received=(r2_cs, c_statistic)))
    s = _number(f"{where}(shrinkage)", shrinkage, low=0, high=1, allowed="a target shrinkage strictly between 0 and 1")
    d = _number(f"{where}(delta)", delta, low=0, high=1, allowed="an optimism margin strictly between 0 and 1")
    m = _number(f"{where}(margin)", margin, low=0, high=1, allowed="a margin of error strictly between 0 and 1")
    return int(n_parameters), s, d, m


def development_size(
    *,
    n_parameters: int,
    prevalence: float,
    r2_cs: float | None = None,
    shrinkage: float = 0.9,
    delta: float = 0.05,
    margin: float = 0.05,
    c_statistic: float | None = None,
) -> DevelopmentSize:
    """Minimum sample size to develop a logistic prediction model.

    Parameters
    ----------
    n_parameters : int
        Candidate predictor parameters p (each spline term, each category
        dummy counts), before any selection.
    prevalence : float
        Anticipated outcome proportion φ in the target population.
    r2_cs : float, optional
        Anticipated Cox–Snell R² (e.g. from an existing model's likelihood
        ratio: 1 − exp(−LR/n)).
    shrinkage : float, default 0.9
        Target expected uniform shrinkage S of criterion (i).
    delta : float, default 0.05
        Largest acceptable difference between apparent and adjusted
        Nagelkerke R² (criterion ii).
    margin : float, default 0.05
        Margin of error for the overall outcome proportion (criterion iii).
    c_statistic : float, optional
        Anticipated C statistic, turned into R² by :func:`r2_from_c`.  Give
        at most one of ``r2_cs`` and ``c_statistic``; with neither, R² is set
        so that Nagelkerke's R² is 0.15 (conservative; Riley et al. 2020 —
        recalled from memory).

    Returns
    -------
    DevelopmentSize

    Raises
    ------
    StudyError
        An input out of range, both ``r2_cs`` and ``c_statistic``, or an R²
        at or above its maximum for this prevalence.

    Notes
    -----
    With max R²cs = 1 − exp(2(φ ln φ + (1 − φ) ln(1 − φ))):

    (i) shrinkage: n = p / ((S − 1) ln(1 − R²cs/S));
    (ii) optimism: S_ii = R²cs / (R²cs + δ·max R²cs), then n from (i) with S_ii;
    (iii) overall risk: n = (1.96/margin)² φ(1 − φ).

    The minimum n is the largest of the three, each rounded up.  Events per
    candidate parameter is reported but is not a criterion.

    References
    ----------
    Riley RD, Snell KIE, Ensor J, et al. Minimum sample size for developing a
    multivariable prediction model: Part II – binary and time-to-event
    outcomes. Statistics in Medicine 2019; 38(7): 1276–1296.

    Riley RD, Ensor J, Snell KIE, et al. Calculating the sample size required
    for developing a clinical prediction model. BMJ 2020; 368: m441.

    van Smeden M, Moons KGM, de Groot JAH, et al. Sample size for binary
    logistic prediction models: beyond events per variable criteria.
    Statistical Methods in Medical Research 2019; 28(8): 2455–2474.

    Examples
    --------
    >>> r = development_size(n_parameters=24, prevalence=0.174, r2_cs=0.288)
    >>> [c.n for c in r.criteria], r.binding
    ([623, 662, 221], 'optimism')
    """
    where = "development_size"
    p, s, d, m = _common_development_checks(where, n_parameters, r2_cs, c_statistic, shrinkage, delta, margin)
    phi = _prevalence(f"{where}(prevalence)", prevalence)
    r2 = None if r2_cs is None else _number(f"{where}(r2_cs)", r2_cs, low=0, high=1, allowed="a Cox–Snell R² strictly between 0 and 1")
    c = None if c_statistic is None else _number(f"{where}(c_statistic)", c_statistic, low=0.5, high=1, allowed="a C statistic strictly between 0.5 and 1")
    return _development(p, phi, r2, c, s, d, m, where)


@dataclass(frozen=True)
class OrdinalDevelopmentSize(_Result):
    """Minimum sample size for an ordered outcome, by the binary criteria per cut.

    Attributes
    ----------
    n_parameters : int
        Candidate predictor parameters.
    proportions : tuple of float
        Anticipated proportion in each outcome level, lowest first.
    cuts : tuple of DevelopmentSize
        The binary calculation for each cut j (Y > j versus Y ≤ j).
    binding_cut : int
        The cut needing the largest n.
    n : int
        Minimum sample size: the largest over cuts.
    level_counts : tuple of float
        Expected number in each level at n.
    """

    n_parameters: int
    proportions: tuple[float, ...]
    cuts: tuple[DevelopmentSize, ...]
    binding_cut: int
    n: int
    level_counts: tuple[float, ...]

    def to_frame(self) -> pd.DataFrame:
        """Return one row per cut and criterion."""
        parts = []
        for j, cut in enumerate(self.cuts):
            f = cut.to_frame()
            f.insert(0, "cut", j)
            f["binding_cut"] = j == self.binding_cut
            parts.append(f)
        return pd.concat(parts, ignore_index=True)


def _per_cut(where: str, name: str, value: Any, n_cuts: int) -> list[float | None]:
    if value is None:
        return [None] * n_cuts
    if isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool):
        return [float(value)] * n_cuts
    vals = list(value)
    if len(vals) != n_cuts:
        raise StudyError(problem(f"{where}({name})", allowed=f"one number, or one per cut ({n_cuts})", received=value))
    return [None if v is None else v for v in vals]


def ordinal_development_size(
    *,
    n_parameters: int,
    proportions: Sequence[float],
    r2_cs: float | Sequence[float] | None = None,
    c_statistic: float | Sequence[float] | None = None,
    shrinkage: float = 0.9,
    delta: float = 0.05,
    margin: float = 0.05,
) -> OrdinalDevelopmentSize:
    """Minimum sample size for an ordered outcome: binary criteria at every cut.

    Parameters
    ----------
    n_parameters : int
        Candidate predictor parameters (excluding the K − 1 thresholds).
    proportions : sequence of float
        Anticipated proportion in each of the K ≥ 2 levels, lowest first;
        must sum to 1 (within 1e-6).
    r2_cs : float or sequence of float, optional
        Anticipated Cox–Snell R² of the binary model at each cut j (Y > j);
        one number is used for every cut.
    c_statistic : float or sequence of float, optional
        Anticipated C statistic at each cut instead of ``r2_cs``.
    shrinkage, delta, margin : float
        As in :func:`development_size`.

    Returns
    -------
    OrdinalDevelopmentSize

    Notes
    -----
    An extension made here, stated as such: each cut j defines a binary
    outcome with φ_j = Σ_{l>j} proportions[l]; :func:`development_size` is
    applied to each, and the minimum n is the largest over cuts.  A model for
    the ordered outcome uses all cuts jointly, so this is a pragmatic bound,
    not a derived criterion.  Pate et al. (2023) derived criteria for
    multinomial outcomes (shrinkage of each sub-model and the overall
    optimism of the multinomial R²), which are more refined; they are not
    implemented here.

    References
    ----------
    Riley RD, Snell KIE, Ensor J, et al. Minimum sample size for developing a
    multivariable prediction model: Part II – binary and time-to-event
    outcomes. Statistics in Medicine 2019; 38(7): 1276–1296.

    Pate A, Riley RD, Collins GS, van Smeden M, Van Calster B, Ensor J,
    Martin GP. Minimum sample size for developing a multivariable prediction
    model using multinomial logistic regression. Statistical Methods in
    Medical Research 2023; 32(3): 555–571.
    """
    where = "ordinal_development_size"
    p, s, d, m = _common_development_checks(where, n_parameters, r2_cs, c_statistic, shrinkage, delta, margin)
    try:
        props = [float(v) for v in proportions]
    except (TypeError, ValueError):
        raise StudyError(problem(f"{where}(proportions)", allowed="a sequence of proportions, one per level", received=proportions)) from None
    if len(props) < 2 or any(not (0 < v < 1) for v in props) or abs(sum(props) - 1) > 1e-6:
        raise StudyError(problem(f"{where}(proportions)", allowed="at least 2 proportions, each in (0, 1), summing to 1", received=proportions))
    n_cuts = len(props) - 1
    r2s = _per_cut(where, "r2_cs", r2_cs, n_cuts)
    cs = _per_cut(where, "c_statistic", c_statistic, n_cuts)
    cuts = []
    for j in range(n_cuts):
        phi = float(sum(props[j + 1 :]))
        r2 = None if r2s[j] is None else _number(f"{where}(r2_cs[{j}])", r2s[j], low=0, high=1, allowed="a Cox–Snell R² strictly between 0 and 1")
        c = None if cs[j] is None else _number(f"{where}(c_statistic[{j}])", cs[j], low=0.5, high=1, allowed="a C statistic strictly between 0.5 and 1")
        cuts.append(_development(p, phi, r2, c, s, d, m, f"{where}[cut {j}]"))
    top = max(range(n_cuts), key=lambda j: (cuts[j].n, -j))
    n = cuts[top].n
    return OrdinalDevelopmentSize(
        n_parameters=p,
        proportions=tuple(props),
        cuts=tuple(cuts),
        binding_cut=top,
        n=n,
        level_counts=tuple(n * v for v in props),
    )


# --------------------------------------------------------------------------
# validation
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class ValidationSize(_Result):
    """Minimum sample size to validate a model for a binary outcome.

    Attributes
    ----------
    prevalence : float
        Anticipated outcome proportion φ in the validation population.
    c_statistic : float
        Anticipated C statistic.
    oe, slope : float
        Anticipated observed/expected ratio and calibration slope.
    confidence : float
        Confidence level of the target intervals.
    widths : dict
        Target interval widths by criterion name (None = not used).
    lp_mean, lp_sd : float
        Mean and SD of the normal linear predictor used for the slope (and
        net-benefit) criteria.
    lp_source : str
        ``"given"`` or ``"matched to prevalence, C, O/E and slope"``.
    outcome_intercept : float
        a in the assumed true risk expit(a + slope·LP) (0 for a model
        calibrated in the large with slope 1).
    net_benefit_threshold : float or None
        Risk threshold of the net-benefit criterion.
    sensitivity, specificity : float or None
        At that threshold (given, or implied by the linear predictor).
    net_benefit, standardised_net_benefit : float or None
        Anticipated NB and NB/φ at that threshold.
    criteria : tuple of SizeCriterion
        The criteria used, in the order O/E, slope, C, net benefit.
    binding : str
        Name of the criterion needing the largest n.
    n : int
        Minimum sample size.
    events : float
        Expected events n·φ.
    """

    prevalence: float
    c_statistic: float
    oe: float
    slope: float
    confidence: float
    widths: dict[str, float | None]
    lp_mean: float
    lp_sd: float
    lp_source: str
    outcome_intercept: float
    net_benefit_threshold: float | None
    sensitivity: float | None
    specificity: float | None
    net_benefit: float | None
    standardised_net_benefit: float | None
    criteria: tuple[SizeCriterion, ...]
    binding: str
    n: int
    events: float

    def to_frame(self) -> pd.DataFrame:
        """Return one row per criterion with its target width, the binding one flagged."""
        rows = [dict(c.to_dict(), ci_width=self.widths.get(c.name), binding=c.name == self.binding) for c in self.criteria]
        return pd.DataFrame(rows)


def _mean_risk(mean: float, sd: float) -> float:
    """E[expit(η)] for η ~ N(mean, sd²)."""
    return float(np.sum(_Z_WEIGHTS * special.expit(mean + sd * _Z_NODES)))


def _match_mean(target: float, sd: float) -> float:
    """Mean m of η ~ N(m, sd²) such that E[expit(η)] = target."""
    f = lambda m: _mean_risk(m, sd) - target  # noqa: E731
    return float(optimize.brentq(f, -60.0, 60.0, xtol=1e-12))


def _c_of_risk(mean: float, sd: float) -> float:
    """C statistic of a calibrated risk expit(η), η ~ N(mean, sd²)."""
    if sd < 1e-9:
        return 0.5
    x = np.linspace(mean - 10 * sd, mean + 10 * sd, 8001)
    dens = stats.norm.pdf(x, mean, sd)
    p = special.expit(x)
    g1 = p * dens
    g0 = (1 - p) * dens
    phi = integrate.trapezoid(g1, x)
    cum0 = integrate.cumulative_trapezoid(g0, x, initial=0.0)
    # C = P(η_event > η_non-event) = ∫ g1(x) G0(x) dx / (φ(1 − φ)); ties have zero probability.
    return float(integrate.trapezoid(g1 * cum0, x) / (phi * (1 - phi)))


def _risk_distribution(phi: float, c: float) -> tuple[float, float]:
    """(mean, sd) of η ~ N so that a calibrated expit(η) has mean φ and C statistic c."""
    def c_at(sd: float) -> float:
        return _c_of_risk(_match_mean(phi, sd), sd) - c

    hi = 1.0
    while c_at(hi) < 0:
        hi *= 2
        if hi > 200:
            raise StudyError(problem("validation_size(c_statistic)", allowed="a C statistic a normal linear predictor can reach (below about 0.999)", received=c))
    sd = float(optimize.brentq(c_at, 1e-6, hi, xtol=1e-10))
    return _match_mean(phi, sd), sd


def _newcombe_se(c: float, phi: float, n: float) -> float:
    q = (1 - c) / (2 - c) + c / (1 + c)
    return math.sqrt(c * (1 - c) * (1 + (n / 2 - 1) * q) / (n**2 * phi * (1 - phi)))


def _width(where: str, value: Any, allowed: str = "a positive interval width, or None to skip the criterion") -> float | None:
    if value is None:
        return None
    return _number(where, value, low=0, allowed=allowed)


def _validation_widths(where: str, oe_ci_width: Any, slope_ci_width: Any, c_ci_width: Any) -> dict[str, float | None]:
    """Target interval widths of the O/E, slope and C criteria (None skips one)."""
    widths = {
        "O/E": _width(f"{where}(oe_ci_width)", oe_ci_width),
        "calibration slope": _width(f"{where}(slope_ci_width)", slope_ci_width),
        "C statistic": _width(f"{where}(c_ci_width)", c_ci_width),
    }
    if widths["C statistic"] is not None and widths["C statistic"] >= 1:
        raise StudyError(problem(f"{where}(c_ci_width)", allowed="a width below 1", received=c_ci_width))
    return widths


def _net_benefit_target(where: str, net_benefit_threshold: Any, nb_ci_width: Any, sensitivity: Any, specificity: Any) -> tuple[float | None, float | None]:
    """Threshold and target width of the net-benefit criterion, both None when it is not asked for."""
    if net_benefit_threshold is None:
        if nb_ci_width is not None or sensitivity is not None or specificity is not None:
            raise StudyError(problem(f"{where}(net_benefit_threshold)", allowed="a threshold when nb_ci_width, sensitivity or specificity is given", received=None))
        return None, None
    thr = _number(f"{where}(net_benefit_threshold)", net_benefit_threshold, low=0, high=1, allowed="a risk threshold strictly between 0 and 1")
    width = _width(f"{where}(nb_ci_width)", nb_ci_width, allowed="a positive interval width for standardised net benefit")
    if width is None:
        raise StudyError(problem(f"{where}(nb_ci_width)", allowed="a positive interval width when net_benefit_threshold is given", received=None))
    return thr, width


def _linear_predictor(where: str, phi: float, c: float, oe_v: float, b: float, oe: Any, lp_mean: Any, lp_sd: Any) -> tuple[float, float, float, str]:
    """Mean and SD of the normal linear predictor LP, intercept a of the true risk expit(a + b·LP), and where LP came from."""
    if lp_mean is None:
        m, s = _risk_distribution(phi, c)
        sd = s / b
        mu = _match_mean(phi / oe_v, sd) if phi / oe_v < 1 else math.nan
        if not math.isfinite(mu):
            raise StudyError(problem(f"{where}(oe)", allowed=f"an O/E ratio above the prevalence {phi:g} (mean predicted risk below 1)", received=oe))
        return mu, sd, m - b * mu, "matched to prevalence, C, O/E and slope"
    mu = _number(f"{where}(lp_mean)", lp_mean, allowed="a finite mean of the linear predictor")
    sd = _number(f"{where}(lp_sd)", lp_sd, low=0, allowed="a positive SD of the linear predictor")
    return mu, sd, _intercept_for(phi, mu, sd, b), "given"


def _criterion(name: str, target: str, n_x: float, phi: float) -> SizeCriterion:
    """A criterion with its exact n rounded up and the events expected at that n."""
    return SizeCriterion(name, target, n_x, _ceil(n_x), _ceil(n_x) * phi)


def _oe_criterion(phi: float, oe_v: float, width: float, z: float, conf: float) -> SizeCriterion:
    """n for an O/E interval of the target width."""
    se = math.asinh(width / (2 * oe_v)) / z
    n_x = (1 - phi) / (phi * se**2)
    return _criterion("O/E", f"{conf:.0%} interval for O/E of width {width:g}", n_x, phi)


def _slope_criterion(phi: float, lp: np.ndarray, p_true: np.ndarray, width: float, z: float, conf: float) -> SizeCriterion:
    """n for a calibration-slope interval of the target width, from the Fisher information per person."""
    w = p_true * (1 - p_true)
    i_aa = float(np.sum(_Z_WEIGHTS * w))
    i_ab = float(np.sum(_Z_WEIGHTS * w * lp))
    i_bb = float(np.sum(_Z_WEIGHTS * w * lp**2))
    var1 = i_aa / (i_aa * i_bb - i_ab**2)
    se = width / (2 * z)
    n_x = var1 / se**2
    return _criterion("calibration slope", f"{conf:.0%} interval for the calibration slope of width {width:g}", n_x, phi)


def _c_criterion(phi: float, c: float, width: float, z: float, conf: float) -> SizeCriterion:
    """n for a C-statistic interval of the target width, solving the SE of C for n in closed form."""
    t2 = (width / (2 * z)) ** 2
    big_a = c * (1 - c) / (phi * (1 - phi))
    q = (1 - c) / (2 - c) + c / (1 + c)
    # SE² = A[(1 − q)/n² + q/(2n)] = t²  ⇔  t²n² − (Aq/2)n − A(1 − q) = 0
    n_x = (big_a * q / 2 + math.sqrt((big_a * q / 2) ** 2 + 4 * t2 * big_a * (1 - q))) / (2 * t2)
    return _criterion("C statistic", f"{conf:.0%} interval for the C statistic of width {width:g}", n_x, phi)


def _threshold_accuracy(where: str, thr: float, sensitivity: Any, specificity: Any, mu: float, sd: float, a: float, b: float, phi: float) -> tuple[float, float]:
    """Sensitivity and specificity at the threshold, as given or implied by the linear predictor."""
    cut = special.logit(thr)
    if sensitivity is None or specificity is None:
        implied_sens, implied_spec = _sens_spec(mu, sd, a, b, cut, phi)
    sens = implied_sens if sensitivity is None else _number(f"{where}(sensitivity)", sensitivity, low=0, high=1, low_open=False, high_open=False, allowed="a proportion in [0, 1]")
    spec = implied_spec if specificity is None else _number(f"{where}(specificity)", specificity, low=0, high=1, low_open=False, high_open=False, allowed="a proportion in [0, 1]")
    return sens, spec


def _net_benefit_criterion(where: str, phi: float, thr: float, sens: float, spec: float, width: float, z: float, conf: float) -> tuple[SizeCriterion, float, float]:
    """n for a standardised net benefit interval of the target width; also NB and sNB at the threshold."""
    w_t = thr / (1 - thr)
    snb = sens - w_t * (1 - spec) * (1 - phi) / phi
    nb = snb * phi
    var1 = sens * (1 - sens) / phi + w_t**2 * spec * (1 - spec) * (1 - phi) / phi**2 + w_t**2 * (1 - spec) ** 2 * (1 - phi) / phi**3
    se = width / (2 * z)
    if var1 <= 0:
        raise StudyError(problem(f"{where}(sensitivity, specificity)", allowed="values giving a positive variance of net benefit (not both 0 or 1)", received=(sens, spec)))
    n_x = var1 / se**2
    target = f"{conf:.0%} interval for standardised net benefit at threshold {thr:g} of width {width:g}"
    return _criterion("net benefit", target, n_x, phi), nb, snb


def validation_size(
    *,
    prevalence: float,
    c_statistic: float,
    oe: float = 1.0,
    oe_ci_width: float | None = 0.2,
    slope: float = 1.0,
    slope_ci_width: float | None = 0.2,
    c_ci_width: float | None = 0.1,
    lp_mean: float | None = None,
    lp_sd: float | None = None,
    net_benefit_threshold: float | None = None,
    sensitivity: float | None = None,
    specificity: float | None = None,
    nb_ci_width: float | None = None,
    confidence: float = 0.95,
) -> ValidationSize:
    """Minimum sample size to validate a prediction model for a binary outcome.

    Parameters
    ----------
    prevalence : float
        Anticipated outcome proportion φ in the validation population.
    c_statistic : float
        Anticipated C statistic there, in (0.5, 1).
    oe : float, default 1.0
        Anticipated ratio of observed to expected events.
    oe_ci_width : float or None, default 0.2
        Target width of the confidence interval for O/E (e.g. 0.9 to 1.1);
        None skips the criterion.
    slope : float, default 1.0
        Anticipated calibration slope (> 0).
    slope_ci_width : float or None, default 0.2
        Target width of the interval for the calibration slope.
    c_ci_width : float or None, default 0.1
        Target width of the interval for the C statistic.
    lp_mean, lp_sd : float, optional
        Mean and SD of the model's linear predictor in the validation
        population, taken as normal.  Give both or neither; with neither they
        are chosen so that the anticipated prevalence, C, O/E and slope hold.
    net_benefit_threshold : float, optional
        Risk threshold t at which to add a criterion for standardised net benefit.
    sensitivity, specificity : float, optional
        At that threshold; by default implied by the linear predictor.
    nb_ci_width : float, optional
        Target interval width for standardised net benefit (needed with a threshold).
    confidence : float, default 0.95
        Confidence level of the target intervals.

    Returns
    -------
    ValidationSize

    Raises
    ------
    StudyError
        Inputs out of range, only one of ``lp_mean``/``lp_sd``, a threshold
        without ``nb_ci_width``, or no criterion left.

    Notes
    -----
    With z = Φ⁻¹((1 + confidence)/2) and target SE = width/(2z) unless stated:

    * O/E: SE(ln O/E) = √((1 − φ)/(nφ)).  The interval
      O/E·exp(±z·SE) has width 2·O/E·sinh(z·SE), so the target SE is
      asinh(width/(2·O/E))/z and n = (1 − φ)/(φ·SE²).
    * Calibration slope: in logit P(Y = 1) = α + β·LP, with the true risk
      expit(a + b·LP) (b = ``slope``), the Fisher information per person is
      I = E[p(1 − p)(1, LP; LP, LP²)], so var(β̂) = I_αα/(n(I_αα I_ββ − I_αβ²))
      and n = I_αα/((I_αα I_ββ − I_αβ²)·SE²).  When the LP distribution is
      not given, η = a + b·LP ~ N(m, s²) is chosen so that E[expit(η)] = φ
      and the C statistic of the calibrated risk expit(η) equals
      ``c_statistic``; then SD(LP) = s/b and the LP mean makes the mean
      predicted risk φ/O/E.  Given LP ~ N(lp_mean, lp_sd²), a is chosen so
      that E[expit(a + b·LP)] = φ.  Expectations by the trapezoidal rule on a fine grid.
    * C statistic: Newcombe's SE,
      SE(C)² = C(1 − C)[1 + (n/2 − 1)(1 − C)/(2 − C) + (n/2 − 1)C/(1 + C)]/(n²φ(1 − φ)),
      is solved for n in closed form (a quadratic in n).
    * Net benefit at threshold t, w = t/(1 − t): standardised net benefit
      sNB = sens − w(1 − spec)(1 − φ)/φ, with (delta method, sens, spec and φ
      estimated) var(sNB) = [sens(1 − sens)/φ + w²spec(1 − spec)(1 − φ)/φ²
      + w²(1 − spec)²(1 − φ)/φ³]/n (recalled from memory as the published
      formula; re-derived here).

    Every criterion is rounded up; the minimum n is the largest.  At least
    100, and ideally 200, events was the earlier rule of thumb (Collins,
    Ogundimu & Altman 2016).

    References
    ----------
    Riley RD, Debray TPA, Collins GS, et al. Minimum sample size for external
    validation of a clinical prediction model with a binary outcome.
    Statistics in Medicine 2021; 40(19): 4230–4251.

    Newcombe RG. Confidence intervals for an effect size measure based on the
    Mann–Whitney statistic. Part 2: asymptotic methods and evaluation.
    Statistics in Medicine 2006; 25(4): 559–573.

    Collins GS, Ogundimu EO, Altman DG. Sample size considerations for the
    external validation of a multivariable prognostic model: a resampling
    study. Statistics in Medicine 2016; 35(2): 214–226.
    """
    where = "validation_size"
    phi = _prevalence(f"{where}(prevalence)", prevalence)
    c = _number(f"{where}(c_statistic)", c_statistic, low=0.5, high=1, allowed="a C statistic strictly between 0.5 and 1")
    oe_v = _number(f"{where}(oe)", oe, low=0, allowed="a positive O/E ratio")
    b = _number(f"{where}(slope)", slope, low=0, allowed="a positive calibration slope")
    conf = _number(f"{where}(confidence)", confidence, low=0, high=1, allowed="a confidence level strictly between 0 and 1")
    widths = _validation_widths(where, oe_ci_width, slope_ci_width, c_ci_width)
    if (lp_mean is None) != (lp_sd is None):
        raise StudyError(problem(f"{where}(lp_mean, lp_sd)", allowed="both or neither", received=(lp_mean, lp_sd)))
    thr, nb_width = _net_benefit_target(where, net_benefit_threshold, nb_ci_width, sensitivity, specificity)
    if thr is not None:
        widths["net benefit"] = nb_width
    if all(v is None for v in widths.values()):
        raise StudyError(problem(f"{where}(*_ci_width)", allowed="at least one criterion with a target width", received=widths))
    z = float(stats.norm.ppf(0.5 + conf / 2))

    # Linear predictor LP ~ N(mu, sd²); true risk expit(a + b·LP).
    mu, sd, a, lp_source = _linear_predictor(where, phi, c, oe_v, b, oe, lp_mean, lp_sd)
    lp = mu + sd * _Z_NODES
    p_true = special.expit(a + b * lp)

    crit: list[SizeCriterion] = []
    if widths["O/E"] is not None:
        crit.append(_oe_criterion(phi, oe_v, widths["O/E"], z, conf))
    if widths["calibration slope"] is not None:
        crit.append(_slope_criterion(phi, lp, p_true, widths["calibration slope"], z, conf))
    if widths["C statistic"] is not None:
        crit.append(_c_criterion(phi, c, widths["C statistic"], z, conf))
    sens = spec = nb = snb = None
    if thr is not None:
        sens, spec = _threshold_accuracy(where, thr, sensitivity, specificity, mu, sd, a, b, phi)
        nb_criterion, nb, snb = _net_benefit_criterion(where, phi, thr, sens, spec, widths["net benefit"], z, conf)
        crit.append(nb_criterion)
    top = _binding(crit)
    return ValidationSize(
        prevalence=phi,
        c_statistic=c,
        oe=oe_v,
        slope=b,
        confidence=conf,
        widths=widths,
        lp_mean=float(mu),
        lp_sd=float(sd),
        lp_source=lp_source,
        outcome_intercept=float(a),
        net_benefit_threshold=thr,
        sensitivity=None if sens is None else float(sens),
        specificity=None if spec is None else float(spec),
        net_benefit=None if nb is None else float(nb),
        standardised_net_benefit=None if snb is None else float(snb),
        criteria=tuple(crit),
        binding=top.name,
        n=top.n,
        events=top.n * phi,
    )


def _intercept_for(phi: float, mu: float, sd: float, b: float) -> float:
    """a such that E[expit(a + b·LP)] = φ for LP ~ N(mu, sd²)."""
    f = lambda a: _mean_risk(a + b * mu, b * sd) - phi  # noqa: E731
    return float(optimize.brentq(f, -60.0, 60.0, xtol=1e-12))


def _sens_spec(mu: float, sd: float, a: float, b: float, cut: float, phi: float) -> tuple[float, float]:
    """Sensitivity and specificity of 'LP ≥ cut' when the true risk is expit(a + b·LP)."""
    dens = lambda x: stats.norm.pdf(x, mu, sd)  # noqa: E731
    risk = lambda x: special.expit(a + b * x)  # noqa: E731
    lo, hi = mu - 12 * sd, mu + 12 * sd
    tp = integrate.quad(lambda x: risk(x) * dens(x), max(cut, lo), hi, epsabs=1e-12, epsrel=1e-10, limit=200)[0] if cut < hi else 0.0
    tn = integrate.quad(lambda x: (1 - risk(x)) * dens(x), lo, min(cut, hi), epsabs=1e-12, epsrel=1e-10, limit=200)[0] if cut > lo else 0.0
    return tp / phi, tn / (1 - phi)


# --------------------------------------------------------------------------
# protocol text
# --------------------------------------------------------------------------

def _fmt_n(n: int) -> str:
    return f"{n:,}"


def _development_sentences(r: DevelopmentSize, *, lead: bool) -> list[str]:
    if r.r2_source == "given":
        r2_text = f"an anticipated Cox–Snell R² of {r.r2_cs:.3f}"
    elif r.r2_source == "from C statistic":
        r2_text = f"an anticipated Cox–Snell R² of {r.r2_cs:.3f}, derived from an anticipated C statistic of {r.c_statistic:g} (Riley, Van Calster & Collins 2021)"
    else:
        r2_text = f"a conservative anticipated Cox–Snell R² of {r.r2_cs:.3f}, which corresponds to a Nagelkerke R² of {DEFAULT_NAGELKERKE_R2:g} (maximum possible Cox–Snell R² {r.max_r2_cs:.3f})"
    out = []
    if lead:
        out.append(
            f"The minimum sample size for model development was calculated with the criteria of Riley et al. (Stat Med 2019; BMJ 2020) "
            f"for up to {r.n_parameters} candidate predictor parameters, an anticipated outcome proportion of {r.prevalence:.3g} and {r2_text}."
        )
    i, ii, iii = r.criteria
    out.append(
        f"An expected uniform shrinkage of at least {r.shrinkage:g} requires {_fmt_n(i.n)} participants; "
        f"an optimism of at most {r.delta:g} in Nagelkerke's R² (shrinkage {r.shrinkage_for_optimism:.3f}) requires {_fmt_n(ii.n)}; "
        f"estimating the overall outcome proportion within ±{r.margin:g} requires {_fmt_n(iii.n)}."
    )
    out.append(
        f"The largest of these, {_fmt_n(r.n)} participants (criterion: {r.binding}), is the minimum; "
        f"it corresponds to about {r.events:.0f} events, or {r.events_per_parameter:.1f} events per candidate parameter."
    )
    return out


def justification_text(result: DevelopmentSize | OrdinalDevelopmentSize | ValidationSize, *, levels: Sequence[str] | None = None) -> str:
    """A paragraph for a study protocol that justifies the sample size.

    Parameters
    ----------
    result : DevelopmentSize, OrdinalDevelopmentSize or ValidationSize
        The result of :func:`development_size`, :func:`ordinal_development_size`
        or :func:`validation_size`.
    levels : sequence of str, optional
        For an ordered outcome, the level names lowest first; the cuts are
        then named by their levels ("observed or higher versus lower")
        instead of numbered.

    Returns
    -------
    str
        Plain text stating the inputs, each criterion's n, the binding n and
        the expected events, with the methods cited.

    Raises
    ------
    StudyError
        Any other object, or ``levels`` of the wrong length.
    """
    if isinstance(result, DevelopmentSize):
        return " ".join(_development_sentences(result, lead=True))
    if isinstance(result, OrdinalDevelopmentSize):
        props = ", ".join(f"{v:.3g}" for v in result.proportions)
        parts = [
            f"The outcome has {len(result.proportions)} ordered levels with anticipated proportions {props}. "
            f"The minimum sample size for development was calculated by applying the binary-outcome criteria of Riley et al. "
            f"(Stat Med 2019; BMJ 2020), for up to {result.n_parameters} candidate predictor parameters, to each of the "
            f"{len(result.cuts)} cuts of the outcome (higher versus lower levels) and taking the largest; this extension is our "
            f"pragmatic choice, not a published criterion for ordered outcomes."
        ]
        if levels is not None and len(levels) != len(result.proportions):
            raise StudyError(problem("justification_text(levels)", allowed=f"{len(result.proportions)} level names, lowest first", received=levels))

        def cut_name(j: int) -> str:
            if levels is None:
                return f"cut {j + 1}"
            above = f"{levels[j + 1]}" if j + 2 == len(levels) else f"{levels[j + 1]} or higher"
            return f"the cut {above} versus lower"

        for j, cut in enumerate(result.cuts):
            sentence = _development_sentences(cut, lead=False)[0]
            parts.append(f"At {cut_name(j)} (outcome proportion {cut.prevalence:.3g}, anticipated Cox–Snell R² {cut.r2_cs:.3f}, {cut.r2_source}), " + sentence[0].lower() + sentence[1:])
        counts = ", ".join(f"{v:.0f}" for v in result.level_counts)
        parts.append(f"The largest requirement is {_fmt_n(result.n)} participants ({cut_name(result.binding_cut)}), with about {counts} expected in the levels from lowest to highest.")
        return " ".join(parts)
    if isinstance(result, ValidationSize):
        r = result
        nb_text = ""
        if r.net_benefit_threshold is not None:
            nb_text = (
                f", a sensitivity of {r.sensitivity:.3f} and specificity of {r.specificity:.3f} at a risk threshold of {r.net_benefit_threshold:g} "
                f"(standardised net benefit {r.standardised_net_benefit:.3f})"
            )
        parts = [
            f"The minimum sample size for external validation was calculated with the criteria of Riley et al. (Stat Med 2021), "
            f"for an anticipated outcome proportion of {r.prevalence:.3g}, C statistic of {r.c_statistic:g}, O/E of {r.oe:g} and calibration slope of {r.slope:g}{nb_text}. "
            f"The linear predictor was assumed normal with mean {r.lp_mean:.3f} and SD {r.lp_sd:.3f} ({r.lp_source})."
        ]
        crit = "; ".join(f"a {c.target} requires {_fmt_n(c.n)} participants" for c in r.criteria)
        parts.append(crit[0].upper() + crit[1:] + ".")
        parts.append(
            f"The largest of these, {_fmt_n(r.n)} participants (criterion: {r.binding}), is the minimum; "
            f"it corresponds to about {r.events:.0f} events."
        )
        if r.events < 100:
            parts.append("This is fewer than the 100 events once suggested as a minimum for validation (Collins, Ogundimu & Altman 2016).")
        return " ".join(parts)
    raise StudyError(problem("justification_text(result)", allowed="a DevelopmentSize, OrdinalDevelopmentSize or ValidationSize", received=type(result).__name__))


#: Events per candidate parameter below which ``riskvet check`` and the derivation page warn
#: (common practice: 10, a rule of thumb the published criteria replace, kept as a first alarm).
LOW_EVENTS_PER_PARAMETER = 10


def data_support_notes(
    *,
    level_counts: Sequence[int],
    n_parameters: int,
    anticipated_c: float | None = None,
    anticipated_r2_cs: float | None = None,
    shrinkage: float = 0.9,
    penalized: bool = False,
    cut_names: Sequence[str] | None = None,
    events_per_parameter: bool = True,
) -> list[str]:
    """What the derivation data cannot support, in sentences: the development criteria the data fail.

    Parameters
    ----------
    level_counts : sequence of int
        People in each outcome level of the derivation data, lowest first.
    n_parameters : int
        Candidate predictor parameters (design columns of every candidate
        term; the K − 1 thresholds not counted).
    anticipated_c, anticipated_r2_cs : float, optional
        The study's anticipated performance (``planning`` section); with
        neither, R² is set so that Nagelkerke's R² is 0.15, as in
        :func:`development_size`.
    shrinkage : float
        Target expected shrinkage of criterion (i).
    penalized : bool
        Whether the study already uses a penalised method (the advice then
        asks for fewer candidates only).
    cut_names : sequence of str, optional
        The K − 1 cuts in words, to say where an ordered outcome's criterion fails.
    events_per_parameter : bool
        Include the events-per-candidate-parameter note (a page that states
        events per parameter in its own sentence leaves it out).

    Returns
    -------
    list of str
        One sentence per problem: events per candidate parameter below
        :data:`LOW_EVENTS_PER_PARAMETER`, and each criterion of
        :func:`ordinal_development_size` (every cut of an ordered outcome)
        needing more people than the data hold, with the remedy.

    Notes
    -----
    The criteria are evaluated at the observed level proportions, so the
    check asks: could data of this size and case mix support this many
    candidate parameters?  A penalised fit does not remove the need
    (Riley et al. 2021): tuned shrinkage is itself unstable in small data.

    References
    ----------
    Riley RD, Snell KIE, Ensor J, et al. Minimum sample size for developing a
    multivariable prediction model: Part II – binary and time-to-event
    outcomes. Statistics in Medicine 2019; 38(7): 1276–1296.

    Riley RD, Snell KIE, Martin GP, et al. Penalization and shrinkage methods
    produced unreliable clinical prediction models especially when sample
    size was small. Journal of Clinical Epidemiology 2021; 132: 88–96.
    """
    counts = [int(c) for c in level_counts]
    n = sum(counts)
    p = int(n_parameters)
    if n <= 0 or p <= 0 or len(counts) < 2 or min(counts) <= 0:
        return []
    remedy = ("use fewer candidate parameters (drop or merge candidates, fewer spline knots)" if penalized else
              "use fewer candidate parameters (drop or merge candidates, fewer spline knots) or a penalised method "
              "(selection.method: ridge, lasso or elastic_net), knowing that tuned shrinkage is itself unstable in small data")
    notes = []
    fewest = min(counts)
    if events_per_parameter and fewest / (p + len(counts) - 1) < LOW_EVENTS_PER_PARAMETER:
        notes.append(
            f"low events per candidate parameter: {fewest} people in the smallest outcome level for {p + len(counts) - 1} candidate "
            f"parameters ({fewest / (p + len(counts) - 1):.1f} per parameter, below {LOW_EVENTS_PER_PARAMETER}); "
            "expect optimism and unstable selection"
        )
    try:
        size = ordinal_development_size(n_parameters=p, proportions=[c / n for c in counts], c_statistic=anticipated_c,
                                        r2_cs=anticipated_r2_cs, shrinkage=shrinkage)
    except StudyError as exc:
        return notes + [f"the development sample-size criteria could not be evaluated: {exc}"]
    for j, cut in enumerate(size.cuts):
        for crit in cut.criteria:
            if crit.n > n:
                name = cut_names[j] if cut_names is not None else f"cut {j + 1} (above level {j + 1} of {len(counts)})"
                where = "" if len(counts) == 2 else f" for {name}"
                per = "" if crit.name == "overall risk" else f" for {p} candidate predictor parameters (thresholds not counted)"
                todo = "more data; no choice of model can estimate the overall risk this precisely" if crit.name == "overall risk" else remedy
                notes.append(
                    f"sample-size criterion '{crit.name}'{where} fails (Riley et al. 2019): it needs at least {crit.n} people "
                    f"({crit.target}){per}; the derivation data hold {n}. To do: {todo}"
                )
    return notes
