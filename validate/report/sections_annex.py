"""Report section: the traceability annex, from the record's `traceability` block.

How every solution was made (what was measured out, how much, with which item, into which
flask) and the concentration this gives with its standard uncertainty; the standards with
their assigned concentration and every reading with its series; the line; the samples'
readings with the quantities of the result formula; the equipment with its register values
and their source. For an equilibrium study also the standards' line with its residuals and
the reagent totals of every standard and point. With these a reader can redo a standard's
concentration and a sample's result by hand. Nothing is computed here but means of readings.
"""

from __future__ import annotations

from validate.report import figures
from validate.report.numbers import DASH, gum_pair, is_number, num
from validate.report.sections import figure_block
from validate.report.sections_inputs import note_ref, provenance_notes
from validate.report.style import data_table, heading, para

LINE_DIGITS = 7  # significant digits of the line's slope and intercept: enough to redo a result by hand


def _block(record: dict) -> dict | None:
    block = record.get("traceability")
    return block if isinstance(block, dict) and block else None


def _value_u(value, u, unit: str = "") -> tuple[str, str]:
    """A value and its standard uncertainty: u to two significant digits, the value to its place."""
    if is_number(value) and is_number(u) and u > 0:
        shown, shown_u = gum_pair(value, u)
        return f"{shown} {unit}".strip(), shown_u
    return (f"{num(value, 7)} {unit}".strip() if is_number(value) else DASH), DASH


def _amount_text(a: dict) -> str:
    return f"{num(a.get('value'), 7)} {a.get('unit', '')}".strip()


def _into(entry: dict) -> str:
    flask = entry.get("flask") or ""
    return f"{flask}, {num(entry.get('volume'), 6)} mL" if flask and is_number(entry.get("volume")) else DASH


def _solution_rows(block: dict) -> list[list]:
    unit_rows = []
    for sol in block.get("solutions") or []:
        conc, u = _value_u(sol.get("concentration"), sol.get("standard_uncertainty"))
        amounts = sol.get("amounts") or [{}]
        for i, a in enumerate(amounts):
            first = i == 0
            stated = a.get("standard_uncertainty")
            unit_rows.append([
                sol.get("id", DASH) if first else "",
                a.get("what") or sol.get("made_by", DASH),
                _amount_text(a) if a else DASH,
                f"{num(stated, 3)} {a.get('unit', '')}".strip() if is_number(stated) else DASH,
                a.get("item") or DASH,
                _into(sol) if first else "",
                f"{conc} {sol.get('unit', '')}" if first else "",
                u if first else ""])
    return unit_rows


def _series_text(readings: list[dict]) -> str:
    """Readings grouped by series in their order: '0.0901, 0.0897 (day 1); 0.0911 (day 2)'."""
    groups: list[tuple[str | None, list[str]]] = []
    for r in readings:
        shown = num(r.get("absorbance"), 6)
        if groups and groups[-1][0] == r.get("series"):
            groups[-1][1].append(shown)
        else:
            groups.append((r.get("series"), [shown]))
    return "; ".join(", ".join(values) + (f" ({series})" if series else "") for series, values in groups)


def _mean(readings: list[dict]) -> float | None:
    values = [r["absorbance"] for r in readings if is_number(r.get("absorbance"))]
    return sum(values) / len(values) if values else None


def _standard_rows(block: dict) -> list[list]:
    rows = []
    for s in block.get("standards") or []:
        conc, u = _value_u(s.get("concentration"), s.get("standard_uncertainty"))
        readings = s.get("readings") or []
        rows.append([s.get("id", DASH), s.get("role", DASH), conc, u, _series_text(readings),
                     num(_mean(readings), 6)])
    return rows


def _solutions_part(block: dict) -> list:
    unit = block.get("concentration_unit", "")
    out = [heading("Preparation of the solutions", 2),
           para("In preparation order. Amounts as measured out; u: the standard uncertainty stated in the "
                "method file (a dash: the item's register gives it, see Equipment). Concentration at the "
                f"estimates in {unit} (unless marked), with its standard uncertainty u(c) from every "
                "source the model gives the solution (GUM 5.1.2).", "lead_small")]
    rows = _solution_rows(block)
    if rows:
        out.append(data_table(["solution", "what", "amount", "u", "item", "made up in", "concentration",
                               "u(c)"], rows, [23, 31, 17, 14, 20, 28, 27, 14], numeric={2, 3, 6, 7}))
    return out


def _standards_part(block: dict) -> list:
    rows = _standard_rows(block)
    if not rows:
        return []
    unit = block.get("concentration_unit", "")
    return [heading("Standards and their readings", 2),
            para(f"Assigned concentration in {unit} with its standard uncertainty (from the preparation "
                 "above), every absorbance reading with its series, and their mean.", "lead_small"),
            data_table(["standard", "role", "assigned c", "u(c)", "absorbance readings (series)", "mean"],
                       rows, [18, 15, 24, 15, 80, 22], numeric={2, 3, 5})]


def _line_text(record: dict) -> list:
    cal = record.get("calibration") or {}
    if not is_number(cal.get("slope")) or not is_number(cal.get("intercept")):
        return []
    unit = cal.get("concentration_unit", "")
    return [para(f"Line fitted to every reading above: A = a + b c with a = {num(cal['intercept'], LINE_DIGITS)} "
                 f"and b = {num(cal['slope'], LINE_DIGITS)} per {unit} ({cal.get('n', DASH)} readings); "
                 f"a sample's concentration in the measured solution is c_measured = (mean A - a) / b.", "small")]


def _result_by_sample(record: dict) -> dict:
    return {(r.get("key") or {}).get("id"): r for r in record.get("results") or []
            if (r.get("key") or {}).get("kind") == "result"}


def _sample_rows(record: dict, block: dict) -> list[list]:
    results = _result_by_sample(record)
    rows = []
    for s in block.get("samples") or []:
        readings = s.get("readings") or []
        r = results.get(s.get("id")) or {}
        value, big_u = gum_pair(r.get("value"), r.get("expanded_uncertainty"))
        result = f"{value} ± {big_u} {r.get('unit', '')}".strip() if r else DASH
        rows.append([s.get("id", DASH), _series_text(readings), len(readings), num(_mean(readings), 6), result])
    return rows


def _quantities_text(record: dict, block: dict) -> list:
    quantities = block.get("quantities") or []
    formula = (record.get("method") or {}).get("formula")
    if not quantities and not formula:
        return []
    parts = []
    for q in quantities:
        via = f" ({q['item']})" if q.get("item") else ""
        u = f", u = {num(q['standard_uncertainty'], 3)} {q.get('unit', '')}" \
            if is_number(q.get("standard_uncertainty")) and q["standard_uncertainty"] > 0 else ""
        parts.append(f"{q.get('name')} = {num(q.get('value'), 8)} {q.get('unit', '')}{via}{u}")
    unit = (record.get("method") or {}).get("result_unit", "")
    text = f"Result in {unit}: y = {formula}" if formula else "Result"
    return [para(text + (" with " + "; ".join(parts) if parts else "") + ".", "small")]


def _samples_part(record: dict, block: dict) -> list:
    rows = _sample_rows(record, block)
    if not rows or block.get("totals"):
        return []
    return [heading("Samples and their readings", 2), *_line_text(record), *_quantities_text(record, block),
            data_table(["sample", "absorbance readings (series)", "n", "mean", "result y ± U"],
                       rows, [30, 72, 8, 20, 44], numeric={2, 3, 4})]


def _values_text(values: list[dict]) -> str:
    return "; ".join(f"{v.get('name')} {num(v.get('value'), 6) if is_number(v.get('value')) else v.get('value')}"
                     f" {v.get('unit', '')}".strip() for v in values) or DASH


def _equipment_part(record: dict, block: dict) -> list:
    items = block.get("equipment") or []
    if not items:
        return []
    notes = provenance_notes(record)
    rows = [[e.get("id", DASH), e.get("kind", DASH), e.get("class") or DASH, _values_text(e.get("values") or []),
             note_ref(notes, e.get("source") or "")] for e in items]
    return [heading("Equipment and register values", 2),
            para("Each item's class and the values the model takes from its register (or from the method "
                 "file); the note number names the register with its standard and confidence (the notes "
                 "are listed under the inputs, section Measurement equation and inputs).", "lead_small"),
            data_table(["item", "kind", "class", "values used", "source"], rows, [24, 28, 30, 78, 14])]


def _totals_part(block: dict) -> list:
    totals = block.get("totals") or []
    if not totals:
        return []
    unit = block.get("concentration_unit", "")
    rows = []
    for t in totals:
        amounts = "; ".join(f"{a.get('what')} {_amount_text(a)} ({a.get('item') or DASH})"
                            for a in t.get("amounts") or [])
        m, um = _value_u(t.get("M_total"), t.get("u_M_total"))
        l_, ul = _value_u(t.get("L_total"), t.get("u_L_total"))
        rows.append([t.get("id", DASH), t.get("role", DASH), amounts or DASH, _into(t), f"{m} ({um})",
                     f"{l_} ({ul})"])
    return [heading("Reagent totals of the standards and points", 2),
            para(f"Aliquots of the reagent solutions, the flask, and the totals [M]0 and [L]0 in {unit} "
                 "with their standard uncertainty in brackets. A series point holds the start aliquots "
                 "and the additions so far.", "lead_small"),
            data_table(["id", "role", "aliquots (item)", "made up in", "[M]0 (u)", "[L]0 (u)"], rows,
                       [11, 17, 62, 26, 29, 29], numeric={4, 5})]


def _study_line(record: dict, block: dict) -> list:
    """The standards' line of an equilibrium study with its residuals (the study has no
    calibration block; the validation block holds the fitted line)."""
    fit = ((record.get("validation") or {}).get("fit")) or {}
    xs, ys = fit.get("x") or [], fit.get("y") or []
    if not block.get("totals") or len(xs) < 3 or not is_number(fit.get("slope")):
        return []
    unit = block.get("concentration_unit", "")
    cal = {"points": [{"id": "", "concentration": x, "absorbance": y} for x, y in zip(xs, ys, strict=False)],
           "slope": fit["slope"], "intercept": fit["intercept"], "samples": [], "concentration_unit": unit}
    return [heading("The standards' line", 2),
            para(f"A = a + b [limiting reagent]0 with a = {num(fit['intercept'], LINE_DIGITS)} and b = "
                 f"{num(fit['slope'], LINE_DIGITS)} per {unit}, the standards taken as fully complexed "
                 "(the correction for incomplete complexation is in section Equilibrium constant).", "small"),
            figure_block(figures.calibration_figure(cal, compact=True),
                         "Figure: the standards' readings on their line with the 95 % prediction band of one "
                         "new reading; below, the residuals (reading minus line).")]


def annex(record: dict) -> list | None:
    block = _block(record)
    if block is None:
        return None
    return (_solutions_part(block) + _standards_part(block) + _study_line(record, block)
            + _samples_part(record, block) + _totals_part(block) + _equipment_part(record, block))
