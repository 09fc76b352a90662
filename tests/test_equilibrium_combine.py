"""Tests of the combination of correlated K values, the trend test and the activity correction.

Sources named beside each check; "from memory" marks recalled values.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from statsmodels.regression.linear_model import GLS
from uncertainties import covariance_matrix, ufloat

from validate.equilibrium.combine import (
    combine_correlated,
    davies_activity_correction,
    davies_log10_gamma,
    debye_huckel_A,
    gls_weights,
    log10_K,
    log10_uncertainty,
    trend_test,
    water_relative_permittivity,
)


def two_value_covariance(s1, s2, rho):
    return [[s1 * s1, rho * s1 * s2], [rho * s1 * s2, s2 * s2]]


# ---------------------------------------------------------------- GLS mean


def test_two_correlated_values_hand_computed():
    # Two correlated measurements (Lyons, Gibaut & Clifford, Nucl. Instrum. Meth.
    # A270 (1988) 110, formulas from memory): w1 = (s2^2 - rho s1 s2)/d,
    # u^2 = s1^2 s2^2 (1 - rho^2)/d, chi^2 = (x1 - x2)^2/d, d = s1^2 + s2^2 - 2 rho s1 s2.
    # x = (10, 12), s = (1, 2), rho = 0.3: d = 3.8, w1 = 17/19, value = 194/19,
    # u^2 = 3.64/3.8, chi^2 = 20/19 (hand computation).
    c = combine_correlated([10.0, 12.0], two_value_covariance(1.0, 2.0, 0.3))
    assert c.weights[0] == pytest.approx(17 / 19, rel=1e-12)
    assert c.value == pytest.approx(194 / 19, rel=1e-12)
    assert c.standard_uncertainty == pytest.approx(math.sqrt(3.64 / 3.8), rel=1e-12)
    assert c.chi_square == pytest.approx(20 / 19, rel=1e-12)
    assert c.dof == 1
    assert c.birge_ratio == pytest.approx(math.sqrt(20 / 19), rel=1e-12)
    assert c.p_value == pytest.approx(stats.chi2.sf(20 / 19, 1), rel=1e-12)
    assert c.consistent and not c.negative_weights


def test_strong_correlation_gives_negative_weight():
    # Same reference: when rho > s1/s2 the less precise value gets a negative
    # weight and the mean falls outside the two values. rho = 0.8: w1 = 4/3,
    # value = 28/3, u^2 = 0.8 (hand computation).
    c = combine_correlated([10.0, 12.0], two_value_covariance(1.0, 2.0, 0.8))
    assert c.weights[0] == pytest.approx(4 / 3, rel=1e-12)
    assert c.value == pytest.approx(28 / 3, rel=1e-12)
    assert c.standard_uncertainty == pytest.approx(math.sqrt(0.8), rel=1e-12)
    assert c.negative_weights


def test_uncorrelated_case_is_the_inverse_variance_mean():
    # Inverse-variance weighted mean and its chi-square (e.g. Taylor, An
    # Introduction to Error Analysis, 2nd ed., ch. 7; from memory).
    x = np.array([101.0, 98.0, 103.0, 99.5])
    s = np.array([1.0, 2.0, 1.5, 1.0])
    w = 1 / s**2
    mean = float(np.sum(w * x) / np.sum(w))
    c = combine_correlated(x, np.diag(s**2))
    assert c.value == pytest.approx(mean, rel=1e-13)
    assert c.standard_uncertainty == pytest.approx(1 / math.sqrt(np.sum(w)), rel=1e-13)
    chi2 = float(np.sum(w * (x - mean) ** 2))
    assert c.chi_square == pytest.approx(chi2, rel=1e-12)
    assert c.birge_ratio == pytest.approx(math.sqrt(chi2 / 3), rel=1e-12)


def test_gls_mean_matches_statsmodels():
    # General reference library: statsmodels GLS with a constant regressor.
    rng = np.random.default_rng(3)
    B = rng.normal(size=(5, 5))
    V = B @ B.T + 0.5 * np.eye(5)
    k = rng.normal(1000.0, 3.0, size=5)
    ref = GLS(k, np.ones((5, 1)), sigma=V).fit()
    c = combine_correlated(k, V)
    assert c.value == pytest.approx(ref.params[0], rel=1e-12)
    assert c.standard_uncertainty == pytest.approx(math.sqrt(ref.normalized_cov_params[0, 0]), rel=1e-10)
    assert c.chi_square == pytest.approx(ref.ssr, rel=1e-9)  # whitened residual sum of squares


def test_inconsistent_values_are_flagged():
    # Birge (Phys. Rev. 40 (1932) 207): R_B >> 1 when the scatter exceeds the
    # stated uncertainties. Values 10 standard uncertainties apart cannot pass.
    c = combine_correlated([100.0, 110.0, 100.5], np.diag([1.0, 1.0, 1.0]))
    assert not c.consistent and c.p_value < 1e-6 and c.birge_ratio > 4
    assert c.uncertainty_birge_inflated == pytest.approx(c.standard_uncertainty * c.birge_ratio)


def test_weights_reproduce_the_uncertainty_in_the_linear_engine():
    # A series whose K values share one systematic input: weights from the
    # covariance, applied to the ufloats, give u^2 = 1/(1'V^-1 1) (GUM 5.2.2).
    shared = ufloat(0.0, 4.0)
    K = [ufloat(980.0, 10.0) + shared, ufloat(1010.0, 6.0) + shared, ufloat(1003.0, 8.0) + 0.5 * shared]
    V = np.array(covariance_matrix(K))
    w = gls_weights(V)
    combined = sum(wi * Ki for wi, Ki in zip(w, K, strict=True))
    c = combine_correlated([k.nominal_value for k in K], V)
    assert combined.std_dev == pytest.approx(c.standard_uncertainty, rel=1e-10)
    assert combined.nominal_value == pytest.approx(c.value, rel=1e-13)
    assert sum(w) == pytest.approx(1.0, rel=1e-14)


def test_singular_or_malformed_covariance_is_a_clear_error():
    with pytest.raises(ValueError, match="not positive definite"):
        combine_correlated([1.0, 2.0], [[1.0, 1.0], [1.0, 1.0]])
    with pytest.raises(ValueError, match="2x2"):
        combine_correlated([1.0, 2.0], [[1.0]])
    with pytest.raises(ValueError, match="not symmetric"):
        combine_correlated([1.0, 2.0], [[1.0, 0.2], [0.1, 1.0]])


# ---------------------------------------------------------------- trend


def series_covariance(n, own=9.0, shared=4.0):
    return np.diag([own] * n) + shared


def test_trend_matches_statsmodels_gls():
    # Aitken GLS slope, its standard error, t and p (statsmodels GLS, df n - 2).
    x = np.array([0.5, 1.0, 1.5, 2.0, 2.5, 3.0])
    k = np.array([1000.0, 1004.0, 1003.0, 1011.0, 1010.0, 1016.0])
    V = series_covariance(6)
    ref = GLS(k, np.column_stack([np.ones(6), x]), sigma=V).fit()
    t = trend_test(k, V, x)
    assert t.slope == pytest.approx(ref.params[1], rel=1e-10)
    assert t.slope_u == pytest.approx(ref.bse[1], rel=1e-9)
    assert t.statistic == pytest.approx(ref.tvalues[1], rel=1e-9)
    assert t.p_value == pytest.approx(ref.pvalues[1], rel=1e-8)
    assert t.dof == 4 and t.trend and "another complex" in t.message
    known = trend_test(k, V, x, scale="known")
    assert known.slope_u == pytest.approx(math.sqrt(ref.normalized_cov_params[1, 1]), rel=1e-9)
    assert known.p_value == pytest.approx(2 * stats.norm.sf(abs(known.statistic)), rel=1e-12)


def test_no_trend_is_not_flagged_and_log_scale_works():
    x = np.array([0.5, 1.0, 1.5, 2.0, 2.5])
    k = np.array([1000.0, 1006.0, 995.0, 1004.0, 998.0])
    V = series_covariance(5)
    t = trend_test(k, V, x)
    assert not t.trend and t.p_value > 0.05
    # log10 K: covariance carried by u(log10 K) = u(K)/(K ln 10); compare with statsmodels.
    D = np.diag(1 / (k * math.log(10)))
    ref = GLS(np.log10(k), np.column_stack([np.ones(5), x]), sigma=D @ V @ D).fit()
    tl = trend_test(k, V, x, use_log10=True)
    assert tl.quantity == "log10 K"
    assert tl.slope == pytest.approx(ref.params[1], rel=1e-9)
    assert tl.p_value == pytest.approx(ref.pvalues[1], rel=1e-8)


def test_trend_input_errors():
    with pytest.raises(ValueError, match="at least 3"):
        trend_test([1.0, 2.0], np.eye(2), [1.0, 2.0])
    with pytest.raises(ValueError, match="one x per K"):
        trend_test([1.0, 2.0, 3.0], np.eye(3), [1.0, 2.0])
    with pytest.raises(ValueError, match="all concentrations are equal"):
        trend_test([1.0, 2.0, 3.0], np.eye(3), [1.0, 1.0, 1.0])


def test_log10_uncertainty():
    # u(log10 K) = u(K)/(K ln 10) (GUM 5.1.2, first order): 1000 +/- 50 -> 0.0217147.
    assert log10_uncertainty(1000.0, 50.0) == pytest.approx(0.021714724095, rel=1e-10)
    lg = log10_K(ufloat(1000.0, 50.0))
    assert lg.nominal_value == pytest.approx(3.0) and lg.std_dev == pytest.approx(0.021714724095, rel=1e-10)
    assert log10_K(np.array([10.0, 100.0])) == pytest.approx([1.0, 2.0])


# ---------------------------------------------------------------- activity


def test_davies_hand_computed():
    # Davies equation with A = 0.509, I = 0.1 mol/L (hand computation):
    # sqrt(I)/(1 + sqrt(I)) - 0.3 I = 0.2402531 - 0.03 = 0.2102531;
    # z = 1: log10 gamma = -0.1070188, gamma = 0.781594; z = 2: gamma = 0.3731855.
    assert davies_log10_gamma(1, 0.1, 0.509) == pytest.approx(-0.1070188, abs=1e-7)
    corr = davies_activity_correction(1000.0, 0.1, (2, -1), A=0.509)
    assert corr.gamma_L == pytest.approx(0.781594, rel=1e-6)
    assert corr.gamma_M == pytest.approx(0.3731855, rel=1e-6)
    assert corr.gamma_ML == pytest.approx(0.781594, rel=1e-6)  # z_ML = +1
    # log K0 = log Kc - A F (z_ML^2 - z_M^2 - z_L^2) = 3 + 4 * 0.509 * 0.2102531 = 3.4280753.
    assert corr.K_thermodynamic == pytest.approx(10**3.4280753, rel=1e-6)
    assert corr.charges == (2, -1, 1) and corr.within_range


def test_davies_backends_and_range_flag():
    f = davies_activity_correction(500.0, 0.05, (1, -1))
    u = davies_activity_correction(ufloat(500.0, 20.0), ufloat(0.05, 0.005), (1, -1))
    a = davies_activity_correction(np.array([500.0, 510.0]), np.array([0.05, 0.06]), (1, -1))
    assert u.K_thermodynamic.nominal_value == pytest.approx(f.K_thermodynamic, rel=1e-13)
    assert a.K_thermodynamic[0] == pytest.approx(f.K_thermodynamic, rel=1e-13)
    # Neutral ligand: z_ML = z_M, the charges cancel and K is unchanged.
    assert davies_activity_correction(500.0, 0.1, (2, 0)).K_thermodynamic == pytest.approx(500.0)
    high = davies_activity_correction(500.0, 1.0, (1, -1))
    assert not high.within_range and "indicative" in high.note
    assert high.to_dict()["within_range"] is False


def test_debye_huckel_A_against_quoted_values():
    # Commonly quoted A at 25 C: 0.509 (older, molal) to 0.511 (L/mol)^1/2 (from memory).
    assert 0.508 < debye_huckel_A(25.0) < 0.513
    # eps_r of water at 25 C: 78.30 (Malmberg & Maryott 1956, from memory).
    assert water_relative_permittivity(25.0) == pytest.approx(78.30, abs=0.01)
    # Temperature dependence: tabulated A rises from about 0.491 at 0 C to about
    # 0.600 at 100 C (Helgeson 1969 molal values, from memory); ratio to 25 C within 2 %.
    assert debye_huckel_A(0.0) / debye_huckel_A(25.0) == pytest.approx(0.4913 / 0.5092, rel=0.02)
    assert debye_huckel_A(100.0) / debye_huckel_A(25.0) == pytest.approx(0.5998 / 0.5092, rel=0.02)
    with pytest.raises(ValueError, match="give A explicitly"):
        debye_huckel_A(150.0)
