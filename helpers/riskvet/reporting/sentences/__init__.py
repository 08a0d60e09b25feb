"""The sentences that interpret a stage's results, one module per stage family.

Each module turns result objects (from modelling, measures, validation and
planning) into the short texts a stage page shows beside its tables and
figures, stating the actual numbers in the trade's terms.  Wording lives here
and only here, so a change of wording touches no computation; the stage
modules of :mod:`riskvet.chain.stages` call these functions and store the
texts they return.  Like the rest of reporting, these modules read results
and never compute a statistic; the caution and the shared number formats are in
:mod:`~riskvet.reporting.sentences.common`.
"""
