"""All validation statistics of one calibration, gathered into one record."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from validate.inputs.units import Unit
from validate.model.line import LineFit, fit_line
from validate.validation.limits import (
    DetectionLimits,
    MolarAbsorptivity,
    SampleReadings,
    Sensitivity,
    detection_limits,
    molar_absorptivity,
    sensitivity,
)
from validate.validation.linearity import PointDiagnostics, SignificanceTest, linearity_tests, plain, point_diagnostics
from validate.validation.window import WindowFlags, absorbance_window_flags


@dataclass(frozen=True)
class ValidationSummary:
    fit: LineFit
    points: PointDiagnostics
    lack_of_fit: SignificanceTest
    mandel: SignificanceTest
    runs: SignificanceTest
    intercept: SignificanceTest
    weighting: SignificanceTest
    sensitivity: Sensitivity
    molar_absorptivity: MolarAbsorptivity | None
    limits: DetectionLimits
    window: WindowFlags
    max_abs_relative_residual_percent: float | None  # over standards with x > 0
    min_linearity_p_value: float | None  # smallest p of lack-of-fit and Mandel
    lowest_standard: float
    highest_standard: float
    notes: tuple[str, ...]

    def tests(self) -> dict[str, SignificanceTest]:
        return {"lack_of_fit": self.lack_of_fit, "mandel": self.mandel, "runs": self.runs,
                "intercept": self.intercept, "weighting": self.weighting}

    def observed_for_criteria(self) -> dict:
        """The observed values `criteria.evaluate_criteria` understands."""
        return {"r_squared": self.fit.r_squared,
                "max_abs_relative_residual": self.max_abs_relative_residual_percent,
                "min_linearity_p_value": self.min_linearity_p_value,
                "loq": self.limits.loq}

    def to_dict(self) -> dict:
        return plain(self)


def _max_relative_residual(points: PointDiagnostics) -> float | None:
    """Largest |e/yhat| in percent over standards above zero (a blank's relative residual is meaningless)."""
    values = [abs(r) for x, r in zip(points.x, points.relative_residuals, strict=True)
              if x > 0 and r is not None]
    return 100.0 * max(values) if values else None


def validate_calibration(x, y, *, weights=None, blanks=None, path_length_cm=None,
                         path_length_u=None, alpha: float = 0.05, beta: float = 0.05,
                         declared_limit: str = "ich_residual_sd", test_alpha: float = 0.05,
                         sample_replicates: int = 1, replicate_sds=None,
                         concentration_unit: Unit | None = None,
                         sample: SampleReadings | None = None) -> ValidationSummary:
    """Fit the line and run every validation statistic on it.

    `x`, `y` are the line's points: preparation means on a method's line (repeated readings
    averaged first), every row of a bare table. `alpha`/`beta` are the error probabilities of
    ISO 11843-2 detection; `test_alpha` is the significance level of the linearity tests;
    `sample_replicates` is K, the points averaged per sample (1 when the points are means);
    `replicate_sds`: (x, n, sd) of each level's repeated readings for the weighting check;
    `concentration_unit` the unit of x (the molar absorptivity is converted to L mol^-1 cm^-1
    where it allows); `sample`: how samples are read against the points, for the limits.
    """
    fit = fit_line(x, y, weights)
    notes = []
    if len(np.unique(np.asarray(fit.x))) < 5:
        notes.append("fewer than 5 distinct concentrations: ICH Q2(R1) recommends a minimum "
                     "of 5 for linearity")
    tests = linearity_tests(fit, test_alpha, replicate_sds)
    points = point_diagnostics(fit)
    eps = None
    if path_length_cm is not None:
        eps = molar_absorptivity(fit, path_length_cm, path_length_u or 0.0, concentration_unit)
    limits = detection_limits(fit, blanks, alpha=alpha, beta=beta,
                              sample_replicates=sample_replicates, declared=declared_limit, sample=sample)
    p_values = [t.p_value for key, t in tests.items()
                if key in ("lack_of_fit", "mandel") and t.p_value is not None]
    positive = [v for v in fit.x if v > 0]
    if limits.loq is not None and positive and limits.loq > min(positive):
        notes.append("the quantitation limit lies above the lowest non-zero standard: results "
                     "at the low end of the working range are below the LOQ")
    return ValidationSummary(
        fit=fit, points=points, sensitivity=sensitivity(fit), molar_absorptivity=eps,
        limits=limits, window=absorbance_window_flags(fit.y),
        max_abs_relative_residual_percent=_max_relative_residual(points),
        min_linearity_p_value=min(p_values) if p_values else None,
        lowest_standard=float(min(fit.x)), highest_standard=float(max(fit.x)),
        notes=tuple(notes) + limits.notes, **tests)


def is_json_ready(value) -> bool:
    """True when `value` holds only JSON types and finite floats (used by tests and records)."""
    if isinstance(value, dict):
        return all(isinstance(k, str) and is_json_ready(v) for k, v in value.items())
    if isinstance(value, list):
        return all(is_json_ready(v) for v in value)
    if isinstance(value, float):
        return math.isfinite(value)
    return value is None or isinstance(value, (str, int, bool))
