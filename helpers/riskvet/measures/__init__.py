"""Measures: how good predicted probabilities are, and how far two raters agree.

Holds discrimination (concordance with DeLong SE, ROC points, ordinal
discrimination; :mod:`~riskvet.measures.discrimination`), calibration
(recalibration intercept and slope, O/E, smoothed curve and ICI, grouped
table, Hosmer-Lemeshow; :mod:`~riskvet.measures.calibration`), overall
accuracy (Brier scores, log-likelihood, R²; :mod:`~riskvet.measures.overall`),
decisions and net benefit (:mod:`~riskvet.measures.decision`), the lean
headline pass used in resampling (:mod:`~riskvet.measures.summary`) and rater
agreement (ICC, kappa, Bland-Altman; :mod:`~riskvet.measures.agreement`).
Their shared input checks live in :mod:`~riskvet.measures._checks`.  The
measures may import the core, :mod:`riskvet.intake` and
:mod:`riskvet.modelling` (calibration refits a recalibration model), nothing
further down the chain.  The measures of predicted probabilities are
also importable from :mod:`riskvet.metrics`.
"""
