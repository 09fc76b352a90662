"""Validated objects read from a method file. Values are SI; units kept for display."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from validate.inputs.units import Unit

VOLUMETRIC_KINDS = ("one-mark pipette", "graduated pipette", "piston pipette", "burette",
                    "volumetric flask")
EQUIPMENT_KINDS = VOLUMETRIC_KINDS + ("cuvette", "photometer", "balance")
SOLUTION_ORIGINS = ("weighing", "certificate", "dilution", "blank")
DISTRIBUTIONS = ("normal", "rectangular", "triangular", "t", "trapezoid")


@dataclass(frozen=True)
class UncertainValue:
    """A number with its standard uncertainty and distribution, in SI."""

    value: float
    unit: Unit
    u: float = 0.0
    distribution: str = "normal"
    dof: float = math.inf
    provenance: str = ""
    kind: str = "B"
    trapezoid_d: float = 0.0


@dataclass(frozen=True)
class Item:
    """One equipment item; tolerances resolved from a register or the method file."""

    id: str
    kind: str
    item_class: str
    nominal: float | None = None  # m^3 for volumetric items
    tolerance: float = 0.0  # maximum permissible error, SI
    repeatability: float = 0.0  # standard deviation per use, SI
    distribution: str = "triangular"  # of the calibration offset
    reading: float = 0.0  # burette: half-width of one reading, SI
    path: float | None = None  # cuvette: m
    offset: float = 0.0  # photometer: absorbance half-width
    noise: float = 0.0  # photometer: absorbance standard deviation per reading
    linearity: float = 0.0  # balance: kg half-width
    provenance: str = ""
    defaults_used: tuple[str, ...] = ()  # plain-words notes on defaults applied


@dataclass(frozen=True)
class Delivery:
    """A volume delivered (or a flask filled) by one item in one step."""

    item: str
    volume: float  # selected volume, m^3


@dataclass(frozen=True)
class Solution:
    id: str
    made_by: str
    mass: UncertainValue | None = None
    balance: str | None = None
    purity: UncertainValue | None = None
    molar_mass: UncertainValue | None = None
    concentration: UncertainValue | None = None  # certificate
    parent: str | None = None
    aliquot: Delivery | None = None
    flask: Delivery | None = None
    description: str = ""


@dataclass(frozen=True)
class Calibration:
    standards: tuple[str, ...]
    blanks: tuple[str, ...]
    blanks_in_fit: bool
    readings_file: str
    cuvette: str | None
    photometer: str | None
    concentration_unit: Unit
    weighting: str = "none"  # "none" or "inverse-variance" (1/s^2 of each level's replicates)


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
    formula: object  # validate.inputs.formula.Formula


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

    def point_ids(self) -> list[str]:
        return [m.id for m in self.mixtures] + [r for s in self.series for r in s.reading_ids()]


@dataclass(frozen=True)
class Method:
    path: str
    title: str
    measurand: str
    scope: str
    settings: Settings
    items: dict[str, Item]
    solutions: dict[str, Solution]
    calibration: Calibration | None
    samples: tuple[Sample, ...]
    quantities: dict[str, NamedQuantity]
    result: ResultSpec
    readings: dict[str, tuple[float, ...]] = field(default_factory=dict)
    reading_series: dict[str, tuple[str, ...]] = field(default_factory=dict)  # optional day/analyst labels
    input_files: tuple[str, ...] = ()
    defaults_shown: tuple[str, ...] = ()  # every default the loader applied, in plain words
    notes: tuple[str, ...] = ()  # warnings about the input that do not stop the run
    registers_used: tuple[str, ...] = ()
    validation: ValidationSettings = field(default_factory=ValidationSettings)
    equilibrium: EquilibriumStudy | None = None

    def concentration_dims(self, solution_id: str) -> tuple[int, ...]:
        """Dimension of a solution's concentration (mass or amount per volume)."""
        sol = self.solutions[solution_id]
        if sol.made_by == "weighing":
            return (0, -3, 1, 0) if sol.molar_mass is not None else (1, -3, 0, 0)
        if sol.made_by == "certificate":
            return sol.concentration.unit.dims
        if sol.made_by == "dilution":
            return self.concentration_dims(sol.parent)
        return self.calibration.concentration_unit.dims if self.calibration else (0, -3, 1, 0)
