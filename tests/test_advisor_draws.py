"""The advisor's Monte Carlo checks: draws shared between checks are taken from memory, bit for
bit the numbers numpy's generator draws, and only the results the ranking figure reads are
summarised. Reference: the engine itself (`symmetric_intervals` with numpy's default generator
and every result), which JCGM 101 7.7.1 defines the interval by."""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pytest
from conftest import DEMOS

from validate.advisor import advice, remembered_draws
from validate.advisor.candidates import Shares
from validate.advisor.remembered_draws import RememberedStreams
from validate.equilibrium.study import build_ready_model, settled_weights
from validate.inputs.method_file import load_method
from validate.inputs.registers import merge_registers
from validate.model.equilibrium import COMBINED
from validate.propagation.distributions import draw_many
from validate.propagation.linear import propagate
from validate.propagation.montecarlo import symmetric_intervals

TRIALS = 20_000


def _changed_models(method, model):
    """The run's model and each candidate's, as the advisor builds them."""
    entries, _ = merge_registers([Path(r) for r in method.registers_used])
    start = settled_weights(model)
    return [build_ready_model(c.apply(method), start)[0]
            for c in advice.generate(method, Shares.of(propagate(model)), entries)]


@pytest.fixture(scope="module")
def phosphate():
    method = load_method(DEMOS / "phosphate_assay" / "method.toml")
    model = build_ready_model(method)[0]
    return method, model


def _same_draws(models, seed: int, streams: RememberedStreams) -> None:
    for model in models:
        sources = list(model.sources.values())
        remembered = draw_many(sources, TRIALS, streams(seed))
        fresh = draw_many(sources, TRIALS, np.random.default_rng(seed))
        assert remembered.keys() == fresh.keys()
        for name in fresh:
            assert np.array_equal(remembered[name], fresh[name]), name
        streams.remembering = False  # the first model's draws only, as the advisor does


def test_remembered_draws_are_the_generators_own(phosphate, nickel_demo):
    # a change of uncertainties leaves most of the generator's calls as the run's: memory gives
    # them, and every array is the one numpy draws for that model from that seed
    for method, model in (phosphate, (nickel_demo.method, nickel_demo.model)):
        models = [model, *_changed_models(method, model)]
        streams = RememberedStreams()
        _same_draws(models, 3, streams)
        assert 0 < streams.reused < streams.calls


def test_memory_stops_at_its_limit(phosphate, monkeypatch):
    method, model = phosphate
    monkeypatch.setattr(remembered_draws, "MAX_REMEMBERED_BYTES", 3 * 8 * TRIALS)
    streams = RememberedStreams()
    _same_draws([model, *_changed_models(method, model)[:2]], 5, streams)
    assert 0 < streams.kept_bytes <= 3 * 8 * TRIALS and len(streams.memory) == 3


def test_a_remembered_stream_is_not_remembering_after_the_first_check(phosphate):
    method, model = phosphate
    streams = RememberedStreams()
    draw_many(list(model.sources.values()), TRIALS, streams(1))
    kept = dict(streams.memory)
    streams.remembering = False
    draw_many(list(model.sources.values()), TRIALS, streams(2))  # another seed: nothing to reuse
    assert streams.memory == kept


def test_the_figure_from_its_own_results_and_remembered_draws_is_the_full_engines(phosphate, nickel_demo):
    # the ranking figure from the results it reads and remembered draws, against the engine's
    # symmetric intervals of every result from numpy's generator: the same number
    for method, model in (phosphate, (nickel_demo.method, copy.deepcopy(nickel_demo.model))):
        results = propagate(model)
        streams = RememberedStreams()
        figures = []
        for m in [model, *_changed_models(method, model)[:2]]:
            r = propagate(m)
            full = symmetric_intervals(m, TRIALS, 4)
            widths = [(full[x.name].high - full[x.name].low) / 2 for x in r]
            assert advice._mc_figure(m, r, TRIALS, 4, streams) == advice.figure(r, widths)[2]
            streams.remembering = False
            figures.append(advice.figure(r, widths)[2])
        assert len(set(figures)) == len(figures)  # the changes do change the figure
        assert advice._figure_labels(results) == ([COMBINED] if COMBINED in model.result_labels
                                                  else [x.name for x in results])


def test_symmetric_intervals_of_some_results_are_those_of_all(nickel_demo):
    model = nickel_demo.model
    every = symmetric_intervals(model, TRIALS, 9)
    some = symmetric_intervals(model, TRIALS, 9, [COMBINED, model.result_labels[0]])
    assert set(some) == {COMBINED, model.result_labels[0]}
    assert all(some[name] == every[name] for name in some)
