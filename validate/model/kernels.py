"""The fixed point of the correction of the standards, compiled: one loop over trials.

The numpy path of `validate.model.fixed_point` steps every trial of a block together, a few
hundred elementwise passes over the block per Newton step, each pass through memory. Here the
trials go 256 at a time through fused loops over small work arrays that stay in the processor's
cache, compiled by numba (an LLVM compiler of a subset of Python and numpy) to vector
instructions; a trial stops stepping when its own change is settled, as on numpy. It solves
the same equations with the same operations in the same order, so each trial's K, line and ICE
tables are the numpy path's (bit for bit here; tests/test_fixed_point_kernel.py checks 1e-12);
the numpy path stays the reference and the fallback.

For the equilibrium model's Monte Carlo outputs (`solve_reported`) the loop goes on from each
trial's fixed point to the K's the model reports (positive or nan, the temperature scale, the
unit, the combined K), and the model writes its totals and readings straight into the loop's
input arrays (`stacks`): neither the ICE tables nor copies of the columns are made as arrays.

numba is imported only when an equilibrium study's Monte Carlo trials are solved, never by
`validate --help` or `validate check`. When it is missing, fails to load or to compile, or the
environment variable VALIDATE_NO_KERNEL is set, `solve_trials` returns None and the caller
takes the numpy path; why is logged once (logger `validate.model.kernels`), never raised.
The compiled code is cached on disk (numba's `cache=True`: beside this module in __pycache__,
or in the user's cache folder when the package folder cannot be written), so only the first run
on a machine pays the compilation.
"""

from __future__ import annotations

import logging
import math
import os
import sys
import threading
import time
from typing import Any

import numpy as np

log = logging.getLogger(__name__)

DISABLE = "VALIDATE_NO_KERNEL"  # set (to anything but "" or "0") to use the numpy path only

_compiled: Any = None  # the compiled function once loaded; False when it cannot be had
_enabled = True


def enable(on: bool) -> bool:
    """Turn the compiled path on or off for this process (tests compare the two); returns the
    previous setting."""
    global _enabled
    previous, _enabled = _enabled, bool(on)
    return previous


def available() -> bool:
    """Whether the compiled path will be used (compiles or loads it on first call)."""
    return _kernel() is not None


def _kernel():
    global _compiled
    if not _enabled or os.environ.get(DISABLE, "") not in ("", "0"):
        return None
    if _compiled is None:
        try:
            from validate.model._fixed_point_kernel import compiled
            start = time.process_time()
            _compiled = compiled()
        except Exception as exc:  # any failure to import or compile means: use numpy
            log.info("the compiled fixed point is not used (%s: %s); the numpy path solves the trials",
                     type(exc).__name__, exc)
            _compiled = False
        else:
            stats = _compiled.stats
            how = "compiled and cached" if stats.cache_misses else "loaded from the cache"
            log.info("the compiled fixed point was %s in %.2f s CPU (cache: %s)", how,
                     time.process_time() - start, stats.cache_path)
    return _compiled or None


class _Scratch(threading.local):
    """Arrays kept between calls (per thread), grown when too small. The stacked columns and the
    kernel's outputs are megabytes for a slice of trials, and arrays of that size made anew for
    every slice each cost the operating system fresh zeroed pages, more time than the arithmetic
    they hold. Work arrays are reused as they are; an output array is handed to the caller and
    reused only once nothing refers to it any more (the Monte Carlo engine copies a slice's
    results and drops them), else a new one is made."""

    def __init__(self) -> None:
        self.arrays: dict[str, np.ndarray] = {}
        self.alone: dict[str, int] = {}  # an output's reference count when nothing outside refers to it

    def work(self, name: str, shape: tuple[int, ...]) -> np.ndarray:
        size = math.prod(shape)
        found = self.arrays.get(name)
        if found is None or found.size < size:
            found = self.arrays[name] = np.empty(size)
        return found[:size].reshape(shape)

    def output(self, name: str, shape: tuple[int, ...]) -> np.ndarray:
        size = math.prod(shape)
        found = self.arrays.get(name)
        if found is not None and (found.size < size or sys.getrefcount(found) > self.alone[name]):
            found = None  # still held by a caller (views of it count): make a new one
        if found is None:
            found = self.arrays[name] = np.empty(size)
            self.alone[name] = sys.getrefcount(found)
        return found[:size].reshape(shape)


_scratch = _Scratch()


def _stacked(name: str, kinds, n: int) -> np.ndarray:
    """Columns (M, L, A) of the standards or the mixtures, each a plain number or an array of n
    trials, as one (3, points, n) array for the compiled loop."""
    out = _scratch.work(name, (3, len(kinds[0]), n))
    for rows, columns in zip(out, kinds, strict=True):
        for row, value in zip(rows, columns, strict=True):
            row[...] = value
    return out


def stacks(n_standards: int, n_mixtures: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    """The compiled loop's input arrays, (M, L, A) x standard x trial and (M, L, A) x mixture x
    trial, for a caller that writes its columns straight into them (and passes them back as
    `stacks`, so they are not copied again); reused by the next call of this thread."""
    return _scratch.work("standards", (3, n_standards, n)), _scratch.work("mixtures", (3, n_mixtures, n))


def _solve(kernel, cols, start, max_steps: int, stop: float, converged: float, K, line, states, change,
           reported=None, results=None, stacked=None) -> list[float]:
    """Run the compiled loop on the columns of `cols` (already in the arrays `stacked`, when
    given); `states` and `results` are filled where they have room for the n trials (an empty
    array asks for none). Returns the history of steps."""
    n = cols.trials()
    if stacked is None:
        std = _stacked("standards", (cols.std_M, cols.std_L, cols.std_A), n)
        mix = _stacked("mixtures", (cols.mix_M, cols.mix_L, cols.mix_A), n)
    else:
        std, mix = stacked
    first = np.ascontiguousarray(np.broadcast_to(np.asarray(start, dtype=float), (n,)))
    history = np.full(max_steps, -np.inf)
    if reported is None:
        kept, out_weights, scale, factor = np.zeros(0, dtype=bool), np.zeros(0), np.ones(1), 1.0
        results = np.empty((0, 0))
    else:
        kept = np.asarray(reported.kept, dtype=bool)
        out_weights = np.zeros(len(kept)) if reported.weights is None else np.asarray(reported.weights, dtype=float)
        scale = np.ascontiguousarray(reported.scale, dtype=float).reshape(-1)
        factor = float(reported.factor)
    taken = kernel(std, np.asarray(cols.counts, dtype=float), np.asarray(cols.factors, dtype=float), mix,
                   np.asarray(cols.weights, dtype=float), first, int(max_steps), float(stop), float(converged),
                   K, line, states, change, history, kept, out_weights, scale, factor, results)
    return [float(h) if h > -np.inf else float("nan") for h in history[:taken]]


def solve_trials(cols, start, max_steps: int, stop: float, converged: float):
    """(K, slope, intercept, states, history, remaining error) of every trial of `cols` (arrays of
    n trials), as `fixed_point._solve_block` gives them, or None when the compiled path is not
    available. states: per mixture (complex, free M, free L, K), each an array of n."""
    kernel = _kernel()
    if kernel is None:
        return None
    n, nm = cols.trials(), len(cols.mix_A)
    K, change = np.empty(n), np.empty(n)
    line, states = _scratch.output("line", (2, n)), _scratch.output("states", (4, nm, n))
    steps = _solve(kernel, cols, start, max_steps, stop, converged, K, line, states, change)
    per_mixture = [tuple(states[q, j] for q in range(4)) for j in range(nm)]
    return K, line[0], line[1], per_mixture, steps, change


def solve_reported(cols, start, max_steps: int, stop: float, converged: float, reported, stacked=None):
    """The reported outputs of every trial of `cols` (`fixed_point.Reported`: a row per mixture,
    and the combined K's row when it has weights), without the ICE tables they come from; None
    when the compiled path is not available. What the numpy path does in several passes over
    every mixture's ICE table is done here in the loop that has the trial's line at hand.
    `stacked`: `stacks` holding the columns of `cols` already."""
    kernel = _kernel()
    if kernel is None:
        return None
    n, nm = cols.trials(), len(cols.mix_A)
    rows = nm + (0 if reported.weights is None else 1)
    K, change = _scratch.work("K, reported", (n,)), _scratch.work("change, reported", (n,))
    line = _scratch.work("line, reported", (2, n))
    results = _scratch.output("results", (rows, n))
    _solve(kernel, cols, start, max_steps, stop, converged, K, line, _scratch.work("no states", (4, nm, 0)),
           change, reported, results, stacked)
    return results
