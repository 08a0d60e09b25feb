"""Every error inside a replicate of the rule comparison and of the updating bootstrap is a counted failure.

An error is injected into one chosen replicate (a function the replicate
calls is replaced by one that raises for that replicate's resample only),
and the checks are invariants: the failure is listed with its stable
reason and message, the other replicates give bit for bit what they give
without the fault (recomputed one by one here, a slow obviously-correct
re-implementation of the pooling), the failed-share rule withholds what
rests on the replicates only above ``max_failed_share`` (at the boundary
the intervals are kept: "more than" the share, as in external
validation), and one and two worker processes agree bit for bit.
Percentiles are numpy 2.x ``percentile`` (linear interpolation) on the
recorded replicate values.  Data are invented: random probabilities and a
coarse rule for the comparison, the demo generator's fictional cohort for
updating.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import riskvet.validation.rule as rule_module
import riskvet.validation.update as update_module
from riskvet import demo
from riskvet.modelling import kernels
from riskvet.errors import RiskvetError
from riskvet.intake.design import build_design
from riskvet.measures.discrimination import dichotomise
from riskvet.modelling.fitter import fit_cumulative
from riskvet.modelling.modelfile import model_from_fit
from riskvet.validation.bootstrap import ReplicateFailure
from riskvet.validation.rule import compare_with_rule
from riskvet.validation.update import update_model

LEVELS = ["green", "amber", "red"]
THRESHOLDS = {0: (0.3, 0.5), 1: (0.1, 0.2)}
FAIL_AT = 3  # the replicate the faults below hit


def resample(n: int, seed: int, n_boot: int, replicate: int) -> np.ndarray:
    """Rows of replicate ``replicate``: stream i of SeedSequence(seed).spawn(n_boot), n draws with replacement."""
    stream = np.random.SeedSequence(seed).spawn(n_boot)[replicate]
    return np.random.default_rng(stream).integers(0, n, n)


# --------------------------------------------------------------------------
# The comparison with the rule
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def rule_data():
    """Invented data: an ordered outcome, model probabilities and a coarse rule (200 patients keep it fast)."""
    rng = np.random.default_rng(8)
    risk = rng.normal(size=200)
    y = np.digitize(risk + rng.logistic(size=200), [0.0, 1.5])
    cum = 1 / (1 + np.exp(-(np.array([0.0, 1.5])[None, :] - risk[:, None])))
    prob = np.column_stack([cum[:, 0], cum[:, 1] - cum[:, 0], 1 - cum[:, 1]])
    noisy = risk + rng.normal(scale=0.8, size=200)
    rule = np.where(noisy > 1.2, "red", np.where(noisy > 0.0, "amber", "green")).astype(object)
    return y, prob, rule


def compare(rule_data, **options):
    y, prob, rule = rule_data
    settings = dict(levels=LEVELS, positive_from="red", thresholds=THRESHOLDS, n_boot=10, seed=2)
    return compare_with_rule(y, prob, rule, **{**settings, **options})


def _concordance_failing_once(rule_data, *, n_boot: int, seed: int, error: BaseException):
    """concordance() that raises ``error`` on replicate FAIL_AT's first cut only (found by its resampled data)."""
    y, prob, _ = rule_data
    idx = resample(len(y), seed, n_boot, FAIL_AT)
    y_cut, p_cut = dichotomise(y[idx], prob[idx], cut=0)
    real = rule_module.concordance

    def fake(y_arg, score, *args, **kwargs):
        if np.array_equal(y_arg, y_cut) and np.array_equal(score, p_cut):
            raise error
        return real(y_arg, score, *args, **kwargs)

    return fake


def test_rule_replicate_error_is_counted_and_the_rest_used(rule_data, monkeypatch):
    clean = compare(rule_data)
    assert clean.failures == () and clean.n_failed == 0
    monkeypatch.setattr(rule_module, "concordance", _concordance_failing_once(rule_data, n_boot=10, seed=2, error=ZeroDivisionError("division by zero")))
    with pytest.warns(Warning, match="1 of 10 resamples could not be evaluated"):
        out = compare(rule_data)
    assert out.failures == (ReplicateFailure(FAIL_AT, "arithmetic error", "measuring the resample: division by zero"),)
    assert out.n_failed == 1 and out.failure_counts == {"arithmetic error": 1}
    # the other nine replicates are used unchanged, in order
    kept = [i for i in range(10) if i != FAIL_AT]
    np.testing.assert_array_equal(out.boot_c_difference, clean.boot_c_difference[kept])
    for j in THRESHOLDS:
        np.testing.assert_array_equal(out.boot_nb_difference[j], clean.boot_nb_difference[j][kept])
    tail = 100 * (1 - 0.95) / 2  # as the package computes it
    lo, hi = np.percentile(clean.boot_c_difference[kept], [tail, 100 - tail], axis=0)
    np.testing.assert_array_equal(out.concordance_table["boot_lower"], lo)
    np.testing.assert_array_equal(out.concordance_table["boot_upper"], hi)
    assert (out.concordance_table["n_boot_used"] == 9).all() and (out.net_benefit_table["n_boot_used"] == 9).all()
    # 1 of 10 is not more than the default 10%: the intervals are reported
    assert out.intervals_withheld == "" and out.max_failed_share == 0.1
    assert out.net_benefit_table["boot_lower"].notna().all()
    record = json.loads(json.dumps(out.to_dict(), allow_nan=False))
    assert record["failure_counts"] == {"arithmetic error": 1}
    assert record["failures"] == [{"replicate": FAIL_AT, "reason": "arithmetic error", "message": "measuring the resample: division by zero"}]
    frame = out.failure_frame()
    assert list(frame.columns) == ["cohort", "replicate", "reason", "message"] and frame["replicate"].tolist() == [FAIL_AT]


def test_rule_intervals_withheld_above_the_share(rule_data, monkeypatch):
    monkeypatch.setattr(rule_module, "concordance", _concordance_failing_once(rule_data, n_boot=10, seed=2, error=ZeroDivisionError("division by zero")))
    with pytest.warns(Warning, match="not reported"):
        out = compare(rule_data, max_failed_share=0.05)
    assert out.intervals_withheld.startswith("1 of 10 resamples could not be evaluated, more than the 5% allowed")
    for table in (out.concordance_table, out.net_benefit_table):
        assert table[["boot_lower", "boot_upper"]].isna().all().all()
    # DeLong's comparison does not rest on the replicates and stays
    assert out.concordance_table[["se", "lower", "upper", "pvalue"]].notna().all().all()
    assert out.boot_c_difference.shape == (9, 2)
    text = json.dumps(out.to_dict(), allow_nan=False)
    assert "more than the 5% allowed" in text
    with pytest.raises(RiskvetError, match="max_failed_share"):
        compare(rule_data, max_failed_share=1.5)
    with pytest.raises(RiskvetError, match="max_failed_share"):
        compare(rule_data, max_failed_share=True)


def test_rule_memory_errors_stop_the_run(rule_data, monkeypatch):
    monkeypatch.setattr(rule_module, "concordance", _concordance_failing_once(rule_data, n_boot=10, seed=2, error=MemoryError()))
    with pytest.raises(MemoryError):
        compare(rule_data)


class _RuleReplicateFailingOnce(rule_module._RuleReplicate):
    """The rule's replicate with a numerical error in replicate FAIL_AT; importable, so worker processes run it too."""

    def differences(self, stream):
        if stream.spawn_key[-1] == FAIL_AT:
            raise np.linalg.LinAlgError("Singular matrix\nsecond line not kept")
        return super().differences(stream)


def test_rule_failures_identical_for_one_and_two_workers(rule_data, monkeypatch):
    y, prob, rule = rule_data
    # one patient in the top level: resamples without them fail for real, besides the injected error
    rare = y.copy()
    top = np.flatnonzero(rare == 2)
    rare[top[1:]] = 1
    monkeypatch.setattr(rule_module, "_RuleReplicate", _RuleReplicateFailingOnce)
    runs = []
    for n_jobs in (1, 2):
        with pytest.warns(Warning, match="could not be evaluated"):
            runs.append(compare((rare, prob, rule), n_boot=12, seed=5, n_jobs=n_jobs, max_failed_share=1.0,
                                outcome_levels=["low", "mid", "high"]))
    one, two = runs
    assert ReplicateFailure(FAIL_AT, "numerical error", "measuring the resample: Singular matrix") in one.failures
    empty = [f for f in one.failures if f.reason == "empty outcome level"]
    assert empty, "the seed must give a resample without the top-level patient"
    assert empty[0].message.startswith("no one in outcome level(s) ['high'] of the resample; people by level {'low': ")
    assert json.dumps(one.to_dict(), sort_keys=True) == json.dumps(two.to_dict(), sort_keys=True)


# --------------------------------------------------------------------------
# The updating bootstrap
# --------------------------------------------------------------------------


def _codes(frame: pd.DataFrame) -> np.ndarray:
    return pd.Categorical(frame["disposition"], categories=demo.LEVELS).codes.astype(np.int64)


@pytest.fixture(scope="module")
def frozen():
    d = demo.draw(1500, season="derivation", seed=11)
    design = build_design(d, linear=["heart_rate", "confusion", "wbgt"], splines={"core_temp": 3}, categorical={})
    outcome = {"column": "disposition", "type": "ordinal", "levels": list(demo.LEVELS), "labels": {}}
    return model_from_fit(fit_cumulative(design.transform(d), _codes(d)), design, outcome=outcome, provenance={"note": "test"})


@pytest.fixture(scope="module")
def updating():
    v = demo.draw(300, season="validation", seed=9)
    return v, _codes(v)


def _revise_failing_once(updating, *, n_boot: int, seed: int):
    """revise() that divides by zero on replicate FAIL_AT's resample only."""
    v, y = updating
    y_fail = y[resample(len(y), seed, n_boot, FAIL_AT)]
    real = update_module.revise

    def fake(model, frame, y_arg, **kwargs):
        if np.array_equal(y_arg, y_fail):
            raise ZeroDivisionError("float division by zero")
        return real(model, frame, y_arg, **kwargs)

    return fake


def test_update_replicate_error_is_counted_and_the_rest_used(frozen, updating, monkeypatch):
    v, y = updating
    clean = update_model(frozen, v, y, n_boot=6, seed=4)
    monkeypatch.setattr(update_module, "revise", _revise_failing_once(updating, n_boot=6, seed=4))
    with pytest.warns(Warning, match="1 of 6 replicates could not be evaluated"):
        out = update_model(frozen, v, y, n_boot=6, seed=4, max_failed_share=0.2)
    perf = out.performance
    assert perf.failures == (ReplicateFailure(FAIL_AT, "arithmetic error", "refitting the updates: float division by zero"),)
    assert perf.n_failed == 1 and perf.failure_counts == {"arithmetic error": 1}
    assert sum(perf.replicate_choices.values()) == 5
    assert perf.correction_withheld == "" and perf.max_failed_share == 0.2
    # the correction is the mean optimism of the five other replicates, each recomputed on its own
    monkeypatch.undo()
    replicate = update_module._UpdateReplicate(frozen, v, y, {}, 0.05, "updating data")
    streams = np.random.SeedSequence(4).spawn(6)
    with kernels.compiled():  # as every resampling replicate runs (riskvet.modelling.kernels)
        others = [replicate(streams[i])["optimism"] for i in range(6) if i != FAIL_AT]
    rows = perf.table[perf.table["method"] == out.closed_test.chosen]
    assert rows["optimism"].notna().all()
    for row in rows.itertuples():
        key = row.measure if pd.isna(row.cut) else f"{row.measure}_cut{int(row.cut)}"
        assert row.optimism == float(np.nanmean([o[key] for o in others]))
    # apparent figures do not rest on the replicates and are unchanged
    np.testing.assert_array_equal(perf.table["apparent"], clean.performance.table["apparent"])
    record = json.loads(json.dumps(out.to_dict(), allow_nan=False))
    assert record["performance"]["failure_counts"] == {"arithmetic error": 1}
    assert record["performance"]["failures"][0]["replicate"] == FAIL_AT
    assert perf.failure_frame()["reason"].tolist() == ["arithmetic error"]


def test_update_correction_withheld_above_the_share(frozen, updating, monkeypatch):
    v, y = updating
    monkeypatch.setattr(update_module, "revise", _revise_failing_once(updating, n_boot=6, seed=4))
    with pytest.warns(Warning, match="not reported"):
        out = update_model(frozen, v, y, n_boot=6, seed=4)  # 1 of 6 is more than the default 10%
    perf = out.performance
    assert perf.correction_withheld.startswith("1 of 6 replicates could not be evaluated, more than the 10% allowed")
    assert perf.table[["optimism", "corrected"]].isna().all().all()
    assert perf.table["apparent"].notna().any()
    assert any("more than the 10% allowed" in w for w in out.warnings)
    json.dumps(out.to_dict(), allow_nan=False)
    with pytest.raises(RiskvetError, match="max_failed_share"):
        update_model(frozen, v, y, n_boot=6, seed=4, max_failed_share=-0.1)


def test_update_measure_undefined_too_often_loses_its_correction_alone(frozen, updating, monkeypatch):
    v, y = updating
    undefined_on = [y[resample(len(y), 4, 6, i)] for i in (1, 4)]  # the outcomes of replicates 1 and 4's resamples
    real = update_module._summary

    def fake(y_arg, prob):
        values = real(y_arg, prob)
        if any(np.array_equal(y_arg, y_b) for y_b in undefined_on):
            values = {**values, "ici_cut1": float("nan")}
        return values

    monkeypatch.setattr(update_module, "_summary", fake)
    with pytest.warns(Warning, match="ici_cut1"):
        out = update_model(frozen, v, y, n_boot=6, seed=4, max_failed_share=0.2)  # 2 of 6 is more than 1.2
    perf = out.performance
    assert perf.failures == () and perf.correction_withheld == ""
    assert set(perf.correction_notes) == {"ici_cut1"}
    assert perf.correction_notes["ici_cut1"].startswith("undefined in 2 of 6 resamples")
    rows = perf.table[perf.table["method"] == out.closed_test.chosen]
    ici1 = (rows["measure"] == "ici") & (rows["cut"] == 1)
    assert rows.loc[ici1, "optimism"].isna().all() and rows.loc[~ici1, "optimism"].notna().all()


class _UpdateReplicateFailingOnce(update_module._UpdateReplicate):
    """The updating replicate with a numerical error in replicate FAIL_AT; importable, so worker processes run it too."""

    def optimism(self, stream):
        if stream.spawn_key[-1] == FAIL_AT:
            raise np.linalg.LinAlgError("Singular matrix")
        return super().optimism(stream)


def test_update_failures_identical_for_one_and_two_workers(frozen, updating, monkeypatch):
    v, y = updating
    monkeypatch.setattr(update_module, "_UpdateReplicate", _UpdateReplicateFailingOnce)
    runs = []
    for n_jobs in (1, 2):
        with pytest.warns(Warning, match="could not be evaluated"):
            runs.append(update_model(frozen, v, y, n_boot=6, seed=4, n_jobs=n_jobs, max_failed_share=0.2))
    one, two = runs
    assert one.performance.failures == (ReplicateFailure(FAIL_AT, "numerical error", "resampling the updating data: Singular matrix"),)
    assert json.dumps(one.to_dict(), sort_keys=True) == json.dumps(two.to_dict(), sort_keys=True)
