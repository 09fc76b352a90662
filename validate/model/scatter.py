"""The observed scatter of a calibration as two variance components: reading and preparation.

Repeated readings of one solution show the reading scatter only; the means of independently
prepared standards scatter about the line by preparation and reading together. With m_i
readings of preparation i (Searle, Casella and McCulloch, Variance Components (1992), the
one-way random model, from memory; the same split as ISO 5725-2's repeatability and
between-laboratory terms):

    s_r^2 = sum_i sum_k (y_ik - ybar_i)^2 / sum_i (m_i - 1)    (pooled within the line's solutions and series)
    s_m^2 = residual variance of the preparations' means about the line, N - 2 degrees of freedom
    u_p^2 = max(0, s_m^2 - s_r^2 c),  c = sum_i (1 - h_ii)/m_i / (N - p)   (preparation scatter)

c is the exact coefficient of s_r^2 in the expectation of the residual mean square of a least-
squares fit with p parameters (h_ii the leverage of point i): the residuals are (I - H) e, so
E[sum r_i^2] = sum_i (1 - h_ii) var(e_i) with var(e_i) = u_p^2 + s_r^2/m_i, and sum_i (1 - h_ii)
= N - p (the trace of I - H; Draper and Smith, Applied Regression Analysis, from memory). With
equal m it is 1/m; with unequal m a rarely read point of high leverage counts less than
mean(1/m_i) would give it.

A sample read m0 times then has u^2(y0) = u_p^2 + s_r^2/m0: more readings lower the reading
part only, and the preparation scatter never averages away. It is carried as s_m scaled to m0,
with s_m's N - 2 degrees of freedom (u_p alone, a difference of two variances, has fewer). On
a weighted line every sum carries the solution's weight, so the components are on the line's
weighted scale.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

LINE_GROUP = "calibration line"  # terms resting on s_m (one shared chi-square factor in Monte Carlo)
READING_GROUP = "reading repeatability"  # terms resting on s_r


@dataclass(frozen=True)
class ScatterTerm:
    """One observed-scatter term of a mean reading (absorbance, on the line's weighted scale)."""

    label: str  # "calibration scatter" or "reading scatter"
    u: float
    dof: int
    group: str
    provenance: str


@dataclass(frozen=True)
class ScatterComponents:
    """The line's observed scatter split into reading and preparation scatter."""

    means_sd: float  # s_m
    means_dof: int  # N - 2
    reading_sd: float | None  # s_r; None: no solution was read twice
    reading_dof: int
    preparation_sd: float | None  # u_p; None without s_r
    # the coefficient of s_r^2 in E[s_m^2]: sum((1 - h_ii)/m_i)/(N - p), the leverage-weighted mean of
    # 1/m_i over the line's preparations (mean(1/m_i) when the leverages are equal)
    mean_inverse_count: float

    def to_dict(self) -> dict:
        return asdict(self)

    def _expected_means_variance(self, count: float) -> float:
        """u_p^2 + s_r^2/m, relative scale of a mean of `count` readings."""
        assert self.reading_sd is not None and self.preparation_sd is not None
        return self.preparation_sd**2 + self.reading_sd**2 / count

    def point_term(self, ident: str, count: int, weight: float) -> ScatterTerm:
        """The scatter of a preparation's mean on the line: s_m, scaled for its reading count
        (u_p^2 + s_r^2/m_i relative to the line's average) and its weight."""
        rel = 1.0
        if self.reading_sd is not None and self.preparation_sd is not None:
            average = self.preparation_sd**2 + self.reading_sd**2 * self.mean_inverse_count
            rel = self._expected_means_variance(count) / average if average > 0 else 1.0
        u = self.means_sd * math.sqrt(rel / weight)
        return ScatterTerm("calibration scatter", u, self.means_dof, LINE_GROUP,
                           f"residual standard deviation of the preparations' mean readings about the line "
                           f"{self.means_sd:.3g} (absorbance), {self.means_dof} degrees of freedom, scaled for the "
                           f"solution's number of readings (observed scatter; ISO 8466-1, CG4 A5, on preparation "
                           f"means)")

    def sample_terms(self, ident: str, count: int, weight: float) -> list[ScatterTerm]:
        """The scatter of a sample's mean reading: u^2 = u_p^2 + s_r^2/m0, carried as ONE term on s_m
        with s_m's degrees of freedom: s_m scaled by (u_p^2 + s_r^2/m0) / (u_p^2 + s_r^2 c), c the
        coefficient of s_r^2 in E[s_m^2] (`mean_inverse_count`, module docstring).

        u_p^2 is a difference of two variance estimates, so it has far fewer degrees of freedom
        than s_m (Welch-Satterthwaite, GUM G.4.1); carrying u_p and s_r/sqrt(m0) as two terms would
        overstate the degrees of freedom of the sum (a sample read as often as the standards has
        exactly s_m^2 with N - 2 degrees of freedom). Where no solution was read twice, s_m itself."""
        if self.reading_sd is None or self.preparation_sd is None:
            return [ScatterTerm("calibration scatter", self.means_sd / math.sqrt(weight), self.means_dof,
                                LINE_GROUP,
                                f"residual standard deviation of the line {self.means_sd:.3g} (absorbance), "
                                f"{self.means_dof} degrees of freedom; no solution read twice, so preparation "
                                f"and reading scatter are not told apart and nothing averages")]
        average = self.preparation_sd**2 + self.reading_sd**2 * self.mean_inverse_count
        rel = self._expected_means_variance(count) / average if average > 0 else 1.0
        return [ScatterTerm(
            "calibration scatter", self.means_sd * math.sqrt(rel / weight), self.means_dof, LINE_GROUP,
            f"residual standard deviation of the preparations' mean readings about the line {self.means_sd:.3g} "
            f"(absorbance), {self.means_dof} degrees of freedom, scaled to the sample's number of readings by "
            f"(u_p^2 + s_r^2/m)/(u_p^2 + s_r^2 c), c = sum((1 - h_ii)/m_i)/(N - p) = {self.mean_inverse_count:.3g} "
            f"(h_ii the leverage), with reading scatter s_r {self.reading_sd:.3g} and "
            f"preparation scatter u_p {self.preparation_sd:.3g}: more readings lower the reading part only")]

    def reading_terms(self, ident: str, count: int, weight: float) -> list[ScatterTerm]:
        """Reading scatter s_r/sqrt(m) alone (a solution whose preparation is carried bottom-up);
        the sample's term where no solution was read twice (nothing to split)."""
        if self.reading_sd is None:
            return self.sample_terms(ident, count, weight)
        return [ScatterTerm("reading scatter", self.reading_sd / math.sqrt(count * weight), self.reading_dof,
                            READING_GROUP,
                            f"pooled standard deviation of repeated readings of one solution "
                            f"{self.reading_sd:.3g} (absorbance), {self.reading_dof} degrees of freedom, divided "
                            f"by the square root of the solution's number of readings")]

    def sample_variance(self, count: int, weight: float) -> float:
        """u^2 of a sample's mean reading (absorbance^2): the sum of its terms."""
        return sum(t.u**2 for t in self.sample_terms("", count, weight))


def pooled_reading_sd(groups: list[tuple[list[float], float]]) -> tuple[float | None, int]:
    """(s_r, dof) pooled over groups of repeated readings (readings, weight); (None, 0) when no
    group has two readings (ISO 5725-2:1994, 7.4, pooled within cells, from memory)."""
    ss, dof = 0.0, 0
    for readings, weight in groups:
        if len(readings) >= 2:
            mean = sum(readings) / len(readings)
            ss += weight * sum((a - mean) ** 2 for a in readings)
            dof += len(readings) - 1
    return (math.sqrt(ss / dof), dof) if dof else (None, 0)


def leverages(xs, weights, parameters: int) -> np.ndarray:
    """h_ii of a least-squares polynomial with `parameters` coefficients (2: a line, 3: second
    order) through the points xs, weighted by `weights` (None: unweighted): the diagonal of
    H = X (X'WX)^-1 X'W. Invariant under a shift and scale of x, so x is standardised first."""
    x = np.asarray(xs, dtype=float)
    w = np.ones_like(x) if weights is None else np.asarray(weights, dtype=float)
    spread = float(np.std(x)) or 1.0
    design = np.vander((x - float(np.mean(x))) / spread, parameters, increasing=True)
    information = design.T @ (w[:, None] * design)
    return w * np.einsum("ij,jk,ik->i", design, np.linalg.pinv(information), design)


def residual_inverse_count(xs, weights, counts, parameters: int) -> float:
    """The coefficient of s_r^2 in E[s_m^2] for preparations read `counts` times:
    sum((1 - h_ii)/m_i) / (N - p), the exact form (module docstring)."""
    free = len(counts) - parameters
    if free <= 0 or len(set(counts)) == 1:  # equal counts: exactly mean(1/m), as sum(1 - h_ii) = N - p
        return sum(1.0 / m for m in counts) / len(counts)
    h = leverages(xs, weights, parameters)
    return float(np.sum((1.0 - h) / np.asarray(counts, dtype=float)) / free)
