"""The [routine_uncertainty] section of a method file: the data for the method's uncertainty
for routine use (top-down), beside the within-run budget (bottom-up).

    [routine_uncertainty]
    controls = ["control_water"]     # samples read in two or more series (the readings' series column)
    bias_treatment = "included"      # or "corrected"
    readings_per_result = 3          # optional: readings averaged into one routine result

    [routine_uncertainty.reference_materials.low_reference]   # a sample of [samples]
    value = "0.080 mg/L"
    expanded_uncertainty = "0.004 mg/L"
    coverage_factor = 2
    provenance = "certificate ..."

    [routine_uncertainty.spikes.river_spiked]   # a sample of [samples]: the base sample plus a spike
    base = "river_upstream"                     # the same sample, unspiked
    solution = "intermediate"                   # the spike solution, one of [solutions]
    aliquot = { item = "burette_25", volume = "1.00 mL" }   # the added amount, through an item
    made_up_to = "flask_50"                     # the volume the spike ends up in (the measured solution)

    [routine_uncertainty.interlaboratory.round_3]   # a proficiency-test round
    assigned_value = { value = "0.250 mg/L", u = "0.004 mg/L", provenance = "scheme report ..." }
    our_result = "0.246 mg/L"

The reference sample of [validation] counts as a reference material too, unless listed here.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from validate.inputs.errors import InputError
from validate.inputs.items import FLASKS, VOLUMETRIC
from validate.inputs.tables import Table, parse_delivery, parse_uncertain
from validate.inputs.values import Delivery, UncertainValue

SECTION = "routine_uncertainty"
TREATMENTS = ("included", "corrected")


@dataclass(frozen=True)
class ReferenceMaterial:
    sample: str
    value: UncertainValue  # in the result's unit dimension, SI inside


@dataclass(frozen=True)
class Spike:
    """A sample spiked with a known amount: `sample` is the spiked one, `base` the same unspiked."""

    sample: str
    base: str
    solution: str
    aliquot: Delivery
    made_up_to: Delivery


@dataclass(frozen=True)
class InterlabResult:
    """Our result in an interlaboratory comparison against the round's assigned value (SI)."""

    name: str
    assigned: UncertainValue
    ours: float


@dataclass(frozen=True)
class RoutineSettings:
    """What the method file says about the method's uncertainty for routine use."""

    controls: tuple[str, ...]
    reference_materials: tuple[ReferenceMaterial, ...]
    bias_treatment: str = "included"
    readings_per_result: float | None = None  # None: the readings of one series (n0)
    spikes: tuple[Spike, ...] = ()
    interlaboratory: tuple[InterlabResult, ...] = ()

    def to_dict(self) -> dict:
        return {"controls": list(self.controls), "bias_treatment": self.bias_treatment,
                "readings_per_result": self.readings_per_result,
                "reference_materials": [{"sample": r.sample, "value": r.value.value / r.value.unit.factor,
                                         "standard_uncertainty": r.value.u / r.value.unit.factor,
                                         "unit": r.value.unit.text, "provenance": r.value.provenance}
                                        for r in self.reference_materials],
                "spikes": [{"sample": k.sample, "base": k.base, "solution": k.solution} for k in self.spikes],
                "interlaboratory": [r.name for r in self.interlaboratory]}


def parse_routine(top: Table, sample_ids: list[str], series: dict[str, tuple[str, ...]],
                  readings_path: Path | None, result_dims, defaults: list[str], *, items=None,
                  solutions=None, reads_samples: bool = True) -> RoutineSettings | None:
    """The section checked against the samples, equipment, solutions and the readings table's
    series labels. `reads_samples`: the result formula reads samples off the line (c_measured)."""
    if not top.has(SECTION):
        return None
    t = top.sub(SECTION)
    t.allow("controls", "bias_treatment", "readings_per_result", "reference_materials", "spikes",
            "interlaboratory")
    if not reads_samples:
        raise t.error("the result formula reads no sample off the line (it has no c_measured)", None,
                      fix="the method's uncertainty for routine use needs a result per sample: use c_measured "
                          "in [result] formula, or leave out [routine_uncertainty]")
    controls = _controls(t, sample_ids)
    for control in controls:
        check_control_series(control, series.get(control, ()), readings_path)
    treatment = t.choice("bias_treatment", "included", TREATMENTS,
                         'use "included" (the bias counts in U) or "corrected" (results are corrected for it)')
    if not t.has("bias_treatment"):
        defaults.append("default: the bias found against reference materials is included in the routine U "
                        "(bias_treatment = \"included\")")
    m = t.number("readings_per_result", None, low=0, high=1001)
    if m is not None and m < 1:
        raise t.error(f"{m:g} readings cannot make a result", "readings_per_result",
                      fix="give the number of readings averaged into one routine result, 1 or more")
    names = list(t.named_tables("reference_materials"))
    refs = t.sub("reference_materials") if names else t
    references = tuple(_reference(name, refs, sample_ids, result_dims) for name in names)
    spikes = tuple(_spike(name, Table(raw, t.file, f"[{SECTION}.spikes.{name}]"), sample_ids, items or {},
                          solutions or {})
                   for name, raw in t.named_tables("spikes").items())
    rounds = tuple(_interlab(name, Table(raw, t.file, f"[{SECTION}.interlaboratory.{name}]"), result_dims)
                   for name, raw in t.named_tables("interlaboratory").items())
    return RoutineSettings(controls, references, treatment, m, spikes, rounds)


def _interlab(name: str, t: Table, result_dims) -> InterlabResult:
    t.allow("assigned_value", "our_result")
    assigned = t.uncertain("assigned_value", result_dims)
    if not assigned.u > 0:
        raise t.error("the assigned value has no uncertainty", "assigned_value",
                      fix='give its standard uncertainty from the scheme\'s report, e.g. u = "0.004 mg/L"')
    if not assigned.provenance:
        raise t.error("the assigned value has no provenance", "assigned_value",
                      fix='say which scheme and round, e.g. provenance = "scheme X, round 3"')
    ours, _ = t.quantity("our_result", result_dims)
    return InterlabResult(name, assigned, ours)


def _spike(name: str, t: Table, sample_ids: list[str], items: dict, solutions: dict) -> Spike:
    t.allow("base", "solution", "aliquot", "made_up_to")
    if name not in sample_ids:
        raise t.error(f"`{name}` is not one of the [samples]", None,
                      fix="name each spike after the [samples] entry that holds the spiked sample's readings")
    base = t.required_text("base")
    if base not in sample_ids or base == name:
        raise t.error(f"`{base}` is not another of the [samples]", "base",
                      fix="name the same sample, unspiked, as read in the readings table")
    solution = t.required_text("solution")
    if solution not in solutions:
        raise t.error(f"`{solution}` is not one of the [solutions]", "solution",
                      fix=f"use one of: {', '.join(solutions) or '(no solutions defined)'}")
    fix = 'e.g. aliquot = { item = "burette_25", volume = "1.00 mL" }: the added amount, through an item'
    aliquot = parse_delivery(t.require("aliquot", fix=fix), t, "aliquot", items, VOLUMETRIC)
    made_up_to = parse_delivery(t.require("made_up_to", fix='e.g. made_up_to = "flask_50"'), t, "made_up_to",
                                items, FLASKS)
    return Spike(name, base, solution, aliquot, made_up_to)


def _controls(t: Table, sample_ids: list[str]) -> tuple[str, ...]:
    raw = t.get("controls")
    if not isinstance(raw, list) or not raw or not all(isinstance(c, str) for c in raw):
        raise t.error("expected a list of sample ids read in two or more series", "controls",
                      fix='e.g. controls = ["control_water"], naming samples of [samples]')
    unknown = [c for c in raw if c not in sample_ids]
    if unknown:
        raise t.error(f"{', '.join(unknown)} is not one of the [samples]", "controls",
                      fix=f"use one of: {', '.join(sample_ids) or '(no samples defined)'}")
    return tuple(dict.fromkeys(raw))


def check_control_series(control: str, labels: tuple[str, ...], path: Path | None) -> None:
    """A control needs series labels, two or more series, and two or more readings in each."""
    fix_read = "read the control at least twice in each series, on two or more series (days, analysts)"
    if not labels:
        raise InputError(f"the control `{control}` has no series labels", file=path,
                         where=f"rows of `{control}`",
                         fix="add a `series` column to the readings table naming the day, analyst or "
                             "reagent lot of every reading")
    counts = {label: labels.count(label) for label in dict.fromkeys(labels)}
    if len(counts) < 2:
        raise InputError(f"the control `{control}` was read in one series only ({next(iter(counts))})",
                         file=path, where=f"rows of `{control}`", fix=fix_read)
    single = [label for label, n in counts.items() if n < 2]
    if single:
        raise InputError(f"series {', '.join(repr(s) for s in single)} of the control `{control}` has one "
                         "reading only", file=path, where=f"rows of `{control}`",
                         fix="check the label for a typing error (it must match the other rows of that "
                             "series exactly), or " + fix_read)


def _reference(name: str, refs: Table, sample_ids: list[str], result_dims) -> ReferenceMaterial:
    if name not in sample_ids:
        raise refs.error(f"`{name}` is not one of the [samples]", name,
                         fix="name each reference material after the sample that holds its readings")
    value = parse_uncertain(refs.get(name), refs, name, result_dims, True)
    if not value.u > 0:
        raise refs.error("the reference value has no uncertainty", name,
                         fix="give the certificate's expanded_uncertainty and coverage_factor (or u)")
    if not value.provenance:
        raise refs.error("the reference value has no provenance", name,
                         fix='say where it comes from, e.g. provenance = "certificate, lot 123"')
    return ReferenceMaterial(name, value)
