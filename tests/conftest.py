"""Records shared by several test modules: the chain run once per test session.

Two small records of the real stage notebooks: the invented demo study
(ordered outcome, every stage, missing values multiply imputed) and the same
study recoded to a binary outcome and analysed on complete cases, so that
both ways of handling missing values run through every page test.  Small data and few replicates keep them fast; the modules that use
them check the chain, the pages in a browser and the disclosure control.
"""

from __future__ import annotations

import io
import json

import pandas as pd
import pytest

from riskvet.chain.runner import RunResult, run_study, template_path
from riskvet.chain.scaffold import new_study_folder
from riskvet.intake.study import STAGES

# Small data and few replicates keep the chain fast; the numbers are not examined by the page tests.
SMALL = dict(n_derivation=400, n_validation=300, n_ratings=60, n_boot=5)


def _missing_templates() -> list[str]:
    return [s for s in STAGES if not template_path(s).is_file()]


def binary_study(folder):
    """The demo study recoded to a binary outcome: transferred against not (observed joins released)."""
    study = new_study_folder(folder, n_derivation=500, n_validation=400, n_ratings=40, n_boot=4, missing_data="complete_case")
    for name in ("derivation.csv", "validation.csv"):
        path = folder / "data" / name
        frame = pd.read_csv(path, dtype=str, keep_default_na=False)
        frame["disposition"] = frame["disposition"].replace({"observed": "released"})
        frame.to_csv(path, index=False)
    text = study.read_text()
    text = text.replace("  type: ordinal", "  type: binary\n  event: transferred")
    text = text.replace("levels: [released, observed, transferred]", "levels: [released, transferred]")
    text = text.replace("    observed: Treated and observed on site\n", "")
    text = text.replace("  observed: [0.2, 0.4]\n", "")
    study.write_text(text)
    return study


@pytest.fixture(scope="session")
def chain(tmp_path_factory) -> RunResult:
    """The demo study, small, every stage."""
    missing = _missing_templates()
    if missing:
        pytest.skip(f"stage templates not written yet: {', '.join(missing)}")
    study = new_study_folder(tmp_path_factory.mktemp("chain") / "demo", **SMALL)
    out = io.StringIO()
    result = run_study(study, out=out)
    if not result.ok:
        failed = result.failed_stage
        pytest.fail(f"stage {failed.stage} failed: {json.dumps(failed.error, indent=1)}\n{out.getvalue()}")
    return result


@pytest.fixture(scope="session")
def binary_chain(tmp_path_factory):
    """The binary recoding of the demo study: (study file, run result)."""
    study = binary_study(tmp_path_factory.mktemp("binary") / "demo")
    result = run_study(study, out=io.StringIO())
    if not result.ok:
        pytest.fail(f"stage {result.failed_stage.stage} failed: {json.dumps(result.failed_stage.error, indent=1)[:3000]}")
    return study, result
