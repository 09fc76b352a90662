"""Tests of the 1:1 equilibrium arithmetic and the correction of the standards.

Sources named beside each check. Synthetic data below are generated from
chosen K, molar absorptivity and intercept with the 1:1 mass-action law
(IUPAC definition of a stability constant, K = [ML]/([M][L])); they test
that the code recovers what it was given, not laboratory results.
"""

from __future__ import annotations

import math
from decimal import Decimal, getcontext

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from uncertainties import correlation_matrix, covariance_matrix, ufloat

from validate.model.ice import (
    addition_series_totals,
    complex_concentration,
    complex_concentration_derivative,
    count_undefined,
    equilibrium_constant,
    excess_for_fraction,
    fraction_complexed,
    full_complexation_slope_bias,
)
from validate.model.standards import fit_joint, iterate_standards, line_by_sums

# ---------------------------------------------------------------- helpers


def exact_root(K: float, M0: float, L0: float) -> float:
    """Smaller root of x^2 - (M0+L0+1/K)x + M0 L0 by the textbook formula at 100 digits.

    Decimal(float) is exact, so only the final rounding limits the reference.
    """
    getcontext().prec = 100
    k, m, lig = Decimal(K), Decimal(M0), Decimal(L0)
    S = m + lig + 1 / k
    return float((S - (S * S - 4 * m * lig).sqrt()) / 2)


def naive_root(K, M0, L0):
    S = M0 + L0 + 1.0 / K
    return (S - math.sqrt(S * S - 4.0 * M0 * L0)) / 2.0


def absorbances(K, eps, a0, M, L):
    return [a0 + eps * complex_concentration(K, m, lig) for m, lig in zip(M, L, strict=True)]


def design(K, excess=30.0, eps_per_K=0.4, a0=0.02):
    """Standards with M in excess (K*M0 = `excess`) and mixtures around 1/K."""
    u = 1.0 / K
    eps = eps_per_K * K  # keeps absorbances near 0-1 for every K
    std_M, std_L = [excess * u] * 6, [i * 0.4 * u for i in range(6)]
    mix_M, mix_L = [0.5 * u, 1.0 * u, 2.0 * u, 4.0 * u], [u] * 4
    return (std_M, std_L, absorbances(K, eps, a0, std_M, std_L),
            mix_M, mix_L, absorbances(K, eps, a0, mix_M, mix_L), eps, a0)


concentration = st.floats(min_value=-9.0, max_value=0.0).map(lambda e: 10.0**e)
constant = st.floats(min_value=-3.0, max_value=12.0).map(lambda e: 10.0**e)

# ---------------------------------------------------------------- the quadratic


@settings(max_examples=300, deadline=None)
@given(constant, concentration, concentration)
def test_stable_root_keeps_full_relative_precision(K, M0, L0):
    # Numerical Recipes 3rd ed. 5.6: the root c/q loses no precision. Reference:
    # the same root in exact decimal arithmetic at 100 digits (Python decimal).
    ref = exact_root(K, M0, L0)
    assert abs(complex_concentration(K, M0, L0) - ref) <= 1e-14 * ref


def test_naive_root_cancels_where_stable_root_does_not():
    # One reagent 1e13 times the other: (S - sqrt(S^2 - 4ac))/2 subtracts nearly
    # equal numbers (Numerical Recipes 5.6); the reference is exact decimal arithmetic.
    K, M0, L0 = 1.0e3, 1.0e-1, 1.0e-14
    ref = exact_root(K, M0, L0)
    assert abs(naive_root(K, M0, L0) - ref) / ref > 1e-6
    assert abs(complex_concentration(K, M0, L0) - ref) / ref < 1e-15


@settings(max_examples=200, deadline=None)
@given(constant, concentration, concentration)
def test_root_obeys_mass_action_and_bounds(K, M0, L0):
    # Definition of K (IUPAC) and the mass balance: 0 < [ML] < min(M0, L0).
    x = complex_concentration(K, M0, L0)
    assert 0.0 < x <= min(M0, L0)
    free_M, free_L = M0 - x, L0 - x
    # Compare x = K [M][L] (no subtraction of nearly equal numbers on this side).
    assert x == pytest.approx(K * free_M * free_L, rel=1e-6) or min(free_M, free_L) < 1e-9 * x


def test_equilibrium_constant_inverts_complex_concentration():
    # ICE table (mass balance): K = [ML]/((M0-[ML])(L0-[ML])) returns the K put in.
    for K in (10.0, 1e3, 1e6):
        M0, L0 = 2.0 / K, 1.0 / K
        state = equilibrium_constant(complex_concentration(K, M0, L0), M0, L0)
        assert state.K == pytest.approx(K, rel=1e-12)
        assert state.undefined_trials == 0


def test_derivative_matches_linear_engine_and_finite_difference():
    # Implicit-function derivative dx/dK = x/(K^2 sqrt(D)) against a central
    # difference and against the derivative the uncertainties package builds.
    K, M0, L0 = 2.5e3, 7e-4, 3e-4
    h = K * 1e-6
    fd = (complex_concentration(K + h, M0, L0) - complex_concentration(K - h, M0, L0)) / (2 * h)
    d = complex_concentration_derivative(K, M0, L0)
    assert d == pytest.approx(fd, rel=1e-7)
    Ku = ufloat(K, 1.0)
    assert complex_concentration(Ku, M0, L0).derivatives[Ku] == pytest.approx(d, rel=1e-12)


def test_fraction_complexed_large_excess_closed_form():
    # L0 << M0: fraction of L bound = K M0/(1 + K M0) (mass action with [M] ~ M0).
    K, M0 = 500.0, 4e-3
    for L0 in (0.0, 1e-9, 4e-9):
        f = fraction_complexed(K, M0, L0)
        assert f == pytest.approx(K * M0 / (1 + K * M0), rel=1e-6)
    # Exact: fraction equals [ML]/L0 for any L0, and of="M" gives [ML]/M0.
    x = complex_concentration(K, M0, 3e-3)
    assert fraction_complexed(K, M0, 3e-3) == pytest.approx(x / 3e-3, rel=1e-12)
    assert fraction_complexed(K, M0, 3e-3, of="M") == pytest.approx(x / M0, rel=1e-12)
    assert full_complexation_slope_bias(K, M0) == pytest.approx(K * M0 / (1 + K * M0) - 1, rel=1e-12)
    assert fraction_complexed(K, excess_for_fraction(K, 0.99), 0.0) == pytest.approx(0.99, rel=1e-12)


# ---------------------------------------------------------------- backends


@settings(max_examples=50, deadline=None)
@given(constant, concentration, concentration)
def test_backends_agree_on_quadratic_and_ice(K, M0, L0):
    x_f = complex_concentration(K, M0, L0)
    x_u = complex_concentration(ufloat(K, 0.01 * K), ufloat(M0, 0.01 * M0), L0)
    x_a = complex_concentration(np.array([K, 2 * K]), np.array([M0, M0]), L0)
    assert x_u.nominal_value == pytest.approx(x_f, rel=1e-13)
    assert x_a[0] == pytest.approx(x_f, rel=1e-13)
    s_f = equilibrium_constant(0.5 * x_f, M0, L0)
    s_a = equilibrium_constant(np.array([0.5 * x_f]), M0, L0)
    assert s_a.K[0] == pytest.approx(s_f.K, rel=1e-13)


def test_backends_agree_on_iteration():
    data = design(1e4)
    columns = list(data[:6])
    f = iterate_standards(*columns)
    u = iterate_standards(*[[ufloat(v, 1e-3) for v in c] if i in (2, 5) else c
                            for i, c in enumerate(columns)])
    a = iterate_standards(*[[np.array([v, v + 1e-3]) for v in c] if i in (2, 5) else c
                            for i, c in enumerate(columns)])
    assert u.K.nominal_value == pytest.approx(f.K, rel=1e-12)
    assert a.K[0] == pytest.approx(f.K, rel=1e-12)
    assert a.slope[0] == pytest.approx(f.slope, rel=1e-12)
    assert f.converged and u.converged and a.converged


def test_linear_and_monte_carlo_engines_agree_for_small_noise():
    # For a nearly linear model the GUM law of propagation and a JCGM 101 Monte
    # Carlo give the same standard uncertainty (JCGM 101:2008, clause 8).
    std_M, std_L, std_A, mix_M, mix_L, mix_A, _, _ = design(1e3)
    sd, n = 5e-4, 40000
    rng = np.random.default_rng(20240611)
    lin = iterate_standards(std_M, std_L, [ufloat(a, sd) for a in std_A],
                            mix_M, mix_L, [ufloat(a, sd) for a in mix_A])
    mc = iterate_standards(std_M, std_L, [a + rng.normal(0, sd, n) for a in std_A],
                           mix_M, mix_L, [a + rng.normal(0, sd, n) for a in mix_A])
    assert mc.undefined_trials == 0 and mc.unconverged_trials == 0
    assert np.std(mc.K, ddof=1) == pytest.approx(lin.K.std_dev, rel=0.05)
    assert np.mean(mc.K) == pytest.approx(lin.K.nominal_value, rel=0.01)


def test_undefined_trials_are_counted_not_dropped():
    # A trial whose reading implies more complex than ligand gives negative free
    # L: docs/design.md, "Monte Carlo" asks for a count, the trial stays in the array.
    std_M, std_L, std_A, mix_M, mix_L, mix_A, eps, a0 = design(1e3)
    bad = a0 + eps * 1.5 * mix_L[0]  # [ML] = 1.5 L0, impossible
    mixA = [np.array([a, a, bad]) if i == 0 else np.array([a, a, a]) for i, a in enumerate(mix_A)]
    r = iterate_standards(std_M, std_L, std_A, mix_M, mix_L, mixA)
    assert r.K.shape == (3,)
    assert r.mixtures[0].undefined_trials == 1
    assert r.undefined_trials >= 1
    assert count_undefined(np.array([1.0, -1.0, np.nan, 2.0])) == 2
    assert count_undefined(1.0, -0.5) == 1


# ---------------------------------------------------------------- recovery


@pytest.mark.parametrize("K", [10.0, 1e2, 1e3, 1e4, 1e5, 1e6])
def test_iteration_recovers_K_and_absorptivity(K):
    std_M, std_L, std_A, mix_M, mix_L, mix_A, eps, a0 = design(K)
    r = iterate_standards(std_M, std_L, std_A, mix_M, mix_L, mix_A, path_length=1.0)
    assert r.converged
    assert r.K == pytest.approx(K, rel=1e-9)
    assert r.molar_absorptivity == pytest.approx(eps, rel=1e-10)
    assert r.intercept == pytest.approx(a0, rel=1e-8)
    for state in r.mixtures:
        assert state.K == pytest.approx(K, rel=1e-9)
    # The shortcut was biased: slope low, K high (mass balance, see module docs).
    assert r.slope_bias < -0.01 and r.K_bias > 0.01


@pytest.mark.parametrize("K", [10.0, 1e2, 1e3, 1e4, 1e5, 1e6])
def test_joint_fit_recovers_K_and_absorptivity(K):
    std_M, std_L, std_A, mix_M, mix_L, mix_A, eps, a0 = design(K)
    j = fit_joint(std_M, std_L, std_A, mix_M, mix_L, mix_A, path_length=2.0)
    assert j.success
    assert j.K == pytest.approx(K, rel=1e-8)
    assert j.slope == pytest.approx(eps, rel=1e-9)
    assert j.molar_absorptivity == pytest.approx(eps / 2.0, rel=1e-9)
    assert j.intercept == pytest.approx(a0, rel=1e-7)
    assert j.residual_sd < 1e-9


def test_iteration_with_metal_limiting_standards():
    # Standards short of M (L in excess): the roles of M and L swap.
    K, eps, a0 = 2e4, 8e3, 0.01
    std_L, std_M = [1e-3] * 5, [i * 2e-5 for i in range(5)]
    mix_M, mix_L = [5e-5, 1e-4, 2e-4], [1e-4] * 3
    r = iterate_standards(std_M, std_L, absorbances(K, eps, a0, std_M, std_L),
                          mix_M, mix_L, absorbances(K, eps, a0, mix_M, mix_L), limiting="M")
    assert r.K == pytest.approx(K, rel=1e-9) and r.slope == pytest.approx(eps, rel=1e-10)


def test_slope_and_K_bias_match_closed_form():
    # Large excess of M (L0/M0 <= 5e-6): every standard is complexed to the
    # fraction f = K M0/(1 + K M0), so the naive slope is f times the true one
    # (bias f - 1) and each mixture's naive [ML] is [ML]/f (mass balance).
    K, eps, a0 = 1e3, 2e3, 0.0
    M0 = 4.0 / K  # K M0 = 4: f = 0.8
    std_M, std_L = [M0] * 6, [i * 4e-9 for i in range(6)]
    mix_M, mix_L = [0.5e-3, 1e-3, 2e-3], [1e-3] * 3
    r = iterate_standards(std_M, std_L, absorbances(K, eps, a0, std_M, std_L),
                          mix_M, mix_L, absorbances(K, eps, a0, mix_M, mix_L))
    f = K * M0 / (1 + K * M0)
    assert r.slope_bias == pytest.approx(f - 1.0, rel=1e-4)
    naive = [equilibrium_constant(complex_concentration(K, m, lig) / f, m, lig).K
             for m, lig in zip(mix_M, mix_L, strict=True)]
    assert r.naive_K == pytest.approx(np.mean(naive), rel=1e-4)
    assert r.K_bias == pytest.approx(np.mean(naive) / K - 1.0, rel=1e-4)
    assert r.K == pytest.approx(K, rel=1e-9)


def test_newton_converges_where_the_plain_iteration_cannot_and_a_short_run_is_flagged():
    # Standards only 78 % complexed and mixtures highly complexed: the naive K is
    # 10x too high and the plain iteration K <- F(K) does not settle (first-order factor
    # c = (1-f)(1 + [ML]/[M] + [ML]/[L]) ~ 1.2 > 1). Newton's method on F(K) - K does not
    # need c < 1 and recovers the K the data were made from; cut short, the flag says so.
    K, eps, a0 = 1e3, 100.0, 0.02
    std_M, std_L = [4e-3] * 6, [i * 2e-4 for i in range(6)]
    mix_M, mix_L = [7.5e-3, 6e-3, 9e-3], [6e-3] * 3
    std_A, mix_A = absorbances(K, eps, a0, std_M, std_L), absorbances(K, eps, a0, mix_M, mix_L)
    r = iterate_standards(std_M, std_L, std_A, mix_M, mix_L, mix_A)
    assert r.converged and r.K == pytest.approx(K, rel=1e-9)
    short = iterate_standards(std_M, std_L, std_A, mix_M, mix_L, mix_A, iterations=1)
    assert not short.converged and short.unconverged_trials == 1
    assert abs(short.K / K - 1.0) > 0.01
    j = fit_joint(std_M, std_L, std_A, mix_M, mix_L, mix_A)
    assert j.K == pytest.approx(K, rel=1e-8) and j.slope == pytest.approx(eps, rel=1e-9)
    assert j.K_bias > 1.0  # the naive K was more than twice the true one


def test_joint_fit_covariance_matches_repeated_experiments():
    # The asymptotic covariance s^2 (J'J)^-1 (Bates & Watts 1988, section 2.3)
    # should match the scatter of estimates over repeated simulated experiments.
    K, eps, a0, sd = 1e3, 400.0, 0.02, 0.003
    std_M, std_L = [3e-2] * 6, [i * 4e-4 for i in range(6)]
    mix_M, mix_L = [5e-4, 1e-3, 2e-3, 4e-3] * 2, [1e-3] * 8
    std_A, mix_A = absorbances(K, eps, a0, std_M, std_L), absorbances(K, eps, a0, mix_M, mix_L)
    rng = np.random.default_rng(7)
    fits = [fit_joint(std_M, std_L, np.add(std_A, rng.normal(0, sd, 6)), mix_M, mix_L,
                      np.add(mix_A, rng.normal(0, sd, 8)), reading_sd=sd) for _ in range(300)]
    lgK = np.array([f.log10_K for f in fits])
    u_reported = fits[0].log10_K_u  # sigma known: the same for every data set to first order
    assert np.std(lgK, ddof=1) == pytest.approx(u_reported, rel=0.15)
    assert np.mean(lgK) == pytest.approx(3.0, abs=3 * u_reported / math.sqrt(300) + 0.01 * u_reported)
    assert fits[0].sigma_known


def test_line_by_sums_matches_least_squares_reference():
    # NIST StRD "Norris" certified values (tests/reference/nist_norris.csv):
    # B1 = 1.00211681802045, B0 = -0.262323073774029.
    import csv
    from pathlib import Path
    rows = list(csv.DictReader(open(Path(__file__).parent / "reference" / "nist_norris.csv")))
    x = [float(r["x"]) for r in rows]
    y = [float(r["y"]) for r in rows]
    slope, intercept = line_by_sums(x, y)
    assert slope == pytest.approx(1.00211681802045, rel=1e-9)
    assert intercept == pytest.approx(-0.262323073774029, rel=1e-8)


# ---------------------------------------------------------------- addition series


def test_addition_series_totals_hand_computed():
    # Hand computation: 20.00 mL of 1.000e-3 L-solution; three 1.00 mL aliquots
    # of 5.00e-3 M-stock. After k additions: V = 20 + k, c_M = 5e-3 k/(20 + k),
    # c_L = 1e-3 * 20/(20 + k).
    M = addition_series_totals(5.0e-3, [1.0, 1.0, 1.0], 20.0)
    L = addition_series_totals(0.0, [1.0, 1.0, 1.0], 20.0, initial_conc=1.0e-3)
    assert M.volumes == pytest.approx((21.0, 22.0, 23.0))
    assert M.concentrations == pytest.approx((5e-3 / 21, 1e-2 / 22, 1.5e-2 / 23), rel=1e-14)
    assert L.concentrations == pytest.approx((2e-2 / 21, 2e-2 / 22, 2e-2 / 23), rel=1e-14)
    with pytest.raises(ValueError, match="no aliquot volumes"):
        addition_series_totals(1.0, [], 20.0)


def test_shared_pipette_offset_correlates_the_series():
    # One offset d shared by every aliquot (docs/design.md, "One calibration offset per item"):
    # c_k = c_s k(v+d)/(V0 + k(v+d)),
    # so dc_k/dd = c_s k V0 / (V0 + k v)^2 and cov(c_j, c_k) = dc_j/dd dc_k/dd u(d)^2
    # (GUM 5.2.2 with one common input).
    cs, v, V0, ud = 5e-3, 1.0, 20.0, 0.006
    offset = ufloat(0.0, ud)
    totals = addition_series_totals(cs, [v + offset] * 3, V0).concentrations
    d = [cs * k * V0 / (V0 + k * v) ** 2 for k in (1, 2, 3)]
    cov = covariance_matrix(totals)
    for i in range(3):
        for j in range(3):
            assert cov[i][j] == pytest.approx(d[i] * d[j] * ud**2, rel=1e-10)
    assert np.allclose(correlation_matrix(totals), 1.0)  # one common input only
    # Independent repeatability per aliquot on top breaks the perfect correlation.
    totals2 = addition_series_totals(cs, [v + offset + ufloat(0, 0.004) for _ in range(3)], V0)
    rho = correlation_matrix(totals2.concentrations)
    assert 0.3 < rho[0][2] < 0.999
    # Monte Carlo backend: the same totals per trial.
    trials = np.array([0.0, 0.01])
    arr = addition_series_totals(cs, [v + trials] * 3, V0).concentrations
    assert arr[2][1] == pytest.approx(cs * 3 * 1.01 / (V0 + 3 * 1.01), rel=1e-14)


# ---------------------------------------------------------------- bad input


def test_bad_input_gives_clear_errors():
    std_M, std_L, std_A, mix_M, mix_L, mix_A, _, _ = design(1e3)
    with pytest.raises(ValueError, match="different lengths"):
        iterate_standards(std_M, std_L[:-1], std_A, mix_M, mix_L, mix_A)
    with pytest.raises(ValueError, match="limiting"):
        iterate_standards(std_M, std_L, std_A, mix_M, mix_L, mix_A, limiting="X")
    with pytest.raises(ValueError, match="plain numbers"):
        fit_joint(std_M, std_L, std_A, mix_M, mix_L, [ufloat(a, 0.01) for a in mix_A])
    with pytest.raises(ValueError, match="'L' or 'M'"):
        fraction_complexed(1.0, 1.0, 1.0, of="ML")


def test_results_serialise_for_the_quality_record():
    # Results are frozen dataclasses with to_dict() (project rule); every backend must serialise.
    import json
    std_M, std_L, std_A, mix_M, mix_L, mix_A, _, _ = design(1e3)
    for A in (mix_A, [ufloat(a, 1e-3) for a in mix_A], [np.array([a, a + 1e-3, np.nan]) for a in mix_A]):
        d = iterate_standards(std_M, std_L, std_A, mix_M, mix_L, A).to_dict()
        text = json.dumps(d)
        assert "naive_K" in text and "undefined_trials" in text
    j = fit_joint(std_M, std_L, std_A, mix_M, mix_L, mix_A).to_dict()
    assert len(j["covariance"]) == 3 and json.dumps(j)
    assert json.dumps(addition_series_totals(ufloat(1e-3, 1e-6), [1.0, 2.0], 10.0).to_dict())


def test_standards_without_a_line_are_a_clear_error():
    std_M, std_L, std_A, mix_M, mix_L, mix_A, _, _ = design(1e3)
    with pytest.raises(ValueError, match="no line"):
        iterate_standards(std_M, [1e-3] * 6, std_A, mix_M, mix_L, mix_A)


def test_falling_absorbance_is_allowed():
    # A band that weakens on complexation gives a negative slope; K is still defined.
    K, eps, a0 = 3e3, -150.0, 0.9
    std_M, std_L = [1e-2] * 5, [i * 2e-4 for i in range(5)]
    mix_M, mix_L = [2e-4, 4e-4, 8e-4], [3e-4] * 3
    r = iterate_standards(std_M, std_L, absorbances(K, eps, a0, std_M, std_L),
                          mix_M, mix_L, absorbances(K, eps, a0, mix_M, mix_L))
    assert r.converged and r.undefined_trials == 0
    assert r.K == pytest.approx(K, rel=1e-9) and r.slope == pytest.approx(eps, rel=1e-10)
