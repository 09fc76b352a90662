"""The conditions of a conditional K: ionic strength, the activity effect on the correction of
the standards (Davies), the temperature (van 't Hoff), and what is not in U(K).

Sources beside each check; the demo copies are invented data.
"""

from __future__ import annotations

import math
import shutil

import pytest
from conftest import DEMOS
from uncertainties import ufloat

from validate.equilibrium.combine import davies_log10_gamma, debye_huckel_A
from validate.equilibrium.conditions import (
    conditions_block,
    davies_K_ratio,
    salt_ionic_strength,
    solution_ionic_strength,
)
from validate.equilibrium.study import build_ready_model
from validate.inputs.errors import InputError
from validate.inputs.method_file import load_method
from validate.metrology.equipment import TEMPERATURE
from validate.model.equilibrium import COMBINED, R_GAS

DEMO = DEMOS / "nickel_complex"


def _demo_copy(tmp_path, old: str = "", new: str = ""):
    folder = tmp_path / "study"
    shutil.copytree(DEMO, folder)
    method = folder / "method.toml"
    text = method.read_text()
    if old:
        assert old in text
        method.write_text(text.replace(old, new))
    return method


ENTHALPY = 'k_unit = "L/mol"\nreaction_enthalpy = { value = "-20 kJ/mol", u = "5 kJ/mol" }\n'


# ---------------------------------------------------------------- ionic strength


def test_ionic_strength_of_salts_by_hand():
    # I = 1/2 sum c z^2 (IUPAC definition): 0.1 mol/L NaCl gives 0.1; a 2:2 salt (NiSO4) 4c;
    # Na2SO4 3c per mol of salt, i.e. 1.5 per mol of Na+ (textbook values, from memory)
    assert salt_ionic_strength(0.1, 1, -1) == pytest.approx(0.1, rel=1e-15)
    assert salt_ionic_strength(0.01, 2, -2) == pytest.approx(0.04, rel=1e-15)
    assert salt_ionic_strength(0.2, 1, -2) == pytest.approx(0.3, rel=1e-15)  # 0.1 mol/L Na2SO4
    assert salt_ionic_strength(0.5, 0, 0) == 0.0  # a neutral reagent adds nothing
    # forming Ni2+ + L- -> NiL+ removes 1/2 (4 + 1 - 1) = 2 per mol of complex: [ML] zM zL
    i = solution_ionic_strength(0.01, 0.001, 0.001, (2, -1), (-2, 1), medium=0.1)
    assert i == pytest.approx(0.1 + 0.04 + 0.001 - 0.002, rel=1e-14)


def test_demo_standards_are_at_a_higher_ionic_strength_than_the_mixtures():
    # the demo's standards hold 0.04 mol/L NiSO4 in 0.10 mol/L medium: I = 0.1 + 4 x 0.0396 ~ 0.26 mol/L,
    # the mixtures about 0.10 (hand calculation from the invented demo's masses and volumes)
    model, _ = build_ready_model(load_method(DEMO / "method.toml"))
    c = conditions_block(model)
    for i in c["ionic_strength_standards"]:
        assert i == pytest.approx(0.1 + 4 * 6.571 * 0.99 / 262.85 / 0.25 * 10 / 25, rel=2e-3)
    assert all(0.1 < i < 0.105 for i in c["ionic_strength_points"][:4])  # the mixtures X1-X4
    assert "medium (0.1 mol/L)" in c["ionic_strength_basis"]


# ---------------------------------------------------------------- Davies


def test_debye_huckel_A_at_25_C():
    # A = 0.509 (L/mol)^(1/2) at 25 degC for water, the value commonly tabulated (from memory);
    # the first-principles value with CODATA constants and Malmberg-Maryott permittivity is 0.5116
    assert debye_huckel_A(25.0) == pytest.approx(0.509, rel=0.006)


def test_davies_ratio_by_hand():
    # Davies: log10 gamma = -A z^2 (sqrt(I)/(1 + sqrt(I)) - 0.3 I) (Davies 1962, from memory).
    # For Ni2+ + L- <=> NiL+, gamma_L = gamma_NiL (both |z| = 1), so
    # K(I1)/K(I2) = gamma_Ni(I1)/gamma_Ni(I2). Hand calculation with A = 0.509:
    # I = 0.26: 0.509902/1.509902 - 0.078 = 0.259705, x 4 x 0.509 -> log10 gamma = -0.528759
    # I = 0.10: 0.316228/1.316228 - 0.030 = 0.210253, x 4 x 0.509 -> log10 gamma = -0.428075
    assert davies_log10_gamma(2, 0.26, 0.509) == pytest.approx(-0.528759, abs=2e-6)
    assert davies_K_ratio(0.26, 0.10, (2, -1), 0.509) == pytest.approx(10 ** (-0.528759 + 0.428075), rel=1e-5)


def test_activity_effect_on_the_demo_correction_is_estimated_and_not_in_U():
    model, _ = build_ready_model(load_method(DEMO / "method.toml"))
    c = conditions_block(model)
    act = c["activity_effect_on_correction"]
    assert act["estimated"]
    # each standard's K is lower at 0.26 mol/L than at the points' ~0.11 (about 0.82 by Davies):
    # the standards are less complexed, the corrected slope higher, K lower
    assert all(0.75 < f < 0.9 for f in act["K_factors_of_standards"])
    assert -0.05 < act["relative_change_of_K"] < 0.0
    assert "NOT in U(K)" in act["note"] and "0.5 mol/L" in act["note"]
    assert any("Davies estimate" in s for s in c["not_in_U"])


def test_davies_is_refused_beyond_half_molar(tmp_path):
    # the Davies equation is used up to about I = 0.5 mol/L (common practice); beyond it no estimate
    method = _demo_copy(tmp_path, 'medium_ionic_strength = "0.10 mol/L"', 'medium_ionic_strength = "0.60 mol/L"')
    model, _ = build_ready_model(load_method(method))
    act = conditions_block(model)["activity_effect_on_correction"]
    assert not act["estimated"] and "beyond" in act["note"] and "relative_change_of_K" not in act


def test_without_counter_ions_the_record_says_what_is_not_computed(tmp_path):
    method = _demo_copy(tmp_path, "counter_ion_charges = [-2, 1]", "")
    model, _ = build_ready_model(load_method(method))
    c = conditions_block(model)
    assert c["ionic_strength_standards"] is None and "not computed" in c["ionic_strength_basis"]
    assert not c["activity_effect_on_correction"]["estimated"]
    assert any("not estimated" in s for s in c["not_in_U"])


# ---------------------------------------------------------------- van 't Hoff


def test_van_t_hoff_hand_calculation():
    # d ln K/dT = dH/(R T^2): |dH| = 20 kJ/mol at 298.15 K gives 20000/(8.3145 x 298.15^2) = 0.02706,
    # 2.7 % per K (hand calculation)
    assert 20e3 / (R_GAS * 298.15**2) == pytest.approx(0.027, rel=0.005)


def test_enthalpy_carries_the_laboratory_temperature_into_K(tmp_path):
    method = _demo_copy(tmp_path, 'k_unit = "L/mol"\n', ENTHALPY)
    model, _ = build_ready_model(load_method(method))
    plain, _ = build_ready_model(load_method(DEMO / "method.toml"))
    # the factor common to every point stays out of the GLS weights (a common multiplicative error
    # would pull a GLS mean low: Peelle's pertinent puzzle, from memory), so the weights are the same
    assert model.weights == pytest.approx(plain.weights, abs=1e-12)
    x = {n: ufloat(s.value, s.u, tag=n) for n, s in model.sources.items()}
    x_plain = {n: ufloat(s.value, s.u, tag=n) for n, s in plain.sources.items()}
    k = model.evaluate(x)[COMBINED]
    k_plain = plain.evaluate(x_plain)[COMBINED]
    assert k.nominal_value == pytest.approx(k_plain.nominal_value, rel=1e-12)  # no shift at dT = 0
    # the sensitivity to the one laboratory temperature grows by K dH_sign/(R T0^2): +2.7 % per K for
    # an exothermic 20 kJ/mol (K measured in a warmer laboratory is low and is raised)
    t_with = next(v for n, v in x.items() if n == TEMPERATURE)
    t_plain = next(v for n, v in x_plain.items() if n == TEMPERATURE)
    extra = k.derivatives[t_with] - k_plain.derivatives[t_plain]
    assert extra / k.nominal_value == pytest.approx(20e3 / (R_GAS * 298.15**2), rel=1e-6)
    assert k.std_dev > k_plain.std_dev
    # the enthalpy's own uncertainty acts at second order only (dT = 0 at the estimate)
    dh = next(v for n, v in x.items() if n == "reaction enthalpy")
    assert k.derivatives.get(dh, 0.0) == pytest.approx(0.0, abs=1e-12 * k.nominal_value)
    c = conditions_block(model)["temperature_effect"]
    assert c["in_U"] and c["relative_change_per_K"] == pytest.approx(-0.02706, rel=1e-3)


def test_monte_carlo_sees_the_temperature_term(tmp_path):
    # one trial at dT = +1 K: K is raised by exp(dH dT/(R T0 (T0 + dT))) for dH = -20 kJ/mol
    import numpy as np
    method = _demo_copy(tmp_path, 'k_unit = "L/mol"\n', ENTHALPY)
    model, _ = build_ready_model(load_method(method))
    x = {n: np.full(2, s.value) for n, s in model.sources.items()}
    x[TEMPERATURE] = np.array([0.0, 1.0])
    factor = model.temperature_factor(x)
    assert factor[1] == pytest.approx(math.exp(20e3 / (R_GAS * 298.15 * 299.15)), rel=1e-12)
    assert factor[0] == 1.0


def test_without_enthalpy_the_record_says_temperature_is_not_in_U():
    model, _ = build_ready_model(load_method(DEMO / "method.toml"))
    c = conditions_block(model)
    assert not c["temperature_effect"]["in_U"]
    assert any("temperature" in s for s in c["not_in_U"])
    assert any("NOT in U(K)" in a and "reaction enthalpy" in a for a in model.assumptions)


@pytest.mark.parametrize("old,new,message", [
    ("counter_ion_charges = [-2, 1]", "counter_ion_charges = [2, 1]", "does not balance"),
    ('k_unit = "L/mol"\n', 'k_unit = "L/mol"\nreaction_enthalpy = "-20 kJ/mol"\n', "standard uncertainty"),
    ('k_unit = "L/mol"\n', 'k_unit = "L/mol"\nreaction_enthalpy = { value = "-20 kcal", u = "1 kJ/mol" }\n',
     "energy per mole"),
    ('medium_ionic_strength = "0.10 mol/L"', 'medium_ionic_strength = "40 mol/L"', "aqueous"),
])
def test_bad_condition_keys_are_clear_errors(tmp_path, old, new, message):
    with pytest.raises(InputError, match=message):
        load_method(_demo_copy(tmp_path, old, new))
