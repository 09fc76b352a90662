"""How the reproducibility of a routine result changes with concentration.

From the control levels: with one level the shape cannot be told from the data, and the
cautious rule max(constant, proportional) is applied (constant below the level, proportional
above it); with two or more levels u(c) = a + b c is fitted by least squares and reduced to a
constant (b < 0) or proportional (a < 0) model where a coefficient would be negative
(Nordtest TR 537 treats the absolute and relative forms the same way, from memory; the
reduction is common practice).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class RwModel:
    kind: str  # "constant", "proportional", "a + b c", "larger of constant and proportional"
    a: float  # u at zero concentration (result unit)
    b: float  # change of u per unit concentration
    dof: float  # the smallest of the levels' degrees of freedom (cautious)
    levels: int
    why: str

    def u_at(self, c: float) -> float:
        if self.kind == "larger of constant and proportional":
            return max(self.a, self.b * abs(c))
        return self.a + self.b * abs(c)

    def to_dict(self) -> dict:
        return {"kind": self.kind, "a": self.a, "b": self.b, "dof": self.dof, "levels": self.levels, "why": self.why}


def choose_rw_model(levels: list[tuple[float, float, float]]) -> RwModel:
    """`levels`: (concentration, standard deviation of a routine result, its degrees of freedom)."""
    if not levels:
        raise ValueError("the reproducibility model needs at least one control level")
    dof = min(d for _, _, d in levels)
    if len(levels) == 1:
        c, u, _ = levels[0]
        return RwModel("larger of constant and proportional", u, u / abs(c) if c else 0.0, dof, 1,
                       "one control level: constant below it and proportional above it, the larger of the two "
                       "(cautious)")
    cs = np.array([abs(c) for c, _, _ in levels])
    us = np.array([u for _, u, _ in levels])
    if np.ptp(cs) == 0:
        return RwModel("constant", float(us.max()), 0.0, dof, len(levels),
                       "control levels at one concentration: the largest standard deviation")
    b, a = np.polyfit(cs, us, 1)
    if b < 0:
        return RwModel("constant", float(us.mean()), 0.0, dof, len(levels),
                       "no increase with concentration: the mean standard deviation")
    if a < 0:
        b_prop = float(np.sum(cs * us) / np.sum(cs**2))
        return RwModel("proportional", 0.0, b_prop, dof, len(levels),
                       "a straight line would cross zero above zero concentration: proportional through the origin")
    return RwModel("a + b c", float(a), float(b), dof, len(levels), "least-squares line through the control levels")
