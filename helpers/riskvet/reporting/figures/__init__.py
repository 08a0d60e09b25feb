"""Figures of a record: one module per stage family, one style.

:mod:`~riskvet.reporting.figures.performance` holds the style (Okabe-Ito
colours with distinct line styles and markers, readable in greyscale; fonts
sized for figures about 6.4 in wide that stay legible when a page scales them
to a 390 px screen) and the curves every validation shows (ROC, calibration,
decision curves), with the calibration figure's statistics as a table and
its counts as a results file may hold them;
:mod:`~riskvet.reporting.figures.derivation` (with the proportional-odds
figure, table and sentence),
:mod:`~riskvet.reporting.figures.agreement`,
:mod:`~riskvet.reporting.figures.internal_validation` and
:mod:`~riskvet.reporting.figures.external_validation` the figures of those
stages (the last also draws updating).  Every function takes result objects
and returns a matplotlib Figure; none computes a statistic.  A figure that
draws counts of people (grouped proportions, distributions of predictions)
takes ``min_cell_count`` and draws none below it.  Figures may import the
layers above reporting and :mod:`riskvet.reporting.labels` and
:mod:`riskvet.reporting.disclosure`.
"""
