"""Planning: how many people a development or validation study needs.

Holds the sample-size criteria for developing a model for a binary or an
ordered outcome and for validating one, and the justification paragraph a
protocol can quote (:mod:`~riskvet.planning.samplesize`); the names are
re-exported here, so ``riskvet.planning.development_size`` works.  Planning
needs no data and no model: it may import only the package core, and nothing
else in the chain imports it except reporting and the chain itself.
"""

from .samplesize import (
    DevelopmentSize,
    OrdinalDevelopmentSize,
    SizeCriterion,
    ValidationSize,
    data_support_notes,
    development_size,
    justification_text,
    max_r2_cs,
    ordinal_development_size,
    r2_from_c,
    validation_size,
)

__all__ = [
    "SizeCriterion",
    "DevelopmentSize",
    "OrdinalDevelopmentSize",
    "ValidationSize",
    "max_r2_cs",
    "r2_from_c",
    "development_size",
    "data_support_notes",
    "ordinal_development_size",
    "validation_size",
    "justification_text",
]
