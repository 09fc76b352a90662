"""Within-laboratory reproducibility by one-way analysis of variance (ISO 5725-3).

Values in these tests are invented for the checks; each expected value is worked by hand in
the comments or computed independently (statsmodels, scipy), as named beside each check.
"""

from __future__ import annotations

import math
import warnings

import pandas as pd
import pytest
import statsmodels.formula.api as smf
from hypothesis import assume, given
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.anova import anova_lm

from validate.validation.reproducibility import reproducibility, series_groups

# six invented days of a control read three times each
DAYS = {"d1": [10.1, 10.3, 10.2], "d2": [10.6, 10.4, 10.5], "d3": [9.9, 10.0, 10.2],
        "d4": [10.4, 10.6, 10.7], "d5": [10.0, 10.1, 9.8], "d6": [10.5, 10.3, 10.4]}


def test_two_series_by_hand():
    # [1, 2, 3] and [4, 5, 6]: grand mean 3.5, series means 2 and 5;
    # SS_between = 3 (1.5^2) + 3 (1.5^2) = 13.5 on 1 dof; SS_within = 2 + 2 = 4 on 4 dof, MS_w = 1;
    # n0 = 3, s_between^2 = (13.5 - 1)/3 = 25/6, s_Rw^2 = 1 + 25/6 = 31/6 (ISO 5725-3, by hand)
    r = reproducibility([[1, 2, 3], [4, 5, 6]])
    assert r.ms_between == pytest.approx(13.5) and r.ms_within == pytest.approx(1.0)
    assert r.s_r == pytest.approx(1.0)
    assert r.s_between == pytest.approx(math.sqrt(25 / 6))
    assert r.s_Rw == pytest.approx(math.sqrt(31 / 6))
    # Satterthwaite: s_Rw^2 = MS_b/3 + (2/3) MS_w = 4.5 + 2/3; nu = (31/6)^2 / (4.5^2/1 + (2/3)^2/4)
    assert r.dof == pytest.approx((31 / 6) ** 2 / (4.5**2 + (2 / 3) ** 2 / 4))
    # a routine result is the mean of m = n0 = 3 readings: its variance MS_b/3 = 4.5 on 1 dof
    assert r.result_sd == pytest.approx(math.sqrt(4.5)) and r.result_dof == pytest.approx(1.0)
    assert r.weak


def test_mean_squares_match_statsmodels_and_scipy():
    # Reference: statsmodels anova_lm of y ~ C(day), and scipy.stats.f_oneway (independent computations)
    values = [v for vs in DAYS.values() for v in vs]
    labels = [d for d, vs in DAYS.items() for _ in vs]
    r = reproducibility(series_groups(values, labels))
    table = anova_lm(smf.ols("y ~ C(day)", pd.DataFrame({"y": values, "day": labels})).fit())
    assert r.ms_between == pytest.approx(table["mean_sq"].iloc[0], rel=1e-10)
    assert r.ms_within == pytest.approx(table["mean_sq"].iloc[1], rel=1e-10)
    f, _ = stats.f_oneway(*DAYS.values())
    assert r.ms_between / r.ms_within == pytest.approx(f, rel=1e-10)
    assert (r.series, r.n, r.dof_r) == (6, 18, 12)


def test_variance_components_match_statsmodels_reml():
    # Reference: statsmodels MixedLM (REML), an independent route; for a balanced design with a
    # positive between-series estimate REML equals the ANOVA estimator (Searle, Casella and
    # McCulloch, Variance Components (1992), ch. 4, from memory).
    values = [v for vs in DAYS.values() for v in vs]
    labels = [d for d, vs in DAYS.items() for _ in vs]
    r = reproducibility(list(DAYS.values()))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = smf.mixedlm("y ~ 1", pd.DataFrame({"y": values, "day": labels}), groups="day").fit(reml=True)
    assert r.s_between**2 == pytest.approx(float(fit.cov_re.iloc[0, 0]), rel=1e-4)
    assert r.s_r**2 == pytest.approx(float(fit.scale), rel=1e-4)


def test_unequal_series_use_n0():
    # sizes 2, 3, 4: N = 9, n0 = (9 - (4 + 9 + 16)/9)/2 = (9 - 29/9)/2 = 26/9 (ISO 5725-2, 7.4, from memory)
    r = reproducibility([[1.0, 1.2], [1.5, 1.4, 1.6], [1.1, 1.0, 1.3, 1.2]])
    assert r.n0 == pytest.approx(26 / 9)


def test_no_between_series_effect_gives_zero():
    # series means equal, MS_between = 0 < MS_within: s_between is 0 (truncated), s_Rw = s_r, dof N - p
    r = reproducibility([[1.0, 3.0], [3.0, 1.0], [2.0, 2.0]])
    assert r.s_between == 0.0 and r.s_Rw == pytest.approx(r.s_r)
    assert r.dof == r.result_dof == 3.0
    assert r.result_sd == pytest.approx(r.s_r / math.sqrt(2))


@pytest.mark.parametrize("groups, message", [
    ([[1.0, 2.0, 3.0]], "at least 2 series"),
    ([[1.0], [2.0]], "at least 2 readings"),
    ([[1.0, 2.0], [2.0]], "at least 2 readings"),
])
def test_thin_designs_are_refused(groups, message):
    with pytest.raises(ValueError, match=message):
        reproducibility(groups)


def test_labels_must_match_values():
    with pytest.raises(ValueError, match="one label per value"):
        series_groups([1.0, 2.0], ["a"])
    with pytest.raises(ValueError, match="non-finite"):
        series_groups([1.0, float("nan")], ["a", "b"])


readings = st.floats(min_value=0.0, max_value=2.0, allow_nan=False, allow_infinity=False)
series = st.lists(st.lists(readings, min_size=2, max_size=5), min_size=2, max_size=6)


@given(series)
def test_reproducibility_never_below_repeatability(groups):
    # ISO 5725-3: s_Rw^2 = s_r^2 + s_between^2 with s_between^2 >= 0
    r = reproducibility(groups)
    assert r.s_Rw >= r.s_r
    assert r.s_Rw >= r.s_between >= 0.0
    assert r.result_sd <= r.s_Rw + 1e-12  # a mean of m >= 1 readings scatters no more than one reading


@given(st.lists(readings, min_size=2, max_size=5), st.integers(min_value=2, max_value=6))
def test_identical_series_give_no_between_series_sd(one_series, copies):
    assume(max(one_series) - min(one_series) > 1e-6)  # some repeatability within the series
    r = reproducibility([list(one_series) for _ in range(copies)])
    assert r.s_between == 0.0
    assert r.s_Rw == pytest.approx(r.s_r)


def test_a_result_of_one_reading_has_the_reproducibility_of_a_reading():
    # m = 1: u(Rw)^2 = s_between^2 + s_r^2 = s_Rw^2, on the same Satterthwaite dof (by hand, ISO 5725-3)
    r = reproducibility([[1, 2, 3], [4, 5, 6]], readings_per_result=1)
    assert r.result_sd == pytest.approx(r.s_Rw) and r.result_dof == pytest.approx(r.dof)
    with pytest.raises(ValueError, match="at least 1 reading"):
        reproducibility([[1, 2, 3], [4, 5, 6]], readings_per_result=0.5)
