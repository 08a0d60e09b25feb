"""The package's error and warning types.

Every error riskvet raises on bad input is a :class:`RiskvetError` (a
``ValueError``), and its message names the place (study key, file, column,
row count), what is allowed and what was received.  Statistical trouble that
does not stop an analysis (non-convergence, separation, crossing cumulative
probabilities) is a :class:`RiskvetWarning` and is also recorded on the
result object that met it, so it is never only printed.
"""

from __future__ import annotations

__all__ = [
    "RiskvetError",
    "StudyError",
    "DataError",
    "DesignError",
    "FitError",
    "ModelFileError",
    "RecordError",
    "RiskvetWarning",
    "ConvergenceWarning",
    "SeparationWarning",
    "CrossingWarning",
    "problem",
]


class RiskvetError(ValueError):
    """Base class of every error riskvet raises about its input."""


class StudyError(RiskvetError):
    """The study file is unusable: unknown key, wrong type, impossible value."""


class DataError(RiskvetError):
    """A data file does not match the study: missing column, unknown level."""


class DesignError(RiskvetError):
    """A data frame cannot be encoded by a design specification."""


class FitError(RiskvetError):
    """A model cannot be fitted: empty outcome level, singular information."""


class ModelFileError(RiskvetError):
    """A frozen model file is damaged, altered or of an unknown schema."""


class RecordError(RiskvetError):
    """An analysis record is incomplete, altered or cannot be written."""


class RiskvetWarning(UserWarning):
    """Base class of riskvet's statistical warnings."""


class ConvergenceWarning(RiskvetWarning):
    """An iterative fit stopped before meeting its convergence criterion."""


class SeparationWarning(RiskvetWarning):
    """Complete or quasi-complete separation: some estimates are infinite."""


class CrossingWarning(RiskvetWarning):
    """Cumulative probabilities of a non-proportional model cross."""


def problem(where: str, *, allowed: str, received: object) -> str:
    """Format the one message template used across the package.

    Parameters
    ----------
    where : str
        The place: a study key path, ``file:column``, a parameter of a function.
    allowed : str
        What would have been accepted.
    received : object
        What was received; shown with ``repr``.

    Returns
    -------
    str
        ``"<where>: expected <allowed>; received <received!r>"``.
    """
    return f"{where}: expected {allowed}; received {received!r}"
