"""Linearity of a straight-line calibration: residual diagnostics and tests.

Every function takes a `LineFit` from `validate.model.line` (ordinary or
weighted) and returns a frozen dataclass with `to_dict()`, a plain-words
`verdict` and a `source` naming the published formula. Weighted fits are
handled with the fit's normalised weights (sum w = n): residuals are scaled
by sqrt(w) wherever a test assumes equal variances.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields, is_dataclass

import numpy as np

from validate.metrology.probability import f_quantile, f_upper_tail, spearman_increasing, t_quantile, t_upper_tail
from validate.model.line import LineFit
from validate.model.quadratic import fit_quadratic


def plain(value):
    """Turn a result into JSON-ready Python: no numpy types; inf and nan become None."""
    if is_dataclass(value) and not isinstance(value, type):
        return plain({f.name: getattr(value, f.name) for f in fields(value)})
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [plain(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value


def negligible(sum_of_squares: float, fit: LineFit) -> bool:
    """True when a sum of squares is at the level of rounding error of the readings."""
    scale = float(np.sum(np.asarray(fit.weights) * np.asarray(fit.y) ** 2))
    return sum_of_squares <= 1e-24 * max(scale, 1e-300)


def _levels(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct concentrations and, per reading, the index of its level."""
    levels, index = np.unique(x, return_inverse=True)
    return levels, index


# --------------------------------------------------------------------------
# Per-point diagnostics

@dataclass(frozen=True)
class PointDiagnostics:
    x: tuple[float, ...]
    y: tuple[float, ...]
    fitted: tuple[float, ...]
    residuals: tuple[float, ...]
    relative_residuals: tuple[float | None, ...]  # residual / fitted value; None at a zero fit
    standardised_residuals: tuple[float, ...]
    leverage: tuple[float, ...]
    cooks_distance: tuple[float, ...]
    flagged: tuple[str, ...]  # plain notes on points that stand out
    source: str

    def to_dict(self) -> dict:
        return plain(self)


def point_diagnostics(fit: LineFit) -> PointDiagnostics:
    """Residuals, internally studentised residuals, leverage and Cook's distance.

    h_i = w_i (1/sum(w) + (x_i - xbar)^2 / Sxx);  r_i = sqrt(w_i) e_i / (s sqrt(1 - h_i));
    D_i = r_i^2 h_i / (p (1 - h_i)) with p = 2 parameters
    (Draper and Smith, Applied Regression Analysis, 3rd ed. 1998, ch. 8;
    Cook, Technometrics 19 (1977) 15-18). Flags follow common practice:
    |r_i| > 2, h_i > 2p/n, D_i > 4/n.
    """
    x, y, w = np.asarray(fit.x), np.asarray(fit.y), np.asarray(fit.weights)
    n, p = fit.n, 2
    fitted = fit.predict(x)
    e = y - fitted
    h = w * (1.0 / w.sum() + (x - fit.x_mean) ** 2 / fit.sxx)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.sqrt(w) * e / (fit.residual_sd * np.sqrt(1.0 - h))
        cook = r**2 * h / (p * (1.0 - h))
        rel = np.where(fitted != 0, e / fitted, np.nan)
    if negligible(fit.rss, fit):  # an exact fit: standardised values are rounding noise
        r, cook = np.full(n, np.nan), np.full(n, np.nan)
    flagged = []
    for i in range(n):
        notes = []
        if abs(r[i]) > 2:
            notes.append(f"standardised residual {r[i]:.2f} (beyond +/-2)")
        if h[i] > 2 * p / n:
            notes.append(f"high leverage {h[i]:.2f} (above 2p/n = {2 * p / n:.2f})")
        if cook[i] > 4 / n:
            notes.append(f"influential: Cook's distance {cook[i]:.2f} (above 4/n = {4 / n:.2f})")
        if notes:
            flagged.append(f"standard at x = {x[i]:g}, reading {y[i]:g}: " + "; ".join(notes))
    return PointDiagnostics(
        x=tuple(x.tolist()), y=tuple(y.tolist()), fitted=tuple(fitted.tolist()),
        residuals=tuple(e.tolist()),
        relative_residuals=tuple(None if not math.isfinite(v) else float(v) for v in rel),
        standardised_residuals=tuple(r.tolist()), leverage=tuple(h.tolist()),
        cooks_distance=tuple(cook.tolist()), flagged=tuple(flagged),
        source="Residuals, internally studentised residuals and leverage: Draper and Smith, "
               "Applied Regression Analysis, 3rd ed. (1998), ch. 8; Cook's distance: "
               "R. D. Cook, Technometrics 19 (1977) 15-18. Flag limits |r| > 2, h > 2p/n, "
               "D > 4/n are common practice.",
    )


# --------------------------------------------------------------------------
# Tests of the straight-line model

@dataclass(frozen=True)
class SignificanceTest:
    """One hypothesis test on the calibration."""

    name: str
    evaluable: bool
    statistic: float | None
    dof: tuple[float, ...]  # degrees of freedom of the reference distribution
    p_value: float | None
    critical_value: float | None  # at the stated alpha
    alpha: float
    significant: bool | None
    verdict: str
    source: str
    details: dict

    def to_dict(self) -> dict:
        return plain(asdict(self))


def _not_evaluable(name, alpha, why, source) -> SignificanceTest:
    return SignificanceTest(name, False, None, (), None, None, alpha, None,
                      f"not evaluable: {why}", source, {})


LOF_SOURCE = ("Lack-of-fit F test against pure error from independent points at one concentration: "
              "F = [(RSS - SS_pe)/(m - 2)] / [SS_pe/(n - m)], n points, m distinct concentrations "
              "(Draper and Smith, Applied Regression Analysis, 3rd ed. (1998), section 2.1; "
              "the same partition is used in ISO 11095). Pure error must hold every random effect "
              "the points carry: on a method's line the points are preparation means, so pure error "
              "comes from independent preparations at one level, never from repeated readings of one "
              "solution (which show reading noise only).")


def lack_of_fit_test(fit: LineFit, alpha: float = 0.05) -> SignificanceTest:
    """Does the line miss the means of replicate standards by more than pure error allows?"""
    x, y, w = np.asarray(fit.x), np.asarray(fit.y), np.asarray(fit.weights)
    levels, idx = _levels(x)
    m, n = len(levels), fit.n
    if m < 3 or n <= m:
        why = ("needs two or more independent points (preparations) at one concentration; repeated "
               "readings of one solution are not pure error" if n <= m
               else "needs at least 3 distinct concentrations")
        return _not_evaluable("lack-of-fit F test", alpha, why, LOF_SOURCE)
    wsum = np.bincount(idx, weights=w)
    level_mean = np.bincount(idx, weights=w * y) / wsum
    ss_pe = float(np.sum(w * (y - level_mean[idx]) ** 2))
    ss_lof = max(fit.rss - ss_pe, 0.0)
    df1, df2 = m - 2, n - m
    if negligible(ss_pe, fit):
        return _not_evaluable("lack-of-fit F test", alpha,
                              "replicate readings are identical (no pure error)", LOF_SOURCE)
    f = (ss_lof / df1) / (ss_pe / df2)
    p = float(f_upper_tail(f, df1, df2))
    crit = float(f_quantile(1 - alpha, df1, df2))
    sig = p < alpha
    verdict = ("significant lack of fit: the line misses the standards' means by more than "
               "replicate scatter explains (curvature or a wrong standard)" if sig else
               "no significant lack of fit: the straight line is consistent with the replicates")
    return SignificanceTest("lack-of-fit F test", True, f, (df1, df2), p, crit, alpha, sig, verdict,
                      LOF_SOURCE, {"ss_lack_of_fit": ss_lof, "ss_pure_error": ss_pe,
                                   "distinct_concentrations": m})


def _poly_rss(x, y, w, degree: int) -> float:
    """Weighted residual sum of squares of a polynomial fit (x centred and scaled for conditioning)."""
    scale = np.ptp(x) or 1.0
    t = (x - x.mean()) / scale
    design = np.vander(t, degree + 1) * np.sqrt(w)[:, None]
    coef, *_ = np.linalg.lstsq(design, y * np.sqrt(w), rcond=None)
    resid = y * np.sqrt(w) - design @ coef
    return float(resid @ resid)


MANDEL_SOURCE = ("Mandel's fitting test, straight line against quadratic: DS^2 = (n-2)s1^2 - "
                 "(n-3)s2^2, F = DS^2/s2^2 with (1, n-3) degrees of freedom (DIN 38402-51; "
                 "ISO 8466-1; the quadratic alternative as in ISO 8466-2). Those standards "
                 "compare F with the 99 % quantile (from memory); the critical value here is "
                 "at the stated alpha.")


def mandel_test(fit: LineFit, alpha: float = 0.05) -> SignificanceTest:
    """Does a quadratic describe the data significantly better than the straight line?"""
    x, y, w = np.asarray(fit.x), np.asarray(fit.y), np.asarray(fit.weights)
    n = fit.n
    if len(np.unique(x)) < 3 or n < 4:
        return _not_evaluable("Mandel's test", alpha,
                              "needs at least 4 readings at 3 or more concentrations", MANDEL_SOURCE)
    rss1 = fit.rss  # (n-2) s1^2
    quadratic = fit_quadratic(x, y, w)  # the second-order function of ISO 8466-2, kept in the details
    rss2 = quadratic.rss  # (n-3) s2^2
    ds2 = max(rss1 - rss2, 0.0)
    s2_sq = rss2 / (n - 3)
    if negligible(rss2, fit):
        return _not_evaluable("Mandel's test", alpha,
                              "the quadratic fits exactly (no residual scatter)", MANDEL_SOURCE)
    f = ds2 / s2_sq
    p = float(f_upper_tail(f, 1, n - 3))
    crit = float(f_quantile(1 - alpha, 1, n - 3))
    sig = p < alpha
    verdict = ("the quadratic fits significantly better: the response is curved; narrow the "
               "working range or use a second-order calibration" if sig else
               "no significant improvement by a quadratic: the straight line is adequate")
    return SignificanceTest("Mandel's test", True, f, (1, n - 3), p, crit, alpha, sig, verdict,
                      MANDEL_SOURCE, {"s_linear": math.sqrt(rss1 / (n - 2)),
                                      "s_quadratic": math.sqrt(s2_sq), "ds_squared": ds2,
                                      "quadratic_coefficients": list(quadratic.coefficients)})


def runs_distribution(n1: int, n2: int) -> dict[int, float]:
    """Exact null distribution of the number of runs of two signs (Swed and Eisenhart 1943)."""
    total = math.comb(n1 + n2, n1)
    dist = {}
    for r in range(2, n1 + n2 + 1):
        k, odd = divmod(r, 2)
        if not odd:
            ways = 2 * math.comb(n1 - 1, k - 1) * math.comb(n2 - 1, k - 1)
        else:
            ways = (math.comb(n1 - 1, k - 1) * math.comb(n2 - 1, k)
                    + math.comb(n1 - 1, k) * math.comb(n2 - 1, k - 1))
        if ways:
            dist[r] = ways / total
    return dist


RUNS_SOURCE = ("Wald-Wolfowitz runs test on the signs of the residuals ordered by concentration "
               "(Wald and Wolfowitz, Ann. Math. Stat. 11 (1940) 147-162); exact lower-tail "
               "p from the distribution of Swed and Eisenhart, Ann. Math. Stat. 14 (1943) "
               "66-87; z from the normal approximation with mean 2 n1 n2/n + 1.")


def runs_test(fit: LineFit, alpha: float = 0.05) -> SignificanceTest:
    """Too few runs of residual signs along x means the residuals follow a curve."""
    order = np.argsort(np.asarray(fit.x), kind="stable")
    e = fit.residuals()[order]
    tol = 1e-12 * max(np.max(np.abs(fit.y)), 1e-300)
    signs = np.sign(np.where(np.abs(e) <= tol, 0.0, e))
    signs = signs[signs != 0]  # exact zeros carry no sign
    n1, n2 = int(np.sum(signs > 0)), int(np.sum(signs < 0))
    if n1 == 0 or n2 == 0:
        return _not_evaluable("runs test", alpha, "residuals do not take both signs (or show no scatter)", RUNS_SOURCE)
    runs = 1 + int(np.sum(signs[1:] != signs[:-1]))
    dist = runs_distribution(n1, n2)
    p = float(min(1.0, sum(v for r, v in dist.items() if r <= runs)))
    crit = max((r for r in dist if sum(v for q, v in dist.items() if q <= r) <= alpha), default=None)
    n = n1 + n2
    mean = 2 * n1 * n2 / n + 1
    var = 2 * n1 * n2 * (2 * n1 * n2 - n) / (n**2 * (n - 1))
    z = (runs - mean) / math.sqrt(var) if var > 0 else math.nan
    sig = p < alpha
    verdict = ("too few runs of residual signs: residuals cluster by sign along the "
               "concentration axis, a sign of curvature" if sig else
               "runs of residual signs consistent with random scatter")
    return SignificanceTest("runs test", True, float(runs), (n1, n2), p,
                      None if crit is None else float(crit), alpha, sig, verdict, RUNS_SOURCE,
                      {"positive": n1, "negative": n2, "expected_runs": mean, "z": z,
                       "critical_value_meaning": "largest run count rejected at alpha (exact)"})


INTERCEPT_SOURCE = ("Student t test of the intercept against zero, t = a/u(a) with n-2 degrees "
                    "of freedom (Draper and Smith, Applied Regression Analysis, 3rd ed. (1998), "
                    "ch. 1). The intercept is always kept in the model: forcing the line through "
                    "zero hides a blank or curvature and biases low results (ISO 8466-1 fits "
                    "with an intercept).")


def intercept_test(fit: LineFit, alpha: float = 0.05) -> SignificanceTest:
    if fit.dof < 1 or negligible(fit.rss, fit):
        return _not_evaluable("intercept test", alpha, "no residual scatter to test against",
                              INTERCEPT_SOURCE)
    t = fit.intercept / fit.intercept_u
    p = float(2 * t_upper_tail(abs(t), fit.dof))
    crit = float(t_quantile(1 - alpha / 2, fit.dof))
    sig = p < alpha
    verdict = ("intercept differs significantly from zero: look for a blank contribution, "
               "a baseline offset or curvature; keep the intercept" if sig else
               "intercept not significantly different from zero; keep it in the model "
               "(do not force the line through zero)")
    return SignificanceTest("intercept test", True, t, (fit.dof,), p, crit, alpha, sig, verdict,
                      INTERCEPT_SOURCE, {"intercept": fit.intercept,
                                         "intercept_standard_uncertainty": fit.intercept_u})


# --------------------------------------------------------------------------
# Weighting check

WEIGHTING_SOURCE = ("Trend of scatter with concentration: one-sided Spearman rank correlation "
                    "(Spearman 1904) of the replicate SD per standard, or of |residual| when "
                    "standards are not replicated, against concentration; variance homogeneity "
                    "F test between highest and lowest standard as in ISO 8466-1 (when both are "
                    "replicated). Weighted fit with w = 1/s^2 or 1/x^2: Miller and Miller, "
                    "Statistics and Chemometrics for Analytical Chemistry, weighted regression "
                    "section; the choice 1/x^2 for about constant relative SD is common practice.")


def _replicate_sds(x, y, w):
    """Per level with >= 2 readings: (x, n, sd of sqrt(w) y)."""
    out = []
    for level in np.unique(x):
        sel = x == level
        if sel.sum() >= 2:
            out.append((float(level), int(sel.sum()),
                        float(np.std(y[sel] * np.sqrt(w[sel]), ddof=1))))
    return out


def weighting_check(fit: LineFit, alpha: float = 0.05, replicate_sds=None) -> SignificanceTest:
    """Does the scatter grow with concentration (heteroscedasticity)?

    Reported statistic and p are Spearman's; the verdict is "grows" when either
    Spearman or the highest/lowest variance ratio is significant. `replicate_sds`:
    (x, n, sd) per level from the repeated readings, where the fit's points are means.
    """
    x, y, w = np.asarray(fit.x), np.asarray(fit.y), np.asarray(fit.weights)
    reps = list(replicate_sds) if replicate_sds is not None else _replicate_sds(x, y, w)
    if len(reps) >= 3:
        basis = "replicate SD per standard"
        xs = np.array([r[0] for r in reps])
        spread = np.array([r[2] for r in reps])
    else:
        basis = "absolute residuals" + (" (scaled by sqrt(weight))" if fit.weighted else "")
        xs, spread = x, np.abs(fit.residuals() * np.sqrt(w))
    if len(np.unique(xs)) < 3 or negligible(float(np.ptp(spread)) ** 2, fit):
        return _not_evaluable("weighting check", alpha,
                              "needs scatter at 3 or more concentrations", WEIGHTING_SOURCE)
    rho, p = spearman_increasing(xs, spread)
    details: dict[str, object] = {"basis": basis, "spearman_rho": float(rho)}
    p_values = [float(p)]
    if len(reps) >= 2 and reps[0][2] > 0:
        (_, n_lo, s_lo), (_, n_hi, s_hi) = reps[0], reps[-1]
        f = s_hi**2 / s_lo**2
        p_f = float(f_upper_tail(f, n_hi - 1, n_lo - 1))
        details.update({"variance_ratio_highest_lowest": f, "variance_ratio_p_value": p_f})
        p_values.append(p_f)
    sig = min(p_values) < alpha
    recommendation = details["recommendation"] = _weighting_advice(sig, reps, fit.weighted)
    verdict = ("scatter grows with concentration: " + recommendation if sig else
               "no significant trend of scatter with concentration; an unweighted fit is adequate")
    return SignificanceTest("weighting check", True, float(rho), (len(xs),), float(p_values[0]),
                            None, alpha, sig, verdict, WEIGHTING_SOURCE, details)


def _weighting_advice(significant: bool, reps, already_weighted: bool) -> str:
    """1/x^2 when the relative SDs vary less than the SDs themselves (common practice)."""
    if not significant:
        return "none needed"
    if already_weighted:
        return ("the weighted residuals still trend with concentration; review the weights")
    why = ("an unweighted fit lets the noisy high standards dominate, so the line and the "
           "uncertainty near the low end (and the detection limit) are misstated")
    nonzero = [(x0, s) for x0, _, s in reps if x0 != 0 and s > 0]
    if len(nonzero) >= 3:
        sds = np.array([s for _, s in nonzero])
        rsds = sds / np.array([x0 for x0, _ in nonzero])
        if np.std(rsds) / np.mean(rsds) < np.std(sds) / np.mean(sds):
            return ("use a weighted fit with w = 1/x^2 (relative SD about constant; not "
                    f"defined for a blank standard at x = 0): {why}")
        return (f"use a weighted fit with a variance function s = a + b c fitted over every level "
                f"(weighting = \"variance-function\"; 1/s_i^2 of each level's own replicates is noisy below "
                f"5 readings per level): {why}")
    return ("use a weighted fit, w = 1/s(c)^2 from a variance function s = a + b c fitted over the "
            f"levels' replicate SDs, or w = 1/x^2 if the relative SD is about constant: {why}")


def linearity_tests(fit: LineFit, alpha: float = 0.05, replicate_sds=None) -> dict[str, SignificanceTest]:
    """All tests of the straight-line model, keyed by plain names. The tests run on the fit's
    points: preparation means on a method's line, every row of a bare table."""
    return {
        "lack_of_fit": lack_of_fit_test(fit, alpha),
        "mandel": mandel_test(fit, alpha),
        "runs": runs_test(fit, alpha),
        "intercept": intercept_test(fit, alpha),
        "weighting": weighting_check(fit, alpha, replicate_sds),
    }
