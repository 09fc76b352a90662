"""Combine correlated K values, test them for a trend, correct for activity.

The K values of an addition series share stocks, one pipette and one line,
so they are correlated; they are combined by generalised least squares with
their full covariance, checked for mutual consistency (chi-square, Birge
ratio) and for a trend with concentration. K is conditional on ionic
strength and temperature; the Davies equation gives an estimate of the
thermodynamic constant. The combination and tests work on plain numbers
(estimates and a covariance matrix from either engine); `gls_weights` lets
either engine apply the same weights to its own values.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import linalg

from validate.metrology.probability import chi2_upper_tail, normal_upper_tail, t_upper_tail
from validate.model import backend as mathops
from validate.model.ice import describe_value

LN10 = math.log(10.0)


def _vector_and_covariance(values, covariance, what):
    k = np.asarray([float(v) for v in values], dtype=float)
    V = np.asarray(covariance, dtype=float)
    n = k.size
    if n < 1 or V.shape != (n, n):
        raise ValueError(f"{what}: {n} values need a {n}x{n} covariance matrix, got shape {V.shape}")
    if not (np.all(np.isfinite(k)) and np.all(np.isfinite(V))):
        raise ValueError(f"{what}: values and covariance must be finite; drop or fix undefined results first")
    if not np.allclose(V, V.T, rtol=1e-9, atol=0.0):
        raise ValueError(f"{what}: the covariance matrix is not symmetric; check how it was assembled")
    try:
        factor = linalg.cho_factor(V)
    except linalg.LinAlgError:
        raise ValueError(f"{what}: the covariance matrix is not positive definite (two values fully "
                         "correlated, or a zero uncertainty); combine only values that carry "
                         "independent information") from None
    return k, V, factor


def gls_weights(covariance) -> np.ndarray:
    """Weights w = V^-1 1 / (1' V^-1 1) of the generalised least-squares mean.

    Apply them in either engine as sum(w_i K_i); with the linear engine this
    reproduces u^2 = 1/(1' V^-1 1) when V is the covariance of the K_i.
    Weights can be negative when correlations are strong (the mean then
    lies outside the range of the values; a known property of the GLS mean).
    """
    n = np.asarray(covariance).shape[0]
    _, _, factor = _vector_and_covariance(np.zeros(n), covariance, "gls_weights")
    vinv_one = linalg.cho_solve(factor, np.ones(n))
    return vinv_one / vinv_one.sum()


@dataclass(frozen=True)
class CombinedValue:
    """GLS mean of correlated values with its consistency check."""

    value: float
    standard_uncertainty: float
    weights: tuple
    n: int
    chi_square: float
    dof: int
    birge_ratio: float
    p_value: float
    consistent: bool  # p_value >= alpha
    alpha: float
    uncertainty_birge_inflated: float  # u * max(1, Birge ratio), an option when inconsistent
    negative_weights: bool

    def to_dict(self) -> dict:
        d = asdict(self)
        d["weights"] = list(self.weights)
        return d


def combine_correlated(values, covariance, *, alpha: float = 0.05) -> CombinedValue:
    """Generalised least-squares mean of correlated values of one measurand.

    K = (1' V^-1 k)/(1' V^-1 1), u^2 = 1/(1' V^-1 1) (Aitken's generalised
    least squares with a constant model; for two values this is the
    combination of Lyons, Gibaut & Clifford, Nucl. Instrum. Meth. A270
    (1988) 110). Consistency: chi^2 = r' V^-1 r with r = k - K, n - 1
    degrees of freedom, p = P(chi^2_{n-1} >= chi^2); Birge ratio
    R_B = sqrt(chi^2/(n-1)) (R. T. Birge, Phys. Rev. 40 (1932) 207). Kacker,
    Kessel & Sommer (J. Res. NIST 115 (2010) 453) caution that this test
    treats standard uncertainties as sampling standard deviations: read a
    small p as a signal to look for a missing source, not as proof.
    """
    k, V, factor = _vector_and_covariance(values, covariance, "combine_correlated")
    n = k.size
    vinv_one = linalg.cho_solve(factor, np.ones(n))
    info = float(vinv_one.sum())
    value = float(vinv_one @ k) / info
    u = math.sqrt(1.0 / info)
    r = k - value
    chi2 = float(r @ linalg.cho_solve(factor, r))
    dof = n - 1
    birge = math.sqrt(chi2 / dof) if dof > 0 else math.nan
    p = float(chi2_upper_tail(chi2, dof)) if dof > 0 else math.nan
    weights = vinv_one / info
    return CombinedValue(
        value=value, standard_uncertainty=u, weights=tuple(float(w) for w in weights), n=n,
        chi_square=chi2, dof=dof, birge_ratio=birge, p_value=p,
        consistent=bool(p >= alpha) if dof > 0 else True, alpha=alpha,
        uncertainty_birge_inflated=u * max(1.0, birge) if dof > 0 else u,
        negative_weights=bool(np.any(weights < 0)),
    )


@dataclass(frozen=True)
class TrendTest:
    """GLS straight line of K (or log10 K) against a concentration."""

    quantity: str  # "K" or "log10 K"
    slope: float
    slope_u: float
    intercept: float
    intercept_u: float
    statistic: float  # slope / u(slope)
    distribution: str  # "t" (covariance scaled by the residuals) or "normal" (covariance taken as known)
    dof: int
    p_value: float
    chi_square: float  # residual r' V^-1 r of the line
    trend: bool  # p_value < alpha
    alpha: float
    message: str

    def to_dict(self) -> dict:
        return asdict(self)


def trend_test(K_values, covariance, x, *, use_log10: bool = False, scale: str = "observed",
               alpha: float = 0.05) -> TrendTest:
    """Test whether K drifts with a concentration x (e.g. the total added).

    beta = (X' V^-1 X)^-1 X' V^-1 y with X = [1, x] (Aitken generalised least
    squares; Draper & Smith, Applied Regression Analysis, 3rd ed., section
    9.2). scale="observed": cov(beta) = s^2 (X'V^-1X)^-1 with
    s^2 = chi^2/(n - 2) and a t test on n - 2 degrees of freedom (V known up
    to a factor); scale="known": cov(beta) = (X'V^-1X)^-1 and a normal test.
    A 1:1 model predicts no trend; a significant one may indicate another
    complex or a wrong stoichiometry. With use_log10 the covariance is
    carried over by the first-order rule u(log10 K) = u(K)/(K ln 10).
    """
    if scale not in ("observed", "known"):
        raise ValueError(f"scale={scale!r}: use 'observed' or 'known'")
    k, V, _ = _vector_and_covariance(K_values, covariance, "trend_test")
    xs = np.asarray([float(v) for v in x], dtype=float)
    n = k.size
    if xs.shape != (n,):
        raise ValueError(f"trend_test: {n} K values but {xs.size} concentrations; give one x per K")
    if n < 3:
        raise ValueError("trend_test: at least 3 K values are needed to test a trend")
    if np.ptp(xs) == 0:
        raise ValueError("trend_test: all concentrations are equal; a trend cannot be tested")
    if use_log10:
        if np.any(k <= 0):
            raise ValueError("trend_test: log10 K needs every K > 0")
        D = np.diag(1.0 / (k * LN10))
        k, V = np.log10(k), D @ V @ D
    factor = linalg.cho_factor(V)
    X = np.column_stack([np.ones(n), xs])
    info = X.T @ linalg.cho_solve(factor, X)
    beta = np.linalg.solve(info, X.T @ linalg.cho_solve(factor, k))
    r = k - X @ beta
    chi2 = float(r @ linalg.cho_solve(factor, r))
    dof = n - 2
    cov = np.linalg.inv(info)
    if scale == "observed":
        cov = cov * chi2 / dof
    se = np.sqrt(np.diag(cov))
    stat = float(beta[1] / se[1]) if se[1] > 0 else math.inf
    if scale == "observed":
        p = float(2.0 * t_upper_tail(abs(stat), dof))
    else:
        p = float(2.0 * normal_upper_tail(abs(stat)))
    trend = bool(p < alpha)
    message = ("K changes with concentration; this may indicate another complex or a wrong "
               "stoichiometry" if trend else "no significant trend of K with concentration")
    return TrendTest(
        quantity="log10 K" if use_log10 else "K", slope=float(beta[1]), slope_u=float(se[1]),
        intercept=float(beta[0]), intercept_u=float(se[0]), statistic=stat,
        distribution="t" if scale == "observed" else "normal", dof=dof, p_value=p,
        chi_square=chi2, trend=trend, alpha=alpha, message=message,
    )


def log10_K(K):
    """log10 K on any backend; the linear engine gives u(log10 K) = u(K)/(K ln 10) itself."""
    return mathops.log10(K)


def log10_uncertainty(K: float, u_K: float) -> float:
    """u(log10 K) = u(K) / (K ln 10), the first-order law of propagation (GUM 5.1.2)."""
    return u_K / (K * LN10)


# Debye-Hueckel constant A(T) on the mol/L scale, log10 basis, from first principles:
# A = e^3 sqrt(2 pi N_A c0) / (ln 10 (4 pi eps0 eps_r k T)^(3/2)), c0 = 1000 L/m^3
# (Debye-Hueckel limiting law; e.g. Robinson & Stokes, Electrolyte Solutions, ch. 7).
# Constants: CODATA 2018 exact values, eps0 CODATA 2018 recommended.
_E = 1.602176634e-19
_NA = 6.02214076e23
_KB = 1.380649e-23
_EPS0 = 8.8541878128e-12


def water_relative_permittivity(temperature_C: float) -> float:
    """eps_r of water, 0-100 C: 87.740 - 0.40008 t + 9.398e-4 t^2 - 1.410e-6 t^3.

    Malmberg & Maryott, J. Res. Natl. Bur. Stand. 56 (1956) 1 (coefficients
    from memory; they give 78.30 at 25 C).
    """
    t = temperature_C
    return 87.740 - 0.40008 * t + 9.398e-4 * t**2 - 1.410e-6 * t**3


def debye_huckel_A(temperature_C: float = 25.0) -> float:
    """A in (L/mol)^(1/2) for water, 0-100 C: 0.5116 at 25 C (0.509-0.511 is commonly quoted)."""
    if not (0.0 <= temperature_C <= 100.0):
        raise ValueError(f"temperature {temperature_C} C is outside 0-100 C, where the water "
                         "permittivity formula holds; give A explicitly")
    T = temperature_C + 273.15
    eps_r = water_relative_permittivity(temperature_C)
    return (_E**3 * math.sqrt(2.0 * math.pi * _NA * 1000.0)
            / (LN10 * (4.0 * math.pi * _EPS0 * eps_r * _KB * T) ** 1.5))


DAVIES_UPPER_I = 0.5  # mol/L; common practice puts the Davies equation's use below 0.1-0.5 mol/L


@dataclass(frozen=True)
class ActivityCorrection:
    """Estimate of the thermodynamic K from a conditional K by the Davies equation."""

    K_thermodynamic: object  # same backend and unit as the conditional K
    K_conditional: object
    gamma_M: object
    gamma_L: object
    gamma_ML: object
    ionic_strength: object  # mol/L
    charges: tuple  # (z_M, z_L, z_ML)
    temperature_C: float
    A: float
    within_range: bool  # every trial of I <= DAVIES_UPPER_I
    note: str

    def to_dict(self) -> dict:
        d = {k: describe_value(getattr(self, k)) for k in (
            "K_thermodynamic", "K_conditional", "gamma_M", "gamma_L", "gamma_ML", "ionic_strength")}
        d.update(charges=list(self.charges), temperature_C=self.temperature_C, A=self.A,
                 within_range=self.within_range, note=self.note)
        return d


def davies_log10_gamma(z: int, ionic_strength, A: float):
    """log10 gamma = -A z^2 (sqrt(I)/(1 + sqrt(I)) - 0.3 I), I in mol/L.

    Davies equation (C. W. Davies, Ion Association, Butterworths 1962;
    the 0.3 coefficient, from memory). Generic over the backend of I.
    """
    s = mathops.sqrt(ionic_strength)
    return -A * z * z * (s / (1.0 + s) - 0.3 * ionic_strength)


def davies_activity_correction(K_cond, ionic_strength, charges, temperature_C: float = 25.0,
                               A: float | None = None) -> ActivityCorrection:
    """K_thermo = K_cond gamma_ML / (gamma_M gamma_L) for M + L <=> ML.

    `charges` = (z_M, z_L); z_ML = z_M + z_L. An ESTIMATE: the Davies
    equation has no ion-specific parameter and is used below about
    I = 0.5 mol/L (common practice; its error grows above about 0.1 mol/L).
    K_cond and I may be of any backend. A defaults to `debye_huckel_A` at
    the temperature. K keeps its unit: with concentrations in mol/L the
    result refers to the 1 mol/L standard state.
    """
    if len(charges) != 2:
        raise ValueError("charges: give (z_M, z_L), the charge numbers of M and L")
    z_M, z_L = (int(c) for c in charges)
    z_ML = z_M + z_L
    if A is None:
        A = debye_huckel_A(temperature_C)
    lg = {z: davies_log10_gamma(z, ionic_strength, A) for z in {z_M, z_L, z_ML}}
    g_M, g_L, g_ML = (10.0 ** lg[z_M], 10.0 ** lg[z_L], 10.0 ** lg[z_ML])
    K_th = K_cond * 10.0 ** (lg[z_ML] - lg[z_M] - lg[z_L])
    I_nom = np.asarray(mathops.nominal(ionic_strength), dtype=float)
    within = bool(np.all(I_nom <= DAVIES_UPPER_I))
    note = ("estimate by the Davies equation; valid roughly below I = 0.5 mol/L"
            + ("" if within else "; ionic strength ABOVE that range: treat the result as indicative only"))
    return ActivityCorrection(
        K_thermodynamic=K_th, K_conditional=K_cond, gamma_M=g_M, gamma_L=g_L, gamma_ML=g_ML,
        ionic_strength=ionic_strength, charges=(z_M, z_L, z_ML), temperature_C=temperature_C,
        A=float(A), within_range=within, note=note,
    )
