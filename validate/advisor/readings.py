"""Advisor candidates that add readings: of the samples, of the calibration solutions, or of
an equilibrium study's mixtures and series points (see validate.advisor.candidates)."""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Callable
from dataclasses import replace
from typing import cast

from validate.advisor.candidates import READING_FACTOR, Candidate
from validate.inputs.schema import AssayMethod, Calibration, EquilibriumMethod, Method
from validate.model.assay import build_model
from validate.model.design import CalibrationDesign
from validate.model.equilibrium import build_equilibrium_model
from validate.model.line import fit_line


def _design(method: AssayMethod) -> CalibrationDesign:
    """The calibration design of a method (its model's; the method has a calibration)."""
    design = build_model(method).design
    if design is None:
        raise ValueError("the method has no calibration line")
    return design


def with_more_sample_readings(method: AssayMethod, factor: int = READING_FACTOR) -> AssayMethod:
    """Each sample read `factor` times as often: its readings replaced by factor x m copies
    of its mean. The mean is kept; the per-reading scatter is assumed to stay the same
    (observed scatter: s/sqrt(m) becomes s/sqrt(factor m); bottom-up: factor m noise terms)."""
    readings = dict(method.readings)
    for smp in method.samples:
        r = readings[smp.id]
        readings[smp.id] = (sum(r) / len(r),) * (factor * len(r))
    return replace(method, readings=readings)


def with_more_calibration_readings(method: AssayMethod, factor: int = READING_FACTOR) -> AssayMethod:
    """Each calibration solution read `factor` times as often, the scatter kept the same.

    The N readings are repeated `factor` times with their residuals about the line
    scaled by c = sqrt((factor N - 2) / (factor (N - 2))): the line is unchanged
    (residuals are orthogonal to 1 and x), its residual standard deviation stays
    s exactly, and its degrees of freedom grow from N - 2 to factor N - 2."""
    design = _design(method)
    xs, ys, _ = design.reading_points()
    fit = fit_line(xs, ys)
    n = len(xs)
    c = math.sqrt((factor * n - 2) / (factor * (n - 2)))
    readings = dict(method.readings)
    for _, prep in design.fitted():
        line = fit.intercept + fit.slope * prep.concentration
        readings[prep.solution] = tuple(line + c * (a - line) for a in prep.readings) * factor
    return replace(method, readings=readings)


def _typical_count(counts) -> int:
    return Counter(counts).most_common(1)[0][0]


def with_more_point_readings(method: EquilibriumMethod, factor: int = READING_FACTOR) -> EquilibriumMethod:
    """Equilibrium study: every mixture and series point read `factor` times as often (factor x m
    copies of its mean); the scatter of one reading is assumed to stay the same."""
    readings = dict(method.readings)
    for ident in method.equilibrium.point_ids():
        r = readings[ident]
        readings[ident] = (sum(r) / len(r),) * (factor * len(r))
    return replace(method, readings=readings)


def reading_candidates(method: Method) -> list[Candidate]:
    match method:
        case EquilibriumMethod():
            return [_more_point_readings(method)]
        case AssayMethod(calibration=None):
            return []
        case AssayMethod(calibration=Calibration()):
            design = _design(method)  # one model build for both candidates
            return _more_sample_readings(method, design) + [_more_calibration_readings(method, design)]
    return []


# Each change below is offered only for the kind of method it takes, and applied to that method.
_POINT_READINGS = cast(Callable[[Method], Method], with_more_point_readings)
_SAMPLE_READINGS = cast(Callable[[Method], Method], with_more_sample_readings)
_CALIBRATION_READINGS = cast(Callable[[Method], Method], with_more_calibration_readings)


def _more_point_readings(method: EquilibriumMethod) -> Candidate:
    points = build_equilibrium_model(method).design.points
    m = _typical_count(p.count for p in points)
    f = READING_FACTOR
    return Candidate(
        "more point readings", f"read every mixture and series point {'twice' if f == 2 else f'{f} times'} as often",
        f"{f - 1} more reading(s) for every reading now taken, on each of the {len(points)} points",
        "the scatter of one reading stays the same; the mean reading is kept",
        frozenset({"point readings"}), _POINT_READINGS, {"reading_factor": f, "typical_readings": m})


def _more_sample_readings(method: AssayMethod, design: CalibrationDesign) -> list[Candidate]:
    if not design.samples or "c_measured" not in method.result.formula.names:
        return []
    m = _typical_count(s.count for s in design.samples)
    f = READING_FACTOR
    return [Candidate(
        "more sample readings", f"read every sample {f * m} times instead of {m}",
        f"{(f - 1) * m} more reading(s) of every sample",
        "the scatter of one reading stays the same; the mean reading is kept",
        frozenset({"sample readings"}), _SAMPLE_READINGS, {"readings_per_sample": f * m})]


def _more_calibration_readings(method: AssayMethod, design: CalibrationDesign) -> Candidate:
    solutions = [prep for _, prep in design.fitted()]
    m = _typical_count(prep.count for prep in solutions)
    f = READING_FACTOR
    if method.settings.scatter == "observed":
        assumed = ("the residual scatter of the line stays the same and the line itself is unchanged; its "
                   "degrees of freedom grow (lower k). The line's scatter is taken as reading scatter: if it "
                   "comes from preparing the standards, prepare each standard twice instead")
    else:
        assumed = ("each reading carries the photometer's noise; each standard is still prepared once, "
                   "so its preparation terms stay as they are")
    return Candidate(
        "more calibration readings",
        f"read every calibration solution {f * m} times instead of {m} "
        f"({f * sum(prep.count for prep in solutions)} readings on the line)",
        f"{(f - 1) * m} more reading(s) of each of the {len(solutions)} calibration solutions",
        assumed,
        frozenset({"calibration readings"}), _CALIBRATION_READINGS,
        {"readings_per_solution": f * m})
