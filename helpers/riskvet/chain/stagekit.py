"""What every stage notebook shares: its parameters, its place in the record.

A stage notebook has a ``parameters`` cell of plain ``name = literal`` lines
(:data:`STAGE_PARAMETERS`), then a cell that calls :func:`open_stage` with the
notebook's namespace.  That call refuses unknown or ill-typed parameters
(papermill only warns about names it does not know; riskvet stops), loads and
validates the study, and returns a :class:`StageContext` that knows where the
stage writes its results, figures and model files inside the record.

Record layout (paths relative to the record folder)::

    manifest.json               written by the runner
    study.json                  the resolved study (canonical JSON)
    notebooks/NN_<stage>.ipynb  executed notebooks
    html/NN_<stage>.html        reviewer renderings
    results/<stage>.json        each stage's results (deterministic content)
    figures/<stage>/<name>.png  and .svg
    models/model.json           the frozen derived model; other model files beside it
"""

from __future__ import annotations

import json
import types
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from .._jsonable import positional_numbers, to_jsonable
from ..errors import RecordError, RiskvetError, problem
from ..intake.study import STAGES, Study, load_study

__all__ = ["STAGE_PARAMETERS", "StageContext", "open_stage", "stage_context", "is_draft"]

#: The parameters every stage notebook takes, with their defaults.
STAGE_PARAMETERS: dict[str, Any] = {
    "study_path": "",
    "record_dir": "",
    "model_path": "",
}

_IPYTHON_NAMES = {"In", "Out", "get_ipython", "exit", "quit", "open"}


@dataclass(frozen=True)
class StageContext:
    """Where one stage reads and writes inside a record.

    Attributes
    ----------
    stage : str
        One of :data:`riskvet.study.STAGES`.
    study : Study
        The validated study.
    study_path : Path
        The study file.
    record_dir : Path
        The record folder.
    model_path : Path
        The frozen model file this stage uses (or, for the derivation stage,
        writes): ``record_dir/models/model.json`` unless the runner points at
        an earlier record's model.
    warnings : list of str
        The messages of warnings raised while the stage ran (each once, in
        the order met), collected by :func:`open_stage` instead of printed,
        so the page's notes can show them in words
        (:func:`riskvet.reporting.publish.notes`) and no warning line with a
        file path or class name reaches a page.
    draft : bool
        Whether ``record_dir`` is a workbench's draft folder
        (:mod:`riskvet.chain.workbench`): files there may be written again,
        as an analyst reruns a cell; a record's files are written once.
    """

    stage: str
    study: Study
    study_path: Path
    record_dir: Path
    model_path: Path
    warnings: list[str] = field(default_factory=list, compare=False, repr=False)
    draft: bool = False

    def collect_warnings(self) -> None:
        """Collect warnings into :attr:`warnings` from now on, instead of printing them."""
        import warnings as _warnings

        def keep(message, category, filename, lineno, file=None, line=None):  # the signature warnings expects
            words = str(message).strip()
            if words and words not in self.warnings:
                self.warnings.append(words)

        _warnings.showwarning = keep

    @property
    def results_path(self) -> Path:
        return self.record_dir / "results" / f"{self.stage}.json"

    @property
    def figures_dir(self) -> Path:
        return self.record_dir / "figures" / self.stage

    @property
    def models_dir(self) -> Path:
        return self.record_dir / "models"

    def new_path(self, path: Path) -> Path:
        """``path``, after checking nothing is there yet (records are write-once; a draft's file is replaced)."""
        if path.exists():
            if self.draft and path.is_file():
                path.unlink()  # a draft is work in progress: rerunning a cell writes its file again
                return path
            raise RecordError(f"{path}: already exists; a record file is never overwritten")
        path.parent.mkdir(parents=True, exist_ok=True)
        return path

    def write_results(self, results: Mapping[str, Any]) -> Path:
        """Write this stage's results JSON (sorted keys; no NaN; no times or ids; no scientific notation)."""
        path = self.new_path(self.results_path)
        text = json.dumps(to_jsonable(dict(results)), indent=1, sort_keys=True, allow_nan=False, ensure_ascii=False)
        text = positional_numbers(text)
        path.write_text(text + "\n", encoding="utf-8")
        return path

    def read_results(self, stage: str) -> dict[str, Any] | None:
        """Results of an earlier stage of this record, or ``None`` if it did not run."""
        path = self.record_dir / "results" / f"{stage}.json"
        if not path.is_file():
            return None
        return json.loads(path.read_text(encoding="utf-8"))

    def save_figure(self, figure, name: str):
        """Save ``figure`` as PNG and SVG under ``figures/<stage>/`` and return it.

        The files carry no creation date, so two runs give the same bytes.
        """
        png = self.new_path(self.figures_dir / f"{name}.png")
        svg = self.new_path(self.figures_dir / f"{name}.svg")
        import matplotlib

        with matplotlib.rc_context({"svg.hashsalt": f"riskvet-{self.stage}-{name}"}):
            figure.savefig(png, dpi=150, bbox_inches="tight", metadata={"Software": None})
            figure.savefig(svg, bbox_inches="tight", metadata={"Date": None, "Creator": None})
        return figure


def is_draft(folder: str | Path) -> bool:
    """Whether ``folder`` is a workbench's draft folder (its manifest says so)."""
    path = Path(folder) / "manifest.json"
    if not path.is_file():
        return False
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(data, dict) and data.get("draft") is True


def stage_context(stage: str, *, study_path: str | Path, record_dir: str | Path, model_path: str | Path = "") -> StageContext:
    """Build a :class:`StageContext` from plain arguments (the runner and tests use this)."""
    if stage not in STAGES:
        raise RiskvetError(problem("stage", allowed=f"one of {list(STAGES)}", received=stage))
    if not study_path and not record_dir:
        raise RiskvetError(
            f"{stage} notebook: this is a stage template with no study set; open it with `riskvet lab STUDY.yaml`, which "
            "makes working copies with the study and a draft folder filled in, or run the chain with `riskvet run STUDY.yaml`")
    if not study_path:
        raise RiskvetError(problem(f"{stage} notebook: study_path", allowed="the path of a study file", received=study_path))
    if not record_dir:
        raise RiskvetError(problem(f"{stage} notebook: record_dir", allowed="the path of a record folder", received=record_dir))
    study = load_study(study_path)
    record = Path(record_dir).resolve()
    model = Path(model_path).resolve() if model_path else record / "models" / "model.json"
    draft = is_draft(record)
    if draft and stage in _NEEDS_MODEL and not model.is_file():
        raise RiskvetError(
            f"{stage} notebook: the draft folder holds no frozen model yet ({model}); run the derivation notebook "
            "(templates/derivation.ipynb) of this workbench first")
    return StageContext(stage=stage, study=study, study_path=Path(study_path).resolve(), record_dir=record, model_path=model,
                        draft=draft)


#: Stages that cannot run without the frozen model (internal validation and the summary read it when it is there).
_NEEDS_MODEL = ("external_validation", "updating")


def _reviewer_display() -> None:
    """Table display for reviewers: every column, whole cells, three decimals."""
    import pandas as pd

    pd.set_option("display.max_columns", None)
    pd.set_option("display.max_colwidth", None)
    pd.set_option("display.width", 250)
    pd.set_option("display.max_rows", 300)
    pd.set_option("display.precision", 3)


def open_stage(stage: str, namespace: Mapping[str, Any]) -> StageContext:
    """Validate a stage notebook's parameters and open its context.

    Parameters
    ----------
    stage : str
        The notebook's stage.
    namespace : mapping
        The notebook's ``globals()`` just after the parameters (and any
        papermill-injected parameters) are defined.

    Raises
    ------
    RiskvetError
        An unknown parameter (with the allowed names), a parameter of the wrong
        type, or an invalid study.
    """
    names = {
        k
        for k, v in namespace.items()
        if not k.startswith("_")
        and k not in _IPYTHON_NAMES
        and not isinstance(v, (types.ModuleType, types.FunctionType, type))
    }
    unknown = sorted(names - set(STAGE_PARAMETERS))
    if unknown:
        raise RiskvetError(
            problem(f"{stage} notebook parameters", allowed=f"only {sorted(STAGE_PARAMETERS)}", received=unknown)
        )
    _reviewer_display()
    values = {k: namespace.get(k, default) for k, default in STAGE_PARAMETERS.items()}
    for k, v in values.items():
        if not isinstance(v, str):
            raise RiskvetError(problem(f"{stage} notebook parameter {k}", allowed="a path as a string", received=v))
    context = stage_context(stage, **values)
    context.collect_warnings()
    return context
