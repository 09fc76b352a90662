"""The record's validation block: the method's calibration judged as a method.

The validation stage (validate.validation.block) hands the block over as a plain dict; the
record takes it in with `from_dict`, which checks it against these declarations key by key.
The stage writes every number that is not finite as null, so its numbers are `Number`.
Parts whose keys vary (a test's details, the acceptance criteria set) stay JSON objects.
"""

from __future__ import annotations

from dataclasses import dataclass

from validate.record.tree import JsonObject, Number, RecordPart, described, omitted_when_none


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
    met: bool | None = described("null: not set, not evaluable or not applicable")
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
class LineFitEntry(RecordPart):
    """The straight line fitted to the standards (weighted when `weighted`)."""

    slope: Number
    intercept: Number
    slope_u: Number
    intercept_u: Number
    covariance: Number = described("covariance of slope and intercept")
    residual_sd: Number
    dof: int
    n: int
    r_squared: Number
    x_mean: Number
    y_mean: Number
    sxx: Number
    rss: Number
    weighted: bool
    x: tuple[Number, ...]
    y: tuple[Number, ...]
    weights: tuple[Number, ...]


@dataclass(frozen=True, kw_only=True)
class PointDiagnosticsEntry(RecordPart):
    x: tuple[Number, ...]
    y: tuple[Number, ...]
    fitted: tuple[Number, ...]
    residuals: tuple[Number, ...]
    relative_residuals: tuple[Number, ...]
    standardised_residuals: tuple[Number, ...]
    leverage: tuple[Number, ...]
    cooks_distance: tuple[Number, ...]
    flagged: tuple[str, ...]
    source: str


@dataclass(frozen=True, kw_only=True)
class SensitivityEntry(RecordPart):
    slope: Number
    standard_uncertainty: Number
    relative_standard_uncertainty: Number
    dof: int
    source: str


@dataclass(frozen=True, kw_only=True)
class MolarAbsorptivityEntry(RecordPart):
    value: Number
    standard_uncertainty: Number
    relative_standard_uncertainty: Number
    effective_dof: Number
    path_length_cm: Number
    path_length_u: Number
    unit: str = described("L mol^-1 cm^-1 for an amount concentration; else see note")
    source: str
    note: str = described("how the slope was converted, or why not to mol/L")


@dataclass(frozen=True, kw_only=True)
class LimitRouteEntry(RecordPart):
    route: str
    sigma: Number
    sigma_dof: int | None
    lod: Number
    loq: Number
    source: str
    note: str


@dataclass(frozen=True, kw_only=True)
class Iso11843Entry(RecordPart):
    """Critical value and minimum detectable value (ISO 11843-2)."""

    critical_value_response: Number
    critical_value: Number
    minimum_detectable_value: Number
    minimum_detectable_value_exact_delta: Number
    delta: Number
    delta_exact: Number
    alpha: Number
    beta: Number
    sample_replicates: int
    dof: int
    source: str


@dataclass(frozen=True, kw_only=True)
class DetectionLimitsEntry(RecordPart):
    routes: tuple[LimitRouteEntry, ...]
    iso11843: Iso11843Entry
    declared_route: str
    lod: Number
    loq: Number
    warnings: tuple[str, ...]
    notes: tuple[str, ...]


@dataclass(frozen=True, kw_only=True)
class WindowFlagsEntry(RecordPart):
    absorbance: tuple[Number, ...]
    flags: tuple[tuple[str, ...], ...] = described("one list of flags per reading")
    low: Number
    high: Number
    inside: int
    outside: int
    source: str


@dataclass(frozen=True, kw_only=True)
class RepeatabilityEntry(RecordPart):
    mean: Number
    sd: Number
    rsd_percent: Number
    dof: int
    groups: int
    n: int
    source: str
    unit: str


@dataclass(frozen=True, kw_only=True)
class TruenessEntry(RecordPart):
    """Recovery and En number against the reference sample."""

    measured: Number
    u_measured: Number
    reference: Number
    u_reference: Number
    expanded_measured: Number = described("U_x, the result's expanded uncertainty as stated")
    expanded_reference: Number = described("U_ref, the reference's expanded uncertainty as stated")
    reference_coverage_factor: Number = described("k of the reference: its certificate's, or 2 where "
                                                  "it gives a standard uncertainty")
    recovery_percent: Number
    recovery_u_percent: Number
    en_number: Number
    satisfactory: bool
    verdict: str
    source: str


@dataclass(frozen=True, kw_only=True)
class ScatterConsistencyEntry(RecordPart):
    """The observed scatter of the line against the scatter the bottom-up budget predicts."""

    observed_sd: Number
    predicted_sd: Number
    dof: int
    chi_square: Number
    p_excess: Number
    p_deficit: Number
    alpha: Number
    verdict: str
    source: str
    compared: str = described("which observed scatter is compared with which prediction",
                              default="observed scatter against the bottom-up prediction")


@dataclass(frozen=True, kw_only=True)
class FitUnitsEntry(RecordPart):
    """What the line was fitted to (one point per preparation), the observed scatter's two
    components, and the random effects the observed scatter stands for."""

    points: str
    preparations: int
    readings: int
    levels: int
    means_sd: Number = described("residual SD of the preparations' mean readings about the line (absorbance)")
    means_dof: int
    reading_sd: Number = described("pooled SD of repeated readings of one solution (absorbance); null: "
                                   "no solution read twice")
    reading_dof: int
    preparation_sd: Number = described("preparation scatter sqrt(max(0, means_sd^2 - reading_sd^2 c)), "
                                         "c = sum((1 - h_ii)/m_i)/(N - p) with h_ii the leverage")
    covered_by_observed_scatter: tuple[str, ...] = described(
        "random effects the observed scatter stands for, left out bottom-up; empty in the bottom-up treatment")
    why: str


@dataclass(frozen=True, kw_only=True)
class Unavailable(RecordPart):
    """A part that could not be computed for these data, and why."""

    error: str


@dataclass(frozen=True, kw_only=True)
class IntermediatePrecisionEntry(RecordPart):
    """One sample read in two or more series: one-way analysis of variance (ISO 5725-3)."""

    groups: int
    n: int
    grand_mean: Number
    ms_between: Number
    ms_within: Number
    f_statistic: Number
    p_value: Number
    n0: Number = described("effective group size for unbalanced designs")
    repeatability_sd: Number
    between_group_sd: Number
    intermediate_sd: Number
    intermediate_rsd_percent: Number
    intermediate_dof: Number
    verdict: str
    source: str
    unit: str


@dataclass(frozen=True, kw_only=True)
class LimitsInUnit(RecordPart):
    """The line's limits and working range in one unit (validate.validation.reporting)."""

    unit: str
    lod: Number
    loq: Number
    working_range_low: Number = described("the lowest standard above zero")
    working_range_high: Number = described("the highest standard")
    critical_value: Number = described("ISO 11843-2 critical value x_C")
    minimum_detectable_value: Number = described("ISO 11843-2 minimum detectable value x_D")


@dataclass(frozen=True, kw_only=True)
class ReportingUnits(RecordPart):
    measuring_solution: LimitsInUnit = described("in the calibration's concentration unit")
    reported: LimitsInUnit | None = described("in the result's unit, through the result formula; null: "
                                              "not convertible (see how)")
    how: str


@dataclass(frozen=True, kw_only=True)
class ScopeEntry(RecordPart):
    """The range stated in [method] scope against the working range."""

    text: str
    low: Number = described("null: the scope states no range")
    high: Number
    unit: str | None
    applies_to: str | None = described('"sample" (the result\'s unit) or "measuring solution"')
    flags: tuple[str, ...] = described("where the scope and the working range or LOQ disagree")
    note: str


@dataclass(frozen=True, kw_only=True)
class ValidationBlock(RecordPart):
    """The method's calibration judged as a method (validate.validation.block)."""

    fit: LineFitEntry
    points: PointDiagnosticsEntry
    lack_of_fit: LineTest
    mandel: LineTest
    runs: LineTest
    intercept: LineTest
    weighting: LineTest
    sensitivity: SensitivityEntry
    molar_absorptivity: MolarAbsorptivityEntry | None
    limits: DetectionLimitsEntry
    window: WindowFlagsEntry
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
    window_flags: WindowFlagsEntry
    repeatability: RepeatabilityEntry | None
    trueness: TruenessEntry | None
    scatter_consistency: ScatterConsistencyEntry | None
    criteria: CriteriaBlock
    reading_noise_consistency: ScatterConsistencyEntry | None = omitted_when_none(
        "the pure error of repeated readings against the photometer's reading noise; left out where no "
        "solution was read twice, no noise is stated, or for an equilibrium study")
    fit_units: FitUnitsEntry | None = omitted_when_none(
        "the line's statistical units and scatter components; left out for an equilibrium study")
    intermediate_precision: dict[str, IntermediatePrecisionEntry | Unavailable] | None = omitted_when_none(
        "per sample read in two or more series (ISO 5725-3); left out for an equilibrium study")
    reporting_units: ReportingUnits | None = omitted_when_none(
        "LOD, LOQ, working range and ISO 11843-2 values in the measuring solution's and the reported unit")
    scope: ScopeEntry | None = omitted_when_none("the scope's range against the working range; left out for a study")
    calibration_function: str | None = omitted_when_none(
        '"straight line" or "second order": the function the results are read off (the fit and the linearity tests '
        "above are of the straight line); left out for an equilibrium study")
