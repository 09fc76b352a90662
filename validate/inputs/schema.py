"""Validated objects read from a method file. Values are SI; units kept for display.

A method is one of two kinds: an assay (`AssayMethod`: calibration, samples, quantities and a
result formula) or a complex-formation study (`EquilibriumMethod`); the parts both share are in
`MethodCommon`. Equipment items and solutions have a class per kind (validate.inputs.items,
validate.inputs.solutions).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import ClassVar, TypeVar

from validate.inputs.addition_section import StandardAddition
from validate.inputs.formula import Formula
from validate.inputs.items import ITEM_KINDS, VOLUMETRIC, Item, ItemCommon, kind_names
from validate.inputs.routine_section import RoutineSettings
from validate.inputs.solutions import SOLUTION_KINDS, Blank, Certified, Diluted, Solution, Weighed
from validate.inputs.units import Unit
from validate.inputs.values import Delivery, UncertainValue

VOLUMETRIC_KINDS = kind_names(VOLUMETRIC)
EQUIPMENT_KINDS = tuple(ITEM_KINDS)
SOLUTION_ORIGINS = tuple(SOLUTION_KINDS)
MASS_CONCENTRATION = (1, -3, 0, 0)
AMOUNT_CONCENTRATION = (0, -3, 1, 0)

K = TypeVar("K", bound=ItemCommon)


@dataclass(frozen=True)
class Calibration:
    standards: tuple[str, ...]
    blanks: tuple[str, ...]
    blanks_in_fit: bool
    readings_file: str
    cuvette: str | None
    photometer: str | None
    concentration_unit: Unit
    weighting: str = "none"  # "none", "variance-function" (s = a + b c) or "inverse-variance" (1/s_j^2)
    function: str = "straight line"  # calibration function: "straight line" or "second order" (ISO 8466-2)


@dataclass(frozen=True)
class Sample:
    id: str
    description: str = ""


@dataclass(frozen=True)
class NamedQuantity:
    name: str
    value: UncertainValue | None = None
    delivery: Delivery | None = None  # a volume delivered by an item, one use per sample
    step: str = ""


@dataclass(frozen=True)
class ResultSpec:
    name: str
    unit: Unit
    formula: Formula


@dataclass(frozen=True)
class Settings:
    coverage_probability: float = 0.95
    scatter: str = "observed"
    glassware_distribution: str = "triangular"
    temperature_range: float = 3.0  # K, half-width of a rectangular distribution
    expansion_coefficient: float = 2.1e-4  # per K
    shared_temperature: bool = True
    registers: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {
            "coverage_probability": self.coverage_probability,
            "scatter": self.scatter,
            "glassware_distribution": self.glassware_distribution,
            "temperature_range_K": self.temperature_range,
            "expansion_coefficient_per_K": self.expansion_coefficient,
            "shared_temperature": self.shared_temperature,
            "registers": list(self.registers),
        }


@dataclass(frozen=True)
class ValidationSettings:
    """How the method is validated: the declared limit route, test levels, the
    absorbance window, a reference sample for trueness and the acceptance criteria."""

    declared_limit: str = "ich_residual_sd"
    alpha: float = 0.05
    beta: float = 0.05
    window: tuple[float, float] = (0.1, 1.0)
    reference_sample: str | None = None
    reference_value: UncertainValue | None = None
    acceptance: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        ref = self.reference_value
        return {"declared_limit": self.declared_limit, "alpha": self.alpha, "beta": self.beta,
                "absorbance_window": list(self.window), "reference_sample": self.reference_sample,
                "reference_value": None if ref is None else ref.value / ref.unit.factor,
                "reference_standard_uncertainty": None if ref is None else ref.u / ref.unit.factor,
                "reference_unit": None if ref is None else ref.unit.text,
                "acceptance": {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.acceptance.items()}}


@dataclass(frozen=True)
class EquilibriumMix:
    """A standard or mixture: aliquots of the reagent solutions made up in a flask."""

    id: str
    parts: dict  # "metal"/"ligand" -> Delivery
    flask: Delivery
    solutions: dict  # "metal"/"ligand" -> solution id the aliquot is taken from


@dataclass(frozen=True)
class AdditionSeries:
    """Aliquots of one reagent added one after another to one vessel, read after each."""

    id: str
    start: dict  # reagent -> Delivery: the vessel's initial contents
    added: str  # "metal" or "ligand"
    aliquot: Delivery
    additions: int
    solutions: dict  # "metal"/"ligand" -> solution id

    def reading_ids(self) -> list[str]:
        return [f"{self.id}.{k}" for k in range(1, self.additions + 1)]


@dataclass(frozen=True)
class EquilibriumStudy:
    """A 1:1 complex-formation study M + L <=> ML (docs/design.md, "Equilibrium constants")."""

    metal: str  # solution ids of the reagent solutions
    ligand: str
    limiting: str  # reagent the standards are short of: "metal" or "ligand"
    standards: tuple[EquilibriumMix, ...]
    mixtures: tuple[EquilibriumMix, ...]
    series: tuple[AdditionSeries, ...]
    correction: str  # "iterate", "none"
    iterations: int
    temperature_C: float | None
    ionic_strength: float | None  # mol/m^3
    charges: tuple[int, int] | None  # of M and L, for the optional activity correction
    k_unit: Unit
    concentration_unit: Unit
    readings_file: str
    cuvette: str | None
    photometer: str | None
    # conditions (validate/inputs/equilibrium_file.py): the counter-ions of the metal salt and the
    # ligand salt, the background medium's ionic strength (mol/m^3) and the reaction enthalpy with
    # its standard uncertainty (J/mol)
    counter_charges: tuple[int, int] | None = None
    medium_ionic_strength: float | None = None
    reaction_enthalpy: tuple[float, float] | None = None

    def point_ids(self) -> list[str]:
        return [m.id for m in self.mixtures] + [r for s in self.series for r in s.reading_ids()]


@dataclass(frozen=True, kw_only=True)
class MethodCommon:
    """What every method file holds, whichever its kind."""

    kind: ClassVar[str]
    path: str
    title: str
    measurand: str
    scope: str
    settings: Settings
    items: dict[str, Item]
    solutions: dict[str, Solution]
    readings: dict[str, tuple[float, ...]] = field(default_factory=dict)
    reading_series: dict[str, tuple[str, ...]] = field(default_factory=dict)  # optional day/analyst labels
    # optional preparation labels: independent preparations recorded under one solution id
    reading_preparations: dict[str, tuple[str, ...]] = field(default_factory=dict)
    input_files: tuple[str, ...] = ()
    defaults_shown: tuple[str, ...] = ()  # every default the loader applied, in plain words
    notes: tuple[str, ...] = ()  # warnings about the input that do not stop the run
    registers_used: tuple[str, ...] = ()
    validation: ValidationSettings = field(default_factory=ValidationSettings)

    def concentration_dims(self, solution_id: str) -> tuple[int, ...]:
        """Dimension of a solution's concentration (mass or amount per volume)."""
        return concentration_dims(self.solutions, solution_id, self.blank_dims())

    def blank_dims(self) -> tuple[int, ...]:
        """A blank's concentration is zero; its dimension is that of the solutions read with it."""
        return AMOUNT_CONCENTRATION

    def item_of(self, item_id: str, kind: type[K]) -> K:
        """The item named, of the kind the loader checked it to be."""
        item = self.items[item_id]
        if not isinstance(item, kind):
            raise TypeError(f"`{item_id}` is a {item.kind}, not a {kind.kind}")
        return item


@dataclass(frozen=True, kw_only=True)
class AssayMethod(MethodCommon):
    """An assay: solutions read against a calibration line (or made up alone), a result formula."""

    kind: ClassVar[str] = "assay"
    calibration: Calibration | None  # None: a result from the preparation and quantities alone
    samples: tuple[Sample, ...]
    quantities: dict[str, NamedQuantity]
    result: ResultSpec
    routine: RoutineSettings | None = None  # [routine_uncertainty]: data for the top-down route
    additions: tuple[StandardAddition, ...] = ()  # [additions]: samples measured by standard addition

    def blank_dims(self) -> tuple[int, ...]:
        return self.calibration.concentration_unit.dims if self.calibration else AMOUNT_CONCENTRATION

    @property
    def equilibrium(self) -> None:
        """An assay has no equilibrium study (read by the record and the command line)."""
        return None


@dataclass(frozen=True, kw_only=True)
class EquilibriumMethod(MethodCommon):
    """A 1:1 complex-formation study."""

    kind: ClassVar[str] = "equilibrium study"
    equilibrium: EquilibriumStudy

    @property
    def calibration(self) -> None:
        """A study has no assay calibration (read by the record): its standards are in the study."""
        return None

    @property
    def result(self) -> None:
        """A study has no result formula (read by the record): it reports K."""
        return None

    @property
    def samples(self) -> tuple[Sample, ...]:
        """A study reads no assay samples (read by the record): its points are in the study."""
        return ()


Method = AssayMethod | EquilibriumMethod


def concentration_dims(solutions: dict[str, Solution], solution_id: str,
                       blank: tuple[int, ...] = AMOUNT_CONCENTRATION) -> tuple[int, ...]:
    """Dimension of a solution's concentration, followed back through its dilutions."""
    match solutions[solution_id]:
        case Weighed(molar_mass=None):
            return MASS_CONCENTRATION
        case Weighed():
            return AMOUNT_CONCENTRATION
        case Certified(concentration=concentration):
            return concentration.unit.dims
        case Diluted(parent=parent):
            return concentration_dims(solutions, parent, blank)
        case Blank():
            return blank
