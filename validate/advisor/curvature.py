"""Advisor candidates for a curved response: the two ways out when Mandel's test rejects the
straight line (ISO 8466-1 and -2, from memory).

1. The second-order calibration function over the full working range (`function = "second
   order"`, ISO 8466-2), evaluated by the same model and engines as every other candidate.
2. The straight line over the largest range where it passes Mandel's test, found from the data:
   the highest standards are left out one at a time (a saturating response bends at the top)
   until the test no longer rejects the line at the 5 % level, keeping at least 3 levels.
   Samples above the narrowed range must then be diluted into it: the candidate names them, and
   their U here is that of reading them off the narrowed line as they are.

Both are quantified like any candidate (the U each would give, by the linear engine, the best
confirmed by Monte Carlo); a method already using the second-order function gets neither.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

from validate.advisor.candidates import Candidate
from validate.inputs.schema import AssayMethod, Method
from validate.model.assay import build_model
from validate.model.design import MIN_LEVELS, CalibrationDesign
from validate.model.line import fit_line
from validate.model.quadratic import MIN_LEVELS as SECOND_ORDER_LEVELS
from validate.validation.linearity import mandel_test

ALPHA = 0.05  # Mandel's test at the level the validation block uses


def _curved(design: CalibrationDesign) -> bool:
    test = mandel_test(fit_line(*design.point_data()), ALPHA)
    return test.significant is True


def _with_function(function: str) -> Callable[[Method], Method]:
    def apply(method: Method) -> Method:
        assert isinstance(method, AssayMethod) and method.calibration is not None
        return replace(method, calibration=replace(method.calibration, function=function))
    return apply


def _with_standards(standards: tuple[str, ...]) -> Callable[[Method], Method]:
    def apply(method: Method) -> Method:
        assert isinstance(method, AssayMethod) and method.calibration is not None
        return replace(method, calibration=replace(method.calibration, standards=standards))
    return apply


def largest_linear_range(design: CalibrationDesign, standard_ids: tuple[str, ...],
                         concentration: dict[str, float]) -> tuple[str, ...] | None:
    """The standards of the largest range from the lowest standard up where the straight line passes
    Mandel's test (blanks kept as the method fits them); None when no such range keeps MIN_LEVELS.
    Whole levels are dropped from the top (independent preparations of one level go together)."""
    levels = sorted({concentration[s] for s in standard_ids})
    for keep in range(len(levels) - 1, MIN_LEVELS - 1, -1):
        top = levels[keep - 1]
        kept = {s for s in standard_ids if concentration[s] <= top}
        points = [(p.concentration, p.mean, design.weight(lv.id)) for lv, p in design.fitted()
                  if lv.role == "blank" or p.solution in kept]
        xs, ys, ws = (list(v) for v in zip(*points, strict=True))
        if len(set(xs)) < MIN_LEVELS:
            return None
        test = mandel_test(fit_line(xs, ys, ws if design.weighted else None), ALPHA)
        if test.significant is False:  # evaluated and passed (a test that could not run is no pass)
            return tuple(s for s in standard_ids if s in kept)
    return None


def curvature_candidates(method: Method) -> list[Candidate]:
    """The two ways out of a curved straight line, when the method's line fails Mandel's test."""
    if not isinstance(method, AssayMethod) or method.calibration is None:
        return []
    if method.calibration.function != "straight line":
        return []
    model = build_model(method)
    design = model.design
    if design is None or not _curved(design):
        return []
    out = []
    if len({p.concentration for _, p in design.fitted()}) >= SECOND_ORDER_LEVELS:
        out.append(Candidate(
            "second-order calibration", "use the second-order calibration function y = a + b x + c x^2 over the full "
            'working range (function = "second order" in [calibration], ISO 8466-2)',
            "no extra work: the same standards and readings, a different calibration function",
            "the standards and readings as they are; Mandel's test rejects the straight line on these data",
            frozenset({"calibration function"}), _with_function("second order"), {"function": "second order"}))
    conc = model.concentrations(model.nominal_inputs())
    kept = largest_linear_range(design, method.calibration.standards, conc)
    if kept is not None and len(kept) < len(method.calibration.standards):
        out.append(_narrower(method, design, kept, conc))
    return out


def _narrower(method: AssayMethod, design: CalibrationDesign, kept: tuple[str, ...],
              conc: dict[str, float]) -> Candidate:
    """The straight line over the standards `kept`; samples read above the narrowed range are named."""
    assert method.calibration is not None
    cal = method.calibration
    top = max(conc[s] for s in kept) / cal.concentration_unit.factor
    above = [smp.id for smp in method.samples if _mean_reading(method, smp.id) > _top_response(design, kept)]
    named = f" ({', '.join(above)})" if above else ""
    return Candidate(
        "narrower linear range", f"keep the straight line over {len(kept)} standards up to {top:.4g} "
        f"{cal.concentration_unit.text}, where it passes Mandel's test (leave out "
        f"{', '.join(s for s in cal.standards if s not in kept)})",
        "fewer standards; samples above the narrowed range diluted into it" + named,
        "the kept standards and every reading as they are"
        + (f"; {', '.join(above)} lie above the narrowed range: their U here is read off the narrowed line as "
           f"they are (extrapolated); diluted into the range they carry the dilution's terms instead" if above else ""),
        frozenset({"calibration function"}), _with_standards(kept),
        {"standards": list(kept), "highest_standard": top, "samples_above": above})


def _mean_reading(method: AssayMethod, ident: str) -> float:
    readings = method.readings[ident]
    return sum(readings) / len(readings)


def _top_response(design: CalibrationDesign, kept: tuple[str, ...]) -> float:
    return max(p.mean for _, p in design.fitted() if p.solution in kept)
