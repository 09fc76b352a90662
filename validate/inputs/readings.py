"""The absorbance readings table: a CSV with columns `id` and `absorbance`.

One row per reading; replicate readings repeat the id. Lines starting with
`#` are comments.
"""

from __future__ import annotations

import csv
import io
import math
import re
from pathlib import Path

from validate.inputs.errors import InputError


def read_text_file(path: Path, what: str) -> str:
    """Read a UTF-8 text file, with clear errors for the usual ways this fails."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{what} not found", file=path,
                         fix="check the file name and the folder it is in")
    if path.is_dir():
        raise InputError(f"{what} is a folder, not a file", file=path)
    data = path.read_bytes()
    if not data.strip():
        raise InputError(f"{what} is empty", file=path)
    if b"\x00" in data:
        raise InputError(f"{what} is not a text file (it contains binary data)", file=path,
                         fix="save it as plain text (UTF-8)")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(f"{what} is not UTF-8 text (bad byte at line {line})", file=path,
                         fix="save the file with UTF-8 encoding") from None


def load_readings(path: Path) -> dict[str, tuple[float, ...]]:
    text = read_text_file(path, "readings table")
    lines = [ln for ln in text.splitlines() if not ln.lstrip().startswith("#")]
    reader = csv.reader(io.StringIO("\n".join(lines)))
    rows = [r for r in reader if any(cell.strip() for cell in r)]
    header = [h.strip().lower() for h in rows[0]] if rows else []
    missing = [c for c in ("id", "absorbance") if c not in header]
    if missing:
        hint = " (the file seems to use ';' as separator: use commas)" if ";" in (lines[0] if lines else "") else ""
        raise InputError(f"missing column(s) {', '.join(missing)}{hint}", file=path, where="line 1 (header)",
                         fix="the first line must name the columns, e.g. id,absorbance")
    i_id, i_a = header.index("id"), header.index("absorbance")
    readings: dict[str, list[float]] = {}
    for line_no, row in enumerate(rows[1:], start=2):
        if len(row) <= max(i_id, i_a):
            raise InputError("the row has too few cells", file=path, where=f"row {line_no}",
                             fix="every row needs an id and an absorbance")
        ident, cell = row[i_id].strip(), row[i_a].strip()
        if not ident:
            raise InputError("the id is empty", file=path, where=f"row {line_no}")
        if re.fullmatch(r"[-+]?\d+,\d+", cell):
            raise InputError(f"the absorbance {cell!r} uses a decimal comma", file=path,
                             where=f"row {line_no}", fix="write a decimal point, e.g. 0.512, and keep commas as separators")
        try:
            value = float(cell)
        except ValueError:
            raise InputError(f"the absorbance {cell!r} is not a number", file=path,
                             where=f"row {line_no}, column absorbance",
                             fix="write the reading as a plain number, e.g. 0.512") from None
        if not math.isfinite(value):
            raise InputError(f"the absorbance {cell!r} is not a finite number", file=path,
                             where=f"row {line_no}")
        readings.setdefault(ident, []).append(value)
    if not readings:
        raise InputError("the readings table has no readings", file=path,
                         fix="add one row per reading: id,absorbance")
    return {k: tuple(v) for k, v in readings.items()}
