"""Time the cluster bootstrap and internal-external cross-validation against the row bootstrap.

Run:  .venv/bin/python tests/benchmarks/bench_clusters.py [--n-boot 200] [--n-jobs 2] [--clusters 10]

The data are those of ``bench_bootstrap.py`` (n = 2,000, 3 ordered levels,
18 candidate predictors, forward selection with 10-fold cross-validation),
with every row given one of ``--clusters`` invented sites of unequal size
(site shares drawn from a Dirichlet(2, ..., 2) distribution).  Prints, each
measured in this run:

* wall time of leave-one-cluster-out internal-external cross-validation
  (:func:`riskvet.validation.iecv.internal_external_validation`, the whole
  procedure repeated with each site left out, then the per-site measures,
  the pooling and the predictor-effect diagnostic) on ``n_jobs`` workers
  (target: under 10 s on 2 cores with 10 sites);
* wall time of ``validate_internally`` with ``n_boot`` replicates resampling
  rows, and resampling whole sites, and their ratio (target: the cluster
  bootstrap no more than 1.2 times the row bootstrap);
* peak memory (largest summed RSS of this process and its workers) of each.

The data and sites are invented for timing only.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_bootstrap import N, _PeakMemory, _study_and_data  # noqa: E402


def _sites(n: int, k: int, seed: int = 20261203) -> np.ndarray:
    rng = np.random.default_rng(seed)
    share = rng.dirichlet(np.full(k, 2.0))
    return np.array([f"site-{j:02d}" for j in rng.choice(k, size=n, p=share)], dtype=object)


def _timed(label: str, func):
    with _PeakMemory() as memory, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        start = time.perf_counter()
        result = func()
        wall = time.perf_counter() - start
    print(f"{label:<46} {wall:8.2f} s   peak {memory.peak / 2**20:7.0f} MiB")
    return result, wall


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n-boot", type=int, default=200)
    parser.add_argument("--n-jobs", type=int, default=2)
    parser.add_argument("--clusters", type=int, default=10)
    args = parser.parse_args()

    from riskvet.validation.bootstrap import validate_internally
    from riskvet.validation.iecv import internal_external_validation

    with tempfile.TemporaryDirectory() as tmp:
        study, frame, y = _study_and_data(Path(tmp) / "bench", args.n_boot, args.n_jobs)
    sites = _sites(N, args.clusters)
    sizes = np.unique(sites, return_counts=True)[1]
    print(f"n = {N}, {args.clusters} sites of {sizes.min()} to {sizes.max()} rows, B = {args.n_boot}, n_jobs = {args.n_jobs}")

    iecv, iecv_wall = _timed(f"leave-one-site-out ({args.clusters} sites)", lambda: internal_external_validation(
        study, (frame, y), clusters=sites, n_jobs=args.n_jobs))
    rows, row_wall = _timed(f"bootstrap, rows resampled (B = {args.n_boot})", lambda: validate_internally(
        study, (frame, y), n_boot=args.n_boot, seed=11, n_jobs=args.n_jobs, progress=False))
    whole, cluster_wall = _timed(f"bootstrap, sites resampled (B = {args.n_boot})", lambda: validate_internally(
        study, (frame, y), n_boot=args.n_boot, seed=11, n_jobs=args.n_jobs, progress=False, clusters=sites))

    print()
    print(f"leave-one-site-out: {iecv_wall:.2f} s against the 10 s target (ratio {iecv_wall / 10.0:.2f}); "
          f"{sum(c.status == 'ok' for c in iecv.clusters)} of {iecv.n_clusters} derivations gave a model")
    print(f"cluster bootstrap / row bootstrap: {cluster_wall / row_wall:.2f} (target <= 1.20); "
          f"replicates with a model: rows {rows.n_succeeded}, sites {whole.n_succeeded}")
    print(f"leave-one-site-out / one bootstrap replicate (rows): {iecv_wall / (row_wall / args.n_boot):.1f}")


if __name__ == "__main__":
    main()
