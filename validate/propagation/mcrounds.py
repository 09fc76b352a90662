"""The first run of a fixed number of Monte Carlo trials and the JCGM 101 8.2 rounds that add trials.

Trials are drawn for every source (validate.propagation.distributions) in chunks of CHUNK, and
the model runs on slices of EVAL_SLICE trials of them (`evaluate`), so the calibration line is
refitted in every trial without a Python loop per trial and the model's temporary arrays stay in
the processor's cache. The random stream depends on CHUNK only; slicing the evaluation changes
no number.

What is kept of an output's trials, within MAX_KEPT_BYTES: every value (8 bytes a trial), or,
for an output whose comparison with the GUM interval is still open or that does not fit beside
the others, the tails its statistics read (validate.propagation.mctails). The first run is one
pass of draws for every output where that fits (`run_fixed`), and so are the rounds of added
trials for every open output (`_extend_tails`); an output whose tails miss a value is run again
with its values whole (`extend_whole`, which the adaptive run uses too). See
validate.propagation.montecarlo for the engine around it, docs/design.md, "Monte Carlo".
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from validate.model.assay import Model
from validate.model.errors import ModelError
from validate.propagation.distributions import draw_many
from validate.propagation.gumcheck import GumCheck, check_gum
from validate.propagation.linear import LinearResult
from validate.propagation.mcstats import HistogramData, McSummary, histogram_data, summarise_sorted
from validate.propagation.mctails import HISTOGRAM_BINS, Outside, Tails, allowance, histogram_window, tail_fraction

CHUNK = 100_000  # trials evaluated together: large enough for numpy, small enough for memory
MAX_CHECK_TRIALS = 10_000_000  # trial budget of the JCGM 101 8.2 comparison per output
CHECK_GROWTH = 10  # ... and at most this many times the trials asked for (a small run stays small)
EVAL_SLICE = 10_000  # trials per model evaluation: its temporaries stay in the core's cache
MAX_KEPT_BYTES = 256 * 2**20  # output values kept at once; with the draws of a chunk and the compiled
#                               fixed point's library (about 100 MiB) a run stays within about 600 MiB


def evaluate(model: Model, draws: dict[str, np.ndarray], n: int, labels, out=None) -> dict[str, np.ndarray]:
    """The outputs named in `labels` for n drawn trials, the model run on slices of EVAL_SLICE
    trials (elementwise arithmetic: the same numbers as one run on all n). `out` may give the
    arrays to fill (label -> array of n)."""
    out = {label: np.empty(n) for label in labels} if out is None else out
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for start in range(0, n, EVAL_SLICE):
            stop = min(start + EVAL_SLICE, n)
            part = model.outputs({name: arr[start:stop] for name, arr in draws.items()}, labels)
            for label in labels:
                out[label][start:stop] = part[label]  # a constant output broadcasts
    return out


def run_trials(model: Model, trials: int, rng, progress, labels=None, out=None) -> dict[str, np.ndarray]:
    """Output values of `trials` trials, kept for `labels` (every output when None); `out` may give
    the arrays to fill (label -> array of `trials`)."""
    labels = model.result_labels if labels is None else labels
    values = {label: np.empty(trials) for label in labels} if out is None else out
    sources = list(model.sources.values())
    done = 0
    while done < trials:
        n = min(CHUNK, trials - done)
        evaluate(model, draw_many(sources, n, rng), n, labels,
                 {label: values[label][done:done + n] for label in labels})
        done += n
        progress(n)
    return values


@dataclass
class Kept:
    """One output's finite values (sorted), its count of undefined trials and its JCGM 101 8.2
    comparison."""

    values: np.ndarray
    invalid: int
    check: GumCheck

    @classmethod
    def of(cls, gum: LinearResult, arr: np.ndarray, p: float) -> Kept:
        finite = np.isfinite(arr)
        good = arr if finite.all() else arr[finite]
        return cls(good, int(arr.size - good.size), _check(gum, good, p))


def _check(gum: LinearResult, finite: np.ndarray, p: float) -> GumCheck:
    finite.sort()  # in place, once: the check, the summary and the histogram read the sorted values
    return check_gum(gum.value, gum.expanded_uncertainty, gum.standard_uncertainty, finite, p)


def label_groups(labels: list[str], trials_each: int) -> list[list[str]]:
    """The outputs in groups whose values fit in MAX_KEPT_BYTES at `trials_each` trials."""
    per = 8 * trials_each
    if per > MAX_KEPT_BYTES:
        most = MAX_KEPT_BYTES // 8
        raise ModelError(f"{trials_each:,} Monte Carlo trials would need {per / 2**20:,.0f} MiB for the values of "
                         f"one result (the coverage intervals need them all), above the limit of "
                         f"{MAX_KEPT_BYTES / 2**20:,.0f} MiB that keeps a run within about 600 MiB; use at most "
                         f"{most:,} trials (JCGM 101 7.2.2 finds about 10^6 enough for a 95 % interval)")
    size = max(1, MAX_KEPT_BYTES // per)
    return [labels[i:i + size] for i in range(0, len(labels), size)]


@dataclass(frozen=True)
class Final:
    """What is kept of one output once its values are dropped."""

    summary: McSummary
    check: GumCheck
    histogram: HistogramData

    @classmethod
    def of(cls, kept: Kept, p: float) -> Final:
        summary = summarise_sorted(kept.values, kept.invalid, p)
        return cls(summary, kept.check, _histogram(kept, summary))

    @classmethod
    def of_tails(cls, tails: Tails) -> Final:
        return cls(tails.summary(), tails.check, tails.histogram())


def run_fixed(model: Model, gums: dict[str, LinearResult], trials: int, seed: int, p: float,
              progress) -> dict[str, Final]:
    """Every output's statistics from `trials` trials of default_rng(seed). Settled outputs are
    summarised and dropped at once; open ones (JCGM 101 8.2 undecided or not yet known to
    delta/5) keep only their tails (validate.propagation.mctails) and are given their further
    trials together (`_finish`). One pass of draws serves every output (`_first_pass`) where those
    kept whole and the tails of the others fit in MAX_KEPT_BYTES; otherwise the outputs run in
    groups that fit, each group on the same random stream, so every group sees the same trials."""
    final: dict[str, Final] = {}
    waiting: dict[str, Kept | Tails] = {}
    again: list[str] = []
    groups = label_groups(list(gums), trials)  # refuses a run whose single result does not fit
    split = first_split(list(gums), trials, p)
    rng = np.random.default_rng(seed)
    if split is not None:
        _first_pass(model, gums, split, trials, p, rng, progress, (final, waiting, again))
        groups = []
    for group in groups:
        if waiting and sum(_held_bytes(k) for k in waiting.values()) + 8 * trials * len(group) > MAX_KEPT_BYTES:
            _finish(model, gums, waiting, final, trials, seed, p, rng, progress)
        rng = np.random.default_rng(seed)
        values = run_trials(model, trials, rng, progress, group)
        for name in group:
            _first_whole(gums[name], values.pop(name), trials, p, final, waiting)
    _finish(model, gums, waiting, final, trials, seed, p, rng, progress, again)
    return {name: final[name] for name in gums}


def _first_whole(gum: LinearResult, values: np.ndarray, trials: int, p: float, final: dict[str, Final],
                 waiting: dict[str, Kept | Tails]) -> None:
    """An output's first run from its every value: summarised into `final` when settled (or when no
    trials can be added), else its tails (or, where tails would keep most, its values) wait."""
    kept = Kept.of(gum, values, p)
    if kept.check.settled or _budget(trials) <= trials:
        final[gum.name] = Final.of(kept, p)
    else:
        waiting[gum.name] = Tails.of(kept.values, kept.invalid, kept.check, p, _budget(trials)) or kept


def _budget(trials: int) -> int:
    """Trials an output may reach in the JCGM 101 8.2 rounds after a first run of `trials`."""
    return min(MAX_CHECK_TRIALS, CHECK_GROWTH * trials)


def first_split(labels: list[str], trials: int, p: float) -> tuple[list[str], list[str]] | None:
    """The most outputs (in order) whose every value of the first run fits in MAX_KEPT_BYTES beside
    the tails of the rest (at their allowance after `trials`, and room for one more copy while
    one is merged); None when even one does not."""
    whole_bytes, tail_bytes = 8 * trials, 8 * allowance(p, min(CHUNK, trials), trials)
    if 4 * tail_fraction(p, min(CHUNK, trials)) > 1:  # no tails are made (mctails.Tails.of): whole or groups
        tail_bytes = MAX_KEPT_BYTES + 1
    for k in range(len(labels), 0, -1):
        tails = len(labels) - k
        if k * whole_bytes + (tails + (1 if tails else 0)) * tail_bytes <= MAX_KEPT_BYTES:
            return labels[:k], labels[k:]
    return None


def _first_pass(model: Model, gums: dict[str, LinearResult], split: tuple[list[str], list[str]], trials: int,
                p: float, rng, progress, into: tuple[dict, dict, list]) -> None:
    """The first run of every output in one pass of draws: the outputs of split[0] keep every
    value; those of split[1] keep tails whose cuts come from their first CHUNK trials (the
    pilot; their histogram's window too), so the pass holds what `_first_split` allowed. An output
    whose pilot gives no tails, or whose tails miss a value at the end, goes to `again` (run whole
    later). Fills (final, waiting, again) as `_first_whole` and `_finish` read them."""
    final, waiting, again = into
    whole, tailed = split
    values = {name: np.empty(trials) for name in whole}
    tails: dict[str, Tails] = {}
    sources = list(model.sources.values())
    done = 0
    while done < trials:
        n = min(CHUNK, trials - done)
        labels = whole + [name for name in tailed if done == 0 or name in tails]
        out = {name: values[name][done:done + n] if name in values else np.empty(n) for name in labels}
        evaluate(model, draw_many(sources, n, rng), n, labels, out)
        for name in labels[len(whole):]:
            if done > 0:
                tails[name].add(out[name])
            elif (pilot := _pilot(gums[name], out[name], p, _budget(trials))) is not None:
                tails[name] = pilot
            else:
                again.append(name)
        done += n
        progress(n)
    for name in whole:
        _first_whole(gums[name], values.pop(name), trials, p, final, waiting)
    for name, t in tails.items():
        _first_tails(gums[name], t, trials, into)


def _first_tails(gum: LinearResult, tails: Tails, trials: int, into: tuple[dict, dict, list]) -> None:
    """An output's first run from its tails, as `_first_whole` from every value; to `again` where
    the tails miss a value the statistics read."""
    final, waiting, again = into
    try:
        tails.merge()
        tails.recheck(gum.value, gum.expanded_uncertainty, gum.standard_uncertainty)
        if tails.check.settled or _budget(trials) <= trials:
            final[gum.name] = Final.of_tails(tails)
        else:
            waiting[gum.name] = tails
    except Outside:
        again.append(gum.name)


def _pilot(gum: LinearResult, values: np.ndarray, p: float, budget: int) -> Tails | None:
    """Tails from an output's first chunk of trials; None where they cannot be made."""
    finite = np.sort(values[np.isfinite(values)])
    try:
        check = check_gum(gum.value, gum.expanded_uncertainty, gum.standard_uncertainty, finite, p)
    except ValueError:  # too few defined trials for an interval
        return None
    return Tails.of(finite, int(values.size - finite.size), check, p, budget)


def _held_bytes(kept: Kept | Tails) -> int:
    return kept.held_bytes if isinstance(kept, Tails) else 8 * kept.values.size


def _finish(model: Model, gums: dict[str, LinearResult], waiting: dict[str, Kept | Tails], final: dict[str, Final],
            trials: int, seed: int, p: float, rng, progress, again: list[str] | None = None) -> None:
    """The waiting outputs extended from the stream's state after `trials` trials (the same after
    every group), summarised into `final` and dropped: those with tails in one pass of draws
    (`_extend_tails`), those kept whole (tails would have kept nearly all) with their values. An
    output whose tails turn out not to hold an index its statistics read (and those of `again`)
    is run again whole from the start: its first `trials` trials replayed from default_rng(seed),
    then the rounds."""
    start = rng.bit_generator.state
    tails = {name: k for name, k in waiting.items() if isinstance(k, Tails)}
    whole = {name: k for name, k in waiting.items() if isinstance(k, Kept)}
    waiting.clear()
    again = (again or []) + _extend_tails(model, gums, tails, trials, p, rng, progress, final)
    rng.bit_generator.state = start
    extend_whole(model, gums, whole, trials, p, rng, progress, final)
    for group in label_groups(again, max(trials, _budget(trials))) if again else []:
        rng = np.random.default_rng(seed)
        values = run_trials(model, trials, rng, progress, group)
        extend_whole(model, gums, {name: Kept.of(gums[name], values.pop(name), p) for name in group}, trials, p,
                     rng, progress, final)


def extend_whole(model: Model, gums: dict[str, LinearResult], kept: dict[str, Kept], total: int, p: float, rng,
                 progress, final: dict[str, Final]) -> None:
    """JCGM 101 8.2 on whole values: rounds of more trials, on the same random stream, for the
    outputs whose comparison is undecided or not yet known to delta/5; each round adds as many
    trials as were run so far, up to the budget. The open outputs run in groups that fit in
    memory at the full budget, each group through all its rounds from the stream's state after
    `total` trials (the draws do not depend on which outputs are evaluated, so every output sees
    the same trials whatever its group); a group's outputs are summarised into `final` and
    dropped before the next group starts. Every output of `kept` ends in `final`. (The adaptive
    run and the outputs that tails cannot serve come here; `_extend_tails` gives the others the
    same trials in one pass.)"""
    budget = min(MAX_CHECK_TRIALS, CHECK_GROWTH * total)
    start = rng.bit_generator.state
    for name in [name for name, k in kept.items() if k.check.settled]:
        final[name] = Final.of(kept.pop(name), p)
    for group in label_groups(list(kept), budget) if kept else []:
        rng.bit_generator.state = start
        done = total
        while True:
            open_ = [name for name in group if not kept[name].check.settled]
            more = min(done, budget - done)
            if not open_ or more <= 0:
                break
            _one_round(model, gums, kept, open_, more, p, rng, progress)
            done += more
        final.update({name: Final.of(kept.pop(name), p) for name in group})


def _one_round(model: Model, gums: dict[str, LinearResult], kept: dict[str, Kept], group: list[str], more: int,
               p: float, rng, progress) -> None:
    """`more` trials for the outputs of `group`, added to their kept values and compared again."""
    buffers = {}
    for name in group:  # each output's values move to a buffer with room for the new trials
        k = kept[name]
        buffers[name] = np.empty(k.values.size + more)
        buffers[name][:k.values.size] = k.values
        kept[name] = Kept(buffers[name][:k.values.size], k.invalid, k.check)  # the old array is freed
    run_trials(model, more, rng, progress, group, {name: buffers[name][-more:] for name in group})
    for name in group:
        k, buffer = kept[name], buffers[name]
        start = k.values.size
        segment = buffer[start:]
        finite = np.isfinite(segment)
        good = segment if finite.all() else segment[finite]  # a copy only when some are undefined
        buffer[start:start + good.size] = good
        values = buffer[:start + good.size]
        kept[name] = Kept(values, k.invalid + int(more - good.size), _check(gums[name], values, p))


def _extend_tails(model: Model, gums: dict[str, LinearResult], tails: dict[str, Tails], total: int, p: float,
                  rng, progress, final: dict[str, Final]) -> list[str]:
    """The rounds of `_extend` (the same trials, the same rounds, the same comparisons) for outputs
    that keep only their tails, so that all of them share one pass of draws (in groups only where
    even their tails at the full budget do not fit in MAX_KEPT_BYTES). Returns the outputs whose
    tails missed an index their statistics read (validate.propagation.mctails.Outside); the
    others end in `final`."""
    budget = min(MAX_CHECK_TRIALS, CHECK_GROWTH * total)
    start = rng.bit_generator.state
    again: list[str] = []
    for group in _tail_groups(tails, budget):
        rng.bit_generator.state = start
        done = total
        while True:
            open_ = [name for name in group if name in tails and not tails[name].check.settled]
            more = min(done, budget - done)
            if not open_ or more <= 0:
                break
            _tails_round(model, gums, tails, open_, more, rng, progress, again)
            done += more
        for name in [name for name in group if name in tails]:
            try:
                final[name] = Final.of_tails(tails.pop(name))
            except Outside:
                again.append(name)
    return again


def _tail_groups(tails: dict[str, Tails], budget: int) -> list[list[str]]:
    """The outputs in groups whose tails, at most their allowance at the full budget, fit in
    MAX_KEPT_BYTES with room for one more copy while one is merged."""
    groups: list[list[str]] = []
    held = MAX_KEPT_BYTES
    for name, t in tails.items():
        if held + 8 * t.limit > MAX_KEPT_BYTES:
            groups.append([])
            held = 8 * t.limit  # the merge's copy
        groups[-1].append(name)
        held += 8 * t.limit
    return groups


def _tails_round(model: Model, gums: dict[str, LinearResult], tails: dict[str, Tails], group: list[str],
                 more: int, rng, progress, again: list[str]) -> None:
    """`more` trials for the outputs of `group`, drawn in chunks as `_fixed` draws them, added to
    their tails and compared again; an output whose tails miss a value moves to `again`."""
    sources = list(model.sources.values())
    done = 0
    while done < more:
        n = min(CHUNK, more - done)
        for name, values in evaluate(model, draw_many(sources, n, rng), n, group).items():
            tails[name].add(values)
        done += n
        progress(n)
    for name in group:
        gum = gums[name]
        try:
            tails[name].merge()
            tails[name].recheck(gum.value, gum.expanded_uncertainty, gum.standard_uncertainty)
        except Outside:
            del tails[name]
            again.append(name)


def _histogram(kept: Kept, summary: McSummary) -> HistogramData:
    """The histogram shows the central part: the 95 % interval widened by 60 % on each side."""
    window = histogram_window(summary.symmetric.low, summary.symmetric.high)
    return histogram_data(kept.values, bins=HISTOGRAM_BINS, value_range=window, invalid=kept.invalid,
                          presorted=True)
