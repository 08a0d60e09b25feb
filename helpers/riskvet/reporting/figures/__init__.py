"""Figures of a record: one module per stage family, one style.

:mod:`~riskvet.reporting.figures.style` holds the palette and line styles
(Okabe-Ito colours with distinct line styles and markers, readable in
greyscale); :mod:`~riskvet.reporting.figures.performance` the curves every
validation shows (ROC, calibration, decision curves);
:mod:`~riskvet.reporting.figures.derivation`,
:mod:`~riskvet.reporting.figures.agreement`,
:mod:`~riskvet.reporting.figures.internal_validation` and
:mod:`~riskvet.reporting.figures.external_validation` the figures of those
stages (the last also draws updating).  Every function takes result objects
and returns a matplotlib Figure; none computes a statistic.  Figures may
import the layers above reporting and :mod:`riskvet.reporting.labels`.
"""
