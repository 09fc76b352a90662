"""The Monte Carlo engine against JCGM 101 and against the linear engine."""

from __future__ import annotations

import math
import shutil

import numpy as np
import pytest
from conftest import DEMOS
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from validate.propagation import mcrounds as rounds
from validate.propagation.montecarlo import evaluate_trials
from validate.workflow import pipeline as api

ADDITIVE = """
[quantities.X1]
{x}
[quantities.X2]
{x}
[quantities.X3]
{x}
[quantities.X4]
{x}
[result]
name = "Y"
unit = ""
formula = "X1 + X2 + X3 + X4"
"""


def test_jcgm101_9_2_2_additive_model_normal_inputs(write_method):
    # JCGM 101:2008 clause 9.2.2 (values from memory): Y = X1+X2+X3+X4, X_i ~ N(0, 1):
    # u(y) = 2.00 and the 95 % interval [-3.92, 3.92] from both GUM and Monte Carlo.
    path = write_method(ADDITIVE.format(x='value = 0\nu = 1'))
    run = api.analyse(path, trials=1_000_000, seed=2008, advice=False)
    gum, mc = run.results[0], run.monte_carlo[0]
    assert gum.standard_uncertainty == pytest.approx(2.0)
    assert gum.expanded_uncertainty == pytest.approx(3.92, abs=0.005)
    assert mc.summary.standard_deviation == pytest.approx(2.00, abs=0.005)
    assert mc.summary.symmetric.low == pytest.approx(-3.92, abs=0.02)
    assert mc.summary.symmetric.high == pytest.approx(3.92, abs=0.02)
    assert mc.check.agrees is True  # clause 8 with delta = 0.05 (u = 2.0, two significant digits)


def test_jcgm101_9_2_3_additive_model_rectangular_inputs(write_method):
    # JCGM 101:2008 clause 9.2.3 (values from memory): each X_i rectangular with u = 1
    # (half-width sqrt 3): Monte Carlo u(y) = 2.00, 95 % interval [-3.88, 3.88], while the
    # GUM's normal gives +/-3.92. The exact 97.5 % point of the sum (Irwin-Hall) is 3.879.
    path = write_method(ADDITIVE.format(x=f'value = 0\nhalf_width = {math.sqrt(3)}'))
    run = api.analyse(path, trials=1_000_000, seed=2008, advice=False)
    mc = run.monte_carlo[0]
    assert run.results[0].expanded_uncertainty == pytest.approx(3.92, abs=0.005)
    assert mc.summary.standard_deviation == pytest.approx(2.00, abs=0.005)
    assert mc.summary.symmetric.high == pytest.approx(3.88, abs=0.015)
    assert mc.summary.symmetric.low == pytest.approx(-3.88, abs=0.015)


RATIO = """
[quantities.A]
value = 1
u = {ua}
[quantities.B]
value = 1
u = {ub}
[result]
name = "ratio"
unit = ""
formula = "{formula}"
"""

fast = settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


@fast
@given(ua=st.floats(0.001, 0.05), ub=st.floats(0.001, 0.05), a=st.floats(-5, 5).filter(lambda v: abs(v) > 0.1))
def test_linear_model_engines_agree(write_method, ua, ub, a):
    # For a model linear in its inputs with normal inputs the GUM result is exact
    # (JCGM 101 5.7), so Monte Carlo must reproduce u within its own sampling error.
    path = write_method(RATIO.format(ua=ua, ub=ub, formula=f"{a} * A + B"))
    run = api.analyse(path, trials=200_000, seed=11, advice=False)
    gum, mc = run.results[0], run.monte_carlo[0]
    # relative standard error of a standard deviation from N normal trials: 1/sqrt(2N)
    assert mc.summary.standard_deviation == pytest.approx(gum.standard_uncertainty, rel=5 / math.sqrt(4e5))
    assert mc.summary.mean == pytest.approx(gum.value, abs=5 * gum.standard_uncertainty / math.sqrt(2e5))


def test_ratio_with_uncertain_denominator_is_skewed(write_method):
    # Y = A/B with u(B)/B = 0.2: the distribution of Y is skewed to the right (a known
    # property of ratios, JCGM 101 clause 1 and 5.7 note the GUM's limits), so the Monte
    # Carlo interval is asymmetric about y and the symmetric GUM interval fails clause 8.
    path = write_method(RATIO.format(ua=0.01, ub=0.2, formula="A / B"))
    run = api.analyse(path, trials=400_000, seed=5, advice=False)
    gum, mc = run.results[0], run.monte_carlo[0]
    low, high = mc.summary.symmetric.low, mc.summary.symmetric.high
    assert (high - gum.value) > 1.3 * (gum.value - low)
    assert mc.check.agrees is False
    assert mc.summary.shortest.width < mc.summary.symmetric.width


def test_same_seed_same_numbers(write_method):
    path = write_method(RATIO.format(ua=0.01, ub=0.05, formula="A / B"))
    first = api.analyse(path, trials=50_000, seed=99, advice=False).monte_carlo[0].to_dict()
    second = api.analyse(path, trials=50_000, seed=99, advice=False).monte_carlo[0].to_dict()
    other = api.analyse(path, trials=50_000, seed=100, advice=False).monte_carlo[0].to_dict()
    assert first == second
    assert first["interval"] != other["interval"]


def test_undefined_trials_are_counted(write_method):
    # Y = sqrt(A) with A ~ N(0.1, 1): P(A < 0) = Phi(-0.1) = 0.4602 (standard normal table);
    # those trials have no defined result and must be counted, not dropped.
    path = write_method("""
[quantities.A]
value = 0.1
u = 1
[result]
name = "root"
unit = ""
formula = "sqrt(A)"
""")
    run = api.analyse(path, trials=100_000, seed=3, advice=False)
    mc = run.monte_carlo[0]
    assert mc.summary.total_trials == 100_000
    assert mc.summary.invalid_trials == pytest.approx(46_020, abs=5 * math.sqrt(1e5 * 0.46 * 0.54))
    assert mc.warning is not None and "no defined result" in mc.warning
    assert mc.to_dict()["invalid_trials"] == mc.summary.invalid_trials


def test_calibration_refitted_in_every_trial(tmp_path, monkeypatch):
    # Bottom-up demo: readings carry photometer noise, so the line differs from trial to
    # trial. Slope and intercept of each trial must equal an independent OLS fit
    # (numpy.polyfit) of that trial's standards and readings.
    folder = tmp_path / "demo"
    shutil.copytree(DEMOS / "phosphate_assay", folder)
    text = (folder / "method.toml").read_text().replace('scatter = "observed"', 'scatter = "bottom-up"')
    (folder / "method.toml").write_text(text)
    method, model = api.check(folder / "method.toml")
    from validate.propagation.distributions import draw_many
    draws = draw_many(list(model.sources.values()), 5, np.random.default_rng(1))
    intercepts, slopes = model.line(draws)
    conc = model.concentrations(draws)
    for trial in range(5):
        xs, ys = [], []
        for sid in [p.solution for _, p in model.design.fitted()]:  # the line's solutions, blanks included
            for j, a in enumerate(method.readings[sid]):
                noise = draws[f"photometer: noise, {sid} reading {j + 1}"][trial]
                offset = draws["photometer: photometric offset"][trial]
                xs.append(np.broadcast_to(conc[sid], (5,))[trial])  # a blank is a plain 0.0
                ys.append((a + noise - offset) / draws["cell_40: path length"][trial])
        slope, intercept = np.polyfit(xs, ys, 1)
        assert slopes[trial] == pytest.approx(slope, rel=1e-9)
        assert intercepts[trial] == pytest.approx(intercept, rel=1e-7, abs=1e-12)
    # and the spread of the line feeds the result: Monte Carlo and GUM agree for this
    # nearly linear model (JCGM 101 clause 8 spirit: relative difference of u below 5 %)
    from validate.propagation import mcrounds, montecarlo

    monkeypatch.setattr(mcrounds, "CHECK_GROWTH", 1)  # the trials the clause 8 comparison adds are not checked here
    run = api.analyse(folder / "method.toml", trials=None, advice=False)
    for gum, mc in zip(run.results, montecarlo.propagate_mc(run.model, run.results, 100_000, seed=4, shares=False),
                       strict=True):
        assert mc.summary.standard_deviation == pytest.approx(gum.standard_uncertainty, rel=0.05)
    out = evaluate_trials(model, 10, np.random.default_rng(0))
    assert all(v.shape == (10,) for v in out.values())


# ---- the engine's economies change no number (a property of the arithmetic, not a reference value) ----

SEVERAL = """
[quantities.A]
value = 1
u = 0.02
[quantities.B]
value = 2
half_width = 0.05
[quantities.C]
value = 0.5
u = 0.01
distribution = "t"
dof = 6
[result]
name = "Y"
unit = ""
formula = "A / B + C * A"
"""


MOMENTS = ("mean", "standard_uncertainty", "histogram")


def _strip_seed(results) -> list[dict]:
    return [r.to_dict() for r in results]


@pytest.mark.parametrize(("kept_bytes", "growth"), [(8 * 3 * 5_000, 1), (8 * 50_000, 10), (8 * 4 * 5_000, 4)])
def test_results_in_memory_groups_equal_one_pass(monkeypatch, kept_bytes, growth):
    # Room for three results' values (no trials added), or for all of them at the trials asked
    # but for one only at the clause 8 budget, or for four at the trials asked (two groups, the
    # first group's undecided results waiting for the second's to get their added trials
    # together): the results then run in groups, each on the same random stream, or in one pass
    # with tails for those beyond the room (validate.propagation.mctails); the record must be
    # the same, number for number, as one pass for all (mean and SD of tails to round-off).
    from validate.propagation import montecarlo as mc

    monkeypatch.setattr(rounds, "CHECK_GROWTH", growth)
    run = api.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=None, advice=False)
    one_pass = _strip_seed(mc.propagate_mc(run.model, run.results, 5_000, seed=4, shares=False))
    monkeypatch.setattr(rounds, "MAX_KEPT_BYTES", kept_bytes)
    grouped = _strip_seed(mc.propagate_mc(run.model, run.results, 5_000, seed=4, shares=False))
    for g, o in zip(grouped, one_pass, strict=True):  # outputs on tails (tests/test_mctails.py): mean
        assert {k: v for k, v in g.items() if k not in MOMENTS} == {k: v for k, v in o.items() if k not in MOMENTS}
        assert [g[k] for k in MOMENTS[:2]] == pytest.approx([o[k] for k in MOMENTS[:2]], rel=1e-12, abs=0.0)
        assert sum(g["histogram"]["counts"]) <= g["trials"]  # and SD to round-off, the histogram's window
    assert len(rounds.label_groups(run.model.result_labels, 5_000 * growth)) > 1
    if growth > 1:  # the case is one: some results had trials added
        assert any(r["trials"] > 5_000 for r in grouped)


def test_slices_of_the_evaluation_change_no_number(write_method, monkeypatch):
    from validate.propagation import montecarlo as mc

    run = api.analyse(write_method(SEVERAL), trials=None, advice=False)
    whole = mc.evaluate_trials(run.model, 30_000, np.random.default_rng(5))
    monkeypatch.setattr(rounds, "EVAL_SLICE", 977)  # slices that do not divide the chunk
    sliced = mc.evaluate_trials(run.model, 30_000, np.random.default_rng(5))
    assert all(np.array_equal(whole[k], sliced[k]) for k in whole)


def test_shares_from_one_set_of_draws_equal_a_fresh_draw_per_group(write_method):
    # The definition: every held-group run draws all sources from the same seed, the group's held
    # at their estimates (common random numbers); the engine draws once and runs the base once.
    # The share reported adds the linearised model as a control variate on those same trials
    # (validate.propagation.mcshares; tests/test_mc_shares.py checks it against the standards).
    from validate.propagation import mcshares
    from validate.propagation import montecarlo as mc

    run = api.analyse(write_method(SEVERAL), trials=None, advice=False)
    model, n, seed = run.model, 5_000, 8  # one batch
    estimates = mcshares.share_estimates(model, run.results, seed, ("step",), lambda k: None, n)["step"]
    base = mc.evaluate_trials(model, n, np.random.default_rng(seed))
    for group, share in estimates["Y"]:
        names = frozenset(k for k, s in model.sources.items() if (s.step or "(none)") == group)
        held = mc.evaluate_trials(model, n, np.random.default_rng(seed), names)
        assert share.plain == pytest.approx(1.0 - np.nanvar(held["Y"]) / np.nanvar(base["Y"]), rel=1e-12, abs=1e-15)
        assert share.share == share.plain - share.linear_mc + share.linear_exact
    reported = mc._shares(model, run.results, seed, ("step",), lambda k: None, n)["step"]["Y"]
    assert sorted(reported) == sorted((g, s.share, s.standard_error, s.trials) for g, s in estimates["Y"])


def test_too_many_trials_stop_with_the_limit_before_any_trial(write_method):
    from validate.model.errors import ModelError
    from validate.propagation import montecarlo as mc

    run = api.analyse(write_method(SEVERAL), trials=None, advice=False)
    most = rounds.MAX_KEPT_BYTES // 8
    with pytest.raises(ModelError, match=f"use at most {most:,} trials"):
        mc.propagate_mc(run.model, run.results, most + 1, seed=1)


def test_the_clause_8_rounds_keep_the_values_held_within_the_memory_limit(monkeypatch):
    # The values an output keeps for its coverage interval (JCGM 101 7.7) grow with every round of
    # the clause 8 comparison (8.2): the open outputs run in groups that fit MAX_KEPT_BYTES at the
    # full budget, and each group's outputs are summarised and dropped before the next, so what is
    # held never passes the limit for the waiting outputs plus the limit for one group. (This is
    # the path of outputs kept whole: the adaptive run's, and the one for outputs whose tails
    # miss a value; tests/test_mctails.py holds the tails to the limit.)
    from validate.propagation import montecarlo as mc

    monkeypatch.setattr(rounds.Tails, "of", classmethod(lambda cls, *args: None))  # every output kept whole
    monkeypatch.setattr(rounds, "CHECK_GROWTH", 10)
    run = api.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=None, advice=False)
    one_pass = _strip_seed(mc.propagate_mc(run.model, run.results, 5_000, seed=4, shares=False))
    monkeypatch.setattr(rounds, "MAX_KEPT_BYTES", 8 * 50_000)  # one output at the clause 8 budget
    held: list[int] = []
    real_round = rounds._one_round

    def watched(model, gums, kept, group, more, p, rng, progress):
        held.append(8 * (sum(k.values.size for k in kept.values()) + len(group) * more))
        return real_round(model, gums, kept, group, more, p, rng, progress)

    monkeypatch.setattr(rounds, "_one_round", watched)
    grouped = _strip_seed(mc.propagate_mc(run.model, run.results, 5_000, seed=4, shares=False))
    assert grouped == one_pass  # the same numbers as with room for everything
    assert held and max(held) <= 2 * rounds.MAX_KEPT_BYTES
