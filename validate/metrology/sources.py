"""Uncertainty sources: the inputs of the measurement model.

A source is one input quantity with its estimate, standard uncertainty,
probability distribution, degrees of freedom and provenance. Every engine
draws on the same source objects, so a source used in several places of the
model (one pipette's calibration offset, one stock solution, the laboratory
temperature) correlates those places exactly as in the laboratory.

All values are held in SI units (volumes in m^3, masses in kg, amount
concentrations in mol/m^3, mass concentrations in kg/m^3, lengths in m);
`unit` is the unit the analyst wrote, used only for display.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from validate.inputs.values import DISTRIBUTIONS


@dataclass(frozen=True)
class Source:
    """One input quantity of the model.

    `u` is the GUM standard uncertainty. The distribution's shape follows
    from it: rectangular half-width a = u*sqrt(3) (GUM 4.3.7), triangular
    a = u*sqrt(6) (GUM 4.3.9), t: value + u * t_dof (JCGM 101 6.4.9),
    curvilinear trapezoid with half-width a and inexact limits +/- d,
    u^2 = a^2/3 + d^2/9 (JCGM 101 6.4.3).
    """

    name: str
    value: float
    u: float
    distribution: str = "normal"
    dof: float = math.inf
    step: str = ""
    equipment: str = ""
    provenance: str = ""
    kind: str = "B"  # "A": from replicates; "B": any other way
    unit: str = ""
    display_factor: float = 1.0  # SI value / display_factor = value in `unit`
    trapezoid_d: float = 0.0  # inexactness of the limits, SI (trapezoid only)
    # Sources whose uncertainties all rest on ONE estimated standard deviation (e.g. the
    # residual scatter of a calibration line) share a group: their degrees of freedom
    # count once (Welch-Satterthwaite on the group's sum) and Monte Carlo draws them from
    # one multivariate t distribution (a shared chi-square factor per trial).
    dof_group: str = ""
    # The input quantity of the measurement equation the source belongs to (a delivered volume,
    # a mass): its terms are combined first and ranked as that quantity (CG4's presentation).
    # A source acting through several quantities (one temperature, one pipette's calibration)
    # is a quantity of its own. Set by SourceSet.add.
    quantity: str = ""

    def __post_init__(self):
        if self.distribution not in DISTRIBUTIONS:
            raise ValueError(f"unknown distribution {self.distribution!r}")
        if not (self.u >= 0 and math.isfinite(self.u)):
            raise ValueError(f"source {self.name}: standard uncertainty must be finite and >= 0")
        if self.distribution == "t" and not (self.dof > 0):
            raise ValueError(f"source {self.name}: a t distribution needs degrees of freedom > 0")

    @property
    def half_width(self) -> float:
        """Half-width of a bounded distribution (nan for unbounded ones)."""
        if self.distribution == "rectangular":
            return self.u * math.sqrt(3.0)
        if self.distribution == "triangular":
            return self.u * math.sqrt(6.0)
        if self.distribution == "trapezoid":
            return math.sqrt(max(3.0 * (self.u**2 - self.trapezoid_d**2 / 9.0), 0.0))
        return math.nan

    def to_dict(self) -> dict:
        d = asdict(self)
        d["dof"] = None if math.isinf(self.dof) else self.dof
        d["value_in_unit"] = self.value / self.display_factor
        d["u_in_unit"] = self.u / self.display_factor
        return d


def rectangular(name: str, value: float, half_width: float, **kw) -> Source:
    return Source(name, value, half_width / math.sqrt(3.0), "rectangular", **kw)


def triangular(name: str, value: float, half_width: float, **kw) -> Source:
    return Source(name, value, half_width / math.sqrt(6.0), "triangular", **kw)


def normal(name: str, value: float, u: float, **kw) -> Source:
    return Source(name, value, u, "normal", **kw)


def trapezoid(name: str, value: float, half_width: float, d: float, **kw) -> Source:
    u = math.sqrt(half_width**2 / 3.0 + d**2 / 9.0)
    return Source(name, value, u, "trapezoid", trapezoid_d=d, **kw)


def from_replicates(name: str, mean: float, sd: float, n: int, **kw) -> Source:
    """Type A input: mean of n readings, u = s/sqrt(n), n-1 degrees of freedom."""
    if n < 2:
        raise ValueError(f"source {name}: a Type A uncertainty needs at least 2 replicates")
    kw.setdefault("kind", "A")
    return Source(name, mean, sd / math.sqrt(n), "t", dof=n - 1, **kw)
