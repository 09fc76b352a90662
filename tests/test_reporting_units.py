"""Limits and range in the reported unit, absorptivity units, the stated scope, and the small
clean-ups of the printed text (defaults, articles, backticks, `validate calibrate`)."""

from __future__ import annotations

import io

import pytest
from conftest import DEMOS, copy_demo, edit_text
from rich.console import Console

from validate import cli
from validate.inputs.assay_sections import scope_range
from validate.inputs.errors import InputError
from validate.inputs.method_file import load_method
from validate.inputs.units import parse_unit
from validate.model.line import fit_line
from validate.report.style import text
from validate.validation.limits import molar_absorptivity
from validate.workflow import pipeline

PHOSPHATE = DEMOS / "phosphate_assay" / "method.toml"
M_P = 30.973762  # g/mol, IUPAC standard atomic weight of phosphorus (the demo's own input)


@pytest.fixture(scope="module")
def phosphate():
    return pipeline.analyse(PHOSPHATE, trials=None, advice=False)


# --------------------------------------------------------------------------
# LOD, LOQ, range and ISO 11843-2 values in the reported unit

def test_limits_in_the_sample_follow_the_dilution_chain_by_hand(phosphate):
    """c_sample = c_measured * V_flask / V_sample * M_P (the demo's result formula), volumes at
    their nominal 50 mL and 20 mL: the LOQ of about 0.247 µmol/L is about 0.019 mg/L P."""
    units = phosphate.record["validation"]["reporting_units"]
    measuring, reported = units["measuring_solution"], units["reported"]
    assert (measuring["unit"], reported["unit"]) == ("µmol/L", "mg/L")

    def by_hand(umol_per_litre: float) -> float:
        return umol_per_litre * 1e-6 * (50.0 / 20.0) * M_P * 1e3  # mol/L -> mg/L

    for key in ("lod", "loq", "working_range_low", "working_range_high", "critical_value",
                "minimum_detectable_value"):
        assert reported[key] == pytest.approx(by_hand(measuring[key]), rel=1e-9), key
    # LOQ 0.143 µmol/L in the measuring solution (residual SD of the preparation means) is
    # 0.0111 mg/L P in the sample (demo regression values)
    assert reported["loq"] == pytest.approx(0.0111, abs=5e-5)
    # the working range runs from the lowest standard above zero (S1, 1 µmol/L) to the highest (S10)
    assert measuring["working_range_low"] == pytest.approx(1.0, rel=0.01)
    assert measuring["working_range_high"] == pytest.approx(10.0, rel=0.01)


def test_a_formula_that_does_not_read_the_line_gives_no_conversion(phosphate):
    import dataclasses

    from validate.inputs.formula import parse_formula
    from validate.validation.reporting import reporting_units
    from validate.validation.summary import validate_calibration
    method = phosphate.method
    changed = dataclasses.replace(method, result=dataclasses.replace(method.result, formula=parse_formula("M_P")))
    summary = validate_calibration([0, 1, 2, 3], [0.001, 0.1, 0.2, 0.302])
    units = reporting_units(changed, phosphate.model, summary)
    assert units["reported"] is None and "does not read the line" in units["how"]
    assert units["measuring_solution"]["loq"] == pytest.approx(summary.limits.loq)


# --------------------------------------------------------------------------
# molar absorptivity in L mol^-1 cm^-1

def test_absorptivity_of_potassium_dichromate_in_both_kinds_of_unit():
    """Potassium dichromate in dilute sulfuric acid at 350 nm: specific absorbance A(1 %, 1 cm)
    = 107.1, i.e. 10.71 L g^-1 cm^-1 (European Pharmacopoeia 2.2.25, control of absorbance, from
    memory); with M(K2Cr2O7) = 294.185 g/mol (IUPAC atomic weights) about 3151 L mol^-1 cm^-1."""
    mg_per_litre = [0.0, 20.0, 40.0, 60.0, 80.0, 100.0]
    absorbance = [0.01071 * c + d for c, d in zip(mg_per_litre, [1e-4, -1e-4, 2e-4, 0, -2e-4, 1e-4], strict=True)]
    by_mass = molar_absorptivity(fit_line(mg_per_litre, absorbance), 1.0, 0.0, parse_unit("mg/L"))
    assert by_mass.unit == "L g^-1 cm^-1"
    assert by_mass.value == pytest.approx(10.71, rel=2e-3)
    assert "molar mass" in by_mass.note
    umol = [c / 294.185 * 1e3 for c in mg_per_litre]
    by_amount = molar_absorptivity(fit_line(umol, absorbance), 1.0, 0.0, parse_unit("µmol/L"))
    assert by_amount.unit == "L mol^-1 cm^-1"
    assert by_amount.value == pytest.approx(10.71 * 294.185, rel=2e-3)
    # the same line in mmol/L gives the same molar absorptivity, with the same relative u
    mmol = molar_absorptivity(fit_line([c / 1e3 for c in umol], absorbance), 1.0, 0.0, parse_unit("mmol/L"))
    assert mmol.value == pytest.approx(by_amount.value, rel=1e-9)
    assert mmol.relative_standard_uncertainty == pytest.approx(by_amount.relative_standard_uncertainty, rel=1e-9)


def test_the_phosphate_demo_gives_epsilon_in_litres_per_mole(phosphate):
    """slope 0.0825 per µmol/L over 4 cm: about 2.06e4 L mol^-1 cm^-1, the order of magnitude
    known for molybdenum blue at 880 nm (about 2e4, from memory)."""
    eps = phosphate.record["validation"]["molar_absorptivity"]
    fit = phosphate.record["validation"]["fit"]
    assert eps["unit"] == "L mol^-1 cm^-1"
    assert eps["value"] == pytest.approx(fit["slope"] * 1e6 / 4.0, rel=1e-12)
    assert 1.5e4 < eps["value"] < 3e4


# --------------------------------------------------------------------------
# the range stated in the scope

@pytest.mark.parametrize(("scope", "expected"), [
    ("0.05 to 0.4 mg/L P in filtered fresh water; samples diluted 20 mL to 50 mL", (0.05, 0.4, "mg/L")),
    ("2-20 µmol/L in the measuring solution", (2.0, 20.0, "µmol/L")),
    ("working range 1.5 – 30 ug/L", (1.5, 30.0, "ug/L")),
])
def test_a_range_in_the_scope_is_read(scope, expected):
    found = scope_range(scope)
    assert found is not None and (found.low, found.high, found.unit.text) == expected


@pytest.mark.parametrize("scope", ["1:1 complex; four mixtures", "samples diluted 20 to 50 mL",
                                   "10 to 5 mg/L (written the wrong way round)", ""])
def test_no_concentration_range_means_none(scope):
    assert scope_range(scope) is None


def test_a_scope_in_the_measuring_solution_within_the_range_gives_no_flag(tmp_path):
    folder = copy_demo(tmp_path)
    method = edit_text(folder, 'scope = "0.05 to 0.4 mg/L P', 'scope = "1 to 10 µmol/L in the measuring solution,')
    run = pipeline.analyse(method, trials=None, advice=False)
    scope = run.record["validation"]["scope"]
    assert (scope["applies_to"], scope["unit"], scope["flags"]) == ("measuring solution", "µmol/L", [])
    assert not any("scope" in item["what"] for item in run.record["verdict"]["warnings"])
    assert not any("stated scope" in f for r in run.record["results"] for f in r["flags"])


def test_a_scope_without_a_range_is_said_so(tmp_path):
    folder = copy_demo(tmp_path)
    method = edit_text(folder, 'scope = "0.05 to 0.4 mg/L P', 'scope = "low phosphate,')
    scope = pipeline.analyse(method, trials=None, advice=False).record["validation"]["scope"]
    assert scope["low"] is None and scope["flags"] == [] and "states no concentration range" in scope["note"]


# --------------------------------------------------------------------------
# an equilibrium study's own [acceptance]

def test_a_study_reads_its_acceptance_and_judges_the_relative_u_of_k(tmp_path):
    folder = copy_demo(tmp_path, DEMOS / "nickel_complex")
    path = folder / "method.toml"
    path.write_text(path.read_text(encoding="utf-8") + "\n[acceptance]\nmax_relative_expanded_uncertainty = 1\n"
                    "recovery_range = [95, 105]\n", encoding="utf-8")
    run = pipeline.analyse(path, trials=None, advice=False)
    rows = {c["key"]: c for c in run.record["validation"]["criteria"]["criteria"]}
    combined = next(r for r in run.record["results"] if r["key"]["kind"] == "combined K")
    assert rows["max_relative_expanded_uncertainty"]["observed"] == pytest.approx(
        100 * combined["expanded_uncertainty"] / combined["value"])
    assert rows["max_relative_expanded_uncertainty"]["status"] == "not met"  # about 1.8 % against 1 %
    assert rows["recovery_range"]["status"] == "not evaluable"
    verdict = run.record["verdict"]
    assert verdict["status"] == "not shown fit"
    assert [i["why"] for i in verdict["not_evaluable"]] == [
        "an equilibrium study has no reference value to compare K with"]


# --------------------------------------------------------------------------
# the printed text

def test_the_default_criteria_line_has_no_python_notation():
    from validate.inputs.validation_settings import CRITERIA, default_criteria_line
    [line] = default_criteria_line({}, tuple(CRITERIA))
    assert "recovery_range = 95 to 105 %" in line and "max_abs_relative_residual = 5 %" in line
    assert "(" not in line.split(":", 1)[1]


def test_unit_errors_use_the_right_article(write_method, tmp_path):
    method = PHOSPHATE.read_text(encoding="utf-8").replace('unit = "mg/L"', 'unit = "mmol/L"')
    path = tmp_path / "method.toml"
    path.write_text(method, encoding="utf-8")
    (tmp_path / "readings.csv").write_text((PHOSPHATE.parent / "readings.csv").read_text(encoding="utf-8"),
                                           encoding="utf-8")
    with pytest.raises(InputError) as caught:
        load_method(path)
    message = caught.value.message()
    assert "is an amount concentration" in message and "gives a mass concentration" in message
    assert "a amount" not in message


def test_backticked_names_are_set_in_the_monospaced_font_not_printed():
    shown = text("give `repeatability` from your own data & <more>")
    assert "`" not in shown and ">repeatability</font>" in shown and "&amp;" in shown and "&lt;more&gt;" in shown


def test_calibrate_prints_units_u_and_k_and_one_block_of_sources(tmp_path):
    table = tmp_path / "standards.csv"
    rows = (DEMOS / "quick_table" / "standards.csv").read_text(encoding="utf-8").replace(
        "concentration,absorbance", "concentration (mg/L),absorbance")
    table.write_text(rows, encoding="utf-8")
    out = io.StringIO()
    assert cli._calibrate(type("Args", (), {"table": str(table), "sample": [0.30, 0.31], "json": False})(),
                          Console(file=out, highlight=False, color_system=None)) == 0
    printed = out.getvalue()
    assert "per mg/L" in printed and "x_D" in printed and "mg/L (alpha" in printed
    # 12 readings on the line: nu = 10, k = t(0.975, 10) = 2.228 (Student t table, NIST/SEMATECH
    # e-Handbook 1.3.6.7.2)
    assert "(U = k u, k = 2.23, 95 %)" in printed
    body, sources = printed.split("\nSources\n")
    assert "source:" not in body and "[1]" in body
    assert sources.lstrip().startswith("[1] ") and "Draper and Smith" in sources


def test_the_terminal_shows_both_units_and_epsilon_with_its_unit(phosphate):
    from validate.report.terminal_validation import validation_lines
    lines = [line.text for line in validation_lines(phosphate.record["validation"]) if hasattr(line, "text")]
    shown = "\n".join(lines)
    assert "in the measuring solution: LOD 0.0471, LOQ 0.143, working range 0.998 to 9.98" in shown
    assert "in the sample (reported unit): LOD 0.00365, LOQ 0.0111, working range 0.0773 to 0.773" in shown
    assert "L mol^-1 cm^-1, u = 35 L mol^-1 cm^-1 (path length 4 cm)" in shown
    assert "below the lowest standard (0.07729 mg/L)" in shown
