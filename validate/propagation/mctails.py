"""One output's Monte Carlo values reduced to what its statistics need (JCGM 101 7.6, 7.7, 8.2).

The clause 8 comparison adds trials to an output whose verdict is open, up to 10^7; keeping
every value (8 bytes a trial) would let only a few outputs share one pass of draws. The
statistics read only the two ends of the sorted values:

- the symmetric interval's ends and the ranks that give their numerical spread (7.7.1 and
  validate.propagation.gumcheck), about (1 - p)/2 of the way in from each end;
- the shortest interval (7.7.2): the lowest and the highest M - q values, about 1 - p each;
- the mean and the standard deviation (7.6): sums;
- the histogram: counts on edges fixed beforehand;
- the count of undefined trials.

So after the first run (its values whole and sorted) an open output keeps, from then on, only
the values at or below a low cut and at or above a high cut, both set from the first run a
generous margin beyond the fraction 1 - p (`tail_fraction`), and counts the values between
them. (An output whose first run's values do not fit in memory beside the others' is cut the
same way from its first chunk of trials, a pilot, and keeps tails from the start.) The middle
values are never needed: as long as every index read lies inside the kept tails, each order
statistic is the same number the whole sorted array would give (the count of the middle makes
the indices exact). Whether it does is checked at every use; where it does not
(`Outside`), the engine runs that output again with its values whole, so no statistic ever
comes from a guess.

Two things differ from keeping every value, and only these:
- mean and standard deviation come from sums of the differences from the first run's mean
  (shifted sums: no cancellation), not numpy's pairwise sum of the sorted values; the two
  agree to round-off (relative differences of order 1e-15; the tests hold them to 1e-12);
- the histogram's window is that of the first run's (or the pilot's) symmetric interval widened
  by 60 % on each side (the one the whole values would get from the final interval is known
  only at the end; the two windows differ by the ends' Monte Carlo noise), and its counts are
  exact on it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from validate.propagation.gumcheck import GumCheck, check_gum_at, end_spreads_at
from validate.propagation.mcstats import (
    CoverageInterval,
    HistogramData,
    McSummary,
    _interval_length,
    _sorted_histogram,
    coverage_interval_symmetric,
    histogram_of_counts,
    shortest_between,
    symmetric_indices,
)

MARGIN = 0.25  # each tail keeps 1.25 (1 - p) of the first run's values, or more for a small first run
NOISE_SIGMAS = 6.0  # ... at least this many standard errors of the fraction below a cut beyond 1 - p
HISTOGRAM_BINS = 80
HISTOGRAM_WIDENING = 0.6  # the window: the 95 % interval widened by 60 % of its width on each side
SLACK = 1.02  # room in a tail's allowance for the sampling noise of its count


__all__ = ["Outside", "Tails", "allowance", "end_spreads_at", "histogram_window", "tail_fraction"]


class Outside(LookupError):
    """An index the statistics need lies between the kept tails."""


def tail_fraction(p: float, first: int) -> float:
    """The fraction of the values each tail keeps: 1 - p (what the shortest interval reads) plus a
    margin of 25 % of it, or of six standard errors of a quantile's fraction after `first` trials
    where that is more (a small first run places its cuts less surely)."""
    return (1.0 - p) + max(MARGIN * (1.0 - p), NOISE_SIGMAS * math.sqrt((1.0 - p) / first))


def allowance(p: float, first: int, trials: int) -> int:
    """The most values an output's two tails may hold at `trials` trials (beyond it: `Outside`)."""
    return int(SLACK * 2.0 * tail_fraction(p, first) * trials) + 1000


def histogram_window(symmetric_low: float, symmetric_high: float) -> tuple[float, float] | None:
    """The central window the histogram shows: the symmetric interval widened on each side."""
    spread = HISTOGRAM_WIDENING * (symmetric_high - symmetric_low)
    return (symmetric_low - spread, symmetric_high + spread) if symmetric_high > symmetric_low else None


@dataclass
class Tails:
    """The kept tails of one output's finite values, sorted, and what stands for the rest."""

    p: float
    low_cut: float  # values <= low_cut are kept in `low`
    high_cut: float  # values >= high_cut are kept in `high` (low_cut < high_cut)
    low: np.ndarray
    high: np.ndarray
    middle: int  # finite values strictly between the cuts, counted
    invalid: int  # undefined trials (NaN or infinite), counted
    shift: float  # the first run's mean: the sums are of differences from it
    sum1: float  # sum of (value - shift) over every finite value
    sum2: float  # sum of (value - shift)^2
    window: tuple[float, float]
    counts: np.ndarray  # histogram counts on the edges of `window`
    limit: int  # most values the two tails may hold (`allowance`)
    check: GumCheck
    _pending: list = field(default_factory=list, repr=False)  # (low part, high part) not yet merged

    @classmethod
    def of(cls, s: np.ndarray, invalid: int, check: GumCheck, p: float, budget: int) -> Tails | None:
        """The tails of a first run's sorted finite values `s`; None where they would keep more than
        half of them (a small first run) or the cuts meet (values so tied)."""
        m = s.size
        keep = math.ceil(tail_fraction(p, m) * m)
        window = histogram_window(*_symmetric_ends(s, p))
        if 4 * keep > m or window is None:
            return None
        low_cut, high_cut = float(s[keep - 1]), float(s[m - keep])
        below = int(np.searchsorted(s, low_cut, side="right"))
        above = int(np.searchsorted(s, high_cut, side="left"))
        if not low_cut < high_cut or 2 * (below + m - above) > m:
            return None
        shift = float(np.mean(s))
        d = s - shift
        counts = _sorted_histogram(s, HISTOGRAM_BINS, window)[0].astype(np.int64)
        return cls(p, low_cut, high_cut, s[:below].copy(), s[above:].copy(), above - below, invalid, shift,
                   float(d.sum()), float(np.sum(d * d)), window, counts, allowance(p, m, budget), check)

    @property
    def n(self) -> int:
        """Finite values so far (kept or counted)."""
        return self.low.size + self.middle + self.high.size + sum(a.size + b.size for a, b in self._pending)

    @property
    def held_bytes(self) -> int:
        return 8 * (self.low.size + self.high.size + sum(a.size + b.size for a, b in self._pending))

    def add(self, values: np.ndarray) -> None:
        """More trial values of this output (undefined ones counted and left out). They are sorted
        once: the tails are then their two ends, and the histogram's counts a search for each edge
        (the counts numpy.histogram gives, see mcstats.histogram_data)."""
        finite = np.isfinite(values)
        good = np.sort(values if finite.all() else values[finite])
        self.invalid += int(values.size - good.size)
        below = int(np.searchsorted(good, self.low_cut, side="right"))
        above = int(np.searchsorted(good, self.high_cut, side="left"))
        self._pending.append((good[:below].copy(), good[above:].copy()))  # copies: the middle is freed
        self.middle += above - below
        d = good - self.shift
        self.sum1 += float(d.sum())
        d *= d  # in place: the squares (no BLAS call: its threads cost more than the sum)
        self.sum2 += float(d.sum())
        self.counts += _sorted_histogram(good, HISTOGRAM_BINS, self.window)[0]

    def merge(self) -> None:
        """The added tail values sorted into the kept ones; `Outside` when they pass the allowance."""
        if self._pending:
            self.low = np.concatenate([self.low, *(a for a, _ in self._pending)])
            self.high = np.concatenate([self.high, *(b for _, b in self._pending)])
            self._pending.clear()
            self.low.sort()  # in place: a merge holds at most one more copy of the tails
            self.high.sort()
        if self.low.size + self.high.size > self.limit:
            raise Outside(f"the tails hold {self.low.size + self.high.size} values, above {self.limit}")

    def at(self, index: int) -> float:
        """The value at 0-based `index` of all finite values sorted; `Outside` between the tails."""
        n = self.n
        if 0 <= index < self.low.size:
            return self.low[index]
        start = n - self.high.size
        if start <= index < n:
            return self.high[index - start]
        raise Outside(f"index {index} of {n} lies between the kept tails")

    def recheck(self, y: float, expanded: float, u: float) -> GumCheck:
        """The JCGM 101 8.2 comparison on every value so far (`merge` first)."""
        self.check = check_gum_at(y, expanded, u, self.at, self.n, self.p)  # Outside: an index not kept
        return self.check

    def summary(self) -> McSummary:
        """Mean, standard deviation and both intervals of every finite value (`merge` first)."""
        n = self.n
        if n < 2:
            raise Outside("fewer than two defined trials")
        q = _interval_length(n, self.p)
        if self.low.size < n - q or n - self.high.size > q:
            raise Outside("the shortest interval reads values between the kept tails")
        i, j = symmetric_indices(n, self.p)
        mean = self.shift + self.sum1 / n
        variance = (self.sum2 - self.sum1 * self.sum1 / n) / (n - 1)
        return McSummary(
            mean=float(mean),
            standard_deviation=math.sqrt(max(variance, 0.0)),
            symmetric=CoverageInterval(float(self.at(i)), float(self.at(j)), self.p, "symmetric"),
            shortest=shortest_between(self.low[: n - q], self.high[q - (n - self.high.size):], self.p),
            n=n,
            invalid_trials=self.invalid,
            p=self.p,
        )

    def histogram(self) -> HistogramData:
        edges = np.histogram_bin_edges(np.empty(0), bins=HISTOGRAM_BINS, range=self.window)
        return histogram_of_counts(self.counts, edges, self.n, self.invalid)


def _symmetric_ends(s: np.ndarray, p: float) -> tuple[float, float]:
    interval = coverage_interval_symmetric(s, p, presorted=True)
    return interval.low, interval.high

