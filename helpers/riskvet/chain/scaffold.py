"""Writing a ready-to-run study folder (``riskvet new``)."""

from __future__ import annotations

import re
from importlib import resources
from pathlib import Path

from .. import demo
from ..errors import RiskvetError

__all__ = ["new_study_folder", "demo_study_text"]

_FOLDER_README = """\
# {name}: a riskvet study folder

This folder was written by `riskvet new`. It holds an invented demo scenario
(heat illness in the first-aid tents of a fictional city's summer run
series); no row describes a real person.

- `study.yaml` describes the analysis; every key is commented.
- `data/` holds the derivation cohort, a later-season validation cohort and a
  small paired-ratings file, all drawn by `riskvet.demo` with seed {seed}.

Check it, then run the whole chain:

    riskvet check study.yaml
    riskvet run study.yaml

Each run writes a new record folder under `records/`; earlier records are
never touched. `riskvet verify records/<run>` re-hashes a record.

Statistical evaluation is not clearance for clinical use: local validation,
governance and licensed clinical judgement decide.
"""


#: The missing-data section of the demo study written for a complete-case analysis.
_COMPLETE_CASE_SECTION = """missing_data:
  method: complete_case            # complete_case | multiple_imputation (chained equations, the outcome in every model)

"""


def demo_study_text(*, n_boot: int | None = None, missing_data: str = "multiple_imputation") -> str:
    """The commented demo study file, optionally with fewer bootstrap replicates or a complete-case analysis."""
    text = resources.files("riskvet").joinpath("resources/demo_study.yaml").read_text(encoding="utf-8")
    if missing_data not in ("multiple_imputation", "complete_case"):
        raise RiskvetError(f"missing_data: expected 'multiple_imputation' or 'complete_case'; received {missing_data!r}")
    if missing_data == "complete_case":
        text = re.sub(r"(?ms)^missing_data:\n.*?\n\n", _COMPLETE_CASE_SECTION, text, count=1)
    if n_boot is not None:
        if n_boot < 1:
            raise RiskvetError(f"n_boot: expected a whole number of at least 1; received {n_boot!r}")
        text = re.sub(r"(?m)^(\s+n_boot:) \d+", rf"\g<1> {n_boot}", text)
    return text


def new_study_folder(
    folder: str | Path,
    *,
    seed: int = demo.DEFAULT_SEED,
    n_derivation: int = 2000,
    n_validation: int = 1500,
    n_ratings: int = 150,
    n_boot: int | None = None,
    missing_data: str = "multiple_imputation",
) -> Path:
    """Write a study folder: ``study.yaml``, ``data/`` and ``README.md``.

    Parameters
    ----------
    folder : path
        Created if absent; must not already hold a ``study.yaml``, ``data/``,
        ``README.md`` or ``.gitignore`` (nothing is overwritten).  The
        ``.gitignore`` keeps ``records/`` and the workbench drafts (``riskvet lab``) out of version control.
    seed, n_derivation, n_validation, n_ratings
        Passed to :func:`riskvet.demo.write_demo_data`.
    n_boot : int, optional
        Bootstrap replicates written into the study file (default as in the
        demo study, 200).
    missing_data : {"multiple_imputation", "complete_case"}
        The study's ``missing_data.method``: the demo study imputes; with
        ``"complete_case"`` its section says complete-case analysis instead.

    Returns
    -------
    Path
        The study file.
    """
    if not str(folder).strip():
        raise RiskvetError("the folder name is empty; name a new or empty folder for the study")
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise RiskvetError(f"{folder}: is a file; riskvet new writes a study folder (name a new or empty folder)")
    for name in ("study.yaml", "data", "README.md", ".gitignore"):
        if (folder / name).exists():
            raise RiskvetError(f"{folder / name}: already exists; riskvet new never overwrites (choose an empty folder)")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        demo.write_demo_data(folder / "data", seed=seed, n_derivation=n_derivation, n_validation=n_validation, n_ratings=n_ratings)
        study = folder / "study.yaml"
        study.write_text(demo_study_text(n_boot=n_boot, missing_data=missing_data), encoding="utf-8")
        (folder / "README.md").write_text(_FOLDER_README.format(name=folder.name, seed=seed), encoding="utf-8")
        # records are written once and kept; whether they go into version control is a deliberate choice
        (folder / ".gitignore").write_text("records/\nworkbench/draft/\nworkbench/jupyterlab.log\n", encoding="utf-8")
    except OSError as exc:
        raise RiskvetError(f"{folder}: cannot write the study folder there ({exc.strerror or exc}); choose a folder you can write to") from None
    return study
