"""The whole chain for a binary outcome: the demo recoded to transferred versus not."""

from __future__ import annotations


import numpy as np
import pytest
import statsmodels.api as sm

from riskvet.intake.data import load_cohorts
from riskvet.modelling.modelfile import load_model
from riskvet.chain.record import verify_record
from riskvet.intake.study import load_study


def test_every_stage_runs_for_a_binary_outcome(binary_chain):
    study, result = binary_chain
    assert all(s.status == "ok" for s in result.stages)
    assert verify_record(result.record_dir).ok


def test_binary_model_is_the_logistic_regression_statsmodels_fits(binary_chain):
    """Reference: statsmodels 0.15 Logit on the selected design columns of the analysed rows;
    the intercept is minus the single threshold (tolerance 1e-6: both are Newton fits to 1e-8)."""
    study_path, result = binary_chain
    model = load_model(result.record_dir / "models" / "model.json")
    cohort = load_cohorts(load_study(study_path)).derivation
    X = model.design.transform(cohort.frame)
    reference = sm.Logit(cohort.y, sm.add_constant(X)).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
    assert -model.thresholds[0] == pytest.approx(reference.params["const"], abs=1e-6)
    np.testing.assert_allclose(model.coef, reference.params[list(X.columns)].to_numpy(), atol=1e-6)
    assert "P(transferred) = expit(" in model.equation_text()
