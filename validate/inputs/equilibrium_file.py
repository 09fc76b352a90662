"""The [equilibrium] section of a method file: a 1:1 complex-formation study.

    [equilibrium]
    metal = "nickel_stock"         # solution ids (from [solutions]) of the two reagents
    ligand = "ligand_stock"
    limiting = "ligand"            # the standards are short of this reagent, the other in excess
    correction = "iterate"         # correct the standards for incomplete complexation, or "none"
    temperature = "25 degC"        # conditions K refers to (recorded; used by the activity estimate)
    ionic_strength = "0.10 mol/L"
    charges = [2, -1]              # of M and L: enables the Davies activity estimate
    counter_ion_charges = [-2, 1]  # of the metal salt's and the ligand salt's counter-ions (sulfate,
                                   # sodium): with `charges`, the ionic strength of every solution
    medium_ionic_strength = "0.10 mol/L"  # background electrolyte every solution is made up in
    reaction_enthalpy = { value = "-20 kJ/mol", u = "5 kJ/mol" }  # optional: K moved by van 't Hoff
    k_unit = "L/mol"
    concentration_unit = "mmol/L"
    readings = "readings.csv"
    cuvette = "cell"
    photometer = "photometer"

    [equilibrium.standards.E1]     # aliquots of the reagents into a flask
    metal = "pipette_10"
    ligand = { item = "burette", volume = "1.00 mL" }
    flask = "flask_50"

    [equilibrium.mixtures.X1]      # the same form; read as an equilibrium mixture
    metal_from = "nickel_working"  # optional: a dilution of the reagent solution to take from

    [equilibrium.series.T]         # an addition series in one vessel
    start = { metal = "pipette_10" }
    add = "ligand"
    aliquot = { item = "piston_1000", volume = "500 µL" }
    additions = 6                  # readings T.1 ... T.6
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from validate.inputs.equipment_section import item_reference
from validate.inputs.errors import InputError
from validate.inputs.items import FLASKS, PIPETTES, Cuvette, Photometer
from validate.inputs.schema import (
    AMOUNT_CONCENTRATION,
    AdditionSeries,
    EquilibriumMix,
    EquilibriumStudy,
    concentration_dims,
)
from validate.inputs.solutions import Solution, parent_of
from validate.inputs.tables import Table, parse_delivery, parse_si, unit_of
from validate.inputs.units import Unit, parse_unit

REAGENTS = ("metal", "ligand")
MIN_STANDARDS = 3  # a line through the standards with a residual scatter


@dataclass(frozen=True)
class _Parts:
    """What the standards, mixtures and series are checked against."""

    items: dict
    solutions: dict[str, Solution]
    reagents: dict[str, str]  # "metal"/"ligand" -> the study's reagent solution


def parse_equilibrium(t: Table, items: dict, solutions: dict[str, Solution], defaults: list[str]) -> EquilibriumStudy:
    """The study; `items` and `solutions` are the method file's, already parsed."""
    t.allow("metal", "ligand", "limiting", "correction", "iterations", "temperature", "ionic_strength",
            "charges", "counter_ion_charges", "medium_ionic_strength", "reaction_enthalpy",
            "k_unit", "concentration_unit", "readings", "cuvette", "photometer",
            "standards", "mixtures", "series")
    parts = _Parts(items, solutions, {key: _reagent(t, key, solutions) for key in REAGENTS})
    limiting = t.choice("limiting", "ligand", REAGENTS, 'use "metal" or "ligand"')
    correction = t.choice("correction", "iterate", ("iterate", "none"),
                          'use "iterate" (correct the standards) or "none" (assume full complexation)')
    iterations = int(t.number("iterations", 12, low=0, high=1001))
    temperature = _temperature(t)
    ionic = _ionic_strength(t)
    charges = _charges(t)
    counter = _counter_charges(t, charges)
    medium = _ionic_strength(t, "medium_ionic_strength")
    enthalpy = _reaction_enthalpy(t, temperature)
    k_unit = _unit_or_default(t, "k_unit", (0, 3, -1, 0), "L/mol", "default: K reported in L/mol", defaults)
    conc_unit = _unit_or_default(t, "concentration_unit", AMOUNT_CONCENTRATION, "mmol/L",
                                 "default: equilibrium concentrations shown in mmol/L", defaults)
    if not t.has("correction"):
        defaults.append("default: standards corrected for incomplete complexation by iteration")
    standards = tuple(_mix(t, "standards", k, v, parts) for k, v in t.named_tables("standards").items())
    mixtures = tuple(_mix(t, "mixtures", k, v, parts) for k, v in t.named_tables("mixtures").items())
    series = tuple(_series(t, k, v, parts) for k, v in t.named_tables("series").items())
    _check_contents(t, standards, mixtures, series)
    cuvette = item_reference(t, "cuvette", items, Cuvette)
    photometer = item_reference(t, "photometer", items, Photometer)
    _refuse_shared_ids(t, standards, mixtures, series)
    return EquilibriumStudy(
        metal=parts.reagents["metal"], ligand=parts.reagents["ligand"], limiting=limiting, standards=standards,
        mixtures=mixtures, series=series, correction=correction, iterations=iterations,
        temperature_C=temperature, ionic_strength=ionic, charges=charges, k_unit=k_unit,
        concentration_unit=conc_unit, readings_file=t.required_text("readings"),
        cuvette=cuvette, photometer=photometer, counter_charges=counter, medium_ionic_strength=medium,
        reaction_enthalpy=enthalpy)


def _reagent(t: Table, key: str, solutions: dict[str, Solution]) -> str:
    """A reagent solution of the study: defined, and of an amount concentration."""
    sid = t.required_text(key)
    if sid not in solutions:
        raise t.error(f"unknown solution `{sid}`", key, fix=f"define [solutions.{sid}]")
    if concentration_dims(solutions, sid) != AMOUNT_CONCENTRATION:
        raise t.error(f"`{sid}` needs an amount concentration (mol/L): give its molar mass or a "
                      f"certificate in mol/L", key)
    return sid


def _temperature(t: Table) -> float | None:
    if not t.has("temperature"):
        return None
    raw = t.get("temperature")
    match = re.fullmatch(r"\s*([-+]?\d+(?:\.\d*)?)\s*(degC|°C|C)\s*", raw) if isinstance(raw, str) else None
    if not match:
        raise t.error(f"cannot read {raw!r}", "temperature", fix='write it as "25 degC"')
    value = float(match.group(1))
    if not 0 <= value <= 100:  # liquid water at ordinary pressure, and the range of the activity estimate
        raise t.error(f"{value:g} degC is outside 0 to 100 degC, where an aqueous study is made",
                      "temperature", fix='give the temperature of the solutions, e.g. "25 degC"')
    return value


# An aqueous medium holds at most a few mol/L of salt (saturated NaClO4 is near 10 mol/L,
# from memory); a larger ionic strength is a wrong unit or a typing error.
MAX_IONIC_STRENGTH = 10_000.0  # mol/m3 (10 mol/L)
MAX_CHARGE = 6  # |z| of a metal ion or ligand in a 1:1 study (Th4+, EDTA4- lie well inside)
MAX_ADDITIONS = 200  # readings of one addition series


def _ionic_strength(t: Table, key: str = "ionic_strength") -> float | None:
    if not t.has(key):
        return None
    ionic = parse_si(t.get(key), t, key, AMOUNT_CONCENTRATION, False)[0]
    if not 0 <= ionic <= MAX_IONIC_STRENGTH:
        raise t.error(f"an ionic strength of {ionic / 1e3:g} mol/L is not an aqueous medium's", key,
                      fix=f"give it in mol/L, between 0 and {MAX_IONIC_STRENGTH / 1e3:g} mol/L")
    return ionic


def _counter_charges(t: Table, charges: tuple[int, int] | None) -> tuple[int, int] | None:
    """The charges of the counter-ions of the metal salt and of the ligand salt: each of the
    opposite sign to its ion (0 for a neutral reagent, which has none)."""
    raw = t.get("counter_ion_charges")
    if raw is None:
        return None
    key = "counter_ion_charges"
    if charges is None:
        raise t.error("counter-ion charges need the charges of M and L", key, fix="add `charges = [2, -1]`")
    if not (isinstance(raw, list) and len(raw) == 2 and all(isinstance(c, int) and not isinstance(c, bool)
                                                            for c in raw)):
        raise t.error("expected two whole numbers, the counter-ions' charges of the metal and ligand salts",
                      key, fix="e.g. [-2, 1] for a metal sulfate and a sodium salt of the ligand")
    for name, z, zc in (("metal", charges[0], raw[0]), ("ligand", charges[1], raw[1])):
        if abs(zc) > MAX_CHARGE or (z == 0) != (zc == 0) or z * zc > 0:
            raise t.error(f"the {name} salt's counter-ion charge {zc} does not balance an ion of charge {z}", key,
                          fix="give a counter-ion of the opposite sign (0 for a neutral reagent)")
    return raw[0], raw[1]


ENTHALPY_UNITS = {"J/mol": 1.0, "kJ/mol": 1e3}
MAX_ENTHALPY = 500e3  # J/mol: beyond any complex-formation enthalpy in water (from memory, |dH| < 200 kJ/mol)


def _reaction_enthalpy(t: Table, temperature: float | None) -> tuple[float, float] | None:
    """{ value = "-20 kJ/mol", u = "5 kJ/mol" } -> (dH, u(dH)) in J/mol."""
    raw = t.get("reaction_enthalpy")
    if raw is None:
        return None
    key = "reaction_enthalpy"
    fix = 'write it as { value = "-20 kJ/mol", u = "5 kJ/mol" } (u: its standard uncertainty)'
    if temperature is None:
        raise t.error("a reaction enthalpy needs the temperature K refers to", key, fix='add temperature = "25 degC"')
    if not (isinstance(raw, dict) and set(raw) == {"value", "u"}):
        raise t.error("expected a value and its standard uncertainty", key, fix=fix)
    value, u = (_enthalpy(t, raw[k], fix) for k in ("value", "u"))
    if not (abs(value) <= MAX_ENTHALPY and 0 <= u <= MAX_ENTHALPY):
        raise t.error(f"{value / 1e3:g} +/- {u / 1e3:g} kJ/mol is not a reaction enthalpy of a complex in water",
                      key, fix=fix)
    return value, u


def _enthalpy(t: Table, raw, fix: str) -> float:
    match = re.fullmatch(r"\s*([-+]?\d+(?:\.\d*)?(?:[eE][-+]?\d+)?)\s*(kJ/mol|J/mol)\s*", raw) \
        if isinstance(raw, str) else None
    if not match:
        raise t.error(f"cannot read {raw!r} as an energy per mole", "reaction_enthalpy", fix=fix)
    return float(match.group(1)) * ENTHALPY_UNITS[match.group(2)]


def _charges(t: Table) -> tuple[int, int] | None:
    charges = t.get("charges")
    if charges is None:
        return None
    if not (isinstance(charges, list) and len(charges) == 2 and all(isinstance(c, int) for c in charges)):
        raise t.error("expected two whole numbers, the charges of M and L", "charges", fix="e.g. [2, -1]")
    if any(abs(c) > MAX_CHARGE for c in charges):
        raise t.error(f"a charge of {max(charges, key=abs)} is beyond +/-{MAX_CHARGE}", "charges",
                      fix="give the charges of the metal ion and the ligand, e.g. [2, -1]")
    return charges[0], charges[1]


def _unit_or_default(t: Table, key: str, dims: tuple[int, ...], default: str, note: str,
                     defaults: list[str]) -> Unit:
    if t.has(key):
        return unit_of(t, key, dims)
    defaults.append(note)
    return parse_unit(default)


def _solutions_for(table: Table, parts: _Parts) -> dict[str, str]:
    """Which solution each reagent comes from: the study's, unless `metal_from`/`ligand_from` say."""
    chosen = {}
    for r in REAGENTS:
        root = parts.reagents[r]
        sid = table.text(f"{r}_from", root)
        if sid is None or sid not in parts.solutions:
            raise table.error(f"unknown solution `{sid}`", f"{r}_from")
        if not _same_reagent(parts.solutions, sid, root):
            raise table.error(f"`{sid}` is not made from `{root}`", f"{r}_from",
                              fix=f"use `{root}` or a dilution of it")
        chosen[r] = sid
    return chosen


def _mix(t: Table, kind: str, mix_id: str, raw, parts: _Parts) -> EquilibriumMix:
    """A standard or mixture: aliquots of the reagents made up in a flask."""
    m = Table(raw, t.file, f"[equilibrium.{kind}.{mix_id}]")
    m.allow("metal", "ligand", "flask", "metal_from", "ligand_from")
    delivered = {r: parse_delivery(m.get(r), m, r, parts.items, PIPETTES) for r in REAGENTS if m.has(r)}
    if not delivered:
        raise m.error("no reagent delivered", fix="give `metal` and/or `ligand` deliveries")
    flask = parse_delivery(m.require("flask"), m, "flask", parts.items, FLASKS)
    if sum(d.volume for d in delivered.values()) >= flask.volume:
        raise m.error("the aliquots fill the flask or more", "flask", fix="check the volumes")
    return EquilibriumMix(mix_id, delivered, flask, _solutions_for(m, parts))


def _series(t: Table, series_id: str, raw, parts: _Parts) -> AdditionSeries:
    """Aliquots of one reagent added one after another to a vessel, read after each."""
    st = Table(raw, t.file, f"[equilibrium.series.{series_id}]")
    st.allow("start", "add", "aliquot", "additions", "metal_from", "ligand_from")
    start_raw = Table(st.require("start"), t.file, f"[equilibrium.series.{series_id}].start")
    start_raw.allow(*REAGENTS)
    start = {r: parse_delivery(start_raw.get(r), start_raw, r, parts.items, PIPETTES) for r in REAGENTS
             if start_raw.has(r)}
    added = st.required_text("add")
    if added not in REAGENTS:
        raise st.error(f"unknown reagent {added!r}", "add", fix='use "metal" or "ligand"')
    additions = st.number("additions", low=0, high=MAX_ADDITIONS + 1)
    if additions is None or additions != int(additions):
        raise st.error("give the number of additions as a whole number", "additions")
    aliquot = parse_delivery(st.require("aliquot"), st, "aliquot", parts.items, PIPETTES)
    return AdditionSeries(series_id, start, added, aliquot, int(additions), _solutions_for(st, parts))


def _check_contents(t: Table, standards, mixtures, series) -> None:
    if len(standards) < MIN_STANDARDS:
        raise t.error(f"{len(standards)} standards; at least 3 are needed for a line", "standards")
    if not mixtures and not series:
        raise t.error("no mixtures and no addition series: nothing to determine K from",
                      fix="add [equilibrium.mixtures.ID] or [equilibrium.series.ID]")


def _refuse_shared_ids(t: Table, standards, mixtures, series) -> None:
    ids = [m.id for m in standards + mixtures] + [r for s in series for r in s.reading_ids()]
    clashes = sorted({i for i in ids if ids.count(i) > 1})
    if clashes:
        raise t.error(f"ids used twice: {', '.join(clashes)}", fix="give every standard, mixture and series its own id")


def _same_reagent(solutions: dict[str, Solution], sid: str, root: str) -> bool:
    """True when `sid` is `root` or made from it by dilution."""
    current: str | None = sid
    while current is not None:
        if current == root:
            return True
        current = parent_of(solutions[current])
    return False


def check_equilibrium_readings(study: EquilibriumStudy, readings: dict, path) -> None:
    for ident in [m.id for m in study.standards] + study.point_ids():
        if ident not in readings:
            raise InputError(f"no readings for `{ident}`", file=path,
                             fix=f"add rows `{ident},<absorbance>` to the readings table")
