"""The [equilibrium] section of a method file: a 1:1 complex-formation study.

    [equilibrium]
    metal = "nickel_stock"         # solution ids (from [solutions]) of the two reagents
    ligand = "ligand_stock"
    limiting = "ligand"            # the standards are short of this reagent, the other in excess
    correction = "iterate"         # correct the standards for incomplete complexation, or "none"
    temperature = "25 degC"        # conditions K refers to (recorded; used by the activity estimate)
    ionic_strength = "0.10 mol/L"
    charges = [2, -1]              # of M and L: enables the Davies activity estimate
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

from validate.inputs import schema as S
from validate.inputs.errors import InputError
from validate.inputs.tables import Table, parse_si, unit_of
from validate.inputs.tables import parse_delivery as _delivery

REAGENTS = ("metal", "ligand")
_PIPETTES = ("one-mark pipette", "graduated pipette", "piston pipette", "burette")


def parse_equilibrium(t: Table, method_like, defaults: list[str]) -> S.EquilibriumStudy:
    """`method_like` gives `items` and `solutions` (already parsed)."""

    t.allow("metal", "ligand", "limiting", "correction", "iterations", "temperature", "ionic_strength",
            "charges", "k_unit", "concentration_unit", "readings", "cuvette", "photometer",
            "standards", "mixtures", "series")
    items, solutions = method_like.items, method_like.solutions
    reagents = {}
    for key in REAGENTS:
        sid = t.text(key, required=True)
        if sid not in solutions:
            raise t.error(f"unknown solution `{sid}`", key, fix=f"define [solutions.{sid}]")
        if method_like.concentration_dims(sid) != (0, -3, 1, 0):
            raise t.error(f"`{sid}` needs an amount concentration (mol/L): give its molar mass or a "
                          f"certificate in mol/L", key)
        reagents[key] = sid
    limiting = t.text("limiting", "ligand")
    if limiting not in REAGENTS:
        raise t.error(f"unknown choice {limiting!r}", "limiting", fix='use "metal" or "ligand"')
    correction = t.text("correction", "iterate")
    if correction not in ("iterate", "none"):
        raise t.error(f"unknown choice {correction!r}", "correction",
                      fix='use "iterate" (correct the standards) or "none" (assume full complexation)')
    iterations = int(t.number("iterations", 12, low=0, high=1001))
    temperature = None
    if t.has("temperature"):
        raw = t.get("temperature")
        match = re.fullmatch(r"\s*([-+]?\d+(?:\.\d*)?)\s*(degC|°C|C)\s*", raw) if isinstance(raw, str) else None
        if not match:
            raise t.error(f"cannot read {raw!r}", "temperature", fix='write it as "25 degC"')
        temperature = float(match.group(1))
    ionic = parse_si(t.get("ionic_strength"), t, "ionic_strength", (0, -3, 1, 0), False)[0] \
        if t.has("ionic_strength") else None
    charges = t.get("charges")
    if charges is not None:
        if not (isinstance(charges, list) and len(charges) == 2 and all(isinstance(c, int) for c in charges)):
            raise t.error("expected two whole numbers, the charges of M and L", "charges", fix="e.g. [2, -1]")
        charges = (charges[0], charges[1])
    k_unit = unit_of(t, "k_unit", (0, 3, -1, 0)) if t.has("k_unit") else None
    conc_unit = unit_of(t, "concentration_unit", (0, -3, 1, 0)) if t.has("concentration_unit") else None
    if k_unit is None:
        from validate.inputs.units import parse_unit
        k_unit = parse_unit("L/mol")
        defaults.append("default: K reported in L/mol")
    if conc_unit is None:
        from validate.inputs.units import parse_unit
        conc_unit = parse_unit("mmol/L")
        defaults.append("default: equilibrium concentrations shown in mmol/L")
    if not t.has("correction"):
        defaults.append("default: standards corrected for incomplete complexation by iteration")

    def solutions_for(table: Table) -> dict:
        """Which solution each reagent comes from: the study's, unless `metal_from`/`ligand_from` say."""
        chosen = {}
        for r in REAGENTS:
            sid = table.text(f"{r}_from", reagents[r])
            if sid not in solutions:
                raise table.error(f"unknown solution `{sid}`", f"{r}_from")
            if not _same_reagent(solutions, sid, reagents[r]):
                raise table.error(f"`{sid}` is not made from `{reagents[r]}`", f"{r}_from",
                                  fix=f"use `{reagents[r]}` or a dilution of it")
            chosen[r] = sid
        return chosen

    def mix(kind: str, mix_id: str, raw) -> S.EquilibriumMix:
        m = Table(raw, t.file, f"[equilibrium.{kind}.{mix_id}]")
        m.allow("metal", "ligand", "flask", "metal_from", "ligand_from")
        parts = {r: _delivery(m.get(r), m, r, items, _PIPETTES) for r in REAGENTS if m.has(r)}
        if not parts:
            raise m.error("no reagent delivered", fix="give `metal` and/or `ligand` deliveries")
        flask = _delivery(m.require("flask"), m, "flask", items, ("volumetric flask",))
        if sum(d.volume for d in parts.values()) >= flask.volume:
            raise m.error("the aliquots fill the flask or more", "flask", fix="check the volumes")
        return S.EquilibriumMix(mix_id, parts, flask, solutions_for(m))

    standards = tuple(mix("standards", k, v) for k, v in (t.get("standards") or {}).items())
    mixtures = tuple(mix("mixtures", k, v) for k, v in (t.get("mixtures") or {}).items())
    series = []
    for sid, raw in (t.get("series") or {}).items():
        st = Table(raw, t.file, f"[equilibrium.series.{sid}]")
        st.allow("start", "add", "aliquot", "additions", "metal_from", "ligand_from")
        start_raw = Table(st.require("start"), t.file, f"[equilibrium.series.{sid}].start")
        start_raw.allow(*REAGENTS)
        start = {r: _delivery(start_raw.get(r), start_raw, r, items, _PIPETTES) for r in REAGENTS
                 if start_raw.has(r)}
        added = st.text("add", required=True)
        if added not in REAGENTS:
            raise st.error(f"unknown reagent {added!r}", "add", fix='use "metal" or "ligand"')
        additions = st.number("additions", low=0)
        if additions is None or additions != int(additions):
            raise st.error("give the number of additions as a whole number", "additions")
        series.append(S.AdditionSeries(sid, start, added, _delivery(st.require("aliquot"), st, "aliquot",
                                                                     items, _PIPETTES), int(additions),
                                       solutions_for(st)))
    if len(standards) < 3:
        raise t.error(f"{len(standards)} standards; at least 3 are needed for a line", "standards")
    if not mixtures and not series:
        raise t.error("no mixtures and no addition series: nothing to determine K from",
                      fix="add [equilibrium.mixtures.ID] or [equilibrium.series.ID]")
    refs = {}
    for key, kind in (("cuvette", "cuvette"), ("photometer", "photometer")):
        ref = t.text(key)
        if ref is not None and (ref not in items or items[ref].kind != kind):
            raise t.error(f"`{ref}` is not a {kind} defined under [equipment]", key)
        refs[key] = ref
    ids = [m.id for m in standards + mixtures] + [r for s in series for r in s.reading_ids()]
    clashes = sorted({i for i in ids if ids.count(i) > 1})
    if clashes:
        raise t.error(f"ids used twice: {', '.join(clashes)}", fix="give every standard, mixture and series its own id")
    return S.EquilibriumStudy(
        metal=reagents["metal"], ligand=reagents["ligand"], limiting=limiting, standards=standards,
        mixtures=mixtures, series=tuple(series), correction=correction, iterations=iterations,
        temperature_C=temperature, ionic_strength=ionic, charges=charges, k_unit=k_unit,
        concentration_unit=conc_unit, readings_file=t.text("readings", required=True),
        cuvette=refs["cuvette"], photometer=refs["photometer"])


def _same_reagent(solutions, sid: str, root: str) -> bool:
    """True when `sid` is `root` or made from it by dilution."""
    while True:
        if sid == root:
            return True
        sol = solutions[sid]
        if sol.made_by != "dilution":
            return False
        sid = sol.parent


def check_equilibrium_readings(study: S.EquilibriumStudy, readings: dict, path) -> None:
    for ident in [m.id for m in study.standards] + study.point_ids():
        if ident not in readings:
            raise InputError(f"no readings for `{ident}`", file=path,
                             fix=f"add rows `{ident},<absorbance>` to the readings table")
