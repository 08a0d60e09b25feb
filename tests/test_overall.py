"""Tests of riskvet.measures.overall against scikit-learn, statsmodels and limiting cases.

Tolerances: ``rel=1e-12`` (or ``abs=1e-12``) compares the same closed-form quantity computed in
a different order, so only floating-point rounding separates the two; wider tolerances are
explained beside their checks.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import sklearn
import statsmodels
import statsmodels.api as sm
from sklearn.metrics import brier_score_loss, log_loss

from riskvet.errors import DataError, RiskvetWarning
from riskvet.measures.overall import brier, overall_accuracy


def binary_example(n=400, seed=1):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 2))
    lp = -0.4 + x @ np.array([1.0, -0.6])
    y = (rng.random(n) < 1 / (1 + np.exp(-lp))).astype(int)
    return x, y


def ordinal_example(n=300, seed=2):
    rng = np.random.default_rng(seed)
    prob = rng.dirichlet([2.0, 1.0, 1.5], n)
    y = np.array([rng.choice(3, p=p) for p in prob])
    return y, prob


def test_binary_brier_matches_sklearn():
    # scikit-learn 1.9.1 brier_score_loss: binary form, mean (y - p)^2.
    x, y = binary_example()
    p = np.clip(0.5 + 0.2 * x[:, 0], 0, 1)
    res = brier(y, p)
    assert res.brier == pytest.approx(brier_score_loss(y, p), rel=1e-12), sklearn.__version__
    assert res.form == "binary"
    assert res.null_brier == pytest.approx(y.mean() * (1 - y.mean()), rel=1e-12)
    assert res.cut_brier[0] == pytest.approx(res.brier, rel=1e-12)
    # An n x 2 matrix is the same binary outcome.
    assert brier(y, np.column_stack([1 - p, p])).brier == pytest.approx(res.brier, rel=1e-12)


def test_multicategory_brier_matches_sklearn():
    # scikit-learn 1.9.1 brier_score_loss with scale_by_half=False: sum over levels, range [0, 2]
    # (Brier, Monthly Weather Review 1950).
    y, prob = ordinal_example()
    res = brier(y, prob)
    assert res.form == "multi-category"
    assert res.brier == pytest.approx(brier_score_loss(y, prob, labels=[0, 1, 2], scale_by_half=False), rel=1e-12)
    props = np.bincount(y) / y.size
    null = brier_score_loss(y, np.tile(props, (y.size, 1)), labels=[0, 1, 2], scale_by_half=False)
    assert res.null_brier == pytest.approx(null, rel=1e-12)
    for j in range(2):
        assert res.cut_brier[j] == pytest.approx(brier_score_loss(y > j, prob[:, j + 1 :].sum(axis=1)), rel=1e-12)


def test_scaled_brier_limits():
    # Steyerberg et al., Epidemiology 2010: scaled Brier is 0 for the prevalence model, 1 if perfect.
    y, _ = ordinal_example(n=90)
    props = np.bincount(y) / y.size
    assert brier(y, np.tile(props, (y.size, 1))).scaled_brier == pytest.approx(0.0, abs=1e-12)
    assert brier(y, np.eye(3)[y]).scaled_brier == 1.0


def test_log_likelihood_and_cox_snell_match_statsmodels_logit_fit():
    # statsmodels 0.15.0 GLM(Binomial) fit: llf, llnull and pseudo_rsquared(kind="cs")
    # (Cox-Snell likelihood-ratio R^2) on the model's own development data.
    x, y = binary_example()
    fit = sm.GLM(y, sm.add_constant(x), family=sm.families.Binomial()).fit()
    res = overall_accuracy(y, fit.fittedvalues)
    assert res.log_likelihood == pytest.approx(fit.llf, rel=1e-10), statsmodels.__version__
    assert res.null_log_likelihood == pytest.approx(fit.llnull, rel=1e-10)
    assert res.cox_snell_r2 == pytest.approx(fit.pseudo_rsquared(kind="cs"), rel=1e-8)
    assert res.lr_statistic == pytest.approx(2 * (fit.llf - fit.llnull), rel=1e-8)
    # Nagelkerke (Biometrika 1991): Cox-Snell divided by its maximum 1 - exp(2 lnL0 / n).
    assert res.nagelkerke_r2 == pytest.approx(res.cox_snell_r2 / (1 - np.exp(2 * fit.llnull / y.size)), rel=1e-12)
    assert 0 < res.cox_snell_r2 < res.nagelkerke_r2 < 1


def test_multicategory_log_likelihood_matches_sklearn_log_loss():
    # scikit-learn 1.9.1 log_loss(normalize=False) is minus the log-likelihood.
    y, prob = ordinal_example()
    res = overall_accuracy(y, prob)
    assert res.log_likelihood == pytest.approx(-log_loss(y, prob, normalize=False, labels=[0, 1, 2]), rel=1e-12)
    props = np.bincount(y) / y.size
    assert res.null_log_likelihood == pytest.approx(-log_loss(y, np.tile(props, (y.size, 1)), normalize=False), rel=1e-12)


def test_r2_limits():
    y, _ = ordinal_example(n=60)
    props = np.bincount(y) / y.size
    null = overall_accuracy(y, np.tile(props, (y.size, 1)))
    assert null.cox_snell_r2 == pytest.approx(0.0, abs=1e-12) and null.nagelkerke_r2 == pytest.approx(0.0, abs=1e-12)
    perfect = overall_accuracy(y, np.eye(3)[y])
    assert perfect.nagelkerke_r2 == pytest.approx(1.0, abs=1e-12)
    assert perfect.cox_snell_r2 == pytest.approx(perfect.max_cox_snell_r2, abs=1e-12)
    # Predictions worse than the proportions on new data: negative R^2 (not clipped).
    worse = overall_accuracy(y, np.tile(props[::-1], (y.size, 1)) * 0.5 + np.eye(3)[(y + 1) % 3] * 0.5)
    assert worse.nagelkerke_r2 < 0


def test_zero_probability_for_observed_level_warns_and_records():
    with pytest.warns(RiskvetWarning, match="probability 0"):
        res = overall_accuracy([0, 1, 1], [0.2, 0.0, 0.9])
    assert res.n_impossible == 1 and res.log_likelihood == -np.inf and len(res.warnings) == 1


def test_bad_input_and_serialisation():
    with pytest.raises(DataError, match=r"brier\(prob=\).*probabilities in \[0, 1\]"):
        brier([0, 1], [0.5, 1.5])
    with pytest.raises(DataError, match=r"overall_accuracy\(y=\).*levels 0 .. 1"):
        overall_accuracy([0, 2], [0.5, 0.5])
    with pytest.raises(DataError, match=r"brier\(prob=\).*shape"):
        brier([0, 1, 1], [0.5, 0.5])
    y, prob = ordinal_example(n=50)
    res = overall_accuracy(y, prob)
    json.dumps(res.to_dict(), allow_nan=False)
    frame = res.to_frame()
    assert {"brier", "scaled_brier", "nagelkerke_r2", "brier_cut1"} <= set(frame["measure"])


def test_one_observed_level_raises_and_pandas_outcomes_are_read():
    import pandas as pd

    with pytest.raises(DataError, match=r"brier\(y=\).*at least two observed outcome levels"):
        brier([1, 1, 1], [0.2, 0.5, 0.9])
    y, prob = ordinal_example(n=60)
    labels = pd.Categorical.from_codes(y, categories=["mild", "moderate", "severe"], ordered=True)
    assert overall_accuracy(pd.Series(labels), prob).log_likelihood == overall_accuracy(y, prob).log_likelihood
    with pytest.raises(DataError, match="unordered Categorical"):
        brier(pd.Categorical.from_codes(y, categories=["a", "b", "c"]), prob)
    with pytest.raises(DataError, match="no missing values"):
        brier(pd.Series([0, 1, None], dtype="Int64"), [0.2, 0.5, 0.9])
