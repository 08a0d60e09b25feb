"""Time the demo chain end to end, stage by stage.

Run:  .venv/bin/python tests/benchmarks/bench_demo.py [--reference] [--keep DIR]

Runs ``riskvet demo`` (the invented demo study, B = 200, m = 5 imputations,
every stage) in a new folder, as a user would, with numba's cache pointed
at a new empty folder so that compiling the fitter's loops
(``riskvet.modelling.kernels``) is part of the time.  Prints

* the load average at start and end (other work on the machine lengthens
  every time below);
* each stage's time as the record's manifest gives it, and the wall time
  of the whole command, with the ratio to the target (at most 60 s on 2
  cores);
* with ``--reference``, the same demo again on the numpy reference path
  (``RISKVET_KERNELS=numpy``), each stage's time on both paths with the
  ratio, and ``riskvet compare --rtol 1e-10`` of the two records: the
  compiled loops must give the same results to 1e-10.

The demo data are invented (``riskvet.demo``).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TARGET_SECONDS = 60.0


def _load() -> str:
    one, five, fifteen = os.getloadavg()
    return f"{one:.2f} {five:.2f} {fifteen:.2f} (1, 5, 15 min) on {os.cpu_count()} cores"


def _run_demo(folder: Path, *, numpy_path: bool) -> tuple[float, Path]:
    env = {**os.environ, "NUMBA_CACHE_DIR": str(folder / "numba-cache"), "MPLBACKEND": "Agg"}
    if numpy_path:
        env["RISKVET_KERNELS"] = "numpy"
    else:
        env.pop("RISKVET_KERNELS", None)
    start = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "riskvet.chain.cli", "demo", str(folder / "demo")], env=env,
                         capture_output=True, text=True)
    wall = time.perf_counter() - start
    if out.returncode != 0:
        sys.exit(f"riskvet demo failed ({out.returncode}):\n{out.stdout[-3000:]}\n{out.stderr[-3000:]}")
    records = sorted((folder / "demo" / "records").iterdir())
    return wall, records[-1]


def _stage_seconds(record: Path) -> dict[str, float]:
    manifest = json.loads((record / "manifest.json").read_text(encoding="utf-8"))
    return {s["stage"]: float(s["seconds"]) for s in manifest["stages"]}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reference", action="store_true", help="run the demo again on the numpy path and compare")
    parser.add_argument("--keep", type=Path, default=None, help="keep the demo folders here (default: a temporary folder)")
    args = parser.parse_args()

    print(f"load average at start: {_load()}")
    with tempfile.TemporaryDirectory() as tmp:
        base = args.keep or Path(tmp)
        wall, record = _run_demo(base / "compiled", numpy_path=False)
        stages = _stage_seconds(record)
        ref = None
        if args.reference:
            ref_wall, ref_record = _run_demo(base / "numpy", numpy_path=True)
            ref = _stage_seconds(ref_record)
        print(f"{'stage':<22}{'seconds':>9}" + (f"{'numpy path':>12}{'ratio':>8}" if ref else ""))
        for stage, seconds in stages.items():
            line = f"{stage:<22}{seconds:>9.1f}"
            if ref:
                line += f"{ref[stage]:>12.1f}{ref[stage] / seconds:>8.2f}"
            print(line)
        total = sum(stages.values())
        line = f"{'all stages':<22}{total:>9.1f}"
        if ref:
            line += f"{sum(ref.values()):>12.1f}{sum(ref.values()) / total:>8.2f}"
        print(line)
        print(f"riskvet demo, whole command (numba compiling its loops into an empty cache): {wall:.1f} s; "
              f"target <= {TARGET_SECONDS:.0f} s on 2 cores; ratio measured / target = {wall / TARGET_SECONDS:.2f}")
        if ref:
            print(f"numpy reference path, whole command: {ref_wall:.1f} s; ratio numpy / compiled = {ref_wall / wall:.2f}")
            from riskvet.chain.record import compare_records

            comparison = compare_records(ref_record, record, rtol=1e-10)
            frame = comparison.to_frame()
            results = frame[frame["section"] == "results"]
            print(f"riskvet compare --rtol 1e-10, numpy path against compiled: {len(results)} result difference(s)")
            if len(results):
                print(results.head(20).to_string())
    print(f"load average at end: {_load()}")


if __name__ == "__main__":
    main()
