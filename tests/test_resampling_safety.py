"""Safety of resampling on small and separated data.

Each test below is one finding from small real data, rebuilt on invented
test data (the demo generator's fictional cohort, with its predictors
replaced by random noise or its top outcome level made rare):

* a selected model with no terms (constant linear predictor) crashed
  calibration inside the bootstrap;
* an error inside a cross-validation fold of a bootstrap replicate's
  selection (ZeroDivisionError) stopped the run instead of counting as a
  failed replicate;
* per-cut calibration slopes of a rare level swung from -2.5 to 63 across
  replicates and were printed as an optimism-corrected estimate.

References checked against: hand-worked closed forms for constant
predictions (ML of an intercept with a constant offset, ties counted 1/2 in
C, the local smoother's mean over tied predictions), numpy 2.x percentiles
and medians on the recorded replicate values, and invariants (results the
same for one and two worker processes; no fold without a level).
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pytest
import yaml
from scipy import special

import riskvet.modelling.derive as derive_module
import riskvet.modelling.selection as selection_module
import riskvet.validation.external as external_module
from riskvet.chain.scaffold import new_study_folder
from riskvet.errors import DesignError, RiskvetError
from riskvet.intake.data import load_cohorts
from riskvet.intake.study import load_study
from riskvet.measures.calibration import SLOPE_UNDEFINED_CONSTANT, calibration, ordinal_calibration
from riskvet.measures.discrimination import ordinal_discrimination
from riskvet.measures.summary import performance_summary
from riskvet.modelling.derive import derive
from riskvet.modelling.modelfile import model_from_fit
from riskvet.validation.bootstrap import (
    MIN_CUT_EVENTS,
    UNSTABLE_SPREAD,
    MeasureEstimate,
    _instability,
    _lp_slope,
    validate_internally,
)
from riskvet.validation.crossval import cross_validate, stratified_folds
from riskvet.validation.external import validate_cohort

LINEAR = {"age": "linear", "heart_rate": "linear", "wbgt": "linear"}


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("safety")
    new_study_folder(path, n_derivation=240, n_validation=120, n_ratings=20, n_boot=5, missing_data="complete_case")  # invented demo data
    return path


def make_study(folder: Path, name: str, **changes):
    """A variant of the demo study: ``changes`` maps 'section.key' to a value."""
    raw = yaml.safe_load((folder / "study.yaml").read_text(encoding="utf-8"))
    for dotted, value in changes.items():
        section, key = dotted.split(".")
        raw.setdefault(section, {})[key] = value
    path = folder / f"{name}.yaml"
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    return load_study(path)


@pytest.fixture(scope="module")
def plain_study(folder):
    """Three linear predictors, no selection (fast, no separation)."""
    return make_study(folder, "plain", **{"selection.method": "none", "predictors.candidates": LINEAR,
                                          "predictors.forced": [], "internal_validation.max_failed_share": 0.5})


@pytest.fixture(scope="module")
def cohort(plain_study):
    return load_cohorts(plain_study).derivation


def noise_frame(frame, seed: int):
    """The cohort with every candidate predictor replaced by standard normal noise (invented)."""
    rng = np.random.default_rng(seed)
    out = frame.copy()
    for column in LINEAR:
        out[column] = rng.normal(size=len(out))
    return out


def rare_top(y: np.ndarray, n_top: int) -> np.ndarray:
    """Outcome codes with only the first ``n_top`` top-level patients kept at the top (invented)."""
    y = y.copy()
    top = np.flatnonzero(y == 2)
    y[top[n_top:]] = 1
    return y


def outcome_of(study) -> dict:
    return {"column": study.outcome.column, "type": study.outcome.type,
            "levels": list(study.outcome.ordered_levels), "labels": {}}


# --------------------------------------------------------------------------
# A model with no terms: constant predictions
# --------------------------------------------------------------------------


def test_constant_predictions_are_measured_with_the_slope_undefined():
    # Invented data: 3 levels, the same prediction for everyone.
    rng = np.random.default_rng(4)
    y = rng.integers(0, 3, size=90)
    prob = np.tile([0.5, 0.3, 0.2], (90, 1))
    with pytest.warns(Warning, match="tied predictions"):  # one quantile group: the grouped table says so
        cal = ordinal_calibration(y, prob)
    summary = performance_summary(y, prob)
    for j, cut in enumerate(cal.cuts):
        p = float(prob[0, j + 1:].sum())
        ybar = float(np.mean(y > j))
        assert np.isnan(cut.slope) and np.isnan(cut.slope_lower) and np.isnan(cut.slope_intercept)
        assert cut.slope_undefined == SLOPE_UNDEFINED_CONSTANT
        assert np.isnan(summary[f"calibration_slope_cut{j}"])
        # Closed forms for a constant prediction p and event share ybar.
        # Calibration-in-the-large: the ML intercept a with offset logit p solves
        # sum(y - expit(a + logit p)) = 0, so a = logit(ybar) - logit(p); Newton
        # stops at a decrement near 1e-10, so 1e-8 relative is ample.
        assert cut.calibration_in_the_large == pytest.approx(special.logit(ybar) - special.logit(p), rel=1e-8, abs=1e-10)
        assert summary[f"calibration_intercept_cut{j}"] == pytest.approx(cut.calibration_in_the_large, rel=1e-12, abs=1e-14)
        assert cut.oe_ratio == pytest.approx(ybar / p, rel=1e-12)
        # Every prediction tied: the local smoother is the mean outcome, so ICI = |ybar - p|.
        assert cut.ici == pytest.approx(abs(ybar - p), rel=1e-9)
        assert summary[f"ici_cut{j}"] == pytest.approx(abs(ybar - p), rel=1e-9)
        assert summary[f"auc_cut{j}"] == 0.5  # every pair tied: each counts 1/2
    indicator = np.eye(3)[y]
    assert summary["brier"] == pytest.approx(np.mean(np.sum((indicator - prob) ** 2, axis=1)), rel=1e-12)
    assert ordinal_discrimination(y, prob).generalised_c == pytest.approx(0.5, abs=1e-12)
    frame = cal.to_frame()
    assert frame[frame["measure"] == "slope"]["estimate"].isna().all()
    assert json.dumps(cal.to_dict(), allow_nan=False)


def test_rounding_noise_counts_as_constant():
    # Predictions equal up to rounding (1e-15) are constant: NaN slope, no FitError.
    rng = np.random.default_rng(5)
    y = rng.integers(0, 2, size=60)
    p = 0.3 + rng.normal(scale=1e-15, size=60)
    result = calibration(y, p)
    assert np.isnan(result.slope) and result.slope_undefined == SLOPE_UNDEFINED_CONSTANT
    assert np.isfinite(result.calibration_in_the_large)
    # a model with a predictor is untouched
    q = np.clip(0.3 + 0.1 * rng.normal(size=60), 0.01, 0.99)
    assert np.isfinite(calibration(y, q).slope) and calibration(y, q).slope_undefined == ""
    # the bootstrap's slope of the linear predictor: NaN for a constant one, a number otherwise
    assert np.isnan(_lp_slope(y, np.full(60, -0.4) + rng.normal(scale=1e-16, size=60), 2, "logit"))
    assert np.isfinite(_lp_slope(y, special.logit(q), 2, "logit"))


@pytest.fixture(scope="module")
def noise_study(folder):
    """Forward selection among three pure-noise predictors: picks nothing on all data."""
    return make_study(folder, "noise", **{"selection.method": "forward", "selection.folds": 3, "predictors.candidates": LINEAR,
                                          "predictors.forced": [], "internal_validation.max_failed_share": 0.5})


def test_internal_validation_of_a_model_with_no_terms(noise_study, cohort):
    frame = noise_frame(cohort.frame, seed=0)
    assert derive(noise_study, frame, cohort.y).terms == ()  # the finding's situation
    result = validate_internally(noise_study, (frame, cohort.y), n_boot=6, seed=2, progress=False)
    slope = result.estimate("calibration_slope")
    assert np.isnan(slope.apparent) and np.isnan(slope.corrected)
    assert "no predictors" in slope.undefined_reason
    for j in range(2):
        e = result.estimate(f"calibration_slope_cut{j}")
        assert np.isnan(e.apparent) and "no predictors" in e.undefined_reason
        assert result.estimate(f"auc_cut{j}").apparent == 0.5
        assert np.isfinite(result.estimate(f"calibration_intercept_cut{j}").apparent)
    assert np.isfinite(result.estimate("brier").corrected)
    assert result.estimate("brier").undefined_reason == ""
    assert json.dumps(result.to_dict(), allow_nan=False)


def test_external_validation_of_a_model_with_no_terms(noise_study, cohort):
    frame = noise_frame(cohort.frame, seed=0)
    derivation = derive(noise_study, frame, cohort.y)
    model = model_from_fit(derivation.fit, derivation.design, outcome=outcome_of(noise_study))
    with pytest.warns(Warning):
        result = validate_cohort(model, frame, cohort.y, n_boot=5, seed=1)
    assert result.discrimination.average_cut_c == pytest.approx(0.5, abs=1e-12)
    for cut in result.calibration.cuts:
        assert np.isnan(cut.slope) and cut.slope_undefined == SLOPE_UNDEFINED_CONSTANT
        assert np.isfinite(cut.calibration_in_the_large) and np.isfinite(cut.oe_ratio)
    table = result.performance
    slopes = table[table["measure"] == "calibration_slope"]
    assert slopes["estimate"].isna().all() and slopes["lower"].isna().all()
    others = table[table["measure"] != "calibration_slope"]
    assert others["estimate"].notna().all() and others["lower"].notna().all()
    assert result.n_failed == 0
    # the slope, undefined in every resample, loses its interval alone, with the reason
    assert set(result.interval_notes) == {"calibration_slope_cut0", "calibration_slope_cut1"}
    assert "undefined in 5 of 5 resamples" in result.interval_notes["calibration_slope_cut0"]
    assert result.intervals_withheld == ""
    assert json.dumps(result.to_dict(), allow_nan=False)


# --------------------------------------------------------------------------
# Every error inside a replicate is a counted failure
# --------------------------------------------------------------------------


def test_an_error_in_a_selection_fold_is_a_counted_replicate_failure(noise_study, cohort, monkeypatch):
    # The finding: ZeroDivisionError in a cross-validation fold of the
    # selection inside a bootstrap replicate.  Here the fold computation
    # raises it for about half the replicates (deterministically, by the
    # folds it is given); the run completes and counts them.
    original = selection_module._cross_validated_path

    def dividing(prob, fold, *args, **kwargs):
        if int(np.sum(fold * np.arange(fold.size))) % 2:
            raise ZeroDivisionError("float division by zero")
        return original(prob, fold, *args, **kwargs)

    frame = noise_frame(cohort.frame, seed=0)
    apparent = derive(noise_study, frame, cohort.y)  # before the patch: the run on all data is not a replicate
    monkeypatch.setattr(selection_module, "_cross_validated_path", dividing)
    monkeypatch.setattr(derive_module, "derive", _first_call_returns(apparent, derive_module.derive))
    study = _with_share(noise_study, 1.0)
    result = validate_internally(study, (frame, cohort.y), n_boot=8, seed=3, progress=False)
    reasons = result.failure_counts
    assert reasons.get("arithmetic error", 0) >= 1
    assert result.n_failed + result.n_succeeded == 8
    for f in result.failures:
        if f.reason == "arithmetic error":
            assert f.message == "deriving the model: float division by zero"
            assert "Error" not in f.message  # words on a page, no class name
    assert list(result.failures_frame()["reason"]).count("arithmetic error") == reasons["arithmetic error"]


def _first_call_returns(value, real):
    """A stand-in for derive: the first call (the run on all data) returns ``value``, later calls run ``real``."""
    calls = {"n": 0}

    def fake(*args, **kwargs):
        calls["n"] += 1
        return value if calls["n"] == 1 else real(*args, **kwargs)

    return fake


def _with_share(study, share: float):
    return study.model_copy(update={"internal_validation": study.internal_validation.model_copy(update={"max_failed_share": share})})


@pytest.mark.parametrize("error", [KeyboardInterrupt, SystemExit, MemoryError])
def test_interrupts_and_memory_errors_stop_the_run(plain_study, cohort, monkeypatch, error):
    real = derive_module.derive
    calls = {"n": 0}

    def fake(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] > 1:  # inside the first replicate
            raise error()
        return real(*args, **kwargs)

    monkeypatch.setattr(derive_module, "derive", fake)
    with pytest.raises(error):
        validate_internally(plain_study, cohort, n_boot=3, seed=1, progress=False)


def test_cross_validation_fold_errors_are_counted(plain_study, cohort, monkeypatch):
    real = derive_module.derive

    def fake(study, frame, y, *, seed=None, weights=None, clusters=None):
        if seed is not None and seed % 2:
            raise IndexError("index 7 is out of bounds for axis 0 with size 7")
        return real(study, frame, y, seed=seed, weights=weights, clusters=clusters)

    monkeypatch.setattr(derive_module, "derive", fake)
    result = cross_validate(_with_share(plain_study, 1.0), cohort, n_folds=4, seed=5, progress=False)
    assert {f.reason for f in result.failures} <= {"lookup error"}
    assert result.failures, "the seed must give at least one odd selection seed"
    assert all(f.message.startswith("deriving the model: index 7") for f in result.failures)
    assert result.estimate("brier").n_folds_used == 4 - len(result.failures)


def test_failed_replicates_are_identical_for_one_and_two_workers(plain_study, cohort):
    # Real failures (resamples without the one top-level patient) and successes,
    # the same bit for bit whether one process or two ran them.
    y = rare_top(cohort.y, 1)
    study = _with_share(plain_study, 0.9)
    one = validate_internally(study, (cohort.frame, y), n_boot=8, seed=21, n_jobs=1, progress=False)
    two = validate_internally(study, (cohort.frame, y), n_boot=8, seed=21, n_jobs=2, progress=False)
    assert one.failures, "the seed must give at least one failed replicate"
    assert json.dumps(one.to_dict(), sort_keys=True) == json.dumps(two.to_dict(), sort_keys=True)


# --------------------------------------------------------------------------
# Separation: a failure unless the fit is Firth's
# --------------------------------------------------------------------------


def _separated_for_odd_seeds(estimation: str):
    real = derive_module.derive

    def fake(study, frame, y, *, seed=None, weights=None, clusters=None):
        d = real(study, frame, y, seed=seed, weights=weights, clusters=clusters)
        if seed is None or seed % 2 == 0:
            return d
        fit = dataclasses.replace(d.selection.fit, separation=("age",), estimation=estimation)
        return dataclasses.replace(d, selection=dataclasses.replace(d.selection, fit=fit))

    return fake


def test_separation_fails_a_replicate_unless_the_fit_is_firth(plain_study, cohort, monkeypatch):
    study = _with_share(plain_study, 1.0)
    monkeypatch.setattr(derive_module, "derive", _separated_for_odd_seeds("maximum likelihood"))
    ml = validate_internally(study, cohort, n_boot=6, seed=4, progress=False)
    odd = [i for i, s in enumerate(ml.selection_seeds) if s % 2]
    assert odd and len(odd) < 6, "the seed must give odd and even selection seeds"
    assert [f.replicate for f in ml.failures] == odd
    assert {f.reason for f in ml.failures} == {"separation"}
    monkeypatch.setattr(derive_module, "derive", _separated_for_odd_seeds("firth"))
    firth = validate_internally(study, cohort, n_boot=6, seed=4, progress=False)
    assert firth.failures == () and firth.n_succeeded == 6


# --------------------------------------------------------------------------
# External validation: the failure share
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def frozen(plain_study, cohort):
    d = derive(plain_study, cohort.frame, cohort.y)
    return model_from_fit(d.fit, d.design, outcome=outcome_of(plain_study))


def _failing_summary(every: int):
    """performance_summary that fails with a division by zero on every ``every``-th resample it measures."""
    real = external_module.performance_summary
    calls = {"n": 0}

    def fake(y, prob):
        calls["n"] += 1
        if calls["n"] > 1 and calls["n"] % every == 0:  # the first call measures the cohort as observed
            raise ZeroDivisionError("division by zero")
        return real(y, prob)

    return fake


def test_external_failures_below_the_share_are_listed(frozen, cohort, monkeypatch):
    monkeypatch.setattr(external_module, "performance_summary", _failing_summary(5))
    with pytest.warns(Warning, match="could not be evaluated"):
        result = validate_cohort(frozen, cohort.frame, cohort.y, n_boot=20, seed=3, max_failed_share=0.25)
    assert result.n_failed == len(result.failures) == 4  # calls 5, 10, 15, 20 of 21
    assert result.failure_counts == {"arithmetic error": 4}
    assert result.failures[0].message == "measuring the resample: division by zero"
    assert result.intervals_withheld == ""
    assert result.performance["lower"].notna().all()
    assert result.performance["n_boot_used"].max() == 16
    assert result.to_dict()["failure_counts"] == {"arithmetic error": 4}


def test_external_failures_above_the_share_withhold_the_intervals(frozen, cohort, monkeypatch):
    monkeypatch.setattr(external_module, "performance_summary", _failing_summary(2))
    with pytest.warns(Warning, match="not reported"):
        result = validate_cohort(frozen, cohort.frame, cohort.y, n_boot=10, seed=3, max_failed_share=0.1)
    assert result.n_failed == 5
    assert "5 of 10 resamples could not be evaluated" in result.intervals_withheld
    assert result.performance[["se", "lower", "upper"]].isna().all().all()
    assert result.performance["estimate"].notna().all()  # the cohort as observed is still measured
    text = json.dumps(result.to_dict(), allow_nan=False)
    assert "intervals_withheld" in text
    with pytest.raises(RiskvetError, match="max_failed_share"):
        validate_cohort(frozen, cohort.frame, cohort.y, n_boot=2, seed=3, max_failed_share=1.5)


# --------------------------------------------------------------------------
# Cross-validation folds never empty
# --------------------------------------------------------------------------


def test_cross_validation_refuses_more_folds_than_the_smallest_level(plain_study, cohort):
    y = rare_top(cohort.y, 3)
    with pytest.raises(DesignError) as info:
        cross_validate(plain_study, (cohort.frame, y), n_folds=4, seed=1, progress=False)
    message = str(info.value)
    levels = plain_study.outcome.ordered_levels
    assert "n_folds = 4" in message and f"'{levels[2]}': 3" in message and "(3)" in message
    # at the limit every fold holds every level (the invariant the check protects)
    fold = stratified_folds(y, n_folds=3, rng=np.random.default_rng(0))
    for f in range(3):
        assert set(np.unique(y[fold == f])) == {0, 1, 2}
    result = cross_validate(plain_study, (cohort.frame, y), n_folds=3, seed=1, progress=False)
    assert result.failures == ()


# --------------------------------------------------------------------------
# Per-cut measures marked unstable
# --------------------------------------------------------------------------


def _estimate(kind: str, lower: float, upper: float, n_replicates: int = 100) -> MeasureEstimate:
    nan = float("nan")
    return MeasureEstimate(
        measure="calibration_slope_cut1", label="slope", kind=kind, apparent=1.0, bootstrap_mean=nan, test_mean=nan,
        optimism=0.0, corrected=1.0, oob_mean=nan, no_information=nan, overfitting_rate=nan, estimate_632=nan,
        estimate_632plus=nan, optimism_sd=nan, optimism_lower=nan, optimism_upper=nan, test_sd=nan, test_lower=lower,
        test_upper=upper, n_replicates=n_replicates, n_oob=0,
    )


def test_instability_rules_by_hand():
    # The finding: per-cut slopes from -2.5 to 63 across replicates.
    reasons = _instability(_estimate("slope", -2.5, 63.0), 12, n_succeeded=100)
    assert len(reasons) == 2
    assert reasons[0].startswith(f"12 patients on the smaller side of this cut, fewer than the {MIN_CUT_EVENTS}")
    assert "spread over 65.5" in reasons[1] and f"wider than {UNSTABLE_SPREAD['slope']:g}" in reasons[1]
    assert _instability(_estimate("slope", 0.6, 1.4), MIN_CUT_EVENTS, n_succeeded=100) == []  # at the limits: stable
    assert _instability(_estimate("slope", 0.6, 1.4), None, n_succeeded=100) == []
    assert len(_instability(_estimate("concordance", 0.5, 0.9), None, n_succeeded=100)) == 1
    assert _instability(_estimate("brier", 0.0, 1.0), None, n_succeeded=100) == []  # no spread rule for the Brier score
    assert "defined in 40 of 100" in _instability(_estimate("ici", 0.0, 0.1, n_replicates=40), None, n_succeeded=100)[0]


def test_rare_level_measures_are_flagged_unstable(plain_study, cohort):
    y = rare_top(cohort.y, 12)
    result = validate_internally(_with_share(plain_study, 0.9), (cohort.frame, y), n_boot=8, seed=5, progress=False)
    for e in result.estimates:
        if e.measure.endswith("_cut1"):
            assert e.smaller_side == 12 and e.unstable and "12 patients on the smaller side" in e.unstable_reason
            assert np.isfinite(e.corrected)  # computed, only flagged
        elif e.measure.endswith("_cut0"):
            assert e.smaller_side == int(min(np.sum(y > 0), np.sum(y == 0)))
        else:
            assert e.smaller_side is None
        # the spread rule against numpy's percentiles of the recorded values
        test = result.values(e.measure, "original")
        test = test[np.isfinite(test)]
        width = UNSTABLE_SPREAD.get(e.kind)
        spread = np.subtract(*np.percentile(test, [97.5, 2.5])) if test.size else np.nan
        assert ("spread over" in e.unstable_reason) == bool(width is not None and spread > width)
        assert e.unstable == bool(e.unstable_reason)
    frame = result.to_frame()
    assert {"unstable", "unstable_reason", "undefined_reason", "smaller_side"} <= set(frame.columns)
    record = result.to_dict()["estimates"]
    assert all(isinstance(r["unstable"], bool) and isinstance(r["unstable_reason"], str) for r in record)


# --------------------------------------------------------------------------
# Tuned shrinkage: the chosen penalty across replicates
# --------------------------------------------------------------------------


def _penalised(real):
    def fake(study, frame, y, *, seed=None, weights=None, clusters=None):
        d = real(study, frame, y, seed=seed, weights=weights, clusters=clusters)
        alpha = 0.01 * (1 + (study.selection.seed if seed is None else seed) % 97)  # invented: a penalty that depends on the resample's seed
        fit = dataclasses.replace(d.selection.fit, estimation="penalized", penalty={"alpha": alpha, "l1_ratio": 0.0})
        return dataclasses.replace(d, selection=dataclasses.replace(d.selection, fit=fit))

    return fake


def test_penalty_spread_of_a_penalised_derivation(plain_study, cohort, monkeypatch):
    plain = validate_internally(plain_study, cohort, n_boot=5, seed=6, progress=False)
    assert plain.penalty_spread is None
    # The slope spread: the values behind the bootstrap shrinkage factor (numpy median and percentiles).
    slopes = plain.values("calibration_slope", "original")
    s = plain.slope_spread
    assert s.values == tuple(slopes)
    assert s.median == pytest.approx(float(np.median(slopes)), rel=1e-12)
    assert (s.lower, s.upper) == pytest.approx(tuple(np.percentile(slopes, [2.5, 97.5])), rel=1e-12)
    assert s.lower == pytest.approx(plain.shrinkage.bootstrap_lower, rel=1e-12)
    assert s.apparent == pytest.approx(1.0, abs=1e-6)  # ML: slope 1 on its own data (score equations)
    assert s.n_replicates == plain.shrinkage.n_replicates == 5

    monkeypatch.setattr(derive_module, "derive", _penalised(derive_module.derive))
    result = validate_internally(plain_study, cohort, n_boot=5, seed=6, progress=False)
    spread = result.penalty_spread
    expected = [0.01 * (1 + s % 97) for s in result.selection_seeds]
    assert spread.values == pytest.approx(expected, rel=1e-15)
    assert spread.apparent == pytest.approx(0.01 * (1 + plain_study.selection.seed % 97), rel=1e-15)
    assert spread.median == pytest.approx(float(np.median(expected)), rel=1e-12)
    assert (spread.lower, spread.upper) == pytest.approx(tuple(np.percentile(expected, [2.5, 97.5])), rel=1e-12)
    assert spread.n_replicates == 5
    frame = spread.to_frame()
    assert frame.shape == (1, 7) and frame["quantity"].iloc[0] == "penalty_alpha"
    assert list(result.spreads_frame()["quantity"]) == ["calibration_slope", "penalty_alpha"]
    record = result.to_dict()
    assert record["penalty_spread"]["median"] == pytest.approx(spread.median)
    assert json.dumps(record, allow_nan=False)
