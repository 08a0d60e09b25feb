"""Simulate multiple imputation against complete cases when predictors are missing at random.

Run:  .venv/bin/python tests/benchmarks/bench_imputation_simulation.py [--quick] [--reps 200] [--n 500]
          [--m 10] [--seed 20261215] [--outcome binary|ordinal] [--iterations 10]

Each of ``--reps`` data sets (default 200; ``--quick`` 20) has ``--n`` rows
(default 500) drawn from a known model with three correlated predictors:
``(x1, x2, z3)`` standard normal with correlations 0.5 (x1, x2), 0.4 (x1, z3)
and 0.3 (x2, z3), ``x3 = [z3 > 0.5]`` (binary, about 31 % ones), and

* ``--outcome binary``: logistic regression, P(y = 1) = expit(x beta - theta)
  with theta = 1.0 (an intercept of -1.0) and beta = (0.8, 0.6, 0.7),
  about 36 % events;
* ``--outcome ordinal``: proportional odds with 3 levels,
  P(y <= j) = expit(theta_j - x beta), theta = (0.0, 1.6), the same beta,
  levels about 46 / 28 / 26 %.

The parameters are those of :func:`riskvet.models.fit_cumulative`: thresholds
``y<=j`` first, then the coefficients.

Missing values, an invented mechanism that is missing at random (it uses
only the outcome and x1, which are always observed): a row's record is
incomplete with probability

    expit(-2.0 - 0.5 x1 + s (1.2 + 1.5 x1)),    s = y / (K - 1),

so patients without the event rarely lack a value, and those with the event
(the top level most) lack one more often the higher their x1.  About 26 %
of the rows are incomplete; in an incomplete row x2 only is missing with
probability 0.40, x3 only 0.25, both 0.35.  Because the selection depends
on the outcome *and interacts with x1*, the complete-case log odds ratio of
x1 is biased towards zero (by about -0.4 of the true 0.8 for the binary
outcome, -0.3 for the ordinal one, at n = 500), and so are the
thresholds; the coefficients of x2 and x3 are nearly unbiased, since
selection that does not involve them shifts only the intercept of a
logistic model.  The coefficient of x1 is therefore the one the verdict
judges.

Per data set three analyses, each a ``fit_cumulative`` of y on x1, x2, x3:

* full data, before any value is deleted (Wald intervals);
* complete cases (Wald intervals);
* multiple imputation: :func:`riskvet.imputation.impute` with ``m``
  imputations (predictive mean matching for x2, logistic regression for x3,
  the outcome a predictor in both imputation models as an indicator per
  level), each completed data set fitted, and the m fits pooled by
  :func:`riskvet.imputation.pool` (Rubin's rules, Rubin's large-sample
  degrees of freedom, t intervals).

Prints per parameter and method the mean estimate, bias against the true
value with its Monte Carlo standard error (empirical SE / sqrt(R)), the
empirical SE (SD of the R estimates), the mean model SE, and the coverage of
the 95 % interval with its Monte Carlo SE sqrt(p (1 - p) / R).  Then a
verdict:

* complete-case bias of the x1 coefficient is visible if |bias| > 2 Monte
  Carlo SE;
* multiple imputation removes most of it if |bias_MI| < |bias_CC| / 2;
* multiple-imputation coverage is acceptable for a parameter if it lies
  within 3 Monte Carlo SE of 0.95, the SE taken at the nominal 0.95,
  sqrt(0.95 * 0.05 / R) (at an estimated coverage of 1 the estimated
  SE would be 0).

Finally the time per data set of the imputation analysis (imputing, m fits,
pooling) and, as the reference measured in the same run, of the full-data
fit, with their ratio, and the load average of the machine before and after.
Fits use one BLAS thread.  Data set r draws its data and its imputation seed
from child r of ``numpy.random.SeedSequence(seed).spawn(R)``, so a data set
is the same whatever R.

The model, data and missingness mechanism are invented for this simulation.
"""

from __future__ import annotations

import argparse
import math
import os
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import special, stats

PREDICTORS = ("x1", "x2", "x3")
BETA = np.array([0.8, 0.6, 0.7])
THRESHOLDS = {"binary": np.array([1.0]), "ordinal": np.array([0.0, 1.6])}
CORRELATION = np.array([[1.0, 0.5, 0.4], [0.5, 1.0, 0.3], [0.4, 0.3, 1.0]])
X3_CUT = 0.5
# logit P(incomplete) = a + b x1 + s (c + d x1), s = y / (K - 1)
MECHANISM = (-2.0, -0.5, 1.2, 1.5)
# Given an incomplete row: x2 only, x3 only, both.
PATTERN_SHARES = (0.40, 0.25, 0.35)
# The coefficient whose complete-case bias the verdict judges: the complete predictor that, with the outcome,
# drives the missingness.
JUDGED = "x1"
METHOD_LABELS = {"full": "full data", "cc": "complete cases", "mi": "multiple imputation"}
CONFIDENCE = 0.95


def _simulate(rng: np.random.Generator, n: int, outcome: str) -> tuple[pd.DataFrame, np.ndarray, pd.DataFrame]:
    """Full predictors, outcome codes, and the predictors with values deleted."""
    z = rng.multivariate_normal(np.zeros(3), CORRELATION, size=n)
    full = pd.DataFrame({"x1": z[:, 0], "x2": z[:, 1], "x3": (z[:, 2] > X3_CUT).astype(float)})
    theta = THRESHOLDS[outcome]
    eta = full.to_numpy() @ BETA
    # P(y <= j) = P(eta + u <= theta_j) with u standard logistic
    y = np.searchsorted(theta, eta + rng.logistic(size=n)).astype(np.int64)
    a, b, c, d = MECHANISM
    s = y / theta.size
    x1 = full["x1"].to_numpy()
    incomplete = rng.random(n) < special.expit(a + b * x1 + s * (c + d * x1))
    pattern = rng.choice(3, size=n, p=PATTERN_SHARES)
    deleted = full.copy()
    deleted.loc[incomplete & (pattern != 1), "x2"] = np.nan
    deleted.loc[incomplete & (pattern != 0), "x3"] = np.nan
    return full, y, deleted


@dataclass
class _Tally:
    """Per method: estimates, model SEs, interval hits (rows = data sets); times; counts."""

    names: list = field(default_factory=list)
    estimate: dict = field(default_factory=lambda: {k: [] for k in METHOD_LABELS})
    se: dict = field(default_factory=lambda: {k: [] for k in METHOD_LABELS})
    covered: dict = field(default_factory=lambda: {k: [] for k in METHOD_LABELS})
    seconds: dict = field(default_factory=lambda: {k: 0.0 for k in METHOD_LABELS})
    incomplete_share: list = field(default_factory=list)
    missing_share: list = field(default_factory=list)
    n_complete: list = field(default_factory=list)
    fallbacks: int = 0
    fit_warnings: dict = field(default_factory=dict)
    failed: list = field(default_factory=list)


def _count_warnings(caught, into: dict) -> None:
    for w in caught:
        into[w.category.__name__] = into.get(w.category.__name__, 0) + 1


def _one_data_set(child: np.random.SeedSequence, n: int, outcome: str, m: int, iterations: int, tally: _Tally, truth: np.ndarray) -> None:
    from riskvet.errors import RiskvetError
    from riskvet.imputation import impute, pool
    from riskvet.models import fit_cumulative

    data_stream, impute_stream = child.spawn(2)
    full, y, deleted = _simulate(np.random.default_rng(data_stream), n, outcome)
    K = THRESHOLDS[outcome].size + 1
    crit = stats.norm.ppf(0.5 + CONFIDENCE / 2.0)
    results, seconds = {}, {}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            start = time.perf_counter()
            fit = fit_cumulative(full, y)
            seconds["full"] = time.perf_counter() - start
            results["full"] = (fit.params.to_numpy(), fit.se.to_numpy(), None)
            names = list(fit.params.index)

            start = time.perf_counter()
            keep = deleted.notna().all(axis=1).to_numpy()
            fit = fit_cumulative(deleted[keep], y[keep], n_levels=K)
            seconds["cc"] = time.perf_counter() - start
            results["cc"] = (fit.params.to_numpy(), fit.se.to_numpy(), None)

            start = time.perf_counter()
            frame = deleted.assign(y=pd.Categorical(y, categories=range(K), ordered=True))
            seed = int(impute_stream.generate_state(1, dtype=np.uint32)[0])
            imputations = impute(frame, m=m, seed=seed, iterations=iterations, methods={"x3": "logistic"}, outcome="y")
            fits = [fit_cumulative(imputations.completed(j)[list(PREDICTORS)], y, n_levels=K) for j in range(m)]
            pooled = pool(np.array([f.params.to_numpy() for f in fits]), np.array([f.se.to_numpy() ** 2 for f in fits]),
                          confidence=CONFIDENCE)
            seconds["mi"] = time.perf_counter() - start
            results["mi"] = (np.asarray(pooled.estimate), np.asarray(pooled.se), (np.asarray(pooled.lower), np.asarray(pooled.upper)))
        except RiskvetError as error:
            tally.failed.append(str(error).splitlines()[0])
            return
    _count_warnings(caught, tally.fit_warnings)
    tally.names = names
    for key, (est, se, interval) in results.items():
        lower, upper = interval if interval is not None else (est - crit * se, est + crit * se)
        tally.estimate[key].append(est)
        tally.se[key].append(se)
        tally.covered[key].append((lower <= truth) & (truth <= upper))
        tally.seconds[key] += seconds[key]
    tally.incomplete_share.append(float(np.mean(~keep)))
    tally.missing_share.append(deleted[["x2", "x3"]].isna().mean().to_numpy())
    tally.n_complete.append(int(keep.sum()))
    tally.fallbacks += len(imputations.fallbacks)


def _summary(tally: _Tally, truth: np.ndarray) -> pd.DataFrame:
    rows = []
    for j, name in enumerate(tally.names):
        for key, label in METHOD_LABELS.items():
            est = np.array(tally.estimate[key])[:, j]
            R = est.size
            emp_se = float(est.std(ddof=1))
            cover = float(np.mean(np.array(tally.covered[key])[:, j]))
            rows.append({
                "parameter": name, "true": truth[j], "method": label, "mean": float(est.mean()),
                "bias": float(est.mean() - truth[j]), "mcse_bias": emp_se / math.sqrt(R), "emp_se": emp_se,
                "model_se": float(np.mean(np.array(tally.se[key])[:, j])), "coverage": cover,
                "mcse_coverage": math.sqrt(cover * (1.0 - cover) / R),
            })
    return pd.DataFrame(rows)


def _print_table(table: pd.DataFrame) -> None:
    print(f"{'parameter':<10}{'true':>7}  {'method':<20}{'mean':>8}{'bias':>9}{'(MCSE)':>9}{'emp SE':>8}{'model SE':>9}"
          f"{'coverage':>10}{'(MCSE)':>8}")
    for _, row in table.iterrows():
        print(f"{row.parameter:<10}{row.true:7.2f}  {row.method:<20}{row['mean']:8.3f}{row.bias:+9.3f}{row.mcse_bias:9.3f}"
              f"{row.emp_se:8.3f}{row.model_se:9.3f}{row.coverage:10.3f}{row.mcse_coverage:8.3f}")


def _verdict(table: pd.DataFrame, R: int) -> None:
    def cell(name, method, column):
        return float(table.loc[(table.parameter == name) & (table.method == METHOD_LABELS[method]), column].iloc[0])

    bias_cc, mcse_cc, bias_mi = cell(JUDGED, "cc", "bias"), cell(JUDGED, "cc", "mcse_bias"), cell(JUDGED, "mi", "bias")
    visible = abs(bias_cc) > 2.0 * mcse_cc
    removed = abs(bias_mi) < abs(bias_cc) / 2.0
    print(f"complete-case bias of the {JUDGED} coefficient visible (|bias| > 2 MCSE): {'yes' if visible else 'no'} "
          f"(bias {bias_cc:+.3f}, MCSE {mcse_cc:.3f}, |bias| / MCSE = {abs(bias_cc) / mcse_cc:.1f})")
    print(f"multiple imputation removes most of it (|bias_MI| < |bias_CC| / 2): {'yes' if removed else 'no'} "
          f"(bias_MI {bias_mi:+.3f}, |bias_MI| / |bias_CC| = {abs(bias_mi) / abs(bias_cc):.2f})")
    others = []
    for name in table.parameter.unique():
        if name == JUDGED:
            continue
        b, s, bm, bf = cell(name, "cc", "bias"), cell(name, "cc", "mcse_bias"), cell(name, "mi", "bias"), cell(name, "full", "bias")
        if abs(b) > 2.0 * s:
            others.append(f"{name} (CC {b:+.3f}, MI {bm:+.3f}: {'halved' if abs(bm) < abs(b) / 2.0 else 'not halved'}; "
                          f"full data {bf:+.3f})")
    # A full-data bias of the same size marks the Monte Carlo error of these data sets, not the missing values.
    print(f"other parameters with visible complete-case bias: {'; '.join(others) if others else 'none'}")
    band = 3.0 * math.sqrt(CONFIDENCE * (1.0 - CONFIDENCE) / R)
    mi = table[table.method == METHOD_LABELS["mi"]]
    outside = [f"{r.parameter} {r.coverage:.3f}" for r in mi.itertuples() if abs(r.coverage - CONFIDENCE) > band]
    print(f"multiple-imputation coverage within 3 MCSE of {CONFIDENCE} ([{CONFIDENCE - band:.3f}, {CONFIDENCE + band:.3f}], "
          f"MCSE at the nominal level): {'yes, every parameter' if not outside else 'no: ' + ', '.join(outside)}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=None, help="data sets (default 200; 20 with --quick)")
    parser.add_argument("--n", type=int, default=500, help="rows per data set")
    parser.add_argument("--m", type=int, default=10, help="imputations per data set")
    parser.add_argument("--iterations", type=int, default=10, help="cycles of the chained equations")
    parser.add_argument("--seed", type=int, default=20261215)
    parser.add_argument("--outcome", choices=("binary", "ordinal"), default="binary")
    parser.add_argument("--quick", action="store_true", help="20 data sets unless --reps is given")
    args = parser.parse_args()
    R = args.reps if args.reps is not None else (20 if args.quick else 200)

    from riskvet.models import one_blas_thread

    thresholds = THRESHOLDS[args.outcome]
    truth = np.concatenate([thresholds, BETA])
    load_before = os.getloadavg()
    print(f"{R} data sets of n = {args.n}, {args.outcome} outcome ({thresholds.size + 1} levels); "
          f"imputation: m = {args.m}, {args.iterations} iterations; seed {args.seed}")
    print(f"machine: {os.cpu_count()} cores, load average {load_before[0]:.2f} / {load_before[1]:.2f} / {load_before[2]:.2f} "
          "(1 / 5 / 15 min) at the start")

    tally = _Tally()
    wall = time.perf_counter()
    with one_blas_thread():
        for child in np.random.SeedSequence(args.seed).spawn(R):
            _one_data_set(child, args.n, args.outcome, args.m, args.iterations, tally, truth)
    wall = time.perf_counter() - wall
    done = len(tally.incomplete_share)
    if done < 2:
        raise SystemExit(f"only {done} of {R} data sets analysed; failures: {tally.failed[:3]}")

    shares = np.array(tally.missing_share).mean(axis=0)
    print(f"incomplete rows: mean {np.mean(tally.incomplete_share):.1%} (range {min(tally.incomplete_share):.1%} to "
          f"{max(tally.incomplete_share):.1%}); missing x2 {shares[0]:.1%}, x3 {shares[1]:.1%}; "
          f"complete cases per data set {min(tally.n_complete)} to {max(tally.n_complete)}")
    print(f"data sets analysed {done} of {R}" + (f"; failed: {tally.failed[:3]}" if tally.failed else "")
          + f"; imputation fallbacks {tally.fallbacks}; warnings {tally.fit_warnings or 'none'}")
    print()
    table = _summary(tally, truth)
    _print_table(table)
    print("(thresholds y<=j on the fitter's scale, P(y <= j) = expit(theta_j - x beta); for a binary outcome the "
          "intercept is -theta)")
    print()
    _verdict(table, done)
    print()
    per = {k: v / done for k, v in tally.seconds.items()}
    print(f"time per data set: multiple imputation (impute, {args.m} fits, pool) {per['mi'] * 1000:.0f} ms; "
          f"full-data fit {per['full'] * 1000:.1f} ms (reference); ratio {per['mi'] / per['full']:.0f}; "
          f"complete-case fit {per['cc'] * 1000:.1f} ms")
    load_after = os.getloadavg()
    print(f"whole run {wall:.1f} s; load average at the end {load_after[0]:.2f} / {load_after[1]:.2f} / {load_after[2]:.2f}")


if __name__ == "__main__":
    main()
