"""Updating on a multiply imputed cohort: pooled updates and the D2-pooled closed test.

The shared small demo record of conftest imputes its cohorts.  Its model is
updated here on the validation cohort's completed data sets and the result
compared with :func:`riskvet.validation.update.update_model` run on each
completed data set alone, and the pooled likelihood-ratio test with the D2
rule written out by hand.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from scipy import stats

from riskvet.errors import DataError
from riskvet.imputation.procedure import cohort_seed, completed_cohort, impute_cohort
from riskvet.intake.data import load_cohorts
from riskvet.intake.study import load_study
from riskvet.modelling.modelfile import load_model
from riskvet.validation.update import update_model
from riskvet.validation.update_imputed import pooled_lr_test, update_model_imputed


def test_d2_by_hand():
    # Li, Meng, Raghunathan & Rubin 1991 (Statistica Sinica 1:65-92), the D2 statistic and its F reference
    d, k, m = np.array([10.2, 12.9, 8.7, 11.4, 9.6]), 3, 5
    r = (1 + 1 / m) * np.var(np.sqrt(d), ddof=1)
    d2 = (d.mean() / k - (m + 1) / (m - 1) * r) / (1 + r)
    v = k ** (-3 / m) * (m - 1) * (1 + 1 / r) ** 2
    statistic, p = pooled_lr_test(d, k)
    assert math.isclose(statistic, k * d2, rel_tol=1e-12) and math.isclose(p, stats.f.sf(d2, k, v), rel_tol=1e-10)
    # identical statistics: no between-imputation spread, the chi-squared test of one of them
    statistic, p = pooled_lr_test([7.5] * 4, 2)
    assert math.isclose(statistic, 7.5) and math.isclose(p, stats.chi2.sf(7.5, 2))
    with pytest.raises(DataError):
        pooled_lr_test([3.0], 1)


@pytest.fixture(scope="module")
def updated(chain):
    study = load_study(chain.manifest["study"]["path"])
    label = study.updating_cohort
    cohort = load_cohorts(study).validation[label]
    position = 1 + [c.label for c in study.data.validation].index(label)
    frames = [completed_cohort(cohort, c).frame for c in impute_cohort(study, cohort, seed=cohort_seed(study, position))]
    model = load_model(chain.record_dir / "models" / "model.json")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pooled = update_model_imputed(model, frames, cohort.y, alpha=study.updating.alpha)
        single = [update_model(model, f, cohort.y, alpha=study.updating.alpha) for f in frames]
    return study, chain, pooled, single


def test_each_update_is_the_mean_of_its_fits_on_the_completed_data_sets(updated):
    _, _, pooled, single = updated
    for method, fit in pooled.fits.items():
        # Rubin 1987: the pooled point estimate is the mean of the completed-data estimates
        assert np.allclose(fit.model.thresholds, np.mean([s.fits[method].model.thresholds for s in single], axis=0), rtol=1e-12)
        assert np.allclose(fit.model.coef, np.mean([s.fits[method].model.coef for s in single], axis=0), rtol=1e-12)
        if method != "original":
            assert fit.model.provenance["missing_data"]["m"] == len(single)
    shift = [s.fits["in_the_large"].parameters for s in single]
    within = np.mean([p["shift_se"] ** 2 for p in shift])
    between = np.var([p["shift"] for p in shift], ddof=1)
    assert math.isclose(pooled.fits["in_the_large"].parameters["shift_se"], math.sqrt(within + (1 + 1 / len(shift)) * between))


def test_the_closed_test_pools_the_likelihood_ratio_statistics(updated):
    _, _, pooled, single = updated
    for test in pooled.closed_test.tests:
        if test.df == 0:
            continue
        d = [s.closed_test.to_frame().set_index(["simpler", "extensive"]).loc[(test.simpler, test.extensive), "statistic"] for s in single]
        statistic, p = pooled_lr_test(d, test.df)
        assert math.isclose(test.statistic, statistic) and math.isclose(test.p, p)


def test_the_record_updates_on_every_completed_data_set(updated):
    study, chain, pooled, _ = updated
    content = json.loads((chain.record_dir / "results" / "updating.json").read_text(encoding="utf-8"))
    assert "D2 rule" in content["texts"]["imputed"]
    assert content["result"]["closed_test"]["chosen"] == pooled.closed_test.chosen
    files = list((chain.record_dir / "models").glob("model_*_*.json"))
    assert files and all("missing_data" in json.loads(f.read_text(encoding="utf-8"))["provenance"] for f in files
                          if "shrunk" not in f.name)
