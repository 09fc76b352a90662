"""The model's own error, and the one guarded evaluation of a user's formula."""

from __future__ import annotations

import math

from validate.inputs.formula import Formula, FormulaError
from validate.model import backend


class ModelError(ValueError):
    """The data do not allow the model to give a result (e.g. a flat line)."""


def evaluate_formula(formula: Formula, values: dict, sample: str):
    """The formula's value, or ModelError naming the formula, the sample and the values when it
    cannot be computed (division by zero, overflow, the logarithm or root of a negative number).
    Arrays of Monte Carlo trials pass unchecked: a trial without a value becomes nan and is
    counted as invalid by the engine (JCGM 101 7.2)."""
    try:
        result = formula.evaluate(values, backend.FUNCTIONS)
    except FormulaError:
        raise
    except (ArithmeticError, ValueError) as exc:
        raise _not_computable(formula, values, sample, _reason(exc)) from None
    estimate = backend.nominal(result)
    if isinstance(estimate, complex):  # Python's power of a negative number to a fraction
        raise _not_computable(formula, values, sample, "a fractional power of a negative number")
    if isinstance(estimate, float) and not math.isfinite(estimate):
        raise _not_computable(formula, values, sample, f"the result is {estimate}")
    return result


def _reason(exc: Exception) -> str:
    if isinstance(exc, ZeroDivisionError):
        return "division by zero"
    if isinstance(exc, OverflowError):
        return "a number too large to represent"
    if "domain" in str(exc):
        return "the logarithm or square root of a value that is not positive"
    return str(exc) or type(exc).__name__


def _not_computable(formula: Formula, values: dict, sample: str, reason: str) -> ModelError:
    shown = ", ".join(f"{name} = {_estimate(values[name])}" for name in sorted(formula.names) if name in values)
    where = f" for the sample `{sample}`" if sample else ""
    return ModelError(f"the formula `{formula.text}` cannot be evaluated{where}: {reason} "
                      f"(values in SI units: {shown})\n  what to do: check the readings and quantities of "
                      f"this sample, or write the formula so it holds for every sample")


def _estimate(value) -> str:
    estimate = backend.nominal(value)
    return f"{estimate:.6g}" if isinstance(estimate, float) else "an array of trials"
