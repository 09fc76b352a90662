"""Report section: the method's uncertainty for routine use (top-down) beside the budget.

Built from the record's `method_uncertainty` block alone; None when the record has none.
"""

from __future__ import annotations

from validate.report import figures
from validate.report.numbers import DASH, gum_pair, num, p_equals
from validate.report.sections import coloured, figure_block
from validate.report.style import bullets, data_table, heading, key_value_table, para


def u_figure(by_concentration: list[dict], unit: str) -> figures.Raster:
    """Top-down U against concentration with each result's bottom-up U (figures.py draws it)."""
    return figures.routine_uncertainty_figure(by_concentration, unit)


def _summary_rows(m: dict) -> list:
    rep, unit, rec = m["reproducibility"], m["unit"], m["reconciliation"]
    conc, big_u = gum_pair(m["concentration"], m["expanded_uncertainty"])
    _, bottom_up = gum_pair(m["concentration"], m["bottom_up"]["expanded_uncertainty"])
    return [
        ("control, series, readings", f"{rep['sample']}, {rep['series']}, {rep['readings']}"),
        ("s_r, s_between, s_Rw", f"{num(rep['s_r'], 3)}, {num(rep['s_between'], 3)}, {num(rep['s_Rw'], 3)} {unit} "
                                 f"(ν = {num(rep['dof'], 3)})"),
        ("u(Rw) of a routine result", f"{num(rep['result_standard_deviation'], 3)} {unit} (mean of "
                                      f"{num(rep['readings_per_result'], 3)} readings, "
                                      f"ν = {num(rep['result_dof'], 3)})"),
        ("how u(Rw) changes with concentration", f"{m['rw_model']['kind']}: {m['rw_model']['why']}"),
        ("top-down U at the control level", f"{big_u} {unit} at {conc} {unit} (k = {num(m['coverage_factor'], 3)}, "
                                            f"ν = {num(m['effective_dof'], 3)})"),
        ("bottom-up U there", f"{bottom_up} {unit} (within-run budget)"),
        ("reconciliation", coloured(f"{rec['verdict']}: F = {num(rec['statistic'], 3)}, {p_equals(rec['p_value'])}",
                                    rec["verdict"] == "agree")),
        ("reported for routine use", f"{m['reported']}: {m['reason']}"),
    ]


def _bias(m: dict) -> list:
    bias = m.get("bias")
    if not bias:
        return [para("No reference material or spike: the bias is not assessed.", "note")]
    rows = [[f"{r['sample']} ({r.get('kind', 'reference material')})", num(r["reference"], 4),
             num(r["measured"], 4), num(r["relative_bias_percent"], 3), "yes" if r["significant"] else "no"]
            for r in bias["reference_materials"]]
    return [heading("Bias against reference materials and spikes", 2),
            data_table(["sample", f"reference or added ({m['unit']})", f"found ({m['unit']})", "bias (%)",
                        "significant"], rows, (54, 32, 32, 28, 28), numeric={1, 2, 3}),
            para(f"Bias {num(bias['relative_value_percent'], 3)} %, u(bias) "
                 f"{num(bias['relative_standard_uncertainty_percent'], 3)} % ({bias['treatment']}). {bias['source']}",
                 "note")]


def _table(m: dict) -> list:
    rows = [[e.get("sample") or "end of the working range", num(e["concentration"], 4),
             num(e["expanded_uncertainty"], 2), num(e.get("bottom_up_expanded_uncertainty"), 2)
             if e.get("bottom_up_expanded_uncertainty") is not None else DASH]
            for e in m["by_concentration"]]
    unit = m["unit"]
    return [heading("U across the working range", 2),
            data_table(["result", f"concentration ({unit})", f"top-down U ({unit})", f"bottom-up U ({unit})"],
                       rows, (62, 38, 37, 37), numeric={1, 2, 3}),
            figure_block(u_figure(m["by_concentration"], unit),
                         "Expanded uncertainty against concentration: the method's U for routine use from the "
                         "validation data (line) and the within-run U of each result (squares).")]


def method_uncertainty(record: dict) -> list | None:
    m = record.get("method_uncertainty")
    if not isinstance(m, dict) or not m:
        return None
    out = [para("The within-run budget covers what varies inside one calibration and batch; the method's "
                "uncertainty for routine use also covers day-to-day variation and bias, from validation data "
                "(Nordtest TR 537; ISO 11352; EURACHEM/CITAC CG4, chapter 7, from memory).", "note"),
           key_value_table(_summary_rows(m))]
    out += _bias(m) + _table(m)
    out.append(para(m["reconciliation"]["explanation"], "note"))
    notes = list(m.get("limitations") or []) + list(m.get("assumptions") or [])
    if notes:
        out += [heading("Limitations and assumptions", 2), *bullets(notes)]
    return out
