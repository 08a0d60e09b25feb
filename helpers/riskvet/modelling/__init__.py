"""Modelling: fitting, selection and the derivation procedure.

Holds the Newton-Raphson fitter of cumulative-link models and its links
(:mod:`~riskvet.modelling.fitter`, :mod:`~riskvet.modelling.links`), variable
selection on grouped terms (:mod:`~riskvet.modelling.selection`), the
derivation procedure that every bootstrap replicate repeats
(:mod:`~riskvet.modelling.derive`), the checks of proportional odds
(:mod:`~riskvet.modelling.proportional_odds`), and the frozen model file with
its equation (:mod:`~riskvet.modelling.modelfile`,
:mod:`~riskvet.modelling.equation`).  It may import the core and
:mod:`riskvet.intake`, nothing further down the chain.
"""
