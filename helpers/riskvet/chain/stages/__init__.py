"""One module per stage, each with ``run(ctx)``: orchestration only.

A stage module reads the study and the data through :mod:`riskvet.intake`,
computes through the modelling, measures, validation and planning layers,
and publishes through :mod:`riskvet.reporting` (labels, sentences,
disclosure control, figures); it writes its results, figures and model files
through the stage context of :mod:`riskvet.chain.stagekit`.
"""
