"""Acceptance criteria: each limit, the observed value, and met / not met.

The laboratory sets its criteria from the requirements that apply to the
method; the tool only compares. The defaults below are shown with every
evaluation so the record says which limits were assumed. Relative values are
in percent. A criterion whose limit is None is "not set"; one whose observed
value is missing is "not evaluable" (met = None): neither counts as met.

Observed keys (what `observed` may hold):
    r_squared, max_abs_relative_residual (percent, standards above zero),
    relative_expanded_uncertainty (percent), loq, recovery_percent,
    en_number, min_linearity_p_value (smallest p of lack-of-fit and Mandel),
    repeatability_rsd_percent.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from validate.inputs.validation_settings import COMMON, CRITERIA, DEFAULTS  # noqa: F401 (the criteria table)
from validate.validation.linearity import plain


@dataclass(frozen=True)
class Criterion:
    key: str
    name: str
    comparison: str
    limit: float | tuple[float, float] | None
    observed: float | None
    met: bool | None  # None: not set or not evaluable
    unit: str
    source: str
    is_default: bool
    status: str  # "met", "not met", "not set", "not evaluable"

    def to_dict(self) -> dict:
        return plain(self)


@dataclass(frozen=True)
class CriteriaResult:
    criteria: tuple[Criterion, ...]
    defaults: dict
    all_met: bool | None  # None when nothing could be evaluated
    caution: str

    def to_dict(self) -> dict:
        return plain(self)


def _check_limit(key: str, value):
    if value is None:
        return None
    if CRITERIA[key][2] == "within":
        try:
            lo, hi = (float(v) for v in value)
        except (TypeError, ValueError):
            raise ValueError(f"criterion {key!r} needs two numbers [low, high], got {value!r}") from None
        if not lo < hi:
            raise ValueError(f"criterion {key!r}: low ({lo}) must be below high ({hi})")
        return (lo, hi)
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValueError(f"criterion {key!r} needs a number, got {value!r}")
    return float(value)


def _compare(comparison: str, observed: float, limit) -> bool:
    if comparison == ">=":
        return observed >= limit
    if comparison == "<=":
        return observed <= limit
    if comparison == "|x| <=":
        return abs(observed) <= limit
    lo, hi = limit
    return lo <= observed <= hi


def evaluate_criteria(settings: dict | None, observed: dict) -> CriteriaResult:
    """Compare observed values with the settings (defaults fill in what is not given)."""
    settings = dict(settings or {})
    unknown = sorted(set(settings) - set(CRITERIA))
    if unknown:
        raise ValueError(f"unknown acceptance criteria {', '.join(unknown)}; known ones are "
                         f"{', '.join(CRITERIA)}")
    out = []
    for key, (name, obs_key, comparison, default, unit, source) in CRITERIA.items():
        is_default = key not in settings
        limit = _check_limit(key, settings.get(key, default))
        value = observed.get(obs_key)
        value = None if value is None or not math.isfinite(float(value)) else float(value)
        if limit is None:
            met, status = None, "not set"
        elif value is None:
            met, status = None, "not evaluable"
        else:
            met = bool(_compare(comparison, value, limit))
            status = "met" if met else "not met"
        out.append(Criterion(key, name, comparison, limit, value, met, unit,
                             source if is_default else "set by the user", is_default, status))
    evaluated = [c.met for c in out if c.met is not None]
    return CriteriaResult(tuple(out), dict(DEFAULTS), all(evaluated) if evaluated else None,
                          "Acceptance criteria come from the applicable requirements, not from "
                          "the tool; defaults marked common practice are placeholders.")
