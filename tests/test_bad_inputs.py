"""A catalogue of bad inputs, each run through the command line on a modified copy of the demo.

Every case must be refused with exit code 2 (bad input) or 3 (the data allow no result),
a message that names the file, the place and what to do, no traceback, and no output
folder. tests/test_cli_errors.py holds a first, smaller set; the cases here do not repeat it.

The whole catalogue runs through `validate.cli.main`, the command's own entry point, in this
process (an unexpected exception fails the test with its traceback); a sample of it also runs
as a separate `python -m validate.cli` process, as a user would start it: one `check` refused
with exit code 2 and one `run` with exit code 3 (each process costs about a second of start-up;
what a case's message says is checked in this process).
"""

from __future__ import annotations

import re
import shutil
import subprocess
import sys

import pytest
from conftest import DEMOS

from validate import cli

DEMO = DEMOS / "phosphate_assay"
METHOD, READINGS = "method.toml", "readings.csv"


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "validate.cli", *args], capture_output=True, text=True)


def _edit(folder, old, new, name=METHOD, count=1):
    path = folder / name
    text = path.read_text(encoding="utf-8")
    assert old in text, f"test set-up: {old!r} not in {name}"
    path.write_text(text.replace(old, new, count), encoding="utf-8")


def _line_of(folder, fragment, name):
    """1-based line number of the first line holding `fragment`, for checking the place named."""
    lines = (folder / name).read_text(encoding="utf-8").splitlines()
    return next(i for i, line in enumerate(lines, start=1) if fragment in line)


# ---- each case edits the demo copy in `folder` and returns the fragments the message must hold ----

def edit(old, new, expected, name=METHOD):
    """A case that replaces one piece of text in one file."""
    def case(folder):
        _edit(folder, old, new, name=name)
        return expected
    return case


def missing_method(folder):
    (folder / METHOD).unlink()
    return [METHOD, "not found", "check the file name"]


def empty_method(folder):
    (folder / METHOD).write_bytes(b"")
    return [METHOD, "is empty"]


def blank_method(folder):
    (folder / METHOD).write_text("   \n\n", encoding="utf-8")
    return [METHOD, "is empty"]


def comments_only_method(folder):
    (folder / METHOD).write_text("# nothing here yet\n", encoding="utf-8")
    return [METHOD, "missing [result]", "formula ="]


def binary_method(folder):
    (folder / METHOD).write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR")
    return [METHOD, "binary", "UTF-8"]


def latin1_method(folder):
    text = (folder / METHOD).read_text(encoding="utf-8")
    (folder / METHOD).write_bytes(text.encode("latin-1"))
    first = next(i for i, line in enumerate(text.splitlines(), start=1) if not line.isascii())
    return [METHOD, "not UTF-8", f"line {first}", "save the file with UTF-8"]


def toml_missing_equals(folder):
    line = _line_of(folder, 'class = "analytical 0.1 mg"', METHOD)
    _edit(folder, 'class = "analytical 0.1 mg"', 'class "analytical 0.1 mg"')
    return [METHOD, "TOML syntax error", f"line {line}", "column"]


def aliquot_larger_than_flask(folder):
    _edit(folder, "[equipment.pipette_5]",
          '[equipment.flask_10]\nkind = "volumetric flask"\nnominal = "10 mL"\nclass = "A"\n\n'
          '[equipment.pipette_5]')
    _edit(folder, 'aliquot = { item = "burette_25", volume = "10.00 mL" }\nflask = "flask_50"',
          'aliquot = "pipette_20"\nflask = "flask_10"')
    return [METHOD, "[solutions.S10].aliquot", "larger than the flask"]


def empty_readings(folder):
    (folder / READINGS).write_text("", encoding="utf-8")
    return [READINGS, "is empty"]


def binary_readings(folder):
    (folder / READINGS).write_bytes(b"PK\x03\x04\x14\x00\x06\x00\x08\x00\x00\x00!\x00")
    return [READINGS, "binary", "UTF-8"]


def latin1_readings(folder):
    text = "# relevé du 3 mars\n" + (folder / READINGS).read_text(encoding="utf-8")
    (folder / READINGS).write_bytes(text.encode("latin-1"))
    return [READINGS, "not UTF-8", "line 1"]


def readings_path_is_a_folder(folder):
    (folder / "data").mkdir()
    _edit(folder, 'readings = "readings.csv"', 'readings = "data"')
    return ["data", "is a folder"]


def reading_left_empty(folder):
    _edit(folder, "S4,0.3406", "S4,", name=READINGS)
    line = _line_of(folder, "S4,", READINGS)
    return [READINGS, f"line {line}", "not a number", "plain number"]


def reading_below_range(folder):
    _edit(folder, "S4,0.3406", "S4,-0.3406", name=READINGS)
    line = _line_of(folder, "S4,-0.3406", READINGS)
    return [READINGS, f"line {line}", "-0.3406", "plausible range -0.05 to 4", "blank"]


def reading_above_range(folder):
    _edit(folder, "outfall,0.6600", "outfall,6.600", name=READINGS)
    line = _line_of(folder, "outfall,6.600", READINGS)
    return [READINGS, f"line {line}", "6.6", "plausible range", "dilute"]


def readings_missing_a_column(folder):
    _edit(folder, "id,absorbance", "id,abs", name=READINGS)
    line = _line_of(folder, "id,abs", READINGS)
    return [READINGS, f"line {line} (header)", "missing column(s) absorbance", "id,absorbance"]


def readings_with_semicolons_and_decimal_commas(folder):
    text = (folder / READINGS).read_text(encoding="utf-8")
    lines = [ln if ln.startswith("#") else ln.replace(".", ",").replace(",", ";", 1) for ln in text.splitlines()]
    (folder / READINGS).write_text("\n".join(lines) + "\n", encoding="utf-8")
    return [READINGS, "header", "';' as separator"]


def reading_with_an_unquoted_decimal_comma(folder):
    _edit(folder, "S4,0.3406", "S4,0,3406", name=READINGS)
    line = _line_of(folder, "S4,0,3406", READINGS)
    return [READINGS, f"line {line}", "cells but the header names", "decimal comma"]


def readings_missing_for_a_standard(folder):
    text = (folder / READINGS).read_text(encoding="utf-8")
    (folder / READINGS).write_text("".join(ln for ln in text.splitlines(True) if not ln.startswith("S6,")),
                                   encoding="utf-8")
    return [READINGS, "no readings for `S6`", "add rows"]


def standards_at_one_concentration(folder):
    for volume in ("1.00", "4.00", "4.00", "6.00", "6.00", "8.00", "10.00"):  # S4b and S6b: 4 and 6 mL too
        _edit(folder, f'volume = "{volume} mL"', 'volume = "2.00 mL"')
    _edit(folder, 'blanks = ["blank"]', "blanks = []")
    return [METHOD, "[calibration].standards", "only 1 distinct concentration", "different concentrations"]


def standards_at_one_concentration_and_a_blank(folder):
    for volume in ("1.00", "4.00", "4.00", "6.00", "6.00", "8.00", "10.00"):  # S4b and S6b: 4 and 6 mL too
        _edit(folder, f'volume = "{volume} mL"', 'volume = "2.00 mL"')
    return [METHOD, "[calibration].standards", "only 2 distinct concentration"]


def falling_response(folder):
    """Readings of the standards reversed: absorbance falls as concentration rises (a data problem)."""
    order = ["blank", "S1", "S2", "S4", "S4b", "S6", "S6b", "S8", "S10"]
    lines = (folder / READINGS).read_text(encoding="utf-8").splitlines()
    by_id = {i: [ln.split(",")[1] for ln in lines if ln.startswith(i + ",")] for i in order}
    swap = dict(zip(order, reversed(order), strict=True))
    seen: dict[str, int] = {}
    out = []
    for ln in lines:
        ident = ln.split(",")[0]
        if ident in swap:
            j = seen[ident] = seen.get(ident, -1) + 1
            cells = ln.split(",")
            ln = ",".join([ident, by_id[swap[ident]][j], *cells[2:]])  # keep any further columns
        out.append(ln)
    (folder / READINGS).write_text("\n".join(out) + "\n", encoding="utf-8")
    return [READINGS, "falls as the concentration rises", "slope -0.079", "what to do", "right id"]


def quantity_named_like_a_solution(folder):
    _edit(folder, "[quantities.V_sample]", "[quantities.intermediate]")
    _edit(folder, "c_measured * V_flask / V_sample * M_P", "c_measured * V_flask / intermediate * M_P")
    return [METHOD, "[quantities.intermediate]", "name of a solution", "rename the quantity"]


def blank_made_by_dilution(folder):
    _edit(folder, 'blanks = ["blank"]', 'blanks = ["S1"]')
    _edit(folder, 'standards = ["S1", ', "standards = [")
    return [METHOD, "[calibration].blanks", "listed as a blank but is made by dilution"]


def section_that_is_not_a_table(folder):
    # the samples written as a list instead of one [samples.ID] table each
    text = re.sub(r"\[samples\.[^\]]+\]\ndescription = .*\n", "", (folder / METHOD).read_text(encoding="utf-8"))
    (folder / METHOD).write_text('samples = ["river_upstream", "outfall"]\n' + text, encoding="utf-8")
    return [METHOD, "[samples]", "expected named tables", "[samples.NAME]"]


# (label, case, expected exit code, command: "run" or "check"); the cases after "fuzzer" were
# found by tests/test_fuzz.py and are kept here as plain cases
CASES = [
    ("missing_method", missing_method, 2, "run"),
    ("empty_method", empty_method, 2, "run"),
    ("blank_method", blank_method, 2, "check"),
    ("comments_only_method", comments_only_method, 2, "run"),
    ("binary_method", binary_method, 2, "run"),
    ("latin1_method", latin1_method, 2, "check"),
    ("toml_missing_equals", toml_missing_equals, 2, "run"),
    ("toml_duplicate_table", edit("[equipment.flask_100]",
                                  '[equipment.flask_50]\nkind = "burette"\n\n[equipment.flask_100]',
         [METHOD, "TOML syntax error", "line", "correct the line"]), 2, "run"),
    ("toml_unclosed_list", edit('blanks = ["blank"]', 'blanks = ["blank"',
         [METHOD, "TOML syntax error", "line", "column"]), 2, "check"),
    ("unknown_section", edit("[settings]", "[setings]",
         [METHOD, "[setings]", "unknown key `setings`", "did you mean `settings`"]), 2, "run"),
    ("unknown_equipment_key", edit('nominal = "500 mL"', 'nominl = "500 mL"',
         [METHOD, "[equipment.flask_500].nominl", "did you mean `nominal`"]), 2, "run"),
    ("unknown_calibration_key", edit('cuvette = "cell_40"', 'cuvete = "cell_40"',
         [METHOD, "[calibration].cuvete", "did you mean `cuvette`"]), 2, "run"),
    ("unknown_uncertainty_key", edit('half_width = "0.2 %"', 'halfwidth = "0.2 %"',
         [METHOD, "[solutions.stock].purity.halfwidth", "did you mean `half_width`"]), 2, "check"),
    ("mass_without_unit", edit('mass = "68.05 mg"', 'mass = "68.05"',
         [METHOD, "[solutions.stock].mass", "has no unit", "a mass is needed", "unit of mass"]), 2, "run"),
    ("volume_as_bare_number", edit('nominal = "500 mL"', "nominal = 500",
         [METHOD, "[equipment.flask_500].nominal", "a volume is needed"]), 2, "run"),
    ("mass_in_a_volume_unit", edit('mass = "68.05 mg"', 'mass = "68.05 mL"',
         [METHOD, "[solutions.stock].mass", "is a volume", "a mass is needed"]), 2, "run"),
    ("unknown_unit", edit('nominal = "100 mL"', 'nominal = "100 mLL"',
         [METHOD, "[equipment.flask_100].nominal", "unknown unit", "known units", "mL"]), 2, "run"),
    ("uncertainty_in_another_unit", edit('u = "0.000002 g/mol"', 'u = "0.000002 mg"',
         [METHOD, "M_P.u", "does not match", "like the value"]), 2, "run"),
    ("decimal_comma_in_a_unit_value", edit('mass = "68.05 mg"', 'mass = "68,05 mg"',
         [METHOD, "[solutions.stock].mass", "decimal comma"]), 2, "check"),
    ("zero_volume", edit('volume = "4.00 mL"', 'volume = "0 mL"',
         [METHOD, "[solutions.S4].aliquot.volume", "greater than zero"]), 2, "run"),
    ("zero_mass", edit('mass = "68.05 mg"', 'mass = "0 mg"',
         [METHOD, "[solutions.stock].mass", "greater than zero"]), 2, "run"),
    ("negative_mass", edit('mass = "68.05 mg"', 'mass = "-68.05 mg"',
         [METHOD, "[solutions.stock].mass", "greater than zero"]), 2, "run"),
    ("negative_flask", edit('nominal = "50 mL"', 'nominal = "-50 mL"',
         [METHOD, "[equipment.flask_50].nominal", "greater than zero"]), 2, "check"),
    ("aliquot_larger_than_flask", aliquot_larger_than_flask, 2, "run"),
    ("volume_beyond_the_burette", edit('volume = "10.00 mL"', 'volume = "30.00 mL"',
         [METHOD, "[solutions.S10].aliquot", "larger than the burette's nominal volume"]), 2, "run"),
    ("purity_above_100_percent", edit('value = "99.8 %"', 'value = "100.5 %"',
         [METHOD, "[solutions.stock].purity", "cannot exceed 100 %"]), 2, "run"),
    ("number_given_as_text", edit("coverage_probability = 0.95", 'coverage_probability = "0.95"',
         [METHOD, "[settings].coverage_probability", "expected a number"]), 2, "run"),
    ("probability_out_of_range", edit("coverage_probability = 0.95", "coverage_probability = 1.5",
         [METHOD, "[settings].coverage_probability", "out of range"]), 2, "run"),
    ("unknown_choice", edit('scatter = "observed"', 'scatter = "observd"',
         [METHOD, "[settings].scatter", "unknown choice", "bottom-up"]), 2, "check"),
    ("empty_readings", empty_readings, 2, "run"),
    ("binary_readings", binary_readings, 2, "run"),
    ("latin1_readings", latin1_readings, 2, "run"),
    ("readings_path_is_a_folder", readings_path_is_a_folder, 2, "run"),
    ("reading_left_empty", reading_left_empty, 2, "run"),
    ("reading_not_finite", edit("S4,0.3406", "S4,nan",
         [READINGS, "not a finite number"], name=READINGS), 2, "run"),
    ("reading_below_range", reading_below_range, 2, "run"),
    ("reading_above_range", reading_above_range, 2, "check"),
    ("readings_missing_a_column", readings_missing_a_column, 2, "run"),
    ("readings_with_semicolons_and_decimal_commas", readings_with_semicolons_and_decimal_commas, 2, "run"),
    ("reading_with_an_unquoted_decimal_comma", reading_with_an_unquoted_decimal_comma, 2, "run"),
    ("readings_missing_for_a_standard", readings_missing_for_a_standard, 2, "run"),
    ("two_standards_only", edit('standards = ["S1", "S2", "S4", "S4b", "S6", "S6b", "S8", "S10"]', 'standards = ["S1"]',
         [METHOD, "[calibration].standards", "only 2 calibration levels", "add standards"]), 2, "run"),
    ("standards_at_one_concentration", standards_at_one_concentration, 2, "run"),
    ("standards_at_one_concentration_and_a_blank", standards_at_one_concentration_and_a_blank, 2, "check"),
    ("falling_response", falling_response, 3, "run"),
    ("sample_id_equal_to_a_standard", edit("[samples.outfall]", "[samples.S4]",
         [METHOD, "[samples.S4]", "also a solution id", "rename the sample"]), 2, "run"),
    ("quantity_named_like_a_solution", quantity_named_like_a_solution, 2, "run"),
    ("preparation_from_itself", edit('from = "intermediate"\naliquot = { item = "burette_25", volume = "1.00 mL" }',
                                     'from = "S1"\naliquot = { item = "burette_25", volume = "1.00 mL" }',
         [METHOD, "[solutions.S1].from", "refers back to itself", "S1 -> S1", "break the circle"]), 2, "run"),
    ("preparation_in_a_circle", edit('from = "stock"', 'from = "S2"',
         [METHOD, ".from", "refers back to itself", "intermediate -> S2 -> intermediate"]), 2, "check"),
    ("preparation_from_an_unknown_solution", edit('from = "stock"', 'from = "stok"',
         [METHOD, "[solutions.intermediate].from", "unknown solution `stok`", "stock"]), 2, "run"),
    ("blank_made_by_dilution", blank_made_by_dilution, 2, "run"),
    ("balance_class_not_in_any_register", edit('class = "analytical 0.1 mg"', 'class = "analytical 1 mg"',
         [METHOD, "[equipment.balance].class", "not in any register", "analytical 0.1 mg",
          "semi-micro 0.01 mg"]), 2, "run"),
    ("pipette_size_not_in_any_register", edit('nominal = "5 mL"', 'nominal = "7 mL"',
         [METHOD, "[equipment.pipette_5].class", "registers hold no one-mark pipette of 7 mL",
            "your own calibration data"]), 2, "run"),
    ("unknown_equipment_kind", edit('kind = "burette"', 'kind = "buret"',
         [METHOD, "[equipment.burette_25].kind", "unknown kind", "burette"]), 2, "run"),
    ("undefined_equipment", edit('flask = "flask_500"', 'flask = "flask_250"',
         [METHOD, "[solutions.stock].flask", "unknown equipment `flask_250`", "[equipment.flask_250]"]), 2, "run"),
    ("wrong_kind_of_equipment", edit('aliquot = "pipette_5"', 'aliquot = "flask_50"',
         [METHOD, "[solutions.intermediate].aliquot", "is a volumetric flask", "pipette"]), 2, "run"),
    ("formula_that_would_run_code", edit('formula = "c_measured * V_flask / V_sample * M_P"',
                                         'formula = "__import__(\'os\').system(\'echo hacked\')"',
         [METHOD, "[result].formula", "is not allowed"]), 2, "run"),
    ("formula_with_an_undefined_name", edit("c_measured * V_flask / V_sample * M_P",
                                            "c_measured * V_flask / V_smple * M_P",
         [METHOD, "[result].formula", "`V_smple`, which is not defined", "did you mean `V_sample`?"]), 2, "check"),
    ("result_unit_that_does_not_fit", edit('unit = "mg/L"', 'unit = "mg"',
         [METHOD, "[result].unit", "mass concentration", "check the formula"]), 2, "run"),
    # fuzzer
    ("negative_temperature_range", edit('temperature_range = "3 K"', 'temperature_range = "-3 K"',
         [METHOD, "[settings].temperature_range", "not a laboratory's", "3 K"]), 2, "run"),
    ("absurdly_small_mass", edit('mass = "68.05 mg"', 'mass = "6.805e-299 mg"',
         [METHOD, "[solutions.stock].mass", "far outside any laboratory quantity",
          "check the number and its unit"]), 2, "run"),
    ("vanishing_error_probability", edit("alpha = 0.05", "alpha = 5e-302",
         [METHOD, "[validation].alpha", "out of range", "above 1e-05"]), 2, "run"),
    ("reversed_recovery_range", edit("recovery_range = [95, 105]", "recovery_range = [105, 95]",
         [METHOD, "[acceptance].recovery_range", "low below high", "[95, 105]"]), 2, "check"),
    ("section_that_is_not_a_table", section_that_is_not_a_table, 2, "run"),
    # inputs without an uncertainty would enter the result as exact: refused unless `exact = true`
    ("purity_as_a_bare_number", edit('purity = { value = "99.8 %", half_width = "0.2 %", provenance = '
                                     '"supplier\'s certificate of analysis (invented)" }', 'purity = "99.9 %"',
         [METHOD, "[solutions.stock].purity", "has no uncertainty", "exact = true", 'value = "99.9 %"']), 2, "check"),
    ("molar_mass_table_without_uncertainty", edit('u = "0.002 g/mol", ', '',
         [METHOD, "[solutions.stock].molar_mass", "has no uncertainty", "half_width"]), 2, "run"),
    ("quantity_as_a_bare_value", edit('value = "30.973762 g/mol"\nu = "0.000002 g/mol"', 'value = "30.973762 g/mol"',
         [METHOD, "[quantities].M_P", "has no uncertainty", "exact = true"]), 2, "check"),
    ("zero_uncertainty_instead_of_exact", edit('u = "0.000002 g/mol"', 'u = "0 g/mol"',
         [METHOD, "M_P.u", "zero uncertainty", "exact = true"]), 2, "check"),
    ("exact_and_an_uncertainty", edit('u = "0.002 g/mol", ', 'u = "0.002 g/mol", exact = true, ',
         [METHOD, "[solutions.stock].molar_mass.exact", "contradict"]), 2, "check"),
    ("exact_written_as_text", edit('u = "0.002 g/mol", ', 'exact = "yes", ',
         [METHOD, "[solutions.stock].molar_mass.exact", "true or false"]), 2, "check"),
    ("mass_without_balance_or_uncertainty", edit('balance = "balance"\npurity', 'purity',
         [METHOD, "[solutions.stock].mass", "has no uncertainty"]), 2, "check"),
    ("exact_mass_on_a_balance", edit('mass = "68.05 mg"', 'mass = { value = "68.05 mg", exact = true }',
         [METHOD, "[solutions.stock].mass", "not exact", "balance"]), 2, "check"),
    # weighings and balances
    ("unknown_weighing", edit('balance = "balance"\n', 'balance = "balance"\nweighing = "twice"\n',
         [METHOD, "[solutions.stock].weighing", "by difference", "single reading"]), 2, "check"),
    ("weighing_without_balance", edit('balance = "balance"\n', 'weighing = "by difference"\n',
         [METHOD, "[solutions.stock].weighing", "no `balance`"]), 2, "check"),
    ("unknown_linearity_correlation", edit('class = "analytical 0.1 mg"',
                                           'class = "analytical 0.1 mg"\nlinearity_correlation = "both"',
         [METHOD, "[equipment.balance].linearity_correlation", "independent", "shared"]), 2, "check"),
    ("linearity_correlation_on_a_flask", edit('nominal = "500 mL"',
                                              'nominal = "500 mL"\nlinearity_correlation = "shared"',
         [METHOD, "[equipment.flask_500].linearity_correlation", "has no `linearity_correlation`"]), 2, "check"),
    # photometer sources
    ("stray_light_meant_in_percent", edit('class = "typical double-beam"\n',
                                          'class = "typical double-beam"\nstray_light = "0.05"\n',
         [METHOD, "[equipment.photometer].stray_light", "5 % is not a working photometer", '"0.05 %"']), 2, "check"),
    ("drift_check_without_after", edit('drift = { before = "0.5056", after = "0.5066" }',
                                       'drift = { before = "0.5056" }',
         [METHOD, "[equipment.photometer].drift", "missing key `after`"]), 2, "check"),
    ("drift_on_a_cuvette", edit('class = "standard 40 mm"', 'class = "standard 40 mm"\ndrift = "0.002"',
         [METHOD, "[equipment.cell_40].drift", "a cuvette has no `drift`"]), 2, "check"),
]


def _args(folder, out, command):
    if command == "run":
        return ["run", str(folder / METHOD), "--out", str(out), "--trials", "0"]
    return ["check", str(folder / METHOD)]


def _assert_refused(code, stderr, out, expected_code, expected):
    assert code == expected_code, stderr
    assert "Traceback" not in stderr, stderr
    assert stderr.startswith("input error" if expected_code == 2 else "no result"), stderr
    message = " ".join(stderr.split())  # a terminal may wrap long lines
    assert "what to do" in message, f"no advice in {message!r}"
    for fragment in expected:
        assert fragment in message, f"{fragment!r} not in {message!r}"
    assert not out.exists(), "a refused input must leave no output folder"


@pytest.mark.parametrize("label, case, code, command", CASES, ids=[c[0] for c in CASES])
def test_bad_input_is_refused_clearly(tmp_path, capsys, label, case, code, command):
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder)
    expected = case(folder)
    out = tmp_path / "out"
    returned = cli.main(_args(folder, out, command))
    _assert_refused(returned, capsys.readouterr().err, out, code, expected)


IN_A_PROCESS = ["latin1_method", "falling_response"]  # `check`, exit 2 (a file not UTF-8); `run`, exit 3


@pytest.mark.parametrize("label", IN_A_PROCESS)
def test_bad_input_is_refused_by_the_command(tmp_path, label):
    case, code, command = next(row[1:] for row in CASES if row[0] == label)
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder)
    expected = case(folder)
    out = tmp_path / "out"
    proc = _cli(*_args(folder, out, command))
    _assert_refused(proc.returncode, proc.stderr, out, code, expected)


def test_an_equipment_id_equal_to_a_solution_id_is_accepted(tmp_path, run_command):
    # Equipment ids and solution ids are named in different keys (flask/aliquot/balance against
    # from/standards), so the same word in both is unambiguous and allowed.
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder)
    _edit(folder, "[equipment.balance]", "[equipment.stock]")
    _edit(folder, 'balance = "balance"', 'balance = "stock"')
    proc = run_command("check", str(folder / METHOD))
    assert proc.returncode == 0, proc.stderr


def test_slightly_negative_blank_readings_are_accepted(tmp_path, run_command):
    # a blank read against a reference can come out a little below zero: within -0.05 it is kept
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder)
    _edit(folder, "blank,0.0111", "blank,-0.0040", name=READINGS)
    proc = run_command("check", str(folder / METHOD))
    assert proc.returncode == 0, proc.stderr
