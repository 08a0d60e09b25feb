"""Reporting: everything a record publishes, apart from the statistics.

Holds the figures, one module per stage family, all drawn from result
objects and never fitting anything (:mod:`riskvet.reporting.figures`); the
display names of outcomes, measures and update methods
(:mod:`~riskvet.reporting.labels`); the sentences that interpret results,
one module per stage family (:mod:`riskvet.reporting.sentences`), so a
change of wording touches no computation; disclosure control, the one place
small counts are suppressed (:mod:`~riskvet.reporting.disclosure`); the
headline tables of a record (:mod:`~riskvet.reporting.headlines`); the
offline HTML rendering of stage notebooks (:mod:`~riskvet.reporting.html`);
and the TRIPOD index (:mod:`~riskvet.reporting.tripod`).  It may import every
layer above it (core, intake, modelling, measures, validation, planning) and
never the chain.
"""
