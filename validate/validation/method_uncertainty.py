"""The method's uncertainty for routine use, from validation data (top-down).

Bias against reference materials with u(bias) = sqrt(RMS_bias^2 + u(C_ref)^2) (Nordtest
TR 537, from memory), the combined u_c = sqrt(u(Rw)^2 + u(bias)^2) with its degrees of
freedom and coverage factor, and the test of the observed reproducibility against the
bottom-up budget's prediction. Bias is handled in relative terms (fractions of the reference
value), so one figure serves every concentration of the working range.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from validate.metrology.probability import (
    chi2_lower_tail,
    chi2_upper_tail,
    f_lower_tail,
    f_upper_tail,
    normal_quantile,
    t_quantile,
)

BIAS_SOURCE = ("u(bias) = sqrt(RMS_bias^2 + u(C_ref)^2), RMS_bias the root mean square of the relative "
               "biases, u(C_ref) the mean relative standard uncertainty of the reference values; with a "
               "single reference material the standard uncertainty of its mean, s/sqrt(n), is added "
               "(Nordtest TR 537, from memory). Significance: |bias| > 2 sqrt(s^2/n + u(C_ref)^2) "
               "(common practice, about the 5 % level).")


@dataclass(frozen=True)
class ReferenceBias:
    """One reference material: its mean result against its reference value (result unit)."""

    id: str
    measured: float
    reference: float
    u_reference: float
    sd_series: float  # standard deviation of its series results (0 with one series)
    results: int  # number of series results averaged
    kind: str = "reference material"  # "spike": reference = the amount added; "interlaboratory": assigned value

    @property
    def relative(self) -> float:
        return (self.measured - self.reference) / self.reference

    @property
    def u_mean_relative(self) -> float:
        return self.sd_series / math.sqrt(self.results) / abs(self.reference)

    @property
    def u_reference_relative(self) -> float:
        return self.u_reference / abs(self.reference)

    @property
    def significant(self) -> bool:
        """|bias| above twice its own standard uncertainty (common practice, about the 5 % level)."""
        spread = math.hypot(self.u_mean_relative, self.u_reference_relative)
        return abs(self.relative) > 2 * spread


@dataclass(frozen=True)
class BiasEstimate:
    """Relative bias and its relative standard uncertainty (fractions, not percent)."""

    relative: float  # mean relative bias over the reference materials
    rms_relative: float
    u_reference_relative: float
    u_relative: float  # u(bias) relative, as it enters u_c under the treatment
    significant: bool
    treatment: str  # "included" or "corrected"


def bias_estimate(references: list[ReferenceBias], treatment: str = "included") -> BiasEstimate:
    """Nordtest TR 537 bias component (from memory). "included": the bias itself is counted in
    u(bias); "corrected": results are corrected by the mean bias and only the correction's own
    uncertainty (spread of the biases about their mean and u(C_ref)) remains."""
    if not references:
        raise ValueError("the bias needs at least one reference material")
    if treatment not in ("included", "corrected"):
        raise ValueError(f"unknown bias treatment {treatment!r}: use 'included' or 'corrected'")
    biases = [r.relative for r in references]
    mean_bias = sum(biases) / len(biases)
    u_ref = sum(r.u_reference_relative for r in references) / len(references)
    if treatment == "included":
        spread2 = sum(b**2 for b in biases) / len(biases)
    else:
        spread2 = sum((b - mean_bias) ** 2 for b in biases) / len(biases)
    if len(references) == 1:
        spread2 += references[0].u_mean_relative ** 2
    rms = math.sqrt(sum(b**2 for b in biases) / len(biases))
    return BiasEstimate(mean_bias, rms, u_ref, math.sqrt(spread2 + u_ref**2),
                        any(r.significant for r in references), treatment)


@dataclass(frozen=True)
class Combined:
    u_rw: float
    u_bias: float
    u_c: float
    dof: float
    k: float
    expanded: float


def combine(u_rw: float, dof_rw: float, u_bias: float, coverage_probability: float = 0.95) -> Combined:
    """u_c = sqrt(u(Rw)^2 + u(bias)^2) (Nordtest TR 537, from memory); degrees of freedom by
    Welch-Satterthwaite (GUM G.4.1) with u(bias) taken as Type B (infinite degrees of freedom);
    k the t quantile at those degrees of freedom (GUM G.3)."""
    if u_rw < 0 or u_bias < 0 or not dof_rw > 0:
        raise ValueError("standard uncertainties must be >= 0 and the degrees of freedom > 0")
    u_c = math.hypot(u_rw, u_bias)
    share = (u_rw / u_c) ** 4 if u_c > 0 else 1.0  # written as a ratio: no overflow or underflow
    dof = dof_rw / share if share > 0 else math.inf
    k = float(t_quantile(0.5 + coverage_probability / 2, dof)) if math.isfinite(dof) else \
        float(normal_quantile(0.5 + coverage_probability / 2))
    return Combined(u_rw, u_bias, u_c, dof, k, k * u_c)


@dataclass(frozen=True)
class Reconciliation:
    statistic: float
    dof_observed: float
    dof_predicted: float | None  # None: infinite (chi-square form)
    p_value: float  # one-sided, in the direction of the observed ratio
    verdict: str  # "agree", "top-down larger", "top-down smaller"
    explanation: str


BETWEEN_SERIES_CANDIDATES = ("reagent lot", "colour development time and temperature",
                             "drift of the photometer or of the line between series", "analyst")


def reconcile(observed_sd: float, dof_observed: float, predicted_sd: float, dof_predicted: float,
              alpha: float = 0.05) -> Reconciliation:
    """F = s_obs^2 / u_pred^2 against F(nu_obs, nu_pred); with nu_pred infinite, the chi-square
    form nu_obs F against chi-square(nu_obs) (NIST/SEMATECH e-Handbook 1.3.5.8 and 1.3.5.9, from memory)."""
    if not (predicted_sd > 0 and math.isfinite(predicted_sd)) or not dof_observed > 0:
        raise ValueError("the reconciliation needs a positive predicted uncertainty and observed degrees of freedom")
    ratio = observed_sd**2 / predicted_sd**2
    if math.isfinite(dof_predicted):
        upper = f_upper_tail(ratio, dof_observed, dof_predicted)
        lower = f_lower_tail(ratio, dof_observed, dof_predicted)
    else:
        upper = chi2_upper_tail(dof_observed * ratio, dof_observed)
        lower = chi2_lower_tail(dof_observed * ratio, dof_observed)
    thin = dof_observed < 5
    if upper < alpha:
        verdict, p = "top-down larger", float(upper)
        text = ("the reproducibility seen over the series exceeds what the within-run budget predicts: the budget "
                "misses between-series effects; candidates: " + ", ".join(BETWEEN_SERIES_CANDIDATES))
    elif lower < alpha:
        verdict, p = "top-down smaller", float(lower)
        text = ("the series agree more closely than the budget predicts: the budget may overstate a source, "
                "or the series share effects that did not vary (one calibration line, one reagent lot)")
    else:
        verdict, p = "agree", float(min(upper, lower))
        text = "the observed reproducibility is consistent with the bottom-up budget at the 5 % level"
    if thin:
        text += f"; the validation data are few ({dof_observed:.1f} degrees of freedom): the test has little power"
    return Reconciliation(ratio, dof_observed, dof_predicted if math.isfinite(dof_predicted) else None,
                          p, verdict, text)
