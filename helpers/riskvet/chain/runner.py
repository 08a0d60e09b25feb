"""Running a study's notebook chain into a new, self-verifying record.

:func:`run_study` validates the study and its data (nothing runs on a bad
study), creates a new record folder under the study's records folder, and
executes each enabled stage notebook in order with papermill, injecting
``study_path``, ``record_dir`` and ``model_path``.  Each executed notebook is
kept, rendered as a self-contained HTML file for reviewers, and hashed into
the record's manifest together with every input file, template and output.

A record is written once: its folder is created with ``exist_ok=False`` and no
earlier record is ever opened for writing.  A stage that fails marks the
record failed (with the failing cell and the error), keeps its partly executed
notebook, and the later stages are skipped.

The kernel that runs each notebook is always the interpreter running riskvet
(``sys.executable``), whatever kernel specifications are installed elsewhere.
It runs with a fixed string-hash seed, single-threaded numerical libraries
and no time or path in what stages write (:func:`kernel_environment`), so that two
runs of the same study on the same data write the same results and model files.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import html
import importlib.metadata
import importlib.util
import json
import logging
import os
import platform
import re
import shutil
import subprocess
import sys
import signal
import tempfile
import threading
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence, TextIO

import pandas as pd

from ..errors import RecordError, RiskvetError, StudyError, problem
from .record import FINISHED, MANIFEST_SCHEMA, enclosing_record, read_manifest, record_files, sha256_file, write_manifest
from .stagekit import STAGE_PARAMETERS
from ..intake.study import STAGES, Study, load_study, stage_stem
from ..validation.bootstrap import PROGRESS_ENV

__all__ = [
    "KEY_PACKAGES",
    "MODEL_STAGES",
    "THREAD_VARIABLES",
    "kernel_environment",
    "StageRun",
    "RunResult",
    "default_templates_dir",
    "template_path",
    "run_study",
    "environment",
    "package_source",
    "git_commit",
]

#: Packages whose versions every manifest records.
KEY_PACKAGES = (
    "numpy", "scipy", "pandas", "statsmodels", "scikit-learn", "matplotlib", "papermill", "nbconvert",
    "nbclient", "nbformat", "ipykernel", "jupyter_client", "joblib", "pydantic", "pyyaml", "dask", "numba", "llvmlite",
)

#: Stages that use the frozen model: they need the derivation stage in the same run or ``from_record``.
MODEL_STAGES = ("internal_validation", "external_validation", "updating")

_PARAMETERS_TAG = "parameters"
_ERROR_TAG = "papermill-error-cell-tag"
_INJECTED_TAG = "injected-parameters"


# -- templates --------------------------------------------------------------------------------


def _changes_from_shipped(stage: str, template: Path) -> dict[str, Any] | None:
    """Cells added, removed and changed against the shipped template (:func:`riskvet.chain.record.template_changes`).

    None when no shipped template of the stage can be found to compare with.
    """
    from .record import template_changes

    shipped = default_templates_dir() / f"{stage}.ipynb"
    if not shipped.is_file():
        return None
    return template_changes(template, shipped)


def default_templates_dir() -> Path:
    """The stage templates: the source tree's ``templates/`` (an editable install),
    else ``<prefix>/share/riskvet/templates`` where a regular install puts them."""
    import riskvet

    source = Path(riskvet.__file__).resolve().parents[2] / "templates"
    if source.is_dir():
        return source
    return Path(sys.prefix) / "share" / "riskvet" / "templates"


def template_path(stage: str, *, templates_dir: str | Path | None = None) -> Path:
    """The notebook template of ``stage``: ``<templates_dir>/<stage>.ipynb``."""
    if stage not in STAGES:
        raise RiskvetError(problem("stage", allowed=f"one of {list(STAGES)}", received=stage))
    folder = Path(templates_dir) if templates_dir is not None else default_templates_dir()
    return folder / f"{stage}.ipynb"


def _check_template(stage: str, path: Path) -> None:
    import nbformat

    if not path.is_file():
        raise RecordError(
            f"stage {stage!r}: template {path} not found; every stage to run needs its notebook "
            f"template (pass templates_dir to use another folder)"
        )
    try:
        notebook = nbformat.read(path, as_version=4)
    except Exception as exc:  # nbformat raises several unrelated types for damaged files
        raise RecordError(f"stage {stage!r}: template {path} is not a readable notebook ({type(exc).__name__}: {exc})") from None
    tagged = [c for c in notebook.cells if c.cell_type == "code" and _PARAMETERS_TAG in c.get("metadata", {}).get("tags", [])]
    if len(tagged) != 1:
        raise RecordError(
            problem(f"stage {stage!r}: template {path}", allowed="exactly one code cell tagged 'parameters'", received=f"{len(tagged)} such cells")
        )


# -- environment ------------------------------------------------------------------------------


def _version(name: str) -> str | None:
    try:
        return importlib.metadata.version(name)
    except importlib.metadata.PackageNotFoundError:
        return None


def package_source() -> dict[str, Any]:
    """What riskvet's own code was: a SHA-256 over its source files, and its git commit.

    The version number alone does not say which code ran while the package is
    developed (an editable install); the digest does.  It covers every file of
    the installed ``riskvet`` package except compiled caches, as
    ``relative path NUL file-SHA-256`` lines in path order.
    """
    import riskvet

    root = Path(riskvet.__file__).resolve().parent
    digest = hashlib.sha256()
    count = 0
    for path in sorted(root.rglob("*")):
        if path.is_file() and "__pycache__" not in path.parts and path.suffix not in (".pyc", ".pyo"):
            digest.update(f"{path.relative_to(root).as_posix()}\0{sha256_file(path)}\n".encode("utf-8"))
            count += 1
    out: dict[str, Any] = {"sha256": digest.hexdigest(), "files": count}
    commit = git_commit(root)
    if commit is not None:
        out["git"] = commit
    return out


def environment() -> dict[str, Any]:
    """Versions and platform of this run: riskvet (version and source digest), Python, key packages, operating system."""
    from .. import __version__

    return {
        "riskvet_version": __version__,
        "riskvet_source": package_source(),
        "python": platform.python_version(),
        "python_implementation": platform.python_implementation(),
        "platform": platform.platform(),
        "machine": platform.machine(),
        "packages": {name: _version(name) for name in KEY_PACKAGES},
        "numerical_libraries": numerical_libraries(),
        "fitter_kernels": _fitter_kernels(),
    }


def _fitter_kernels() -> str:
    """Which row loops the fitter runs on (:mod:`riskvet.modelling.kernels`); results agree to rounding."""
    from ..modelling import kernels

    return kernels.mode()


def numerical_libraries() -> list[dict[str, Any]]:
    """The BLAS and OpenMP libraries numpy and scipy run on: kind, name, version, CPU architecture (no paths).

    Results can differ in their last digits between builds of these
    libraries; ``riskvet compare`` and ``riskvet reproduce`` take ``--rtol``
    for that.
    """
    try:
        import numpy  # noqa: F401  (loads the BLAS threadpoolctl reports)
        from threadpoolctl import threadpool_info
    except ImportError:  # pragma: no cover - both are dependencies
        return []
    keep = ("user_api", "internal_api", "version", "architecture")
    rows = [{k: info.get(k) for k in keep} for info in threadpool_info()]
    return sorted({tuple(r.items()): r for r in rows}.values(), key=lambda r: tuple(str(v) for v in r.values()))


def git_commit(folder: str | Path, *, ignore: str | Path | None = None) -> dict[str, Any] | None:
    """The git commit checked out in ``folder`` and whether the folder has uncommitted changes.

    Parameters
    ----------
    folder : path
        The study folder.
    ignore : path, optional
        A folder inside ``folder`` whose changes do not count (the records folder).

    Returns
    -------
    dict or None
        ``commit`` (``git rev-parse HEAD``) and ``dirty`` (files under
        ``folder`` modified or untracked); ``None`` when ``folder`` is not
        inside a git work tree or git is not installed.
    """
    folder = Path(folder).resolve()
    spec = ["."]
    if ignore is not None:
        ignored = Path(ignore).resolve()
        if ignored.is_relative_to(folder) and ignored != folder:
            spec.append(f":(exclude){ignored.relative_to(folder).as_posix()}")
    try:
        head = subprocess.run(["git", "-C", str(folder), "rev-parse", "HEAD"], capture_output=True, text=True, timeout=20)
        if head.returncode != 0:
            return None
        status = subprocess.run(
            ["git", "-C", str(folder), "status", "--porcelain", "--", *spec], capture_output=True, text=True, timeout=60
        )
    except (OSError, subprocess.SubprocessError):
        return None
    return {"commit": head.stdout.strip(), "dirty": bool(status.stdout.strip()) if status.returncode == 0 else None}


# -- interruption ---------------------------------------------------------------------------------


class RunInterrupted(KeyboardInterrupt):
    """A run stopped by Ctrl-C, SIGTERM or SIGHUP after its record was created.

    Attributes
    ----------
    record : Path or None
        The record, marked ``interrupted`` in its manifest (None when the
        signal came before anything was written and the empty folder was
        removed).
    signal_name : str
        ``SIGINT``, ``SIGTERM`` or ``SIGHUP``.
    """

    def __init__(self, record: Path | None, signal_name: str):
        super().__init__(signal_name)
        self.record = record
        self.signal_name = signal_name

    @property
    def exit_status(self) -> int:
        """The shell's convention: 128 + the signal number."""
        return 128 + int(getattr(signal, self.signal_name, signal.SIGINT))


_STOP_SIGNALS = tuple(getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, name))


@contextlib.contextmanager
def _signals_interrupt():
    """Turn SIGTERM and SIGHUP, like SIGINT, into KeyboardInterrupt; yield what was received.

    A closed terminal or a scheduler's kill then stops the run the way
    Ctrl-C does: the record is marked interrupted and the kernel and its
    scratch folder are cleaned up.  Outside the main thread (where Python
    cannot set handlers) nothing changes.
    """
    received = {"name": "SIGINT"}
    if threading.current_thread() is not threading.main_thread():
        yield received
        return

    def stop(signum, frame):
        received["name"] = signal.Signals(signum).name
        raise KeyboardInterrupt(received["name"])

    previous = {s: signal.signal(s, stop) for s in _STOP_SIGNALS}
    try:
        yield received
    finally:
        for s, handler in previous.items():
            signal.signal(s, handler)


@contextlib.contextmanager
def _signals_held():
    """Hold further stop signals while a record is being marked, so the mark is written whole."""
    if threading.current_thread() is not threading.main_thread() or not hasattr(signal, "pthread_sigmask"):
        yield
        return
    signal.pthread_sigmask(signal.SIG_BLOCK, set(_STOP_SIGNALS))
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_UNBLOCK, set(_STOP_SIGNALS))


# -- results ------------------------------------------------------------------------------------


@dataclass(frozen=True)
class StageRun:
    """How one stage of a run went.

    Attributes
    ----------
    stage : str
    status : {"ok", "failed", "interrupted", "skipped", "not run"}
        ``skipped``: not run because an earlier stage failed; ``not run``:
        the run was interrupted before it.
    notebook, html : str or None
        Executed notebook and its rendering, relative to the record.
    seconds : float or None
        Wall time of the execution (without rendering).
    error : dict or None
        For a failed stage: ``kind`` (``cell error``, ``kernel died``,
        ``interrupted``, ``runner error``), ``ename``, ``evalue`` and the
        failing cell (``cell_index`` in the executed notebook,
        ``template_cell_index``, ``execution_count``, ``cell_source``) when known.
    """

    stage: str
    status: str
    notebook: str | None = None
    html: str | None = None
    seconds: float | None = None
    started: str | None = None
    finished: str | None = None
    error: Mapping[str, Any] | None = None
    html_error: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {
            "stage": self.stage,
            "status": self.status,
            "notebook": self.notebook,
            "html": self.html,
            "seconds": self.seconds,
            "started": self.started,
            "finished": self.finished,
            "error": dict(self.error) if self.error is not None else None,
            "html_error": self.html_error,
        }


@dataclass(frozen=True)
class RunResult:
    """The outcome of :func:`run_study`.

    Attributes
    ----------
    record_dir : Path
        The new record folder.
    run_id : str
        Its name: UTC start time and a short hash.
    status : {"complete", "failed"}
    stages : tuple of StageRun
        Every stage that was to run, in order.
    manifest : dict
        The manifest as written.
    """

    record_dir: Path
    run_id: str
    status: str
    stages: tuple[StageRun, ...]
    manifest: Mapping[str, Any] = field(repr=False)

    @property
    def ok(self) -> bool:
        return self.status == "complete"

    @property
    def failed_stage(self) -> StageRun | None:
        return next((s for s in self.stages if s.status == "failed"), None)

    def to_dict(self) -> dict[str, Any]:
        return {
            "record_dir": str(self.record_dir),
            "run_id": self.run_id,
            "status": self.status,
            "stages": [s.to_dict() for s in self.stages],
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per stage: stage, status, seconds, notebook, html, error (``ename: evalue``)."""
        rows = [
            {
                "stage": s.stage,
                "status": s.status,
                "seconds": s.seconds,
                "notebook": s.notebook,
                "html": s.html,
                "error": f"{s.error.get('ename')}: {s.error.get('evalue')}" if s.error else None,
            }
            for s in self.stages
        ]
        return pd.DataFrame(rows, columns=["stage", "status", "seconds", "notebook", "html", "error"])


# -- the kernel --------------------------------------------------------------------------------


#: Thread counts of the numerical libraries inside the kernel (and, through joblib's
#: inheritance rule, its worker processes), unless the user's environment sets them:
#: a floating-point sum split over a varying number of threads is not reproducible.
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")


def kernel_environment() -> dict[str, str]:
    """Environment variables the runner sets in every stage kernel.

    ``PYTHONHASHSEED=0`` and each of :data:`THREAD_VARIABLES` as ``1``
    unless already set.  Nothing depends on the folder, the files'
    modification times or the clock: a model file carries a creation time
    only when the user sets ``SOURCE_DATE_EPOCH`` (passed through as it is);
    the run's own times are in the manifest.
    """
    env = {"PYTHONHASHSEED": "0"}
    for name in THREAD_VARIABLES:
        env[name] = os.environ.get(name, "1")
    if os.environ.get("SOURCE_DATE_EPOCH"):
        env["SOURCE_DATE_EPOCH"] = os.environ["SOURCE_DATE_EPOCH"]
    return env


def _kernel_manager_class(log, variables: Mapping[str, str]):
    """A kernel manager that always starts this interpreter's ipykernel, its output to ``log``."""
    from jupyter_client.manager import AsyncKernelManager

    class _ThisInterpreterKernel(AsyncKernelManager):
        def format_kernel_cmd(self, extra_arguments=None):
            # The command is fixed rather than read from a kernel specification,
            # which could name another environment's Python.
            return [
                sys.executable, "-Xfrozen_modules=off", "-m", "ipykernel_launcher",
                "-f", os.path.realpath(self.connection_file), *(extra_arguments or []),
            ]

        async def start_kernel(self, **kw):
            env = dict(kw.pop("env", None) or os.environ)
            env.update(variables)
            env.pop("MPLBACKEND", None)  # ipykernel chooses the inline backend
            kw.update(env=env, stdout=log, stderr=log)
            return await super().start_kernel(**kw)

    return _ThisInterpreterKernel


@contextlib.contextmanager
def _quiet_papermill():
    # papermill (and nbclient through it) log kernel messages at warning level;
    # the runner reports outcomes itself.
    logger = logging.getLogger("papermill")
    level, propagate = logger.level, logger.propagate
    logger.setLevel(logging.CRITICAL + 1)
    logger.propagate = False
    try:
        yield
    finally:
        logger.setLevel(level)
        logger.propagate = propagate


def _tail(path: Path, *, lines: int = 20) -> str:
    try:
        text = path.read_text(encoding="utf-8", errors="replace")
    except OSError:
        return ""
    kept = [ln for ln in text.splitlines() if "running over TCP without encryption" not in ln]
    return "\n".join(kept[-lines:])


_ANSI = re.compile(r"\x1b\[[0-9;]*[A-Za-z]")


def _failing_cell(notebook_path: Path, *, dead: bool = False) -> dict[str, Any]:
    """Locate the failing cell in a saved, partly executed notebook."""
    import nbformat

    try:
        notebook = nbformat.read(notebook_path, as_version=4)
    except Exception:  # a notebook that was never written or is damaged: no cell to show
        return {}
    found = None
    for index, cell in enumerate(notebook.cells):
        if cell.cell_type != "code":
            continue
        meta = cell.get("metadata", {}).get("papermill", {})
        errored = any(o.get("output_type") == "error" for o in cell.get("outputs", [])) or meta.get("exception") is True
        if errored:
            found = index
            break
        if dead and meta.get("start_time"):
            found = index  # the last cell that started
    if found is None:
        return {}
    template_index = sum(
        1
        for c in notebook.cells[:found]
        if not {_ERROR_TAG, _INJECTED_TAG} & set(c.get("metadata", {}).get("tags", []))
    )
    cell = notebook.cells[found]
    return {
        "code_cell": sum(1 for c in notebook.cells[: found + 1] if c.cell_type == "code"),
        "cell_index": found,
        "template_cell_index": template_index,
        "execution_count": cell.get("execution_count"),
        "cell_source": cell.source,
    }


def _execute(
    template: Path, notebook: Path, parameters: Mapping[str, str], *, cwd: Path, log_path: Path, variables: Mapping[str, str]
) -> dict[str, Any] | None:
    """Execute one notebook; return ``None`` on success, else the error description."""
    import papermill
    from nbclient.exceptions import DeadKernelError
    from papermill.exceptions import PapermillExecutionError

    try:
        with _quiet_papermill(), open(log_path, "ab") as log:
            papermill.execute_notebook(
                str(template), str(notebook), parameters=dict(parameters),
                kernel_name="python3", language="python", progress_bar=False, log_output=False,
                cwd=str(cwd), start_timeout=120, kernel_manager_class=_kernel_manager_class(log, variables),
            )
    except PapermillExecutionError as exc:
        return {
            "kind": "cell error",
            "ename": exc.ename,
            "evalue": _ANSI.sub("", str(exc.evalue)),
            **_failing_cell(notebook),
        }
    except DeadKernelError as exc:
        return {
            "kind": "kernel died",
            "ename": type(exc).__name__,
            "evalue": f"kernel died: {exc}",
            "kernel_log": _tail(log_path),
            **_failing_cell(notebook, dead=True),
        }
    except KeyboardInterrupt:
        raise
    except Exception as exc:  # anything else papermill or the kernel machinery raises
        return {"kind": "runner error", "ename": type(exc).__name__, "evalue": str(exc), "kernel_log": _tail(log_path), **_failing_cell(notebook)}
    return None


# -- inputs ---------------------------------------------------------------------------------------


def _input_files(study_path: Path, study: Study) -> list[dict[str, Any]]:
    files = [("study", study_path), ("data.derivation", study.data.derivation)]
    files += [(f"data.validation.{c.label}", c.path) for c in study.data.validation]
    if study.data.ratings is not None:
        files.append(("data.ratings", study.data.ratings))
    return [
        {"role": role, "path": str(Path(path).resolve()), "sha256": sha256_file(path), "bytes": Path(path).stat().st_size}
        for role, path in files
    ]


def _select_stages(study: Study, stages: Sequence[str] | None, from_record: Path | None) -> tuple[str, ...]:
    enabled = study.enabled_stages
    if stages is None:
        chosen = list(enabled)
        if from_record is not None:
            chosen = [s for s in chosen if s != "derivation"]
    else:
        names = [str(s).strip() for s in stages]
        unknown = [s for s in names if s not in STAGES]
        if unknown or not names:
            raise RiskvetError(problem("stages", allowed=f"a comma-separated subset of {list(STAGES)}", received=names if not unknown else unknown))
        twice = sorted({s for s in names if names.count(s) > 1})
        if twice:
            raise RiskvetError(problem("stages", allowed="each stage once", received=twice))
        off = [s for s in names if s not in enabled]
        if off:
            raise StudyError(
                f"stages: {off} not enabled in the study file (enabled there: {list(enabled)}); "
                "enable the section or leave the stage out"
            )
        chosen = [s for s in STAGES if s in names]
    if from_record is not None and "derivation" in chosen:
        raise RiskvetError(
            problem("stages", allowed="no 'derivation' with from_record (the earlier record supplies the model)", received=list(chosen))
        )
    needing = [s for s in chosen if s in MODEL_STAGES]
    if from_record is None and needing and "derivation" not in chosen:
        raise RiskvetError(
            f"stages: {needing} use the frozen model; include 'derivation' or name an earlier record to take the model from "
            f"(riskvet run --from RECORD)"
        )
    return tuple(chosen)


def _check_model_fits_study(model, study, source: Path) -> None:
    """Refuse an earlier model whose outcome or predictors are not this study's."""
    wanted = {"column": study.outcome.column, "type": study.outcome.type, "levels": list(study.outcome.ordered_levels)}
    found = {k: model.outcome.get(k) for k in wanted}
    if found != wanted:
        raise RecordError(
            f"{source}: the model's outcome {found} is not this study's outcome {wanted}; "
            "--from needs a record of a model for the same outcome and levels"
        )
    allowed = set(study.predictors.candidates) | set(study.updating.new_predictors)
    unknown = sorted(set(model.design.sources) - allowed)
    if unknown:
        raise RecordError(
            f"{source}: the model reads columns {unknown} that are not predictors of this study; "
            f"the study's candidates are {sorted(study.predictors.candidates)}"
        )


def _earlier_model(from_record: Path, study=None) -> dict[str, Any]:
    from ..modelling.modelfile import load_model

    manifest = read_manifest(from_record)
    if manifest.get("status") not in FINISHED:
        raise RecordError(
            f"--from {from_record}: that run never finished (its manifest says {manifest.get('status')!r}), so its model "
            "was never listed and cannot be trusted; use a complete record"
        )
    model = from_record / "models" / "model.json"
    if not model.is_file():
        raise RecordError(f"{from_record}: has no models/model.json to take the model from")
    listed = (manifest.get("files") or {}).get("models/model.json", {}).get("sha256")
    actual = sha256_file(model)
    if listed != actual:
        raise RecordError(
            f"{model}: does not match the earlier record's manifest (listed {listed!r}, found {actual!r}); "
            "run 'riskvet verify' on that record"
        )
    frozen = load_model(model)  # schema and content hash
    if study is not None:
        _check_model_fits_study(frozen, study, model)
    return {
        "role": "model",
        "path": str(model.resolve()),
        "sha256": actual,
        "bytes": model.stat().st_size,
        "record": str(from_record.resolve()),
        "run_id": manifest.get("run_id"),
        "study_sha256": (manifest.get("study") or {}).get("sha256"),
    }


def failure_place(error: Mapping[str, Any]) -> str:
    """Where a stage stopped, numbered one way everywhere: `` in code cell N`` of the executed notebook, or ``""``.

    N counts the code cells of the executed notebook from 1, as JupyterLab
    shows them; the command line, the manifest's reader and the HTML
    banner all use this.
    """
    where = error.get("code_cell")
    return f" in code cell {where}" if where is not None else ""


def _failure_sentence(error: Mapping[str, Any]) -> str:
    """One line for the failure banner of a stage's HTML page (the message, not the class name)."""
    cell = failure_place(error)
    value = str(error.get("evalue") or "").splitlines()
    detail = f": {value[0][:300]}" if value else f" ({str(error.get('kind') or 'an error').replace('_', ' ')})"
    return f"It stopped{cell}{detail}."


def _render_pages(
    record: Path, study: Study, results: list[StageRun], *, status: str, show_code: bool,
    render_html: Callable[..., Any], out: TextIO,
) -> list[StageRun]:
    """Render every stage's page, then the record's index page; return the runs with their pages.

    Pages are rendered once every stage has run, so each page's header knows
    the status of the record and of every stage it links to.
    """
    from ..reporting.html import PageHeader

    def header(stage: str | None) -> PageHeader:
        return PageHeader(study_name=study.study.name, record_id=record.name, record_status=status, stage=stage, pages=pages)

    pages = tuple((r.stage, f"{stage_stem(r.stage)}.html" if r.notebook else "", r.status) for r in results)
    rendered = []
    for run in results:
        if not run.notebook:
            rendered.append(run)
            continue
        target = record / "html" / f"{stage_stem(run.stage)}.html"
        failure = _failure_sentence(run.error) if run.error else None
        try:
            render_html(record / run.notebook, target, show_code=show_code, failure=failure, page=header(run.stage))
            rendered.append(dataclasses.replace(run, html=target.relative_to(record).as_posix()))
        except RiskvetError as exc:
            rendered.append(dataclasses.replace(run, html_error=str(exc)))
            print(f"{run.stage}: no HTML rendering: {exc}", file=out)
    pages = tuple((r.stage, Path(r.html).name if r.html else "", r.status) for r in rendered)
    _write_index(record, study, header(None))
    return rendered


def _write_index(record: Path, study: Study, header: Any) -> None:
    """The record's ``html/index.html``: the pages with their status, then each page's key results."""
    from ..reporting import publish
    from ..reporting.headlines import key_results
    from ..reporting.html import STAGE_TITLES, write_index
    from ..reporting.sentences.common import CAUTION

    results = {}
    for stage in STAGES:
        path = record / "results" / f"{stage}.json"
        if path.is_file():
            results[stage] = json.loads(path.read_text(encoding="utf-8"))
    rows = [{"page": STAGE_TITLES.get(stage, stage), "status": _PAGE_STATUS.get(state, state)} for stage, _, state in header.pages]
    sections = [
        ("Caution", f"<p>{html.escape(CAUTION.replace('**', ''))}</p>"),
        ("Pages of this record", publish.table(pd.DataFrame(rows), caption="Each stage of the run and how it went.")._repr_html_()),
    ]
    key = key_results(results, levels=tuple(study.outcome.levels))
    for stage, href, _ in header.pages:
        part = key[key["stage"] == stage]
        if part.empty or not href:
            continue
        shown = part.rename(columns={"lower": "lower limit", "upper": "upper limit"})[["measure", "value", "lower limit", "upper limit"]]
        if shown[["lower limit", "upper limit"]].isna().all().all():
            shown = shown[["measure", "value"]]
        link = f'<p><a href="{html.escape(href, quote=True)}">Open the page: {html.escape(STAGE_TITLES.get(stage, stage))}</a></p>'
        caption = "Key numbers of this page; the page explains each and states the kind of every interval."
        sections.append((STAGE_TITLES.get(stage, stage), link + publish.table(shown, caption=caption)._repr_html_()))
    write_index(record / "html" / "index.html", header, sections=sections)


_PAGE_STATUS = {"ok": "done", "failed": "failed", "skipped": "not run (an earlier stage failed)", "not run": "not run", "interrupted": "interrupted"}


def _now() -> datetime:
    return datetime.now(timezone.utc)


def _iso(moment: datetime) -> str:
    return moment.isoformat(timespec="seconds").replace("+00:00", "Z")


def _new_record(records: Path, *, study: Study, inputs: list[dict[str, Any]], started: datetime) -> Path:
    records = records.resolve()  # the kernels run inside the record: every path they get is absolute
    stamp = started.strftime("%Y%m%dT%H%M%SZ")
    try:
        records.mkdir(parents=True, exist_ok=True)
        for attempt in range(100):
            seed = "\n".join([study.digest(), *sorted(e["sha256"] for e in inputs), started.isoformat(), str(attempt)])
            path = records / f"{stamp}-{hashlib.sha256(seed.encode('utf-8')).hexdigest()[:8]}"
            try:
                path.mkdir(exist_ok=False)
            except FileExistsError:
                continue
            return path
    except OSError as exc:
        raise RecordError(f"output.records: cannot create a record folder in {records} ({exc.strerror or exc})") from None
    raise RecordError(f"{records}: could not create a new record folder for {stamp}")  # pragma: no cover


def check_records_folder(study: Study) -> Path:
    """The study's records folder, after checking that a new record may go there.

    Raises
    ------
    RecordError
        ``output.records`` is a record, or lies inside one: a new run would
        write into an earlier record.
    """
    records = Path(study.output.records).resolve()
    inside = enclosing_record(records)
    if inside is not None:
        where = "is the record" if inside == records else "lies inside the record"
        raise RecordError(
            f"output.records: {records} {where} {inside}; a new run would write into an earlier record, which is never "
            "changed. Name a folder of records (for example the study folder's records/), not a record"
        )
    return records


def _mark_interrupted(record: Path, manifest: dict[str, Any] | None) -> Path | None:
    """Mark an interrupted run's record; remove it when nothing but its own set-up was written.

    Returns the record, or None when it was removed.
    """
    if manifest is None:
        shutil.rmtree(record, ignore_errors=True)  # no manifest yet: nothing of the run exists
        return None
    stages = manifest.get("stages") or []
    manifest.update(
        status="interrupted",
        finished=_iso(_now()),
        stages=[{**s, "status": "not run"} if s.get("status") in ("pending", "running") else s for s in stages],
        files=record_files(record),
    )
    write_manifest(record, manifest, replace=True)
    return record


# -- the run --------------------------------------------------------------------------------------


def run_study(
    study_path: str | Path,
    *,
    stages: Sequence[str] | None = None,
    from_record: str | Path | None = None,
    templates_dir: str | Path | None = None,
    show_code: bool = False,
    out: TextIO | None = None,
) -> RunResult:
    """Run a study's stage notebooks into a new record.

    Parameters
    ----------
    study_path : path
        The study file.
    stages : sequence of str, optional
        A subset of the study's enabled stages (run in chain order).  Default:
        every enabled stage (less ``derivation`` when ``from_record`` is given).
    from_record : path, optional
        An earlier record whose frozen model (``models/model.json``) the
        stages use instead of deriving one; its hash is checked against that
        record's manifest, listed among this record's inputs, and the file is
        copied into this record's ``models/``.
    templates_dir : path, optional
        Folder of the stage templates (default :func:`default_templates_dir`).
    show_code : bool, default False
        Show code cells in the HTML renderings.
    out : text stream, optional
        Where progress lines go (default standard output); one line as each
        stage starts and one as it ends, with its duration.

    Returns
    -------
    RunResult
        ``status`` is ``complete`` or ``failed``; the record exists in both cases.

    Raises
    ------
    StudyError, DataError, RecordError, RiskvetError
        Before anything runs and before any record folder is created: an
        invalid study or data file, a stage selection the study does not
        allow, a missing template, an unusable earlier record.
    RunInterrupted
        On Ctrl-C, SIGTERM or SIGHUP (a closed terminal, a scheduler's kill),
        after the record's manifest has marked the run interrupted, the
        kernel has been shut down and its scratch folder removed.
    """
    from ..intake.data import load_cohorts
    from ..modelling.derive import check_before_fitting
    from ..reporting.html import render_html

    out = out if out is not None else sys.stdout
    study_path = Path(study_path).resolve()
    study = load_study(study_path)
    cohorts = load_cohorts(study)  # every data problem surfaces before a record exists
    earlier = Path(from_record).resolve() if from_record is not None else None
    chosen = _select_stages(study, stages, earlier)
    if "derivation" in chosen:
        check_before_fitting(study, cohorts.derivation, study_file=study_path)  # and every design problem
    templates = {s: template_path(s, templates_dir=templates_dir).resolve() for s in chosen}
    for stage, path in templates.items():
        _check_template(stage, path)
    if importlib.util.find_spec("ipykernel") is None:
        raise RecordError(f"ipykernel is not installed for {sys.executable}; stage notebooks cannot run (pip install ipykernel)")
    inputs = _input_files(study_path, study)
    model_input = _earlier_model(earlier, study) if earlier is not None else None
    if model_input is not None:
        inputs.append(model_input)

    records = check_records_folder(study)
    variables = kernel_environment()
    commit = git_commit(study_path.parent, ignore=study.output.records)
    with _signals_interrupt() as received:
        started = _now()
        record = _new_record(records, study=study, inputs=inputs, started=started)
        manifest: dict[str, Any] | None = None
        try:
            parameters = _fill_new_record(record, study_path=study_path, study=study, model_input=model_input)
            manifest = _first_manifest(
                record, study_path=study_path, study=study, started=started, variables=variables, inputs=inputs,
                model_input=model_input, parameters=parameters, show_code=show_code, chosen=chosen, commit=commit,
            )
            write_manifest(record, manifest)
            _print_start(study, record, model_input, out=out)
            results, failed, interrupted = _run_stages(
                record, manifest, chosen=chosen, templates=templates, parameters=parameters, variables=variables,
                out=out,
            )
            with _signals_held():
                if study.output.html and interrupted is None:
                    results = _render_pages(
                        record, study, results, status="failed" if failed else "complete", show_code=show_code,
                        render_html=render_html, out=out,
                    )
                status = _finish_manifest(record, manifest, results, failed=failed, interrupted=interrupted)
        except KeyboardInterrupt:
            with _signals_held():
                kept = _mark_interrupted(record, manifest)
            raise RunInterrupted(kept, received["name"]) from None
        if interrupted is not None:
            raise RunInterrupted(record, received["name"])
    total = sum(r.seconds or 0 for r in results)
    print(f"record {status}: {record} ({total:.1f} s in stages)", file=out)
    print(f"check it any time with: riskvet verify {record}", file=out)
    return RunResult(record_dir=record, run_id=record.name, status=status, stages=tuple(results), manifest=manifest)


def _fill_new_record(record: Path, *, study_path: Path, study: Study, model_input: dict[str, Any] | None) -> dict[str, str]:
    """Write the resolved study (and the earlier model, if any) into the record; return the notebook parameters."""
    (record / "study.json").write_text(study.canonical_json() + "\n", encoding="utf-8")
    model_path = record / "models" / "model.json"
    if model_input is not None:
        model_path.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(model_input["path"], model_path)
    parameters = {
        "study_path": str(study_path),
        "record_dir": str(record),
        "model_path": model_input["path"] if model_input is not None else str(model_path),
    }
    assert set(parameters) == set(STAGE_PARAMETERS)
    return parameters


def _first_manifest(
    record: Path,
    *,
    study_path: Path,
    study: Study,
    started: datetime,
    variables: Mapping[str, str],
    inputs: list[dict[str, Any]],
    model_input: dict[str, Any] | None,
    parameters: dict[str, str],
    show_code: bool,
    chosen: Sequence[str],
    commit: dict[str, Any] | None,
) -> dict[str, Any]:
    """The manifest of a run that has just started: every stage pending, no files yet."""
    manifest: dict[str, Any] = {
        "schema": MANIFEST_SCHEMA,
        "run_id": record.name,
        "status": "running",
        "started": _iso(started),
        "finished": None,
        **environment(),
        "kernel": {"python": sys.executable, "environment": variables},
        "study": {"path": str(study_path), "name": study.study.name, "sha256": study.digest(), "resolved": study.to_dict()},
        "seeds": {
            "selection": study.selection.seed,
            "internal_validation": study.internal_validation.seed,
            **({} if study.internal_external is None else {"internal_external": study.internal_external.seed}),
            "external_validation": study.external_validation.seed,
        },
        "inputs": inputs,
        "templates": [],
        "from_record": None if model_input is None else {k: model_input[k] for k in ("record", "run_id", "study_sha256")},
        "parameters": parameters,
        "show_code": bool(show_code),
        "stages": [StageRun(stage=s, status="pending").to_dict() for s in chosen],
        "files": {},
    }
    if commit is not None:
        manifest["git"] = commit
    return manifest


def _print_start(study: Study, record: Path, model_input: dict[str, Any] | None, *, out: TextIO) -> None:
    """The opening progress lines: the study, the record and any earlier model."""
    print(f"riskvet run: study {study.study.name!r} (sha256 {study.digest()[:12]}) -> {record}", file=out)
    if model_input is not None:
        note = "" if model_input["study_sha256"] == study.digest() else " (made with different study settings)"
        print(f"model from {model_input['run_id']}: sha256 {model_input['sha256'][:12]}{note}", file=out)


def _run_stages(
    record: Path,
    manifest: dict[str, Any],
    *,
    chosen: Sequence[str],
    templates: Mapping[str, Path],
    parameters: dict[str, str],
    variables: Mapping[str, str],
    out: TextIO,
) -> tuple[list[StageRun], bool, BaseException | None]:
    """Run the chosen stages in order, rewriting the manifest after each.

    After a failure the remaining stages are skipped.  Returns the stage runs,
    whether one failed, and the KeyboardInterrupt that stopped the run (or None).
    """
    results: list[StageRun] = []
    failed = False
    interrupted: BaseException | None = None
    with tempfile.TemporaryDirectory(prefix="riskvet-kernel-") as scratch:
        for position, stage in enumerate(chosen, start=1):
            label = f"[{position}/{len(chosen)}] {stage}"
            if failed:
                results.append(StageRun(stage=stage, status="skipped"))
                print(f"{label}: skipped (an earlier stage failed)", file=out)
                continue
            run, interrupted = _run_stage(
                stage, label, record=record, manifest=manifest, template=templates[stage], parameters=parameters,
                variables=variables, log_path=Path(scratch) / f"{stage}.log", out=out,
            )
            results.append(run)
            if interrupted is not None:
                results.extend(StageRun(stage=s, status="not run") for s in chosen[len(results):])
                print(f"{label}: interrupted after {run.seconds:.1f} s", file=out, flush=True)
                return results, True, interrupted
            if run.error:
                failed = True
            _print_stage_end(label, run, out=out)
            manifest["stages"] = [r.to_dict() for r in results] + [
                StageRun(stage=s, status="pending").to_dict() for s in chosen[len(results):]
            ]
            write_manifest(record, manifest, replace=True)
    return results, failed, interrupted


def _run_stage(
    stage: str,
    label: str,
    *,
    record: Path,
    manifest: dict[str, Any],
    template: Path,
    parameters: dict[str, str],
    variables: Mapping[str, str],
    log_path: Path,
    out: TextIO,
) -> tuple[StageRun, BaseException | None]:
    """Execute one stage notebook (its page is rendered once every stage has run: :func:`_render_pages`).

    Returns how the stage went, and the KeyboardInterrupt that stopped it (or None).
    """
    manifest["templates"].append({"stage": stage, "path": str(template), "sha256": sha256_file(template),
                                  "changes_from_shipped": _changes_from_shipped(stage, template)})
    notebook = record / "notebooks" / f"{stage_stem(stage)}.ipynb"
    notebook.parent.mkdir(exist_ok=True)
    print(f"{label}: running", file=out, flush=True)
    interrupted: BaseException | None = None
    begin, tick = _now(), time.perf_counter()
    progress = log_path.with_suffix(".progress")
    watcher = _ProgressWatcher(progress, label, out) if _is_terminal(out) else None
    try:
        error = _execute(template, notebook, parameters, cwd=record, log_path=log_path,
                         variables={**variables, PROGRESS_ENV: str(progress)})
    except KeyboardInterrupt as exc:
        error, interrupted = {"kind": "interrupted", "ename": "KeyboardInterrupt", "evalue": "run interrupted"}, exc
    finally:
        if watcher is not None:
            watcher.stop()
    seconds = round(time.perf_counter() - tick, 2)
    run = StageRun(
        stage=stage,
        status="interrupted" if interrupted is not None else ("failed" if error else "ok"),
        notebook=notebook.relative_to(record).as_posix() if notebook.is_file() else None,
        seconds=seconds,
        started=_iso(begin),
        finished=_iso(_now()),
        error=error,
    )
    return run, interrupted


def _is_terminal(out: TextIO) -> bool:
    return bool(getattr(out, "isatty", lambda: False)())


class _ProgressWatcher:
    """Show a stage's progress file on the terminal, one line redrawn in place, until stopped.

    The stage kernel writes ``done total seconds what`` lines (see
    :data:`riskvet.validation.bootstrap.PROGRESS_ENV`); this thread reads the
    last one twice a second.  Nothing of it reaches the notebook or the record.
    """

    def __init__(self, path: Path, label: str, out: TextIO, *, every: float = 0.5):
        self.path, self.label, self.out, self.every = path, label, out, every
        self._done = threading.Event()
        self._width = 0
        self._thread = threading.Thread(target=self._watch, name="riskvet-progress", daemon=True)
        self._thread.start()

    def _watch(self) -> None:
        while not self._done.wait(self.every):
            line = progress_line(self.path)
            if line:
                text = f"{self.label}: {line}"
                self.out.write("\r" + text.ljust(self._width))
                self.out.flush()
                self._width = max(self._width, len(text))

    def stop(self) -> None:
        self._done.set()
        self._thread.join(timeout=2)
        if self._width:
            self.out.write("\r" + " " * self._width + "\r")
            self.out.flush()


def progress_line(path: Path) -> str | None:
    """The last progress line of a stage in words: ``bootstrap 57/200, 3.1 per s, about 46 s left``."""
    try:
        last = path.read_text(encoding="utf-8").strip().splitlines()[-1]
        done, total, seconds, what = last.split(" ", 3)
        done, total, seconds = int(done), int(total), float(seconds)
    except (OSError, IndexError, ValueError):
        return None
    rate = done / seconds if seconds > 0 and done else 0.0
    left = f", about {(total - done) / rate:.0f} s left" if rate and done < total else ""
    speed = f", {rate:.1f} per s" if rate else ""
    return f"{what} {done}/{total}{speed}{left}"


def _print_stage_end(label: str, run: StageRun, *, out: TextIO) -> None:
    """The progress line(s) for a stage that has run: ok or failed, and any rendering problem."""
    error = run.error
    if error:
        print(f"{label}: FAILED after {run.seconds:.1f} s{failure_place(error)}: {error['ename']}: {error['evalue']}", file=out, flush=True)
    else:
        print(f"{label}: ok in {run.seconds:.1f} s", file=out, flush=True)
    if run.html_error:
        print(f"{label}: no HTML rendering: {run.html_error}", file=out)


def _finish_manifest(
    record: Path, manifest: dict[str, Any], results: list[StageRun], *, failed: bool, interrupted: BaseException | None
) -> str:
    """Mark the run finished in the manifest, listing every file; return its status."""
    status = "failed" if failed else "complete"
    manifest.update(
        status="interrupted" if interrupted is not None else status,
        finished=_iso(_now()),
        stages=[r.to_dict() for r in results],
        files=record_files(record),
    )
    write_manifest(record, manifest, replace=True)
    return status
