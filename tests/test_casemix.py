"""Tests for riskvet.validation.casemix.

References: scikit-learn 1.9 (unpenalised LogisticRegression and
roc_auc_score) for the membership model and its C; numpy for means, SDs and
standardised differences computed by hand; the demo's populations
(riskvet.demo: the validation season is cooler by about 2 degC WBGT, about
1.5 SD, and ten years older).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import yaml
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score

from riskvet.reporting.sentences.external_validation import case_mix_sentence
from riskvet import demo
from riskvet.validation.casemix import CaseMix, case_mix
from riskvet.intake.data import prepare_cohort
from riskvet.intake.design import build_design
from riskvet.errors import DataError, RiskvetError
from riskvet.modelling.modelfile import model_from_fit
from riskvet.modelling.fitter import fit_cumulative
from riskvet.chain.scaffold import demo_study_text
from riskvet.intake.study import study_from_dict

LINEAR = ["heart_rate", "systolic_bp", "resp_rate", "confusion", "collapse", "vomiting", "dry_skin", "wbgt", "prior_heat_illness"]


@pytest.fixture(scope="module")
def study():
    raw = yaml.safe_load(demo_study_text())
    raw["data"] = {"derivation": "d.csv", "validation": [{"label": "season-2026", "path": "v.csv"}]}
    raw.pop("agreement")
    raw.pop("internal_external")  # no cluster column here
    return study_from_dict(raw, base_dir="/tmp")


@pytest.fixture(scope="module")
def derivation(study):
    return prepare_cohort(study, demo.draw(1500, season="derivation", seed=21), role="derivation")


@pytest.fixture(scope="module")
def model(derivation):
    design = build_design(derivation.frame, linear=LINEAR, splines={"core_temp": 4, "age": 4}, categorical={"sex": "female"})
    fit = fit_cumulative(design.transform(derivation.frame), derivation.y)
    return model_from_fit(fit, design, outcome={"column": "disposition", "type": "ordinal", "levels": list(demo.LEVELS), "labels": {}})


def cohort(study, derivation, season: str, seed: int, n: int = 1500, label: str | None = None):
    return prepare_cohort(study, demo.draw(n, season=season, seed=seed), role="validation", label=label or season, reference=derivation)


@pytest.fixture(scope="module")
def same(study, derivation, model):
    return case_mix(model, derivation, cohort(study, derivation, "derivation", 22, label="same population"), seed=3)


@pytest.fixture(scope="module")
def shifted(study, derivation, model):
    return case_mix(model, derivation, cohort(study, derivation, "validation", 23, label="season-2026"), seed=3)


def test_membership_c_near_chance_for_one_population(same):
    # Two samples of one population: membership is unrelated to the data, so
    # the apparent C exceeds 0.5 only by the optimism of a 20-column model on
    # 3,000 rows (about 0.04); the permutation mean estimates exactly that.
    # 0.03: the spread of the apparent C between permutations is about 0.01.
    assert same.membership_c < 0.6
    assert abs(same.membership_c - same.membership_c_null) < 0.03
    assert 0.5 < same.membership_c_null < 0.6
    assert "hard to tell apart" in case_mix_sentence(same)


def test_membership_c_high_for_the_two_seasons(shifted):
    # WBGT alone differs by about 1.5 SD between the seasons; a normal shift of
    # d SD gives C = Phi(d / sqrt(2)) ~ 0.86 (common practice: binormal AUC).
    assert shifted.membership_c > 0.8
    assert shifted.membership_c_lower > 0.78
    assert "transportability" in case_mix_sentence(shifted)
    # wbgt is the column that tells the seasons apart most
    coefs = shifted.membership_coefficients
    assert coefs.loc[coefs["z"].abs().idxmax(), "term"] == "wbgt"


def test_membership_model_matches_scikit_learn(study, derivation, model):
    val = cohort(study, derivation, "validation", 24, n=600)
    result = case_mix(model, derivation, val, n_permutations=0)
    X = pd.concat([model.design.transform(derivation.frame), model.design.transform(val.frame)], ignore_index=True)
    y_all = np.r_[derivation.y, val.y]
    X["outcome=observed"] = (y_all == 1).astype(float)
    X["outcome=transferred"] = (y_all == 2).astype(float)
    member = np.r_[np.zeros(len(derivation.y)), np.ones(len(val.y))]
    # scikit-learn 1.9, unpenalised logistic regression (C=inf, lbfgs, tol 1e-10) on
    # standardised columns (same fitted probabilities, better conditioned).
    Z = (X - X.mean()) / X.std()
    ref = LogisticRegression(C=np.inf, tol=1e-10, max_iter=10000).fit(Z, member)
    c_ref = roc_auc_score(member, ref.decision_function(Z))
    # 1e-6: both fits are at the maximum to ~1e-8; C changes only if an
    # ordering of two rows flips.
    assert result.membership_c == pytest.approx(c_ref, abs=1e-6)
    assert np.isnan(result.membership_c_null) and result.n_permutations == 0


def test_side_by_side_table_against_numpy(shifted, study, derivation, model):
    val = cohort(study, derivation, "validation", 23, label="season-2026")
    t = shifted.to_frame()
    row = t[t["variable"] == "age"].iloc[0]
    a = derivation.frame["age"].to_numpy(float)
    b = val.frame["age"].to_numpy(float)
    assert row["derivation"] == pytest.approx(a.mean())
    assert row["validation_sd"] == pytest.approx(b.std(ddof=1))
    # standardised difference, validation minus derivation (Austin 2009)
    assert row["standardised_difference"] == pytest.approx((b.mean() - a.mean()) / np.sqrt((a.var(ddof=1) + b.var(ddof=1)) / 2))
    out = t[t["variable"] == "outcome"]
    assert list(out["derivation"]) == pytest.approx([np.mean(derivation.y == k) for k in range(3)])
    lp_d = model.linear_predictor(derivation.frame)
    lp_v = model.linear_predictor(val.frame)
    assert shifted.lp_mean_derivation == pytest.approx(lp_d.mean())
    assert shifted.lp_sd_validation == pytest.approx(lp_v.std(ddof=1))
    assert shifted.lp_sd_ratio == pytest.approx(lp_v.std(ddof=1) / lp_d.std(ddof=1))
    assert shifted.lp_histogram_derivation.sum() == len(derivation.y)
    assert shifted.lp_histogram_validation.sum() == len(val.y)
    # only the model's predictors, each outcome level and the LP
    assert set(t["variable"]) == set(model.design.sources) | {"outcome", "linear predictor"}


def test_results_are_json_ready_and_deterministic(shifted, study, derivation, model):
    text = json.dumps(shifted.to_dict(), allow_nan=True)
    assert "season-2026" in text
    again = case_mix(model, derivation, cohort(study, derivation, "validation", 23, label="season-2026"), seed=3)
    assert again.membership_c_null == shifted.membership_c_null
    assert isinstance(shifted.summary_frame(), pd.DataFrame) and len(shifted.summary_frame()) == 1


def test_bad_input(study, derivation, model):
    val = cohort(study, derivation, "validation", 25, n=200)
    with pytest.raises(RiskvetError, match="PredictionModel"):
        case_mix("model", derivation, val)
    with pytest.raises(DataError, match="PreparedCohort"):
        case_mix(model, derivation, val.frame)
    with pytest.raises(RiskvetError, match="n_permutations"):
        case_mix(model, derivation, val, n_permutations=-1)


def test_case_mix_figure(shifted, same):
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    from riskvet.reporting.figures.external_validation import plot_case_mix

    assert isinstance(plot_case_mix([shifted, same]), Figure)
    assert len(plot_case_mix(shifted).axes) == 1
    with pytest.raises(RiskvetError, match="CaseMix"):
        plot_case_mix([])
    assert isinstance(shifted, CaseMix)
