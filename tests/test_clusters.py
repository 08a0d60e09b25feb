"""Tests of the cluster column: cluster bootstrap, whole-cluster folds, study and data checks.

A cluster (``data.cluster_column``: a site, a period, a person with several
rows) is resampled and split whole.  Checked here: the replicates of
:func:`cluster_bootstrap_indices` hold whole clusters and follow their
documented streams; with one row per cluster they are the row bootstrap's;
:func:`validate_internally` and :func:`cross_validate` use those draws and
folds; :func:`cluster_folds` deals whole, balanced clusters; the study file's
cross-checks and the data checks refuse what cannot work; a person's cluster
label stays private in the data audit.

Outside facts: the cluster bootstrap resamples the independent units, the
clusters, each with all its rows (Davison & Hinkley 1997, section 3.8; Field
& Welsh 2007); grouped cross-validation keeps every cluster in one fold
(common practice); internal-external cross-validation leaves out one site or
period at a time (Royston, Parmar & Sylvester 2004; Steyerberg & Harrell
2016).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

import riskvet.validation.crossval as crossval
from riskvet import demo
from riskvet.chain.scaffold import new_study_folder
from riskvet.errors import DataError, DesignError, RiskvetError, StudyError
from riskvet.intake.data import load_cohorts
from riskvet.intake.outcome import outcome_codes
from riskvet.intake.study import load_study
from riskvet.measures.summary import performance_summary
from riskvet.modelling.derive import derive
from riskvet.modelling.folds import cluster_codes, cluster_folds
from riskvet.modelling.selection import select_terms
from riskvet.validation.bootstrap import bootstrap_indices, cluster_bootstrap_indices, validate_internally
from riskvet.validation.crossval import cross_validate

PREDICTORS = ["age", "core_temp", "heart_rate", "resp_rate", "wbgt"]

# keys of InternalValidation.to_dict that record the resampling unit, not a result
UNIT_KEYS = ("resampled", "n_clusters", "cluster_kind")


# --------------------------------------------------------------------------
# Helpers: cluster layouts, a small study, a small sample
# --------------------------------------------------------------------------


def layout(G: int, max_size: int, *, seed: int, kind: str = "int") -> np.ndarray:
    """Labels of G clusters of random sizes 1..max_size, rows of a cluster scattered in random order.

    ``kind``: ``int`` (arbitrary, non-contiguous integers), ``str`` (text labels).
    """
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, max_size + 1, size=G)
    names = (rng.permutation(G) * 7 + 1000) if kind == "int" else np.array([f"site-{chr(122 - g % 26)}{g}" for g in rng.permutation(G)], dtype=object)
    labels = np.repeat(names, sizes)
    return labels[rng.permutation(labels.size)]


def unequal_clusters(n: int, G: int, *, seed: int) -> np.ndarray:
    """n labels ``c00``..``c{G-1}`` in G clusters of clearly unequal sizes, rows in random order."""
    rng = np.random.default_rng(seed)
    share = rng.uniform(0.3, 3.0, size=G)
    sizes = np.maximum(1, np.floor(share / share.sum() * n).astype(int))
    sizes[-1] += n - sizes.sum()
    assert sizes.min() >= 1 and sizes.sum() == n and len(set(sizes.tolist())) > 1
    labels = np.repeat(np.array([f"c{g:02d}" for g in range(G)], dtype=object), sizes)
    return labels[rng.permutation(n)]


LAYOUTS = {
    "one cluster": layout(1, 9, seed=1),
    "7 int clusters": layout(7, 12, seed=2),
    "20 str clusters": layout(20, 30, seed=3, kind="str"),
    "45 small int clusters": layout(45, 4, seed=4),
    "sorted str clusters": np.sort(layout(12, 10, seed=5, kind="str")),
}


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("clusters")
    new_study_folder(path, n_derivation=300, n_validation=60, n_ratings=20, n_boot=5, missing_data="complete_case")
    return path


def study_variant(folder: Path, name: str, **changes) -> Path:
    """The small study (five linear predictors, no selection) with ``changes``: 'section.key' or 'section' to a value."""
    raw = yaml.safe_load((folder / "study.yaml").read_text(encoding="utf-8"))
    raw["selection"]["method"] = "none"
    raw["predictors"] = {"candidates": {p: "linear" for p in PREDICTORS}}
    # start without the demo's tents: each test says which clusters it wants
    raw["data"].pop("cluster_column", None)
    raw["data"].pop("cluster_kind", None)
    raw.pop("internal_external", None)
    for dotted, value in changes.items():
        if "." in dotted:
            section, key = dotted.split(".")
            raw.setdefault(section, {})[key] = value
        else:
            raw[dotted] = value
    path = folder / f"{name}.yaml"
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    return path


def data_with_column(folder: Path, name: str, column: str, labels) -> str:
    """A copy of the derivation file with a column of ``labels`` added; its path relative to the study folder."""
    frame = pd.read_csv(folder / "data" / "derivation.csv", dtype=str, keep_default_na=False)
    frame[column] = list(labels)
    frame.to_csv(folder / "data" / f"{name}.csv", index=False)
    return f"data/{name}.csv"


@pytest.fixture(scope="module")
def small_study(folder):
    return load_study(study_variant(folder, "small"))


@pytest.fixture(scope="module")
def sample(small_study):
    frame = demo.draw(300, seed=41)
    return frame, outcome_codes(small_study, frame[small_study.outcome.column])


def _unit_free(result) -> str:
    d = result.to_dict()
    return json.dumps({k: v for k, v in d.items() if k not in UNIT_KEYS}, sort_keys=True)


# --------------------------------------------------------------------------
# cluster_bootstrap_indices
# --------------------------------------------------------------------------


@pytest.mark.parametrize("name", list(LAYOUTS))
def test_every_replicate_holds_whole_clusters(name):
    # Cluster bootstrap (Davison & Hinkley 1997, section 3.8): each replicate
    # draws G of the G clusters with replacement, each bringing all its rows,
    # so every row of a cluster appears the same number of times and the
    # multiplicities of the clusters add up to G.
    labels = LAYOUTS[name]
    groups = {g: np.flatnonzero(labels == g) for g in dict.fromkeys(labels.tolist())}
    G, n = len(groups), labels.size
    for idx in cluster_bootstrap_indices(labels, n_boot=8, seed=3):
        times = np.bincount(idx, minlength=n)
        multiplicity = {}
        for g, rows in groups.items():
            assert np.all(times[rows] == times[rows[0]]), f"cluster {g!r} drawn partly"
            multiplicity[g] = int(times[rows[0]])
        assert sum(multiplicity.values()) == G
        assert idx.size == sum(m * groups[g].size for g, m in multiplicity.items())


@pytest.mark.parametrize("name", ["7 int clusters", "20 str clusters"])
def test_cluster_draws_follow_the_documented_streams(name):
    # The docstring: replicate i draws G integers in [0, G) from stream i of
    # SeedSequence(seed).spawn(n_boot), clusters numbered in order of first
    # appearance, and brings the drawn clusters' rows cluster by cluster.
    labels = LAYOUTS[name]
    first_seen = list(dict.fromkeys(labels.tolist()))
    rows_of = [np.flatnonzero(labels == g) for g in first_seen]
    G = len(first_seen)
    replicates = cluster_bootstrap_indices(labels, n_boot=5, seed=17)
    for child, idx in zip(np.random.SeedSequence(17).spawn(5), replicates):
        drawn = np.random.default_rng(child).integers(0, G, size=G)
        np.testing.assert_array_equal(idx, np.concatenate([rows_of[g] for g in drawn]))


def test_cluster_codes_number_clusters_by_first_appearance():
    codes = cluster_codes(["b", "a", "b", "c", "a"])
    np.testing.assert_array_equal(codes, [0, 1, 0, 2, 1])


@pytest.mark.parametrize("labels", [np.arange(150), np.array([f"p{i}" for i in np.random.default_rng(8).permutation(150)], dtype=object)],
                         ids=["row numbers", "shuffled distinct text"])
def test_one_row_per_cluster_is_the_row_bootstrap(labels):
    # With one row per cluster, codes follow row order, so the cluster draws
    # are the row bootstrap's, draw for draw (bootstrap.py docstrings).
    by_clusters = np.vstack(cluster_bootstrap_indices(labels, n_boot=6, seed=29))
    np.testing.assert_array_equal(by_clusters, bootstrap_indices(150, n_boot=6, seed=29))


# --------------------------------------------------------------------------
# validate_internally with clusters
# --------------------------------------------------------------------------


def test_validation_with_one_row_per_cluster_equals_row_bootstrap(small_study, sample):
    rows = validate_internally(small_study, sample, n_boot=5, seed=13, progress=False)
    singletons = validate_internally(small_study, sample, n_boot=5, seed=13, progress=False, clusters=np.arange(len(sample[1])))
    assert rows.resampled == "rows" and rows.n_clusters is None
    assert singletons.resampled == "clusters" and singletons.n_clusters == len(sample[1])
    assert _unit_free(singletons) == _unit_free(rows)


def test_validation_with_20_clusters_reports_and_resamples_clusters(small_study, sample):
    frame, y = sample
    labels = unequal_clusters(len(y), 20, seed=6)
    rows = validate_internally(small_study, sample, n_boot=5, seed=13, progress=False)
    by_cluster = validate_internally(small_study, sample, n_boot=5, seed=13, progress=False, clusters=labels)
    assert by_cluster.n_clusters == 20 and by_cluster.resampled == "clusters"
    d = by_cluster.to_dict()
    assert d["resampled"] == "clusters" and d["n_clusters"] == 20
    # the apparent model does not depend on the resampling unit (no selection), the replicates do
    assert by_cluster.estimate("brier").apparent == rows.estimate("brier").apparent
    assert not np.array_equal(by_cluster.values("brier", "original"), rows.values("brier", "original"))
    assert not np.array_equal(by_cluster.values("brier", "bootstrap"), rows.values("brier", "bootstrap"))


def test_replicate_model_is_fitted_on_the_documented_cluster_draw(small_study, sample):
    # cluster_bootstrap_indices: "exactly as validate_internally draws them with
    # clusters".  Replicate 0's model on the original data equals the model
    # derived on that draw's rows (given as counts, as in test_bootstrap).
    frame, y = sample
    labels = unequal_clusters(len(y), 20, seed=6)
    result = validate_internally(small_study, sample, n_boot=2, seed=5, progress=False, clusters=labels)
    idx = cluster_bootstrap_indices(labels, n_boot=2, seed=5)[0]
    derivation = derive(small_study, frame, y, weights=np.bincount(idx, minlength=len(y)))
    expected = performance_summary(y, derivation.fit.predict_proba(derivation.design.transform(frame)))
    for key in ("auc_cut0", "brier", "calibration_slope_cut1"):
        assert result.values(key, "original")[0] == pytest.approx(expected[key], rel=1e-7, abs=1e-9)


@pytest.fixture(scope="module")
def site_study(folder):
    """The small study with a ``site`` cluster column of 12 unequal clusters in the derivation file."""
    n = len(pd.read_csv(folder / "data" / "derivation.csv", dtype=str))
    path = data_with_column(folder, "with_sites", "site", unequal_clusters(n, 12, seed=9))
    return load_study(study_variant(folder, "sites", **{"data.derivation": path, "data.cluster_column": "site"}))


def test_prepared_cohort_brings_its_own_clusters(site_study):
    cohort = load_cohorts(site_study).derivation
    assert cohort.cluster_column == "site" and cohort.cluster_kind == "site" and cohort.n_clusters == 12
    assert cohort.clusters.shape == (cohort.n_analysed,) and "site" not in cohort.frame.columns
    own = validate_internally(site_study, cohort, n_boot=4, seed=2, progress=False)
    passed = validate_internally(site_study, (cohort.frame, cohort.y), n_boot=4, seed=2, progress=False, clusters=cohort.clusters)
    assert own.n_clusters == passed.n_clusters == 12
    assert own.cluster_kind == "site" and passed.cluster_kind is None
    assert _unit_free(own) == _unit_free(passed)


def test_prepared_cohort_with_clusters_refuses_clusters_argument(site_study):
    cohort = load_cohorts(site_study).derivation
    with pytest.raises(RiskvetError, match=r"validate_internally\(clusters=\)"):
        validate_internally(site_study, cohort, n_boot=2, seed=1, progress=False, clusters=cohort.clusters)


def test_clusters_argument_must_have_one_label_per_row(small_study, sample):
    y = sample[1]
    with pytest.raises(DataError, match="clusters="):
        validate_internally(small_study, sample, n_boot=2, seed=1, progress=False, clusters=np.arange(len(y) - 1))
    labels = np.arange(len(y)).astype(object)
    labels[4] = None
    with pytest.raises(DataError, match="none missing"):
        validate_internally(small_study, sample, n_boot=2, seed=1, progress=False, clusters=labels)


# --------------------------------------------------------------------------
# cluster_folds
# --------------------------------------------------------------------------


def _folds_of(labels, n_folds, seed, y=None):
    codes = cluster_codes(labels)
    y = np.random.default_rng(seed + 1).integers(0, 3, size=codes.size) if y is None else y
    return codes, cluster_folds(codes, y, n_folds, np.random.default_rng(seed))


@pytest.mark.parametrize("name,n_folds", [("7 int clusters", 3), ("20 str clusters", 6), ("45 small int clusters", 10), ("sorted str clusters", 12)])
def test_cluster_folds_deal_whole_balanced_clusters(name, n_folds):
    # Grouped cross-validation: every row of a cluster in its cluster's fold
    # (common practice); clusters dealt in turn, so folds differ by at most
    # one cluster (cluster_folds docstring).
    codes, fold = _folds_of(LAYOUTS[name], n_folds, seed=4)
    G = int(codes.max()) + 1
    for g in range(G):
        assert np.unique(fold[codes == g]).size == 1
    fold_of_cluster = np.array([fold[codes == g][0] for g in range(G)])
    per_fold = np.bincount(fold_of_cluster, minlength=n_folds)
    assert set(np.unique(fold).tolist()) == set(range(n_folds))  # every fold non-empty
    assert per_fold.max() - per_fold.min() <= 1


def test_cluster_folds_are_deterministic_under_a_seed():
    labels = LAYOUTS["20 str clusters"]
    _, a = _folds_of(labels, 5, seed=10)
    _, b = _folds_of(labels, 5, seed=10)
    np.testing.assert_array_equal(a, b)
    _, c = _folds_of(labels, 5, seed=11)
    assert not np.array_equal(a, c)  # the seed matters


def test_cluster_folds_on_a_subset_of_clusters():
    # A training fold's codes leave gaps (clusters of the held-out fold): only
    # the clusters present are dealt, still whole and balanced.
    codes = cluster_codes(LAYOUTS["20 str clusters"])
    keep = ~np.isin(codes, [0, 3, 4, 11, 19])
    sub = codes[keep]
    fold = cluster_folds(sub, np.zeros(sub.size, dtype=np.int64), 4, np.random.default_rng(0))
    present = np.unique(sub)
    fold_of_cluster = np.array([np.unique(fold[sub == g]).item() for g in present])
    assert np.bincount(fold_of_cluster, minlength=4).tolist() in ([4, 4, 4, 3], [4, 4, 3, 4], [4, 3, 4, 4], [3, 4, 4, 4])


def test_more_folds_than_clusters_is_refused_naming_the_option():
    codes = cluster_codes(LAYOUTS["7 int clusters"])
    y = np.zeros(codes.size, dtype=np.int64)
    with pytest.raises(DesignError, match=r"n_folds.*at most the number of clusters \(7\)"):
        cluster_folds(codes, y, 8, np.random.default_rng(0))
    with pytest.raises(DesignError, match=r"^selection\.folds"):
        cluster_folds(codes, y, 8, np.random.default_rng(0), where="selection.folds")
    assert np.unique(cluster_folds(codes, y, 7, np.random.default_rng(0))).size == 7  # as many folds as clusters is allowed


def test_selection_folds_deal_clusters(sample):
    # select_terms(clusters=) deals clusters to the forward selection's folds:
    # 5 folds over 3 clusters is refused under the study key selection.folds.
    frame, y = sample
    X = frame[PREDICTORS].astype(float)
    codes = cluster_codes(np.arange(len(y)) % 3)
    groups = {p: [p] for p in PREDICTORS}
    with pytest.raises(DesignError, match="selection.folds"):
        select_terms(X, y, groups=groups, method="forward", n_folds=5, seed=1, clusters=codes)
    result = select_terms(X, y, groups=groups, method="forward", n_folds=3, seed=1, clusters=codes)
    assert result.n_folds == 3


@pytest.mark.parametrize("method", ["forward", "lasso"])
def test_person_clusters_reach_the_derivation_folds(folder, sample, method):
    # derive(clusters=) with data.cluster_kind: person: the selection's (or the
    # penalty's) folds deal whole people, so 5 folds over 3 people is refused.
    frame, y = sample
    study = load_study(study_variant(folder, f"person_{method}", **{
        "selection.method": method, "selection.folds": 5, "data.cluster_column": "runner", "data.cluster_kind": "person"}))
    three = cluster_codes(np.arange(len(y)) % 3)
    with pytest.raises(DesignError, match="selection.folds"):
        derive(study, frame, y, clusters=three)
    with pytest.raises(DesignError, match="selection.folds"):
        derive(study, frame, y, weights=np.bincount(cluster_bootstrap_indices(three, n_boot=1, seed=0)[0], minlength=len(y)), clusters=three)


# --------------------------------------------------------------------------
# cross_validate with clusters
# --------------------------------------------------------------------------


def test_cross_validation_never_splits_a_cluster(small_study, sample, monkeypatch):
    # Grouped k-fold (common practice): no cluster both in a fold's training
    # rows and in its held-out rows.  The folds actually used are those in the
    # payload each fold's derivation receives.
    frame, y = sample
    labels = unequal_clusters(len(y), 20, seed=6)
    seen = []
    original = crossval._fold_values

    def spy(payload, r, f, sel_seed):
        seen.append((r, f, payload.folds[r].copy(), payload.clusters.copy()))
        return original(payload, r, f, sel_seed)

    monkeypatch.setattr(crossval, "_fold_values", spy)
    result = cross_validate(small_study, sample, n_folds=4, n_repeats=2, seed=3, progress=False, clusters=labels)
    assert sorted((r, f) for r, f, _, _ in seen) == [(r, f) for r in range(2) for f in range(4)]
    for r, f, fold, codes in seen:
        np.testing.assert_array_equal(codes, cluster_codes(labels))
        held = fold == f
        assert held.any() and (~held).any()
        assert not set(codes[held].tolist()) & set(codes[~held].tolist())
    assert result.n_clusters == 20 and result.to_dict()["n_clusters"] == 20
    assert result.n_folds == 4 and not result.failures


def test_fold_derivation_receives_the_training_clusters(small_study, sample, monkeypatch):
    frame, y = sample
    labels = unequal_clusters(len(y), 20, seed=6)
    received = []
    original = crossval._fit_and_predict

    def spy(study, frame_fit, y_fit, frame_new, seed, K, *, weights=None, clusters=None):
        received.append((len(frame_fit), len(frame_new), clusters))
        return original(study, frame_fit, y_fit, frame_new, seed, K, weights=weights, clusters=clusters)

    monkeypatch.setattr(crossval, "_fit_and_predict", spy)
    cross_validate(small_study, sample, n_folds=3, seed=4, progress=False, clusters=labels)
    assert len(received) == 3
    all_codes = set(cluster_codes(labels).tolist())
    held_out = []
    for n_fit, n_new, clusters in received:
        assert clusters is not None and clusters.shape == (n_fit,)
        held_out.append(all_codes - set(clusters.tolist()))
        assert n_fit + n_new == len(y)
    # the held-out clusters of the three folds partition the clusters
    assert sorted(g for part in held_out for g in part) == sorted(all_codes)


def test_cross_validation_without_clusters_has_no_cluster_count(small_study, sample):
    result = cross_validate(small_study, sample, n_folds=3, seed=4, progress=False)
    assert result.n_clusters is None and "n_clusters" not in result.to_dict()


def test_cross_validation_refuses_more_folds_than_clusters(small_study, sample):
    y = sample[1]
    with pytest.raises(DesignError, match=r"cross_validate\(n_folds=\).*number of clusters \(3\)"):
        cross_validate(small_study, sample, n_folds=4, seed=1, progress=False, clusters=np.arange(len(y)) % 3)


# --------------------------------------------------------------------------
# Study file and data checks
# --------------------------------------------------------------------------


def test_missing_cluster_value_names_column_and_file_lines(folder):
    n = len(pd.read_csv(folder / "data" / "derivation.csv", dtype=str))
    labels = unequal_clusters(n, 10, seed=2).tolist()
    labels[3] = labels[10] = ""  # data rows 3 and 10: file lines 5 and 12 (header is line 1)
    path = data_with_column(folder, "site_gaps", "site", labels)
    study = load_study(study_variant(folder, "site_gaps", **{"data.derivation": path, "data.cluster_column": "site"}))
    with pytest.raises(DataError) as caught:
        load_cohorts(study)
    message = str(caught.value)
    assert "site_gaps.csv" in message and "'site' (data.cluster_column)" in message
    assert "2 missing value(s)" in message and "lines 5, 12 of the file" in message


def test_internal_external_needs_a_cluster_column(folder):
    # Internal-external cross-validation leaves out one cluster (site or
    # period) at a time (Royston, Parmar & Sylvester 2004; Steyerberg & Harrell 2016).
    with pytest.raises(StudyError, match=r"internal_external: needs data\.cluster_column"):
        load_study(study_variant(folder, "iecv_no_cluster", internal_external={}))
    study = load_study(study_variant(folder, "iecv_off", internal_external={"enabled": False}))
    assert "internal_external" not in study.enabled_stages


def test_internal_external_refuses_person_clusters(folder):
    # Leaving one person out is not internal-external validation, which leaves
    # out a site or a period (Steyerberg & Harrell 2016).
    path = study_variant(folder, "iecv_person", internal_external={}, **{"data.cluster_column": "event", "data.cluster_kind": "person"})
    with pytest.raises(StudyError, match=r"internal_external:.*data\.cluster_kind is 'person'"):
        load_study(path)
    ok = load_study(study_variant(folder, "iecv_site", internal_external={}, **{"data.cluster_column": "event", "data.cluster_kind": "site"}))
    assert "internal_external" in ok.enabled_stages


@pytest.mark.parametrize("column", ["disposition", "age"], ids=["outcome", "predictor"])
def test_cluster_column_may_not_be_outcome_or_predictor(folder, column):
    with pytest.raises(StudyError, match=rf"data\.cluster_column: '{column}' is also the outcome, the weight column or a predictor"):
        load_study(study_variant(folder, f"cluster_is_{column}", **{"data.cluster_column": column}))


def test_cluster_column_may_not_be_the_weight_column(folder):
    with pytest.raises(StudyError, match=r"data\.cluster_column: 'copies'"):
        load_study(study_variant(folder, "cluster_is_weight", **{"data.cluster_column": "copies", "data.weight_column": "copies"}))


def test_cluster_kind_is_one_of_site_period_person(folder):
    with pytest.raises(StudyError, match="data.cluster_kind"):
        load_study(study_variant(folder, "cluster_kind_bad", **{"data.cluster_column": "event", "data.cluster_kind": "region"}))


# --------------------------------------------------------------------------
# Privacy of a person's cluster label
# --------------------------------------------------------------------------


RUNNERS = [f"runner-{i:02d}" for i in range(15)]


def _runner_cohort(folder, kind):
    n = len(pd.read_csv(folder / "data" / "derivation.csv", dtype=str))
    labels = np.array(RUNNERS, dtype=object)[np.random.default_rng(12).integers(0, len(RUNNERS), size=n)]
    path = data_with_column(folder, f"runners_{kind}", "runner", labels)
    study = load_study(study_variant(folder, f"runners_{kind}", **{"data.derivation": path, "data.cluster_column": "runner", "data.cluster_kind": kind}))
    return load_cohorts(study).derivation


def test_person_cluster_labels_are_private_in_the_audit(folder):
    # A person's label identifies them like an id: only counts are shown (common practice).
    cohort = _runner_cohort(folder, "person")
    audit = cohort.audit.column("runner")
    assert audit.private and audit.levels is None and audit.n_unique == len(RUNNERS)
    shown = json.dumps(cohort.to_dict()) + cohort.audit.to_frame().to_csv()
    assert not [r for r in RUNNERS if r in shown]
    assert cohort.audit.column("attendee_id").private  # the id column stays private too
    assert cohort.n_clusters == len(RUNNERS)  # the labels are still used to resample


def test_site_cluster_labels_are_shown_in_the_audit(folder):
    # The contrast: a site's labels may be shown (DataSection.cluster_kind).
    cohort = _runner_cohort(folder, "site")
    audit = cohort.audit.column("runner")
    assert not audit.private and {lv for lv, _ in audit.levels} == set(RUNNERS)
