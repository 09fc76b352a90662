"""The compiled fixed point (validate.model.kernels) against the numpy path it replaces.

The compiled loop solves the same equations as validate/model/fixed_point.py with the same
operations in the same order, so every trial's K, line, corrected standards and ICE tables must
agree with the numpy path's to round-off: checked to 1e-12 relative (they agree bit for bit on
this machine, but a compiler may contract operations differently elsewhere) on the nickel demo's
trials and on random studies (hypothesis). Which trials are undefined (nan) must agree exactly.
The studies generated here are invented; the readings follow the 1:1 mass-action law (IUPAC
definition of a stability constant, K = [ML]/([M][L])) with noise added per trial.
"""

from __future__ import annotations

import copy
import os
import subprocess
import sys
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
from conftest import DEMOS, copy_demo
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from validate.model import equilibrium, fixed_point, kernels
from validate.model.ice import complex_concentration
from validate.model.standards import iterate_standards, study_columns
from validate.propagation.distributions import draw_many
from validate.propagation.montecarlo import propagate_mc

ROOT = Path(__file__).resolve().parents[1]
RTOL = 1e-12

pytest.importorskip("numba")  # a dependency (pyproject.toml); without it only the numpy path exists


@contextmanager
def compiled(on: bool):
    previous = kernels.enable(on)
    try:
        yield
    finally:
        kernels.enable(previous)


def _solve(cols, on: bool, **kwargs) -> fixed_point.Solved:
    with compiled(on), np.errstate(all="ignore"):
        return fixed_point.solve(cols, **kwargs)


def _same(a, b, what: str, atol: float = 0.0) -> None:
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    np.testing.assert_array_equal(np.isnan(a), np.isnan(b), err_msg=f"{what}: undefined trials differ")
    np.testing.assert_allclose(a, b, rtol=RTOL, atol=atol, equal_nan=True, err_msg=what)


def _compare(cols, scale: dict | None = None, **kwargs) -> tuple[fixed_point.Solved, fixed_point.Solved]:
    """Both paths on `cols`; `scale` (K, slope, intercept, concentration: the study's own sizes) sets
    an absolute floor of RTOL times that size, for trials where a quantity is driven towards zero
    (a degenerate random study whose K collapses: both paths give about 0, in different round-off)."""
    scale = scale or {}
    floor = {name: RTOL * scale.get(name, 0.0) for name in ("K", "slope", "intercept", "concentration")}
    fast, reference = _solve(cols, True, **kwargs), _solve(cols, False, **kwargs)
    for name in ("K", "slope", "intercept"):
        _same(getattr(fast, name), getattr(reference, name), name, floor[name])
    for j, (f, r) in enumerate(zip(fast.states, reference.states, strict=True)):
        for name in ("complex_conc", "free_M", "free_L", "K"):
            _same(getattr(f, name), getattr(r, name), f"mixture {j}: {name}",
                  floor["K" if name == "K" else "concentration"])
    # the history holds relative changes of K between steps: differences of nearly equal numbers,
    # so round-off in K (1e-16 relative) shows in them absolutely, not relatively
    for what, a, b in (("last change", fast.change, reference.change),
                       ("largest change per step", fast.history, reference.history)):
        a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
        np.testing.assert_array_equal(np.isnan(a), np.isnan(b), err_msg=f"{what}: undefined trials differ")
        np.testing.assert_allclose(a, b, rtol=RTOL, atol=1e-13, equal_nan=True, err_msg=what)
    return fast, reference


def _corrected_standards(solved: fixed_point.Solved, cols) -> list[np.ndarray]:
    """[ML] of every corrected standard at the solved K (the quadratic root of ice.py)."""
    with np.errstate(all="ignore"):
        return [complex_concentration(solved.K * phi, m, l_)
                for m, l_, phi in zip(cols.std_M, cols.std_L, cols.factors, strict=True)]


def test_the_compiled_path_is_there():
    # numba is a dependency: the compiled path must load here, or the comparisons below compare
    # the numpy path with itself
    with compiled(True):
        assert kernels.available()


def test_the_nickel_demos_trials_agree_with_the_numpy_path(nickel_demo):
    model = nickel_demo.model
    draws = draw_many(list(model.sources.values()), 25_000, np.random.default_rng(7))  # more than a block
    sm, sl, sa, reps, pm, pl, pa = model.columns(draws)
    cols = study_columns((sm, sl, sa), (pm, pl, pa), reps, model.combination_weights())
    fast, reference = _compare(cols, start=model.start_K, limiting_totals=sl)
    assert np.isfinite(fast.K).mean() > 0.99
    for i, (f, r) in enumerate(zip(_corrected_standards(fast, cols), _corrected_standards(reference, cols),
                                   strict=True)):
        _same(f, r, f"standard {i}: corrected [ML]")
    # and through the model: every output of the equilibrium model
    with compiled(True), np.errstate(all="ignore"):
        out_fast = model.evaluate(draws)
    with compiled(False), np.errstate(all="ignore"):
        out_reference = model.evaluate(draws)
    for label in model.result_labels:
        _same(out_fast[label], out_reference[label], label)


@st.composite
def studies(draw):
    """An invented study: standards with one reagent in excess (or not), mixtures, readings from
    the mass-action law at K with per-trial noise; counts, factors, some weights 0."""
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    K = 10.0 ** draw(st.floats(0.5, 5.0))
    scale = 1.0 / K
    ns, nm, n = draw(st.integers(2, 8)), draw(st.integers(1, 6)), draw(st.integers(1, 300))
    excess = 10.0 ** draw(st.floats(0.0, 2.5))
    noise = 10.0 ** draw(st.floats(-6.0, -1.0))
    eps, blank = draw(st.floats(0.5, 5.0)) * K, draw(st.floats(0.0, 0.05))
    std_L = [scale * (i + 1) * rng.uniform(0.05, 0.5) for i in range(ns)]
    std_M = [excess * scale * rng.uniform(0.5, 2.0) for _ in range(ns)]
    mix_M = [scale * rng.uniform(0.1, 5.0) for _ in range(nm)]
    mix_L = [scale * rng.uniform(0.1, 5.0) for _ in range(nm)]

    def trials(values, exact):
        return [np.asarray(v) * (1.0 + noise * rng.standard_normal(n)) if exact else v for v in values]

    def readings(ms, ls):
        return [blank + eps * complex_concentration(K, m, l_) + noise * rng.standard_normal(n)
                for m, l_ in zip(ms, ls, strict=True)]
    weights = [draw(st.sampled_from([0.0, 0.3, 1.0, 2.5])) for _ in range(nm)]
    if not any(weights):
        weights[0] = 1.0
    counts = [draw(st.sampled_from([1, 1, 2, 3])) for _ in range(ns)]
    factors = [draw(st.sampled_from([1.0, 1.0, 0.8, 1.2])) for _ in range(ns)]
    cols = study_columns((trials(std_M, draw(st.booleans())), std_L, readings(std_M, std_L)),
                         (trials(mix_M, draw(st.booleans())), mix_L, readings(mix_M, mix_L)),
                         counts, weights, factors)
    start = draw(st.sampled_from([None, K, 1.3 * K]))
    sizes = {"K": K, "slope": eps, "intercept": blank + 1.0, "concentration": 5.0 * excess * scale}
    return cols, start, std_L, draw(st.sampled_from([12, 12, 12, 4, 2])), sizes  # mostly enough steps to settle


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(studies())
def test_random_studies_agree_with_the_numpy_path(study):
    cols, start, limiting, steps, sizes = study
    fast, reference = _compare(cols, sizes, start=start, limiting_totals=limiting, max_steps=steps)
    for i, (f, r) in enumerate(zip(_corrected_standards(fast, cols), _corrected_standards(reference, cols),
                                   strict=True)):
        _same(f, r, f"standard {i}: corrected [ML]", RTOL * sizes["concentration"])


def _reported_reference(solved: fixed_point.Solved, reported: fixed_point.Reported) -> list[np.ndarray]:
    """What EquilibriumModel.evaluate's numpy path makes of the ICE tables: each K positive or
    nan, times the scale, over the factor; the weighted sum over the kept mixtures, over the factor."""
    ks = [np.where(state.K > 0, state.K, np.nan) * reported.scale for state in solved.states]
    rows = [k / reported.factor for k in ks]
    if reported.weights is not None:
        rows.append(sum(w * k for w, k, use in zip(reported.weights, ks, reported.kept, strict=True) if use)
                    / reported.factor)
    return rows


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(studies(), st.data())
def test_the_reported_rows_of_random_studies_agree_with_the_ice_tables(study, data):
    # the compiled loop's reported K's (fixed_point.solve_reported) against the numpy path's ICE
    # tables at its own fixed point, for any scale (none, one number, one per trial), unit factor,
    # combination weights (none; some negative, as generalised least squares gives) and kept points
    cols, start, limiting, steps, sizes = study
    n, nm = cols.trials(), len(cols.mix_A)
    rng = np.random.default_rng(data.draw(st.integers(0, 2**32 - 1)))
    scale = data.draw(st.sampled_from([1.0, 0.97, "trials"]))
    scale = 1.0 + 0.01 * rng.standard_normal(n) if scale == "trials" else scale
    weights = data.draw(st.none() | st.lists(st.floats(-1.0, 2.0), min_size=nm, max_size=nm).map(tuple))
    kept = tuple(data.draw(st.lists(st.booleans(), min_size=nm, max_size=nm)))
    reported = fixed_point.Reported(scale, data.draw(st.sampled_from([1.0, 1e-3, 3.0])), weights, kept)
    with compiled(True), np.errstate(all="ignore"):
        rows = fixed_point.solve_reported(cols, reported, start=start, limiting_totals=limiting, max_steps=steps)
    reference = _reported_reference(_solve(cols, False, start=start, limiting_totals=limiting, max_steps=steps),
                                    reported)
    assert rows is not None and len(rows) == len(reference) == nm + (weights is not None)
    # a K driven towards zero in a degenerate study: an absolute floor of RTOL at the study's K size
    floor = RTOL * 1.1 * sizes["K"] * (1.0 + sum(abs(w) for w in weights or ())) / reported.factor
    for j, (found, expected) in enumerate(zip(rows, reference, strict=True)):
        _same(found, np.broadcast_to(expected, (n,)), f"reported row {j}", floor)


def _variant_of_the_demo(tmp_path):
    """The nickel demo with a reaction enthalpy (K carried to the stated temperature: a scale per
    trial) and a standard made without metal (a total of exactly 0 written into the loop's
    input); its two readings are invented, like the demo's. One point then drops out."""
    folder = copy_demo(tmp_path, DEMOS / "nickel_complex")
    method = folder / "method.toml"
    text = method.read_text(encoding="utf-8").replace(
        'ionic_strength = "0.10 mol/L"\n',
        'ionic_strength = "0.10 mol/L"\nreaction_enthalpy = { value = "-20 kJ/mol", u = "5 kJ/mol" }\n', 1)
    method.write_text(text + '\n[equilibrium.standards.E0]\nligand = { item = "burette_10", volume = "1.00 mL" }\n'
                      'flask = "flask_25"\n', encoding="utf-8")
    with (folder / "readings.csv").open("a", encoding="utf-8") as readings:
        readings.write("E0,0.0031\nE0,0.0035\n")
    from validate.workflow import pipeline
    return pipeline.analyse(method, trials=None, advice=False).model


def test_the_models_outputs_agree_with_the_numpy_path_in_every_setting(nickel_demo, tmp_path):
    # EquilibriumModel.evaluate on trials: the compiled loop's reported K's (with the totals and
    # readings written into its inputs) against the numpy path's, on the demo, on the demo without
    # combination weights and with a point left out, and on a variant with a temperature scale per
    # trial, a total of 0 and a point that drops out at the estimates
    variant = _variant_of_the_demo(tmp_path)
    assert variant.temperature_name is not None and variant.excluded
    unweighted, one_out = copy.copy(nickel_demo.model), copy.copy(nickel_demo.model)
    unweighted.weights = None
    one_out.excluded = {one_out.points[1]: "left out by this test"}
    for model in (nickel_demo.model, unweighted, one_out, variant):
        draws = draw_many(list(model.sources.values()), 12_000, np.random.default_rng(11))
        with compiled(True), np.errstate(all="ignore"):
            fast = {label: np.array(v) for label, v in model.evaluate(draws).items()}
        with compiled(False), np.errstate(all="ignore"):
            reference = model.evaluate(draws)
        assert fast.keys() == reference.keys() and list(fast) == model.result_labels
        for label in model.result_labels:
            _same(fast[label], reference[label], label)


def test_the_columns_written_into_the_loops_inputs_are_the_columns(tmp_path):
    # the totals and readings written straight into the compiled loop's input arrays are, bit for
    # bit, those `columns` makes (standards, mixtures and series points; a total of 0 included)
    model = _variant_of_the_demo(tmp_path)
    draws = draw_many(list(model.sources.values()), 3000, np.random.default_rng(2))
    with np.errstate(all="ignore"):
        sm, sl, sa, _, pm, pl, pa = model.columns(draws)
        std, mix = model._stacked_columns(draws, 3000)
    assert not np.any(std[0, -1])  # E0: no metal
    for stack, columns in ((std, (sm, sl, sa)), (mix, (pm, pl, pa))):
        for rows, column in zip(stack, columns, strict=True):
            assert len(rows) == len(column)
            for row, value in zip(rows, column, strict=True):
                assert row.tobytes() == np.broadcast_to(value, row.shape).tobytes()
    assert all(not memo.volumes for memo in model._memos if isinstance(memo, equilibrium._VolumeMemo))


def test_reported_results_held_by_the_caller_are_not_overwritten(nickel_demo):
    # the reported rows are an array the compiled path reuses once nothing refers to it
    model = nickel_demo.model
    sources = list(model.sources.values())
    with compiled(True), np.errstate(all="ignore"):
        first = model.evaluate(draw_many(sources, 3000, np.random.default_rng(1)))
        kept = {label: v.copy() for label, v in first.items()}
        second = model.evaluate(draw_many(sources, 3000, np.random.default_rng(2)))
    for label in model.result_labels:
        np.testing.assert_array_equal(first[label], kept[label])
        assert not np.array_equal(second[label], kept[label], equal_nan=True)


def test_iterate_standards_on_trials_agrees_with_the_numpy_path():
    # the study's correction entry point on arrays: K, the counts of unconverged and undefined
    # trials, and the steps taken are the same either way (invented study, K = 1000 L/mol)
    K, eps, a0, n = 1e3, 100.0, 0.02, 500
    rng = np.random.default_rng(3)
    std_M, std_L = [4e-3] * 6, [i * 2e-4 for i in range(6)]
    mix_M, mix_L = [7.5e-3, 6e-3, 9e-3], [6e-3] * 3
    std_A = [a0 + eps * complex_concentration(K, m, l_) + 2e-3 * rng.standard_normal(n)
             for m, l_ in zip(std_M, std_L, strict=True)]
    mix_A = [a0 + eps * complex_concentration(K, m, l_) + 2e-3 * rng.standard_normal(n)
             for m, l_ in zip(mix_M, mix_L, strict=True)]
    found = []
    for on in (True, False):
        with compiled(on), np.errstate(all="ignore"):
            found.append(iterate_standards(std_M, std_L, std_A, mix_M, mix_L, mix_A, iterations=3))
    fast, reference = found
    _same(fast.K, reference.K, "K")
    assert (fast.unconverged_trials, fast.undefined_trials, fast.iterations) == (
        reference.unconverged_trials, reference.undefined_trials, reference.iterations)
    assert 0 < fast.unconverged_trials < n  # three steps leave some trials unconverged: both count them


def test_monte_carlo_results_of_the_demo_are_the_same_without_the_compiled_path(nickel_demo):
    # the fallback (the compiled path switched off) gives the same Monte Carlo results and shares
    model, linear = nickel_demo.model, nickel_demo.results
    found = []
    for on in (True, False):
        with compiled(on):
            found.append(propagate_mc(model, linear, 4000, seed=9))
    for fast, reference in zip(*found, strict=True):
        fs, rs = fast.summary, reference.summary
        assert fs.invalid_trials == rs.invalid_trials
        for name in ("mean", "standard_deviation"):
            assert getattr(fs, name) == pytest.approx(getattr(rs, name), rel=RTOL), (fast.name, name)
        assert (fs.symmetric.low, fs.symmetric.high) == pytest.approx((rs.symmetric.low, rs.symmetric.high),
                                                                       rel=RTOL)
        for a, b in ((fast.shares_by_step, reference.shares_by_step),
                     (fast.shares_by_equipment, reference.shares_by_equipment)):
            assert [g for g, _ in a] == [g for g, _ in b]
            assert [s for _, s in a] == pytest.approx([s for _, s in b], rel=1e-9, abs=1e-12)


def test_the_environment_switch_turns_the_compiled_path_off(monkeypatch):
    monkeypatch.setenv(kernels.DISABLE, "1")
    assert not kernels.available()
    monkeypatch.setenv(kernels.DISABLE, "0")
    assert kernels.available()


def test_check_and_help_do_not_import_the_compiler():
    # numba takes a tenth of a second to import and more to load its cache: only the equilibrium
    # Monte Carlo trials may pay it, never `validate --help` or `validate check`
    code = ("import sys, runpy; sys.argv = ['validate'] + sys.argv[1:]\n"
            "try:\n    runpy.run_module('validate.cli', run_name='__main__')\n"
            "except SystemExit:\n    pass\n"
            "assert 'numba' not in sys.modules, 'numba was imported'\n")
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    for args in (["--help"], ["check", str(DEMOS / "nickel_complex" / "method.toml")]):
        done = subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, env=env,
                              cwd=ROOT, check=False)
        assert done.returncode == 0, (args, done.stderr[-2000:])


def test_results_held_by_the_caller_are_not_overwritten_by_the_next_solve(nickel_demo):
    # the compiled path reuses its output arrays once nothing refers to them: results still held
    # must keep their numbers when other trials are solved
    model = nickel_demo.model
    sources = list(model.sources.values())

    def solved(seed):
        draws = draw_many(sources, 3000, np.random.default_rng(seed))
        sm, sl, sa, reps, pm, pl, pa = model.columns(draws)
        cols = study_columns((sm, sl, sa), (pm, pl, pa), reps, model.combination_weights())
        return _solve(cols, True, start=model.start_K, limiting_totals=sl)
    first = solved(1)
    kept = [first.slope.copy()] + [state.K.copy() for state in first.states]
    second = solved(2)
    assert not np.array_equal(second.slope, kept[0], equal_nan=True)
    np.testing.assert_array_equal(first.slope, kept[0])
    for state, before in zip(first.states, kept[1:], strict=True):
        np.testing.assert_array_equal(state.K, before)
    del first, second
    third = solved(1)  # nothing holds the earlier results now: the same numbers as the first time
    np.testing.assert_array_equal(third.slope, kept[0])


def test_a_compiler_that_cannot_be_imported_leaves_the_numpy_path_with_a_note(monkeypatch, caplog, nickel_demo):
    # numba missing (its module cannot be imported): no error, a logged note, and the trials are
    # solved by numpy with the numbers the compiled path gives
    model = nickel_demo.model
    draws = draw_many(list(model.sources.values()), 2000, np.random.default_rng(4))
    with np.errstate(all="ignore"):
        expected = model.evaluate(draws)
    monkeypatch.setattr(kernels, "_compiled", None)
    monkeypatch.delitem(sys.modules, "validate.model._fixed_point_kernel", raising=False)
    monkeypatch.setitem(sys.modules, "numba", None)  # `import numba` now fails as if it were not installed
    with caplog.at_level("INFO", logger="validate.model.kernels"):
        assert not kernels.available()
        with np.errstate(all="ignore"):
            found = model.evaluate(draws)
    assert "not used (ModuleNotFoundError" in caplog.text and "numba" in caplog.text
    for label in model.result_labels:
        _same(found[label], expected[label], label)
