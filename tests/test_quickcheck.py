"""The calibration quick check: certified and published values, and input errors."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from validate.report.terminal import format_quick_check
from validate.validation.quickcheck import (
    CellError,
    DecimalCommaError,
    MissingColumnError,
    SampleError,
    TableError,
    TooFewLevelsError,
    load_table,
    quick_check,
)

REFERENCE = Path(__file__).parent / "reference"


def test_norris_certified_values():
    # NIST/ITL StRD linear regression dataset "Norris", certified values
    # (https://www.itl.nist.gov/div898/strd/lls/data/Norris.shtml, address from memory);
    # data in tests/reference/norris_calibration.csv.
    res = quick_check(REFERENCE / "norris_calibration.csv")
    assert res["n"] == 36 and res["dof"] == 34
    assert res["intercept"] == pytest.approx(-0.262323073774029, rel=1e-9)
    assert res["intercept_standard_uncertainty"] == pytest.approx(0.232818234301152, rel=1e-9)
    assert res["slope"] == pytest.approx(1.00211681802045, rel=1e-9)
    assert res["slope_standard_uncertainty"] == pytest.approx(0.429796848199937e-03, rel=1e-9)
    assert res["residual_standard_deviation"] == pytest.approx(0.884796396144373, rel=1e-9)
    assert res["r_squared"] == pytest.approx(0.999993745883712, rel=1e-9)
    # ICH Q2(R1) with sigma = residual SD, built on the certified values
    assert res["lod"] == pytest.approx(3.3 * 0.884796396144373 / 1.00211681802045, rel=1e-9)
    assert res["loq"] == pytest.approx(10 * 0.884796396144373 / 1.00211681802045, rel=1e-9)
    assert set(res["linearity"]) == {"lack_of_fit", "mandel", "runs", "intercept", "weighting"}
    assert "sample" not in res
    json.dumps(res, allow_nan=False)  # a plain, JSON-ready record


# Miller and Miller, Statistics and Chemometrics for Analytical Chemistry, chapter 5 worked
# fluorescence example (values recalled from memory): standards 0-12 pg/mL, a = 1.52,
# b = 1.93, s(y/x) = 0.4329; readings 2.9, 13.5 and 23.0 give x0 = 0.72, 6.21 and 11.13 pg/mL
# with s(x0) = 0.26, 0.24 and 0.26 pg/mL.
FLUORESCENCE = "concentration,absorbance\n0,2.1\n2,5.0\n4,9.0\n6,12.6\n8,17.3\n10,21.0\n12,24.7\n"


def test_inverse_prediction_published_example(tmp_path):
    table = tmp_path / "fluorescence.csv"
    table.write_text(FLUORESCENCE)
    res = quick_check(table, [[2.9], [13.5], [23.0]])
    assert round(res["slope"], 2) == 1.93 and round(res["intercept"], 2) == 1.52
    # the book prints 0.4329 (from memory); the unrounded value is 0.432848
    assert res["residual_standard_deviation"] == pytest.approx(0.4329, abs=1e-4)
    got = [(round(s["concentration"], 2), round(s["standard_uncertainty"], 2)) for s in res["sample"]]
    assert got == [(0.72, 0.26), (6.21, 0.24), (11.13, 0.26)]
    assert res["sample"][0]["replicates"] == 1 and res["sample"][0]["dof"] == 5
    # the same book's limit of detection, y_B + 3 s_B with s_B = s(y/x): 3 * 0.4329/1.93 = 0.67
    assert round(res["lod"] * 3 / 3.3, 2) == 0.67


def test_format_quick_check_shows_fit_tests_limits_and_samples(tmp_path):
    table = tmp_path / "fluorescence.csv"
    table.write_text(FLUORESCENCE)
    text = format_quick_check(quick_check(table, [[2.9, 3.0]]))
    for part in ("Straight-line fit", "Mandel's test", "\nSources\n  [1] ", "ICH Q2(R1)",
                 "ISO 11843-2", "sample 1: 2 reading(s)", "LOD"):
        assert part in text


def test_header_units_comments_and_u_concentration(tmp_path):
    table = tmp_path / "t.csv"
    table.write_text("# invented demo table\nConcentration (mg/L),Absorbance,u_concentration,note\n"
                     "0.5,0.101,0.002,a\n1.0,0.198,0.002,b\n\n2.0,0.405,0.003,c\n4.0,0.801,0.004,d\n")
    t = load_table(table)
    assert t.concentration == (0.5, 1.0, 2.0, 4.0) and t.lines == (3, 4, 6, 7)
    assert t.units["concentration"] == "mg/L" and t.u_concentration[-1] == 0.004
    res = quick_check(table)
    assert any("u(concentration)" in n for n in res["notes"])


@pytest.mark.parametrize("content, error, words", [
    ("conc,absorbance\n1,0.1\n2,0.2\n3,0.3\n", MissingColumnError, "missing column(s) concentration"),
    ("concentration,absorbance\n1,0.1\n2,abc\n3,0.3\n", CellError, "line 3, column 'absorbance'"),
    ("concentration,absorbance\n1,0.1\n2,\n3,0.3\n", CellError, "empty cell"),
    ("concentration,absorbance\n1,0,1\n2,0,2\n3,0,3\n", DecimalCommaError, "decimal comma"),
    ("concentration;absorbance\n1;0,1\n2;0,2\n3;0,3\n", DecimalCommaError, "'0,1' uses a decimal comma"),
    ("concentration,absorbance\n1,0.1\n1,0.11\n2,0.2\n", TooFewLevelsError, "at least 3"),
    ("concentration,absorbance\n-1,0.1\n2,0.2\n3,0.3\n", CellError, "negative concentration"),
    ("concentration,absorbance\n1,0.1\n2,inf\n3,0.3\n", CellError, "not a finite number"),
    ("# only a comment\n", TableError, "empty"),
    ("concentration,absorbance\n1,0.2\n2,0.2\n3,0.2\n", TableError, "every absorbance is the same"),
])
def test_clear_errors(tmp_path, content, error, words):
    table = tmp_path / "bad.csv"
    table.write_text(content)
    with pytest.raises(error) as info:
        load_table(table)
    message = str(info.value)
    assert isinstance(info.value, ValueError)
    assert "bad.csv" in message and words in message and "what to do:" in message


def test_missing_file_and_bad_samples(tmp_path):
    with pytest.raises(TableError, match="file not found"):
        load_table(tmp_path / "nowhere.csv")
    table = tmp_path / "fluorescence.csv"
    table.write_text(FLUORESCENCE)
    with pytest.raises(SampleError, match="sample 2 has no usable readings") as info:
        quick_check(table, [[2.9], []])
    assert isinstance(info.value, ValueError)
