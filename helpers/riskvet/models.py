"""Fitting cumulative-link models, and loading a frozen model file.

A stable import path: the fitter lives in :mod:`riskvet.modelling.fitter`
and the model file in :mod:`riskvet.modelling.modelfile`.
"""

from .modelling.fitter import CumulativeFit, LRTest, fit_cumulative, one_blas_thread
from .modelling.modelfile import load_model as load

__all__ = ["fit_cumulative", "CumulativeFit", "LRTest", "load", "one_blas_thread"]
