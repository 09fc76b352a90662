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
from dataclasses import dataclass

_BINARY = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul,
           ast.Div: operator.truediv, ast.Pow: operator.pow}
_UNARY = {ast.USub: operator.neg, ast.UAdd: operator.pos}
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
    for node in ast.walk(tree):
        if isinstance(node, (ast.Expression, ast.Load, *_BINARY, *_UNARY)):
            continue
        if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
            continue
        if isinstance(node, ast.UnaryOp) and type(node.op) in _UNARY:
            continue
        if isinstance(node, ast.Constant) and type(node.value) in (int, float):
            continue
        if isinstance(node, ast.Name):
            if node.id not in FUNCTION_NAMES:
                names.add(node.id)
            continue
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) \
                and node.func.id in FUNCTION_NAMES and len(node.args) == 1 and not node.keywords:
            continue
        allowed = ", ".join(sorted(FUNCTION_NAMES))
        raise FormulaError(
            f"'{ast.unparse(node) if hasattr(ast, 'unparse') else type(node).__name__}' is not allowed; "
            f"a formula may use numbers, names, + - * / ** and the functions {allowed}")
    return Formula(text.strip(), tree, frozenset(names))


def _evaluate(node, values, functions):
    if isinstance(node, ast.Constant):
        return float(node.value)
    if isinstance(node, ast.Name):
        if node.id not in values:
            raise FormulaError(f"the name '{node.id}' is not defined")
        return values[node.id]
    if isinstance(node, ast.BinOp):
        return _BINARY[type(node.op)](_evaluate(node.left, values, functions),
                                      _evaluate(node.right, values, functions))
    if isinstance(node, ast.UnaryOp):
        return _UNARY[type(node.op)](_evaluate(node.operand, values, functions))
    if isinstance(node, ast.Call):
        return functions[node.func.id](_evaluate(node.args[0], values, functions))
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
        return Dimension(tuple(a + b for a, b in zip(self.dims, other.dims)))

    __rmul__ = __mul__

    def __truediv__(self, other):
        other = _as_dim(other)
        return Dimension(tuple(a - b for a, b in zip(self.dims, other.dims)))

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
