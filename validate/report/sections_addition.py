"""Report section: samples measured by standard addition, from the record's `standard_additions`
block and their results; None when the record has none."""

from __future__ import annotations

from validate.report.figures_addition import addition_figure
from validate.report.numbers import num, p_equals
from validate.report.sections import coloured, figure_block
from validate.report.style import data_table, heading, key_value_table, para

WHY = ("Each sample's concentration is the line's intercept / slope, times the flask volume over the portion; "
       "the line is refitted in every Monte Carlo trial. An extrapolation reads the line outside its points: "
       "its leverage h0 is compared with the largest leverage of the flasks themselves. The matrix effect is "
       "Welch's t test of the standard-addition slope against the external line's slope (Miller and Miller, "
       "section 5.8, from memory), shown as the recovery of sensitivity with its 95 % interval.")


def _reported(record: dict, sample: str) -> dict | None:
    for r in (record.get("verdict") or {}).get("reported") or []:
        if r["key"] == {"kind": "standard addition", "id": sample}:
            return r
    return None


def _rows(b: dict, reported: dict | None) -> list:
    unit, res = b["concentration_unit"], b["result_unit"]
    rows = [
        ("flasks", f"{b['n']}; additions " + ", ".join(num(lv["added"], 3) for lv in b["levels"]) + f" {unit}"),
        ("line", f"A = {num(b['intercept'], 4)} + {num(b['slope'], 4)} c; "
                 f"s(y/x) {num(b['residual_standard_deviation'], 3)} (ν = {b['dof']})"),
        ("extrapolated (flask)", f"{num(b['extrapolated'], 4)} {unit}, "
                                 f"s = {num(b['extrapolated_standard_uncertainty'], 3)} {unit} from the reading "
                                 f"scatter alone"),
        ("leverage", f"h0 = {num(b['leverage'], 3)} at the extrapolated point; largest of the flasks "
                     f"{num(b['largest_level_leverage'], 3)}"),
    ]
    if reported is not None:
        rows.append(("sample's concentration", f"{num(reported['value'], 4)} {res}, interval "
                     f"[{num(reported['low'], 4)}, {num(reported['high'], 4)}] {res} ({reported['basis']})"))
    if not b["reaches_sample_content"]:
        rows.append(("note", "the largest addition is below the sample's own content: the extrapolation is longer "
                             "than the spiked range (common practice adds about 1 to 3 times the content)"))
    m = b.get("matrix_effect")
    if m:
        rows.append(("recovery of sensitivity", f"{num(m['recovery_percent'], 4)} % "
                     f"[{num(m['recovery_low_percent'], 4)}, {num(m['recovery_high_percent'], 4)}] %"))
        rows.append(("matrix effect", coloured(f"t = {num(m['t'], 3)}, ν = {num(m['dof'], 3)}, "
                                               f"{p_equals(m['p_value'])}: {m['verdict']}", not m["significant"])))
    else:
        rows.append(("matrix effect", NO_COMPARISON))
    return rows


NO_COMPARISON = ("not tested: no external straight line to compare the additions' slope with (none in the "
                 "method, or a second-order calibration function)")


def standard_additions(record: dict) -> list | None:
    blocks = record.get("standard_additions")
    if not blocks:
        return None
    out: list = [para(WHY, "note")]
    for b in blocks:
        reported = _reported(record, b["sample"])
        out += [heading(f"{b['sample']}: {b['description']}" if b["description"] else b["sample"], 2),
                key_value_table(_rows(b, reported))]
        scale = b["extrapolated"] / b["sample_concentration"] if b["sample_concentration"] else None
        interval = (reported["low"] * scale, reported["high"] * scale) if reported and scale else None
        out.append(figure_block(addition_figure(b, interval),
                                f"Standard addition of {b['sample']}: readings against the concentration added, "
                                f"the line extended to zero absorbance; the diamond is the extrapolated "
                                f"concentration in the flask, the band its reported interval."))
        out.append(data_table(["flask", f"added ({b['concentration_unit']})", "readings", "mean"],
                              [[lv["id"], num(lv["added"], 4), ", ".join(f"{a:.4f}" for a in lv["readings"]),
                                num(lv["mean"], 4)] for lv in b["levels"]], (40, 34, 70, 30), numeric={1, 3}))
    return out
