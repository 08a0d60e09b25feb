"""Rater agreement: ICC, kappa, Bland-Altman and decision agreement.

A stable import path for :mod:`riskvet.measures.agreement`.
"""

from .measures.agreement import *  # noqa: F401,F403
from .measures.agreement import __all__  # noqa: F401
