"""The method's uncertainty for routine use: bias (Nordtest TR 537), combination, reconciliation.

The worked examples are of this project's own construction; every expected number is derived
by hand in the comments. The combination rule is Nordtest TR 537's (from memory).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats

from validate.validation.method_uncertainty import ReferenceBias, bias_estimate, combine, reconcile

# Two invented reference materials:
# A: reference 2.00 (u 0.02, i.e. 1 %), measured 2.04: relative bias +2 %
# B: reference 5.00 (u 0.10, i.e. 2 %), measured 4.95: relative bias -1 %
RM_A = ReferenceBias("A", measured=2.04, reference=2.00, u_reference=0.02, sd_series=0.01, results=6)
RM_B = ReferenceBias("B", measured=4.95, reference=5.00, u_reference=0.10, sd_series=0.02, results=6)


def test_nordtest_rms_rule_two_reference_materials():
    # RMS_bias = sqrt((2^2 + 1^2)/2) % = sqrt(2.5) %; u(C_ref) = (1 + 2)/2 = 1.5 %;
    # u(bias) = sqrt(2.5 + 1.5^2) % = sqrt(4.75) % (Nordtest TR 537, from memory; by hand)
    b = bias_estimate([RM_A, RM_B])
    assert b.rms_relative == pytest.approx(math.sqrt(2.5) / 100)
    assert b.u_reference_relative == pytest.approx(0.015)
    assert b.u_relative == pytest.approx(math.sqrt(4.75) / 100)
    assert b.relative == pytest.approx(0.005)  # mean bias (2 - 1)/2 = 0.5 %
    assert b.treatment == "included"


def test_corrected_bias_keeps_only_the_correction_uncertainty():
    # corrected by the mean bias 0.5 %: spread about it (1.5^2 + 1.5^2)/2 = 2.25 %^2,
    # plus u(C_ref)^2 = 2.25 %^2: u = sqrt(4.5) % (by hand)
    b = bias_estimate([RM_A, RM_B], treatment="corrected")
    assert b.u_relative == pytest.approx(math.sqrt(4.5) / 100)
    assert b.treatment == "corrected"


def test_single_reference_material_adds_the_uncertainty_of_its_mean():
    # reference 10.0 (u 0.1 = 1 %), mean of 4 series results 10.3 with s = 0.2:
    # bias 3 %, s/sqrt(n) = 0.1 = 1 %; u(bias) = sqrt(3^2 + 1^2 + 1^2) % = sqrt(11) %
    # significant: |3 %| > 2 sqrt(1^2 + 1^2) % = 2.83 % (common practice, about the 5 % level)
    rm = ReferenceBias("C", measured=10.3, reference=10.0, u_reference=0.1, sd_series=0.2, results=4)
    b = bias_estimate([rm])
    assert b.u_relative == pytest.approx(math.sqrt(11) / 100)
    assert rm.significant and b.significant
    small = ReferenceBias("D", measured=10.2, reference=10.0, u_reference=0.1, sd_series=0.2, results=4)
    assert not small.significant  # 2 % < 2.83 %


def test_bad_bias_inputs_are_refused():
    with pytest.raises(ValueError, match="at least one reference"):
        bias_estimate([])
    with pytest.raises(ValueError, match="unknown bias treatment"):
        bias_estimate([RM_A], treatment="ignored")


def test_combination_by_hand():
    # u(Rw) = 3 on 6 dof, u(bias) = 4 (Type B): u_c = 5; Welch-Satterthwaite (GUM G.4.1):
    # nu = 5^4 / (3^4/6) = 625 / 13.5 = 46.30; k = t_0.975(46.30) (scipy as the t table)
    c = combine(3.0, 6.0, 4.0)
    assert c.u_c == pytest.approx(5.0)
    assert c.dof == pytest.approx(625 / 13.5)
    assert c.k == pytest.approx(stats.t.ppf(0.975, 625 / 13.5))
    assert c.expanded == pytest.approx(c.k * 5.0)
    assert 2.0 < c.k < 2.02  # t tables: t_0.975 is 2.021 at 40 dof and 2.009 at 50 (handbook tables, from memory)


@given(st.floats(0.0, 10.0), st.floats(0.0, 10.0), st.floats(0.0, 10.0), st.floats(1.0, 50.0))
def test_combined_uncertainty_never_decreases_with_bias(u_rw, u_bias, extra, dof):
    low, high = combine(u_rw, dof, u_bias), combine(u_rw, dof, u_bias + extra)
    assert high.u_c >= low.u_c


def test_reconciliation_chi_square_form():
    # observed 2 on 10 dof against a prediction of 1 with infinite dof: chi^2 = 10 * 4 = 40,
    # far in the upper tail of chi-square(10) (95th percentile 18.3, handbook tables, from memory)
    r = reconcile(2.0, 10.0, 1.0, math.inf)
    assert r.statistic == pytest.approx(4.0)
    assert r.p_value == pytest.approx(stats.chi2.sf(40.0, 10))
    assert r.verdict == "top-down larger" and "reagent lot" in r.explanation
    assert r.dof_predicted is None


def test_reconciliation_f_form_and_agreement():
    # F = 1.2^2 / 1 = 1.44 on (8, 20) dof: p = F.sf(1.44, 8, 20) > 0.05, the routes agree
    r = reconcile(1.2, 8.0, 1.0, 20.0)
    assert r.statistic == pytest.approx(1.44)
    assert r.verdict == "agree"
    assert r.p_value == pytest.approx(min(stats.f.sf(1.44, 8, 20), stats.f.cdf(1.44, 8, 20)))
    smaller = reconcile(0.3, 12.0, 1.0, 30.0)
    assert smaller.verdict == "top-down smaller"


def test_reconciliation_flags_thin_data():
    r = reconcile(1.0, 2.0, 1.0, math.inf)
    assert "few" in r.explanation
    with pytest.raises(ValueError, match="positive predicted"):
        reconcile(1.0, 2.0, 0.0, 5.0)
