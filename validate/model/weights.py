"""Inverse-variance weights of a calibration line from the levels' repeated readings.

Each level is weighted by 1/s_j^2 of its readings; a sample, read off the line,
by 1/s^2 with s interpolated linearly in concentration between the levels
(Miller and Miller, Statistics and Chemometrics for Analytical Chemistry,
section 5.10). The weights are normalised to a mean of one over the line's
readings, so the weighted residual scatter keeps the unit of absorbance.
"""

from __future__ import annotations

import statistics
from collections.abc import Sequence

from validate.model.errors import ModelError
from validate.model.levels import Level, ReadSolution
from validate.model.line import LineFit, fit_line, inverse_prediction


def level_sd(level: Level) -> float:
    """Standard deviation of a level's readings; a clear error where it gives no weight."""
    readings = level.readings
    if len(readings) < 2:
        raise ModelError(f"weighted line: `{level.id}` has {len(readings)} reading; inverse-variance weights "
                         f"need at least 2 replicate readings of every level")
    sd = statistics.stdev(readings)
    if sd == 0:
        raise ModelError(f"weighted line: the readings of `{level.id}` are identical, so their standard "
                         f"deviation (and weight) is undefined; use weighting = \"none\"")
    return sd


def _sd_trend(xs: list[float], sds: list[float]) -> LineFit | None:
    """The straight line of s on concentration, when the levels allow one."""
    return fit_line(xs, sds) if len(set(xs)) >= 2 and len(xs) >= 3 else None


def _sample_sd(sample: ReadSolution, unweighted: LineFit, trend: LineFit | None, sds: list[float]) -> float:
    """s at the sample's concentration (read off the unweighted line), never below the smallest s."""
    x0 = inverse_prediction(unweighted, sample.readings).value
    s0 = trend.intercept + trend.slope * x0 if trend else statistics.mean(sds)
    return max(s0, min(sds))


def level_weights(levels: Sequence[Level], samples: Sequence[ReadSolution]) -> dict[str, float]:
    """Weight of one reading of every level and sample (id -> weight), mean one over the line."""
    sds = [level_sd(lv) for lv in levels]
    xs = [lv.concentration for lv in levels]
    trend = _sd_trend(xs, sds)
    unweighted = fit_line([p.concentration for lv in levels for p in lv.preparations for _ in p.readings],
                          [a for lv in levels for a in lv.readings])
    raw = {lv.id: 1.0 / sd**2 for lv, sd in zip(levels, sds, strict=True)}
    for smp in samples:
        raw[smp.id] = 1.0 / _sample_sd(smp, unweighted, trend, sds) ** 2
    total = sum(lv.count for lv in levels)
    scale = total / sum(raw[lv.id] * lv.count for lv in levels)
    return {k: v * scale for k, v in raw.items()}
