"""The equilibrium model computes a volume shared by several preparations once per evaluation
of trials (`validate.model.equilibrium._VolumeMemo`): a change of speed only, so the numbers
must be bit for bit those computed use by use. Checked on the invented nickel demo: model
outputs on 25 000 trials, the Monte Carlo engine with its budget shares, and the linear
(GUM) engine, whose ufloats are never shared."""

from __future__ import annotations

import numpy as np
import pytest

from validate.model import equilibrium
from validate.propagation import linear
from validate.propagation.distributions import draw_many
from validate.propagation.montecarlo import propagate_mc


def _use_by_use(monkeypatch):
    """Every use computes its own volume, as before the memo."""
    monkeypatch.setattr(equilibrium._VolumeMemo, "__call__", lambda self, term, x: term(x))


def test_the_demo_shares_volumes_between_preparations(nickel_demo):
    # the premise of the memo: uses of one flask or pipette at one volume with the same draws
    model = nickel_demo.model
    memo = next(m for m in model._memos if isinstance(m, equilibrium._VolumeMemo))
    calls = []
    draws = draw_many(list(model.sources.values()), 100, np.random.default_rng(1))
    original = equilibrium._VolumeMemo.__call__

    def counting(self, term, x):
        calls.append(term.key)
        return original(self, term, x)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(equilibrium._VolumeMemo, "__call__", counting)
        model.columns(draws)
    assert len(set(calls)) < len(calls)
    assert memo.x is None and not memo.volumes  # freed after the evaluation


def test_trials_are_bit_identical_with_and_without_the_memo(nickel_demo, monkeypatch):
    model = nickel_demo.model
    draws = draw_many(list(model.sources.values()), 25_000, np.random.default_rng(3))
    shared = model.evaluate(draws)
    _use_by_use(monkeypatch)
    own = model.evaluate(draws)
    assert shared.keys() == own.keys()
    for label in own:
        assert np.asarray(shared[label]).tobytes() == np.asarray(own[label]).tobytes(), label


def test_monte_carlo_is_bit_identical_with_and_without_the_memo(nickel_demo, monkeypatch):
    # the demo's results get no variance shares (its line's scatter has 3 degrees of freedom: no
    # finite fourth moment, validate.propagation.mcshares); a held-group run is a model evaluation
    # on other draws, which the test above covers
    model, results = nickel_demo.model, nickel_demo.results
    shared = propagate_mc(model, results, 20_000, seed=1, shares=True)
    _use_by_use(monkeypatch)
    own = propagate_mc(model, results, 20_000, seed=1, shares=True)
    assert [repr(r) for r in shared] == [repr(r) for r in own]
    assert not any(r.shares_by_step or r.shares_exist for r in own)


def test_the_linear_engine_is_unchanged_by_the_memo(nickel_demo, monkeypatch):
    model = nickel_demo.model
    shared = linear.propagate(model)
    _use_by_use(monkeypatch)
    own = linear.propagate(model)
    assert [r.to_dict() for r in shared] == [r.to_dict() for r in own]


def test_a_volume_of_trials_is_each_trials_own_volume_bit_for_bit(tmp_path):
    # the array path of a volume term (fewer passes) against the expression for one trial, on a
    # burette delivery: the difference of two readings (signs -1 and +1) with the offset and the
    # temperature; method from test_burette_rule (invented)
    import textwrap

    from test_burette_rule import METHOD

    from validate.metrology.equipment import SourceSet, volume_term
    from validate.workflow import pipeline as api

    path = tmp_path / "method.toml"
    path.write_text(textwrap.dedent(METHOD.format(volume="1.00 mL")), encoding="utf-8")
    method, _ = api.check(path)
    ss = SourceSet()
    term = volume_term(ss, method, method.solutions["diluted"].aliquot, "dilute", "diluted")
    assert len(term.key[-1]) == 2  # the two readings
    draws = draw_many(list(ss.sources.values()), 2000, np.random.default_rng(7))
    trials = term(draws)
    one_by_one = [term({name: float(arr[i]) for name, arr in draws.items()}) for i in range(2000)]
    assert isinstance(one_by_one[0], float)
    assert trials.tobytes() == np.array(one_by_one).tobytes()
