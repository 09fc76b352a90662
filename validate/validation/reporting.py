"""The line's limits and range in the reported unit, and the scope stated in [method] against them.

LOD, LOQ, the working range and the ISO 11843-2 values are found on the line, in the measuring
solution's concentration unit. The analyst reports in the result's unit, after the sample's
dilution chain: each value is put through the result formula in place of `c_measured`, every
other input at its estimate (the same for every sample), so "LOQ 0.247 µmol/L" also reads as
the LOQ in the sample, e.g. 0.019 mg/L P. The working range runs from the lowest standard
above zero to the highest (ISO 8466-1 restricts use to the range of the standards).

The scope's range ("0.05 to 0.4 mg/L P") is read from its text (validate.inputs.assay_sections.
scope_range). A range in the result's kind of unit applies to the sample, one in the calibration's
kind only to the measuring solution. Its ends are compared with the working range and the LOQ,
and every result outside it is flagged: a result outside the stated scope is not covered by
the validation, even where it lies on the line.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from validate.inputs.assay_sections import scope_range
from validate.inputs.schema import AssayMethod
from validate.model.assay import Model
from validate.model.errors import ModelError
from validate.propagation.linear import LinearResult
from validate.validation.summary import ValidationSummary

# ends of the scope within this relative distance of the working range's agree with it: a scope
# is written to one to three digits (a choice of this tool)
SCOPE_TOLERANCE = 0.01


def as_is(x: float | None) -> float | None:
    return x


def limits_in(summary: ValidationSummary, unit: str, convert: Callable[[float | None], float | None],
              straight_line: bool = True) -> dict:
    """The limits and the working range of the line, each passed through `convert`; the ISO 11843-2
    values only for a straight line (its formulas assume one: null for a second-order function)."""
    lim, iso = summary.limits, summary.limits.iso11843
    above_zero = [x for x in summary.fit.x if x > 0] or list(summary.fit.x)
    ends = sorted(v for v in (convert(min(above_zero)), convert(summary.highest_standard)) if v is not None)
    return {"unit": unit, "lod": convert(lim.lod), "loq": convert(lim.loq),
            "working_range_low": ends[0] if len(ends) == 2 else None,
            "working_range_high": ends[1] if len(ends) == 2 else None,
            "critical_value": convert(iso.critical_value) if straight_line else None,
            "minimum_detectable_value": convert(iso.minimum_detectable_value) if straight_line else None}


def _through_formula(model: Model, factor: float) -> Callable[[float | None], float | None]:
    def convert(x: float | None) -> float | None:
        if x is None or not math.isfinite(x):
            return None
        try:
            value = model.result_at(x * factor)
        except ModelError:  # the formula is not defined there (the logarithm of zero)
            return None
        return value if math.isfinite(value) else None
    return convert


def reporting_units(method: AssayMethod, model: Model, summary: ValidationSummary) -> dict:
    """The limits and the working range in the measuring solution's unit and in the reported unit."""
    cal = method.calibration
    if cal is None:
        raise ValueError("the method has no [calibration]")
    formula = method.result.formula
    straight = model.design is None or not model.design.second_order
    measuring = limits_in(summary, cal.concentration_unit.text, as_is, straight)
    if "c_measured" not in formula.names:
        return {"measuring_solution": measuring, "reported": None,
                "how": "the result formula does not read the line (no c_measured): no conversion"}
    reported = limits_in(summary, method.result.unit.text, _through_formula(model, cal.concentration_unit.factor),
                         straight)
    return {"measuring_solution": measuring, "reported": reported,
            "how": f"each value put through the result formula ({formula.text}) in place of c_measured, every "
                   "other input at its estimate"}


def results_by_sample(model: Model, results: list[LinearResult]) -> dict[str, float]:
    """Each sample's result value (reported unit), by sample id."""
    return {key.id: r.value for key, r in zip(model.result_keys, results, strict=True)
            if key.kind == "result" and key.id is not None}


def _range_text(low: float, high: float, unit: str) -> str:
    return f"{low:.4g} to {high:.4g} {unit}"


def _against_range(low: float, high: float, units: dict) -> list[str]:
    """How the scope's ends stand to the working range and the LOQ, in the same unit."""
    flags = []
    w_low, w_high, loq, unit = (units["working_range_low"], units["working_range_high"], units["loq"],
                                units["unit"])
    if w_low is not None and low < w_low * (1 - SCOPE_TOLERANCE):
        flags.append(f"the scope starts at {low:.4g} {unit}, below the lowest standard ({w_low:.4g} {unit}): "
                     "results there are extrapolated")
    if loq is not None and low < loq * (1 - SCOPE_TOLERANCE):
        flags.append(f"the scope starts at {low:.4g} {unit}, below the limit of quantitation ({loq:.4g} {unit})")
    if w_high is not None and high > w_high * (1 + SCOPE_TOLERANCE):
        flags.append(f"the scope reaches {high:.4g} {unit}, above the highest standard ({w_high:.4g} {unit}): "
                     "results there are extrapolated")
    return flags


def _no_scope(text: str, note: str) -> dict:
    return {"text": text, "low": None, "high": None, "unit": None, "applies_to": None, "flags": [],
            "note": note, "sample_flags": {}}


def scope_check(method: AssayMethod, units: dict, values: dict[str, float], samples: dict) -> dict:
    """The scope's range against the working range, and each sample outside it (`sample_flags`,
    taken into the range flags by the caller)."""
    cal = method.calibration
    stated = scope_range(method.scope)
    if stated is None or cal is None:
        return _no_scope(method.scope, 'the scope states no concentration range ("LOW to HIGH UNIT"): results are '
                                       "not checked against one")
    if stated.unit.dims == method.result.unit.dims:  # with no conversion (no c_measured) only the results
        applies, target, shown = "sample", method.result.unit, units.get("reported")
        observed = values
    elif stated.unit.dims == cal.concentration_unit.dims:
        applies, target, shown = "measuring solution", cal.concentration_unit, units["measuring_solution"]
        observed = {sid: s["concentration"] for sid, s in samples.items()}
    else:
        return _no_scope(method.scope, f"the scope's range is in {stated.unit.text}, which is neither the result's "
                                       "nor the calibration's kind of unit: not compared")
    low, high = (v * stated.unit.factor / target.factor for v in (stated.low, stated.high))
    text = _range_text(stated.low, stated.high, stated.unit.text)
    outside = {sid: f"outside the stated scope ({text}): {value:.4g} {target.text} is not covered by the validation"
               for sid, value in observed.items() if value is not None and not low <= value <= high}
    return {"text": method.scope, "low": low, "high": high, "unit": target.text, "applies_to": applies,
            "flags": _against_range(low, high, shown) if shown else [],
            "note": f"the scope states {text} in the {applies}", "sample_flags": outside}
