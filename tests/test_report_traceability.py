"""The traceability annex lets a reader redo the numbers by hand from the PDF alone.

The text of the phosphate demo's report is read back with pypdf; from the amounts printed in
the annex (mass, purity, molar mass, aliquots and flasks) one standard's concentration is
recomputed, and from the printed line and a sample's printed readings, with the printed
quantities of the result formula, one sample's result. Each must agree with the value the
report prints, within that value's last printed digit. The arithmetic is the textbook one:
c = m P / (M V) for a weighed substance made up to volume, c_parent V_aliquot / V_flask for a
dilution, and x = (mean A - a) / b read off a straight line A = a + b x (e.g. Harris,
Quantitative Chemical Analysis, chapters 1 and 4, from memory). The demo data are invented.
"""

from __future__ import annotations

import re

import pytest

NUMBER = r"([0-9]+(?:\.[0-9]+)?)"


def annex_text(pages: list[str]) -> str:
    text = " ".join(pages)
    return text[text.index("Annex: traceability to the raw data"):]


def found(pattern: str, text: str) -> tuple[str, ...]:
    match = re.search(pattern, text)
    assert match, f"not in the annex: {pattern}"
    return match.groups()


def half_last_digit(printed: str) -> float:
    """Half a unit of the last printed digit: how far a rounded value may be from the exact one."""
    decimals = len(printed.split(".")[1]) if "." in printed else 0
    return 0.5 * 10.0 ** -decimals


def agrees(recomputed: float, printed: str) -> bool:
    # the inputs printed in the annex carry 6 to 8 significant digits: allow their rounding too
    return abs(recomputed - float(printed)) <= half_last_digit(printed) + 1e-6 * abs(recomputed)


@pytest.mark.slow
def test_a_standard_is_recomputed_from_the_preparation_chain(phosphate_report):
    annex = annex_text(phosphate_report[2])
    mass, flask_stock = found(rf"stock mass {NUMBER} mg .*? flask_500, {NUMBER} mL", annex)
    (purity,) = found(rf"purity {NUMBER} %", annex)
    (molar_mass,) = found(rf"molar mass {NUMBER} g/mol", annex)
    printed_stock, _ = found(rf"flask_500, 500 mL {NUMBER} µmol/L {NUMBER}", annex)
    aliquot_i, flask_i, printed_i = found(rf"intermediate aliquot of stock {NUMBER} mL .*? flask_100, "
                                          rf"{NUMBER} mL {NUMBER} µmol/L", annex)
    aliquot_s1, flask_s1, printed_s1 = found(rf"S1 aliquot of intermediate {NUMBER} mL .*? flask_50, "
                                             rf"{NUMBER} mL {NUMBER} µmol/L", annex)

    # mg -> g, % -> fraction, mL -> L; mol/L -> µmol/L
    stock = float(mass) * 1e-3 * float(purity) / 100 / float(molar_mass) / (float(flask_stock) * 1e-3) * 1e6
    intermediate = stock * float(aliquot_i) / float(flask_i)
    s1 = intermediate * float(aliquot_s1) / float(flask_s1)
    assert agrees(stock, printed_stock), (stock, printed_stock)
    assert agrees(intermediate, printed_i), (intermediate, printed_i)
    assert agrees(s1, printed_s1), (s1, printed_s1)
    # and the standards table assigns S1 that same concentration
    (assigned,) = found(r"S1 standard ([0-9.]+) ", annex)
    assert assigned == printed_s1


@pytest.mark.slow
def test_a_sample_result_is_recomputed_from_the_line_and_its_readings(phosphate_report):
    annex = annex_text(phosphate_report[2])
    a, b = found(rf"a = {NUMBER} and b = {NUMBER} per µmol/L", annex)
    (v_sample,) = found(rf"V_sample = {NUMBER} mL", annex)
    (v_flask,) = found(rf"V_flask = {NUMBER} mL", annex)
    (molar_mass_p,) = found(rf"M_P = {NUMBER} g/mol", annex)
    readings, printed = found(r"river_upstream ((?:[0-9.]+, )+[0-9.]+) \(day 1\) \d+ [0-9.]+ ([0-9.]+) ± ", annex)

    values = [float(x) for x in readings.split(", ")]
    c_measured = (sum(values) / len(values) - float(a)) / float(b)  # µmol/L in the measured solution
    # y = c_measured V_flask / V_sample M_P: µmol/L x g/mol = µg/L, /1000 for mg/L
    result = c_measured * float(v_flask) / float(v_sample) * float(molar_mass_p) / 1000
    assert len(values) == 3
    assert agrees(result, printed), (result, printed)
    # the same value heads page 1 (the results table)
    assert f"{printed} mg/L" in phosphate_report[2][0]


@pytest.mark.slow
def test_the_annex_names_every_reading_with_its_series_and_every_register(phosphate_report, phosphate_demo):
    annex = annex_text(phosphate_report[2])
    block = phosphate_demo.record["traceability"]
    for s in block["standards"] + block["samples"]:
        assert s["id"] in annex
    assert "(day 6)" in annex  # the control water's sixth series
    for item in block["equipment"]:
        assert item["id"] in annex
    text = " ".join(phosphate_report[2])
    assert "from memory, medium confidence" in text  # a register's confidence, said once in the notes
