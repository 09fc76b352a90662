"""Advisor candidates that change a setting or a stated value: the laboratory's temperature
range halved, or a stated input (certificate, purity, molar mass, a constant) with half its
standard uncertainty (see validate.advisor.candidates for what a candidate is)."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from typing import Any

from validate.advisor.candidates import MIN_SHARE, Candidate, Shares, quantities_of
from validate.inputs.schema import AssayMethod, Method
from validate.inputs.solutions import Blank, Certified, Diluted, Solution, Weighed
from validate.inputs.values import UncertainValue
from validate.metrology.equipment import TEMPERATURE


def temperature_candidates(method: Method, shares: Shares) -> list[Candidate]:
    share = max((v for k, v in shares.source.items() if k.startswith(TEMPERATURE)), default=0.0)
    t = method.settings.temperature_range
    if share < MIN_SHARE or t <= 0:
        return []
    return [Candidate(
        "temperature range", f"keep the laboratory within +/-{t / 2:g} K of 20 degC instead of +/-{t:g} K",
        "temperature control (air conditioning, or solutions brought to temperature in a water bath "
        "before making up to the mark)",
        "the volumes' expansion coefficient and every other source unchanged",
        frozenset({"temperature"}),
        lambda m: replace(m, settings=replace(m.settings, temperature_range=m.settings.temperature_range / 2)),
        {"temperature_range_before_K": t, "temperature_range_after_K": t / 2})]


def _stated_inputs(sol: Solution) -> tuple[tuple[str, str], ...]:
    """(field, plain name) of the stated values a solution is made from."""
    match sol:
        case Weighed():
            return (("mass", "mass"), ("purity", "purity"), ("molar_mass", "molar mass"))
        case Certified():
            return (("concentration", "certified concentration"),)
        case Diluted() | Blank():
            return ()


def _halved(value: UncertainValue) -> UncertainValue:
    return replace(value, u=value.u / 2, trapezoid_d=value.trapezoid_d / 2)


def _halve_solution_input(sol_id: str, attr: str) -> Callable[[Method], Method]:
    def apply(m: Method) -> Method:
        s = m.solutions[sol_id]
        changes: dict[str, Any] = {attr: _halved(getattr(s, attr))}  # the field named by the kind
        return replace(m, solutions={**m.solutions, sol_id: replace(s, **changes)})
    return apply


def _halve_quantity(name: str) -> Callable[[Method], Method]:
    def apply(m: Method) -> Method:
        match m:
            case AssayMethod(quantities=quantities):
                value = quantities[name].value
                if value is not None:
                    return replace(m, quantities={**quantities, name: replace(quantities[name], value=_halved(value))})
        raise TypeError(f"no stated quantity `{name}` to halve")
    return apply


def input_value_candidates(method: Method, shares: Shares) -> list[Candidate]:
    """Stated inputs with half their standard uncertainty. A source name the budget does not
    know (a naming change elsewhere) is kept rather than silently left out."""
    found = []
    for sol in method.solutions.values():
        for attr, label in _stated_inputs(sol):
            value = getattr(sol, attr)
            if value is not None and value.u > 0:
                found.append((f"{sol.id}: {label}", f"the {label} of `{sol.id}`", _halve_solution_input(sol.id, attr)))
    for q in quantities_of(method).values():
        if q.value is not None and q.value.u > 0:
            found.append((q.name, f"`{q.name}`", _halve_quantity(q.name)))
    out = []
    for source, what, apply in found:
        if shares.source.get(source, 1.0) < MIN_SHARE:
            continue
        out.append(Candidate(
            "better input value", f"obtain {what} with half its present standard uncertainty",
            "a value with a smaller uncertainty (a better certificate or reference material, "
            "or more determinations of it)",
            "its distribution and degrees of freedom are kept (conservative when it rests on replicates)",
            frozenset({f"source:{source}"}), apply, {"source": source}))
    return out
