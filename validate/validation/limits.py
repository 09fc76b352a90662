"""Sensitivity, molar absorptivity, detection and quantitation limits, range flags.

Detection limits are given by every route the data allow (ICH Q2(R1) with
each of its sigma estimates, ISO 11843-2) so the analyst sees how much they
differ; one route is `declared` for the record. Limits always come from the
ordinary (unweighted) straight line: the formulas assume a constant response
SD, and with scatter that grows with concentration the unweighted residual SD
overstates the scatter at the blank, which makes the limits conservative.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from validate.inputs.schema import AMOUNT_CONCENTRATION, MASS_CONCENTRATION
from validate.inputs.units import Unit
from validate.inputs.validation_settings import ROUTES
from validate.metrology.probability import noncentral_t_lower_tail, normal_quantile, t_quantile
from validate.model.design import CalibrationDesign
from validate.model.line import LineFit, fit_line
from validate.validation.linearity import negligible, plain


@dataclass(frozen=True)
class Sensitivity:
    slope: float
    standard_uncertainty: float
    relative_standard_uncertainty: float | None
    dof: int
    source: str

    def to_dict(self) -> dict:
        return plain(self)


def sensitivity(fit: LineFit) -> Sensitivity:
    """The calibration slope (IUPAC: sensitivity) with its standard uncertainty."""
    rel = fit.slope_u / abs(fit.slope) if fit.slope != 0 else None
    return Sensitivity(fit.slope, fit.slope_u, rel, fit.dof,
                       "Sensitivity is the slope of the calibration function (IUPAC Gold Book, "
                       "'sensitivity'); u(b) = s/sqrt(Sxx) from least squares (ISO 8466-1).")


@dataclass(frozen=True)
class MolarAbsorptivity:
    value: float
    standard_uncertainty: float
    relative_standard_uncertainty: float
    effective_dof: float | None  # None when infinite
    path_length_cm: float
    path_length_u: float
    unit: str
    source: str
    note: str  # the unit it is given in, and why where it is not L mol^-1 cm^-1

    def to_dict(self) -> dict:
        return plain(self)


def absorptivity_unit(unit: Unit | None) -> tuple[float, str, str]:
    """(factor from 'per calibration unit' to the unit shown, that unit, a note).

    An amount concentration converts to mol/L (1 mol/L = 1000 mol/m^3): the molar absorptivity in
    L mol^-1 cm^-1. A mass concentration converts to g/L only: without the analyte's molar mass the
    absorptivity is per gram (L g^-1 cm^-1; IUPAC Gold Book, "specific absorption coefficient", from memory)."""
    if unit is not None and unit.dims == AMOUNT_CONCENTRATION:
        return 1000.0 / unit.factor, "L mol^-1 cm^-1", f"slope per {unit.text} converted to per mol/L"
    if unit is not None and unit.dims == MASS_CONCENTRATION:
        return 1.0 / unit.factor, "L g^-1 cm^-1", (
            f"the calibration unit {unit.text} is a mass concentration: without the analyte's molar mass "
            "it does not convert to mol/L, so the absorptivity is given per gram")
    return 1.0, "(concentration unit)^-1 cm^-1", "no concentration unit given: per unit of the table's concentrations"


def molar_absorptivity(fit: LineFit, path_length_cm: float, path_length_u: float = 0.0,
                       concentration_unit: Unit | None = None) -> MolarAbsorptivity:
    """epsilon = b / l (Beer-Lambert A = epsilon l c), in L mol^-1 cm^-1 where the calibration's
    `concentration_unit` is an amount concentration (see absorptivity_unit).

    For a quotient the relative standard uncertainties add in quadrature
    (GUM, JCGM 100:2008, 5.1.6); effective degrees of freedom by the
    Welch-Satterthwaite formula (GUM G.4.1), path length taken as Type B with
    infinite degrees of freedom.
    """
    if not (path_length_cm > 0 and math.isfinite(path_length_cm)):
        raise ValueError(f"path length must be a positive number of centimetres, got {path_length_cm!r}")
    if not (path_length_u >= 0 and math.isfinite(path_length_u)):
        raise ValueError("the path-length uncertainty must be zero or a positive number of centimetres")
    scale, unit, note = absorptivity_unit(concentration_unit)
    eps = scale * fit.slope / path_length_cm
    rel_b = fit.slope_u / abs(fit.slope)
    rel_l = path_length_u / path_length_cm
    rel = math.hypot(rel_b, rel_l)
    dof = rel**4 / (rel_b**4 / fit.dof) if rel_b > 0 and fit.dof > 0 else math.inf
    return MolarAbsorptivity(
        eps, abs(eps) * rel, rel, dof if math.isfinite(dof) else None, path_length_cm,
        path_length_u, unit,
        "Beer-Lambert law A = epsilon l c, epsilon = slope / path length; relative standard "
        "uncertainties of slope and path length combined in quadrature (GUM JCGM 100:2008, "
        "5.1.6); effective degrees of freedom by Welch-Satterthwaite (GUM G.4.1).", note)


# --------------------------------------------------------------------------
# Detection and quantitation limits


ICH_SOURCE = "ICH Q2(R1), sections 6.3 and 7.3: LOD = 3.3 sigma/S, LOQ = 10 sigma/S, S = slope; "


@dataclass(frozen=True)
class SampleReadings:
    """How a sample is read, against the line's points (preparation means): the two scatter
    components of the line (validate.model.scatter) and the readings averaged per sample."""

    count: int  # m0: readings averaged into one sample result (the fewest of the method's samples)
    reading_sd: float  # s_r, repeated readings of one solution
    preparation_sd: float  # u_p, preparations beyond their reading scatter
    points_count: float  # readings per point of the line, as their harmonic mean 1/mean(1/m_i)

    def fewer_than_points(self) -> bool:
        return self.count < self.points_count * (1 - 1e-9)

    def response_sd(self) -> float:
        """sqrt(u_p^2 + s_r^2/m0): the SD of a sample's mean reading (one-way random model)."""
        return math.sqrt(self.preparation_sd**2 + self.reading_sd**2 / self.count)


def sample_readings(design: CalibrationDesign) -> SampleReadings | None:
    """The fewest readings of a sample against the line's points, with the two scatter components
    (None without samples, where no solution of the line was read twice, or on a weighted line,
    whose components are on its weighted scale). The points' count is 1/c, c the coefficient of
    s_r^2 in the points' expected residual mean square (validate.model.scatter), so "fewer"
    compares the sample with what s_m stands for."""
    if not design.samples or design.weighted:
        return None
    sc = design.scatter_components()
    if sc.reading_sd is None or sc.preparation_sd is None:
        return None
    return SampleReadings(min(s.count for s in design.samples), sc.reading_sd, sc.preparation_sd,
                          1.0 / sc.mean_inverse_count)


def sample_sigma(residual_sd: float, sample: SampleReadings | None) -> float | None:
    """The response SD of the residual route where samples are read fewer times than the
    function's points (SAMPLE_RULE): sqrt(u_p^2 + s_r^2/m0), never below the residual SD; None
    where the residual SD itself stands (the same rule for a line and a second-order function)."""
    if sample is None or not sample.fewer_than_points() or not residual_sd > 0:
        return None
    return max(sample.response_sd(), residual_sd)


# The rule for samples read fewer times than the line's points (from memory): ICH Q2(R1) 6.3 takes
# sigma as the SD of the response, and ISO 11843-2 (5.3) the SD of one measurement of the sample,
# both for measurements like those of the calibration. The line's points are preparation means of
# m readings; a sample read m0 < m times has the larger SD sqrt(u_p^2 + s_r^2/m0), so the residual
# route and ISO 11843-2's sample term use that (1/K becomes (u_p^2 + s_r^2/m0)/s_m^2). Read as
# often as the points or more, the line's residual SD s_m stands (a limit is not lowered by
# averaging beyond what the calibration itself showed).
SAMPLE_RULE = ("samples are read {m0} time(s), fewer than the line's points ({m:.3g} readings each): "
               "the residual route takes sigma = sqrt(u_p^2 + s_r^2/m0) = {sigma:.4g} instead of the residual "
               "SD {s:.4g} of the points, and ISO 11843-2 its sample term 1/K as (u_p^2 + s_r^2/m0)/s^2 = "
               "{ratio:.3g} (ICH Q2(R1) 6.3 and ISO 11843-2 5.3: the SD of the response as the sample is "
               "measured, from memory)")


@dataclass(frozen=True)
class LimitRoute:
    route: str
    sigma: float | None  # response SD used (None for ISO 11843-2)
    sigma_dof: int | None
    lod: float
    loq: float | None  # ISO 11843-2 defines no quantitation limit
    source: str
    note: str = ""


@dataclass(frozen=True)
class Iso11843Result:
    critical_value_response: float  # y_C above the intercept
    critical_value: float  # x_C
    minimum_detectable_value: float  # x_D with delta = t(1-alpha) + t(1-beta)
    minimum_detectable_value_exact_delta: float  # x_D with the noncentral-t delta
    delta: float
    delta_exact: float
    alpha: float
    beta: float
    sample_replicates: int
    dof: int
    source: str


@dataclass(frozen=True)
class DetectionLimits:
    routes: tuple[LimitRoute, ...]
    iso11843: Iso11843Result
    declared_route: str
    lod: float
    loq: float | None
    warnings: tuple[str, ...]
    notes: tuple[str, ...]

    def route(self, name: str) -> LimitRoute | None:
        return next((r for r in self.routes if r.route == name), None)

    def to_dict(self) -> dict:
        return plain(self)


def _ich_route(route: str, sigma: float, dof: int, slope: float, source: str,
               note: str = "") -> LimitRoute:
    b = abs(slope)
    return LimitRoute(route, sigma, dof, 3.3 * sigma / b, 10.0 * sigma / b, source, note)


def exact_delta(dof: int, alpha: float, beta: float) -> float:
    """Noncentrality delta with P(t'(dof, delta) <= t_{1-alpha}(dof)) = beta (ISO 11843-2, 5.3)."""
    t_crit = t_quantile(1 - alpha, dof)

    def excess(d):
        return noncentral_t_lower_tail(t_crit, dof, d) - beta  # decreases as delta grows

    hi = max(float(t_crit + normal_quantile(1 - beta)), 1.0)
    while excess(hi) > 0:  # widen the bracket in small steps (nct.cdf fails far out)
        hi *= 1.5
    from scipy.optimize import brentq  # imported here: scipy.optimize is slow to import

    return float(brentq(excess, 0.0, hi))


def iso11843_2(fit: LineFit, alpha: float = 0.05, beta: float = 0.05,
               sample_replicates: int = 1, sample_term: float | None = None) -> Iso11843Result:
    """Critical value x_C and minimum detectable value x_D, constant-SD linear case.

    x_C = t_{1-alpha}(nu) (s/b) sqrt(1/K + 1/(IJ) + xbar^2/Sxx),  x_D = delta (s/b) sqrt(...),
    nu = IJ - 2, Sxx over all IJ readings (ISO 11843-2:2000, clause 5.3, recalled
    from memory). delta ~ t_{1-alpha}(nu) + t_{1-beta}(nu), the approximation the
    standard allows (it equals 2 t_{1-alpha} for alpha = beta); the exact
    noncentral-t delta is given beside it. Unbalanced designs use n and Sxx of
    the actual readings. `sample_term`: the sample's response variance over s^2 in place of 1/K
    (samples read fewer times than the line's points; SAMPLE_RULE).
    """
    if not (0 < alpha < 0.5 and 0 < beta < 0.5):
        raise ValueError("alpha and beta must lie between 0 and 0.5 (e.g. 0.05)")
    if sample_replicates < 1:
        raise ValueError("the number of sample replicates K must be at least 1")
    nu = fit.dof
    first = 1.0 / sample_replicates if sample_term is None else sample_term
    root = math.sqrt(first + 1.0 / fit.n + fit.x_mean**2 / fit.sxx)
    scale = fit.residual_sd / abs(fit.slope) * root
    t_a, t_b = t_quantile(1 - alpha, nu), t_quantile(1 - beta, nu)
    delta, delta_ex = float(t_a + t_b), exact_delta(nu, alpha, beta)
    return Iso11843Result(
        critical_value_response=float(t_a * fit.residual_sd * root),
        critical_value=float(t_a * scale), minimum_detectable_value=delta * scale,
        minimum_detectable_value_exact_delta=delta_ex * scale, delta=delta,
        delta_exact=delta_ex, alpha=alpha, beta=beta, sample_replicates=sample_replicates,
        dof=nu,
        source="ISO 11843-2:2000 clause 5.3, ordinary straight-line calibration with constant "
               "residual SD: x_C = t_{1-alpha}(IJ-2) s/b sqrt(1/K + 1/(IJ) + xbar^2/Sxx); "
               "x_D = delta s/b sqrt(...) with delta ~ t_{1-alpha} + t_{1-beta} (approximation "
               "allowed by the standard; exact noncentral-t delta also given). Formulas "
               "recalled from memory.")


def detection_limits(fit: LineFit, blanks=None, *, alpha: float = 0.05, beta: float = 0.05,
                     sample_replicates: int = 1, declared: str = "ich_residual_sd",
                     sample: SampleReadings | None = None) -> DetectionLimits:
    """Every LOD/LOQ route the data allow, the declared one, and disagreement warnings.
    `sample`: how samples are read against the line's points; where they are read fewer times,
    the residual route and ISO 11843-2 use the sample's larger response SD (SAMPLE_RULE)."""
    if declared not in ROUTES:
        raise ValueError(f"unknown detection-limit route {declared!r}; choose one of {', '.join(ROUTES)}")
    notes = []
    if fit.weighted:
        fit = fit_line(fit.x, fit.y)
        notes.append("limits use the unweighted line of the same data (constant-SD formulas); "
                     "with scatter growing with concentration they are conservative")
        sample = None  # the scatter components of a weighted line are on its weighted scale
    if fit.slope == 0:
        raise ValueError("the calibration slope is zero; detection limits are undefined")
    sigma, sample_term, residual_note = _residual_sigma(fit, sample)
    if residual_note:
        notes.append(residual_note)
    routes = [
        _ich_route("ich_residual_sd", sigma, fit.dof, fit.slope,
                   ICH_SOURCE + "sigma = residual SD of the regression line.", residual_note),
        _ich_route("ich_intercept_sd", fit.intercept_u, fit.dof, fit.slope,
                   ICH_SOURCE + "sigma = SD of the y-intercept.",
                   "ICH names the SD of intercepts of several lines; the standard error of "
                   "this line's intercept stands in for it (common practice)"),
    ]
    if blanks is not None and len(blanks) == 1:
        notes.append("one blank reading only: the blank-based limit needs at least 2 (ICH Q2 advises 10 "
                     "or more), so that route is not shown")
    elif blanks is not None and len(blanks) > 1:
        b = np.asarray(blanks, dtype=float).ravel()
        routes.append(_ich_route("ich_blank_sd", float(np.std(b, ddof=1)), len(b) - 1,
                                 fit.slope, ICH_SOURCE + "sigma = SD of blank responses."))
    iso = iso11843_2(fit, alpha, beta, sample_replicates, sample_term)
    routes.append(LimitRoute("iso11843_2", None, fit.dof, iso.minimum_detectable_value, None,
                             iso.source, "minimum detectable value x_D; ISO 11843 defines no "
                             "quantitation limit"))
    chosen = next((r for r in routes if r.route == declared), None)
    if chosen is None:
        raise ValueError(f"the declared route {declared!r} needs blank readings; give the "
                         "blanks or declare another route")
    warnings = _disagreements(routes)
    if negligible(fit.rss, fit):
        warnings = ["the readings lie on the line within rounding error: limits from the "
                    "scatter are not meaningful; use blank readings or more standards"]
    return DetectionLimits(tuple(routes), iso, declared, chosen.lod, chosen.loq,
                           tuple(warnings), tuple(notes))


def _residual_sigma(fit: LineFit, sample: SampleReadings | None) -> tuple[float, float | None, str]:
    """sigma of the residual route, ISO 11843-2's sample term (None: 1/K) and the note saying why
    (SAMPLE_RULE): the points' residual SD unless samples are read fewer times than the points."""
    sigma = sample_sigma(fit.residual_sd, sample)
    if sample is None or sigma is None:
        return fit.residual_sd, None, ""
    ratio = (sigma / fit.residual_sd) ** 2
    return sigma, ratio, SAMPLE_RULE.format(m0=sample.count, m=sample.points_count, sigma=sigma,
                                            s=fit.residual_sd, ratio=ratio)


def _disagreements(routes) -> list[str]:
    lods = {r.route: r.lod for r in routes if math.isfinite(r.lod) and r.lod > 0}
    if len(lods) < 2:
        return []
    lo, hi = min(lods, key=lambda k: lods[k]), max(lods, key=lambda k: lods[k])
    if lods[hi] > 2 * lods[lo]:
        return [f"detection limits disagree by more than a factor of two: {hi} gives "
                f"{lods[hi]:.4g}, {lo} gives {lods[lo]:.4g}; check the blank and the "
                "low standards, and state which route the record uses"]
    return []


# --------------------------------------------------------------------------
# Working range

def range_flags(x0: float, lowest_standard: float, highest_standard: float,
                loq: float | None = None, lod: float | None = None) -> list[str]:
    """Plain flags for a result read off the line.

    A result below the LOD is flagged "below LOD" only (it is then also below
    the LOQ); one between LOD and LOQ is flagged "below LOQ". Outside the
    range of the standards the line is extrapolated (ISO 8466-1 restricts use
    to the working range).
    """
    flags = []
    if lod is not None and math.isfinite(lod) and x0 < lod:
        flags.append("below LOD")
    elif loq is not None and math.isfinite(loq) and x0 < loq:
        flags.append("below LOQ")
    if x0 < lowest_standard:
        flags.append("below the lowest standard (extrapolated)")
    elif x0 > highest_standard:
        flags.append("above the highest standard (extrapolated)")
    return flags
