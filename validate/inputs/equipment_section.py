"""The [equipment.ID] tables of a method file: one item each, of one kind.

An item's values come from a register entry (its `class`), from the method file (the
laboratory's own calibration data), or both (the file's values replace the register's).
"""

from __future__ import annotations

from typing import NamedTuple

from validate.inputs.items import (
    Balance,
    Burette,
    Cuvette,
    GraduatedPipette,
    Item,
    OneMarkPipette,
    Photometer,
    PistonPipette,
    VolumetricFlask,
)
from validate.inputs.registers import CHOICE_KEYS, RegisterEntry, classes_for, find_entry
from validate.inputs.schema import EQUIPMENT_KINDS, VOLUMETRIC_KINDS, Settings
from validate.inputs.tables import Table

VOLUME = (0, 3, 0, 0)
MASS = (1, 0, 0, 0)
LENGTH = (0, 1, 0, 0)
NONE = (0, 0, 0, 0)
# UV-Vis specifications state stray light well below 1 % (typically 0.01 to 0.1 %, common practice);
# above it a number was most likely meant in percent ("0.05" for 0.05 %)
MAX_STRAY_LIGHT = 0.01
DEFAULT_REPEATABILITY_RATIO = 0.2  # glassware: repeatability per use = 0.2 x tolerance (CG4 Example A1)

_ITEM_KEYS = ("kind", "class", "nominal", "tolerance", "repeatability", "distribution", "reading",
              "path", "offset", "noise", "gain", "drift", "stray_light", "linearity", "linearity_correlation",
              "provenance")
_GLASS_VALUES: dict[str, tuple[int, ...]] = {"tolerance": VOLUME, "repeatability": VOLUME}
# the values a method file may give for each kind, with their dimension
_VALUE_DIMS: dict[str, dict[str, tuple[int, ...]]] = {
    **{kind: _GLASS_VALUES for kind in VOLUMETRIC_KINDS},
    "burette": {**_GLASS_VALUES, "reading": VOLUME},
    "cuvette": {"path": LENGTH, "tolerance": LENGTH},
    "photometer": {"offset": NONE, "noise": NONE, "gain": NONE, "drift": NONE, "stray_light": NONE},
    "balance": {"linearity": MASS, "repeatability": MASS},
}
# the words a method file may give for each kind (checked against registers.CHOICE_KEYS)
_CHOICES: dict[str, tuple[str, ...]] = {"balance": ("linearity_correlation",)}


def parse_item(item_id: str, t: Table, entries: list[RegisterEntry], settings: Settings,
               defaults: list[str]) -> Item:
    t.allow(*_ITEM_KEYS)
    kind = _kind(t)
    _refuse_keys_of_other_kinds(t, kind)
    item_class = str(t.get("class", "own data"))
    nominal = t.quantity("nominal", VOLUME)[0] if kind in VOLUMETRIC_KINDS else None
    own_keys = [key for key in _VALUE_DIMS[kind] if t.has(key)]
    entry = _register_entry(t, entries, kind, item_class, nominal)
    if entry is None and not own_keys:
        raise t.error(f"no `class` and no values of your own for {kind} `{item_id}`",
                      fix="give a `class` found in a register, or your own `tolerance` (volumetric "
                          "items), `path` and `tolerance` (cuvettes), `offset` and `noise` "
                          "(photometers), `linearity` and `repeatability` (balances)")
    values = dict(entry.values) if entry else {}
    for key in own_keys:
        values[key] = _own_value(t, key, _VALUE_DIMS[kind][key])
    words = {**(entry.choices if entry else {}), **_own_choices(t, kind)}
    head = _Head(item_id, item_class, _provenance(t, entry, bool(own_keys)))
    item = _item_of_kind(kind, t, values, nominal, settings, head, words)
    defaults.extend(u for u in item.defaults_used if not u.endswith(" mL"))
    return item


def _kind(t: Table) -> str:
    kind = t.required_text("kind")
    if kind not in EQUIPMENT_KINDS:
        raise t.error(f"unknown kind {kind!r}", "kind", fix=f"use one of: {', '.join(EQUIPMENT_KINDS)}")
    return kind


def _refuse_keys_of_other_kinds(t: Table, kind: str) -> None:
    """A value the item's kind does not carry would be read by nothing: refused, not dropped."""
    glass = ("nominal", "distribution") if kind in VOLUMETRIC_KINDS else ()
    accepted = ("kind", "class", *glass, *_VALUE_DIMS[kind], *_CHOICES.get(kind, ()), "provenance")
    for key in t.data:
        if key not in accepted:
            raise t.error(f"a {kind} has no `{key}`", key, fix=f"leave it out; a {kind} takes: {', '.join(accepted)}")


def _register_entry(t: Table, entries, kind: str, item_class: str, nominal: float | None) -> RegisterEntry | None:
    """The register entry of the item's `class`; None when the file gives no class."""
    if "class" not in t.data:
        return None
    entry = find_entry(entries, kind, item_class, nominal)
    if entry is None:
        known = classes_for(entries, kind, nominal)
        size = f" of {t.get('nominal')}" if nominal else ""
        fix = (f"classes the registers hold for a {kind}{size}: {', '.join(known)}" if known else
               f"the registers hold no {kind}{size}; give `tolerance` (and `repeatability`) from your "
               f"own calibration data, or add a register of your own")
        raise t.error(f"class {item_class!r} is not in any register for a {kind}{size}", "class", fix=fix)
    return entry


def _own_choices(t: Table, kind: str) -> dict[str, str]:
    return {key: t.choice(key, "", CHOICE_KEYS[key], f"use one of: {', '.join(CHOICE_KEYS[key])}")
            for key in _CHOICES.get(kind, ()) if t.has(key)}


def _own_value(t: Table, key: str, dims: tuple[int, ...]) -> float:
    if key == "drift" and isinstance(t.get(key), dict):
        return _drift_from_check(t)
    value = t.quantity(key, dims, positive=key == "path")[0]
    if value < 0:
        raise t.error("the value cannot be negative", key, fix="give its size, zero or more")
    return value


def _drift_from_check(t: Table) -> float:
    """drift = { before = "0.512", after = "0.515" }: a check standard read before the standards
    and after the samples; the change between the two bounds the drift (half-width |after - before|)."""
    sub = t.sub("drift")
    sub.allow("before", "after")
    before, after = (sub.quantity(end, NONE, positive=False)[0] for end in ("before", "after"))
    return abs(after - before)


def _drift_basis(t: Table, drift: float) -> str:
    if isinstance(t.get("drift"), dict):
        return (f"a check standard read before the standards and after the samples changed by {drift:.3g} "
                f"absorbance")
    return f"stated drift within +/-{drift:.3g} absorbance" if drift > 0 else ""


def _provenance(t: Table, entry: RegisterEntry | None, own: bool) -> str:
    stated = t.text("provenance", "")
    if stated:
        return stated
    if entry is None:
        return "method file (laboratory's own data)"
    return f"{entry.source}; overridden in the method file" if own else entry.source


class _Head(NamedTuple):
    """What every item has: its id, register class and where its values come from."""

    id: str
    item_class: str
    provenance: str


class _Glass(NamedTuple):
    """What every volumetric item has besides its head."""

    nominal: float
    tolerance: float
    repeatability: float
    distribution: str
    defaults_used: tuple[str, ...]


# the volumetric kinds without fields of their own (a burette has its readings)
_GLASS = {cls.kind: cls for cls in (OneMarkPipette, GraduatedPipette, PistonPipette, VolumetricFlask)}


def _item_of_kind(kind: str, t: Table, values: dict[str, float], nominal: float | None, settings: Settings,
                  head: _Head, words: dict[str, str]) -> Item:
    match kind:
        case "cuvette":
            if "path" not in values:
                raise t.error("a cuvette needs its `path` length", "path", fix='e.g. path = "10 mm"')
            return Cuvette(**head._asdict(), path=values["path"], tolerance=values.get("tolerance", 0.0))
        case "photometer":
            return _photometer(t, values, head)
        case "balance":
            return Balance(**head._asdict(), linearity=values.get("linearity", 0.0),
                           repeatability=values.get("repeatability", 0.0),
                           linearity_correlation=words.get("linearity_correlation", "independent"))
    assert nominal is not None  # read for every volumetric kind
    return _volumetric(kind, t, values, nominal, settings, head)


def _photometer(t: Table, values: dict[str, float], head: _Head) -> Photometer:
    stray = values.get("stray_light", 0.0)
    if stray > MAX_STRAY_LIGHT:
        raise t.error(f"a stray-light ratio of {100 * stray:.3g} % is not a working photometer's", "stray_light",
                      fix='give the ratio with its unit as the specification states it, e.g. stray_light = "0.05 %"')
    drift = values.get("drift", 0.0)
    return Photometer(**head._asdict(), offset=values.get("offset", 0.0), noise=values.get("noise", 0.0),
                      gain=values.get("gain", 0.0), drift=drift, drift_basis=_drift_basis(t, drift),
                      stray_light=stray)


def _volumetric(kind: str, t: Table, values: dict[str, float], nominal: float, settings: Settings,
                head: _Head) -> Item:
    """Glassware and pipettes: a tolerance is needed; repeatability and burette readings have defaults."""
    if "tolerance" not in values:
        raise t.error("no tolerance for this item", "tolerance", fix="give `tolerance` or a `class`")
    used: list[str] = []
    if "repeatability" not in values:
        values["repeatability"] = DEFAULT_REPEATABILITY_RATIO * values["tolerance"]
        used.append(f"{head.id} {values['repeatability'] * 1e6:.4g} mL")
    reading = values.get("reading")
    if kind == Burette.kind and reading is None:
        reading = values.get("subdivision", values["tolerance"]) / 2.0
        used.append(f"{head.id}: each burette reading within +/- half a subdivision "
                    f"({reading * 1e6:.3g} mL, rectangular; default of this tool)")
    dist = t.choice("distribution", settings.glassware_distribution, ("triangular", "rectangular"),
                    'use "triangular" or "rectangular"')
    glass = _Glass(nominal, values["tolerance"], values["repeatability"], dist, tuple(used))
    if kind == Burette.kind:
        assert reading is not None  # given, from the register, or the default above
        return Burette(**head._asdict(), **glass._asdict(), reading=reading)
    return _GLASS[kind](**head._asdict(), **glass._asdict())


def item_reference(t: Table, key: str, items: dict[str, Item], cls: type[Item]) -> str | None:
    """The id under `key` (e.g. cuvette = "cell_40"), checked to name an item of that kind."""
    ref = t.text(key)
    if ref is not None and not isinstance(items.get(ref), cls):
        raise t.error(f"`{ref}` is not a {cls.kind} defined under [equipment]", key,
                      fix=f'define [equipment.{ref}] with kind = "{cls.kind}", or name another')
    return ref
