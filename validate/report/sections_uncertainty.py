"""Report sections, part 3: uncertainty budget and Monte Carlo check, one block per result."""

from __future__ import annotations

from reportlab.lib.units import mm
from reportlab.platypus import CondPageBreak, Table, TableStyle

from validate.report import figures
from validate.report.numbers import DASH, dof, interval, is_number, num, pct, tolerance_decimals
from validate.report.sections import coloured, figure_block, rounded, u_decimals
from validate.report.style import data_table, heading, key_value_table, para, text

MIN_SHARE_SHOWN = 0.02  # budget rows below 2 % of a result's variance are summed in one line
MIN_SHARE_SHOWN_MANY = 0.05  # the same where several results each have a table (a compact report)
# (leaving out one such source changes u(y) by less than 1 %, sqrt(0.98) = 0.99; budget.csv has them all)


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


def _source_row(rank: int, r: dict, unit: str, with_step: bool = True) -> list:
    src_unit = r.get("unit") or ""
    step = [r.get("step") or DASH] if with_step else []
    return [rank, r.get("source", DASH), *step, r.get("equipment") or DASH,
            f"{num(r.get('standard_uncertainty'), 3)} {src_unit}".strip(),
            f"{num(r.get('sensitivity'), 4)} {_per(unit, src_unit)}",
            num(r.get("contribution"), 3), pct(r.get("share"))]


def _result_lead(result: dict, full: bool = True) -> list:
    unit = result.get("unit", "")
    value, big_u = rounded(result.get("value"), result.get("expanded_uncertainty"))
    numbers = (f"y = {value} {unit}, u(y) = {num(result.get('standard_uncertainty'), 3)} {unit}, "
               f"U = {big_u} {unit} (k = {num(result.get('coverage_factor'), 3)}, "
               f"p = {pct(result.get('coverage_probability'), 0)}, ν_eff = {dof(result.get('effective_dof'))}).")
    if full:
        return [CondPageBreak(90 * mm), heading(result["name"], 2), para(numbers, "lead")]
    # many results: the name and its numbers on one line (c_i u(x_i) in the result's unit)
    return [CondPageBreak(40 * mm), para(f"<b>{text(result['name'])}</b>: {text(numbers)} c_i u(x_i) in {text(unit)}.",
                                         "lead", markup=True)]


def _source_table(rows: list[dict], unit: str, with_step: bool = True) -> list:
    """Sources at or above MIN_SHARE_SHOWN, ranked; one line for the rest (all in budget.csv).
    Without `with_step` (many results: the steps are in one figure) a row fits one line and the
    threshold is MIN_SHARE_SHOWN_MANY."""
    limit = MIN_SHARE_SHOWN if with_step else MIN_SHARE_SHOWN_MANY
    shown = [r for r in rows if (r.get("share") or 0.0) >= limit]
    hidden = rows[len(shown):] if len(shown) < len(rows) else []
    out: list = []
    if shown:
        header = ["#", "source", *(["step"] if with_step else []), "equipment", "u(x_i)", "sensitivity c_i",
                  f"c_i u(x_i) / {unit}" if with_step else "c_i u(x_i)", "share"]
        widths = [7, 40, 24, 21, 20, 26, 20, 16] if with_step else [7, 58, 20, 20, 32, 22, 15]
        last = len(header) - 1
        out.append(data_table(header, [_source_row(rank, r, unit, with_step) for rank, r in enumerate(shown, 1)],
                              widths, numeric={0, last - 3, last - 2, last - 1, last}))
    if hidden:
        total = sum(r.get("share") or 0.0 for r in hidden)
        out.append(para(f"{len(hidden)} further sources, each below {pct(limit, 0)} of the "
                        f"variance, together {pct(total, 2)}: listed in budget.csv.", "small"))
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
    shown = [g for g in quantities if (g.get("share") or 0.0) >= MIN_SHARE_SHOWN]
    rest = quantities[len(shown):] if len(shown) < len(quantities) else []
    rows = [[g.get("group", DASH), num(g.get("contribution"), 3), pct(g.get("share"))] for g in shown]
    if rest:
        rows.append([f"{len(rest)} further quantities, each below {pct(MIN_SHARE_SHOWN, 0)} (results.json)", DASH,
                     pct(sum(g.get("share") or 0.0 for g in rest), 2)])
    return [data_table(["input quantity", f"u / {unit}", "share"], rows, [110, 30, 30], numeric={1, 2}),
            para("By input quantity of the measurement equation: each quantity's terms (a volume's "
                 "calibration, repeatability and temperature) combined first, as EURACHEM/CITAC CG4 "
                 "presents a budget. A source shared by several quantities (one temperature, one "
                 "item's calibration used twice) stands as a quantity of its own.", "note")]


def budget_for_result(record: dict, result: dict, full: bool = True) -> list:
    """A result's budget: its sources above MIN_SHARE_SHOWN; with `full` (a report with one
    result that matters) also its share chart and its tables by quantity, step and item."""
    unit = result.get("unit", "")
    rows = _budget_rows(record, result["name"])
    out = _result_lead(result, full) + _source_table(rows, unit, with_step=full)
    if full:
        out += _share_figure(rows, result) + _quantity_table(result, unit) + _group_tables(result, unit)
    return out


BUDGET_LEAD = ("Each source's standard uncertainty u(x_i), its sensitivity coefficient "
               "c_i = ∂y/∂x_i and its contribution c_i u(x_i) to the result, ranked by its share "
               "of the combined variance (GUM 5.1.3). Sources used in several places (one "
               "pipette, one stock solution, one temperature) enter once, so their correlation "
               "is part of the budget.")


BARS_PER_FIGURE = 25  # results per step-share chart, so a chart never outgrows a page
PANELS_PER_FIGURE = 12  # Monte Carlo panels per figure (four rows of three)


def chunks(items: list, size: int) -> list[list]:
    """`items` in consecutive parts of at most `size`."""
    return [items[i:i + size] for i in range(0, len(items), size)]


def step_shares_figure(results: list[dict]) -> list:
    """One chart for every result: its variance shared out by step (drawn once, not per result)."""
    bars = [(r.get("sample") or r.get("name", ""),
             [(g.get("group", ""), g.get("share") or 0.0) for g in r.get("budget_by_step") or []])
            for r in results]
    if not any(steps for _, steps in bars):
        return []
    caption = ("Figure: each result's combined variance u²(y) shared out by step of the procedure (the steps "
               "add up to 100 %). The shares by step, by equipment item and by input quantity are in "
               "results.json; every source of every result is in budget.csv.")
    return [figure_block(figures.step_shares_chart(part), caption) for part in chunks(bars, BARS_PER_FIGURE)]


def shown_rule(many: bool = False) -> str:
    """The sentence that states the budget tables' share threshold."""
    limit = MIN_SHARE_SHOWN_MANY if many else MIN_SHARE_SHOWN
    return (f" For each result the sources with at least {pct(limit, 0)} of its variance are listed; "
            "the rest are summed in one line and listed in budget.csv.")


def budget(record: dict) -> list:
    results = record.get("results") or []
    many = len(results) > 1
    # with many results the lead stands alone (a 'body' paragraph), so the first table may start under it
    out = [para(BUDGET_LEAD + shown_rule(many), "body" if many else "lead")]
    if not results:
        out.append(para("The record holds no result.", "body"))
    for result in results:
        out += budget_for_result(record, result, full=not many)
    return out + (step_shares_figure(results) if many else [])  # after the tables: they split, a figure does not


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
            para("Shares of the variance by group from the Monte Carlo evaluation, beside the GUM shares of "
                 f"the same groups{_share_precision_text(mc)}.", "note")]


def _share_precision(mcs: list[dict]) -> tuple[int, float] | None:
    """(trials, largest standard error) of the Monte Carlo shares of these results' Monte Carlo
    blocks, from the record; None where the record does not give them."""
    rows = [g for mc in mcs for key in ("shares_by_step", "shares_by_equipment") for g in mc.get(key) or []]
    trials = [g["trials"] for g in rows if is_number(g.get("trials"))]
    errors = [g["standard_error"] for g in rows if is_number(g.get("standard_error"))]
    return (max(trials), max(errors)) if trials and errors else None


def _share_precision_text(mc: dict) -> str:
    found = _share_precision([mc])
    if found is None:
        return ""
    return (f": their own runs of {found[0]:,} trials on common random numbers, the linearised model as a "
            f"control variate where every trial is defined; largest standard error "
            f"{num(100 * found[1], 2)} percentage points")


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


CHECK_WORDS = {"agrees": ("validated", True), "differs": ("not validated", False),
               "undecided": ("undecided", None)}


def _compact_row(result: dict) -> list:
    mc = result["monte_carlo"]
    d = mc_decimals(mc, result)
    word, good = CHECK_WORDS.get(str(mc.get("gum_check")), ("not evaluated", None))
    mean = f"{mc['mean']:.{d}f}" if is_number(mc.get("mean")) else DASH
    return [result.get("sample") or result.get("name", DASH), f"{mean}, {num(mc.get('standard_uncertainty'), 2)}",
            interval(mc.get("interval"), d), interval(mc.get("gum_interval"), d),
            f"{num(mc.get('d_low'), 2)}, {num(mc.get('d_high'), 2)}; {num(mc.get('tolerance'), 1)}",
            coloured(word, good)]


def _largest_share_gap(results: list[dict]) -> list:
    """The largest difference between a Monte Carlo share and the GUM share of the same group."""
    worst: tuple[float, str, str] | None = None
    for r in results:
        mc = r["monte_carlo"]
        for key, gum_key in (("shares_by_step", "budget_by_step"), ("shares_by_equipment", "budget_by_equipment")):
            gum = {g.get("group"): g.get("share") for g in r.get(gum_key) or []}
            for g in mc.get(key) or []:
                a, b = gum.get(g.get("group")), g.get("share")
                if is_number(a) and is_number(b) and (worst is None or abs(a - b) > worst[0]):
                    worst = (abs(a - b), r.get("sample") or r.get("name", ""), str(g.get("group")))
    if worst is None:
        return []
    return [para(f"Shares of the variance by step and by item from the Monte Carlo trials differ from the GUM "
                 f"shares by at most {num(100 * worst[0], 2)} percentage points (largest: {worst[2]}, {worst[1]})"
                 f"{_shares_precision_all(results)}. The Monte Carlo shares count a t input's whole variance, "
                 "u² ν/(ν − 2), where the GUM budget counts u². Both are in results.json.", "small")]


def _shares_precision_all(results: list[dict]) -> str:
    """The Monte Carlo shares' trials and their largest standard error over every result."""
    found = _share_precision([r["monte_carlo"] for r in results])
    if found is None:
        return ""
    return (f"; the Monte Carlo shares come from their own runs of {found[0]:,} trials (common random numbers, "
            f"the linearised model as a control variate where every trial is defined), each to a standard error "
            f"of at most {num(100 * found[1], 2)} percentage points")


def _notes_of(results: list[dict]) -> list:
    lines = []
    for r in results:
        for label, value in _mc_notes(r["monte_carlo"]):
            shown = value.getPlainText() if hasattr(value, "getPlainText") else str(value)
            lines.append(f"{r.get('sample') or r.get('name')}: {label}: {shown}")
    return [para(line, "small") for line in lines]


def monte_carlo_compact(results: list[dict]) -> list:
    """Many results: one table and one figure of small multiples instead of a block per result."""
    unit = results[0].get("unit", "")
    p = pct(results[0].get("coverage_probability"), 0)
    table = data_table(["result", f"mean, u / {unit}", f"Monte Carlo {p} interval / {unit}", f"GUM y ± U / {unit}",
                        f"d_low, d_high; δ / {unit}", "GUM interval (clause 8)"],
                       [_compact_row(r) for r in results], [28, 26, 34, 34, 30, 22], numeric={1, 2, 3, 4})
    out = [table, para("Intervals to the decimal place of the numerical tolerance δ; Monte Carlo: the "
                       "probabilistically symmetric interval (the shortest is drawn in the figure and kept in "
                       "results.json); d_low and d_high: differences of the ends of the GUM and the Monte Carlo "
                       "interval (JCGM 101 8.2).", "note")]
    panels = [(r.get("sample") or r.get("name", ""), r["monte_carlo"], r["value"], r["standard_uncertainty"],
               r.get("effective_dof")) for r in results
              if (r["monte_carlo"].get("histogram") or {}).get("edges") and is_number(r.get("value"))
              and is_number(r.get("standard_uncertainty"))]
    for part in chunks(panels, PANELS_PER_FIGURE):
        out.append(figure_block(figures.monte_carlo_grid_figure(part, unit),
                                "Figure: the Monte Carlo trials of each result against the distribution the GUM "
                                "assigns to it; vertical lines mark the coverage intervals."))
    return out + _largest_share_gap(results) + _notes_of(results)


NOT_RUN = ("Not run in this evaluation: the run asked for the linear engine only (validate run --trials 0, "
           "or trials=0 from Python). The GUM intervals are therefore not checked against Monte Carlo "
           "(JCGM 101 clause 8) and are reported as y ± U unchecked; run with trials to check them.")


def monte_carlo(record: dict) -> list | None:
    results = [r for r in record.get("results") or [] if isinstance(r.get("monte_carlo"), dict)]
    if not results:
        return [para(NOT_RUN, "body")] if record.get("results") else None
    out = monte_carlo_intro(record)
    if len(results) > 1:
        return out + monte_carlo_compact(results)
    for result in results:
        out += monte_carlo_for_result(result)
    return out
