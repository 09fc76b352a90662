"""Candidate changes for the improvement advisor (validate.advisor.advice).

A candidate is a change a laboratory could make, in plain words, with what it
costs in work, and a function Method -> Method that builds the what-if variant
(frozen dataclasses copied with dataclasses.replace; the original method is
never touched). Candidates compose: applying several in turn gives the variant
of a combined change.

Kinds offered:
- "better class": the same item in a register class with smaller tolerances
  (volumetric class B -> A, a semi-micro balance, a double-beam photometer, ...);
- "one-mark pipette": a piston pipette, always used at one volume, replaced by
  a one-mark pipette of that volume (a piston pipette has no better class);
- "volume pair": a dilution made with another one-mark pipette and flask of
  the same classes, giving the same dilution factor with a lower relative
  tolerance (checked: the new factor lies within the original pair's
  worst-case tolerance on the factor);
- "more sample readings", "more calibration readings": twice the readings
  (validate.advisor.readings);
- "temperature range": the laboratory's temperature range halved, and
  "better input value": a stated input (certificate, purity, a constant) with
  half its standard uncertainty (both in validate.advisor.stated_inputs).

Not offered: reading standards and samples in the same cell. The method file
names one cell under [calibration] for every reading, so standards and samples
already share it and there is nothing to change.

Candidates are generated only for items and inputs that carry at least
MIN_SHARE of the variance of some result (the budget decides where to look).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Any

from validate.inputs.equipment_section import DEFAULT_REPEATABILITY_RATIO  # the loader's default
from validate.inputs.items import (
    Balance,
    Burette,
    Cuvette,
    Item,
    ItemCommon,
    OneMarkPipette,
    Photometer,
    PistonPipette,
    Volumetric,
    VolumetricFlask,
)
from validate.inputs.registers import RegisterEntry
from validate.inputs.schema import AssayMethod, EquilibriumMethod, Method, NamedQuantity
from validate.inputs.solutions import Diluted, Solution, deliveries_of
from validate.inputs.values import Delivery
from validate.propagation.budget import grouped
from validate.propagation.linear import LinearResult

ML = 1e-6  # m^3 per mL
MIN_SHARE = 0.005  # an item or input below 0.5 % of every result's variance is not worth a change
MAX_FLASK_GROWTH = 10  # a new flask at most ten times the old one (reagent and waste; a choice of this tool)
READING_FACTOR = 2  # "more readings" means twice as many


@dataclass(frozen=True)
class Candidate:
    kind: str
    change: str  # what to do, in plain words
    cost: str  # what it costs in work or material
    assumption: str  # what the evaluation assumes
    touches: frozenset  # what it changes; candidates touching the same thing are not combined
    apply: Callable[[Method], Method] = field(repr=False)
    details: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Shares:
    """The largest variance share over the results, by equipment item, step and source."""

    equipment: dict[str, float]
    step: dict[str, float]
    source: dict[str, float]

    @classmethod
    def of(cls, results: list[LinearResult]) -> Shares:
        by: dict[str, dict[str, float]] = {"equipment": {}, "step": {}, "source": {}}
        for r in results:
            for key in ("equipment", "step"):
                for g in grouped(r, key):
                    by[key][g.group] = max(by[key].get(g.group, 0.0), g.share)
            for c in r.contributions:
                by["source"][c.source] = max(by["source"].get(c.source, 0.0), c.share)
        return cls(**by)


def _ml(volume: float) -> str:
    return f"{volume / ML:g} mL"


def _with_item(new: Item) -> Callable[[Method], Method]:
    return lambda m: replace(m, items={**m.items, new.id: new})


# ---- equipment ----

def _compared(item: Item) -> tuple[str, ...]:
    """What "better" is judged on for the item's kind (smaller is better for every key)."""
    match item:
        case Volumetric() | Cuvette():
            return ("tolerance",)
        case Photometer():
            return ("offset", "noise")
        case Balance():
            return ("linearity", "repeatability")


def _nominal(item: Item) -> float | None:
    match item:
        case Volumetric(nominal=nominal):
            return nominal
        case Cuvette() | Photometer() | Balance():
            return None


def _of_entry_kind(item: ItemCommon, entry: RegisterEntry) -> bool:
    """Whether the register entry is for items of this kind (registers name kinds by their word)."""
    return entry.kind == item.kind


def _repeatability_for(item: Volumetric, tolerance: float, entry: RegisterEntry) -> float:
    """The register's repeatability; else the loader's default ratio when the item used it or
    changes kind; else the laboratory's own value, kept (it belongs to the analyst, not the class)."""
    if "repeatability" in entry.values:
        return entry.values["repeatability"]
    default = math.isclose(item.repeatability, DEFAULT_REPEATABILITY_RATIO * item.tolerance, rel_tol=1e-9)
    if not _of_entry_kind(item, entry) or default:
        return DEFAULT_REPEATABILITY_RATIO * tolerance
    return item.repeatability


def item_in_class(item: Item, entry: RegisterEntry) -> Item:
    """The item as it would be in the register entry's class."""
    v = entry.values
    common: dict[str, Any] = {"item_class": entry.item_class, "defaults_used": (),
                              "provenance": f"{entry.source}; suggested by the advisor"}
    match item:
        case Burette():
            return replace(item, **common, tolerance=v["tolerance"], reading=v.get("reading", item.reading),
                           repeatability=_repeatability_for(item, v["tolerance"], entry))
        case Volumetric():
            return replace(item, **common, tolerance=v["tolerance"],
                           repeatability=_repeatability_for(item, v["tolerance"], entry))
        case Cuvette() | Photometer() | Balance():
            return replace(item, **common, **{k: v[k] for k in _compared(item) if k in v})


def _better(item: Item, entry: RegisterEntry) -> bool:
    if entry.item_class == item.item_class:
        return False
    match item:
        case Cuvette() if not math.isclose(entry.values.get("path", -1.0), item.path):
            return False
    pairs = [(entry.values[k], getattr(item, k)) for k in _compared(item) if k in entry.values]
    return bool(pairs) and all(new <= old for new, old in pairs) and any(new < old for new, old in pairs)


def _same_size(entry: RegisterEntry, item: Item) -> bool:
    nominal = _nominal(item)
    if nominal is None or entry.nominal is None:
        return nominal is None and entry.nominal is None
    return math.isclose(entry.nominal, nominal, rel_tol=1e-9)


def _described(item: Item, entry: RegisterEntry) -> str:
    match item:
        case Volumetric(nominal=nominal):
            return f"a class {entry.item_class} {_ml(nominal)} {item.kind}"
        case Cuvette() | Photometer() | Balance():
            return f"a {item.kind} of class \"{entry.item_class}\""


def class_candidates(method: Method, shares: Shares, entries: list[RegisterEntry]) -> list[Candidate]:
    out = []
    for item in method.items.values():
        if shares.equipment.get(item.id, 0.0) < MIN_SHARE:
            continue
        for entry in entries:
            if not _of_entry_kind(item, entry) or not _same_size(entry, item) or not _better(item, entry):
                continue
            what = _described(item, entry)
            out.append(Candidate(
                "better class", f"use {what} as `{item.id}` instead of class \"{item.item_class}\"",
                f"{what} instead of class \"{item.item_class}\"",
                f"tolerances from the register ({entry.source})",
                frozenset({f"item:{item.id}"}), _with_item(item_in_class(item, entry)),
                {"item": item.id, "class_before": item.item_class, "class_after": entry.item_class}))
    return out


def quantities_of(method: Method) -> dict[str, NamedQuantity]:
    match method:
        case AssayMethod(quantities=quantities):
            return quantities
        case EquilibriumMethod():
            return {}


def _uses(method: Method, item_id: str) -> list[Delivery]:
    """The solutions' and the assay quantities' deliveries by one item."""
    deliveries = [d for s in method.solutions.values() for d in deliveries_of(s)]
    deliveries += [q.delivery for q in quantities_of(method).values() if q.delivery is not None]
    return [d for d in deliveries if d.item == item_id]


def _as_one_mark_pipette(item: PistonPipette, entry: RegisterEntry) -> OneMarkPipette:
    assert entry.nominal is not None  # entries chosen by their nominal volume
    tolerance = entry.values["tolerance"]
    return OneMarkPipette(id=item.id, item_class=entry.item_class, nominal=entry.nominal, tolerance=tolerance,
                          repeatability=_repeatability_for(item, tolerance, entry), distribution=item.distribution,
                          provenance=f"{entry.source}; suggested by the advisor")


def piston_candidates(method: Method, shares: Shares, entries: list[RegisterEntry]) -> list[Candidate]:
    out = []
    for item in method.items.values():
        if not isinstance(item, PistonPipette) or shares.equipment.get(item.id, 0.0) < MIN_SHARE:
            continue
        volumes = {round(d.volume, 15) for d in _uses(method, item.id)}
        if len(volumes) != 1:
            continue  # used at several volumes: no single one-mark pipette replaces it
        volume = volumes.pop()
        choices = [e for e in entries if e.kind == OneMarkPipette.kind and e.nominal
                   and math.isclose(e.nominal, volume, rel_tol=1e-9)]
        if not choices:
            continue
        best = min(choices, key=lambda e: e.values["tolerance"])
        out.append(Candidate(
            "one-mark pipette",
            f"deliver the {_ml(volume)} of `{item.id}` with a class {best.item_class} one-mark pipette "
            f"instead of the piston pipette",
            f"a class {best.item_class} one-mark pipette of {_ml(volume)} (slower; one volume only)",
            f"tolerance from the register ({best.source})",
            frozenset({f"item:{item.id}"}), _with_item(_as_one_mark_pipette(item, best)),
            {"item": item.id, "volume_mL": round(volume / ML, 9)}))
    return out


def _relative_tolerance(item: Volumetric, volume: float) -> float:
    """Maximum permissible error of one delivery relative to the volume: the item's full
    tolerance applies to every delivery (see validate.metrology.equipment.volume_term)."""
    return item.tolerance / volume


def _glass(entries: list[RegisterEntry], kind: type[Volumetric], item_class: str) -> list[RegisterEntry]:
    return [e for e in entries if e.kind == kind.kind and e.item_class == item_class and e.nominal]


def _find_or_make(method: Method, entry: RegisterEntry, like: Volumetric,
                  cls: type[OneMarkPipette] | type[VolumetricFlask]) -> OneMarkPipette | VolumetricFlask:
    """An item of the method already of this kind, size and class (the laboratory has it), or a
    new one from the register, its repeatability by the loader's default ratio (no own data yet)."""
    for item in method.items.values():
        if isinstance(item, cls) and item.item_class == entry.item_class and _same_size(entry, item):
            return item
    assert entry.nominal is not None  # register glassware has a size
    tol = entry.values["tolerance"]
    return cls(id=f"{_ml(entry.nominal)} {entry.kind}, class {entry.item_class} (suggested)",
               item_class=entry.item_class, nominal=entry.nominal, tolerance=tol,
               repeatability=entry.values.get("repeatability", DEFAULT_REPEATABILITY_RATIO * tol),
               distribution=like.distribution, provenance=f"{entry.source}; suggested by the advisor")


def volume_pair_candidates(method: Method, shares: Shares, entries: list[RegisterEntry]) -> list[Candidate]:
    out = []
    for sol in method.solutions.values():
        match sol:
            case Diluted():
                candidate = _volume_pair(method, sol, shares, entries)
                if candidate is not None:
                    out.append(candidate)
    return out


def _volume_pair(method: Method, sol: Diluted, shares: Shares, entries: list[RegisterEntry]) -> Candidate | None:
    """Another one-mark pipette and flask of the same classes giving the same dilution factor (within
    the worst case of the present pair's tolerances) with a smaller relative tolerance."""
    pip, flask = method.items[sol.aliquot.item], method.item_of(sol.flask.item, VolumetricFlask)
    if not isinstance(pip, OneMarkPipette):
        return None
    relevant = max(shares.equipment.get(pip.id, 0.0), shares.equipment.get(flask.id, 0.0),
                   shares.step.get(f"prepare {sol.id}", 0.0))
    if relevant < MIN_SHARE:
        return None
    va, vf = sol.aliquot.volume, sol.flask.volume
    factor = va / vf
    # worst case of the two maximum permissible errors, relative: the stated tolerance of the factor
    factor_tol = _relative_tolerance(pip, va) + _relative_tolerance(flask, vf)
    rel_now = math.hypot(_relative_tolerance(pip, va), _relative_tolerance(flask, vf))
    best = _best_pair(entries, pip, flask, va, vf, factor_tol, rel_now)
    if best is None:
        return None
    rel, p, q = best
    assert p.nominal is not None and q.nominal is not None  # chosen by their nominal volumes

    def apply(m: Method) -> Method:
        new_p = _find_or_make(m, p, pip, OneMarkPipette)
        new_q = _find_or_make(m, q, flask, VolumetricFlask)
        s = _with_volumes(m.solutions[sol.id], Delivery(new_p.id, new_p.nominal), Delivery(new_q.id, new_q.nominal))
        return replace(m, items={**m.items, new_p.id: new_p, new_q.id: new_q}, solutions={**m.solutions, sol.id: s})

    return Candidate(
        "volume pair",
        f"make `{sol.id}` with {_ml(p.nominal)} into {_ml(q.nominal)} instead of "
        f"{_ml(va)} into {_ml(vf)} (same dilution factor)",
        f"a {_ml(p.nominal)} one-mark pipette and a {_ml(q.nominal)} flask; "
        f"{q.nominal / vf:g} times the volume of `{sol.id}` (reagent and waste)",
        f"tolerances from the register ({p.source}; {q.source})",
        frozenset({f"solution:{sol.id}", f"item:{pip.id}", f"item:{flask.id}"}), apply,
        {"solution": sol.id, "factor_before": factor, "factor_after": p.nominal / q.nominal,
         "factor_tolerance": factor_tol, "relative_tolerance_before": rel_now,
         "relative_tolerance_after": rel, "aliquot_mL": round(p.nominal / ML, 9),
         "flask_mL": round(q.nominal / ML, 9)})


def _with_volumes(sol: Solution, aliquot: Delivery, flask: Delivery) -> Solution:
    match sol:
        case Diluted():
            return replace(sol, aliquot=aliquot, flask=flask)
    raise TypeError(f"`{sol.id}` is not a dilution")


def _best_pair(entries: list[RegisterEntry], pip: OneMarkPipette, flask: VolumetricFlask, va: float, vf: float,
               factor_tol: float, rel_now: float) -> tuple[float, RegisterEntry, RegisterEntry] | None:
    """(relative tolerance, pipette entry, flask entry) of the best other pair; ties go to the smaller flask."""
    factor = va / vf
    best = None
    for p in _glass(entries, OneMarkPipette, pip.item_class):
        for q in _glass(entries, VolumetricFlask, flask.item_class):
            p_nominal, q_nominal = p.nominal or 0.0, q.nominal or 0.0  # _glass keeps sized entries only
            if p_nominal >= q_nominal or q_nominal > MAX_FLASK_GROWTH * vf * (1 + 1e-9):
                continue
            if math.isclose(p_nominal, va) and math.isclose(q_nominal, vf):
                continue
            if abs(p_nominal / q_nominal / factor - 1.0) > factor_tol:
                continue
            rel = math.hypot(p.values["tolerance"] / p_nominal, q.values["tolerance"] / q_nominal)
            if rel < rel_now and (best is None or (rel, q_nominal) < best[0]):
                best = ((rel, q_nominal), p, q)
    return None if best is None else (best[0][0], best[1], best[2])
