"""Straight-line calibration: fits and inverse prediction on plain numbers.

Formulas: ordinary least squares and the inverse-prediction (observed-scatter)
uncertainty as in ISO 8466-1 and the EURACHEM/CITAC Guide CG4, Example A5;
weighted least squares with weights normalised to a mean of one (Miller and
Miller, Statistics and Chemometrics for Analytical Chemistry, section 5.10).
The model of the measurement (`validate.model.assay`) refits the line generically
for the two engines; this module serves reporting and validation statistics.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import stats


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
    """Least-squares straight line of y on x; weights are inverse variances."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.shape != y.shape or x.ndim != 1:
        raise ValueError("x and y must be one-dimensional and of equal length")
    n = len(x)
    if n < 3:
        raise ValueError("a straight-line fit with an uncertainty needs at least 3 points")
    weighted = weights is not None
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=float)
    if np.any(w <= 0) or not np.all(np.isfinite(w)):
        raise ValueError("weights must be positive and finite")
    w = w * n / w.sum()  # normalise so that the weights sum to n
    x_mean = float(np.sum(w * x) / n)
    y_mean = float(np.sum(w * y) / n)
    sxx = float(np.sum(w * (x - x_mean) ** 2))
    if sxx == 0.0:
        raise ValueError("all standards have the same concentration; a line cannot be fitted")
    sxy = float(np.sum(w * (x - x_mean) * (y - y_mean)))
    slope = sxy / sxx
    intercept = y_mean - slope * x_mean
    resid = y - (intercept + slope * x)
    rss = float(np.sum(w * resid**2))
    dof = n - 2
    s = math.sqrt(rss / dof) if dof > 0 else float("nan")
    slope_u = s / math.sqrt(sxx)
    intercept_u = s * math.sqrt(1.0 / n + x_mean**2 / sxx)
    covariance = -x_mean * s**2 / sxx
    syy = float(np.sum(w * (y - y_mean) ** 2))
    r_squared = 1.0 - rss / syy if syy > 0 else float("nan")
    return LineFit(
        slope=slope, intercept=intercept, slope_u=slope_u, intercept_u=intercept_u,
        covariance=covariance, residual_sd=s, dof=dof, n=n, r_squared=r_squared,
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


def inverse_prediction(fit: LineFit, readings, sample_weight: float = 1.0,
                       confidence: float = 0.95) -> InversePrediction:
    """x0 = (y0 - a) / b with the observed-scatter standard uncertainty.

    u(x0) = s/b * sqrt(1/(w0 m) + 1/n + (y0 - ybar)^2 / (b^2 Sxx))
    (ISO 8466-1; EURACHEM/CITAC CG4 Example A5, equation for c0; weighted form
    after Miller and Miller). `sample_weight` is w0 on the same normalised
    scale as the fit's weights.
    """
    r = np.asarray(readings, dtype=float).ravel()
    m = len(r)
    if m < 1:
        raise ValueError("an inverse prediction needs at least one reading")
    y0 = float(r.mean())
    b = fit.slope
    t = stats.t.ppf(0.5 + confidence / 2.0, fit.dof)
    g = (t * fit.slope_u / b) ** 2 if b != 0 else math.inf
    finite = g < 1.0
    if b == 0:
        return InversePrediction(y0, m, math.nan, math.inf, fit.dof, False, g)
    x0 = (y0 - fit.intercept) / b
    u = (fit.residual_sd / abs(b)) * math.sqrt(
        1.0 / (sample_weight * m) + 1.0 / fit.n + (y0 - fit.y_mean) ** 2 / (b**2 * fit.sxx)
    )
    return InversePrediction(y0, m, x0, u if finite else math.inf, fit.dof, finite, g)
