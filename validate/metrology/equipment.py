"""Equipment items and their uses turned into uncertainty sources and model terms.

docs/design.md, "Metrology rules": one calibration offset per item, shared by all its uses;
a fresh repeatability term per use; one laboratory-temperature deviation
shared by every volumetric step (unless the settings say otherwise); a
burette delivery is the difference of two readings, and so is a mass by difference.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from validate.inputs.items import Balance, Burette, Volumetric
from validate.inputs.schema import Method
from validate.inputs.solutions import Weighed, balance_readings
from validate.inputs.values import Delivery
from validate.metrology.sources import Source, rectangular, triangular

ML = 1e-6  # m^3 per mL, for display
TEMPERATURE = "laboratory temperature"


class SourceSet:
    """The model's sources by name. Adding a name twice keeps the first source:
    that identity is what correlates every use of one item or solution.

    `quantity` names the input quantity the source acts through (default: the source itself).
    A source added for two different quantities becomes a quantity of its own: it is an input
    shared by them, and ranking it under one of them would hide the correlation."""

    def __init__(self):
        self.sources: dict[str, Source] = {}

    def add(self, source: Source, quantity: str = "") -> str:
        label = quantity or source.name
        existing = self.sources.get(source.name)
        if existing is None:
            self.sources[source.name] = replace(source, quantity=label)
        elif existing.quantity != label:
            self.sources[source.name] = replace(existing, quantity=source.name)
        return source.name


def _offset(item: Volumetric) -> Source:
    make = triangular if item.distribution == "triangular" else rectangular
    return make(f"{item.id}: calibration", 0.0, item.tolerance, step="equipment calibration",
                equipment=item.id, provenance=f"tolerance +/-{item.tolerance / ML:.4g} mL, "
                f"{item.distribution}; {item.provenance}", unit="mL", display_factor=ML)


def temperature_source(method: Method, step: str) -> Source:
    s = method.settings
    name = TEMPERATURE if s.shared_temperature else f"{TEMPERATURE} ({step})"
    return rectangular(name, 0.0, s.temperature_range, step=TEMPERATURE if s.shared_temperature else step,
                       provenance=f"deviation from 20 degC within +/-{s.temperature_range:g} K, rectangular; "
                       f"volume expansion {s.expansion_coefficient:g} per K", unit="K")


def volume_term(ss: SourceSet, method: Method, delivery: Delivery, step: str, use: str,
                with_repeatability: bool = True):
    """A closure x -> delivered volume (m^3) for one use of an item in one step.

    `with_repeatability=False` leaves out the per-use random terms (repeatability,
    burette readings) where the calibration line's observed scatter covers them.

    V = V_selected + offset + random terms of the use + V_selected * alpha * dT.

    The offset is the item's one calibration source at its full tolerance, for every kind:
    a one-mark item delivers only its nominal; a piston pipette's maximum permissible error
    applies at every selected volume (ISO 8655-2, as the register states it); a burette's
    or graduated pipette's maximum permissible error applies to any volume delivered on its
    scale, not to the full scale alone (ISO 385, ISO 835; from memory), so a 1 mL delivery
    from a 25 mL burette carries the whole tolerance (CG4's titration examples take the
    burette tolerance as it is, from memory). Every delivery of one item shares the offset:
    see docs/design.md, "Burette deliveries as two readings", for why.
    """
    item = method.item_of(delivery.item, Volumetric)
    volume = delivery.volume
    quantity = f"{item.id}: volume ({use})"
    cal = ss.add(_offset(item), quantity)
    temp = ss.add(temperature_source(method, step), quantity)
    alpha = method.settings.expansion_coefficient
    terms = _per_use_terms(ss, item, step, use, quantity) if with_repeatability else []

    expansion = volume * alpha  # (the product the expression below forms first)

    def term(x):
        offset = x[cal]
        if isinstance(offset, np.ndarray) and offset.dtype == np.float64:
            return _trial_volume(volume + offset, expansion * x[temp], terms, x)
        v = volume + offset + volume * alpha * x[temp]
        for sign, name in terms:
            v = v + sign * x[name]
        return v

    # what the volume is computed from: two uses with the same key give the same numbers from
    # one x (a model may compute such a volume once per evaluation of arrays of trials)
    term.key = (volume, alpha, cal, temp, tuple(terms))  # type: ignore[attr-defined]
    return term


def _trial_volume(v: np.ndarray, expansion: np.ndarray, terms: list[tuple[float, str]], x) -> np.ndarray:
    """The volume of arrays of trials with the same numbers as the expression for one trial, in
    fewer passes: `v` is a new array, so adding in place changes no other; a sign of +-1 times
    a draw is the draw or its exact negation, so it is added or subtracted without the product."""
    v += expansion
    for sign, name in terms:
        if sign == 1.0:
            v += x[name]
        elif sign == -1.0:
            v -= x[name]
        else:
            v += sign * x[name]
    return v


def _per_use_terms(ss: SourceSet, item: Volumetric, step: str, use: str,
                   quantity: str) -> list[tuple[float, str]]:
    """(sign, source name) of the random terms of one use: a burette delivery is the difference
    of two readings of its scale; any other item carries its repeatability per use."""
    match item:
        case Burette():
            return [(sign, ss.add(rectangular(
                f"{item.id}: reading at {end} ({use})", 0.0, item.reading, step=step, equipment=item.id,
                provenance=f"one reading within +/-{item.reading / ML:.3g} mL", unit="mL", display_factor=ML),
                quantity)) for sign, end in ((-1.0, "start"), (1.0, "end"))]
        case _ if item.repeatability > 0:
            return [(1.0, ss.add(Source(
                f"{item.id}: repeatability ({use})", 0.0, item.repeatability, "normal", step=step,
                equipment=item.id, provenance=f"standard deviation {item.repeatability / ML:.3g} mL per use; "
                f"{item.provenance}", unit="mL", display_factor=ML), quantity))]
        case _:
            return []


def balance_terms(ss: SourceSet, method: Method, sol: Weighed, step: str) -> list[tuple[float, str]]:
    """(sign, source name) of the balance readings a weighed mass is made of (docs/design.md,
    "Mass by difference"), all of the quantity `SOLUTION: mass`.

    A mass by difference is gross minus tare: two readings, each with its own repeatability
    term and, with `linearity_correlation = "independent"` (the default), its own linearity
    deviation, so a net mass carries linearity twice and repeatability twice (EURACHEM/CITAC
    CG4, Example A2, from memory: "counted twice, once for the tare and once for the gross
    weight, because each is an independent observation"). With "shared" the balance has one
    linearity deviation, entering every net mass once: for weighings of similar masses, where
    the deviation at the two loads is the same for every weighing; it must not enter the two
    readings of one weighing, where it would cancel."""
    item = method.item_of(sol.balance or "", Balance)
    quantity = f"{sol.id}: mass"
    readings = balance_readings(sol)
    terms: list[tuple[float, str]] = []
    if item.linearity > 0 and item.linearity_correlation == "shared":
        terms.append((1.0, ss.add(_linearity(item, f"{item.id}: linearity", "one deviation shared by every weighing "
                                             "on this balance"), quantity)))
    elif item.linearity > 0:
        terms += [(sign, ss.add(_linearity(item, f"{item.id}: linearity, {reading} ({sol.id})",
                                           f"{reading} reading's own deviation"), quantity))
                  for sign, reading in readings]
    if item.repeatability > 0:
        terms += [(sign, ss.add(Source(
            f"{item.id}: repeatability, {reading} ({sol.id})", 0.0, item.repeatability, "normal", step=step,
            equipment=item.id, provenance=f"standard deviation {item.repeatability * 1e6:.3g} mg of one reading; "
            f"{item.provenance}", unit="mg", display_factor=1e-6), quantity)) for sign, reading in readings]
    return terms


def _linearity(item: Balance, name: str, how: str) -> Source:
    return rectangular(name, 0.0, item.linearity, step="equipment calibration", equipment=item.id,
                       provenance=f"+/-{item.linearity * 1e6:.3g} mg, rectangular, {how}; {item.provenance}",
                       unit="mg", display_factor=1e-6)


def value_source(ss: SourceSet, name: str, value, step: str, equipment: str = "") -> str | None:
    """A source for an UncertainValue, or None when it is exact (a constant)."""
    if value.u == 0:
        return None
    return ss.add(Source(name, value.value, value.u, value.distribution, dof=value.dof, step=step,
                         equipment=equipment, provenance=value.provenance or "method file",
                         kind=value.kind, unit=value.unit.text, display_factor=value.unit.factor,
                         trapezoid_d=value.trapezoid_d))


def exact_or(x, name: str | None, value: float):
    return value if name is None else x[name]

