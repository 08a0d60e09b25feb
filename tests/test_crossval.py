"""Tests of riskvet.validation.crossval.

References: scikit-learn 1.9 (LogisticRegression without penalty, roc_auc_score,
brier_score_loss) on the same folds for a binary outcome; invariants of the
fold assignment; determinism across workers.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import yaml

from riskvet.reporting.sentences.internal_validation import crossval_sentence
from riskvet import demo
from riskvet.validation.crossval import cross_validate, stratified_folds
from riskvet.errors import RiskvetError
from riskvet.chain.scaffold import new_study_folder
from riskvet.intake.study import load_study

PREDICTORS = ["age", "core_temp", "heart_rate", "resp_rate", "wbgt"]


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    path = tmp_path_factory.mktemp("cv")
    new_study_folder(path, n_derivation=60, n_validation=30, n_ratings=10, n_boot=5)
    return path


def variant(folder, name, *, binary: bool = False):
    raw = yaml.safe_load((folder / "study.yaml").read_text(encoding="utf-8"))
    raw["selection"]["method"] = "none"
    raw["predictors"] = {"candidates": {p: "linear" for p in PREDICTORS}}
    if binary:
        raw["outcome"] = {"column": "transferred", "type": "binary", "levels": ["no", "yes"], "event": "yes"}
        for key in ("thresholds", "existing_rule"):
            raw.pop(key, None)
    path = folder / f"{name}.yaml"
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    return load_study(path)


@pytest.fixture(scope="module")
def sample():
    frame = demo.draw(400, seed=31)
    y3 = np.array([demo.LEVELS.index(v) for v in frame["disposition"]], dtype=np.int64)
    return frame, y3


def test_stratified_folds_balance_levels():
    rng = np.random.default_rng(0)
    y = np.repeat([0, 1, 2], [53, 31, 16])
    fold = stratified_folds(y, n_folds=7, rng=rng)
    sizes = np.bincount(fold, minlength=7)
    assert sizes.max() - sizes.min() <= 1
    for level in range(3):
        per = np.bincount(fold[y == level], minlength=7)
        assert per.max() - per.min() <= 1
    again = stratified_folds(y, n_folds=7, rng=np.random.default_rng(0))
    np.testing.assert_array_equal(fold, again)


def test_binary_pooled_estimates_match_scikit_learn(folder, sample):
    # scikit-learn 1.9: unpenalised logistic regression (C = inf) fitted on the same
    # training folds (newton-cg, tol 1e-12), predictions of the held-out
    # folds pooled, then roc_auc_score and brier_score_loss.  Tolerance 1e-6:
    # both fitters converge to the same maximum far more closely than that.
    from sklearn.linear_model import LogisticRegression
    from sklearn.metrics import brier_score_loss, roc_auc_score

    study = variant(folder, "binary", binary=True)
    frame, y3 = sample
    y = (y3 == 2).astype(np.int64)
    result = cross_validate(study, (frame, y), n_folds=5, n_repeats=1, seed=8, progress=False)
    rng = np.random.default_rng(np.random.SeedSequence(8).spawn(1)[0])
    fold = stratified_folds(y, n_folds=5, rng=rng)
    X = frame[PREDICTORS].to_numpy(dtype=float)
    pooled = np.empty(len(y))
    per_fold_auc = []
    for f in range(5):
        train, test = fold != f, fold == f
        model = LogisticRegression(C=np.inf, solver="newton-cg", tol=1e-12, max_iter=1000).fit(X[train], y[train])
        pooled[test] = model.predict_proba(X[test])[:, 1]
        per_fold_auc.append(roc_auc_score(y[test], pooled[test]))
    assert result.estimate("auc").pooled == pytest.approx(roc_auc_score(y, pooled), abs=1e-6)
    assert result.estimate("brier").pooled == pytest.approx(brier_score_loss(y, pooled), abs=1e-6)
    assert result.estimate("auc").averaged == pytest.approx(np.mean(per_fold_auc), abs=1e-6)
    assert result.estimate("auc").averaged_sd == pytest.approx(np.std(per_fold_auc, ddof=1), abs=1e-6)
    assert np.isnan(result.estimate("auc").pooled_sd)  # one repeat


def test_repeats_and_workers(folder, sample):
    study = variant(folder, "ordinal")
    frame, y = sample
    one = cross_validate(study, (frame, y), n_folds=4, n_repeats=2, seed=3, n_jobs=1, progress=False)
    two = cross_validate(study, (frame, y), n_folds=4, n_repeats=2, seed=3, n_jobs=2, progress=False)
    assert json.dumps(one.to_dict(), sort_keys=True) == json.dumps(two.to_dict(), sort_keys=True)
    assert len(one.fold_values) == 8 * len(one.estimates)
    table = one.fold_values
    auc = table[table["measure"] == "average_cut_auc"]["value"].to_numpy()
    assert one.estimate("average_cut_auc").averaged == pytest.approx(auc.mean(), rel=1e-12)
    assert one.estimate("average_cut_auc").n_folds_used == 8
    # Held-out performance is below the apparent performance (the model is fitted to its own data).
    e = one.estimate("average_cut_auc")
    assert e.pooled < e.apparent and e.averaged < e.apparent
    assert one.estimate("calibration_slope").apparent == pytest.approx(1.0, abs=1e-6)
    assert "cross-validation" in crossval_sentence(one)
    assert one.to_frame().shape[0] == 15


def test_bad_input(folder, sample):
    study = variant(folder, "bad")
    frame, y = sample
    with pytest.raises(RiskvetError, match="n_folds"):
        cross_validate(study, (frame, y), n_folds=1, seed=1)
    with pytest.raises(RiskvetError, match="n_repeats"):
        cross_validate(study, (frame, y), n_folds=3, n_repeats=0, seed=1)
    with pytest.raises(RiskvetError, match="seed"):
        cross_validate(study, (frame, y), n_folds=3, seed=1.5)
    with pytest.raises(RiskvetError, match="n_folds"):
        cross_validate(study, (frame.iloc[:5], y[:5]), n_folds=6, seed=1)
    with pytest.raises(RiskvetError, match="study"):
        cross_validate("study.yaml", (frame, y), n_folds=3, seed=1)
