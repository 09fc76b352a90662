"""Calibration standards that are not fully complexed: correct them and find K.

The usual shortcut takes a standard made with a large excess of one reagent
as fully complexed, [ML] = total of the limiting reagent. When K times the
free excess is not large, only a fraction K[X]/(1 + K[X]) is complexed, the
slope (molar absorptivity times path length) comes out low and K from the
mixtures comes out high. Two corrections are offered:

- `iterate_standards`: generic over the numeric backend (floats, ufloats,
  numpy arrays of trials). Fit the line on full complexation, get K from the
  mixtures, then find the K whose corrected standards give that K back (the
  fixed point, by Newton's method: `validate.model.fixed_point`).
- `fit_joint`: K, slope and intercept fitted together by nonlinear least
  squares over all readings (plain floats only, scipy), with the covariance
  from the Jacobian.

Both report the relative bias that the full-complexation shortcut causes.
Model of the readings: A = intercept + slope [ML]; only the complex absorbs
beyond what the intercept (blank) takes up. Concentrations in one consistent
unit; K in its reciprocal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from validate.model import backend as mathops
from validate.model import fixed_point
from validate.model.fixed_point import Columns
from validate.model.ice import (
    complex_concentration,
    complex_concentration_derivative,
    count_undefined,
    describe_value,
    equilibrium_constant,
    fraction_complexed,
)
from validate.model.line import straight_line


def line_by_sums(x, y, weights=None):
    """(slope, intercept) of y on x through the package's one least-squares line
    (`validate.model.line.level_sums`): each point a level whose count is its weight
    (the standards' replicate readings; all 1 when None). Generic over the backend;
    the loop runs over points, never over trials."""
    counts = [1.0] * len(x) if weights is None else [float(v) for v in weights]
    intercept, slope = straight_line(counts, x, y)
    return slope, intercept


@dataclass(frozen=True)
class StandardsCorrection:
    """Result of `iterate_standards`; value fields hold the caller's backend."""

    K: Any  # combined K of the mixtures after correction
    slope: Any  # absorbance per unit [ML] (molar absorptivity x path length)
    intercept: Any
    molar_absorptivity: Any  # slope / path length
    mixtures: tuple  # IceTable per mixture (corrected)
    fraction_standards: tuple  # fraction of the limiting reagent complexed, per standard
    naive_K: Any  # K with standards taken as fully complexed
    naive_slope: Any
    naive_intercept: Any
    slope_bias: Any  # naive/corrected - 1
    K_bias: Any  # naive/corrected - 1
    iterations: int  # Newton steps taken (they stop when K no longer changes)
    change_history: tuple  # largest |relative change of K| per step (finite trials)
    converged: bool
    unconverged_trials: int  # trials whose remaining relative error of K exceeds the tolerance
    undefined_trials: int  # trials with K or a mixture concentration not finite and positive

    def to_dict(self) -> dict:
        d = {k: describe_value(getattr(self, k)) for k in (
            "K", "slope", "intercept", "molar_absorptivity", "fraction_standards",
            "naive_K", "naive_slope", "naive_intercept", "slope_bias", "K_bias", "change_history")}
        d.update(mixtures=[m.to_dict() for m in self.mixtures], iterations=self.iterations,
                 converged=self.converged, unconverged_trials=self.unconverged_trials,
                 undefined_trials=self.undefined_trials)
        return d


def _check_lengths(kind, *columns, minimum):
    n = len(columns[0])
    if any(len(c) != n for c in columns):
        raise ValueError(f"{kind}: the M totals, L totals and absorbances have different lengths; "
                         "give one of each per solution")
    if n < minimum:
        raise ValueError(f"{kind}: {n} given, at least {minimum} needed")


def _mixture_states(slope, intercept, mixtures_M, mixtures_L, mixtures_A):
    """The ICE table of every mixture read off a line, each K collapsed (`backend.collapse`)."""
    slope, intercept = mathops.collapse(slope), mathops.collapse(intercept)
    return tuple(replace(s, K=mathops.collapse(s.K)) for s in (
        equilibrium_constant((a - intercept) / slope, m, l_)
        for m, l_, a in zip(mixtures_M, mixtures_L, mixtures_A, strict=True)))


def _check_iteration(limiting: str, iterations: int, standards, mixtures) -> None:
    if limiting not in ("L", "M"):
        raise ValueError(f"limiting={limiting!r}: say which reagent the standards are short of, 'L' or 'M'")
    _check_lengths("standards", *standards, minimum=2)
    _check_lengths("mixtures", *mixtures, minimum=1)
    if iterations < 1:
        raise ValueError("iterations must be >= 1")


def normalised(weights, n: int) -> tuple[float, ...]:
    """The mixtures' weights in the combination, summing to 1 (all equal when None)."""
    w = [1.0] * n if weights is None else [float(v) for v in weights]
    return tuple(v / sum(w) for v in w)


def study_columns(standards, mixtures, standard_weights=None, mixture_weights=None,
                  standard_K_factors=None) -> Columns:
    """The numbers of the fixed point (`fixed_point.Columns`) from the study's columns."""
    (sm, sl, sa), (pm, pl, pa) = standards, mixtures
    counts = tuple(1.0 for _ in sa) if standard_weights is None else tuple(float(v) for v in standard_weights)
    factors = tuple(1.0 for _ in sa) if standard_K_factors is None else tuple(float(v) for v in standard_K_factors)
    return Columns(tuple(sm), tuple(sl), tuple(sa), counts, tuple(pm), tuple(pl), tuple(pa),
                   normalised(mixture_weights, len(pa)), factors)


def corrected_states(standards, mixtures, *, limiting: str = "L", iterations: int = 12, standard_weights=None,
                     mixture_weights=None, start=None, standard_K_factors=None) -> fixed_point.Solved:
    """K at the fixed point of the correction with the line and the mixtures' ICE tables there,
    without the shortcut's numbers (the model's path; `iterate_standards` adds them).
    `start`: a first K (the estimate's, for trials); None: the shortcut's K."""
    _check_iteration(limiting, iterations, standards, mixtures)
    cols = study_columns(standards, mixtures, standard_weights, mixture_weights, standard_K_factors)
    limiting_totals = list(standards[1] if limiting == "L" else standards[0])
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        try:
            return fixed_point.solve(cols, start=start, limiting_totals=limiting_totals, max_steps=iterations)
        except ZeroDivisionError:
            raise ValueError("the standards give no line: their limiting-reagent totals are all equal, "
                             "or the slope is zero, or a mixture has a free concentration of exactly "
                             "zero; check the standards' concentrations and absorbances") from None


def corrected_reported(standards, mixtures, reported: fixed_point.Reported, *, limiting: str = "L",
                       iterations: int = 12, standard_weights=None, mixture_weights=None, start=None,
                       standard_K_factors=None, stacks=None) -> np.ndarray | None:
    """What `reported` asks of the trials at the fixed point of `corrected_states` (a row per
    mixture's K, then the combined K), straight from the compiled loop; None where it does not
    serve (not arrays of trials, numba not available): read them off `corrected_states` then.
    `stacks`: the columns already in the loop's input arrays (`kernels.stacks`)."""
    _check_iteration(limiting, iterations, standards, mixtures)
    cols = study_columns(standards, mixtures, standard_weights, mixture_weights, standard_K_factors)
    limiting_totals = list(standards[1] if limiting == "L" else standards[0])
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return fixed_point.solve_reported(cols, reported, start=start, limiting_totals=limiting_totals,
                                          max_steps=iterations, stacks=stacks)


def iterate_standards(standards_M, standards_L, standards_A, mixtures_M, mixtures_L, mixtures_A, *,
                      limiting: str = "L", path_length=1.0, iterations: int = 12, tolerance: float = 1e-9,
                      standard_weights=None, mixture_weights=None, standard_K_factors=None) -> StandardsCorrection:
    """Correct the standards for incomplete complexation: K with F(K) = K.

    Start: [ML] in each standard = total of the `limiting` reagent; fit the line; [ML] of each
    mixture = (A - intercept)/slope; K per mixture from the ICE table; combined K = weighted
    mean of the mixtures' K (equal weights unless given): the shortcut's K. Then K is moved
    to the fixed point of K -> [ML] of each standard (stable quadratic root) -> refitted line
    -> combined K by Newton's method (`validate.model.fixed_point`), at most `iterations`
    steps, stopping when K no longer changes.

    The plain iteration K <- F(K) contracts by c = F'(K) ~ (1 - f)(1 + [ML]/[M] + [ML]/[L])
    near the solution (f the fraction complexed in the standards) and fails for c >= 1;
    Newton's method does not need c < 1, but far from the solution (a large naive bias) it
    may still not settle, and K -> 0 is also a fixed point. So the result says whether it
    converged (last relative change <= `tolerance`, for every trial); when it did not, use
    `fit_joint`. `standard_K_factors`: K in each standard relative to the mixtures' (an
    activity estimate at the standards' ionic strength; 1 by default).
    """
    standards = (standards_M, standards_L, standards_A)
    mixtures = (mixtures_M, mixtures_L, mixtures_A)
    _check_iteration(limiting, iterations, standards, mixtures)
    cols = study_columns(standards, mixtures, standard_weights, mixture_weights, standard_K_factors)
    limiting_totals = list(standards_L if limiting == "L" else standards_M)
    try:
        naive_slope, naive_intercept = line_by_sums(limiting_totals, standards_A, standard_weights)
        naive_states = _mixture_states(naive_slope, naive_intercept, *mixtures)
        naive_K = mathops.collapse(sum(w * s.K for w, s in zip(cols.weights, naive_states, strict=True) if w))
    except ZeroDivisionError:
        raise ValueError("the standards give no line: their limiting-reagent totals are all equal, "
                         "or the slope is zero, or a mixture has a free concentration of exactly "
                         "zero; check the standards' concentrations and absorbances") from None
    solved = corrected_states(standards, mixtures, limiting=limiting, iterations=iterations,
                              standard_weights=standard_weights, mixture_weights=mixture_weights,
                              start=naive_K, standard_K_factors=standard_K_factors)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        K, slope = solved.K, solved.slope
        fractions = tuple(fraction_complexed(K * phi, m, l_, of=limiting)
                          for m, l_, phi in zip(standards_M, standards_L, cols.factors, strict=True))
        final_change = np.abs(np.atleast_1d(np.asarray(mathops.nominal(solved.change), dtype=float)))
        unconverged = int(np.count_nonzero(~(final_change <= tolerance)))
        # A zero or non-finite slope shows up as non-finite [ML] in the mixtures.
        undefined = count_undefined(K, *[q for s in solved.states for q in (s.complex_conc, s.free_M, s.free_L)])
        history = solved.history
        return StandardsCorrection(
            K=K, slope=slope, intercept=solved.intercept, molar_absorptivity=slope / path_length,
            mixtures=solved.states, fraction_standards=fractions, naive_K=naive_K, naive_slope=naive_slope,
            naive_intercept=naive_intercept, slope_bias=naive_slope / slope - 1.0,
            K_bias=naive_K / K - 1.0, iterations=len(history),
            change_history=tuple(history), converged=bool(history) and unconverged == 0,
            unconverged_trials=unconverged, undefined_trials=undefined,
        )


@dataclass(frozen=True)
class JointFit:
    """K, slope and intercept fitted together to all readings (plain floats)."""

    K: float
    K_u: float
    log10_K: float
    log10_K_u: float
    slope: float
    slope_u: float
    intercept: float
    intercept_u: float
    molar_absorptivity: float
    molar_absorptivity_u: float  # from the fit only; add the path length's uncertainty separately
    covariance: tuple  # 3x3, order (K, slope, intercept)
    residual_sd: float  # sqrt(RSS/dof); sqrt(chi^2/dof), in units of reading_sd, when that is given
    dof: int
    n: int
    sigma_known: bool  # True: covariance from the given reading sd; False: scaled by the residuals
    naive_K: float
    naive_slope: float
    slope_bias: float  # naive/fitted - 1
    K_bias: float
    success: bool
    message: str

    def to_dict(self) -> dict:
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        d["covariance"] = [list(row) for row in self.covariance]
        return d


def _float_column(name, values):
    try:
        return np.asarray([float(v) for v in values], dtype=float)
    except TypeError as exc:
        raise ValueError(f"fit_joint: {name} must be plain numbers (it fits estimates); "
                         "pass nominal values and propagate uncertainty with iterate_standards") from exc


def fit_joint(standards_M, standards_L, standards_A, mixtures_M, mixtures_L, mixtures_A, *,
              limiting: str = "L", path_length: float = 1.0, reading_sd=None) -> JointFit:
    """Nonlinear least squares of A = a + b [ML](K, M0, L0) over every reading.

    Parameters fitted: log10 K (keeps K > 0 and scales well), b, a; solved
    with scipy.optimize.least_squares and an analytic Jacobian. Covariance:
    s^2 (J'J)^-1 with s^2 = RSS/(n - 3), or (J'J)^-1 of the residuals divided
    by `reading_sd` when that is given (Bates & Watts, Nonlinear Regression
    Analysis and Its Applications, 1988, section 2.3; Press et al.,
    Numerical Recipes 3rd ed., section 15.5). u(K) = K ln10 u(log10 K).
    """
    from scipy import optimize  # imported when a joint fit runs: scipy.optimize is slow to import

    _check_lengths("standards", standards_M, standards_L, standards_A, minimum=2)
    _check_lengths("mixtures", mixtures_M, mixtures_L, mixtures_A, minimum=1)
    M = np.concatenate([_float_column("M totals", standards_M), _float_column("M totals", mixtures_M)])
    L = np.concatenate([_float_column("L totals", standards_L), _float_column("L totals", mixtures_L)])
    A = np.concatenate([_float_column("absorbances", standards_A), _float_column("absorbances", mixtures_A)])
    n = len(A)
    if n < 4:
        raise ValueError("fit_joint: at least 4 readings are needed to fit 3 parameters with an uncertainty")
    sd = np.ones(n) if reading_sd is None else np.broadcast_to(np.asarray(reading_sd, dtype=float), (n,))
    if np.any(~np.isfinite(sd)) or np.any(sd <= 0):
        raise ValueError("fit_joint: reading_sd must be positive and finite")

    start = iterate_standards(standards_M, standards_L, standards_A, mixtures_M, mixtures_L,
                              mixtures_A, limiting=limiting, iterations=5)
    ok = bool(np.isfinite(start.K) and start.K > 0)
    # Start from the short iteration when it stayed defined, else from the naive line
    # and K ~ 1/concentration (the middle of the range a mixture design can resolve).
    K0 = float(start.K) if ok else 1.0 / float(np.mean(L[len(standards_A):]))

    def residuals(p):
        K = 10.0 ** p[0]
        return (p[2] + p[1] * complex_concentration(K, M, L) - A) / sd

    def jacobian(p):
        K = 10.0 ** p[0]
        dK = p[1] * complex_concentration_derivative(K, M, L) * K * math.log(10.0)
        return np.column_stack([dK, complex_concentration(K, M, L), np.ones(n)]) / sd[:, None]

    p0 = np.array([math.log10(K0), float(start.slope if ok else start.naive_slope),
                   float(start.intercept if ok else start.naive_intercept)])
    sol = optimize.least_squares(residuals, p0, jac=jacobian, method="lm", x_scale="jac",
                                 xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=2000)
    lgK, b, a = sol.x
    K = 10.0**lgK
    J = jacobian(sol.x)
    rss = float(np.sum(sol.fun**2))
    dof = n - 3
    s2 = 1.0 if reading_sd is not None else rss / dof
    try:
        cov_p = s2 * np.linalg.inv(J.T @ J)
    except np.linalg.LinAlgError:
        cov_p = np.full((3, 3), math.nan)
    T = np.diag([K * math.log(10.0), 1.0, 1.0])  # d(K, b, a)/d(log10 K, b, a)
    cov = T @ cov_p @ T
    u = np.sqrt(np.diag(cov))
    # The shortcut's values come from the same arithmetic, taken before any correction.
    naive_slope, naive_K = float(start.naive_slope), float(start.naive_K)
    return JointFit(
        K=K, K_u=float(u[0]), log10_K=float(lgK), log10_K_u=float(math.sqrt(cov_p[0, 0])),
        slope=float(b), slope_u=float(u[1]), intercept=float(a), intercept_u=float(u[2]),
        molar_absorptivity=float(b) / path_length, molar_absorptivity_u=float(u[1]) / path_length,
        covariance=tuple(tuple(float(v) for v in row) for row in cov),
        residual_sd=math.sqrt(rss / dof) if dof > 0 else math.nan, dof=dof, n=n,
        sigma_known=reading_sd is not None, naive_K=naive_K, naive_slope=naive_slope,
        slope_bias=naive_slope / float(b) - 1.0, K_bias=naive_K / K - 1.0,
        success=bool(sol.success), message=str(sol.message),
    )
