"""Random-effects pooling of performance measures.

A stable import path for :mod:`riskvet.validation.pooling`: the
random-effects meta-analysis of a measure estimated in several clusters
(DerSimonian-Laird or REML, Hartung-Knapp intervals, prediction interval,
Q and I^2) and the transformations applied before pooling (C on the logit
scale, O/E on the log scale) with their inverses.
"""

from .validation.pooling import (
    PooledEstimate,
    PooledOnScale,
    back_transform,
    c_from_logit,
    log_oe,
    log_oe_from_counts,
    logit_c,
    oe_from_log,
    random_effects,
)

__all__ = [
    "random_effects",
    "logit_c",
    "c_from_logit",
    "log_oe",
    "log_oe_from_counts",
    "oe_from_log",
    "back_transform",
    "PooledEstimate",
    "PooledOnScale",
]
