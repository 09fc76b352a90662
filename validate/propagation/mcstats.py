"""Statistics of Monte Carlo output values (JCGM 101:2008, clauses 7 and 8).

- coverage intervals from the sorted trial values: probabilistically
  symmetric (7.7.1) and shortest (7.7.2);
- `summarise`: estimate (mean), standard uncertainty (standard deviation,
  7.6), both intervals; trials with an undefined result (NaN or +/-inf) are
  left out of the statistics and counted, never dropped silently;
- the adaptive procedure (7.9): numerical tolerance of a value (7.9.2) and
  the stopping rule over h batches of M trials (7.9.4);
- validation of the GUM uncertainty framework against Monte Carlo (8.1, 8.2);
- histogram data for the report figure.

Every result is a frozen dataclass whose `to_dict()` is JSON-safe (non-finite
numbers become None).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass

import numpy as np

INTERVAL_KINDS = ("symmetric", "shortest")
_CHUNK = 1 << 20  # bounds the temporary memory of the shortest-interval search


def _json_safe(obj):
    """The same structure with every nan or inf replaced by None (JSON has no such numbers)."""
    if isinstance(obj, dict):
        return {k: _json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_json_safe(v) for v in obj]
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def _check_p(p: float) -> float:
    if not (0.0 < p < 1.0):
        raise ValueError(f"coverage probability must lie strictly between 0 and 1, got {p!r}")
    return float(p)


@dataclass(frozen=True)
class CoverageInterval:
    """A 100p % coverage interval [low, high] for the output quantity."""

    low: float
    high: float
    p: float
    kind: str  # "symmetric" (JCGM 101 7.7.1) or "shortest" (7.7.2)

    @property
    def width(self) -> float:
        return self.high - self.low

    def to_dict(self) -> dict:
        return _json_safe({**asdict(self), "width": self.width})


def _sorted_finite(values, presorted: bool) -> np.ndarray:
    """The values as a sorted float array; refuses NaN or inf (use `summarise` for those).

    presorted=True promises ascending order (as `summarise` passes them) and skips the sort.
    """
    s = np.asarray(values, dtype=np.float64)
    if s.ndim != 1:
        raise ValueError(f"Monte Carlo values must be a one-dimensional array, got shape {s.shape}")
    if not presorted:
        s = np.sort(s)  # NaN sorts to the end, so checking the two ends finds NaN and inf
    if s.size and not (math.isfinite(s[0]) and math.isfinite(s[-1])):
        raise ValueError(
            "Monte Carlo values contain NaN or infinite trials; summarise() counts and "
            "removes them before computing a coverage interval"
        )
    return s


class TooFewTrials(ValueError):
    """Fewer defined trials than a coverage interval at p needs (q of JCGM 101 7.7.1 > M - 1)."""


def fewest_trials(p: float) -> int:
    """The fewest trials the engine runs for a 100p % symmetric interval: 1/(1 - p) + 1. (q of
    7.7.1 fits in M - 1 for M above 0.5/(1 - p), but an interval's end is then the extreme trial.)"""
    return math.ceil(round(1.0 / (1.0 - p), 6)) + 1  # rounded first: 1 - 0.9998 is not exact in binary


def _interval_length(m: int, p: float) -> int:
    """q of JCGM 101 7.7.1: pM if that is an integer, else the integer part of pM + 1/2."""
    q = math.floor(p * m + 0.5)  # equals pM when pM is an integer
    if q > m - 1:
        raise TooFewTrials(
            f"{m} valid trials are too few for a {100 * p:g} % coverage interval; "
            f"use at least {fewest_trials(p)} (JCGM 101 7.2 advises "
            "a number of trials far larger than 1/(1 - p))"
        )
    return q


def coverage_interval_symmetric(values, p: float = 0.95, *, presorted: bool = False) -> CoverageInterval:
    """Probabilistically symmetric 100p % coverage interval, JCGM 101 7.7.1.

    With q as in `_interval_length` and r = (M - q)/2 if that is an integer,
    else the integer part of (M - q + 1)/2, the interval is [y_(r), y_(r+q)]
    (1-based order statistics of the M sorted values).
    """
    p = _check_p(p)
    s = _sorted_finite(values, presorted)
    low, high = symmetric_indices(s.size, p)
    return CoverageInterval(float(s[low]), float(s[high]), p, "symmetric")


def symmetric_indices(m: int, p: float) -> tuple[int, int]:
    """0-based indices, among M sorted values, of the ends y_(r), y_(r+q) of JCGM 101 7.7.1."""
    q = _interval_length(m, p)
    r = (m - q + 1) // 2  # covers both cases of 7.7.1
    return r - 1, r + q - 1


def coverage_interval_shortest(values, p: float = 0.95, *, presorted: bool = False) -> CoverageInterval:
    """Shortest 100p % coverage interval, JCGM 101 7.7.2.

    Among [y_(r), y_(r+q)], r = 1, ..., M - q, the one of least width. The
    search runs in chunks so 10^7 trials need no second full-size array.
    """
    p = _check_p(p)
    s = _sorted_finite(values, presorted)
    q = _interval_length(s.size, p)
    return shortest_between(s[: s.size - q], s[q:], p)


def shortest_between(lower: np.ndarray, upper: np.ndarray, p: float) -> CoverageInterval:
    """The shortest of the intervals [lower[r], upper[r]]: with M sorted values y and q of 7.7.1,
    lower = y_(1) .. y_(M-q) and upper = y_(q+1) .. y_(M), so JCGM 101 7.7.2 needs only the lowest
    and the highest M - q values (the first of equal widths wins)."""
    best_r, best_width = 0, math.inf  # 0-based r
    for start in range(0, lower.size, _CHUNK):
        stop = min(start + _CHUNK, lower.size)
        widths = upper[start:stop] - lower[start:stop]
        i = int(np.argmin(widths))
        if widths[i] < best_width:
            best_r, best_width = start + i, float(widths[i])
    return CoverageInterval(float(lower[best_r]), float(upper[best_r]), p, "shortest")


@dataclass(frozen=True)
class McSummary:
    """Summary of the Monte Carlo output values of one output quantity."""

    mean: float  # estimate y, JCGM 101 7.6
    standard_deviation: float  # standard uncertainty u(y), JCGM 101 7.6 (divisor M - 1)
    symmetric: CoverageInterval
    shortest: CoverageInterval
    n: int  # trials with a defined (finite) result, used above
    invalid_trials: int  # trials whose result was NaN or infinite, left out and counted
    p: float

    @property
    def total_trials(self) -> int:
        return self.n + self.invalid_trials

    def interval(self, kind: str = "symmetric") -> CoverageInterval:
        if kind not in INTERVAL_KINDS:
            raise ValueError(f"coverage interval kind must be one of {INTERVAL_KINDS}, got {kind!r}")
        return self.symmetric if kind == "symmetric" else self.shortest

    def to_dict(self) -> dict:
        out = {**asdict(self), "symmetric": self.symmetric.to_dict(), "shortest": self.shortest.to_dict()}
        return _json_safe({**out, "total_trials": self.total_trials})


def summarise(values, p: float = 0.95) -> McSummary:
    """Mean, standard deviation and both coverage intervals of the valid trials.

    Trials with a NaN or infinite result (an undefined model value) are
    excluded and reported as `invalid_trials`. The values are sorted once and
    both intervals reuse that sorted copy; the caller's array is not changed.
    """
    p = _check_p(p)
    v = np.asarray(values, dtype=np.float64)
    if v.ndim != 1:
        raise ValueError(f"Monte Carlo values must be a one-dimensional array, got shape {v.shape}")
    finite = np.isfinite(v)
    s = v.copy() if finite.all() else v[finite]  # a copy either way: the caller's array stays as it is
    s.sort()
    return summarise_sorted(s, int(v.size - s.size), p)


def summarise_sorted(s: np.ndarray, invalid: int, p: float = 0.95) -> McSummary:
    """`summarise` of finite values already sorted (ascending); `invalid` counts the undefined
    trials left out before. Lets the engine sort each output once for every statistic."""
    p = _check_p(p)
    if s.size < 2:
        raise ValueError(
            f"only {s.size} of {s.size + invalid} Monte Carlo trials gave a defined result; "
            "check the model inputs for values that make the result undefined"
        )
    return McSummary(
        mean=float(np.mean(s)),
        standard_deviation=float(np.std(s, ddof=1)),
        symmetric=coverage_interval_symmetric(s, p, presorted=True),
        shortest=coverage_interval_shortest(s, p, presorted=True),
        n=int(s.size),
        invalid_trials=invalid,
        p=p,
    )


# --- adaptive procedure, JCGM 101 7.9 -------------------------------------


def tolerance_digits(u: float, ndig: int = 2) -> tuple[int, int]:
    """(c, l) with u = c x 10^l and c an ndig-digit integer, JCGM 101 7.9.2 a).

    Rounding to ndig significant digits is done in decimal (via the
    exponent format), so a carry such as 0.0999 -> 10 x 10^-2 is exact.
    """
    if isinstance(ndig, bool) or not isinstance(ndig, (int, np.integer)) or ndig < 1:
        raise ValueError(f"number of significant digits must be a positive integer, got {ndig!r}")
    if not (math.isfinite(u) and u > 0):
        raise ValueError(f"a numerical tolerance needs a finite positive value, got {u!r}")
    mantissa, exponent = f"{u:.{ndig - 1}e}".split("e")
    c = int(mantissa.replace(".", ""))
    return c, int(exponent) - (ndig - 1)


def numerical_tolerance(u: float, ndig: int = 2) -> float:
    """delta = 1/2 x 10^l for u = c x 10^l, JCGM 101 7.9.2 b).

    u == 0 (an output without uncertainty) gives delta = 0: no spread between
    batches is then tolerated, and a constant output has none.
    """
    if u == 0:
        return 0.0
    _, exponent = tolerance_digits(u, ndig)
    return float(f"5e{exponent - 1}")  # 0.5 x 10^l as the nearest double to the decimal value


def adaptive_batch_size(p: float = 0.95) -> int:
    """Trials per batch, JCGM 101 7.9.4 b): M = max(J, 10^4), J the least integer >= 100/(1 - p)."""
    p = _check_p(p)
    j = math.ceil(round(100.0 / (1.0 - p), 9))  # round: 100/(1 - 0.95) is 2000.0000000000005
    return max(j, 10_000)


@dataclass(frozen=True)
class AdaptiveCheck:
    """The stopping test of JCGM 101 7.9.4 after h batches."""

    converged: bool
    batches: int  # h
    trials: int  # valid trials over all batches
    invalid_trials: int
    ndig: int
    pooled_standard_deviation: float  # u(y) from all h M values, 7.9.4 h)
    delta: float  # numerical tolerance of u(y), 7.9.2
    interval_kind: str
    twice_s_mean: float  # 2 s of the average of the h batch means, 7.9.4 f)
    twice_s_sd: float  # likewise for the batch standard deviations, 7.9.4 g)
    twice_s_low: float
    twice_s_high: float

    def to_dict(self) -> dict:
        return _json_safe(asdict(self))


def _twice_s_of_average(x: np.ndarray) -> float:
    """2 s_z with s_z^2 = sum (z_r - mean z)^2 / (h (h - 1)), JCGM 101 7.9.4 f)."""
    return 2.0 * float(np.std(x, ddof=1)) / math.sqrt(x.size)


def pooled_mean_sd(batches: Sequence[McSummary]) -> tuple[float, float, int]:
    """Mean, standard deviation (divisor N - 1) and N of all batches' values together.

    Exact combination of the batch means and variances (the within-batch
    plus between-batch sums of squares), so the values need not be kept.
    """
    n = np.array([b.n for b in batches], dtype=np.float64)
    means = np.array([b.mean for b in batches])
    sds = np.array([b.standard_deviation for b in batches])
    total = float(n.sum())
    grand = float(np.sum(n * means) / total)
    ss = float(np.sum((n - 1.0) * sds**2) + np.sum(n * (means - grand) ** 2))
    return grand, math.sqrt(ss / (total - 1.0)), int(total)


def adaptive_converged(
    batch_stats: Sequence[McSummary], ndig: int = 2, p: float = 0.95, interval: str = "symmetric"
) -> tuple[bool, AdaptiveCheck]:
    """Stopping rule of JCGM 101 7.9.4 over the summaries of h batches.

    Converged when none of 2 s (of the average) of the batch means, standard
    deviations and both interval endpoints exceeds the numerical tolerance
    delta of u(y) (7.9.4 j), with u(y) formed from all h M values (7.9.4 h)).
    Needs h >= 2 (7.9.4 e)); with one batch it answers "not yet".
    """
    p = _check_p(p)
    if interval not in INTERVAL_KINDS:
        raise ValueError(f"coverage interval kind must be one of {INTERVAL_KINDS}, got {interval!r}")
    if not batch_stats:
        raise ValueError("the adaptive procedure needs the summary of at least one batch")
    if any(abs(b.p - p) > 1e-12 for b in batch_stats):
        raise ValueError(f"every batch must be summarised at the coverage probability p = {p}")
    _, u_pooled, trials = pooled_mean_sd(batch_stats)
    delta = numerical_tolerance(u_pooled, ndig)
    h = len(batch_stats)
    twice: tuple[float, ...]
    if h < 2:
        twice = (math.nan,) * 4
    else:
        ivs = [b.interval(interval) for b in batch_stats]
        columns = (
            [b.mean for b in batch_stats],
            [b.standard_deviation for b in batch_stats],
            [iv.low for iv in ivs],
            [iv.high for iv in ivs],
        )
        twice = tuple(_twice_s_of_average(np.array(col)) for col in columns)
    converged = h >= 2 and all(t <= delta for t in twice)
    check = AdaptiveCheck(
        converged=converged,
        batches=h,
        trials=trials,
        invalid_trials=sum(b.invalid_trials for b in batch_stats),
        ndig=int(ndig),
        pooled_standard_deviation=u_pooled,
        delta=delta,
        interval_kind=interval,
        twice_s_mean=twice[0],
        twice_s_sd=twice[1],
        twice_s_low=twice[2],
        twice_s_high=twice[3],
    )
    return converged, check


# --- validation of the GUM uncertainty framework, JCGM 101 clause 8 ------------


@dataclass(frozen=True)
class GumValidation:
    """Comparison of the GUM interval y +/- U_p with the Monte Carlo interval (JCGM 101 8.2)."""

    y: float
    gum_low: float
    gum_high: float
    mc_low: float
    mc_high: float
    d_low: float  # |y - U_p - y_low|
    d_high: float  # |y + U_p - y_high|
    delta: float
    agrees: bool  # both differences no larger than delta: the GUM result is validated

    def to_dict(self) -> dict:
        return _json_safe(asdict(self))


def validate_gum(
    y: float, gum_interval: tuple[float, float], mc_interval: tuple[float, float], delta: float
) -> GumValidation:
    """JCGM 101 8.2: d_low = |y - U_p - y_low|, d_high = |y + U_p - y_high|.

    gum_interval is (y - U_p, y + U_p); mc_interval is the Monte Carlo
    coverage interval at the same p, normally the probabilistically symmetric
    one, since the GUM interval is symmetric about y. delta is the numerical
    tolerance of u(y) (7.9.2). The GUM result is validated when neither
    difference exceeds delta (8.2).
    """
    gum_low, gum_high = (float(v) for v in gum_interval)
    mc_low, mc_high = (float(v) for v in mc_interval)
    if not (gum_low <= y <= gum_high):
        raise ValueError(f"the GUM interval [{gum_low}, {gum_high}] must contain the estimate y = {y}")
    if not (mc_low <= mc_high):
        raise ValueError(f"the Monte Carlo interval [{mc_low}, {mc_high}] has its ends reversed")
    if not (delta >= 0 and math.isfinite(delta)):
        raise ValueError(f"the numerical tolerance must be finite and >= 0, got {delta!r}")
    d_low, d_high = abs(gum_low - mc_low), abs(gum_high - mc_high)
    agrees = d_low <= delta and d_high <= delta
    return GumValidation(float(y), gum_low, gum_high, mc_low, mc_high, d_low, d_high, float(delta), agrees)


# --- figure data -------------------------------------------------------------


@dataclass(frozen=True)
class HistogramData:
    """Histogram of the valid trials; `density` integrates to 1 for overlaying a PDF."""

    counts: tuple[int, ...]
    edges: tuple[float, ...]
    density: tuple[float, ...]
    n: int
    invalid_trials: int

    def to_dict(self) -> dict:
        return _json_safe(asdict(self))


def histogram_data(values, bins: int = 100, value_range: tuple[float, float] | None = None,
                   invalid: int = 0, presorted: bool = False) -> HistogramData:
    """Counts and bin edges of the finite trial values (NaN/inf are counted, not binned).

    `density` divides by all finite trials, so with a `value_range` that cuts
    off some of them it integrates to the fraction inside the range. `invalid`
    adds undefined trials already left out of `values`. presorted=True promises
    finite values in ascending order: the counts then come from a binary search
    for each edge, the same counts as numpy.histogram gives.
    """
    if isinstance(bins, bool) or not isinstance(bins, (int, np.integer)) or bins < 1:
        raise ValueError(f"number of histogram bins must be a positive integer, got {bins!r}")
    v = np.asarray(values, dtype=np.float64).ravel()
    good = v if presorted or np.isfinite(v).all() else v[np.isfinite(v)]
    if good.size == 0:
        raise ValueError("no Monte Carlo trial gave a defined result; nothing to draw")
    if presorted:
        counts, edges = _sorted_histogram(good, int(bins), value_range)
    else:
        counts, edges = np.histogram(good, bins=int(bins), range=value_range)
    return histogram_of_counts(counts, edges, int(good.size), int(v.size - good.size) + int(invalid))


def histogram_of_counts(counts: np.ndarray, edges: np.ndarray, n: int, invalid: int) -> HistogramData:
    """The histogram of `n` finite trials from its counts and edges (some trials may lie outside
    the edges; `density` divides by all n); `invalid` undefined trials are counted beside."""
    density = counts / (n * np.diff(edges))
    return HistogramData(
        counts=tuple(int(c) for c in counts),
        edges=tuple(float(e) for e in edges),
        density=tuple(float(d) for d in density),
        n=int(n),
        invalid_trials=int(invalid),
    )


def _sorted_histogram(s: np.ndarray, bins: int, value_range) -> tuple[np.ndarray, np.ndarray]:
    """numpy.histogram's counts and edges for sorted values: the same edges (numpy's own
    `histogram_bin_edges`), and in every bin the values v with edge_i <= v < edge_i+1, the last
    bin closed on the right, as numpy.histogram bins them."""
    edges = np.histogram_bin_edges(s, bins=bins, range=value_range)
    below = np.searchsorted(s, edges, side="left")
    below[-1] = np.searchsorted(s, edges[-1], side="right")
    return np.diff(below), edges
