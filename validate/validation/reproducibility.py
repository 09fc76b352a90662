"""Within-laboratory reproducibility of a control sample read in several series.

One-way analysis of variance over the series (days, analysts, reagent lots) gives the
repeatability s_r, the between-series standard deviation s_between and the within-laboratory
reproducibility s_Rw of a single reading (ISO 5725-3:1994; n0 for unequal series sizes as in
ISO 5725-2:1994, 7.4, from memory), and the standard deviation of a routine result, the mean
of m readings made in one series, with Satterthwaite degrees of freedom (Satterthwaite,
Biometrics Bulletin 2 (1946) 110-114).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

WEAK_DOF = 5  # fewer degrees of freedom than this: a standard deviation known to within ~30 % at best
SOURCE = ("One-way analysis of variance over the series: s_r^2 = MS_within, s_between^2 = "
          "max(0, (MS_between - MS_within)/n0), s_Rw^2 = s_r^2 + s_between^2 (ISO 5725-3:1994; n0 for "
          "unequal series sizes, ISO 5725-2:1994, 7.4, from memory); degrees of freedom of s_Rw and of a "
          "routine result by Satterthwaite (Biometrics Bulletin 2 (1946) 110).")


@dataclass(frozen=True)
class Reproducibility:
    """One control sample's ANOVA; standard deviations in the unit of the values given."""

    series: int
    n: int
    grand_mean: float
    ms_between: float
    ms_within: float
    n0: float  # effective number of readings per series
    s_r: float
    s_between: float
    s_Rw: float
    dof_r: int
    dof: float  # of s_Rw, Satterthwaite
    readings_per_result: float  # m: readings averaged into one routine result
    result_sd: float  # sqrt(s_between^2 + s_r^2/m)
    result_dof: float

    @property
    def weak(self) -> bool:
        return self.result_dof < WEAK_DOF


def _satterthwaite(coefficients: tuple[float, float], mean_squares: tuple[float, float],
                   dofs: tuple[int, int]) -> float:
    """nu of sum a_i MS_i (Satterthwaite 1946): (sum a_i MS_i)^2 / sum (a_i MS_i)^2/nu_i."""
    total = sum(a * ms for a, ms in zip(coefficients, mean_squares, strict=True))
    denominator = sum((a * ms) ** 2 / nu for a, ms, nu in zip(coefficients, mean_squares, dofs, strict=True))
    return total**2 / denominator if denominator > 0 else math.inf


def series_groups(values, labels) -> list[np.ndarray]:
    """Values grouped by their series label, in the order the labels first appear."""
    v = np.asarray(values, dtype=float).ravel()
    labels = list(labels)
    if len(labels) != len(v):
        raise ValueError(f"{len(v)} values but {len(labels)} series labels; give one label per value")
    if not np.all(np.isfinite(v)):
        raise ValueError("the control readings contain a missing or non-finite value")
    order = list(dict.fromkeys(labels))
    return [v[[lab == key for lab in labels]] for key in order]


def reproducibility(groups: list, readings_per_result: float | None = None) -> Reproducibility:
    """ANOVA of values grouped by series. `readings_per_result` (m) defaults to n0, the
    effective number of readings per series: a routine result is the mean of one series' readings."""
    data = [np.asarray(g, dtype=float).ravel() for g in groups]
    p = len(data)
    sizes = np.array([len(g) for g in data])
    big_n = int(sizes.sum())
    if p < 2:
        raise ValueError(f"reproducibility needs at least 2 series; {p} given")
    if np.any(sizes < 2):
        raise ValueError("every series needs at least 2 readings (repeatability within the series)")
    grand = float(np.concatenate(data).mean())
    ms_b = float(sum(len(g) * (g.mean() - grand) ** 2 for g in data)) / (p - 1)
    ms_w = float(sum(np.sum((g - g.mean()) ** 2) for g in data)) / (big_n - p)
    n0 = (big_n - float(np.sum(sizes**2)) / big_n) / (p - 1)
    m = n0 if readings_per_result is None else float(readings_per_result)
    if not m >= 1:
        raise ValueError("a routine result is the mean of at least 1 reading")
    dofs = (p - 1, big_n - p)
    s_b2 = max(0.0, (ms_b - ms_w) / n0)
    if s_b2 > 0:  # s_Rw^2 = MS_b/n0 + (1 - 1/n0) MS_w; result: MS_b/n0 + (1/m - 1/n0) MS_w
        dof = _satterthwaite((1 / n0, 1 - 1 / n0), (ms_b, ms_w), dofs)
        result_dof = _satterthwaite((1 / n0, 1 / m - 1 / n0), (ms_b, ms_w), dofs)
    else:  # no between-series component found: both rest on MS_within alone
        dof = result_dof = float(big_n - p)
    return Reproducibility(
        series=p, n=big_n, grand_mean=grand, ms_between=ms_b, ms_within=ms_w, n0=n0,
        s_r=math.sqrt(ms_w), s_between=math.sqrt(s_b2), s_Rw=math.sqrt(ms_w + s_b2),
        dof_r=big_n - p, dof=dof, readings_per_result=m,
        result_sd=math.sqrt(s_b2 + ms_w / m), result_dof=result_dof)
