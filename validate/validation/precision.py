"""Precision, trueness and the budget-versus-data check.

Repeatability pooled over groups, intermediate precision from a one-factor
design by one-way analysis of variance, recovery against a reference value
with the E_n number, and the chi-square test of observed scatter against the
scatter a bottom-up uncertainty budget predicts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from validate.metrology.probability import chi2_lower_tail, chi2_upper_tail, f_upper_tail
from validate.validation.linearity import plain


def _groups(values, groups=None) -> list[np.ndarray]:
    """Values as a list of groups: either a list of sequences or values with group labels."""
    if groups is None:
        out = [np.asarray(g, dtype=float).ravel() for g in values]
    else:
        v = np.asarray(values, dtype=float).ravel()
        labels = list(groups)
        if len(labels) != len(v):
            raise ValueError(f"{len(v)} values but {len(labels)} group labels; give one label per value")
        seen = list(dict.fromkeys(labels))
        out = [v[[lab == key for lab in labels]] for key in seen]
    for g in out:
        if not np.all(np.isfinite(g)):
            raise ValueError("precision data contain a missing or non-finite value")
    return out


def within_series_groups(values, series=None) -> list[list[float]]:
    """One sample's readings split into one group per series (day, analyst): repeatability is
    the scatter within a series, so readings of different series never share a group (ISO
    5725-3:1994, from memory; pooling across series would count the series effect in s_r).
    Without series labels the readings form one group."""
    values = [float(v) for v in values]
    labels = list(series) if series else [""] * len(values)
    if len(labels) != len(values):
        raise ValueError(f"{len(values)} readings but {len(labels)} series labels; give one label per reading")
    return [[v for v, lab in zip(values, labels, strict=True) if lab == key] for key in dict.fromkeys(labels)]


@dataclass(frozen=True)
class Repeatability:
    mean: float
    sd: float  # pooled within-group SD
    rsd_percent: float | None
    dof: int
    groups: int
    n: int
    source: str

    def to_dict(self) -> dict:
        return plain(self)


def repeatability(values, groups=None) -> Repeatability:
    """Pooled repeatability SD: s_r^2 = sum (n_i - 1) s_i^2 / sum (n_i - 1).

    `values` is one sequence of replicates, a list of sequences (one per
    sample or level), or flat values with `groups` labels (ISO 5725-2,
    repeatability variance pooled over cells).
    """
    if groups is None and np.ndim(values[0]) == 0:
        values = [values]
    data = _groups(values, groups)
    usable = [g for g in data if len(g) >= 2]
    dof = sum(len(g) - 1 for g in usable)
    if dof < 1:
        raise ValueError("repeatability needs at least one group with 2 or more replicate readings")
    ss = sum(float(np.sum((g - g.mean()) ** 2)) for g in usable)
    sd = math.sqrt(ss / dof)
    allv = np.concatenate(data)
    mean = float(allv.mean())
    rsd = 100.0 * sd / abs(mean) if mean != 0 else None
    return Repeatability(mean, sd, rsd, dof, len(usable), int(allv.size),
                         "Pooled within-group (repeatability) variance, degrees of freedom "
                         "sum(n_i - 1) (ISO 5725-2:1994, clause 7.4); a group is one sample's "
                         "readings within one series, so a series (day) effect stays out of s_r "
                         "(ISO 5725-3:1994); RSD relative to the grand mean. Comparing results "
                         "within a group presumes one level per group.")


@dataclass(frozen=True)
class IntermediatePrecision:
    groups: int
    n: int
    grand_mean: float
    ms_between: float
    ms_within: float
    f_statistic: float | None
    p_value: float | None
    n0: float  # effective group size for unbalanced designs
    repeatability_sd: float
    between_group_sd: float
    intermediate_sd: float
    intermediate_rsd_percent: float | None
    intermediate_dof: float | None  # Welch-Satterthwaite
    verdict: str
    source: str

    def to_dict(self) -> dict:
        return plain(self)


def intermediate_precision(values, groups=None, factor: str = "day") -> IntermediatePrecision:
    """One-way ANOVA over a grouping factor (day, analyst, instrument).

    s_r^2 = MS_within; s_L^2 = max(0, (MS_between - MS_within)/n0);
    s_I^2 = s_r^2 + s_L^2 (ISO 5725-3:1994, one-factor staggered-free design;
    n0 = (N - sum n_i^2/N)/(p - 1) for unequal group sizes, ISO 5725-2:1994, clause 7.4).
    Degrees of freedom of s_I by Welch-Satterthwaite (Satterthwaite 1946).
    """
    data = _groups(values, groups)
    p = len(data)
    sizes = np.array([len(g) for g in data])
    big_n = int(sizes.sum())
    if p < 2 or big_n - p < 1 or np.any(sizes < 1):
        raise ValueError(f"intermediate precision needs at least 2 {factor}s and replicate readings within them")
    grand = float(np.concatenate(data).mean())
    ss_b = float(sum(len(g) * (g.mean() - grand) ** 2 for g in data))
    ss_w = float(sum(np.sum((g - g.mean()) ** 2) for g in data))
    ms_b, ms_w = ss_b / (p - 1), ss_w / (big_n - p)
    n0 = (big_n - float(np.sum(sizes**2)) / big_n) / (p - 1)
    f = ms_b / ms_w if ms_w > 0 else None
    pv = float(f_upper_tail(f, p - 1, big_n - p)) if f is not None else None
    s_l2 = max(0.0, (ms_b - ms_w) / n0)
    s_i2 = ms_w + s_l2
    if s_l2 > 0:  # s_I^2 = MS_b/n0 + (1 - 1/n0) MS_w
        terms = [(ms_b / n0) ** 2 / (p - 1), ((1 - 1 / n0) * ms_w) ** 2 / (big_n - p)]
        dof = s_i2**2 / sum(terms)
    else:
        dof = float(big_n - p)
    verdict = (f"significant {factor}-to-{factor} effect: intermediate precision is wider than "
               "repeatability" if pv is not None and pv < 0.05 else
               f"no significant {factor}-to-{factor} effect at the 5 % level")
    s_i = math.sqrt(s_i2)
    return IntermediatePrecision(
        p, big_n, grand, ms_b, ms_w, f, pv, n0, math.sqrt(ms_w), math.sqrt(s_l2), s_i,
        100 * s_i / abs(grand) if grand != 0 else None, dof, verdict,
        "One-way analysis of variance, s_I^2 = s_r^2 + s_L^2 (ISO 5725-3:1994; n0 for "
        "unequal group sizes as in ISO 5725-2:1994, clause 7.4, from memory); effective degrees of "
        "freedom by Welch-Satterthwaite (Satterthwaite, Biometrics Bulletin 2 (1946) 110-114).")


@dataclass(frozen=True)
class Recovery:
    measured: float
    u_measured: float
    reference: float
    u_reference: float
    expanded_measured: float  # U_x as the result states it
    expanded_reference: float  # U_ref as the reference states it
    reference_coverage_factor: float
    recovery_percent: float
    recovery_u_percent: float
    en_number: float
    satisfactory: bool
    verdict: str
    source: str

    def to_dict(self) -> dict:
        return plain(self)


def recovery(measured: float, u_measured: float, reference: float, u_reference: float, *,
             expanded_measured: float, expanded_reference: float) -> Recovery:
    """Recovery R = x/X with u(R) from relative uncertainties in quadrature (GUM 5.1.6), and

    E_n = (x - X) / sqrt(U_x^2 + U_ref^2), each expanded uncertainty as stated: U_x the
    result's own (its t-based k), U_ref the reference's own (its certificate's k) (ISO/IEC
    17043:2010 B.3.1.3; ISO 13528:2015, 9.7); |E_n| <= 1 is satisfactory.
    """
    if reference == 0:
        raise ValueError("the reference value is zero; a recovery cannot be computed")
    if min(u_measured, u_reference, expanded_measured, expanded_reference) < 0:
        raise ValueError("uncertainties must be >= 0")
    r = measured / reference
    # u(R)^2 = (u_x/X)^2 + (x u_X/X^2)^2: the quadrature of relative terms, safe at x = 0
    u_r = math.hypot(u_measured / reference, measured * u_reference / reference**2)
    big_u = math.hypot(expanded_measured, expanded_reference)
    en = (measured - reference) / big_u if big_u > 0 else math.copysign(math.inf, measured - reference)
    ok = abs(en) <= 1.0
    verdict = ("|E_n| <= 1: the result agrees with the reference value within the expanded "
               "uncertainties" if ok else
               "|E_n| > 1: the result differs from the reference value by more than the "
               "expanded uncertainties explain (bias, or an uncertainty stated too small)")
    k_ref = expanded_reference / u_reference if u_reference > 0 else math.nan
    return Recovery(measured, u_measured, reference, u_reference, expanded_measured, expanded_reference,
                    k_ref, 100 * r, 100 * u_r, en, ok, verdict,
                    "Recovery x/X with relative standard uncertainties in quadrature (GUM "
                    "JCGM 100:2008, 5.1.6); E_n = (x - X)/sqrt(U_x^2 + U_ref^2) with each expanded "
                    "uncertainty as stated, |E_n| <= 1 satisfactory (ISO/IEC 17043:2010, B.3.1.3; "
                    "ISO 13528:2015, 9.7; clause numbers from memory).")


@dataclass(frozen=True)
class ScatterConsistency:
    observed_sd: float
    predicted_sd: float
    dof: int
    chi_square: float
    p_excess: float  # one-sided: observed larger than predicted
    p_deficit: float  # one-sided: observed smaller than predicted
    alpha: float
    verdict: str
    source: str
    compared: str = "observed scatter against the bottom-up prediction"

    def to_dict(self) -> dict:
        return plain(self)


LINE_SCATTER = ("the residual scatter of the preparations' mean readings about the line against the "
                "preparation and reading noise the budget predicts for such a mean")
READING_SCATTER = ("the pure error (pooled scatter of repeated readings of one solution) against the "
                   "photometer's stated reading noise")


def scatter_consistency(residual_sd: float, dof: int, predicted_sd: float,
                        alpha: float = 0.05, compared: str = LINE_SCATTER) -> ScatterConsistency:
    """chi^2 = dof s^2 / sigma^2 against chi-square(dof) (NIST/SEMATECH e-Handbook 1.3.5.8).

    Each observed scatter is compared with the prediction of the same effects: the pure error
    of repeated readings with the reading noise alone, the scatter of preparation means about
    the line with preparation plus reading noise (docs/design.md, "Validation statistics")."""
    if dof < 1:
        raise ValueError("the scatter check needs at least one degree of freedom")
    if not (predicted_sd > 0 and math.isfinite(predicted_sd)):
        raise ValueError("the predicted (bottom-up) standard deviation must be positive")
    chi2 = dof * residual_sd**2 / predicted_sd**2
    p_hi, p_lo = float(chi2_upper_tail(chi2, dof)), float(chi2_lower_tail(chi2, dof))
    if p_hi < alpha and compared == READING_SCATTER:
        verdict = ("repeated readings scatter significantly more than the photometer's stated reading noise: "
                   "handling (cell placement, bubbles, temperature) adds to it, so a bottom-up budget with the "
                   "stated noise understates the reading term; the observed treatment uses the observed scatter")
    elif p_hi < alpha:
        verdict = ("observed scatter significantly exceeds the bottom-up prediction: "
                   "the budget may miss a source")
    elif p_lo < alpha:
        verdict = ("observed scatter is significantly smaller than predicted: the budget may "
                   "overstate a source (or the readings are not independent)")
    else:
        verdict = "observed scatter is consistent with the bottom-up budget"
    return ScatterConsistency(residual_sd, predicted_sd, dof, chi2, p_hi, p_lo, alpha, verdict,
                              "Chi-square test of a standard deviation against a stated value, "
                              "T = nu s^2/sigma0^2 (NIST/SEMATECH e-Handbook of Statistical "
                              "Methods, section 1.3.5.8); one-sided for excess scatter.", compared)
