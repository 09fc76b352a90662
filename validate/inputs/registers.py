"""Equipment registers: tolerance tables by kind, nominal size and class.

The default registers ship with the package (the project's `budgets/`
folder, installed as `validate.registers`); a laboratory adds its own
(its calibration certificates) through `registers = [...]` in a method file.
A laboratory entry replaces a default entry of the same kind, size and class.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

from validate.inputs.errors import InputError
from validate.inputs.items import LINEARITY_CORRELATIONS
from validate.inputs.readings import read_text_file
from validate.inputs.text import MAX_NESTING, clean_document
from validate.inputs.units import UnitError, parse_quantity


@dataclass(frozen=True)
class RegisterEntry:
    kind: str
    item_class: str
    nominal: float | None  # SI (m^3 for volumes), None for items without a size
    values: dict  # key -> SI float (tolerance, repeatability, path, offset, ...)
    source: str  # register title, standard and confidence, for the record
    choices: dict[str, str] = field(default_factory=dict)  # key -> word (e.g. linearity_correlation)


def default_register_files() -> list[Path]:
    try:
        folder = resources.files("validate.registers")
        files = sorted(Path(str(p)) for p in folder.iterdir() if p.name.endswith(".toml"))
        if files:
            return files
    except (ModuleNotFoundError, FileNotFoundError, TypeError):
        pass
    checkout = Path(__file__).resolve().parents[2] / "budgets"
    return sorted(checkout.glob("*.toml"))


_SIZED_KEYS = ("tolerance", "repeatability", "subdivision", "path", "offset", "noise",
               "linearity", "reading", "gain", "drift", "stray_light")
# keys whose value is a word from a fixed list, checked here so a typing error stops at the register
CHOICE_KEYS: dict[str, tuple[str, ...]] = {"linearity_correlation": LINEARITY_CORRELATIONS}


def load_register(path: Path) -> list[RegisterEntry]:
    if not Path(path).exists():
        raise InputError("register file not found", file=path, fix="check the path in `registers` of the settings")
    text = read_text_file(Path(path), "register file")  # the one reader: no pipe, device, binary or huge file
    try:
        data = clean_document(tomllib.loads(text), path)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"cannot read the register: {exc}", file=path,
                         fix="fix the TOML syntax at the place named") from None
    except RecursionError:
        raise InputError(f"tables and lists are nested more than {MAX_NESTING} deep", file=path,
                         fix="write the register as the shipped registers show") from None
    title = data.get("register", {}).get("title", Path(path).stem)
    entries = []
    for index, raw in enumerate(data.get("item", []), start=1):
        where = f"[[item]] number {index}"
        if "kind" not in raw or "class" not in raw:
            raise InputError("an entry needs `kind` and `class`", file=path, where=where)
        values = {}
        try:
            nominal = None
            if "nominal" in raw:
                number, unit = parse_quantity(raw["nominal"])
                nominal = number * unit.factor
            for key in _SIZED_KEYS:
                if key in raw:
                    number, unit = parse_quantity(raw[key])
                    values[key] = number * unit.factor
        except UnitError as exc:
            raise InputError(str(exc), file=path, where=where) from None
        source = ", ".join(x for x in (title, raw.get("standard", ""), raw.get("confidence", "")) if x)
        entries.append(RegisterEntry(raw["kind"], str(raw["class"]), nominal, values, source,
                                     _choices(raw, path, where)))
    return entries


def _choices(raw: dict, path: Path, where: str) -> dict[str, str]:
    found = {}
    for key, allowed in CHOICE_KEYS.items():
        if key in raw:
            if raw[key] not in allowed:
                raise InputError(f"unknown choice {raw[key]!r} for `{key}`", file=path, where=f"{where}.{key}",
                                 fix=f"use one of: {', '.join(allowed)}")
            found[key] = raw[key]
    return found


def load_registers(extra: list[Path], builtin: tuple[Path, ...] | None = None
                   ) -> tuple[list[RegisterEntry], list[str]]:
    """Default registers (the package's, or `builtin` in their place), then the laboratory's,
    later entries replacing earlier ones."""
    return merge_registers((default_register_files() if builtin is None else list(builtin)) + list(extra))


def merge_registers(files: list[Path]) -> tuple[list[RegisterEntry], list[str]]:
    """The entries of these register files in order, later entries replacing earlier ones."""
    merged: dict[tuple, RegisterEntry] = {}
    for path in files:
        for entry in load_register(path):
            key = (entry.kind, entry.item_class, None if entry.nominal is None else round(entry.nominal, 15))
            merged[key] = entry
    return list(merged.values()), [str(p) for p in files]


def find_entry(entries: list[RegisterEntry], kind: str, item_class: str,
               nominal: float | None) -> RegisterEntry | None:
    for entry in entries:
        if entry.kind != kind or entry.item_class != item_class:
            continue
        if nominal is None or entry.nominal is None or abs(entry.nominal - nominal) <= 1e-9 * nominal:
            return entry
    return None


def classes_for(entries: list[RegisterEntry], kind: str, nominal: float | None) -> list[str]:
    """The classes the registers hold for a kind (and size), for error messages."""
    found = {e.item_class for e in entries if e.kind == kind and
             (nominal is None or e.nominal is None or abs(e.nominal - nominal) <= 1e-9 * nominal)}
    return sorted(found)
