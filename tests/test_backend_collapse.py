"""`backend.collapse`: a shared intermediate result flattened once, same value and derivatives.

The reference is the `uncertainties` package's own expansion of the same expression left
uncollapsed (a general reference library); the first-order derivatives it carries are the
sensitivity coefficients of the GUM law of propagation (JCGM 100:2008, 5.1.3).
"""

from __future__ import annotations

import numpy as np
import pytest
from uncertainties import ufloat
from uncertainties.core import AffineScalarFunc

from validate.model import backend


def _nested(a, b, c):
    """An expression that uses its shared parts many times, as the fitted line does."""
    mean = (a + b + c) / 3.0
    spread = (a - mean) ** 2 + (b - mean) ** 2 + (c - mean) ** 2
    return backend.sqrt(spread) * mean / backend.exp(b / c)


def test_collapse_keeps_the_value_and_every_derivative():
    a, b, c = ufloat(1.3, 0.01, tag="a"), ufloat(2.9, 0.02, tag="b"), ufloat(4.1, 0.03, tag="c")
    plain = _nested(a, b, c)
    flat = backend.collapse(_nested(a, b, c))
    assert isinstance(flat, AffineScalarFunc)
    assert flat.nominal_value == plain.nominal_value
    assert set(flat.derivatives) == set(plain.derivatives) == {a, b, c}
    for var, d in plain.derivatives.items():
        assert flat.derivatives[var] == pytest.approx(d, rel=1e-14)
    assert flat.std_dev == pytest.approx(plain.std_dev, rel=1e-14)


def test_a_collapsed_result_stays_correlated_with_its_inputs():
    # y - y = 0 only when both sides keep derivatives with respect to the same Variables
    a, b = ufloat(3.0, 0.1), ufloat(5.0, 0.2)
    flat = backend.collapse(a * b + a / b)
    assert (flat - (a * b + a / b)).std_dev == pytest.approx(0.0, abs=1e-15)
    # what is left is a/b: u^2 = (u_a/b)^2 + (a u_b/b^2)^2 (GUM 5.1.2)
    assert (flat - a * b).std_dev == pytest.approx(((0.1 / 5.0) ** 2 + (3.0 * 0.2 / 25.0) ** 2) ** 0.5, rel=1e-12)


def test_collapse_is_the_identity_on_floats_arrays_and_inputs():
    trials = np.array([1.0, 2.0, 3.0])
    variable = ufloat(1.0, 0.1)
    assert backend.collapse(2.5) == 2.5
    assert backend.collapse(trials) is trials
    assert backend.collapse(variable) is variable
