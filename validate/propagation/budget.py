"""Uncertainty budgets: ranked by source, and grouped by step, equipment item and input quantity.

Sources are independent by construction (correlation comes from sharing one
source), so a group's variance is the sum of its members' squared
contributions and the shares of all groups add up to one.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from validate.propagation.linear import LinearResult


@dataclass(frozen=True)
class GroupShare:
    group: str
    contribution: float  # sqrt of the group's variance, in the result's unit
    share: float

    def to_dict(self) -> dict:
        return {"group": self.group, "contribution": self.contribution, "share": self.share}


def grouped(result: LinearResult, key: str) -> list[GroupShare]:
    """Variance shares summed by `step` or `equipment` (sources without one: "(none)")."""
    members: dict[str, list[float]] = {}
    for row in result.contributions:
        members.setdefault(getattr(row, key) or "(none)", []).append(row.contribution**2)
    # fsum rounds the exact sum once: a group's variance does not depend on the order of its members
    totals = {name: math.fsum(squares) for name, squares in members.items()}
    variance = result.standard_uncertainty**2
    groups = [GroupShare(g, math.sqrt(v), v / variance if variance > 0 else 0.0) for g, v in totals.items()]
    return sorted(groups, key=lambda g: (-round(g.share, 12), g.group))  # round-off must not reorder


def grouped_by_quantity(result: LinearResult, quantity_of: dict[str, str]) -> list[GroupShare]:
    """Variance shares summed by input quantity of the measurement equation (a flask volume:
    calibration, repeatability, temperature), as CG4 presents a budget (EURACHEM/CITAC CG4,
    3rd ed., Example A1, from memory). `quantity_of` maps a source to its quantity; a source
    shared by several quantities is a quantity of its own, so the groups stay independent
    and their shares add up to one."""
    totals: dict[str, float] = {}
    for row in result.contributions:
        name = quantity_of.get(row.source) or row.source
        totals[name] = totals.get(name, 0.0) + row.contribution**2
    variance = result.standard_uncertainty**2
    groups = [GroupShare(g, math.sqrt(v), v / variance if variance > 0 else 0.0) for g, v in totals.items()]
    return sorted(groups, key=lambda g: (-round(g.share, 12), g.group))


def budget_rows(results: list[LinearResult]) -> list[dict]:
    """The record's flat budget: every source of every result, ranked by share within each result."""
    rows = []
    for result in results:
        for row in result.contributions:
            d = row.to_dict()
            rows.append({"result": result.name, **d})
    return rows


def round_gum(value: float, uncertainty: float, digits: int = 2) -> tuple[str, str]:
    """Uncertainty to `digits` significant digits, value to the same decimal place (GUM 7.2.6)."""
    if not (math.isfinite(uncertainty) and uncertainty > 0):
        return f"{value:.6g}", f"{uncertainty:g}"
    exponent = math.floor(math.log10(uncertainty)) - (digits - 1)
    rounded_u = round(uncertainty / 10**exponent) * 10**exponent
    if rounded_u >= 10 ** (exponent + digits):  # e.g. 0.0996 -> 0.10: one digit more on the left
        exponent += 1
        rounded_u = round(uncertainty / 10**exponent) * 10**exponent
    decimals = max(-exponent, 0)
    return f"{round(value, -exponent):.{decimals}f}", f"{rounded_u:.{decimals}f}"
