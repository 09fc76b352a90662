"""The record's blocks made by the equilibrium and advice stages (validation: blocks_validation).

Those stages hand their blocks over as plain dicts; the record takes them in with `from_dict`,
which checks them against these declarations key by key. Each block is declared fully at its
first level and deeper where its parts have one fixed shape; parts whose keys vary (a test's
details, an advice's details) are kept as JSON objects (`Any`).
"""

from __future__ import annotations

from dataclasses import dataclass

from validate.record.blocks_validation import Unavailable
from validate.record.tree import JsonObject, Number, RecordPart, described, omitted_when_none


@dataclass(frozen=True, kw_only=True)
class ActivityOnCorrection(RecordPart):
    """The correction of the standards repeated with each standard's K at its own ionic strength
    (Davies equation): an estimate, not in U(K)."""

    estimated: bool
    note: str
    relative_change_of_K: Number = omitted_when_none("K with the activity-corrected standards / K - 1")
    K: Number = omitted_when_none("K with the activity-corrected standards, in k_unit")
    K_factors_of_standards: tuple[Number, ...] | None = omitted_when_none(
        "each standard's K relative to the points' (Davies)")
    reference_ionic_strength_mol_per_L: Number = omitted_when_none("the points' mean ionic strength")
    A: Number = omitted_when_none("Debye-Hueckel A, (L/mol)^(1/2)")


@dataclass(frozen=True, kw_only=True)
class TemperatureEffect(RecordPart):
    """The laboratory temperature's effect on K (van 't Hoff), in U(K) only with an enthalpy."""

    in_U: bool
    reaction_enthalpy_kJ_per_mol: Number
    u_kJ_per_mol: Number
    relative_change_per_K: Number = described("dH/(R T^2), per K (null without an enthalpy)")
    temperature_range_K: Number
    note: str


@dataclass(frozen=True, kw_only=True)
class Conditions(RecordPart):
    temperature_C: Number
    ionic_strength_mol_per_L: Number
    charges: tuple[int, ...] | None
    note: str
    ionic_strength_standards: tuple[Number, ...] | None = described(
        "ionic strength of each standard, mol/L, from the solutions (null without the charges)")
    ionic_strength_points: tuple[Number, ...] | None = described(
        "ionic strength of each mixture and series point, mol/L (null without the charges)")
    ionic_strength_basis: str
    activity_effect_on_correction: ActivityOnCorrection
    temperature_effect: TemperatureEffect
    not_in_U: tuple[str, ...] = described("effects on K that U(K) does not hold")


@dataclass(frozen=True, kw_only=True)
class MixtureEntry(RecordPart):
    """One mixture or series point: totals, ICE table and K (concentrations in concentration_unit)."""

    saturation: Number = described("[ML] over the smaller total")
    saturation_flag: str | None
    id: str
    M_total: float
    L_total: float
    ML: float
    M_free: float
    L_free: float
    K: float
    u_K: float
    expanded_uncertainty: float
    coverage_factor: float
    interval: tuple[float, ...] | None
    shortest_interval: tuple[float, ...] | None
    invalid_trials: int | None


@dataclass(frozen=True, kw_only=True)
class Consistency(RecordPart):
    """Do the points' K agree within their uncertainties? (chi-square and Birge ratio)"""

    chi_square: Number
    dof: int
    p_value: Number
    birge_ratio: Number
    consistent: bool
    verdict: str
    source: str


@dataclass(frozen=True, kw_only=True)
class ExcludedPoint(RecordPart):
    """A point left out of the combined K: K at or below zero, or more complex than the reagent
    in deficit."""

    id: str
    reason: str
    invalid_trials: int | None = described("Monte Carlo trials of this point without a defined K (its "
                                           "statistics leave them out; null without Monte Carlo)")


@dataclass(frozen=True, kw_only=True)
class CombinedK(RecordPart):
    K: float
    standard_uncertainty: float
    expanded_uncertainty: float
    coverage_factor: float
    coverage_probability: float
    interval: tuple[float, ...] | None
    shortest_interval: tuple[float, ...] | None
    agrees_with_gum: bool | None
    weights: tuple[float, ...] = described("generalised least-squares weights of the points' K "
                                           "(0 for a point left out)")
    weights_change: Number = described("largest change of a weight in the last pass of the weights' fixed "
                                       "point (the standards are corrected with these weights; <= 1e-12 when "
                                       "settled)")
    excluded: tuple[ExcludedPoint, ...] = described(
        "points left out of the combination because their K is physically impossible, with the reason")
    consistency: Consistency | None = described("null with a single point")


@dataclass(frozen=True, kw_only=True)
class Log10K(RecordPart):
    value: float
    standard_uncertainty: float
    expanded_uncertainty: float
    interval: tuple[float, ...] | None


@dataclass(frozen=True, kw_only=True)
class ComplexationBias(RecordPart):
    """What taking the standards as fully complexed would do to the slope and to K."""

    slope: Number
    K: Number = described("naive_K / reported_K - 1; with the standards taken as fully complexed (correction "
                          "none) the reported K is the naive one: reported / corrected - 1")
    naive_K: Number
    reported_K: Number = described("the reported combined K the bias is taken against")
    fraction_complexed_in_standards: tuple[Number, ...]
    meaning: str
    iteration_converged: bool
    iterations: int


@dataclass(frozen=True, kw_only=True)
class JointFit(RecordPart):
    """K, absorptivity and intercept fitted together (a cross-check of the iteration)."""

    K: Number
    standard_uncertainty: Number
    log10K: Number
    slope_bias: Number
    K_bias: Number
    success: bool
    note: str


@dataclass(frozen=True, kw_only=True)
class TrendEntry(RecordPart):
    """A generalised least-squares line of K against a concentration: does K drift?"""

    quantity: str
    slope: Number
    slope_u: Number
    intercept: Number
    intercept_u: Number
    statistic: Number
    distribution: str
    dof: int
    p_value: Number
    chi_square: Number
    trend: bool
    alpha: Number
    message: str
    against: str


@dataclass(frozen=True, kw_only=True)
class ActivityEstimate(RecordPart):
    """The thermodynamic K estimated from the conditional K by the Davies equation; each value a
    number, or {"value", "standard_uncertainty"} where it carries an uncertainty."""

    K_thermodynamic: Number | JsonObject
    K_conditional: Number | JsonObject
    gamma_M: Number | JsonObject
    gamma_L: Number | JsonObject
    gamma_ML: Number | JsonObject
    ionic_strength: Number | JsonObject
    charges: tuple[int, ...]
    temperature_C: Number
    A: Number
    within_range: bool
    note: str


@dataclass(frozen=True, kw_only=True)
class EquilibriumBlock(RecordPart):
    """A 1:1 complex-formation study: K per point and combined (validate.equilibrium.study)."""

    conditions: Conditions
    k_unit: str
    unit: str
    concentration_unit: str
    correction: str
    limiting_reagent_in_standards: str
    mixtures: tuple[MixtureEntry, ...]
    combined: CombinedK
    log10K: Log10K
    complete_complexation_bias: ComplexationBias
    covariance: tuple[tuple[float, ...], ...] = described(
        "covariance of the points' K, in k_unit squared, without the van 't Hoff factor common to all "
        "(the GLS weights come from it; U(K) holds that factor)")
    joint_fit: JointFit | Unavailable
    trend: TrendEntry | Unavailable | None = omitted_when_none("left out with fewer than three points")
    activity_estimate: ActivityEstimate | None = omitted_when_none("left out without charges and ionic strength")


@dataclass(frozen=True, kw_only=True)
class AdviceEffect(RecordPart):
    result: str
    value: float
    expanded_uncertainty_before: float
    expanded_uncertainty_after: float
    coverage_factor_before: float
    coverage_factor_after: float
    effective_dof_before: Number
    effective_dof_after: Number


@dataclass(frozen=True, kw_only=True)
class AdviceItem(RecordPart):
    change: str
    kind: str
    target: str
    unit: str
    expanded_uncertainty_before: float
    expanded_uncertainty_after: Number = described("null: qualitative advice, not evaluated")
    reduction: Number
    cost: str
    confirmed_by_monte_carlo: Number
    assumption: str
    monte_carlo_note: str
    effects: tuple[AdviceEffect, ...]
    details: JsonObject


@dataclass(frozen=True, kw_only=True)
class AdviceBlock(RecordPart):
    """What-if advice: candidate changes to the method, ranked (validate.advisor)."""

    method: str
    ranking: str
    target: str
    unit: str
    expanded_uncertainty_before: float
    monte_carlo_before: Number
    monte_carlo_trials: int
    seed: int
    candidates_evaluated: int
    without_effect: tuple[str, ...]
    skipped: tuple[str, ...]
    sources: tuple[str, ...]
    items: tuple[AdviceItem, ...]
    combined: AdviceItem | None
