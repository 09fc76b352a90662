"""The photometer's effects through a calibrated method: an offset and a gain shared by every
reading cancel through the calibration line, a drift between the standards and the samples and
stray light do not (docs/design.md, "Photometry"). Checked on both engines (the linear engine's
sensitivities, and the model run on arrays of trials as the Monte Carlo engine runs it) and by
hand: a straight line refitted with numpy (an independent least-squares code) from the readings
as the photometer would give them.

Stray light: A_read = -log10((10^-A + s) / (1 + s)) (the usual model of a stray-light ratio s;
e.g. Skoog, Holler and Crouch, Principles of Instrumental Analysis, from memory). Stray light only
adds light, so s lies in [0, s_max]: rectangular R(0, s_max), estimate s_max/2, u = s_max/sqrt(12)
(GUM 4.3.7; JCGM 101 6.4.2.1), the result corrected at the estimate (GUM 3.2.4).
The method below is invented for the test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from validate.inputs.method_file import load_method
from validate.model.assay import build_model
from validate.model.photometry import read_after_standards, true_absorbance
from validate.propagation.distributions import draw_many
from validate.propagation.linear import propagate
from validate.propagation.montecarlo import evaluate_trials

S_MAX = 0.0005  # the method's stated stray-light ratio, 0.05 %

STANDARDS = {"S1": 1.0, "S2": 2.0, "S3": 3.0, "S4": 4.0, "S5": 5.0}  # mL of stock into 50 mL
READINGS = {"blank": 0.002, "S1": 0.301, "S2": 0.598, "S3": 0.905, "S4": 1.198, "S5": 1.497,
            "low": 0.452, "high": 1.351}
STOCK = 100.0  # mg/L

METHOD = """
[method]
title = "photometer effects (invented test method)"
[settings]
temperature_range = "1 K"
[equipment.flask]
kind = "volumetric flask"
nominal = "50 mL"
tolerance = "0.05 mL"
[equipment.burette]
kind = "burette"
nominal = "10 mL"
tolerance = "0.02 mL"
[equipment.cell]
kind = "cuvette"
path = "10 mm"
tolerance = "0.01 mm"
[equipment.photometer]
kind = "photometer"
offset = "0.004"
noise = "0.001"
gain = "1 %"
drift = "0.003"
stray_light = "0.05 %"
[solutions.stock]
made_by = "certificate"
concentration = { value = "100 mg/L", u = "0.2 mg/L" }
[solutions.blank]
made_by = "blank"
""" + "".join(f"""
[solutions.{sid}]
made_by = "dilution"
from = "stock"
aliquot = {{ item = "burette", volume = "{ml} mL" }}
flask = "flask"
""" for sid, ml in STANDARDS.items()) + """
[calibration]
standards = ["S1", "S2", "S3", "S4", "S5"]
blanks = ["blank"]
readings = "readings.csv"
cuvette = "cell"
photometer = "photometer"
concentration_unit = "mg/L"
[samples.low]
[samples.high]
[result]
name = "analyte"
unit = "mg/L"
formula = "c_measured"
"""


def _built(folder, text: str):
    (folder / "method.toml").write_text(text, encoding="utf-8")
    (folder / "readings.csv").write_text("id,absorbance\n" + "".join(f"{k},{v}\n" for k, v in READINGS.items()),
                                         encoding="utf-8")
    model = build_model(load_method(folder / "method.toml"))
    return model, {r.name: r for r in propagate(model)}


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    return _built(tmp_path_factory.mktemp("photometer"), METHOD)


@pytest.fixture(scope="module")
def setup_linear(tmp_path_factory):
    """The same method without stray light: the response is straight, so offset and gain cancel
    exactly (with stray light corrected at s_max/2 the bend leaves a second-order remainder)."""
    return _built(tmp_path_factory.mktemp("photometer_linear"), METHOD.replace('stray_light = "0.05 %"\n', ""))


def _by_hand(stray: float = 0.0, drift: float = 0.0, offset: float = 0.0, gain: float = 0.0) -> dict[str, float]:
    """Concentrations of the two samples from a numpy line through the readings corrected as the
    model corrects them: (A_read - offset - drift on samples) / (1 + gain), then stray light undone."""
    def corrected(ident: str) -> float:
        a = READINGS[ident] - offset - (drift if ident in ("low", "high") else 0.0)
        a = a / (1.0 + gain)
        return -math.log10((1.0 + stray) * 10.0 ** (-a) - stray)
    ids = ["blank", *STANDARDS]
    xs = [0.0] + [STOCK * ml / 50.0 for ml in STANDARDS.values()]
    slope, intercept = np.polyfit(xs, [corrected(i) for i in ids], 1)
    return {s: (corrected(s) - intercept) / slope for s in ("low", "high")}


def _contribution(result, name: str) -> float:
    return next(c.contribution for c in result.contributions if c.source == name)


def test_offset_and_gain_cancel_through_the_line_on_the_linear_engine(setup, setup_linear):
    for (_, results), tolerance in ((setup_linear, 1e-9), (setup, 1e-3)):
        for label in ("analyte, low", "analyte, high"):
            r = results[label]
            for name in ("photometer: photometric offset", "photometer: photometric gain"):
                assert abs(_contribution(r, name)) < tolerance * r.standard_uncertainty, (label, name)
    # by hand: a large offset and gain leave both samples where they were (exact for a refitted line)
    base, moved = _by_hand(), _by_hand(offset=0.05, gain=0.1)
    for s in base:
        assert moved[s] == pytest.approx(base[s], rel=1e-12)


def test_drift_and_stray_light_do_not_cancel_and_match_a_hand_calculation(setup):
    model, results = setup
    s0 = S_MAX / 2  # the estimate of the stray-light ratio: the midpoint of [0, s_max]
    base = _by_hand(stray=s0)
    u_drift = 0.003 / math.sqrt(3)
    u_stray = S_MAX / math.sqrt(12)  # R(0, s_max), GUM 4.3.7
    h = 1e-7
    for sample in ("low", "high"):
        r = results[f"analyte, {sample}"]
        assert r.value == pytest.approx(base[sample], rel=1e-9)  # corrected at s_max/2
        # drift acts on the samples only: dc = -u_d / slope (slope of the line in absorbance per mg/L)
        drift_by_hand = (_by_hand(stray=s0, drift=h)[sample] - base[sample]) / h * u_drift
        assert _contribution(r, "photometer: drift since the standards") == pytest.approx(drift_by_hand, rel=1e-5)
        assert abs(drift_by_hand) > 0.05 * r.standard_uncertainty  # not negligible here
        stray_by_hand = (_by_hand(stray=s0 + h)[sample] - base[sample]) / h * u_stray
        assert _contribution(r, "photometer: stray light") == pytest.approx(stray_by_hand, rel=1e-4)
        assert abs(stray_by_hand) > 2e-5 * abs(base[sample])  # 0.05 % bends the line: small, not zero
    # stray light is a curvature: it pulls the two samples in opposite directions about the line's centre
    low, high = (_contribution(results[f"analyte, {s}"], "photometer: stray light") for s in ("low", "high"))
    assert low * high < 0


def _on_arrays(model, varied: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The model run on arrays of trials, as the Monte Carlo engine runs it: the named sources
    drawn, every other source at its estimate."""
    x = model.nominal_inputs()
    x.update(varied)
    return model.evaluate(x)


def test_offset_and_gain_cancel_and_drift_and_stray_light_do_not_on_arrays_of_trials(setup, setup_linear):
    model, results = setup
    rng = np.random.default_rng(3)
    n = 20_000
    offset_and_gain = {"photometer: photometric offset": rng.uniform(-0.004, 0.004, n),
                       "photometer: photometric gain": rng.uniform(-0.01, 0.01, n)}
    for (m, r), tolerance in ((setup_linear, 1e-9), (setup, 1e-5)):
        for label, values in _on_arrays(m, offset_and_gain).items():
            assert np.std(values) < tolerance * r[label].value, label
    remain = _on_arrays(model, {"photometer: drift since the standards": rng.uniform(-0.003, 0.003, n)})
    for label, values in remain.items():
        expected = abs(_contribution(results[label], "photometer: drift since the standards"))
        assert np.std(values) == pytest.approx(expected, rel=0.03), label  # 20 000 trials: about 1 % noise
    stray = _on_arrays(model, {"photometer: stray light": rng.uniform(0.0, S_MAX, n)})
    for label, values in stray.items():
        expected = abs(_contribution(results[label], "photometer: stray light"))
        assert np.std(values) == pytest.approx(expected, rel=0.03), label


def test_stray_light_formula_inverts_the_observed_absorbance():
    # a true absorbance of 2 read with 0.1 % stray light: T = 0.01, A_read = -log10(0.011/1.001)
    a_read = -math.log10((0.01 + 0.001) / 1.001)
    assert a_read == pytest.approx(1.9590, abs=1e-4)  # about 0.04 AU low at A = 2 (by hand)
    assert true_absorbance(a_read, 0.001) == pytest.approx(2.0, abs=1e-12)
    assert true_absorbance(0.8, 0.0) == pytest.approx(0.8, abs=1e-15)


def test_stray_light_is_one_sided_and_the_correction_raises_the_reading():
    # stray light adds light at the detector: a true transmittance T = 0.01 (A = 2) read with
    # s = 0.001 gives A_obs = -log10((T + s)/(1 + s)) = -log10(0.011/1.001) = 1.95904 (by hand),
    # low; the correction undoes it and so raises every reading, more at higher absorbance
    a_obs = -math.log10((0.01 + 0.001) / (1.0 + 0.001))
    assert a_obs == pytest.approx(1.95904, abs=1e-5)
    assert true_absorbance(a_obs, 0.001) == pytest.approx(2.0, abs=1e-12)
    assert true_absorbance(0.3, 0.001) > 0.3
    assert true_absorbance(1.5, 0.001) - 1.5 > true_absorbance(0.3, 0.001) - 0.3


def test_stray_light_source_is_the_rectangle_from_zero_to_the_stated_ratio(setup):
    model, _ = setup
    source = model.sources["photometer: stray light"]
    assert source.value == pytest.approx(S_MAX / 2, rel=1e-12)  # GUM 4.3.7: midpoint of [a-, a+]
    assert source.u == pytest.approx(S_MAX / math.sqrt(12), rel=1e-12)  # (a+ - a-)^2 / 12
    assert source.distribution == "rectangular"
    draws = draw_many([source], 50_000, np.random.default_rng(5))[source.name]
    assert draws.min() >= 0.0 and draws.max() <= S_MAX  # never negative: stray light only adds light
    assert draws.mean() == pytest.approx(S_MAX / 2, rel=0.01)


def test_both_engines_agree_on_stray_light(setup):
    # the Monte Carlo engine with only stray light drawn (every other source held at its estimate)
    # against the GUM engine's stray-light contribution and estimate
    model, results = setup
    hold = frozenset(name for name in model.sources if name != "photometer: stray light")
    trials = evaluate_trials(model, 40_000, np.random.default_rng(11), hold=hold)
    for sample in ("low", "high"):
        label = f"analyte, {sample}"
        gum_u = abs(_contribution(results[label], "photometer: stray light"))
        assert np.std(trials[label]) == pytest.approx(gum_u, rel=0.03)  # 40 000 trials: about 0.4 % noise
        # the response is nearly linear in s over [0, s_max]: the means agree to a small part of u
        assert abs(np.mean(trials[label]) - results[label].value) < 0.05 * gum_u


def test_drift_acts_on_the_solutions_read_after_the_standards(nickel_demo):
    method = nickel_demo.model.method
    assert not read_after_standards(method, "E1")  # a standard of the study
    assert read_after_standards(method, "X1") and read_after_standards(method, "T.3")


def test_drift_from_a_check_standard_read_before_and_after(tmp_path):
    text = METHOD.replace('drift = "0.003"', 'drift = { before = "0.512", after = "0.515" }')
    (tmp_path / "method.toml").write_text(text, encoding="utf-8")
    (tmp_path / "readings.csv").write_text("id,absorbance\n" + "".join(f"{k},{v}\n" for k, v in READINGS.items()),
                                           encoding="utf-8")
    photometer = load_method(tmp_path / "method.toml").items["photometer"]
    assert photometer.drift == pytest.approx(0.003)
    assert "check standard" in photometer.drift_basis
