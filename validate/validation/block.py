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

from validate.inputs.items import Cuvette, Photometer
from validate.inputs.schema import Method
from validate.model.assay import Model, build_model
from validate.model.line import inverse_prediction
from validate.propagation.linear import LinearResult
from validate.validation.criteria import evaluate_criteria
from validate.validation.limits import range_flags
from validate.validation.linearity import plain
from validate.validation.precision import intermediate_precision, recovery, repeatability, scatter_consistency
from validate.validation.summary import validate_calibration
from validate.validation.window import absorbance_window_flags


def calibration_data(method: Method, model: Model):
    """Concentrations (calibration unit), absorbances and weights (None: unweighted) of every reading."""
    cal = method.calibration
    conc = model.concentrations(model.nominal_inputs())
    ids = list(cal.standards) + (list(cal.blanks) if cal.blanks_in_fit else [])
    factor = cal.concentration_unit.factor
    xs = [conc[i] / factor for i in ids for _ in method.readings[i]]
    ys = [a for i in ids for a in method.readings[i]]
    ws = [model.weight(i) for i in ids for _ in method.readings[i]] if model.weights else None
    return xs, ys, ws


def predicted_reading_sd(method: Method, slope_abs_per_unit: float) -> float:
    """Scatter of single readings about the line that the bottom-up sources predict:
    photometer noise and the per-use random terms of each standard's preparation
    (repeatability, burette readings), averaged over the standards."""
    from uncertainties import ufloat

    bottom_up = dataclasses.replace(method, settings=dataclasses.replace(method.settings, scatter="bottom-up"))
    model = build_model(bottom_up)
    variables = {n: ufloat(s.value, s.u, tag=n) for n, s in model.sources.items()}
    conc = model.concentrations(variables)
    factor = method.calibration.concentration_unit.factor
    variances = []
    for sid in method.calibration.standards:
        c = conc[sid]
        random_part = sum((d * var.std_dev) ** 2 for var, d in getattr(c, "derivatives", {}).items()
                          if model.sources[var.tag].step == f"prepare {sid}")
        variances.append((slope_abs_per_unit * math.sqrt(random_part) / factor) ** 2)
    photometer = method.item_of(method.calibration.photometer, Photometer) if method.calibration.photometer else None
    noise = photometer.noise if photometer else 0.0
    return math.sqrt(noise**2 + sum(variances) / len(variances))


def validation_block(method: Method, model: Model, results: list[LinearResult]) -> dict | None:
    cal = method.calibration
    if cal is None:
        return None
    v = method.validation
    xs, ys, ws = calibration_data(method, model)
    blanks = [a for b in cal.blanks for a in method.readings[b]] or None
    cell = method.item_of(cal.cuvette, Cuvette) if cal.cuvette else None
    replicates = [len(method.readings[s.id]) for s in method.samples] or [1]
    summary = validate_calibration(
        xs, ys, weights=ws, blanks=blanks, alpha=v.alpha, beta=v.beta, declared_limit=v.declared_limit,
        path_length_cm=cell.path * 100 if cell else None,
        path_length_u=cell.tolerance / math.sqrt(3) * 100 if cell else None,
        sample_replicates=min(replicates))
    fit = summary.fit
    nonzero = [x for x in fit.x if x > 0] or list(fit.x)
    samples, flags = {}, {}
    for smp in method.samples:
        pred = inverse_prediction(fit, method.readings[smp.id], sample_weight=model.weight(smp.id))
        f = range_flags(pred.value, min(nonzero), max(fit.x), summary.limits.loq, summary.limits.lod)
        flags[smp.id] = f
        samples[smp.id] = {"concentration": pred.value, "standard_uncertainty": pred.standard_uncertainty,
                           "readings": list(method.readings[smp.id]), "flags": f}
    sample_ids = [s.id for s in method.samples]
    all_readings = [a for i in list(cal.standards) + list(cal.blanks) + sample_ids for a in method.readings[i]]
    window = absorbance_window_flags(all_readings, *v.window)
    rep_groups = [[(a - fit.intercept) / fit.slope for a in method.readings[i]] for i in sample_ids
                  if len(method.readings[i]) >= 2]
    precision = repeatability(rep_groups) if rep_groups else None
    between_series = _intermediate(method, fit, sample_ids)
    consistency = scatter_consistency(fit.residual_sd, fit.dof, predicted_reading_sd(method, fit.slope))
    trueness = _trueness(method, results)
    observed = summary.observed_for_criteria()
    rel_u = [100 * r.expanded_uncertainty / abs(r.value) for r in results if r.value]
    observed["relative_expanded_uncertainty"] = max(rel_u) if rel_u else None
    if precision is not None:
        observed["repeatability_rsd_percent"] = precision.rsd_percent
    if trueness is not None:
        observed["recovery_percent"] = trueness.recovery_percent
        observed["en_number"] = trueness.en_number
    criteria = evaluate_criteria(v.acceptance, observed)
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
        "scatter_consistency": plain(consistency),
        "criteria": plain(criteria),
    })
    return block


def _intermediate(method: Method, fit, sample_ids) -> dict:
    """Intermediate precision (ISO 5725-3) of every sample read in two or more series (the
    readings table's optional `series` column: days, analysts), in the calibration unit.
    The budget's observed scatter is within-series only: a series effect is reported here."""
    out = {}
    for ident in sample_ids:
        labels = method.reading_series.get(ident)
        if not labels or len(set(labels)) < 2:
            continue
        values = [(a - fit.intercept) / fit.slope for a in method.readings[ident]]
        try:
            result = intermediate_precision(values, groups=list(labels), factor="series")
        except ValueError as exc:
            out[ident] = {"error": str(exc)}
            continue
        out[ident] = {**plain(result), "unit": method.calibration.concentration_unit.text}
    return out


def _trueness(method: Method, results: list[LinearResult]):
    v = method.validation
    if v.reference_sample is None:
        return None
    index = [s.id for s in method.samples].index(v.reference_sample)
    result = results[index]
    ref = v.reference_value
    factor = method.result.unit.factor
    return recovery(result.value, result.standard_uncertainty, ref.value / factor, ref.u / factor,
                    coverage_factor=result.coverage_factor)


def equilibrium_validation_block(model) -> dict:
    """The line of an equilibrium study's standards, judged as a calibration: absorbance
    against the limiting reagent's total, before any correction for incomplete complexation."""
    method, study = model.method, model.method.equilibrium
    x0 = model.nominal_inputs()
    conc = model.concentrations(x0)
    factor = study.concentration_unit.factor
    xs, ys = [], []
    for ident, _, totals, _ in model._standards:
        m, l_ = totals(x0, conc)
        limiting = l_ if study.limiting == "ligand" else m
        for a in method.readings[ident]:
            xs.append(limiting / factor)
            ys.append(a)
    cell = method.item_of(study.cuvette, Cuvette) if study.cuvette else None
    v = method.validation
    summary = validate_calibration(
        xs, ys, alpha=v.alpha, beta=v.beta, path_length_cm=cell.path * 100 if cell else None,
        path_length_u=cell.tolerance / math.sqrt(3) * 100 if cell else None)
    readings = [a for ident in [m.id for m in study.standards] + model.points for a in method.readings[ident]]
    criteria = evaluate_criteria(v.acceptance, summary.observed_for_criteria())
    block = plain(summary)
    block.update({
        "settings": v.to_dict(),
        "concentration_unit": study.concentration_unit.text,
        "samples": {}, "range_flags": {},
        "window_flags": plain(absorbance_window_flags(readings, *v.window)),
        "repeatability": None, "trueness": None, "scatter_consistency": None,
        "criteria": plain(criteria),
        "line_weighting": {"used": "none", "why": "the standards' line of an equilibrium study is unweighted"},
    })
    block["notes"] = list(block.get("notes", [])) + [
        "the line of the standards before any correction: its slope is low by the fraction not complexed "
        "(see the equilibrium section), so the molar absorptivity shown here is the uncorrected one"]
    return block
