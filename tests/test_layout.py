"""The package layout shows the chain, and its imports run one way.

Layers, first to last: the core (``riskvet``, ``errors``, ``_jsonable``),
intake, modelling, measures, validation, planning, reporting, the chain.  A
module may import its own layer and the layers its layer lists in
``ALLOWED``; the stable import paths at the top of the package (``models``,
``metrics``...) and the demo scenario have their own rows.  The graph is read
from the source with :mod:`ast`, so imports inside functions count too.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

import riskvet

ROOT = Path(riskvet.__file__).resolve().parent

SUBPACKAGES = ("intake", "modelling", "imputation", "measures", "validation", "planning", "reporting", "chain")
STABLE_PATHS = ("models", "metrics", "pooling", "agreement", "bootstrap", "study", "data")

ALLOWED = {
    "core": set(),
    "demo": {"core"},
    "intake": {"core"},
    "modelling": {"core", "intake"},
    "imputation": {"core", "intake", "modelling"},
    "measures": {"core", "intake", "modelling"},
    "validation": {"core", "intake", "modelling", "imputation", "measures"},
    "planning": {"core"},
    "reporting": {"core", "intake", "modelling", "imputation", "measures", "validation", "planning"},
    "chain": {"core", "demo", "intake", "modelling", "imputation", "measures", "validation", "planning", "reporting"},
    "stable": {"core", "intake", "modelling", "imputation", "measures", "validation", "planning", "reporting"},
}


def module_name(path: Path) -> str:
    parts = ["riskvet", *path.relative_to(ROOT).with_suffix("").parts]
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


MODULES = {module_name(p): p for p in sorted(ROOT.rglob("*.py"))}


def layer(module: str) -> str:
    parts = module.split(".")
    if len(parts) == 1 or parts[1] in ("errors", "_jsonable"):
        return "core"
    if parts[1] in SUBPACKAGES:
        return parts[1]
    if parts[1] in STABLE_PATHS:
        return "stable"
    if parts[1] == "demo":
        return "demo"
    raise AssertionError(f"{module} belongs to no layer: put it in a subpackage or give it a row in ALLOWED")


def imports_of(module: str) -> set[str]:
    """Package modules that ``module`` imports anywhere in its source."""
    path = MODULES[module]
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                parts = package.split(".")
                assert node.level <= len(parts), f"{module}: line {node.lineno} imports beyond the top of the package"
                base = parts[: len(parts) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
                assert any(target == m or target.startswith(m + ".") for m in MODULES) or target in MODULES, (
                    f"{module}: line {node.lineno} imports {target}, which is no module of the package"
                )
            else:
                target = node.module or ""
            names = [target] + [f"{target}.{a.name}" for a in node.names]
        else:
            continue
        for name in names:
            # the longest prefix that is a module of the package
            parts = name.split(".")
            for i in range(len(parts), 0, -1):
                candidate = ".".join(parts[:i])
                if candidate in MODULES:
                    if candidate != module:
                        found.add(candidate)
                    break
    return found


GRAPH = {m: imports_of(m) for m in MODULES}


def test_every_module_has_a_layer_and_top_level_is_small():
    for module in MODULES:
        layer(module)
    top = sorted(p.stem for p in ROOT.glob("*.py"))
    assert top == sorted(["__init__", "_jsonable", "errors", "demo", *STABLE_PATHS])


@pytest.mark.parametrize("package", SUBPACKAGES + ("reporting.figures", "chain.stages"))
def test_each_subpackage_says_what_it_holds(package):
    doc = ast.get_docstring(ast.parse((ROOT / package.replace(".", "/") / "__init__.py").read_text()))
    assert doc and len(doc.split()) >= 40, f"riskvet.{package} needs a paragraph saying what it holds and may import"
    assert "import" in doc or package in ("reporting.figures", "chain.stages")


def test_imports_run_one_way_down_the_chain():
    wrong = []
    for module, targets in GRAPH.items():
        mine = layer(module)
        for target in targets:
            theirs = layer(target)
            if theirs != mine and theirs not in ALLOWED[mine]:
                wrong.append(f"{module} ({mine}) imports {target} ({theirs})")
    assert not wrong, "imports against the chain:\n" + "\n".join(sorted(wrong))


def test_no_import_cycles():
    # Tarjan-free version: depth-first search with colours, reporting one cycle.
    colour: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> list[str] | None:
        colour[node] = 1
        stack.append(node)
        for nxt in sorted(GRAPH[node]):
            if colour.get(nxt, 0) == 1:
                return stack[stack.index(nxt):] + [nxt]
            if colour.get(nxt, 0) == 0:
                cycle = visit(nxt)
                if cycle:
                    return cycle
        stack.pop()
        colour[node] = 2
        return None

    for node in sorted(GRAPH):
        if colour.get(node, 0) == 0:
            cycle = visit(node)
            assert cycle is None, "import cycle: " + " -> ".join(cycle)


def test_cycle_finder_finds_a_planted_cycle(monkeypatch):
    planted = dict(GRAPH)
    planted["riskvet.intake.study"] = GRAPH["riskvet.intake.study"] | {"riskvet.intake.data"}
    planted["riskvet.intake.data"] = GRAPH["riskvet.intake.data"] | {"riskvet.intake.study"}
    monkeypatch.setattr(sys.modules[__name__], "GRAPH", planted)
    with pytest.raises(AssertionError, match="import cycle"):
        test_no_import_cycles()


def test_every_module_imports_in_a_fresh_interpreter():
    # One interpreter, but every riskvet module is dropped before each import,
    # so each import starts from nothing of the package, as in a fresh process.
    script = (
        "import importlib, sys\n"
        f"names = {sorted(MODULES)!r}\n"
        "failed = []\n"
        "for name in names:\n"
        "    for m in [m for m in sys.modules if m == 'riskvet' or m.startswith('riskvet.')]:\n"
        "        del sys.modules[m]\n"
        "    try:\n"
        "        importlib.import_module(name)\n"
        "    except Exception as exc:\n"
        "        failed.append(f'{name}: {type(exc).__name__}: {exc}')\n"
        "print('\\n'.join(failed))\n"
        "sys.exit(1 if failed else 0)\n"
    )
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stdout + done.stderr


def test_stable_import_paths_reach_the_same_objects():
    import riskvet.agreement
    import riskvet.bootstrap
    import riskvet.data
    import riskvet.metrics
    import riskvet.models
    import riskvet.planning
    import riskvet.study
    from riskvet.intake import data, study
    from riskvet.measures import agreement, calibration, discrimination
    from riskvet.modelling import fitter, modelfile
    from riskvet.validation import bootstrap

    assert riskvet.models.fit_cumulative is fitter.fit_cumulative
    assert riskvet.models.load is modelfile.load_model
    assert riskvet.metrics.concordance is discrimination.concordance
    assert riskvet.metrics.ordinal_calibration is calibration.ordinal_calibration
    assert riskvet.agreement.icc is agreement.icc and riskvet.agreement.kappa is agreement.kappa
    assert riskvet.bootstrap.validate_internally is bootstrap.validate_internally
    assert riskvet.study.load_study is study.load_study
    assert riskvet.data.load_cohorts is data.load_cohorts
    assert riskvet.planning.development_size.__module__ == "riskvet.planning.samplesize"
    for name in ("models", "metrics", "agreement", "bootstrap", "study", "data", "planning"):
        assert getattr(riskvet, name) is sys.modules[f"riskvet.{name}"]


#: A function longer than this many lines of code says why at its top, in a
#: comment starting with ``# kept whole:`` (the first statement of its body).
MAX_LINES = 80


def code_lines(node: ast.FunctionDef, lines: list[str]) -> int:
    """Lines of a function's body that hold code: no docstring, blank or comment-only lines."""
    body = node.body
    start = body[0].lineno
    if isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant) and isinstance(body[0].value.value, str):
        start = body[0].end_lineno + 1
    return sum(1 for text in lines[start - 1 : node.end_lineno] if text.strip() and not text.strip().startswith("#"))


def says_why(node: ast.FunctionDef, lines: list[str]) -> bool:
    body = node.body
    after = body[0].end_lineno if isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant) else node.lineno
    following = [t.strip() for t in lines[after : after + 3]]
    return any(t.startswith("# kept whole:") for t in following)


def test_no_function_is_too_long_to_read_without_saying_why():
    long = []
    for module, path in MODULES.items():
        lines = path.read_text(encoding="utf-8").splitlines()
        for node in ast.walk(ast.parse("\n".join(lines))):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                n = code_lines(node, lines)
                if n > MAX_LINES and not says_why(node, lines):
                    long.append(f"{module}.{node.name} (line {node.lineno}): {n} lines of code")
    assert not long, f"functions over {MAX_LINES} lines of code with no '# kept whole:' reason:\n" + "\n".join(long)


def test_length_check_counts_code_not_docstrings_or_comments():
    source = 'def f():\n    """Doc.\n\n    More doc.\n    """\n    # a comment\n\n    x = 1\n    return x\n'
    node = ast.parse(source).body[0]
    assert code_lines(node, source.splitlines()) == 2
    assert not says_why(node, source.splitlines())
    reasoned = 'def g():\n    """Doc."""\n    # kept whole: one table, one pass\n    return 1\n'
    assert says_why(ast.parse(reasoned).body[0], reasoned.splitlines())
