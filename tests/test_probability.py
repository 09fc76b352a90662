"""Distribution functions from scipy.special (validate.metrology.probability).

Two kinds of check: printed table values (NIST/SEMATECH e-Handbook of Statistical Methods,
section 1.3.6.7: 1.3.6.7.1 normal, 1.3.6.7.2 Student t, 1.3.6.7.3 F, 1.3.6.7.4 chi-square;
values recalled from memory, to the 3 or 4 digits the tables print), and equality with
scipy.stats (a reference library) at many arguments, to 1e-13 relative: the run's numbers
must not move when scipy.stats is no longer imported.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from validate.metrology import probability as pr

DOFS = [1, 2, 3, 4, 5, 7.5, 10, 17, 30, 64.3, 120, 1000, 1e5]
PROBS = [1e-6, 0.001, 0.01, 0.025, 0.05, 0.1, 0.3, 0.5, 0.7, 0.9, 0.95, 0.975, 0.99, 0.999, 1 - 1e-6]
POINTS = [0.0, 1e-3, 0.1, 0.5, 1.0, 1.96, 2.5, 4.0, 10.0, 40.0]


def close(a, b, rel=1e-13):
    return a == b or abs(a - b) <= rel * max(abs(a), abs(b))


# Student t, two-sided 95 % (t_0.975) and one-sided 95 % (t_0.95) quantiles, NIST/SEMATECH
# 1.3.6.7.2 (from memory); infinite degrees of freedom: the normal quantile, 1.3.6.7.1.
T_0975 = {1: 12.706, 2: 4.303, 3: 3.182, 4: 2.776, 5: 2.571, 6: 2.447, 8: 2.306, 10: 2.228,
          15: 2.131, 20: 2.086, 30: 2.042, 60: 2.000, 100: 1.984, math.inf: 1.960}
T_095 = {1: 6.314, 2: 2.920, 3: 2.353, 5: 2.015, 10: 1.812, 20: 1.725, 30: 1.697, math.inf: 1.645}


@pytest.mark.parametrize(("dof", "value"), sorted(T_0975.items()))
def test_t_quantile_0975_matches_printed_table(dof, value):
    assert round(float(pr.t_quantile(0.975, dof)), 3) == value


@pytest.mark.parametrize(("dof", "value"), sorted(T_095.items()))
def test_t_quantile_095_matches_printed_table(dof, value):
    assert round(float(pr.t_quantile(0.95, dof)), 3) == value


def test_normal_quantiles_match_printed_table():
    # z_0.975 = 1.960, z_0.95 = 1.645, z_0.99 = 2.326, z_0.995 = 2.576 (1.3.6.7.1, from memory)
    assert [round(float(pr.normal_quantile(p)), 3) for p in (0.975, 0.95, 0.99, 0.995)] == \
        [1.960, 1.645, 2.326, 2.576]
    # Phi(1.96) = 0.9750, Phi(1) = 0.8413 (the same table)
    assert round(float(1 - pr.normal_upper_tail(1.96)), 4) == 0.9750
    assert round(float(1 - pr.normal_upper_tail(1.0)), 4) == 0.8413


# Chi-square upper 5 % and lower 5 % points, NIST/SEMATECH 1.3.6.7.4 (from memory)
CHI2_UPPER_5 = {1: 3.841, 2: 5.991, 3: 7.815, 5: 11.070, 10: 18.307, 20: 31.410, 30: 43.773}
CHI2_LOWER_5 = {1: 0.004, 2: 0.103, 5: 1.145, 10: 3.940, 20: 10.851}


@pytest.mark.parametrize(("dof", "point"), sorted(CHI2_UPPER_5.items()))
def test_chi2_upper_tail_at_printed_upper_points(dof, point):
    assert abs(float(pr.chi2_upper_tail(point, dof)) - 0.05) < 2e-5


@pytest.mark.parametrize(("dof", "point"), sorted(CHI2_LOWER_5.items()))
def test_chi2_lower_tail_at_printed_lower_points(dof, point):
    # the table rounds to 3 decimals, which at 1 degree of freedom (0.00393) moves P by 1e-3
    assert abs(float(pr.chi2_lower_tail(point, dof)) - 0.05) < (1e-3 if dof == 1 else 2e-4)


# F upper 5 % points F_0.95(dof1, dof2) and 1 % points F_0.99, NIST/SEMATECH 1.3.6.7.3 (from memory)
F_095 = {(1, 1): 161.448, (1, 10): 4.965, (2, 10): 4.103, (5, 10): 3.326, (10, 10): 2.978,
         (3, 20): 3.098, (4, 30): 2.690, (1, 100): 3.936}
F_099 = {(1, 10): 10.044, (2, 10): 7.559, (5, 20): 4.103, (10, 10): 4.849}


@pytest.mark.parametrize(("dofs", "value"), sorted(F_095.items()))
def test_f_quantile_095_matches_printed_table(dofs, value):
    assert round(float(pr.f_quantile(0.95, *dofs)), 3) == value
    assert abs(float(pr.f_upper_tail(value, *dofs)) - 0.05) < 1e-4


@pytest.mark.parametrize(("dofs", "value"), sorted(F_099.items()))
def test_f_quantile_099_matches_printed_table(dofs, value):
    assert round(float(pr.f_quantile(0.99, *dofs)), 3) == value


def test_t_and_normal_functions_equal_scipy_stats():
    for dof in [*DOFS, math.inf]:
        for p in PROBS:
            assert close(pr.t_quantile(p, dof), stats.t.ppf(p, dof)), (p, dof)
        for x in POINTS + [-v for v in POINTS]:
            assert close(pr.t_upper_tail(x, dof), stats.t.sf(x, dof)), (x, dof)
        grid = np.linspace(-12.0, 12.0, 241)
        np.testing.assert_allclose(pr.t_density(grid, dof), stats.t.pdf(grid, dof), rtol=1e-13, atol=0)
    for p in PROBS:
        assert close(pr.normal_quantile(p), stats.norm.ppf(p))
    for x in POINTS + [-v for v in POINTS]:
        assert close(pr.normal_upper_tail(x), stats.norm.sf(x))
    grid = np.linspace(-3.0, 7.0, 101)
    np.testing.assert_allclose(pr.normal_density(grid, 2.0, 0.7), stats.norm.pdf(grid, 2.0, 0.7), rtol=1e-13, atol=0)


def test_chi2_and_f_functions_equal_scipy_stats():
    for dof in DOFS:
        for x in [*POINTS, 100.0, 1e3]:
            assert close(pr.chi2_upper_tail(x, dof), stats.chi2.sf(x, dof)), (x, dof)
            assert close(pr.chi2_lower_tail(x, dof), stats.chi2.cdf(x, dof)), (x, dof)
        for dof2 in (1, 3, 12.5, 40, 1e4):
            for p in PROBS:
                assert close(pr.f_quantile(p, dof, dof2), stats.f.ppf(p, dof, dof2), 1e-12), (p, dof, dof2)
            for x in POINTS:
                assert close(pr.f_upper_tail(x, dof, dof2), stats.f.sf(x, dof, dof2)), (x, dof, dof2)
                assert close(pr.f_lower_tail(x, dof, dof2), stats.f.cdf(x, dof, dof2)), (x, dof, dof2)


def test_noncentral_t_equals_scipy_stats():
    for dof in (1, 3, 8, 30, 200):
        for delta in (0.0, 0.5, 2.0, 3.3, 6.0):
            for x in (-1.0, 0.0, 1.7, 2.353, 5.0):
                assert close(pr.noncentral_t_lower_tail(x, dof, delta), stats.nct.cdf(x, dof, delta)), \
                    (x, dof, delta)
    # delta = 0: the central t
    assert close(pr.noncentral_t_lower_tail(2.228, 10, 0.0), 1 - pr.t_upper_tail(2.228, 10), 1e-12)


def test_average_ranks_share_ties():
    assert pr.average_ranks([10.0, 30.0, 20.0, 20.0, 5.0]).tolist() == [2.0, 5.0, 3.5, 3.5, 1.0]
    assert pr.average_ranks([1.0, 1.0, 1.0]).tolist() == [2.0, 2.0, 2.0]


def test_spearman_by_hand():
    # no ties: rho = 1 - 6 sum d^2 / (n (n^2 - 1)); d = (-1, 1, -1, 1, 0), sum d^2 = 4, n = 5: rho = 0.8
    # (Spearman's formula, any statistics text; worked by hand)
    rho, p = pr.spearman_increasing([1, 2, 3, 4, 5], [2, 1, 4, 3, 5])
    assert close(rho, 0.8, 1e-12)
    t = 0.8 * math.sqrt(3 / (1.8 * 0.2))
    assert close(p, float(pr.t_upper_tail(t, 3)), 1e-12)
    assert pr.spearman_increasing([1, 2, 3, 4], [1, 5, 7, 9]) == (1.0, 0.0)  # strictly rising: rho = 1


def test_spearman_equals_scipy_stats_with_and_without_ties():
    rng = np.random.default_rng(7)
    for n in (3, 4, 6, 10, 25):
        for _ in range(20):
            x = rng.integers(0, 4, n).astype(float) if n > 4 else rng.normal(size=n)
            y = rng.normal(size=n)
            if len(set(x)) < 2:
                continue
            rho, p = pr.spearman_increasing(x, y)
            ref = stats.spearmanr(x, y, alternative="greater")
            assert close(rho, float(ref.statistic)) and close(p, float(ref.pvalue)), (x, y)


def test_spearman_with_a_value_that_is_not_finite_gives_nan_as_scipy_does():
    rho, p = pr.spearman_increasing([1.0, 2.0, 3.0, 4.0], [0.1, float("nan"), 0.3, 0.2])
    ref = stats.spearmanr([1.0, 2.0, 3.0, 4.0], [0.1, float("nan"), 0.3, 0.2], alternative="greater")
    assert math.isnan(rho) and math.isnan(p) and math.isnan(ref.statistic) and math.isnan(ref.pvalue)


def test_chi2_and_f_tails_below_zero_are_those_of_scipy_stats():
    # a statistic that round-off leaves a hair below 0 (a quadratic form r' V^-1 r at r = 0):
    # the tails are 1 and 0 there, as scipy.stats gives, not nan
    for x in (-1e-15, -0.5, -3.0):
        for dof in (1, 3, 9.5):
            assert pr.chi2_upper_tail(x, dof) == stats.chi2.sf(x, dof) == 1.0
            assert pr.chi2_lower_tail(x, dof) == stats.chi2.cdf(x, dof) == 0.0
            assert pr.f_upper_tail(x, dof, 5) == stats.f.sf(x, dof, 5) == 1.0
            assert pr.f_lower_tail(x, dof, 5) == stats.f.cdf(x, dof, 5) == 0.0
