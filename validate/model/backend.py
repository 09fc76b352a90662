"""Elementary functions that work on every numeric backend of the model.

The model is written once and evaluated on plain floats, on `uncertainties`
numbers (linear engine) and on numpy arrays of trials (Monte Carlo engine).
Arithmetic operators already work on all three; the functions below dispatch
on the argument's type so model code never has to know which engine runs it.
"""

from __future__ import annotations

import math
from typing import Any

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
    floats, arrays and the inputs themselves.

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
        return AffineScalarFunc(x.nominal_value, LinearCombination(_flat_derivatives(x)))
    return x


def _flat_derivatives(x: AffineScalarFunc) -> dict:
    """{Variable: dx/dVariable}, visiting every node of x's expression once.

    Reverse accumulation over the expression graph (parents before children, each
    node's weight the sum over the paths that reach it), so a sub-expression used
    many times (the line's means in every residual) is expanded once, where the
    package's own expansion walks it once per path. Reads the package's
    `LinearCombination` form (uncertainties 3.x, pinned in pyproject.toml): a node
    holds either an expanded {Variable: coefficient} dict or (coefficient, node) pairs.
    Nodes have no equality of their own (identity is their hash), and the variables are
    keyed by id() (their own hash is id() in Python code) while summing; the sums run in
    the same order either way, so the numbers are the same.
    """
    root = x._linear_part
    if isinstance(root.linear_combo, dict):
        return dict(root.linear_combo)
    weight = {root: 1.0}
    flat: dict[int, float] = {}
    variables: dict[int, Any] = {}
    for node in _parents_first(root):
        w = weight[node]
        combo = node.linear_combo
        if isinstance(combo, dict):
            for var, d in combo.items():
                key = id(var)
                if key in flat:
                    flat[key] += w * d
                else:
                    flat[key] = 0.0 + w * d
                    variables[key] = var
        else:
            for factor, child in combo:
                weight[child] = weight.get(child, 0.0) + w * factor
    return {variables[key]: value for key, value in flat.items()}


def _parents_first(root) -> list:
    """The nodes of an expression graph, each once, every node before its children
    (reversed depth-first post-order, a topological order of a graph without cycles)."""
    order, seen = [], set()
    stack = [(root, False)]
    pop, push = stack.pop, stack.append
    while stack:
        node, finished = pop()
        if finished:
            order.append(node)
            continue
        if node in seen:
            continue
        seen.add(node)
        push((node, True))
        combo = node.linear_combo
        if not isinstance(combo, dict):
            stack.extend((child, False) for _, child in combo if child not in seen)
    order.reverse()
    return order


FUNCTIONS = {"sqrt": sqrt, "log": log, "ln": log, "log10": log10, "exp": exp}
