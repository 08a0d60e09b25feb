"""riskvet: derive, validate, update and report clinical prediction models.

Statistical evaluation is not clearance for clinical use: local validation,
governance and licensed clinical judgement decide whether a model is used.
"""

from __future__ import annotations

from .errors import RiskvetError, RiskvetWarning

__version__ = "0.1.0"

__all__ = ["__version__", "RiskvetError", "RiskvetWarning"]
