"""The parts of checking a filed quality record that need no re-run.

`validate.workflow.verify.verify_record` checks every file of the folder against manifest.json,
the record's content hash, each stored input against the SHA-256 the record holds, budget.csv
against the record's budget, then re-runs the stored method from the stored copies only and
compares the whole record number by number. Left out of the comparison: the run metadata
(record id, date) and where the files were read from, which differ between a run and its
re-run by design; the inputs are compared by their SHA-256.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path

from validate import __version__
from validate.inputs.errors import InputError
from validate.record.files import budget_csv, read_json_file, sha256_of
from validate.record.manifest import RUN_METADATA, FileCheck
from validate.record.stored import INPUTS_FOLDER, RECORD_FILE
from validate.record.tree import RecordShapeError
from validate.record.types import SCHEMA_VERSION, read_record

RELATIVE_TOLERANCE = 1e-9  # numbers agreeing to about 9 significant digits count as reproduced
# Contributions that cancel exactly in theory (a cell's path length read for standards and
# samples alike) come out as round-off of about 1e-15 of the result; such numbers are not
# results. The same software on the same inputs gives the same bits (the report says whether
# it did); the tolerance allows for another machine's floating-point library.
ABSOLUTE_TOLERANCE = 1e-12
BUDGET_FILE = "budget.csv"
DAMAGED = "the file was damaged or edited by hand; restore it from the archive"
_ABSENT = "(absent)"

__all__ = ["ABSOLUTE_TOLERANCE", "INPUTS_FOLDER", "RECORD_FILE", "RELATIVE_TOLERANCE", "FileCheck", "InputCheck",
           "Mismatch", "VerifyReport", "comparable_part", "compare", "read_filed_record", "reproducible_part"]


@dataclass(frozen=True)
class InputCheck:
    """One stored input file against the SHA-256 the record holds for it."""

    path: str  # where the file was read from when the record was made
    stored: str  # the copy, relative to the record's folder
    recorded_sha256: str
    stored_sha256: str | None  # None when the stored copy is missing

    @property
    def matches(self) -> bool:
        return self.stored_sha256 == self.recorded_sha256

    def to_dict(self) -> dict:
        return {"path": self.path, "stored": self.stored, "recorded_sha256": self.recorded_sha256,
                "stored_sha256": self.stored_sha256, "matches": self.matches}


@dataclass(frozen=True)
class Mismatch:
    """A value of the record that the re-run did not reproduce."""

    path: str  # e.g. "results[0].expanded_uncertainty" or "validation.criteria.all_met"
    recorded: object
    recomputed: object

    def to_dict(self) -> dict:
        return {"path": self.path, "recorded": self.recorded, "recomputed": self.recomputed}


@dataclass(frozen=True)
class VerifyReport:
    folder: str
    record_id: str | None
    inputs: tuple[InputCheck, ...]
    trials: int | str | None  # Monte Carlo trials of the re-run (None: linear engine only)
    seed: int | None
    rerun_error: str | None  # why the stored method could not be re-run, if it could not
    numbers_compared: int
    mismatches: tuple[Mismatch, ...]
    recorded_version: str | None = None  # the software version that wrote the record
    current_version: str = __version__  # the version that re-ran it; a difference may explain mismatches
    files: tuple[FileCheck, ...] = ()  # every file of the folder against manifest.json
    has_manifest: bool = False
    content_hash: str | None = None  # recomputed from results.json
    recorded_content_hash: str | None = None  # as manifest.json holds it
    budget_file_matches: bool = False  # budget.csv is exactly what the record's budget gives
    identical: bool = False  # the re-run gave every number bit for bit

    @property
    def inputs_unchanged(self) -> bool:
        return all(check.matches for check in self.inputs)

    @property
    def files_unchanged(self) -> bool:
        return (self.has_manifest and all(f.state == "unchanged" for f in self.files)
                and self.content_hash == self.recorded_content_hash)

    @property
    def reproduced(self) -> bool:
        return self.rerun_error is None and not self.mismatches

    @property
    def passed(self) -> bool:
        return self.files_unchanged and self.budget_file_matches and self.inputs_unchanged and self.reproduced

    def to_dict(self) -> dict:
        return {"folder": self.folder, "record_id": self.record_id, "passed": self.passed,
                "files_unchanged": self.files_unchanged, "has_manifest": self.has_manifest,
                "files": [f.to_dict() for f in self.files], "content_hash": self.content_hash,
                "recorded_content_hash": self.recorded_content_hash,
                "budget_file_matches": self.budget_file_matches,
                "inputs_unchanged": self.inputs_unchanged, "reproduced": self.reproduced,
                "identical": self.identical,
                "inputs": [c.to_dict() for c in self.inputs], "trials": self.trials, "seed": self.seed,
                "rerun_error": self.rerun_error, "numbers_compared": self.numbers_compared,
                "recorded_version": self.recorded_version, "current_version": self.current_version,
                "relative_tolerance": RELATIVE_TOLERANCE, "absolute_tolerance": ABSOLUTE_TOLERANCE,
                "mismatches": [m.to_dict() for m in self.mismatches]}


def reproducible_part(record: dict) -> dict:
    """The record without its run metadata (record id, date), which no re-run repeats."""
    return {key: value for key, value in record.items() if key != RUN_METADATA}


def comparable_part(record: dict) -> dict:
    """What a re-run from the stored copies must give again: the record without its run
    metadata and without the places files were read from (the re-run reads the copies);
    each input is kept as its role and SHA-256."""
    part = reproducible_part(record)
    part["method"] = {k: v for k, v in (part.get("method") or {}).items() if k != "file"}
    part["inputs"] = [{"role": i.get("role"), "sha256": i.get("sha256")} for i in part.get("inputs") or []]
    part.pop("registers", None)  # the register files' places; their contents are among the inputs
    return part


def compare(recorded, recomputed, path: str = "", tolerance: tuple[float, float] | None = None
            ) -> tuple[list[Mismatch], int]:
    """Every difference between two JSON values, with its path, and how many numbers were
    compared. Numbers agree within `tolerance` (relative, absolute; default RELATIVE_TOLERANCE,
    ABSOLUTE_TOLERANCE; (0, 0): bit for bit); everything else must be equal."""
    rel, absolute = tolerance or (RELATIVE_TOLERANCE, ABSOLUTE_TOLERANCE)
    if isinstance(recorded, dict) and isinstance(recomputed, dict):
        return _compare_objects(recorded, recomputed, path, (rel, absolute))
    if isinstance(recorded, list) and isinstance(recomputed, list):
        return _compare_lists(recorded, recomputed, path, (rel, absolute))
    if _is_number(recorded) and _is_number(recomputed):
        same = recorded == recomputed or math.isclose(recorded, recomputed, rel_tol=rel, abs_tol=absolute)
        return ([] if same else [Mismatch(path, recorded, recomputed)]), 1
    return ([] if recorded == recomputed and type(recorded) is type(recomputed)
            else [Mismatch(path, recorded, recomputed)]), 0


def _compare_objects(recorded: dict, recomputed: dict, path: str, tolerance) -> tuple[list[Mismatch], int]:
    found: list[Mismatch] = []
    count = 0
    for key in list(recorded) + [k for k in recomputed if k not in recorded]:
        where = f"{path}.{key}" if path else str(key)
        if key not in recomputed or key not in recorded:
            found.append(Mismatch(where, recorded.get(key, _ABSENT), recomputed.get(key, _ABSENT)))
            continue
        more, n = compare(recorded[key], recomputed[key], where, tolerance)
        found += more
        count += n
    return found, count


def _compare_lists(recorded: list, recomputed: list, path: str, tolerance) -> tuple[list[Mismatch], int]:
    found: list[Mismatch] = []
    count = 0
    if len(recorded) != len(recomputed):
        found.append(Mismatch(f"{path} (number of entries)", len(recorded), len(recomputed)))
    # lists of different lengths are reported above and compared as far as both go
    for index, (a, b) in enumerate(zip(recorded, recomputed, strict=False)):
        more, n = compare(a, b, f"{path}[{index}]", tolerance)
        found += more
        count += n
    return found, count


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def read_filed_record(folder: Path) -> dict:
    """results.json of a record folder, checked against the record's schema before it is used."""
    path = folder / RECORD_FILE
    if not folder.is_dir():
        raise InputError("not a folder", file=folder, fix="give the folder that a `validate run --out` wrote")
    if not os.path.lexists(path):
        raise InputError("no record here", file=path, fix="give the folder that a `validate run --out` wrote")
    try:
        record = read_json_file(path, "the record", DAMAGED)
    except OSError as exc:
        raise InputError(f"the record cannot be read ({exc.strerror})", file=path, fix=DAMAGED) from None
    if not isinstance(record, dict) or not all(k in record for k in ("inputs", "results")):
        raise InputError("this file is not a record written by validate", file=path,
                         fix="give the folder that a `validate run --out` wrote")
    _check_layout(record, path)
    return record


def _check_layout(record: dict, path: Path) -> None:
    """Refuse a record that is not of the layout this version reads (results.schema.json)."""
    version = record.get("schema_version")
    if not isinstance(version, str) or version.split(".")[0] != SCHEMA_VERSION.split(".")[0]:
        raise InputError(f"the record has layout version {version or '(none: written before versioned layouts)'}; "
                         f"this version of validate reads layout {SCHEMA_VERSION}", file=path, where="schema_version",
                         fix=f"verify it with the version of validate that wrote it "
                             f"({recorded_version(record) or 'unknown'}), or run the stored method again")
    try:
        read_record(record)
    except RecordShapeError as exc:
        raise InputError(f"the record does not have the layout of version {SCHEMA_VERSION}: {exc.problem}",
                         file=path, where=exc.where, fix=DAMAGED) from None


def check_input(folder: Path, entry: dict) -> InputCheck:
    stored = entry["stored"]
    copy = folder / stored
    digest = sha256_of(copy) if copy.is_file() else None
    return InputCheck(str(entry.get("path", "")), stored, str(entry.get("sha256", "")), digest)


def budget_file_matches(folder: Path, record: dict) -> bool:
    """budget.csv regenerated from the record's budget is byte for byte the file in the folder
    (the sizes first: a file of another size is never read)."""
    path = folder / BUDGET_FILE
    expected = budget_csv(record.get("budget") or [])
    return path.is_file() and path.stat().st_size == len(expected) and path.read_bytes() == expected


def record_id(record: dict) -> str | None:
    return (record.get("run") or {}).get("record_id")


def recorded_version(record: dict) -> str | None:
    return (record.get("software") or {}).get("version")
