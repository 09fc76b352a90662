"""What the commands print is rendered from the record (results.json) alone."""

from __future__ import annotations

import io
import json
import re

from conftest import DEMOS
from rich.console import Console

from validate import cli
from validate.report import terminal
from validate.report.numbers import gum_pair

WIDTH = 100


def _text(lines) -> str:
    """Print Lines the way the command line does, into a string."""
    out = io.StringIO()
    console = Console(file=out, width=WIDTH, highlight=False, color_system=None)
    cli._show(console, lines)
    return out.getvalue()


def _run(capsys, monkeypatch, demo: str, out, *extra) -> tuple[str, dict]:
    monkeypatch.setenv("COLUMNS", str(WIDTH))
    code = cli.main(["run", str(DEMOS / demo / "method.toml"), "--out", str(out), "--no-pdf", *extra])
    assert code == 0
    record = json.loads((out / "results.json").read_text(encoding="utf-8"))
    return capsys.readouterr().out, record


def test_run_output_is_the_rendering_of_results_json(capsys, monkeypatch, tmp_path):
    printed, record = _run(capsys, monkeypatch, "phosphate_assay", tmp_path / "out",
                           "--trials", "2000", "--seed", "5", "--top", "3")
    rendered = _text(terminal.run_lines(record, 3))
    assert printed.startswith(rendered)
    assert printed[len(rendered):].startswith("wrote ")
    # every result, its Monte Carlo check and its three largest sources are there
    for result in record["results"]:
        assert result["name"] in rendered
        assert f"{result['monte_carlo']['trials']:,} trials" in rendered
    assert rendered.count("largest sources of uncertainty:") == len(record["results"])


def test_results_are_rounded_by_gum_7_2_6(capsys, monkeypatch, tmp_path):
    # GUM 7.2.6: U to two significant digits, the value to the same decimal place
    printed, record = _run(capsys, monkeypatch, "phosphate_assay", tmp_path / "out", "--trials", "0",
                           "--no-advice")
    shown = re.findall(r"GUM +(-?[\d.]+) ± ([\d.]+) ", printed)
    assert len(shown) == len(record["results"])
    for (value, big_u), result in zip(shown, record["results"], strict=True):
        assert (value, big_u) == gum_pair(result["value"], result["expanded_uncertainty"])
        assert len(big_u.replace(".", "").lstrip("0")) == 2
        assert len(value.split(".")[-1]) == len(big_u.split(".")[-1])
    assert "Monte Carlo  [" not in printed  # --trials 0: no Monte Carlo lines


def test_equilibrium_run_output_is_the_rendering_of_results_json(capsys, monkeypatch, tmp_path):
    printed, record = _run(capsys, monkeypatch, "nickel_complex", tmp_path / "out", "--trials", "0",
                           "--no-advice")
    rendered = _text(terminal.run_lines(record, 5))
    assert printed.startswith(rendered)
    assert "Formation constant K of ML (1:1)" in rendered
    for mixture in record["equilibrium"]["mixtures"]:
        assert mixture["id"] in rendered


def _invented_result(**changes) -> dict:
    """An invented result entry in the record's form (no real measurement behind it)."""
    result = {"name": "analyte, sample A", "unit": "mg/L", "value": 0.123456, "standard_uncertainty": 0.00131,
              "expanded_uncertainty": 0.002653, "coverage_factor": 2.0253, "coverage_probability": 0.95,
              "effective_dof": None, "flags": [], "budget_by_step": [{"group": "weighing", "share": 0.8},
                                                                      {"group": "dilution", "share": 0.2}]}
    return {**result, **changes}


def test_a_result_with_flags_and_a_failed_monte_carlo_check():
    mc = {"interval": [0.12071, 0.12612], "shortest_interval": [0.12070, 0.12611], "trials": 100000,
          "tolerance": 5e-6, "agrees_with_gum": False, "gum_check": "differs", "gum_interval": [0.12080, 0.12611],
          "d_low": 9e-5, "d_high": 1e-5, "numerical_tolerance": 2e-6, "tolerance_target": 1e-6,
          "warning": "12 of 100000 trials (0.01%) gave no defined result", "invalid_trials": 12}
    result = _invented_result(flags=["below the LOQ"], monte_carlo=mc)
    record = {"results": [result], "budget": [
        {"result": result["name"], "source": "balance [readability]", "step": None, "share": 0.61},
        {"result": "another result", "source": "not this one", "step": "x", "share": 0.3},
        {"result": result["name"], "source": "flask", "step": "dilution", "share": 0.39}]}
    text = _text(terminal.result_lines(record, result, 5))
    assert "GUM          0.1235 ± 0.0027 mg/L" in text and "nu_eff = inf" in text
    assert "FLAG below the LOQ: report with this flag" in text
    # JCGM 101 clause 8: an end off by more than the tolerance means the GUM interval is not validated
    assert "differs from Monte Carlo (an end off by more than 5e-06)" in text
    assert "Monte Carlo  [0.12071, 0.12612], shortest [0.12070, 0.12611], 100,000 trials" in text
    assert "warning 12 of 100000 trials" in text
    # JCGM 101 8.2 (from memory): d_low, d_high, delta and the Monte Carlo numerical tolerance shown
    assert "d_low 9e-05, d_high 1e-05, delta 5e-06; Monte Carlo ends to +/-2e-06 (target delta/5 = 1e-06)" in text
    assert "balance [readability]" in text  # record text is escaped, not read as markup
    assert "not this one" not in text and "(-)" in text
    assert "by step: weighing 80%, dilution 20%" in text


def test_criteria_counts_and_unmet_criteria():
    criteria = {"caution": "Criteria come from the requirements.", "criteria": [
        {"status": "met", "met": True, "name": "r^2", "observed": 0.99991, "comparison": ">=", "limit": 0.999,
         "is_default": False},
        {"status": "not met", "met": False, "name": "recovery", "observed": 91.2, "comparison": "within",
         "limit": [95, 105], "is_default": True},
        {"status": "not set", "met": None, "name": "LOQ", "observed": 0.2, "comparison": "<=", "limit": None,
         "is_default": False}]}
    text = _text(terminal.criteria_lines(criteria))
    assert "Acceptance criteria: 1 met, 1 not met, 1 not set" in text
    assert "NOT MET  recovery: 91.2 within 95 to 105 (default)" in text
    assert "LOQ" not in text


def test_criteria_show_their_units():
    criteria = {"caution": "", "criteria": [
        {"status": "met", "met": True, "name": "relative U", "observed": 2.331, "comparison": "<=", "limit": 5.0,
         "is_default": False, "unit": "%"},
        {"status": "met", "met": True, "name": "LOQ", "observed": 0.2467, "comparison": "<=", "limit": 0.5,
         "is_default": False, "unit": "concentration unit"}]}
    text = _text(terminal.criteria_lines(criteria, "µmol/L"))
    assert "relative U: 2.331 % <= 5 %" in text
    assert "LOQ: 0.2467 µmol/L <= 0.5 µmol/L" in text


def test_advice_in_relative_and_absolute_units():
    items = [{"change": "read six times", "expanded_uncertainty_after": 0.0184, "reduction": 0.21, "cost": "time"},
             {"change": "no effect", "expanded_uncertainty_after": None, "reduction": 0.0, "cost": "-"}]
    relative = {"unit": "relative (U/|y|)", "target": "largest relative U", "expanded_uncertainty_before": 0.0233,
                "items": items, "combined": {"reduction": 0.31, "expanded_uncertainty_after": 0.016}}
    text = _text(terminal.advice_lines(relative))
    assert "now 2.33 %" in text and "-21%  read six times -> 1.84 %  (time)" in text
    assert "together: -31% -> 1.60 %" in text and "no effect" not in text
    absolute = {**relative, "unit": "mg/L", "items": [items[1]], "combined": None}
    text = _text(terminal.advice_lines(absolute))
    assert "now 0.0233 mg/L" in text and "no change among those tried" in text
    assert terminal.advice_lines(None) == []


def test_verify_lines_name_each_input_and_the_mismatches():
    report = {"record_id": "VR-1", "folder": "out", "recorded_version": "0.1.0", "current_version": "0.2.0",
              "inputs": [{"stored": "inputs/method.toml", "matches": True, "stored_sha256": "a"},
                         {"stored": "inputs/readings.csv", "matches": False, "stored_sha256": "b"},
                         {"stored": "inputs/extra.csv", "matches": False, "stored_sha256": None}],
              "trials": 1000, "seed": 7, "rerun_error": None, "numbers_compared": 120,
              "relative_tolerance": 1e-9, "passed": False, "identical": False,
              "has_manifest": True, "files": [{"path": "results.json", "state": "unchanged"},
                                              {"path": "report.pdf", "state": "changed"}],
              "content_hash": "c" * 64, "recorded_content_hash": "c" * 64, "budget_file_matches": False,
              "mismatches": [{"path": f"results[0].value{i}", "recorded": 1.0, "recomputed": 1.1} for i in range(3)]}
    lines = terminal.describe_verify(report, limit=2)
    assert lines[0] == "record VR-1 in out, written by validate 0.1.0, re-run with 0.2.0"
    assert lines[1:4] == ["  files: 1 of 2 match manifest.json", "    report.pdf: CHANGED",
                          f"  content hash {'c' * 64}: matches manifest.json"]
    assert "  budget.csv: DIFFERS from the record's budget (or is missing)" in lines
    assert "  input inputs/readings.csv: CHANGED (SHA-256 differs from the record)" in lines
    assert "  input inputs/extra.csv: MISSING" in lines
    assert "3 of the record's values differ (120 numbers compared, relative tolerance 1e-09)" in lines[8]
    assert lines[-2] == "    ... and 1 more" and lines[-1] == "NOT verified: see above"
    failed = terminal.describe_verify({**report, "rerun_error": "bad file", "mismatches": []})
    assert "  re-run from the stored copies (1000 Monte Carlo trials, seed 7) failed: bad file" in failed
    unlisted = terminal.describe_verify({**report, "has_manifest": False, "recorded_content_hash": None})
    assert unlisted[1] == "  manifest.json: MISSING (the files of the folder cannot be checked)"
    assert unlisted[2] == f"  content hash {'c' * 64}: DIFFERS from manifest.json (none)"


def test_check_and_error_lines_escape_record_text():
    facts = {"title": "A [red] title", "input_files": ["m.toml"], "equipment_items": 2, "solutions": 3,
             "contents": "4 samples", "sources": 9, "defaults_applied": ["default: x"], "notes": ["n"]}
    text = _text(terminal.check_lines(facts))
    assert "A [red] title" in text
    assert "read m.toml: 2 equipment items, 3 solutions, 4 samples, 9 uncertainty sources" in text
    assert "  - default: x" in text and "note n" in text
    assert _text([terminal.error_line("input error", "bad [key]")]).strip() == "input error bad [key]"


def test_an_undecided_check_and_a_missing_variance_are_said_so():
    # JCGM 101 8.2: a difference within Monte Carlo noise of delta is neither agreement nor
    # disagreement; a t input with nu <= 2 leaves the output without a finite variance.
    mc = {"interval": [0.12071, 0.12612], "shortest_interval": [0.12070, 0.12611], "trials": 100000,
          "tolerance": 5e-6, "agrees_with_gum": None, "gum_check": "undecided", "gum_interval": [0.12071, 0.12611],
          "d_low": 4.9e-6, "d_high": 1e-6, "numerical_tolerance": 2e-6, "tolerance_target": 1e-6,
          "warning": None, "invalid_trials": 0, "standard_uncertainty": None,
          "moments_note": "an input drawn from a t distribution with 1 degrees of freedom has no finite variance"}
    text = _text(terminal.result_lines({"results": [], "budget": []}, _invented_result(monte_carlo=mc), 0))
    assert "undecided against Monte Carlo" in text
    assert "agrees with Monte Carlo" not in text and "differs from Monte Carlo" not in text
    assert "no finite variance" in text


def test_criteria_not_evaluable_and_en_are_shown_with_the_limit():
    criteria = {"caution": "", "criteria": [
        {"status": "met", "met": True, "name": "|E_n|", "observed": -0.4642, "comparison": "|x| <=", "limit": 1.0,
         "is_default": True, "unit": ""},
        {"status": "not evaluable", "met": None, "name": "recovery", "observed": None, "comparison": "within",
         "limit": [95.0, 105.0], "is_default": False, "unit": "%"}]}
    text = _text(terminal.criteria_lines(criteria))
    assert "met  |E_n|: |-0.4642| <= 1 (default)" in text
    assert "not evaluable  recovery: no observed value (see the verdict) within 95 to 105 %" in text


def test_a_criterion_not_applicable_is_shown_as_not_judged_without_a_limit_to_meet():
    # recovery where the method names no reference sample: nothing to compare, so no limit to meet
    criteria = {"caution": "", "criteria": [
        {"status": "not applicable", "met": None, "name": "recovery", "observed": None, "comparison": "within",
         "limit": [95.0, 105.0], "is_default": True, "unit": "%"}]}
    text = _text(terminal.criteria_lines(criteria))
    assert "not applicable  recovery: not judged for this method (see the verdict)" in text
    assert "95 to 105" not in text and "no observed value" not in text


def test_output_into_a_file_or_pipe_is_not_broken_at_80_columns():
    out = io.StringIO()  # not a terminal
    console = Console(file=out, highlight=False, color_system=None)
    long = "x" * 50 + " " + "y" * 50 + " " + "z" * 50
    cli._show(console, [terminal.Line(long)])
    assert out.getvalue() == long + "\n"


def test_p_values_are_never_printed_as_zero():
    from validate.report.numbers import p_value
    assert p_value(0.0) == "< 1e-16" and p_value(3e-20) == "< 1e-16"
    assert p_value(4.6e-12) == "4.6e-12" and p_value(0.0456, 3) == "0.0456"
    test = {"name": "intercept test", "p_value": 0.0, "verdict": "differs", "evaluable": True, "statistic": 80.0,
            "source": "s"}
    quick = {"linearity": {"intercept": test}}
    from validate.report.terminal import _linearity_text, _Sources
    assert "p < 1e-16" in "\n".join(_linearity_text(quick, _Sources()))
