"""The [solutions.ID] tables of a method file: one solution each, made one of four ways."""

from __future__ import annotations

from validate.inputs.errors import InputError
from validate.inputs.items import FLASKS, PIPETTES, Balance
from validate.inputs.schema import AMOUNT_CONCENTRATION, MASS_CONCENTRATION, SOLUTION_ORIGINS
from validate.inputs.solutions import WEIGHINGS, Blank, Certified, Diluted, Solution, Weighed, parent_of
from validate.inputs.tables import Table, parse_delivery
from validate.inputs.values import UncertainValue

MASS = (1, 0, 0, 0)
NONE = (0, 0, 0, 0)
MOLAR_MASS = (1, 0, -1, 0)


def parse_solution(sol_id: str, t: Table, items: dict) -> Solution:
    made_by = t.required_text("made_by")
    if made_by not in SOLUTION_ORIGINS:
        raise t.error(f"unknown choice {made_by!r}", "made_by", fix=f"use one of: {', '.join(SOLUTION_ORIGINS)}")
    description = t.text("description", "") or ""
    match made_by:
        case "blank":
            t.allow("made_by", "description")
            return Blank(id=sol_id, description=description)
        case "certificate":
            return _certified(sol_id, t, description)
        case "weighing":
            return _weighed(sol_id, t, items, description)
    return _diluted(sol_id, t, items, description)


def _certified(sol_id: str, t: Table, description: str) -> Certified:
    t.allow("made_by", "description", "concentration")
    conc = t.uncertain("concentration")
    if conc.unit.dims not in (MASS_CONCENTRATION, AMOUNT_CONCENTRATION):
        raise t.error("a concentration needs a unit of mass or amount per volume", "concentration",
                      fix='e.g. concentration = { value = "1000 mg/L", expanded_uncertainty = "2 mg/L", '
                          'coverage_factor = 2 }')
    return Certified(id=sol_id, concentration=conc, description=description)


def _weighed(sol_id: str, t: Table, items: dict, description: str) -> Weighed:
    flask = parse_delivery(t.require("flask"), t, "flask", items, FLASKS)
    t.allow("made_by", "description", "mass", "balance", "weighing", "purity", "molar_mass", "flask")
    balance = t.text("balance")
    if balance is not None and not isinstance(items.get(balance), Balance):
        raise t.error(f"`{balance}` is not a balance defined under [equipment]", "balance",
                      fix=f'define [equipment.{balance}] with kind = "balance", or name another')
    weighing = _weighing(t, balance)
    purity = t.uncertain("purity", NONE) if t.has("purity") else None
    if purity is not None and purity.value > 1.0 + 1e-12:
        raise t.error("a purity cannot exceed 100 %", "purity", fix="give the purity stated on the certificate")
    molar = t.uncertain("molar_mass", MOLAR_MASS) if t.has("molar_mass") else None
    return Weighed(id=sol_id, mass=_mass(t, balance), balance=balance, weighing=weighing,
                   purity=purity, molar_mass=molar, flask=flask, description=description)


def _mass(t: Table, balance: str | None) -> UncertainValue:
    """The net mass: a bare number when a balance is named (its readings carry the uncertainty),
    else with its own uncertainty or `exact = true`."""
    mass = t.uncertain("mass", MASS, bare_ok=balance is not None)
    raw = t.get("mass")
    if balance is not None and isinstance(raw, dict) and raw.get("exact") is True:
        raise t.error("a mass read on a balance is not exact", "mass",
                      fix="leave out `exact = true` (the balance's readings carry the uncertainty), or the balance")
    return mass


def _weighing(t: Table, balance: str | None) -> str | None:
    """How the mass was read on its balance: "by difference" (tare and gross) or "single reading"."""
    if not t.has("weighing"):
        return None
    if balance is None:
        raise t.error("`weighing` says how the mass was read on a balance, but no `balance` is named", "weighing",
                      fix="name the balance, or leave out `weighing`")
    return t.choice("weighing", "", WEIGHINGS, f"use one of: {', '.join(repr(w) for w in WEIGHINGS)}")


def _diluted(sol_id: str, t: Table, items: dict, description: str) -> Diluted:
    flask = parse_delivery(t.require("flask"), t, "flask", items, FLASKS)
    t.allow("made_by", "description", "from", "aliquot", "flask")
    aliquot = parse_delivery(t.require("aliquot"), t, "aliquot", items, PIPETTES)
    if aliquot.volume >= flask.volume:
        raise t.error("the aliquot is as large as or larger than the flask it goes into", "aliquot",
                      fix="check the aliquot and flask volumes")
    return Diluted(id=sol_id, parent=t.required_text("from"), aliquot=aliquot, flask=flask, description=description)


def check_solution_graph(solutions: dict[str, Solution], path) -> None:
    """Every dilution is made from a solution defined here, and no preparation comes back to itself."""
    for sol in solutions.values():
        parent = parent_of(sol)
        if parent is not None and parent not in solutions:
            raise InputError(f"unknown solution `{parent}`", file=path, where=f"[solutions.{sol.id}].from",
                             fix=f"use one of: {', '.join(s for s in solutions if s != sol.id)}")
    for sol in solutions.values():
        _refuse_circle(sol, solutions, path)


def _refuse_circle(sol: Solution, solutions: dict[str, Solution], path) -> None:
    seen, parent = [sol.id], parent_of(sol)
    while parent is not None:
        current = solutions[parent]
        if current.id in seen:
            raise InputError(f"the preparation of `{sol.id}` refers back to itself "
                             f"({' -> '.join(seen + [current.id])})", file=path,
                             where=f"[solutions.{sol.id}].from", fix="break the circle")
        seen.append(current.id)
        parent = parent_of(current)
