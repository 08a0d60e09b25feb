"""Time bootstrap internal validation of the whole derivation procedure under multiple imputation.

Run:  .venv/bin/python tests/benchmarks/bench_imputation.py [--n-boot 200] [--m 10] [--n-jobs 2] [--quick]
          [--sm-replicates 1]

The data and study are those of ``bench_bootstrap.py`` (n = 2,000, 3 ordered
outcome levels, 18 candidate predictors with a forced 4-knot spline and one
categorical, forward selection with the model size chosen by 10-fold
cross-validation), built by its own functions.  Then:

* missing values, an invented mechanism that is missing at random: in each
  of ``heart_rate``, ``systolic_bp``, ``resp_rate`` and ``wbgt`` exactly 10 %
  of the values (200 of 2,000) are deleted, the rows drawn without
  replacement with probability proportional to ``exp(tilt * z)``, z the
  standardised age (always observed), tilt +0.5 for heart rate and systolic
  pressure (older runners lack them more often) and -0.5 for respiratory
  rate and WBGT (younger runners), each column from its own draws of
  ``numpy.random.default_rng(20260303)``;
* the study's ``missing_data`` is replaced by
  ``{method: multiple_imputation, m: M, iterations: 10, seed: 17}``.

``validate_internally`` then imputes the original data m times for the
apparent model, and every replicate resamples the incomplete rows, imputes
the resample m times (``impute_rows``), runs the derivation on the m
completed sets (``derive_imputed``: stacked selection with its
cross-validation, Rubin-pooled fit) and measures the model on every
completed resample and every completed original.  The (frame, y) pair is
passed as ``bench_bootstrap.py`` passes it, so rows (not tents) are
resampled.

Prints

* the load average at start and end (other work on the machine lengthens
  every time below);
* wall time of ``validate_internally`` with ``n_boot`` replicates on
  ``n_jobs`` local worker processes, and its ratio to the target (200
  replicates, m = 10, on 2 cores in at most 5 minutes);
* CPU time of this process and its workers during the run;
* peak memory: the largest sum of resident set sizes of this process and
  its workers, sampled every 0.1 s with psutil (target at most 2 GiB), and
  the ``resource.getrusage`` maxima (self; children counts only workers
  that have exited, and the reusable worker processes outlive the run);
* one replicate in one process with one BLAS thread, timed in parts on the
  package path (``impute_rows``, ``derive_imputed``, predictions of the
  pooled model on the m completed resamples) and as the run executes it
  (the package's replicate function, which also measures the model on the
  m completed originals and the rows out of bag);
* the same replicate written with statsmodels: ``MICEData`` (m chains of
  ``iterations`` cycles each, as many cycles as the package; the outcome
  codes a numeric column in every imputation model) makes m completed sets
  of the same resample, ``OrderedModel`` is fitted on each with the terms
  (and knots) the package's derivation selected on that resample, the fits
  are pooled by Rubin's rules with numpy, and the pooled model predicts on
  the m completed sets.  It does no selection and no cross-validation,
  which flatters it: the ratio package / statsmodels compares a procedure
  with selection against one without.

``--quick`` (B = 4, m = 3, one package replicate timed) checks that the
script runs.  The data are invented for timing only.
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import yaml

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_bootstrap import _PeakMemory, _sm_fit, _study_and_data  # noqa: E402

#: Columns given missing values, with the tilt of their missingness on standardised age.
INCOMPLETE = {"heart_rate": 0.5, "systolic_bp": 0.5, "resp_rate": -0.5, "wbgt": -0.5}
MISSING_SHARE = 0.10
MISSING_SEED = 20260303
ITERATIONS = 10
IMPUTATION_SEED = 17
TARGET_SECONDS = 300.0
TARGET_MIB = 2048.0


def _load() -> str:
    one, five, fifteen = os.getloadavg()
    return f"{one:.2f} {five:.2f} {fifteen:.2f} (1, 5, 15 min) on {os.cpu_count()} cores"


def _with_missing_values(frame):
    """The frame with exactly MISSING_SHARE of each INCOMPLETE column deleted, missing at random given age."""
    out = frame.copy()
    rng = np.random.default_rng(MISSING_SEED)
    age = out["age"].to_numpy(dtype=float)
    z = (age - age.mean()) / age.std()
    n_gone = int(round(MISSING_SHARE * len(out)))
    for name, tilt in INCOMPLETE.items():
        w = np.exp(tilt * z)
        gone = rng.choice(len(out), size=n_gone, replace=False, p=w / w.sum())
        out[name] = out[name].astype(float)
        out.loc[gone, name] = np.nan
    return out


def _imputing_study(folder: Path, m: int):
    """The bench_bootstrap study file with its missing_data section replaced, read again."""
    from riskvet.intake.study import load_study

    path = folder / "study.yaml"
    raw = yaml.safe_load(path.read_text(encoding="utf-8"))
    raw["missing_data"] = {"method": "multiple_imputation", "m": m, "iterations": ITERATIONS, "seed": IMPUTATION_SEED}
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    return load_study(path)


# -- one replicate on the package path, in parts ----------------------------------------------


def _package_replicate(payload, child):
    """impute_rows, derive_imputed and predictions on the m completed resamples, each timed; as in the run."""
    from riskvet.imputation.procedure import derive_imputed, impute_rows, missing_cell_share
    from riskvet.validation.bootstrap import _draw, _predict

    study = payload.study
    idx, sel_seed = _draw(child, len(payload.frame))
    frame_b = payload.frame.iloc[idx].reset_index(drop=True)
    y_b = payload.y[idx]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t0 = time.perf_counter()
        completed_b = tuple(impute_rows(study, frame_b, y_b, m=payload.m, seed=sel_seed))
        t1 = time.perf_counter()
        derivation = derive_imputed(study, completed_b, y_b, seed=sel_seed, persons=idx,
                                    missing_share=missing_cell_share(frame_b, study.predictors.in_analysis))
        t2 = time.perf_counter()
        for completed in completed_b:
            _predict(derivation, completed)
        t3 = time.perf_counter()
    return {"impute": t1 - t0, "derive": t2 - t1, "predict": t3 - t2, "idx": idx, "derivation": derivation}


# -- the same replicate with statsmodels ------------------------------------------------------


def _sm_replicate(study, frame, y, idx, design, *, m: int, seed: int):
    """MICEData imputations of resample ``idx``, OrderedModel fits of ``design`` on each, Rubin pooling, predictions."""
    from statsmodels.imputation.mice import MICEData
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    frame_b = frame.iloc[idx].reset_index(drop=True)
    y_b = y[idx]
    columns = list(study.predictors.in_analysis)
    data = frame_b[columns].copy()
    data["sex"] = (data["sex"] == "male").astype(float)  # MICEData takes numbers only
    data = data.astype(float)
    data["outcome"] = y_b.astype(float)
    rng = np.random.default_rng(seed)
    t0 = time.perf_counter()
    completed = []
    for _ in range(m):
        chain = MICEData(data.copy(), rng=rng)
        chain.update_all(ITERATIONS)
        filled = frame_b.copy()
        for name in INCOMPLETE:
            filled[name] = chain.data[name].to_numpy()
        completed.append(filled)
    t1 = time.perf_counter()
    fits = []
    for filled in completed:
        X = design.transform(filled).to_numpy(dtype=float)
        _, res = _sm_fit(y_b, X, None)
        fits.append(res)
    t2 = time.perf_counter()
    P = np.vstack([np.asarray(r.params, dtype=float) for r in fits])
    U = np.mean([np.asarray(r.cov_params(), dtype=float) for r in fits], axis=0)
    B = np.atleast_2d(np.cov(P, rowvar=False, ddof=1))
    T = U + (1.0 + 1.0 / m) * B
    pooled = P.mean(axis=0)
    for filled in completed:
        X = design.transform(filled).to_numpy(dtype=float)
        OrderedModel(y_b, X, distr="logit").predict(pooled)
    t3 = time.perf_counter()
    return {"impute": t1 - t0, "fit": t2 - t1, "pool_predict": t3 - t2, "se": np.sqrt(np.diag(T)),
            "converged": [bool(r.mle_retvals.get("converged", True)) for r in fits]}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n-boot", type=int, default=None, help="replicates (default 200; --quick 4)")
    parser.add_argument("--m", type=int, default=None, help="imputations (default 10; --quick 3)")
    parser.add_argument("--n-jobs", type=int, default=2)
    parser.add_argument("--quick", action="store_true", help="B = 4, m = 3: a check that the script runs")
    parser.add_argument("--sm-replicates", type=int, default=1, help="replicates timed with statsmodels (0 skips them)")
    args = parser.parse_args()
    n_boot = args.n_boot if args.n_boot is not None else (4 if args.quick else 200)
    m = args.m if args.m is not None else (3 if args.quick else 10)
    n_package = 1 if args.quick else 3

    from riskvet.intake.outcome import outcome_codes
    from riskvet.validation.bootstrap import _one_thread, _Payload, _replicate, validate_internally

    print(f"load average at start: {_load()}")
    with tempfile.TemporaryDirectory() as tmp:
        _, complete, _ = _study_and_data(Path(tmp), n_boot, args.n_jobs)
        study = _imputing_study(Path(tmp), m)
        frame = _with_missing_values(complete)
        y = outcome_codes(study, frame[study.outcome.column])
        columns = list(study.predictors.in_analysis)
        incomplete_rows = float(frame[columns].isna().any(axis=1).mean())
        missing = ", ".join(f"{c} {int(frame[c].isna().sum())}" for c in INCOMPLETE)
        print(f"data: n = {len(y)}, levels {np.bincount(y).tolist()}, {len(columns)} candidate predictors, "
              f"forward selection with {study.selection.folds}-fold CV")
        print(f"missing values (at random given age): {missing} of {len(y)}; {incomplete_rows:.1%} of rows incomplete; "
              f"imputation m = {study.missing_data.m}, iterations = {study.missing_data.iterations}, "
              f"seed = {study.missing_data.seed}")

        cpu_before = time.process_time()
        with _PeakMemory() as mem:
            start = time.perf_counter()
            result = validate_internally(study, (frame, y), n_boot=n_boot, seed=study.internal_validation.seed,
                                         n_jobs=args.n_jobs, progress=False)
            wall = time.perf_counter() - start
        self_max = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        child_max = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
        cpu = mem.cpu_seconds - cpu_before
        print(f"validate_internally: {n_boot} replicates, m = {m}, on {args.n_jobs} workers in {wall:.1f} s "
              f"({wall / n_boot:.2f} s per replicate, the apparent model included); "
              f"target for 200 replicates, m = 10, on 2 cores: <= {TARGET_SECONDS:.0f} s; "
              f"ratio measured / target = {wall / TARGET_SECONDS:.2f}")
        print(f"  CPU time of this process and the workers during the run: {cpu:.1f} s; with {args.n_jobs} cores free "
              f"for this run alone that is about {cpu / args.n_jobs:.1f} s of wall time "
              f"(ratio to target {cpu / args.n_jobs / TARGET_SECONDS:.2f})")
        print(f"  {result.n_succeeded} succeeded, failures {result.failure_counts or 'none'}; "
              f"model sizes {result.stability.model_sizes}; n_imputations {result.n_imputations}")
        print(f"peak memory (this process + workers, psutil RSS sum): {mem.peak / 2**20:.0f} MiB "
              f"(target <= {TARGET_MIB:.0f} MiB; ratio {mem.peak / 2**20 / TARGET_MIB:.2f}); getrusage max RSS "
              f"self {self_max:.0f} MiB, largest exited child {child_max:.0f} MiB")

        # One replicate in this process, one BLAS thread, as the workers run it.
        from riskvet.imputation.procedure import impute_rows

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            completed = tuple(impute_rows(study, frame[columns], y, m=m, seed=study.missing_data.seed))
        payload = _Payload(study=study, frame=frame[columns], y=y, K=3, link="logit", completed=completed, m=m)
        children = np.random.SeedSequence(99).spawn(max(n_package, args.sm_replicates))
        parts, whole = [], []
        from riskvet.modelling import kernels

        with _one_thread(), kernels.compiled():  # as validate_internally runs every replicate
            for i, child in enumerate(children[:n_package]):
                parts.append(_package_replicate(payload, child))
                t0 = time.perf_counter()
                record = _replicate(payload, (i, child))
                whole.append(time.perf_counter() - t0)
                if record["status"] != "ok":
                    print(f"  replicate {i} failed: {record['reason']}: {record['message']}")
        med = {k: float(np.median([p[k] for p in parts])) for k in ("impute", "derive", "predict")}
        ours = sum(med.values())
        print(f"one replicate, one process (median of {n_package}), package path: impute_rows {med['impute']:.2f} s + "
              f"derive_imputed {med['derive']:.2f} s + predictions on the {m} completed resamples {med['predict']:.2f} s "
              f"= {ours:.2f} s")
        print(f"  the replicate as the run executes it (also measured on the {m} completed originals and out of bag): "
              f"{float(np.median(whole)):.2f} s")

        if args.sm_replicates > 0:
            sm = []
            with _one_thread():
                for r, child in enumerate(children[: args.sm_replicates]):
                    got = parts[r] if r < n_package else _package_replicate(payload, child)
                    sm.append(_sm_replicate(study, frame, y, got["idx"], got["derivation"].design, m=m, seed=1000 + r))
            ref = {k: float(np.median([s[k] for s in sm])) for k in ("impute", "fit", "pool_predict")}
            theirs = sum(ref.values())
            terms = parts[0]["derivation"].terms
            unconverged = sum(not c for s in sm for c in s["converged"])
            print(f"same replicate with statsmodels (median of {len(sm)}): MICEData {ref['impute']:.2f} s + "
                  f"OrderedModel on the {m} completed sets {ref['fit']:.2f} s + Rubin pooling and predictions "
                  f"{ref['pool_predict']:.2f} s = {theirs:.2f} s ({len(terms)} terms of the package's selection on "
                  f"the first resample; {unconverged} of {m * len(sm)} fits not converged)")
            print(f"  ratio package / statsmodels = {ours / theirs:.2f} (the statsmodels replicate does no selection "
                  f"and no cross-validation, which flatters it); imputation alone: impute_rows / MICEData = "
                  f"{med['impute'] / ref['impute']:.2f}")
    print(f"load average at end: {_load()}")
    sys.stdout.flush()


if __name__ == "__main__":
    main()
