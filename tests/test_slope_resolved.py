"""Is the calibration slope significantly different from zero (Fieller's g < 1)? `slope_resolved`
skips the t quantile where the slope's t ratio exceeds the Cauchy quantile, the largest t quantile
of any nu >= 1; it must agree with `inverse_prediction`'s own test everywhere."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from validate.model.line import fit_line, inverse_prediction, slope_resolved


@pytest.mark.parametrize("q", [0.8, 0.9, 0.95, 0.975, 0.995])
def test_the_cauchy_quantile_bounds_every_t_quantile(q):
    # Student's t with nu = 1 is the Cauchy distribution, quantile tan(pi (q - 1/2)) (any
    # statistics handbook); scipy.stats.t is the reference for the others
    cauchy = math.tan(math.pi * (q - 0.5))
    assert stats.t.ppf(q, 1) == pytest.approx(cauchy, rel=1e-12)
    for nu in [1.0, 1.5, 2, 3, 5, 10, 30, 1000]:
        assert stats.t.ppf(q, nu) <= cauchy * (1 + 1e-12)


@settings(max_examples=200, deadline=None)
@given(n=st.integers(3, 8), slope=st.floats(-2.0, 2.0), noise=st.floats(1e-4, 3.0),
       seed=st.integers(0, 2**32 - 1), confidence=st.sampled_from([0.9, 0.95, 0.99]))
def test_it_agrees_with_the_inverse_prediction_everywhere(n, slope, noise, seed, confidence):
    # from steep lines (resolved without a quantile) to flat, noisy ones (not resolved)
    x = np.linspace(0.0, 1.0, n)
    y = 0.1 + slope * x + noise * np.random.default_rng(seed).standard_normal(n)
    fit = fit_line(x, y)
    expected = inverse_prediction(fit, [float(y.mean())], confidence=confidence).finite
    assert slope_resolved(fit, confidence) == expected


def test_a_flat_line_is_not_resolved():
    fit = fit_line([0.0, 1.0, 2.0, 3.0], [0.2, 0.2, 0.2, 0.2])
    assert not slope_resolved(fit)
