"""Cross-checks between the sections of a method file and its readings.

Ids that clash. Whether the calibration data can give a Beer-Lambert line
needs the standards' concentrations, which only the preparation chain of the
model computes: that check is `validate.model.assay.check_calibration_data`.
"""

from __future__ import annotations

from validate.inputs.errors import InputError


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
