"""Performance measures of predicted probabilities.

A stable import path for the measures of :mod:`riskvet.measures`:
discrimination, calibration, overall accuracy, decisions and net benefit,
and the lean :func:`performance_summary` used in resampling.
"""

from .measures.calibration import CalibrationResult, OrdinalCalibration, calibration, ordinal_calibration
from .measures.decision import (
    NetBenefitResult,
    ThresholdChoice,
    ThresholdTable,
    net_benefit,
    ordinal_net_benefit,
    rule_net_benefit,
    threshold_for,
    threshold_table,
)
from .measures.discrimination import (
    ConcordanceComparison,
    ConcordanceResult,
    OrdinalDiscrimination,
    RocCurveResult,
    compare_concordance,
    concordance,
    dichotomise,
    ordinal_discrimination,
    roc_curve,
)
from .measures.overall import BrierResult, OverallAccuracy, brier, overall_accuracy
from .measures.summary import performance_summary, summary_keys

__all__ = [
    "concordance",
    "compare_concordance",
    "roc_curve",
    "ordinal_discrimination",
    "dichotomise",
    "calibration",
    "ordinal_calibration",
    "brier",
    "overall_accuracy",
    "threshold_table",
    "threshold_for",
    "net_benefit",
    "ordinal_net_benefit",
    "rule_net_benefit",
    "performance_summary",
    "summary_keys",
    "ConcordanceResult",
    "ConcordanceComparison",
    "RocCurveResult",
    "OrdinalDiscrimination",
    "CalibrationResult",
    "OrdinalCalibration",
    "BrierResult",
    "OverallAccuracy",
    "ThresholdTable",
    "ThresholdChoice",
    "NetBenefitResult",
]
