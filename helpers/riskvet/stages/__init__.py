"""One module per stage of the analysis chain, each with ``run(ctx)``."""
