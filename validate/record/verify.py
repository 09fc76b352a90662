"""The parts of checking a filed quality record that need no re-run.

`store_inputs` keeps a copy of every input file beside the record (DIR/inputs/, names and
relative folders kept, so the stored method still finds its readings table). Later,
`validate.workflow.verify.verify_record` checks each stored copy against the SHA-256 the record holds, re-runs the
stored method with the recorded seed and number of Monte Carlo trials, and compares the
record's `results` and `budget` number by number. The run metadata (record id, date) under
`run` is not compared: it differs between any two runs by design.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from dataclasses import dataclass
from pathlib import Path

from validate import __version__
from validate.inputs.errors import InputError
from validate.record.files import sha256_of, write_atomic
from validate.record.tree import RecordShapeError
from validate.record.types import SCHEMA_VERSION, read_record

INPUTS_FOLDER = "inputs"
RECORD_FILE = "results.json"
RELATIVE_TOLERANCE = 1e-9  # numbers agreeing to about 9 significant digits count as reproduced
# Contributions that cancel exactly in theory (a cell's path length read for standards and
# samples alike) come out as round-off of about 1e-15 of the result, and the order in which
# floating-point sums are formed may differ between runs; such numbers are not results.
ABSOLUTE_TOLERANCE = 1e-12
COMPARED_SECTIONS = ("results", "budget")
_ABSENT = "(absent)"


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

    path: str  # e.g. "results[0].expanded_uncertainty" or "budget[3].contribution"
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

    @property
    def inputs_unchanged(self) -> bool:
        return all(check.matches for check in self.inputs)

    @property
    def reproduced(self) -> bool:
        return self.rerun_error is None and not self.mismatches

    @property
    def passed(self) -> bool:
        return self.inputs_unchanged and self.reproduced

    def to_dict(self) -> dict:
        return {"folder": self.folder, "record_id": self.record_id, "passed": self.passed,
                "inputs_unchanged": self.inputs_unchanged, "reproduced": self.reproduced,
                "inputs": [c.to_dict() for c in self.inputs], "trials": self.trials, "seed": self.seed,
                "rerun_error": self.rerun_error, "numbers_compared": self.numbers_compared,
                "recorded_version": self.recorded_version, "current_version": self.current_version,
                "relative_tolerance": RELATIVE_TOLERANCE, "absolute_tolerance": ABSOLUTE_TOLERANCE,
                "mismatches": [m.to_dict() for m in self.mismatches]}


def store_inputs(input_files: list[str], out_dir) -> list[dict]:
    """Copy each input file into OUT/inputs/, keeping its name and its folder relative to the
    other inputs. Returns, in the same order, {"path", "stored", "sha256"} for the record;
    the hash is of the bytes stored."""
    paths = [Path(p) for p in input_files]
    if not paths:
        return []
    base = Path(os.path.commonpath([str(p.resolve().parent) for p in paths]))
    entries = []
    for original in paths:
        relative = original.resolve().relative_to(base)
        target = Path(out_dir) / INPUTS_FOLDER / relative
        target.parent.mkdir(parents=True, exist_ok=True)
        data = original.read_bytes()
        write_atomic(target, data)
        entries.append({"path": str(original), "stored": (Path(INPUTS_FOLDER) / relative).as_posix(),
                        "sha256": hashlib.sha256(data).hexdigest()})
    return entries


def reproducible_part(record: dict) -> dict:
    """The record without its run metadata (record id, date), which no re-run repeats."""
    return {key: value for key, value in record.items() if key != "run"}


def compare(recorded, recomputed, path: str = "") -> tuple[list[Mismatch], int]:
    """Every difference between two JSON values, with its path, and how many numbers were
    compared. Numbers agree within RELATIVE_TOLERANCE; everything else must be equal."""
    if isinstance(recorded, dict) and isinstance(recomputed, dict):
        return _compare_objects(recorded, recomputed, path)
    if isinstance(recorded, list) and isinstance(recomputed, list):
        return _compare_lists(recorded, recomputed, path)
    if _is_number(recorded) and _is_number(recomputed):
        same = math.isclose(recorded, recomputed, rel_tol=RELATIVE_TOLERANCE, abs_tol=ABSOLUTE_TOLERANCE)
        return ([] if same else [Mismatch(path, recorded, recomputed)]), 1
    return ([] if recorded == recomputed and type(recorded) is type(recomputed)
            else [Mismatch(path, recorded, recomputed)]), 0


def _compare_objects(recorded: dict, recomputed: dict, path: str) -> tuple[list[Mismatch], int]:
    found: list[Mismatch] = []
    count = 0
    for key in list(recorded) + [k for k in recomputed if k not in recorded]:
        where = f"{path}.{key}" if path else str(key)
        if key not in recomputed or key not in recorded:
            found.append(Mismatch(where, recorded.get(key, _ABSENT), recomputed.get(key, _ABSENT)))
            continue
        more, n = compare(recorded[key], recomputed[key], where)
        found += more
        count += n
    return found, count


def _compare_lists(recorded: list, recomputed: list, path: str) -> tuple[list[Mismatch], int]:
    found: list[Mismatch] = []
    count = 0
    if len(recorded) != len(recomputed):
        found.append(Mismatch(f"{path} (number of entries)", len(recorded), len(recomputed)))
    # lists of different lengths are reported above and compared as far as both go
    for index, (a, b) in enumerate(zip(recorded, recomputed, strict=False)):
        more, n = compare(a, b, f"{path}[{index}]")
        found += more
        count += n
    return found, count


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _read_record(folder: Path) -> dict:
    path = folder / RECORD_FILE
    if not path.is_file():
        raise InputError("no record here", file=path, fix="give the folder that a `validate run --out` wrote")
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"the record is not readable JSON ({exc})", file=path,
                         fix="the file was damaged or edited by hand; restore it from the archive") from None
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
                             f"({_recorded_version(record) or 'unknown'}), or run the stored method again")
    try:
        read_record(record)
    except RecordShapeError as exc:
        raise InputError(f"the record does not have the layout of version {SCHEMA_VERSION}: {exc.problem}",
                         file=path, where=exc.where,
                         fix="the file was damaged or edited by hand; restore it from the archive") from None


def _check_input(folder: Path, entry: dict) -> InputCheck:
    stored = entry.get("stored") or f"{INPUTS_FOLDER}/{Path(entry.get('path', '')).name}"
    copy = folder / stored
    digest = sha256_of(copy) if copy.is_file() else None
    return InputCheck(str(entry.get("path", "")), stored, str(entry.get("sha256", "")), digest)


def _method_entry(record: dict, checks: tuple[InputCheck, ...]) -> InputCheck:
    """The stored method file: the input the record names as its method, else the first."""
    method_path = (record.get("method") or {}).get("file")
    return next((c for c in checks if c.path == method_path), checks[0])


def _record_id(record: dict) -> str | None:
    return (record.get("run") or {}).get("record_id")


def _recorded_version(record: dict) -> str | None:
    return (record.get("software") or {}).get("version")
