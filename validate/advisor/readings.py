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


def more_readings_alike(readings: tuple[float, ...], series: tuple[str, ...] | None, factor: int,
                        reading_sd: float | None) -> tuple[tuple[float, ...], tuple[str, ...] | None]:
    """One solution read `factor` times as often, each series keeping its mean, and the pooled
    reading SD of the method (`reading_sd`, s_r) kept: a series of n readings becomes f n readings
    whose sum of squares is its old one plus s_r^2 (f n - n), so the pooled s_r (sum of squares
    over degrees of freedom) stays exactly the same while its degrees of freedom grow. The
    readings are repeated f times, their deviations scaled (or, for a single reading, spread as
    a symmetric pattern). The series labels are repeated alongside."""
    labels = series if series else ("",) * len(readings)
    size = len(readings)
    out = [0.0] * (size * factor)
    for key in dict.fromkeys(labels):
        idx = [i for i, lab in enumerate(labels) if lab == key]
        values = _series_alike([readings[i] for i in idx], factor, reading_sd)
        positions = [i + k * size for k in range(factor) for i in idx]
        for pos, value in zip(positions, values, strict=True):
            out[pos] = value
    return tuple(out), (tuple(series) * factor if series else None)


def _series_alike(values: list[float], factor: int, reading_sd: float | None) -> list[float]:
    """One series' n readings as f n readings (the n repeated f times): the mean kept, the sum of
    squares raised by s_r^2 (f n - n) (see `more_readings_alike`)."""
    n = len(values)
    mean = sum(values) / n
    dev = [v - mean for v in values] * factor
    ss_old = sum(d * d for d in dev) / factor
    ss_new = ss_old + (reading_sd**2 * (factor - 1) * n if reading_sd is not None else 0.0)
    if ss_old == 0 and ss_new > 0:  # nothing to scale: a zero-mean pattern -k..k
        dev = [j - (factor * n - 1) / 2 for j in range(factor * n)]
        ss_old = sum(d * d for d in dev) / factor
    c = math.sqrt(ss_new / (factor * ss_old)) if ss_old > 0 else 0.0
    return [mean + c * d for d in dev]


def _with_readings(method: AssayMethod, changed: dict[str, tuple[float, ...]], factor: int,
                   reading_sd: float | None) -> AssayMethod:
    """The method with new readings for some solutions, grouped by series and preparation label
    (repeated readings of one solution on one day), the labels repeated alongside."""
    readings, series = dict(method.readings), dict(method.reading_series)
    preparations = dict(method.reading_preparations)
    for ident, values in changed.items():
        day, prep = series.get(ident), preparations.get(ident)
        groups = tuple(zip(day or ("",) * len(values), prep or ("",) * len(values), strict=True))
        readings[ident], _ = more_readings_alike(values, tuple(f"{d}\x00{p}" for d, p in groups), factor,
                                                 reading_sd)
        if day:
            series[ident] = tuple(day) * factor
        if prep:
            preparations[ident] = tuple(prep) * factor
    return replace(method, readings=readings, reading_series=series, reading_preparations=preparations)


def with_more_sample_readings(method: AssayMethod, factor: int = READING_FACTOR) -> AssayMethod:
    """Each sample read `factor` times as often, its mean and the reading scatter kept
    (`more_readings_alike`). Observed scatter: only the sample's reading term s_r/sqrt(m) falls,
    to s_r/sqrt(factor m); its preparation scatter stays (validate.model.scatter). Bottom-up:
    factor x m noise terms."""
    reading_sd = _design(method).scatter_components().reading_sd
    return _with_readings(method, {smp.id: method.readings[smp.id] for smp in method.samples}, factor, reading_sd)


def with_more_calibration_readings(method: AssayMethod, factor: int = READING_FACTOR) -> AssayMethod:
    """Each calibration solution read `factor` times as often, its mean's reading part shrunk.

    The line is fitted through the preparations' means. With each solution read factor times as
    often, a mean's expected variance falls from u_p^2 + s_r^2/m to u_p^2 + s_r^2/(factor m):
    the means' residuals about the line are scaled by that ratio's square root (the line stays,
    its degrees of freedom N - 2 stay), and each solution's readings are repeated with their
    scatter kept (`more_readings_alike`), so s_r keeps its value and gains degrees of freedom.
    Preparation scatter does not fall: more readings lower the reading noise only."""
    design = _design(method)
    xs, ys, ws = design.point_data()
    fit = fit_line(xs, ys, ws)
    sc = design.scatter_components()
    shrink = 1.0
    if sc.reading_sd is not None and sc.preparation_sd is not None:
        now = sc.preparation_sd**2 + sc.reading_sd**2 * sc.mean_inverse_count
        then = sc.preparation_sd**2 + sc.reading_sd**2 * sc.mean_inverse_count / factor
        shrink = math.sqrt(then / now) if now > 0 else 1.0
    shifts: dict[tuple[str, str | None], float] = {}
    for _, prep in design.fitted():
        line = fit.intercept + fit.slope * prep.concentration
        shifts[(prep.solution, prep.label)] = (line + shrink * (prep.mean - line)) - prep.mean
    changed = {}
    for ident in dict.fromkeys(ident for ident, _ in shifts):
        labels = method.reading_preparations.get(ident)
        values = method.readings[ident]
        keys = [(ident, lab if labels and len(set(labels)) > 1 else None)
                for lab in (labels or (None,) * len(values))]
        changed[ident] = tuple(a + shifts[k] for a, k in zip(values, keys, strict=True))
    return _with_readings(method, changed, factor, sc.reading_sd)


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
        "the scatter of one reading stays the same; the mean reading is kept. Only the reading noise of the "
        "sample's mean falls: the scatter of preparing its measured solution does not average away with more "
        "readings (to lower that, prepare the sample twice and average the two results)",
        frozenset({"sample readings"}), _SAMPLE_READINGS, {"readings_per_sample": f * m})]


def _more_calibration_readings(method: AssayMethod, design: CalibrationDesign) -> Candidate:
    solutions = [prep for _, prep in design.fitted()]
    m = _typical_count(prep.count for prep in solutions)
    f = READING_FACTOR
    if method.settings.scatter == "observed":
        assumed = ("the line itself is unchanged; the reading scatter stays the same, so only the reading part "
                   "of each standard's mean falls (u_prep^2 + s_read^2/m becomes u_prep^2 + s_read^2/(2m)); the "
                   "preparation scatter stays, and the line keeps its degrees of freedom (one per prepared "
                   "solution): to lower it, prepare more standards")
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
