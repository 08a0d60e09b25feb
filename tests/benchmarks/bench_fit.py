"""Time the cumulative-link fitter and forward selection (n = 2,000, 18 predictors, K = 3).

Run:  .venv/bin/python tests/benchmarks/bench_fit.py

Prints, in the same run and on the same invented data,

* statsmodels ``OrderedModel(...).fit(method="bfgs")`` (the reference),
* ``riskvet.modelling.fitter.fit_cumulative`` cold (default start) and warm-started
  (from the fit itself, and a bootstrap-like refit: resampled rows as
  frequency weights, started from the original fit), and the lean
  ``_fit_arrays`` entry,
* one full ``riskvet.modelling.selection.select_terms`` forward selection with
  10-fold cross-validation over the 18 single-column terms,

as median wall times, with the ratio statsmodels / riskvet, and checks that
the estimates agree.  riskvet runs its fits with one BLAS thread (its
products are small; see ``riskvet.modelling.fitter.one_blas_thread``); statsmodels is
timed with default and with single-thread BLAS and given the better of the
two.  The data are invented for timing only.
"""

from __future__ import annotations

import statistics
import time
import warnings

import numpy as np
import pandas as pd


def _data(n: int = 2000, p: int = 18, seed: int = 20260101):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    X[:, 12:] = rng.binomial(1, 0.3, size=(n, p - 12))  # some binary predictors
    beta = np.zeros(p)
    beta[:6] = [0.9, -0.7, 0.5, 0.4, -0.3, 0.25]
    beta[12:14] = [0.6, -0.5]
    latent = X @ beta + rng.logistic(size=n)
    y = np.searchsorted(np.quantile(latent, [0.45, 0.75]), latent)
    cols = [f"x{j + 1}" for j in range(p)]
    return pd.DataFrame(X, columns=cols), y


def _median_s(func, repeats: int) -> float:
    func()  # warm-up
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    from statsmodels.miscmodels.ordinal_model import OrderedModel
    from threadpoolctl import threadpool_limits

    from riskvet.modelling.fitter import _fit_arrays, fit_cumulative
    from riskvet.modelling.selection import select_terms

    X, y = _data()
    Xa = X.to_numpy()
    n, p = Xa.shape
    K = int(y.max()) + 1
    warnings.simplefilter("ignore")
    print(f"data: n = {n}, {p} predictors, K = {K}, level counts {np.bincount(y).tolist()}")

    model = OrderedModel(y, Xa, distr="logit")
    res_sm = None

    def run_sm():
        nonlocal res_sm
        res_sm = model.fit(method="bfgs", disp=False, maxiter=10000)

    # The reference gets its better time of default and single-thread BLAS.
    t_sm_default = _median_s(run_sm, 5)
    with threadpool_limits(limits=1, user_api="blas"):
        t_sm_single = _median_s(run_sm, 5)
    t_sm = min(t_sm_default, t_sm_single)
    # riskvet limits BLAS to one thread inside its fits, so no outer limit here.
    fit = fit_cumulative(X, y)
    t_cold = _median_s(lambda: fit_cumulative(X, y), 200)
    t_lean = _median_s(lambda: _fit_arrays(Xa, y, K), 200)
    t_warm_self = _median_s(lambda: fit_cumulative(X, y, start=fit), 200)
    rng = np.random.default_rng(1)
    boot_w = [rng.multinomial(n, np.full(n, 1.0 / n)).astype(float) for _ in range(50)]
    it = iter(range(10**9))
    t_boot_cold = _median_s(lambda: fit_cumulative(X, y, weights=boot_w[next(it) % 50]), 200)
    it = iter(range(10**9))
    t_boot_warm = _median_s(lambda: fit_cumulative(X, y, weights=boot_w[next(it) % 50], start=fit), 200)
    groups = {c: [c] for c in X.columns}
    sel = select_terms(X, y, groups=groups, seed=0)
    t_sel = _median_s(lambda: select_terms(X, y, groups=groups, seed=0), 7)

    par = np.asarray(res_sm.params)
    theta_sm = model.transform_threshold_params(par)[1:-1]
    est_sm = np.r_[theta_sm, par[:p]]
    tight = OrderedModel(y, Xa, distr="logit").fit(method="bfgs", disp=False, maxiter=10000, gtol=1e-8)
    par_t = np.asarray(tight.params)
    est_tight = np.r_[OrderedModel(y, Xa, distr="logit").transform_threshold_params(par_t)[1:-1], par_t[:p]]
    est = fit.params.to_numpy()

    print()
    print(f"{'fit':<58}{'median':>12}{'statsmodels/this':>18}")
    print(f"{'statsmodels OrderedModel.fit(method=bfgs), default BLAS':<58}{1000 * t_sm_default:>10.3f} ms")
    print(f"{'statsmodels OrderedModel.fit(method=bfgs), one BLAS thread':<58}{1000 * t_sm_single:>10.3f} ms")
    rows = [
        ("statsmodels reference (the faster of the two)", t_sm),
        ("riskvet fit_cumulative, cold start", t_cold),
        ("riskvet _fit_arrays (lean entry), cold start", t_lean),
        ("riskvet fit_cumulative, warm start from its own fit", t_warm_self),
        ("riskvet fit_cumulative, bootstrap weights, cold", t_boot_cold),
        ("riskvet fit_cumulative, bootstrap weights, warm", t_boot_warm),
    ]
    for name, t in rows:
        print(f"{name:<58}{1000 * t:>10.3f} ms{t_sm / t:>17.0f}x")
    print()
    print(f"iterations: cold {fit.iterations}, warm from own fit {fit_cumulative(X, y, start=fit).iterations}, "
          f"bootstrap warm {fit_cumulative(X, y, weights=boot_w[0], start=fit).iterations}, "
          f"bootstrap cold {fit_cumulative(X, y, weights=boot_w[0]).iterations}")
    print(f"max |estimate difference| vs statsmodels bfgs (default gtol): {np.abs(est - est_sm).max():.2e}")
    print(f"max |estimate difference| vs statsmodels bfgs (gtol 1e-8):    {np.abs(est - est_tight).max():.2e}")
    print(f"log-likelihood: riskvet {fit.loglik:.10f}, statsmodels {res_sm.llf:.10f} (gtol 1e-8: {tight.llf:.10f})")
    se_sm = np.asarray(tight.bse)[:p]
    print(f"max relative SE difference (coefficients) vs statsmodels gtol 1e-8: {np.abs(fit.se.to_numpy()[K - 1:] / se_sm - 1).max():.2e}")
    print()
    print(f"forward selection, 10-fold CV, 18 candidate terms: {1000 * t_sel:.1f} ms (target < 300 ms)")
    print(f"  chosen size {sel.size}: {', '.join(sel.terms)}")
    _large()


def _large(n: int = 1_000_000) -> None:
    """One fit of n = 1,000,000 rows, 18 predictors, 3 levels: time and memory against the design's own products.

    The references, measured in the same run: one product ``X'X`` of the
    design (the arithmetic of one Hessian, one BLAS thread) and one
    transposing copy of it (the memory traffic of one pass).  Memory is the
    peak of numpy's allocations during the fit (tracemalloc), as a multiple
    of the design matrix (target at most 3); time against the target 0.5 s.
    """
    import tracemalloc

    from threadpoolctl import threadpool_limits

    from riskvet.modelling.fitter import fit_cumulative

    X, y = _data(n=n)
    Xa = X.to_numpy()
    with threadpool_limits(limits=1, user_api="blas"):
        t_gram = _median_s(lambda: Xa.T @ Xa, 3)
    t_copy = _median_s(lambda: np.ascontiguousarray(Xa.T), 3)
    fit_cumulative(X.iloc[:2000], y[:2000])
    times, peaks = [], []
    for _ in range(3):
        tracemalloc.start()
        t0 = time.perf_counter()
        fit = fit_cumulative(X, y)
        times.append(time.perf_counter() - t0)
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
    t_fit = statistics.median(times)
    print()
    print(f"one fit, n = {n:,}, {X.shape[1]} predictors, K = 3 (fit_cumulative on a DataFrame, {fit.iterations} Newton iterations): "
          f"{t_fit:.2f} s (target <= 0.5 s, ratio {t_fit / 0.5:.2f}); one X'X product {1000 * t_gram:.0f} ms "
          f"(fit / product = {t_fit / t_gram:.0f}), one transposing copy {1000 * t_copy:.0f} ms")
    print(f"  peak of numpy allocations during the fit: {max(peaks) / Xa.nbytes:.2f} x the design matrix "
          f"({Xa.nbytes / 2**20:.0f} MiB; target <= 3)")


if __name__ == "__main__":
    main()
