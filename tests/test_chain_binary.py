"""The whole chain for a binary outcome: the demo recoded to transferred versus not."""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from riskvet.intake.data import load_cohorts
from riskvet.modelling.modelfile import load_model
from riskvet.chain.record import verify_record
from riskvet.chain.runner import run_study
from riskvet.chain.scaffold import new_study_folder
from riskvet.intake.study import load_study


def _binary_study(folder):
    study = new_study_folder(folder, n_derivation=500, n_validation=400, n_ratings=40, n_boot=4)
    for name in ("derivation.csv", "validation.csv"):
        path = folder / "data" / name
        frame = pd.read_csv(path, dtype=str, keep_default_na=False)
        frame["disposition"] = frame["disposition"].replace({"observed": "released"})
        frame.to_csv(path, index=False)
    text = study.read_text()
    text = text.replace("  type: ordinal", "  type: binary\n  event: transferred")
    text = text.replace("levels: [released, observed, transferred]", "levels: [released, transferred]")
    text = text.replace("    observed: Treated and observed on site\n", "")
    text = text.replace("  observed: [0.2, 0.4]\n", "")
    study.write_text(text)
    return study


@pytest.fixture(scope="module")
def binary_chain(tmp_path_factory):
    study = _binary_study(tmp_path_factory.mktemp("binary") / "demo")
    result = run_study(study, out=io.StringIO())
    if not result.ok:
        pytest.fail(f"stage {result.failed_stage.stage} failed: {json.dumps(result.failed_stage.error, indent=1)[:3000]}")
    return study, result


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
