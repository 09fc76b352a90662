"""Cross-checks between the sections of a method file and its readings.

Ids that clash; the inputs taken as exact and the default way of weighing, for the
defaults shown. Whether the calibration data can give a Beer-Lambert line
needs the standards' concentrations, which only the preparation chain of the
model computes: that check is `validate.model.assay.check_calibration_data`.
"""

from __future__ import annotations

from collections.abc import Mapping

from validate.inputs.errors import InputError
from validate.inputs.schema import NamedQuantity
from validate.inputs.solutions import SINGLE_READING, Certified, Solution, Weighed
from validate.inputs.values import UncertainValue


def check_ids(samples, solutions: dict, quantities: dict, path) -> None:
    """Samples and solutions share the readings table; quantities and solutions share
    the result formula's names. The same id in both would be read ambiguously."""
    for smp in samples:
        if smp.id in solutions:
            raise InputError(f"the sample id `{smp.id}` is also a solution id; the readings table "
                             f"could not tell their readings apart", file=path, where=f"[samples.{smp.id}]",
                             fix="rename the sample, here and in the readings table")
    for name in quantities:
        if name in solutions:
            raise InputError(f"the quantity `{name}` has the name of a solution; the result formula "
                             f"could not tell them apart", file=path, where=f"[quantities.{name}]",
                             fix="rename the quantity, here and in the formula")


# ---- inputs taken as exact, and how weighings are read: shown among the defaults ----

def _exact(value: UncertainValue | None) -> bool:
    return value is not None and value.u == 0


def exact_inputs(solutions: dict[str, Solution], quantities: Mapping[str, NamedQuantity] | None = None,
                 reference_value: UncertainValue | None = None) -> list[tuple[str, str]]:
    """(what, why) of every input that enters the results as exact: stated with `exact = true`, or a
    purity not given (taken as 100 %). A bare number is refused at reading (tables.parse_uncertain),
    so nothing here is exact without the file saying so. Listed among the defaults shown by
    `validate check` and `validate run` and in the verdict's warnings."""
    found = []
    for sol in solutions.values():
        match sol:
            case Weighed():
                found += _weighed_exact(sol)
            case Certified():
                if _exact(sol.concentration):
                    found.append((f"concentration of {sol.id}", "stated as exact: no uncertainty enters the result"))
    for name, q in (quantities or {}).items():
        if q.delivery is None and _exact(q.value):
            found.append((f"{name} in [quantities]", "stated as exact: no uncertainty enters the result"))
    if _exact(reference_value):
        found.append(("reference value", "stated as exact: E_n compares with the result's uncertainty alone"))
    return found


def _weighed_exact(sol: Weighed) -> list[tuple[str, str]]:
    found = []
    if sol.purity is None:
        found.append((f"purity of {sol.id}", "no purity given: taken as 100 %, exact"))
    for label, value in (("purity", sol.purity), ("molar mass", sol.molar_mass)):
        if _exact(value):
            found.append((f"{label} of {sol.id}", "stated as exact: no uncertainty enters the result"))
    if sol.balance is None and _exact(sol.mass):
        found.append((f"mass of {sol.id}", "no balance and stated as exact"))
    return found


def exact_defaults(solutions: dict[str, Solution], quantities: Mapping[str, NamedQuantity] | None = None,
                   reference_value: UncertainValue | None = None) -> list[str]:
    """The exact inputs as lines of the defaults shown."""
    return [f"taken as exact: {what} ({why})" for what, why in exact_inputs(solutions, quantities, reference_value)]


def weighing_defaults(solutions: dict[str, Solution]) -> list[str]:
    """The default way of reading a weighed mass, shown when a solution on a balance does not state it."""
    unstated = [sol.id for sol in solutions.values()
                if isinstance(sol, Weighed) and sol.balance is not None and sol.weighing is None]
    if not unstated:
        return []
    return [f"weighed by difference ({', '.join(unstated)}): the mass is the difference of two balance "
            f"readings, tare and gross, each with the balance's repeatability and linearity (EURACHEM/CITAC "
            f"CG4, Example A2); write weighing = \"{SINGLE_READING}\" for a mass read once on a tared balance"]
