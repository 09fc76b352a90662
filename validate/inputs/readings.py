"""The absorbance readings table: a CSV with columns `id` and `absorbance`.

One row per reading; replicate readings repeat the id. Lines starting with
`#` are comments.
"""

from __future__ import annotations

import csv
import io
import math
import os
import re
import stat
from pathlib import Path

from validate.inputs.errors import InputError
from validate.inputs.text import clean_id, clean_text, trimmed


def read_text_file(path: Path, what: str) -> str:
    """Read a UTF-8 text file, with clear errors for the usual ways this fails."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{what} not found", file=path,
                         fix="check the file name and the folder it is in")
    if path.is_dir():
        raise InputError(f"{what} is a folder, not a file", file=path, fix="name the file inside it")
    data = read_bounded_bytes(path, what)
    if not data.strip():
        raise InputError(f"{what} is empty", file=path,
                         fix="check that the right file is named and that it was saved with its content")
    if b"\x00" in data:
        raise InputError(f"{what} is not a text file (it contains binary data)", file=path,
                         fix="save it as plain text (UTF-8)")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(f"{what} is not UTF-8 text (bad byte at line {line})", file=path,
                         fix="save the file with UTF-8 encoding") from None


# An input file is a page or a few thousand readings; far larger means a wrong file was named
# (a device, an image, a database dump) and reading it whole could exhaust the memory.
MAX_FILE_BYTES = 10_000_000
MAX_READINGS = 100_000


def read_bounded_bytes(path: Path, what: str) -> bytes:
    """The file's bytes, refused when it is not a regular file (a pipe or device would hang
    the reading or never end) or larger than MAX_FILE_BYTES. The file is opened without
    waiting and checked again once open, so a file swapped for a pipe meanwhile is refused too."""
    if not path.is_file():
        raise InputError(f"{what} is not a regular file (a pipe, device or socket)", file=path,
                         fix="name a file saved on disk")
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise InputError(f"{what} cannot be read ({exc.strerror})", file=path,
                         fix="check that the file may be read") from None
    with os.fdopen(fd, "rb") as handle:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise InputError(f"{what} is not a regular file (a pipe, device or socket)", file=path,
                             fix="name a file saved on disk")
        data = handle.read(MAX_FILE_BYTES + 1)
    if len(data) > MAX_FILE_BYTES:
        limit = f"{MAX_FILE_BYTES / 1e6:g} MB" if MAX_FILE_BYTES >= 1_000_000 else f"{MAX_FILE_BYTES} bytes"
        raise InputError(f"{what} is larger than the limit of {limit}", file=path,
                         fix="check that the right file is named")
    return data


# Plausible absorbance readings (common practice): a reading below -0.05 means the
# reference or blank was wrong; above 4 lies beyond the photometric range that UV-Vis
# photometers usually specify (about 3 to 4 absorbance), where stray light rules.
LOWEST_READING = -0.05
HIGHEST_READING = 4.0


def text_lines(text: str) -> list[str]:
    """The lines of a table, broken only where a CSV file breaks them: at LF, CR LF or CR
    (RFC 4180). str.splitlines would also break at invisible separators (U+2028, U+0085,
    U+001C ...), and a row cut there loses or mangles its id without a word; kept in the line,
    they reach the id check and are refused with the character shown."""
    return text.replace("\r\n", "\n").replace("\r", "\n").split("\n")


def _rows(text: str) -> list[tuple[int, list[str]]]:
    """(file line number, cells) of each non-empty, non-comment line."""
    rows = []
    for line_no, line in enumerate(text_lines(text), start=1):
        if line.lstrip().startswith("#"):
            continue
        cells = next(csv.reader(io.StringIO(line)), [])
        if any(cell.strip() for cell in cells):
            rows.append((line_no, cells))
    return rows


def load_readings(path: Path) -> dict[str, tuple[float, ...]]:
    text = read_text_file(path, "readings table")
    rows = _rows(text)
    if len(rows) > MAX_READINGS + 1:
        raise InputError(f"the table has {len(rows) - 1} rows; the limit is {MAX_READINGS}", file=path,
                         fix="check that the right file is named")
    header = _header(rows, path)
    i_id, i_a = header.index("id"), header.index("absorbance")
    readings: dict[str, list[float]] = {}
    for line_no, row in rows[1:]:
        ident, value = _reading(row, line_no, i_id, i_a, len(header), path)
        readings.setdefault(ident, []).append(value)
    if not readings:
        raise InputError("the readings table has no readings", file=path,
                         fix="add one row per reading: id,absorbance")
    return {k: tuple(v) for k, v in readings.items()}


def _header(rows: list[tuple[int, list[str]]], path: Path) -> list[str]:
    """The column names (lower case) of the first line that is not a comment."""
    head_line, head_cells = rows[0] if rows else (1, [])
    header = [h.strip().lower() for h in head_cells]
    missing = [c for c in ("id", "absorbance") if c not in header]
    if missing:
        hint = " (the file seems to use ';' as separator: use commas)" if any(";" in h for h in header) else ""
        raise InputError(f"missing column(s) {', '.join(missing)}{hint}", file=path,
                         where=f"line {head_line} (header)",
                         fix="the first line that is not a comment must name the columns, e.g. id,absorbance")
    return header


def _reading(row: list[str], line_no: int, i_id: int, i_a: int, columns: int, path: Path) -> tuple[str, float]:
    """(id, absorbance) of one row, its cells checked."""
    where = f"row at line {line_no}"
    if len(row) <= max(i_id, i_a):
        raise InputError("the row has too few cells", file=path, where=where,
                         fix="every row needs an id and an absorbance")
    if any(cell.strip() for cell in row[columns:]):
        raise InputError(f"the row has {len(row)} cells but the header names {columns} columns",
                         file=path, where=where,
                         fix="a decimal comma splits a number into two cells: write a decimal point, "
                             "e.g. 0.512")
    ident = clean_id(trimmed(row[i_id]), file=path, where=where)
    if not ident:
        raise InputError("the id is empty", file=path, where=where,
                         fix="write the standard, blank or sample id in the first column")
    return ident, _absorbance(row[i_a].strip(), where, path)


def _absorbance(cell: str, where: str, path: Path) -> float:
    if re.fullmatch(r"[-+]?\d+,\d+", cell):
        raise InputError(f"the absorbance {cell!r} uses a decimal comma", file=path, where=where,
                         fix="write a decimal point, e.g. 0.512, and keep commas as separators")
    try:
        value = float(cell)
    except ValueError:
        raise InputError(f"the absorbance {cell!r} is not a number", file=path,
                         where=f"{where}, column absorbance",
                         fix="write the reading as a plain number, e.g. 0.512") from None
    if not math.isfinite(value):
        raise InputError(f"the absorbance {cell!r} is not a finite number", file=path, where=where,
                         fix="write the reading as a plain number, e.g. 0.512")
    if not LOWEST_READING <= value <= HIGHEST_READING:
        raise InputError(f"the absorbance {value:g} is outside the plausible range "
                         f"{LOWEST_READING:g} to {HIGHEST_READING:g}", file=path, where=where,
                         fix="check the reading; dilute a sample that reads above the range, and check "
                             "the blank or reference of a strongly negative reading")
    return value


def load_reading_series(path: Path) -> dict[str, tuple[str, ...]]:
    """The optional `series` column (a day, analyst or instrument label per reading), by id,
    in the order of the readings; {} when the table has no such column. Call after
    `load_readings`, which has checked the table."""
    return _label_column(path, "series", "give every reading its series (e.g. the day or analyst), or drop the column")


def load_reading_preparations(path: Path) -> dict[str, tuple[str, ...]]:
    """The optional `preparation` column, by id: readings of one id with one label are repeated
    readings of one solution; different labels under one id are independent preparations of
    that solution's recipe (for a laboratory that records them under one id)."""
    return _label_column(path, "preparation", None)


def _label_column(path: Path, column: str, fix: str | None) -> dict[str, tuple[str, ...]]:
    """One label per reading from an optional column, by id; an empty cell is refused where
    `fix` says how to fill it, and is the label "" otherwise."""
    rows = _rows(read_text_file(path, "readings table"))
    header = [h.strip().lower() for h in rows[0][1]]
    if column not in header:
        return {}
    i_id, i_s = header.index("id"), header.index(column)
    labels: dict[str, list[str]] = {}
    for line_no, row in rows[1:]:
        where = f"row at line {line_no}"
        label = clean_text(trimmed(row[i_s]), file=path, where=where) if len(row) > i_s else ""
        if not label and fix is not None:
            raise InputError(f"the {column} is empty", file=path, where=where, fix=fix)
        labels.setdefault(clean_id(trimmed(row[i_id]), file=path), []).append(label)
    return {k: tuple(v) for k, v in labels.items()}
