"""Each standard addition's line as the analyst sees it, its leverage, and the matrix-effect test.

The matrix effect: the standard-addition slope b_a (the sensitivity in the sample's matrix)
against the external calibration's slope b_e (in the standards' matrix), both of mean absorbance
on the concentration in the measured solution, each with its statistical standard error:

    t = (b_a - b_e) / sqrt(u_a^2 + u_e^2),   nu = (u_a^2 + u_e^2)^2 / (u_a^4/nu_a + u_e^4/nu_e)

(Welch's test for two slopes, the Welch-Satterthwaite degrees of freedom as GUM G.4.1; the
comparison of a standard-addition slope with the calibration slope as in Miller and Miller,
Statistics and Chemometrics for Analytical Chemistry, section 5.8, from memory). The recovery of
sensitivity R = b_a / b_e with u(R) = R sqrt((u_a/b_a)^2 + (u_e/b_e)^2) and the interval
R +/- t(nu) u(R).

The extrapolation's leverage: h0 = 1/n + (x0 - xbar)^2 / Sxx at x0 = -x_E, against the largest
leverage of the flasks themselves (Draper and Smith, Applied Regression Analysis, 3rd ed.,
section 8.2, from memory): how far outside its own points the line is read.
"""

from __future__ import annotations

import math

from validate.inputs.addition_section import StandardAddition
from validate.inputs.schema import AssayMethod
from validate.metrology.probability import t_quantile, t_upper_tail
from validate.model.addition import AdditionModel, flask_concentrations, mean_readings
from validate.model.line import LineFit, fit_line

ALPHA = 0.05  # two-sided, the same as the tool's other significance tests


def addition_blocks(method: AssayMethod, model: AdditionModel) -> list[dict]:
    """One dict per [additions] sample, concentrations in the calibration's unit."""
    conc = model.concentrations(model.nominal_inputs())
    external = _external_fit(model)
    return [_block(method, add, conc[add.standard], external) for add in method.additions]


def _external_fit(model: AdditionModel) -> LineFit | None:
    """The external straight line; None where there is none, or where the calibration function is
    second order (its slope is no single sensitivity to compare the additions' slope with)."""
    if model.design is None or model.design.second_order:
        return None
    return fit_line(*model.design.point_data())


def _block(method: AssayMethod, add: StandardAddition, c_std: float, external: LineFit | None) -> dict:
    cal = method.calibration
    factor = cal.concentration_unit.factor if cal else add.unit.factor
    xs = flask_concentrations(method, add, c_std)
    ys = mean_readings(method, add)
    fit = fit_line(xs, ys)
    x_e = fit.intercept / fit.slope  # the sample's contribution to each flask (SI)
    dilution = add.made_up_to.volume / add.portion.volume
    leverages = [1 / fit.n + (x - fit.x_mean) ** 2 / fit.sxx for x in xs]
    return {
        "sample": add.id,
        "description": add.description,
        "concentration_unit": cal.concentration_unit.text if cal else add.unit.text,
        "result_unit": add.unit.text,
        "levels": [{"id": rid, "added": x / factor, "readings": list(method.readings[rid]), "mean": y}
                   for rid, x, y in zip(add.reading_ids(), xs, ys, strict=True)],
        "slope": fit.slope * factor, "slope_standard_uncertainty": fit.slope_u * factor,
        "intercept": fit.intercept, "residual_standard_deviation": fit.residual_sd, "n": fit.n, "dof": fit.dof,
        "extrapolated": x_e / factor,
        "extrapolated_standard_uncertainty": extrapolation_u(fit) / factor,
        "dilution_factor": dilution,
        "sample_concentration": x_e * dilution / add.unit.factor,
        "leverage": 1 / fit.n + (-x_e - fit.x_mean) ** 2 / fit.sxx,
        "largest_level_leverage": max(leverages),
        "reaches_sample_content": max(xs) >= x_e,
        "matrix_effect": None if external is None else matrix_effect(fit, external, factor),
    }


def extrapolation_u(fit: LineFit) -> float:
    """s_x = s_y/|b| sqrt(1/n + ybar^2 / (b^2 Sxx)): the statistical standard uncertainty of the
    extrapolated x_E (Miller and Miller, section 5.8, from memory), the reading scatter alone."""
    b = fit.slope
    return fit.residual_sd / abs(b) * math.sqrt(1 / fit.n + fit.y_mean ** 2 / (b * b * fit.sxx))


def matrix_effect(addition: LineFit, external: LineFit, factor: float = 1.0) -> dict:
    """Welch's t test of the two slopes and the recovery of sensitivity with its interval."""
    ua, ue = addition.slope_u, external.slope_u
    var = ua * ua + ue * ue
    nu = var * var / (ua ** 4 / addition.dof + ue ** 4 / external.dof)
    t = (addition.slope - external.slope) / math.sqrt(var)
    critical = float(t_quantile(1 - ALPHA / 2, nu))
    p = float(2 * t_upper_tail(abs(t), nu))
    r = addition.slope / external.slope
    rel_a, rel_e = ua / addition.slope, ue / external.slope
    u_r = abs(r) * math.sqrt(rel_a ** 2 + rel_e ** 2)
    nu_r = (rel_a ** 2 + rel_e ** 2) ** 2 / (rel_a ** 4 / addition.dof + rel_e ** 4 / external.dof)
    k_r = float(t_quantile(1 - ALPHA / 2, nu_r))
    significant = abs(t) > critical
    return {
        "external_slope": external.slope * factor, "external_slope_standard_uncertainty": ue * factor,
        "external_dof": external.dof, "t": t, "dof": nu, "critical_t": critical, "p_value": p,
        "alpha": ALPHA,
        "recovery_percent": 100 * r, "recovery_standard_uncertainty_percent": 100 * u_r,
        "recovery_low_percent": 100 * (r - k_r * u_r), "recovery_high_percent": 100 * (r + k_r * u_r),
        "significant": significant,
        "verdict": (f"matrix effect: the sensitivity in the sample is {100 * r:.1f} % of the external line's "
                    f"(|t| = {abs(t):.2f} > {critical:.2f}); results read off the external line would be biased, "
                    f"use standard addition" if significant else
                    f"no matrix effect shown: sensitivity {100 * r:.1f} % of the external line's "
                    f"(|t| = {abs(t):.2f} <= {critical:.2f}); the external line may serve, within the interval"),
    }
