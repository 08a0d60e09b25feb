"""Time the performance measures for n = 2,000 patients and K = 3 ordered levels.

Run:  .venv/bin/python tests/benchmarks/bench_metrics.py

Prints the median wall time of

* ``performance_summary`` (the lean pass the bootstrap calls; target < 20 ms),
* each full result function,
* the same measures from reference libraries in the same run (scikit-learn
  ``roc_auc_score``, statsmodels ``GLM``/``Logit`` and ``lowess``), with the
  ratio riskvet / reference.

The data are invented for timing only.
"""

from __future__ import annotations

import statistics
import time
import warnings

import numpy as np
from scipy import special


def _data(n: int = 2000, seed: int = 20260101) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 4))
    lp = x @ np.array([0.9, -0.6, 0.4, 0.2])
    cum = special.expit(np.array([-0.4, 1.1])[None, :] - lp[:, None])
    y = (rng.random(n)[:, None] > cum).sum(axis=1)
    # predictions from a slightly wrong model, so the calibration fits do real work
    cum_hat = special.expit(np.array([-0.3, 1.0])[None, :] - 1.15 * lp[:, None])
    prob = np.diff(np.c_[np.zeros(n), cum_hat, np.ones(n)], axis=1)
    return y, prob


def _median_ms(func, repeats: int) -> float:
    func()  # warm-up (imports, caches)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return 1000.0 * statistics.median(times)


def main() -> None:
    from sklearn.metrics import roc_auc_score
    import statsmodels.api as sm
    from statsmodels.nonparametric.smoothers_lowess import lowess

    from riskvet import metrics

    y, prob = _data()
    n, k = prob.shape
    cut_p = [prob[:, j + 1 :].sum(axis=1) for j in range(k - 1)]
    warnings.simplefilter("ignore")

    rows: list[tuple[str, float]] = []
    summary_ms = _median_ms(lambda: metrics.performance_summary(y, prob), 50)
    rows.append(("performance_summary (lean pass)", summary_ms))
    full = {
        "ordinal_discrimination": lambda: metrics.ordinal_discrimination(y, prob),
        "ordinal_calibration": lambda: metrics.ordinal_calibration(y, prob),
        "overall_accuracy": lambda: metrics.overall_accuracy(y, prob),
        "ordinal_net_benefit (99 thresholds)": lambda: metrics.ordinal_net_benefit(y, prob, thresholds=np.linspace(0.01, 0.99, 99)),
        "threshold_table (cut 0, 19 thresholds)": lambda: metrics.threshold_table(y > 0, cut_p[0], thresholds=np.linspace(0.05, 0.95, 19)),
    }
    full_total = 0.0
    for name, func in full.items():
        ms = _median_ms(func, 20)
        full_total += ms
        rows.append((name, ms))
    rows.append(("all full result functions", full_total))

    print(f"riskvet performance measures, n = {n}, K = {k} (median of repeated runs)")
    for name, ms in rows:
        print(f"  {name:<42s} {ms:8.2f} ms")
    print(f"  target for the lean pass: < 20 ms -> {'met' if summary_ms < 20 else 'NOT met'}")

    # Reference libraries doing the equivalent core work for the two cuts.
    lp = [special.logit(np.clip(p, 1e-10, 1 - 1e-10)) for p in cut_p]
    yc = [(y > j).astype(int) for j in range(k - 1)]

    def ref_auc():
        for j in range(k - 1):
            roc_auc_score(yc[j], cut_p[j])

    def ref_recalibration():
        for j in range(k - 1):
            sm.GLM(yc[j], np.ones(n), family=sm.families.Binomial(), offset=lp[j]).fit()
            sm.Logit(yc[j], sm.add_constant(lp[j])).fit(disp=0)

    def ref_smooth():
        for j in range(k - 1):
            lowess(yc[j].astype(float), cut_p[j], frac=0.75, it=0)

    def own_auc():
        for j in range(k - 1):
            metrics.concordance(yc[j], cut_p[j])

    def own_recalibration():
        from riskvet.measures.calibration import _recalibrate

        for j in range(k - 1):
            _recalibrate(yc[j], lp[j])

    def own_smooth():
        from riskvet.measures.calibration import _smooth

        for j in range(k - 1):
            order = np.argsort(cut_p[j])
            _smooth(yc[j][order].astype(float), cut_p[j][order], 0.75, with_se=False)

    print("against reference libraries (both cuts):")
    for label, own, ref, ref_name in (
        ("C statistic (riskvet with DeLong SE)", own_auc, ref_auc, "sklearn roc_auc_score"),
        ("recalibration intercept + slope fits", own_recalibration, ref_recalibration, "statsmodels GLM + Logit"),
        ("smoothed calibration curve", own_smooth, ref_smooth, "statsmodels lowess it=0, every point"),
    ):
        own_ms = _median_ms(own, 20)
        ref_ms = _median_ms(ref, 10)
        print(f"  {label:<40s} {own_ms:7.2f} ms   {ref_name}: {ref_ms:7.2f} ms   ratio {own_ms / ref_ms:5.2f}")


if __name__ == "__main__":
    main()
