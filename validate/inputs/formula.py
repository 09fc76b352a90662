"""Arithmetic formulas from method files, evaluated without `eval`.

A formula received from elsewhere must not be able to run code, so it is
parsed with Python's `ast` module and only numbers, names, + - * / **, unary
minus and the functions in `validate.model.backend.FUNCTIONS` are accepted. The
parsed formula evaluates on any numeric backend (float, ufloat, array) and on
`Dimension` objects to check that its result has the declared dimension.
"""

from __future__ import annotations

import ast
import operator
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

_BINARY: dict[type[ast.operator], Callable[[Any, Any], Any]] = {
    ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul, ast.Div: operator.truediv,
    ast.Pow: operator.pow}
_UNARY: dict[type[ast.unaryop], Callable[[Any], Any]] = {ast.USub: operator.neg, ast.UAdd: operator.pos}
# The elementary functions a formula may call; the model's numeric backend supplies them
# for every engine (validate.model.backend.FUNCTIONS has exactly these names).
FUNCTION_NAMES = frozenset({"sqrt", "log", "ln", "log10", "exp"})


class FormulaError(ValueError):
    """A formula that is not allowed or cannot be read; the message says why."""


@dataclass(frozen=True)
class Formula:
    text: str
    tree: ast.Expression
    names: frozenset[str]

    def evaluate(self, values: dict, functions: dict):
        """Evaluate with `values` (name -> number of any backend) and `functions`
        (name -> the backend's elementary function, for every name in FUNCTION_NAMES)."""
        return _evaluate(self.tree.body, values, functions)


def parse_formula(text: str) -> Formula:
    if not isinstance(text, str) or not text.strip():
        raise FormulaError("the formula is empty")
    try:
        tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError as exc:
        raise FormulaError(f"cannot read the formula at column {exc.offset}: {exc.msg}") from None
    names: set[str] = set()
    for node in ast.walk(tree):  # parents before children: a refused node is named whole
        if not _allowed(node):
            allowed = ", ".join(sorted(FUNCTION_NAMES))
            raise FormulaError(f"'{ast.unparse(node)}' is not allowed; "
                               f"a formula may use numbers, names, + - * / ** and the functions {allowed}")
        if isinstance(node, ast.Name) and node.id not in FUNCTION_NAMES:
            names.add(node.id)
    return Formula(text.strip(), tree, frozenset(names))


def _allowed(node: ast.AST) -> bool:
    """Numbers, names, the arithmetic operators and one-argument calls of the allowed functions."""
    match node:
        case ast.Expression() | ast.Load() | ast.Name():
            return True
        case ast.BinOp(op=op):
            return type(op) in _BINARY
        case ast.UnaryOp(op=op):
            return type(op) in _UNARY
        case ast.Constant(value=value):
            return type(value) in (int, float)
        case ast.Call(func=ast.Name(id=name), args=[_], keywords=[]):
            return name in FUNCTION_NAMES
    return isinstance(node, (*_BINARY, *_UNARY))


def _evaluate(node: ast.AST, values: dict, functions: dict):
    match node:
        case ast.Constant(value=int() | float() as number):
            return float(number)
        case ast.Name(id=name):
            if name not in values:
                raise FormulaError(f"the name '{name}' is not defined")
            return values[name]
        case ast.BinOp(left=left, op=op, right=right):
            return _BINARY[type(op)](_evaluate(left, values, functions), _evaluate(right, values, functions))
        case ast.UnaryOp(op=op, operand=operand):
            return _UNARY[type(op)](_evaluate(operand, values, functions))
        case ast.Call(func=ast.Name(id=name), args=[argument]):
            return functions[name](_evaluate(argument, values, functions))
    raise FormulaError(f"unexpected part of a formula: {type(node).__name__}")


@dataclass(frozen=True)
class Dimension:
    """A dimension vector over (kg, m, mol, K), for checking a formula's result."""

    dims: tuple[int, ...]

    def _same(self, other, op):
        other = _as_dim(other)
        if other.dims != self.dims:
            from validate.inputs.units import describe_dims
            raise FormulaError(f"cannot {op} {describe_dims(self.dims)} and {describe_dims(other.dims)}")
        return self

    def __add__(self, other):
        return self._same(other, "add")

    __radd__ = __add__

    def __sub__(self, other):
        return self._same(other, "subtract")

    __rsub__ = __sub__

    def __mul__(self, other):
        other = _as_dim(other)
        return Dimension(tuple(a + b for a, b in zip(self.dims, other.dims, strict=True)))

    __rmul__ = __mul__

    def __truediv__(self, other):
        other = _as_dim(other)
        return Dimension(tuple(a - b for a, b in zip(self.dims, other.dims, strict=True)))

    def __rtruediv__(self, other):
        return _as_dim(other) / self

    def __pow__(self, power):
        if isinstance(power, Dimension):
            if any(power.dims):
                raise FormulaError("an exponent must be dimensionless")
            if any(self.dims):
                raise FormulaError("a quantity with a unit may only be raised to a plain number")
            return self
        if any(self.dims) and float(power) != int(power):
            raise FormulaError("a quantity with a unit may only be raised to a whole number")
        return Dimension(tuple(int(a * power) for a in self.dims))

    def __neg__(self):
        return self

    def __pos__(self):
        return self


def _as_dim(x) -> Dimension:
    return x if isinstance(x, Dimension) else Dimension((0, 0, 0, 0))


def _dimensionless_only(name):
    def check(x):
        if isinstance(x, Dimension) and any(x.dims):
            raise FormulaError(f"{name}() needs a dimensionless argument")
        return Dimension((0, 0, 0, 0))
    return check


def result_dimension(formula: Formula, dims: dict[str, tuple[int, ...]]) -> tuple[int, ...]:
    """The dimension of the formula's result, given each name's dimension."""
    values = {name: Dimension(tuple(d)) for name, d in dims.items()}
    funcs = {name: _dimensionless_only(name) for name in FUNCTION_NAMES}
    result = formula.evaluate(values, funcs)
    return _as_dim(result).dims
