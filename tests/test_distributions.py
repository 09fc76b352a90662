"""Sampling of input quantities, checked against JCGM 101:2008 clause 6.4 and scipy.stats.

Sources of the expected values are named beside each check. Tolerances are
Monte Carlo standard errors (a few of them) computed for the sample at hand,
with fixed seeds so the tests are deterministic.
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

from validate.metrology.sources import Source, from_replicates, normal, rectangular, trapezoid, triangular
from validate.propagation.distributions import draw, draw_many, drawing_order

N_MOMENTS = 200_000
N_SHAPE = 20_000


def _standard_errors(x: np.ndarray) -> tuple[float, float]:
    """Standard errors of the sample mean and of the sample standard deviation.

    SE(mean) = s / sqrt(n); SE(s) ~ sqrt(m4 - s^4) / (2 s sqrt(n)) (delta method on
    the variance, whose sampling variance is (m4 - s^4)/n; standard large-sample result).
    """
    n = x.size
    s = x.std(ddof=1)
    m4 = np.mean((x - x.mean()) ** 4)
    return s / math.sqrt(n), math.sqrt(m4 - s**4) / (2 * s * math.sqrt(n))


# (source, theoretical standard deviation of the trials)
MOMENT_CASES = [
    # GUM / JCGM 101 6.4.7: normal with standard deviation u
    (normal("n", 5.0, 0.2), 0.2),
    # GUM 4.3.7 / JCGM 101 6.4.2: rectangular, half-width a, u = a / sqrt 3
    (rectangular("r", -3.0, 0.6), 0.6 / math.sqrt(3)),
    # GUM 4.3.9 / JCGM 101 6.4.5: symmetric triangular, half-width a, u = a / sqrt 6
    (triangular("tri", 1.0e-4, 2.0e-7), 2.0e-7 / math.sqrt(6)),
    # JCGM 101 6.4.3: curvilinear trapezoid, u^2 = a^2/3 + d^2/9
    (trapezoid("trap", 10.0, 1.0, 0.3), math.sqrt(1.0 / 3 + 0.09 / 9)),
    # JCGM 101 6.4.9: scaled and shifted t; scale u = s/sqrt(n), standard deviation
    # u sqrt(dof/(dof - 2)) (variance of Student's t: dof/(dof - 2), any statistics text)
    (from_replicates("rep", 0.5, 0.03, 11), 0.03 / math.sqrt(11) * math.sqrt(10 / 8)),
]


@pytest.mark.parametrize("source,sd_theory", MOMENT_CASES, ids=lambda c: getattr(c, "name", ""))
def test_sample_mean_and_sd_match_theory(source, sd_theory):
    x = draw(source, N_MOMENTS, np.random.default_rng(20240601))
    assert x.dtype == np.float64 and x.shape == (N_MOMENTS,)
    se_mean, se_sd = _standard_errors(x)
    assert abs(x.mean() - source.value) < 5 * se_mean
    assert abs(x.std(ddof=1) - sd_theory) < 5 * se_sd


def test_t_standard_deviation_is_larger_than_its_scale():
    # JCGM 101 6.4.9: the GUM u is the scale; with dof = 4 the SD is u sqrt(4/2) = 1.41 u.
    # The check can fail: the SD must be distinguishable from u itself.
    src = Source("few", 0.0, 1.0, "t", dof=4)
    x = draw(src, N_MOMENTS, np.random.default_rng(7))
    assert x.std(ddof=1) > 1.25
    # the median absolute deviation of t_4 from scipy.stats (reference library)
    assert np.median(np.abs(x)) == pytest.approx(stats.t(4).ppf(0.75), abs=0.01)


# Shape checks: Kolmogorov-Smirnov against scipy.stats (reference library); the
# distributions are parameterised from JCGM 101 6.4.2, 6.4.5, 6.4.7, 6.4.9.
SHAPE_CASES = [
    (normal("n", 2.0, 0.5), stats.norm(2.0, 0.5)),
    (rectangular("r", 2.0, 0.5), stats.uniform(1.5, 1.0)),
    (triangular("tri", 2.0, 0.5), stats.triang(0.5, loc=1.5, scale=1.0)),
    (Source("t3", 2.0, 0.5, "t", dof=3), stats.t(3, loc=2.0, scale=0.5)),
]


@pytest.mark.parametrize("source,reference", SHAPE_CASES, ids=lambda c: getattr(c, "name", ""))
def test_shape_matches_scipy_reference(source, reference):
    x = draw(source, N_SHAPE, np.random.default_rng(11))
    assert stats.kstest(x, reference.cdf).pvalue > 1e-3


def test_shape_check_can_fail():
    # the KS check above rejects a wrong shape of the same standard deviation
    x = draw(rectangular("r", 0.0, math.sqrt(3.0)), N_SHAPE, np.random.default_rng(11))
    assert stats.kstest(x, stats.norm(0.0, 1.0).cdf).pvalue < 1e-6


def _trapezoid_pdf(t: float, w: float, d: float) -> float:
    """PDF of the curvilinear trapezoid centred on 0, JCGM 101 6.4.3.2 (from memory;
    it is the uniform mixture of rectangles of half-width uniform on [w - d, w + d])."""
    t = abs(t)
    if t >= w + d:
        return 0.0
    return math.log((w + d) / max(t, w - d)) / (4 * d)


def test_trapezoid_matches_its_pdf():
    w, d, value = 1.0, 0.4, 3.0
    src = trapezoid("trap", value, w, d)
    assert src.half_width == pytest.approx(w)
    x = draw(src, N_MOMENTS, np.random.default_rng(3)) - value
    assert x.min() >= -(w + d) and x.max() <= w + d
    for point in (-1.3, -1.0, -0.7, 0.0, 0.5, 0.9, 1.2):
        lo = -(w + d)
        kinks = [k for k in (-(w - d), w - d) if lo < k < point]
        expected = integrate.quad(_trapezoid_pdf, lo, point, args=(w, d), points=kinks or None)[0]
        observed = np.mean(x <= point)
        se = math.sqrt(max(expected * (1 - expected), 1e-12) / x.size)  # binomial standard error
        assert abs(observed - expected) < 5 * se + 1e-9, point


def test_bounded_distributions_stay_inside_their_limits():
    rng = np.random.default_rng(5)
    r = draw(rectangular("r", 1.0, 0.25), 50_000, rng)
    tri = draw(triangular("tri", 1.0, 0.25), 50_000, rng)
    for x in (r, tri):
        assert x.min() >= 0.75 and x.max() <= 1.25


def test_zero_uncertainty_gives_a_constant_and_draws_nothing():
    rng = np.random.default_rng(9)
    state = rng.bit_generator.state
    for kind in ("normal", "rectangular", "triangular", "trapezoid"):
        x = draw(Source("c", 4.5, 0.0, kind), 1000, rng)
        assert x.dtype == np.float64 and np.all(x == 4.5)
    assert rng.bit_generator.state == state


def test_t_with_infinite_dof_is_normal():
    x = draw(Source("inf", 0.0, 1.0, "t"), N_SHAPE, np.random.default_rng(13))
    assert stats.kstest(x, stats.norm(0.0, 1.0).cdf).pvalue > 1e-3


@pytest.mark.parametrize("bad", [0, -5, 2.5, True, "10"])
def test_bad_number_of_trials_is_refused(bad):
    with pytest.raises(ValueError, match="positive integer"):
        draw(normal("n", 0.0, 1.0), bad, np.random.default_rng(0))


SOURCES = [
    normal("photometer offset", 0.0, 0.002),
    rectangular("flask 100 mL", 1.0e-4, 1.0e-7),
    triangular("pipette 10 mL", 1.0e-5, 2.0e-8),
    from_replicates("absorbance sample", 0.412, 0.003, 5),
    trapezoid("temperature", 0.0, 2.0, 0.5),
]


def test_same_seed_reproduces_bit_for_bit_whatever_the_listing_order():
    first = draw_many(SOURCES, 10_000, np.random.default_rng(42))
    again = draw_many(list(reversed(SOURCES)), 10_000, np.random.default_rng(42))
    assert list(first) == sorted(s.name for s in SOURCES)  # the documented drawing order
    for name in first:
        assert np.array_equal(first[name], again[name])
        assert first[name].tobytes() == again[name].tobytes()
    other = draw_many(SOURCES, 10_000, np.random.default_rng(43))
    assert not np.array_equal(first["photometer offset"], other["photometer offset"])


def test_draw_many_draws_a_shared_source_once_and_refuses_name_clashes():
    pipette = SOURCES[2]
    assert len(drawing_order([pipette, pipette])) == 1
    clash = triangular("pipette 10 mL", 1.0e-5, 3.0e-8)
    with pytest.raises(ValueError, match="share the name"):
        draw_many([pipette, clash], 10, np.random.default_rng(0))


@settings(max_examples=40, deadline=None)
@given(
    value=st.floats(-1e3, 1e3),
    u=st.floats(1e-9, 1e2),
    kind=st.sampled_from(["normal", "rectangular", "triangular", "t"]),
    seed=st.integers(0, 2**32 - 1),
)
def test_location_scale_property(value, u, kind, seed):
    # JCGM 101 6.4: every sampler is value + u * (a fixed standard variate)
    src = Source("x", value, u, kind, dof=6 if kind == "t" else math.inf)
    unit = Source("x", 0.0, 1.0, kind, dof=6 if kind == "t" else math.inf)
    x = draw(src, 64, np.random.default_rng(seed))
    z = draw(unit, 64, np.random.default_rng(seed))
    np.testing.assert_allclose(x, value + u * z, rtol=1e-12, atol=1e-12 * (abs(value) + u))
    if kind == "rectangular":
        a = u * math.sqrt(3)
        assert np.all(np.abs(x - value) <= a * (1 + 1e-12) + 1e-12 * abs(value))
