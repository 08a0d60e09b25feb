"""riskvet: derive, validate, update and report clinical prediction models.

The package does the computation of every stage of a prediction-model study
for binary and ordered outcomes; the notebook templates only call it.  Its
modules are imported on first use, so ``import riskvet`` stays cheap::

    import riskvet
    fit = riskvet.models.fit_cumulative(X, y)
    auc = riskvet.metrics.concordance(y, score)

Statistical evaluation is not clearance for clinical use: local validation,
governance and licensed clinical judgement decide whether a model is used.
"""

from __future__ import annotations

import importlib
from typing import Any

from .errors import RiskvetError, RiskvetWarning

__version__ = "0.1.0"

#: Subpackages in chain order, the stable import paths, and the demo
#: scenario; each is imported on first attribute access.
MODULES = (
    "intake",
    "modelling",
    "measures",
    "validation",
    "planning",
    "reporting",
    "chain",
    "models",
    "metrics",
    "pooling",
    "agreement",
    "bootstrap",
    "study",
    "data",
    "demo",
)

__all__ = ["__version__", "RiskvetError", "RiskvetWarning", *MODULES]


def __getattr__(name: str) -> Any:
    if name in MODULES:
        return importlib.import_module(f".{name}", __name__)
    raise AttributeError(f"module 'riskvet' has no attribute {name!r}")
