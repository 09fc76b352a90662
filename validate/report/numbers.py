"""How numbers are written, for every renderer (terminal text and PDF report).

One place for the rules:
- a result and its uncertainty: the uncertainty to two significant digits and the value to the
  same decimal place (GUM, JCGM 100:2008, 7.2.6), `gum_pair`;
- a Monte Carlo interval to the decimal place of the numerical tolerance (JCGM 101:2008, 7.9.2),
  `tolerance_decimals`;
- other figures to a number of significant digits: `num` (plain notation, no trailing zeros),
  `sig` (trailing zeros kept), `compact` (Python's general format, for the terminal);
- shares as percentages (`pct`), degrees of freedom (`dof`) and p values (`p_value`, never "0").

The output is plain text: escaping for a markup (reportlab, rich) is the renderer's job.

Why `gum_pair` does not use the `uncertainties` package ('{:.2uf}', '{:.2uS}'): that package
formats a value with its *standard* uncertainty, and here the second number is usually the
expanded uncertainty U = k u; more to the point, in fixed-point form it keeps every integer digit
of an uncertainty of 100 or more (881 600 ± 42 584 rather than 882 000 ± 43 000), and it rounds
a trailing 5 up where this module rounds it to even. The tests compare both where they must agree.
"""

from __future__ import annotations

import math
from decimal import ROUND_HALF_EVEN, Decimal
from typing import TypeGuard

DASH = "–"  # shown where a value is missing (PDF)
MISSING = "n/a"  # shown where a value is missing (terminal)


def is_number(value) -> TypeGuard[float]:
    """A finite int or float (not a bool)."""
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


# --------------------------------------------------------------------------
# GUM 7.2.6

def _quantum(uncertainty: Decimal, digits: int) -> Decimal:
    """The decimal place (as a power of ten) that keeps `digits` significant digits of the
    uncertainty after rounding (0.0996 rounds to 0.10, one place to the left)."""
    exponent = uncertainty.adjusted() - (digits - 1)
    rounded = uncertainty.quantize(Decimal(1).scaleb(exponent), rounding=ROUND_HALF_EVEN)
    if rounded.adjusted() > uncertainty.adjusted():
        exponent += 1
    return Decimal(1).scaleb(exponent)


def _fixed(value: Decimal, quantum: Decimal) -> str:
    """`value` rounded to the place of `quantum`, in plain notation (no exponent)."""
    decimals = max(-quantum.adjusted(), 0)
    return f"{value.quantize(quantum, rounding=ROUND_HALF_EVEN):.{decimals}f}"


def gum_pair(value, uncertainty, digits: int = 2, missing: str = DASH) -> tuple[str, str]:
    """Value and uncertainty as text: the uncertainty to `digits` significant digits, the value
    to the same decimal place (GUM 7.2.6). The uncertainty is rounded as written (its shortest
    decimal form), a trailing 5 to even (ISO 80000-1, annex B); the value from its exact binary
    value, as Python's round() does. `missing` for both when either is not a finite number; an
    uncertainty of zero leaves the value to six significant digits."""
    if not (is_number(value) and is_number(uncertainty)):
        return missing, missing
    if uncertainty <= 0:
        return f"{value:.6g}", f"{uncertainty:g}"
    u = Decimal(repr(float(uncertainty)))
    quantum = _quantum(u, digits)
    return _fixed(Decimal(float(value)), quantum), _fixed(u, quantum)


def decimals_of(text: str) -> int:
    """Decimal places shown in a number written in plain notation ("0.0027" -> 4, "43" -> 0)."""
    return len(text.split(".")[1]) if "." in text else 0


def gum_decimals(value, uncertainty) -> int:
    """Decimal places of the uncertainty rounded by GUM 7.2.6 (0 when there is none)."""
    return decimals_of(gum_pair(value, uncertainty)[1])


def tolerance_decimals(tolerance, fallback: int) -> int:
    """Decimal places of the numerical tolerance of a Monte Carlo evaluation (JCGM 101 7.9.2),
    `fallback` when there is none."""
    if is_number(tolerance) and tolerance > 0:
        return max(0, -math.floor(math.log10(tolerance)))
    return fallback


def interval(ends, decimals: int, missing: str = DASH) -> str:
    """[low, high] to a fixed number of decimal places; `missing` when an end is not a number."""
    if not ends or len(ends) != 2 or not all(is_number(e) for e in ends):
        return missing
    return f"[{ends[0]:.{decimals}f}, {ends[1]:.{decimals}f}]"


# --------------------------------------------------------------------------
# significant digits

def _not_finite(value) -> str:
    return "∞" if value > 0 else ("-∞" if value < 0 else DASH)


def _grouped_int(value: int) -> str:
    """Digits grouped by threes with no-break spaces from 10 000 on (ISO 80000-1)."""
    return f"{value:,}".replace(",", "\u00a0") if abs(value) >= 10_000 else str(value)


def _strip(text: str) -> str:
    return text.rstrip("0").rstrip(".") if "." in text else text


def num(value, sig: int = 4) -> str:
    """A number to `sig` significant digits, plain notation for ordinary sizes (1e-4 to 1e6),
    no trailing zeros; a dash when missing; other values as their text."""
    if value is None:
        return DASH
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return str(value)
    if not math.isfinite(value):
        return _not_finite(value)
    if value == 0:
        return "0"
    if isinstance(value, int):
        return _grouped_int(value)
    magnitude = math.floor(math.log10(abs(value)))
    if -4 <= magnitude < 6:
        return _strip(f"{value:.{max(sig - 1 - magnitude, 0)}f}")
    mantissa, exponent = f"{value:.{sig - 1}e}".split("e")
    return f"{_strip(mantissa)}e{int(exponent)}"


def sig(value, digits: int = 4) -> str:
    """A number to `digits` significant digits, trailing zeros kept (0.2000, not 0.2)."""
    if not is_number(value):
        return num(value)
    if value == 0 or not -4 <= math.floor(math.log10(abs(value))) < 6:
        return num(value, digits)
    return f"{value:#.{digits}g}".rstrip(".")


def compact(value, digits: int = 4, missing: str = MISSING) -> str:
    """Python's general format to `digits` significant digits (exponent for very large or small
    numbers, trailing zeros dropped): the terminal's short form. `missing` for None."""
    return missing if value is None else f"{value:.{digits}g}"


P_FLOOR = 1e-16  # a tail probability below about this is rounding error in double precision


def p_value(p, digits: int = 2, missing: str = DASH) -> str:
    """A p value to `digits` significant digits; "< 1e-16" where it underflows to (about) zero,
    never a bare "0"."""
    if not is_number(p):
        return missing
    return f"< {P_FLOOR:g}" if p < P_FLOOR else f"{p:.{digits}g}"


def p_equals(p, digits: int = 2) -> str:
    """ "p = 0.043", or "p < 1e-16" (p_value)."""
    shown = p_value(p, digits)
    return f"p {shown}" if shown.startswith("<") else f"p = {shown}"


def pct(share, digits: int = 1) -> str:
    """A fraction as a percentage; tiny non-zero shares shown as '< 0.1 %'."""
    if not is_number(share):
        return DASH
    value = 100.0 * share
    floor = 10.0 ** -digits
    if 0 < abs(value) < floor:
        return f"< {floor:.{digits}f} %"
    return f"{value:.{digits}f} %"


def dof(value, infinite: str = "∞") -> str:
    """Degrees of freedom: None or inf shown as `infinite` (Type B inputs), else rounded."""
    if value is None or (isinstance(value, float) and math.isinf(value)):
        return infinite
    if is_number(value):
        return f"{value:.0f}"
    return str(value)
