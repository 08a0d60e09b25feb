"""The study file: schema, loading and digest.

A stable import path for :mod:`riskvet.intake.study`.
"""

from .intake.study import *  # noqa: F401,F403
from .intake.study import __all__  # noqa: F401
