"""The expected residual mean square of preparation means read unequally often.

For a least-squares fit with p parameters through N means, the residuals are (I - H) e, so
E[s_m^2] = sum_i (1 - h_ii) var(e_i) / (N - p) with var(e_i) = u_p^2 + s_r^2/m_i (h_ii the
leverage; Draper and Smith, Applied Regression Analysis, from memory). validate splits s_m^2 with
that coefficient of s_r^2 (validate.model.scatter.residual_inverse_count). Checked here against
simulation (fixed seeds: sampling error, not luck) and against the approximation it replaced,
u_p^2 + s_r^2 mean(1/m_i), which is exact only when the leverages or the counts are equal.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from validate.model.scatter import leverages, residual_inverse_count

U_P, S_R = 0.0015, 0.002  # absorbance, invented


def _simulated_mean_square(xs, counts, parameters, rng, trials=20_000):
    """Mean and its standard error of the residual mean square over `trials` simulated lines."""
    x = np.asarray(xs, float)
    sd = np.sqrt(U_P**2 + S_R**2 / np.asarray(counts, float))
    y = 0.01 + 0.08 * x + rng.normal(0.0, 1.0, (trials, x.size)) * sd
    design = np.vander(x, parameters, increasing=True)
    residual = y - y @ (design @ np.linalg.pinv(design)).T
    ms = np.sum(residual**2, axis=1) / (x.size - parameters)
    return float(np.mean(ms)), float(np.std(ms) / np.sqrt(trials))


def _expected(xs, counts, parameters):
    return U_P**2 + S_R**2 * residual_inverse_count(xs, None, counts, parameters)


def test_leverages_sum_to_the_number_of_parameters_and_match_the_textbook_line():
    xs = [0.0, 1.0, 2.0, 5.0, 10.0]
    h = leverages(xs, None, 2)
    assert h.sum() == pytest.approx(2.0, abs=1e-12)  # trace of H = p
    x = np.asarray(xs)
    textbook = 1 / x.size + (x - x.mean()) ** 2 / np.sum((x - x.mean()) ** 2)  # a straight line's h_ii
    assert h == pytest.approx(textbook, abs=1e-12)
    assert leverages(xs, None, 3).sum() == pytest.approx(3.0, abs=1e-12)
    weighted = leverages(xs, [1.0, 2.0, 1.0, 0.5, 0.25], 2)
    assert weighted.sum() == pytest.approx(2.0, abs=1e-12)


def test_equal_counts_give_one_over_m():
    assert residual_inverse_count([0, 1, 2, 3, 9], None, [3] * 5, 2) == pytest.approx(1 / 3, rel=1e-12)


def test_a_rarely_read_point_of_high_leverage_departs_from_the_mean_of_one_over_m():
    # 5 standards read 6 times and one far point read once: the approximation counts that point's
    # reading scatter fully; the exact form by its (small) 1 - h_ii
    xs, counts = [0, 1, 2, 3, 4, 20], [6, 6, 6, 6, 6, 1]
    rng = np.random.default_rng(20261202)
    mean, se = _simulated_mean_square(xs, counts, 2, rng)
    assert mean == pytest.approx(_expected(xs, counts, 2), abs=4 * se)
    approximation = U_P**2 + S_R**2 * np.mean(1 / np.asarray(counts, float))
    assert abs(approximation - mean) > 10 * se  # the old form is off by far more than sampling error


@settings(max_examples=15, deadline=None, derandomize=True)
@given(st.lists(st.tuples(st.floats(0.0, 10.0), st.integers(1, 6)), min_size=5, max_size=9),
       st.sampled_from([2, 3]))
def test_the_exact_form_matches_simulation(points, parameters):
    xs = [round(x, 2) for x, _ in points]
    counts = [m for _, m in points]
    if len(set(xs)) < parameters + 1:  # the fit needs distinct concentrations
        return
    rng = np.random.default_rng(len(xs) * 100 + sum(counts))
    mean, se = _simulated_mean_square(xs, counts, parameters, rng)
    assert mean == pytest.approx(_expected(xs, counts, parameters), abs=4.5 * se)
