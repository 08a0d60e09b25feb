"""What the sentence modules share: the caution every record carries, and number formats."""

from __future__ import annotations

import math
from typing import Any

#: The caution every stage page and the summary carry.
CAUTION = (
    "Statistical evaluation is not clearance for clinical use: local validation, governance and "
    "licensed clinical judgement decide whether a model is used."
)


def decimals(value: Any, digits: int = 3, *, missing: str = "n/a") -> str:
    """``value`` to ``digits`` decimals, or ``missing`` when it is None or not finite."""
    return missing if value is None or not math.isfinite(value) else f"{value:.{digits}f}"


def signed(value: Any, digits: int = 2) -> str:
    """``value`` to ``digits`` decimals with a typographic minus; ``"undefined"`` when not finite."""
    return "undefined" if value is None or not math.isfinite(value) else f"{value:.{digits}f}".replace("-", "\u2212")
