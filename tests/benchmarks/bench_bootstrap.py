"""Time bootstrap internal validation of a whole derivation procedure.

Run:  .venv/bin/python tests/benchmarks/bench_bootstrap.py [--n-boot 200] [--n-jobs 2] [--sm-replicates 1]

Data shaped like a real derivation cohort: n = 2,000 patients, 3 ordered
outcome levels, 18 candidate predictors (the demo generator's 14, one of them
a 4-knot spline and one categorical, plus 4 pure-noise measurements), forward
selection with the model size chosen by 10-fold cross-validation.  Every
replicate repeats knot placement, selection (with its cross-validation) and
fitting.

Prints

* wall time of ``validate_internally`` with ``n_boot`` replicates on ``n_jobs``
  local worker processes (target: 200 replicates on 2 cores in at most 10 s),
  with the ratio measured / target;
* peak memory of the run: the largest sum of resident set sizes of this
  process and its worker processes, sampled every 0.1 s with psutil
  (target: under 1 GiB), and ``resource.getrusage`` maxima for comparison;
* the time of one replicate in one process (target at most 80 ms), on the
  compiled loops the replicates run on and on the numpy reference path
  (``riskvet.modelling.kernels``), with the ratio and the largest relative
  difference between the two replicates' measures;
* the time of one replicate in one process, and of the same procedure with
  statsmodels ``OrderedModel`` fits (forward selection where each step fits
  every remaining candidate and adds the one with the smallest
  likelihood-ratio p-value, model size by 10-fold cross-validated test
  log-likelihood, final path on all data), with the ratio.  The statsmodels
  procedure chooses terms by likelihood-ratio tests rather than score tests,
  the way one writes it with that library; the work it does per replicate is
  the same kind (a forward path in each of 10 folds and on all data).

The data are invented for timing only.
"""

from __future__ import annotations

import argparse
import math
import os
import resource
import sys
import tempfile
import threading
import time
import warnings
from pathlib import Path

import numpy as np
import yaml

N = 2000
TARGET_SECONDS = 10.0
TARGET_REPLICATE_MS = 80.0
NOISE = ("noise_a", "noise_b", "noise_c", "noise_d")


def _study_and_data(folder: Path, n_boot: int, n_jobs: int):
    from riskvet import demo
    from riskvet.intake.outcome import outcome_codes
    from riskvet.chain.scaffold import new_study_folder
    from riskvet.intake.study import load_study

    path = new_study_folder(folder, n_derivation=100, n_validation=50, n_ratings=10, n_boot=n_boot, missing_data="complete_case")
    raw = yaml.safe_load(path.read_text(encoding="utf-8"))
    for name in NOISE:
        raw["predictors"]["candidates"][name] = "linear"
    raw["selection"].update({"method": "forward", "folds": 10})
    raw["internal_validation"].update({"n_boot": n_boot, "max_failed_share": 0.2})
    raw["compute"]["n_jobs"] = n_jobs
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    study = load_study(path)
    frame = demo.draw(N, seed=20260301)
    rng = np.random.default_rng(20260302)
    for name in NOISE:
        frame[name] = np.round(rng.normal(size=N), 2)
    y = outcome_codes(study, frame[study.outcome.column])
    return study, frame, y


class _PeakMemory:
    """Largest total RSS of this process and its children, sampled in a thread."""

    def __init__(self, interval: float = 0.1):
        import psutil

        self._proc = psutil.Process()
        self._psutil = psutil
        self.interval = interval
        self.peak = 0
        self.cpu: dict[int, float] = {}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _sample(self) -> int:
        total = 0
        for p in [self._proc, *self._proc.children(recursive=True)]:
            try:
                total += p.memory_info().rss
                t = p.cpu_times()
                self.cpu[p.pid] = t.user + t.system
            except (self._psutil.NoSuchProcess, self._psutil.AccessDenied):
                pass
        return total

    @property
    def cpu_seconds(self) -> float:
        """CPU time of this process and its workers (last sample of each)."""
        return float(sum(self.cpu.values()))

    def _run(self) -> None:
        while not self._stop.is_set():
            self.peak = max(self.peak, self._sample())
            self._stop.wait(self.interval)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self.peak = max(self.peak, self._sample())


# -- the same procedure with statsmodels ------------------------------------------------------


def _sm_fit(y, X, start):
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    model = OrderedModel(y, X, distr="logit")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = model.fit(start_params=start, method="bfgs", maxiter=500, disp=False)
    return model, res


def _sm_forward(X, y, groups, forced, test=None):
    """Forward path with OrderedModel fits; returns terms in order and held-out log-lik per size."""
    from scipy import stats

    m = int(y.max())
    terms = list(forced)
    cols = [c for t in terms for c in groups[t]]
    model, res = _sm_fit(y, X[:, cols], None)
    params = res.params
    path_ll = []

    def held_out(cols, params):
        if test is None:
            return math.nan
        Xt, yt = test
        from statsmodels.miscmodels.ordinal_model import OrderedModel

        return float(OrderedModel(yt, Xt[:, cols] if cols else np.zeros((len(yt), 0)), distr="logit").loglike(params)) / len(yt)

    path_ll.append(held_out(cols, params))
    remaining = [t for t in groups if t not in terms]
    while remaining:
        best = None
        for t in remaining:
            new_cols = cols + list(groups[t])
            # OrderedModel orders parameters as coefficients, then thresholds.
            start = np.r_[params[: len(cols)], np.zeros(len(groups[t])), params[len(cols):]]
            _, r = _sm_fit(y, X[:, new_cols], start)
            lr = 2.0 * (r.llf - res.llf)
            p = stats.chi2.sf(max(lr, 0.0), len(groups[t]))
            if best is None or p < best[0]:
                best = (p, t, r, new_cols)
        _, t, res, cols = best
        params = res.params
        terms.append(t)
        remaining.remove(t)
        path_ll.append(held_out(cols, params))
    return terms, path_ll


def _sm_replicate(study, frame, y, rng):
    """One bootstrap replicate of the procedure with statsmodels fits."""
    from riskvet.validation.crossval import stratified_folds
    from riskvet.modelling.derive import candidate_design

    idx = rng.integers(0, len(y), size=len(y))
    fb, yb = frame.iloc[idx].reset_index(drop=True), y[idx]
    design = candidate_design(study, fb)
    X = design.transform(fb).to_numpy(dtype=float)
    names = list(design.columns)
    groups = {t: [names.index(c) for c in cols] for t, cols in design.term_columns.items()}
    forced = [t for t in study.predictors.forced if t in groups]
    fold = stratified_folds(yb, n_folds=study.selection.folds, rng=rng)
    curves = []
    for f in range(study.selection.folds):
        tr, te = fold != f, fold == f
        _, ll = _sm_forward(X[tr], yb[tr], groups, forced, test=(X[te], yb[te]))
        curves.append(ll)
    size = int(np.argmax(np.mean(np.array(curves), axis=0)))
    terms, _ = _sm_forward(X, yb, groups, forced)
    return terms[: len(forced) + size]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n-boot", type=int, default=200)
    parser.add_argument("--n-jobs", type=int, default=2)
    parser.add_argument("--sm-replicates", type=int, default=1, help="replicates timed with statsmodels fits (each takes minutes)")
    args = parser.parse_args()

    from riskvet.validation.bootstrap import _Payload, _one_thread, _replicate, validate_internally

    with tempfile.TemporaryDirectory() as tmp:
        study, frame, y = _study_and_data(Path(tmp), args.n_boot, args.n_jobs)
        print(f"data: n = {len(y)}, levels {np.bincount(y).tolist()}, {len(study.predictors.in_analysis)} candidate predictors, "
              f"forward selection with {study.selection.folds}-fold CV; machine: {os.cpu_count()} cores")

        cpu_before = sum(resource.getrusage(who).ru_utime + resource.getrusage(who).ru_stime
                         for who in (resource.RUSAGE_SELF, resource.RUSAGE_CHILDREN))
        with _PeakMemory() as mem:
            start = time.perf_counter()
            result = validate_internally(study, (frame, y), n_boot=args.n_boot, seed=study.internal_validation.seed,
                                         n_jobs=args.n_jobs, progress=False)
            wall = time.perf_counter() - start
        self_max = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        child_max = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
        print(f"validate_internally: {args.n_boot} replicates on {args.n_jobs} workers in {wall:.1f} s "
              f"({wall / args.n_boot * 1000:.0f} ms per replicate); target for 200 on 2 cores: <= {TARGET_SECONDS:.0f} s; "
              f"ratio measured / target (scaled to 200 replicates) = {wall * 200 / args.n_boot / TARGET_SECONDS:.2f}")
        cpu = mem.cpu_seconds - cpu_before
        print(f"  CPU time of this process and the workers during the run: {cpu:.1f} s; with {args.n_jobs} cores free "
              f"for this run alone that is about {cpu / args.n_jobs:.1f} s of wall time (other load on the machine "
              f"during the run lengthens the measured wall time)")
        print(f"  {result.n_succeeded} succeeded, failures {result.failure_counts or 'none'}; "
              f"model sizes {result.stability.model_sizes}")
        print(f"peak memory (this process + workers, psutil RSS sum): {mem.peak / 2**20:.0f} MiB (target < 1024 MiB); "
              f"getrusage max RSS self {self_max:.0f} MiB, largest finished child {child_max:.0f} MiB")

        # One replicate in this process, one BLAS thread, for the comparison.

        from riskvet.modelling import kernels

        payload = _Payload(study=study, frame=frame[list(study.predictors.in_analysis)], y=y, K=3, link="logit")
        children = np.random.SeedSequence(99).spawn(4)
        times = {True: [], False: []}
        records = {True: [], False: []}
        allowed = kernels._ALLOWED
        with _one_thread():
            with kernels.compiled():  # as validate_internally runs every replicate
                _replicate(payload, (0, children[0]))  # numba's import and cache read, once per process
            for i, child in enumerate(children[1:], 1):
                for compiled in (True, False):  # alternated, so that other load falls on both alike
                    # compiled() reads the switch when the block is entered
                    kernels._ALLOWED = allowed and compiled
                    with kernels.compiled():
                        assert kernels.enabled() == (allowed and compiled)
                        t0 = time.perf_counter()
                        records[compiled].append(_replicate(payload, (i, child)))
                        times[compiled].append(time.perf_counter() - t0)
        kernels._ALLOWED = allowed
        ours = float(np.median(times[True]))
        reference = float(np.median(times[False]))
        worst = max(abs(a[part][k] - b[part][k]) / max(abs(b[part][k]), 1e-12)
                    for a, b in zip(records[True], records[False]) for part in ("boot", "test", "oob")
                    for k in a[part] if np.isfinite(a[part][k]))
        print(f"one replicate, one process: {ours * 1000:.0f} ms (median of {len(times[True])}; target <= {TARGET_REPLICATE_MS:.0f} ms, "
              f"ratio {ours * 1000 / TARGET_REPLICATE_MS:.2f}); numpy reference path {reference * 1000:.0f} ms; "
              f"ratio numpy / compiled = {reference / ours:.2f}; largest relative difference of the measures {worst:.1e}"
              + ("" if allowed else " (compiled loops unavailable or switched off: both runs on numpy)"))

        # One fit of the model with every candidate column, each fitter, same data.
        from riskvet.modelling.derive import candidate_design
        from riskvet.modelling.fitter import fit_cumulative
        from statsmodels.miscmodels.ordinal_model import OrderedModel

        design = candidate_design(study, frame)
        X = design.transform(frame)
        with _one_thread(), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            t0 = time.perf_counter()
            for _ in range(5):
                fit_cumulative(X, y)
            fit_ours = (time.perf_counter() - t0) / 5
            t0 = time.perf_counter()
            sm_res = OrderedModel(y, X.to_numpy(dtype=float), distr="logit").fit(method="bfgs", maxiter=2000, disp=False)
            fit_sm = time.perf_counter() - t0
        print(f"one fit with all {X.shape[1]} candidate columns: riskvet fit_cumulative {fit_ours * 1000:.0f} ms, "
              f"statsmodels OrderedModel (BFGS) {fit_sm * 1000:.0f} ms; ratio {fit_sm / fit_ours:.0f} "
              f"(log-likelihoods {fit_cumulative(X, y).loglik:.4f} and {sm_res.llf:.4f})")

        if args.sm_replicates > 0:
            rng = np.random.default_rng(7)
            sm_times = []
            with _one_thread():
                for _ in range(args.sm_replicates):
                    t0 = time.perf_counter()
                    _sm_replicate(study, frame, y, rng)
                    sm_times.append(time.perf_counter() - t0)
            theirs = float(np.median(sm_times))
            print(f"same procedure with statsmodels OrderedModel fits: {theirs:.1f} s per replicate "
                  f"(median of {len(sm_times)}); ratio statsmodels / riskvet = {theirs / ours:.0f} "
                  "(the statsmodels path fits every candidate at every step; riskvet ranks candidates by score tests "
                  "and fits once per step)")
    sys.stdout.flush()


if __name__ == "__main__":
    main()
