"""The clause 8 rounds on kept tails against the same rounds on every value kept whole.

The reference is the engine's own whole-value path (JCGM 101 7.6 and 7.7 on every sorted value,
as before the tails): the tails must give the same order statistics, the same shortest interval,
the same spreads, verdicts and trial counts; mean and standard deviation from shifted sums agree
to round-off (held to 1e-12 relative here); the histogram is counted on the first run's window.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import DEMOS

from validate.propagation import gumcheck, mctails
from validate.propagation import mcrounds as rounds
from validate.propagation import montecarlo as mc
from validate.propagation.gumcheck import check_gum, end_spreads
from validate.propagation.mcstats import histogram_data, summarise
from validate.workflow import pipeline as api

ADDITIVE = """
[quantities.X1]
value = 1
u = 1
[quantities.X2]
value = 2
u = 1
[result]
name = "Y"
unit = ""
formula = "X1 + X2"
"""  # the GUM interval is exact here (JCGM 101 9.2.2): the comparison agrees


def _records(run, trials: int, seed: int) -> list[dict]:
    """Each output's record, with both ends' spreads (the record shows the larger only)."""
    return [{**r.to_dict(), "spreads": (r.check.spread_low, r.check.spread_high)}
            for r in mc.propagate_mc(run.model, run.results, trials, seed=seed, shares=False)]


def _whole(monkeypatch) -> None:
    """Every open output kept whole (the path before the tails)."""
    monkeypatch.setattr(rounds.Tails, "of", classmethod(lambda cls, *args: None))


def _same_but_moments_and_histogram(tails: list[dict], whole: list[dict]) -> None:
    for t, w in zip(tails, whole, strict=True):
        for key in t:
            if key in ("mean", "standard_uncertainty") and t[key] is not None:
                assert t[key] == pytest.approx(w[key], rel=1e-12, abs=0.0), key
            elif key == "histogram":
                assert sum(t[key]["counts"]) <= t["trials"] and len(t[key]["counts"]) == len(w[key]["counts"])
            else:
                assert t[key] == w[key], key  # intervals, shortest, d_low/d_high, spreads, verdict, trials


@pytest.mark.parametrize("seed", [4, 9])
def test_phosphate_demo_tails_equal_whole_values(monkeypatch, seed):
    monkeypatch.setattr(rounds, "CHECK_GROWTH", 10)
    run = api.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=None, advice=False)
    tails = _records(run, 5_000, seed)
    assert any(r["trials"] > 5_000 for r in tails)  # some outputs had trials added
    _whole(monkeypatch)
    _same_but_moments_and_histogram(tails, _records(run, 5_000, seed))


def test_outputs_held_open_to_the_budget_equal_whole_values(monkeypatch, write_method):
    # A target no run can reach (delta/5 made 1e-9 of delta) keeps every agreeing output open
    # through every round up to the budget: each round's comparison on the tails must be the
    # whole values' comparison.
    monkeypatch.setattr(gumcheck, "TARGET_FRACTION", 1e-9)
    run = api.analyse(write_method(ADDITIVE), trials=None, advice=False)
    tails = _records(run, 20_000, 3)
    assert [r["trials"] for r in tails] == [200_000]
    _whole(monkeypatch)
    _same_but_moments_and_histogram(tails, _records(run, 20_000, 3))


def test_an_output_whose_tails_miss_a_value_is_run_again_whole(monkeypatch, write_method):
    # Tails far too thin (0.1 % of the values, where the 95 % interval's ends lie at 2.5 %): the
    # first comparison reads a value between them, and the output is run again with its values
    # whole: then every number, mean and histogram included, is the whole path's.
    monkeypatch.setattr(gumcheck, "TARGET_FRACTION", 1e-9)
    run = api.analyse(write_method(ADDITIVE), trials=None, advice=False)
    _whole_records = None
    with monkeypatch.context() as m:
        _whole(m)
        _whole_records = _records(run, 20_000, 3)
    monkeypatch.setattr(mctails, "tail_fraction", lambda p, first: 0.001)
    again: list[list[str]] = []
    real = rounds._extend_tails

    def watched(*args):
        again.append(real(*args))
        return again[-1]

    monkeypatch.setattr(rounds, "_extend_tails", watched)
    assert _records(run, 20_000, 3) == _whole_records
    assert again == [["Y"]]


def _split(values: np.ndarray, first: int, p: float, budget: int) -> mctails.Tails:
    """Tails made from the first `first` values, the rest added in uneven chunks."""
    head = values[:first]
    finite = np.sort(head[np.isfinite(head)])
    check = check_gum(float(np.median(finite)), 1.0, 0.5, finite, p)
    tails = mctails.Tails.of(finite, int(head.size - finite.size), check, p, budget)
    assert tails is not None
    for chunk in np.array_split(values[first:], 7):
        tails.add(chunk)
    tails.merge()
    return tails


@pytest.mark.parametrize(("shape", "p"), [("normal", 0.95), ("lognormal", 0.95), ("t3", 0.99), ("normal", 0.9)])
def test_tails_statistics_equal_those_of_every_value(shape, p):
    # JCGM 101 7.7.1 and 7.7.2 on every sorted value (mcstats.summarise) against the tails.
    rng = np.random.default_rng(21)
    values = {"normal": lambda n: rng.normal(3.0, 0.2, n), "lognormal": lambda n: rng.lognormal(0.0, 0.5, n),
              "t3": lambda n: rng.standard_t(3, n)}[shape](200_000)
    values[[5, 70_000, 150_000]] = [np.nan, np.inf, -np.inf]  # undefined trials, counted
    tails = _split(values, 20_000, p, 200_000)
    whole = summarise(values, p)
    got = tails.summary()
    assert (got.symmetric, got.shortest, got.n, got.invalid_trials) == (
        whole.symmetric, whole.shortest, whole.n, whole.invalid_trials)
    assert got.mean == pytest.approx(whole.mean, rel=1e-12)
    assert got.standard_deviation == pytest.approx(whole.standard_deviation, rel=1e-12)
    finite = np.sort(values[np.isfinite(values)])
    assert end_spreads(finite, p) == mctails.end_spreads_at(tails.at, tails.n, p)
    histogram = histogram_data(finite, bins=mctails.HISTOGRAM_BINS, value_range=tails.window, invalid=3,
                               presorted=True)
    assert tails.histogram() == histogram  # exact counts on the first run's window
    assert tails.held_bytes <= 8 * tails.limit < 8 * 0.35 * values.size  # the middle is not kept


def test_a_value_between_the_tails_is_refused():
    rng = np.random.default_rng(2)
    tails = _split(rng.normal(size=50_000), 10_000, 0.95, 50_000)
    with pytest.raises(mctails.Outside):
        tails.at(tails.n // 2)


def test_tails_past_their_allowance_are_refused():
    rng = np.random.default_rng(3)
    values = rng.normal(size=30_000)
    head = np.sort(values[:10_000])
    tails = mctails.Tails.of(head, 0, check_gum(0.0, 1.96, 1.0, head, 0.95), 0.95, 10_000)  # budget: no more
    assert tails is not None
    tails.add(values[10_000:])
    with pytest.raises(mctails.Outside, match="above"):
        tails.merge()


def test_tails_are_not_made_where_they_would_keep_half_the_values_or_more():
    few = np.sort(np.random.default_rng(1).normal(size=40))
    tied = np.repeat([1.0, 2.0], 5_000)  # the cuts meet
    for s in (few, tied):
        assert mctails.Tails.of(s, 0, check_gum(1.5, 1.0, 0.5, s, 0.95), 0.95, 10 * s.size) is None


def test_the_tails_of_every_open_output_fit_the_memory_limit_at_the_full_budget(monkeypatch):
    # The clause 8 rounds (JCGM 101 8.2) run the open outputs in groups whose tails, at their
    # allowance at the full budget, fit MAX_KEPT_BYTES; what they hold never passes it, and the
    # numbers are those of one group for all.
    monkeypatch.setattr(rounds, "CHECK_GROWTH", 10)
    run = api.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=None, advice=False)
    one_group = _records(run, 5_000, 4)
    room = 8 * 2 * mctails.allowance(0.95, 5_000, 50_000)  # one output's tails at the budget and its merge
    monkeypatch.setattr(rounds, "MAX_KEPT_BYTES", room)
    held: list[int] = []
    groups: list[int] = []
    real_round, real_groups = rounds._tails_round, rounds._tail_groups

    def watched(model, gums, tails, group, *rest):
        real_round(model, gums, tails, group, *rest)
        held.append(sum(t.held_bytes for name, t in tails.items() if name in group))

    def counted(tails, budget):
        found = real_groups(tails, budget)
        groups.append(len(found))
        return found

    monkeypatch.setattr(rounds, "_tails_round", watched)
    monkeypatch.setattr(rounds, "_tail_groups", counted)
    _same_but_moments_and_histogram(_records(run, 5_000, 4), one_group)
    assert groups and max(groups) > 1 and held and max(held) <= room


def test_one_first_pass_with_tails_beyond_the_memory_equals_every_value_kept(monkeypatch):
    # 10^5 trials with room for the values of two outputs only: the others keep tails cut at the
    # quantiles of their first chunk (a pilot), so one pass of draws serves all seven; against the
    # whole path (each output's values kept, in groups on the same stream) every order statistic,
    # spread, verdict and trial count is the same.
    monkeypatch.setattr(rounds, "CHECK_GROWTH", 1)
    run = api.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=None, advice=False)
    trials = 3 * rounds.CHUNK // 2
    room = 8 * 2 * trials + (5 + 1) * 8 * mctails.allowance(0.95, rounds.CHUNK, trials)  # + one tail's merge
    monkeypatch.setattr(rounds, "MAX_KEPT_BYTES", room)
    split = rounds.first_split(run.model.result_labels, trials, 0.95)
    assert split is not None and len(split[0]) == 2 and len(split[1]) == 5
    passes: list[int] = []
    real = rounds.draw_many
    monkeypatch.setattr(rounds, "draw_many", lambda *args: passes.append(args[1]) or real(*args))
    one_pass = _records(run, trials, 8)
    assert sum(passes) == trials  # the trials drawn once
    _whole(monkeypatch)
    monkeypatch.setattr(rounds, "first_split", lambda *args: None)
    _same_but_moments_and_histogram(one_pass, _records(run, trials, 8))


def test_model_outputs_named_equal_every_output(write_method):
    # The engine evaluates only the outputs it keeps: the same code, the same numbers, bit for bit.
    run = api.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=None, advice=False)
    model = run.model
    draws = mc.draw_many(list(model.sources.values()), 2_000, np.random.default_rng(6))
    every = model.evaluate(draws)
    for labels in (model.result_labels[:1], model.result_labels[2:5], model.result_labels[::-1]):
        some = model.outputs(draws, labels)
        assert set(labels) <= set(some)
        assert all(np.array_equal(some[k], every[k], equal_nan=True) for k in labels)


def test_histogram_window_is_the_interval_widened_on_each_side():
    assert mctails.histogram_window(1.0, 2.0) == pytest.approx((0.4, 2.6))
    assert mctails.histogram_window(1.0, 1.0) is None
    assert math.isclose(mctails.tail_fraction(0.95, 10**6), 0.0625)


def test_no_tails_where_they_would_keep_a_quarter_or_more_of_the_values(monkeypatch):
    # At p = 0.5 each tail would keep over 62 % (1.25 (1 - p)): the first run keeps whole values,
    # in groups where they do not fit together, and never plans tails.
    assert rounds.first_split(["a", "b", "c"], 10**6, 0.5) == (["a", "b", "c"], [])
    monkeypatch.setattr(rounds, "MAX_KEPT_BYTES", 8 * 2 * 10**6)
    assert rounds.first_split(["a", "b", "c"], 10**6, 0.5) is None
    assert rounds.first_split(["a", "b", "c"], 10**6, 0.95) == (["a"], ["b", "c"])
