"""Reading and checking cohort files.

A stable import path for :mod:`riskvet.intake.data`, and for the
descriptive table (:mod:`riskvet.reporting.descriptive`).
"""

from .intake.data import *  # noqa: F401,F403
from .intake.data import __all__ as _intake_names
from .reporting.descriptive import DescriptiveTable, descriptive_table

__all__ = [*_intake_names, "DescriptiveTable", "descriptive_table"]
