"""Validation of the GUM interval against Monte Carlo, decided beyond Monte Carlo noise.

JCGM 101:2008 8.2 (from memory): with delta the numerical tolerance of u(y) (7.9.2), the GUM
interval y +/- U_p is validated when d_low = |y - U_p - y_low| and d_high = |y + U_p - y_high|
are both no larger than delta, and the Monte Carlo run used for the comparison should reach
a numerical tolerance of delta/5. The ends y_low, y_high of the Monte Carlo interval are
themselves estimates: a verdict drawn from d <= delta alone can flip with the seed when d
lies near delta. Here each end carries its numerical spread (the half-width of a 95 %
distribution-free confidence interval of the order statistic, from the binomial count of
trials below it; Hahn and Meeker, Statistical Intervals (1991), ch. 5, from memory), and:

- "agrees" when d + spread <= delta at both ends,
- "differs" when d - spread > delta at either end,
- "undecided" otherwise: the difference lies within Monte Carlo noise of the tolerance.

The engine adds trials while a verdict is undecided, or agrees but the spread still exceeds
delta/5, within a trial budget; what is still undecided then is reported as undecided, never
guessed. A difference beyond noise needs no more trials: more cannot turn it into agreement.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from validate.propagation.mcstats import (
    GumValidation,
    coverage_interval_symmetric,
    numerical_tolerance,
    symmetric_indices,
    validate_gum,
)

CONFIDENCE_Z = 1.96  # a 95 % confidence interval for each end (normal approximation of the binomial)
TARGET_FRACTION = 0.2  # JCGM 101 8.2 (from memory): the validating run reaches delta/5
VERDICTS = ("agrees", "differs", "undecided")


@dataclass(frozen=True)
class GumCheck:
    """The comparison of JCGM 101 8.2 with the numerical spread of the Monte Carlo ends."""

    validation: GumValidation  # y, both intervals, d_low, d_high, delta
    spread_low: float  # numerical half-width (95 %) of the Monte Carlo interval's low end
    spread_high: float
    target: float  # delta/5: the numerical tolerance the validating run should reach
    trials: int  # valid trials behind the Monte Carlo interval compared

    @property
    def numerical_tolerance(self) -> float:
        """The Monte Carlo numerical tolerance reached: the larger spread of the two ends."""
        return max(self.spread_low, self.spread_high)

    @property
    def verdict(self) -> str:
        v = self.validation
        if v.d_low + self.spread_low <= v.delta and v.d_high + self.spread_high <= v.delta:
            return "agrees"
        if v.d_low - self.spread_low > v.delta or v.d_high - self.spread_high > v.delta:
            return "differs"
        return "undecided"

    @property
    def agrees(self) -> bool | None:
        """True or False where decided beyond Monte Carlo noise; None where undecided."""
        return {"agrees": True, "differs": False}.get(self.verdict)

    @property
    def settled(self) -> bool:
        """No more trials needed: a difference beyond noise is settled at once (more trials
        cannot undo it); an agreement only at the numerical tolerance delta/5 that JCGM 101 8.2
        asks of a validating run."""
        reached = self.numerical_tolerance <= self.target or self.validation.delta == 0
        return self.verdict == "differs" or (self.verdict == "agrees" and reached)

    def explanation(self) -> str:
        v = self.validation
        head = (f"d_low {v.d_low:.3g}, d_high {v.d_high:.3g} against delta {v.delta:.3g}; Monte Carlo "
                f"ends known to +/-{self.numerical_tolerance:.2g} from {self.trials} trials "
                f"(target delta/5 = {self.target:.2g})")
        match self.verdict:
            case "agrees":
                return f"{head}: the GUM interval is validated (JCGM 101 8.2)"
            case "differs":
                return f"{head}: the GUM interval is not validated; use the Monte Carlo interval"
            case _:
                return (f"{head}: the difference lies within Monte Carlo noise of the tolerance and "
                        "could not be decided within the trial budget")


def end_spreads(sorted_values: np.ndarray, p: float) -> tuple[float, float]:
    """Numerical half-widths (95 %) of the ends of the symmetric interval (JCGM 101 7.7.1).

    The end y_(r) is the order statistic at rank r of M trials; the number of trials below the
    true quantile is binomial (M, r/M), so ranks r -/+ z sqrt(M a (1 - a)), a = r/M, bracket it
    with about 95 % confidence. Half the distance between those order statistics is the spread.
    """
    s = np.asarray(sorted_values, dtype=float)
    return end_spreads_at(s.__getitem__, s.size, p)


def end_spreads_at(at: Callable[[int], float], m: int, p: float) -> tuple[float, float]:
    """`end_spreads` of M sorted values of which `at(i)` gives the one at 0-based index i."""
    low, high = symmetric_indices(m, p)
    return _spread_at(at, m, low), _spread_at(at, m, high)


def spread_indices(m: int, index: int) -> tuple[int, int]:
    """The 0-based indices whose values bracket the order statistic at `index` (see end_spreads)."""
    a = (index + 1) / m
    k = math.ceil(CONFIDENCE_Z * math.sqrt(m * a * (1.0 - a)))
    return max(index - k, 0), min(index + k, m - 1)


def _spread_at(at: Callable[[int], float], m: int, index: int) -> float:
    below, above = spread_indices(m, index)
    return float(at(above) - at(below)) / 2.0


def check_gum(y: float, expanded: float, u: float, sorted_values: np.ndarray, p: float) -> GumCheck:
    """The JCGM 101 8.2 comparison for one output from its sorted finite Monte Carlo values."""
    s = np.asarray(sorted_values)
    coverage_interval_symmetric(s, p, presorted=True)  # refuses values that are not finite
    return check_gum_at(y, expanded, u, s.__getitem__, s.size, p)


def check_gum_at(y: float, expanded: float, u: float, at: Callable[[int], float], m: int, p: float) -> GumCheck:
    """`check_gum` of M sorted finite values of which `at(i)` gives the one at 0-based index i
    (the engine's kept tails give only the values it reads: the ends and their spread brackets)."""
    low, high = symmetric_indices(m, p)
    delta = numerical_tolerance(u, 2) if u > 0 else 0.0
    validation = validate_gum(y, (y - expanded, y + expanded), (float(at(low)), float(at(high))), delta)
    spread_low, spread_high = end_spreads_at(at, m, p)
    return GumCheck(validation, spread_low, spread_high, TARGET_FRACTION * delta, int(m))


__all__ = ["GumCheck", "VERDICTS", "check_gum", "check_gum_at", "end_spreads"]
