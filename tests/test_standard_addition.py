"""Standard addition ([additions]): the extrapolated concentration and its uncertainty, the
matrix-effect test, and bad input.

Sources: Miller and Miller, Statistics and Chemometrics for Analytical Chemistry, section 5.8,
the worked example of silver in photographic waste by atomic absorption (from memory); JCGM 101
clause 8 for comparing the two engines; the property that exact data give the concentration exactly.
"""

from __future__ import annotations

import dataclasses
import math
import tempfile
from pathlib import Path

import numpy as np
import pytest
from conftest import DEMOS
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from validate import cli
from validate.inputs.method_file import load_method
from validate.model.addition import AdditionModel
from validate.model.build import build
from validate.model.keys import ResultKey
from validate.model.line import fit_line
from validate.propagation.linear import propagate
from validate.propagation.montecarlo import propagate_mc
from validate.validation.matrix_effect import addition_blocks, extrapolation_u, matrix_effect

# Miller and Miller, section 5.8 (from memory): silver added 0 to 30 (µg/mL) and the absorbances read;
# printed: x_E = 17.3 µg/mL, s_xE = 0.749 µg/mL
MILLER_ADDED = [0, 5, 10, 15, 20, 25, 30]
MILLER_ABSORBANCE = [0.32, 0.41, 0.52, 0.60, 0.70, 0.77, 0.89]

STOCK_MG_L = 250.0  # the standard; 1 mL in 50 mL adds 5 mg/L
PORTION_ML, FLASK_ML = 20.0, 50.0


def method_text(spikes: list[float], portion: str = "pipette_20", flask: str = "flask_50") -> str:
    volumes = ", ".join(f'"{v:.6g} mL"' for v in spikes)
    return f"""
[method]
title = "standard addition test (invented)"
[settings]
scatter = "observed"
[equipment.flask_50]
kind = "volumetric flask"
nominal = "50 mL"
class = "A"
[equipment.flask_25]
kind = "volumetric flask"
nominal = "25 mL"
class = "A"
[equipment.pipette_20]
kind = "one-mark pipette"
nominal = "20 mL"
class = "A"
[equipment.burette_25]
kind = "burette"
nominal = "25 mL"
class = "A"
[solutions.stock]
made_by = "certificate"
[solutions.stock.concentration]
value = "{STOCK_MG_L} mg/L"
expanded_uncertainty = "0.5 mg/L"
coverage_factor = 2
provenance = "invented"
[solutions.S1]
made_by = "dilution"
from = "stock"
aliquot = {{ item = "burette_25", volume = "1.00 mL" }}
flask = "flask_50"
[solutions.S2]
made_by = "dilution"
from = "stock"
aliquot = {{ item = "burette_25", volume = "3.00 mL" }}
flask = "flask_50"
[solutions.S3]
made_by = "dilution"
from = "stock"
aliquot = {{ item = "burette_25", volume = "6.00 mL" }}
flask = "flask_50"
[calibration]
standards = ["S1", "S2", "S3"]
blanks = []
readings = "readings.csv"
concentration_unit = "mg/L"
[samples.direct]
[quantities.V_sample]
item = "pipette_20"
[quantities.V_flask]
item = "flask_50"
[result]
name = "silver"
unit = "mg/L"
formula = "c_measured * V_flask / V_sample"
[additions.waste]
portion = "{portion}"
standard = "stock"
spike_item = "burette_25"
spike_volumes = [{volumes}]
made_up_to = "{flask}"
"""


def readings_text(flask_absorbances: list[float], slope_per_mg_l: float = 0.0186) -> str:
    rows = ["id,absorbance"]
    rows += [f"S{i},{slope_per_mg_l * c * 1.001:.12g}\nS{i},{slope_per_mg_l * c * 0.999:.12g}"
             for i, c in ((1, 5.0), (2, 15.0), (3, 30.0))]
    rows += [f"direct,{0.3:.12g}"]
    rows += [f"waste.{k},{a:.12g}" for k, a in enumerate(flask_absorbances, start=1)]
    return "\n".join(rows) + "\n"


MILLER_SPIKES = [c * FLASK_ML / STOCK_MG_L for c in MILLER_ADDED]  # 0 to 6 mL


def _addition_result(model, results):
    keys = dict(zip(model.result_labels, model.result_keys, strict=True))
    return next(r for r in results if keys[r.name] == ResultKey("standard addition", "waste"))


def test_extrapolation_formula_reproduces_the_textbook_example():
    fit = fit_line(MILLER_ADDED, MILLER_ABSORBANCE)
    # Miller and Miller 5.8 (from memory): 17.3 and 0.749, printed to three figures
    assert fit.intercept / fit.slope == pytest.approx(17.3, abs=0.05)
    assert extrapolation_u(fit) == pytest.approx(0.749, abs=0.0015)


def test_gum_engine_with_the_reading_scatter_alone_gives_the_textbook_uncertainty(write_method):
    """The standard-addition scatter terms of the GUM budget add up to s_x of Miller and Miller,
    scaled by flask / portion; the value is x_E scaled the same way."""
    path = write_method(method_text(MILLER_SPIKES), readings_text(MILLER_ABSORBANCE))
    model = build(load_method(path))
    assert isinstance(model, AdditionModel)
    result = _addition_result(model, propagate(model))
    dilution = FLASK_ML / PORTION_ML
    fit = fit_line(MILLER_ADDED, MILLER_ABSORBANCE)
    assert result.value == pytest.approx(fit.intercept / fit.slope * dilution, rel=1e-9)
    scatter = [c.contribution for c in result.contributions if c.source.startswith("standard-addition scatter")]
    assert len(scatter) == len(MILLER_ADDED)
    assert math.sqrt(sum(c * c for c in scatter)) == pytest.approx(extrapolation_u(fit) * dilution, rel=1e-6)
    # the items and the standard add to it: the combined u is larger
    assert result.standard_uncertainty > extrapolation_u(fit) * dilution


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(content=st.floats(0.5, 30.0), slope=st.floats(0.005, 0.05),
       spikes=st.lists(st.sampled_from([1.0, 2.0, 3.0, 4.0, 5.0, 6.0]), min_size=2, max_size=5, unique=True))
def test_exact_data_give_the_concentration_exactly(content, slope, spikes):
    """y_k = b (c_s V_p + c_std v_k) / V_f without noise: the extrapolation returns c_s."""
    volumes = [0.0, *sorted(spikes)]
    flask_abs = [slope * (content * PORTION_ML + STOCK_MG_L * v) / FLASK_ML for v in volumes]
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "method.toml"
        path.write_text(method_text(volumes), encoding="utf-8")
        (Path(folder) / "readings.csv").write_text(readings_text(flask_abs, slope), encoding="utf-8")
        model = build(load_method(path))
        value = model.evaluate(model.nominal_inputs())["waste, by standard addition"]
        assert value == pytest.approx(content, rel=1e-9)
        block = addition_blocks(model.method, model)[0]
        assert block["matrix_effect"]["recovery_percent"] == pytest.approx(100.0, rel=1e-6)


def test_matrix_effect_test_on_two_slopes():
    """Welch's t of two slopes: equal slopes give t = 0 and recovery 100 %; a slope 15 % lower
    with small standard errors is a significant matrix effect (recovery interval below 100 %)."""
    x = [0.0, 1.0, 2.0, 3.0, 4.0]
    noise = np.array([0.001, -0.002, 0.0015, -0.0005, 0.0])
    external = fit_line(x, 0.2 * np.array(x) + noise)
    same = matrix_effect(fit_line(x, 0.1 + 0.2 * np.array(x) + noise), external)
    assert same["t"] == pytest.approx(0.0, abs=1e-9) and not same["significant"]
    assert same["recovery_percent"] == pytest.approx(100.0, rel=1e-9)
    lower = matrix_effect(fit_line(x, 0.1 + 0.17 * np.array(x) + noise), external)
    assert lower["significant"] and lower["recovery_high_percent"] < 100.0 < 100.0 / 0.85 * 0.9


def _engines(method):
    model = build(method)
    gum = propagate(model)
    mc = propagate_mc(model, gum, trials=20_000, seed=3, shares=False)
    keys = dict(zip(model.result_labels, model.result_keys, strict=True))
    pairs = [(g, m) for g, m in zip(gum, mc, strict=True) if keys[g.name].kind == "standard addition"]
    assert len(pairs) == 2
    return model, pairs


def test_both_engines_agree_on_the_demo_with_bottom_up_scatter():
    """With every input of infinite degrees of freedom (bottom-up: photometer noise per reading,
    glassware repeatability per use) the model is close to linear, so the Monte Carlo standard
    deviation and 95 % interval match the GUM's (JCGM 101 clause 8; tolerances: 20 000 trials)."""
    method = load_method(DEMOS / "effluent_iron" / "method.toml")
    method = dataclasses.replace(method, settings=dataclasses.replace(method.settings, scatter="bottom-up"))
    _, pairs = _engines(method)
    for g, m in pairs:
        assert m.summary.mean == pytest.approx(g.value, abs=0.02 * g.standard_uncertainty + 1e-3 * g.value)
        assert m.summary.standard_deviation == pytest.approx(g.standard_uncertainty, rel=0.03)
        half = (m.summary.symmetric.high - m.summary.symmetric.low) / 2
        assert half == pytest.approx(g.expanded_uncertainty, rel=0.05)


def test_both_engines_on_the_demo_as_filed():
    """Observed scatter: each line's residual SD with 3 or 4 degrees of freedom, one chi-square
    factor per line in Monte Carlo; the GUM's Welch-Satterthwaite k only approximates that, so the
    Monte Carlo interval is wider, within a third of U (why the record reports it; JCGM 101 clause 8)."""
    method = load_method(DEMOS / "effluent_iron" / "method.toml")
    model, pairs = _engines(method)
    for g, m in pairs:
        low, high = m.summary.symmetric.low, m.summary.symmetric.high
        assert low == pytest.approx(g.value - g.expanded_uncertainty, abs=g.expanded_uncertainty / 3)
        assert high == pytest.approx(g.value + g.expanded_uncertainty, abs=g.expanded_uncertainty / 3)
        assert high - low > 2 * g.expanded_uncertainty  # heavier tails of the t inputs
    blocks = {b["sample"]: b for b in addition_blocks(method, model)}
    assert blocks["effluent_A"]["matrix_effect"]["significant"]  # the invented demo's suppressed colour
    assert not blocks["effluent_B"]["matrix_effect"]["significant"]
    assert blocks["effluent_A"]["leverage"] > blocks["effluent_A"]["largest_level_leverage"]


@pytest.mark.parametrize("spikes, flask, what", [
    ([0.0, 1.0], "flask_50", "at least 3"),
    ([0.0, 1.0, 1.0, 0.0], "flask_50", "at least 3"),
    ([0.0, 0.0, 0.0], "flask_50", "no flask has an addition"),
    ([0.0, 2.0, 4.0, 6.0], "flask_25", "do not fit"),  # 20 mL portion + 6 mL in a 25 mL flask
])
def test_bad_additions_stop_with_an_input_error(write_method, capsys, spikes, flask, what):
    path = write_method(method_text(spikes, flask=flask), readings_text([0.3] * len(spikes)))
    assert cli.main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert what in err and "spike_volumes" in err and "Traceback" not in err


def test_a_blank_as_the_standard_or_no_volumes_is_refused(write_method, capsys):
    text = method_text(MILLER_SPIKES).replace('[solutions.S1]', '[solutions.water]\nmade_by = "blank"\n[solutions.S1]')
    path = write_method(text.replace('standard = "stock"', 'standard = "water"'), readings_text(MILLER_ABSORBANCE))
    assert cli.main(["check", str(path)]) == 2
    assert "is a blank" in capsys.readouterr().err
    path = write_method(method_text([]), readings_text([]))
    assert cli.main(["check", str(path)]) == 2
    assert "expected a list of volumes" in capsys.readouterr().err


def test_a_falling_line_stops_with_a_clear_message(write_method, capsys):
    path = write_method(method_text(MILLER_SPIKES), readings_text(list(reversed(MILLER_ABSORBANCE))))
    assert cli.main(["check", str(path)]) == 3
    assert "falls as standard is added" in capsys.readouterr().err


def test_additions_far_short_of_the_content_are_refused(write_method, capsys):
    """Additions reaching a third of the sample's own contribution: refused (common practice
    asks for about 1 to 3 times the content)."""
    spikes = [0.0, 0.2, 0.4, 0.6]  # up to 3 mg/L added; the sample gives 9 mg/L in the flask
    flask_abs = [0.0186 * (9.0 + STOCK_MG_L * v / FLASK_ML) for v in spikes]
    path = write_method(method_text(spikes), readings_text(flask_abs))
    assert cli.main(["check", str(path)]) == 3
    assert "less than half the sample's own" in capsys.readouterr().err


def test_missing_flask_readings_are_named(write_method, capsys):
    path = write_method(method_text(MILLER_SPIKES), readings_text(MILLER_ABSORBANCE[:-1]))
    assert cli.main(["check", str(path)]) == 2
    assert "waste.7" in capsys.readouterr().err


@pytest.mark.slow
def test_the_demo_runs_end_to_end_with_record_terminal_and_pdf(tmp_path):
    """The invented effluent demo: record (schema-checked on the way in), terminal lines and PDF."""
    from validate.record.types import Record
    from validate.report.terminal import run_lines
    from validate.workflow import pipeline as api

    run = api.analyse(DEMOS / "effluent_iron" / "method.toml", trials=5000, seed=2)
    paths = api.write_outputs(run, tmp_path / "record", pdf=True)
    record = Record.from_dict(run.record)
    entry = record.result(ResultKey("standard addition", "effluent_A"))
    assert entry.unit == "mg/L" and entry.expanded_uncertainty > 0
    assert record.standard_additions is not None and len(record.standard_additions) == 2
    text = "\n".join(getattr(line, "text", "") for line in run_lines(run.record, 5))
    assert "Standard addition effluent_A" in text and "recovery of sensitivity" in text
    assert any(p.name == "report.pdf" and p.stat().st_size > 0 for p in paths)


def test_the_starter_block_checks_when_uncommented(tmp_path, capsys):
    """The commented [additions] block of `validate init` is a valid section as written."""
    folder = tmp_path / "assay"
    assert cli.main(["init", str(folder)]) == 0
    method = folder / "method.toml"
    text = method.read_text(encoding="utf-8")
    start = text.index("# [additions.sample_2]")
    block = text[start:text.index("\n\n", start)]
    method.write_text(text.replace(block, "\n".join(line[2:] for line in block.splitlines())), encoding="utf-8")
    readings = folder / "readings.csv"
    flasks = "".join(f"sample_2.{k},{0.1 + 0.05 * k:.3f}\n" for k in range(1, 5))
    readings.write_text(readings.read_text(encoding="utf-8") + flasks, encoding="utf-8")
    assert cli.main(["check", str(method)]) == 0, capsys.readouterr().err
    assert len(load_method(method).additions) == 1
    capsys.readouterr()


def test_a_matrix_effect_and_a_short_extrapolation_are_verdict_warnings():
    """A significant slope difference (Welch t, as the block states it) and additions below the
    sample's own content each become a warning of the run's verdict, named by sample."""
    from validate.record.blocks_addition import AdditionBlock
    from validate.record.verdict_warnings import standard_additions

    def block(significant: bool, reaches: bool) -> AdditionBlock:
        effect = {"external_slope": 0.2, "external_slope_standard_uncertainty": 0.001, "external_dof": 8,
                  "t": -9.0 if significant else 0.1, "dof": 5.0, "critical_t": 2.57,
                  "p_value": 1e-4 if significant else 0.9, "alpha": 0.05, "recovery_percent": 86.0,
                  "recovery_standard_uncertainty_percent": 1.0, "recovery_low_percent": 84.0,
                  "recovery_high_percent": 88.0, "significant": significant, "verdict": "matrix effect"}
        return AdditionBlock.from_dict({
            "sample": "s", "description": "d", "concentration_unit": "mg/L", "result_unit": "mg/L", "levels": [],
            "slope": 0.17, "slope_standard_uncertainty": 0.001, "intercept": 0.1, "residual_standard_deviation": 0.002,
            "n": 4, "dof": 2, "extrapolated": 0.6, "extrapolated_standard_uncertainty": 0.01, "dilution_factor": 10,
            "sample_concentration": 6.0, "leverage": 1.2, "largest_level_leverage": 0.6,
            "reaches_sample_content": reaches, "matrix_effect": effect}, "standard_additions")

    assert standard_additions([block(False, True)]) == []
    whats = [i.what for i in standard_additions([block(True, False)])]
    assert whats == ["matrix effect, s", "standard addition, s"]


def test_no_matrix_effect_test_against_a_second_order_external_function():
    """A second-order external function has no single slope to compare the additions' slope with
    (its sensitivity b + 2cx changes along the range): the comparison is left out, never made
    against a straight line forced through curved standards."""
    from types import SimpleNamespace

    from validate.validation.matrix_effect import _external_fit

    curved = SimpleNamespace(design=SimpleNamespace(second_order=True))
    assert _external_fit(curved) is None
    assert _external_fit(SimpleNamespace(design=None)) is None
