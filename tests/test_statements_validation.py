"""What the internal-validation, external-validation and updating pages state.

Each test checks one statement a reviewer reads: the direction of each
measure's change under optimism correction, where the .632+ estimate is
shown, what a bootstrap correction of the updating procedure is attributed
to, which tests of the closed procedure were reached, that each measure has
one kind of interval on a page, that subgroups are judged by their events
and non-events, that small subgroup counts are suppressed, and that cuts are
named in the user's level labels.

References: Efron B, Tibshirani R. Improvements on cross-validation: the
.632+ bootstrap method. JASA 1997;92(438):548-560 (no-information values
are defined for error rates: 0.5 for a C statistic, random pairing of
predictions and outcomes for additive losses); Vergouwe Y et al., Stat Med
2017;36(28):4529-4539 (the closed test stops at the first non-significant
step); Vergouwe Y, Steyerberg EW, Eijkemans MJC, Habbema JDF, J Clin
Epidemiol 2005;58(5):475-483 and Collins GS, Ogundimu EO, Altman DG, Stat
Med 2016;35(2):214-226 (at least 100 events and 100 non-events to validate
calibration); Cox DR, Biometrika 1958 (calibration slope 1 and
calibration-in-the-large 0 are ideal); Steyerberg EW et al., Epidemiology
2010;21(1):128-138 (the Brier score of predicting the outcome proportion p
is p(1 - p)).
"""

from __future__ import annotations

import json
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from riskvet import demo
from riskvet.chain.stages.external_validation import ExternalValidationOutput
from riskvet.chain.stages.internal_validation import ESTIMATE_COLUMNS, InternalValidationOutput
from riskvet.chain.stages.updating import UpdatingOutput
from riskvet.errors import RiskvetError, RiskvetWarning
from riskvet.intake.design import build_design
from riskvet.modelling.fitter import fit_cumulative
from riskvet.modelling.modelfile import model_from_fit
from riskvet.reporting.disclosure import SUPPRESSED
from riskvet.reporting.labels import cut_label
from riskvet.reporting.sentences.common import interval_words, judge_change, measure_guide
from riskvet.reporting.sentences.external_validation import cohort_summary, page_intervals, subgroup_sentence
from riskvet.reporting.sentences.internal_validation import estimates_sentence, estimator_632plus_sentence
from riskvet.reporting.sentences.updating import optimism_sentence, step_decision, closed_test_sentence
from riskvet.validation.bootstrap import MeasureEstimate, _measure_specs
from riskvet.validation.external import SubgroupSpec, validate_cohort
from riskvet.validation.update import ClosedTest, LRComparison, UpdatePerformance, update_model

LEVELS = tuple(demo.LEVELS)
LINEAR = ["heart_rate", "systolic_bp", "resp_rate", "confusion", "collapse", "vomiting", "dry_skin", "wbgt"]
OUTCOME = {"column": "disposition", "type": "ordinal", "levels": list(LEVELS), "labels": {}}


def codes(frame: pd.DataFrame) -> np.ndarray:
    return pd.Categorical(frame["disposition"], categories=LEVELS).codes.astype(np.int64)


@pytest.fixture(scope="module")
def model():
    d = demo.draw(4000, season="derivation", seed=51)
    design = build_design(d, linear=LINEAR, splines={"core_temp": 4}, categorical={"sex": "female"})
    return model_from_fit(fit_cumulative(design.transform(d), codes(d)), design, outcome=OUTCOME)


@pytest.fixture(scope="module")
def cohort(model):
    v = demo.draw(1300, season="validation", seed=52)
    y = codes(v)
    # an invented site with only 3 patients, so its counts (and one more) must be suppressed
    v["site"] = np.where(np.arange(len(v)) < 3, "B", "A")
    subgroups = [SubgroupSpec("age", (30.0, 50.0)), SubgroupSpec("sex"), SubgroupSpec("site")]
    with pytest.warns(RiskvetWarning, match="site = B"):
        result = validate_cohort(model, v, y, label="season 2026", subgroups=subgroups, n_boot=30, seed=3)
    return v, y, result


# ---------------------------------------------------------------------------
# What good looks like
# ---------------------------------------------------------------------------


def test_measure_guide_has_one_line_per_measure_with_its_reference_values():
    guide = measure_guide(["auc_cut0", "auc_cut1", "calibration_slope", "calibration_intercept_cut0", "brier", "ici_cut1",
                           "oe_ratio", "net_benefit"], n_levels=3)
    assert isinstance(guide.index, pd.RangeIndex)
    assert list(guide.columns) == ["measure", "possible values", "better when", "reference values"]
    assert len(guide) == 7  # the two cuts' C are one measure, listed once
    rows = guide.set_index("measure")
    assert "0.5: no discrimination" in rows.loc["C (AUC) of each cut", "reference values"]
    assert rows.loc["calibration slope", "better when"] == "closer to 1"
    assert "below 1: predictions too extreme" in rows.loc["calibration slope", "reference values"]
    assert rows.loc["calibration-in-the-large", "better when"] == "closer to 0"
    assert rows.loc["Brier score", "better when"] == "lower" and rows.loc["Brier score", "possible values"] == "0 to 2"
    assert rows.loc["integrated calibration index (ICI)", "reference values"].startswith("0")
    assert rows.loc["observed/expected ratio", "better when"] == "closer to 1"
    assert "treating everybody" in rows.loc["net benefit", "reference values"]
    binary = measure_guide(["auc", "brier"], n_levels=2).set_index("measure")
    assert "p(1 − p)" in binary.loc["Brier score", "reference values"] and binary.loc["Brier score", "possible values"] == "0 to 1"
    assert "C statistic (AUC)" in binary.index
    with pytest.raises(RiskvetError, match="measures"):
        measure_guide(["kappa"], n_levels=2)
    with pytest.raises(RiskvetError, match="n_levels"):
        measure_guide(["auc"], n_levels=1)


def test_judge_change_follows_each_measures_direction():
    assert judge_change("auc_cut0", 0.80, 0.78) == "worse"
    assert judge_change("brier", 0.20, 0.21) == "worse"  # lower is better
    assert judge_change("ici_cut1", 0.0066, 0.0045) == "better"
    assert judge_change("calibration_slope", 1.0, 0.96) == "worse"  # 1 is ideal
    assert judge_change("calibration_slope", 1.07, 1.04) == "better"
    assert judge_change("calibration_intercept", -0.012, -0.011) == "better"  # 0 is ideal
    assert judge_change("auc", 0.8, float("nan")) == "not available"
    with pytest.raises(RiskvetError, match="measure"):
        judge_change("kappa", 0.1, 0.2)


def test_interval_words_name_level_and_kind():
    assert interval_words("bootstrap") == "95% bootstrap percentile interval"
    assert interval_words("wald_log", 0.9) == "90% Wald interval on the log scale"
    with pytest.raises(RiskvetError, match="kind"):
        interval_words("credible")
    with pytest.raises(RiskvetError, match="confidence"):
        interval_words("wald", 95)


# ---------------------------------------------------------------------------
# Internal validation
# ---------------------------------------------------------------------------


def _estimate(measure: str, label: str, kind: str, apparent: float, optimism: float, *, spread=(-0.01, 0.01), plus=0.5):
    nan = float("nan")
    return MeasureEstimate(
        measure=measure, label=label, kind=kind, apparent=apparent, bootstrap_mean=nan, test_mean=nan, optimism=optimism,
        corrected=apparent - optimism, oob_mean=nan, no_information=nan, overfitting_rate=nan, estimate_632=nan,
        estimate_632plus=plus, optimism_sd=nan, optimism_lower=spread[0], optimism_upper=spread[1], test_sd=nan, test_lower=nan,
        test_upper=nan, n_replicates=200, n_oob=200,
    )


@pytest.fixture()
def internal():
    # the demo record's figures for three cuts of heat illness (rounded): the ICI of the top cut has a
    # positive optimism, so its corrected value is lower, i.e. better, than the apparent one
    estimates = (
        _estimate("average_cut_auc", "Average dichotomised C", "concordance", 0.8111, 0.0070, plus=0.8037),
        _estimate("brier", "Brier score", "brier", 0.4381, -0.0065, plus=0.445),
        _estimate("calibration_slope", "Calibration slope of the linear predictor, all levels", "slope", 1.0, 0.0397),
        _estimate("calibration_intercept_cut0", "Calibration-in-the-large, observed or higher", "intercept", -0.0119, -0.0004),
        _estimate("ici_cut1", "ICI, transferred", "ici", 0.0066, 0.0022, spread=(-0.006, 0.011), plus=0.016),
    )
    validation = SimpleNamespace(estimates=estimates, n_succeeded=200, n_levels=3)
    return InternalValidationOutput(validation=validation, crossval=None, shrunken_model=None, model_check="", notes=())


def test_internal_validation_table_states_each_direction_in_words(internal):
    table = internal.to_frame()
    assert isinstance(table.index, pd.RangeIndex) and list(table.columns) == list(ESTIMATE_COLUMNS)
    assert not {"apparent", "optimism", "corrected", "n", "optimism-corrected"} & set(table.columns)
    rows = table.set_index("measure")
    verdict = "expected in new patients compared with the derivation data"
    assert rows.loc["Average dichotomised C", verdict] == "worse"
    assert rows.loc["Brier score", verdict] == "worse"  # lower is better: the corrected Brier is higher
    assert rows.loc["Calibration slope of the linear predictor, all levels", verdict] == "worse"
    assert rows.loc["ICI, transferred", verdict] == "better"
    assert rows.loc["ICI, transferred", "change"] == pytest.approx(-0.0022)
    # the change's replicate spread is the optimism's, turned round
    assert (rows.loc["ICI, transferred", "change, 2.5th percentile of replicates"],
            rows.loc["ICI, transferred", "change, 97.5th percentile of replicates"]) == pytest.approx((-0.011, 0.006))


def test_632plus_is_left_out_where_no_information_value_is_defined(internal):
    rows = internal.to_frame().set_index("measure")[".632+ estimate"]
    assert rows["Average dichotomised C"] == pytest.approx(0.8037) and rows["Brier score"] == pytest.approx(0.445)
    for label in ("ICI, transferred", "Calibration slope of the linear predictor, all levels",
                  "Calibration-in-the-large, observed or higher"):
        assert np.isnan(rows[label])
    text = estimator_632plus_sentence(internal.validation)
    assert "the ICI, calibration-in-the-large or calibration slopes" in text and "dash" in text


def test_internal_validation_sentence_gets_the_direction_right(internal):
    text = estimates_sentence(internal.validation)
    assert "optimism is negative" not in text
    assert "for the Brier score and the ICI lower is better" in text
    # the measures whose corrected value came out better are named, and not read as a gain
    assert "ICI, transferred (0.007 in the derivation data, 0.004 expected" in text and "across 0" in text
    assert "calibration-in-the-large, observed or higher" in text
    assert "Brier score (" not in text and "average dichotomised C (" not in text
    assert "not as a gain" in text


def test_internal_validation_guide_and_labels_name_cuts_in_words(internal):
    guide = internal.guide
    assert set(guide["measure"]) >= {"average dichotomised C", "Brier score", "calibration slope", "integrated calibration index (ICI)"}
    labels = [label for _, label, _ in _measure_specs(LEVELS)]
    for j in range(len(LEVELS) - 1):
        assert f"C (AUC), {cut_label(LEVELS, j, binary=False)}" in labels
        assert f"ICI, {cut_label(LEVELS, j, binary=False)}" in labels
    assert not any("P(>=" in label or "|" in label or "cut " in label for label in labels)


# ---------------------------------------------------------------------------
# Updating
# ---------------------------------------------------------------------------


def _closed_test() -> ClosedTest:
    # the demo record's closed test: the third step is the first not significant, the fourth was not reached
    tests = (
        LRComparison("original", "revision", 115.0, 15, 1.8e-17, True, True),
        LRComparison("in_the_large", "revision", 25.9, 14, 0.027, True, True),
        LRComparison("in_the_large_thresholds", "revision", 21.16, 13, 0.0698, False, True),
        LRComparison("recalibration", "revision", 21.16, 12, 0.0481, True, False),
    )
    return ClosedTest(alpha=0.05, most_extensive="revision", tests=tests, chosen="in_the_large_thresholds", reason="")


def test_unreached_tests_are_marked_and_the_stopping_rule_is_stated():
    ct = _closed_test()
    fake = SimpleNamespace(closed_test=ct, fits={"original": SimpleNamespace(model=SimpleNamespace(levels=LEVELS))})
    table = UpdatingOutput(result=fake, model_files={}, figures={}, texts={}).tests_frame()
    assert isinstance(table.index, pd.RangeIndex)
    assert table["reached by the procedure"].tolist() == ["reached", "reached", "reached", "not reached"]
    assert table["decision"].iloc[2] == "not significantly worse: chosen, stop"
    assert table["decision"].iloc[3].startswith("not reached")  # significant, but after the procedure stopped
    assert step_decision(ct, 1, binary=False) == "significantly worse: go on to the next step"
    text = closed_test_sentence(ct, binary=False)
    assert "stops at the first step that is not significant" in text and "'not reached'" in text and "3 of the 4" in text


def test_bootstrap_correction_is_attributed_to_the_whole_procedure():
    table = pd.DataFrame({"method": ["in_the_large_thresholds"], "measure": ["average_cut_auc"], "cut": pd.array([None], dtype="Int64"),
                          "apparent": [0.836], "optimism": [0.009], "corrected": [0.827]})
    perf = UpdatePerformance(table=table, n_boot=200, n_failed=0, note="Optimistic.",
                             replicate_choices={"revision": 150, "in_the_large_thresholds": 50})
    result = SimpleNamespace(performance=perf, closed_test=_closed_test(),
                             fits={"original": SimpleNamespace(model=SimpleNamespace(levels=LEVELS))})
    text = optimism_sentence(result, "average_cut_auc", None, "average dichotomised C")
    assert "of the chosen update is" not in text
    assert "whole updating procedure" in text
    assert "chose revision in 150, recalibration in the large, all thresholds in 50 of 200 replicates" in text
    assert "0.827" in text and "not for recalibration in the large, all thresholds alone" in text


def test_update_model_counts_what_each_replicate_chose(model):
    v = demo.draw(600, season="validation", seed=53)
    result = update_model(model, v, codes(v), n_boot=6, seed=4)
    choices = result.performance.replicate_choices
    assert sum(choices.values()) == 6 - result.performance.n_failed
    assert set(choices) <= set(result.fits)
    assert json.loads(json.dumps(result.to_dict()))["performance"]["replicate_choices"] == dict(choices)


# ---------------------------------------------------------------------------
# External validation
# ---------------------------------------------------------------------------


def _output(validation, min_cell_count: int = 5) -> ExternalValidationOutput:
    return ExternalValidationOutput(model_sha256="", flow=pd.DataFrame(), data={}, cohorts={validation.label: validation},
                                    case_mix={}, rule={}, figures={}, texts={}, notes=(), min_cell_count=min_cell_count)


def test_one_kind_of_interval_per_measure_on_the_page(cohort):
    _, _, c = cohort
    out = _output(c)
    perf, cal = out.performance_frame(), out.calibration_frame()
    for frame in (perf, cal):
        assert isinstance(frame.index, pd.RangeIndex)
        assert not {"lower", "upper", "se", "cut"} & set(frame.columns)
        assert frame.loc[frame["lower limit"].notna(), "interval"].notna().all()  # every interval names its kind
    # calibration-in-the-large and slope carry the bootstrap interval in both tables, never the Wald one
    for measure in ("calibration-in-the-large", "calibration slope"):
        both = perf[perf["measure"] == measure].merge(cal[cal["measure"] == measure], on=["cohort", "outcome"])
        assert len(both) == len(LEVELS) - 1
        assert (both["lower limit_x"] == both["lower limit_y"]).all() and (both["interval_x"] == both["interval_y"]).all()
        assert set(both["interval_x"]) == {"95% bootstrap percentile interval"}
    wald = {round(x.slope_lower, 6) for x in c.calibration.cuts}
    assert not wald & {round(x, 6) for x in cal.loc[cal["measure"] == "calibration slope", "lower limit"]}
    assert set(cal.loc[cal["measure"] == "observed/expected ratio", "interval"]) == {"95% Wald interval on the log scale"}
    # the caption table of the calibration figure states the same intervals
    caption = out.calibration_statistics("season 2026")
    slope = caption[caption["measure"] == "calibration slope"]
    assert slope["lower limit"].tolist() == cal.loc[cal["measure"] == "calibration slope", "lower limit"].tolist()
    # and so does the sentence
    text = cohort_summary(c)
    row = c.performance[(c.performance["measure"] == "calibration_slope") & (c.performance["cut"] == 0)].iloc[0]
    assert f"95% bootstrap percentile interval {row['lower']:.2f} to {row['upper']:.2f}" in text


def test_without_bootstrap_the_page_uses_model_based_intervals(model, cohort):
    v, y, _ = cohort
    c = validate_cohort(model, v, y, n_boot=0)
    t = page_intervals(c)
    slope = t[(t["measure"] == "calibration_slope") & (t["cut"] == 0)].iloc[0]
    assert slope["kind"] == "wald" and slope["lower"] == pytest.approx(c.calibration.cuts[0].slope_lower, abs=0)
    assert "95% Wald interval" in cohort_summary(c)
    assert t.loc[t["measure"] == "average_cut_auc", "kind"].isna().all()


def test_subgroups_are_judged_by_events_and_non_events(cohort):
    v, y, c = cohort
    row = c.subgroup_sizes[c.subgroup_sizes["column"] == "age"].iloc[0]  # the band below 30
    assert row["n"] >= 100 and row["n_top"] < 100  # enough people, too few transferred
    assert bool(row["small"]) and bool(row["few_events"])
    text = subgroup_sentence(c)
    assert "at least 100 events and 100 non-events" in text
    assert f"age {row['group']} (fewer than 100 with {LEVELS[-1]}" in text


def test_small_subgroup_counts_are_suppressed_so_they_cannot_be_recovered(cohort):
    v, y, c = cohort
    out = _output(c, min_cell_count=5)
    table = out.subgroup_sizes_frame()
    assert isinstance(table.index, pd.RangeIndex)
    top_header = f"patients with {LEVELS[-1]}"
    counts = [x for x in pd.concat([table["patients"], table[top_header]]) if x is not None and x != SUPPRESSED]
    assert not [x for x in counts if 0 < int(x) < 5]
    site = table[table["subgroup"] == "site"]
    assert (site["patients"] == SUPPRESSED).all()  # the tiny site, and the other so it cannot be subtracted
    # attack: within one subgroup definition the groups add up to the cohort, so a single hidden count
    # in a definition could be recovered by subtraction
    for _, part in table.groupby("subgroup"):
        for column in ("patients", top_header):
            hidden = int((part[column] == SUPPRESSED).sum())
            assert hidden != 1, (column, part)
    # the results file shows the same published counts, never the raw ones
    saved = json.loads(json.dumps(out.to_dict()))["cohorts"]["season 2026"]
    shown = [r["n"] for r in saved["subgroup_sizes"]] + [r["n_top"] for r in saved["subgroup_sizes"]]
    assert not [x for x in shown if isinstance(x, int) and 0 < x < 5]
    assert all("n_bottom" not in r for r in saved["subgroup_sizes"])


def test_external_frames_name_cuts_in_the_users_labels(cohort):
    _, _, c = cohort
    out = _output(c)
    allowed = {cut_label(LEVELS, j, binary=False) for j in range(len(LEVELS) - 1)} | {"all levels"}
    for frame in (out.performance_frame(), out.calibration_frame(), out.subgroup_frame()):
        assert set(frame["outcome"]) <= allowed
        assert not frame.astype(str).apply(lambda col: col.str.contains(r"Y >=|\||cut \d|P\(>=", regex=True)).any().any()
    text = cohort_summary(c) + subgroup_sentence(c)
    assert "Y >=" not in text and "cut 0" not in text
    assert set(out.guide["measure"]) >= {"calibration slope", "observed/expected ratio", "net benefit"}
