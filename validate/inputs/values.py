"""Plain values read from a method file: an uncertain number, a delivered volume. SI inside."""

from __future__ import annotations

import math
from dataclasses import dataclass

from validate.inputs.units import Unit

DISTRIBUTIONS = ("normal", "rectangular", "triangular", "t", "trapezoid")


@dataclass(frozen=True)
class UncertainValue:
    """A number with its standard uncertainty and distribution, in SI."""

    value: float
    unit: Unit
    u: float = 0.0
    distribution: str = "normal"
    dof: float = math.inf
    provenance: str = ""
    kind: str = "B"
    trapezoid_d: float = 0.0
    coverage_factor: float | None = None  # k where the value was stated as U with k (U = k u)


@dataclass(frozen=True)
class Delivery:
    """A volume delivered (or a flask filled) by one item in one step."""

    item: str
    volume: float  # selected volume, m^3
