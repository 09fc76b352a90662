"""Weights of a calibration line from the levels' repeated readings.

Two ways, chosen by the method's `weighting`:

- `inverse-variance`: each level weighted by 1/s_j^2 of its own readings; a sample, read off
  the line, by 1/s^2 with s interpolated linearly in concentration between the levels (Miller
  and Miller, Statistics and Chemometrics for Analytical Chemistry, section 5.10). With three
  readings a level's s has 2 degrees of freedom, so its weight is mostly noise: a warning
  is given below MIN_READINGS_FOR_WEIGHTS readings per level.
- `variance-function`: s(c) = a + b c fitted to the levels' standard deviations (each with
  its degrees of freedom as weight), the linear model of the standard deviation of ISO 11095
  and ISO 8466-1 (from memory); every level and sample is weighted by 1/s(c)^2. The function
  pools every level's readings, so the weights do not carry each level's sampling noise.

The weights are normalised to a mean of one over the line's points (its preparations), so
the weighted residual scatter keeps the unit of absorbance.
"""

from __future__ import annotations

import statistics
from collections.abc import Sequence

from validate.model.errors import ModelError
from validate.model.levels import Level, ReadSolution
from validate.model.line import LineFit, fit_line, inverse_prediction

WEIGHTING_FUNCTIONS = ("inverse-variance", "variance-function")
# Readings per level below which a level's own standard deviation is too noisy to weight by
# (common practice: s from n readings has n - 1 degrees of freedom; with 4 it is uncertain by
# about 40 %, with 2 degrees of freedom its inverse square spans a factor of 100).
MIN_READINGS_FOR_WEIGHTS = 5


def level_sd(level: Level) -> float:
    """Standard deviation of a level's readings; a clear error where it gives no weight."""
    readings = level.readings
    if len(readings) < 2:
        raise ModelError(f"weighted line: `{level.id}` has {len(readings)} reading; inverse-variance weights "
                         f"need at least 2 replicate readings of every level")
    sd = statistics.stdev(readings)
    if sd == 0:
        raise ModelError(f"weighted line: the readings of `{level.id}` are identical, so their standard "
                         f"deviation (and weight) is undefined; use weighting = \"variance-function\" or "
                         f"\"none\"")
    return sd


def _sd_trend(xs: list[float], sds: list[float]) -> LineFit | None:
    """The straight line of s on concentration, when the levels allow one."""
    return fit_line(xs, sds) if len(set(xs)) >= 2 and len(xs) >= 3 else None


def _at(function: tuple[float, float] | None, x0: float, sds: list[float]) -> float:
    """s at concentration x0 from the line (a, b) of s on c, never below the smallest level s."""
    s0 = function[0] + function[1] * x0 if function else statistics.mean(sds)
    return max(s0, min(sds))


def variance_function(levels: Sequence[Level]) -> tuple[float, float, float]:
    """(a, b, floor) of s(c) = a + b c fitted to the levels' SDs, weighted by their degrees of
    freedom (ISO 11095, linear model of the standard deviation, from memory); floor: the
    smallest positive s the function is allowed to give (a tenth of the pooled s)."""
    rows = [(lv.concentration, statistics.stdev(lv.readings), len(lv.readings) - 1)
            for lv in levels if len(lv.readings) >= 2]
    if len({x for x, _, _ in rows}) < 2:
        raise ModelError("weighted line (variance function): at least two levels at different concentrations "
                         "need 2 or more readings each to fit s = a + b c")
    total = sum(d for _, _, d in rows)
    pooled = (sum(d * s**2 for _, s, d in rows) / total) ** 0.5
    if pooled == 0:
        raise ModelError("weighted line (variance function): every level's readings are identical; there is "
                         "no scatter to weight by; use weighting = \"none\"")
    fit = fit_line([x for x, _, _ in rows], [s for _, s, _ in rows], [d for _, _, d in rows]) if len(rows) >= 3 \
        else None
    if fit is None:
        (x1, s1, _), (x2, s2, _) = rows[0], rows[-1]
        b = (s2 - s1) / (x2 - x1)
        return s1 - b * x1, b, 0.1 * pooled
    return fit.intercept, fit.slope, 0.1 * pooled


def _sd_function(levels: Sequence[Level], how: str):
    """c -> s(c): the fitted variance function, or the trend of the levels' own SDs (for samples)."""
    if how == "variance-function":
        a, b, floor = variance_function(levels)
        return lambda x0: max(a + b * x0, floor)
    sds = [level_sd(lv) for lv in levels]
    trend = _sd_trend([lv.concentration for lv in levels], sds)
    line = (trend.intercept, trend.slope) if trend else None
    return lambda x0: _at(line, x0, sds)


def level_weights(levels: Sequence[Level], samples: Sequence[ReadSolution],
                  how: str = "inverse-variance") -> dict[str, float]:
    """Weight of one point of every level and sample (id -> weight), mean one over the points."""
    unweighted = fit_line([p.concentration for lv in levels for p in lv.preparations],
                          [p.mean for lv in levels for p in lv.preparations])
    if how not in WEIGHTING_FUNCTIONS:
        raise ValueError(f"unknown weighting {how!r}")
    s_at = _sd_function(levels, how)
    raw = {lv.id: 1.0 / (s_at(lv.concentration) if how == "variance-function" else level_sd(lv)) ** 2
           for lv in levels}
    for smp in samples:
        raw[smp.id] = 1.0 / s_at(inverse_prediction(unweighted, smp.readings).value) ** 2
    points = sum(len(lv.preparations) for lv in levels)
    scale = points / sum(raw[lv.id] * len(lv.preparations) for lv in levels)
    return {k: v * scale for k, v in raw.items()}


def weight_notes(levels: Sequence[Level], how: str) -> tuple[str, ...]:
    """A warning where each level's own weight rests on fewer than MIN_READINGS_FOR_WEIGHTS readings."""
    fewest = min(lv.count for lv in levels)
    if how != "inverse-variance" or fewest >= MIN_READINGS_FOR_WEIGHTS:
        return ()
    return (f"weights 1/s^2 rest on as few as {fewest} readings per level ({fewest - 1} degrees of freedom): "
            f"such a standard deviation is uncertain by tens of percent and its inverse square is mostly "
            f"noise; read every level at least {MIN_READINGS_FOR_WEIGHTS} times, or use weighting = "
            f"\"variance-function\" (s = a + b c fitted over every level; ISO 11095, from memory)",)
