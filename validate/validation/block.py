"""The validation block of the record: the method's calibration judged as a method.

Gathers, for the calibration of a method file: the line's validation
statistics (validate.validation.summary), each sample's range flags, the
absorbance window of every reading, repeatability from replicate readings,
trueness against a reference sample, the consistency of the observed scatter
with the bottom-up budget, and the acceptance criteria.
"""

from __future__ import annotations

import dataclasses
import math
import statistics

from validate.inputs.items import Cuvette, Photometer
from validate.inputs.schema import AssayMethod, Calibration, Method
from validate.model.assay import Model, build_model
from validate.model.design import CalibrationDesign
from validate.model.equilibrium import EquilibriumModel
from validate.model.line import LineFit, fit_line, inverse_prediction
from validate.model.quadratic import QuadraticFit, rising_root
from validate.propagation.linear import LinearResult
from validate.validation.criteria import STUDY_CRITERIA, TRUENESS_CRITERIA, evaluate_criteria
from validate.validation.limits import range_flags, sample_readings
from validate.validation.linearity import plain
from validate.validation.precision import (
    READING_SCATTER,
    intermediate_precision,
    recovery,
    repeatability,
    scatter_consistency,
    within_series_groups,
)
from validate.validation.reporting import as_is, limits_in, reporting_units, results_by_sample, scope_check
from validate.validation.second_order import (
    second_order_observed,
    second_order_sample_entries,
    with_second_order_limits,
)
from validate.validation.summary import ValidationSummary, validate_calibration
from validate.validation.window import absorbance_window_flags


def _calibration(method: Method) -> Calibration:
    if method.calibration is None:
        raise ValueError("the method has no [calibration]")
    return method.calibration


def _design(model: Model) -> CalibrationDesign:
    if model.design is None:
        raise ValueError("the model has no calibration design")
    return model.design


def calibration_data(method: Method, model: Model):
    """Concentrations (calibration unit), absorbances and weights (None: unweighted) of every
    reading on the line, from the model's calibration design."""
    return _design(model).reading_points(_calibration(method).concentration_unit.factor)


def line_summary(method: Method, model: Model) -> dict | None:
    """The straight line as the analyst sees it: every reading against concentration, and the
    line as the model fits it (through the preparations' means, weighted when the method says
    so), with the samples' readings."""
    cal = method.calibration
    if cal is None:
        return None
    design = _design(model)
    xs, ys, _ = design.reading_points(cal.concentration_unit.factor)
    fit = fit_line(*design.point_data(cal.concentration_unit.factor))
    return {
        "concentration_unit": cal.concentration_unit.text,
        "points": [{"id": i, "concentration": x, "absorbance": y}
                   for i, x, y in zip(design.reading_ids(), xs, ys, strict=True)],
        "slope": fit.slope, "intercept": fit.intercept,
        "slope_standard_uncertainty": fit.slope_u, "intercept_standard_uncertainty": fit.intercept_u,
        "residual_standard_deviation": fit.residual_sd, "r_squared": fit.r_squared, "n": fit.n,
        "dof": fit.dof,
        "samples": [{"id": s.id, "readings": list(s.readings)} for s in design.samples],
    }


def predicted_scatter(method: AssayMethod, slope_abs_per_unit: float) -> tuple[float, float]:
    """(preparation SD, reading SD) in absorbance that the bottom-up sources predict: the
    per-use random terms of each standard's preparation (repeatability, burette readings),
    as a root mean square over the standards, and the photometer's noise of one reading."""
    from uncertainties import ufloat

    cal = _calibration(method)
    # the prediction is per recipe: preparations recorded under one id are one solution here
    bottom_up = dataclasses.replace(method, settings=dataclasses.replace(method.settings, scatter="bottom-up"),
                                    reading_preparations={})
    model = build_model(bottom_up)
    variables = {n: ufloat(s.value, s.u, tag=n) for n, s in model.sources.items()}
    conc = model.concentrations(variables)
    factor = cal.concentration_unit.factor
    variances = []
    for level in _design(model).standards:
        for prep in level.preparations:
            c = conc[prep.solution]
            random_part = sum((d * var.std_dev) ** 2 for var, d in getattr(c, "derivatives", {}).items()
                              if model.sources[var.tag].step == f"prepare {prep.solution}")
            variances.append((slope_abs_per_unit * math.sqrt(random_part) / factor) ** 2)
    photometer = method.item_of(cal.photometer, Photometer) if cal.photometer else None
    noise = photometer.noise if photometer else 0.0
    return math.sqrt(sum(variances) / len(variances)), noise


def scatter_checks(method: AssayMethod, design: CalibrationDesign, fit: LineFit):
    """The two consistency checks of item "Validation statistics" in docs/design.md: the pure
    error against the reading noise (None where no solution was read twice or no noise is
    stated), and the scatter of the preparation means about the line against preparation plus
    reading noise for a mean of m readings (None where nothing is predicted). On a weighted line
    the pure error is taken unweighted (in absorbance, pooled over the line's solutions: the
    stated noise is one figure for every reading), and the second check is not made: the means'
    scatter about a weighted line is on its normalised weighted scale, not in absorbance."""
    prep, noise = predicted_scatter(method, fit.slope)
    if design.weighted:
        s_r, dof_r = design.reading_sd_in_absorbance()
        return None, (scatter_consistency(s_r, dof_r, noise, compared=READING_SCATTER)
                      if s_r is not None and noise > 0 else None)
    sc = design.scatter_components()
    reading = (scatter_consistency(sc.reading_sd, sc.reading_dof, noise, compared=READING_SCATTER)
               if sc.reading_sd is not None and noise > 0 else None)
    predicted = math.sqrt(prep**2 + noise**2 * sc.mean_inverse_count)
    line = scatter_consistency(fit.residual_sd, fit.dof, predicted) if predicted > 0 and fit.dof >= 1 else None
    return line, reading


def _summary(method: Method, cal: Calibration, design: CalibrationDesign) -> ValidationSummary:
    """Every validation statistic of the line the model fits."""
    v = method.validation
    factor = cal.concentration_unit.factor
    xs, ys, ws = design.point_data(factor)
    cell = method.item_of(cal.cuvette, Cuvette) if cal.cuvette else None
    path = cell.path if cell is not None else None
    reps = [(lv.concentration / factor, lv.count, statistics.stdev(lv.readings)) for lv in design.levels
            if lv.count >= 2]
    # the points are preparation means: a sample's mean reading is one such point (K = 1)
    summary = validate_calibration(
        xs, ys, weights=ws, blanks=design.blank_readings() or None, alpha=v.alpha, beta=v.beta,
        declared_limit=v.declared_limit,
        path_length_cm=path * 100 if cell is not None and path is not None else None,
        path_length_u=cell.tolerance / math.sqrt(3) * 100 if cell else None,
        sample_replicates=1, replicate_sds=reps, concentration_unit=cal.concentration_unit,
        sample=sample_readings(design))
    if design.second_order:  # the limits valid for the function the results are read off
        summary = with_second_order_limits(summary, design, factor, v.declared_limit)
    return summary


def _sample_entries(design: CalibrationDesign, summary: ValidationSummary, factor: float = 1.0) -> tuple[dict, dict]:
    """Each sample read off the line (observed-scatter uncertainty: u_p^2 + s_r^2/m for its own
    mean reading) with its range flags."""
    fit = summary.fit
    scatter = design.scatter_components()
    nonzero = [x for x in fit.x if x > 0] or list(fit.x)
    samples, flags = {}, {}
    if design.second_order:  # read off the second-order function, with its own limits
        return second_order_sample_entries(design, factor, summary.limits.declared_route, min(nonzero), max(fit.x))
    for smp in design.samples:
        w0 = design.weight(smp.id)
        pred = inverse_prediction(fit, smp.readings, sample_weight=w0,
                                  response_variance=scatter.sample_variance(smp.count, w0))
        f = range_flags(pred.value, min(nonzero), max(fit.x), summary.limits.loq, summary.limits.lod)
        flags[smp.id] = f
        samples[smp.id] = {"concentration": pred.value, "standard_uncertainty": pred.standard_uncertainty,
                           "readings": list(smp.readings), "flags": f}
    return samples, flags


def _observed(summary: ValidationSummary, results: list[LinearResult], precision, trueness) -> dict:
    """The observed values the acceptance criteria are judged on."""
    observed = summary.observed_for_criteria()
    rel_u = [100 * r.expanded_uncertainty / abs(r.value) for r in results if r.value]
    observed["relative_expanded_uncertainty"] = max(rel_u) if rel_u else None
    if precision is not None:
        observed["repeatability_rsd_percent"] = precision.rsd_percent
    if trueness is not None:
        observed["recovery_percent"] = trueness.recovery_percent
        observed["en_number"] = trueness.en_number
    return observed


def _scatter_fit(fit: LineFit, so_fit: QuadraticFit | None) -> LineFit:
    """The fit whose residual scatter the budget is checked against: the second-order function's (N - 3)."""
    return dataclasses.replace(fit, residual_sd=so_fit.residual_sd, dof=so_fit.dof) if so_fit else fit


def _criteria_observed(method: AssayMethod, design: CalibrationDesign, summary: ValidationSummary, results,
                       precision, trueness) -> dict:
    """The observed values of the acceptance criteria; those of the second-order function where it is used."""
    observed = _observed(summary, results, precision, trueness)
    if design.second_order:
        cal = _calibration(method)
        observed = second_order_observed(design, cal.concentration_unit.factor, method.validation.declared_limit,
                                         observed)
    return observed


def _in_concentration(fit: LineFit | QuadraticFit, readings) -> list[float]:
    """Readings in concentration, off the line or the second-order function's rising root."""
    if isinstance(fit, QuadraticFit):
        a, b, c = fit.coefficients
        return [float(rising_root(a, b, c, y, b > 0)) for y in readings]
    return [(a - fit.intercept) / fit.slope for a in readings]


def validation_block(method: AssayMethod, model: Model, results: list[LinearResult]) -> dict | None:
    cal = method.calibration
    if cal is None:
        return None
    v = method.validation
    design = _design(model)
    summary = _summary(method, cal, design)
    fit = summary.fit
    samples, flags = _sample_entries(design, summary, cal.concentration_unit.factor)
    units = reporting_units(method, model, summary)
    scope = scope_check(method, units, results_by_sample(model, results), samples)
    for sid, flag in scope.pop("sample_flags").items():
        flags[sid].append(flag)
    window = absorbance_window_flags(design.every_reading(), *v.window)
    # a second-order function: readings in concentration off it, its own residual scatter (N - 3) and
    # criteria values (validation.second_order)
    so_fit = design.quadratic_fit(cal.concentration_unit.factor) if design.second_order else None
    read_off = so_fit or fit
    rep_groups = [group for s in design.samples
                  for group in within_series_groups(_in_concentration(read_off, s.readings), s.series)
                  if len(group) >= 2]
    precision = repeatability(rep_groups) if rep_groups else None
    between_series = _intermediate(design, read_off, cal.concentration_unit.text)
    consistency, reading_consistency = scatter_checks(method, design, _scatter_fit(fit, so_fit))
    trueness = _trueness(method, results)
    criteria = evaluate_criteria(v.acceptance, _criteria_observed(method, design, summary, results, precision,
                                                                  trueness),
                                 ruled_out=TRUENESS_CRITERIA if v.reference_sample is None else ())
    block = plain(summary)
    block.update({
        "settings": v.to_dict(),
        "line_weighting": {"used": cal.weighting,
                           "why": ("set in the method file" if cal.weighting != "none" else
                                   "the default; see the weighting check for whether a weighted line is advised")},
        "concentration_unit": cal.concentration_unit.text,
        "samples": samples,
        "range_flags": flags,
        "window_flags": plain(window),
        "repeatability": {**plain(precision), "unit": cal.concentration_unit.text} if precision else None,
        "trueness": plain(trueness) if trueness else None,
        "intermediate_precision": between_series,
        "scatter_consistency": plain(consistency) if consistency else None,
        "reading_noise_consistency": plain(reading_consistency) if reading_consistency else None,
        "fit_units": _fit_units(design),
        "criteria": plain(criteria),
        "reporting_units": units,
        "scope": scope,
        "calibration_function": cal.function,
    })
    return block


def _fit_units(design: CalibrationDesign) -> dict:
    """What the line and its tests were fitted to, the two scatter components, and which random
    effects the observed scatter stands for (docs/design.md, "Never count an effect twice")."""
    sc = design.scatter_components()
    fitted = design.fitted()
    return {
        "points": "preparation means",
        "preparations": len(fitted), "readings": sum(p.count for _, p in fitted),
        "levels": len(design.levels),
        "means_sd": sc.means_sd, "means_dof": sc.means_dof,
        "reading_sd": sc.reading_sd, "reading_dof": sc.reading_dof, "preparation_sd": sc.preparation_sd,
        "covered_by_observed_scatter": design.covered_terms(),
        "why": ("readings that share a solution id are repeated readings of one solution: they show reading "
                "noise only, so the line, its residual scatter and the linearity tests use one point per "
                "preparation (its mean reading), and pure error comes from independent preparations at one "
                "level; a sample carries u^2 = u_prep^2 + s_read^2/m (ISO 8466-1, CG4 Example A5, on "
                "preparation means)"),
    }


def _intermediate(design: CalibrationDesign, fit: LineFit | QuadraticFit, unit: str) -> dict:
    """Intermediate precision (ISO 5725-3) of every sample read in two or more series (the
    readings table's optional `series` column: days, analysts), in the calibration unit.
    The budget's observed scatter is within-series only: a series effect is reported here."""
    out = {}
    for smp in design.samples:
        labels = smp.series
        if not labels or len(set(labels)) < 2:
            continue
        try:
            result = intermediate_precision(_in_concentration(fit, smp.readings), groups=list(labels),
                                            factor="series")
        except ValueError as exc:
            out[smp.id] = {"error": str(exc)}
            continue
        out[smp.id] = {**plain(result), "unit": unit}
    return out


def _trueness(method: AssayMethod, results: list[LinearResult]):
    v = method.validation
    ref = v.reference_value
    if v.reference_sample is None or ref is None:
        return None
    index = [s.id for s in method.samples].index(v.reference_sample)
    result = results[index]
    factor = method.result.unit.factor
    # each expanded uncertainty as stated (ISO 13528): the result's own U, the reference's U with
    # its certificate's k; a reference given as a standard uncertainty is taken at k = 2 (common practice)
    k_ref = ref.coverage_factor if ref.coverage_factor is not None else REFERENCE_K
    return recovery(result.value, result.standard_uncertainty, ref.value / factor, ref.u / factor,
                    expanded_measured=result.expanded_uncertainty, expanded_reference=k_ref * ref.u / factor)


REFERENCE_K = 2.0  # k for a reference value stated with a standard uncertainty only (common practice)


def _combined_relative_u(model: EquilibriumModel, results: list[LinearResult] | None) -> float | None:
    """Relative expanded uncertainty of the combined K in percent (None: no combination)."""
    combined = [r for r, key in zip(results or [], model.result_keys, strict=False) if key.kind == "combined K"]
    return 100 * combined[0].expanded_uncertainty / abs(combined[0].value) if combined and combined[0].value else None


def equilibrium_validation_block(model: EquilibriumModel, results: list[LinearResult] | None = None) -> dict:
    """The line of an equilibrium study's standards, judged as a calibration: absorbance
    against the limiting reagent's total, before any correction for incomplete complexation.
    The criteria judged are those that apply to a study (STUDY_CRITERIA); the relative expanded
    uncertainty is that of the combined K."""
    method, study = model.method, model.study
    factor = study.concentration_unit.factor
    xs, ys = model.design.point_data(factor)  # one point per prepared standard
    reps = [(lv.concentration / factor, lv.count, statistics.stdev(lv.readings)) for lv in model.design.standards
            if lv.count >= 2]
    cell = method.item_of(study.cuvette, Cuvette) if study.cuvette else None
    path = cell.path if cell is not None else None
    v = method.validation
    summary = validate_calibration(
        xs, ys, alpha=v.alpha, beta=v.beta,
        path_length_cm=path * 100 if cell is not None and path is not None else None,
        path_length_u=cell.tolerance / math.sqrt(3) * 100 if cell else None, replicate_sds=reps,
        concentration_unit=study.concentration_unit)
    observed = {**summary.observed_for_criteria(),
                "relative_expanded_uncertainty": _combined_relative_u(model, results)}
    criteria = evaluate_criteria(v.acceptance, observed, applicable=STUDY_CRITERIA)
    block = plain(summary)
    block.update({
        "settings": v.to_dict(),
        "concentration_unit": study.concentration_unit.text,
        "samples": {}, "range_flags": {},
        "window_flags": plain(absorbance_window_flags(model.design.every_reading(), *v.window)),
        "repeatability": None, "trueness": None, "scatter_consistency": None,
        "criteria": plain(criteria),
        "line_weighting": {"used": "none", "why": "the standards' line of an equilibrium study is unweighted"},
        "reporting_units": {"measuring_solution": limits_in(summary, study.concentration_unit.text, as_is),
                            "reported": None,
                            "how": "an equilibrium study reports K, not a concentration: the limits and the range "
                                   "are those of the standards' line, in its concentration unit"},
        "scope": None,
    })
    block["notes"] = list(block.get("notes", [])) + [
        "the line of the standards before any correction: its slope is low by the fraction not complexed "
        "(see the equilibrium section), so the molar absorptivity shown here is the uncorrected one"]
    return block
