"""Fitting cumulative-link models, and loading a frozen model file.

A stable import path: the fitter lives in :mod:`riskvet.modelling.fitter`,
the penalised fits (ridge, lasso, elastic net, group lasso) in
:mod:`riskvet.modelling.penalized` and the model file in
:mod:`riskvet.modelling.modelfile`.
"""

from .modelling.fitter import CumulativeFit, LRTest, fit_cumulative, one_blas_thread
from .modelling.modelfile import load_model as load
from .modelling.penalized import PenaltyChoice, PenaltyPath, fit_penalized, penalty_path, tune_penalty

__all__ = [
    "fit_cumulative",
    "CumulativeFit",
    "LRTest",
    "load",
    "one_blas_thread",
    "fit_penalized",
    "penalty_path",
    "tune_penalty",
    "PenaltyPath",
    "PenaltyChoice",
]
