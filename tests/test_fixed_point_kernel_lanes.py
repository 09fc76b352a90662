"""The compiled fixed point's lanes: a trial's numbers do not depend on which trials share its lanes.

The compiled loop (validate.model._fixed_point_kernel) steps LANES trials side by side, each
until its own change is settled; a settled trial keeps its numbers by a choice of values while
the others step. So solving the trials in any order must give each trial bit for bit the same K,
line, remaining change and ICE tables, and the same history of largest changes per step (a
maximum over the trials, which no order changes). Checked here with trials that take different
numbers of steps within one block (each trial's own start, some far from the fixed point), on the
invented random studies of tests/test_fixed_point_kernel.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_fixed_point_kernel import compiled, studies

from validate.model import fixed_point
from validate.model.fixed_point import Columns

pytest.importorskip("numba")


def _permuted(cols: Columns, order: np.ndarray) -> Columns:
    def cut(col):
        return tuple(v[order] if isinstance(v, np.ndarray) and v.ndim else v for v in col)
    return Columns(cut(cols.std_M), cut(cols.std_L), cut(cols.std_A), cols.counts, cut(cols.mix_M),
                   cut(cols.mix_L), cut(cols.mix_A), cols.weights, cols.factors)


def _numbers(solved: fixed_point.Solved) -> list[np.ndarray]:
    out = [solved.K, solved.slope, solved.intercept, solved.change]
    for state in solved.states:
        out += [state.complex_conc, state.free_M, state.free_L, state.K]
    return [np.array(v, dtype=float, copy=True) for v in out]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(studies(), st.data())
def test_a_trials_numbers_do_not_depend_on_the_order_of_the_trials(study, data):
    cols, _, _, steps, sizes = study
    n = cols.trials()
    rng = np.random.default_rng(data.draw(st.integers(0, 2**32 - 1)))
    # each trial its own start: at, near or far from the study's K, so a block's trials settle
    # after different numbers of steps (some never, within few steps: undefined, nan)
    start = sizes["K"] * rng.choice([1.0, 1.0 + 1e-9, 1.01, 1.5, 4.0], size=n)
    order = rng.permutation(n)
    with compiled(True), np.errstate(all="ignore"):
        straight = fixed_point.solve(cols, start=start, max_steps=steps)
        numbers = _numbers(straight)  # copies: the next solve may reuse the arrays
        shuffled = fixed_point.solve(_permuted(cols, order), start=start[order], max_steps=steps)
    for i, (a, b) in enumerate(zip(numbers, _numbers(shuffled), strict=True)):
        np.testing.assert_array_equal(a[order], b, err_msg=f"quantity {i} of the trials in another order")
    np.testing.assert_array_equal(straight.history, shuffled.history)
