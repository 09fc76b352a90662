"""Linearity statistics checked against independent computations and published tables.

Independent reference library: statsmodels (OLS/WLS, anova_lm, compare_f_test,
OLSInfluence, runstest_1samp). The curved and heteroscedastic data sets are
invented for these checks (no published source); they only feed the
comparison with statsmodels or a property that must hold.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.sandbox.stats.runs import runstest_1samp
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.outliers_influence import OLSInfluence

from validate.model.line import fit_line
from validate.validation.linearity import (
    intercept_test,
    lack_of_fit_test,
    mandel_test,
    point_diagnostics,
    runs_distribution,
    runs_test,
    weighting_check,
)
from validate.validation.summary import is_json_ready, validate_calibration


def curved_replicated(seed: int = 7):
    """Invented: 6 standards in triplicate on a gently curved response (stray-light-like bend)."""
    rng = np.random.default_rng(seed)
    levels = np.array([0.0, 2.0, 4.0, 6.0, 8.0, 10.0])
    x = np.repeat(levels, 3)
    y = 0.005 + 0.11 * x - 0.0022 * x**2 + rng.normal(0, 0.004, x.size)
    return x, y


# ---- lack of fit and Mandel against statsmodels ------------------------------------------

def test_lack_of_fit_matches_statsmodels_anova():
    # Reference: statsmodels anova_lm comparing the straight line with the full model that
    # has one mean per concentration (pure error), the partition of Draper and Smith 2.1.
    x, y = curved_replicated()
    df = pd.DataFrame({"x": x, "y": y})
    line = smf.ols("y ~ x", df).fit()
    full = smf.ols("y ~ C(x)", df).fit()
    table = anova_lm(line, full)
    ours = lack_of_fit_test(fit_line(x, y))
    assert ours.statistic == pytest.approx(table["F"].iloc[1], rel=1e-10)
    assert ours.p_value == pytest.approx(table["Pr(>F)"].iloc[1], rel=1e-8)
    assert ours.dof == (4, 12)
    assert ours.significant  # the invented curvature is far beyond the noise


def test_mandel_matches_statsmodels_compare_f_test():
    # Reference: statsmodels compare_f_test of the quadratic against the line; Mandel's
    # F = DS^2/s2^2 (DIN 38402-51) is that nested-model F with (1, n-3) degrees of freedom.
    x, y = curved_replicated()
    df = pd.DataFrame({"x": x, "y": y})
    line = smf.ols("y ~ x", df).fit()
    quad = smf.ols("y ~ x + I(x**2)", df).fit()
    f, p, dfdiff = quad.compare_f_test(line)
    ours = mandel_test(fit_line(x, y))
    assert ours.statistic == pytest.approx(f, rel=1e-9)
    assert ours.p_value == pytest.approx(p, rel=1e-7)
    assert ours.dof == (1, len(x) - 3) and dfdiff == 1
    # DS^2 = (n-2)s1^2 - (n-3)s2^2 written out as in the standard
    n = len(x)
    s1, s2 = ours.details["s_linear"], ours.details["s_quadratic"]
    assert ours.statistic == pytest.approx(((n - 2) * s1**2 - (n - 3) * s2**2) / s2**2, rel=1e-9)
    assert ours.significant


def test_weighted_mandel_and_lack_of_fit_match_statsmodels_wls():
    # Reference: statsmodels WLS with the same weights (weights are invariant to scaling).
    x, y = curved_replicated(11)
    w = 1.0 / (0.002 + 0.01 * x) ** 2
    df = pd.DataFrame({"x": x, "y": y})
    line = smf.wls("y ~ x", df, weights=w).fit()
    quad = smf.wls("y ~ x + I(x**2)", df, weights=w).fit()
    full = smf.wls("y ~ C(x)", df, weights=w).fit()
    fit = fit_line(x, y, w)
    assert mandel_test(fit).statistic == pytest.approx(quad.compare_f_test(line)[0], rel=1e-8)
    assert lack_of_fit_test(fit).statistic == pytest.approx(full.compare_f_test(line)[0], rel=1e-8)


def test_straight_line_passes_both_tests():
    # Invented straight-line data with replicates: no test should call it curved at 1 %.
    rng = np.random.default_rng(3)
    x = np.repeat([1.0, 2, 3, 4, 5, 6], 3)
    y = 0.01 + 0.2 * x + rng.normal(0, 0.003, x.size)
    fit = fit_line(x, y)
    assert mandel_test(fit, alpha=0.01).significant is False
    assert lack_of_fit_test(fit, alpha=0.01).significant is False


def test_lack_of_fit_without_replicates_is_not_evaluable():
    fit = fit_line([1, 2, 3, 4, 5], [0.1, 0.21, 0.29, 0.41, 0.5])
    res = lack_of_fit_test(fit)
    assert res.evaluable is False and res.p_value is None and "independent points" in res.verdict


# ---- residual diagnostics against statsmodels ---------------------------------------------

def test_point_diagnostics_match_statsmodels_influence():
    # Reference: statsmodels OLSInfluence (internally studentised residuals, hat values,
    # Cook's distance as defined by Cook 1977).
    x, y = curved_replicated(5)
    infl = OLSInfluence(sm.OLS(y, sm.add_constant(x)).fit())
    ours = point_diagnostics(fit_line(x, y))
    np.testing.assert_allclose(ours.leverage, infl.hat_matrix_diag, rtol=1e-10)
    np.testing.assert_allclose(ours.standardised_residuals, infl.resid_studentized_internal,
                               rtol=1e-9)
    np.testing.assert_allclose(ours.cooks_distance, infl.cooks_distance[0], rtol=1e-9)


def test_intercept_test_matches_statsmodels_t():
    # Reference: statsmodels OLS t value and two-sided p of the constant.
    x, y = curved_replicated(9)
    ols = sm.OLS(y, sm.add_constant(x)).fit()
    ours = intercept_test(fit_line(x, y))
    assert ours.statistic == pytest.approx(ols.tvalues[0], rel=1e-9)
    assert ours.p_value == pytest.approx(ols.pvalues[0], rel=1e-7)
    assert "force" in ours.verdict or "keep" in ours.verdict


# ---- runs test ----------------------------------------------------------------------------

def test_runs_distribution_published_critical_value():
    # Swed and Eisenhart (1943) table of critical run counts, n1 = n2 = 10: lower critical
    # value 6 at 2.5 % one-sided (value recalled from memory): P(R <= 6) <= 0.025 < P(R <= 7).
    d = runs_distribution(10, 10)
    assert sum(v for r, v in d.items() if r <= 6) <= 0.025
    assert sum(v for r, v in d.items() if r <= 7) > 0.025


@given(st.integers(1, 25), st.integers(1, 25))
@settings(max_examples=40, deadline=None)
def test_runs_distribution_is_a_distribution_with_known_mean(n1, n2):
    # Wald and Wolfowitz (1940): E(R) = 2 n1 n2 / (n1 + n2) + 1.
    d = runs_distribution(n1, n2)
    assert sum(d.values()) == pytest.approx(1.0, abs=1e-12)
    assert sum(r * p for r, p in d.items()) == pytest.approx(2 * n1 * n2 / (n1 + n2) + 1, rel=1e-10)


def test_runs_z_matches_statsmodels_and_curvature_is_caught():
    # Reference: statsmodels runstest_1samp (normal approximation, no continuity correction).
    x = np.linspace(1, 20, 20)
    y = 0.1 * x - 0.003 * x**2 + 0.0005 * np.sin(7 * x)  # invented curved response
    fit = fit_line(x, y)
    res = runs_test(fit)
    z_ref, _ = runstest_1samp(fit.residuals(), cutoff=0.0, correction=False)
    assert res.details["z"] == pytest.approx(z_ref, rel=1e-10)
    assert res.statistic == 3  # + then - then + for a concave bend
    assert res.significant


# ---- weighting check ----------------------------------------------------------------------

def test_weighting_check_detects_constant_rsd_and_recommends_inverse_x_squared():
    # Invented: 2 % relative SD at every level, 6 replicates per level.
    rng = np.random.default_rng(21)
    x = np.repeat([1.0, 2, 4, 6, 8, 10], 6)
    y = 0.1 * x * (1 + rng.normal(0, 0.02, x.size))
    res = weighting_check(fit_line(x, y))
    assert res.significant
    assert res.details["basis"] == "replicate SD per standard"
    assert "1/x^2" in res.details["recommendation"]
    # ISO 8466-1 style variance ratio, highest / lowest standard: about (10/1)^2 = 100
    assert res.details["variance_ratio_highest_lowest"] > 10
    assert res.details["variance_ratio_p_value"] < 0.01


def test_weighting_check_quiet_for_constant_sd():
    rng = np.random.default_rng(4)
    x = np.repeat([1.0, 2, 4, 6, 8, 10], 6)
    y = 0.1 * x + rng.normal(0, 0.002, x.size)
    res = weighting_check(fit_line(x, y))
    assert res.significant is False and "unweighted" in res.verdict


# ---- properties ---------------------------------------------------------------------------

line_data = st.integers(4, 15).flatmap(lambda n: st.tuples(
    st.lists(st.floats(-0.05, 0.05), min_size=n, max_size=n),
    st.floats(0.1, 10.0), st.floats(-1.0, 1.0)))


@given(line_data)
@settings(max_examples=60, deadline=None)
def test_diagnostic_properties(data):
    noise, slope, intercept = data
    x = np.arange(1.0, len(noise) + 1)
    y = intercept + slope * x + np.asarray(noise)
    fit = fit_line(x, y)
    diag = point_diagnostics(fit)
    # OLS with an intercept: residuals sum to zero (normal equations, Draper and Smith ch. 1)
    assert abs(sum(diag.residuals)) <= 1e-9 * max(1.0, float(np.abs(y).sum()))
    # the hat matrix has trace p = 2 (Draper and Smith ch. 8)
    assert sum(diag.leverage) == pytest.approx(2.0, rel=1e-9)
    if fit.residual_sd > 1e-9:
        assert all(d >= 0 for d in diag.cooks_distance)
        m = mandel_test(fit)
        assert m.statistic is None or m.statistic >= 0
        assert m.p_value is None or 0 <= m.p_value <= 1


def test_summary_is_json_ready():
    x, y = curved_replicated()
    summary = validate_calibration(x, y, blanks=[0.001, 0.003, 0.002, 0.000],
                                   path_length_cm=1.0, path_length_u=0.005)
    d = summary.to_dict()
    assert is_json_ready(d)
    json.dumps(d, allow_nan=False)
    assert d["lack_of_fit"]["source"].startswith("Lack-of-fit")
    assert set(summary.observed_for_criteria()) >= {"r_squared", "loq"}
    assert not math.isnan(d["max_abs_relative_residual_percent"])


def test_exact_data_are_reported_not_evaluable():
    # Readings exactly on a line (to rounding): no test may pretend to a verdict.
    summary = validate_calibration([1, 1, 2, 2, 3, 3, 4], [0.1, 0.1, 0.2, 0.2, 0.3, 0.3, 0.4])
    for test in summary.tests().values():
        assert test.evaluable is False and test.verdict.startswith("not evaluable")
    assert "rounding error" in summary.limits.warnings[0]
    assert is_json_ready(summary.to_dict())
