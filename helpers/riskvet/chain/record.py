"""The analysis record: its manifest, its verification and comparison of two records.

A record is a folder written once by :func:`riskvet.runner.run_study` (layout
in :mod:`riskvet.stagekit`).  Its ``manifest.json`` lists the SHA-256 of every
file in the record, of every input file and template it was made from, and
carries the hash of its own canonical content in the field
``manifest_sha256``, so that an edit to the manifest is detected as surely as
an edit to a results file.

:func:`verify_record` re-hashes everything the manifest lists and reports what
is missing, changed or extra.  :func:`compare_records` sets two records side by
side: study settings, input hashes, package versions and results.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import pandas as pd

from .._jsonable import to_jsonable
from ..errors import RecordError, RiskvetError, problem
from ..intake.study import STAGES, stage_stem
from ..reporting.headlines import flatten, key_results

__all__ = [
    "MANIFEST",
    "MANIFEST_SCHEMA",
    "sha256_file",
    "manifest_digest",
    "write_manifest",
    "read_manifest",
    "template_changes",
    "record_files",
    "layout_problem",
    "enclosing_record",
    "FINISHED",
    "FileCheck",
    "Verification",
    "verify_record",
    "Difference",
    "Comparison",
    "compare_records",
]

#: File name of the manifest inside a record.
MANIFEST = "manifest.json"
#: Schema tag written into every manifest.
MANIFEST_SCHEMA = "riskvet.record/1"
_SELF_HASH = "manifest_sha256"


def _canonical(value: Any) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def sha256_file(path: str | Path) -> str:
    """SHA-256 (hex) of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def manifest_digest(manifest: Mapping[str, Any]) -> str:
    """SHA-256 of the canonical JSON of ``manifest`` without its ``manifest_sha256`` field.

    Canonical JSON: sorted keys, no whitespace, UTF-8.  The digest does not
    change when the file is re-indented, only when its content changes.
    """
    return hashlib.sha256(_canonical({k: v for k, v in manifest.items() if k != _SELF_HASH}).encode("utf-8")).hexdigest()


def write_manifest(record_dir: str | Path, manifest: Mapping[str, Any], *, replace: bool = False) -> Path:
    """Write ``manifest.json`` with its own hash.

    Parameters
    ----------
    record_dir : path
        The record folder.
    manifest : mapping
        JSON-ready content (converted with ``to_jsonable``).
    replace : bool, default False
        Replace a manifest the runner itself wrote earlier in the same run
        (the running manifest); otherwise an existing manifest is an error.
    """
    path = Path(record_dir) / MANIFEST
    if path.exists() and not replace:
        raise RecordError(f"{path}: already exists; a record's manifest is written once")
    content = to_jsonable({k: v for k, v in manifest.items() if k != _SELF_HASH})
    content[_SELF_HASH] = manifest_digest(content)
    tmp = path.with_name(MANIFEST + ".tmp")
    tmp.write_text(json.dumps(content, indent=1, sort_keys=True, allow_nan=False, ensure_ascii=False) + "\n", encoding="utf-8")
    tmp.replace(path)
    return path


def read_manifest(record_dir: str | Path) -> dict[str, Any]:
    """Read a record's manifest (without checking it; see :func:`verify_record`).

    Raises
    ------
    RecordError
        The folder or its manifest is missing, or the manifest is not a JSON
        object, or the folder is a workbench's draft (its manifest says
        ``"draft": true``): a draft is never taken for a record, so verify,
        compare, reproduce and ``run --from`` all refuse it here.
    """
    record = Path(record_dir)
    if not record.is_dir():
        raise RecordError(problem("record", allowed="a record folder written by 'riskvet run'", received=str(record)))
    path = record / MANIFEST
    if not path.is_file():
        raise RecordError(f"{record}: no {MANIFEST}; not a riskvet record (or its manifest was removed)")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise RecordError(f"{path}: not valid JSON ({exc})") from None
    if not isinstance(data, dict):
        raise RecordError(problem(str(path), allowed="a JSON object", received=type(data).__name__))
    if data.get("draft") is True:
        raise RecordError(
            f"{record}: a DRAFT from a workbench (riskvet lab), not a record: nothing in it is hashed or checked. "
            "Make a record with: riskvet run STUDY.yaml --templates <workbench>/templates")
    return data


def record_files(record_dir: str | Path) -> dict[str, dict[str, Any]]:
    """Every file of a record except its manifest: relative POSIX path -> sha256 and bytes."""
    record = Path(record_dir)
    out: dict[str, dict[str, Any]] = {}
    for path in sorted(record.rglob("*")):
        if path.is_file():
            rel = path.relative_to(record).as_posix()
            if rel in (MANIFEST, MANIFEST + ".tmp"):
                continue
            out[rel] = {"sha256": sha256_file(path), "bytes": path.stat().st_size}
    return out


# -- layout ---------------------------------------------------------------------------------

#: Run statuses of a record whose run ended (with or without a failed stage).
FINISHED = ("complete", "failed")

_NAME = r"[A-Za-z0-9][A-Za-z0-9._-]*"
_LAYOUT = (
    re.compile(r"study\.json"),
    re.compile(rf"notebooks/(?P<nb>{_NAME})\.ipynb"),
    re.compile(rf"html/(?P<html>{_NAME})\.html"),
    re.compile(rf"results/(?P<results>{_NAME})\.json"),
    re.compile(rf"figures/(?P<figures>{_NAME})/{_NAME}\.(png|svg)"),
    re.compile(rf"models/{_NAME}\.json"),
)


def layout_problem(rel: str) -> str | None:
    """Why a file at ``rel`` (relative POSIX path) is not where the runner writes one, or None.

    The runner writes ``study.json``, ``notebooks/NN_<stage>.ipynb``,
    ``html/NN_<stage>.html`` and ``html/index.html``, ``results/<stage>.json``,
    ``figures/<stage>/<name>.png|svg`` and ``models/<name>.json``, and
    nothing else besides the manifest.
    """
    stems = {stage_stem(stage) for stage in STAGES}
    for pattern in _LAYOUT:
        match = pattern.fullmatch(rel)
        if match is None:
            continue
        found = {k: v for k, v in match.groupdict().items() if v is not None}
        if "html" in found and found["html"] == "index":
            return None
        if "nb" in found and found["nb"] not in stems or "html" in found and found["html"] not in stems:
            return "not the page of a stage (names are NN_<stage>)"
        if ("results" in found and found["results"] not in STAGES) or ("figures" in found and found["figures"] not in STAGES):
            return "not a stage of the chain"
        return None
    return "outside the layout the runner writes (study.json, notebooks/, html/, results/, figures/<stage>/, models/)"


def enclosing_record(path: str | Path) -> Path | None:
    """The record folder that ``path`` is, or lies inside, if any.

    A record is a folder holding ``manifest.json`` with the record schema;
    a folder of records is not a record.
    """
    here = Path(path).expanduser().resolve()
    for folder in (here, *here.parents):
        candidate = folder / MANIFEST
        if candidate.is_file():
            try:
                schema = json.loads(candidate.read_text(encoding="utf-8")).get("schema")
            except (OSError, ValueError, AttributeError):
                schema = None
            if schema == MANIFEST_SCHEMA:
                return folder
    return None


# -- verification ---------------------------------------------------------------------------


@dataclass(frozen=True)
class FileCheck:
    """One file checked against the manifest.

    Attributes
    ----------
    kind : {"manifest", "record", "layout", "input", "template"}
        ``record``: a file inside the record; ``layout``: a file where the
        runner never writes one (see :func:`layout_problem`); ``input`` /
        ``template``: a file outside it that the record was made from.
    path : str
        Relative to the record for ``record`` files, else as listed.
    status : {"ok", "changed", "missing", "extra", "misplaced", "unreachable"}
        ``extra``: present in the record but not listed; ``misplaced``: not
        where the runner writes files (listed or not); ``unreachable``: an
        input or template not found where it was (the record may have been
        moved to another machine), reported but not counted as a problem.
    expected, actual : str or None
        SHA-256 listed and found.
    """

    kind: str
    path: str
    status: str
    expected: str | None
    actual: str | None

    @property
    def problem(self) -> bool:
        return self.status in ("changed", "missing", "extra", "misplaced")

    def to_dict(self) -> dict[str, Any]:
        return {"kind": self.kind, "path": self.path, "status": self.status, "expected": self.expected, "actual": self.actual}


@dataclass(frozen=True)
class Verification:
    """Result of :func:`verify_record`.

    Attributes
    ----------
    record : str
        The record folder.
    run_id : str or None
        From the manifest.
    run_status : str or None
        The run's own status in the manifest (``complete``, ``failed``, ...).
    checks : tuple of FileCheck
        Every file checked, problems first.
    """

    record: str
    run_id: str | None
    run_status: str | None
    checks: tuple[FileCheck, ...]

    @property
    def problems(self) -> tuple[FileCheck, ...]:
        return tuple(c for c in self.checks if c.problem)

    @property
    def ok(self) -> bool:
        """True when nothing is missing, changed, extra or misplaced."""
        return not self.problems

    @property
    def finished(self) -> bool:
        """True when the manifest says the run ended (complete, or with a failed stage)."""
        return self.run_status in FINISHED

    @property
    def complete(self) -> bool:
        """True for an intact record of a run that ended: the only kind ``riskvet verify`` passes."""
        return self.ok and self.finished

    def counts(self) -> dict[str, int]:
        out: dict[str, int] = {}
        for c in self.checks:
            out[c.status] = out.get(c.status, 0) + 1
        return dict(sorted(out.items()))

    def to_dict(self) -> dict[str, Any]:
        return {
            "record": self.record,
            "run_id": self.run_id,
            "run_status": self.run_status,
            "ok": self.ok,
            "finished": self.finished,
            "counts": self.counts(),
            "checks": [c.to_dict() for c in self.checks],
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per file checked: kind, path, status, expected and actual hash (first 12 characters)."""
        rows = [
            {"kind": c.kind, "path": c.path, "status": c.status,
             "expected": (c.expected or "")[:12], "actual": (c.actual or "")[:12]}
            for c in self.checks
        ]
        return pd.DataFrame(rows, columns=["kind", "path", "status", "expected", "actual"])


_ORDER = {"changed": 0, "missing": 1, "extra": 2, "misplaced": 3, "unreachable": 4, "ok": 5}


def verify_record(record_dir: str | Path, *, check_inputs: bool = True) -> Verification:
    """Re-hash a record against its manifest.

    Parameters
    ----------
    record_dir : path
        The record folder.
    check_inputs : bool, default True
        Also re-hash the input files (study, data, an earlier model) and
        templates the manifest lists.  An input that differs is a problem (the
        file at that path is no longer what was analysed); one that cannot be
        found is reported as ``unreachable`` only.

    Returns
    -------
    Verification
        ``ok`` is False when the manifest was edited, or when any file is
        missing, changed, extra, or where the runner never writes one;
        ``complete`` is also False when the run never ended (its manifest
        says ``running`` or ``interrupted``).

    Raises
    ------
    RecordError
        The folder has no readable manifest.
    """
    record = Path(record_dir)
    manifest = read_manifest(record)
    checks: list[FileCheck] = []
    stored = manifest.get(_SELF_HASH)
    actual = manifest_digest(manifest)
    checks.append(FileCheck("manifest", MANIFEST, "ok" if stored == actual else "changed", stored, actual))
    listed = manifest.get("files")
    if not isinstance(listed, dict):
        listed = {}
        checks.append(FileCheck("manifest", MANIFEST + ":files", "missing", None, None))
    present = record_files(record)
    for rel, entry in sorted(listed.items()):
        expected = entry.get("sha256") if isinstance(entry, dict) else None
        if rel not in present:
            checks.append(FileCheck("record", rel, "missing", expected, None))
        else:
            found = present[rel]["sha256"]
            checks.append(FileCheck("record", rel, "ok" if found == expected else "changed", expected, found))
    for rel in sorted(set(present) - set(listed)):
        checks.append(FileCheck("record", rel, "extra", None, present[rel]["sha256"]))
    for rel in sorted(set(present) | set(listed)):
        if layout_problem(rel) is not None:
            found = present.get(rel, {}).get("sha256")
            checks.append(FileCheck("layout", rel, "misplaced", None, found))
    if check_inputs:
        for kind, key in (("input", "inputs"), ("template", "templates")):
            for entry in manifest.get(key) or []:
                path = Path(str(entry.get("path", "")))
                expected = entry.get("sha256")
                if not path.is_file():
                    checks.append(FileCheck(kind, str(path), "unreachable", expected, None))
                    continue
                found = sha256_file(path)
                checks.append(FileCheck(kind, str(path), "ok" if found == expected else "changed", expected, found))
    checks.sort(key=lambda c: (_ORDER[c.status], c.kind != "manifest", c.path))
    return Verification(
        record=str(record),
        run_id=manifest.get("run_id"),
        run_status=manifest.get("status"),
        checks=tuple(checks),
    )


# -- comparison -----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Difference:
    """One place where two records differ.

    Attributes
    ----------
    section : {"record", "study", "inputs", "templates", "packages", "results"}
    key : str
        Key path inside the section (``selection.seed``; ``derivation.auc``).
        A stage whose results exist in one record only is one difference,
        keyed by the stage name, with the file name on the side that has it.
    a, b : object
        The value in record A and in record B (``None`` for JSON null or absent).
    in_a, in_b : bool
        Whether the key exists in A and in B.
    """

    section: str
    key: str
    a: Any
    b: Any
    in_a: bool = True
    in_b: bool = True

    def to_dict(self) -> dict[str, Any]:
        return {"section": self.section, "key": self.key, "a": to_jsonable(self.a), "b": to_jsonable(self.b),
                "in_a": self.in_a, "in_b": self.in_b}


@dataclass(frozen=True)
class Comparison:
    """Result of :func:`compare_records`.

    Attributes
    ----------
    record_a, record_b : str
        The two record folders.
    run_a, run_b : str or None
        Their run ids.
    differences : tuple of Difference
        In section order, then key order.
    headline : DataFrame
        Key results side by side: ``stage``, ``measure``, ``a``, ``b``,
        ``key``, ``same`` (the key results the summary stage shows, see
        :func:`riskvet.reporting.headlines.key_results`), for the union of both records.
    """

    record_a: str
    record_b: str
    run_a: str | None
    run_b: str | None
    differences: tuple[Difference, ...]
    headline: pd.DataFrame

    @property
    def identical_results(self) -> bool:
        return not any(d.section == "results" for d in self.differences)

    def section(self, name: str) -> tuple[Difference, ...]:
        return tuple(d for d in self.differences if d.section == name)

    def to_dict(self) -> dict[str, Any]:
        return {
            "record_a": self.record_a,
            "record_b": self.record_b,
            "run_a": self.run_a,
            "run_b": self.run_b,
            "differences": [d.to_dict() for d in self.differences],
            "headline": to_jsonable(self.headline),
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per difference: section, key, a, b."""
        rows = []
        for d in self.differences:
            a, b = _shown(d.a, d.in_a), _shown(d.b, d.in_b)
            if a == b:  # equal when rounded for reading: show every digit
                a, b = _shown(d.a, d.in_a, digits=17), _shown(d.b, d.in_b, digits=17)
            rows.append({"section": d.section, "key": d.key, "a": a, "b": b})
        return pd.DataFrame(rows, columns=["section", "key", "a", "b"])


def _shown(value: Any, present: bool = True, *, digits: int = 6) -> str:
    if not present:
        return "(absent)"
    if value is None:
        return "null"
    if isinstance(value, float):
        return f"{value:.{digits}g}"
    return json.dumps(value, ensure_ascii=False) if isinstance(value, (dict, list)) else str(value)


def _same(a: Any, b: Any, *, rtol: float = 0.0) -> bool:
    """Equal values: 2 and 2.0 are the same number, True and 1 are not, NaN equals NaN.

    Numbers also count as equal when ``|a - b| <= rtol * max(|a|, |b|)``.
    """
    numbers = (int, float)
    if isinstance(a, numbers) and isinstance(b, numbers) and not isinstance(a, bool) and not isinstance(b, bool):
        if a == b or (isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b)):
            return True
        return rtol > 0 and math.isfinite(a) and math.isfinite(b) and abs(a - b) <= rtol * max(abs(a), abs(b))
    return type(a) is type(b) and a == b


def _diff(section: str, a: Any, b: Any, *, rtol: float = 0.0) -> list[Difference]:
    fa, fb = dict(flatten(a)), dict(flatten(b))
    out = []
    for key in sorted(set(fa) | set(fb)):
        va, vb = fa.get(key), fb.get(key)
        if key in fa and key in fb and _same(va, vb, rtol=rtol):
            continue
        out.append(Difference(section, key, va, vb, in_a=key in fa, in_b=key in fb))
    return out


def _stage_rank(stage: str) -> tuple[int, str]:
    from ..intake.study import STAGES

    return (STAGES.index(stage) if stage in STAGES else len(STAGES), stage)


def _read_results(record: Path) -> dict[str, Any]:
    out = {}
    folder = record / "results"
    for path in sorted(folder.glob("*.json")) if folder.is_dir() else []:
        try:
            out[path.stem] = json.loads(path.read_text(encoding="utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise RecordError(f"{path}: not valid JSON ({exc})") from None
    return out


def _by_role(entries: Any, key: str) -> dict[str, str]:
    return {str(e.get(key)): e.get("sha256") for e in entries or [] if isinstance(e, dict)}


def compare_records(record_a: str | Path, record_b: str | Path, *, rtol: float = 0.0) -> Comparison:
    """Set two records side by side.

    Parameters
    ----------
    record_a, record_b : path
        Two record folders (either may have failed; what exists is compared).
    rtol : float, default 0
        Results whose numbers differ by at most this fraction of the larger
        are not differences.  0 (the default) asks for identical numbers, which
        two runs of the same study, data and code give; a small value such as
        1e-9 ignores floating-point noise between machines or library builds.

    Returns
    -------
    Comparison
        Differences in: ``record`` (status, stage statuses, riskvet version
        and source digest, Python, platform, seeds, git commit, the model used); ``study`` (a
        key-path diff of the resolved studies); ``inputs`` and ``templates``
        (SHA-256 by role / stage); ``packages`` (versions); ``results``
        (every leaf of every ``results/<stage>.json``).  Times and run ids are
        not differences.  ``headline`` puts the key results side by side.
    """
    if not (isinstance(rtol, (int, float)) and not isinstance(rtol, bool) and 0 <= rtol < 1):
        raise RiskvetError(problem("compare_records(rtol)", allowed="a number from 0 up to (not including) 1", received=rtol))
    a, b = Path(record_a), Path(record_b)
    ma, mb = read_manifest(a), read_manifest(b)
    differences: list[Difference] = []

    def record_view(m: Mapping[str, Any]) -> dict[str, Any]:
        return {
            "status": m.get("status"),
            "stages": {s.get("stage"): s.get("status") for s in m.get("stages") or [] if isinstance(s, dict)},
            "riskvet_version": m.get("riskvet_version"),
            "riskvet_source_sha256": (m.get("riskvet_source") or {}).get("sha256"),
            "python": m.get("python"),
            "platform": m.get("platform"),
            "numerical_libraries": m.get("numerical_libraries"),
            "fitter_kernels": m.get("fitter_kernels"),
            "seeds": m.get("seeds"),
            "git_commit": (m.get("git") or {}).get("commit"),
            "study_sha256": (m.get("study") or {}).get("sha256"),
            "model_sha256": (m.get("files") or {}).get("models/model.json", {}).get("sha256"),
        }

    differences += _diff("record", record_view(ma), record_view(mb))
    differences += _diff("study", (ma.get("study") or {}).get("resolved"), (mb.get("study") or {}).get("resolved"))
    differences += _diff("inputs", _by_role(ma.get("inputs"), "role"), _by_role(mb.get("inputs"), "role"))
    differences += _diff("templates", _by_role(ma.get("templates"), "stage"), _by_role(mb.get("templates"), "stage"))
    differences += _diff("packages", ma.get("packages"), mb.get("packages"))
    ra, rb = _read_results(a), _read_results(b)
    for stage in sorted(set(ra) | set(rb), key=_stage_rank):
        if stage in ra and stage in rb:
            differences += _diff("results", {stage: ra[stage]}, {stage: rb[stage]}, rtol=rtol)
        else:
            name = f"results/{stage}.json"
            differences.append(Difference("results", stage, name if stage in ra else None, name if stage in rb else None,
                                          in_a=stage in ra, in_b=stage in rb))

    headline = _side_by_side(ra, rb, levels=_levels(ma) or _levels(mb), rtol=rtol)
    return Comparison(
        record_a=str(a), record_b=str(b), run_a=ma.get("run_id"), run_b=mb.get("run_id"),
        differences=tuple(differences), headline=headline,
    )


def _levels(manifest: Mapping[str, Any]) -> tuple[str, ...]:
    """Outcome levels coded 0..K-1 of a manifest's resolved study (empty if it cannot be read)."""
    from ..intake.study import study_from_dict

    try:
        return tuple(study_from_dict((manifest.get("study") or {}).get("resolved")).outcome.ordered_levels)
    except (RiskvetError, TypeError, AttributeError):
        return ()


def _side_by_side(ra: Mapping[str, Any], rb: Mapping[str, Any], *, levels: tuple[str, ...], rtol: float) -> pd.DataFrame:
    from ..intake.study import STAGES

    columns = ["stage", "measure", "key"]
    ka = key_results({s: r for s, r in ra.items() if s != "summary"}, levels=levels)
    kb = key_results({s: r for s, r in rb.items() if s != "summary"}, levels=levels)
    ka = ka[columns + ["value"]].assign(_pa=range(len(ka)))
    kb = kb[columns + ["value"]].assign(_pb=range(len(kb)))
    merged = ka.merge(kb, on=columns, how="outer", suffixes=("_a", "_b"))
    # chain order of stages, then the order the summary lists them (A's, then B's own)
    rank = {s: i for i, s in enumerate(STAGES)}
    merged = merged.assign(
        _s=merged["stage"].map(lambda s: rank.get(s, len(rank))),
        _p=merged["_pa"].fillna(len(ka) + merged["_pb"]),
    ).sort_values(["_s", "_p"], kind="stable")
    table = pd.DataFrame({
        "stage": merged["stage"].to_list(),
        "measure": merged["measure"].to_list(),
        "a": [None if _missing(v) else v for v in merged["value_a"]],
        "b": [None if _missing(v) else v for v in merged["value_b"]],
        "key": merged["key"].to_list(),
    })
    table["same"] = [_same(x, y, rtol=rtol) for x, y in zip(table["a"], table["b"])]
    return table


def _missing(value: Any) -> bool:
    try:
        return value is None or bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _cell_text(cell: dict[str, Any]) -> str:
    """A cell as compared: its kind and source; a parameters cell compares equal whatever its values."""
    source = cell.get("source", "")
    source = "".join(source) if isinstance(source, list) else str(source)
    if "parameters" in (cell.get("metadata", {}).get("tags") or []):
        source = "<parameters>"
    return f"{cell.get('cell_type')}\n{source.strip()}"


def template_changes(template: str | Path, shipped: str | Path) -> dict[str, Any]:
    """How a template differs from the shipped one: cells added, removed and changed.

    Cells are compared in order by kind and source (outputs, ids and the
    values of the parameters cell are ignored), with
    :class:`difflib.SequenceMatcher`: a replaced run of cells counts as
    changed up to the shorter side's length, the rest as added or removed.

    Returns
    -------
    dict
        ``same_as_shipped``, ``cells_added``, ``cells_removed``,
        ``cells_changed`` and ``changed_cells`` (the 1-based positions, in
        the adapted template, of the cells added or changed).
    """
    ours = [_cell_text(c) for c in json.loads(Path(template).read_text(encoding="utf-8")).get("cells", [])]
    theirs = [_cell_text(c) for c in json.loads(Path(shipped).read_text(encoding="utf-8")).get("cells", [])]
    added = removed = changed = 0
    touched: list[int] = []
    for tag, i1, i2, j1, j2 in difflib.SequenceMatcher(a=theirs, b=ours, autojunk=False).get_opcodes():
        if tag == "insert":
            added += j2 - j1
            touched += list(range(j1 + 1, j2 + 1))
        elif tag == "delete":
            removed += i2 - i1
        elif tag == "replace":
            common = min(i2 - i1, j2 - j1)
            changed += common
            added += max(0, (j2 - j1) - common)
            removed += max(0, (i2 - i1) - common)
            touched += list(range(j1 + 1, j2 + 1))
    return {"same_as_shipped": added == removed == changed == 0, "cells_added": added, "cells_removed": removed,
            "cells_changed": changed, "changed_cells": touched}
