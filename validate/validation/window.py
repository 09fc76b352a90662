"""The absorbance window: where photometric readings are most trustworthy.

For a photometer whose noise is a constant absolute error dT in transmittance,
c is proportional to A = -log10 T, so dc/c = dA/A = dT / (T ln T). The size of
the relative concentration error per unit transmittance error is therefore

    |(dc/c)/dT| = 1 / (T |ln T|) = 10^A / (A ln 10),

smallest at T = 1/e, i.e. A = log10(e) = 1/ln 10 = 0.434, where it equals e
(Twyman and Lothian, Proc. Phys. Soc. 45 (1933) 643-650, from memory; the
derivation is also in Skoog, Holler and Crouch, Principles of Instrumental
Analysis, chapter on UV-visible absorption, from memory). Modern instruments
often have noise that grows with A (shot noise, stray light), which moves the
optimum higher; the window 0.1 to 1.0 used as default is common practice.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from validate.validation.linearity import plain

OPTIMUM_ABSORBANCE = 1.0 / math.log(10.0)  # 0.4343
DEFAULT_WINDOW = (0.1, 1.0)  # common practice
HIGH_ABSORBANCE = 2.0  # above this stray light commonly bends the line (common practice)

WINDOW_SOURCE = ("Recommended absorbance window 0.1 to 1.0: common practice. Constant "
                 "transmittance noise gives the smallest relative concentration error at "
                 "A = 1/ln 10 = 0.434 (Twyman and Lothian, Proc. Phys. Soc. 45 (1933) 643, "
                 "from memory).")


def relative_error_factor(absorbance):
    """|(dc/c)/dT| = 10^A / (A ln 10) for constant transmittance noise dT.

    Multiply by the transmittance noise (e.g. 0.002) to get the relative
    concentration error. Returns inf at A = 0; works on floats and arrays.
    """
    a = np.asarray(absorbance, dtype=float)
    with np.errstate(divide="ignore"):
        factor = np.where(a > 0, 10.0**a / (a * math.log(10.0)), np.inf)
    return float(factor) if factor.ndim == 0 else factor


@dataclass(frozen=True)
class ErrorCurve:
    absorbance: tuple[float, ...]
    relative_error_factor: tuple[float, ...]
    optimum_absorbance: float
    minimum_factor: float
    source: str

    def to_dict(self) -> dict:
        return plain(self)


def error_curve(a_min: float = 0.02, a_max: float = 2.0, points: int = 200) -> ErrorCurve:
    """The relative-error factor against absorbance, for the report's plot."""
    if not (0 < a_min < a_max) or points < 2:
        raise ValueError("need 0 < a_min < a_max and at least 2 points")
    a = np.linspace(a_min, a_max, points)
    return ErrorCurve(tuple(a.tolist()), tuple(relative_error_factor(a).tolist()),
                      OPTIMUM_ABSORBANCE, math.e,
                      "Relative concentration error per unit transmittance error, "
                      "1/(T |ln T|) = 10^A/(A ln 10), minimum e at A = 0.434 (Twyman and "
                      "Lothian 1933, from memory).")


@dataclass(frozen=True)
class WindowFlags:
    absorbance: tuple[float, ...]
    flags: tuple[tuple[str, ...], ...]  # one tuple of flags per reading
    low: float
    high: float
    inside: int
    outside: int
    source: str

    def to_dict(self) -> dict:
        return plain(self)


def absorbance_window_flags(absorbances, low: float = DEFAULT_WINDOW[0],
                            high: float = DEFAULT_WINDOW[1]) -> WindowFlags:
    """Flag each reading outside the recommended window (and at extremes)."""
    if not low < high:
        raise ValueError(f"the absorbance window needs low < high, got {low} and {high}")
    a = np.asarray(absorbances, dtype=float).ravel()
    flags = []
    for value in a:
        f = []
        if value < 0:
            f.append("negative absorbance (check the blank / reference cell)")
        elif value < low:
            f.append(f"below the window ({low:g}): relative photometric error is large")
        if value > HIGH_ABSORBANCE:
            f.append(f"above {HIGH_ABSORBANCE:g}: stray light may bend the line (common practice); dilute")
        elif value > high:
            f.append(f"above the window ({high:g}): little light reaches the detector")
        flags.append(tuple(f))
    outside = sum(1 for f in flags if f)
    return WindowFlags(tuple(a.tolist()), tuple(flags), low, high, len(a) - outside, outside,
                       WINDOW_SOURCE)
