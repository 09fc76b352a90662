"""The record's traceability block: from the weighed masses and the equipment to the readings.

It holds what a reader needs to recompute a standard's concentration and a sample's result by
hand: how every solution was made (what was measured out, with which item, into which flask)
and the concentration this gives with its standard uncertainty; the standards' assigned
concentrations and every reading with its series; the samples' readings; the quantities of the
result formula; the equipment's register values with their source; and, for an equilibrium
study, the reagent totals of every standard and point. Built by validate.record.traceability.
"""

from __future__ import annotations

from dataclasses import dataclass

from validate.record.tree import RecordPart, described


@dataclass(frozen=True, kw_only=True)
class MeasuredAmount(RecordPart):
    """One thing measured out or stated in making a solution (a mass, a purity, an aliquot)."""

    what: str = described("mass, purity, molar mass, certified concentration or 'aliquot of <solution>'")
    value: float = described("in `unit`")
    unit: str
    standard_uncertainty: float | None = described("as stated in the method file, in `unit`; null where the "
                                                   "item's register gives it (see equipment)")
    item: str = described("the equipment item used (a balance, a pipette, a burette); empty for a stated value")


@dataclass(frozen=True, kw_only=True)
class PreparedSolution(RecordPart):
    """One solution of the method, in preparation order (every parent before its dilutions)."""

    id: str
    made_by: str = described("weighing, certificate, dilution or blank")
    description: str
    made_from: str | None = described("the solution an aliquot was taken from; null when made from scratch")
    amounts: tuple[MeasuredAmount, ...]
    flask: str = described("the flask it was made up in; empty when none")
    volume: float | None = described("the flask's volume, mL; null when none")
    concentration: float = described("at the estimates of the inputs, in `unit`")
    standard_uncertainty: float = described("GUM, in `unit`, from every source the model gives the solution")
    unit: str


@dataclass(frozen=True, kw_only=True)
class Reading(RecordPart):
    absorbance: float
    series: str | None = described("the series label of the readings table (a day, an analyst); null: none")


@dataclass(frozen=True, kw_only=True)
class ReadSolutionEntry(RecordPart):
    """A standard, blank, sample or point with its readings; standards with their assigned value."""

    id: str
    role: str = described("standard, blank, sample, mixture or series point")
    concentration: float | None = described("assigned concentration (standards and blanks; of the limiting "
                                            "reagent in an equilibrium study), in the block's unit")
    standard_uncertainty: float | None
    readings: tuple[Reading, ...]


@dataclass(frozen=True, kw_only=True)
class FormulaQuantity(RecordPart):
    """A quantity of the result formula besides the concentration read off the line."""

    name: str
    value: float = described("in `unit`")
    unit: str
    standard_uncertainty: float | None = described("as stated; null where the item's register gives it")
    item: str = described("the item delivering the volume; empty for a stated value")


@dataclass(frozen=True, kw_only=True)
class ItemValue(RecordPart):
    name: str
    value: float | str
    unit: str


@dataclass(frozen=True, kw_only=True)
class EquipmentValues(RecordPart):
    """An item's class and the values the model takes from its register or the method file."""

    id: str
    kind: str
    item_class: str = described("class or grade of the item", key="class")
    values: tuple[ItemValue, ...]
    source: str = described("register title, standard and confidence, or the method file")


@dataclass(frozen=True, kw_only=True)
class ReagentTotals(RecordPart):
    """Totals of metal and ligand in a standard, mixture or series point of an equilibrium study."""

    id: str
    role: str = described("standard, mixture or series point")
    amounts: tuple[MeasuredAmount, ...] = described("the aliquots of the reagent solutions it holds")
    flask: str = described("the flask it was made up in; empty for a series point (the vessel holds the "
                           "start aliquots and the additions)")
    volume: float | None = described("the flask's volume, mL; null for a series point")
    M_total: float = described("in the block's unit")
    u_M_total: float
    L_total: float
    u_L_total: float


@dataclass(frozen=True, kw_only=True)
class TraceabilityBlock(RecordPart):
    concentration_unit: str
    solutions: tuple[PreparedSolution, ...]
    standards: tuple[ReadSolutionEntry, ...] = described("the line's standards and blanks, in fit order")
    samples: tuple[ReadSolutionEntry, ...] = described("samples (assay) or mixtures and series points (study)")
    quantities: tuple[FormulaQuantity, ...]
    equipment: tuple[EquipmentValues, ...]
    totals: tuple[ReagentTotals, ...] = described("equilibrium study: totals of every standard and point")
