"""The JCGM 101 clause 8 comparison decided beyond Monte Carlo noise, and Monte Carlo moments
that do not exist.

Sources: JCGM 101:2008 8.2 (d_low, d_high against delta; the validating run at a numerical
tolerance of delta/5, from memory) and 7.9.2 (delta); the variance of Student's t with nu
degrees of freedom, nu/(nu - 2) for nu > 2 and infinite otherwise (any statistics handbook,
e.g. Johnson, Kotz and Balakrishnan, Continuous Univariate Distributions, vol. 2, ch. 28,
from memory). The methods below are invented for the checks.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from validate.propagation.gumcheck import check_gum, end_spreads
from validate.workflow import pipeline as api

NORMAL = np.sort(np.random.default_rng(8).standard_normal(1_000_000))
Z95 = float(stats.norm.ppf(0.975))


def test_end_spread_matches_the_standard_error_of_a_sample_quantile():
    # the 2.5 % quantile of M normal values has standard error sqrt(a(1 - a)/M)/phi(z_a)
    # (asymptotic theory of order statistics, from memory); the spread is 1.96 of those
    low, high = end_spreads(NORMAL, 0.95)
    se = math.sqrt(0.025 * 0.975 / NORMAL.size) / stats.norm.pdf(Z95)
    assert low == pytest.approx(1.96 * se, rel=0.1)
    assert high == pytest.approx(1.96 * se, rel=0.1)


@pytest.mark.parametrize(("expanded", "verdict"), [
    (Z95, "agrees"),          # d near zero, far below delta = 0.05 (u = 1.0, JCGM 101 7.9.2)
    (Z95 + 0.05, "undecided"),  # d at delta: the Monte Carlo noise decides nothing
    (Z95 + 0.2, "differs"),   # d four times delta
])
def test_verdict_beyond_noise(expanded, verdict):
    check = check_gum(0.0, expanded, 1.0, NORMAL, 0.95)
    assert check.validation.delta == pytest.approx(0.05)
    assert check.target == pytest.approx(0.01)  # delta/5, JCGM 101 8.2 (from memory)
    assert check.verdict == verdict
    assert check.agrees is {"agrees": True, "differs": False, "undecided": None}[verdict]


ADDITIVE = """
[quantities.X1]
value = 0
u = 1
[quantities.X2]
value = 0
u = 1
[result]
name = "Y"
unit = ""
formula = "X1 + X2"
"""


def test_the_engine_adds_trials_until_delta_over_five(write_method):
    # Y = X1 + X2, normal inputs: the GUM interval is exact, u = 1.4 -> delta = 0.05, target 0.01.
    # 10^5 trials leave the ends known to about +/-0.02; the engine must add trials until 0.01
    # (within its budget of ten times the trials asked for).
    run = api.analyse(write_method(ADDITIVE), trials=100_000, seed=3, advice=False)
    (mc,) = run.monte_carlo
    assert mc.summary.total_trials > 100_000
    assert mc.check.numerical_tolerance <= mc.check.target == pytest.approx(0.01)
    assert mc.check.verdict == "agrees"
    record = mc.to_dict()
    assert record["numerical_tolerance"] <= record["tolerance_target"]
    assert record["gum_check"] == "agrees" and record["agrees_with_gum"] is True


T_INPUT = """
[quantities.X]
value = 10
u = 0.1
distribution = "t"
dof = {dof}
[quantities.W]
value = 1
u = 0.01
[result]
name = "Y"
unit = ""
formula = "X * W"
"""


@pytest.mark.parametrize(("dof", "u_reported", "shares", "note"),
                         [(2, False, False, True), (4, True, False, True), (5, True, True, False),
                          (30, True, True, False)])
def test_monte_carlo_u_only_where_the_variance_exists(write_method, dof, u_reported, shares, note):
    # t with nu <= 2 has no finite variance: no Monte Carlo u, only the intervals; nu <= 4 (no
    # finite fourth moment, so a variance ratio has no standard error): u given with a warning, no
    # variance shares (moments of Student's t: any statistics handbook)
    run = api.analyse(write_method(T_INPUT.format(dof=dof)), trials=20_000, seed=1, advice=False)
    record = run.monte_carlo[0].to_dict()
    assert (record["standard_uncertainty"] is not None) is u_reported
    assert bool(record["shares_by_step"]) is shares
    assert (record["moments_note"] is not None) is note
    assert record["interval"][0] < 10 < record["interval"][1]
