"""The validation blocks `validate run` prints: the line's fit and tests, its limits and range in
the measuring solution's and the reported unit, the molar absorptivity, the stated scope, and the
acceptance criteria. Each takes parts of the record dict; nothing here computes a result."""

from __future__ import annotations

from rich.markup import escape

from validate.report.numbers import MISSING, compact, gum_pair
from validate.report.terminal_run import BLANK, Line, Printable, p_after


def _line_title(v: dict) -> str:
    plain_line = v.get("samples") == {} and v.get("trueness") is None and v.get("scatter_consistency") is None
    return "Line of the standards" if plain_line else "Calibration line"


def _points(v: dict) -> str:
    """What the line's points are: preparation means on a method's line, readings in a bare table."""
    n = v["fit"]["n"]
    return f"{n} points, one mean reading per prepared solution" if v.get("fit_units") else f"{n} readings"


def _fit_lines(v: dict) -> list[Printable]:
    fit, unit = v["fit"], escape(v["concentration_unit"])
    return [BLANK,
            Line(f"[bold]{_line_title(v)}[/] ({_points(v)}, absorbance against {unit})"),
            Line(f"  slope {compact(fit['slope'])} ± {compact(fit['slope_u'], 2)} per {unit}, intercept "
                 f"{compact(fit['intercept'])} ± {compact(fit['intercept_u'], 2)}, r² {fit['r_squared']:.5f}, "
                 f"residual SD {compact(fit['residual_sd'], 3)}")]


def _test_lines(v: dict) -> list[Printable]:
    lines: list[Printable] = []
    for key in ("lack_of_fit", "mandel", "runs", "intercept", "weighting"):
        test = v[key]
        p = f" (p {p_after(test['p_value'])})" if test.get("p_value") is not None else ""
        lines.append(Line(f"  {escape(test['name'])}{p}: {escape(test['verdict'])}", soft_wrap=True))
    return lines


def _in_units(values: dict) -> str:
    """'LOD 0.0814, LOQ 0.247, range 0.998 to 9.98, x_C 0.0289, x_D 0.0578 µmol/L'"""
    iso = (f", ISO 11843-2 x_C {compact(values['critical_value'], 3)}, x_D "
           f"{compact(values['minimum_detectable_value'], 3)}" if values.get("critical_value") is not None else "")
    return (f"LOD {compact(values['lod'], 3)}, LOQ {compact(values['loq'], 3)}, working range "
            f"{compact(values['working_range_low'], 3)} to {compact(values['working_range_high'], 3)}"
            f"{iso} {escape(values['unit'])}")


def _reporting_lines(v: dict) -> list[Printable]:
    """The limits and range in the measuring solution's unit and, through the result formula, the reported one."""
    units = v.get("reporting_units")
    if not units:
        return []
    lines: list[Printable] = [Line(f"  in the measuring solution: {_in_units(units['measuring_solution'])}",
                                   soft_wrap=True)]
    if units.get("reported"):
        lines.append(Line(f"  in the sample (reported unit): {_in_units(units['reported'])}", soft_wrap=True))
    lines.append(Line(f"  [dim]{escape(units['how'])}[/]", soft_wrap=True))
    return lines


def _absorptivity_line(v: dict) -> list[Printable]:
    e = v.get("molar_absorptivity")
    if not e or e.get("value") is None:
        return []
    value, u = gum_pair(e["value"], e["standard_uncertainty"], missing=MISSING)
    note = e.get("note")
    return [Line(f"  molar absorptivity {value} {escape(e['unit'])}, u = {u} {escape(e['unit'])} (path length "
                 f"{compact(e['path_length_cm'])} cm)" + (f"; {escape(note)}" if note else ""), soft_wrap=True)]


def _scope_lines(v: dict) -> list[Printable]:
    sc = v.get("scope")
    if not sc:
        return []
    lines: list[Printable] = [Line(f"  scope: {escape(sc['note'])}", soft_wrap=True)]
    lines += [Line(f"  [yellow]warning[/] {escape(flag)}", soft_wrap=True) for flag in sc["flags"]]
    return lines


def _limit_lines(v: dict) -> list[Printable]:
    limits, unit = v["limits"], escape(v["concentration_unit"])
    routes = "; ".join(f"{escape(r['route'])} {compact(r['lod'], 3)}/{compact(r['loq'], 3)}"
                       for r in limits["routes"])
    lines: list[Printable] = [
        Line(f"  LOD {compact(limits['lod'], 3)} {unit}, LOQ {compact(limits['loq'], 3)} {unit} "
             f"(declared route: {escape(limits['declared_route'])}); all routes (LOD/LOQ, {unit}): {routes}",
             soft_wrap=True)]
    lines += _reporting_lines(v)
    lines += [Line(f"  [yellow]warning[/] {escape(w)}", soft_wrap=True) for w in limits["warnings"]]
    return lines + _absorptivity_line(v) + _scope_lines(v)


def _scatter_and_window(v: dict) -> list[Printable]:
    lines: list[Printable] = []
    for key, what in (("scatter_consistency", "scatter of the preparation means against the budget"),
                      ("reading_noise_consistency", "pure error against the photometer's reading noise")):
        sc = v.get(key)
        if sc:
            lines.append(Line(f"  {what}: {escape(sc['verdict'])} (observed SD {compact(sc['observed_sd'], 3)}, "
                              f"predicted {compact(sc['predicted_sd'], 3)})", soft_wrap=True))
    window = v["window_flags"]
    if window.get("outside"):
        lines.append(Line(f"  [yellow]note[/] {window['outside']} reading(s) outside the absorbance window "
                          f"{window['low']:g} to {window['high']:g} (common practice)"))
    return lines


def _precision_and_trueness(v: dict) -> list[Printable]:
    lines: list[Printable] = []
    for sample, ip in (v.get("intermediate_precision") or {}).items():
        if "intermediate_sd" in ip:
            lines.append(Line(
                f"  intermediate precision of {escape(sample)} over {ip['groups']} series: s_I "
                f"{compact(ip['intermediate_sd'], 3)} {escape(ip['unit'])} "
                f"(s_r {compact(ip['repeatability_sd'], 3)}): {escape(ip['verdict'])}", soft_wrap=True))
    t = v.get("trueness")
    if t:
        lines.append(Line(f"  trueness: recovery {t['recovery_percent']:.1f} %, E_n = {t['en_number']:.2f}: "
                          f"{escape(t['verdict'])}", soft_wrap=True))
    return lines


def second_order_lines(so: dict | None, unit: str) -> list[Printable]:
    """The second-order calibration function the results are read off (ISO 8466-2)."""
    if not so:
        return []
    unit = escape(unit)
    (a, b, c), (ua, ub, uc) = so["coefficients"], so["standard_uncertainties"]
    lo, hi = so["sensitivity_at_range_ends"]
    lim = so["limits"]
    routes = "; ".join(f"{escape(r['route'])} {compact(r['lod'], 3)}/{compact(r['loq'], 3)}" for r in lim["routes"])
    lines: list[Printable] = [
        BLANK, Line(f"[bold]Second-order calibration function[/] (ISO 8466-2; {so['n']} points, y = a + b x + c x^2, "
                    f"x in {unit}); the results are read off it, the straight line above is shown for the linearity "
                    f"tests", soft_wrap=True),
        Line(f"  a {compact(a, 4)} ± {compact(ua, 2)}, b {compact(b, 4)} ± {compact(ub, 2)}, c {compact(c, 4)} ± "
             f"{compact(uc, 2)} (standard uncertainties; covariance in the record), residual SD "
             f"{compact(so['residual_standard_deviation'], 3)} with {so['dof']} degrees of freedom", soft_wrap=True),
        Line(f"  sensitivity b + 2 c x: {compact(lo, 3)} at the lowest, {compact(hi, 3)} at the highest standard; "
             f"turning point at {compact(so['turning_point'], 4)} {unit}", soft_wrap=True)]
    lines += [Line(f"  {escape(s['id'])}: {compact(s['concentration'], 4)} {unit} "
                   f"(u {compact(s['standard_uncertainty'], 2)} from the function), "
                   f"sensitivity {compact(s['sensitivity'], 3)} per {unit}", soft_wrap=True)
              for s in so["samples"]]
    lines.append(Line(f"  LOD {compact(lim['lod'], 3)} {unit}, LOQ {compact(lim['loq'], 3)} {unit} (declared route: "
                      f"{escape(lim['declared_route'])}, S = b); routes valid for the function (LOD/LOQ): {routes}",
                      soft_wrap=True))
    lines += [Line(f"  [dim]{escape(n)}[/]", soft_wrap=True) for n in lim["not_shown"]]
    return lines


def second_order_text(result: dict) -> list[str]:
    """`validate calibrate --function "second order"`: the function the samples are read off."""
    so = result.get("second_order")
    if not so:
        return []
    (a, b, c), (ua, ub, uc) = result["coefficients"], result["standard_uncertainties"]
    lim = so["limits"]
    return ["", f"Second-order function {so['equation']} (ISO 8466-2, from memory), standard uncertainties u; "
                f"the samples below are read off it",
            f"  a {compact(a, 6)}, u = {compact(ua, 3)}", f"  b {compact(b, 6)}, u = {compact(ub, 3)}",
            f"  c {compact(c, 6)}, u = {compact(uc, 3)}",
            f"  residual SD {compact(so['residual_standard_deviation'], 6)} (absorbance), {so['dof']} degrees of "
            f"freedom; covariance of a, b, c in --json",
            "  limits valid for the function (S = b): " + "; ".join(
                f"{r['route']} LOD {compact(r['lod'], 4)} LOQ {compact(r['loq'], 4)}" for r in lim["routes"]),
            *[f"  {n}" for n in lim["not_shown"]]]


def validation_lines(v: dict) -> list[Printable]:
    """The line of the standards: fit, linearity tests, limits, scatter, precision, trueness."""
    return (_fit_lines(v) + _test_lines(v) + _limit_lines(v) + _scatter_and_window(v)
            + _precision_and_trueness(v))



# --------------------------------------------------------------------------
# acceptance criteria

def _criterion_unit(c: dict, concentration_unit: str) -> str:
    unit = c.get("unit") or ""
    unit = concentration_unit if unit == "concentration unit" else unit
    return f" {unit}" if unit else ""


def _limit_text(c: dict, unit: str) -> str:
    limit = c["limit"]
    if isinstance(limit, list):
        return f"within {limit[0]:g} to {limit[1]:g}{unit}"
    comparison = "<=" if c["comparison"] == "|x| <=" else c["comparison"]
    return f"{comparison} {limit:g}{unit}"


def _criterion_line(c: dict, concentration_unit: str) -> Line:
    """'met  limit of quantitation: 0.2467 µmol/L <= 0.5 µmol/L', every value with its unit."""
    mark = {"met": "[green]met[/]", "not met": "[red]NOT MET[/]",
            "not applicable": "[dim]not applicable[/]"}.get(c["status"], "[yellow]not evaluable[/]")
    unit = _criterion_unit(c, concentration_unit)
    default = " (default)" if c["is_default"] else ""
    observed = c["observed"]  # r^2 close to 1 needs its digits (as on page 1)
    if c["status"] == "not applicable":  # nothing to judge: the verdict says why (no reference sample)
        return Line(f"  {mark}  {escape(c['name'])}: not judged for this method (see the verdict)", soft_wrap=True)
    if observed is None:
        shown = "no observed value (see the verdict)"
    else:
        shown = f"{observed:.6f}" if 0.9 < observed < 1 else compact(observed)
        shown = f"|{shown}|" if c["comparison"] == "|x| <=" else shown
        shown += unit
    return Line(f"  {mark}  {escape(c['name'])}: {escape(shown)} {escape(_limit_text(c, unit))}{default}",
                soft_wrap=True)


def criteria_lines(criteria: dict, concentration_unit: str = "") -> list[Printable]:
    """How many criteria are met, each evaluated or not evaluable one with its unit, and the caution."""
    rows = criteria["criteria"]
    counts = {status: sum(1 for c in rows if c["status"] == status)
              for status in ("met", "not met", "not set", "not evaluable", "not applicable")}
    head = ", ".join(f"{n} {status}" for status, n in counts.items() if n)
    lines: list[Printable] = [BLANK, Line(f"[bold]Acceptance criteria[/]: {head}")]
    lines += [_criterion_line(c, concentration_unit) for c in rows
              if c["status"] in ("met", "not met", "not evaluable", "not applicable")]
    lines.append(Line(f"  [dim]{escape(criteria['caution'])}[/]", soft_wrap=True))
    return lines
