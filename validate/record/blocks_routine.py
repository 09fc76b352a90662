"""The record's method_uncertainty block: the method's uncertainty for routine use.

Built by validate.validation.routine_block from the [routine_uncertainty] section of the
method file; concentrations and uncertainties are in the result's unit (`unit`).
"""

from __future__ import annotations

from dataclasses import dataclass

from validate.record.tree import Number, RecordPart, described


@dataclass(frozen=True, kw_only=True)
class ControlLevel(RecordPart):
    """One control sample's one-way analysis of variance over its series (ISO 5725-3)."""

    sample: str
    concentration: Number = described("grand mean of the control's readings, result unit")
    s_r: Number = described("repeatability standard deviation of a single reading")
    s_between: Number = described("between-series standard deviation")
    s_Rw: Number = described("within-laboratory reproducibility of a single reading")
    dof: Number = described("degrees of freedom of s_Rw (Satterthwaite)")
    series: int
    readings: int
    readings_per_result: float = described("readings averaged into one routine result")
    result_standard_deviation: Number = described("u(Rw) of a routine result: sqrt(s_between^2 + s_r^2/m)")
    result_dof: Number
    weak: bool = described("fewer than 5 degrees of freedom: the figure is uncertain")
    unit: str


@dataclass(frozen=True, kw_only=True)
class Reproducibility(ControlLevel):
    source: str


@dataclass(frozen=True, kw_only=True)
class RwModel(RecordPart):
    """u(Rw) of a routine result against concentration c: a + b c, or max(a, b c)."""

    kind: str
    a: Number
    b: Number
    dof: Number
    levels: int
    why: str


@dataclass(frozen=True, kw_only=True)
class ReferenceMaterialBias(RecordPart):
    """A reference material (reference: its certified value), a spike (reference: the amount added) or an
    interlaboratory round (reference: the assigned value; measured: our result)."""

    sample: str
    kind: str = described('"reference material", "spike" or "interlaboratory" (sample: the round\'s name)')
    measured: Number
    reference: Number
    reference_standard_uncertainty: Number
    series_results: int
    relative_bias_percent: Number
    significant: bool


@dataclass(frozen=True, kw_only=True)
class RoutineBias(RecordPart):
    """Bias against reference materials (Nordtest TR 537, from memory); value and u at `concentration`."""

    value: Number
    standard_uncertainty: Number
    relative_value_percent: Number
    relative_standard_uncertainty_percent: Number
    rms_relative_percent: Number
    reference_relative_uncertainty_percent: Number
    significant: bool
    treatment: str = described("included: the bias counts in U; corrected: results are corrected for it")
    correction_factor: Number = described("factor routine results are multiplied by (corrected only)")
    source: str
    reference_materials: tuple[ReferenceMaterialBias, ...]


@dataclass(frozen=True, kw_only=True)
class BottomUpPrediction(RecordPart):
    standard_uncertainty: Number
    effective_dof: Number
    expanded_uncertainty: Number
    from_results: tuple[str, ...] = described("the routine results interpolated between", key="from")


@dataclass(frozen=True, kw_only=True)
class ConcentrationEntry(RecordPart):
    concentration: Number
    sample: str | None = described("the sample whose result this is; null: an end of the working range")
    combined_standard_uncertainty: Number
    coverage_factor: Number
    expanded_uncertainty: Number = described("top-down U at this concentration")
    bottom_up_expanded_uncertainty: Number = described("the sample's within-run U; null where no result")


@dataclass(frozen=True, kw_only=True)
class ReconciliationEntry(RecordPart):
    statistic: Number = described("F = s_obs^2 / u_pred^2")
    dof_observed: Number
    dof_predicted: Number = described("null: infinite (chi-square form)")
    p_value: Number = described("one-sided, in the direction of the observed ratio")
    verdict: str = described('"agree", "top-down larger" or "top-down smaller"')
    explanation: str
    test: str


@dataclass(frozen=True, kw_only=True)
class MethodUncertaintyBlock(RecordPart):
    """Top-down (validation data) beside bottom-up (the within-run budget), and which is reported."""

    unit: str
    reproducibility: Reproducibility
    levels: tuple[ControlLevel, ...]
    rw_model: RwModel
    bias: RoutineBias | None = described("null: no reference material, the bias is not assessed")
    concentration: Number = described("the control level the top-level figures are given at")
    combined_standard_uncertainty: Number
    effective_dof: Number
    coverage_factor: Number
    coverage_probability: float
    expanded_uncertainty: Number
    bottom_up: BottomUpPrediction
    by_concentration: tuple[ConcentrationEntry, ...]
    reconciliation: ReconciliationEntry
    reported: str = described('"top-down" or "bottom-up": the U stated for routine use')
    reason: str
    limitations: tuple[str, ...]
    assumptions: tuple[str, ...]
