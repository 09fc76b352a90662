"""Read a method file (TOML) and its readings table into a validated `Method`.

Every problem becomes an `InputError` naming the file, the key and the fix;
every default applied is listed in `Method.defaults_shown`.
"""

from __future__ import annotations

import difflib
import tomllib
from pathlib import Path

from validate.inputs import schema as S
from validate.inputs.consistency import check_ids
from validate.inputs.errors import InputError
from validate.inputs.formula import FormulaError, parse_formula, result_dimension
from validate.inputs.readings import load_reading_series, load_readings, read_text_file
from validate.inputs.registers import classes_for, find_entry, load_registers
from validate.inputs.tables import Table, parse_uncertain, unit_of
from validate.inputs.tables import parse_delivery as _delivery
from validate.inputs.units import describe_dims
from validate.inputs.validation_settings import parse_validation

VOLUME = (0, 3, 0, 0)
MASS = (1, 0, 0, 0)
LENGTH = (0, 1, 0, 0)
NONE = (0, 0, 0, 0)
TOP_KEYS = ("method", "settings", "equipment", "solutions", "calibration", "samples",
            "quantities", "result", "validation", "acceptance", "equilibrium")
RESERVED = {"c_measured"}


def load_method(path) -> S.Method:
    path = Path(path)
    text = read_text_file(path, "method file")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"TOML syntax error: {exc}", file=path,
                         fix="correct the line and column named (quotes around text and units, "
                             "one key = value per line)") from None
    top = Table(data, path, "top level")
    top.allow(*TOP_KEYS)
    defaults: list[str] = []
    notes: list[str] = []
    info = Table(top.get("method", {}), path, "[method]")
    info.allow("title", "measurand", "scope")
    settings = _settings(Table(top.get("settings", {}), path, "[settings]"), defaults)
    extra = [(path.parent / r) for r in settings.registers]
    entries, register_files = load_registers(extra)
    items = {}
    for item_id, raw in top.named_tables("equipment").items():
        items[item_id] = _item(item_id, Table(raw, path, f"[equipment.{item_id}]"), entries, settings, defaults)
    repeat = [u for item in items.values() for u in item.defaults_used if u.endswith(" mL")]
    if repeat:
        defaults.append("repeatability per use of glassware set to 0.2 x its tolerance (a default of this "
                        "tool, after the ratio in EURACHEM/CITAC CG4 Example A1; give `repeatability` from "
                        "your own data): " + ", ".join(repeat))
    solutions = {}
    for sol_id, raw in top.named_tables("solutions").items():
        solutions[sol_id] = _solution(sol_id, Table(raw, path, f"[solutions.{sol_id}]"), items)
    _check_solution_graph(solutions, path)
    calibration, readings_path = None, None
    if top.has("calibration"):
        calibration = _calibration(top.sub("calibration"), items, solutions, defaults)
        readings_path = path.parent / calibration.readings_file
    samples = tuple(S.Sample(sid, Table(raw, path, f"[samples.{sid}]").text("description", "") or "")
                    for sid, raw in top.named_tables("samples").items())
    for sid, raw in top.named_tables("samples").items():
        Table(raw, path, f"[samples.{sid}]").allow("description")
    quantities = {name: _quantity(name, Table(raw, path, f"[quantities.{name}]"), items)
                  for name, raw in top.named_tables("quantities").items()}
    check_ids(samples, solutions, quantities, path)
    readings, series = {}, {}
    if readings_path is not None:
        readings = load_readings(readings_path)
        series = load_reading_series(readings_path)
        _check_readings(readings, calibration, samples, solutions, readings_path, notes)
    equilibrium, eq_readings_path = None, None
    if top.has("equilibrium"):
        from validate.inputs.equilibrium_file import check_equilibrium_readings, parse_equilibrium
        partial = S.Method(path=str(path), title="", measurand="", scope="", settings=settings, items=items,
                           solutions=solutions, calibration=calibration, samples=samples,
                           quantities=quantities, result=None)
        equilibrium = parse_equilibrium(top.sub("equilibrium"), partial, defaults)
        eq_readings_path = path.parent / equilibrium.readings_file
        if eq_readings_path != readings_path:
            readings = {**readings, **load_readings(eq_readings_path)}
        check_equilibrium_readings(equilibrium, readings, eq_readings_path)
    method = S.Method(
        path=str(path), title=info.text("title", path.stem) or path.stem,
        measurand=info.text("measurand", "") or "", scope=info.text("scope", "") or "",
        settings=settings, items=items, solutions=solutions, calibration=calibration,
        samples=samples, quantities=quantities, result=None, readings=readings, reading_series=series,
        input_files=tuple(dict.fromkeys(str(p) for p in [path, readings_path, eq_readings_path, *extra]
                                        if p is not None)),
        defaults_shown=tuple(defaults), notes=tuple(notes),
        registers_used=tuple(register_files), equilibrium=equilibrium,
    )
    if equilibrium is not None and (top.has("result") or calibration is not None):
        raise InputError("a method file holds either an assay ([calibration] and [result]) or an "
                         "equilibrium study ([equilibrium]), not both", file=path,
                         fix="put the two in separate method files")
    result = _result(top, method) if equilibrium is None else None
    validation = parse_validation(top, method, result, defaults) if result is not None else S.ValidationSettings()
    return S.Method(**{**method.__dict__, "result": result, "validation": validation,
                       "defaults_shown": tuple(defaults)})


def _settings(t: Table, defaults: list[str]) -> S.Settings:
    t.allow("coverage_probability", "scatter", "glassware_distribution", "temperature_range",
            "expansion_coefficient", "shared_temperature", "registers")
    base = S.Settings()
    p = t.number("coverage_probability", base.coverage_probability, low=0, high=1)
    scatter = t.text("scatter", base.scatter)
    if scatter not in ("observed", "bottom-up"):
        raise t.error(f"unknown choice {scatter!r}", "scatter", fix='use "observed" or "bottom-up"')
    dist = t.text("glassware_distribution", base.glassware_distribution)
    if dist not in ("triangular", "rectangular"):
        raise t.error(f"unknown choice {dist!r}", "glassware_distribution",
                      fix='use "triangular" (EURACHEM/CITAC CG4) or "rectangular" (GUM 4.3.7)')
    temp = base.temperature_range
    if t.has("temperature_range"):
        temp = parse_uncertain(t.get("temperature_range"), t, "temperature_range", (0, 0, 0, 1), False).value
        if not 0 <= temp <= 50:  # a half-width about 20 degC; aqueous volumetric work stays well inside
            raise t.error(f"a temperature range of +/-{temp:g} K is not a laboratory's", "temperature_range",
                          fix='give the half-width of the laboratory\'s temperature about 20 degC, e.g. "3 K"')
    alpha = t.number("expansion_coefficient", base.expansion_coefficient, low=0, high=0.01)  # per K; liquids ~1e-3
    shared = t.get("shared_temperature", base.shared_temperature)
    if not isinstance(shared, bool):
        raise t.error("expected true or false", "shared_temperature", fix="write true or false without quotes")
    registers = t.get("registers", [])
    if not isinstance(registers, list) or not all(isinstance(r, str) for r in registers):
        raise t.error("expected a list of file names", "registers", fix='e.g. registers = ["our_lab.toml"]')
    for key, value, text in (
        ("coverage_probability", p, f"coverage probability {p}"),
        ("scatter", scatter, f"calibration scatter treatment: {scatter}"),
        ("glassware_distribution", dist, f"glassware tolerances read as {dist} distributions"),
        ("temperature_range", temp, f"laboratory temperature within +/-{temp:g} K of 20 degC (rectangular)"),
        ("expansion_coefficient", alpha, f"volume expansion of the solutions {alpha:g} per K (water)"),
        ("shared_temperature", shared, "one temperature deviation shared by every volumetric step"
         if shared else "an independent temperature deviation for each volumetric step"),
    ):
        if not t.has(key):
            defaults.append(f"default: {text}")
    return S.Settings(p, scatter, dist, temp, alpha, shared, tuple(registers))


_ITEM_KEYS = ("kind", "class", "nominal", "tolerance", "repeatability", "distribution", "reading",
              "path", "offset", "noise", "linearity", "provenance")


def _item(item_id: str, t: Table, entries, settings: S.Settings, defaults: list[str]) -> S.Item:
    t.allow(*_ITEM_KEYS)
    kind = t.text("kind", required=True)
    if kind not in S.EQUIPMENT_KINDS:
        raise t.error(f"unknown kind {kind!r}", "kind", fix=f"use one of: {', '.join(S.EQUIPMENT_KINDS)}")
    item_class = str(t.get("class", "own data"))
    nominal = None
    if kind in S.VOLUMETRIC_KINDS:
        nominal = t.quantity("nominal", VOLUME)[0]
    own = {k: t.get(k) for k in ("tolerance", "repeatability", "reading", "path", "offset", "noise",
                                 "linearity") if t.has(k)}
    entry = find_entry(entries, kind, item_class, nominal) if "class" in t.data else None
    if "class" in t.data and entry is None:
        known = classes_for(entries, kind, nominal)
        size = f" of {t.get('nominal')}" if nominal else ""
        fix = (f"classes the registers hold for a {kind}{size}: {', '.join(known)}" if known else
               f"the registers hold no {kind}{size}; give `tolerance` (and `repeatability`) from your "
               f"own calibration data, or add a register of your own")
        raise t.error(f"class {item_class!r} is not in any register for a {kind}{size}", "class", fix=fix)
    if entry is None and not own:
        raise t.error(f"no `class` and no values of your own for {kind} `{item_id}`",
                      fix="give a `class` found in a register, or your own `tolerance` (volumetric "
                          "items), `path` and `tolerance` (cuvettes), `offset` and `noise` "
                          "(photometers), `linearity` and `repeatability` (balances)")
    values = dict(entry.values) if entry else {}
    dims = {"tolerance": VOLUME if kind in S.VOLUMETRIC_KINDS else (LENGTH if kind == "cuvette" else MASS),
            "repeatability": VOLUME if kind in S.VOLUMETRIC_KINDS else MASS, "reading": VOLUME,
            "path": LENGTH, "offset": NONE, "noise": NONE, "linearity": MASS}
    for key in own:
        values[key] = t.quantity(key, dims[key], positive=key == "path")[0]
        if values[key] < 0:
            raise t.error("the value cannot be negative", key, fix="give its size, zero or more")
    provenance = t.text("provenance", "") or (entry.source if entry and not own else
                                              "method file (laboratory's own data)" if not entry
                                              else f"{entry.source}; overridden in the method file")
    used: list[str] = []
    if kind in S.VOLUMETRIC_KINDS:
        if "tolerance" not in values:
            raise t.error("no tolerance for this item", "tolerance", fix="give `tolerance` or a `class`")
        if "repeatability" not in values:
            values["repeatability"] = 0.2 * values["tolerance"]
            used.append(f"{item_id} {values['repeatability'] * 1e6:.4g} mL")
        if kind == "burette" and "reading" not in values:
            sub = values.get("subdivision", values["tolerance"])
            values["reading"] = sub / 2.0
            used.append(f"{item_id}: each burette reading within +/- half a subdivision "
                        f"({values['reading'] * 1e6:.3g} mL, rectangular; default of this tool)")
    if kind == "cuvette" and "path" not in values:
        raise t.error("a cuvette needs its `path` length", "path", fix='e.g. path = "10 mm"')
    if kind == "photometer":
        values.setdefault("offset", 0.0)
        values.setdefault("noise", 0.0)
    dist = t.text("distribution", settings.glassware_distribution if kind in S.VOLUMETRIC_KINDS else "rectangular")
    if dist not in ("triangular", "rectangular"):
        raise t.error(f"unknown choice {dist!r}", "distribution", fix='use "triangular" or "rectangular"')
    defaults.extend(u for u in used if not u.endswith(" mL"))
    return S.Item(id=item_id, kind=kind, item_class=item_class, nominal=nominal,
                  tolerance=values.get("tolerance", 0.0), repeatability=values.get("repeatability", 0.0),
                  distribution=dist, reading=values.get("reading", 0.0), path=values.get("path"),
                  offset=values.get("offset", 0.0), noise=values.get("noise", 0.0),
                  linearity=values.get("linearity", 0.0), provenance=provenance,
                  defaults_used=tuple(used))


_PIPETTES = ("one-mark pipette", "graduated pipette", "piston pipette", "burette")


def _solution(sol_id: str, t: Table, items) -> S.Solution:
    made_by = t.text("made_by", required=True)
    if made_by not in S.SOLUTION_ORIGINS:
        raise t.error(f"unknown choice {made_by!r}", "made_by", fix=f"use one of: {', '.join(S.SOLUTION_ORIGINS)}")
    description = t.text("description", "") or ""
    if made_by == "blank":
        t.allow("made_by", "description")
        return S.Solution(sol_id, made_by, description=description)
    if made_by == "certificate":
        t.allow("made_by", "description", "concentration")
        conc = t.uncertain("concentration")
        if conc.unit.dims not in ((1, -3, 0, 0), (0, -3, 1, 0)):
            raise t.error("a concentration needs a unit of mass or amount per volume", "concentration",
                          fix='e.g. concentration = { value = "1000 mg/L", expanded_uncertainty = "2 mg/L", '
                              'coverage_factor = 2 }')
        return S.Solution(sol_id, made_by, concentration=conc, description=description)
    flask = _delivery(t.require("flask"), t, "flask", items, ("volumetric flask",))
    if made_by == "weighing":
        t.allow("made_by", "description", "mass", "balance", "purity", "molar_mass", "flask")
        balance = t.text("balance")
        if balance is not None and (balance not in items or items[balance].kind != "balance"):
            raise t.error(f"`{balance}` is not a balance defined under [equipment]", "balance",
                          fix=f'define [equipment.{balance}] with kind = "balance", or name another')
        purity = t.uncertain("purity", NONE) if t.has("purity") else None
        if purity is not None and purity.value > 1.0 + 1e-12:
            raise t.error("a purity cannot exceed 100 %", "purity", fix="give the purity stated on the certificate")
        molar = t.uncertain("molar_mass", (1, 0, -1, 0)) if t.has("molar_mass") else None
        return S.Solution(sol_id, made_by, mass=t.uncertain("mass", MASS), balance=balance,
                          purity=purity, molar_mass=molar, flask=flask, description=description)
    t.allow("made_by", "description", "from", "aliquot", "flask")
    aliquot = _delivery(t.require("aliquot"), t, "aliquot", items, _PIPETTES)
    if aliquot.volume >= flask.volume:
        raise t.error("the aliquot is as large as or larger than the flask it goes into", "aliquot",
                      fix="check the aliquot and flask volumes")
    return S.Solution(sol_id, made_by, parent=t.text("from", required=True), aliquot=aliquot,
                      flask=flask, description=description)


def _check_solution_graph(solutions: dict, path) -> None:
    for sol in solutions.values():
        if sol.made_by == "dilution" and sol.parent not in solutions:
            raise InputError(f"unknown solution `{sol.parent}`", file=path, where=f"[solutions.{sol.id}].from",
                             fix=f"use one of: {', '.join(s for s in solutions if s != sol.id)}")
    for sol in solutions.values():
        seen, current = [sol.id], sol
        while current.made_by == "dilution":
            current = solutions[current.parent]
            if current.id in seen:
                raise InputError(f"the preparation of `{sol.id}` refers back to itself "
                                 f"({' -> '.join(seen + [current.id])})", file=path,
                                 where=f"[solutions.{sol.id}].from", fix="break the circle")
            seen.append(current.id)


def _calibration(t: Table, items, solutions, defaults) -> S.Calibration:
    t.allow("standards", "blanks", "blanks_in_fit", "readings", "cuvette", "photometer",
            "concentration_unit", "weighting")
    weighting = t.text("weighting", "none")
    if weighting not in ("none", "inverse-variance"):
        raise t.error(f"unknown choice {weighting!r}", "weighting",
                      fix='use "none" (ordinary least squares) or "inverse-variance" (weights 1/s^2 from '
                          'the replicate readings of each level)')
    if not t.has("weighting"):
        defaults.append("default: unweighted (ordinary least-squares) calibration line")
    standards = t.require("standards")
    blanks = t.get("blanks", [])
    for key, ids in (("standards", standards), ("blanks", blanks)):
        if not isinstance(ids, list) or not all(isinstance(i, str) for i in ids):
            raise t.error("expected a list of solution ids", key, fix='e.g. standards = ["S1", "S2", "S3"]')
        for sid in ids:
            if sid not in solutions:
                raise t.error(f"unknown solution `{sid}`", key, fix=f"define [solutions.{sid}]")
        if len(set(ids)) != len(ids):
            raise t.error("an id is listed twice", key, fix="list each solution once")
    for sid in blanks:
        if solutions[sid].made_by != "blank":
            raise t.error(f"`{sid}` is listed as a blank but is made by {solutions[sid].made_by}", "blanks",
                          fix=f'list `{sid}` under `standards`, or make it with made_by = "blank"')
    unit = unit_of(t, "concentration_unit")
    if unit.dims not in ((1, -3, 0, 0), (0, -3, 1, 0)):
        raise t.error("a concentration unit is needed (e.g. mg/L or µmol/L)", "concentration_unit",
                      fix='e.g. concentration_unit = "µmol/L"')
    in_fit = t.get("blanks_in_fit", True)
    if not isinstance(in_fit, bool):
        raise t.error("expected true or false", "blanks_in_fit", fix="write true or false without quotes")
    if blanks and not t.has("blanks_in_fit"):
        defaults.append("default: blanks enter the calibration fit as zero-concentration points")
    refs = {}
    for key, kind in (("cuvette", "cuvette"), ("photometer", "photometer")):
        ref = t.text(key)
        if ref is not None and (ref not in items or items[ref].kind != kind):
            raise t.error(f"`{ref}` is not a {kind} defined under [equipment]", key,
                          fix=f'define [equipment.{ref}] with kind = "{kind}", or name another')
        refs[key] = ref
    readings = t.text("readings", required=True)
    n_points = len(standards) + (len(blanks) if in_fit else 0)
    if n_points < 3:
        raise t.error(f"only {n_points} calibration levels; at least 3 are needed", "standards",
                      fix="add standards (5 to 7 levels is common practice)")
    return S.Calibration(tuple(standards), tuple(blanks), in_fit, readings, refs["cuvette"],
                         refs["photometer"], unit, weighting)


def _quantity(name: str, t: Table, items) -> S.NamedQuantity:
    if not name.isidentifier() or name in RESERVED:
        raise t.error(f"`{name}` cannot name a quantity",
                      fix="use letters, digits and _ (not starting with a digit); c_measured is reserved")
    step = ""
    if t.has("item"):
        t.allow("item", "volume", "step")
        raw = {"item": t.get("item"), **({"volume": t.get("volume")} if t.has("volume") else {})}
        delivery = _delivery(raw, Table({"q": raw}, t.file, t.where), "q", items, S.VOLUMETRIC_KINDS)
        return S.NamedQuantity(name, delivery=delivery, step=t.text("step", "") or f"sample preparation ({name})")
    data = dict(t.data)
    step = data.pop("step", "") or f"input quantity {name}"
    value = parse_uncertain(data, Table({name: data}, t.file, "[quantities]"), name, None, positive=False)
    return S.NamedQuantity(name, value=value, step=step)


def _check_readings(readings, calibration, samples, solutions, path, notes) -> None:
    needed = list(calibration.standards) + list(calibration.blanks) + [s.id for s in samples]
    for ident in needed:
        if ident not in readings:
            raise InputError(f"no readings for `{ident}`", file=path,
                             fix=f"add rows `{ident},<absorbance>` (ids present: {', '.join(sorted(readings))})")
    unused = sorted(set(readings) - set(needed))
    if unused:
        notes.append(f"readings not used by the method (no standard, blank or sample of that id): "
                     f"{', '.join(unused)}")


def _result(top: Table, method: S.Method) -> S.ResultSpec:
    t = top.sub("result") if top.has("result") else None
    if t is None:
        raise top.error("missing [result]", fix='add [result] with name, unit and formula, e.g. '
                        'formula = "c_measured * V_flask / V_sample"')
    t.allow("name", "unit", "formula")
    unit = unit_of(t, "unit")
    try:
        formula = parse_formula(t.text("formula", required=True))
    except FormulaError as exc:
        raise t.error(str(exc), "formula", fix='e.g. formula = "c_measured * V_flask / V_sample"') from None
    dims = {}
    for name in formula.names:
        if name == "c_measured":
            if method.calibration is None:
                raise t.error("`c_measured` needs a [calibration]", "formula",
                              fix="add a [calibration], or leave c_measured out of the formula")
            dims[name] = method.calibration.concentration_unit.dims
        elif name in method.quantities:
            q = method.quantities[name]
            dims[name] = VOLUME if q.delivery else q.value.unit.dims
        elif name in method.solutions:
            dims[name] = method.concentration_dims(name)
        else:
            known = sorted(set(method.quantities) | set(method.solutions) |
                           ({"c_measured"} if method.calibration else set()))
            close = difflib.get_close_matches(name, known, n=1)
            raise t.error(f"the formula uses `{name}`, which is not defined", "formula",
                          fix=(f"did you mean `{close[0]}`? " if close else "") +
                          f"define [quantities.{name}], or use one of: {', '.join(known)}")
    try:
        got = result_dimension(formula, dims)
    except FormulaError as exc:
        raise t.error(f"the formula's units do not fit together: {exc}", "formula",
                      fix="check the formula and the units of its quantities") from None
    if tuple(got) != tuple(unit.dims):
        raise t.error(f"the formula gives a {describe_dims(got)}, but the unit {unit.text!r} is a "
                      f"{describe_dims(unit.dims)}", "unit", fix="check the formula and the result's unit")
    if "c_measured" in formula.names and not method.samples:
        raise t.error("the formula uses `c_measured` but there are no [samples]", "formula",
                      fix="add a [samples.ID] section for each sample read against the line")
    if method.calibration:
        for sid in method.calibration.standards:
            if method.concentration_dims(sid) != method.calibration.concentration_unit.dims:
                raise InputError(f"standard `{sid}` has a {describe_dims(method.concentration_dims(sid))} "
                                 f"but the calibration unit is a "
                                 f"{describe_dims(method.calibration.concentration_unit.dims)}",
                                 file=method.path, where="[calibration].concentration_unit",
                                 fix="give a molar mass for amount concentrations, or a unit of the "
                                     "standards' kind (mg/L for mass, µmol/L for amount)")
    return S.ResultSpec(t.text("name", required=True), unit, formula)
