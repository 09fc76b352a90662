"""Single readings of the samples in the result's unit, for the method's routine uncertainty.

A reading's concentration is read off the run's line, c = (A - a)/b, and put into the result's
unit with the factor result / c_measured of its sample: the result formula is taken as
proportional to c_measured (the record states it).
"""

from __future__ import annotations

import numpy as np

from validate.inputs.schema import AssayMethod
from validate.model.assay import Model
from validate.model.line import fit_line
from validate.propagation.linear import LinearResult
from validate.validation.block import calibration_data
from validate.validation.reproducibility import series_groups


class ControlReadings:
    """Every sample's single readings in the result's unit, and its bottom-up result."""

    def __init__(self, method: AssayMethod, model: Model, results: list[LinearResult]):
        xs, ys, ws = calibration_data(method, model)
        self.fit = fit_line(xs, ys, ws)
        self.method = method
        self.model = model
        self.results = {key.id: r for key, r in zip(model.result_keys, results, strict=True) if key.kind == "result"}
        self.cal_levels = [x for x in xs if x > 0]

    def scale(self, sample: str) -> float:
        """result / c_measured of the sample (result unit per calibration unit)."""
        readings = self.method.readings[sample]
        c = (float(np.mean(readings)) - self.fit.intercept) / self.fit.slope
        if c == 0:
            raise ValueError(f"the sample `{sample}` reads as zero: its readings cannot be scaled to the result")
        return self.results[sample].value / c

    def values(self, sample: str) -> list[float]:
        factor = self.scale(sample)
        return [factor * (a - self.fit.intercept) / self.fit.slope for a in self.method.readings[sample]]

    def routine_samples(self, excluded: set[str]) -> list[LinearResult]:
        return sorted((r for s, r in self.results.items() if s not in excluded), key=lambda r: r.value)


def series_results(values: list[float], labels: tuple[str, ...] | None) -> tuple[float, int]:
    """(standard deviation, count) of the results a bias rests on: the series means when the
    sample was read in two or more series, else its single readings."""
    groups = series_groups(values, labels or ("one series",) * len(values))
    results = [float(g.mean()) for g in groups] if len(groups) >= 2 else list(values)
    sd = float(np.std(results, ddof=1)) if len(results) >= 2 else 0.0
    return sd, len(results)
