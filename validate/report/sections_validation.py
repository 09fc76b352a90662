"""Report sections, part 2: the validation statistics of the calibration.

Linearity tests, detection and quantitation limits, working range with the
absorbance window, precision and trueness. Each builder returns None when
the record has no `validation` block (or no data for the section).
"""

from __future__ import annotations

from validate.report import figures
from validate.report.numbers import DASH, gum_pair, is_number, num, p_value, pct
from validate.report.sections import coloured, concentration_unit, figure_block, pretty
from validate.report.style import bullets, data_table, heading, key_value_table, para

TEST_KEYS = ("lack_of_fit", "mandel", "runs", "intercept", "weighting")

ROUTE_NAMES = {
    "ich_residual_sd": "ICH Q2: σ = residual SD of the line",
    "ich_intercept_sd": "ICH Q2: σ = SD of the intercept",
    "ich_blank_sd": "ICH Q2: σ = SD of the blank readings",
    "iso11843_2": "ISO 11843-2: minimum detectable value",
}


def _validation(record: dict) -> dict | None:
    v = record.get("validation")
    return v if isinstance(v, dict) and v else None


def linearity_tests(validation: dict) -> list[dict]:
    """The tests as a list, whether the record holds them as a list, a dict, or top-level keys."""
    tests = validation.get("tests")
    if isinstance(tests, list):
        return [t for t in tests if isinstance(t, dict)]
    if isinstance(tests, dict):
        return [t for t in tests.values() if isinstance(t, dict)]
    found = [validation[k] for k in TEST_KEYS if isinstance(validation.get(k), dict)]
    found += [v for k, v in validation.items() if k not in TEST_KEYS and isinstance(v, dict)
              and "p_value" in v and "verdict" in v and "name" in v]
    return found


def _dof_text(value) -> str:
    if isinstance(value, (list, tuple)):
        return ", ".join(num(v, 3) for v in value) if value else DASH
    return num(value, 3)


def _sources(items: list[tuple[str | None, str | None]]) -> list:
    lines = [f"{name}: {src}" for name, src in items if src]
    return [para("Sources", "small")] + bullets(lines, "small") if lines else []


def linearity(record: dict) -> list | None:
    v = _validation(record)
    tests = linearity_tests(v) if v else []
    if not v or not tests:
        return None
    rows = []
    for t in tests:
        significant = t.get("significant")
        good = None if significant is None else not significant
        if t.get("name", "").startswith("intercept"):
            good = None  # a non-zero intercept is information, not a failure
        rows.append([t.get("name", DASH), num(t.get("statistic"), 4), _dof_text(t.get("dof")),
                     p_value(t.get("p_value"), 3), coloured(t.get("verdict", DASH), good)])
    out = [para("Each test at its stated significance level; the verdict says what the result "
                "means for the straight line.", "lead"),
           data_table(["test", "statistic", "degrees of freedom", "p value", "verdict"], rows,
                      [30, 18, 20, 16, 90], numeric={1, 2, 3})]
    points = v.get("points") or {}
    if points.get("flagged"):
        out += [heading("Points that stand out", 2), *bullets(points["flagged"])]
    if is_number(v.get("max_abs_relative_residual_percent")):
        out.append(para("Largest |residual| / fitted value over the standards above zero: "
                        f"{num(v['max_abs_relative_residual_percent'], 3)} %.", "body"))
    out += _sensitivity(v, concentration_unit(record))
    notes = list(v.get("notes") or [])
    if notes:
        out += [heading("Notes", 2), *bullets(notes)]
    out += _sources([(t.get("name"), t.get("source")) for t in tests] +
                    [("residual diagnostics", points.get("source"))])
    return out


def _sensitivity(v: dict, unit: str) -> list:
    rows = []
    s = v.get("sensitivity")
    if isinstance(s, dict) and is_number(s.get("slope")):
        rows.append(("sensitivity (slope)", f"{num(s['slope'], 5)} per {unit}, u = "
                     f"{num(s.get('standard_uncertainty'), 3)} per {unit} "
                     f"({pct(s.get('relative_standard_uncertainty'), 2)}), ν = {s.get('dof', DASH)}"))
    e = v.get("molar_absorptivity")
    if isinstance(e, dict) and is_number(e.get("value")):
        unit = pretty(e.get("unit", ""))
        value, u = gum_pair(e["value"], e.get("standard_uncertainty"))
        name = "molar absorptivity ε" if "mol" in unit else "absorptivity"
        rows.append((name, f"{value} {unit}, u = {u} {unit} ({pct(e.get('relative_standard_uncertainty'), 2)}); "
                     f"path length {num(e.get('path_length_cm'), 4)} cm" +
                     (f"; {e['note']}" if e.get("note") else "")))
    if not rows:
        return []
    return [heading("Sensitivity and molar absorptivity", 2), key_value_table(rows, (44, 130))]


def _route_rows(limits: dict) -> list[list]:
    declared = limits.get("declared_route")
    return [[ROUTE_NAMES.get(r.get("route"), r.get("route", DASH)), num(r.get("sigma"), 3), num(r.get("lod"), 3),
             num(r.get("loq"), 3) if r.get("loq") is not None else "not defined",
             "declared" if r.get("route") == declared else ""] for r in limits["routes"]]


def detection_limits(record: dict) -> list | None:
    v = _validation(record)
    limits = (v or {}).get("limits")
    if not isinstance(limits, dict) or not limits.get("routes"):
        return None
    unit = concentration_unit(record)
    rows = _route_rows(limits)
    out = [para(f"Limits in {unit or 'the concentration unit'}; σ in absorbance. The declared "
                f"route is the one this record uses: LOD = {num(limits.get('lod'), 3)} {unit}, "
                f"LOQ = {num(limits.get('loq'), 3)} {unit}.", "lead"),
           data_table(["route", "σ", f"LOD / {unit}", f"LOQ / {unit}", ""], rows,
                      [74, 22, 26, 30, 22], numeric={1, 2, 3})]
    iso = limits.get("iso11843")
    if isinstance(iso, dict):
        out.append(key_value_table([
            ("ISO 11843-2 critical value x_C", f"{num(iso.get('critical_value'), 3)} {unit} "
             f"(response above the intercept {num(iso.get('critical_value_response'), 3)})"),
            ("minimum detectable value x_D", f"{num(iso.get('minimum_detectable_value'), 3)} {unit}; "
             "with the exact noncentral-t δ "
             f"{num(iso.get('minimum_detectable_value_exact_delta'), 3)} {unit}"),
            ("α, β, readings per sample K", f"{num(iso.get('alpha'))}, {num(iso.get('beta'))}, "
             f"{iso.get('sample_replicates', DASH)}")], (58, 116)))
    out += _in_both_units(v or {})
    warnings = list(limits.get("warnings") or []) + list(limits.get("notes") or [])
    if warnings:
        out += [heading("Warnings", 2), *bullets(warnings)]
    notes = [f"{ROUTE_NAMES.get(r.get('route'), r.get('route', ''))}: {r['note']}"
             for r in limits["routes"] if r.get("note")]
    out += bullets(notes, "small")
    out += _sources([(ROUTE_NAMES.get(r.get("route"), r.get("route", "")), r.get("source"))
                     for r in limits["routes"]])
    return out


UNIT_ROWS = (("LOD (declared route)", "lod", 3), ("LOQ (declared route)", "loq", 3),
             ("ISO 11843-2 critical value x_C", "critical_value", 3),
             ("ISO 11843-2 minimum detectable value x_D", "minimum_detectable_value", 3),
             ("working range: lowest standard above zero", "working_range_low", 4),
             ("working range: highest standard", "working_range_high", 4))


def _in_both_units(v: dict) -> list:
    """The limits and the working range in the measuring solution's unit and in the reported unit."""
    units = v.get("reporting_units")
    if not isinstance(units, dict):
        return []
    columns = [units["measuring_solution"]] + ([units["reported"]] if units.get("reported") else [])
    header = ["", f"measuring solution / {columns[0]['unit']}"]
    header += [f"sample, reported / {columns[1]['unit']}"] if len(columns) > 1 else []
    rows = [[label] + [num(c.get(key), digits) for c in columns] for label, key, digits in UNIT_ROWS
            if any(c.get(key) is not None for c in columns)]  # x_C, x_D: null for a second-order function
    widths = [80, 47, 47] if len(columns) > 1 else [100, 74]
    return [heading("In the measuring solution and in the reported unit", 2),
            data_table(header, rows, widths, numeric={1, 2}), para(units["how"], "note")]


def _scope(v: dict) -> list:
    sc = v.get("scope")
    if not isinstance(sc, dict):
        return []
    rows = [("stated scope", sc.get("text") or DASH), ("range read from it", sc.get("note") or DASH)]
    out = [heading("Stated scope", 2), key_value_table(rows, (58, 116))]
    if sc.get("flags"):
        out += bullets(sc["flags"])
    elif sc.get("low") is not None:
        out.append(para("The stated scope lies within the working range and above the LOQ.", "small"))
    return out


def _flag_rows(flags, clear: str) -> list[list]:
    """{sample: [flags]} as table rows; `clear` where a sample has none."""
    if isinstance(flags, dict):
        return [[sid, "; ".join(map(str, f)) if f else clear] for sid, f in flags.items()]
    return []


def _sample_rows(v: dict, unit: str) -> list[list]:
    """Samples read off the line: concentration with u, and their range flags."""
    rows = []
    for sid, smp in (v.get("samples") or {}).items():
        if not isinstance(smp, dict):
            continue
        flags = smp.get("flags") or (v.get("range_flags") or {}).get(sid) or []
        rows.append([sid, num(smp.get("concentration"), 4), num(smp.get("standard_uncertainty"), 3),
                     "; ".join(map(str, flags)) if flags else _clear(v)])
    return rows


def _clear(v: dict) -> str:
    """What an unflagged sample is: within the working range, and within the scope where one is stated."""
    scope = v.get("scope") or {}
    return "within the working range" + (" and the stated scope" if scope.get("low") is not None else "")


def working_range(record: dict) -> list | None:
    v = _validation(record)
    if not v:
        return None
    unit = concentration_unit(record)
    limits = v.get("limits") or {}
    facts = [("lowest and highest standard", f"{num(v.get('lowest_standard'), 4)} to "
              f"{num(v.get('highest_standard'), 4)} {unit}"),
             ("declared LOD and LOQ",
              f"{num(limits.get('lod'), 3)} and {num(limits.get('loq'), 3)} {unit}")]
    reported = (v.get("reporting_units") or {}).get("reported")
    if isinstance(reported, dict):
        facts.append(("in the sample (reported unit)",
                      f"working range {num(reported.get('working_range_low'), 4)} to "
                      f"{num(reported.get('working_range_high'), 4)} {reported['unit']}; LOD "
                      f"{num(reported.get('lod'), 3)}, LOQ {num(reported.get('loq'), 3)} {reported['unit']}"))
    out = [key_value_table(facts, (58, 116)), *_scope(v)]
    sample_rows = _sample_rows(v, unit)
    if sample_rows:
        out += [heading("Samples against the working range", 2),
                data_table(["sample", f"concentration / {unit}", f"u / {unit}", "flags"],
                           sample_rows, [40, 30, 22, 82], numeric={1, 2})]
    elif _flag_rows(v.get("range_flags"), ""):
        out += [heading("Samples against the working range", 2),
                data_table(["sample", "flags"],
                           _flag_rows(v.get("range_flags"), "within the working range"), [50, 124])]
    out += _window(record, v)
    return out


def _flagged_readings(window_flags: dict) -> list[list]:
    """Readings outside the window, grouped by what is wrong with them."""
    groups: dict[str, list[float]] = {}
    for value, flags in zip(window_flags.get("absorbance") or [], window_flags.get("flags") or [], strict=False):
        for flag in flags or []:
            groups.setdefault(str(flag), []).append(value)
    return [[flag, len(values), ", ".join(num(a, 4) for a in values)]
            for flag, values in groups.items()]


def _window_text(window: dict, every: dict, low, high) -> list:
    """How many readings lie inside the window, and those outside grouped by flag."""
    which = "readings (standards, blanks and samples)" if window is every else "readings of the calibration"
    total = (window.get("inside") or 0) + (window.get("outside") or 0)
    out = [para(f"{window.get('inside', DASH)} of {total} {which} lie inside the window "
                f"{num(low)} to {num(high)}; {window.get('outside', DASH)} outside.", "lead")]
    flagged = _flagged_readings(window)
    if flagged:
        out.append(data_table(["outside the window", "n", "absorbance readings"], flagged,
                              [78, 10, 86], numeric={1}))
    return out


def _window(record: dict, v: dict) -> list:
    fitted: dict = v["window"] if isinstance(v.get("window"), dict) else {}
    every: dict = v["window_flags"] if isinstance(v.get("window_flags"), dict) else {}
    window: dict = every if "flags" in every else fitted
    cal = record.get("calibration") or {}
    standards = [p["absorbance"] for p in cal.get("points", []) if is_number(p.get("absorbance"))]
    samples = [a for s in cal.get("samples", []) for a in s.get("readings", []) if is_number(a)]
    low, high = window.get("low", 0.1), window.get("high", 1.0)
    out = [heading("Absorbance window", 2)]
    if window:
        out += _window_text(window, every, low, high)
    if standards:
        out.append(figure_block(figures.window_figure(standards, samples, low, high),
                                "Figure: relative concentration error per unit transmittance "
                                "noise, 10^A/(A ln 10), smallest at A = 0.434; ticks mark the "
                                "readings. " + (window.get("source") or "")))
    return out if len(out) > 1 else []


def _repeatability(record: dict, v: dict) -> list:
    rep = v.get("repeatability")
    if not isinstance(rep, dict):
        return []
    unit = rep.get("unit") or v.get("concentration_unit") or concentration_unit(record)
    return [heading("Repeatability", 2), key_value_table([
        ("mean", f"{num(rep.get('mean'), 5)} {unit}"),
        ("repeatability SD s_r", f"{num(rep.get('sd'), 3)} {unit}"),
        ("relative SD", f"{num(rep.get('rsd_percent'), 3)} %"),
        ("degrees of freedom, groups, readings",
         f"{rep.get('dof', DASH)}, {rep.get('groups', DASH)}, {rep.get('n', DASH)}")]),
        para(rep.get("source", ""), "note")]


def _intermediate_one(sample: str, ip: dict) -> list:
    unit = ip.get("unit", "")
    title = f"Intermediate precision: {sample}" if sample else "Intermediate precision"
    return [heading(title, 2), key_value_table([
        ("series, readings", f"{ip.get('groups', DASH)}, {ip.get('n', DASH)}"),
        ("repeatability SD s_r", f"{num(ip.get('repeatability_sd'), 3)} {unit}"),
        ("between-series SD s_L", f"{num(ip.get('between_group_sd'), 3)} {unit}"),
        ("intermediate SD s_I", f"{num(ip.get('intermediate_sd'), 3)} {unit} "
         f"({num(ip.get('intermediate_rsd_percent'), 3)} %), ν = {num(ip.get('intermediate_dof'), 3)}"),
        ("F, p value", f"{num(ip.get('f_statistic'), 4)}, {p_value(ip.get('p_value'), 3)}"),
        ("verdict", ip.get("verdict", DASH))]), para(ip.get("source", ""), "note")]


def _intermediate(v: dict) -> list:
    """One key-value block for a single analysis; one table, a row per sample, for several."""
    per_sample = v.get("intermediate_precision")
    if isinstance(per_sample, dict) and "groups" in per_sample:  # a single analysis, unnamed
        per_sample = {"": per_sample}
    entries = [(sample, ip) for sample, ip in (per_sample or {}).items() if isinstance(ip, dict) and "groups" in ip]
    if len(entries) == 1:
        return _intermediate_one(*entries[0])
    if not entries:
        return []
    rows = [[sample, f"{ip.get('groups', DASH)}, {ip.get('n', DASH)}",
             f"{num(ip.get('repeatability_sd'), 3)}",
             f"{num(ip.get('between_group_sd'), 3)}",
             f"{num(ip.get('intermediate_sd'), 3)} ({num(ip.get('intermediate_rsd_percent'), 3)} %), "
             f"ν = {num(ip.get('intermediate_dof'), 3)}",
             f"{num(ip.get('f_statistic'), 4)}, {p_value(ip.get('p_value'), 3)}",
             ip.get("verdict", DASH)] for sample, ip in entries]
    unit = entries[0][1].get("unit", "")
    return [heading("Intermediate precision", 2),
            data_table(["sample", "series, n", f"s_r ({unit})", f"s_L ({unit})", "s_I (RSD), ν", "F, p",
                        "verdict"], rows, [28, 16, 17, 17, 31, 19, 46]),
            para(entries[0][1].get("source", ""), "note")]


def _trueness(v: dict) -> list:
    rec = v.get("trueness") or v.get("recovery")
    if not isinstance(rec, dict):
        return []
    settings = v.get("settings") or {}
    tu = rec.get("unit") or settings.get("reference_unit") or ""
    return [heading("Trueness: recovery against a reference value", 2), key_value_table([
        ("sample", settings.get("reference_sample") or DASH),
        ("measured, u", f"{num(rec.get('measured'), 5)} {tu}, u = {num(rec.get('u_measured'), 3)} {tu}"),
        ("reference value, u",
         f"{num(rec.get('reference'), 5)} {tu}, u = {num(rec.get('u_reference'), 3)} {tu}"),
        ("expanded uncertainties for E_n",
         f"U_x = {num(rec.get('expanded_measured'), 3)} {tu}, U_ref = {num(rec.get('expanded_reference'), 3)} "
         f"{tu} (k_ref = {num(rec.get('reference_coverage_factor'), 3)}), each as stated"),
        ("recovery", f"{num(rec.get('recovery_percent'), 4)} % "
                     f"(u = {num(rec.get('recovery_u_percent'), 3)} %)"),
        ("E_n", num(rec.get("en_number"), 3)),
        ("verdict", coloured(rec.get("verdict", DASH), rec.get("satisfactory")))]),
        para(rec.get("source", ""), "note")]


SCATTER_CHECKS = (("scatter_consistency", "scatter of the preparation means about the line against preparation "
                                          "and reading noise"),
                  ("reading_noise_consistency", "pure error (repeated readings of one solution) against the "
                                                "photometer's stated reading noise"))


def _scatter(record: dict, v: dict) -> list:
    """The observed scatter checks (chi-square against the bottom-up prediction), one row each."""
    found = [(what, v.get(key) or (record.get(key) if key == "scatter_consistency" else None))
             for key, what in SCATTER_CHECKS]
    checks: list[tuple[str, dict]] = [(what, sc) for what, sc in found if isinstance(sc, dict)]
    if not checks:
        return []
    rows = [[sc.get("compared") or what, num(sc.get("observed_sd"), 3), num(sc.get("predicted_sd"), 3),
             f"{num(sc.get('chi_square'), 4)}, {sc.get('dof', DASH)}",
             f"{p_value(sc.get('p_excess'), 3)}, {p_value(sc.get('p_deficit'), 3)}",
             coloured(sc.get("verdict", DASH), "consistent" in (sc.get("verdict") or ""))] for what, sc in checks]
    return [heading("Observed scatter against the bottom-up budget", 2),
            data_table(["compared", "observed SD (AU)", "predicted SD (AU)", "χ², ν", "p (excess), p (deficit)",
                        "verdict"], rows, [44, 18, 18, 17, 22, 55], numeric={1, 2}),
            para(checks[0][1].get("source", ""), "note")]


def precision_trueness(record: dict) -> list | None:
    v = _validation(record) or {}
    blocks = _repeatability(record, v) + _intermediate(v) + _trueness(v) + _scatter(record, v)
    return blocks or None


def second_order(record: dict) -> list | None:
    """The second-order calibration function the results are read off (ISO 8466-2): coefficients with
    their standard uncertainties and correlations, the sensitivity at each result, the limits valid
    for it; None for a straight line."""
    so = (record.get("calibration") or {}).get("second_order")
    if not so:
        return None
    unit = concentration_unit(record)
    names = ("a (absorbance)", f"b (per {unit})", f"c (per ({unit})²)")
    cov = so["covariance"]
    corr = [[cov[i][j] / (cov[i][i] * cov[j][j]) ** 0.5 for j in range(3)] for i in range(3)]
    rows = [[n, num(v, 5), num(u, 3), num(corr[i][0], 4), num(corr[i][1], 4), num(corr[i][2], 4)]
            for i, (n, v, u) in enumerate(zip(names, so["coefficients"], so["standard_uncertainties"], strict=True))]
    samples = [[s["id"], num(s["concentration"], 5), num(s["standard_uncertainty"], 3), num(s["sensitivity"], 4)]
               for s in so["samples"]]
    lim = so["limits"]
    routes = [[ROUTE_NAMES.get(r["route"], r["route"]).replace("of the line", "of the function"), num(r["lod"], 3),
               num(r["loq"], 3)] for r in lim["routes"]]
    return [para(f"Absorbance y = a + b x + c x², x the concentration, fitted by least squares "
                 f"to the preparations' means (N = {so['n']}, {so['dof']} degrees of freedom, residual SD "
                 f"{num(so['residual_standard_deviation'], 3)}); the results are read off it by the root on its "
                 f"rising branch, refitted in every Monte Carlo trial. The calibration figure above shows this "
                 f"function, its 95 % prediction band t(N-3) sqrt(s² + g'Vg), g = (1, x, x²), and its residuals; "
                 f"the straight line's statistics and tests are those of the line the function replaces.", "lead"),
            data_table(["coefficient", "value", "u", "corr. a", "corr. b", "corr. c"], rows,
                       [34, 26, 22, 22, 22, 22], numeric={1, 2, 3, 4, 5}),
            para(f"Sensitivity b + 2 c x: {num(so['sensitivity_at_range_ends'][0], 4)} at the lowest and "
                 f"{num(so['sensitivity_at_range_ends'][1], 4)} at the highest standard; the function turns at "
                 f"{num(so['turning_point'], 4)} {unit}, outside the working range.", "body"),
            data_table(["sample", f"read off ({unit})", "u (function)", "sensitivity"], samples, [40, 36, 30, 30],
                       numeric={1, 2, 3}),
            heading("Limits valid for a second-order function (S = b)", 2),
            data_table(["route", f"LOD ({unit})", f"LOQ ({unit})"], routes, [80, 30, 30], numeric={1, 2}),
            *bullets(list(lim["not_shown"])),
            para(so["source"], "small")]
