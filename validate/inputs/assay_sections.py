"""The sections of an assay's method file: [calibration], [quantities.NAME], [result], and the
check of its readings table against the standards, blanks and samples it names."""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass

from validate.inputs.equipment_section import item_reference
from validate.inputs.errors import InputError
from validate.inputs.formula import Formula, FormulaError, parse_formula, result_dimension
from validate.inputs.items import VOLUMETRIC, Cuvette, Photometer
from validate.inputs.schema import (
    AMOUNT_CONCENTRATION,
    MASS_CONCENTRATION,
    Calibration,
    NamedQuantity,
    ResultSpec,
    Sample,
    concentration_dims,
)
from validate.inputs.solutions import Blank, Solution
from validate.inputs.tables import Table, parse_delivery, parse_uncertain, unit_of
from validate.inputs.units import Unit, UnitError, a_dims, parse_unit

VOLUME = (0, 3, 0, 0)
RESERVED = {"c_measured"}
MIN_LEVELS = 3  # a line with a residual scatter needs n - 2 >= 1


@dataclass(frozen=True)
class AssayParts:
    """What the [result] and [validation] sections are checked against."""

    path: str
    solutions: dict[str, Solution]
    calibration: Calibration | None
    samples: tuple[Sample, ...]
    quantities: dict[str, NamedQuantity]

    def concentration_dims(self, solution_id: str) -> tuple[int, ...]:
        blank = self.calibration.concentration_unit.dims if self.calibration else AMOUNT_CONCENTRATION
        return concentration_dims(self.solutions, solution_id, blank)


# ---- [calibration] ----

def parse_calibration(t: Table, items: dict, solutions: dict[str, Solution], defaults: list[str]) -> Calibration:
    t.allow("standards", "blanks", "blanks_in_fit", "readings", "cuvette", "photometer",
            "concentration_unit", "weighting", "function")
    weighting = _weighting(t, defaults)
    function = _function(t, defaults)
    standards = _solution_ids(t, "standards", t.require("standards"), solutions)
    blanks = _solution_ids(t, "blanks", t.get("blanks", []), solutions)
    both = [sid for sid in blanks if sid in standards]
    if both:  # its readings would enter the line twice
        raise t.error(f"`{both[0]}` is listed both as a standard and as a blank", "blanks",
                      fix="give each solution one role: a blank under `blanks`, a standard under `standards`")
    for sid in blanks:
        if not isinstance(solutions[sid], Blank):
            raise t.error(f"`{sid}` is listed as a blank but is made by {solutions[sid].made_by}", "blanks",
                          fix=f'list `{sid}` under `standards`, or make it with made_by = "blank"')
    unit = _concentration_unit(t)
    in_fit = _blanks_in_fit(t, blanks, defaults)
    cuvette = item_reference(t, "cuvette", items, Cuvette)
    photometer = item_reference(t, "photometer", items, Photometer)
    readings = t.required_text("readings")
    n_points = len(standards) + (len(blanks) if in_fit else 0)
    if n_points < MIN_LEVELS:
        raise t.error(f"only {n_points} calibration levels; at least 3 are needed", "standards",
                      fix="add standards (5 to 7 levels is common practice)")
    if function == "second order" and n_points < 4:
        raise t.error(f"only {n_points} calibration levels; a second-order function (three coefficients and a "
                      f"residual scatter) needs at least 4", "standards",
                      fix='add standards (ISO 8466-2 asks for about 10 levels, from memory), or use '
                          'function = "straight line"')
    return Calibration(standards, blanks, in_fit, readings, cuvette, photometer, unit, weighting, function)


def _function(t: Table, defaults: list[str]) -> str:
    function = t.choice("function", "straight line", ("straight line", "second order"),
                        'use "straight line" (y = a + b x, ISO 8466-1) or "second order" (y = a + b x + c x^2, '
                        'ISO 8466-2) for the calibration function')
    if not t.has("function"):
        defaults.append('default: calibration function "straight line" (y = a + b x); "second order" is the '
                        "choice where Mandel's test shows curvature")
    return function


def _weighting(t: Table, defaults: list[str]) -> str:
    weighting = t.choice("weighting", "none", ("none", "variance-function", "inverse-variance"),
                         'use "none" (ordinary least squares), "variance-function" (weights 1/s(c)^2 with '
                         's = a + b c fitted over every level) or "inverse-variance" (weights 1/s^2 from '
                         'the replicate readings of each level)')
    if not t.has("weighting"):
        defaults.append("default: unweighted (ordinary least-squares) calibration line")
    return weighting


def _solution_ids(t: Table, key: str, ids, solutions: dict) -> tuple[str, ...]:
    """A list of solution ids, each defined and listed once."""
    if not isinstance(ids, list) or not all(isinstance(i, str) for i in ids):
        raise t.error("expected a list of solution ids", key, fix='e.g. standards = ["S1", "S2", "S3"]')
    for sid in ids:
        if sid not in solutions:
            raise t.error(f"unknown solution `{sid}`", key, fix=f"define [solutions.{sid}]")
    if len(set(ids)) != len(ids):
        raise t.error("an id is listed twice", key, fix="list each solution once")
    return tuple(ids)


def _concentration_unit(t: Table) -> Unit:
    unit = unit_of(t, "concentration_unit")
    if unit.dims not in (MASS_CONCENTRATION, AMOUNT_CONCENTRATION):
        raise t.error("a concentration unit is needed (e.g. mg/L or µmol/L)", "concentration_unit",
                      fix='e.g. concentration_unit = "µmol/L"')
    return unit


def _blanks_in_fit(t: Table, blanks: tuple[str, ...], defaults: list[str]) -> bool:
    in_fit = t.get("blanks_in_fit", True)
    if not isinstance(in_fit, bool):
        raise t.error("expected true or false", "blanks_in_fit", fix="write true or false without quotes")
    if blanks and not t.has("blanks_in_fit"):
        defaults.append("default: blanks enter the calibration fit as zero-concentration points")
    return in_fit


# ---- [quantities.NAME] and the readings ----

def parse_quantity(name: str, t: Table, items: dict) -> NamedQuantity:
    if not name.isidentifier() or name in RESERVED:
        raise t.error(f"`{name}` cannot name a quantity",
                      fix="use letters, digits and _ (not starting with a digit); c_measured is reserved")
    if t.has("item"):
        t.allow("item", "volume", "step")
        raw = {"item": t.get("item"), **({"volume": t.get("volume")} if t.has("volume") else {})}
        delivery = parse_delivery(raw, Table({"q": raw}, t.file, t.where), "q", items, VOLUMETRIC)
        return NamedQuantity(name, delivery=delivery, step=t.text("step", "") or f"sample preparation ({name})")
    data = dict(t.data)
    step = data.pop("step", "") or f"input quantity {name}"
    value = parse_uncertain(data, Table({name: data}, t.file, "[quantities]"), name, None, positive=False)
    return NamedQuantity(name, value=value, step=step)


def check_readings(readings: dict, calibration: Calibration, samples, path, notes: list[str]) -> None:
    """Every standard, blank and sample has readings; readings of other ids are noted."""
    needed = list(calibration.standards) + list(calibration.blanks) + [s.id for s in samples]
    for ident in needed:
        if ident not in readings:
            raise InputError(f"no readings for `{ident}`", file=path,
                             fix=f"add rows `{ident},<absorbance>` (ids present: {', '.join(sorted(readings))})")
    unused = sorted(set(readings) - set(needed))
    if unused:
        notes.append(f"readings not used by the method (no standard, blank or sample of that id): "
                     f"{', '.join(unused)}")


# ---- [result] ----

def parse_result(top: Table, parts: AssayParts) -> ResultSpec:
    if not top.has("result"):
        raise top.error("missing [result]", fix='add [result] with name, unit and formula, e.g. '
                        'formula = "c_measured * V_flask / V_sample"')
    t = top.sub("result")
    t.allow("name", "unit", "formula")
    unit = unit_of(t, "unit")
    try:
        formula = parse_formula(t.required_text("formula"))
    except FormulaError as exc:
        raise t.error(str(exc), "formula", fix='e.g. formula = "c_measured * V_flask / V_sample"') from None
    dims = {name: _dimension_of(name, t, parts) for name in formula.names}
    _check_result_dimension(t, formula, dims, unit)
    if "c_measured" in formula.names and not parts.samples:
        raise t.error("the formula uses `c_measured` but there are no [samples]", "formula",
                      fix="add a [samples.ID] section for each sample read against the line")
    if parts.calibration:
        _check_standards_unit(parts, parts.calibration)
    return ResultSpec(t.required_text("name"), unit, formula)


def _dimension_of(name: str, t: Table, parts: AssayParts) -> tuple[int, ...]:
    """The dimension of a name in the formula: c_measured, a quantity or a solution."""
    if name == "c_measured":
        if parts.calibration is None:
            raise t.error("`c_measured` needs a [calibration]", "formula",
                          fix="add a [calibration], or leave c_measured out of the formula")
        return parts.calibration.concentration_unit.dims
    if name in parts.quantities:
        q = parts.quantities[name]
        return q.value.unit.dims if q.value is not None else VOLUME
    if name in parts.solutions:
        return parts.concentration_dims(name)
    known = sorted(set(parts.quantities) | set(parts.solutions) | ({"c_measured"} if parts.calibration else set()))
    close = difflib.get_close_matches(name, known, n=1)
    raise t.error(f"the formula uses `{name}`, which is not defined", "formula",
                  fix=(f"did you mean `{close[0]}`? " if close else "") +
                  f"define [quantities.{name}], or use one of: {', '.join(known)}")


def _check_result_dimension(t: Table, formula: Formula, dims: dict, unit: Unit) -> None:
    try:
        got = result_dimension(formula, dims)
    except FormulaError as exc:
        raise t.error(f"the formula's units do not fit together: {exc}", "formula",
                      fix="check the formula and the units of its quantities") from None
    if tuple(got) != tuple(unit.dims):
        raise t.error(f"the formula gives {a_dims(got)}, but the unit {unit.text!r} is "
                      f"{a_dims(unit.dims)}", "unit", fix="check the formula and the result's unit")


def _check_standards_unit(parts: AssayParts, cal: Calibration) -> None:
    """Every standard's concentration is of the calibration unit's kind (mass or amount)."""
    for sid in cal.standards:
        if parts.concentration_dims(sid) != cal.concentration_unit.dims:
            raise InputError(f"standard `{sid}` has {a_dims(parts.concentration_dims(sid))} "
                             f"but the calibration unit is {a_dims(cal.concentration_unit.dims)}",
                             file=parts.path, where="[calibration].concentration_unit",
                             fix="give a molar mass for amount concentrations, or a unit of the "
                                 "standards' kind (mg/L for mass, µmol/L for amount)")


# ---- the range stated in [method] scope ----

_NUMBER = r"(\d+(?:\.\d*)?(?:[eE][-+]?\d+)?)"
SCOPE_RANGE = re.compile(_NUMBER + r"\s*(?:to|-|–|—|\.\.\.?)\s*" + _NUMBER + r"\s*([^\s,;()]+)")


@dataclass(frozen=True)
class ScopeRange:
    """A concentration range written in the scope as "LOW to HIGH UNIT" (also "LOW - HIGH UNIT")."""

    low: float  # in `unit`
    high: float
    unit: Unit


def scope_range(text: str) -> ScopeRange | None:
    """The first "LOW to HIGH UNIT" in the scope whose unit is a concentration, low below high;
    None when the scope states none (free text is the analyst's; nothing here is an error)."""
    for match in SCOPE_RANGE.finditer(text or ""):
        try:
            unit = parse_unit(match.group(3))
        except UnitError:
            continue
        low, high = float(match.group(1)), float(match.group(2))
        if unit.dims in (MASS_CONCENTRATION, AMOUNT_CONCENTRATION) and low < high:
            return ScopeRange(low, high, unit)
    return None
