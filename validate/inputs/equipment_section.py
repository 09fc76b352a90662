"""The [equipment.ID] tables of a method file: one item each, of one kind.

An item's values come from a register entry (its `class`), from the method file (the
laboratory's own calibration data), or both (the file's values replace the register's).
"""

from __future__ import annotations

from validate.inputs.items import ITEM_KINDS, Balance, Burette, Cuvette, Item, Photometer
from validate.inputs.registers import RegisterEntry, classes_for, find_entry
from validate.inputs.schema import EQUIPMENT_KINDS, VOLUMETRIC_KINDS, Settings
from validate.inputs.tables import Table

VOLUME = (0, 3, 0, 0)
MASS = (1, 0, 0, 0)
LENGTH = (0, 1, 0, 0)
NONE = (0, 0, 0, 0)
DEFAULT_REPEATABILITY_RATIO = 0.2  # glassware: repeatability per use = 0.2 x tolerance (CG4 Example A1)

_ITEM_KEYS = ("kind", "class", "nominal", "tolerance", "repeatability", "distribution", "reading",
              "path", "offset", "noise", "linearity", "provenance")
_GLASS_VALUES = {"tolerance": VOLUME, "repeatability": VOLUME}
# the values a method file may give for each kind, with their dimension
_VALUE_DIMS: dict[str, dict[str, tuple[int, ...]]] = {
    **{kind: _GLASS_VALUES for kind in VOLUMETRIC_KINDS},
    "burette": {**_GLASS_VALUES, "reading": VOLUME},
    "cuvette": {"path": LENGTH, "tolerance": LENGTH},
    "photometer": {"offset": NONE, "noise": NONE},
    "balance": {"linearity": MASS, "repeatability": MASS},
}


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
    common = {"id": item_id, "item_class": item_class, "provenance": _provenance(t, entry, bool(own_keys))}
    item = _item_of_kind(kind, t, values, nominal, settings, common)
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
    accepted = ("kind", "class", *glass, *_VALUE_DIMS[kind], "provenance")
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


def _own_value(t: Table, key: str, dims: tuple[int, ...]) -> float:
    value = t.quantity(key, dims, positive=key == "path")[0]
    if value < 0:
        raise t.error("the value cannot be negative", key, fix="give its size, zero or more")
    return value


def _provenance(t: Table, entry: RegisterEntry | None, own: bool) -> str:
    stated = t.text("provenance", "")
    if stated:
        return stated
    if entry is None:
        return "method file (laboratory's own data)"
    return f"{entry.source}; overridden in the method file" if own else entry.source


def _item_of_kind(kind: str, t: Table, values: dict, nominal: float | None, settings: Settings,
                  common: dict) -> Item:
    match kind:
        case "cuvette":
            if "path" not in values:
                raise t.error("a cuvette needs its `path` length", "path", fix='e.g. path = "10 mm"')
            return Cuvette(**common, path=values["path"], tolerance=values.get("tolerance", 0.0))
        case "photometer":
            return Photometer(**common, offset=values.get("offset", 0.0), noise=values.get("noise", 0.0))
        case "balance":
            return Balance(**common, linearity=values.get("linearity", 0.0),
                           repeatability=values.get("repeatability", 0.0))
    assert nominal is not None  # read for every volumetric kind
    return _volumetric(ITEM_KINDS[kind], t, values, nominal, settings, common)


def _volumetric(cls: type[Item], t: Table, values: dict, nominal: float, settings: Settings, common: dict) -> Item:
    """Glassware and pipettes: a tolerance is needed; repeatability and burette readings have defaults."""
    item_id = common["id"]
    if "tolerance" not in values:
        raise t.error("no tolerance for this item", "tolerance", fix="give `tolerance` or a `class`")
    used: list[str] = []
    if "repeatability" not in values:
        values["repeatability"] = DEFAULT_REPEATABILITY_RATIO * values["tolerance"]
        used.append(f"{item_id} {values['repeatability'] * 1e6:.4g} mL")
    extra = {}
    if cls is Burette:
        extra["reading"] = values.get("reading")
        if extra["reading"] is None:
            extra["reading"] = values.get("subdivision", values["tolerance"]) / 2.0
            used.append(f"{item_id}: each burette reading within +/- half a subdivision "
                        f"({extra['reading'] * 1e6:.3g} mL, rectangular; default of this tool)")
    dist = t.text("distribution", settings.glassware_distribution)
    if dist not in ("triangular", "rectangular"):
        raise t.error(f"unknown choice {dist!r}", "distribution", fix='use "triangular" or "rectangular"')
    return cls(**common, nominal=nominal, tolerance=values["tolerance"], repeatability=values["repeatability"],
               distribution=dist, defaults_used=tuple(used), **extra)


def item_reference(t: Table, key: str, items: dict[str, Item], cls: type[Item]) -> str | None:
    """The id under `key` (e.g. cuvette = "cell_40"), checked to name an item of that kind."""
    ref = t.text(key)
    if ref is not None and not isinstance(items.get(ref), cls):
        raise t.error(f"`{ref}` is not a {cls.kind} defined under [equipment]", key,
                      fix=f'define [equipment.{ref}] with kind = "{cls.kind}", or name another')
    return ref
