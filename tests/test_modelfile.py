"""The frozen model file: round trip, refusals, scoring one person, equations."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from riskvet import demo
from riskvet.intake.design import build_design
from riskvet.errors import DesignError, ModelFileError
from riskvet.modelling.modelfile import SCHEMA, load_model, model_from_fit, save_model
from riskvet.modelling.fitter import fit_cumulative

OUTCOME = {"column": "disposition", "type": "ordinal", "levels": list(demo.LEVELS), "labels": {}}


@pytest.fixture(scope="module")
def fitted():
    frame = demo.draw(600, season="derivation", seed=5)
    y = pd.Categorical(frame["disposition"], categories=list(demo.LEVELS)).codes
    design = build_design(frame, linear=["age", "confusion"], splines={"core_temp": 4}, categorical={"sex": "female"})
    X = design.transform(frame)
    fit = fit_cumulative(X, y)
    return frame, design, X, fit


def test_saved_model_predicts_bit_identical_probabilities(tmp_path, fitted):
    frame, design, X, fit = fitted
    model = model_from_fit(fit, design, outcome=OUTCOME, provenance={"note": "test"})
    # the frozen model reproduces the fitter's own predictions (same arithmetic up to rounding)
    np.testing.assert_allclose(model.predict_proba(frame), fit.predict_proba(X), rtol=0, atol=1e-12)
    path = save_model(model, tmp_path / "model.json")
    loaded = load_model(path)
    assert np.array_equal(loaded.predict_proba(frame), model.predict_proba(frame))
    assert loaded.digest() == model.digest()
    assert json.loads(path.read_text())["schema"] == SCHEMA


def test_load_refuses_altered_content_and_unknown_schema(tmp_path, fitted):
    frame, design, X, fit = fitted
    path = save_model(model_from_fit(fit, design, outcome=OUTCOME), tmp_path / "model.json")
    data = json.loads(path.read_text())
    data["thresholds"][0] += 1e-9
    altered = tmp_path / "altered.json"
    altered.write_text(json.dumps(data))
    with pytest.raises(ModelFileError, match="does not match its hash"):
        load_model(altered)
    data = json.loads(path.read_text())
    data["schema"] = "riskvet.model/99"
    other = tmp_path / "other.json"
    other.write_text(json.dumps(data))
    with pytest.raises(ModelFileError, match="schema"):
        load_model(other)
    with pytest.raises(ModelFileError, match="never overwritten"):
        save_model(model_from_fit(fit, design, outcome=OUTCOME), path)


def test_score_person_matches_frame_prediction(fitted):
    frame, design, X, fit = fitted
    model = model_from_fit(fit, design, outcome=OUTCOME)
    person = {c: frame[c].iloc[3] for c in design.sources}
    scored = model.score_person(person)
    row = model.predict_proba(frame.iloc[[3]])[0]
    assert [scored[lv] for lv in demo.LEVELS] == pytest.approx(row.tolist(), abs=1e-15)
    assert scored["P(>= transferred)"] == pytest.approx(row[2])
    with pytest.raises(DesignError, match="core_temp"):
        model.score_person({k: v for k, v in person.items() if k != "core_temp"})


def test_equations_reproduce_the_prediction(fitted):
    """The numbers written in the plain-language equation, evaluated by hand, give the model's probabilities."""
    import re

    frame, design, X, fit = fitted
    model = model_from_fit(fit, design, outcome=OUTCOME)
    text = model.equation_text(digits=12)
    assert "expit" in text and "knots" in text
    lp_line = next(line for line in text.splitlines() if line.startswith("LP = "))
    terms = re.findall(r"([+-]?\s*[0-9.]+(?:e[+-]?\d+)?) x (\S+)", lp_line.removeprefix("LP = "))
    written = {column: float(number.replace(" ", "")) for number, column in terms}
    assert set(written) == set(design.columns)
    theta = float(re.search(r"P\(transferred\) = 1 - expit\(([-0-9.e]+) - LP\)", text).group(1))
    lp = sum(written[c] * X[c].iloc[0] for c in design.columns)
    expected = 1 - 1 / (1 + np.exp(-(theta - lp)))
    assert model.predict_proba(frame.iloc[[0]])[0, 2] == pytest.approx(expected, rel=1e-9)
    latex = model.equation_latex()
    assert latex.startswith("\\begin{align*}") and "\\operatorname{expit}" in latex


def test_non_proportional_model_round_trips(tmp_path, fitted):
    """A non-proportional model's thresholds (cumulative logits at x = 0) need not increase."""
    frame, design, X, _ = fitted
    y = pd.Categorical(frame["disposition"], categories=list(demo.LEVELS)).codes
    fit = fit_cumulative(X, y, proportional=False)
    model = model_from_fit(fit, design, outcome=OUTCOME)
    assert model.coef.shape == (len(design.columns), 2)
    np.testing.assert_allclose(model.predict_proba(frame), fit.predict_proba(X), atol=1e-12)
    loaded = load_model(save_model(model, tmp_path / "nonprop.json"))
    assert np.array_equal(loaded.predict_proba(frame), model.predict_proba(frame))
    assert "LP2" in loaded.equation_text()


def test_binary_equation_reads_as_an_intercept_and_reproduces_the_prediction():
    """For K = 2 with the logit link, P(event) = expit(-theta + LP): ordinary logistic regression
    written the usual way (common practice)."""
    frame = demo.draw(400, season="derivation", seed=8)
    y = (frame["disposition"] == "transferred").astype(int).to_numpy()
    design = build_design(frame, linear=["age", "confusion"])
    X = design.transform(frame)
    fit = fit_cumulative(X, y)
    outcome = {"column": "transferred", "type": "binary", "levels": ["no", "yes"], "labels": {}}
    model = model_from_fit(fit, design, outcome=outcome)
    text = model.equation_text(digits=12)
    assert "P(yes) = expit(" in text and "or higher" not in text
    intercept = float(text.split("P(yes) = expit(")[1].split(" + LP")[0])
    lp = float(X.iloc[0].to_numpy() @ model.coef)
    assert model.predict_proba(frame.iloc[[0]])[0, 1] == pytest.approx(1 / (1 + np.exp(-(intercept + lp))), rel=1e-10)
