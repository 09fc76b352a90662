"""The correction of the standards as a fixed point K = F(K), solved by Newton's method.

F(K): [ML] in every standard from K (stable quadratic root) -> the least-squares line of the
standards' mean readings on those [ML] -> [ML] of every mixture read off that line -> each
mixture's K from its ICE table -> the weighted combination of the mixtures' K. The corrected
standards are those of the K with F(K) = K (docs/design.md, "Equilibrium constants").

Newton's method on g(K) = F(K) - K, with F'(K) in closed form (the chain rule through the
quadratic root, the line's sums and each ICE table), converges quadratically: from a start
within some per cent (the estimate's K for Monte Carlo trials) three or four steps reach
round-off, where the plain iteration K <- F(K) contracts only by F'(K) per step and needs a
dozen. A step that would leave K > 0 falls back to the plain step F(K).

Backends: plain floats and numpy arrays of trials step directly, arrays in blocks of trials
small enough to stay in the processor's cache (a step is a few hundred elementwise
operations), or, where numba is available, every trial in one compiled loop that does the same
operations in the same order (`validate.model.kernels`; this numpy path is its reference and
its fallback); `uncertainties` numbers step on their nominal values, then take one Newton step
in their own arithmetic from the converged value, which gives exactly the derivatives of the
implicit function, dK/dx = -g_x / g'(K) at g = 0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np
from uncertainties.core import AffineScalarFunc

from validate.model import backend as mathops
from validate.model import kernels
from validate.model.ice import IceTable, equilibrium_constant

BLOCK = 10_000  # trials per block: the arrays of a step stay in a processor's cache; as many as the
#                 Monte Carlo engine's slice (mcrounds.EVAL_SLICE), so a slice is solved as one block
CONVERGED = 1e-9  # remaining relative error of K above which a trial's correction has not converged
STOP = 1e-13  # relative change of K below which a trial stops stepping (quadratic convergence:
#               the next step would change K by less than round-off)


@dataclass(frozen=True)
class Columns:
    """The study's numbers for the fixed point: totals and mean readings of the standards and
    mixtures (any backend), the standards' reading counts, the mixtures' weights in the
    combination (plain numbers summing to 1; 0 leaves a point out of F) and a factor per
    standard on K (the standards' K relative to the mixtures', 1 unless an activity estimate
    says otherwise)."""

    std_M: tuple
    std_L: tuple
    std_A: tuple
    counts: tuple
    mix_M: tuple
    mix_L: tuple
    mix_A: tuple
    weights: tuple
    factors: tuple

    def part(self, s: slice) -> Columns:
        """The columns of one block of trials (plain numbers pass unchanged)."""
        def cut(col):
            return tuple(v[s] if isinstance(v, np.ndarray) and v.ndim else v for v in col)
        return Columns(cut(self.std_M), cut(self.std_L), cut(self.std_A), self.counts, cut(self.mix_M),
                       cut(self.mix_L), cut(self.mix_A), self.weights, self.factors)

    def nominal(self) -> Columns:
        def nom(col):
            return tuple(float(mathops.nominal(v)) for v in col)
        return Columns(nom(self.std_M), nom(self.std_L), nom(self.std_A), self.counts, nom(self.mix_M),
                       nom(self.mix_L), nom(self.mix_A), self.weights, self.factors)

    @cached_property
    def standard_terms(self) -> tuple:
        """Per standard, what the quadratic root needs and K does not change:
        ((M - L)^2, 2 (M + L), M + L, 2 M L, phi)."""
        return tuple(((m - l_) ** 2, 2.0 * (m + l_), m + l_, 2.0 * m * l_, phi)
                     for m, l_, phi in zip(self.std_M, self.std_L, self.factors, strict=True))

    @cached_property
    def readings_centred(self) -> tuple:
        """(total count, mean reading of the standards, each reading's deviation from it): the
        line's y side, which K does not change (formed once, not at every step)."""
        return _readings_centred(self)

    @cached_property
    def linear(self) -> bool:
        """Whether the columns hold `uncertainties` numbers (the linear engine)."""
        return self.has_ufloats()

    def trials(self) -> int:
        """Number of trials (0 for plain numbers and ufloats)."""
        for col in (self.std_M, self.std_L, self.std_A, self.mix_M, self.mix_L, self.mix_A):
            for v in col:
                if isinstance(v, np.ndarray) and v.ndim:
                    return int(v.shape[0])
        return 0

    def has_ufloats(self) -> bool:
        return any(isinstance(v, AffineScalarFunc) for col in (
            self.std_M, self.std_L, self.std_A, self.mix_M, self.mix_L, self.mix_A) for v in col)


def standards_line(K, cols: Columns, derivative: bool = False):
    """(slope, intercept, d slope/dK, d intercept/dK) of the standards' line at K: [ML] of each
    standard by the stable root (Press et al., Numerical Recipes 3rd ed., 5.6; see
    `ice.complex_concentration`: x = 2 M L / (S + sqrt(D)), D = (M - L)^2 + (2 (M + L) + 1/K)/K),
    dx/dK = phi x / ((phi K)^2 sqrt(D)) by implicit differentiation, and the weighted
    least-squares line in centred sums (the normal equations, as `line.level_sums`).
    Derivatives are None unless asked for."""
    linear = cols.linear
    total, y_mean, dev_y = _readings_centred(cols) if linear else cols.readings_centred
    xs, dxs = [], []
    inv_K = None if linear else 1.0 / K  # arrays: shared by every standard without a factor (once)
    for diff2, two_sum, total_ml, two_prod, phi in cols.standard_terms:
        # phi: a plain factor per standard. The linear engine forms every term afresh, as it always
        # has: a shared intermediate result would change the order of its derivatives' sums
        inv_k = 1.0 / (K * phi) if phi != 1.0 else (1.0 / K if inv_K is None else inv_K)
        root = mathops.sqrt(diff2 + (two_sum + inv_k) * inv_k)
        x = two_prod / (total_ml + inv_k + root)
        xs.append(x)
        if derivative:
            dx = x * inv_k * inv_k / root
            dxs.append(dx if phi == 1.0 else phi * dx)  # phi * dx is dx itself at phi = 1
    x_mean = _weighted_sum(cols.counts, xs) / total
    dev_x = [x - x_mean for x in xs]
    sxx = _weighted_sum(cols.counts, [d * d for d in dev_x])
    sxy = _weighted_sum(cols.counts, [d * e for d, e in zip(dev_x, dev_y, strict=True)])
    slope = sxy / sxx
    intercept = y_mean - slope * x_mean
    if not derivative:
        return slope, intercept, None, None
    d_mean = _weighted_sum(cols.counts, dxs) / total
    d_sxx = 2.0 * _weighted_sum(cols.counts, [d * dx for d, dx in zip(dev_x, dxs, strict=True)])
    d_sxy = _weighted_sum(cols.counts, [dx * e for dx, e in zip(dxs, dev_y, strict=True)])
    d_slope = (d_sxy - slope * d_sxx) / sxx
    return slope, intercept, d_slope, -(d_slope * x_mean + slope * d_mean)


def _readings_centred(cols: Columns) -> tuple:
    total = sum(cols.counts)
    y_mean = _weighted_sum(cols.counts, cols.std_A) / total
    return total, y_mean, tuple(y - y_mean for y in cols.std_A)


def _weighted_sum(counts, values):
    """sum c_i v_i with plain counts (a count of 1 costs no multiplication on arrays)."""
    total: Any = 0.0
    for c, v in zip(counts, values, strict=True):
        total = total + (v if c == 1.0 else c * v)
    return total


def combination(K, cols: Columns, derivative: bool = False):
    """(F(K), F'(K)): the weighted K of the mixtures read off the line at K. A mixture's
    K = c/((M - c)(L - c)) with c = (A - intercept)/slope, so (quotient rule)
    dK/dc = q = (1 + K ((M - c) + (L - c))) / ((M - c)(L - c)) and, as
    dc/dK = -(d intercept/dK + c d slope/dK)/slope,
    F'(K) = -(d intercept/dK sum w q + d slope/dK sum w q c)/slope.
    Points of weight 0 are left out. F'(K) is None unless asked for."""
    slope, intercept, d_slope, d_intercept = standards_line(K, cols, derivative)
    F: Any = 0.0
    sum_q: Any = 0.0
    sum_qc: Any = 0.0
    for m, l_, a, w in zip(cols.mix_M, cols.mix_L, cols.mix_A, cols.weights, strict=True):
        if w == 0.0:  # a plain weight, not a value: a point left out of the combination
            continue
        c = (a - intercept) / slope
        free_m, free_l = m - c, l_ - c
        den = free_m * free_l
        k = c / den
        F = F + w * k
        if derivative:
            wq = w * (1.0 + k * (free_m + free_l)) / den
            sum_q, sum_qc = sum_q + wq, sum_qc + wq * c
    if not derivative:
        return F, None
    return F, -(d_intercept * sum_q + d_slope * sum_qc) / slope


def naive_start(cols: Columns, limiting_totals):
    """The shortcut's K: the standards taken as fully complexed (the line on the limiting
    reagent's totals), combined with the same weights."""
    slope, intercept = _line_on(list(limiting_totals), cols)
    F: Any = 0.0
    for m, l_, a, w in zip(cols.mix_M, cols.mix_L, cols.mix_A, cols.weights, strict=True):
        if w != 0.0:
            F = F + w * equilibrium_constant((a - intercept) / slope, m, l_).K
    return F


def _line_on(xs, cols: Columns):
    total = sum(cols.counts)
    x_mean = sum(c * x for c, x in zip(cols.counts, xs, strict=True)) / total
    y_mean = sum(c * y for c, y in zip(cols.counts, cols.std_A, strict=True)) / total
    sxx = sum(c * (x - x_mean) ** 2 for c, x in zip(cols.counts, xs, strict=True))
    sxy = sum(c * (x - x_mean) * (y - y_mean) for c, x, y in zip(cols.counts, xs, cols.std_A, strict=True))
    return sxy / sxx, y_mean - sxy / sxx * x_mean


def _step(K, cols: Columns):
    """One Newton step from K (floats or arrays); the plain step F(K) where Newton's would not
    leave K positive and finite."""
    F, dF = combination(K, cols, derivative=True)
    newton = K - (F - K) / (dF - 1.0)
    if isinstance(newton, np.ndarray):
        ok = np.isfinite(newton) & (newton > 0)
        return np.where(ok, newton, F)
    return newton if (math.isfinite(newton) and newton > 0) else F


def _largest(change) -> float:
    v = np.abs(np.atleast_1d(np.asarray(change, dtype=float)))
    v = v[np.isfinite(v)]
    return float(v.max()) if v.size else math.nan


@dataclass
class Solved:
    """K at the fixed point with the line and the mixtures' ICE tables there."""

    K: Any
    slope: Any
    intercept: Any
    states: tuple
    history: list  # largest |relative change of K| per step (over the finite trials)
    change: Any  # the remaining relative error of K, per trial (see `_solve_direct`)


def _solve_direct(cols: Columns, start, max_steps: int) -> tuple[Any, list, Any]:
    """Newton steps on floats (or arrays, stepping all trials alike; blocks of trials go to
    `_solve_trials`) until the next step is predicted to change K by less than STOP
    (relative) for every trial, or `max_steps` were taken:
    (K, history of the largest relative change per step, remaining relative error per trial).
    Quadratic convergence, d_(n+1) ~ C d_n^2, predicts the next change from the last two as
    d_n^3 / d_(n-1)^2; the remaining error is that prediction, or the last change when smaller
    or when no prediction can be made."""
    K = start
    history: list[float] = []
    change: Any = math.nan
    previous: Any = math.nan
    for _ in range(max_steps):
        try:
            K_new = _step(K, cols)
        except (ValueError, ZeroDivisionError, OverflowError):
            # only plain floats raise (numpy gives nan per trial): the step left the domain
            history.append(math.nan)
            return math.nan, history, math.nan
        previous, change = change, (K_new - K) / K_new
        K = K_new
        history.append(_largest(change))
        if history[-1] <= STOP or _largest(_predicted(change, previous)) <= STOP:
            break
    remaining = np.fmin(np.abs(np.asarray(change, dtype=float)), _predicted(change, previous))
    return K, history, (float(remaining) if np.ndim(remaining) == 0 else remaining)


def _solve_trials(cols: Columns, start, max_steps: int) -> tuple[np.ndarray, list, np.ndarray]:
    """Newton steps on one block of trials, as `_solve_direct` but each trial on its own: a trial
    stops when its own last change, or its next change predicted from the last two, is at most
    STOP (or its change is not a number: it has no K), and the trials still stepping go on
    without it, on their own columns. So a trial's K does not depend on the other trials of its
    block, and the one slow trial of a block no longer costs every trial a step. History: the
    largest relative change per step over the trials that took it."""
    K = np.array(start, dtype=float)
    change, previous = np.full(K.size, math.nan), np.full(K.size, math.nan)
    active: np.ndarray | None = None  # indices of the trials still stepping; None: all of them
    history: list[float] = []
    for _ in range(max_steps):
        K_new, step_change = _step_some(K, cols, active)
        if active is None:
            previous, change, K = change, step_change, K_new
        else:
            previous[active], change[active], K[active] = change[active], step_change, K_new
        history.append(_largest(step_change))
        last = change if active is None else change[active]
        before = previous if active is None else previous[active]
        with np.errstate(invalid="ignore"):
            done = (np.abs(last) <= STOP) | (_predicted(last, before) <= STOP) | ~np.isfinite(last)
        if done.all():
            break
        left = np.flatnonzero(~done)
        active = left if active is None else active[left]
    return K, history, np.fmin(np.abs(change), _predicted(change, previous))


def _step_some(K: np.ndarray, cols: Columns, active: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """(new K, relative change) of the trials `active` (all when None). Few trials step on their
    own columns (gathered); many step with the whole block (a gather of every column costs more
    than the few trials' arithmetic it saves), of which theirs are kept: each trial's numbers are
    the same either way (elementwise arithmetic)."""
    if active is None or 4 * active.size > K.size:
        K_new = _step(K, cols)
        change = (K_new - K) / K_new
        return (K_new, change) if active is None else (K_new[active], change[active])
    K_old = K[active]
    K_new = _step(K_old, cols.part(active))  # type: ignore[arg-type]
    return K_new, (K_new - K_old) / K_new


def _predicted(change, previous):
    """The next step's relative change predicted from the last two (quadratic convergence);
    nan before two steps were taken."""
    with np.errstate(divide="ignore", invalid="ignore"):
        d, p = np.abs(np.asarray(change, dtype=float)), np.abs(np.asarray(previous, dtype=float))
        predicted = np.where(d == 0.0, 0.0, d * d * d / (p * p))
    return np.where(np.isfinite(predicted) | ~np.isfinite(d), predicted, np.inf)


def states_at(K, cols: Columns):
    """(slope, intercept, ICE table per mixture) at K; shared values collapsed once
    (`backend.collapse`) for the linear engine."""
    slope, intercept, _, _ = standards_line(K, cols)
    slope, intercept = mathops.collapse(slope), mathops.collapse(intercept)
    states = []
    for m, l_, a in zip(cols.mix_M, cols.mix_L, cols.mix_A, strict=True):
        s = equilibrium_constant((a - intercept) / slope, m, l_)
        states.append(IceTable(s.complex_conc, s.free_M, s.free_L, mathops.collapse(s.K)))
    return slope, intercept, tuple(states)


@dataclass(frozen=True)
class Reported:
    """What the equilibrium model reports of every trial (`EquilibriumModel.evaluate`), for
    `solve_reported`: each mixture's K, nan where not positive, times `scale` (a number, or one
    per trial: the carry to the stated temperature), over `factor` (the display unit); with
    `weights` (one per mixture), also the combined K: the sum of weights[j] K_j over the
    mixtures `kept`, from the first, over `factor`."""

    scale: Any
    factor: float
    weights: tuple | None
    kept: tuple


def solve_reported(cols: Columns, reported: Reported, *, start=None, limiting_totals=None,
                   max_steps: int = 12, stacks=None) -> np.ndarray | None:
    """The rows `reported` asks for (a mixture's K per row, then the combined K) of every trial,
    from the compiled loop without the ICE tables they are read from; None where that loop does
    not serve (plain numbers, ufloats, numba not available): the caller then reads them off
    `solve`'s states, the reference these rows are tested against. `stacks`: the columns already
    in the compiled loop's input arrays (`kernels.stacks`), which are then not copied there."""
    if cols.trials() == 0 or cols.has_ufloats() or not kernels.available():
        return None
    first = naive_start(cols, limiting_totals) if start is None else start
    return kernels.solve_reported(cols, first, max_steps, STOP, CONVERGED, reported, stacks)


def solve(cols: Columns, *, start=None, limiting_totals=None, max_steps: int = 12) -> Solved:
    """K with F(K) = K and the states there, on any backend. `start`: a first K (a float, or
    one per trial); None: the shortcut's K (`naive_start` on `limiting_totals`)."""
    if cols.has_ufloats():
        return _solve_linear(cols, start, limiting_totals, max_steps)
    n = cols.trials()
    if n == 0:
        first = start if start is not None else naive_start(cols, limiting_totals)
        K, history, change = _solve_direct(cols, float(first), max_steps)
        slope, intercept, states = states_at(K, cols)
        return Solved(K, slope, intercept, states, history, change)
    return _solve_blocks(cols, n, start, limiting_totals, max_steps)


def _solve_linear(cols: Columns, start, limiting_totals, max_steps: int) -> Solved:
    """The nominal fixed point K*, then one Newton step in the ufloats' arithmetic from K*
    (a constant): K = K* - (F(K*) - K*)/(F'(K*) - 1) with F'(K*) at the estimates, whose
    linear part is the implicit function's (g(K*) = 0 at the estimates)."""
    nominal = cols.nominal()
    first = mathops.nominal(start) if start is not None else naive_start(nominal, [
        float(mathops.nominal(v)) for v in limiting_totals])
    K_star, history, change = _solve_direct(nominal, float(first), max_steps)
    if not (math.isfinite(K_star) and K_star > 0):
        return Solved(math.nan, math.nan, math.nan, (), history, math.nan)
    _, dF = combination(K_star, nominal, derivative=True)
    F, _ = combination(K_star, cols)
    K = mathops.collapse(K_star - (F - K_star) / (dF - 1.0))
    slope, intercept, states = states_at(K, cols)
    return Solved(K, slope, intercept, states, history, change)


def _cut(v, s: slice):
    """One block of a column or start value: arrays sliced, plain numbers as they are."""
    return v[s] if isinstance(v, np.ndarray) and v.ndim else v


def _solve_blocks(cols: Columns, n: int, start, limiting_totals, max_steps: int) -> Solved:
    """Arrays of trials: every trial in one compiled loop (`validate.model.kernels`) where it is
    available, else a block at a time on numpy; every output preallocated once (a single block's
    arrays are returned as they are, without a copy)."""
    compiled = _solve_compiled(cols, start, limiting_totals, max_steps)
    if compiled is not None:
        return compiled
    if n <= BLOCK:
        return _solve_block(cols, slice(0, n), start, limiting_totals, max_steps)
    out = {k: np.empty(n) for k in ("K", "slope", "intercept", "change")}
    mix = [[np.empty(n) for _ in range(4)] for _ in cols.mix_A]
    history: list[float] = []
    for lo in range(0, n, BLOCK):
        s = slice(lo, min(lo + BLOCK, n))
        block = _solve_block(cols, s, start, limiting_totals, max_steps)
        _store(out, mix, s, (block.K, block.slope, block.intercept, block.change), block.states)
        history = [max(a, b) for a, b in _padded(history, block.history)]
    history = [h if h > -math.inf else math.nan for h in history]
    states = tuple(IceTable(*arrays) for arrays in mix)
    return Solved(out["K"], out["slope"], out["intercept"], states, history, out["change"])


def _solve_compiled(cols: Columns, start, limiting_totals, max_steps: int) -> Solved | None:
    """Every trial by the compiled loop, the same numbers as `_solve_block` gives; None when it is
    not available (numba missing, failing to load, or switched off)."""
    if not kernels.available():
        return None
    first = naive_start(cols, limiting_totals) if start is None else start
    found = kernels.solve_trials(cols, first, max_steps, STOP, CONVERGED)
    if found is None:
        return None
    K, slope, intercept, states, steps, change = found
    return Solved(K, slope, intercept, tuple(IceTable(*state) for state in states), steps, change)


def _solve_block(cols: Columns, s: slice, start, limiting_totals, max_steps: int) -> Solved:
    """One block of trials (the slice `s` of the columns)."""
    part = cols.part(s) if (s.start, s.stop) != (0, cols.trials()) else cols
    first = (naive_start(part, [_cut(v, s) for v in limiting_totals]) if start is None
             else _cut(start, s))
    K, steps, change = _solve_trials(part, np.broadcast_to(np.asarray(first, dtype=float),
                                                           (s.stop - s.start,)), max_steps)
    # a trial whose correction has not converged has no defined K: nan, counted by the engine
    K = np.where(change <= CONVERGED, K, np.nan)
    slope, intercept, states = states_at(K, part)
    return Solved(K, slope, intercept, states, steps, change)


def _store(out: dict, mix: list, s: slice, values: tuple, states) -> None:
    for key, value in zip(("K", "slope", "intercept", "change"), values, strict=True):
        out[key][s] = value
    for arrays, state in zip(mix, states, strict=True):
        for target, value in zip(arrays, (state.complex_conc, state.free_M, state.free_L, state.K), strict=True):
            target[s] = value


def _padded(a: list, b: list):
    """Pairs of two histories of different lengths; nan-aware max is taken by the caller."""
    for i in range(max(len(a), len(b))):
        x = a[i] if i < len(a) else -math.inf
        y = b[i] if i < len(b) else -math.inf
        yield (x if not math.isnan(x) else -math.inf), (y if not math.isnan(y) else -math.inf)
