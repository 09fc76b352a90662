"""Detection limits, sensitivity, molar absorptivity and range flags.

The small calibration below is invented; every expected value is worked by hand
in the comments from the ICH Q2(R1) and ISO 11843-2 formulas, with the Student t
quantile taken from a printed table (t_0.95(3) = 2.353, NIST/SEMATECH
e-Handbook table 1.3.6.7.2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from uncertainties import ufloat

from validate.model.line import fit_line
from validate.validation.limits import (
    detection_limits,
    exact_delta,
    iso11843_2,
    molar_absorptivity,
    range_flags,
    sensitivity,
)

# x = 0, 1, 2, 3, 4 (I = 5 standards, J = 1), y as below.
X = [0.0, 1.0, 2.0, 3.0, 4.0]
Y = [0.01, 0.10, 0.21, 0.29, 0.41]
# By hand: xbar = 2, Sxx = 10, ybar = 0.204, Sxy = 0.990 -> b = 0.099, a = 0.006.
# Fitted 0.006, 0.105, 0.204, 0.303, 0.402; residuals 0.004, -0.005, 0.006, -0.013, 0.008;
# RSS = 310e-6, s^2 = 310e-6/3, s = 0.0101653.
S = math.sqrt(310e-6 / 3)


def test_hand_checked_fit():
    fit = fit_line(X, Y)
    assert fit.slope == pytest.approx(0.099, rel=1e-12)
    assert fit.intercept == pytest.approx(0.006, rel=1e-9)
    assert fit.residual_sd == pytest.approx(S, rel=1e-12)


def test_ich_routes_by_hand():
    # ICH Q2(R1) 6.3 / 7.3: LOD = 3.3 sigma/S, LOQ = 10 sigma/S.
    lim = detection_limits(fit_line(X, Y), blanks=[0.010, 0.012, 0.008, 0.011, 0.009])
    res = lim.route("ich_residual_sd")
    # sigma = s = 0.0101653: LOD = 3.3 * 0.0101653 / 0.099 = 0.338843; LOQ = 1.026798
    assert res.lod == pytest.approx(3.3 * S / 0.099, rel=1e-10)
    assert res.lod == pytest.approx(0.338843, abs=2e-6)
    assert res.loq == pytest.approx(1.026798, abs=2e-6)
    # sigma = u(a) = s sqrt(1/5 + 2^2/10) = s sqrt(0.6) = 0.0078740: LOD = 0.262467
    assert lim.route("ich_intercept_sd").lod == pytest.approx(0.262467, abs=2e-6)
    # blanks: mean 0.010, deviations 0, 2, -2, 1, -1 (x 1e-3) -> SD = sqrt(10e-6/4) = 0.00158114;
    # LOD = 3.3 * 0.00158114 / 0.099 = 0.0527046
    assert lim.route("ich_blank_sd").lod == pytest.approx(0.0527046, abs=2e-7)
    assert lim.route("ich_blank_sd").sigma_dof == 4
    assert lim.declared_route == "ich_residual_sd" and lim.lod == res.lod


def test_iso11843_2_by_hand():
    # ISO 11843-2, constant SD, K = 1: x_C = t_0.95(3) (s/b) sqrt(1/K + 1/(IJ) + xbar^2/Sxx)
    # = 2.353 * (0.0101653/0.099) * sqrt(1 + 0.2 + 0.4) = 2.353 * 0.102680 * 1.264911 = 0.30561
    # x_D = 2 t_0.95(3) (s/b) sqrt(...) = 0.61122 (alpha = beta, delta ~ 2 t).
    iso = iso11843_2(fit_line(X, Y))
    assert iso.critical_value == pytest.approx(0.30561, rel=2e-4)  # table t has 4 digits
    assert iso.minimum_detectable_value == pytest.approx(0.61122, rel=2e-4)
    assert iso.minimum_detectable_value == pytest.approx(2 * iso.critical_value, rel=1e-12)
    # K = 3 sample replicates: sqrt(1/3 + 0.2 + 0.4) = 0.966092 -> x_C = 0.23342
    assert iso11843_2(fit_line(X, Y), sample_replicates=3).critical_value == pytest.approx(
        0.23342, rel=2e-4)


def test_exact_delta_by_simulation():
    # Independent check of the noncentral-t delta: simulate T' = (Z + delta)/sqrt(chi2_nu/nu)
    # and count how often it stays below t_{1-alpha}(nu); that fraction must be beta.
    from scipy import stats
    nu, alpha, beta = 3, 0.05, 0.05
    delta = exact_delta(nu, alpha, beta)
    rng = np.random.default_rng(1)
    n = 400_000
    t_prime = (rng.standard_normal(n) + delta) / np.sqrt(rng.chisquare(nu, n) / nu)
    frac = np.mean(t_prime <= stats.t.ppf(1 - alpha, nu))
    assert frac == pytest.approx(beta, abs=4 * math.sqrt(beta * (1 - beta) / n))
    # for large nu delta tends to z_0.95 + z_0.95 = 3.2897 (normal table)
    assert exact_delta(10_000, 0.05, 0.05) == pytest.approx(3.2897, abs=2e-3)


def test_warnings_and_route_errors():
    fit = fit_line(X, Y)
    lim = detection_limits(fit, blanks=[0.010, 0.012, 0.008, 0.011, 0.009])
    assert lim.warnings and "factor of two" in lim.warnings[0]
    with pytest.raises(ValueError, match="needs blank readings"):
        detection_limits(fit, declared="ich_blank_sd")
    with pytest.raises(ValueError, match="unknown detection-limit route"):
        detection_limits(fit, declared="three_sigma")
    assert detection_limits(fit).route("ich_blank_sd") is None


def test_weighted_fit_limits_use_the_ordinary_line():
    w = [4.0, 2.0, 1.0, 0.5, 0.25]
    lim = detection_limits(fit_line(X, Y, w))
    assert lim.lod == pytest.approx(3.3 * S / 0.099, rel=1e-10)
    assert lim.notes and "unweighted" in lim.notes[0]


def test_sensitivity_and_molar_absorptivity_against_uncertainties_package():
    # Independent propagation with the `uncertainties` package (first-order GUM law).
    fit = fit_line(X, Y)
    sens = sensitivity(fit)
    assert sens.slope == fit.slope and sens.standard_uncertainty == fit.slope_u
    # u(b) = s / sqrt(Sxx) = 0.0101653 / sqrt(10) = 0.00321455
    assert sens.standard_uncertainty == pytest.approx(0.00321455, abs=1e-8)
    eps = molar_absorptivity(fit, 1.000, 0.005)
    ref = ufloat(fit.slope, fit.slope_u) / ufloat(1.000, 0.005)
    assert eps.value == pytest.approx(ref.nominal_value, rel=1e-12)
    assert eps.standard_uncertainty == pytest.approx(ref.std_dev, rel=1e-12)
    # Welch-Satterthwaite (GUM G.4.1) with the path length at infinite dof
    rel_b = fit.slope_u / fit.slope
    assert eps.effective_dof == pytest.approx(eps.relative_standard_uncertainty**4 / (rel_b**4 / 3))
    eps2 = molar_absorptivity(fit, 0.5)
    assert eps2.value == pytest.approx(2 * fit.slope) and eps2.effective_dof == pytest.approx(3)
    with pytest.raises(ValueError, match="path length"):
        molar_absorptivity(fit, 0.0)


def test_range_flags():
    assert range_flags(0.5, 0.2, 10.0, loq=1.0, lod=0.3) == ["below LOQ"]
    assert range_flags(0.1, 0.2, 10.0, loq=1.0, lod=0.3) == [
        "below LOD", "below the lowest standard (extrapolated)"]
    assert range_flags(12.0, 0.2, 10.0, loq=1.0, lod=0.3) == [
        "above the highest standard (extrapolated)"]
    assert range_flags(5.0, 0.2, 10.0, loq=1.0, lod=0.3) == []
    assert range_flags(5.0, 0.2, 10.0) == []


@given(st.floats(0.01, 100.0), st.floats(0.01, 100.0))
@settings(max_examples=50, deadline=None)
def test_limits_scale_with_units(cy, cx):
    # LOD = 3.3 s/b: rescaling the response leaves it unchanged (s and b scale alike);
    # rescaling concentration scales it by the same factor (b scales inversely).
    base = detection_limits(fit_line(X, Y))
    ys = detection_limits(fit_line(X, np.asarray(Y) * cy))
    xs = detection_limits(fit_line(np.asarray(X) * cx, Y))
    for name in ("ich_residual_sd", "ich_intercept_sd", "iso11843_2"):
        assert ys.route(name).lod == pytest.approx(base.route(name).lod, rel=1e-9)
        assert xs.route(name).lod == pytest.approx(cx * base.route(name).lod, rel=1e-9)


def test_samples_read_fewer_times_than_the_points_use_their_own_response_sd():
    # The line's points are preparation means of 3 readings; a sample read once has the response
    # SD sqrt(u_p^2 + s_r^2/m0) (one-way random model, Searle et al. 1992, from memory), which ICH
    # Q2(R1) 6.3 (sigma: SD of the response) and ISO 11843-2 5.3 (the sample term 1/K on the SD of
    # one measurement) then use (the rule recalled from memory). By hand, invented numbers:
    # s_r = 0.012, u_p = 0.004, m0 = 1: sigma^2 = 16e-6 + 144e-6 = 160e-6, sigma = 0.0126491,
    # LOD = 3.3 sigma / b = 3.3 * 0.0126491 / 0.099 = 0.421637.
    from validate.validation.limits import SampleReadings

    fit = fit_line(X, Y)
    once = SampleReadings(count=1, reading_sd=0.012, preparation_sd=0.004, points_count=3.0)
    lim = detection_limits(fit, sample=once)
    assert lim.route("ich_residual_sd").sigma == pytest.approx(math.sqrt(160e-6), rel=1e-12)
    assert lim.route("ich_residual_sd").lod == pytest.approx(0.421637, abs=2e-6)
    assert any("sqrt(u_p^2 + s_r^2/m0)" in n for n in lim.notes)
    # ISO 11843-2: x_C b / t_0.95(3) = sqrt(sigma^2 + s^2 (1/n + xbar^2/Sxx)) = sqrt(160e-6 + s^2 0.6);
    # t_0.95(3) = 2.353 (NIST/SEMATECH table 1.3.6.7.2)
    expected = 2.353 * math.sqrt(160e-6 + S**2 * 0.6) / 0.099
    assert lim.iso11843.critical_value == pytest.approx(expected, rel=2e-4)
    # read as often as the points (or more): the residual SD of the points stands, nothing changes
    plain = detection_limits(fit)
    for m0 in (3, 6):
        same = detection_limits(fit, sample=SampleReadings(m0, 0.012, 0.004, 3.0))
        assert same.lod == plain.lod and same.iso11843.critical_value == plain.iso11843.critical_value
        assert same.notes == plain.notes


def test_a_method_whose_sample_is_read_once_gets_the_larger_sigma(tmp_path):
    # The rule above through a method file (invented demo): the standards' points are means of 3
    # readings; with one sample read once the residual route's sigma is sqrt(u_p^2 + s_r^2/1) of
    # the line's own components (ICH Q2(R1) 6.3, ISO 11843-2 5.3, from memory).
    from conftest import copy_demo, edit_text

    from validate.workflow import pipeline

    folder = copy_demo(tmp_path)
    for reading in ("river_upstream,0.1332,day 1\n", "river_upstream,0.1304,day 1\n"):
        edit_text(folder, reading, "", name="readings.csv", count=1)
    run = pipeline.analyse(folder / "method.toml", trials=None, advice=False)
    sc = run.model.design.scatter_components()
    route = next(r for r in run.record["validation"]["limits"]["routes"] if r["route"] == "ich_residual_sd")
    expected = max(math.sqrt(sc.preparation_sd**2 + sc.reading_sd**2), sc.means_sd)
    assert route["sigma"] == pytest.approx(expected, rel=1e-12) and expected > sc.means_sd
    assert "read 1 time(s)" in route["note"]
