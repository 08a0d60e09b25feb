"""What the derivation, summary and planning pages state: term effects over contrasts, cautions, and their layout."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels
import statsmodels.api as sm
from statsmodels.miscmodels.ordinal_model import OrderedModel

from riskvet.errors import RiskvetError
from riskvet.intake.design import build_design, rcs_basis
from riskvet.modelling.fitter import fit_cumulative
from riskvet.modelling.term_effects import column_label, contrast_values, joint_wald_test, term_effects, term_label
from riskvet.reporting.headlines import key_results
from riskvet.reporting.sentences.derivation import (
    events_per_parameter_sentence,
    hosmer_lemeshow_sentence,
    post_selection_sentence,
)
from riskvet.reporting.sentences.summary import selection_stability_sentence
from riskvet.chain.stages import summary as summary_stage

STATSMODELS = statsmodels.__version__  # the reference library of the checks below


def _data(n=1500, seed=3, ordinal=False):
    rng = np.random.default_rng(seed)
    age = rng.normal(50, 12, n)
    temp = rng.normal(38, 0.8, n)
    sex = rng.choice(["female", "male", "other"], n, p=[0.45, 0.45, 0.10])
    lp = 0.03 * (age - 50) + 0.9 * np.maximum(temp - 38, 0) ** 2 + 0.5 * (sex == "male") + 0.02 * (age - 50) * (sex == "male")
    if ordinal:
        cum = 1 / (1 + np.exp(-(lp[:, None] - np.array([-0.3, 1.4])[None, :])))
        u = rng.uniform(size=n)
        y = (u[:, None] < cum).sum(axis=1)
    else:
        y = (rng.uniform(size=n) < 1 / (1 + np.exp(-(lp - 0.5)))).astype(int)
    frame = pd.DataFrame({"age": age, "temp": temp, "sex": sex})
    design = build_design(frame, linear=["age"], splines={"temp": 4}, categorical={"sex": "female"}, interactions=[("age", "sex")])
    return frame, y, design


def _vector(columns, values):
    c = np.zeros(len(columns))
    for name, v in values.items():
        c[list(columns).index(name)] += v
    return c


def test_contrast_odds_ratios_and_joint_tests_match_statsmodels_logit():
    """OR = exp(c'b), 95% Wald interval exp(c'b -/+ 1.96 sqrt(c'Vc)) and the joint Wald chi-square, against
    statsmodels Logit t_test / wald_test (statsmodels version in STATSMODELS) on the same model matrix."""
    frame, y, design = _data()
    X = design.transform(frame)
    fit = fit_cumulative(X, y)
    ref = sm.Logit(y, sm.add_constant(X)).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
    effects = term_effects(fit, design, frame)
    table = effects.effects
    names = ["const", *X.columns]

    def check(row, c):
        t = ref.t_test(np.r_[0.0, c])
        ci = np.asarray(t.conf_int(alpha=0.05)).ravel()
        np.testing.assert_allclose(row["odds ratio"], np.exp(float(np.asarray(t.effect).ravel()[0])), rtol=1e-6)
        np.testing.assert_allclose([row["lower (95% Wald interval)"], row["upper (95% Wald interval)"]], np.exp(ci), rtol=1e-5)

    # the spline: 75th against 25th percentile, columns from the basis itself
    lo, hi = np.percentile(frame["temp"], [25, 75])
    basis = rcs_basis(np.array([lo, hi]), design.terms[1].knots)
    c = _vector(X.columns, dict(zip(design.terms[1].columns, basis[1] - basis[0])))
    row = table[table["term"] == "temp (spline)"].iloc[0]
    assert row["compares"].startswith(f"{hi:.4g} against {lo:.4g}") and "75th against 25th percentile" in row["compares"]
    check(row, c)
    # age at sex = male: the main effect and the interaction column move together
    alo, ahi = np.percentile(frame["age"], [25, 75])
    c = _vector(X.columns, {"age": ahi - alo, "age:sex=male": ahi - alo})
    row = table[(table["term"] == "age × sex (interaction)") & (table["held at"] == "sex = male")].iloc[0]
    check(row, c)
    # a main effect with an interaction is stated at the reference of the interacting predictor
    row = table[(table["term"] == "age") & table["compares"].str.contains("percentile")].iloc[0]
    assert row["held at"] == "sex = female (reference)"
    check(row, _vector(X.columns, {"age": ahi - alo}))
    # category against reference, the interacting numeric predictor held at its median
    med = float(np.median(frame["age"]))
    row = table[(table["term"] == "sex (categories)") & (table["compares"] == "male against female (reference)")].iloc[0]
    assert row["held at"] == f"age = {med:.4g} (median)"
    check(row, _vector(X.columns, {"sex=male": 1.0, "age:sex=male": med}))
    # joint tests, one per term, df = number of columns
    tests = effects.tests.set_index("term")
    for term in design.terms:
        R = np.zeros((len(term.columns), len(names)))
        for i, col in enumerate(term.columns):
            R[i, names.index(col)] = 1.0
        w = ref.wald_test(R, scalar=True, use_f=False)
        got = tests.loc[term_label(term)]
        np.testing.assert_allclose(got["chi-square"], float(w.statistic), rtol=1e-6)
        np.testing.assert_allclose(got["p (joint Wald test)"], float(w.pvalue), rtol=1e-5, atol=1e-300)
        assert got["df"] == len(term.columns)


def test_joint_test_and_contrast_match_statsmodels_ordered_model():
    """Proportional-odds logit: the spline's joint Wald test and its 75th-vs-25th contrast against statsmodels
    OrderedModel (version in STATSMODELS); the tolerance allows for its quasi-Newton optimum."""
    frame, y, design = _data(n=1200, seed=5, ordinal=True)
    X = design.transform(frame)
    fit = fit_cumulative(X, y)
    ref = OrderedModel(y, X, distr="logit").fit(method="bfgs", disp=0, maxiter=5000, gtol=1e-8)
    p = X.shape[1]
    spline = design.terms[1]
    R = np.zeros((len(spline.columns), len(ref.params)))
    for i, col in enumerate(spline.columns):
        R[i, list(X.columns).index(col)] = 1.0
    w = ref.wald_test(R, scalar=True, use_f=False)
    stat, df, pval = joint_wald_test(fit, spline.columns)
    assert df == 3
    np.testing.assert_allclose(stat, float(w.statistic), rtol=1e-3)
    lo, hi = np.percentile(frame["temp"], [25, 75])
    basis = rcs_basis(np.array([lo, hi]), spline.knots)
    c = np.zeros(len(ref.params))
    for col, v in zip(spline.columns, basis[1] - basis[0]):
        c[list(X.columns).index(col)] = v
    t = ref.t_test(c)
    row = term_effects(fit, design, frame).effects.query("term == 'temp (spline)'").iloc[0]
    np.testing.assert_allclose(np.log(row["odds ratio"]), float(np.asarray(t.effect).ravel()[0]), rtol=1e-3)
    assert p == len(fit.columns)


def test_non_proportional_model_gives_one_row_per_cut():
    frame, y, design = _data(n=1500, seed=7, ordinal=True)
    X = design.transform(frame)
    fit = fit_cumulative(X, y, proportional=False)
    effects = term_effects(fit, design, frame, cut_names=["observed or higher", "transferred"])
    spline = effects.effects[effects.effects["term"] == "temp (spline)"]
    assert list(spline["cut"]) == ["observed or higher", "transferred"]
    assert effects.tests.set_index("term").loc["temp (spline)", "df"] == 6  # 3 columns, 2 cuts
    with pytest.raises(RiskvetError, match="cut_names"):
        term_effects(fit, design, frame, cut_names=["one"])


def test_frames_are_in_words():
    frame, y, design = _data(n=600)
    fit = fit_cumulative(design.transform(frame), y)
    effects = term_effects(fit, design, frame)
    for table in (effects.effects, effects.tests):
        assert isinstance(table.index, pd.RangeIndex)
        assert not any("_" in c for c in table.columns)
        text = " ".join(map(str, table.to_numpy().ravel()))
        assert "nonlin" not in text and "=" not in text.replace(" = ", "")
    assert column_label(design, "temp_nonlin2") == "temp (spline, part 3 of 3)"
    assert column_label(design, "age:sex=male") == "age × sex: male"
    with pytest.raises(RiskvetError, match="column_label"):
        column_label(design, "x1")


def test_contrast_values_fall_back_and_refuse_constants():
    assert contrast_values([0, 1, 0, 1, 1]) == (0.0, 1.0, "its two values")
    lo, hi, how = contrast_values([5] * 90 + [1, 2, 3, 4, 6, 7, 8, 9, 10, 11])
    assert how == "largest against smallest value" and (lo, hi) == (1.0, 11.0)
    with pytest.raises(RiskvetError, match="at least two distinct values"):
        contrast_values([3.0, 3.0, 3.0])


def test_post_selection_caution_names_its_sources_and_the_frequencies():
    class Forward:
        method = "forward"

    class Fixed:
        method = "none"

    text = post_selection_sentence(Forward())
    assert "too narrow" in text and "p-values too small" in text
    assert "Harrell" in text and "Heinze, Wallisch & Dunkler" in text
    assert "selection frequencies" in text and "internal-validation page" in text
    assert "too narrow" not in post_selection_sentence(Fixed())


def test_low_events_per_parameter_is_flagged_in_words():
    low = events_per_parameter_sentence(44, 18)
    assert "2.4 per parameter" in low and "This is low" in low and "Riley et al. (BMJ 2020)" in low
    enough = events_per_parameter_sentence(300, 18)
    assert "This is low" not in enough and "at least 10" in enough


def test_hosmer_lemeshow_sentence_says_what_the_p_value_means():
    class Cal:
        hosmer_lemeshow, hosmer_lemeshow_df, hosmer_lemeshow_pvalue, n_groups, n = 30.1, 8.0, 0.0002, 10, 25000

    text = hosmer_lemeshow_sentence(Cal(), n_levels=2)
    assert "p < 0.001" in text and "25000 people" in text
    assert "Kramer & Zimmerman" in text and "Paul, Pennell & Lemeshow" in text
    assert "too small to matter" in text and "little power" in text


def test_summary_findings_hold_net_benefit_rule_and_selection_stability():
    results = {
        "internal_validation": {
            "texts": {"summary": "Optimism is small."},
            "bootstrap": {"stability": {"method": "forward", "n_replicates": 10, "forced_terms": ["core_temp"],
                                        "apparent_terms": ["collapse", "core_temp"],
                                        "share_selected": {"collapse": 0.6, "core_temp": 1.0, "resp_rate": 0.3, "age": 0.0}}},
        },
        "external_validation": {"texts": {"summary": "Applied unchanged.", "performance": "C is 0.80.",
                                          "decision": "The model beats treating everybody.", "rule": "The model ranks better than the rule."}},
    }
    found = summary_stage.findings(results)
    text = " ".join(found["finding"])
    assert "beats treating everybody" in text and "better than the rule" in text
    assert "60% (collapse)" in text and "30% (resp_rate)" in text and "unstable" in text
    assert "core_temp" not in selection_stability_sentence(results["internal_validation"]["bootstrap"]["stability"])
    assert selection_stability_sentence({"method": "none", "share_selected": {"a": 1.0}}) is None


def test_key_results_name_cuts_as_the_pages_do():
    levels = ("released", "observed", "transferred")
    results = {"derivation": {"apparent": {"summary": {"auc_cut0": 0.7, "auc_cut1": 0.8}}}}
    measures = list(key_results(results, levels=levels)["measure"])
    assert measures == ["apparent AUC, observed or higher", "apparent AUC, transferred"]
    assert not any(">=" in m for m in measures)


def test_equation_names_cuts_once_and_never_with_a_bar():
    from riskvet.modelling.modelfile import model_from_fit

    frame, y, design = _data(n=600, seed=9, ordinal=True)
    fit = fit_cumulative(design.transform(frame), y)
    outcome = {"column": "y", "type": "ordinal", "levels": ["released", "observed", "transferred"], "labels": {}}
    provenance = {"created": None, "study_name": "t", "study_sha256": None, "derivation_data_sha256": None, "n_analysed": 600,
                  "selection": "none", "parent_model_sha256": None, "update_method": None}
    model = model_from_fit(fit, design, outcome=outcome, provenance=provenance)
    text = model.equation_text()
    assert "|" not in text
    assert "P(observed or higher) = 1 - expit(" in text and "P(transferred) = 1 - expit(" in text
    assert "transferred or higher" not in text


def test_a_separated_proportional_odds_test_is_said_not_valid_rather_than_printed_as_nan():
    """A proportional-odds test whose fit is separated has no statistic: the sentence says why, never 'nan'."""
    from types import SimpleNamespace

    from riskvet.reporting.sentences.derivation import proportional_odds_sentence

    reason = "not valid: separated binary fit(s) (cut 1: ['site=c']); their slopes are not finite"
    brant = SimpleNamespace(valid=False, reason=reason, statistic=float("nan"), df=2, p=float("nan"), warnings=())
    lr = SimpleNamespace(valid=True, reason="", statistic=3.2, df=2, p=0.2, warnings=())
    text = proportional_odds_sentence({"brant": brant, "lr": lr})
    assert "could not be checked" in text and reason in text and "nan" not in text
