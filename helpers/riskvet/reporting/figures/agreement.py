"""Figures of the agreement stage.  They take its result objects and compute no statistics.

Both are Bland–Altman plots drawn by :func:`riskvet.reporting.figures.performance.plot_bland_altman`
in the package's one visual style; this module names the axes after the
raters and shows predicted risks in percent.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from matplotlib.figure import Figure

from ...measures.agreement import BlandAltmanResult
from ...errors import RiskvetError, problem
from .performance import plot_bland_altman

__all__ = ["plot_item_agreement", "plot_risk_agreement"]


@dataclass(frozen=True)
class _Percent:
    """A Bland–Altman result on the percent scale (values × 100), for display only."""

    means: object
    differences: object
    bias: float
    lower: float
    upper: float
    bias_interval: tuple[float, float]
    lower_interval: tuple[float, float]
    upper_interval: tuple[float, float]
    confidence: float

    @classmethod
    def of(cls, r: BlandAltmanResult) -> "_Percent":
        return cls(
            means=r.means * 100, differences=r.differences * 100, bias=r.bias * 100, lower=r.lower * 100, upper=r.upper * 100,
            bias_interval=tuple(v * 100 for v in r.bias_interval), lower_interval=tuple(v * 100 for v in r.lower_interval),
            upper_interval=tuple(v * 100 for v in r.upper_interval), confidence=r.confidence,
        )


def plot_item_agreement(item: Any) -> Figure:
    """Bland–Altman plot of a continuous rated item, rater_a − rater_b.

    Parameters
    ----------
    item : ItemAgreement
        A continuous item from :func:`riskvet.chain.stages.agreement.assess`
        (any object with ``name``, ``rater_a``, ``rater_b`` and a
        ``bland_altman`` result).

    Returns
    -------
    matplotlib.figure.Figure

    References
    ----------
    Bland JM, Altman DG. Statistical methods for assessing agreement between
    two methods of clinical measurement. Lancet 1986; 327(8476): 307–310.
    """
    ba = getattr(item, "bland_altman", None)
    if not isinstance(ba, BlandAltmanResult) or not all(hasattr(item, a) for a in ("name", "rater_a", "rater_b")):
        known = all(hasattr(item, a) for a in ("name", "scale"))
        received = f"item {item.name!r} of scale {item.scale!r}" if known else type(item).__name__
        raise RiskvetError(problem("plot_item_agreement(item)", allowed="the ItemAgreement of a continuous item", received=received))
    fig = plot_bland_altman(item.bland_altman, labels=(item.rater_a, item.rater_b))
    fig.axes[0].set_title(f"{item.name} (n = {item.bland_altman.n})", loc="left", pad=28)
    return fig


def plot_risk_agreement(cut: Any) -> Figure:
    """Bland–Altman plot of the predicted risk of one cut from each rater's readings, in percent.

    Parameters
    ----------
    cut : CutRiskAgreement
        One cut of :attr:`riskvet.chain.stages.agreement.RiskAgreement.cuts`
        (any object with a ``label`` and a ``risks`` Bland-Altman result).

    Returns
    -------
    matplotlib.figure.Figure
        Means in percent, differences in percentage points.

    References
    ----------
    Bland JM, Altman DG. Statistical methods for assessing agreement between
    two methods of clinical measurement. Lancet 1986; 327(8476): 307–310.
    """
    if not isinstance(getattr(cut, "risks", None), BlandAltmanResult) or not hasattr(cut, "label"):
        raise RiskvetError(problem("plot_risk_agreement(cut)", allowed="a CutRiskAgreement", received=type(cut).__name__))
    fig = plot_bland_altman(_Percent.of(cut.risks), units="%", labels=("risk from rater_a", "risk from rater_b"))
    fig.axes[0].set_title(f"Predicted risk of '{cut.label}' (n = {cut.risks.n})", loc="left", pad=28)
    return fig
