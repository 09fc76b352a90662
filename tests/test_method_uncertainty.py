"""The method's uncertainty for routine use: bias (Nordtest TR 537), combination, reconciliation.

The worked examples are of this project's own construction; every expected number is derived
by hand in the comments. The combination rule is Nordtest TR 537's (from memory).
"""

from __future__ import annotations

import math
from pathlib import Path

import pandas as pd
import pytest
import statsmodels.formula.api as smf
from conftest import edit_text
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.anova import anova_lm

from validate.inputs.errors import InputError
from validate.inputs.method_file import load_method
from validate.validation.method_uncertainty import ReferenceBias, bias_estimate, combine, reconcile
from validate.workflow.pipeline import analyse

# Two invented reference materials:
# A: reference 2.00 (u 0.02, i.e. 1 %), measured 2.04: relative bias +2 %
# B: reference 5.00 (u 0.10, i.e. 2 %), measured 4.95: relative bias -1 %
RM_A = ReferenceBias("A", measured=2.04, reference=2.00, u_reference=0.02, sd_series=0.01, results=6)
RM_B = ReferenceBias("B", measured=4.95, reference=5.00, u_reference=0.10, sd_series=0.02, results=6)


def test_nordtest_rms_rule_two_reference_materials():
    # RMS_bias = sqrt((2^2 + 1^2)/2) % = sqrt(2.5) %; u(C_ref) = (1 + 2)/2 = 1.5 %;
    # u(bias) = sqrt(2.5 + 1.5^2) % = sqrt(4.75) % (Nordtest TR 537, from memory; by hand)
    b = bias_estimate([RM_A, RM_B])
    assert b.rms_relative == pytest.approx(math.sqrt(2.5) / 100)
    assert b.u_reference_relative == pytest.approx(0.015)
    assert b.u_relative == pytest.approx(math.sqrt(4.75) / 100)
    assert b.relative == pytest.approx(0.005)  # mean bias (2 - 1)/2 = 0.5 %
    assert b.treatment == "included"


def test_corrected_bias_keeps_only_the_correction_uncertainty():
    # corrected by the mean bias 0.5 %: spread about it (1.5^2 + 1.5^2)/2 = 2.25 %^2,
    # plus u(C_ref)^2 = 2.25 %^2: u = sqrt(4.5) % (by hand)
    b = bias_estimate([RM_A, RM_B], treatment="corrected")
    assert b.u_relative == pytest.approx(math.sqrt(4.5) / 100)
    assert b.treatment == "corrected"


def test_single_reference_material_adds_the_uncertainty_of_its_mean():
    # reference 10.0 (u 0.1 = 1 %), mean of 4 series results 10.3 with s = 0.2:
    # bias 3 %, s/sqrt(n) = 0.1 = 1 %; u(bias) = sqrt(3^2 + 1^2 + 1^2) % = sqrt(11) %
    # significant: |3 %| > 2 sqrt(1^2 + 1^2) % = 2.83 % (common practice, about the 5 % level)
    rm = ReferenceBias("C", measured=10.3, reference=10.0, u_reference=0.1, sd_series=0.2, results=4)
    b = bias_estimate([rm])
    assert b.u_relative == pytest.approx(math.sqrt(11) / 100)
    assert rm.significant and b.significant
    small = ReferenceBias("D", measured=10.2, reference=10.0, u_reference=0.1, sd_series=0.2, results=4)
    assert not small.significant  # 2 % < 2.83 %


def test_bad_bias_inputs_are_refused():
    with pytest.raises(ValueError, match="at least one reference"):
        bias_estimate([])
    with pytest.raises(ValueError, match="unknown bias treatment"):
        bias_estimate([RM_A], treatment="ignored")


def test_combination_by_hand():
    # u(Rw) = 3 on 6 dof, u(bias) = 4 (Type B): u_c = 5; Welch-Satterthwaite (GUM G.4.1):
    # nu = 5^4 / (3^4/6) = 625 / 13.5 = 46.30; k = t_0.975(46.30) (scipy as the t table)
    c = combine(3.0, 6.0, 4.0)
    assert c.u_c == pytest.approx(5.0)
    assert c.dof == pytest.approx(625 / 13.5)
    assert c.k == pytest.approx(stats.t.ppf(0.975, 625 / 13.5))
    assert c.expanded == pytest.approx(c.k * 5.0)
    assert 2.0 < c.k < 2.02  # t tables: t_0.975 is 2.021 at 40 dof and 2.009 at 50 (handbook tables, from memory)


@given(st.floats(0.0, 10.0), st.floats(0.0, 10.0), st.floats(0.0, 10.0), st.floats(1.0, 50.0))
def test_combined_uncertainty_never_decreases_with_bias(u_rw, u_bias, extra, dof):
    low, high = combine(u_rw, dof, u_bias), combine(u_rw, dof, u_bias + extra)
    assert high.u_c >= low.u_c


def test_reconciliation_chi_square_form():
    # observed 2 on 10 dof against a prediction of 1 with infinite dof: chi^2 = 10 * 4 = 40,
    # far in the upper tail of chi-square(10) (95th percentile 18.3, handbook tables, from memory)
    r = reconcile(2.0, 10.0, 1.0, math.inf)
    assert r.statistic == pytest.approx(4.0)
    assert r.p_value == pytest.approx(stats.chi2.sf(40.0, 10))
    assert r.verdict == "top-down larger" and "reagent lot" in r.explanation
    assert r.dof_predicted is None


def test_reconciliation_f_form_and_agreement():
    # F = 1.2^2 / 1 = 1.44 on (8, 20) dof: p = F.sf(1.44, 8, 20) > 0.05, the routes agree
    r = reconcile(1.2, 8.0, 1.0, 20.0)
    assert r.statistic == pytest.approx(1.44)
    assert r.verdict == "agree"
    assert r.p_value == pytest.approx(min(stats.f.sf(1.44, 8, 20), stats.f.cdf(1.44, 8, 20)))
    smaller = reconcile(0.3, 12.0, 1.0, 30.0)
    assert smaller.verdict == "top-down smaller"


def test_reconciliation_flags_thin_data():
    r = reconcile(1.0, 2.0, 1.0, math.inf)
    assert "few" in r.explanation
    with pytest.raises(ValueError, match="positive predicted"):
        reconcile(1.0, 2.0, 0.0, 5.0)


# ---- the [routine_uncertainty] section and the record block on the phosphate demo ----------

DEMO = Path(__file__).resolve().parent.parent / "example_inputs" / "phosphate_assay"


_edit = edit_text


BAD = [
    ("series label once", ("control_water,0.1716,day 2", "control_water,0.1716,Day 2"),
     "readings.csv", ["readings.csv", "'Day 2'", "one reading only", "typing error"]),
    ("unknown control", ('controls = ["control_water"]', 'controls = ["control_waters"]'), "method.toml",
     ["method.toml", "[routine_uncertainty].controls", "not one of the [samples]"]),
    ("reference without uncertainty",
     ('{ value = "0.090 mg/L", expanded_uncertainty = "0.003 mg/L", coverage_factor = 2, provenance',
      '{ value = "0.090 mg/L", provenance'), "method.toml",
     ["method.toml", "reference_materials.low_reference", "no uncertainty"]),
    ("unknown treatment", ('bias_treatment = "included"', 'bias_treatment = "ignored"'), "method.toml",
     ["method.toml", "bias_treatment", "included"]),
]


@pytest.mark.parametrize("label, change, name, expected", BAD, ids=[b[0] for b in BAD])
def test_bad_routine_input_is_named(demo_copy, label, change, name, expected):
    method = _edit(demo_copy, *change, name=name)
    with pytest.raises(InputError) as info:
        load_method(method)
    for text in expected:
        assert text in str(info.value), (label, str(info.value))


def test_one_series_only_is_refused(demo_copy):
    text = (demo_copy / "readings.csv").read_text(encoding="utf-8")
    for day in range(2, 7):
        text = "\n".join(line.replace(f",day {day}", ",day 1") if line.startswith("control_water") else line
                         for line in text.splitlines()) + "\n"
    (demo_copy / "readings.csv").write_text(text, encoding="utf-8")
    with pytest.raises(InputError, match="one series only"):
        load_method(demo_copy / "method.toml")


def test_control_without_series_labels_is_refused(demo_copy):
    lines = (demo_copy / "readings.csv").read_text(encoding="utf-8").splitlines()
    kept = [line if line.startswith("#") else line.rsplit(",", 1)[0] for line in lines]
    (demo_copy / "readings.csv").write_text("\n".join(kept) + "\n", encoding="utf-8")
    with pytest.raises(InputError, match="no series labels"):
        load_method(demo_copy / "method.toml")


def test_bad_routine_input_exits_with_2(demo_copy, run_command):
    method = _edit(demo_copy, 'bias_treatment = "included"', 'bias_treatment = "ignored"')
    done = run_command("check", method)
    assert done.returncode == 2 and "Traceback" not in done.stderr


def _phosphate_block(folder=DEMO) -> dict:
    run = analyse(folder / "method.toml", trials=None, advice=False)
    return run.record["method_uncertainty"]


def test_phosphate_demo_block_follows_the_contract():
    m = _phosphate_block()
    assert {"s_r", "s_between", "s_Rw", "dof", "series", "unit"} <= set(m["reproducibility"])
    assert {"value", "standard_uncertainty", "significant", "treatment", "source"} <= set(m["bias"])
    assert {"statistic", "p_value", "verdict", "explanation"} <= set(m["reconciliation"])
    assert m["reported"] in ("top-down", "bottom-up") and m["reason"]
    rep = m["reproducibility"]
    assert rep["series"] == 6 and rep["readings"] == 18 and rep["s_Rw"] >= rep["s_r"]
    # the top-level figures are the combination at the control level, by the Nordtest rule
    c = combine(m["levels"][0]["result_standard_deviation"], m["rw_model"]["dof"],
                m["bias"]["relative_standard_uncertainty_percent"] / 100 * m["concentration"])
    assert m["expanded_uncertainty"] == pytest.approx(c.expanded)
    assert m["reported"] == ("top-down" if m["expanded_uncertainty"] >= m["bottom_up"]["expanded_uncertainty"]
                             else "bottom-up")
    # U grows with concentration (cautious model above the control level, proportional bias)
    us = [e["expanded_uncertainty"] for e in m["by_concentration"]]
    assert us == sorted(us)


def test_control_anova_matches_statsmodels_on_the_demo():
    # Reference: statsmodels anova_lm of the control's readings (in absorbance) by day; mean squares
    # scale with the square of the factor from absorbance to the result's unit, which cancels in F.
    m = _phosphate_block()
    rows = [line.split(",") for line in (DEMO / "readings.csv").read_text(encoding="utf-8").splitlines()
            if line.startswith("control_water,")]
    frame = pd.DataFrame({"a": [float(r[1]) for r in rows], "day": [r[2] for r in rows]})
    table = anova_lm(smf.ols("a ~ C(day)", frame).fit())
    f_ref = table["mean_sq"].iloc[0] / table["mean_sq"].iloc[1]
    rep = m["reproducibility"]
    n0 = 3.0
    ms_w = rep["s_r"] ** 2
    ms_b = rep["s_between"] ** 2 * n0 + ms_w
    assert ms_b / ms_w == pytest.approx(f_ref, rel=1e-9)


def test_corrected_treatment_is_recorded(demo_copy):
    _edit(demo_copy, 'bias_treatment = "included"', 'bias_treatment = "corrected"')
    m = _phosphate_block(demo_copy)
    assert m["bias"]["treatment"] == "corrected"
    assert m["bias"]["correction_factor"] == pytest.approx(1 / (1 + m["bias"]["relative_value_percent"] / 100))


def test_no_section_no_block(demo_copy):
    text = (demo_copy / "method.toml").read_text(encoding="utf-8")
    start = text.index("[routine_uncertainty]")
    end = text.index("[acceptance]")
    (demo_copy / "method.toml").write_text(text[:start] + text[end:], encoding="utf-8")
    run = analyse(demo_copy / "method.toml", trials=None, advice=False)
    assert "method_uncertainty" not in run.record


def test_spike_added_amount_by_hand():
    # the demo's spike: 2.00 mL of the intermediate standard made up to 50 mL, in a result with the
    # sample dilution 20 mL -> 50 mL and M(P) = 30.973762 g/mol (invented demo values, worked by hand):
    # stock 68.05 mg x 0.998 / 136.086 g/mol / 0.500 L = 0.998102 mmol/L; intermediate x 5/100;
    # spike x 2/50 -> 1.99620 umol/L in the measured solution; x 50/20 x 30.973762 -> 0.154575 mg/L
    m = _phosphate_block()
    spike = next(r for r in m["bias"]["reference_materials"] if r["kind"] == "spike")
    added = 68.05e-3 * 0.998 / 136.086 / 0.500 * (5 / 100) * (2 / 50) * (50 / 20) * 30.973762e3
    assert spike["reference"] == pytest.approx(added, rel=1e-9)
    # its uncertainty carries the burette's two readings (start and end, rectangular, GUM 4.3.7):
    # at least sqrt(2) x reading / sqrt(3) on 2.00 mL, relative
    method = load_method(DEMO / "method.toml")
    reading_ml = method.items["burette_25"].reading * 1e6
    assert spike["reference_standard_uncertainty"] / added >= math.sqrt(2) * reading_ml / math.sqrt(3) / 2.00
    # recovered = spiked result minus the unspiked sample's result
    results = {r["key"]["id"]: r["value"] for r in analyse(DEMO / "method.toml", trials=None, advice=False)
               .record["results"]}
    assert spike["measured"] == pytest.approx(results["river_spiked"] - results["river_upstream"])


def test_spike_without_an_added_amount_is_refused(demo_copy):
    line = 'aliquot = { item = "burette_25", volume = "2.00 mL" }   # the added amount, through an item\n'
    _edit(demo_copy, line, "")
    with pytest.raises(InputError) as info:
        load_method(demo_copy / "method.toml")
    assert "spikes.river_spiked" in str(info.value) and "aliquot" in str(info.value)


def test_interlaboratory_round_enters_the_bias():
    # the demo's invented round: our 0.246 mg/L against the assigned 0.250 mg/L (u 0.004 mg/L):
    # relative bias -0.004/0.250 = -1.6 %, u(C_ref) 1.6 %; not significant (1.6 % < 2 x 1.6 %)
    m = _phosphate_block()
    entry = next(r for r in m["bias"]["reference_materials"] if r["kind"] == "interlaboratory")
    assert entry["sample"] == "round_3"
    assert entry["relative_bias_percent"] == pytest.approx(-1.6)
    assert entry["reference_standard_uncertainty"] == pytest.approx(0.004)
    assert not entry["significant"]
    # Nordtest TR 537 (from memory) over all four entries, recomputed here from the record's rows
    rows = m["bias"]["reference_materials"]
    rms = math.sqrt(sum(r["relative_bias_percent"] ** 2 for r in rows) / len(rows))
    u_ref = sum(100 * r["reference_standard_uncertainty"] / r["reference"] for r in rows) / len(rows)
    assert m["bias"]["relative_standard_uncertainty_percent"] == pytest.approx(math.hypot(rms, u_ref))


def test_interlaboratory_round_without_uncertainty_is_refused(demo_copy):
    _edit(demo_copy, 'u = "0.004 mg/L", provenance = "scheme report', 'provenance = "scheme report')
    with pytest.raises(InputError, match="assigned_?value. has no uncertainty"):
        load_method(demo_copy / "method.toml")


def test_the_init_example_reads_when_uncommented(tmp_path):
    # the commented example `validate init` writes must be a valid section once its "# " is removed
    templates = Path(__file__).resolve().parent.parent / "validate" / "templates"
    text = (templates / "method.toml").read_text(encoding="utf-8")
    head, example = text.split("# ---- optional: the method's uncertainty for routine use (top-down) ----")
    body = "\n".join(line[2:] if line.startswith("# [") or line.startswith("# ") and "=" in line else ""
                     for line in example.splitlines())
    (tmp_path / "method.toml").write_text(head + body, encoding="utf-8")
    rows = [line for line in (templates / "readings.csv").read_text(encoding="utf-8").splitlines()
            if line and not line.startswith("#")]
    table = ["id,absorbance,series"] + [f"{r},day 1" for r in rows[1:]]
    table += [f"control,{a},day {d}" for d in (1, 2) for a in (0.300, 0.302)]
    table += [f"reference,{a},day 1" for a in (0.40, 0.41)] + [f"sample_1_spiked,{a},day 1" for a in (0.50, 0.51)]
    (tmp_path / "readings.csv").write_text("\n".join(table) + "\n", encoding="utf-8")
    method = load_method(tmp_path / "method.toml")
    assert method.routine is not None
    assert method.routine.controls == ("control",)
    assert [k.sample for k in method.routine.spikes] == ["sample_1_spiked"]
    assert [r.name for r in method.routine.interlaboratory] == ["round_1"]
    block = analyse(tmp_path / "method.toml", trials=None, advice=False).record["method_uncertainty"]
    assert [r["kind"] for r in block["bias"]["reference_materials"]] == ["reference material", "spike",
                                                                         "interlaboratory"]


def test_terminal_and_report_show_both_routes():
    from validate.report.sections_routine import method_uncertainty, u_figure
    from validate.report.terminal_run import method_uncertainty_lines

    record = analyse(DEMO / "method.toml", trials=None, advice=False).record
    m = record["method_uncertainty"]
    text = "\n".join(line.text for line in method_uncertainty_lines(m))
    assert "top-down U" in text and "bottom-up U" in text and f"reported for routine use: [bold]{m['reported']}" in text
    assert method_uncertainty_lines(None) == []
    assert method_uncertainty(record) and method_uncertainty({"results": []}) is None
    figure = u_figure(m["by_concentration"], m["unit"])  # pixels, handed to the PDF as they are
    assert figure.size[0] > 100 and figure.size[1] > 100 and figure.png().startswith(b"\x89PNG")


def test_rw_model_choices_by_hand():
    from validate.validation.rw_model import choose_rw_model

    # one level (0.2, u 0.004): constant 0.004 below, proportional 0.02 c above (cautious rule, common practice)
    one = choose_rw_model([(0.2, 0.004, 10.0)])
    assert one.u_at(0.1) == pytest.approx(0.004) and one.u_at(0.4) == pytest.approx(0.008)
    # two levels on u = 0.001 + 0.01 c: the line itself; dof the smaller of the two
    two = choose_rw_model([(0.1, 0.002, 8.0), (0.5, 0.006, 12.0)])
    assert two.kind == "a + b c" and two.u_at(0.3) == pytest.approx(0.004) and two.dof == 8.0
    # falling u: constant at the mean; a line through negative a: proportional through the origin,
    # b = sum(c u)/sum(c^2) = (0.1*0.0005 + 0.5*0.0065)/(0.01 + 0.25) = 0.0033/0.26 (by hand)
    assert choose_rw_model([(0.1, 0.006, 5.0), (0.5, 0.002, 5.0)]).u_at(0.3) == pytest.approx(0.004)
    prop = choose_rw_model([(0.1, 0.0005, 5.0), (0.5, 0.0065, 5.0)])
    assert prop.kind == "proportional" and prop.b == pytest.approx(0.0033 / 0.26)
    with pytest.raises(ValueError, match="at least one control level"):
        choose_rw_model([])


def test_validation_reference_without_uncertainty_is_refused_for_the_bias(demo_copy):
    _edit(demo_copy, 'reference_value = { value = "0.200 mg/L", expanded_uncertainty = "0.006 mg/L", '
                     'coverage_factor = 2, provenance = "certificate of the reference water (invented)" }',
          'reference_value = "0.200 mg/L"')
    with pytest.raises(InputError, match=r"no uncertainty") as info:
        analyse(demo_copy / "method.toml", trials=None, advice=False)
    assert "[validation].reference_value" in str(info.value)
