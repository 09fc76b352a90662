"""Second-order calibration function y = a + b x + c x^2: fit, statistics, inverse prediction.

The second-order calibration function of ISO 8466-2 (from memory), used where the straight
line fails Mandel's test. Like `validate.model.line`, the fit is written over calibration
levels with sums and arithmetic only, so it runs unchanged on floats, on `uncertainties`
numbers (linear engine) and on numpy arrays of trials (Monte Carlo engine: the fit is
redone in every trial).

Numerically the fit uses orthogonal polynomials over the levels (Forsythe's construction,
Draper and Smith, Applied Regression Analysis, 3rd ed., section 12.1, from memory):
p0 = 1, p1 = u = x - xbar, p2 = u^2 - alpha u - beta with alpha and beta chosen so the
three are orthogonal under the weights; each coefficient of the p's is then a ratio of two
sums, and no 3 x 3 system is solved (the x^2 column of a raw design matrix is nearly
collinear with x, e.g. NIST StRD Pontius).

Inverse prediction: the root of c x^2 + b x + (a - y0) = 0 on the rising branch of the
function, where the slope b + 2 c x = +sqrt(D) (D = b^2 - 4 c (a - y0)) is positive. It is
computed in the cancellation-free form (Press et al., Numerical Recipes, 3rd ed., 5.6):
x0 = 2 (y0 - a) / (b + sqrt(D)) when b > 0 (which tends to the straight line's
(y0 - a)/b as c -> 0), x0 = (sqrt(D) - b) / (2 c) otherwise. The branch is chosen once from
the estimates, never per trial.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass

import numpy as np

from validate.model import backend

MIN_LEVELS = 4  # three coefficients and at least one degree of freedom for the residual scatter
FUNCTIONS = ("straight line", "second order")


def quadratic_coefficients(counts: Sequence, x: Sequence, y: Sequence, weights: Sequence | None = None):
    """(a, b, c) of the weighted least-squares function y = a + b x + c x^2 through levels
    (n_j readings of mean y_j at x_j, weight w_j per reading), on any backend.

    Counts and weights are plain numbers; x and y may be floats, ufloats or arrays of trials.
    """
    w = list(counts) if weights is None else [n * wt for n, wt in zip(counts, weights, strict=True)]
    if not len(w) == len(x) == len(y):
        raise ValueError(f"a second-order function needs one count, x and y per level; got {len(w)} counts, "
                         f"{len(x)} x values and {len(y)} y values")
    total = sum(w)
    x_mean = sum(wj * xj for wj, xj in zip(w, x, strict=True)) / total
    u = [xj - x_mean for xj in x]
    s2 = sum(wj * d * d for wj, d in zip(w, u, strict=True))
    s3 = sum(wj * d * d * d for wj, d in zip(w, u, strict=True))
    alpha, beta = s3 / s2, s2 / total
    p2 = [d * d - alpha * d - beta for d in u]
    g0 = sum(wj * yj for wj, yj in zip(w, y, strict=True)) / total
    g1 = sum(wj * d * yj for wj, d, yj in zip(w, u, y, strict=True)) / s2
    g2 = (sum(wj * p * yj for wj, p, yj in zip(w, p2, y, strict=True))
          / sum(wj * p * p for wj, p in zip(w, p2, strict=True)))
    # y = g0 + g1 u + g2 (u^2 - alpha u - beta), u = x - x_mean, expanded in powers of x
    c = g2
    b_u = g1 - alpha * g2
    a_u = g0 - beta * g2
    return a_u - b_u * x_mean + c * x_mean * x_mean, b_u - 2.0 * c * x_mean, c


def rising_root(a, b, c, y0, b_positive: bool):
    """x0 with a + b x0 + c x0^2 = y0 on the rising branch (slope b + 2 c x0 = sqrt(D) > 0), on any
    backend; `b_positive` (the sign of b at the estimates) picks the cancellation-free form.
    D < 0 (no real root) gives nan on floats and arrays; callers check at the estimates."""
    disc = b * b - 4.0 * c * (a - y0)
    root = backend.sqrt(disc)
    if b_positive:
        return 2.0 * (y0 - a) / (b + root)
    return (root - b) / (2.0 * c)


def discriminant(a: float, b: float, c: float, y0: float) -> float:
    return b * b - 4.0 * c * (a - y0)


@dataclass(frozen=True)
class QuadraticFit:
    """A fitted second-order function with its statistics (plain numbers)."""

    coefficients: tuple[float, float, float]  # a, b, c
    standard_uncertainties: tuple[float, float, float]
    covariance: tuple[tuple[float, float, float], ...]  # 3 x 3, of (a, b, c)
    residual_sd: float
    dof: int  # n - 3
    n: int
    r_squared: float
    rss: float
    weighted: bool
    x: tuple[float, ...]
    y: tuple[float, ...]
    weights: tuple[float, ...]

    def predict(self, x):
        a, b, c = self.coefficients
        x = np.asarray(x, dtype=float)
        return a + b * x + c * x * x

    def slope_at(self, x):
        """The sensitivity dy/dx = b + 2 c x."""
        _, b, c = self.coefficients
        return b + 2.0 * c * np.asarray(x, dtype=float)

    def residuals(self) -> np.ndarray:
        return np.asarray(self.y) - self.predict(self.x)

    def to_dict(self) -> dict:
        d = asdict(self)
        d["coefficients"] = list(self.coefficients)
        d["standard_uncertainties"] = list(self.standard_uncertainties)
        d["covariance"] = [list(row) for row in self.covariance]
        for key in ("x", "y", "weights"):
            d[key] = list(d[key])
        return d


def _orthogonal_covariance(x: np.ndarray, w: np.ndarray, s2: float) -> np.ndarray:
    """Covariance of (a, b, c): the orthogonal coefficients are uncorrelated with variances
    s^2 / sum w p_k^2; (a, b, c) are a linear map of them (the expansion in quadratic_coefficients)."""
    total = w.sum()
    xm = float(np.sum(w * x) / total)
    u = x - xm
    su2, su3 = float(np.sum(w * u**2)), float(np.sum(w * u**3))
    alpha, beta = su3 / su2, su2 / total
    p2 = u**2 - alpha * u - beta
    var_g = np.diag([s2 / total, s2 / su2, s2 / float(np.sum(w * p2**2))])
    # (a_u, b_u, c) from (g0, g1, g2), then (a, b, c) from (a_u, b_u, c)
    to_u = np.array([[1.0, 0.0, -beta], [0.0, 1.0, -alpha], [0.0, 0.0, 1.0]])
    to_x = np.array([[1.0, -xm, xm * xm], [0.0, 1.0, -2.0 * xm], [0.0, 0.0, 1.0]])
    m = to_x @ to_u
    return np.asarray(m @ var_g @ m.T)


def fit_quadratic(x, y, weights=None) -> QuadraticFit:
    """Least-squares second-order function of y on x with its statistics; weights are inverse
    variances, normalised to sum to n (s(y/x) keeps the unit of y, as in `fit_line`)."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.shape != y.shape or x.ndim != 1:
        raise ValueError("x and y must be one-dimensional and of equal length")
    n = len(x)
    levels = len(set(x.tolist()))
    if levels < 3 or n < MIN_LEVELS:
        raise ValueError(f"a second-order function needs at least {MIN_LEVELS} points at 3 or more "
                         f"concentrations; got {n} points at {levels}")
    weighted = weights is not None
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=float)
    if w.shape != x.shape or np.any(w <= 0) or not np.all(np.isfinite(w)):
        raise ValueError("give one positive, finite weight per point")
    w = w * n / w.sum()
    a, b, c = (float(v) for v in quadratic_coefficients([1.0] * n, x.tolist(), y.tolist(), w.tolist()))
    resid = y - (a + b * x + c * x * x)
    rss = float(np.sum(w * resid**2))
    dof = n - 3
    s = math.sqrt(rss / dof) if dof > 0 else float("nan")
    cov = _orthogonal_covariance(x, w, s * s)
    y_mean = float(np.sum(w * y) / n)
    syy = float(np.sum(w * (y - y_mean) ** 2))
    sd = [float(v) for v in np.sqrt(np.diag(cov))]
    rows = [(float(r[0]), float(r[1]), float(r[2])) for r in cov]
    return QuadraticFit(
        coefficients=(a, b, c), standard_uncertainties=(sd[0], sd[1], sd[2]), covariance=tuple(rows),
        residual_sd=s, dof=dof, n=n, r_squared=1.0 - rss / syy if syy > 0 else float("nan"), rss=rss,
        weighted=weighted, x=tuple(x.tolist()), y=tuple(y.tolist()), weights=tuple(w.tolist()))


@dataclass(frozen=True)
class QuadraticPrediction:
    """Concentration read off a second-order function for the mean of m readings."""

    response_mean: float
    replicates: int
    value: float  # nan when there is no real root
    standard_uncertainty: float
    sensitivity: float  # b + 2 c x0 at the result
    dof: int
    real_root: bool

    def to_dict(self) -> dict:
        return asdict(self)


def quadratic_inverse_prediction(fit: QuadraticFit, readings, sample_weight: float = 1.0,
                                 response_variance: float | None = None) -> QuadraticPrediction:
    """x0 on the rising branch with its first-order (GUM 5.1.2) standard uncertainty:
    u^2(x0) = [u^2(y0) + g' V g] / E^2, g = (1, x0, x0^2), V the covariance of (a, b, c),
    E = b + 2 c x0 the sensitivity; u^2(y0) = s^2/(w0 m), or `response_variance` when given
    (as `validate.model.line.inverse_prediction`). ISO 8466-2 writes the same variance with
    sums of powers of x (checked in tests/test_quadratic.py)."""
    r = np.asarray(readings, dtype=float).ravel()
    m = len(r)
    if m < 1:
        raise ValueError("an inverse prediction needs at least one reading")
    y0 = float(r.mean())
    a, b, c = fit.coefficients
    if discriminant(a, b, c, y0) < 0:
        return QuadraticPrediction(y0, m, math.nan, math.inf, math.nan, fit.dof, False)
    x0 = float(rising_root(a, b, c, y0, b > 0))
    e = b + 2.0 * c * x0
    g = np.array([1.0, x0, x0 * x0])
    s2 = fit.residual_sd**2
    own = s2 / (sample_weight * m) if response_variance is None else response_variance
    var = (own + float(g @ np.asarray(fit.covariance) @ g)) / e**2
    return QuadraticPrediction(y0, m, x0, math.sqrt(var), e, fit.dof, True)
