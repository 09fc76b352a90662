"""The [validation] and [acceptance] sections of a method file."""

from __future__ import annotations

import math

from validate.inputs.schema import ResultSpec, ValidationSettings
from validate.inputs.tables import Table
from validate.inputs.values import UncertainValue

COMMON = "common practice; set it from the requirements that apply to the method"

# setting key -> (plain name, observed key, comparison, default, unit, source)
CRITERIA = {
    "min_r_squared": ("coefficient of determination r^2", "r_squared", ">=", 0.995, "",
                      COMMON + " (ICH Q2(R1) asks only that r be reported)"),
    "max_abs_relative_residual": ("largest |residual| / fitted value of the standards",
                                  "max_abs_relative_residual", "<=", 5.0, "%", COMMON),
    "min_linearity_p_value": ("smallest p value of the lack-of-fit and Mandel tests",
                              "min_linearity_p_value", ">=", 0.05, "",
                              "5 % significance level, " + COMMON),
    "max_relative_expanded_uncertainty": ("relative expanded uncertainty of the result",
                                          "relative_expanded_uncertainty", "<=", None, "%",
                                          "no general default: the fitness-for-purpose target "
                                          "of the method (EURACHEM guide 'The Fitness for "
                                          "Purpose of Analytical Methods')"),
    "max_loq": ("limit of quantitation", "loq", "<=", None, "concentration unit",
                "no general default: the lowest level the method must quantify"),
    "recovery_range": ("recovery against the reference value", "recovery_percent", "within",
                       (95.0, 105.0), "%", COMMON),
    "max_abs_en": ("|E_n| against the reference value", "en_number", "|x| <=", 1.0, "",
                   "ISO 13528:2015 and ISO/IEC 17043:2010: |E_n| <= 1 satisfactory"),
    "max_repeatability_rsd": ("repeatability relative SD", "repeatability_rsd_percent", "<=",
                              None, "%", "no general default: set from the method's needs"),
}

DEFAULTS = {key: spec[3] for key, spec in CRITERIA.items()}

# the criteria an equilibrium study can be judged on: its standards' line and the U of K (it has
# no reference value for K and reads no sample in replicate)
STUDY_CRITERIA = ("min_r_squared", "max_abs_relative_residual", "min_linearity_p_value", "max_loq",
                  "max_relative_expanded_uncertainty")

# The routes to the limits of detection and quantitation (validate.validation.limits computes them).
ROUTES = ("ich_residual_sd", "ich_intercept_sd", "ich_blank_sd", "iso11843_2")


def parse_validation(top: Table, parts, result: ResultSpec, defaults: list[str]) -> ValidationSettings:
    """`parts` gives the assay's samples and calibration (validate.inputs.assay_sections.AssayParts)."""
    t = Table(top.get("validation", {}), top.file, "[validation]")
    t.allow("declared_limit", "alpha", "beta", "absorbance_window", "reference_sample", "reference_value")
    base = ValidationSettings()
    route = t.text("declared_limit", base.declared_limit)
    if route is None or route not in ROUTES:
        raise t.error(f"unknown route {route!r}", "declared_limit", fix=f"use one of: {', '.join(ROUTES)}")
    # error probabilities below 1e-5 are never used, and at ~1e-17 the t quantiles become infinite
    alpha = t.number("alpha", base.alpha, low=1e-5, high=0.5)
    beta = t.number("beta", base.beta, low=1e-5, high=0.5)
    window = t.get("absorbance_window", list(base.window))
    if not _is_range(window):
        raise t.error("expected two absorbances, low and high", "absorbance_window", fix="e.g. [0.1, 1.0]")
    sample, ref = _reference(t, parts.samples, result)
    if parts.calibration is not None:
        for key, text in (("declared_limit", f"declared detection-limit route: {route}"),
                          ("alpha", f"false-positive probability alpha = {alpha:g} (ISO 11843-2)"),
                          ("beta", f"false-negative probability beta = {beta:g} (ISO 11843-2)"),
                          ("absorbance_window", f"absorbance window {window[0]:g} to {window[1]:g} "
                           f"(common practice)")):
            if not t.has(key):
                defaults.append(f"default: {text}")
    acceptance = _acceptance(Table(top.get("acceptance", {}), top.file, "[acceptance]"))
    if parts.calibration is not None:
        defaults += default_criteria_line(acceptance, tuple(CRITERIA))
    return ValidationSettings(route, alpha, beta, (float(window[0]), float(window[1])), sample, ref,
                              acceptance)


def criterion_text(key: str, limit) -> str:
    """A criterion's limit as the analyst writes it: "recovery_range = 95 to 105 %"."""
    unit = CRITERIA[key][4]
    unit = "" if unit == "concentration unit" else f" {unit}" if unit == "%" else ""
    if isinstance(limit, (tuple, list)):
        return f"{key} = {limit[0]:g} to {limit[1]:g}{unit}"
    return f"{key} = {limit:g}{unit}"


def default_criteria_line(acceptance: dict, applicable: tuple[str, ...]) -> list[str]:
    """The defaults line for the criteria the user left unset (none: an empty list)."""
    unset = [k for k in applicable if k not in acceptance and DEFAULTS[k] is not None]
    if not unset:
        return []
    return ["default acceptance criteria (common practice, set yours under [acceptance]): " +
            ", ".join(criterion_text(k, DEFAULTS[k]) for k in unset)]


def parse_study_acceptance(top: Table, defaults: list[str]) -> ValidationSettings:
    """An equilibrium study's [acceptance]: the criteria of STUDY_CRITERIA by default; another one
    set by the user is kept and shown as not evaluable (validate.validation.criteria)."""
    acceptance = _acceptance(Table(top.get("acceptance", {}), top.file, "[acceptance]"))
    defaults += default_criteria_line(acceptance, STUDY_CRITERIA)
    return ValidationSettings(acceptance=acceptance)


def _is_range(value) -> bool:
    """Two finite plain numbers, the first below the second."""
    return (isinstance(value, list) and len(value) == 2 and
            all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in value)
            and value[0] < value[1])


def _reference(t: Table, samples, result: ResultSpec) -> tuple[str | None, UncertainValue | None]:
    """The reference sample for trueness and its reference value, in the result's unit."""
    sample = t.text("reference_sample")
    if sample is None:
        if t.has("reference_value"):
            raise t.error("a reference value needs `reference_sample`, the sample it belongs to", "reference_value",
                          fix="add reference_sample = \"...\" naming one of the [samples]")
        return None, None
    if sample not in {s.id for s in samples}:
        raise t.error(f"`{sample}` is not one of the [samples]", "reference_sample",
                      fix=f"use one of: {', '.join(s.id for s in samples) or '(no samples defined)'}")
    return sample, t.uncertain("reference_value", result.unit.dims, positive=False)


def _acceptance(a: Table) -> dict:
    a.allow(*CRITERIA)
    acceptance: dict = {}
    for key in a.data:
        if key == "recovery_range":
            value = a.get(key)
            if not _is_range(value):
                raise a.error("expected [low, high] in percent, low below high", key,
                              fix="e.g. recovery_range = [95, 105]")
            acceptance[key] = (float(value[0]), float(value[1]))
        else:
            acceptance[key] = a.number(key)
    return acceptance
