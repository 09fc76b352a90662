"""Report sections, part 3: uncertainty budget and Monte Carlo check, one block per result."""

from __future__ import annotations

from reportlab.lib.units import mm
from reportlab.platypus import CondPageBreak, Table, TableStyle

from validate.report import figures
from validate.report.numbers import DASH, dof, interval, is_number, num, pct, tolerance_decimals
from validate.report.sections import coloured, figure_block, rounded, u_decimals
from validate.report.style import data_table, heading, key_value_table, para

MIN_SHARE_SHOWN = 1e-4  # budget rows below 0.01 % are summed in one line (all are in budget.csv)


def _budget_rows(record: dict, result_name: str) -> list[dict]:
    rows = [r for r in record.get("budget") or [] if r.get("result") == result_name]
    return sorted(rows, key=lambda r: -(r.get("share") or 0.0))


def _per(result_unit: str, source_unit: str) -> str:
    if not source_unit:
        return result_unit
    top = f"({result_unit})" if "/" in result_unit else result_unit
    return f"{top}/{source_unit}" if "/" not in source_unit else f"{top} per {source_unit}"


def _group_table(title: str, groups: list[dict], unit: str) -> Table:
    rows = [[g.get("group", DASH), num(g.get("contribution"), 3), pct(g.get("share"))]
            for g in groups]
    return data_table([title, f"u / {unit}", "share"], rows, [43, 20, 20], numeric={1, 2})


def _source_row(rank: int, r: dict, unit: str) -> list:
    src_unit = r.get("unit") or ""
    return [rank, r.get("source", DASH), r.get("step") or DASH, r.get("equipment") or DASH,
            f"{num(r.get('standard_uncertainty'), 3)} {src_unit}".strip(),
            f"{num(r.get('sensitivity'), 4)} {_per(unit, src_unit)}",
            num(r.get("contribution"), 3), pct(r.get("share"))]


def _result_lead(result: dict) -> list:
    unit = result.get("unit", "")
    value, big_u = rounded(result.get("value"), result.get("expanded_uncertainty"))
    return [CondPageBreak(90 * mm), heading(result["name"], 2),
            para(f"y = {value} {unit}, u(y) = {num(result.get('standard_uncertainty'), 3)} {unit}, "
                 f"U = {big_u} {unit} (k = {num(result.get('coverage_factor'), 3)}, "
                 f"p = {pct(result.get('coverage_probability'), 0)}, ν_eff = "
                 f"{dof(result.get('effective_dof'))}).", "lead")]


def _source_table(rows: list[dict], unit: str) -> list:
    """Sources at or above MIN_SHARE_SHOWN, ranked; one line for the rest."""
    shown = [r for r in rows if (r.get("share") or 0.0) >= MIN_SHARE_SHOWN]
    hidden = rows[len(shown):] if len(shown) < len(rows) else []
    out: list = []
    if shown:
        out.append(data_table(["#", "source", "step", "equipment", "u(x_i)", "sensitivity c_i",
                               f"c_i u(x_i) / {unit}", "share"],
                              [_source_row(rank, r, unit) for rank, r in enumerate(shown, 1)],
                              [7, 40, 24, 21, 20, 26, 20, 16], numeric={0, 4, 5, 6, 7}))
    if hidden:
        total = sum(r.get("share") or 0.0 for r in hidden)
        out.append(para(f"{len(hidden)} further sources each below {pct(MIN_SHARE_SHOWN, 2)} of "
                        f"the variance (together {pct(total, 3)}) are listed in budget.csv.",
                        "small"))
    return out


def _share_figure(rows: list[dict], result: dict) -> list:
    by_source = [(r.get("source", ""), r.get("share") or 0.0) for r in rows]
    by_step = [(g.get("group", ""), g.get("share") or 0.0) for g in result.get("budget_by_step") or []]
    if not by_source:
        return []
    return [figure_block(figures.share_chart(by_source, by_step),
                         "Figure: shares of the combined variance u²(y), ranked. Sources "
                         "are independent by construction (a shared item is one source), "
                         "so the shares add up to 100 %.", 160 * mm)]


def _group_tables(result: dict, unit: str) -> list:
    steps, items = result.get("budget_by_step") or [], result.get("budget_by_equipment") or []
    if not (steps or items):
        return []
    pair = Table([[_group_table("step", steps, unit), _group_table("equipment item", items, unit)]],
                 colWidths=[87 * mm, 87 * mm], hAlign="LEFT")
    pair.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                              ("LEFTPADDING", (0, 0), (-1, -1), 0)]))
    return [pair]


def _quantity_table(result: dict, unit: str) -> list:
    """The budget by input quantity, each quantity's terms combined first (CG4's presentation)."""
    quantities = result.get("budget_by_quantity") or []
    if not quantities:
        return []
    rows = [[g.get("group", DASH), num(g.get("contribution"), 3), pct(g.get("share"))] for g in quantities]
    return [data_table(["input quantity", f"u / {unit}", "share"], rows, [110, 30, 30], numeric={1, 2}),
            para("By input quantity of the measurement equation: each quantity's terms (a volume's "
                 "calibration, repeatability and temperature) combined first, as EURACHEM/CITAC CG4 "
                 "presents a budget. A source shared by several quantities (one temperature, one "
                 "item's calibration used twice) stands as a quantity of its own.", "note")]


def budget_for_result(record: dict, result: dict) -> list:
    unit = result.get("unit", "")
    rows = _budget_rows(record, result["name"])
    return (_result_lead(result) + _source_table(rows, unit) + _share_figure(rows, result)
            + _quantity_table(result, unit) + _group_tables(result, unit))


BUDGET_LEAD = ("Each source's standard uncertainty u(x_i), its sensitivity coefficient "
               "c_i = ∂y/∂x_i and its contribution c_i u(x_i) to the result, ranked by its share "
               "of the combined variance (GUM 5.1.3). Sources used in several places (one "
               "pipette, one stock solution, one temperature) enter once, so their correlation "
               "is part of the budget.")


def budget(record: dict) -> list:
    results = record.get("results") or []
    out = [para(BUDGET_LEAD, "lead")]
    if not results:
        out.append(para("The record holds no result.", "body"))
    for result in results:
        out += budget_for_result(record, result)
    return out


# --------------------------------------------------------------------------
# Monte Carlo

def mc_decimals(mc: dict, result: dict) -> int:
    """Decimal places: those of the numerical tolerance (JCGM 101 7.9.2), else of U + 1."""
    return tolerance_decimals(mc.get("tolerance"), u_decimals(result) + 1)


def interval_text(ends, decimals: int, unit: str) -> str:
    shown = interval(ends, decimals)
    return shown if shown == DASH else f"{shown} {unit}"


def monte_carlo_for_result(result: dict) -> list:
    mc, unit = result["monte_carlo"], result.get("unit", "")
    d = mc_decimals(mc, result)
    agrees = mc.get("agrees_with_gum")
    verdict = {"agrees": "the GUM interval is validated: both end-point differences are within δ, "
                         "beyond Monte Carlo noise",
               "differs": "the GUM interval is not validated: report the Monte Carlo interval",
               "undecided": "undecided: an end-point difference lies within Monte Carlo noise of δ "
                            "and the trial budget ran out; report the Monte Carlo interval"
               }.get(str(mc.get("gum_check")), "not evaluated")
    p = pct(result.get("coverage_probability"), 0)

    def fixed(x):
        return f"{x:.{d}f} {unit}" if is_number(x) else DASH

    facts = [("trials (undefined results)", f"{num(mc.get('trials'))} ({mc.get('invalid_trials', 0)} "
              "undefined, counted and left out)"),
             ("random seed", mc.get("seed", DASH) if mc.get("seed") is not None else DASH),
             ("mean, standard uncertainty", _mean_and_u(mc, fixed, unit)),
             (f"{p} interval, probabilistically symmetric", interval_text(mc.get("interval"), d, unit)),
             (f"{p} interval, shortest", interval_text(mc.get("shortest_interval"), d, unit)),
             (f"{p} GUM interval y ± U", interval_text(mc.get("gum_interval"), d, unit)),
             ("differences d_low, d_high; tolerance δ",
              f"{num(mc.get('d_low'), 2)} {unit}, {num(mc.get('d_high'), 2)} {unit}; "
              f"δ = {num(mc.get('tolerance'), 2)} {unit}"),
             ("Monte Carlo numerical tolerance (target δ/5)",
              f"± {num(mc.get('numerical_tolerance'), 2)} {unit} (target {num(mc.get('tolerance_target'), 2)} "
              f"{unit}, JCGM 101 8.2)"),
             ("verdict (JCGM 101 clause 8)", coloured(verdict, agrees if isinstance(agrees, bool) else None))]
    facts += _mc_notes(mc)
    out = [CondPageBreak(110 * mm), heading(result["name"], 2), key_value_table(facts, (62, 112))]
    hist = mc.get("histogram") or {}
    if (hist.get("edges") and hist.get("counts") and is_number(result.get("value"))
            and is_number(result.get("standard_uncertainty"))):
        png = figures.monte_carlo_figure(mc, result["value"], result["standard_uncertainty"],
                                         result.get("effective_dof"), unit)
        out.append(figure_block(png, "Figure: distribution of the Monte Carlo trials against the "
                                "distribution the GUM assigns to the result; vertical lines mark "
                                "the coverage intervals."))
    out += _mc_shares(mc, result)
    return out


def _mc_notes(mc: dict) -> list[tuple[str, object]]:
    """Warnings, the note on moments that do not exist, and the adaptive procedure's test."""
    facts: list[tuple[str, object]] = []
    for key in ("warning", "moments_note"):
        if mc.get(key):
            facts.append(("warning" if key == "warning" else "moments", coloured(str(mc[key]), False)))
    adaptive = mc.get("adaptive")
    if isinstance(adaptive, dict) and adaptive:
        facts.append(("adaptive procedure (JCGM 101 7.9)",
                      "; ".join(f"{k.replace('_', ' ')} {num(v) if is_number(v) else v}"
                                for k, v in adaptive.items() if not isinstance(v, (dict, list)))))
    return facts


def _mean_and_u(mc: dict, fixed, unit: str) -> str:
    """Mean and u, or why they are not given (no finite mean or variance: see moments_note)."""
    if mc.get("standard_uncertainty") is None:
        mean = fixed(mc.get("mean")) if mc.get("mean") is not None else "no mean"
        return f"{mean}; no standard uncertainty (the output has no finite variance)"
    return f"{fixed(mc.get('mean'))}, {num(mc.get('standard_uncertainty'), 3)} {unit}"


SMALL_GROUP = 1e-3  # groups below 0.1 % by both evaluations are summed in one line


def _mc_shares(mc: dict, result: dict) -> list:
    rows = []
    for key, label, gum_key in (("shares_by_step", "step", "budget_by_step"),
                                ("shares_by_equipment", "equipment item", "budget_by_equipment")):
        gum = {g.get("group"): g.get("share") for g in result.get(gum_key) or []}
        small = []
        for g in mc.get(key) or []:
            gum_share, mc_share = gum.get(g.get("group")), g.get("share")
            if all(is_number(s) and s < SMALL_GROUP for s in (gum_share, mc_share)):
                small.append(g.get("group", DASH))
                continue
            rows.append([label, g.get("group", DASH), pct(gum_share), pct(mc_share)])
        if small:
            rows.append([label, f"{len(small)} more, each below {pct(SMALL_GROUP)}: "
                         + ", ".join(map(str, small)), DASH, DASH])
    if not rows:
        return []
    return [data_table(["grouped by", "group", "share, GUM", "share, Monte Carlo"], rows,
                       [30, 84, 30, 30], numeric={2, 3}),
            para("Shares of the variance by group from the Monte Carlo evaluation, beside the "
                 "GUM shares of the same groups.", "note")]


def monte_carlo_intro(record: dict) -> list:
    """The section's lead-in and the settings every result shares."""
    out = [para("The same model evaluated with random trial values of every source (JCGM 101). "
                "The GUM interval is validated when its end points differ from those of the "
                "probabilistically symmetric Monte Carlo interval by no more than the numerical "
                "tolerance δ of the standard uncertainty (JCGM 101:2008, 7.9.2 and 8.2).", "lead")]
    settings = record.get("monte_carlo_settings") or {}
    if settings:
        out.append(key_value_table([
            ("trials per result", num(settings.get("trials"))),
            ("random seed", str(settings.get("seed", DASH))),
            ("method", settings.get("method") or DASH)], (62, 112)))
    return out


def monte_carlo(record: dict) -> list | None:
    results = [r for r in record.get("results") or [] if isinstance(r.get("monte_carlo"), dict)]
    if not results:
        return None
    out = monte_carlo_intro(record)
    for result in results:
        out += monte_carlo_for_result(result)
    return out
