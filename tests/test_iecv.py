"""Internal-external cross-validation: riskvet.validation.iecv and its stage's published sizes.

Checked here against outside references (each named where it is used):

* one cluster's measures (:func:`cluster_measures`) against scikit-learn's
  ``roc_auc_score``, DeLong's variance written out by hand, statsmodels GLM
  Binomial recalibration fits, the O/E ratio and net benefit by their
  definitions, and a nonparametric bootstrap of the net benefit;
* the ``min_events`` rule and the words of its reason (no small count);
* the pooled measures against :func:`riskvet.pooling.random_effects` applied
  by hand on the documented scales, and against statsmodels
  ``combine_effects`` (DerSimonian-Laird);
* determinism over workers and seeds, and that the cluster left out never
  takes part in the derivation that predicts it;
* the errors of the inputs;
* the disclosure control of the clusters' sizes (:func:`published_sizes`),
  checked by exact integer programming (scipy ``milp``), and of the stage's
  results file;
* the effect-spread diagnostic against statsmodels Logit fits.

Every data set here is invented test data drawn from a fixed seed.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import yaml
from scipy import optimize, special, stats
from sklearn.metrics import roc_auc_score
from statsmodels.stats.meta_analysis import combine_effects

import riskvet.validation.iecv as iecv
from riskvet.chain.scaffold import new_study_folder
from riskvet.chain.stages.internal_external import InternalExternalOutput, published_sizes
from riskvet.errors import DataError, StudyError
from riskvet.intake.data import load_cohorts
from riskvet.intake.study import load_study
from riskvet.pooling import random_effects
from riskvet.reporting.disclosure import SUPPRESSED
from riskvet.validation.iecv import (
    HeldOutCluster,
    InternalExternalValidation,
    cluster_measures,
    internal_external_validation,
)

# ----------------------------------------------------------------------------
# helpers: simulated clusters, small studies
# ----------------------------------------------------------------------------

BINARY = {"column": "outcome", "type": "binary", "levels": ["no", "yes"], "event": "yes"}
ORDINAL = {"column": "outcome", "type": "ordinal", "levels": ["low", "mid", "high"]}


def po_probabilities(lp: np.ndarray, cuts: np.ndarray) -> np.ndarray:
    """Level probabilities of a proportional-odds model: P(Y > j) = expit(lp - cuts[j])."""
    above = special.expit(lp[:, None] - cuts[None, :])  # n x (K-1), decreasing in j
    upper = np.column_stack([np.ones(lp.size), above])
    lower = np.column_stack([above, np.zeros(lp.size)])
    return upper - lower


def simulated_cluster(n: int, K: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(y, prob) of one cluster: predictions from a model that is miscalibrated for it (slope and offset off)."""
    rng = np.random.default_rng(seed)
    lp = rng.normal(0.0, 1.2, n)
    cuts = np.array([-0.3, 1.2])[: K - 1]
    prob = po_probabilities(lp, cuts)
    truth = po_probabilities(0.7 * lp + 0.25, cuts)
    u = rng.random(n)
    y = (u[:, None] > np.cumsum(truth, axis=1)[:, :-1]).sum(axis=1).astype(np.int64)
    return y, prob


def simulate_sites(G: int, m: int, *, beta1: np.ndarray, beta2: float, seed: int, shuffle: bool = True):
    """(frame of x1, x2; binary y; site labels) of G sites of m people, x1's effect beta1[g] in site g."""
    rng = np.random.default_rng(seed)
    g = np.repeat(np.arange(G), m)
    x1, x2 = rng.normal(size=G * m), rng.normal(size=G * m)
    shift = rng.normal(0.0, 0.3, G)[g]
    lp = -0.5 + beta1[g] * x1 + beta2 * x2 + shift
    y = (rng.random(G * m) < special.expit(lp)).astype(np.int64)
    site = np.array([f"site-{k}" for k in g], dtype=object)
    order = rng.permutation(G * m) if shuffle else np.arange(G * m)
    frame = pd.DataFrame({"x1": x1[order], "x2": x2[order]})
    return frame, y[order], site[order]


def write_study(folder: Path, name: str, frame: pd.DataFrame, y: np.ndarray, site, *, outcome: dict, thresholds: dict,
                cluster_kind: str = "site", internal_external: dict | None = None, model: dict | None = None):
    """A minimal study file and its data (x1, x2 linear, no selection) in ``folder``; the loaded Study."""
    folder.mkdir(parents=True, exist_ok=True)
    levels = outcome["levels"]
    data = frame.assign(site=list(site), outcome=[levels[k] for k in y])
    data.to_csv(folder / f"{name}.csv", index=False)
    study = {
        "study": {"name": name},
        "data": {"derivation": f"{name}.csv", "cluster_column": "site", "cluster_kind": cluster_kind},
        "outcome": outcome,
        "predictors": {"candidates": {c: "linear" for c in frame.columns}},
        "model": model or {},
        "selection": {"method": "none"},
        "internal_external": {"pooling": "reml", "min_events": 5, "seed": 13, **(internal_external or {})},
        "thresholds": thresholds,
        "output": {"min_cell_count": 1},
    }
    path = folder / f"{name}.yaml"
    path.write_text(yaml.safe_dump(study, sort_keys=False), encoding="utf-8")
    return load_study(path)


def demo_variant(folder: Path, name: str, **changes) -> Path:
    """The demo study file with 'section.key' set to a value."""
    raw = yaml.safe_load((folder / "study.yaml").read_text(encoding="utf-8"))
    for dotted, value in changes.items():
        section, key = dotted.split(".")
        raw.setdefault(section, {})[key] = value
    path = folder / f"{name}.yaml"
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    return path


def dumped(result) -> str:
    return json.dumps(result.to_dict(), sort_keys=True)


def rows_of(result: InternalExternalValidation, pooled) -> list:
    """The cluster rows that a pooled measure was pooled from (estimated or not)."""
    def same_threshold(a: float, b: float) -> bool:
        return (math.isnan(a) and math.isnan(b)) or (not math.isnan(a) and not math.isnan(b) and math.isclose(a, b))

    return [m for m in result.measures
            if m.measure == pooled.measure and m.cut == pooled.cut and same_threshold(m.threshold, pooled.threshold)]


def numbers_in(text: str) -> set[int]:
    return {int(x) for x in re.findall(r"(?<![\w.])\d+(?![\w.])", text)}


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("iecv-demo")
    new_study_folder(folder, n_derivation=600, n_validation=60, n_ratings=20, n_boot=5, missing_data="complete_case")
    return folder


@pytest.fixture(scope="module")
def demo_none(demo_folder):
    """The demo study (ordered outcome, tents as sites) without selection, and its derivation cohort."""
    study = load_study(demo_variant(demo_folder, "none", **{"selection.method": "none"}))
    return study, load_cohorts(study).derivation


@pytest.fixture(scope="module")
def demo_forward(demo_folder):
    """The demo study with its forward selection (the seed matters), and its derivation cohort."""
    study = load_study(demo_folder / "study.yaml")
    assert study.selection.method == "forward"
    return study, load_cohorts(study).derivation


@pytest.fixture(scope="module")
def demo_results(demo_none):
    study, cohort = demo_none
    return {method: internal_external_validation(study, cohort, method=method) for method in ("reml", "dl")}


@pytest.fixture(scope="module")
def varying_effect(tmp_path_factory):
    """Six sites of 300: x1's effect 0 in three and 2 in the other three, x2's effect 0.7 in all."""
    frame, y, site = simulate_sites(6, 300, beta1=np.array([0.0, 0.0, 0.0, 2.0, 2.0, 2.0]), beta2=0.7, seed=1)
    study = write_study(tmp_path_factory.mktemp("iecv-varying"), "varying", frame, y, site, outcome=BINARY,
                        thresholds={"yes": [0.2, 0.5]})
    cohort = load_cohorts(study).derivation
    return study, cohort, internal_external_validation(study, cohort, method="dl")


# ----------------------------------------------------------------------------
# 1. one cluster's measures against independent computations
# ----------------------------------------------------------------------------

THRESHOLDS = {0: (0.2, 0.5), 1: (0.1, 0.25)}


def delong_variance(event: np.ndarray, score: np.ndarray) -> float:
    """DeLong, DeLong & Clarke-Pearson (1988): var(C) = S10 / m + S01 / n from the placement values, by hand (O(mn))."""
    pos, neg = score[event], score[~event]
    psi = (pos[:, None] > neg[None, :]) + 0.5 * (pos[:, None] == neg[None, :])
    return float(psi.mean(axis=1).var(ddof=1) / pos.size + psi.mean(axis=0).var(ddof=1) / neg.size)


@pytest.mark.parametrize("K", [2, 3])
def test_cluster_measures_match_sklearn_statsmodels_and_the_definitions(K):
    y, prob = simulated_cluster(400, K, seed=10 + K)
    # a few risks exactly at a threshold: positive means p >= t (Vickers & Elkin 2006)
    if K == 2:
        prob[:7] = [0.8, 0.2]
    rows = cluster_measures("site A", y, prob, thresholds=THRESHOLDS, min_events=5)
    assert all(r.estimated for r in rows), [r.reason for r in rows if not r.estimated]
    z = stats.norm.ppf(0.975)
    for j in range(K - 1):
        event = y > j
        p = prob[:, j + 1:].sum(axis=1)
        n, observed = y.size, int(event.sum())
        mine = {(r.measure, r.threshold if r.measure == "net_benefit" else None): r for r in rows if r.cut == j}
        assert len(mine) == 4 + len(THRESHOLDS[j])

        # C: scikit-learn 1.9 roc_auc_score; its SE: DeLong's variance by hand
        c = mine[("c", None)]
        assert c.estimate == pytest.approx(roc_auc_score(event, p), abs=1e-12)
        assert c.se == pytest.approx(math.sqrt(delong_variance(event, p)), rel=1e-9)
        # its interval: Wald on the logit scale, back-transformed (Debray et al. 2017, common practice)
        centre, half = special.logit(c.estimate), z * c.se / (c.estimate * (1 - c.estimate))
        assert (c.lower, c.upper) == pytest.approx((special.expit(centre - half), special.expit(centre + half)), rel=1e-9)

        # calibration slope: statsmodels 0.15 GLM Binomial, logit(y) ~ 1 + logit(p)
        lp = special.logit(p)
        slope_fit = sm.GLM(event.astype(float), sm.add_constant(lp), family=sm.families.Binomial()).fit(tol=1e-12)
        slope = mine[("calibration_slope", None)]
        assert slope.estimate == pytest.approx(slope_fit.params[1], rel=1e-6)
        assert slope.se == pytest.approx(slope_fit.bse[1], rel=1e-6)
        assert abs(slope.estimate - 1.0) > 0.1  # the simulated predictions are miscalibrated, so this is not trivial
        # calibration-in-the-large: statsmodels 0.15 GLM Binomial, intercept only, offset logit(p)
        citl_fit = sm.GLM(event.astype(float), np.ones((n, 1)), family=sm.families.Binomial(), offset=lp).fit(tol=1e-12)
        citl = mine[("calibration_in_the_large", None)]
        assert citl.estimate == pytest.approx(citl_fit.params[0], rel=1e-6)
        assert citl.se == pytest.approx(citl_fit.bse[0], rel=1e-6)

        # O/E = sum(y) / sum(p); SE = O/E sqrt((1 - O/n) / O) (binomial, log scale; Debray et al. 2017)
        oe = mine[("oe_ratio", None)]
        ratio = observed / p.sum()
        assert oe.estimate == pytest.approx(ratio, rel=1e-12)
        assert oe.se == pytest.approx(ratio * math.sqrt((1 - observed / n) / observed), rel=1e-12)

        # net benefit = TP/n - FP/n t/(1-t) (Vickers & Elkin 2006), multinomial SE (common practice)
        for t in THRESHOLDS[j]:
            positive = p >= t
            a, b, w = np.sum(positive & event) / n, np.sum(positive & ~event) / n, t / (1 - t)
            nb = mine[("net_benefit", t)]
            assert nb.estimate == pytest.approx(a - w * b, abs=1e-12)
            assert nb.se == pytest.approx(math.sqrt((a * (1 - a) + w**2 * b * (1 - b) + 2 * w * a * b) / n), rel=1e-12)


def test_net_benefit_counts_a_risk_equal_to_the_threshold_as_positive():
    # Vickers & Elkin (2006): treat when the risk is at or above the threshold.
    y = np.array([1, 1, 0, 0, 1, 0, 1, 0, 0, 1] * 3)
    p = np.where(np.arange(30) < 10, 0.2, np.where(y == 1, 0.6, 0.05))
    rows = cluster_measures("s", y, np.column_stack([1 - p, p]), thresholds={0: (0.2,)}, min_events=1)
    nb = next(r for r in rows if r.measure == "net_benefit")
    tp, fp = np.sum((p >= 0.2) & (y == 1)), np.sum((p >= 0.2) & (y == 0))
    assert nb.estimate == pytest.approx(tp / 30 - fp / 30 * 0.25, abs=1e-12)
    assert fp == 5 and tp == 15  # the five non-events and five events at exactly 0.2 are counted positive
    strict = np.sum((p > 0.2) & (y == 1)) / 30 - np.sum((p > 0.2) & (y == 0)) / 30 * 0.25
    assert abs(nb.estimate - strict) > 0.01


@pytest.mark.parametrize("t", [0.2, 0.5])
def test_net_benefit_se_agrees_with_a_nonparametric_bootstrap(t):
    # Efron & Tibshirani (1993): the SD of 2000 bootstrap replicates of the cluster's net benefit.
    # Monte Carlo error of an SD from B replicates is about 1/sqrt(2B), 1.6% here: 10% is ample.
    y, prob = simulated_cluster(400, 2, seed=7)
    rows = cluster_measures("s", y, prob, thresholds={0: (t,)}, min_events=5)
    nb = next(r for r in rows if r.measure == "net_benefit")
    rng = np.random.default_rng(2024)
    idx = rng.integers(0, y.size, size=(2000, y.size))
    event, positive = (y == 1)[idx], (prob[:, 1] >= t)[idx]
    boot = np.mean(positive & event, axis=1) - np.mean(positive & ~event, axis=1) * t / (1 - t)
    assert nb.se == pytest.approx(float(np.std(boot, ddof=1)), rel=0.10)


# ----------------------------------------------------------------------------
# 2. min_events: the cut's measures left out, with a reason that names the rule and not the count
# ----------------------------------------------------------------------------


@pytest.mark.parametrize("side", ["events", "non-events"])
def test_too_few_people_on_one_side_of_a_cut_leaves_every_measure_at_it_out_without_the_count(side):
    y, prob = simulated_cluster(300, 3, seed=3)
    top = np.flatnonzero(y == 2)
    if side == "events":  # 3 people above cut 1
        y[top[3:]] = 1
    else:  # 3 people at or below cut 1 (flip the others to the top level)
        y[np.flatnonzero(y < 2)[3:]] = 2
    assert min(np.sum(y > 1), np.sum(y <= 1)) == 3
    rows = cluster_measures("site B", y, prob, thresholds=THRESHOLDS, min_events=17)
    cut1 = [r for r in rows if r.cut == 1]
    assert {r.measure for r in cut1} == set(iecv.MEASURES)
    assert len(cut1) == 4 + len(THRESHOLDS[1])
    for r in cut1:
        assert not r.estimated and math.isnan(r.estimate) and math.isnan(r.se) and math.isnan(r.lower)
        assert "internal_external.min_events" in r.reason
        assert numbers_in(r.reason) == {17}  # the rule's number only: never the small count (3) itself
    if side == "events":  # cut 0 has enough on both sides: estimated
        assert all(r.estimated for r in rows if r.cut == 0)


def test_a_cut_with_exactly_min_events_people_on_a_side_is_estimated():
    # "fewer than min_events" leaves out; min_events itself is enough (the documented rule)
    y, prob = simulated_cluster(300, 2, seed=4)
    y[np.flatnonzero(y == 1)[9:]] = 0
    assert np.sum(y == 1) == 9
    assert all(r.estimated for r in cluster_measures("s", y, prob, thresholds={0: (0.2,)}, min_events=9))
    assert not any(r.estimated for r in cluster_measures("s", y, prob, thresholds={0: (0.2,)}, min_events=10))


def test_clusters_left_out_of_the_pooling_are_exactly_the_small_ones(demo_results):
    result = demo_results["reml"]
    small_side = {}
    for c in result.clusters:
        counts = [c.level_counts[lv] for lv in result.levels]
        small_side[c.label] = [min(sum(counts[j + 1:]), sum(counts[: j + 1])) for j in range(len(counts) - 1)]
    for m in result.measures:
        too_small = small_side[m.cluster][m.cut] < result.min_events
        if too_small:
            assert not m.estimated and "internal_external.min_events" in m.reason
            assert str(small_side[m.cluster][m.cut]) not in re.findall(r"\d+", m.reason)
        else:
            assert "min_events" not in m.reason
    assert any(not m.estimated for m in result.measures), "the demo is expected to have one small tent at the top cut"


# ----------------------------------------------------------------------------
# 3. pooling: random_effects by hand on the documented scales; statsmodels combine_effects
# ----------------------------------------------------------------------------


@pytest.mark.parametrize("method", ["reml", "dl"])
def test_pooled_measures_equal_random_effects_by_hand(demo_results, method):
    result = demo_results[method]
    assert result.method == method
    back = {"logit": special.expit, "log": np.exp, "identity": lambda x: x}
    checked = set()
    for p in result.pooled:
        rows = rows_of(result, p)
        used = [r for r in rows if r.estimated]
        assert p.n_clusters == len(used)
        assert [c for c, _ in p.left_out] == [r.cluster for r in rows if not r.estimated]
        if len(used) < 2:
            assert p.reason and math.isnan(p.estimate)
            continue
        est, se = np.array([r.estimate for r in used]), np.array([r.se for r in used])
        if p.measure == "c":  # logit(C), delta-method variance se^2 / (C(1-C))^2 (Debray et al. 2017)
            assert p.scale == "logit"
            y, v = np.log(est / (1 - est)), se**2 / (est * (1 - est)) ** 2
        elif p.measure == "oe_ratio":  # log(O/E), variance se^2 / (O/E)^2
            assert p.scale == "log"
            y, v = np.log(est), se**2 / est**2
        else:
            assert p.scale == "identity"
            y, v = est, se**2
        ref = random_effects(y, v, method=method, hartung_knapp=result.hartung_knapp, confidence=result.confidence)
        f = back[p.scale]
        assert p.estimate == pytest.approx(f(ref.estimate), rel=1e-9, abs=1e-12)
        assert (p.lower, p.upper) == pytest.approx((f(ref.lower), f(ref.upper)), rel=1e-9, abs=1e-12)
        assert (p.prediction_lower, p.prediction_upper) == pytest.approx(
            (f(ref.prediction_lower), f(ref.prediction_upper)), rel=1e-9, abs=1e-12)
        assert p.tau2 == pytest.approx(ref.tau2, rel=1e-7, abs=1e-12)
        assert p.i2 == pytest.approx(ref.i2, rel=1e-9, abs=1e-12)
        checked.add(p.measure)
    assert checked == set(iecv.MEASURES)


def _check_c_against_combine_effects(result) -> int:
    """Pooled C (DL) against statsmodels 0.15 combine_effects(method_re="dl") on logit(C); returns cuts with Q > k - 1."""
    heterogeneous = 0
    for p in (p for p in result.pooled if p.measure == "c"):
        used = [r for r in rows_of(result, p) if r.estimated]
        c, se = np.array([r.estimate for r in used]), np.array([r.se for r in used])
        ref = combine_effects(special.logit(c), se**2 / (c * (1 - c)) ** 2, method_re="dl")
        # statsmodels does not truncate the DL tau^2 at 0; truncated at 0, the random-effects mean is the
        # fixed-effect one, so compare with mean_effect_fe then (DerSimonian & Laird 1986)
        if ref.q > len(c) - 1:
            heterogeneous += 1
            mean = ref.mean_effect_re
            assert p.tau2 == pytest.approx(ref.tau2, rel=1e-8)
        else:
            mean = ref.mean_effect_fe
            assert p.tau2 == 0.0
        assert p.estimate == pytest.approx(special.expit(mean), abs=1e-8)
    return heterogeneous


def test_pooled_c_matches_statsmodels_combine_effects_dl(demo_results, varying_effect):
    _check_c_against_combine_effects(demo_results["dl"])
    # the varying-effect sites differ in C: the untruncated branch is compared there
    assert _check_c_against_combine_effects(varying_effect[2]) == 1


# ----------------------------------------------------------------------------
# 4. determinism
# ----------------------------------------------------------------------------


def test_same_result_with_one_and_two_workers(demo_forward):
    study, cohort = demo_forward
    one = internal_external_validation(study, cohort, n_jobs=1, seed=21)
    two = internal_external_validation(study, cohort, n_jobs=2, seed=21)
    assert dumped(one) == dumped(two)


def test_same_seed_twice_gives_the_same_result(demo_forward):
    study, cohort = demo_forward
    first = internal_external_validation(study, cohort, seed=5)
    assert dumped(first) == dumped(internal_external_validation(study, cohort, seed=5))
    # and the seed does reach the selection (forward, by k-fold CV): another seed selects other terms somewhere
    other = internal_external_validation(study, cohort, seed=6)
    assert [c.terms for c in first.clusters] != [c.terms for c in other.clusters]


def test_without_selection_the_seed_changes_nothing(demo_results, demo_none):
    # the seed feeds only the selection streams: with selection method none, another seed gives the same result
    study, cohort = demo_none
    other = internal_external_validation(study, cohort, seed=987, method="reml").to_dict()
    same = demo_results["reml"].to_dict()
    assert other.pop("seed") == 987 and same.pop("seed") == study.internal_external.seed
    assert json.dumps(other, sort_keys=True) == json.dumps(same, sort_keys=True)


# ----------------------------------------------------------------------------
# 5. the cluster left out never takes part in the derivation that predicts it
# ----------------------------------------------------------------------------


def test_the_left_out_cluster_is_never_in_the_training_data(varying_effect, monkeypatch):
    study, _, _ = varying_effect
    # rows of the clusters scattered (not contiguous), and x1 unique per row: it identifies each row
    frame, y, site = simulate_sites(5, 80, beta1=np.full(5, 1.0), beta2=0.5, seed=8)
    assert frame["x1"].is_unique
    row_of = {v: i for i, v in enumerate(frame["x1"].to_numpy())}
    calls = []
    original = iecv._fit_and_predict

    def recording(study_, frame_fit, y_fit, frame_new, seed, K, **kwargs):
        out = original(study_, frame_fit, y_fit, frame_new, seed, K, **kwargs)
        calls.append(dict(train=frame_fit.copy(), y_train=np.array(y_fit), test=frame_new.copy(), seed=seed,
                          clusters=np.array(kwargs["clusters"]), prob=out[1]))
        return out

    monkeypatch.setattr(iecv, "_fit_and_predict", recording)
    result = internal_external_validation(study, (frame, y), clusters=site, seed=77)
    labels = list(dict.fromkeys(site.tolist()))  # order of first appearance
    assert [c.label for c in result.clusters] == labels and len(calls) == len(labels)
    streams = np.random.SeedSequence(77).spawn(len(labels))
    for g, (label, call) in enumerate(zip(labels, calls)):
        test_rows = [row_of[v] for v in call["test"]["x1"]]
        train_rows = [row_of[v] for v in call["train"]["x1"]]
        assert test_rows == np.flatnonzero(site == label).tolist()  # exactly the cluster, in row order
        assert sorted(train_rows) == np.flatnonzero(site != label).tolist()  # exactly all the others
        assert not set(test_rows) & set(train_rows)
        assert np.array_equal(call["y_train"], y[train_rows])
        assert len(np.unique(call["clusters"])) == len(labels) - 1
        assert call["test"]["x2"].tolist() == frame["x2"].to_numpy()[test_rows].tolist()
        # the documented selection stream: stream g of SeedSequence(seed).spawn(G) (module docstring)
        assert call["seed"] == int(np.random.default_rng(streams[g]).integers(0, 2**31 - 1))
        # the cluster's C is of these predictions and these people (scikit-learn 1.9 roc_auc_score)
        c = next(m for m in result.measures if m.cluster == label and m.measure == "c")
        assert c.estimate == pytest.approx(roc_auc_score(y[test_rows], call["prob"][:, 1]), abs=1e-12)
        held = result.clusters[g]
        assert held.n == len(test_rows) and held.n_training == len(train_rows)
    assert len({c["seed"] for c in calls}) == len(labels)


def test_frequency_weights_equal_the_rows_written_out(varying_effect):
    # a row of weight w stands for w identical people (data.weight_column): the same validation as the rows repeated
    study, _, _ = varying_effect
    frame, y, site = simulate_sites(4, 60, beta1=np.full(4, 1.0), beta2=0.5, seed=9)
    w = np.random.default_rng(1).integers(0, 4, size=y.size)
    w[[np.flatnonzero(site == s)[0] for s in np.unique(site)]] = 1  # no cluster without people
    weighted = internal_external_validation(study, (frame, y), clusters=site, weights=w)
    rows = np.repeat(np.arange(y.size), w)
    written = internal_external_validation(study, (frame.iloc[rows].reset_index(drop=True), y[rows]), clusters=site[rows])
    assert [c.to_dict() for c in weighted.clusters] == [c.to_dict() for c in written.clusters]
    a, b = weighted.to_frame(), written.to_frame()
    numeric = ["estimate", "lower", "upper", "prediction_lower", "prediction_upper", "tau2", "i2"]
    assert a.drop(columns=numeric).equals(b.drop(columns=numeric))
    np.testing.assert_allclose(a[numeric].to_numpy(float), b[numeric].to_numpy(float), rtol=1e-6, atol=1e-9)


# ----------------------------------------------------------------------------
# 6. errors
# ----------------------------------------------------------------------------


def test_fewer_than_three_clusters_is_a_data_error(varying_effect):
    study, cohort, _ = varying_effect
    two = np.where(np.arange(len(cohort.y)) % 2 == 0, "north", "south")
    with pytest.raises(DataError, match="at least 3 clusters"):
        internal_external_validation(study, (cohort.frame, cohort.y), clusters=two)


def test_no_clusters_is_a_data_error(varying_effect):
    study, cohort, _ = varying_effect
    with pytest.raises(DataError, match=r"clusters=.*the cluster of every row"):
        internal_external_validation(study, (cohort.frame, cohort.y))
    with pytest.raises(DataError, match="one per row"):
        internal_external_validation(study, (cohort.frame, cohort.y), clusters=["a", "b", "c"])


def test_person_clusters_are_refused(tmp_path):
    frame, y, site = simulate_sites(4, 40, beta1=np.full(4, 1.0), beta2=0.5, seed=2)
    # the study file: internal_external enabled with person clusters does not load
    with pytest.raises(StudyError, match="cluster_kind is 'person'"):
        write_study(tmp_path / "a", "person", frame, y, site, outcome=BINARY, thresholds={"yes": [0.2]}, cluster_kind="person")
    # with the section disabled the study loads, and the function itself refuses the person clusters
    study = write_study(tmp_path / "b", "person", frame, y, site, outcome=BINARY, thresholds={"yes": [0.2]},
                        cluster_kind="person", internal_external={"enabled": False})
    cohort = load_cohorts(study).derivation
    assert cohort.cluster_kind == "person"
    with pytest.raises(StudyError, match="data.cluster_kind") as caught:
        internal_external_validation(study, cohort)
    assert "site-" not in str(caught.value)  # a person's cluster labels are private: none in the message


# ----------------------------------------------------------------------------
# 7. disclosure: the clusters' sizes as published
# ----------------------------------------------------------------------------


def fake_result(table: np.ndarray, status: list[str] | None = None) -> InternalExternalValidation:
    """A result holding only the clusters' level counts (all published_sizes reads)."""
    levels = tuple(f"level{k}" for k in range(table.shape[1]))
    total = int(table.sum())
    clusters = tuple(
        HeldOutCluster(label=f"c{g}", n=int(row.sum()), level_counts={lv: int(v) for lv, v in zip(levels, row)},
                       n_training=total - int(row.sum()), status="ok" if status is None else status[g])
        for g, row in enumerate(table))
    return InternalExternalValidation(clusters=clusters, measures=(), pooled=(), effects=None, levels=levels, cluster_column="site",
                                      cluster_kind="site", method="reml", hartung_knapp=False, min_events=5, confidence=0.95, seed=13)


def published_grid(table: np.ndarray, m: int) -> tuple[np.ndarray, np.ndarray]:
    """(full G x (K+1) table with the row totals, mask of what is shown) of published_sizes."""
    sizes = published_sizes(fake_result(table), min_cell_count=m)
    columns = [f"people, level{k}" for k in range(table.shape[1])] + ["people, all"]
    full = np.column_stack([table, table.sum(axis=1)])
    shown = np.array([[v != SUPPRESSED for v in sizes[c]] for c in columns]).T
    values = np.array([[v for v in sizes[c]] for c in columns], dtype=object).T
    assert all(values[shown].astype(int) == full[shown])
    return full, shown


def random_tables(n: int, seed: int):
    rng = np.random.default_rng(seed)
    for _ in range(n):
        G, K = int(rng.integers(3, 9)), int(rng.integers(2, 4))
        yield rng.poisson(rng.choice([2, 6, 20, 60], size=(G, K))), int(rng.choice([3, 5, 10]))


def test_published_sizes_hide_small_counts_and_every_single_hidden_cell_of_a_line():
    # Complementary cell suppression (Hundepool et al., Statistical Disclosure Control, 2012, ch. 4; common
    # practice): counts 1..m-1 hidden, nothing shown below m except 0, and no row (levels and total) or column
    # (clusters and the level's total, published on the derivation page) with exactly one hidden count.
    for table, m in random_tables(300, seed=0):
        full, shown = published_grid(table, m)
        small = (full > 0) & (full < m)
        assert not (shown & small).any()
        assert all(v == 0 or v >= m for v in full[shown])
        for g in range(full.shape[0]):
            assert np.sum(~shown[g]) != 1, (full, shown)
        for j in range(full.shape[1]):  # the column's total is shown (elsewhere), so one hidden cell is recoverable
            assert np.sum(~shown[:, j]) != 1, (full, shown)


def exactly_recoverable(full: np.ndarray, shown: np.ndarray) -> list[tuple[int, int]]:
    """Hidden cells whose value follows from the shown ones, the rows' and columns' totals and counts being whole numbers >= 0.

    For each hidden cell, its least and greatest value under those constraints by integer programming
    (scipy 1.17 optimize.milp); equal bounds mean the cell is disclosed (an attacker's exact interval).
    """
    G, K1 = full.shape
    hidden = [(g, j) for g in range(G) for j in range(K1) if not shown[g, j]]
    index = {c: i for i, c in enumerate(hidden)}
    A, b = [], []
    for g in range(G):  # levels of a row add up to its total
        row, rhs = np.zeros(len(hidden)), 0.0
        for j in range(K1):
            sign = 1.0 if j < K1 - 1 else -1.0
            if (g, j) in index:
                row[index[(g, j)]] += sign
            else:
                rhs -= sign * full[g, j]
        A.append(row)
        b.append(rhs)
    for j in range(K1):  # clusters add up to the level's total (published on the derivation page)
        row, rhs = np.zeros(len(hidden)), float(full[:, j].sum())
        for g in range(G):
            if (g, j) in index:
                row[index[(g, j)]] += 1.0
            else:
                rhs -= full[g, j]
        A.append(row)
        b.append(rhs)
    constraint = optimize.LinearConstraint(np.array(A), np.array(b), np.array(b))
    out = []
    for cell, i in index.items():
        bounds = []
        for sign in (1.0, -1.0):
            objective = np.zeros(len(hidden))
            objective[i] = sign
            res = optimize.milp(objective, constraints=constraint, integrality=np.ones(len(hidden)), bounds=optimize.Bounds(0, np.inf))
            assert res.success, res.message
            bounds.append(sign * res.fun)
        if abs(bounds[0] - bounds[1]) < 0.5:
            out.append(cell)
    return out


def test_published_sizes_no_small_count_can_be_worked_out_exactly():
    # A stronger attack than one line at a time: all the lines together, and counts being whole numbers >= 0.
    # The table below was found by a random search of tables like random_tables': cluster c0 has 3 people at level2,
    # suppressed, but c1's hidden level0 and level2 are both 0 (hidden as complements), so row c1's hidden
    # cells add up to 0, both are 0, and c0's 3 follows from the level2 column.
    table = np.array([[0, 18, 3], [0, 6, 0], [3, 22, 58], [1, 5, 18], [3, 5, 9], [2, 10, 16]])
    full, shown = published_grid(table, 5)
    leaked = [cell for cell in exactly_recoverable(full, shown) if 0 < full[cell] < 5]
    assert leaked == [], f"small counts recoverable exactly: {[(c, int(full[c])) for c in leaked]}\n{full}\n{shown.astype(int)}"


def test_published_sizes_of_the_demo_show_no_count_below_min_cell_count(demo_results):
    result = demo_results["reml"]
    sizes = published_sizes(result, min_cell_count=25)
    shown = [v for c in sizes.columns if c.startswith("people, ") for v in sizes[c] if v != SUPPRESSED]
    assert all(v == 0 or v >= 25 for v in shown)
    assert any(v == SUPPRESSED for c in sizes.columns for v in sizes[c])  # the demo has tents with fewer than 25 at a level
    everything = published_sizes(result, min_cell_count=1)  # min_cell_count 1: nothing to hide
    assert not any(v == SUPPRESSED for c in everything.columns for v in everything[c])
    assert everything["people, all"].tolist() == [c.n for c in result.clusters]


def test_results_file_does_not_reveal_a_suppressed_count_of_a_failed_cluster(tmp_path):
    # A cluster holding every person of the top level: the derivation without it fails (empty outcome level).
    # Its suppressed counts must not follow from anything the results file states, together with the level
    # totals the derivation page publishes (the premise of published_sizes' suppression).
    rng = np.random.default_rng(3)
    G, m = 5, 120
    site = np.repeat([f"s{g}" for g in range(G)], m)
    frame = pd.DataFrame({"x1": rng.normal(size=G * m), "x2": rng.normal(size=G * m)})
    y = np.digitize(frame["x1"] + 0.5 * frame["x2"] + rng.logistic(size=G * m), [0.0, 1.5]).astype(np.int64)
    y[(site != "s0") & (y == 2)] = 1
    s0 = np.flatnonzero(site == "s0")
    y[s0] = np.where(y[s0] == 2, 2, 0)
    y[s0[:3]] = 1  # s0: 3 people at mid, a count to suppress
    study = write_study(tmp_path, "failed", frame, y, site, outcome=ORDINAL, thresholds={"mid": [0.3], "high": [0.1]})
    result = internal_external_validation(study, (frame, y), clusters=site, min_events=5)
    assert result.clusters[0].status == "failed" and result.clusters[0].reason == "empty outcome level"
    out = InternalExternalOutput(result=result, sizes=published_sizes(result, min_cell_count=5), min_events=5)
    entry = out.to_dict()["internal_external"]["clusters"][0]
    assert entry["level_counts"]["mid"] == SUPPRESSED
    level_total = int(np.sum(y == 1))
    stated = numbers_in(json.dumps(entry))
    # neither the count nor the level total minus it (the others' people at that level) may be stated
    assert 3 not in stated and level_total - 3 not in stated, json.dumps(entry)


# ----------------------------------------------------------------------------
# 8. the effect-spread diagnostic
# ----------------------------------------------------------------------------


def statsmodels_effect_fits(frame: pd.DataFrame, y: np.ndarray, site: np.ndarray, term: str):
    """statsmodels 0.15 Logit: site shifts and a common effect of ``term``, and the same with ``term`` per site."""
    labels = list(dict.fromkeys(site.tolist()))
    dummies = pd.DataFrame({f"d{g}": (site == s).astype(float) for g, s in enumerate(labels) if g > 0})
    common = sm.add_constant(pd.concat([frame, dummies], axis=1))
    per_site = pd.DataFrame({f"{term}@{s}": np.where(site == s, frame[term], 0.0) for s in labels})
    varying = sm.add_constant(pd.concat([frame.drop(columns=[term]), dummies, per_site], axis=1))
    fit0 = sm.Logit(y, common).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
    fit1 = sm.Logit(y, varying).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
    return fit0, fit1, labels


def test_effect_spread_flags_an_effect_that_differs_between_clusters(varying_effect):
    study, cohort, result = varying_effect
    table = result.effects.pooled.set_index("term")
    assert table.loc["x1", "lr_p"] < 0.01
    assert table.loc["x1", "tau"] > 0.3
    frame = cohort.frame[["x1", "x2"]].reset_index(drop=True)
    site = np.asarray(cohort.clusters, dtype=object)
    fit0, fit1, labels = statsmodels_effect_fits(frame, cohort.y, site, "x1")
    # the likelihood-ratio statistic and its df: statsmodels 0.15 Logit log-likelihoods
    assert table.loc["x1", "lr_statistic"] == pytest.approx(2 * (fit1.llf - fit0.llf), rel=1e-6)
    assert table.loc["x1", "lr_df"] == len(labels) - 1
    assert table.loc["x1", "lr_p"] == pytest.approx(stats.chi2.sf(2 * (fit1.llf - fit0.llf), len(labels) - 1), rel=1e-5)
    per = result.effects.per_cluster.query("term == 'x1'").set_index("cluster")
    for s in labels:
        assert per.loc[s, "estimate"] == pytest.approx(fit1.params[f"x1@{s}"], rel=1e-6, abs=1e-8)
        assert per.loc[s, "se"] == pytest.approx(fit1.bse[f"x1@{s}"], rel=1e-5)
    # the coefficient on all data is the plain logistic regression's (statsmodels 0.15 Logit, no site shifts)
    plain = sm.Logit(cohort.y, sm.add_constant(frame)).fit(disp=0, method="newton", tol=1e-12)
    assert result.effects.on_all_data["x1"] == pytest.approx(plain.params["x1"], rel=1e-6)


def test_effect_spread_does_not_flag_a_common_effect_in_one_seed(tmp_path):
    # One seed only: under a common effect the test's p is uniform, so p > 0.05 holds in 95% of seeds, not all.
    frame, y, site = simulate_sites(6, 300, beta1=np.full(6, 1.0), beta2=0.7, seed=5)
    study = write_study(tmp_path, "common", frame, y, site, outcome=BINARY, thresholds={"yes": [0.2]})
    result = internal_external_validation(study, load_cohorts(study).derivation)
    table = result.effects.pooled.set_index("term")
    assert table.loc["x1", "lr_p"] > 0.05 and table.loc["x2", "lr_p"] > 0.05


def test_a_model_with_a_slope_per_cut_is_validated_without_per_cluster_effects(tmp_path):
    # EffectSpread documents NaN coefficients and no per-cluster rows for a model with a slope per cut
    # (model.proportional: false); the likelihood-ratio test of a common effect is still computed.
    rng = np.random.default_rng(6)
    frame = pd.DataFrame({"x1": rng.normal(size=600), "x2": rng.normal(size=600)})
    site = np.repeat([f"s{g}" for g in range(4)], 150)
    y = np.digitize(frame["x1"] + 0.5 * frame["x2"] + rng.logistic(size=600), [-0.5, 1.0]).astype(np.int64)
    study = write_study(tmp_path, "slopes", frame, y, site, outcome=ORDINAL, thresholds={"mid": [0.3], "high": [0.1]},
                        model={"proportional": False})
    result = internal_external_validation(study, (frame, y), clusters=site)
    assert result.effects is not None and result.effects.per_cluster.empty
    assert all(math.isnan(v) for v in result.effects.on_all_data.values())
    assert np.isfinite(result.effects.pooled["lr_p"].astype(float)).all()
