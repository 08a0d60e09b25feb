"""The derivation procedure: frequency weights stand for repeated rows."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskvet import demo
from riskvet.modelling.derive import derive
from riskvet.errors import DataError
from riskvet.intake.study import load_study
from riskvet.chain.scaffold import new_study_folder


@pytest.fixture(scope="module")
def setting(tmp_path_factory):
    folder = tmp_path_factory.mktemp("study")
    study = load_study(new_study_folder(folder, n_derivation=200, n_validation=100, n_ratings=20, n_boot=2))
    frame = demo.draw(400, season="derivation", seed=9)
    y = pd.Categorical(frame["disposition"], categories=list(demo.LEVELS)).codes.astype(np.int64)
    counts = np.random.default_rng(3).multinomial(400, np.full(400, 1 / 400))
    return study, frame, y, counts


@pytest.mark.parametrize("method", ["none", "backward"])
def test_weighted_derivation_equals_derivation_on_repeated_rows(setting, method):
    """Without cross-validation, counts and written-out rows give the same model (common practice:
    a frequency weight is a repeated row); knots are learned on the written-out rows in both."""
    study, frame, y, counts = setting
    study = study.model_copy(update={"selection": study.selection.model_copy(update={"method": method})})
    rows = np.repeat(np.arange(len(frame)), counts)
    weighted = derive(study, frame, y, weights=counts)
    expanded = derive(study, frame.iloc[rows].reset_index(drop=True), y[rows])
    assert weighted.terms == expanded.terms
    assert weighted.design.to_dict() == expanded.design.to_dict()
    np.testing.assert_allclose(weighted.fit.params.to_numpy(), expanded.fit.params.to_numpy(), rtol=0, atol=1e-8)
    assert weighted.fit.loglik == pytest.approx(expanded.fit.loglik, rel=1e-12)


def test_weights_must_be_counts(setting):
    study, frame, y, counts = setting
    with pytest.raises(DataError, match="counts"):
        derive(study, frame, y, weights=counts[:-1])
    with pytest.raises(DataError, match="counts"):
        derive(study, frame, y, weights=counts + 0.5)


def test_internal_validation_takes_the_analysis_frame_itself(setting):
    """validate_internally accepts the derivation frame after exclusions, outcome column included,
    and gives the same result as the (frame, codes) pair."""
    from riskvet.validation.bootstrap import validate_internally

    study, frame, y, _ = setting
    study = study.model_copy(update={"selection": study.selection.model_copy(update={"method": "none"})})
    small = frame.iloc[:300].reset_index(drop=True)
    a = validate_internally(study, small, n_boot=3, seed=4, progress=False)
    b = validate_internally(study, (small, y[:300]), n_boot=3, seed=4, progress=False)
    assert a.to_frame().equals(b.to_frame())
