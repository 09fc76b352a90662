"""Read a method file (TOML) and its readings table into a validated method of its kind:
an `AssayMethod`, or an `EquilibriumMethod` when the file holds an [equilibrium] study.

Every problem becomes an `InputError` naming the file, the key and the fix;
every default applied is listed in the method's `defaults_shown`.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from validate.inputs.addition_section import check_addition_readings, parse_additions
from validate.inputs.assay_sections import AssayParts, check_readings, parse_calibration, parse_quantity, parse_result
from validate.inputs.consistency import check_ids, exact_defaults, weighing_defaults
from validate.inputs.equilibrium_file import check_equilibrium_readings, parse_equilibrium
from validate.inputs.equipment_section import parse_item
from validate.inputs.errors import InputError
from validate.inputs.readings import (
    load_reading_preparations,
    load_reading_series,
    load_readings,
    read_text_file,
)
from validate.inputs.redirect import Redirect
from validate.inputs.registers import load_registers
from validate.inputs.routine_section import parse_routine
from validate.inputs.schema import AssayMethod, EquilibriumMethod, Method, Sample, Settings, concentration_dims
from validate.inputs.solutions_section import check_solution_graph, parse_solution
from validate.inputs.tables import Table, parse_uncertain
from validate.inputs.text import MAX_NESTING, clean_document
from validate.inputs.validation_settings import parse_study_acceptance, parse_validation

TOP_KEYS = ("method", "settings", "equipment", "solutions", "calibration", "samples",
            "quantities", "result", "validation", "acceptance", "equilibrium",
            "routine_uncertainty", "additions")
# sections a study does not read
ASSAY_ONLY = ("samples", "quantities", "validation", "routine_uncertainty", "additions")


def load_method(path, redirect: Redirect | None = None) -> Method:
    """`redirect`: where to read the files the method names (a filed record's own copies)."""
    path = Path(path)
    top = _top_table(path)
    defaults: list[str] = []
    common, extra = _common_parts(top, path, defaults, redirect)
    if top.has("equilibrium"):
        return _equilibrium_method(top, path, common, extra, defaults, redirect)
    return _assay_method(top, path, common, extra, defaults, redirect)


def _located(path: Path, what: str, redirect: Redirect | None) -> Path:
    return path if redirect is None else redirect.locate(path, what)


def _top_table(path: Path) -> Table:
    text = read_text_file(path, "method file")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"TOML syntax error: {exc}", file=path,
                         fix="correct the line and column named (quotes around text and units, "
                             "one key = value per line)") from None
    except RecursionError:  # the parser recurses once per level of nesting
        raise InputError(f"tables and lists are nested more than {MAX_NESTING} deep", file=path,
                         fix="write the method file as its template shows") from None
    top = Table(clean_document(data, path), path, "top level")
    top.allow(*TOP_KEYS)
    return top


def _common_parts(top: Table, path: Path, defaults: list[str],
                  redirect: Redirect | None) -> tuple[dict, list[Path]]:
    """The fields every kind of method has, and the laboratory's register files."""
    info = Table(top.get("method", {}), path, "[method]")
    info.allow("title", "measurand", "scope")
    settings = _settings(Table(top.get("settings", {}), path, "[settings]"), defaults)
    extra = [_located(path.parent / r, "register", redirect) for r in settings.registers]
    entries, register_files = load_registers(extra, None if redirect is None else redirect.builtin_registers)
    items = {item_id: parse_item(item_id, Table(raw, path, f"[equipment.{item_id}]"), entries, settings, defaults)
             for item_id, raw in top.named_tables("equipment").items()}
    repeat = [u for item in items.values() for u in item.defaults_used if u.endswith(" mL")]
    if repeat:
        defaults.append("repeatability per use of glassware set to 0.2 x its tolerance (a default of this "
                        "tool, after the ratio in EURACHEM/CITAC CG4 Example A1; give `repeatability` from "
                        "your own data): " + ", ".join(repeat))
    solutions = {sol_id: parse_solution(sol_id, Table(raw, path, f"[solutions.{sol_id}]"), items)
                 for sol_id, raw in top.named_tables("solutions").items()}
    check_solution_graph(solutions, path)
    defaults.extend(weighing_defaults(solutions) + exact_defaults(solutions))
    common = {"path": str(path), "title": info.text("title", path.stem) or path.stem,
              "measurand": info.text("measurand", "") or "", "scope": info.text("scope", "") or "",
              "settings": settings, "items": items, "solutions": solutions,
              "registers_used": tuple(register_files)}
    return common, extra


def _input_files(*paths: Path | None) -> tuple[str, ...]:
    return tuple(dict.fromkeys(str(p) for p in paths if p is not None))


def _assay_method(top: Table, path: Path, common: dict, extra: list[Path], defaults: list[str],
                  redirect: Redirect | None) -> AssayMethod:
    items, solutions = common["items"], common["solutions"]
    calibration = parse_calibration(top.sub("calibration"), items, solutions, defaults) \
        if top.has("calibration") else None
    samples = _samples(top, path)
    quantities = {name: parse_quantity(name, Table(raw, path, f"[quantities.{name}]"), items)
                  for name, raw in top.named_tables("quantities").items()}
    check_ids(samples, solutions, quantities, path)
    readings: dict[str, tuple[float, ...]] = {}
    series: dict[str, tuple[str, ...]] = {}
    preparations: dict[str, tuple[str, ...]] = {}
    notes: list[str] = []
    readings_path = None
    additions: tuple = ()
    if calibration is not None:
        readings_path = _located(path.parent / calibration.readings_file, "readings table", redirect)
        readings = load_readings(readings_path)
        series = load_reading_series(readings_path)
        preparations = load_reading_preparations(readings_path)
        additions = _additions(top, common, calibration, readings, readings_path)
        spiked = {r for add in additions for r in add.reading_ids()}
        check_readings({k: v for k, v in readings.items() if k not in spiked}, calibration, samples,
                       readings_path, notes)
    elif top.has("additions"):
        raise top.error("standard additions are read in the readings table of [calibration]", "additions",
                        fix="add a [calibration] with its readings table (it also gives the external line the "
                            "matrix-effect test compares with)")
    parts = AssayParts(str(path), solutions, calibration, samples, quantities)
    result = parse_result(top, parts)
    validation = parse_validation(top, parts, result, defaults)
    defaults.extend(exact_defaults({}, quantities, validation.reference_value))
    routine = parse_routine(top, [smp.id for smp in samples], series, readings_path, result.unit.dims,
                            defaults, items=items, solutions=solutions,
                            reads_samples="c_measured" in result.formula.names)
    return AssayMethod(**common, calibration=calibration, samples=samples, quantities=quantities, result=result,
                       readings=readings, reading_series=series, reading_preparations=preparations,
                       validation=validation, routine=routine, additions=additions,
                       input_files=_input_files(path, readings_path, *extra),
                       defaults_shown=tuple(defaults), notes=tuple(notes))


def _additions(top: Table, common: dict, calibration, readings: dict, readings_path: Path) -> tuple:
    """The [additions] section, each flask's readings present."""
    solutions = common["solutions"]
    additions = parse_additions(top, common["items"], solutions,
                                lambda sid: concentration_dims(solutions, sid, calibration.concentration_unit.dims),
                                calibration.concentration_unit)
    check_addition_readings(additions, readings, readings_path)
    return additions


def _samples(top: Table, path: Path) -> tuple[Sample, ...]:
    samples = []
    for sid, raw in top.named_tables("samples").items():
        t = Table(raw, path, f"[samples.{sid}]")
        t.allow("description")
        samples.append(Sample(sid, t.text("description", "") or ""))
    return tuple(samples)


def _equilibrium_method(top: Table, path: Path, common: dict, extra: list[Path],
                        defaults: list[str], redirect: Redirect | None) -> EquilibriumMethod:
    if top.has("result") or top.has("calibration"):
        raise InputError("a method file holds either an assay ([calibration] and [result]) or an "
                         "equilibrium study ([equilibrium]), not both", file=path,
                         fix="put the two in separate method files")
    for key in ASSAY_ONLY:
        if top.has(key):
            raise top.error(f"[{key}] belongs to an assay; an equilibrium study does not read it", key,
                            fix=f"leave out [{key}], or put the assay in a method file of its own")
    study = parse_equilibrium(top.sub("equilibrium"), common["items"], common["solutions"], defaults)
    readings_path = _located(path.parent / study.readings_file, "readings table", redirect)
    readings = load_readings(readings_path)
    check_equilibrium_readings(study, readings, readings_path)
    validation = parse_study_acceptance(top, defaults)
    return EquilibriumMethod(**common, equilibrium=study, readings=readings, validation=validation,
                             reading_series=load_reading_series(readings_path),
                             reading_preparations=load_reading_preparations(readings_path),
                             input_files=_input_files(path, readings_path, *extra),
                             defaults_shown=tuple(defaults))


def _settings(t: Table, defaults: list[str]) -> Settings:
    t.allow("coverage_probability", "scatter", "glassware_distribution", "temperature_range",
            "expansion_coefficient", "shared_temperature", "registers")
    base = Settings()
    # a coverage probability below 50 % covers less than it leaves out, and one within 1e-4 of 1
    # asks for an interval that 10^6 Monte Carlo trials cannot place (JCGM 101 7.2.2)
    p = t.number("coverage_probability", base.coverage_probability, low=0.5, high=0.9999)
    scatter = t.choice("scatter", base.scatter, ("observed", "bottom-up"), 'use "observed" or "bottom-up"')
    dist = t.choice("glassware_distribution", base.glassware_distribution, ("triangular", "rectangular"),
                   'use "triangular" (EURACHEM/CITAC CG4) or "rectangular" (GUM 4.3.7)')
    temp = _temperature_range(t, base.temperature_range)
    alpha = t.number("expansion_coefficient", base.expansion_coefficient, low=0, high=0.01)  # per K; liquids ~1e-3
    shared = t.get("shared_temperature", base.shared_temperature)
    if not isinstance(shared, bool):
        raise t.error("expected true or false", "shared_temperature", fix="write true or false without quotes")
    registers = t.get("registers", [])
    if not isinstance(registers, list) or not all(isinstance(r, str) for r in registers):
        raise t.error("expected a list of file names", "registers", fix='e.g. registers = ["our_lab.toml"]')
    for key, text in (
        ("coverage_probability", f"coverage probability {p}"),
        ("scatter", f"calibration scatter treatment: {scatter}"),
        ("glassware_distribution", f"glassware tolerances read as {dist} distributions"),
        ("temperature_range", f"laboratory temperature within +/-{temp:g} K of 20 degC (rectangular)"),
        ("expansion_coefficient", f"volume expansion of the solutions {alpha:g} per K (water)"),
        ("shared_temperature", "one temperature deviation shared by every volumetric step"
         if shared else "an independent temperature deviation for each volumetric step"),
    ):
        if not t.has(key):
            defaults.append(f"default: {text}")
    return Settings(p, scatter, dist, temp, alpha, shared, tuple(registers))


def _temperature_range(t: Table, default: float) -> float:
    if not t.has("temperature_range"):
        return default
    temp = parse_uncertain(t.get("temperature_range"), t, "temperature_range", (0, 0, 0, 1), False, bare_ok=True).value
    if not 0 <= temp <= 50:  # a half-width about 20 degC; aqueous volumetric work stays well inside
        raise t.error(f"a temperature range of +/-{temp:g} K is not a laboratory's", "temperature_range",
                      fix='give the half-width of the laboratory\'s temperature about 20 degC, e.g. "3 K"')
    return temp
