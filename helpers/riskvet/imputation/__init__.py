"""Imputation: multiple imputation of missing values and Rubin's rules.

Holds multiple imputation by chained equations (fully conditional
specification: predictive mean matching for numbers, the package's
cumulative-link model for binary and ordered categories, a multinomial logit
for unordered ones, the outcome in every imputation model, one random stream
per imputation; :mod:`~riskvet.imputation.chained`) and Rubin's rules for
pooling the m completed-data analyses, with Rubin's or Barnard and Rubin's
degrees of freedom (:mod:`~riskvet.imputation.rubin`).  It may import the
core, :mod:`riskvet.intake` and :mod:`riskvet.modelling`, never measures,
validation, planning, reporting or the chain.

Public names: :func:`impute` with its :class:`Imputations`, and :func:`pool`
with its :class:`PooledImputations`.  :mod:`~riskvet.imputation.procedure`
joins them to the study: a cohort imputed as the study file's
``missing_data`` section says (:func:`~riskvet.imputation.procedure.impute_cohort`)
and the derivation procedure run on the completed data sets with the model
pooled by Rubin's rules (:func:`~riskvet.imputation.procedure.derive_imputed`).
"""

from .chained import METHODS, Imputations, impute
from .rubin import PooledImputations, pool

__all__ = ["impute", "Imputations", "METHODS", "pool", "PooledImputations"]
