"""The quality record as a typed tree: what results.json holds, part by part.

Every part is a frozen dataclass; `to_dict()` gives exactly the JSON written and
`Record.from_dict(json)` reads it back, checking its shape (validate.record.tree). The JSON
Schema shipped as validate/record/results.schema.json is generated from these declarations
(validate.record.schema). The blocks that the validation, equilibrium and advice stages produce
are declared in validate.record.blocks.

SCHEMA_VERSION changes with the layout: the minor number when keys are added, the major number
when keys are removed, renamed or change their meaning.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from validate.model.keys import ResultKey
from validate.record.blocks import AdviceBlock, EquilibriumBlock
from validate.record.blocks_addition import AdditionBlock
from validate.record.blocks_routine import MethodUncertaintyBlock
from validate.record.blocks_traceability import TraceabilityBlock
from validate.record.blocks_validation import ValidationBlock, ValidationSettingsEntry
from validate.record.blocks_verdict import Verdict
from validate.record.tree import Number, RecordPart, described, omitted_when_none

SCHEMA_VERSION = "2.3"


@dataclass(frozen=True, kw_only=True)
class Software(RecordPart):
    name: str
    version: str


@dataclass(frozen=True, kw_only=True)
class RunInfo(RecordPart):
    """Differs between any two runs by design; not compared by `validate verify`."""

    record_id: str
    created: str = described("date and time of the run, ISO 8601 with time zone")


@dataclass(frozen=True, kw_only=True)
class MethodInfo(RecordPart):
    title: str
    measurand: str
    scope: str
    file: str = described("the method file as it was given")
    formula: str = described("the result's formula as written in the method file")
    result_unit: str = described("unit of the result (of K for an equilibrium study)")


@dataclass(frozen=True, kw_only=True)
class InputFile(RecordPart):
    path: str = described("where the file was read from")
    sha256: str = described("SHA-256 of the bytes analysed")
    stored: str | None = omitted_when_none("the copy kept beside the record, relative to its folder")
    role: str | None = omitted_when_none("method file, readings table, register (the laboratory's) or "
                                         "built-in register (shipped with the software)")


@dataclass(frozen=True, kw_only=True)
class Settings(RecordPart):
    coverage_probability: float
    scatter: str
    glassware_distribution: str
    temperature_range_K: float
    expansion_coefficient_per_K: float
    shared_temperature: bool
    registers: tuple[str, ...]
    validation: ValidationSettingsEntry


@dataclass(frozen=True, kw_only=True)
class EquipmentEntry(RecordPart):
    id: str
    kind: str
    item_class: str = described("class or grade of the item", key="class")
    provenance: str = described("where the item's figures come from")


@dataclass(frozen=True, kw_only=True)
class SourceEntry(RecordPart):
    """One input quantity of the model; value and u in SI, value_in_unit and u_in_unit in `unit`."""

    name: str
    value: float
    u: float
    distribution: str
    dof: float | None = described("degrees of freedom; null: infinite")
    step: str
    equipment: str
    provenance: str
    kind: str = described("A: from replicates; B: any other way")
    unit: str
    display_factor: float
    trapezoid_d: float
    dof_group: str
    quantity: str = described("the input quantity the source belongs to (a delivered volume, a mass); a "
                              "source shared by several quantities is a quantity of its own")
    value_in_unit: float
    u_in_unit: float


@dataclass(frozen=True, kw_only=True)
class CalibrationPoint(RecordPart):
    id: str
    concentration: float
    absorbance: float


@dataclass(frozen=True, kw_only=True)
class SampleReadings(RecordPart):
    id: str
    readings: tuple[float, ...]


@dataclass(frozen=True, kw_only=True)
class CalibrationSummary(RecordPart):
    """The straight line as the analyst sees it: absorbance against concentration."""

    concentration_unit: str
    points: tuple[CalibrationPoint, ...]
    slope: float
    intercept: float
    slope_standard_uncertainty: float
    intercept_standard_uncertainty: float
    residual_standard_deviation: float
    r_squared: float
    n: int
    dof: int
    samples: tuple[SampleReadings, ...]
    second_order: SecondOrderFunction | None = omitted_when_none(
        "the second-order calibration function y = a + b x + c x^2 (ISO 8466-2) the results are read off; "
        "left out for a straight line, whose statistics are the fields above")


@dataclass(frozen=True, kw_only=True)
class SecondOrderSample(RecordPart):
    """A sample read off the second-order function at the estimates (calibration unit)."""

    id: str
    concentration: Number
    standard_uncertainty: Number
    sensitivity: Number = described("slope b + 2 c x of the function at the result (absorbance per unit)")


@dataclass(frozen=True, kw_only=True)
class SecondOrderLimitRoute(RecordPart):
    route: str
    sigma: Number
    sigma_dof: int
    lod: Number
    loq: Number
    source: str


@dataclass(frozen=True, kw_only=True)
class SecondOrderLimits(RecordPart):
    routes: tuple[SecondOrderLimitRoute, ...]
    declared_route: str
    lod: Number
    loq: Number
    not_shown: tuple[str, ...] = described("routes left out for a second-order function, and why")


@dataclass(frozen=True, kw_only=True)
class SecondOrderFunction(RecordPart):
    """The second-order calibration function (validate.validation.second_order)."""

    function: str
    equation: str
    coefficients: tuple[float, ...] = described("a, b, c (absorbance, per unit, per unit squared)")
    standard_uncertainties: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...] = described("covariance matrix of (a, b, c)")
    residual_standard_deviation: float
    dof: int = described("N - 3")
    n: int
    r_squared: Number
    residuals: tuple[float, ...] = described("mean reading minus the function, per point in fit order")
    sensitivity_at_range_ends: tuple[float, ...]
    turning_point: Number = described("concentration where the slope is zero (outside the working range)")
    samples: tuple[SecondOrderSample, ...]
    limits: SecondOrderLimits
    source: str


@dataclass(frozen=True, kw_only=True)
class MonteCarloSettings(RecordPart):
    trials: int | str = described("number of trials, or 'auto' (JCGM 101 7.9 adaptive procedure)")
    seed: int = described("seed of the random numbers: the same seed repeats the run")
    method: str


@dataclass(frozen=True, kw_only=True)
class GroupShare(RecordPart):
    group: str
    contribution: float = described("root of the summed variance contributions, in the result's unit")
    share: float = described("fraction of the combined variance")


@dataclass(frozen=True, kw_only=True)
class MonteCarloShare(RecordPart):
    group: str
    share: float = described("1 - Var(held)/Var(all) with the group held at its estimates, on common random "
                             "numbers, the linearised model as a control variate where every trial is defined")
    standard_error: float = described("first-order (delta method) standard error of the share")
    trials: int = described("trials of the shares' runs (seed + 1), in batches of 10,000 until every share's "
                            "standard error is at most 0.0025, at most 50,000")


@dataclass(frozen=True, kw_only=True)
class AdaptiveCheck(RecordPart):
    """The stopping test of the adaptive procedure (JCGM 101 7.9.4)."""

    converged: bool
    batches: int
    trials: int
    invalid_trials: int
    ndig: int
    pooled_standard_deviation: float | None
    delta: float | None
    interval_kind: str
    twice_s_mean: float | None
    twice_s_sd: float | None
    twice_s_low: float | None
    twice_s_high: float | None


@dataclass(frozen=True, kw_only=True)
class Histogram(RecordPart):
    edges: tuple[float, ...]
    counts: tuple[int, ...]


@dataclass(frozen=True, kw_only=True)
class MonteCarloResult(RecordPart):
    """One result by the Monte Carlo method (JCGM 101), checked against the GUM interval (clause 8)."""

    trials: int
    mean: float | None = described("estimate (JCGM 101 7.6); null where the output has no mean (a t input "
                                   "with nu <= 1)")
    standard_uncertainty: float | None = described("JCGM 101 7.6; null where the output has no finite "
                                                   "variance (a t input with nu <= 2): see moments_note")
    interval: tuple[float, ...] = described("probabilistically symmetric coverage interval [low, high]")
    shortest_interval: tuple[float, ...] = described("shortest coverage interval [low, high]")
    coverage_probability: float
    agrees_with_gum: bool | None = described("JCGM 101 8.2 decided beyond Monte Carlo noise; null: undecided "
                                             "within the trial budget (see gum_check)")
    gum_check: str = described("agrees, differs or undecided (JCGM 101 8.2 with the numerical spread of the "
                               "Monte Carlo interval's ends)")
    gum_check_note: str
    invalid_trials: int
    seed: int
    gum_interval: tuple[float, ...]
    tolerance: float = described("delta, the numerical tolerance of the GUM u(y) (JCGM 101 7.9.2)")
    d_low: float
    d_high: float
    numerical_tolerance: float = described("Monte Carlo numerical tolerance reached: the larger 95 % "
                                           "half-width of the interval's ends")
    tolerance_target: float = described("delta/5, the numerical tolerance the validating run should reach "
                                        "(JCGM 101 8.2, from memory)")
    adaptive: AdaptiveCheck | None
    warning: str | None
    moments_note: str | None = described("why the standard uncertainty or the shares are left out, or why the "
                                         "standard uncertainty is unreliable (a t input with nu <= 4)")
    histogram: Histogram
    shares_by_step: tuple[MonteCarloShare, ...]
    shares_by_equipment: tuple[MonteCarloShare, ...]


@dataclass(frozen=True, kw_only=True)
class ResultEntry(RecordPart):
    """One result with its GUM uncertainty, its budget by step, equipment and input quantity, and Monte Carlo."""

    key: ResultKey = described("what the result is (kind) and its sample or point (id); find results by it")
    name: str = described("label for people; may change with the wording, do not match on it")
    unit: str
    value: float
    standard_uncertainty: float
    expanded_uncertainty: float
    coverage_factor: float
    coverage_probability: float
    effective_dof: float | None = described("Welch-Satterthwaite (GUM G.4.1); null: infinite")
    budget_by_step: tuple[GroupShare, ...]
    budget_by_equipment: tuple[GroupShare, ...]
    budget_by_quantity: tuple[GroupShare, ...] = described("by input quantity of the measurement equation, "
                                                           "its terms combined first (CG4's presentation)")
    sample: str | None
    flags: tuple[str, ...]
    monte_carlo: MonteCarloResult | None = omitted_when_none("left out when Monte Carlo was not run")


@dataclass(frozen=True, kw_only=True)
class BudgetRow(RecordPart):
    """One source of one result (budget.csv has the same rows)."""

    result: str = described("the result's label (see key)")
    key: ResultKey = described("the result's key, as in results[].key")
    source: str
    step: str
    equipment: str
    value: float = described("the source's estimate, in its own unit")
    unit: str
    standard_uncertainty: float
    distribution: str
    dof: float | None
    kind: str
    provenance: str
    sensitivity: float = described("result unit per source unit")
    contribution: float = described("c_i u(x_i), in the result's unit (signed)")
    share: float = described("fraction of the combined variance")


@dataclass(frozen=True, kw_only=True)
class Record(RecordPart):
    """The quality record of one run (results.json)."""

    schema_version: str = described("version of this layout; see the README, 'The record for laboratory "
                                    "information systems'")
    software: Software
    run: RunInfo
    method: MethodInfo
    verdict: Verdict | None = omitted_when_none("the one verdict on the run and how each result is reported "
                                                "(validate.record.verdict); absent only in layout 1.0")
    inputs: tuple[InputFile, ...]
    settings: Settings
    defaults_applied: tuple[str, ...]
    notes: tuple[str, ...]
    assumptions: tuple[str, ...]
    registers: tuple[str, ...]
    equipment: tuple[EquipmentEntry, ...]
    sources: tuple[SourceEntry, ...]
    calibration: CalibrationSummary | None
    monte_carlo_settings: MonteCarloSettings | None = described("null: linear engine only")
    results: tuple[ResultEntry, ...]
    validation: ValidationBlock | None
    equilibrium: EquilibriumBlock | None
    advice: AdviceBlock | None
    budget: tuple[BudgetRow, ...]
    method_uncertainty: MethodUncertaintyBlock | None = omitted_when_none(
        "the method's uncertainty for routine use (top-down) beside the budget; left out without [routine_uncertainty]")
    standard_additions: tuple[AdditionBlock, ...] | None = omitted_when_none(
        "samples measured by standard addition: each line, its leverage and the matrix-effect test; left out "
        "without [additions]")
    traceability: TraceabilityBlock | None = omitted_when_none(
        "how every solution was made, the standards' assigned values and every reading, the equipment's "
        "register values: what a reader needs to recompute a standard and a result by hand")

    def result(self, key: ResultKey) -> ResultEntry:
        """The result with this key (KeyError when the record has none)."""
        for entry in self.results:
            if entry.key == key:
                return entry
        raise KeyError(key)


def read_record(data: Any) -> Record:
    """A record's JSON form as a Record; RecordShapeError where it is not of the schema."""
    return Record.from_dict(data)
