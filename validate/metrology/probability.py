"""Quantiles, tail areas and densities of the normal, Student t, chi-square and F distributions,
and Spearman's rank correlation test, from scipy.special (imported at the first use).

scipy.stats computes these with the same scipy.special functions, but importing it costs about
half a second of CPU, which every run and every command would pay; these functions call the
special functions directly, with the same formulas, so the numbers are the same to the last bit
for the arguments used here (tests/test_probability.py compares them with scipy.stats and with
printed tables). Arguments are degrees of freedom > 0 (math.inf allowed where stated) and
probabilities inside (0, 1).

scipy.special itself is imported at the first call, not with this module: its import costs about
a quarter of a second of CPU, which `validate check` (reading and checking a method file) does
not need to pay.
"""

from __future__ import annotations

import math

import numpy as np


def _special():
    """scipy.special, imported at the first use (then a lookup in the module cache)."""
    from scipy import special

    return special


def normal_quantile(p):
    """x with P(Z <= x) = p for the standard normal Z."""
    return _special().ndtri(p)


def normal_upper_tail(x):
    """P(Z > x) for the standard normal Z."""
    return _special().ndtr(-np.asarray(x, dtype=float))


def normal_density(x, mean=0.0, sd=1.0):
    """The normal probability density at x (works on arrays)."""
    z = (np.asarray(x, dtype=float) - mean) / sd
    return np.exp(-z**2 / 2.0) / math.sqrt(2.0 * math.pi) / sd


def t_quantile(p, dof):
    """x with P(T <= x) = p for Student's t with `dof` degrees of freedom (math.inf: normal)."""
    return _special().stdtrit(dof, p)


def t_upper_tail(x, dof):
    """P(T > x) for Student's t with `dof` degrees of freedom (math.inf: normal)."""
    return _special().stdtr(dof, -np.asarray(x, dtype=float))


def t_density(x, dof):
    """Student's t probability density at x (works on arrays; math.inf degrees of freedom: normal).

    log f = log(Gamma((nu+1)/2) / Gamma(nu/2)) - (log nu + log pi)/2 - (nu+1)/2 log(1 + x^2/nu),
    the ratio of Gamma functions as the Pochhammer symbol (nu/2)_(1/2), which stays finite for
    large nu."""
    x = np.asarray(x, dtype=float)
    if math.isinf(dof):
        return normal_density(x)
    return np.exp(np.log(_special().poch(0.5 * dof, 0.5)) - 0.5 * (np.log(dof) + np.log(np.pi))
                  - (dof + 1) / 2 * np.log1p(x * x / dof))


def chi2_upper_tail(x, dof):
    """P(X > x) for chi-square with `dof` degrees of freedom (1 below 0, as scipy.stats gives)."""
    return _special().chdtrc(dof, np.maximum(x, 0.0))


def chi2_lower_tail(x, dof):
    """P(X <= x) for chi-square with `dof` degrees of freedom (0 below 0, as scipy.stats gives)."""
    return _special().chdtr(dof, np.maximum(x, 0.0))


def f_upper_tail(x, dof1, dof2):
    """P(F > x) for the F distribution with (dof1, dof2) degrees of freedom (1 below 0)."""
    return _special().fdtrc(dof1, dof2, np.maximum(x, 0.0))


def f_lower_tail(x, dof1, dof2):
    """P(F <= x) for the F distribution with (dof1, dof2) degrees of freedom (0 below 0)."""
    return _special().fdtr(dof1, dof2, np.maximum(x, 0.0))


def f_quantile(p, dof1, dof2):
    """x with P(F <= x) = p for the F distribution with (dof1, dof2) degrees of freedom."""
    return _special().fdtri(dof1, dof2, p)


def noncentral_t_lower_tail(x, dof, noncentrality):
    """P(T' <= x) for the noncentral t with `dof` degrees of freedom and noncentrality delta."""
    return _special().nctdtr(dof, noncentrality, x)


def average_ranks(values) -> np.ndarray:
    """Ranks 1..n, tied values sharing the mean of their ranks."""
    values = np.asarray(values, dtype=float)
    order = np.argsort(values, kind="mergesort")
    ranks = np.empty(len(values), dtype=float)
    ranks[order] = np.arange(1, len(values) + 1, dtype=float)
    # each run of equal sorted values gets the mean of its ranks (an exact half-integer)
    sorted_values = values[order]
    starts = np.flatnonzero(np.r_[True, sorted_values[1:] != sorted_values[:-1]])
    ends = np.r_[starts[1:], len(values)]
    for start, end in zip(starts, ends, strict=True):
        if end - start > 1:
            ranks[order[start:end]] = (start + 1 + end) / 2.0
    return ranks


def spearman_increasing(x, y) -> tuple[float, float]:
    """Spearman's rank correlation rho of x and y and the one-sided p of "y grows with x".

    rho is Pearson's correlation of the average ranks; p is P(T > t) with
    t = rho sqrt((n - 2) / ((1 + rho)(1 - rho))) and n - 2 degrees of freedom (the t
    approximation; NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.5 on rank correlation,
    from memory). x and y need at least 3 values, and neither may be constant; a value that is
    not finite gives nan for both, as scipy.stats.spearmanr does."""
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        return math.nan, math.nan
    ranked = np.column_stack((average_ranks(x), average_ranks(y)))
    rho = np.corrcoef(ranked, rowvar=False)[1, 0]
    dof = len(ranked) - 2
    with np.errstate(divide="ignore"):  # rho = 1 gives t = inf and p = 0
        t = rho * np.sqrt((dof / ((rho + 1.0) * (1.0 - rho))).clip(0))
    return float(rho), float(t_upper_tail(t, dof))
