"""Internal validation by the whole-procedure bootstrap.

A stable import path for :mod:`riskvet.validation.bootstrap`.
"""

from .validation.bootstrap import *  # noqa: F401,F403
from .validation.bootstrap import __all__  # noqa: F401
