"""Repeated readings of one solution are not independent points (the line's statistical units).

The false-rejection rate of the linearity tests is simulated under a true straight line with
preparation scatter equal to reading scatter. A test at significance level alpha must reject a
true null hypothesis with probability alpha (the definition of the level; Draper and Smith,
Applied Regression Analysis, 3rd ed. (1998), section 2.1 for the lack-of-fit F test, from
memory). The F statistics are computed here vectorised over the trials with numpy (projection
onto the straight line and the quadratic); the same statistic is checked equal to the one the
package computes through its calibration design for the first trials, so the rates are those of
the package's tests. Simulated data are invented.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from validate.model.design import CalibrationDesign
from validate.model.levels import Level, Preparation
from validate.model.line import fit_line
from validate.validation.linearity import lack_of_fit_test, mandel_test

ALPHA = 0.05
TRIALS = 20_000  # binomial SD of a rate of 0.05: 0.0015, far inside the +/-0.02 band
CHECKED = 50  # trials whose statistics are compared with the package's own tests
LEVELS = np.array([1.0, 2.0, 3.0, 4.0, 5.0])
SIGMA = 0.002  # preparation and reading scatter alike (absorbance)


def _rss(x: np.ndarray, y: np.ndarray, degree: int) -> np.ndarray:
    """Residual sum of squares of a polynomial fit of every row of y (trials x points) on x."""
    design = np.vander((x - x.mean()) / np.ptp(x), degree + 1)
    hat = design @ np.linalg.pinv(design)
    resid = y - y @ hat.T
    return np.sum(resid**2, axis=1)


def _pure_error(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, int, int]:
    """Within-concentration sum of squares, its degrees of freedom and the number of concentrations."""
    levels = np.unique(x)
    ss = sum(np.sum((y[:, x == v] - y[:, x == v].mean(axis=1, keepdims=True)) ** 2, axis=1) for v in levels)
    return ss, len(x) - len(levels), len(levels)


def lof_f(x, y):
    ss_pe, df_pe, m = _pure_error(x, y)
    return ((_rss(x, y, 1) - ss_pe) / (m - 2)) / (ss_pe / df_pe), (m - 2, df_pe)


def mandel_f(x, y):
    rss1, rss2 = _rss(x, y, 1), _rss(x, y, 2)
    return (rss1 - rss2) / (rss2 / (len(x) - 3)), (1, len(x) - 3)


def _rate(f, dof) -> float:
    return float(np.mean(stats.f.sf(f, *dof) < ALPHA))


def _simulate(preparations: int, readings: int, seed: int):
    """Readings (trials x levels x preparations x readings) under a true line."""
    rng = np.random.default_rng(seed)
    shape = (TRIALS, len(LEVELS), preparations)
    prep = rng.normal(0.0, SIGMA, shape)[..., None]
    read = rng.normal(0.0, SIGMA, shape + (readings,))
    return (0.01 + 0.1 * LEVELS)[None, :, None, None] + prep + read


def _design(trial: np.ndarray) -> CalibrationDesign:
    """The package's calibration design of one trial: a level per concentration, its preparations."""
    levels = tuple(Level(f"L{i}", "standard", tuple(Preparation(f"L{i}p{j}", float(c), tuple(trial[i, j].tolist()))
                                                      for j in range(trial.shape[1])))
                   for i, c in enumerate(LEVELS))
    return CalibrationDesign(levels, (), False, ())


def _per_reading(data):
    x = np.repeat(LEVELS, data.shape[2] * data.shape[3])
    return x, data.reshape(TRIALS, -1)


def _per_preparation(data):
    x = np.repeat(LEVELS, data.shape[2])
    return x, data.mean(axis=3).reshape(TRIALS, -1)


def _same_as_package(data, x, y, lof: bool):
    """The vectorised statistics equal the package's tests on the design's points (first trials)."""
    for t in range(CHECKED):
        fit = fit_line(*_design(data[t]).point_data()[:2])
        assert np.allclose(fit.x, x) and np.allclose(fit.y, y[t], rtol=1e-12)
        assert mandel_test(fit, ALPHA).statistic == pytest.approx(mandel_f(x, y[t:t + 1])[0][0], rel=1e-7)
        result = lack_of_fit_test(fit, ALPHA)
        if lof:
            assert result.statistic == pytest.approx(lof_f(x, y[t:t + 1])[0][0], rel=1e-7)
        else:
            assert not result.evaluable and "independent points" in result.verdict


def test_one_solution_per_level_read_three_times():
    # 5 levels x 1 preparation x 3 readings, preparation SD = reading SD.
    data = _simulate(1, 3, seed=12)
    # before: every reading a point; pure error is reading noise only (issue 12 item 8 found 46 % and 22 %)
    x_r, y_r = _per_reading(data)
    before_lof, before_mandel = _rate(*lof_f(x_r, y_r)), _rate(*mandel_f(x_r, y_r))
    assert before_lof > 0.35 and before_mandel > 0.15
    # after: one point per preparation; Mandel's F(1, 2) on the means is exact, the lack-of-fit test
    # has no pure error (no level prepared twice) and says so instead of rejecting
    x, y = _per_preparation(data)
    _same_as_package(data, x, y, lof=False)
    after_mandel = _rate(*mandel_f(x, y))
    assert abs(after_mandel - ALPHA) <= 0.02, (before_lof, before_mandel, after_mandel)
    print(f"\n5 x 1 x 3: before lack-of-fit {before_lof:.3f}, Mandel {before_mandel:.3f}; "
          f"after Mandel {after_mandel:.3f}, lack-of-fit not evaluable")


def test_two_preparations_per_level_read_three_times():
    # 5 levels x 2 independent preparations x 3 readings: pure error between preparations.
    data = _simulate(2, 3, seed=13)
    x_r, y_r = _per_reading(data)
    before_lof = _rate(*lof_f(x_r, y_r))
    assert before_lof > 0.15  # pooled over readings, pure error still leans on reading noise
    x, y = _per_preparation(data)
    _same_as_package(data, x, y, lof=True)
    after_lof, after_mandel = _rate(*lof_f(x, y)), _rate(*mandel_f(x, y))
    assert abs(after_lof - ALPHA) <= 0.02 and abs(after_mandel - ALPHA) <= 0.02, (after_lof, after_mandel)
    print(f"\n5 x 2 x 3: before lack-of-fit {before_lof:.3f}; after lack-of-fit {after_lof:.3f}, "
          f"Mandel {after_mandel:.3f}")


def test_a_bare_table_is_fitted_row_by_row_and_says_so():
    # A bare table states no structure: every row is a point (as EURACHEM/CITAC CG4 Example A5
    # fits its calibration, from memory), and the output says what that means for the tests.
    from conftest import DEMOS

    from validate.validation.quickcheck import quick_check

    table = DEMOS / "quick_table" / "standards.csv"
    result = quick_check(table)
    rows = [ln for ln in table.read_text().splitlines() if ln.strip() and not ln.startswith("#")][1:]  # no header
    assert result["points"] == "every row" and result["n"] == len(rows)
    assert any("every row is fitted as an independent point" in note for note in result["notes"])
