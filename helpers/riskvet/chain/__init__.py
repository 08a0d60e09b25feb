"""The chain: running the stages into a record, and the ``riskvet`` command.

Holds the runner that executes the stage notebooks with papermill into a new
record (:mod:`~riskvet.chain.runner`), the record itself: manifest, hashes,
verify and compare (:mod:`~riskvet.chain.record`), what a stage notebook
opens and shares (:mod:`~riskvet.chain.stagekit`), the stage modules with one
``run(ctx)`` each (:mod:`riskvet.chain.stages`), the command line
(:mod:`~riskvet.chain.cli`) and the study-folder scaffold
(:mod:`~riskvet.chain.scaffold`).  The chain is the last layer: it may import
every other layer, and nothing in the package imports it.
"""
