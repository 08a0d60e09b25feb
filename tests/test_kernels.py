"""The compiled row loops against the numpy path they replace, and the whole fit against statsmodels.

``riskvet.modelling.kernels`` runs the per-row arithmetic of the
proportional cumulative-logit fitter in compiled loops; the numpy code in
``riskvet.modelling.fitter`` stays the reference.  These tests switch the
loops off and on within one process and compare the two on invented data
of every shape the fitter meets (two to five levels, unit and frequency
weights, offsets, no columns), then check the fit on the compiled path
against statsmodels ``OrderedModel`` (statsmodels 0.14/0.15) and that a
whole forward selection gives the same path and estimates both ways.
"""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from riskvet.modelling import fitter, kernels
from riskvet.modelling.selection import select_terms

needs_numba = pytest.mark.skipif(not kernels.available(), reason="numba is not installed")


@pytest.fixture
def numpy_path(monkeypatch):
    """``numpy_path(False)`` runs the numpy reference path from here on, ``numpy_path(True)`` the compiled loops."""

    def switch(on: bool):
        monkeypatch.setattr(kernels, "_ENABLED", bool(on) and kernels.available())

    return switch


def test_compiled_loops_run_only_inside_their_blocks():
    assert not kernels.enabled()
    with kernels.compiled():
        assert kernels.enabled() == (kernels.available() and os.environ.get("RISKVET_KERNELS", "") != "numpy")
        with kernels.compiled():
            pass
        assert kernels.enabled() == (kernels.available() and os.environ.get("RISKVET_KERNELS", "") != "numpy")
    assert not kernels.enabled()


def _data(n, p, K, seed, weights=False, offset=False):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    if p > 2:
        X[:, -1] = rng.binomial(1, 0.3, size=n)
    beta = rng.normal(scale=0.5, size=p)
    latent = X @ beta + rng.logistic(size=n)
    y = np.searchsorted(np.quantile(latent, np.linspace(0, 1, K + 1)[1:-1]), latent).astype(np.int64)
    w = rng.integers(1, 4, size=n).astype(float) if weights else None
    off = rng.normal(scale=0.3, size=n) if offset else None
    return X, y, w, off


CASES = [
    (400, 3, 2, False, False),
    (500, 5, 3, True, False),
    (600, 4, 4, False, True),
    (300, 0, 3, True, True),
    (700, 6, 5, True, False),
]


@needs_numba
@pytest.mark.parametrize("n, p, K, weights, offset", CASES)
def test_pieces_gradient_and_hessian_match_the_numpy_path(numpy_path, n, p, K, weights, offset):
    X, y, w, off = _data(n, p, K, seed=n + p + K, weights=weights, offset=offset)
    d = fitter._make_design(X, y, K, np.ones(n) if w is None else w, off, "logit", True, w is None, center=True)
    rng = np.random.default_rng(1)
    phi = fitter._default_start(d)
    phi[K - 1 :] = rng.normal(scale=0.3, size=p)
    numpy_path(False)
    ll0, pc0 = fitter._evaluate(d, phi)
    g0, H0 = fitter._grad_hess(d, pc0)
    gr0 = fitter._gradient(d, pc0)
    numpy_path(True)
    ll1, pc1 = fitter._evaluate(d, phi)
    g1, H1 = fitter._grad_hess(d, pc1)
    gr1 = fitter._gradient(d, pc1)
    # the same formulas row by row: equal to rounding (the exponential and the summation order may differ)
    assert ll1 == pytest.approx(ll0, rel=1e-13)
    for a, b in zip(pc0, pc1):
        assert a.shape == b.shape
        np.testing.assert_allclose(b, a, rtol=1e-13, atol=1e-300)
    scale = np.max(np.abs(H0))
    np.testing.assert_allclose(g1, g0, rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(gr1, g0, rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(gr0, g0, rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(H1, H0, rtol=0, atol=1e-12 * scale)


@needs_numba
def test_points_outside_the_model_are_not_finite_on_both_paths(numpy_path):
    X, y, w, off = _data(200, 2, 3, seed=3)
    d = fitter._make_design(X, y, 3, np.ones(200), None, "logit", True, True, center=True)
    numpy_path(False)
    reversed0 = fitter._evaluate(d, np.array([1.0, -1.0, 0.0, 0.0]))[0]  # thresholds out of order: negative probabilities
    extreme0 = fitter._evaluate(d, np.array([-800.0, 800.0, 0.0, 0.0]))[0]  # clipped at +-700, as the numpy path
    numpy_path(True)
    reversed1 = fitter._evaluate(d, np.array([1.0, -1.0, 0.0, 0.0]))[0]
    extreme1 = fitter._evaluate(d, np.array([-800.0, 800.0, 0.0, 0.0]))[0]
    assert np.isnan(reversed0) and np.isnan(reversed1)
    assert extreme1 == pytest.approx(extreme0, rel=1e-13)


@needs_numba
@pytest.mark.parametrize("K", [2, 3])
def test_compiled_fit_equals_statsmodels(numpy_path, K):
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    X, y, _, _ = _data(800, 4, K, seed=11)
    numpy_path(True)
    fit = fitter.fit_cumulative(pd.DataFrame(X, columns=list("abcd")), y)
    # reference: statsmodels OrderedModel, logit, BFGS to a tight tolerance (statsmodels 0.14/0.15)
    res = OrderedModel(y, X, distr="logit").fit(method="bfgs", maxiter=5000, gtol=1e-10, disp=False)
    np.testing.assert_allclose(fit.coef.to_numpy(), res.params[:4], rtol=1e-6, atol=1e-7)
    assert fit.loglik == pytest.approx(res.llf, rel=1e-10)
    np.testing.assert_allclose(fit.se.to_numpy()[K - 1 :], res.bse[:4], rtol=1e-4)


@needs_numba
def test_forward_selection_is_the_same_on_both_paths(numpy_path):
    X, y, w, _ = _data(600, 8, 3, seed=5, weights=True)
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(8)])
    groups = {c: [c] for c in frame.columns}
    numpy_path(False)
    a = select_terms(frame, y, groups=groups, weights=w, n_folds=5, seed=3)
    numpy_path(True)
    b = select_terms(frame, y, groups=groups, weights=w, n_folds=5, seed=3)
    assert a.terms == b.terms and a.size == b.size
    np.testing.assert_allclose(b.cv["mean_test_loglik"], a.cv["mean_test_loglik"], rtol=1e-11)
    np.testing.assert_allclose(b.path["statistic"], a.path["statistic"], rtol=1e-9)
    np.testing.assert_allclose(b.fit.params, a.fit.params, rtol=1e-10, atol=1e-12)


def test_the_environment_variable_selects_the_numpy_path():
    env = {**os.environ, "RISKVET_KERNELS": "numpy"}
    code = "from riskvet.modelling import kernels\nwith kernels.compiled(): print(kernels.enabled(), kernels.mode())"
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False numpy everywhere (RISKVET_KERNELS=numpy)"


@needs_numba
def test_bootstrap_replicates_run_compiled_and_match_the_numpy_path(monkeypatch, tmp_path):
    """One whole-procedure replicate of the demo study (forward selection with 5-fold CV, measures) on each path."""
    from riskvet import demo
    from riskvet.chain.scaffold import new_study_folder
    from riskvet.intake.outcome import outcome_codes
    from riskvet.intake.study import load_study
    from riskvet.validation import bootstrap

    path = new_study_folder(tmp_path, n_derivation=100, n_validation=50, n_ratings=10, n_boot=4, missing_data="complete_case")
    study = load_study(path)
    frame = demo.draw(500, seed=31)  # invented demo data
    y = outcome_codes(study, frame[study.outcome.column])
    seen = []
    real = bootstrap._replicate_values

    def spy(*args, **kwargs):
        seen.append(kernels.enabled())
        return real(*args, **kwargs)

    monkeypatch.setattr(bootstrap, "_replicate_values", spy)
    payload = bootstrap._Payload(study=study, frame=frame[list(study.predictors.in_analysis)], y=y, K=3, link="logit")
    child = np.random.SeedSequence(5)
    # as validate_internally runs every replicate, in one process or in workers
    on, = bootstrap._run_batch(bootstrap._replicate, payload, [(0, child)])
    monkeypatch.setattr(kernels, "_ALLOWED", False)
    off, = bootstrap._run_batch(bootstrap._replicate, payload, [(0, child)])
    assert seen == [True, False]
    assert not kernels.enabled()
    assert on["status"] == off["status"] == "ok"
    assert on.keys() == off.keys() and on["terms"] == off["terms"]
    compared = 0
    for part in ("boot", "test", "oob"):
        for key, value in on[part].items():
            if np.isfinite(value):
                assert value == pytest.approx(off[part][key], rel=1e-10, abs=1e-12), (part, key)
                compared += 1
    np.testing.assert_allclose(on["logp_oob"], off["logp_oob"], rtol=1e-10)
    assert compared > 10
