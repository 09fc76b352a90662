"""Precision, recovery/E_n, scatter consistency, absorbance window and acceptance criteria.

Data in these tests are invented for the checks; expected values are worked by
hand in the comments or computed independently with scipy, statsmodels or the
`uncertainties` package, as named beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from scipy import stats
from statsmodels.stats.anova import anova_lm
from uncertainties import ufloat

from validate.validation.criteria import DEFAULTS, evaluate_criteria
from validate.validation.precision import (
    intermediate_precision,
    recovery,
    repeatability,
    scatter_consistency,
    within_series_groups,
)
from validate.validation.window import OPTIMUM_ABSORBANCE, absorbance_window_flags, error_curve, relative_error_factor

# ---- repeatability and intermediate precision ---------------------------------------------


def test_pooled_repeatability_by_hand():
    # groups [1, 2, 3] (s^2 = 1, 2 dof) and [2, 4] (s^2 = 2, 1 dof):
    # pooled s^2 = (2*1 + 1*2)/3 = 4/3 (ISO 5725-2 pooling); grand mean 12/5 = 2.4
    rep = repeatability([[1.0, 2.0, 3.0], [2.0, 4.0]])
    assert rep.sd == pytest.approx(math.sqrt(4 / 3), rel=1e-12)
    assert rep.dof == 3 and rep.groups == 2 and rep.n == 5
    assert rep.rsd_percent == pytest.approx(100 * math.sqrt(4 / 3) / 2.4, rel=1e-12)
    single = repeatability([0.501, 0.499, 0.503, 0.497])
    assert single.sd == pytest.approx(np.std([0.501, 0.499, 0.503, 0.497], ddof=1))
    with pytest.raises(ValueError, match="2 or more"):
        repeatability([[1.0], [2.0]])


DAYS = {  # invented: a content assay read in triplicate on four days
    "d1": [10.02, 10.05, 9.98], "d2": [10.10, 10.14, 10.08],
    "d3": [9.95, 9.99, 9.97], "d4": [10.06, 10.01, 10.04],
}


def test_intermediate_precision_anova_matches_statsmodels():
    # Reference: statsmodels anova_lm of y ~ C(day) (mean squares) and scipy f_oneway.
    values = [v for vs in DAYS.values() for v in vs]
    labels = [d for d, vs in DAYS.items() for _ in vs]
    ip = intermediate_precision(values, labels)
    table = anova_lm(smf.ols("y ~ C(day)", pd.DataFrame({"y": values, "day": labels})).fit())
    ms_b, ms_w = table["mean_sq"].iloc[0], table["mean_sq"].iloc[1]
    assert ip.ms_between == pytest.approx(ms_b, rel=1e-10)
    assert ip.ms_within == pytest.approx(ms_w, rel=1e-10)
    f, p = stats.f_oneway(*DAYS.values())
    assert ip.f_statistic == pytest.approx(f, rel=1e-10) and ip.p_value == pytest.approx(p, rel=1e-8)
    # ISO 5725-3: s_I^2 = s_r^2 + s_L^2 with s_L^2 = (MS_b - MS_w)/n, n = 3 per day
    assert ip.n0 == pytest.approx(3.0)
    assert ip.intermediate_sd**2 == pytest.approx(ms_w + (ms_b - ms_w) / 3, rel=1e-10)
    assert ip.intermediate_sd >= ip.repeatability_sd
    assert 2 <= ip.intermediate_dof <= ip.n - 1


def test_repeatability_is_pooled_within_series():
    # ISO 5725-3:1994 (from memory): s_r^2 is the within-series mean square of the one-way
    # analysis of variance, MS_within; readings of one sample on different days are not one group.
    values = [v for vs in DAYS.values() for v in vs]
    labels = [d for d, vs in DAYS.items() for _ in vs]
    rep = repeatability(within_series_groups(values, labels))
    ip = intermediate_precision(values, labels)
    assert rep.sd == pytest.approx(ip.repeatability_sd, rel=1e-12)
    assert rep.dof == len(values) - len(DAYS) and rep.groups == len(DAYS)
    pooled_as_one = repeatability(values)  # the day effect counted as repeatability
    assert pooled_as_one.sd > 1.3 * rep.sd
    # without series labels the readings form one group
    assert within_series_groups([1.0, 2.0, 3.0]) == [[1.0, 2.0, 3.0]]
    with pytest.raises(ValueError, match="series labels"):
        within_series_groups([1.0, 2.0], ["a"])


def test_intermediate_precision_unbalanced_n0_and_no_day_effect():
    # n_i = 2, 3, 4: n0 = (9 - (4 + 9 + 16)/9)/2 = (9 - 3.2222)/2 = 2.8889 (ISO 5725-2)
    ip = intermediate_precision([[1.0, 1.2], [1.1, 0.9, 1.0], [1.05, 0.95, 1.0, 1.1]])
    assert ip.n0 == pytest.approx((9 - 29 / 9) / 2, rel=1e-12)
    # here MS_between < MS_within, so s_L = 0 and s_I = s_r
    assert ip.between_group_sd == 0.0 and ip.intermediate_sd == ip.repeatability_sd


def test_recovery_and_en_by_hand():
    # x = 10.2 (U 0.20), X = 10.0 (U 0.10), both at k = 2:
    # sqrt(0.04 + 0.01) = 0.22361; E_n = 0.2 / 0.22361 = 0.8944 (ISO 13528)
    r = recovery(10.2, 0.10, 10.0, 0.05, expanded_measured=0.20, expanded_reference=0.10)
    assert r.en_number == pytest.approx(0.2 / (2 * math.sqrt(0.0125)), rel=1e-12)
    assert r.en_number == pytest.approx(0.8944, abs=1e-4)
    assert r.satisfactory and r.recovery_percent == pytest.approx(102.0)
    # u(R) against the `uncertainties` package (first-order GUM propagation)
    ref = 100 * ufloat(10.2, 0.10) / ufloat(10.0, 0.05)
    assert r.recovery_u_percent == pytest.approx(ref.std_dev, rel=1e-12)
    bad = recovery(10.6, 0.10, 10.0, 0.05, expanded_measured=0.20, expanded_reference=0.10)
    assert not bad.satisfactory and "|E_n| > 1" in bad.verdict


def test_en_takes_each_expanded_uncertainty_as_stated():
    # ISO 13528:2015, 9.7 and ISO/IEC 17043:2010, B.3.1.3 (from memory):
    # E_n = (x - X)/sqrt(U_x^2 + U_ref^2). A result with few degrees of freedom has k = 2.57
    # (t, nu = 5): U_x = 2.57 x 0.10 = 0.257; the reference's certificate states U = 0.10 (k = 2).
    # E_n = 0.2/sqrt(0.257^2 + 0.10^2) = 0.7252, not 0.2/(2.57 sqrt(0.01 + 0.0025)) = 0.6961.
    r = recovery(10.2, 0.10, 10.0, 0.05, expanded_measured=0.257, expanded_reference=0.10)
    assert r.en_number == pytest.approx(0.2 / math.hypot(0.257, 0.10), rel=1e-12)
    assert r.en_number == pytest.approx(0.7252, abs=1e-4)
    assert r.reference_coverage_factor == pytest.approx(2.0)


def test_scatter_consistency():
    # dof 10, s = 0.02, predicted 0.01: chi2 = 10 * 4 = 40 > chi2_0.95(10) = 18.307
    # (NIST/SEMATECH e-Handbook table 1.3.6.7.4) -> excess, the budget misses a source
    res = scatter_consistency(0.02, 10, 0.01)
    assert res.chi_square == pytest.approx(40.0)
    assert stats.chi2.ppf(0.95, 10) == pytest.approx(18.307, abs=1e-3)
    assert res.p_excess < 0.05 and "may miss a source" in res.verdict
    ok = scatter_consistency(0.01, 10, 0.01)
    assert ok.chi_square == pytest.approx(10.0) and "consistent" in ok.verdict
    low = scatter_consistency(0.003, 10, 0.01)  # chi2 = 0.9 < chi2_0.05(10) = 3.940
    assert low.p_deficit < 0.05 and "smaller" in low.verdict


# ---- absorbance window ---------------------------------------------------------------------


def test_error_factor_minimum_at_0434():
    # Twyman and Lothian (1933), from memory: minimum of 1/(T |ln T|) at T = 1/e, A = 0.434,
    # where the factor equals e.
    a = np.linspace(0.05, 2.0, 200_001)
    f = relative_error_factor(a)
    assert a[np.argmin(f)] == pytest.approx(0.4343, abs=1e-4)
    assert OPTIMUM_ABSORBANCE == pytest.approx(0.4343, abs=1e-4)
    assert relative_error_factor(OPTIMUM_ABSORBANCE) == pytest.approx(math.e, rel=1e-12)
    assert relative_error_factor(0.0) == math.inf


def test_error_factor_equals_numerical_derivative_of_beer_lambert():
    # c proportional to A = -log10 T; |(dc/c)/dT| by central difference at T = 10^-A.
    for a in (0.1, 0.434, 1.0, 1.7):
        t, h = 10.0**-a, 1e-7
        dc = (-math.log10(t + h) + math.log10(t - h)) / (2 * h)
        assert abs(dc) / a == pytest.approx(relative_error_factor(a), rel=1e-6)
    curve = error_curve()
    assert len(curve.absorbance) == 200 and curve.to_dict()["minimum_factor"] == pytest.approx(math.e)


def test_window_flags():
    res = absorbance_window_flags([-0.01, 0.05, 0.3, 1.2, 2.5])
    assert [bool(f) for f in res.flags] == [True, True, False, True, True]
    assert "negative" in res.flags[0][0] and "below the window" in res.flags[1][0]
    assert "stray light" in res.flags[4][0] and res.inside == 1 and res.outside == 4
    assert "common practice" in res.source


# ---- acceptance criteria -------------------------------------------------------------------


def test_criteria_defaults_and_statuses():
    res = evaluate_criteria({"max_loq": 0.5}, {"r_squared": 0.9991, "loq": 0.8,
                                               "max_abs_relative_residual": 3.0,
                                               "recovery_percent": 93.0, "en_number": -0.7})
    by_key = {c.key: c for c in res.criteria}
    assert by_key["min_r_squared"].met is True and by_key["min_r_squared"].is_default
    assert by_key["max_loq"].met is False and by_key["max_loq"].source == "set by the user"
    assert by_key["recovery_range"].met is False and by_key["recovery_range"].limit == (95.0, 105.0)
    assert by_key["max_abs_en"].met is True
    assert by_key["max_abs_relative_residual"].status == "met"
    assert by_key["min_linearity_p_value"].status == "not evaluable"
    assert by_key["max_relative_expanded_uncertainty"].status == "not set"
    assert res.all_met is False
    assert res.defaults == DEFAULTS and DEFAULTS["min_r_squared"] == 0.995
    assert "common practice" in by_key["min_r_squared"].source
    assert res.to_dict()["criteria"][0]["key"] == "min_r_squared"


def test_criteria_all_met_and_bad_settings():
    res = evaluate_criteria({"recovery_range": [98, 102], "min_r_squared": None},
                            {"recovery_percent": 100.4})
    assert res.all_met is True
    with pytest.raises(ValueError, match="unknown acceptance criteria min_r2"):
        evaluate_criteria({"min_r2": 0.99}, {})
    with pytest.raises(ValueError, match="two numbers"):
        evaluate_criteria({"recovery_range": 95}, {})
    with pytest.raises(ValueError, match="low"):
        evaluate_criteria({"recovery_range": [105, 95]}, {})
    with pytest.raises(ValueError, match="needs a number"):
        evaluate_criteria({"max_loq": "small"}, {})
    assert evaluate_criteria({}, {}).all_met is None
