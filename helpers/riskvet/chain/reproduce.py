"""Rerun a record from what it holds, and say whether the rerun gives the same results.

:func:`reproduce` takes a record, rebuilds its study (as frozen in the
record's manifest) in a scratch study folder with the data files found in
the original study folder or in a folder the reviewer names, checks that
every data file and template has the SHA-256 the manifest lists, runs the
same stages into a new record beside the original (never touching it), and
compares the two records.
"""

from __future__ import annotations

import math
import shutil
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, TextIO

import yaml

from ..errors import RecordError
from ..intake.study import _StudyLoader, load_study, study_from_dict
from .record import compare_records, read_manifest, sha256_file
from .runner import default_templates_dir, environment, run_study

__all__ = ["Reproduction", "reproduce", "VERDICTS"]

#: Verdicts of :func:`reproduce` and the exit status the command gives each.
VERDICTS = {"identical": 0, "within tolerance": 2, "different": 1}


@dataclass(frozen=True)
class Reproduction:
    """What a rerun of a record gave.

    Attributes
    ----------
    original, rerun : Path
        The record and its rerun (beside it).
    verdict : {"identical", "within tolerance", "different"}
        ``identical``: every results value and model file is the same;
        ``within tolerance``: results differ only by at most ``rtol``
        (relative); ``different``: anything else.
    largest : tuple of (str, float) or None
        The results key with the largest relative difference, and that difference.
    differences : tuple of str
        Results keys that differ beyond ``rtol``.
    package_changes : dict
        Package -> (version in the record, version now), for those that differ.
    """

    original: Path
    rerun: Path
    verdict: str
    largest: tuple[str, float] | None
    differences: tuple[str, ...]
    package_changes: Mapping[str, tuple[str | None, str | None]]

    @property
    def exit_status(self) -> int:
        return VERDICTS[self.verdict]


def _located(path: str, *, old_base: Path, data_dir: Path | None) -> tuple[Path, str]:
    """Where an input listed at ``path`` is now, and its path relative to the study folder (or absolute)."""
    listed = Path(path)
    try:
        relative = listed.relative_to(old_base).as_posix()
    except ValueError:
        relative = None
    candidates = []
    if data_dir is not None:
        if relative is not None:
            candidates.append(data_dir / relative)
        candidates.append(data_dir / listed.name)
    candidates.append(listed)
    found = next((c for c in candidates if c.is_file()), None)
    if found is None:
        where = " or ".join(str(c) for c in candidates)
        raise RecordError(f"reproduce: input {path} not found (looked for {where}); name the folder holding the data with --data")
    return found, relative or str(found.resolve())


def _check_hash(path: Path, expected: str | None, what: str) -> None:
    actual = sha256_file(path)
    if actual != expected:
        raise RecordError(
            f"reproduce: {path}: its SHA-256 {actual[:12]} is not the {expected and expected[:12]} the record lists for {what}; "
            "the file is not what the record analysed, so the rerun would not reproduce it"
        )


def _study_text(manifest: Mapping[str, Any], data_dir: Path | None) -> str | None:
    """The record's own study file, found where it was or in ``data_dir``, hash checked; None when absent."""
    entry = next((e for e in manifest.get("inputs") or [] if e.get("role") == "study"), None)
    if entry is None:
        return None
    listed = Path(str(entry["path"]))
    candidates = ([data_dir / listed.name, data_dir / "study.yaml"] if data_dir is not None else []) + [listed]
    found = next((c for c in candidates if c.is_file()), None)
    if found is None:
        return None
    _check_hash(found, entry.get("sha256"), "the study file")
    return found.read_text(encoding="utf-8")


def _scratch_study(manifest: Mapping[str, Any], record: Path, folder: Path, data_dir: Path | None, out: TextIO) -> Path:
    """The record's study rebuilt in ``folder``: its data files copied at their places, records beside ``record``.

    The study file itself is used when it can be found (it keeps the order of
    the predictors, which tables follow); otherwise the study is rebuilt from
    the manifest, whose keys are sorted.
    """
    study_entry = manifest.get("study") or {}
    old_base = Path(str(study_entry.get("path", ""))).parent
    text = _study_text(manifest, data_dir)
    if text is not None:
        content = yaml.load(text, Loader=_StudyLoader) or {}
    else:
        print("warning: the record's study file was not found; the study is rebuilt from the manifest, whose keys are "
              "sorted, so tables that follow the study's order of predictors may come out in another order", file=out)
        study = study_from_dict(study_entry.get("resolved"), base_dir=old_base, source=f"{record}/manifest.json: study")
        content = study.portable_dict()
    moved: dict[str, str] = {}
    folder.mkdir(parents=True, exist_ok=True)
    for entry in manifest.get("inputs") or []:
        role = str(entry.get("role", ""))
        if not role.startswith("data."):
            continue
        found, relative = _located(str(entry["path"]), old_base=old_base, data_dir=data_dir)
        _check_hash(found, entry.get("sha256"), role)
        if Path(relative).is_absolute():
            moved[str(entry["path"])] = relative
            continue
        target = folder / relative
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(found, target)

    def relocate(value: Any) -> Any:
        if isinstance(value, dict):
            return {k: relocate(v) for k, v in value.items()}
        if isinstance(value, list):
            return [relocate(v) for v in value]
        return moved.get(value, value) if isinstance(value, str) else value

    content = relocate(content)
    content["output"] = {**(content.get("output") or {}), "records": str(record.parent)}
    path = folder / "study.yaml"
    path.write_text(yaml.safe_dump(content, sort_keys=False, allow_unicode=True), encoding="utf-8")
    return path


def _scratch_templates(manifest: Mapping[str, Any], folder: Path) -> Path:
    """The record's templates, each found by its listed path or among the shipped ones, hash checked."""
    folder.mkdir(parents=True, exist_ok=True)
    for entry in manifest.get("templates") or []:
        stage, expected = entry.get("stage"), entry.get("sha256")
        candidates = [Path(str(entry.get("path", ""))), default_templates_dir() / f"{stage}.ipynb"]
        found = next((c for c in candidates if c.is_file() and sha256_file(c) == expected), None)
        if found is None:
            raise RecordError(
                f"reproduce: no template for stage {stage!r} has the SHA-256 {str(expected)[:12]} the record lists "
                f"(looked at {candidates[0]} and the shipped {candidates[1]}); the record was made with an adapted "
                "template: put it back where the manifest says"
            )
        shutil.copyfile(found, folder / f"{stage}.ipynb")
    return folder


def _relative_difference(a: Any, b: Any) -> float:
    """``|a - b| / max(|a|, |b|)`` for numbers; 0 for equal values, infinite for other unequal ones."""
    if a == b and type(a) is type(b):
        return 0.0
    if isinstance(a, bool) or isinstance(b, bool) or not isinstance(a, (int, float)) or not isinstance(b, (int, float)):
        return math.inf
    scale = max(abs(a), abs(b))
    return abs(a - b) / scale if scale else math.inf


def _largest_difference(differences: Any) -> tuple[str, float] | None:
    """The results key with the largest relative difference among a comparison's differences."""
    sizes = [(d.key, _relative_difference(d.a, d.b) if d.in_a and d.in_b else math.inf) for d in differences if d.section == "results"]
    return max(sizes, key=lambda kv: kv[1]) if sizes else None


def reproduce(record_dir: str | Path, *, data: str | Path | None = None, rtol: float = 0.0, out: TextIO | None = None) -> Reproduction:
    """Rerun a record's study, data and templates into a new record beside it, and compare.

    Parameters
    ----------
    record_dir : path
        A record of a run that ended (complete, or with a failed stage).
    data : path, optional
        A folder holding the data files (at their places in the study folder,
        or by file name); default: where the manifest lists them.
    rtol : float, default 0
        Results that differ by at most this relative amount count as equal
        within tolerance (floating-point noise between machines).
    out : text stream, optional
        Where the run's progress and the warnings go (default standard output).

    Returns
    -------
    Reproduction

    Raises
    ------
    RecordError
        The record never finished; a data file or template is missing or is
        not the one the record lists (named, before anything runs).
    """
    out = out if out is not None else sys.stdout
    record = Path(record_dir).resolve()
    manifest = read_manifest(record)
    if manifest.get("status") not in ("complete", "failed"):
        raise RecordError(f"reproduce: {record}: that run never finished (status {manifest.get('status')!r}); there is nothing to reproduce")
    if rtol < 0 or not math.isfinite(rtol):
        raise RecordError(f"reproduce: --rtol: expected a relative tolerance >= 0; received {rtol}")
    now = environment()["packages"]
    changes = {k: (v, now.get(k)) for k, v in (manifest.get("packages") or {}).items() if now.get(k) != v}
    for name, (then, current) in sorted(changes.items()):
        print(f"warning: {name} is {current} here but was {then} in the record; results may differ in the last digits", file=out)
    stages = [s["stage"] for s in manifest.get("stages") or [] if s.get("status") in ("ok", "failed")]
    earlier = (manifest.get("from_record") or {}).get("record")
    with tempfile.TemporaryDirectory(prefix="riskvet-reproduce-") as scratch:
        study = _scratch_study(manifest, record, Path(scratch) / "study", Path(data).resolve() if data is not None else None, out)
        if load_study(study).digest() != (manifest.get("study") or {}).get("sha256"):
            print("warning: the rebuilt study's digest is not the record's; the rerun may differ", file=out)
        templates = _scratch_templates(manifest, Path(scratch) / "templates")
        result = run_study(study, stages=stages, from_record=earlier, templates_dir=templates, out=out)
    exact = compare_records(record, result.record_dir)
    exact_results = [d.key for d in exact.differences if d.section == "results"]
    models_same = all(
        (record / rel).read_bytes() == (result.record_dir / rel).read_bytes()
        for rel in (manifest.get("files") or {}) if rel.startswith("models/") and (result.record_dir / rel).is_file()
    )
    if not exact_results and models_same:
        verdict, beyond = "identical", []
    else:
        loose = compare_records(record, result.record_dir, rtol=rtol)
        beyond = [d.key for d in loose.differences if d.section == "results"]
        verdict = "within tolerance" if rtol > 0 and not beyond else "different"
    return Reproduction(
        original=record, rerun=result.record_dir, verdict=verdict,
        largest=None if verdict == "identical" else _largest_difference(exact.differences),
        differences=tuple(beyond), package_changes=changes,
    )
