"""The record's standard_additions block: each sample measured by standard addition, its line,
the extrapolation's leverage and the matrix-effect test (validate.validation.matrix_effect).

Concentrations added and extrapolated are in the calibration's unit (in the measured flask);
the sample's concentration is in its own `result_unit`; slopes are absorbance per calibration unit.
"""

from __future__ import annotations

from dataclasses import dataclass

from validate.record.tree import Number, RecordPart, described


@dataclass(frozen=True, kw_only=True)
class AdditionLevel(RecordPart):
    id: str = described("the flask's reading id, NAME.k")
    added: Number = described("concentration of standard added to the flask, calibration unit")
    readings: tuple[float, ...]
    mean: Number


@dataclass(frozen=True, kw_only=True)
class MatrixEffect(RecordPart):
    """The standard-addition slope against the external line's (Welch's t test) and the recovery of sensitivity."""

    external_slope: Number
    external_slope_standard_uncertainty: Number
    external_dof: int
    t: Number
    dof: Number = described("Welch-Satterthwaite degrees of freedom of the difference of the slopes")
    critical_t: Number
    p_value: Number
    alpha: float
    recovery_percent: Number = described("100 x slope of the additions / slope of the external line")
    recovery_standard_uncertainty_percent: Number
    recovery_low_percent: Number = described("lower end of the 1 - alpha interval of the recovery")
    recovery_high_percent: Number
    significant: bool = described("the slopes differ at the level alpha: a matrix effect")
    verdict: str


@dataclass(frozen=True, kw_only=True)
class AdditionBlock(RecordPart):
    """One sample measured by standard addition."""

    sample: str
    description: str
    concentration_unit: str
    result_unit: str
    levels: tuple[AdditionLevel, ...]
    slope: Number = described("absorbance per calibration unit in the sample's matrix")
    slope_standard_uncertainty: Number
    intercept: Number
    residual_standard_deviation: Number
    n: int
    dof: int
    extrapolated: Number = described("the sample's contribution to each flask: intercept / slope, calibration unit")
    extrapolated_standard_uncertainty: Number = described(
        "its standard uncertainty from the reading scatter alone, s_y/|b| sqrt(1/n + ybar^2/(b^2 Sxx)); "
        "the result's U (results) carries every source")
    dilution_factor: Number = described("flask volume / sample portion")
    sample_concentration: Number = described("extrapolated x dilution factor, result unit")
    leverage: Number = described("h0 = 1/n + (x0 - xbar)^2/Sxx at the extrapolated point x0")
    largest_level_leverage: Number = described("the largest leverage of the flasks themselves, for comparison")
    reaches_sample_content: bool = described("the largest addition is at least the sample's own contribution")
    matrix_effect: MatrixEffect | None = described(
        "null: no external straight line to compare with (none, or a second-order calibration function)")
