"""Validation: how well a derivation procedure or a frozen model holds up.

Holds internal validation by the whole-procedure bootstrap, with optimism,
.632 and .632+, shrinkage and selection stability
(:mod:`~riskvet.validation.bootstrap`) and by repeated cross-validation
(:mod:`~riskvet.validation.crossval`); external validation of a frozen model
on a later or different cohort (:mod:`~riskvet.validation.external`) and its
case-mix comparison (:mod:`~riskvet.validation.casemix`); the comparison with
the rule clinicians use today (:mod:`~riskvet.validation.rule`); model
updating from recalibration in the large to extension
(:mod:`~riskvet.validation.update`); and the random-effects pooling of a
measure across clusters, with the transformations used before pooling
(:mod:`~riskvet.validation.pooling`), used by internal-external
cross-validation, which leaves one site or period out in turn
(:mod:`~riskvet.validation.iecv`).  It may import the core,
:mod:`riskvet.intake`, :mod:`riskvet.modelling` and :mod:`riskvet.measures`,
never planning, reporting or the chain.
"""
