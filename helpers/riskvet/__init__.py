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

#: Public modules, imported on first attribute access.
MODULES = (
    "agreement",
    "bootstrap",
    "calibration",
    "casemix",
    "crossval",
    "data",
    "decision",
    "demo",
    "derive",
    "design",
    "discrimination",
    "equation",
    "external",
    "metrics",
    "modelfile",
    "models",
    "overall",
    "planning",
    "plots",
    "po_checks",
    "record",
    "rule",
    "runner",
    "selection",
    "stagekit",
    "study",
    "update",
)

__all__ = ["__version__", "RiskvetError", "RiskvetWarning", *MODULES]


def __getattr__(name: str) -> Any:
    if name in MODULES:
        return importlib.import_module(f".{name}", __name__)
    raise AttributeError(f"module 'riskvet' has no attribute {name!r}")
