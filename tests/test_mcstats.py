"""Monte Carlo output statistics, checked against JCGM 101:2008 (GUM Supplement 1).

Published values are named beside each check; "from memory" marks values
recalled rather than read from the document at the time of writing.
Seeds are fixed, so each check is deterministic.
"""

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, special, stats

from validate.metrology.sources import normal, rectangular
from validate.propagation.distributions import draw
from validate.propagation.mcstats import (
    adaptive_batch_size,
    adaptive_converged,
    coverage_interval_shortest,
    coverage_interval_symmetric,
    histogram_data,
    numerical_tolerance,
    pooled_mean_sd,
    summarise,
    tolerance_digits,
    validate_gum,
)

M_REFERENCE = 1_000_000  # trials for the JCGM 101 clause 9.2 examples
HALF_UNIT = 0.005  # half a unit in the last published digit (values given to 0.01)


def _additive_model(sources, seed):
    """Y = X1 + X2 + X3 + X4, JCGM 101 9.2.1."""
    rng = np.random.default_rng(seed)
    return sum(draw(src, M_REFERENCE, rng) for src in sources)


def _batch_standard_errors(y, p=0.95, batches=10):
    """Standard errors of u(y) and of the interval endpoints, from the spread of
    10 independent batches (the batch method of JCGM 101 7.9.4)."""
    parts = [summarise(part, p) for part in np.array_split(y, batches)]
    se = lambda col: np.std(col, ddof=1) / math.sqrt(batches)  # noqa: E731
    return (
        se([b.standard_deviation for b in parts]),
        se([b.symmetric.low for b in parts]),
        se([b.symmetric.high for b in parts]),
    )


def _close(observed, published, se):
    return abs(observed - published) <= HALF_UNIT + 3 * se


def test_jcgm101_9_2_2_normal_inputs():
    # JCGM 101 9.2.2 (Table 2, from memory): X_i ~ N(0, 1), i = 1..4;
    # u(y) = 2.00 and 95 % coverage interval [-3.92, 3.92] (GUM and Monte Carlo alike).
    y = _additive_model([normal(f"X{i}", 0.0, 1.0) for i in range(1, 5)], seed=922)
    s = summarise(y, 0.95)
    se_u, se_low, se_high = _batch_standard_errors(y)
    assert s.n == M_REFERENCE and s.invalid_trials == 0
    assert abs(s.mean) < 3 * 2.0 / math.sqrt(M_REFERENCE)
    assert _close(s.standard_deviation, 2.00, se_u)
    assert _close(s.symmetric.low, -3.92, se_low)
    assert _close(s.symmetric.high, 3.92, se_high)


def _irwin_hall_quantile(prob, n=4):
    """Quantile of the sum of n independent rectangular variates R(-sqrt 3, sqrt 3),
    from the Irwin-Hall CDF F(s) = sum_k (-1)^k C(n,k) (s-k)^n / n! (standard result)."""
    cdf = lambda s: sum((-1) ** k * special.comb(n, k) * (s - k) ** n for k in range(int(s) + 1)) / math.factorial(n)  # noqa: E731
    s = optimize.brentq(lambda s: cdf(s) - prob, 0.0, float(n))
    return 2 * math.sqrt(3) * (s - n / 2)


def test_jcgm101_9_2_3_rectangular_inputs():
    # JCGM 101 9.2.3 (Table 3, from memory): X_i rectangular, expectation 0, u = 1
    # (half-width sqrt 3); Monte Carlo u(y) = 2.00 and interval [-3.88, 3.88], whereas
    # the GUM uncertainty framework gives [-3.92, 3.92].
    y = _additive_model([rectangular(f"X{i}", 0.0, math.sqrt(3)) for i in range(1, 5)], seed=923)
    s = summarise(y, 0.95)
    se_u, se_low, se_high = _batch_standard_errors(y)
    assert _close(s.standard_deviation, 2.00, se_u)
    assert _close(s.symmetric.low, -3.88, se_low)
    assert _close(s.symmetric.high, 3.88, se_high)
    # the check can tell the Monte Carlo interval from the GUM one
    assert not _close(s.symmetric.high, 3.92, se_high)
    # independent check of the recalled value: the exact 97.5 % point of the sum
    exact = _irwin_hall_quantile(0.975)
    assert round(exact, 2) == 3.88
    assert abs(s.symmetric.high - exact) <= 3 * se_high + 1e-3


# JCGM 101 9.2.4 (one rectangular input much wider than the others) is not
# reproduced here: its published numbers are not recalled exactly.


def test_interval_indices_follow_clause_7_7_1():
    # Hand-worked from the rules of JCGM 101 7.7.1: q = pM (or int(pM + 1/2)),
    # r = (M - q)/2 (or int((M - q + 1)/2)), interval [y_(r), y_(r+q)].
    values = np.arange(1.0, 21.0)[::-1]  # M = 20 unsorted
    iv = coverage_interval_symmetric(values, 0.9)  # q = 18, r = 1
    assert (iv.low, iv.high) == (1.0, 19.0)
    iv = coverage_interval_symmetric(np.arange(1.0, 22.0), 0.9)  # pM = 18.9 -> q = 19, r = 1
    assert (iv.low, iv.high) == (1.0, 20.0)
    iv = coverage_interval_symmetric(np.arange(1.0, 11.0), 0.5)  # q = 5, M - q = 5 -> r = 3
    assert (iv.low, iv.high) == (3.0, 8.0)


def test_shortest_interval_follows_clause_7_7_2():
    # JCGM 101 7.7.2: least y_(r+q) - y_(r); M = 5, p = 0.5 -> q = int(3.0) = 3
    iv = coverage_interval_shortest(np.array([5.0, 1.1, 0.0, 1.2, 1.0]), 0.5)
    assert (iv.low, iv.high) == (0.0, 1.2)


def test_shortest_interval_of_a_skewed_distribution():
    # Lognormal(sigma = 0.5): the exact shortest 95 % interval minimises
    # F^-1(a + p) - F^-1(a) over a (JCGM 101 5.3.4, 7.7.2; quantiles from scipy.stats).
    dist = stats.lognorm(0.5)
    y = dist.rvs(size=400_000, random_state=np.random.default_rng(51))
    sym = coverage_interval_symmetric(y)
    short = coverage_interval_shortest(y)
    best = optimize.minimize_scalar(lambda a: dist.ppf(a + 0.95) - dist.ppf(a), bounds=(1e-9, 0.05 - 1e-9),
                                    method="bounded")
    exact_low, exact_high = dist.ppf(best.x), dist.ppf(best.x + 0.95)
    assert short.width < sym.width - 0.05  # clearly shorter (exact widths 2.06 vs 2.29)
    assert short.low == pytest.approx(exact_low, abs=0.02)
    assert short.high == pytest.approx(exact_high, abs=0.03)
    assert sym.low == pytest.approx(dist.ppf(0.025), abs=0.01)
    assert sym.high == pytest.approx(dist.ppf(0.975), abs=0.03)


def test_intervals_coincide_for_a_symmetric_distribution():
    # For a symmetric unimodal PDF the shortest and the probabilistically symmetric
    # intervals are the same (JCGM 101 5.3.4, from memory; exact quantiles from scipy.stats).
    y = np.random.default_rng(52).standard_normal(400_000)
    sym, short = coverage_interval_symmetric(y), coverage_interval_shortest(y)
    q = stats.norm.ppf(0.975)
    for end, exact in ((sym.low, -q), (sym.high, q), (short.low, -q), (short.high, q)):
        assert end == pytest.approx(exact, abs=0.03)
    assert abs(short.width - sym.width) < 0.02


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(-1e6, 1e6), min_size=25, max_size=300), st.sampled_from([0.5, 0.9, 0.95]))
def test_shortest_is_never_wider_and_both_cover_q_plus_one_values(values, p):
    y = np.array(values)
    sym, short = coverage_interval_symmetric(y, p), coverage_interval_shortest(y, p)
    assert short.width <= sym.width
    q = math.floor(p * y.size + 0.5)
    for iv in (sym, short):
        assert np.sum((y >= iv.low) & (y <= iv.high)) >= q + 1


def test_summarise_counts_undefined_trials():
    y = np.random.default_rng(53).normal(10.0, 2.0, 50_000)
    y[::100] = np.nan
    y[5] = np.inf
    y[7] = -np.inf
    before = y.copy()
    s = summarise(y)
    good = y[np.isfinite(y)]
    assert s.invalid_trials == 502 and s.n == 50_000 - 502 and s.total_trials == 50_000
    assert s.mean == pytest.approx(np.mean(good), rel=1e-12)
    assert s.standard_deviation == pytest.approx(np.std(good, ddof=1), rel=1e-12)
    assert s.symmetric == coverage_interval_symmetric(good)
    assert np.array_equal(before, y, equal_nan=True)  # caller's array untouched
    json.dumps(s.to_dict(), allow_nan=False)


def test_bad_inputs_get_clear_errors():
    with pytest.raises(ValueError, match="defined result"):
        summarise(np.full(100, np.nan))
    with pytest.raises(ValueError, match="too few"):
        coverage_interval_symmetric(np.arange(10.0), 0.95)
    with pytest.raises(ValueError, match="NaN or infinite"):
        coverage_interval_shortest(np.array([1.0, np.nan] * 50))
    with pytest.raises(ValueError, match="strictly between"):
        summarise(np.arange(100.0), 1.0)


def test_numerical_tolerance_clause_7_9_2():
    # JCGM 101 7.9.2 rule: u = c x 10^l with c an ndig-digit integer, delta = 10^l / 2.
    # u = 0.0234, ndig = 2: c = 23, l = -3, delta = 0.0005 (worked by hand from the rule).
    assert tolerance_digits(0.0234, 2) == (23, -3)
    assert numerical_tolerance(0.0234, 2) == 0.0005
    # JCGM 101 7.9.2 Example 1 (from memory): u(y) = 0.000 35 g, ndig = 2 -> 35 x 10^-5, delta = 0.000 005 g
    assert tolerance_digits(0.00035, 2) == (35, -5)
    assert numerical_tolerance(0.00035, 2) == 0.000005
    # JCGM 101 7.9.2 Example 2 (from memory): u(y) = 2 units, ndig = 1 -> delta = 0.5 units
    assert numerical_tolerance(2.0, 1) == 0.5
    # rounding carry (worked by hand): 0.0999 to two digits is 0.10 = 10 x 10^-2
    assert tolerance_digits(0.0999, 2) == (10, -2)
    assert numerical_tolerance(0.0, 2) == 0.0
    with pytest.raises(ValueError):
        numerical_tolerance(-1.0)


def test_adaptive_batch_size_clause_7_9_4():
    # JCGM 101 7.9.4 b) (from memory): M = max(J, 10^4), J least integer >= 100/(1 - p)
    assert adaptive_batch_size(0.95) == 10_000  # J = 2000
    assert adaptive_batch_size(0.999) == 100_000  # J = 100 000


def test_pooled_statistics_equal_those_of_all_values():
    rng = np.random.default_rng(54)
    parts = [rng.normal(3.0, 0.1, n) for n in (1000, 2500, 4000)]
    m, sd, n = pooled_mean_sd([summarise(part) for part in parts])
    allv = np.concatenate(parts)
    assert n == allv.size
    assert m == pytest.approx(allv.mean(), rel=1e-13)
    assert sd == pytest.approx(allv.std(ddof=1), rel=1e-10)


def test_adaptive_procedure_stops_when_stable():
    # JCGM 101 7.9.4 on Y ~ N(0, 0.5^2): ndig = 2 and u(y) = 0.50 = 50 x 10^-2 give delta = 0.005.
    rng = np.random.default_rng(55)
    m = adaptive_batch_size(0.95)
    batches, history = [], []
    while True:
        batches.append(summarise(rng.normal(0.0, 0.5, m)))
        done, check = adaptive_converged(batches, ndig=2, p=0.95)
        history.append(check)
        if done or len(batches) >= 400:
            break
    assert done, "adaptive procedure did not settle within 400 batches"
    assert not history[0].converged and history[0].to_dict()["twice_s_mean"] is None  # h = 1: go on
    assert not history[-2].converged
    assert check.delta == 0.005
    for t in (check.twice_s_mean, check.twice_s_sd, check.twice_s_low, check.twice_s_high):
        assert t <= check.delta
    # an endpoint needs far more trials than the mean: its batch SE is about
    # 0.5 x 0.027 (normal quantile, M = 10^4), so about (2 x 0.0134 / 0.005)^2 ~ 30 batches
    assert 10 < check.batches < 150
    # the pooled result approximates N(0, 0.5^2) (scipy.stats) within a few delta
    lows = np.mean([b.symmetric.low for b in batches])
    assert lows == pytest.approx(-0.5 * stats.norm.ppf(0.975), abs=2 * check.delta)
    assert check.pooled_standard_deviation == pytest.approx(0.5, abs=check.delta)
    json.dumps(check.to_dict(), allow_nan=False)


def test_adaptive_procedure_refuses_to_stop_on_disagreeing_batches():
    rng = np.random.default_rng(56)
    # u(y) ~ 0.50 -> delta = 0.005 (ndig = 2); batch means 0, 0.05, 0, 0.05 give 2 s ~ 0.029
    batches = [summarise(rng.normal(shift, 0.5, 10_000)) for shift in (0.0, 0.05, 0.0, 0.05)]
    done, check = adaptive_converged(batches, ndig=2)
    assert check.delta == 0.005
    assert not done and check.twice_s_mean > check.delta
    with pytest.raises(ValueError, match="coverage probability"):
        adaptive_converged(batches, p=0.99)


def test_validate_gum_clause_8():
    # JCGM 101 8.2: d_low = |y - U_p - y_low|, d_high = |y + U_p - y_high|, validated if both <= delta.
    v = validate_gum(10.0, (9.0, 11.0), (9.02, 10.97), delta=0.05)  # hand-worked: 0.02, 0.03
    assert v.d_low == pytest.approx(0.02) and v.d_high == pytest.approx(0.03) and v.agrees
    assert not validate_gum(10.0, (9.0, 11.0), (9.02, 10.97), delta=0.025).agrees
    json.dumps(v.to_dict(), allow_nan=False)


def test_validate_gum_on_a_model_where_the_gum_fails():
    # Y = X^2, X ~ N(1, 0.5): the GUM gives y = 1, u(y) = |2x| u(x) = 1, U_95 = 1.96,
    # an interval reaching -0.96 for a quantity that cannot be negative; Monte Carlo's
    # lower end is >= 0, so d_low > 0.96 and the GUM result must not be validated.
    x = draw(normal("X", 1.0, 0.5), 200_000, np.random.default_rng(57))
    s = summarise(x**2)
    U = 1.96 * 1.0
    v = validate_gum(1.0, (1.0 - U, 1.0 + U), (s.symmetric.low, s.symmetric.high), numerical_tolerance(1.0, 2))
    assert s.symmetric.low >= 0.0 and v.d_low > 0.96 and not v.agrees
    # and for the linear 9.2.2 case (GUM exact) the same test validates the GUM
    y = _additive_model([normal(f"X{i}", 0.0, 1.0) for i in range(1, 5)], seed=58)
    s = summarise(y)
    U = stats.norm.ppf(0.975) * 2.0
    assert validate_gum(0.0, (-U, U), (s.symmetric.low, s.symmetric.high), numerical_tolerance(2.0, 2)).agrees


def test_histogram_data_counts_every_valid_trial():
    y = np.random.default_rng(59).normal(0.0, 1.0, 10_000)
    y[:3] = np.nan
    h = histogram_data(y, bins=40)
    assert sum(h.counts) == h.n == 9_997 and h.invalid_trials == 3
    assert len(h.edges) == 41
    assert float(np.sum(np.array(h.density) * np.diff(h.edges))) == pytest.approx(1.0)
    json.dumps(h.to_dict(), allow_nan=False)


@settings(max_examples=60, deadline=None)
@given(
    values=st.lists(st.floats(-50, 50, allow_nan=False).map(lambda v: round(v, 1)), min_size=2, max_size=400),
    bins=st.integers(1, 90),
    window=st.one_of(st.none(), st.tuples(st.floats(-60, 0), st.floats(0.5, 60)).map(lambda t: (round(t[0], 1),
                                                                                                     round(t[1], 1)))),
)
def test_histogram_of_sorted_values_bins_as_numpy_does(values, bins, window):
    # The engine bins its sorted trials by a binary search per edge; numpy.histogram is the
    # reference (values on the edges, rounded to 0.1 here, fall in the bin to their right,
    # the last bin closed). Same edges, same counts.
    x = np.array(values)
    by_numpy = histogram_data(x, bins=bins, value_range=window)
    by_search = histogram_data(np.sort(x), bins=bins, value_range=window, presorted=True)
    assert by_search == by_numpy


def test_summary_of_sorted_values_equals_the_summary():
    from validate.propagation.mcstats import summarise_sorted

    y = np.random.default_rng(4).gamma(3.0, size=20_001)
    y[::97] = np.nan
    finite = np.sort(y[np.isfinite(y)])
    assert summarise_sorted(finite, int(y.size - finite.size), 0.9) == summarise(y, 0.9)
