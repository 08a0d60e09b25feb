"""Intake: the study file, reading and checking the data, and the design.

Holds the study-file schema and its loader (:mod:`~riskvet.intake.study`),
reading cohort files, the data audit, cohort checks, the exclusion table and
descriptive counts (:mod:`~riskvet.intake.data`), outcome coding and the names
of outcome cuts (:mod:`~riskvet.intake.outcome`), and the design that turns
raw columns into model columns: restricted cubic splines, category coding,
interactions (:mod:`~riskvet.intake.design`).  This is the first layer of the
chain: it may import only the package core (:mod:`riskvet.errors`,
:mod:`riskvet._jsonable`), never modelling, measures, validation, planning,
reporting or the chain.
"""
