"""A workbench for one study in JupyterLab: stage notebooks to run cell by cell, a draft folder, the way back to a record.

``riskvet lab STUDY.yaml`` makes (or reopens) the folder ``workbench/``
beside the study file::

    workbench/templates/README.md  the order of the notebooks and the command that makes the record
    workbench/templates/<stage>.ipynb
                                   a working copy of each enabled stage's template, its parameters
                                   cell set to the study and to the draft folder
    workbench/draft/               where those notebooks write, in a record's layout
    workbench/draft/manifest.json  says "draft": it is not a record

and starts JupyterLab on it.  A draft is never a record: it has no hashes,
``riskvet verify``, ``compare``, ``reproduce`` and ``run --from`` refuse it
(:func:`riskvet.chain.record.read_manifest`), and its files may be written
again as the analyst reruns a cell (a record's files are written once).
When the adapted notebooks are right, ``riskvet run STUDY.yaml --templates
workbench/templates`` makes the real record from them; its manifest says,
for each template, how it differs from the shipped one
(:func:`template_changes`).

Reopening keeps the analyst's edits: a working copy is only written when it
is missing, and only its parameters cell is set again.
"""

from __future__ import annotations

import json
import os
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import RiskvetError, problem
from ..intake.study import STAGES, load_study
from .record import template_changes
from .stagekit import is_draft

__all__ = [
    "WORKBENCH",
    "DRAFT_SCHEMA",
    "Workbench",
    "open_workbench",
    "is_draft",
    "template_changes",
    "set_parameters",
    "lab_command",
]

#: The workbench folder's name, beside the study file.
WORKBENCH = "workbench"
#: The schema a draft folder's manifest names.
DRAFT_SCHEMA = "riskvet.draft/1"


@dataclass(frozen=True)
class Workbench:
    """A study's workbench.

    Attributes
    ----------
    folder : Path
        ``workbench/`` beside the study file.
    templates : Path
        The working copies of the stage templates.
    draft : Path
        The draft folder the working copies write to.
    study_path : Path
        The study file.
    notebooks : tuple of Path
        The working copy of each enabled stage, in chain order.
    written : tuple of str
        Stages whose working copy was written now (the others existed and were kept).
    """

    folder: Path
    templates: Path
    draft: Path
    study_path: Path
    notebooks: tuple[Path, ...]
    written: tuple[str, ...] = ()

    @property
    def run_command(self) -> str:
        """The command that makes the real record from the working copies."""
        return f"riskvet run {_quoted(self.study_path)} --templates {_quoted(self.templates)}"


def _quoted(path: Path) -> str:
    text = str(path)
    return f'"{text}"' if any(ch.isspace() for ch in text) else text


def set_parameters(notebook: dict[str, Any], values: dict[str, str]) -> dict[str, Any]:
    """The notebook with its ``parameters`` cell holding ``values`` (plain ``name = "literal"`` lines)."""
    for cell in notebook.get("cells", []):
        if cell.get("cell_type") == "code" and "parameters" in (cell.get("metadata", {}).get("tags") or []):
            cell["source"] = "\n".join(f"{name} = {json.dumps(value)}" for name, value in values.items())
            cell["outputs"] = []
            cell["execution_count"] = None
            return notebook
    raise RiskvetError(problem("stage template", allowed="a code cell tagged 'parameters'", received="none"))


def _draft_manifest(draft: Path, study_path: Path) -> None:
    path = draft / "manifest.json"
    if path.is_file():
        if not is_draft(draft):
            raise RiskvetError(f"{draft}: holds a manifest that is not a draft's; a workbench never writes into a record")
        return
    draft.mkdir(parents=True, exist_ok=True)
    content = {
        "schema": DRAFT_SCHEMA,
        "draft": True,
        "status": "draft",
        "study": {"path": str(study_path)},
        "note": ("work in progress from JupyterLab, not a record: nothing here is hashed or checked, files are "
                 "written again as cells are rerun, and riskvet verify refuses it; make the record with riskvet run"),
    }
    path.write_text(json.dumps(content, indent=1, sort_keys=True) + "\n", encoding="utf-8")


def _readme(bench: Workbench, stages: tuple[str, ...]) -> str:
    order = "\n".join(f"{i}. `templates/{s}.ipynb`" for i, s in enumerate(stages, 1))
    return (
        f"# Workbench of {bench.study_path.name}\n\n"
        "Working copies of the stage notebooks of this study, for JupyterLab. Run them in this order, top to "
        "bottom or cell by cell; each writes its results, figures and model files into `../draft/` (a draft, never a "
        "record: files there are overwritten as cells are rerun, and `riskvet verify` refuses it). A stage that uses "
        "the frozen model needs the draft derivation first.\n\n"
        f"{order}\n\n"
        "Adapt a notebook here (add a figure, change a table); the stage modules under `helpers/riskvet` stay the "
        "place for anything worth computing. When the notebooks are right, make the real record from them:\n\n"
        f"    {bench.run_command}\n\n"
        "Its manifest lists, for each notebook, the cells added, removed or changed against the shipped template.\n\n"
        "Statistical evaluation is not clearance for clinical use: local validation, governance and licensed "
        "clinical judgement decide whether a model is used.\n"
    )


def open_workbench(study_path: str | Path, *, templates_dir: str | Path | None = None) -> Workbench:
    """Make (or reopen) the workbench of a study: working copies of the templates and a draft folder.

    Parameters
    ----------
    study_path : path
        The study file (validated first).
    templates_dir : path, optional
        Where to copy the templates from (default: the shipped templates).

    Returns
    -------
    Workbench

    Raises
    ------
    StudyError
        The study file is not valid.
    RiskvetError
        A template is missing, or the draft folder holds a record's manifest.
    """
    from .runner import template_path

    study_path = Path(study_path).resolve()
    study = load_study(study_path)
    folder = study_path.parent / WORKBENCH
    templates, draft = folder / "templates", folder / "draft"
    stages = tuple(s for s in STAGES if s in study.enabled_stages)
    templates.mkdir(parents=True, exist_ok=True)
    _draft_manifest(draft, study_path)
    values = {"study_path": str(study_path), "record_dir": str(draft), "model_path": ""}
    written, notebooks = [], []
    for stage in stages:
        target = templates / f"{stage}.ipynb"
        source = target if target.is_file() else template_path(stage, templates_dir=templates_dir)
        if source != target:
            written.append(stage)
        notebook = json.loads(Path(source).read_text(encoding="utf-8"))
        target.write_text(json.dumps(set_parameters(notebook, values), indent=1, ensure_ascii=False) + "\n", encoding="utf-8")
        notebooks.append(target)
    bench = Workbench(folder=folder, templates=templates, draft=draft, study_path=study_path,
                      notebooks=tuple(notebooks), written=tuple(written))
    (bench.templates / "README.md").write_text(_readme(bench, stages), encoding="utf-8")  # where JupyterLab opens
    return bench


def lab_command(folder: str | Path, *, port: int, token: str, open_browser: bool) -> list[str]:
    """The command line that starts JupyterLab on ``folder``, on the loopback address, with ``token``."""
    argv = [sys.executable, "-m", "jupyterlab", f"--ServerApp.root_dir={folder}", "--ServerApp.ip=127.0.0.1",
            f"--ServerApp.port={int(port)}", "--ServerApp.port_retries=0", f"--IdentityProvider.token={token}"]
    if not open_browser:
        argv.append("--no-browser")
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        argv.append("--allow-root")  # containers and CI machines often run as root; JupyterLab refuses it otherwise
    return argv
