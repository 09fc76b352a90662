"""The one verdict of a run (validate.record.verdict) and the interval each result is reported with.

The status rules are the tool's own (documented in validate.record.verdict and the README); the
reporting rule follows JCGM 101:2008, clause 8 (a GUM interval that Monte Carlo does not
validate is replaced by the Monte Carlo coverage interval). The end-to-end tests check that the
terminal, page 1 of the PDF and results.json say the same verdict with the same lists.
"""

from __future__ import annotations

import dataclasses
import io
import json
import shutil

import pytest
from conftest import DEMOS
from pypdf import PdfReader
from rich.console import Console

from validate import cli
from validate.inputs.method_file import load_method
from validate.record.verdict import judge, reported_result
from validate.record.verdict_warnings import stated_exact
from validate.report import terminal
from validate.report.verdict_text import headline, item_text
from validate.workflow import pipeline

PHOSPHATE = DEMOS / "phosphate_assay"


@pytest.fixture(scope="module")
def phosphate_linear():
    """The phosphate demo, linear engine only (the verdict's inputs without Monte Carlo)."""
    return pipeline.analyse(PHOSPHATE / "method.toml", trials=None, advice=False)


def _quiet(validation):
    """The validation block without the demo's warnings (limits disagree, top-down wider, the scope
    starting below the lowest standard, pure error above the photometer's stated noise)."""
    limits = dataclasses.replace(validation.limits, warnings=())
    return dataclasses.replace(validation, limits=limits, intermediate_precision=None, scope=None,
                               reading_noise_consistency=None)


def _unflagged(results):
    """The results without their range flags (the demo's outfall lies outside the stated scope)."""
    return tuple(dataclasses.replace(r, flags=()) for r in results)


def _verdict(record, **changes):
    parts = {"results": _unflagged(record.results), "validation": record.validation,
             "equilibrium": record.equilibrium, "equipment": (), "exact": (), "monte_carlo_ran": True}
    return judge(**{**parts, **changes})


def test_every_criterion_met_and_nothing_listed_is_fit(phosphate_linear):
    record = phosphate_linear.typed_record
    verdict = _verdict(record, validation=_quiet(record.validation))
    # the demo sets 7 criteria that are met; max_repeatability_rsd has no limit ("not set") and is not listed
    assert verdict.status == "fit"
    assert (verdict.not_met, verdict.not_evaluable, verdict.warnings) == ((), (), ())
    assert verdict.statement.startswith("fit for the stated purpose: 7 acceptance criteria met, 0 not met")


def test_a_criterion_not_met_means_not_shown_fit_and_is_named(phosphate_linear):
    record = phosphate_linear.typed_record
    validation = _quiet(record.validation)
    rows = tuple(dataclasses.replace(c, met=False, status="not met") if c.key == "min_r_squared" else c
                 for c in validation.criteria.criteria)
    validation = dataclasses.replace(validation, criteria=dataclasses.replace(validation.criteria, criteria=rows))
    verdict = _verdict(record, validation=validation)
    assert verdict.status == "not shown fit"
    assert [i.what for i in verdict.not_met] == ["coefficient of determination r^2"]
    assert "limit >= 0.999 (set by the user)" in verdict.not_met[0].why


def test_a_criterion_not_evaluable_is_a_reservation_with_its_reason(phosphate_linear):
    record = phosphate_linear.typed_record
    validation = _quiet(record.validation)
    settings = dataclasses.replace(validation.settings, reference_sample=None)
    rows = tuple(dataclasses.replace(c, met=None, observed=None, status="not evaluable")
                 if c.key in ("recovery_range", "max_abs_en") else c for c in validation.criteria.criteria)
    validation = dataclasses.replace(validation, settings=settings,
                                     criteria=dataclasses.replace(validation.criteria, criteria=rows))
    verdict = _verdict(record, validation=validation)
    assert verdict.status == "fit with reservations"
    assert len(verdict.not_evaluable) == 2
    assert all("no reference sample" in i.why for i in verdict.not_evaluable)


def test_criteria_without_a_reference_sample_are_not_applicable_and_no_reservation(phosphate_linear):
    # the demo with no reference sample: recovery and E_n have nothing to compare with
    from validate.validation.criteria import TRUENESS_CRITERIA
    record = phosphate_linear.typed_record
    validation = _quiet(record.validation)
    settings = dataclasses.replace(validation.settings, reference_sample=None)
    rows = tuple(dataclasses.replace(c, met=None, observed=None, status="not applicable")
                 if c.key in TRUENESS_CRITERIA else c for c in validation.criteria.criteria)
    validation = dataclasses.replace(validation, settings=settings,
                                     criteria=dataclasses.replace(validation.criteria, criteria=rows))
    verdict = _verdict(record, validation=validation)
    assert verdict.status == "fit"  # not a reservation
    assert verdict.not_evaluable == () and len(verdict.not_applicable) == 2
    assert all("no reference sample" in i.why for i in verdict.not_applicable)
    assert verdict.statement == ("fit for the stated purpose: 5 acceptance criteria met, 0 not met, 0 not evaluable, "
                                 "2 not applicable; 0 warnings bear on the results")


def test_trueness_criteria_are_not_applicable_by_default_and_not_evaluable_when_set():
    from validate.validation.criteria import TRUENESS_CRITERIA, evaluate_criteria
    observed = {"r_squared": 0.9999}
    by_default = {c.key: c for c in evaluate_criteria({}, observed, ruled_out=TRUENESS_CRITERIA).criteria}
    assert by_default["recovery_range"].status == by_default["max_abs_en"].status == "not applicable"
    assert by_default["recovery_range"].met is None and by_default["min_r_squared"].met
    # a limit the laboratory set itself asks for a judgement the data cannot give: a reservation
    set_by_user = {c.key: c for c in evaluate_criteria({"max_abs_en": 1.0}, observed,
                                                       ruled_out=TRUENESS_CRITERIA).criteria}
    assert set_by_user["max_abs_en"].status == "not evaluable"
    assert set_by_user["recovery_range"].status == "not applicable"


def test_warnings_are_reservations(phosphate_linear):
    record = phosphate_linear.typed_record
    verdict = _verdict(record, results=record.results, monte_carlo_ran=False)  # the demo's own blocks, linear only
    whats = [i.what for i in verdict.warnings]
    assert verdict.status == "fit with reservations"
    assert "detection and quantitation limits" in whats
    assert any(w.startswith("top-down against bottom-up, ") for w in whats)
    assert "Monte Carlo check of the GUM interval" in whats
    # the demo states 0.05 to 0.4 mg/L in its scope: the outfall (0.6101 mg/L) lies outside it, and the
    # scope starts below the lowest standard (1 µmol/L through the dilution 20 mL to 50 mL: 0.077 mg/L P)
    assert "range, orthophosphate-P, outfall" in whats
    outfall = next(i for i in verdict.warnings if i.what == "range, orthophosphate-P, outfall")
    assert "outside the stated scope (0.05 to 0.4 mg/L)" in outfall.why and "0.6101 mg/L" in outfall.why
    scope = next(i for i in verdict.warnings if i.what == "stated scope against the working range")
    assert "below the lowest standard (0.07729 mg/L)" in scope.why


def test_reading_noise_against_the_photometer_spec_is_a_warning(phosphate_linear):
    # Chi-square test of a standard deviation against a stated value, T = nu s^2/sigma0^2
    # (NIST/SEMATECH e-Handbook 1.3.5.8). The demo's pure error (0.0020 AU) against its photometer's
    # stated 0.001 AU is significant excess: a warning naming both figures and why it matters.
    from validate.record.verdict_warnings import reading_noise

    record = phosphate_linear.typed_record
    check = record.validation.reading_noise_consistency
    assert check is not None and check.p_excess < check.alpha
    items = reading_noise(record.validation)
    assert [i.what for i in items] == ["reading scatter against the photometer's stated noise"]
    assert "stated noise 0.001 (absorbance)" in items[0].why and "understates" in items[0].why
    verdict = _verdict(record, validation=dataclasses.replace(_quiet(record.validation),
                                                              reading_noise_consistency=check))
    assert verdict.status == "fit with reservations" and verdict.warnings == tuple(items)
    # consistent (p both ways above alpha): nothing; significantly below the stated noise: a warning
    quiet = dataclasses.replace(check, p_excess=0.5, p_deficit=0.5)
    assert reading_noise(dataclasses.replace(record.validation, reading_noise_consistency=quiet)) == []
    low = dataclasses.replace(check, p_excess=0.999, p_deficit=0.001)
    low_items = reading_noise(dataclasses.replace(record.validation, reading_noise_consistency=low))
    assert len(low_items) == 1 and "significantly less than the stated noise" in low_items[0].why


def test_no_evaluated_criterion_is_not_shown_fit(phosphate_linear):
    verdict = _verdict(phosphate_linear.typed_record, validation=None)
    assert verdict.status == "not shown fit"
    assert verdict.not_evaluable[0].what == "acceptance criteria"


def test_the_record_of_a_run_holds_the_verdict(phosphate_linear):
    verdict = phosphate_linear.record["verdict"]
    assert verdict["status"] in ("fit", "fit with reservations", "not shown fit")
    for key in ("not_met", "not_evaluable", "warnings"):
        assert all(set(item) == {"what", "why"} and item["what"] and item["why"] for item in verdict[key])


def test_inputs_without_uncertainty_are_listed_as_exact():
    method = load_method(PHOSPHATE / "method.toml")
    assert stated_exact(method) == []  # the demo gives every stated input an uncertainty
    m_p = method.quantities["M_P"]
    exact_m_p = dataclasses.replace(m_p, value=dataclasses.replace(m_p.value, u=0.0))
    changed = dataclasses.replace(method, quantities={**method.quantities, "M_P": exact_m_p})
    assert [i.what for i in stated_exact(changed)] == ["M_P in [quantities]"]


# --------------------------------------------------------------------------
# the reporting rule (JCGM 101:2008, clause 8)

def test_a_validated_gum_interval_is_reported_as_y_plus_minus_u(nickel_demo):
    result = nickel_demo.typed_record.results[0]
    mc = dataclasses.replace(result.monte_carlo, agrees_with_gum=True)
    reported = reported_result(dataclasses.replace(result, monte_carlo=mc))
    assert (reported.basis, reported.clause8) == ("GUM", "validated")
    assert (reported.low, reported.high) == (result.value - result.expanded_uncertainty,
                                             result.value + result.expanded_uncertainty)


def test_a_gum_interval_not_validated_gives_way_to_the_monte_carlo_interval(nickel_demo):
    result = nickel_demo.typed_record.results[0]
    mc = dataclasses.replace(result.monte_carlo, agrees_with_gum=False)
    reported = reported_result(dataclasses.replace(result, monte_carlo=mc))
    assert (reported.basis, reported.clause8) == ("Monte Carlo", "not validated")
    assert (reported.low, reported.high) == tuple(mc.interval)
    assert reported.gum_low == result.value - result.expanded_uncertainty  # shown beside it


def test_without_monte_carlo_y_plus_minus_u_is_reported_unchecked(phosphate_linear):
    reported = phosphate_linear.typed_record.verdict.reported
    assert {(r.basis, r.clause8) for r in reported} == {("GUM", "not run")}


# --------------------------------------------------------------------------
# the exit code of `validate run --strict`

def _failing_method(tmp_path):
    """The phosphate demo with a criterion it cannot meet (r^2 observed 0.99995 against 0.99999)."""
    folder = tmp_path / "strict"
    shutil.copytree(PHOSPHATE, folder)
    path = folder / "method.toml"
    text = path.read_text(encoding="utf-8")
    assert "min_r_squared = 0.999\n" in text
    path.write_text(text.replace("min_r_squared = 0.999\n", "min_r_squared = 0.99999\n"), encoding="utf-8")
    return path


def test_strict_exits_4_when_not_fit_and_plain_run_exits_0(tmp_path, capsys):
    method = _failing_method(tmp_path)
    common = ["run", str(method), "--trials", "0", "--no-pdf", "--no-advice"]
    assert cli.main([*common, "--out", str(tmp_path / "plain")]) == 0
    assert cli.main([*common, "--out", str(tmp_path / "strict_out"), "--strict"]) == cli.EXIT_NOT_FIT == 4
    written = json.loads((tmp_path / "strict_out" / "results.json").read_text(encoding="utf-8"))
    assert written["verdict"]["status"] == "not shown fit"  # the record is written all the same
    capsys.readouterr()


def test_strict_exits_0_only_for_fit():
    assert cli._run_exit_code({"status": "fit"}, strict=True) == 0
    assert cli._run_exit_code({"status": "fit with reservations"}, strict=True) == 4
    assert cli._run_exit_code({"status": "not shown fit"}, strict=False) == 0


# --------------------------------------------------------------------------
# terminal, page 1 and results.json say the same

def _flat(text: str) -> str:
    return " ".join(text.split())


def _terminal(run, written) -> list[str]:
    console = Console(file=io.StringIO(), width=10_000, record=True, highlight=False)
    verdict = run.record["verdict"]
    cli._show(console, terminal.run_lines(run.record, 5) + terminal.written_lines(written)
              + terminal.verdict_lines(verdict))
    return [line for line in console.export_text().splitlines()]


def _same_everywhere(run, folder):
    written = pipeline.write_outputs(run, folder, overwrite=True)
    on_file = json.loads((folder / "results.json").read_text(encoding="utf-8"))["verdict"]
    assert on_file == run.record["verdict"]
    lines = _terminal(run, written)
    top = headline(on_file)
    assert lines[0] == top
    # the same acceptance block for an assay and an equilibrium study
    assert any(line.startswith("Acceptance criteria: ") for line in lines)
    tail = _flat(" ".join(lines[max(i for i, line in enumerate(lines) if line == top):]))
    page_one = _flat(PdfReader(str(folder / "report.pdf")).pages[0].extract_text() or "")
    assert _flat(top) in page_one
    for key in ("not_met", "not_evaluable", "not_applicable", "warnings"):
        for item in on_file[key]:
            assert _flat(item_text(item)) in tail, item
            assert _flat(item_text(item)) in page_one, item
    return on_file


@pytest.mark.slow
@pytest.mark.parametrize("demo", ["effluent_iron", "saturating_reagent"])
def test_a_demo_without_a_reference_sample_says_the_same_everywhere(demo, tmp_path):
    run = pipeline.analyse(DEMOS / demo / "method.toml", trials=None, advice=False)
    verdict = _same_everywhere(run, tmp_path / "out")
    # no reference sample named: recovery and E_n are not applicable, counted apart, no reservation
    assert [i["what"] for i in verdict["not_applicable"]] == ["recovery against the reference value",
                                                              "|E_n| against the reference value"]
    assert verdict["not_evaluable"] == []
    assert ", 0 not evaluable, 2 not applicable;" in verdict["statement"]
    rows = {c["key"]: c["status"] for c in run.record["validation"]["criteria"]["criteria"]}
    assert rows["recovery_range"] == rows["max_abs_en"] == "not applicable"


@pytest.mark.slow
def test_the_phosphate_demo_says_the_same_everywhere(tmp_path):
    run = pipeline.analyse(PHOSPHATE / "method.toml", trials=20_000, seed=7, advice=False)
    verdict = _same_everywhere(run, tmp_path / "out")
    assert verdict["status"] == "fit with reservations"


@pytest.mark.slow
def test_the_nickel_demo_says_the_same_everywhere(nickel_demo, tmp_path):
    import copy
    run = copy.copy(nickel_demo)
    run.set_record(nickel_demo.typed_record)  # a run of its own: write_outputs replaces its record
    verdict = _same_everywhere(run, tmp_path / "out")
    assert verdict["status"] == "fit with reservations"
    # recovery and E_n do not apply to a study: left out, not "not evaluable"
    assert verdict["not_evaluable"] == []


@pytest.mark.slow
def test_a_method_whose_criterion_fails_says_the_same_everywhere(tmp_path):
    run = pipeline.analyse(_failing_method(tmp_path), trials=None, advice=False)
    verdict = _same_everywhere(run, tmp_path / "out")
    assert verdict["status"] == "not shown fit"
    assert [i["what"] for i in verdict["not_met"]] == ["coefficient of determination r^2"]


def test_input_notes_and_defaults_from_memory_are_warnings(phosphate_linear):
    record = phosphate_linear.typed_record
    verdict = _verdict(record, validation=_quiet(record.validation),
                       defaults_applied=("a default of this tool", "a register value, from memory"),
                       notes=("readings not used by the method: S9",))
    assert verdict.status == "fit with reservations"
    assert [(i.what, i.why) for i in verdict.warnings] == [
        ("default from memory", "a register value, from memory"),
        ("input note", "readings not used by the method: S9")]


# --------------------------------------------------------------------------
# an equilibrium study is judged on the criteria that apply to it

def test_a_study_whose_criteria_are_met_and_nothing_listed_is_fit(nickel_demo):
    record = nickel_demo.typed_record
    keys = [c.key for c in record.validation.criteria.criteria]
    assert "recovery_range" not in keys and "max_abs_en" not in keys  # no reference value for K
    validation = _quiet(dataclasses.replace(record.validation, runs=dataclasses.replace(
        record.validation.runs, significant=False)))
    mixtures = tuple(dataclasses.replace(m, saturation_flag=None) for m in record.equilibrium.mixtures)
    equilibrium = dataclasses.replace(record.equilibrium, mixtures=mixtures)
    results = tuple(dataclasses.replace(r, monte_carlo=dataclasses.replace(r.monte_carlo, agrees_with_gum=True))
                    for r in _unflagged(record.results))
    verdict = _verdict(record, results=results, validation=validation, equilibrium=equilibrium)
    assert (verdict.not_met, verdict.not_evaluable, verdict.warnings) == ((), (), ())
    assert verdict.status == "fit"


def test_a_criterion_a_study_cannot_evaluate_is_not_evaluable_only_when_set():
    from validate.validation.criteria import STUDY_CRITERIA, evaluate_criteria
    observed = {"r_squared": 0.9999, "recovery_percent": None}
    left_out = evaluate_criteria({}, observed, applicable=STUDY_CRITERIA)
    assert "recovery_range" not in [c.key for c in left_out.criteria]
    assert "Not applicable to this kind of method" in left_out.caution
    kept = evaluate_criteria({"recovery_range": [95, 105]}, observed, applicable=STUDY_CRITERIA)
    row = next(c for c in kept.criteria if c.key == "recovery_range")
    assert row.status == "not evaluable" and not row.is_default


# --------------------------------------------------------------------------
# the top-down route against the bottom-up budget

def test_a_reconciliation_that_disagrees_is_a_warning(phosphate_linear):
    record = phosphate_linear.typed_record
    routine = record.method_uncertainty
    assert routine is not None and routine.reconciliation.verdict == "agree"  # the demo's own: no warning
    quiet = _verdict(record, validation=_quiet(record.validation), method_uncertainty=routine)
    assert quiet.status == "fit"
    larger = dataclasses.replace(routine, reconciliation=dataclasses.replace(
        routine.reconciliation, verdict="top-down larger", p_value=0.003))
    verdict = _verdict(record, validation=_quiet(record.validation), method_uncertainty=larger)
    assert verdict.status == "fit with reservations"
    item = next(i for i in verdict.warnings if i.what.startswith("top-down against bottom-up, method"))
    assert item.why.startswith("top-down larger (F = ") and "p = 0.003" in item.why


def test_a_sample_whose_scatter_over_series_is_within_its_u_gives_no_warning(phosphate_linear):
    """The F test (NIST/SEMATECH e-Handbook 1.3.5.9, as validate.validation.method_uncertainty.reconcile):
    an intermediate relative SD equal to the relative u is no disagreement."""
    record = phosphate_linear.typed_record
    result = next(r for r in record.results if r.key.id == "reference_water")
    ip = record.validation.intermediate_precision["reference_water"]
    same = dataclasses.replace(ip, intermediate_rsd_percent=100 * result.standard_uncertainty / result.value)
    validation = dataclasses.replace(record.validation, intermediate_precision={"reference_water": same})
    assert not [i for i in _verdict(record, validation=validation).warnings if i.what.startswith("top-down")]
