"""The Monte Carlo engine (JCGM 101): the same model evaluated on arrays of trials.

Trials are drawn for every source (validate.propagation.distributions) in chunks
of CHUNK, and the model runs on slices of EVAL_SLICE trials of them, so the
calibration line is refitted in every trial without a Python loop per trial and
the model's temporary arrays stay in the processor's cache. The random stream
depends on CHUNK only; slicing the evaluation changes no number.

Memory: the output values kept for the coverage intervals are held for at most
MAX_KEPT_BYTES at once: 8 bytes per trial for a result kept whole, and for a result
whose comparison with the GUM interval (JCGM 101 8.2) is still open, or that does
not fit beside the others, only the tails of its values that its statistics read
(validate.propagation.mctails: exact order statistics, checked at every use; the
result is run again whole where a tail misses one). So the first run and the
clause 8 rounds are each one pass of draws for every result; only where even the
tails do not fit do the results run in groups, each group on the same random
stream (the same seed, so the same trials). A result is summarised as soon as it
is final and its values are dropped. A run whose single result does not fit stops
with a message before any trial. (The adaptive procedure, trials="auto", keeps
every result's values of its batches, at most MAX_ADAPTIVE_TRIALS each: it is
not split into groups.)

The engine evaluates only the results it keeps (Model.outputs: the line and the
samples named, the same code and numbers as Model.evaluate).

Budget shares (held groups) use common random numbers: one set of draws and one
base run, shared by every held-group run.

Trials whose result is undefined (NaN or infinite, e.g. a zero slope) are
counted and reported, never dropped silently (docs/design.md, "Monte Carlo").
"""

from __future__ import annotations

import math
import secrets
from dataclasses import dataclass

import numpy as np

from validate.model.assay import Model
from validate.model.errors import ModelError
from validate.propagation.distributions import draw_many
from validate.propagation.gumcheck import GumCheck, check_gum
from validate.propagation.linear import LinearResult
from validate.propagation.mcstats import (
    AdaptiveCheck,
    CoverageInterval,
    HistogramData,
    McSummary,
    adaptive_batch_size,
    adaptive_converged,
    coverage_interval_symmetric,
    histogram_data,
    summarise,
    summarise_sorted,
)
from validate.propagation.mctails import HISTOGRAM_BINS, Outside, Tails, allowance, histogram_window, tail_fraction

CHUNK = 100_000  # trials evaluated together: large enough for numpy, small enough for memory
MAX_ADAPTIVE_TRIALS = 10_000_000
SHARE_TRIALS = 50_000  # trials per held-group run for the Monte Carlo shares (common random numbers)
INVALID_WARNING = 0.001  # share of undefined trials above which a warning is shown
MAX_CHECK_TRIALS = 10_000_000  # trial budget of the JCGM 101 8.2 comparison per output
CHECK_GROWTH = 10  # ... and at most this many times the trials asked for (a small run stays small)
EVAL_SLICE = 10_000  # trials per model evaluation: its temporaries stay in the core's cache
MAX_KEPT_BYTES = 320 * 2**20  # output values kept at once; with the rest a run stays within about 600 MiB


@dataclass(frozen=True)
class McResult:
    name: str
    seed: int
    summary: McSummary
    check: GumCheck  # JCGM 101 8.2, decided beyond Monte Carlo noise
    adaptive: AdaptiveCheck | None
    histogram: HistogramData
    shares_by_step: tuple[tuple[str, float], ...]
    shares_by_equipment: tuple[tuple[str, float], ...]
    smallest_dof: float = math.inf  # least degrees of freedom of a t input that reaches the result

    @property
    def variance_exists(self) -> bool:
        """A t input with nu <= 2 has no finite variance, so neither has the output (JCGM 101 6.4.9)."""
        return self.smallest_dof > 2

    @property
    def mean_exists(self) -> bool:
        return self.smallest_dof > 1

    @property
    def warning(self) -> str | None:
        share = self.summary.invalid_trials / self.summary.total_trials
        if share > INVALID_WARNING:
            return (f"{self.summary.invalid_trials} of {self.summary.total_trials} trials ({share:.2%}) "
                    f"gave no defined result and are left out of the statistics")
        return None

    @property
    def moments_note(self) -> str | None:
        """Why the standard uncertainty and the shares are left out, or why to distrust them."""
        nu = self.smallest_dof
        if nu <= 2:
            return (f"an input drawn from a t distribution with {nu:g} degrees of freedom has no finite "
                    "variance, so the output has none: the Monte Carlo standard uncertainty and the "
                    "variance shares do not exist and are not reported; the coverage intervals stand")
        if nu <= 4:
            return (f"an input drawn from a t distribution with {nu:g} degrees of freedom (at most 4) has "
                    "no finite fourth moment: the Monte Carlo standard uncertainty and the variance "
                    "shares vary strongly between runs; rely on the coverage intervals")
        return None

    def to_dict(self) -> dict:
        s, c = self.summary, self.check
        v = c.validation
        shares = self.variance_exists
        return {
            "trials": s.total_trials, "mean": s.mean if self.mean_exists else None,
            "standard_uncertainty": s.standard_deviation if shares else None,
            "interval": [s.symmetric.low, s.symmetric.high],
            "shortest_interval": [s.shortest.low, s.shortest.high],
            "coverage_probability": s.p,
            "agrees_with_gum": c.agrees, "gum_check": c.verdict, "gum_check_note": c.explanation(),
            "invalid_trials": s.invalid_trials, "seed": self.seed,
            "gum_interval": [v.gum_low, v.gum_high], "tolerance": v.delta,
            "d_low": v.d_low, "d_high": v.d_high,
            "numerical_tolerance": c.numerical_tolerance, "tolerance_target": c.target,
            "adaptive": self.adaptive.to_dict() if self.adaptive else None,
            "warning": self.warning, "moments_note": self.moments_note,
            "histogram": {"edges": list(self.histogram.edges), "counts": list(self.histogram.counts)},
            "shares_by_step": [{"group": g, "share": x} for g, x in self.shares_by_step] if shares else [],
            "shares_by_equipment": ([{"group": g, "share": x} for g, x in self.shares_by_equipment]
                                    if shares else []),
        }


def new_seed() -> int:
    """A seed for a run where the user gave none; it is recorded so the run can be repeated."""
    return secrets.randbits(32)


def evaluate_trials(model: Model, n: int, rng: np.random.Generator, hold: frozenset = frozenset()) -> dict:
    """Output arrays of n trials; sources named in `hold` stay at their estimates.

    Every source is drawn even when held, so runs with different `hold` sets
    share their random numbers (common random numbers: their difference is
    the held sources' effect, not sampling noise)."""
    draws = draw_many(list(model.sources.values()), n, rng)
    return _evaluate(model, _held(model, draws, hold, n), n, model.result_labels)


def _held(model: Model, draws: dict[str, np.ndarray], hold, n: int) -> dict[str, np.ndarray]:
    """The draws with the sources named in `hold` at their estimates (the others shared, not copied)."""
    if not hold:
        return draws
    return {**draws, **{name: np.full(n, model.sources[name].value) for name in hold}}


def _evaluate(model: Model, draws: dict[str, np.ndarray], n: int, labels, out=None) -> dict[str, np.ndarray]:
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


def _fixed(model: Model, trials: int, rng, progress, labels=None, out=None) -> dict[str, np.ndarray]:
    """Output values of `trials` trials, kept for `labels` (every output when None); `out` may give
    the arrays to fill (label -> array of `trials`)."""
    labels = model.result_labels if labels is None else labels
    values = {label: np.empty(trials) for label in labels} if out is None else out
    sources = list(model.sources.values())
    done = 0
    while done < trials:
        n = min(CHUNK, trials - done)
        _evaluate(model, draw_many(sources, n, rng), n, labels,
                  {label: values[label][done:done + n] for label in labels})
        done += n
        progress(n)
    return values


def _adaptive(model: Model, p: float, rng, progress) -> tuple[dict, dict]:
    """JCGM 101 7.9: batches of M trials until every output's statistics are stable."""
    m = adaptive_batch_size(p)
    kept: dict[str, list[np.ndarray]] = {label: [] for label in model.result_labels}
    batches: dict[str, list] = {label: [] for label in model.result_labels}
    checks: dict[str, AdaptiveCheck] = {}
    total = 0
    while total < MAX_ADAPTIVE_TRIALS:
        for label, arr in evaluate_trials(model, m, rng).items():
            kept[label].append(arr)
            batches[label].append(summarise(arr, p))
        total += m
        progress(m)
        done = True
        for label in model.result_labels:
            ok, checks[label] = adaptive_converged(batches[label], ndig=2, p=p)
            done = done and ok
        if done:
            break
    return {k: np.concatenate(v) for k, v in kept.items()}, checks


def share_trials(trials) -> int:
    """Trials per held-group run: SHARE_TRIALS, fewer when the main run itself is smaller."""
    return SHARE_TRIALS if trials == "auto" else max(1000, min(SHARE_TRIALS, int(trials) // 4))


def _shares(model: Model, seed: int, keys: tuple[str, ...], progress,
            n: int = SHARE_TRIALS) -> dict[str, dict[str, list[tuple[str, float]]]]:
    """Share of the variance removed when one group of sources is held at its estimates:
    1 - Var(held) / Var(all), from runs of n trials on common random numbers: one set of draws
    and one base run serve every group of every key (a group holding the same sources as one
    already run is not run again)."""
    draws = draw_many(list(model.sources.values()), n, np.random.default_rng(seed))
    labels = model.result_labels
    base = _evaluate(model, draws, n, labels)
    var0 = {k: _defined_variance(v) for k, v in base.items()}
    held_var: dict[frozenset, dict[str, float]] = {}
    out = {}
    for key in keys:
        groups: dict[str, set] = {}
        for name, src in model.sources.items():
            groups.setdefault(getattr(src, key) or "(none)", set()).add(name)
        shares: dict[str, list[tuple[str, float]]] = {label: [] for label in labels}
        for group, names in groups.items():
            held = frozenset(names)
            if held not in held_var:
                arrays = _evaluate(model, _held(model, draws, held, n), n, labels)
                held_var[held] = {label: _defined_variance(arr) for label, arr in arrays.items()}
            progress(n)
            for label in labels:
                share = 1.0 - held_var[held][label] / var0[label] if var0[label] > 0 else 0.0
                shares[label].append((group, float(share)))
        out[key] = {k: sorted(v, key=lambda t: (-round(t[1], 12), t[0])) for k, v in shares.items()}
    return out


@dataclass
class _Kept:
    """One output's finite values (sorted), its count of undefined trials and its JCGM 101 8.2
    comparison."""

    values: np.ndarray
    invalid: int
    check: GumCheck

    @classmethod
    def of(cls, gum: LinearResult, arr: np.ndarray, p: float) -> _Kept:
        finite = np.isfinite(arr)
        good = arr if finite.all() else arr[finite]
        return cls(good, int(arr.size - good.size), _check(gum, good, p))


def _check(gum: LinearResult, finite: np.ndarray, p: float) -> GumCheck:
    finite.sort()  # in place, once: the check, the summary and the histogram read the sorted values
    return check_gum(gum.value, gum.expanded_uncertainty, gum.standard_uncertainty, finite, p)


def _label_groups(labels: list[str], trials_each: int) -> list[list[str]]:
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
class _Final:
    """What is kept of one output once its values are dropped."""

    summary: McSummary
    check: GumCheck
    histogram: HistogramData

    @classmethod
    def of(cls, kept: _Kept, p: float) -> _Final:
        summary = summarise_sorted(kept.values, kept.invalid, p)
        return cls(summary, kept.check, _histogram(kept, summary))

    @classmethod
    def of_tails(cls, tails: Tails) -> _Final:
        return cls(tails.summary(), tails.check, tails.histogram())


def _run_fixed(model: Model, gums: dict[str, LinearResult], trials: int, seed: int, p: float,
               progress) -> dict[str, _Final]:
    """Every output's statistics from `trials` trials of default_rng(seed). Settled outputs are
    summarised and dropped at once; open ones (JCGM 101 8.2 undecided or not yet known to
    delta/5) keep only their tails (validate.propagation.mctails) and are given their further
    trials together (`_finish`). One pass of draws serves every output (`_first_pass`) where those
    kept whole and the tails of the others fit in MAX_KEPT_BYTES; otherwise the outputs run in
    groups that fit, each group on the same random stream, so every group sees the same trials."""
    final: dict[str, _Final] = {}
    waiting: dict[str, _Kept | Tails] = {}
    again: list[str] = []
    groups = _label_groups(list(gums), trials)  # refuses a run whose single result does not fit
    split = _first_split(list(gums), trials, p)
    rng = np.random.default_rng(seed)
    if split is not None:
        _first_pass(model, gums, split, trials, p, rng, progress, (final, waiting, again))
        groups = []
    for group in groups:
        if waiting and sum(_held_bytes(k) for k in waiting.values()) + 8 * trials * len(group) > MAX_KEPT_BYTES:
            _finish(model, gums, waiting, final, trials, seed, p, rng, progress)
        rng = np.random.default_rng(seed)
        values = _fixed(model, trials, rng, progress, group)
        for name in group:
            _first_whole(gums[name], values.pop(name), trials, p, final, waiting)
    _finish(model, gums, waiting, final, trials, seed, p, rng, progress, again)
    return {name: final[name] for name in gums}


def _first_whole(gum: LinearResult, values: np.ndarray, trials: int, p: float, final: dict[str, _Final],
                 waiting: dict[str, _Kept | Tails]) -> None:
    """An output's first run from its every value: summarised into `final` when settled (or when no
    trials can be added), else its tails (or, where tails would keep most, its values) wait."""
    kept = _Kept.of(gum, values, p)
    if kept.check.settled or _budget(trials) <= trials:
        final[gum.name] = _Final.of(kept, p)
    else:
        waiting[gum.name] = Tails.of(kept.values, kept.invalid, kept.check, p, _budget(trials)) or kept


def _budget(trials: int) -> int:
    """Trials an output may reach in the JCGM 101 8.2 rounds after a first run of `trials`."""
    return min(MAX_CHECK_TRIALS, CHECK_GROWTH * trials)


def _first_split(labels: list[str], trials: int, p: float) -> tuple[list[str], list[str]] | None:
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
        _evaluate(model, draw_many(sources, n, rng), n, labels, out)
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
        gum = gums[name]
        try:
            t.merge()
            t.recheck(gum.value, gum.expanded_uncertainty, gum.standard_uncertainty)
            if t.check.settled or _budget(trials) <= trials:
                final[name] = _Final.of_tails(t)
            else:
                waiting[name] = t
        except Outside:
            again.append(name)


def _pilot(gum: LinearResult, values: np.ndarray, p: float, budget: int) -> Tails | None:
    """Tails from an output's first chunk of trials; None where they cannot be made."""
    finite = np.sort(values[np.isfinite(values)])
    try:
        check = check_gum(gum.value, gum.expanded_uncertainty, gum.standard_uncertainty, finite, p)
    except ValueError:  # too few defined trials for an interval
        return None
    return Tails.of(finite, int(values.size - finite.size), check, p, budget)


def _held_bytes(kept: _Kept | Tails) -> int:
    return kept.held_bytes if isinstance(kept, Tails) else 8 * kept.values.size


def _finish(model: Model, gums: dict[str, LinearResult], waiting: dict[str, _Kept | Tails], final: dict[str, _Final],
            trials: int, seed: int, p: float, rng, progress, again: list[str] | None = None) -> None:
    """The waiting outputs extended from the stream's state after `trials` trials (the same after
    every group), summarised into `final` and dropped: those with tails in one pass of draws
    (`_extend_tails`), those kept whole (tails would have kept nearly all) with their values. An
    output whose tails turn out not to hold an index its statistics read (and those of `again`)
    is run again whole from the start: its first `trials` trials replayed from default_rng(seed),
    then the rounds."""
    start = rng.bit_generator.state
    tails = {name: k for name, k in waiting.items() if isinstance(k, Tails)}
    whole = {name: k for name, k in waiting.items() if isinstance(k, _Kept)}
    waiting.clear()
    again = (again or []) + _extend_tails(model, gums, tails, trials, p, rng, progress, final)
    rng.bit_generator.state = start
    _extend(model, gums, whole, trials, p, rng, progress, final)
    for group in _label_groups(again, max(trials, _budget(trials))) if again else []:
        rng = np.random.default_rng(seed)
        values = _fixed(model, trials, rng, progress, group)
        _extend(model, gums, {name: _Kept.of(gums[name], values.pop(name), p) for name in group}, trials, p, rng,
                progress, final)


def _extend(model: Model, gums: dict[str, LinearResult], kept: dict[str, _Kept], total: int, p: float, rng,
            progress, final: dict[str, _Final]) -> None:
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
        final[name] = _Final.of(kept.pop(name), p)
    for group in _label_groups(list(kept), budget) if kept else []:
        rng.bit_generator.state = start
        done = total
        while True:
            open_ = [name for name in group if not kept[name].check.settled]
            more = min(done, budget - done)
            if not open_ or more <= 0:
                break
            _one_round(model, gums, kept, open_, more, p, rng, progress)
            done += more
        final.update({name: _Final.of(kept.pop(name), p) for name in group})


def _one_round(model: Model, gums: dict[str, LinearResult], kept: dict[str, _Kept], group: list[str], more: int,
               p: float, rng, progress) -> None:
    """`more` trials for the outputs of `group`, added to their kept values and compared again."""
    buffers = {}
    for name in group:  # each output's values move to a buffer with room for the new trials
        k = kept[name]
        buffers[name] = np.empty(k.values.size + more)
        buffers[name][:k.values.size] = k.values
        kept[name] = _Kept(buffers[name][:k.values.size], k.invalid, k.check)  # the old array is freed
    _fixed(model, more, rng, progress, group, {name: buffers[name][-more:] for name in group})
    for name in group:
        k, buffer = kept[name], buffers[name]
        start = k.values.size
        segment = buffer[start:]
        finite = np.isfinite(segment)
        good = segment if finite.all() else segment[finite]  # a copy only when some are undefined
        buffer[start:start + good.size] = good
        values = buffer[:start + good.size]
        kept[name] = _Kept(values, k.invalid + int(more - good.size), _check(gums[name], values, p))


def _extend_tails(model: Model, gums: dict[str, LinearResult], tails: dict[str, Tails], total: int, p: float,
                  rng, progress, final: dict[str, _Final]) -> list[str]:
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
                final[name] = _Final.of_tails(tails.pop(name))
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
        for name, values in _evaluate(model, draw_many(sources, n, rng), n, group).items():
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


def _histogram(kept: _Kept, summary: McSummary) -> HistogramData:
    """The histogram shows the central part: the 95 % interval widened by 60 % on each side."""
    window = histogram_window(summary.symmetric.low, summary.symmetric.high)
    return histogram_data(kept.values, bins=HISTOGRAM_BINS, value_range=window, invalid=kept.invalid,
                          presorted=True)


def _defined_variance(arr: np.ndarray) -> float:
    """Variance over the defined trials; nan, without numpy's warning, when fewer than two are
    defined (a point left out of an equilibrium study can have none in a held-group run)."""
    return float(np.nanvar(arr)) if np.count_nonzero(~np.isnan(arr)) > 1 else math.nan


def propagate_mc(model: Model, linear: list[LinearResult], trials: int | str = 1_000_000,
                 seed: int | None = None, shares: bool = True, progress=None) -> list[McResult]:
    """Monte Carlo results for every output, validated against the GUM results (JCGM 101 clause 8)."""
    seed = new_seed() if seed is None else int(seed)
    progress = progress or (lambda n: None)
    p = model.method.settings.coverage_probability
    gums = {gum.name: gum for gum in linear}
    checks: dict[str, AdaptiveCheck] = {}
    if trials == "auto":
        rng = np.random.default_rng(seed)
        values, checks = _adaptive(model, p, rng, progress)
        kept = {name: _Kept.of(gum, values.pop(name), p) for name, gum in gums.items()}
        final: dict[str, _Final] = {}
        _extend(model, gums, kept, min(k.values.size + k.invalid for k in kept.values()), p, rng, progress, final)
    else:
        final = _run_fixed(model, gums, int(trials), seed, p, progress)
    by = _shares(model, seed + 1, ("step", "equipment"), progress, share_trials(trials)) if shares else {}
    results = []
    for gum in linear:
        f = final[gum.name]
        results.append(McResult(gum.name, seed, f.summary, f.check, checks.get(gum.name), f.histogram,
                                tuple(by.get("step", {}).get(gum.name, ())),
                                tuple(by.get("equipment", {}).get(gum.name, ())), smallest_t_dof(model, gum)))
    return results


def symmetric_intervals(model: Model, trials: int, seed: int) -> dict[str, CoverageInterval]:
    """The probabilistically symmetric coverage interval (JCGM 101 7.7.1) of every output from
    exactly `trials` trials of default_rng(seed): no comparison with the GUM interval (so no
    trials added) and no shares. What the advisor compares before and after a change."""
    p = model.method.settings.coverage_probability
    out = {}
    for group in _label_groups(model.result_labels, trials):
        values = _fixed(model, trials, np.random.default_rng(seed), lambda n: None, group)
        for name in group:
            arr = values.pop(name)
            finite = np.sort(arr[np.isfinite(arr)])
            out[name] = coverage_interval_symmetric(finite, p, presorted=True)
    return out


def smallest_t_dof(model: Model, gum: LinearResult) -> float:
    """The least degrees of freedom of a t-distributed input that reaches the result."""
    dofs = [model.sources[row.source].dof for row in gum.contributions
            if row.contribution != 0 and model.sources[row.source].distribution == "t"]
    return min(dofs, default=math.inf)


def expected_work(trials: int | str, model: Model, shares: bool = True) -> int:
    """Trials the run will evaluate, for a progress bar (the adaptive run is open-ended)."""
    groups = len({s.step for s in model.sources.values()}) + len({s.equipment for s in model.sources.values()})
    if trials == "auto":
        main = adaptive_batch_size(model.method.settings.coverage_probability) * 10
    elif _first_split(model.result_labels, int(trials), model.method.settings.coverage_probability):
        main = int(trials)  # one pass of draws for every result
    else:  # a run too large to keep every result's values at once runs once per group of results
        per = MAX_KEPT_BYTES // (8 * int(trials)) if 8 * int(trials) <= MAX_KEPT_BYTES else 1
        main = int(trials) * -(-len(model.result_labels) // max(1, per))
    return main + (groups * share_trials(trials) if shares else 0)


__all__ = ["McResult", "propagate_mc", "evaluate_trials", "new_seed", "expected_work", "symmetric_intervals"]
