"""Hostile inputs, by category: ids, files, sizes, formulas, arguments, calibration data and
equilibrium points. Each case runs through the command's entry point on a modified copy of a
demo (invented data) and must end with a clear message and exit code 2 (bad input) or 3 (no
result), never a traceback or a silently wrong number. The limits checked are this tool's own
(README) and the physical rules are textbook facts named beside each check.

The catalogue as a whole (this file and nine others), by category, with the number of cases,
the fuzzers and what they found: docs/hostile_catalogue.md.
"""

from __future__ import annotations

import json
import os

import pytest
from conftest import DEMOS, copy_demo, edit_text

from validate import cli
from validate.inputs.errors import InputError
from validate.inputs.text import MAX_ID_LENGTH, MAX_NESTING, clean_id, normal_id

ASSAY, STUDY = DEMOS / "phosphate_assay", DEMOS / "nickel_complex"


_copy, _edit = copy_demo, edit_text


def _refused(capsys, argv, code, *fragments):
    returned = cli.main(argv)
    err = capsys.readouterr().err
    assert returned == code, err
    message = " ".join(err.split())
    assert "Traceback" not in message
    for fragment in fragments:
        assert fragment in message, f"{fragment!r} not in {message!r}"
    return message


# ---- ids ----

def test_nfkc_joins_ids_that_look_alike():
    # Unicode Standard Annex #15: NFKC maps the fullwidth "Ｓ" to "S" and the ligature "ﬁ" to "fi"
    assert normal_id("Ｓ4") == "S4"
    assert normal_id("ﬁlter") == "filter"
    assert normal_id("μL") == normal_id("µL") == "\u00b5L"  # Greek mu and micro sign: one unit


@pytest.mark.parametrize("bad, shown", [("S\u200b4", "\\u200b"), ("\ufeffS4", "\\ufeff"), ("S4\x1b[2K", "\\u001b"),
                                        ("S\u202e4", "\\u202e")])
def test_invisible_characters_in_an_id_are_refused_and_shown(bad, shown):
    with pytest.raises(InputError) as caught:
        clean_id(bad, file="readings.csv", where="row at line 9")
    assert shown in caught.value.message() and "readings.csv" in caught.value.message()


@pytest.mark.parametrize("bad, shown", [("S\u200b4", "\\u200b"), ("\ufeffS4", "\\ufeff")])
def test_an_invisible_character_in_a_reading_id_stops_the_check(tmp_path, capsys, bad, shown):
    # before: the reading was silently dropped as "not used by the method"
    folder = _copy(tmp_path)
    _edit(folder, "S4,0.3406", f"{bad},0.3406", name="readings.csv")
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "readings.csv", shown, "retype")


@pytest.mark.parametrize("separator", ["\u2028", "\x85", "\x1c", "\x0b"])
def test_a_separator_at_the_start_of_a_reading_id_is_refused_not_taken_as_a_line_break(tmp_path, capsys,
                                                                                       separator):
    # before: str.splitlines broke the row there (and str.strip dropped it), so "\u2028outfall"
    # was read as "outfall" without a word; a CSV row ends only at LF, CR LF or CR (RFC 4180)
    folder = _copy(tmp_path)
    _edit(folder, "outfall,", f"{separator}outfall,", name="readings.csv")
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "readings.csv", f"\\u{ord(separator):04x}")


def test_a_control_character_in_a_series_label_is_refused(tmp_path, capsys):
    folder = _copy(tmp_path)
    _edit(folder, "S4,0.3406,day 1", "S4,0.3406,day\x1b[8m 1", name="readings.csv")
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "readings.csv", "\\u001b")


def test_a_fullwidth_id_in_the_readings_matches_its_standard(tmp_path, capsys):
    folder = _copy(tmp_path)
    _edit(folder, "S4,0.3406", "Ｓ4,0.3406", name="readings.csv")
    assert cli.main(["check", str(folder / "method.toml")]) == 0, capsys.readouterr().err


def test_an_invisible_character_in_a_method_key_is_refused(tmp_path, capsys):
    folder = _copy(tmp_path)
    _edit(folder, "[samples.outfall]", '[samples."out\u200bfall"]')
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "method.toml", "\\u200b")


def test_a_control_character_in_the_title_is_refused(tmp_path, capsys):
    folder = _copy(tmp_path)
    text = (folder / "method.toml").read_text(encoding="utf-8")
    start = text.index("title = ")
    end = text.index("\n", start)
    (folder / "method.toml").write_text(text[:start] + 'title = "\\u001b[32mverified\\u001b[0m"' + text[end:],
                                        encoding="utf-8")
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "[method].title", "\\u001b")


def test_an_id_longer_than_the_limit_is_refused(tmp_path, capsys):
    folder = _copy(tmp_path)
    long_id = "o" * (MAX_ID_LENGTH + 1)
    _edit(folder, "[samples.outfall]", f"[samples.{long_id}]")
    _edit(folder, "outfall,", f"{long_id},", name="readings.csv")
    _refused(capsys, ["check", str(folder / "method.toml")], 2, f"the limit is {MAX_ID_LENGTH}")


def test_a_solution_listed_as_standard_and_as_blank_is_refused(tmp_path, capsys):
    # before: its readings entered the line twice
    folder = _copy(tmp_path)
    _edit(folder, 'standards = ["S1", "S2"', 'standards = ["blank", "S1", "S2"')
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "[calibration].blanks",
             "both as a standard and as a blank")


# ---- files and sizes ----

@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes need a POSIX system")
def test_a_named_pipe_as_readings_is_refused_without_waiting(tmp_path, capsys):
    folder = _copy(tmp_path)
    (folder / "readings.csv").unlink()
    os.mkfifo(folder / "readings.csv")
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "not a regular file")


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs a device file")
def test_a_device_as_readings_is_refused(tmp_path, capsys):
    folder = _copy(tmp_path)
    _edit(folder, 'readings = "readings.csv"', 'readings = "/dev/zero"')
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "/dev/zero", "not a regular file")


def _pipe(path):
    if not hasattr(os, "mkfifo"):
        pytest.skip("named pipes need a POSIX system")
    path.unlink(missing_ok=True)
    os.mkfifo(path)
    return path


def _device(path):
    if not os.path.exists("/dev/zero"):
        pytest.skip("needs a device file")
    return "/dev/zero"


def _calibration_table(folder):
    table = folder / "table.csv"
    table.write_text("concentration,absorbance\n1,0.1\n2,0.2\n3,0.31\n4,0.4\n", encoding="utf-8")
    return table


def _method_as(make):
    def case(folder):
        target = make(folder / "method.toml")
        return ["check", str(target)], str(target)
    return case


def _register_as(make):
    def case(folder):
        target = make(folder / "our_lab.toml")
        _edit(folder, "[settings]\n", f'[settings]\nregisters = ["{target}"]\n')
        return ["check", str(folder / "method.toml")], str(target)
    return case


def _table_as(make):
    def case(folder):
        target = make(_calibration_table(folder))
        return ["calibrate", str(target)], str(target)
    return case


def _run_with_method_as(make):
    def case(folder):
        target = make(folder / "method.toml")
        return ["run", str(target), "--out", str(folder / "new" / "out"), "--trials", "0"], str(target)
    return case


# every file the tool reads, as a named pipe (would hang a plain read) and as a device (never ends)
NOT_REGULAR = [
    ("method file, pipe", _method_as(_pipe)), ("method file, device", _method_as(_device)),
    ("method file for run, pipe", _run_with_method_as(_pipe)),
    ("register, device", _register_as(_device)),
    ("calibration table, pipe", _table_as(_pipe)), ("calibration table, device", _table_as(_device)),
]


@pytest.mark.parametrize("label, case", NOT_REGULAR, ids=[c[0] for c in NOT_REGULAR])
def test_a_pipe_or_device_is_refused_wherever_a_file_is_read(tmp_path, capsys, label, case):
    folder = _copy(tmp_path)
    argv, shown = case(folder)
    _refused(capsys, argv, 2, shown, "not a regular file")
    assert not (folder / "new").exists()  # a run refused for its input leaves no folder behind


@pytest.mark.parametrize("what, name, command", [
    ("method file", "method.toml", "check"), ("readings table", "readings.csv", "check"),
    ("calibration table", "table.csv", "calibrate"),
])
def test_a_file_over_the_size_limit_is_refused_with_the_limit(tmp_path, capsys, monkeypatch, what, name, command):
    from validate.inputs import readings
    from validate.inputs.registers import default_register_files
    folder = _copy(tmp_path)
    table = _calibration_table(folder)
    method = folder / "method.toml"
    limit = method.stat().st_size - 1  # the method file is read first
    if what != "method file":  # only this file over the limit: the others (and the registers) below it
        limit = max(p.stat().st_size for p in [method, *default_register_files()])
        (folder / name).write_text((folder / name).read_text(encoding="utf-8") + "# padding\n" * limit,
                                   encoding="utf-8")
    monkeypatch.setattr(readings, "MAX_FILE_BYTES", limit)  # instead of writing 10 MB
    argv = ["calibrate", str(table)] if command == "calibrate" else ["check", str(method)]
    _refused(capsys, argv, 2, str(folder / name), f"{what} is larger than the limit of {limit} bytes")


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes need a POSIX system")
def test_an_input_swapped_for_a_pipe_after_the_run_is_not_waited_for(tmp_path):
    # the record stores a copy of each input, read again after the computation
    from validate.workflow import pipeline as api
    folder = _copy(tmp_path)
    run = api.analyse(folder / "method.toml", trials=None, advice=False)
    _pipe(folder / "readings.csv")
    with pytest.raises(InputError, match="not a regular file"):
        api.write_outputs(run, tmp_path / "out", pdf=False)
    assert not (tmp_path / "out").exists()


def test_verify_refuses_a_pipe_as_the_folder(tmp_path, capsys):
    _refused(capsys, ["verify", str(_pipe(tmp_path / "record"))], 2, "not a folder")


def test_deep_nesting_in_the_method_file_is_refused(tmp_path, capsys):
    folder = _copy(tmp_path)
    with (folder / "method.toml").open("a", encoding="utf-8") as handle:
        handle.write("\n[deep]\nx = " + "[" * 5000 + "]" * 5000 + "\n")
    _refused(capsys, ["check", str(folder / "method.toml")], 2, f"nested more than {MAX_NESTING} deep")


def test_moderate_nesting_beyond_the_limit_is_refused_with_its_place(tmp_path, capsys):
    folder = _copy(tmp_path)
    with (folder / "method.toml").open("a", encoding="utf-8") as handle:
        handle.write("\n[deep]\nx = " + "[" * 12 + "]" * 12 + "\n")
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "[deep].x", f"nested more than {MAX_NESTING}")


def test_too_many_readings_are_refused_with_the_limit(tmp_path, capsys):
    from validate.inputs.readings import MAX_READINGS
    folder = _copy(tmp_path)
    with (folder / "readings.csv").open("a", encoding="utf-8") as handle:
        handle.write("outfall,0.66\n" * (MAX_READINGS + 1))
    _refused(capsys, ["check", str(folder / "method.toml")], 2, f"the limit is {MAX_READINGS}")


# ---- formulas evaluated at the estimates ----

def _log_formula(folder, sample_reading):
    """The result as log10(c_measured / c_ref), and the upstream sample read at `sample_reading`."""
    text = (folder / "method.toml").read_text(encoding="utf-8")
    text = text.replace('formula = "c_measured * V_flask / V_sample * M_P"', 'formula = "log10(c_measured / c_ref)"')
    text = text.replace('unit = "mg/L"', 'unit = "1"', 1)
    text = text.replace("[quantities.M_P]", '[quantities.c_ref]\nvalue = "1 µmol/L"\nu = "0.01 µmol/L"\n'
                                            'provenance = "invented"\n\n[quantities.M_P]')
    keep = ("reference_sample", "reference_value", "max_loq")
    lines, routine = [], False
    for ln in text.splitlines():  # the routine-use section is in mg/L, which a log result is not
        if ln.startswith("["):
            routine = ln.startswith("[routine_uncertainty")
        if not routine and not ln.startswith(keep):
            lines.append(ln)
    (folder / "method.toml").write_text("\n".join(lines), encoding="utf-8")
    readings = (folder / "readings.csv").read_text(encoding="utf-8")
    for old in ("river_upstream,0.1329", "river_upstream,0.1332", "river_upstream,0.1304"):
        readings = readings.replace(old, f"river_upstream,{sample_reading}")
    (folder / "readings.csv").write_text(readings, encoding="utf-8")


def test_the_log_of_a_sample_below_the_blank_stops_at_check(tmp_path, capsys):
    # a reading just below the blank gives c_measured < 0; log10 of a negative number has no value
    folder = _copy(tmp_path)
    _log_formula(folder, "-0.0100")
    _refused(capsys, ["check", str(folder / "method.toml")], 3, "log10(c_measured / c_ref)",
             "`river_upstream`", "c_measured = -", "what to do")


def test_the_same_formula_with_readings_above_the_blank_runs(tmp_path, capsys):
    folder = _copy(tmp_path)
    _log_formula(folder, "0.1329")
    assert cli.main(["check", str(folder / "method.toml")]) == 0, capsys.readouterr().err


@pytest.mark.parametrize("formula, reason", [
    ("log10(c_measured / (c_ref - c_ref))", "division by zero"),
    ("exp(1e6 * c_measured / c_ref)", "too large"),
    ("sqrt(-c_measured / c_ref)", "not positive"),
])
def test_a_formula_that_cannot_be_computed_is_refused(tmp_path, capsys, formula, reason):
    folder = _copy(tmp_path)
    _log_formula(folder, "0.1329")
    _edit(folder, 'formula = "log10(c_measured / c_ref)"', f'formula = "{formula}"')
    _refused(capsys, ["check", str(folder / "method.toml")], 3, formula, reason, "values in SI units")


# ---- arguments ----

@pytest.mark.parametrize("args, fragment", [
    (["--seed", "-1"], "between 0 and"), (["--seed", "1.5"], "whole number"),
    (["--trials", "inf"], "whole number"), (["--trials", "nan"], "whole number"),
    (["--trials", "1e12"], "1000 to 33,000,000"), (["--trials", "999"], "1000 to 33,000,000"),
    (["--top", "-1"], "0 to 1000"),
])
def test_out_of_range_arguments_are_refused_before_any_work(tmp_path, capsys, args, fragment):
    out = tmp_path / "out"
    with pytest.raises(SystemExit) as stopped:
        cli.main(["run", str(ASSAY / "method.toml"), "--out", str(out), *args])
    assert stopped.value.code == 2
    assert fragment in capsys.readouterr().err
    assert not out.exists()


@pytest.mark.parametrize("argv, fragment", [
    (["calibrate", "table.csv", "--sample", "nan"], "a finite number from -1e+12 to 1e+12"),
    (["calibrate", "table.csv", "--sample", "1e308"], "a finite number from"),  # overflowed in the fit before
    (["calibrate", "table.csv", "--sample=-inf"], "a finite number from"),
    (["calibrate", "table.csv", "--sample", "0,5"], "as a number"),
    (["run", "method.toml", "--out", ""], "give the name of a folder"),
    (["run", "method.toml", "--out", "   "], "give the name of a folder"),
])
def test_other_arguments_out_of_range_are_refused(capsys, argv, fragment):
    with pytest.raises(SystemExit) as stopped:
        cli.main(argv)
    assert stopped.value.code == 2 and fragment in capsys.readouterr().err


@pytest.mark.parametrize("old, new, fragment", [
    ("coverage_probability = 0.95", "coverage_probability = 1e-300", "above 0.5"),
    ("coverage_probability = 0.95", "coverage_probability = 0.999999", "below 0.9999"),
    ("coverage_factor = 2", "coverage_factor = 1e-300", "coverage_factor"),
    ("coverage_factor = 2", "coverage_factor = 1e300", "coverage_factor"),
])
def test_extreme_settings_are_refused(tmp_path, capsys, old, new, fragment):
    folder = _copy(tmp_path)
    _edit(folder, old, new)
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "method.toml", fragment)


# ---- calibration data ----

def test_calibrate_refuses_a_falling_line(tmp_path, capsys):
    # Beer-Lambert: absorbance rises in proportion to concentration (IUPAC Gold Book, "absorbance")
    table = tmp_path / "falling.csv"
    table.write_text("concentration,absorbance\n1,0.5\n2,0.4\n3,0.3\n4,0.2\n", encoding="utf-8")
    _refused(capsys, ["calibrate", str(table), "--sample", "0.3"], 3, "falls as the concentration rises")


def test_calibrate_refuses_a_line_whose_slope_is_not_significant(tmp_path, capsys):
    # slope 0.035 with scatter of about 0.15: t far below 4.30 (t(0.975, 2), from memory)
    table = tmp_path / "flat.csv"
    table.write_text("concentration,absorbance\n1,0.3\n2,0.6\n3,0.35\n4,0.5\n", encoding="utf-8")
    _refused(capsys, ["calibrate", str(table)], 3, "does not differ significantly from zero")


# ---- equilibrium points ----

def _set_readings(folder, ident, value):
    lines = (folder / "readings.csv").read_text(encoding="utf-8").splitlines()
    out = [f"{ident},{value}" if ln.startswith(f"{ident},") else ln for ln in lines]
    (folder / "readings.csv").write_text("\n".join(out) + "\n", encoding="utf-8")


@pytest.mark.slow
def test_an_impossible_point_is_left_out_of_the_combined_k(tmp_path, capsys):
    # a mixture read at zero has no complex ([ML] = 0): its K (-13) must not pull the combined K
    # (222 L/mol before) below every valid point's K (834 to 893 L/mol in this invented study)
    folder = _copy(tmp_path, STUDY)
    _set_readings(folder, "X2", "0.0000")
    out = tmp_path / "out"
    assert cli.main(["run", str(folder / "method.toml"), "--out", str(out), "--trials", "0",
                     "--no-pdf", "--no-advice"]) == 0, capsys.readouterr().err
    eq = json.loads((out / "results.json").read_text(encoding="utf-8"))["equilibrium"]
    valid = [m["K"] for m in eq["mixtures"] if m["id"] != "X2"]
    # a generalised-least-squares mean of correlated values may fall a little outside their range
    # (negative weights), but not by more than its own expanded uncertainty
    big_u = eq["combined"]["expanded_uncertainty"]
    assert min(valid) - big_u <= eq["combined"]["K"] <= max(valid) + big_u
    assert [e["id"] for e in eq["combined"]["excluded"]] == ["X2"]
    ids = [m["id"] for m in eq["mixtures"]]
    assert eq["combined"]["weights"][ids.index("X2")] == 0.0
    assert "left out" in next(m for m in eq["mixtures"] if m["id"] == "X2")["saturation_flag"]
    assert "X2" in capsys.readouterr().out


def test_a_study_with_no_possible_point_stops_with_exit_3(tmp_path, capsys):
    folder = _copy(tmp_path, STUDY)
    lines = (folder / "readings.csv").read_text(encoding="utf-8").splitlines()
    points = sorted({ln.split(",")[0] for ln in lines if ln.startswith(("X", "T"))})
    for ident in points:
        _set_readings(folder, ident, "0.0000")
    _refused(capsys, ["run", str(folder / "method.toml"), "--out", str(tmp_path / "out"), "--trials", "0",
                      "--no-pdf", "--no-advice"], 3, "no point of the study gives a physically possible K")
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("old, new, fragments", [
    ('ionic_strength = "0.10 mol/L"', 'ionic_strength = "1e6 mol/L"', ["[equilibrium].ionic_strength", "10 mol/L"]),
    ("charges = [2, -1]", "charges = [2000000000, -1]", ["[equilibrium].charges", "+/-6"]),
    ("additions = 6", "additions = 1000000000", ["[equilibrium.series.T].additions", "below 201"]),
    # below absolute zero (-273.15 degC) and outside liquid water at ordinary pressure
    ('temperature = "25 degC"', 'temperature = "-300 degC"', ["[equilibrium].temperature", "0 to 100 degC"]),
])
def test_impossible_study_conditions_are_refused(tmp_path, capsys, old, new, fragments):
    folder = _copy(tmp_path, STUDY)
    _edit(folder, old, new)
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "method.toml", *fragments)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes need a POSIX system")
def test_a_named_pipe_as_a_register_file_is_refused(tmp_path, capsys):
    folder = _copy(tmp_path)
    os.mkfifo(folder / "our_lab.toml")
    _edit(folder, "[settings]\n", '[settings]\nregisters = ["our_lab.toml"]\n')
    _refused(capsys, ["check", str(folder / "method.toml")], 2, "our_lab.toml", "not a regular file")
