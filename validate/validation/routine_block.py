"""The record's method_uncertainty block: the method's uncertainty for routine use.

Top-down (validation data): reproducibility of the control samples over their series, bias
against reference materials, combined u_c = sqrt(u(Rw)^2 + u(bias)^2) (Nordtest TR 537, from
memory) at each concentration of the working range. Bottom-up: the within-run budget of the
routine results. The two are compared (validate.validation.method_uncertainty.reconcile) and
the record says which U it reports for routine use and why.

Concentrations here are in the result's unit. A single reading is put into the result's unit
with the factor result / c_measured of its sample, so the result formula is taken as
proportional to c_measured (stated in the block's assumptions).
"""

from __future__ import annotations

import numpy as np

from validate.inputs.errors import InputError
from validate.inputs.routine_section import ReferenceMaterial, RoutineSettings
from validate.inputs.schema import AssayMethod
from validate.model.assay import Model
from validate.propagation.linear import LinearResult
from validate.validation.control_readings import ControlReadings, series_results
from validate.validation.linearity import plain
from validate.validation.method_uncertainty import (
    BIAS_SOURCE,
    ReferenceBias,
    bias_estimate,
    combine,
    reconcile,
)
from validate.validation.reproducibility import SOURCE as ANOVA_SOURCE
from validate.validation.reproducibility import Reproducibility, reproducibility, series_groups
from validate.validation.rw_model import RwModel, choose_rw_model
from validate.validation.spikes import spike_bias

Point = tuple[float, str | None, LinearResult | None]  # concentration, sample (None: a range end), its result
TEST = ("F = s_obs^2 / u_pred^2 against F(nu_obs, nu_pred); chi-square form when nu_pred is infinite "
        "(NIST/SEMATECH e-Handbook 1.3.5.8-9, from memory)")
ASSUMPTIONS = ["single readings are put into the result's unit with the factor result / c_measured of their "
               "sample: the result formula is taken as proportional to c_measured",
               "u(bias) is taken as Type B (infinite degrees of freedom) in the Welch-Satterthwaite formula",
               "the bottom-up prediction for a routine result is interpolated between the routine samples' "
               "results of this run"]
RULE = "the larger expanded uncertainty of the two routes at the control level is reported for routine use"


def _level_entry(sample: str, rep: Reproducibility, unit: str) -> dict:
    return {"sample": sample, "concentration": rep.grand_mean, "s_r": rep.s_r, "s_between": rep.s_between,
            "s_Rw": rep.s_Rw, "dof": rep.dof, "series": rep.series, "readings": rep.n,
            "readings_per_result": rep.readings_per_result, "result_standard_deviation": rep.result_sd,
            "result_dof": rep.result_dof, "weak": rep.weak, "unit": unit}


def _references(method: AssayMethod, routine: RoutineSettings) -> list[ReferenceMaterial]:
    """The section's reference materials, and [validation]'s reference sample unless listed there."""
    refs = list(routine.reference_materials)
    v = method.validation
    if v.reference_sample and v.reference_value and v.reference_sample not in {r.sample for r in refs}:
        if not v.reference_value.u > 0:
            raise InputError("the reference value has no uncertainty, so it cannot serve for the bias of the "
                             "method's routine uncertainty", file=method.path, where="[validation].reference_value",
                             fix="give the certificate's expanded_uncertainty and coverage_factor (or u)")
        refs.append(ReferenceMaterial(v.reference_sample, v.reference_value))
    return refs


def _reference_bias(ref: ReferenceMaterial, data: ControlReadings, method: AssayMethod) -> ReferenceBias:
    """Mean result against the reference value, with the spread of its series results."""
    factor = method.result.unit.factor
    sd, count = series_results(data.values(ref.sample), method.reading_series.get(ref.sample))
    return ReferenceBias(ref.sample, data.results[ref.sample].value, ref.value.value / factor,
                         ref.value.u / factor, sd, count)


def _bias_block(method: AssayMethod, routine: RoutineSettings, data: ControlReadings, at: float):
    refs = [_reference_bias(r, data, method) for r in _references(method, routine)]
    refs += [spike_bias(spike, method, data) for spike in routine.spikes]
    factor = method.result.unit.factor
    refs += [ReferenceBias(r.name, r.ours / factor, r.assigned.value / factor, r.assigned.u / factor, 0.0, 1,
                           kind="interlaboratory") for r in routine.interlaboratory]
    if not refs:
        return None, None
    est = bias_estimate(refs, routine.bias_treatment)
    block = {
        "value": est.relative * at, "standard_uncertainty": est.u_relative * at,
        "relative_value_percent": 100 * est.relative, "relative_standard_uncertainty_percent": 100 * est.u_relative,
        "rms_relative_percent": 100 * est.rms_relative,
        "reference_relative_uncertainty_percent": 100 * est.u_reference_relative,
        "significant": est.significant, "treatment": est.treatment,
        "correction_factor": 1 / (1 + est.relative) if est.treatment == "corrected" else None,
        "source": BIAS_SOURCE,
        "reference_materials": [{"sample": r.id, "kind": r.kind, "measured": r.measured, "reference": r.reference,
                                 "reference_standard_uncertainty": r.u_reference, "series_results": r.results,
                                 "relative_bias_percent": 100 * r.relative, "significant": r.significant}
                                for r in refs]}
    return est, block


def _bottom_up_at(routine_results: list[LinearResult], c: float) -> tuple[float, float, float]:
    """(u, dof, U) the budget gives a routine result at concentration c: interpolated between the
    routine samples' results (each the mean of its readings in one run), held constant beyond them."""
    xs = [r.value for r in routine_results]
    u = float(np.interp(c, xs, [r.standard_uncertainty for r in routine_results]))
    big_u = float(np.interp(c, xs, [r.expanded_uncertainty for r in routine_results]))
    nearest = min(routine_results, key=lambda r: abs(r.value - c))
    return u, nearest.effective_dof, big_u


def _by_concentration(points: list[Point], rw: RwModel,
                      u_bias_rel: float, p: float) -> list[dict]:
    out = []
    for c, sample, bottom_up in sorted(points, key=lambda t: t[0]):
        comb = combine(rw.u_at(c), rw.dof, abs(u_bias_rel * c), p)
        out.append({"concentration": c, "sample": sample, "combined_standard_uncertainty": comb.u_c,
                    "coverage_factor": comb.k, "expanded_uncertainty": comb.expanded,
                    "bottom_up_expanded_uncertainty": bottom_up.expanded_uncertainty if bottom_up else None})
    return out


def _control_levels(method: AssayMethod, routine: RoutineSettings,
                    data: ControlReadings) -> list[tuple[str, Reproducibility]]:
    return [(control, reproducibility(series_groups(data.values(control), method.reading_series[control]),
                                      routine.readings_per_result))
            for control in routine.controls]


def _working_points(data: ControlReadings, sample: str, excluded: set[str]) -> list[Point]:
    """The ends of the working range (the outer standards, in the result's unit) and every routine result."""
    scale = data.scale(sample)
    ends: list[Point] = [(x * scale, None, None) for x in (min(data.cal_levels), max(data.cal_levels))]
    return ends + [(r.value, s, r) for s, r in data.results.items() if s not in excluded]


def _reconciliation(main: Reproducibility, routine_results: list[LinearResult]) -> tuple[dict, tuple]:
    u_bu, dof_bu, big_u_bu = _bottom_up_at(routine_results, main.grand_mean)
    rec = reconcile(main.result_sd, main.result_dof, u_bu, dof_bu)
    entry = {"statistic": rec.statistic, "dof_observed": rec.dof_observed, "dof_predicted": rec.dof_predicted,
             "p_value": rec.p_value, "verdict": rec.verdict, "explanation": rec.explanation, "test": TEST}
    return entry, (u_bu, dof_bu, big_u_bu)


def method_uncertainty_block(method: AssayMethod, model: Model, results: list[LinearResult]) -> dict | None:
    """The block, or None when the method file has no [routine_uncertainty] section."""
    routine = method.routine
    if routine is None or method.calibration is None:
        return None
    data = ControlReadings(method, model, results)
    unit = method.result.unit.text
    levels = _control_levels(method, routine, data)
    rw = choose_rw_model([(rep.grand_mean, rep.result_sd, rep.result_dof) for _, rep in levels])
    main_sample, main = levels[0]
    at = main.grand_mean
    est, bias = _bias_block(method, routine, data, at)
    u_bias_rel = est.u_relative if est else 0.0
    p = method.settings.coverage_probability
    top = combine(rw.u_at(at), rw.dof, abs(u_bias_rel * at), p)
    excluded = set(routine.controls) | {r.sample for r in _references(method, routine)} | \
        {k.sample for k in routine.spikes}
    routine_results = data.routine_samples(excluded) or [data.results[main_sample]]
    reconciliation, (u_bu, dof_bu, big_u_bu) = _reconciliation(main, routine_results)
    reported = "top-down" if top.expanded >= big_u_bu else "bottom-up"
    return plain({
        "unit": unit,
        "reproducibility": _level_entry(main_sample, main, unit) | {"source": ANOVA_SOURCE},
        "levels": [_level_entry(s, r, unit) for s, r in levels],
        "rw_model": rw.to_dict(),
        "bias": bias,
        "concentration": at,
        "combined_standard_uncertainty": top.u_c, "effective_dof": top.dof,
        "coverage_factor": top.k, "coverage_probability": p, "expanded_uncertainty": top.expanded,
        "bottom_up": {"standard_uncertainty": u_bu, "effective_dof": dof_bu, "expanded_uncertainty": big_u_bu,
                      "from": [r.name for r in routine_results]},
        "by_concentration": _by_concentration(_working_points(data, main_sample, excluded), rw, u_bias_rel, p),
        "reconciliation": reconciliation,
        "reported": reported,
        "reason": f"{RULE}: top-down U = {top.expanded:.3g} {unit}, bottom-up U = {big_u_bu:.3g} {unit} "
                  f"at {at:.3g} {unit}",
        "limitations": _limitations(levels, est),
        "assumptions": ASSUMPTIONS,
    })


def _limitations(levels: list[tuple[str, Reproducibility]], est) -> list[str]:
    out = [f"s_Rw of `{s}` rests on {rep.result_dof:.1f} degrees of freedom: weak; read the control in more series"
           for s, rep in levels if rep.weak]
    if est is None:
        out.append("no reference material: the bias is not assessed and u(bias) is left out of u_c")
    if len(levels) == 1:
        out.append("one control level: how s_Rw changes with concentration is not known from the data "
                   "(see rw_model for the cautious rule applied)")
    return out
