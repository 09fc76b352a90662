"""Reading TOML tables with checked keys, units and uncertain values."""

from __future__ import annotations

import difflib
import math
from typing import overload

from validate.inputs.errors import InputError
from validate.inputs.items import OneMarkPipette, Volumetric, VolumetricFlask, kind_names
from validate.inputs.units import Unit, UnitError, a_dims, describe_dims, parse_quantity, parse_unit
from validate.inputs.values import DISTRIBUTIONS, Delivery, UncertainValue


class Table:
    """A TOML table that knows its file and place, and refuses unknown keys."""

    def __init__(self, data, file, where: str):
        if not isinstance(data, dict):
            raise InputError(f"expected a table, got {type(data).__name__}", file=file, where=where,
                             fix="write this entry as a table, e.g. [section] with key = value lines")
        self.data, self.file, self.where = data, file, where

    def error(self, what: str, key: str | None = None, fix: str | None = None) -> InputError:
        where = self.where
        if key:  # a top-level key is shown as its section, e.g. [settings]
            where = f"[{key}]" if self.where == "top level" else f"{self.where}.{key}"
        return InputError(what, file=self.file, where=where, fix=fix)

    def allow(self, *keys: str) -> None:
        for key in self.data:
            if key not in keys:
                close = difflib.get_close_matches(key, keys, n=1)
                hint = f"did you mean `{close[0]}`?" if close else f"allowed keys: {', '.join(keys)}"
                raise self.error(f"unknown key `{key}`", key, fix=hint)

    def has(self, key: str) -> bool:
        return key in self.data

    def get(self, key: str, default=None):
        return self.data.get(key, default)

    def require(self, key: str, fix: str | None = None):
        if key not in self.data:
            raise self.error(f"missing key `{key}`", fix=fix or f"add `{key} = ...` to {self.where}")
        return self.data[key]

    def text(self, key: str, default: str | None = None, required: bool = False) -> str | None:
        value = self.require(key) if required else self.data.get(key, default)
        if value is not None and not isinstance(value, str):
            raise self.error(f"expected text in quotes, got {value!r}", key,
                             fix=f'write it in quotes, e.g. {key} = "..."')
        return value

    def required_text(self, key: str) -> str:
        """Text that must be given: a clear error when it is missing or not text."""
        value = self.text(key, required=True)
        assert value is not None  # text(required=True) raises when the key is missing
        return value

    def choice(self, key: str, default: str, choices: tuple[str, ...], fix: str) -> str:
        """Text that must be one of `choices`; `default` when the key is absent."""
        value = self.text(key, default)
        if value is None or value not in choices:
            raise self.error(f"unknown choice {value!r}", key, fix=fix)
        return value

    @overload
    def number(self, key: str, default: float, low=None, high=None) -> float: ...

    @overload
    def number(self, key: str, default: None = None, low=None, high=None) -> float | None: ...

    def number(self, key: str, default: float | None = None, low=None, high=None) -> float | None:
        if key not in self.data:
            return default
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise self.error(f"expected a number, got {value!r}", key,
                             fix=f"write a plain number without quotes, e.g. {key} = 0.95")
        if (low is not None and value <= low) or (high is not None and value >= high):
            bounds = " and ".join(b for b in (f"above {low}" if low is not None else "",
                                               f"below {high}" if high is not None else "") if b)
            raise self.error(f"{value} is out of range; it must lie {bounds}", key,
                             fix=f"give a number {bounds}")
        return float(value)

    def named_tables(self, key: str) -> dict:
        """A section of named tables such as [equipment.ID]; empty when absent."""
        value = self.data.get(key, {})
        if not isinstance(value, dict):
            raise self.error(f"expected named tables, got {value!r}", key,
                             fix=f"write one table per entry, e.g. [{key}.NAME] followed by its keys")
        return value

    def sub(self, key: str) -> Table:
        where = f"[{key}]" if self.where == "top level" else f"{self.where}.{key}"
        return Table(self.require(key), self.file, where)

    def quantity(self, key: str, dims=None, positive: bool = True) -> tuple[float, Unit]:
        """A value with a unit, converted to SI, its dimension checked."""
        return parse_si(self.require(key), self, key, dims, positive)

    def uncertain(self, key: str, dims=None, positive: bool = True, bare_ok: bool = False) -> UncertainValue:
        return parse_uncertain(self.require(key), self, key, dims, positive, bare_ok)


# Magnitudes (SI) beyond any quantity of a laboratory method; refusing them keeps squares of
# uncertainties and sensitivities clear of floating-point overflow and underflow.
SMALLEST_SI, LARGEST_SI = 1e-30, 1e30


def parse_si(raw, table: Table, key: str, dims=None, positive=True) -> tuple[float, Unit]:
    try:
        number, unit = parse_quantity(raw)
    except UnitError as exc:
        raise table.error(str(exc), key, fix="write a number and its unit in quotes, e.g. \"10.00 mL\"") from None
    if dims is not None and unit.dims != tuple(dims):
        wanted = describe_dims(tuple(dims))
        got = f"the unit {unit.text!r} is {a_dims(unit.dims)}" if unit.text else "the value has no unit"
        raise table.error(f"{got}, but {a_dims(tuple(dims))} is needed here", key,
                          fix=f"give the value in a unit of {wanted}")
    if not math.isfinite(number):
        raise table.error("the value is not a finite number", key, fix="write a finite number and its unit")
    if positive and number <= 0:
        raise table.error(f"the value {number} must be greater than zero", key,
                          fix="give the value as used or stated, greater than zero")
    if number != 0 and not SMALLEST_SI <= abs(number * unit.factor) <= LARGEST_SI:
        raise table.error(f"the value {number:g} {unit.text} is far outside any laboratory quantity",
                          key, fix=f"check the number and its unit (in SI units this tool takes values between "
                                   f"{SMALLEST_SI:g} and {LARGEST_SI:g})")
    return number * unit.factor, unit


_UNCERTAIN_KEYS = ("value", "u", "half_width", "expanded_uncertainty", "coverage_factor",
                   "readings", "distribution", "dof", "limit_uncertainty", "provenance", "exact")
STATED_EXACT = "stated as exact in the method file"


def parse_uncertain(raw, parent: Table, key: str, dims=None, positive=True, bare_ok=False) -> UncertainValue:
    """A number with its uncertainty, a table such as
    {value = "99.9 %", half_width = "0.1 %"} (rectangular unless stated),
    {value = "1000 mg/L", expanded_uncertainty = "2 mg/L", coverage_factor = 2},
    {value = "10 mL", u = "0.01 mL", distribution = "t", dof = 9},
    {readings = ["1.02 g", "1.01 g", ...]} (Type A: mean, s/sqrt(n), n-1 dof),
    or {value = "30.973762 g/mol", exact = true}: taken as exact because the file says so.
    A number with no uncertainty ("99.9 %") is refused, since it would enter the result as exact
    without anyone having said so; `bare_ok` accepts it where something else carries the
    uncertainty (a mass read on a named balance) or where only the value is read."""
    if not isinstance(raw, dict):
        value, unit = parse_si(raw, parent, key, dims, positive)
        if not bare_ok:
            raise _no_uncertainty(parent.error, key, raw)
        return UncertainValue(value, unit, provenance="stated value, no uncertainty given")
    t = Table(raw, parent.file, f"{parent.where}.{key}")
    t.allow(*_UNCERTAIN_KEYS)
    provenance = t.text("provenance", "") or ""
    exact = _exact_flag(t)
    if t.has("readings"):
        if exact:
            raise t.error("readings and `exact = true` contradict each other", "exact",
                          fix="leave out `exact` (readings give a Type A uncertainty)")
        return _type_a(t, dims, positive, provenance)
    return _type_b(t, dims, positive, provenance, exact or bare_ok, key)


def _no_uncertainty(error, key: str, raw, where_key: str | None = "") -> InputError:
    """The refusal of a value without an uncertainty; `error` is the table's error method."""
    shown = raw if isinstance(raw, str) else "..."
    return error(f"`{key}` has no uncertainty; a number without one would enter the result as exact",
                 key if where_key == "" else where_key,
                 fix=f'give its uncertainty, e.g. {key} = {{ value = "{shown}", u = "..." }} (or half_width, '
                     f'or expanded_uncertainty with coverage_factor, as your certificate states it), or '
                     f'write {key} = {{ value = "{shown}", exact = true }} to take it as exact on purpose')


def _exact_flag(t: Table) -> bool:
    exact = t.get("exact", False)
    if not isinstance(exact, bool):
        raise t.error(f"expected true or false, got {exact!r}", "exact", fix="write exact = true without quotes")
    return exact


def _type_b(t: Table, dims, positive, provenance: str, exact: bool, key: str) -> UncertainValue:
    """A stated value with a stated spread (GUM 4.3): u, a half-width or an expanded uncertainty;
    none only where the value is exact on purpose (`exact = true`) or `bare_ok`."""
    value, unit = parse_si(t.require("value"), t, "value", dims, positive)
    dist = _distribution_named(t)
    spread_key = _spread_key(t)
    if spread_key is None:
        return _without_spread(t, value, unit, provenance, exact, key)
    spread = _stated_spread(t, spread_key, unit, exact)
    dof = t.number("dof", math.inf, low=0)
    if dof < 1:  # degrees of freedom count readings beyond the first (GUM G.3); below 1 no t quantile is usable
        raise t.error(f"{dof:g} degrees of freedom is fewer than one", "dof",
                      fix="give dof = n - 1 for n readings, or the degrees of freedom the certificate states")
    if spread_key == "half_width":
        return _from_half_width(t, value, unit, spread, dist or "rectangular", dof, provenance)
    k = None
    if spread_key == "expanded_uncertainty":
        k = _coverage_factor(t)
        u, dist = spread / k, dist or "normal"
    else:
        u, dist = spread, dist or ("t" if math.isfinite(dof) else "normal")
    if dist == "t" and not math.isfinite(dof):
        raise t.error("a t distribution needs `dof` (degrees of freedom)", "dof", fix="add dof = n - 1 for n readings")
    if dist in ("rectangular", "triangular", "trapezoid"):
        raise t.error(f"give a {dist} distribution by its `half_width`", spread_key,
                      fix=f"write half_width = ... instead of {spread_key}")
    return UncertainValue(value, unit, u, dist, dof, provenance, "B", coverage_factor=k)


def _without_spread(t: Table, value: float, unit: Unit, provenance: str, exact: bool, key: str) -> UncertainValue:
    """A value with no spread: exact on purpose (`exact = true`), or where a bare value is accepted."""
    if not exact:
        raise _no_uncertainty(t.error, key, t.get("value"), where_key=None)
    stated = STATED_EXACT if t.get("exact") else "stated value, no uncertainty given"
    return UncertainValue(value, unit, provenance=provenance or stated)


def _stated_spread(t: Table, spread_key: str, unit: Unit, bare_ok: bool) -> float:
    """The spread in SI; never beside `exact = true`, and zero only where a bare value is accepted."""
    if t.get("exact"):
        raise t.error(f"an uncertainty (`{spread_key}`) and `exact = true` contradict each other", "exact",
                      fix="keep the one your source states")
    spread = _spread(t, spread_key, unit)
    if spread == 0 and not bare_ok:
        raise t.error("a zero uncertainty makes the value exact", spread_key,
                      fix=f"write exact = true instead of {spread_key} = 0 if the value is exact on purpose, "
                          f"or give its uncertainty")
    return spread


def _distribution_named(t: Table) -> str | None:
    dist = t.text("distribution")
    if dist is not None and dist not in DISTRIBUTIONS:
        raise t.error(f"unknown distribution {dist!r}", "distribution",
                      fix=f"use one of: {', '.join(DISTRIBUTIONS)}")
    return dist


def _spread_key(t: Table) -> str | None:
    """Which of u, half_width and expanded_uncertainty is given (at most one)."""
    spread_keys = [k for k in ("u", "half_width", "expanded_uncertainty") if t.has(k)]
    if len(spread_keys) > 1:
        raise t.error(f"give only one of {', '.join(spread_keys)}", fix="keep the one your source states")
    return spread_keys[0] if spread_keys else None


def _spread(t: Table, spread_key: str, unit: Unit) -> float:
    """The spread in SI, in a unit of the value's kind, zero or more."""
    spread, spread_unit = parse_si(t.get(spread_key), t, spread_key, None, positive=False)
    if spread_unit.dims != unit.dims:
        raise t.error(f"the unit of `{spread_key}` ({spread_unit.text}) does not match the value's "
                      f"({unit.text})", spread_key, fix=f"give `{spread_key}` in {unit.text or 'no unit'}, "
                      f"like the value")
    if spread < 0:
        raise t.error("an uncertainty cannot be negative", spread_key, fix="give its size, zero or more")
    return spread


def _from_half_width(t: Table, value: float, unit: Unit, half_width: float, dist: str, dof: float,
                     provenance: str) -> UncertainValue:
    """u of a bounded distribution from its half-width a: a/sqrt(3) rectangular (GUM 4.3.7),
    a/sqrt(6) triangular (GUM 4.3.9), sqrt(a^2/3 + d^2/9) for the curvilinear trapezoid, a
    rectangular whose limits are known only to +/- d (JCGM 101:2008 6.4.3)."""
    if dist == "rectangular":
        return UncertainValue(value, unit, half_width / math.sqrt(3.0), dist, dof, provenance, "B")
    if dist == "triangular":
        return UncertainValue(value, unit, half_width / math.sqrt(6.0), dist, dof, provenance, "B")
    if dist == "trapezoid":
        d, _ = parse_si(t.require("limit_uncertainty"), t, "limit_uncertainty", unit.dims, False)
        u = math.sqrt(half_width**2 / 3.0 + d * d / 9.0)
        return UncertainValue(value, unit, u, dist, dof, provenance, "B", d)
    raise t.error(f"a half-width goes with a rectangular, triangular or trapezoid "
                  f"distribution, not {dist!r}", "distribution",
                  fix="give `u` (a standard uncertainty) for this distribution")


def _coverage_factor(t: Table) -> float:
    # a stated k lies between 1 (about 68 %) and t(0.995, 1) = 63.7 (from memory); wider bounds
    # leave room for odd certificates and keep u = U / k clear of overflow
    k = t.number("coverage_factor", low=0.5, high=100)
    if k is None:
        raise t.error("an expanded uncertainty needs its `coverage_factor`",
                      fix="add coverage_factor = 2 (or the k stated on the certificate)")
    return k


def _type_a(t: Table, dims, positive, provenance) -> UncertainValue:
    readings = t.get("readings")
    if not isinstance(readings, list) or len(readings) < 2:
        raise t.error("`readings` must be a list of at least two values", "readings",
                      fix='e.g. readings = ["1.02 g", "1.01 g", "1.03 g"]')
    parsed = [parse_si(r, t, f"readings[{i}]", dims, positive) for i, r in enumerate(readings)]
    units = {p[1].dims for p in parsed}
    if len(units) > 1:
        raise t.error("the readings have different kinds of unit", "readings", fix="give every reading in one unit")
    values = [p[0] for p in parsed]
    n = len(values)
    mean = sum(values) / n
    sd = math.sqrt(sum((v - mean) ** 2 for v in values) / (n - 1))
    return UncertainValue(mean, parsed[0][1], sd / math.sqrt(n), "t", n - 1,
                          provenance or f"mean of {n} readings (Type A)", "A")


def unit_of(table: Table, key: str, dims=None) -> Unit:
    raw = table.required_text(key)
    try:
        unit = parse_unit(raw)
    except UnitError as exc:
        raise table.error(str(exc), key, fix='write a unit such as "mg/L" or "µmol/L"') from None
    if dims is not None and unit.dims != tuple(dims):
        raise table.error(f"{raw!r} is {a_dims(unit.dims)}, but "
                          f"{a_dims(tuple(dims))} is needed", key,
                          fix=f"give a unit of {describe_dims(tuple(dims))}")
    return unit


def parse_delivery(raw, t: Table, key: str, items, kinds: tuple[type[Volumetric], ...]) -> Delivery:
    """An item named alone (its nominal volume) or {item, volume}: checked against the item's kind."""
    item_id, volume = _delivery_parts(raw, t, key)
    if item_id not in items:
        raise t.error(f"unknown equipment `{item_id}`", key,
                      fix=f"define [equipment.{item_id}] or use one of: {', '.join(items) or '(none defined)'}")
    item = items[item_id]
    if not isinstance(item, kinds):
        wanted = " or ".join(kind_names(kinds))
        raise t.error(f"`{item_id}` is a {item.kind}; here a {wanted} is needed", key,
                      fix=f"name a {wanted} defined under [equipment]")
    return Delivery(item_id, _volume_within(item, volume, t, key))


def _delivery_parts(raw, t: Table, key: str) -> tuple[str, float | None]:
    """(item id, selected volume or None for the nominal) of a delivery as written."""
    if isinstance(raw, str):
        return raw, None
    if isinstance(raw, dict):
        sub = Table(raw, t.file, f"{t.where}.{key}")
        sub.allow("item", "volume")
        item_id = sub.required_text("item")
        return item_id, (sub.quantity("volume", (0, 3, 0, 0))[0] if sub.has("volume") else None)
    raise t.error("expected an equipment id, or {item = \"...\", volume = \"... mL\"}", key,
                  fix='e.g. aliquot = "pipette_5" or aliquot = { item = "burette_25", volume = "2.00 mL" }')


def _volume_within(item: Volumetric, volume: float | None, t: Table, key: str) -> float:
    """The selected volume, checked against what the item can deliver."""
    if volume is None:
        return item.nominal
    if volume > item.nominal * (1 + 1e-9):
        raise t.error(f"the volume is larger than the {item.kind}'s nominal volume", key,
                      fix="give the volume delivered, within the nominal volume, or name a larger item")
    match item:
        case OneMarkPipette() | VolumetricFlask() if abs(volume - item.nominal) > 1e-9 * item.nominal:
            raise t.error(f"a {item.kind} delivers only its nominal volume", key,
                          fix="leave out `volume`, or use a graduated or piston pipette or a burette")
    return volume
