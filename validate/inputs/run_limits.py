"""Bounds of the numbers a run is asked for: the command's arguments, and the settings a
filed record asks its re-run for (`validate verify` takes them from a results.json that may
have been forged, so they are checked the same way).

The Monte Carlo engine keeps one result's values whole for its coverage intervals, within
256 MiB (8 bytes a trial: 33,554,432 trials; README, Performance), so 3.3 x 10^7 trials is the
most a run is asked for; numpy's seed is a
non-negative integer, and 2^63 - 1 keeps it within a signed 64-bit integer in the record.
"""

from __future__ import annotations

MAX_TRIALS = 33_000_000
MIN_TRIALS = 1000
MAX_SEED = 2**63 - 1


def trials_problem(trials) -> str | None:
    """Why `trials` (a number, "auto", or 0/None for no Monte Carlo) cannot be run; None when it can."""
    if trials is None or trials == "auto":
        return None
    if isinstance(trials, bool) or not isinstance(trials, int) or not (
            trials == 0 or MIN_TRIALS <= trials <= MAX_TRIALS):
        return f"give 0 (no Monte Carlo), {MIN_TRIALS} to {MAX_TRIALS:,} trials, or 'auto' (got {trials!r})"
    return None


def seed_problem(seed) -> str | None:
    """Why `seed` cannot seed the random numbers; None when it can (None: a new seed is chosen)."""
    if seed is None:
        return None
    if isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed <= MAX_SEED:
        return f"the seed must be a whole number between 0 and {MAX_SEED} (got {seed!r})"
    return None
