"""Elementary functions that work on every numeric backend of the model.

The model is written once and evaluated on plain floats, on `uncertainties`
numbers (linear engine) and on numpy arrays of trials (Monte Carlo engine).
Arithmetic operators already work on all three; the functions below dispatch
on the argument's type so model code never has to know which engine runs it.
"""

from __future__ import annotations

import math

import numpy as np
from uncertainties import umath
from uncertainties.core import AffineScalarFunc, LinearCombination, Variable


def _pick(x, np_func, u_func, m_func):
    if isinstance(x, np.ndarray):
        return np_func(x)
    if isinstance(x, AffineScalarFunc):
        return u_func(x)
    return m_func(x)


def sqrt(x):
    return _pick(x, np.sqrt, umath.sqrt, math.sqrt)


def log(x):
    return _pick(x, np.log, umath.log, math.log)


def log10(x):
    return _pick(x, np.log10, umath.log10, math.log10)


def exp(x):
    return _pick(x, np.exp, umath.exp, math.exp)


def nominal(x):
    """The estimate of x: a float for floats and ufloats, the array for arrays."""
    if isinstance(x, AffineScalarFunc):
        return x.nominal_value
    return x


def collapse(x):
    """x as a fresh, flat linear combination of the input variables; the identity on
    floats and arrays.

    Performance only: the value and the derivatives are those of x (summed in
    another order, so equal to round-off). `uncertainties` keeps an expression
    as a tree and expands it into derivatives with respect to the inputs by
    walking every path to them, again for every result that uses it. A shared
    intermediate result (a standard's concentration, the fitted line, an
    iteration's state) would then be walked once per result and per path through
    it, which grows faster than the square of the method's size. Collapsed once
    where it is made, it costs one pass over its own inputs wherever it is used.
    """
    if isinstance(x, AffineScalarFunc) and not isinstance(x, Variable):
        return AffineScalarFunc(x.nominal_value, LinearCombination(dict(x.derivatives)))
    return x


FUNCTIONS = {"sqrt": sqrt, "log": log, "ln": log, "log10": log10, "exp": exp}
