"""The [additions] section of a method file: samples measured by standard addition.

    [additions.effluent_A]                  # the sample's name; its readings are effluent_A.1, effluent_A.2, ...
    description = "outfall of the dye house"
    portion = "pipette_10"                  # the sample portion put in every flask, through an item
    standard = "spike_std"                  # the solution added, one of [solutions]
    spike_item = "burette_10"               # the item that delivers the additions
    spike_volumes = ["0 mL", "1.00 mL", "2.00 mL", "3.00 mL", "4.00 mL"]   # one flask each, in reading order
    made_up_to = "flask_50"                 # every flask made up to this volume
    unit = "mg/L"                           # optional: the unit the sample's concentration is shown in

Flask k (1-based) holds the portion plus the k-th spike volume and is read under the id
`NAME.k` in the [calibration] readings table. A volume of "0 mL" is a flask without an addition.
"""

from __future__ import annotations

from dataclasses import dataclass

from validate.inputs.errors import InputError
from validate.inputs.items import FLASKS, PIPETTES
from validate.inputs.solutions import Blank
from validate.inputs.tables import Table, parse_delivery, unit_of
from validate.inputs.units import Unit
from validate.inputs.values import Delivery

SECTION = "additions"
MIN_LEVELS = 3  # a line with an uncertainty needs n - 2 >= 1 degrees of freedom (Miller and Miller, 5.3)


@dataclass(frozen=True)
class StandardAddition:
    """One sample measured by standard addition: equal portions, each with its own addition."""

    id: str
    description: str
    portion: Delivery
    standard: str  # solution id
    spikes: tuple[Delivery | None, ...]  # None: a flask without an addition
    made_up_to: Delivery
    unit: Unit

    def reading_ids(self) -> list[str]:
        return [f"{self.id}.{k}" for k in range(1, len(self.spikes) + 1)]

    def spike_volumes(self) -> list[float]:
        return [0.0 if d is None else d.volume for d in self.spikes]


def parse_additions(top: Table, items: dict, solutions: dict, concentration_dims,
                    default_unit: Unit | None) -> tuple[StandardAddition, ...]:
    """Every [additions.NAME] table, checked against the equipment and solutions.
    `concentration_dims(solution_id)`: the dimension of a solution's concentration."""
    if not top.has(SECTION):
        return ()
    out = []
    for name, raw in top.named_tables(SECTION).items():
        t = Table(raw, top.file, f"[{SECTION}.{name}]")
        out.append(_addition(name, t, items, solutions, concentration_dims, default_unit))
    return tuple(out)


def _addition(name: str, t: Table, items: dict, solutions: dict, concentration_dims,
              default_unit: Unit | None) -> StandardAddition:
    t.allow("description", "portion", "standard", "spike_item", "spike_volumes", "made_up_to", "unit")
    portion = parse_delivery(t.require("portion", fix='e.g. portion = "pipette_10"'), t, "portion", items, PIPETTES)
    standard = t.required_text("standard")
    if standard not in solutions:
        raise t.error(f"`{standard}` is not one of the [solutions]", "standard",
                      fix=f"use one of: {', '.join(solutions) or '(no solutions defined)'}")
    if isinstance(solutions[standard], Blank):
        raise t.error(f"`{standard}` is a blank: adding it adds nothing", "standard",
                      fix="name the standard solution whose known concentration is added")
    flask = parse_delivery(t.require("made_up_to", fix='e.g. made_up_to = "flask_50"'), t, "made_up_to", items,
                           FLASKS)
    spikes = _spikes(t, items)
    for k, spike in enumerate(spikes, start=1):
        added = portion.volume + (0.0 if spike is None else spike.volume)
        if added > flask.volume * (1 + 1e-9):
            raise t.error(f"flask {k}: the portion and the addition ({added * 1e6:g} mL) do not fit in the "
                          f"{flask.volume * 1e6:g} mL flask", "spike_volumes",
                          fix="use smaller volumes or a larger flask under made_up_to")
    dims = concentration_dims(standard)
    unit = unit_of(t, "unit", dims) if t.has("unit") else default_unit
    if unit is None or unit.dims != dims:
        raise t.error("the standard's concentration and the unit to show the result in differ in dimension",
                      "unit", fix='give unit = "..." of the standard solution\'s kind, e.g. "mg/L" or "µmol/L"')
    return StandardAddition(name, t.text("description", "") or "", portion, standard, spikes, flask, unit)


def _spikes(t: Table, items: dict) -> tuple[Delivery | None, ...]:
    raw = t.require("spike_volumes", fix='e.g. spike_volumes = ["0 mL", "1.00 mL", "2.00 mL", "3.00 mL"]')
    if not isinstance(raw, list) or not raw or not all(isinstance(v, str) for v in raw):
        raise t.error("expected a list of volumes", "spike_volumes",
                      fix='e.g. spike_volumes = ["0 mL", "1.00 mL", "2.00 mL", "3.00 mL"]')
    item = t.required_text("spike_item")
    parse_delivery(item, t, "spike_item", items, PIPETTES)  # the item's kind, before its volumes
    spikes = tuple(_spike(t, item, v, items) for v in raw)
    if all(d is None for d in spikes):
        raise t.error("every volume is 0 mL: no flask has an addition, so there is no line to extrapolate",
                      "spike_volumes", fix="add the standard in increasing volumes, e.g. 0, 1, 2 and 3 mL")
    distinct = {0.0 if d is None else round(d.volume * 1e12) for d in spikes}
    if len(distinct) < MIN_LEVELS:
        raise t.error(f"{len(distinct)} different addition level(s); standard addition needs at least "
                      f"{MIN_LEVELS}", "spike_volumes",
                      fix="add at least three different volumes (for example none, 1x, 2x and 3x the amount "
                          "expected in the portion)")
    return spikes


def _spike(t: Table, item: str, volume: str, items: dict) -> Delivery | None:
    one = Table({"spike_volumes": volume}, t.file, t.where)  # errors name the key as written
    v, _ = one.quantity("spike_volumes", (0, 3, 0, 0), positive=False)
    if v < 0:
        raise t.error(f"a negative addition ({volume})", "spike_volumes", fix="give volumes of 0 mL or more")
    if v == 0:
        return None
    return parse_delivery({"item": item, "volume": volume}, t, "spike_volumes", items, PIPETTES)


def check_addition_readings(additions: tuple[StandardAddition, ...], readings: dict, path) -> None:
    """Every flask of every standard addition has readings."""
    for add in additions:
        missing = [r for r in add.reading_ids() if r not in readings]
        if missing:
            raise InputError(f"standard addition `{add.id}`: no readings for {', '.join(missing)}", file=path,
                             fix=f"add rows `{missing[0]},<absorbance>`: flask k of [{SECTION}.{add.id}] is "
                                 f"read as {add.id}.k, in the order of spike_volumes")
