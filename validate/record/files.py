"""The quality record's files: results.json and budget.csv as bytes, single files written
atomically, and the one reader of a record's JSON files.

results.json is a contract other programs rely on (see README, "The record").
Files are written to a temporary name in the same folder and moved into place
only when complete, so an interrupted run never leaves a half-written file.

A record folder may have been damaged or forged, so its JSON files are read with bounds: a
regular file (a pipe or device would hang the reading), at most MAX_JSON_BYTES, nested at most
MAX_JSON_NESTING deep (the parser recurses once per level), strict JSON only (no NaN or
Infinity, no key twice, no integer too long to convert); each refusal is an InputError that
names the file and the limit.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import re
import stat
import tempfile
from pathlib import Path

from validate.inputs.errors import InputError
from validate.record.tree import RecordPart

# A record of the demos takes under 1 MB and nests 6 deep; these bounds leave wide room for
# large studies while refusing a file that could only exhaust the memory or the stack.
MAX_JSON_BYTES = 100_000_000
MAX_JSON_NESTING = 32
MAX_INT_DIGITS = 40  # a record's integers are counts and seeds (below 2^64, 20 digits)
_JSON_STRING = re.compile(r'"(?:[^"\\]|\\.)*"?')
_JSON_BRACKET = re.compile(r"[\[\]{}]")


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


def json_members(data: dict) -> dict[str, str]:
    """Each top-level member of `data` as json_bytes writes it (`  "key": value`, nested lines
    indented), so that a file and the same file without some members are both joined from one
    serialisation (members_json) instead of serialising a large record twice."""
    return {key: json.dumps({key: value}, indent=2, ensure_ascii=False, allow_nan=False)[2:-2]
            for key, value in data.items()}


def members_json(members: dict[str, str], leave_out: frozenset[str] = frozenset()) -> bytes:
    """json_bytes of the dict the members came from, without the members named in `leave_out`."""
    kept = [text for key, text in members.items() if key not in leave_out]
    return ("{\n" + ",\n".join(kept) + "\n}\n" if kept else "{}\n").encode("utf-8")


BUDGET_COLUMNS = ("result", "source", "step", "equipment", "value", "unit", "standard_uncertainty",
                  "distribution", "dof", "kind", "sensitivity", "contribution", "share", "provenance")


def budget_csv(rows: list[dict]) -> bytes:
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=BUDGET_COLUMNS, extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: ("" if row.get(k) is None else row.get(k)) for k in BUDGET_COLUMNS})
    return buffer.getvalue().encode("utf-8")


def json_nesting(text: str, stop_above: int | None = None) -> int:
    """How deep arrays and objects are nested in a JSON text (brackets inside strings not
    counted); the count stops once it passes `stop_above`. Linear in the text whatever it holds:
    a string runs to its closing quote or, unterminated, to the end (no second try)."""
    depth = deepest = 0
    for match in _JSON_BRACKET.finditer(_JSON_STRING.sub('""', text)):
        depth += 1 if match.group() in "[{" else -1
        deepest = max(deepest, depth)
        if stop_above is not None and deepest > stop_above:
            break
    return deepest


def read_json_file(path: Path, what: str, fix: str):
    """The JSON value in `path`, within the bounds above; InputError (naming `what`, with `fix`) otherwise."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{what} is not a regular file", file=path, fix=fix)
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))  # a pipe swapped in meanwhile: no wait
    with os.fdopen(fd, "rb") as handle:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise InputError(f"{what} is not a regular file", file=path, fix=fix)
        data = handle.read(MAX_JSON_BYTES + 1)
    if len(data) > MAX_JSON_BYTES:
        limit = f"{MAX_JSON_BYTES / 1e6:g} MB" if MAX_JSON_BYTES >= 1_000_000 else f"{MAX_JSON_BYTES} bytes"
        raise InputError(f"{what} is larger than the limit of {limit}", file=path, fix=fix)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"{what} is not UTF-8 text (bad byte at offset {exc.start})", file=path, fix=fix) from None
    if json_nesting(text, stop_above=MAX_JSON_NESTING) > MAX_JSON_NESTING:
        raise InputError(f"{what} is nested more than {MAX_JSON_NESTING} deep (the limit)", file=path, fix=fix)
    try:
        return json.loads(text, parse_constant=_no_constant, parse_int=_bounded_int,
                          object_pairs_hook=_no_repeated_key)
    except json.JSONDecodeError as exc:
        raise InputError(f"{what} is not readable JSON ({exc.msg} at line {exc.lineno}, column {exc.colno})",
                         file=path, fix=fix) from None
    except (ValueError, RecursionError) as exc:  # NaN, a key twice, an integer of hundreds of digits
        raise InputError(f"{what} is not strict JSON ({exc})", file=path, fix=fix) from None


def _bounded_int(text: str) -> int:
    if len(text) > MAX_INT_DIGITS:
        raise ValueError(f"an integer of {len(text)} digits; the limit is {MAX_INT_DIGITS}")
    return int(text)


def _no_constant(name: str):
    raise ValueError(f"{name} is not a JSON number")


def _no_repeated_key(pairs: list[tuple[str, object]]) -> dict:
    data = dict(pairs)
    if len(data) != len(pairs):
        seen: set[str] = set()
        for key, _ in pairs:
            if key in seen:
                raise ValueError(f"the key {key!r} appears twice in one object")
            seen.add(key)
    return data
