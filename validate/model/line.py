"""Straight-line calibration: one weighted least-squares line, and its statistics.

Formulas: ordinary least squares and the inverse-prediction (observed-scatter)
uncertainty as in ISO 8466-1 and the EURACHEM/CITAC Guide CG4, Example A5;
weighted least squares with weights normalised to a mean of one (Miller and
Miller, Statistics and Chemometrics for Analytical Chemistry, sections 5.4 and
5.10).

`level_sums` is the one least-squares computation of the package. It is written
over calibration levels (n_j readings of mean y_j at x_j, weight w_j per
reading) with sums and arithmetic only, so it runs unchanged on plain floats,
on `uncertainties` numbers (linear engine) and on numpy arrays of trials (Monte
Carlo engine): the loop runs over levels, never over trials. The model refits
the line with it in every evaluation; `fit_line` adds the statistics on plain
numbers.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from validate.metrology.probability import t_quantile


@dataclass(frozen=True)
class LevelSums:
    """Weighted sums of a straight line through levels; fields hold the caller's backend.

    total = sum c_j with c_j = n_j w_j; x_mean = sum c_j x_j / total (y_mean alike);
    sxx = sum c_j (x_j - x_mean)^2; sxy = sum c_j (x_j - x_mean)(y_j - y_mean).
    """

    total: Any
    x_mean: Any
    y_mean: Any
    sxx: Any
    sxy: Any

    def line(self) -> tuple[Any, Any]:
        """(intercept, slope): b = Sxy / Sxx, a = ybar - b xbar (the normal equations)."""
        slope = self.sxy / self.sxx
        return self.y_mean - slope * self.x_mean, slope


def level_sums(counts: Sequence, x: Sequence, y: Sequence, weights: Sequence | None = None) -> LevelSums:
    """Sums of the weighted least-squares line through levels (n_j, x_j, y_j, w_j).

    With n_j readings of mean y_j at x_j the sums equal those of a fit to every
    single reading (the within-level scatter adds to the residuals only), so
    the line is the same. Counts and weights are plain numbers (weights None:
    all 1); x and y may be floats, ufloats or arrays of trials.
    """
    c = list(counts) if weights is None else [n * w for n, w in zip(counts, weights, strict=True)]
    if not len(c) == len(x) == len(y):
        raise ValueError(f"a straight line needs one count, x and y per level; got {len(c)} counts, "
                         f"{len(x)} x values and {len(y)} y values")
    total = sum(c)
    x_mean = sum(_times(cj, xj) for cj, xj in zip(c, x, strict=True)) / total
    y_mean = sum(_times(cj, yj) for cj, yj in zip(c, y, strict=True)) / total
    dx = [xj - x_mean for xj in x]
    sxx = sum(_times(cj, d) * d for cj, d in zip(c, dx, strict=True))
    sxy = sum(_times(cj, d) * (yj - y_mean) for cj, d, yj in zip(c, dx, y, strict=True))
    return LevelSums(total, x_mean, y_mean, sxx, sxy)


def _times(c, v):
    """c v; an array of trials itself where c is 1 (1 v is v exactly, so the Monte Carlo engine
    skips a pass over the trials; other backends keep the product, and with it their expression)."""
    return v if c == 1 and isinstance(v, np.ndarray) else c * v


def straight_line(counts: Sequence, x: Sequence, y: Sequence, weights: Sequence | None = None):
    """(intercept, slope) of the weighted least-squares line through levels (any backend)."""
    return level_sums(counts, x, y, weights).line()


@dataclass(frozen=True)
class LineFit:
    """A fitted line y = intercept + slope * x with its statistics."""

    slope: float
    intercept: float
    slope_u: float
    intercept_u: float
    covariance: float  # cov(slope, intercept)
    residual_sd: float  # s(y/x), weighted when weights were given
    dof: int  # n - 2
    n: int
    r_squared: float
    x_mean: float  # weighted mean when weighted
    y_mean: float
    sxx: float  # sum w (x - x_mean)^2
    rss: float  # sum w r^2
    weighted: bool
    x: tuple[float, ...]
    y: tuple[float, ...]
    weights: tuple[float, ...]

    def predict(self, x):
        return self.intercept + self.slope * np.asarray(x, dtype=float)

    def residuals(self) -> np.ndarray:
        return np.asarray(self.y) - self.predict(self.x)

    def to_dict(self) -> dict:
        d = asdict(self)
        for key in ("x", "y", "weights"):
            d[key] = list(d[key])
        return d


def fit_line(x, y, weights=None) -> LineFit:
    """Least-squares straight line of y on x with its statistics; weights are inverse variances.

    Every reading is a level of one reading for `level_sums`; weights are
    normalised to sum to n, so s(y/x) keeps the unit of y.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.shape != y.shape or x.ndim != 1:
        raise ValueError("x and y must be one-dimensional and of equal length")
    n = len(x)
    if n < 3:
        raise ValueError("a straight-line fit with an uncertainty needs at least 3 points")
    weighted = weights is not None
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=float)
    if w.shape != x.shape:
        raise ValueError("give one weight per point")
    if np.any(w <= 0) or not np.all(np.isfinite(w)):
        raise ValueError("weights must be positive and finite")
    w = w * n / w.sum()  # normalise so that the weights sum to n
    sums = level_sums([1.0] * n, x.tolist(), y.tolist(), w.tolist())
    if sums.sxx == 0.0:
        raise ValueError("all standards have the same concentration; a line cannot be fitted")
    intercept, slope = sums.line()
    return _with_statistics(x, y, w, sums, float(intercept), float(slope), weighted)


def _with_statistics(x: np.ndarray, y: np.ndarray, w: np.ndarray, sums: LevelSums, intercept: float,
                     slope: float, weighted: bool) -> LineFit:
    """Residual scatter, standard errors and r^2 of a fitted line (Draper and Smith, Applied
    Regression Analysis, 3rd ed., sections 1.3-1.4; the same expressions as ISO 8466-1)."""
    n = len(x)
    x_mean, y_mean, sxx = float(sums.x_mean), float(sums.y_mean), float(sums.sxx)
    resid = y - (intercept + slope * x)  # from the residuals themselves: no cancellation in Syy - b Sxy
    rss = float(np.sum(w * resid**2))
    dof = n - 2
    s = math.sqrt(rss / dof) if dof > 0 else float("nan")
    syy = float(np.sum(w * (y - y_mean) ** 2))
    return LineFit(
        slope=slope, intercept=intercept, slope_u=s / math.sqrt(sxx),
        intercept_u=s * math.sqrt(1.0 / n + x_mean**2 / sxx), covariance=-x_mean * s**2 / sxx,
        residual_sd=s, dof=dof, n=n, r_squared=1.0 - rss / syy if syy > 0 else float("nan"),
        x_mean=x_mean, y_mean=y_mean, sxx=sxx, rss=rss, weighted=weighted,
        x=tuple(x.tolist()), y=tuple(y.tolist()), weights=tuple(w.tolist()),
    )


@dataclass(frozen=True)
class InversePrediction:
    """Concentration read off the line for the mean of m replicate readings."""

    response_mean: float
    replicates: int
    value: float
    standard_uncertainty: float
    dof: int
    finite: bool  # False when the slope is not significantly different from zero
    g: float  # Fieller's g = t^2 u(slope)^2 / slope^2; the interval is finite only when g < 1

    def to_dict(self) -> dict:
        return asdict(self)


def slope_resolved(fit: LineFit, confidence: float = 0.95) -> bool:
    """Is the slope significantly different from zero at `confidence` (Fieller's g < 1, as
    `inverse_prediction.finite`: |b| / u(b) > t_q(nu), q = (1 + confidence)/2)? The t quantile is
    needed only for a slope whose t ratio is at most tan(pi (q - 1/2)): that is the quantile of
    the t distribution with nu = 1 (the Cauchy distribution), and t_q(nu) falls as nu grows for
    q > 1/2 (any statistics handbook), so a larger ratio is significant at every nu >= 1."""
    b = fit.slope
    if b == 0:
        return False
    q = 0.5 + confidence / 2.0
    ratio = abs(b) / fit.slope_u if fit.slope_u != 0 else math.inf  # a nan u(b) falls to the test below
    if fit.dof >= 1 and ratio > math.tan(math.pi * (q - 0.5)):
        return True
    g = (t_quantile(q, fit.dof) * fit.slope_u / b) ** 2
    return g < 1.0


def inverse_prediction(fit: LineFit, readings, sample_weight: float = 1.0,
                       confidence: float = 0.95, response_variance: float | None = None) -> InversePrediction:
    """x0 = (y0 - a) / b with the observed-scatter standard uncertainty.

    u(x0) = s/b * sqrt(1/(w0 m) + 1/n + (y0 - ybar)^2 / (b^2 Sxx))
    (ISO 8466-1; EURACHEM/CITAC CG4 Example A5, equation for c0; weighted form
    after Miller and Miller). `sample_weight` is w0 on the same normalised
    scale as the fit's weights. `response_variance`, when given, replaces the
    sample's own term s^2/(w0 m): with the line fitted to preparation means it is
    u_p^2 + s_r^2/m (validate.model.scatter), so preparation scatter does not
    average away with more readings.
    """
    r = np.asarray(readings, dtype=float).ravel()
    m = len(r)
    if m < 1:
        raise ValueError("an inverse prediction needs at least one reading")
    y0 = float(r.mean())
    b = fit.slope
    t = t_quantile(0.5 + confidence / 2.0, fit.dof)  # what scipy.stats.t.ppf computes
    ratio = t * fit.slope_u / b if b != 0 else math.inf
    g = ratio * ratio
    finite = g < 1.0
    if b == 0:
        return InversePrediction(y0, m, math.nan, math.inf, fit.dof, False, g)
    x0 = (y0 - fit.intercept) / b
    s2 = fit.residual_sd**2
    own = s2 / (sample_weight * m) if response_variance is None else response_variance
    d = (y0 - fit.y_mean) / b  # divided by b first (b^2 may underflow); d * d is inf, never an error
    lever = d * d / fit.sxx
    u = math.sqrt(own + s2 * (1.0 / fit.n + lever)) / abs(b)
    return InversePrediction(y0, m, x0, u if finite else math.inf, fit.dof, finite, g)
