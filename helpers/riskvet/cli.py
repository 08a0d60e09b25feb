"""The ``riskvet`` command.

Every sub-command exits 0 on success, 1 when the study, data or record is
unusable (the message says what and where), and 2 on a usage error.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Sequence

import pandas as pd

from .errors import RiskvetError

__all__ = ["main"]

CAUTION = (
    "Statistical evaluation is not clearance for clinical use: local validation, "
    "governance and licensed clinical judgement decide."
)


def _print_frame(frame: pd.DataFrame, *, out=None) -> None:
    out = out or sys.stdout
    with pd.option_context("display.max_rows", 200, "display.max_columns", 20, "display.width", 160):
        print(frame.to_string(index=False), file=out)


def _cmd_new(args: argparse.Namespace) -> int:
    from .scaffold import new_study_folder

    study = new_study_folder(args.folder, seed=args.seed)
    print(f"wrote {study} and its demo data in {study.parent / 'data'}")
    print(f"next: riskvet check {study}   then   riskvet run {study}")
    return 0


def check_report(study_path: str | Path, *, out=None) -> int:
    """Validate a study and its data, print the audit; return the exit status."""
    from .data import load_cohorts
    from .study import load_study

    out = out or sys.stdout
    study = load_study(study_path)
    print(f"study {study.study.name!r}: file valid (sha256 {study.digest()[:12]})", file=out)
    print(f"stages: {', '.join(study.enabled_stages)}", file=out)
    cohorts = load_cohorts(study)
    for cohort in [cohorts.derivation, *cohorts.validation.values()]:
        print(f"\n== {cohort.label} ({cohort.source}) ==", file=out)
        print(f"rows screened {cohort.n_screened}, analysed {cohort.n_analysed}", file=out)
        print("\nexclusions (complete case):", file=out)
        _print_frame(cohort.exclusions, out=out)
        print("\noutcome:", file=out)
        _print_frame(pd.DataFrame({"level": list(cohort.outcome_counts), "n": list(cohort.outcome_counts.values())}), out=out)
        print("\ncolumns as received:", file=out)
        _print_frame(cohort.audit.to_frame(), out=out)
        for m in cohort.category_mappings:
            print(f"mapped {m.count} value(s) of {m.column!r}: {m.source_level!r} -> {m.target_level!r}", file=out)
    if cohorts.ratings is not None:
        print(f"\n== ratings ({study.data.ratings}) ==\nrows {len(cohorts.ratings)}", file=out)
    print(f"\nusable. {CAUTION}", file=out)
    return 0


def _cmd_check(args: argparse.Namespace) -> int:
    return check_report(args.study)


def _parser() -> argparse.ArgumentParser:
    from . import __version__

    parser = argparse.ArgumentParser(
        prog="riskvet",
        description="Derive, validate, update and report clinical prediction models. " + CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"riskvet {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("new", help="write a ready-to-run study folder with the demo data")
    p.add_argument("folder", type=Path)
    p.add_argument("--seed", type=int, default=2024, help="seed of the demo data (default 2024)")
    p.set_defaults(func=_cmd_new)

    p = sub.add_parser("check", help="validate a study file and its data; print the audit")
    p.add_argument("study", type=Path)
    p.set_defaults(func=_cmd_check)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``riskvet`` console script."""
    parser = _parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except RiskvetError as exc:
        print(f"riskvet {args.command}: {exc}", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
