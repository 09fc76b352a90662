"""The quality record's files: results.json and budget.csv as bytes, and single files written atomically.

results.json is a contract other programs rely on (see README, "The record").
Files are written to a temporary name in the same folder and moved into place
only when complete, so an interrupted run never leaves a half-written file.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import tempfile
from pathlib import Path

from validate.record.tree import RecordPart


def sha256_of(path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 16), b""):
            digest.update(block)
    return digest.hexdigest()


def write_atomic(path: Path, data: bytes) -> None:
    path = Path(path)
    handle, temp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".part")
    try:
        with os.fdopen(handle, "wb") as out:
            out.write(data)
            out.flush()
            os.fsync(out.fileno())
        os.chmod(temp, 0o644)  # mkstemp makes the file private; a record is meant to be read
        os.replace(temp, path)
    except BaseException:
        if os.path.exists(temp):
            os.unlink(temp)
        raise


def json_bytes(data: dict) -> bytes:
    """The one way the record's JSON files are written: the same data give the same bytes."""
    return (json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")


def record_json(record: RecordPart) -> bytes:
    """results.json: the record's JSON form (its to_dict, which already holds only JSON values)."""
    return json_bytes(record.to_dict())


BUDGET_COLUMNS = ("result", "source", "step", "equipment", "value", "unit", "standard_uncertainty",
                  "distribution", "dof", "kind", "sensitivity", "contribution", "share", "provenance")


def budget_csv(rows: list[dict]) -> bytes:
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=BUDGET_COLUMNS, extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: ("" if row.get(k) is None else row.get(k)) for k in BUDGET_COLUMNS})
    return buffer.getvalue().encode("utf-8")
