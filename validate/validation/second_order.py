"""The second-order calibration function judged and reported: its coefficients with their
covariance, the samples read off it, the sensitivity at each result, and the detection and
quantitation limits whose formulas hold for a curved function.

ISO 8466-2 (from memory) for the function and its inverse prediction (validate.model.quadratic).
Limits (ICH Q2(R1) 6.3 and 7.3: LOD = 3.3 sigma/S, LOQ = 10 sigma/S): S is the sensitivity at
the low end, the slope b + 2 c x at x = 0, i.e. b, because the limits describe the response near
zero concentration. Valid for a second-order function: sigma from the residuals of the function
(N - 3 degrees of freedom), from the standard error of its intercept a, and from the blanks.
Not shown: ISO 11843-2 (its critical and minimum detectable values are derived for a straight
calibration line with constant scatter; the non-linear case is another part of ISO 11843,
from memory).
"""

from __future__ import annotations

import math

import numpy as np

from validate.inputs.schema import Method
from validate.metrology.probability import f_upper_tail, t_quantile
from validate.model.design import CalibrationDesign
from validate.model.quadratic import QuadraticFit, fit_quadratic, quadratic_inverse_prediction
from validate.validation.limits import SampleReadings, range_flags, sample_readings, sample_sigma
from validate.validation.linearity import plain

ICH = "ICH Q2(R1) 6.3 and 7.3: LOD = 3.3 sigma/S, LOQ = 10 sigma/S, S = b (the slope of the second-order " \
      "function at zero concentration); "
NOT_SHOWN = ("ISO 11843-2 critical value and minimum detectable value are not shown: they are derived for a "
             "straight calibration line with constant scatter (ISO 11843-2:2000, clause 5, from memory)")


# the straight line's rule (validate.validation.limits.SAMPLE_RULE) without its ISO 11843-2 part
SAMPLE_RULE = ("samples are read {m0} time(s), fewer than the function's points ({m:.3g} readings each): the "
               "residual route takes sigma = sqrt(u_p^2 + s_r^2/m0) = {sigma:.4g} instead of the residual SD "
               "{s:.4g} of the points (ICH Q2(R1) 6.3: the SD of the response as the sample is measured, from "
               "memory)")


def _residual_route(fit: QuadraticFit, sample: SampleReadings | None) -> tuple[float, str]:
    """sigma of the residual route and why: the function's residual SD, or the sample's larger
    response SD where samples are read fewer times than the points (the straight line's rule)."""
    sigma = sample_sigma(fit.residual_sd, sample)
    if sample is None or sigma is None:
        return fit.residual_sd, "sigma = residual SD of the second-order function"
    return sigma, SAMPLE_RULE.format(m0=sample.count, m=sample.points_count, sigma=sigma, s=fit.residual_sd)


def second_order_limits(fit: QuadraticFit, blanks: list[float] | None, declared: str,
                        sample: SampleReadings | None = None) -> dict:
    """The LOD/LOQ routes valid for a second-order function, and the declared one. `sample`: how
    samples are read against the function's points (validate.validation.limits.sample_readings)."""
    b = fit.coefficients[1]
    residual_sigma, residual_why = _residual_route(fit, sample)
    routes = [("ich_residual_sd", residual_sigma, fit.dof, residual_why),
              ("ich_intercept_sd", fit.standard_uncertainties[0], fit.dof,
               "sigma = standard error of the function's intercept a")]
    if blanks and len(blanks) > 1:
        routes.append(("ich_blank_sd", float(np.std(blanks, ddof=1)), len(blanks) - 1, "sigma = SD of the blanks"))
    rising = b > 0  # S = b is the sensitivity at zero; a function not rising there has no ICH limit
    entries = [{"route": r, "sigma": s, "sigma_dof": dof, "lod": 3.3 * s / b if rising else math.nan,
                "loq": 10.0 * s / b if rising else math.nan, "source": ICH + why} for r, s, dof, why in routes]
    chosen = next((e for e in entries if e["route"] == declared), entries[0])
    not_shown = [NOT_SHOWN]
    if not rising:
        not_shown.append(f"the function's slope at zero, b = {b:.3g}, is not positive: S = b gives no detection "
                         "or quantitation limit (put the blanks in the fit, or start the range where it rises)")
    if chosen["route"] != declared:
        not_shown.append(f"the declared route {declared} is not available for this second-order function; "
                         f"{chosen['route']} is used in its place")
    return {"routes": entries, "declared_route": chosen["route"], "lod": chosen["lod"], "loq": chosen["loq"],
            "not_shown": not_shown}


def second_order_samples(design: CalibrationDesign, fit: QuadraticFit) -> list[dict]:
    """Each sample read off the function at the estimates: the root in the working range, its
    observed-scatter uncertainty (ISO 8466-2, u_p^2 + s_r^2/m for the sample's own term) and the
    sensitivity (slope of the function) there."""
    scatter = design.scatter_components()
    rows = []
    for smp in design.samples:
        w0 = design.weight(smp.id)
        pred = quadratic_inverse_prediction(fit, smp.readings, sample_weight=w0,
                                            response_variance=scatter.sample_variance(smp.count, w0))
        rows.append({"id": smp.id, "concentration": pred.value, "standard_uncertainty": pred.standard_uncertainty,
                     "sensitivity": pred.sensitivity})
    return rows


def second_order_block(method: Method, design: CalibrationDesign) -> dict | None:
    """The record's view of a second-order calibration function (None for a straight line)."""
    cal = method.calibration
    if cal is None or not design.second_order:
        return None
    factor = cal.concentration_unit.factor
    fit = design.quadratic_fit(factor)
    a, b, c = fit.coefficients
    lo, hi = min(x for x in fit.x if x > 0), max(fit.x)
    return plain({
        "function": "second order",
        "equation": "y = a + b x + c x^2",
        "coefficients": list(fit.coefficients),
        "standard_uncertainties": list(fit.standard_uncertainties),
        "covariance": [list(row) for row in fit.covariance],
        "residual_standard_deviation": fit.residual_sd, "dof": fit.dof, "n": fit.n, "r_squared": fit.r_squared,
        "residuals": fit.residuals().tolist(),
        "sensitivity_at_range_ends": [b + 2 * c * lo, b + 2 * c * hi],
        "turning_point": -b / (2 * c) if c != 0 else math.inf,
        "samples": second_order_samples(design, fit),
        "limits": second_order_limits(fit, design.blank_readings() or None, method.validation.declared_limit,
                                      sample_readings(design)),
        "source": "ISO 8466-2 (from memory): second-order calibration function, least squares through the "
                  "preparations' means; inverse prediction by the root on the rising branch",
    })


def second_order_sample_entries(design: CalibrationDesign, factor: float, declared: str, lowest: float,
                                highest: float) -> tuple[dict, dict]:
    """The validation block's samples and range flags for a second-order function (calibration unit):
    the straight line's LOD/LOQ do not apply, the function's own declared route does."""
    fit = design.quadratic_fit(factor)
    limits = second_order_limits(fit, design.blank_readings() or None, declared, sample_readings(design))
    samples, flags = {}, {}
    for row, smp in zip(second_order_samples(design, fit), design.samples, strict=True):
        f = range_flags(row["concentration"], lowest, highest, limits["loq"], limits["lod"])
        if not math.isfinite(row["concentration"]):
            f = ["no real root of the second-order function for this response"]
        flags[smp.id] = f
        samples[smp.id] = {"concentration": row["concentration"], "standard_uncertainty": row["standard_uncertainty"],
                           "readings": list(smp.readings), "flags": f}
    return samples, flags


def quick_second_order(path: str, x, y, samples: list[list[float]] | None, coverage: float) -> dict:
    """`validate calibrate --function "second order"` on a bare table (every row a point): the function,
    its limits, and each sample read off it with U = k u, k the t quantile at N - 3 (GUM G.3)."""
    from validate.model.errors import ModelError

    fit = fit_quadratic(x, y)
    lo, hi = min(v for v in fit.x if v > 0), max(fit.x)
    ends = fit.slope_at([lo, hi])
    if not (ends[0] > 0 and ends[1] > 0):
        raise ModelError(f"{path}: the second-order function does not rise over the whole range {lo:g} to {hi:g} "
                         f"(slope {ends[0]:.3g} and {ends[1]:.3g} at the ends), so a response could belong to two "
                         f"concentrations and no concentration is reported\n  what to do: narrow the range of the "
                         f"standards to where the response still rises")
    limits = second_order_limits(fit, None, "ich_residual_sd")
    out = {"function": "second order",
           "coefficients": list(fit.coefficients), "standard_uncertainties": list(fit.standard_uncertainties),
           "covariance": [list(r) for r in fit.covariance],
           "second_order": {"equation": "y = a + b x + c x^2", "dof": fit.dof,
                            "residual_standard_deviation": fit.residual_sd, "r_squared": fit.r_squared,
                            "limits": limits, "source": "ISO 8466-2 (from memory): second-order calibration function"}}
    k = float(t_quantile(0.5 + coverage / 2, fit.dof))
    rows = []
    for i, readings in enumerate(samples or [], 1):
        pred = quadratic_inverse_prediction(fit, readings)
        if not pred.real_root:
            raise ModelError(f"{path}: sample {i} (mean absorbance {pred.response_mean:.4g}) has no real root on the "
                             f"second-order function, so no concentration is reported\n  what to do: dilute the "
                             f"sample into the range of the standards")
        flags = range_flags(pred.value, lo, hi, loq=limits["loq"], lod=limits["lod"])
        rows.append({"readings": list(readings), "replicates": pred.replicates, "response_mean": pred.response_mean,
                     "concentration": pred.value, "standard_uncertainty": pred.standard_uncertainty,
                     "sensitivity": pred.sensitivity, "dof": fit.dof, "flags": flags,
                     "coverage_probability": coverage, "coverage_factor": k,
                     "expanded_uncertainty": k * pred.standard_uncertainty,
                     "source": "root of a + b x + c x^2 = y0 on the rising branch, u by the law of propagation "
                               "with the coefficients' covariance (ISO 8466-2, from memory)"})
    if rows:
        out["sample"] = rows
    return out


ADEQUACY_SOURCE = ("adequacy of the second-order function: the construction of Mandel's test taken one degree up, "
                   "second order against third order, F = [RSS2 - RSS3] / [RSS3/(n-4)] with (1, n-4) degrees of "
                   "freedom (after DIN 38402-51 and ISO 8466-2, from memory; the one-degree-up use is this tool's)")


def adequacy_p(fit: QuadraticFit) -> float | None:
    """p of the test that a third-order term improves the second-order function (None with n < 5)."""
    from validate.validation.linearity import _poly_rss

    n = fit.n
    if n < 5 or len(set(fit.x)) < 4:
        return None
    x, y, w = np.asarray(fit.x), np.asarray(fit.y), np.asarray(fit.weights)
    rss3 = _poly_rss(x, y, w, 3)
    if rss3 <= 1e-300:
        return None
    return float(f_upper_tail(max(fit.rss - rss3, 0.0) / (rss3 / (n - 4)), 1, n - 4))


def second_order_observed(design: CalibrationDesign, factor: float, declared: str, observed: dict) -> dict:
    """The acceptance criteria's observed values for a second-order function: r^2, the largest relative
    residual and the LOQ of the function, and for the linearity criterion the adequacy test above (the
    straight line's tests showed the curvature the function is chosen for)."""
    fit = design.quadratic_fit(factor)
    predicted = fit.predict(fit.x)
    rel = [abs(r / p) for x, r, p in zip(fit.x, fit.residuals(), predicted, strict=True) if x > 0 and p != 0]
    limits = second_order_limits(fit, design.blank_readings() or None, declared, sample_readings(design))
    return {**observed, "r_squared": fit.r_squared, "max_abs_relative_residual": 100 * max(rel) if rel else None,
            "min_linearity_p_value": adequacy_p(fit), "loq": limits["loq"]}


def with_second_order_limits(summary, design: CalibrationDesign, factor: float, declared: str):
    """The validation summary with its detection limits replaced by the routes valid for a second-order
    function, so the reporting units, the scope check, the range flags and the verdict use them. The
    ISO 11843-2 values stay in the record for the straight line only, and a note says so."""
    import dataclasses

    from validate.validation.limits import LimitRoute, _disagreements

    fit = design.quadratic_fit(factor)
    lim = second_order_limits(fit, design.blank_readings() or None, declared, sample_readings(design))
    routes = tuple(LimitRoute(r["route"], r["sigma"], r["sigma_dof"], r["lod"], r["loq"], r["source"])
                   for r in lim["routes"])
    rule = [r["source"][len(ICH):] for r in lim["routes"]
            if r["route"] == "ich_residual_sd" and r["sigma"] != fit.residual_sd]  # SAMPLE_RULE applied
    notes = (*rule, *lim["not_shown"], "the ISO 11843-2 values in this block are of the straight line and do not "
             "apply to the second-order function")
    limits = dataclasses.replace(summary.limits, routes=routes, declared_route=lim["declared_route"], lod=lim["lod"],
                                 loq=lim["loq"], warnings=tuple(_disagreements(routes)), notes=notes)
    return dataclasses.replace(summary, limits=limits)
