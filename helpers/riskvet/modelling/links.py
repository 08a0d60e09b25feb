"""Link functions of the cumulative models: distribution function and derivatives.

A cumulative model with link ``F`` states ``P(Y <= j | x) = F(theta_j - x beta)``.
The fitter needs, at each argument ``t``, the distribution function ``F(t)``,
its complement ``S(t) = 1 - F(t)`` computed without cancellation, the
density ``f(t) = F'(t)`` and its derivative ``f'(t)``.

``cloglog`` and ``loglog`` are mirror images, ``F_loglog(t) = 1 -
F_cloglog(-t)``.  With two outcome levels ``P(Y = 0 | x) = F(theta - x
beta)``, so ``"cloglog"`` puts the complementary log-log on the LOWEST level,
``P(Y = 0) = 1 - exp(-exp(theta - x beta))``, and ``"loglog"`` puts it on the
event, ``P(Y = 1) = 1 - exp(-exp(x beta - theta))``: the binary
complementary log-log regression of the event (intercept ``-theta``).

All four distributions have log-concave densities, which makes the
cumulative-model log-likelihood concave in the thresholds and coefficients
(Pratt, 1981).

References
----------
Pratt, J. W. (1981). Concavity of the log likelihood. Journal of the American
Statistical Association, 76(373), 103-106.

McCullagh, P. (1980). Regression models for ordinal data. Journal of the Royal
Statistical Society, Series B, 42(2), 109-142.
"""

from __future__ import annotations

import numpy as np
from scipy import special

__all__ = ["LINKS", "link_parts", "link_cdf", "link_ppf"]

LINKS = ("logit", "probit", "cloglog", "loglog")

_SQRT_2PI = float(np.sqrt(2.0 * np.pi))

# exp(t) for t >= 40 makes exp(-exp(t)) exactly zero in double precision, so
# clipping the complementary log-log argument there changes no value and keeps
# exp(t) * exp(-exp(t)) from turning into inf * 0.
_CLOGLOG_UPPER = 40.0


def link_parts(link: str, t: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Return ``F(t), S(t), f(t), f'(t)`` for one of :data:`LINKS`.

    Notes
    -----
    logit: ``F = 1/(1+exp(-t))``, ``f = F S``, ``f' = f (S - F)``.
    probit: ``F = Phi(t)``, ``f = phi(t)``, ``f' = -t phi(t)``.
    cloglog: ``F = 1 - exp(-exp(t))``, ``S = exp(-exp(t))``, ``f = exp(t) S``,
    ``f' = f (1 - exp(t))``.
    loglog: ``F = exp(-exp(-t))``, ``S = 1 - exp(-exp(-t))``, ``f = exp(-t) F``,
    ``f' = f (exp(-t) - 1)``; computed as the mirror of cloglog at ``-t`` (so
    ``S`` comes from ``expm1`` and keeps its precision in the upper tail).
    """
    if link == "logit":
        F = special.expit(t)
        S = special.expit(-t)
        f = F * S
        return F, S, f, f * (S - F)
    if link == "probit":
        F = special.ndtr(t)
        S = special.ndtr(-t)
        f = np.exp(-0.5 * t * t) / _SQRT_2PI
        return F, S, f, -t * f
    if link == "cloglog":
        e = np.exp(np.minimum(t, _CLOGLOG_UPPER))
        S = np.exp(-e)
        F = -np.expm1(-e)
        f = e * S
        return F, S, f, f * (1.0 - e)
    if link == "loglog":
        Fm, Sm, fm, dfm = link_parts("cloglog", -t)
        return Sm, Fm, fm, -dfm
    raise ValueError(f"unknown link {link!r}")


def link_cdf(link: str, t: np.ndarray) -> np.ndarray:
    """Return ``F(t)`` alone."""
    if link == "logit":
        return special.expit(t)
    if link == "probit":
        return special.ndtr(t)
    if link == "cloglog":
        return -np.expm1(-np.exp(np.minimum(t, _CLOGLOG_UPPER)))
    if link == "loglog":
        return np.exp(-np.exp(np.minimum(-t, _CLOGLOG_UPPER)))
    raise ValueError(f"unknown link {link!r}")


def link_ppf(link: str, p: np.ndarray) -> np.ndarray:
    """Return the quantile function ``F^{-1}(p)``."""
    p = np.asarray(p, dtype=float)
    if link == "logit":
        return special.logit(p)
    if link == "probit":
        return special.ndtri(p)
    if link == "cloglog":
        return np.log(-np.log1p(-p))
    if link == "loglog":
        return -np.log(-np.log(p))
    raise ValueError(f"unknown link {link!r}")
