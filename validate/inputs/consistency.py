"""Cross-checks between the sections of a method file and its readings.

Ids that clash, and calibration data that cannot give a Beer-Lambert line:
too few distinct concentrations, or an absorbance that falls as the
concentration rises. The standards' nominal concentrations are computed here
from the preparation steps alone (no uncertainty); the model recomputes them
with every source of uncertainty.
"""

from __future__ import annotations

from validate.inputs import schema as S
from validate.inputs.errors import InputError

MIN_LEVELS = 3  # distinct concentrations for a line with a residual scatter (n - 2 >= 1)


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


def nominal_concentrations(solutions: dict) -> dict[str, float]:
    """Each solution's concentration (SI) at the stated values, with no uncertainty."""
    conc: dict[str, float] = {}

    def of(sol_id: str) -> float:
        if sol_id not in conc:
            sol = solutions[sol_id]
            if sol.made_by == "blank":
                value = 0.0
            elif sol.made_by == "certificate":
                value = sol.concentration.value
            elif sol.made_by == "dilution":
                value = of(sol.parent) * sol.aliquot.volume / sol.flask.volume
            else:
                value = sol.mass.value * (sol.purity.value if sol.purity else 1.0) / sol.flask.volume
                value = value / sol.molar_mass.value if sol.molar_mass else value
            conc[sol_id] = value
        return conc[sol_id]

    for sol_id in solutions:
        of(sol_id)
    return conc


def check_calibration_data(cal: S.Calibration, solutions: dict, readings: dict, path, readings_path) -> None:
    """At least MIN_LEVELS distinct concentrations (InputError, exit 2), and a line that
    rises with concentration (a data problem: ModelError, exit 3)."""
    from validate.calibration import fit_line
    from validate.model import ModelError

    ids = list(cal.standards) + (list(cal.blanks) if cal.blanks_in_fit else [])
    conc = nominal_concentrations(solutions)
    unit = cal.concentration_unit
    levels = sorted({float(f"{conc[i] / unit.factor:.9g}") for i in ids})  # equal to 9 digits
    if len(levels) < MIN_LEVELS:
        shown = ", ".join(f"{x:g}" for x in levels)
        raise InputError(f"the calibration points have only {len(levels)} distinct concentration(s) "
                         f"({shown} {unit.text}); a line needs at least {MIN_LEVELS}", file=path,
                         where="[calibration].standards",
                         fix="prepare the standards at different concentrations (5 to 7 levels over the "
                             "working range is common practice)")
    xs = [conc[i] / unit.factor for i in ids for _ in readings[i]]
    ys = [a for i in ids for a in readings[i]]
    slope = fit_line(xs, ys).slope
    if not slope > 0:
        raise ModelError(
            f"{readings_path}, readings of the standards: the absorbance falls as the concentration rises "
            f"(fitted slope {slope:.3g} absorbance per {unit.text}); a Beer-Lambert calibration line rises, "
            f"so no result is reported\n  what to do: check that every reading is under the right id "
            f"(rows swapped between standards?) and that the preparation of the standards in {path} "
            f"matches the solutions measured; methods read as a loss of absorbance are not supported")
