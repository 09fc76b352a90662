"""Advisor candidates for a weighing that weighs in the budget: weigh a larger mass.

A balance adds the same absolute uncertainty to every mass it reads (linearity and repeatability
per reading, docs/design.md, "Mass by difference"), so a k times larger mass carries 1/k of the
relative uncertainty. Beside a better balance (a "better class" candidate), two ways keep every
later concentration as it is:
- "larger weighing, larger flask": k times the mass into a k times larger flask of the same class
  (the solution's concentration is unchanged, nothing downstream changes);
- "larger weighing, more dilution": k times the mass into the same flask, and every dilution made
  from it with a one-mark pipette and flask of the same classes whose ratio is exactly 1/k of the
  present one (every diluted concentration unchanged); offered only where the weighed solution is
  used for nothing but those dilutions.
Both assume the balance's figures do not depend on the load, as the registers state them (the
evaluation then shows what the larger mass gains against the new glassware's tolerances).
See validate.advisor.candidates for what a candidate is.
"""

from __future__ import annotations

import math
from dataclasses import replace

from validate.advisor.candidates import (
    MAX_FLASK_GROWTH,
    MIN_SHARE,
    Candidate,
    Shares,
    _find_or_make,
    _glass,
)
from validate.inputs.items import OneMarkPipette, VolumetricFlask
from validate.inputs.registers import RegisterEntry
from validate.inputs.schema import AssayMethod, Method
from validate.inputs.solutions import Diluted, Solution, Weighed
from validate.inputs.values import Delivery

ML = 1e-6
SCALES = (2, 4, 5, 10)  # mass factors tried for the dilution scheme, smallest first
ASSUMPTION = ("the balance's linearity and repeatability per reading as the register states them, whatever the "
              "load; the new glassware's tolerances from the register")


def weighing_share(shares: Shares, sol: Weighed) -> float:
    """The largest share the weighing's own sources take of some result (the mass's stated
    uncertainty, and its balance readings; a linearity shared by the balance counts too)."""
    names = {f"{sol.id}: mass"}
    if sol.balance:
        names.add(f"{sol.balance}: linearity")
    own = [v for k, v in shares.source.items()
           if k in names or (sol.balance and k.startswith(f"{sol.balance}:") and k.endswith(f"({sol.id})"))]
    return sum(own)


def weighing_candidates(method: Method, shares: Shares, entries: list[RegisterEntry]) -> list[Candidate]:
    out: list[Candidate] = []
    for sol in method.solutions.values():
        if not isinstance(sol, Weighed) or weighing_share(shares, sol) < MIN_SHARE:
            continue
        for candidate in (_larger_flask(method, sol, entries), _more_dilution(method, sol, entries)):
            if candidate is not None:
                out.append(candidate)
    return out


def _mass_text(sol: Weighed, k: float) -> str:
    factor, unit = sol.mass.unit.factor, sol.mass.unit.text
    return f"{sol.mass.value * k / factor:.4g} {unit} instead of {sol.mass.value / factor:.4g} {unit}"


def _scaled_mass(sol: Solution, k: float) -> Weighed:
    """The same solution weighed k times larger (the mass's own stated uncertainty is absolute: kept)."""
    assert isinstance(sol, Weighed)  # candidates are made for weighed solutions only
    return replace(sol, mass=replace(sol.mass, value=sol.mass.value * k))


def _with_glassware(sol: Solution, aliquot: Delivery, flask: Delivery) -> Diluted:
    assert isinstance(sol, Diluted)  # the dilution scheme changes dilutions only
    return replace(sol, aliquot=aliquot, flask=flask)


def _larger_flask(method: Method, sol: Weighed, entries: list[RegisterEntry]) -> Candidate | None:
    """k times the mass into the next larger flask of the same class (k = the flasks' ratio)."""
    flask = method.item_of(sol.flask.item, VolumetricFlask)
    larger = sorted((e for e in _glass(entries, VolumetricFlask, flask.item_class)
                     if (e.nominal or 0.0) > sol.flask.volume * (1 + 1e-9)
                     and (e.nominal or 0.0) <= MAX_FLASK_GROWTH * sol.flask.volume * (1 + 1e-9)),
                    key=lambda e: e.nominal or 0.0)
    if not larger:
        return None
    entry = larger[0]
    assert entry.nominal is not None  # _glass keeps sized entries only
    k = entry.nominal / sol.flask.volume

    def apply(m: Method) -> Method:
        new = _find_or_make(m, entry, flask, VolumetricFlask)
        s = replace(_scaled_mass(m.solutions[sol.id], k), flask=Delivery(new.id, new.nominal))
        return replace(m, items={**m.items, new.id: new}, solutions={**m.solutions, sol.id: s})

    return Candidate(
        "larger weighing", f"weigh {_mass_text(sol, k)} for `{sol.id}` and make it up in a {entry.nominal / ML:g} mL "
        f"flask instead of {sol.flask.volume / ML:g} mL (same concentration)",
        f"{k:g} times the substance and a class {entry.item_class} {entry.nominal / ML:g} mL flask "
        f"({k:g} times the solution: reagent and waste)", ASSUMPTION,
        frozenset({f"solution:{sol.id}", f"item:{flask.id}"}), apply,
        {"solution": sol.id, "mass_factor": k, "flask_mL_before": round(sol.flask.volume / ML, 9),
         "flask_mL_after": round(entry.nominal / ML, 9)})


def _only_diluted_from(method: Method, sol: Weighed) -> list[Diluted] | None:
    """The dilutions made from the solution, when it is used for nothing else (None otherwise)."""
    if not isinstance(method, AssayMethod):
        return None  # a study's mixtures take aliquots of its reagent solutions directly
    cal = method.calibration
    used_elsewhere = ((cal is not None and sol.id in (*cal.standards, *cal.blanks))
                      or sol.id in method.result.formula.names
                      or (method.routine is not None and any(s.solution == sol.id for s in method.routine.spikes)))
    children = [s for s in method.solutions.values() if isinstance(s, Diluted) and s.parent == sol.id]
    if used_elsewhere or not children or any(not isinstance(method.items[c.aliquot.item], OneMarkPipette)
                                             for c in children):
        return None
    return children


def _pair_for(entries: list[RegisterEntry], pipette_class: str, flask_class: str, ratio: float,
              largest_flask: float) -> tuple[RegisterEntry, RegisterEntry] | None:
    """A one-mark pipette and a flask of the given classes whose ratio is `ratio` exactly (to
    rounding), the smallest relative tolerance first."""
    best = None
    for p in _glass(entries, OneMarkPipette, pipette_class):
        for q in _glass(entries, VolumetricFlask, flask_class):
            pn, qn = p.nominal or 0.0, q.nominal or 0.0
            if pn >= qn or qn > largest_flask * (1 + 1e-9) or abs(pn / qn / ratio - 1.0) > 1e-9:
                continue
            rel = math.hypot(p.values["tolerance"] / pn, q.values["tolerance"] / qn)
            if best is None or (rel, qn) < best[0]:
                best = ((rel, qn), p, q)
    return None if best is None else (best[1], best[2])


def _more_dilution(method: Method, sol: Weighed, entries: list[RegisterEntry]) -> Candidate | None:
    """k times the mass into the same flask; each dilution from it 1/k of its present ratio."""
    children = _only_diluted_from(method, sol)
    if children is None:
        return None
    for k in SCALES:
        pairs = {}
        for child in children:
            pip, flask = method.items[child.aliquot.item], method.item_of(child.flask.item, VolumetricFlask)
            found = _pair_for(entries, pip.item_class, flask.item_class,
                              child.aliquot.volume / child.flask.volume / k, MAX_FLASK_GROWTH * child.flask.volume)
            if found is None:
                break
            pairs[child.id] = (found, pip, flask)
        else:
            return _dilution_candidate(sol, k, pairs)
    return None


def _dilution_candidate(sol: Weighed, k: int, pairs: dict) -> Candidate:
    def apply(m: Method) -> Method:
        items, solutions = dict(m.items), {**m.solutions, sol.id: _scaled_mass(m.solutions[sol.id], k)}
        for child_id, ((p, q), pip, flask) in pairs.items():
            new_p = _find_or_make(m, p, pip, OneMarkPipette)
            new_q = _find_or_make(m, q, flask, VolumetricFlask)
            items.update({new_p.id: new_p, new_q.id: new_q})
            solutions[child_id] = _with_glassware(solutions[child_id], Delivery(new_p.id, new_p.nominal),
                                                  Delivery(new_q.id, new_q.nominal))
        return replace(m, items=items, solutions=solutions)

    steps = "; ".join(f"`{c}` with {p.nominal / ML:g} mL into {q.nominal / ML:g} mL"
                      for c, ((p, q), _, _) in pairs.items())
    return Candidate(
        "larger weighing", f"weigh {_mass_text(sol, k)} for `{sol.id}` ({k} times as concentrated) and dilute "
        f"further: {steps} (every diluted concentration unchanged)",
        f"{k} times the substance; the pipettes and flasks named", ASSUMPTION,
        frozenset({f"solution:{sol.id}", *(f"solution:{c}" for c in pairs),
                   *(f"item:{pip.id}" for _, pip, _ in pairs.values()),
                   *(f"item:{flask.id}" for _, _, flask in pairs.values())}), apply,
        {"solution": sol.id, "mass_factor": k,
         "dilutions": {c: [round(p.nominal / ML, 9), round(q.nominal / ML, 9)] for c, ((p, q), _, _) in pairs.items()}})
