"""Units written out by the analyst, converted to SI and checked for dimension.

Values are held in SI inside the tool (m^3, kg, mol, m, K); a unit string
such as "mL", "µmol/L" or "L/(mol cm)" is parsed into a factor to SI and a
dimension vector over (kg, m, mol, K). Only products and quotients of the
units listed below are understood; anything else is an input error that
lists the known units.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

# dimension exponents over (kg, m, mol, K)
_MASS = (1, 0, 0, 0)
_LENGTH = (0, 1, 0, 0)
_AMOUNT = (0, 0, 1, 0)
_TEMP = (0, 0, 0, 1)
_VOLUME = (0, 3, 0, 0)
_NONE = (0, 0, 0, 0)

_BASE: dict[str, tuple[float, tuple[int, int, int, int]]] = {
    "kg": (1.0, _MASS), "g": (1e-3, _MASS), "mg": (1e-6, _MASS), "µg": (1e-9, _MASS),
    "ng": (1e-12, _MASS),
    "m": (1.0, _LENGTH), "cm": (1e-2, _LENGTH), "mm": (1e-3, _LENGTH), "µm": (1e-6, _LENGTH),
    "nm": (1e-9, _LENGTH),
    "L": (1e-3, _VOLUME), "dL": (1e-4, _VOLUME), "mL": (1e-6, _VOLUME), "µL": (1e-9, _VOLUME),
    "m3": (1.0, _VOLUME), "cm3": (1e-6, _VOLUME),
    "mol": (1.0, _AMOUNT), "mmol": (1e-3, _AMOUNT), "µmol": (1e-6, _AMOUNT),
    "nmol": (1e-9, _AMOUNT),
    "M": (1e3, (0, -3, 1, 0)), "mM": (1.0, (0, -3, 1, 0)), "µM": (1e-3, (0, -3, 1, 0)),
    "K": (1.0, _TEMP),
    "%": (1e-2, _NONE), "ppm": (1e-6, _NONE), "1": (1.0, _NONE),
}
_ALIASES = {"u": "µ", "μ": "µ"}  # ASCII "u" and Greek mu both mean micro
KNOWN_UNITS = sorted(_BASE)


class UnitError(ValueError):
    """A unit string that cannot be understood; the message says why."""


@dataclass(frozen=True)
class Unit:
    text: str
    factor: float  # SI value = number * factor
    dims: tuple[int, ...]  # exponents of (kg, m, mol, K)

    @property
    def dimensionless(self) -> bool:
        return self.dims == _NONE


def _normalise_symbol(symbol: str) -> str:
    if symbol and symbol[0] in _ALIASES and symbol[1:] in {"g", "m", "L", "mol", "M"}:
        return "µ" + symbol[1:]
    if symbol in {"l"}:
        return "L"
    if symbol in {"ml"}:
        return "mL"
    if symbol in {"ul", "µl"}:
        return "µL"
    return symbol


def _symbol(token: str) -> tuple[float, tuple[int, ...]]:
    match = re.fullmatch(r"([^\d^\-]+?)\^?(-?\d+)?", token)
    if not match:
        raise UnitError(f"cannot read the unit part {token!r}")
    name, power = _normalise_symbol(match.group(1)), int(match.group(2) or 1)
    if name not in _BASE:
        raise UnitError(f"unknown unit {token!r}; known units: {', '.join(KNOWN_UNITS)}")
    factor, dims = _BASE[name]
    return factor**power, tuple(d * power for d in dims)


def parse_unit(text: str) -> Unit:
    """Parse "mg/L", "µmol/L", "L/(mol cm)", "g/mol", "mL", "%" or "" (dimensionless)."""
    raw = text.strip()
    if raw in {"", "1", "-"}:
        return Unit(raw, 1.0, _NONE)
    cleaned = raw.replace("·", " ").replace("*", " ").replace("(", " ").replace(")", " ")
    parts = cleaned.split("/")
    factor, dims = 1.0, [0, 0, 0, 0]
    for index, part in enumerate(parts):
        sign = 1 if index == 0 else -1
        tokens = part.split()
        if not tokens and not (index == 0 and part.strip() in {"", "1"}):
            raise UnitError(f"cannot read the unit {raw!r}")
        for token in tokens:
            if token == "1":
                continue
            f, d = _symbol(token)
            factor *= f**sign
            dims = [a + sign * b for a, b in zip(dims, d, strict=True)]
    return Unit(raw, factor, tuple(dims))


def describe_dims(dims: tuple[int, ...]) -> str:
    """Plain words for a dimension vector, for error messages."""
    names: dict[tuple[int, ...], str] = {
             _MASS: "mass", _VOLUME: "volume", _LENGTH: "length", _AMOUNT: "amount of substance",
             (0, -3, 1, 0): "amount concentration", (1, -3, 0, 0): "mass concentration",
             (1, 0, -1, 0): "molar mass", _TEMP: "temperature", _NONE: "dimensionless",
             (0, 2, -1, 0): "molar absorptivity (area per amount)"}
    if tuple(dims) in names:
        return names[tuple(dims)]
    labels = ("kg", "m", "mol", "K")
    return " ".join(f"{lab}^{p}" for lab, p in zip(labels, dims, strict=True) if p) or "dimensionless"


def a_dims(dims: tuple[int, ...]) -> str:
    """describe_dims with its article: "a mass concentration", "an amount concentration"."""
    words = describe_dims(dims)
    return f"{'an' if words[0] in 'aeiou' else 'a'} {words}"


_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


def parse_quantity(text) -> tuple[float, Unit]:
    """Parse "10.00 mL" into (10.0, Unit(mL)). A bare number is dimensionless."""
    if isinstance(text, bool):
        raise UnitError("expected a number with its unit, got true/false")
    if isinstance(text, (int, float)):
        return float(text), parse_unit("")
    if not isinstance(text, str):
        raise UnitError(f"expected a number with its unit such as \"10 mL\", got {text!r}")
    if re.match(r"^\s*[-+]?\d+,\d", text):  # checked first: "68,05 mg" would read as 68 ",05 mg"
        raise UnitError(f"{text!r} uses a decimal comma (or a thousands separator); write a decimal point, "
                        f"e.g. \"10.5 mL\"")
    match = _QUANTITY.match(text)
    if not match:
        raise UnitError(f"{text!r} is not a number followed by a unit, e.g. \"10 mL\"")
    return float(match.group(1)), parse_unit(match.group(2))
