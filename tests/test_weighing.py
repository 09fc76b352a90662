"""Masses by difference (docs/design.md, "Mass by difference"), and inputs taken as exact only
when the method file says so.

A mass by difference is gross minus tare: two balance readings, each with its own repeatability
and (by default) its own linearity deviation. EURACHEM/CITAC CG4 (3rd ed., 2012), Example A2,
standardising a sodium hydroxide solution against potassium hydrogen phthalate (from memory): the
balance's linearity, +/-0.15 mg from its calibration certificate, is taken as rectangular,
0.15/sqrt(3) = 0.09 mg, and "has to be counted twice, once for the tare and once for the gross
weight, because each is an independent observation and the linearity effects are not
correlated": u(m_KHP) = sqrt(2 x 0.09^2) = 0.13 mg (the weighing's repeatability goes into the
example's combined repeatability, so it is not a term of the mass there).
"""

from __future__ import annotations

import math

import pytest
from conftest import DEMOS, edit_text

from validate.inputs.method_file import load_method
from validate.model.build import build
from validate.propagation.linear import propagate
from validate.record.verdict_warnings import stated_exact

KHP = """
[method]
title = "KHP weighed by difference (after CG4 Example A2; invented flask)"
[settings]
temperature_range = "3 K"
[equipment.balance]
kind = "balance"
linearity = "0.15 mg"
repeatability = "0 mg"
provenance = "calibration certificate as in CG4 Example A2 (from memory)"
[equipment.flask]
kind = "volumetric flask"
nominal = "100 mL"
tolerance = "0.1 mL"
[solutions.khp]
made_by = "weighing"
mass = "388.8 mg"
balance = "balance"
WEIGHING
purity = { value = "100 %", half_width = "0.05 %" }
molar_mass = { value = "204.2212 g/mol", u = "0.0038 g/mol" }
flask = "flask"
[result]
name = "KHP"
unit = "mmol/L"
formula = "khp"
"""


def _mass_u(model, solution: str) -> float:
    """Standard uncertainty (kg) of a weighed mass from its sources (the quantity `SOLUTION: mass`)."""
    return math.sqrt(sum(s.u**2 for s in model.sources.values() if s.quantity == f"{solution}: mass"))


def _method(write_method, weighing: str = ""):
    return load_method(write_method(KHP.replace("WEIGHING", weighing)))


def test_a_mass_by_difference_counts_linearity_twice_as_in_cg4_example_a2(write_method):
    model = build(_method(write_method))
    u_mg = _mass_u(model, "khp") * 1e6
    assert u_mg == pytest.approx(math.sqrt(2) * 0.15 / math.sqrt(3), rel=1e-12)
    # CG4 A2 shows 0.13 mg, computed from 0.09 mg already rounded: sqrt(2 x 0.09^2) = 0.127
    assert round(u_mg, 2) == 0.12 and round(math.sqrt(2 * 0.09**2), 2) == 0.13
    names = sorted(s.name for s in model.sources.values() if s.quantity == "khp: mass")
    assert names == ["balance: linearity, gross (khp)", "balance: linearity, tare (khp)"]


def test_a_single_reading_counts_each_term_once(write_method):
    model = build(_method(write_method, 'weighing = "single reading"'))
    assert _mass_u(model, "khp") * 1e6 == pytest.approx(0.15 / math.sqrt(3), rel=1e-12)


def test_the_mass_term_reaches_the_result_by_hand(write_method):
    """c = m P / (M V): the mass's relative standard uncertainty passes one to one (GUM 5.1.6)."""
    model = build(_method(write_method))
    result = propagate(model)[0]
    mass_part = math.sqrt(sum(c.contribution**2 for c in result.contributions if "balance" in c.source))
    assert mass_part / result.value == pytest.approx(math.sqrt(2) * 0.15 / math.sqrt(3) / 388.8, rel=1e-6)


def test_the_demo_balance_by_hand():
    """Phosphate demo (invented): 68.05 mg on the typical 0.1 mg balance of the shipped register,
    linearity +/-0.2 mg, repeatability 0.1 mg per reading: u(m) = sqrt(2 (0.2/sqrt 3)^2 + 2 x 0.1^2)."""
    model = build(load_method(DEMOS / "phosphate_assay" / "method.toml"))
    by_hand = math.sqrt(2 * (0.2 / math.sqrt(3)) ** 2 + 2 * 0.1**2)
    assert _mass_u(model, "stock") * 1e6 == pytest.approx(by_hand, rel=1e-12)
    assert by_hand == pytest.approx(0.2160, abs=1e-4)


def test_independent_linearity_does_not_correlate_weighings_of_different_loads(tmp_path):
    """The nickel demo weighs 6.571 g and 78.08 mg on one balance: by default no source is shared
    between the two masses; with `linearity_correlation = "shared"` one linearity source is."""
    from conftest import copy_demo

    folder = copy_demo(tmp_path, DEMOS / "nickel_complex")
    model = build(load_method(folder / "method.toml"))
    nickel = {s.name for s in model.sources.values() if s.quantity == "nickel_stock: mass"}
    ligand = {s.name for s in model.sources.values() if s.quantity == "ligand_stock: mass"}
    assert len(nickel) == len(ligand) == 4 and not nickel & ligand
    shared = edit_text(folder, 'class = "analytical 0.1 mg"',
                       'class = "analytical 0.1 mg"\nlinearity_correlation = "shared"')
    model = build(load_method(shared))
    assert "balance: linearity" in model.sources
    assert model.sources["balance: linearity"].quantity == "balance: linearity"  # acts through both masses
    # shared: one linearity term per net mass, plus two repeatability readings
    assert sorted(s.name for s in model.sources.values() if s.name.startswith("balance: repeatability")) == sorted(
        f"balance: repeatability, {r} ({sol})" for sol in ("ligand_stock", "nickel_stock") for r in ("gross", "tare"))


def test_a_register_states_the_linearity_correlation(write_method, tmp_path):
    (tmp_path / "ours.toml").write_text("""
[register]
title = "our balance certificate (invented)"
[[item]]
kind = "balance"
class = "our balance"
linearity = "0.15 mg"
repeatability = "0.05 mg"
linearity_correlation = "shared"
""", encoding="utf-8")
    text = KHP.replace("WEIGHING", "").replace('[settings]', '[settings]\nregisters = ["ours.toml"]')
    text = text.replace('linearity = "0.15 mg"\nrepeatability = "0 mg"\n', 'class = "our balance"\n')
    text = text.replace('provenance = "calibration certificate as in CG4 Example A2 (from memory)"\n', "")
    method = load_method(write_method(text))
    assert method.items["balance"].linearity_correlation == "shared"


# ---- inputs taken as exact ----

def test_an_input_stated_exact_is_accepted_and_listed_among_the_defaults(demo_copy):
    path = edit_text(demo_copy, 'value = "30.973762 g/mol"\nu = "0.000002 g/mol"',
                     'value = "30.973762 g/mol"\nexact = true')
    method = load_method(path)
    assert method.quantities["M_P"].value.u == 0
    assert any("taken as exact: M_P in [quantities]" in d for d in method.defaults_shown)
    assert [item.what for item in stated_exact(method)] == ["M_P in [quantities]"]
    assert "M_P" not in build(method).sources  # exact: no source


def test_a_missing_purity_is_listed_as_exact(demo_copy):
    path = edit_text(demo_copy, 'purity = { value = "99.8 %", half_width = "0.2 %", provenance = '
                     '"supplier\'s certificate of analysis (invented)" }\n', "")
    method = load_method(path)
    assert any("purity of stock (no purity given: taken as 100 %" in d for d in method.defaults_shown)


def test_the_demos_take_nothing_as_exact_by_default():
    for demo in ("phosphate_assay", "nickel_complex"):
        method = load_method(DEMOS / demo / "method.toml")
        assert stated_exact(method) == []
        assert not any("taken as exact" in d for d in method.defaults_shown)
        assert any("weighed by difference" in d for d in method.defaults_shown)


def test_check_prints_the_exact_inputs_among_the_defaults(demo_copy, capsys):
    from validate import cli

    path = edit_text(demo_copy, 'value = "30.973762 g/mol"\nu = "0.000002 g/mol"',
                     'value = "30.973762 g/mol"\nexact = true')
    assert cli.main(["check", str(path)]) == 0
    shown = " ".join(capsys.readouterr().out.split())  # a terminal may wrap long lines
    assert "Defaults applied" in shown and "taken as exact: M_P in [quantities]" in shown


def test_the_record_lists_the_exact_inputs_in_its_defaults_and_verdict(demo_copy):
    from validate.workflow import pipeline

    path = edit_text(demo_copy, 'value = "30.973762 g/mol"\nu = "0.000002 g/mol"',
                     'value = "30.973762 g/mol"\nexact = true')
    record = pipeline.analyse(path, trials=0, advice=False).record
    assert any("taken as exact: M_P in [quantities]" in d for d in record["defaults_applied"])
    assert {"what": "M_P in [quantities]", "why": "stated as exact: no uncertainty enters the result"} \
        in record["verdict"]["warnings"]
