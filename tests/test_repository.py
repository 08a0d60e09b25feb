"""Checks that the repository keeps its promises: README commands, CI, templates."""

from __future__ import annotations

import json
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    quick = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return [block.strip() for block in re.findall(r"```bash\n(.*?)```", quick, flags=re.S)]


def test_quick_start_has_exactly_two_commands():
    commands = _readme_commands()
    assert len(commands) == 2
    assert all("\n" not in c for c in commands)
    assert "riskvet demo" in commands[0]
    assert "pytest" in commands[1]


def test_ci_runs_the_readme_test_command():
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert _readme_commands()[1] in ci


def test_readme_opens_with_the_job_and_carries_the_caution():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    first_paragraph = text.split("\n\n")[1]
    assert first_paragraph.startswith("riskvet is for")
    assert "not clearance for clinical use" in text


def test_templates_are_stored_clean_with_a_parameters_cell():
    for notebook in sorted((ROOT / "templates").glob("*.ipynb")):
        cells = json.loads(notebook.read_text(encoding="utf-8"))["cells"]
        code = [c for c in cells if c["cell_type"] == "code"]
        assert all(not c.get("outputs") and not c.get("execution_count") for c in code), notebook.name
        assert any("parameters" in c.get("metadata", {}).get("tags", []) for c in cells), notebook.name
