"""The record's blocks made by other stages: validation, equilibrium study and advice.

Those stages hand their blocks over as plain dicts; the record takes them in with `from_dict`,
which checks them against these declarations key by key. Each block is declared fully at its
first level and deeper where its parts have one fixed shape; parts whose keys vary with the
method (a test's details, the detection-limit routes) are kept as JSON objects (`Any`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from validate.record.tree import RecordPart, described, omitted_when_none

Number = float | None  # null where the value is not defined (or not finite)
JsonObject = dict[str, Any]


@dataclass(frozen=True, kw_only=True)
class ValidationSettingsEntry(RecordPart):
    declared_limit: str
    alpha: float
    beta: float
    absorbance_window: tuple[float, ...]
    reference_sample: str | None
    reference_value: Number
    reference_standard_uncertainty: Number
    reference_unit: str | None
    acceptance: JsonObject = described("acceptance criteria set in the method file")


@dataclass(frozen=True, kw_only=True)
class LineTest(RecordPart):
    """One hypothesis test on the calibration line."""

    name: str
    evaluable: bool
    statistic: Number
    dof: tuple[float, ...]
    p_value: Number
    critical_value: Number
    alpha: float
    significant: bool | None
    verdict: str
    source: str
    details: JsonObject


@dataclass(frozen=True, kw_only=True)
class LineWeighting(RecordPart):
    used: str
    why: str


@dataclass(frozen=True, kw_only=True)
class SampleEstimate(RecordPart):
    """A sample read off the fitted line (inverse prediction), with its range flags."""

    concentration: Number
    standard_uncertainty: Number
    readings: tuple[float, ...]
    flags: tuple[str, ...]


@dataclass(frozen=True, kw_only=True)
class Criterion(RecordPart):
    key: str
    name: str
    comparison: str
    limit: float | tuple[float, ...] | None
    observed: Number
    met: bool | None = described("null: not set or not evaluable")
    unit: str
    source: str
    is_default: bool
    status: str


@dataclass(frozen=True, kw_only=True)
class CriteriaBlock(RecordPart):
    criteria: tuple[Criterion, ...]
    defaults: JsonObject
    all_met: bool | None = described("null: nothing could be evaluated")
    caution: str


@dataclass(frozen=True, kw_only=True)
class ValidationBlock(RecordPart):
    """The method's calibration judged as a method (validate.validation.block)."""

    fit: JsonObject
    points: JsonObject
    lack_of_fit: LineTest
    mandel: LineTest
    runs: LineTest
    intercept: LineTest
    weighting: LineTest
    sensitivity: JsonObject
    molar_absorptivity: JsonObject | None
    limits: JsonObject
    window: JsonObject
    max_abs_relative_residual_percent: Number
    min_linearity_p_value: Number
    lowest_standard: float
    highest_standard: float
    notes: tuple[str, ...]
    settings: ValidationSettingsEntry
    line_weighting: LineWeighting
    concentration_unit: str
    samples: dict[str, SampleEstimate]
    range_flags: dict[str, tuple[str, ...]]
    window_flags: JsonObject
    repeatability: JsonObject | None
    trueness: JsonObject | None
    scatter_consistency: JsonObject | None
    criteria: CriteriaBlock
    intermediate_precision: dict[str, JsonObject] | None = omitted_when_none(
        "per sample read in two or more series (ISO 5725-3); left out for an equilibrium study")


@dataclass(frozen=True, kw_only=True)
class Conditions(RecordPart):
    temperature_C: Number
    ionic_strength_mol_per_L: Number
    charges: tuple[int, ...] | None
    note: str


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
class CombinedK(RecordPart):
    K: float
    standard_uncertainty: float
    expanded_uncertainty: float
    coverage_factor: float
    coverage_probability: float
    interval: tuple[float, ...] | None
    shortest_interval: tuple[float, ...] | None
    agrees_with_gum: bool | None
    weights: tuple[float, ...] = described("generalised least-squares weights of the points' K")
    consistency: JsonObject | None


@dataclass(frozen=True, kw_only=True)
class Log10K(RecordPart):
    value: float
    standard_uncertainty: float
    expanded_uncertainty: float
    interval: tuple[float, ...] | None


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
    complete_complexation_bias: JsonObject
    covariance: tuple[tuple[float, ...], ...] = described("covariance of the points' K, in k_unit squared")
    joint_fit: JsonObject | None = omitted_when_none("left out when not attempted")
    trend: JsonObject | None = omitted_when_none("left out with fewer than three points")
    activity_estimate: JsonObject | None = omitted_when_none("left out without charges and ionic strength")


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
