"""1:1 association M + L <=> ML: the equilibrium arithmetic of the model.

Every function here is generic over the numeric backend: its arguments may be
plain floats, `uncertainties` numbers (linear engine) or numpy arrays of
Monte Carlo trials of shape (N,). Only arithmetic operators and
`validate.model.backend` functions touch the values: there is no `if` on a value
and no loop over trials, so one code path serves both engines and a source
used twice (one stock, one pipette) stays one object, hence correlated.

Units: concentrations in any one consistent unit (mol/L, mmol/L, mol/m^3);
K = [ML]/([M][L]) is then in the reciprocal of that unit.

Related modules: `validate.model.standards` corrects standards that are not
fully complexed; `validate.equilibrium.combine` combines correlated K values
and applies an activity correction.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from uncertainties.core import AffineScalarFunc

from validate.model import backend as mathops


def complex_concentration(K, M_total, L_total):
    """[ML] at equilibrium from K and the total concentrations.

    [ML] is the smaller root of x^2 - (M0 + L0 + 1/K) x + M0 L0 = 0. The
    textbook form (S - sqrt(S^2 - 4 M0 L0))/2, S = M0 + L0 + 1/K, cancels
    when 4 M0 L0 << S^2 (one reagent or 1/K far larger than the other
    reagent). We use the stable pair of roots of Numerical Recipes
    (Press et al., 3rd ed., section 5.6): q = -(b + sign(b) sqrt(b^2-4ac))/2,
    root = c/q. Here b = -S < 0 always, so q = (S + sqrt(D))/2 and no branch
    is needed. The discriminant is also written without cancellation:
    D = S^2 - 4 M0 L0 = (M0 - L0)^2 + 2 (M0 + L0)/K + 1/K^2, a sum of
    non-negative terms (M0 - L0 is exact when the two are within a factor 2,
    Sterbenz's lemma).
    """
    inv_K = 1.0 / K
    S = M_total + L_total + inv_K
    D = (M_total - L_total) ** 2 + 2.0 * (M_total + L_total) * inv_K + inv_K**2
    q = 0.5 * (S + mathops.sqrt(D))
    return M_total * L_total / q


def complex_concentration_derivative(K, M_total, L_total):
    """d[ML]/dK, from implicit differentiation of the quadratic.

    F(x, K) = x^2 - S x + M0 L0 = 0 with dS/dK = -1/K^2 gives
    dx/dK = (x/K^2) / (S - 2x), and S - 2x = sqrt(D) for the smaller root.
    Used for the Jacobian of the joint fit and to check the linear engine.
    """
    inv_K = 1.0 / K
    D = (M_total - L_total) ** 2 + 2.0 * (M_total + L_total) * inv_K + inv_K**2
    x = complex_concentration(K, M_total, L_total)
    return x * inv_K**2 / mathops.sqrt(D)


def fraction_complexed(K, M_total, L_total, of: str = "L"):
    """Fraction of the total L (default) or of the total M present as ML.

    From [ML] = K [M][L] and L0 = [L] + [ML]: [ML]/L0 = K[M]/(1 + K[M]) with
    [M] = M0 - [ML] (mass balance). This form has no division by L0, so it
    is defined for a blank (L0 = 0) too. With a large excess of M,
    [M] ~ M0 and the fraction is K M0 / (1 + K M0).
    """
    if of not in ("L", "M"):
        raise ValueError(f"fraction_complexed: of={of!r}; use 'L' or 'M' "
                         "(the reagent whose bound fraction is wanted)")
    x = complex_concentration(K, M_total, L_total)
    other_free = (M_total - x) if of == "L" else (L_total - x)
    return K * other_free / (1.0 + K * other_free)


def full_complexation_slope_bias(K, free_excess):
    """Relative bias of a calibration slope when standards are taken as fully complexed.

    A standard holding the limiting reagent at c0 with free excess reagent
    at [X] contains only f c0 of complex, f = K[X]/(1 + K[X]); reading the
    line against c0 instead gives a slope f times the true one, a relative
    bias f - 1 = -1/(1 + K[X]) (follows from the mass balance above).
    """
    return -1.0 / (1.0 + K * free_excess)


def excess_for_fraction(K, fraction):
    """Free excess-reagent concentration that complexes `fraction` of the limiting reagent.

    Planning aid, the inverse of f = K[X]/(1 + K[X]): [X] = f / ((1 - f) K).
    """
    return fraction / ((1.0 - fraction) * K)


def count_undefined(*quantities) -> int:
    """Number of trials in which any of the quantities is not finite and positive.

    Concentrations and K must be > 0; a trial where one is not (a negative
    free concentration from a Monte Carlo draw, a diverged iteration) makes
    the result undefined. Such trials are counted and reported, not dropped
    (dropping them would bias the distribution). Floats and ufloats count as one trial.
    """
    bad = None
    for q in quantities:
        v = np.asarray(mathops.nominal(q), dtype=float)
        with np.errstate(invalid="ignore"):
            this = ~(np.isfinite(v) & (v > 0.0))
        bad = this if bad is None else (bad | this)
    return 0 if bad is None else int(np.count_nonzero(bad))


@dataclass(frozen=True)
class IceTable:
    """The equilibrium of one mixture: complex, free reagents and K."""

    complex_conc: object
    free_M: object
    free_L: object
    K: object

    @property
    def undefined_trials(self) -> int:
        """Trials with [ML] <= 0 or a free concentration <= 0 (K undefined there)."""
        return count_undefined(self.complex_conc, self.free_M, self.free_L)

    def to_dict(self) -> dict:
        return {
            "complex_conc": describe_value(self.complex_conc),
            "free_M": describe_value(self.free_M),
            "free_L": describe_value(self.free_L),
            "K": describe_value(self.K),
            "undefined_trials": self.undefined_trials,
        }


def equilibrium_constant(complex_conc, M_total, L_total) -> IceTable:
    """K = [ML] / (([M]0 - [ML]) ([L]0 - [ML])): the ICE table of one mixture.

    The free concentrations are returned so that trials where one is
    negative (K then has no meaning, though the quotient may be positive)
    can be counted with `IceTable.undefined_trials`.
    """
    free_M = M_total - complex_conc
    free_L = L_total - complex_conc
    return IceTable(complex_conc, free_M, free_L, complex_conc / (free_M * free_L))


@dataclass(frozen=True)
class SeriesTotals:
    """Vessel volume and total concentration of one species after each addition."""

    volumes: tuple
    concentrations: tuple

    def to_dict(self) -> dict:
        return {
            "volumes": [describe_value(v) for v in self.volumes],
            "concentrations": [describe_value(c) for c in self.concentrations],
        }


def addition_series_totals(stock_conc_added, aliquot_volumes, initial_volume,
                           initial_conc=0.0) -> SeriesTotals:
    """Cumulative totals when aliquots of one stock are added to one vessel.

    After addition k the vessel holds V_k = V0 + v_1 + ... + v_k and
    n_k = c_vessel V0 + c_stock (v_1 + ... + v_k) of the species, so the
    total concentration is n_k / V_k (volumes taken as additive). Call once
    per species: for a species only in the vessel pass stock_conc_added=0
    (pure dilution); for a species only in the stock leave initial_conc=0.

    Correlation: each aliquot volume is whatever the caller builds, e.g.
    nominal + pipette calibration offset + its own repeatability term. When
    the caller adds the SAME offset source object to every aliquot, the one
    pipette's offset is shared by all additions and the resulting totals
    (and the K values of the series) are correlated as in the laboratory.
    Volumes may be in any unit, the same for aliquots and initial volume.
    """
    volumes = list(aliquot_volumes)
    if not volumes:
        raise ValueError("addition series: no aliquot volumes given; list the volume of each addition")
    added = 0.0
    vessel_volumes, concentrations = [], []
    for v in volumes:  # a loop over additions, not over trials
        added = added + v
        total_volume = initial_volume + added
        vessel_volumes.append(total_volume)
        concentrations.append((initial_conc * initial_volume + stock_conc_added * added) / total_volume)
    return SeriesTotals(tuple(vessel_volumes), tuple(concentrations))


def describe_value(x):
    """A JSON-ready summary of a value of any backend.

    float -> float; ufloat -> value and standard uncertainty; array of
    trials -> mean, standard deviation and counts over the finite trials.
    """
    if isinstance(x, (tuple, list)):
        return [describe_value(v) for v in x]
    if isinstance(x, AffineScalarFunc):
        return {"value": float(x.nominal_value), "standard_uncertainty": float(x.std_dev)}
    if isinstance(x, np.ndarray) and x.ndim > 0:
        finite = x[np.isfinite(x)]
        return {
            "mean": float(finite.mean()) if finite.size else None,
            "sd": float(finite.std(ddof=1)) if finite.size > 1 else None,
            "trials": int(x.size),
            "non_finite_trials": int(x.size - finite.size),
        }
    if isinstance(x, (bool, str)) or x is None:
        return x
    return float(x)
