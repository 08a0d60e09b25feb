"""The ``riskvet`` command.

Every sub-command exits 0 on success, 1 when the study, data or record is
unusable (the message says what and where), when a stage of ``run`` fails or
when ``verify`` finds a record altered, and 2 on a usage error.
"""

from __future__ import annotations

import argparse
import logging
import re
import shutil
import sys
from pathlib import Path
from typing import Any, Sequence

import pandas as pd

from ..errors import RiskvetError
from .runner import RunInterrupted

__all__ = ["main"]

CAUTION = (
    "Statistical evaluation is not clearance for clinical use: local validation, "
    "governance and licensed clinical judgement decide."
)


def _print_frame(frame: pd.DataFrame, *, out=None) -> None:
    out = out or sys.stdout
    with pd.option_context("display.max_rows", 200, "display.max_columns", 20, "display.width", 160):
        print(frame.to_string(index=False), file=out)


_KIND_WORDS = {"numeric": "number", "categorical": "category", "text": "text"}


def _readable_audit(frame: pd.DataFrame) -> pd.DataFrame:
    """The column audit for a terminal: types in words, empty cells as a dash, no storage dtype."""
    shown = frame.drop(columns=[c for c in ("dtype",) if c in frame.columns]).copy()
    if "kind" in shown.columns:
        shown["kind"] = [_KIND_WORDS.get(k, k) for k in shown["kind"]]
        shown = shown.rename(columns={"kind": "reads as"})
    for column in shown.columns:
        shown[column] = ["\u2014" if v is None or (isinstance(v, float) and v != v) or v == "" else (f"{v:g}" if isinstance(v, float) else v)
                         for v in shown[column]]
    return shown


def _cmd_new(args: argparse.Namespace) -> int:
    from .scaffold import new_study_folder

    study = new_study_folder(args.folder, seed=args.seed)
    print(f"wrote {study} and its demo data in {study.parent / 'data'}")
    print(f"next: riskvet check {study}   then   riskvet run {study}")
    return 0


def check_report(study_path: str | Path, *, out=None) -> int:
    """Validate a study and its data, print the audit; return the exit status."""
    from ..intake.data import load_cohorts, suspect_codes
    from ..intake.study import load_study

    out = out or sys.stdout
    study = load_study(study_path)
    print(f"study {study.study.name!r}: file valid (sha256 {study.digest()[:12]})", file=out)
    print(f"stages: {', '.join(study.enabled_stages)}", file=out)
    from ..modelling.derive import check_before_fitting
    from .runner import check_records_folder

    records = check_records_folder(study)
    print(f"records go to {records}", file=out)
    cohorts = load_cohorts(study)
    notes = check_before_fitting(study, cohorts.derivation, study_file=study_path) + support_notes(study, cohorts.derivation)
    print("design: every candidate term can be built on the derivation data", file=out)
    for cohort in [cohorts.derivation, *cohorts.validation.values()]:
        print(f"\n== {cohort.label} ({cohort.source}) ==", file=out)
        print(f"rows screened {cohort.n_screened}, analysed {cohort.n_analysed}", file=out)
        if getattr(cohort, "clusters", None) is not None:
            unit = {"site": "sites", "period": "periods", "person": "people"}[cohort.cluster_kind]
            print(f"clusters ({cohort.cluster_column!r}, kind {cohort.cluster_kind}): {cohort.n_clusters} {unit}, resampled and "
                  "split whole by the bootstrap and the cross-validation", file=out)
        if cohort.missing == "multiple_imputation":
            print(_imputation_line(study, cohort), file=out)
        print(f"\nexclusions ({'missing outcome only: predictors are imputed' if cohort.missing == 'multiple_imputation' else 'complete case'}):", file=out)
        _print_frame(cohort.exclusions, out=out)
        print("\noutcome:", file=out)
        if getattr(cohort, "weights", None) is not None:
            print(f"people (frequency weights in {cohort.weight_column!r}): screened {cohort.n_people_screened}, analysed {cohort.n_people}", file=out)
        header = "people" if getattr(cohort, "weights", None) is not None else "n"
        _print_frame(pd.DataFrame({"level": list(cohort.outcome_counts), header: list(cohort.outcome_counts.values())}), out=out)
        print("\ncolumns as received:", file=out)
        _print_frame(_readable_audit(cohort.audit.to_frame()), out=out)
        for note in suspect_codes(cohort):
            print(f"warning: {note}", file=out)
        for m in cohort.category_mappings:
            print(f"mapped {m.count} value(s) of {m.column!r}: {m.source_level!r} -> {m.target_level!r}", file=out)
    if cohorts.ratings is not None:
        print(f"\n== ratings ({study.data.ratings}) ==\nrows {len(cohorts.ratings)}", file=out)
    for note in notes:
        print(f"warning: {note}", file=out)
    print(f"\nusable. {CAUTION}", file=out)
    return 0


def _imputation_line(study, cohort) -> str:
    """What multiple imputation will do with a cohort, for ``riskvet check``."""
    from ..imputation.procedure import imputations_needed, incomplete_share

    share = incomplete_share(study, cohort.frame)
    m = study.missing_data.m
    rule = imputations_needed(1.0 - share)
    said = f"m = {m} (missing_data.m; the rule of thumb gives {rule})" if m is not None else f"m = {rule} by the rule of thumb"
    return (f"multiple imputation: {share:.1%} of the analysed rows miss at least one predictor; {said}, "
            f"{study.missing_data.iterations} cycles, seed {study.missing_data.seed}")


def support_notes(study, cohort) -> list[str]:
    """Whether the derivation data can support the study's candidate parameters (events per parameter, sample-size criteria)."""
    from ..modelling.derive import candidate_design, separating_terms
    from ..planning.samplesize import data_support_notes

    from ..reporting.labels import cut_label

    from ..intake.data import complete_rows

    planning = study.planning
    levels = study.outcome.ordered_levels
    counts = [int(cohort.outcome_counts.get(lv, 0)) for lv in levels]
    cohort = complete_rows(cohort)  # under multiple imputation: separation and the design are judged on the complete rows
    notes = []
    separating = separating_terms(study, cohort.frame, cohort.y, weights=getattr(cohort, "weights", None))
    if separating:
        then = {"stop": "the derivation will stop (model.on_separation: stop) if the chosen model holds them",
                "firth": "the chosen model will be refitted by Firth's method if it holds them (model.on_separation: firth)"}
        notes.append(
            f"separation: the derivation data are separated by {', '.join(separating)} in the model with every candidate "
            "(some combination of their values predicts part of the outcome perfectly, so maximum-likelihood estimates "
            "would be infinite); "
            + ("every fit uses Firth's method (model.estimation: firth), whose estimates are finite"
               if study.model.estimation == "firth" else then[study.model.on_separation])
            + "; merging sparse categories or levels removes it"
        )
    return notes + data_support_notes(
        level_counts=counts, n_parameters=len(candidate_design(study, cohort.frame).columns),
        anticipated_c=None if planning is None else planning.anticipated_c,
        anticipated_r2_cs=None if planning is None else planning.anticipated_r2_cs,
        shrinkage=0.9 if planning is None else planning.shrinkage, penalized=study.selection.penalized,
        cut_names=[cut_label(levels, j, binary=len(levels) == 2) for j in range(len(levels) - 1)],
    )


def _cmd_check(args: argparse.Namespace) -> int:
    return check_report(args.study)


def _stage_list(text: str) -> list[str]:
    return [part.strip() for part in text.split(",") if part.strip()]


def _cmd_plan(args: argparse.Namespace) -> int:
    from .stages.planning import plan_text
    from ..intake.study import load_study

    study = load_study(args.study)
    if study.planning is None:
        raise RiskvetError(f"{args.study}: planning: the study has no planning section (n_parameters, anticipated_c or anticipated_r2_cs, ...)")
    proportions = None
    if args.proportions:
        try:
            proportions = [float(v) for v in args.proportions.split(",")]
        except ValueError:
            raise RiskvetError(f"--proportions: expected comma-separated outcome proportions, lowest level first; received {args.proportions!r}") from None
    print(plan_text(study, proportions=proportions))
    print(f"\n{CAUTION}")
    return 0


def _cmd_run(args: argparse.Namespace) -> int:
    from .runner import run_study

    result = run_study(
        args.study, stages=args.stages, from_record=args.from_record,
        templates_dir=args.templates, show_code=args.show_code,
    )
    failed = result.failed_stage
    if failed is not None:
        print(f"stage {failed.stage!r} failed; see {result.record_dir / (failed.notebook or 'manifest.json')}", file=sys.stderr)
        return 1
    if (result.record_dir / "html").is_dir():
        print(f"open the reviewer pages in {result.record_dir / 'html'}")
    print(CAUTION)
    return 0


def _cmd_demo(args: argparse.Namespace) -> int:
    from .runner import run_study
    from .scaffold import new_study_folder

    study = new_study_folder(args.folder, seed=args.seed)
    print(f"wrote the demo study {study} (invented data, seed {args.seed})")
    result = run_study(study, templates_dir=args.templates)
    if result.failed_stage is not None:
        return 1
    print(f"open the reviewer pages in {result.record_dir / 'html'}")
    print(CAUTION)
    return 0


def _cmd_verify(args: argparse.Namespace) -> int:
    from .record import verify_record

    verification = verify_record(args.record, check_inputs=not args.no_inputs)
    counts = ", ".join(f"{n} {status}" for status, n in verification.counts().items())
    print(f"record {verification.run_id} (run {verification.run_status}): {counts}")
    shown = verification.to_frame()
    if not args.all:
        shown = shown[shown["status"] != "ok"]
    if len(shown):
        _print_frame(shown)
    if not verification.ok:
        print(f"ALTERED: {len(verification.problems)} problem(s)", file=sys.stderr)
        return 1
    if not verification.finished:
        print(
            f"NOT COMPLETE: the files are as listed, but the run never finished (its manifest says "
            f"{verification.run_status!r}), so this is not a complete record", file=sys.stderr,
        )
        return 1
    print("intact: every listed file has its recorded SHA-256, nothing was added and every file is where the runner writes it")
    return 0


_SETTINGS = {
    "study": "study settings", "inputs": "input files (SHA-256)", "templates": "templates (SHA-256)",
    "packages": "package versions", "record": "run",
}


def _natural_key(key: str) -> list[Any]:
    """``a[2].b`` before ``a[10].b``: numbers in a key compare as numbers."""
    return [int(part) if part.isdigit() else part for part in re.split(r"(\d+)", str(key))]


def _fit_width(frame: pd.DataFrame, width: int) -> pd.DataFrame:
    """Cells shortened (with an ellipsis) so that no printed row is wider than ``width``."""
    if frame.empty:
        return frame
    texts = frame.astype(str)
    widest = {c: max(len(c), texts[c].str.len().max()) for c in texts.columns}
    budget = max(width - (len(texts.columns) - 1) * 2, 20 * len(texts.columns))
    while sum(widest.values()) > budget and max(widest.values()) > 12:
        column = max(widest, key=widest.get)
        widest[column] -= 1
    return texts.apply(lambda col: [v if len(v) <= widest[col.name] else v[: widest[col.name] - 1] + "\u2026" for v in col])


def _cmd_compare(args: argparse.Namespace) -> int:
    from .record import compare_records

    comparison = compare_records(args.record_a, args.record_b, rtol=args.rtol)
    width = shutil.get_terminal_size((120, 40)).columns
    frame = comparison.to_frame()
    frame = frame.iloc[sorted(range(len(frame)), key=lambda i: (list(_SETTINGS).index(frame["section"].iloc[i]) if frame["section"].iloc[i] in _SETTINGS else 99, _natural_key(frame["key"].iloc[i])))]
    settings = frame[frame["section"] != "results"]
    results = frame[frame["section"] == "results"]
    tolerance = f" beyond rtol {args.rtol:g}" if args.rtol else ""
    names = f"A {comparison.run_a} and B {comparison.run_b}"
    if settings[settings["section"] != "record"].empty and results.empty:
        run_notes = settings["key"].tolist()
        extra = f" (run details differ: {', '.join(run_notes)})" if run_notes else ""
        print(f"identical: {names} have the same study, inputs, templates, package versions and results{tolerance}{extra}")
        return 0
    print(f"A: {comparison.run_a}  ({comparison.record_a})\nB: {comparison.run_b}  ({comparison.record_b})")
    for section, title in _SETTINGS.items():
        part = settings[settings["section"] == section].drop(columns="section")
        if part.empty:
            continue
        if section in ("inputs", "templates"):
            part = part.assign(a=part["a"].str[:12], b=part["b"].str[:12])
        print(f"\n== {title}: {len(part)} difference(s) ==")
        _print_frame(_fit_width(part if args.all else part.head(args.limit), width))
        if not args.all and len(part) > args.limit:
            print(f"... {len(part) - args.limit} more (--all shows every one)")
    headline = comparison.headline
    differing = headline[~headline["same"]] if not headline.empty else headline
    print(f"\n== key results that differ{tolerance}: {len(differing)} of {len(headline)} ==")
    if len(differing):
        shown = differing.assign(
            a=[f"{v:.6g}" if isinstance(v, float) else ("(absent)" if v is None else str(v)) for v in differing["a"]],
            b=[f"{v:.6g}" if isinstance(v, float) else ("(absent)" if v is None else str(v)) for v in differing["b"]],
        )[["stage", "measure", "a", "b"]]
        _print_frame(_fit_width(shown if args.all else shown.head(args.limit), width))
    stages = results["key"].map(lambda k: str(k).split(".", 1)[0].split("[", 1)[0]) if len(results) else results["key"]
    print(f"\n== other differences in the results files{tolerance}: {len(results)} ==")
    if len(results):
        counts = stages.value_counts()
        for stage in sorted(counts.index, key=_natural_key):
            print(f"results/{stage}.json: {counts[stage]} value(s) differ")
        if args.all:
            _print_frame(_fit_width(results.drop(columns="section"), width))
        else:
            print("(--all lists every one, curve points included)")
    return 0


def _cmd_reproduce(args: argparse.Namespace) -> int:
    from .reproduce import reproduce

    result = reproduce(args.record, data=args.data, rtol=args.rtol)
    if result.verdict == "identical":
        print(f"identical: the rerun {result.rerun} gives the same results and model files as {result.original}")
    elif result.verdict == "within tolerance":
        key, size = result.largest or ("", 0.0)
        print(f"equal within rtol {args.rtol:g}: the largest relative difference is {size:.3g}, at {key} (rerun {result.rerun})")
    else:
        print(f"different: {len(result.differences)} result value(s) differ beyond rtol {args.rtol:g} (rerun {result.rerun})")
        _cmd_compare(argparse.Namespace(record_a=result.original, record_b=result.rerun, rtol=args.rtol, all=False, limit=25))
    return result.exit_status


def _free_port(start: int = 8890) -> int:
    """The first port from ``start`` on the loopback address that nothing listens on."""
    import socket

    for port in range(start, start + 100):
        with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
            if probe.connect_ex(("127.0.0.1", port)) != 0:
                return port
    raise RiskvetError(f"no free port in {start}-{start + 99} on 127.0.0.1; pass --port")


def _wait_for_server(port: int, token: str, proc, log: Path, timeout: float = 90.0) -> None:
    import time
    import urllib.request

    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            tail = log.read_text(encoding="utf-8", errors="replace")[-1500:] if log.is_file() else ""
            raise RiskvetError(f"JupyterLab stopped before it was ready (exit {proc.returncode}); its log {log} ends:\n{tail}")
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/status?token={token}", timeout=2) as reply:
                if reply.status == 200:
                    return
        except OSError:
            time.sleep(0.3)
    proc.terminate()
    raise RiskvetError(f"JupyterLab did not answer on port {port} within {timeout:.0f} s; see {log}")


def _cmd_lab(args: argparse.Namespace) -> int:
    import secrets
    import subprocess

    from .workbench import lab_command, open_workbench

    bench = open_workbench(args.study, templates_dir=args.templates)
    kept = [p.stem for p in bench.notebooks if p.stem not in bench.written]
    print(f"workbench {bench.folder}: notebooks in {bench.templates}"
          + (f" (written now: {', '.join(bench.written)})" if bench.written else "")
          + (f" (kept as you left them: {', '.join(kept)})" if kept else ""))
    print(f"drafts go to {bench.draft}: a draft, never a record (riskvet verify refuses it)")
    port = args.port if args.port is not None else _free_port()
    token = secrets.token_hex(24)
    log = bench.folder / "jupyterlab.log"
    with open(log, "ab") as sink:
        proc = subprocess.Popen(lab_command(bench.folder, port=port, token=token, open_browser=not args.no_browser),
                                stdout=sink, stderr=subprocess.STDOUT, cwd=bench.folder)
    try:
        _wait_for_server(port, token, proc, log)
        print(f"JupyterLab: http://127.0.0.1:{port}/lab/tree/templates?token={token}", flush=True)
        print(f"when the notebooks are right, make the record from them with:\n  {bench.run_command}", flush=True)
        print(f"stop JupyterLab with Ctrl-C. {CAUTION}", flush=True)
        return int(proc.wait() or 0)
    except KeyboardInterrupt:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
        print("JupyterLab stopped; the workbench and its drafts are kept", flush=True)
        return 0
    finally:
        if proc.poll() is None:
            proc.terminate()


def _parser() -> argparse.ArgumentParser:
    from .. import __version__

    parser = argparse.ArgumentParser(
        prog="riskvet",
        description="Derive, validate, update and report clinical prediction models. " + CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"riskvet {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("new", help="write a ready-to-run study folder with the demo data")
    p.add_argument("folder", help="the new study folder (created; must not already hold a study)")
    p.add_argument("--seed", type=int, default=2024, help="seed of the demo data (default 2024)")
    p.set_defaults(func=_cmd_new)

    p = sub.add_parser("check", help="validate a study file and its data; print the audit")
    p.add_argument("study", type=Path, help="the study file (study.yaml)")
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser("run", help="run the study's stage notebooks into a new record")
    p.add_argument("study", type=Path, help="the study file (study.yaml)")
    p.add_argument("--stages", type=_stage_list, default=None, metavar="A,B",
                   help="run only these enabled stages (comma-separated), in chain order")
    p.add_argument("--from", dest="from_record", type=Path, default=None, metavar="RECORD",
                   help="use the frozen model of an earlier record instead of deriving one")
    p.add_argument("--templates", type=Path, default=None, metavar="DIR", help="folder of stage templates to use")
    p.add_argument("--show-code", action="store_true", help="show code cells in the HTML renderings")
    p.set_defaults(func=_cmd_run)

    p = sub.add_parser("lab", help="open a workbench of the study's stage notebooks in JupyterLab, writing to a draft folder")
    p.add_argument("study", type=Path, help="the study file (study.yaml)")
    p.add_argument("--templates", type=Path, default=None, metavar="DIR", help="copy the templates from this folder (default: the shipped ones)")
    p.add_argument("--port", type=int, default=None, help="port on 127.0.0.1 (default: the first free one from 8890)")
    p.add_argument("--no-browser", action="store_true", help="do not open a browser; the address with its token is printed")
    p.set_defaults(func=_cmd_lab)

    p = sub.add_parser("plan", help="print the sample-size justification for a study's planning section")
    p.add_argument("study", type=Path, help="the study file (study.yaml)")
    p.add_argument("--proportions", metavar="P0,P1,...", help="anticipated outcome proportions, lowest level first (default: the derivation data)")
    p.set_defaults(func=_cmd_plan)

    p = sub.add_parser("verify", help="re-hash a record against its manifest")
    p.add_argument("record", type=Path, help="a record folder (records/<id>)")
    p.add_argument("--no-inputs", action="store_true", help="check only the record's own files")
    p.add_argument("--all", action="store_true", help="list every file, not only problems")
    p.set_defaults(func=_cmd_verify)

    p = sub.add_parser("compare", help="show what differs between two records")
    p.add_argument("record_a", type=Path, help="the first record folder")
    p.add_argument("record_b", type=Path, help="the second record folder")
    p.add_argument("--limit", type=int, default=25, help="rows shown per section (default 25)")
    p.add_argument("--rtol", type=float, default=0.0,
                   help="numbers within this relative difference count as equal (default 0: identical)")
    p.add_argument("--all", action="store_true", help="show every difference")
    p.set_defaults(func=_cmd_compare)

    p = sub.add_parser("reproduce", help="rerun a record from what it holds, beside it, and say whether the results are the same")
    p.add_argument("record", type=Path, help="a record folder (records/<id>) of a run that ended")
    p.add_argument("--data", type=Path, default=None, metavar="DIR", help="folder holding the data files (default: where the record found them)")
    p.add_argument("--rtol", type=float, default=0.0, help="relative tolerance for results (exit 2 when equal only within it)")
    p.set_defaults(func=_cmd_reproduce)

    p = sub.add_parser("demo", help="write the invented demo study and run the whole chain on it")
    p.add_argument("folder", nargs="?", default="riskvet-demo", help="the demo study folder (default riskvet-demo)")
    p.add_argument("--seed", type=int, default=2024, help="seed of the demo data (default 2024)")
    p.add_argument("--templates", type=Path, default=None, metavar="DIR", help=argparse.SUPPRESS)
    p.set_defaults(func=_cmd_demo)
    return parser


class _NotUnretrievedTasks(logging.Filter):
    def filter(self, record: logging.LogRecord) -> bool:
        return not record.getMessage().startswith("Task exception was never retrieved")


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``riskvet`` console script."""
    parser = _parser()
    args = parser.parse_args(argv)
    # A stage interrupted mid-cell leaves nbclient's cell task with a dead
    # kernel; asyncio would print its traceback when the task is collected.
    # The run reports the interruption itself, in one line.
    logging.getLogger("asyncio").addFilter(_NotUnretrievedTasks())
    try:
        return int(args.func(args) or 0)
    except RiskvetError as exc:
        print(f"riskvet {args.command}: {exc}", file=sys.stderr)
        return 1
    except RunInterrupted as exc:
        if exc.record is None:
            print(f"riskvet {args.command}: interrupted ({exc.signal_name}) before anything was written; no record was kept", file=sys.stderr)
        else:
            print(f"riskvet {args.command}: interrupted ({exc.signal_name}); the record {exc.record} is marked interrupted and is not a complete record", file=sys.stderr)
        return exc.exit_status
    except KeyboardInterrupt:
        print(f"riskvet {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader (for example `| head`) closed the pipe: stop quietly
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
