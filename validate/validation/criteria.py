"""Acceptance criteria: each limit, the observed value, and met / not met.

The laboratory sets its criteria from the requirements that apply to the
method; the tool only compares. The defaults below are shown with every
evaluation so the record says which limits were assumed. Relative values are
in percent. A criterion whose limit is None is "not set"; one whose observed
value is missing is "not evaluable" (met = None): neither counts as met. A default criterion
that the method itself rules out (recovery and E_n where no reference sample is named: there is
nothing to compare with) is "not applicable" (met = None): not a reservation, counted apart.

Observed keys (what `observed` may hold):
    r_squared, max_abs_relative_residual (percent, standards above zero),
    relative_expanded_uncertainty (percent), loq, recovery_percent,
    en_number, min_linearity_p_value (smallest p of lack-of-fit and Mandel),
    repeatability_rsd_percent.

Not every criterion applies to every kind of method: an equilibrium study has no reference
value for K and reads no sample in replicate, so recovery, E_n and repeatability are left
out of its criteria (STUDY_CRITERIA); one the user sets anyway is "not evaluable", with why.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from validate.inputs.validation_settings import COMMON, CRITERIA, DEFAULTS, STUDY_CRITERIA  # noqa: F401 (the table)
from validate.validation.linearity import plain

# the criteria that compare a result with a reference value: not applicable without a reference sample
TRUENESS_CRITERIA = ("recovery_range", "max_abs_en")


@dataclass(frozen=True)
class Criterion:
    key: str
    name: str
    comparison: str
    limit: float | tuple[float, float] | None
    observed: float | None
    met: bool | None  # None: not set, not evaluable or not applicable
    unit: str
    source: str
    is_default: bool
    status: str  # "met", "not met", "not set", "not evaluable", "not applicable"

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


def _criterion(key: str, settings: dict, observed: dict, applicable: bool, ruled_out: bool = False) -> Criterion:
    name, obs_key, comparison, default, unit, source = CRITERIA[key]
    is_default = key not in settings
    limit = _check_limit(key, settings.get(key, default))
    value = observed.get(obs_key) if applicable else None
    value = None if value is None or not math.isfinite(float(value)) else float(value)
    if limit is None:
        met, status = None, "not set"
    elif ruled_out and is_default:
        met, status, value = None, "not applicable", None
    elif value is None:
        met, status = None, "not evaluable"
    else:
        met = bool(_compare(comparison, value, limit))
        status = "met" if met else "not met"
    return Criterion(key, name, comparison, limit, value, met, unit,
                     source if is_default else "set by the user", is_default, status)


def _judged_keys(settings: dict, applicable: tuple[str, ...] | None) -> list[str]:
    """The criteria judged: those that apply, and any the user set."""
    return [k for k in CRITERIA if applicable is None or k in applicable or k in settings]


def _caution(keys: list[str]) -> str:
    caution = ("Acceptance criteria come from the applicable requirements, not from the tool; defaults "
               "marked common practice are placeholders.")
    left_out = [CRITERIA[k][0] for k in CRITERIA if k not in keys]
    if left_out:
        caution += " Not applicable to this kind of method, so not judged: " + "; ".join(left_out) + "."
    return caution


def evaluate_criteria(settings: dict | None, observed: dict, applicable: tuple[str, ...] | None = None,
                      ruled_out: tuple[str, ...] = ()) -> CriteriaResult:
    """Compare observed values with the settings (defaults fill in what is not given).

    `applicable`: the criteria that apply to this kind of method (None: all). One that does not
    apply is left out, unless the user set it: then it is shown "not evaluable".
    `ruled_out`: criteria this method rules out (TRUENESS_CRITERIA without a reference sample):
    shown "not applicable" at their defaults, "not evaluable" where the user set a limit."""
    settings = dict(settings or {})
    unknown = sorted(set(settings) - set(CRITERIA))
    if unknown:
        raise ValueError(f"unknown acceptance criteria {', '.join(unknown)}; known ones are "
                         f"{', '.join(CRITERIA)}")
    keys = _judged_keys(settings, applicable)
    out = [_criterion(k, settings, observed, applicable is None or k in applicable, k in ruled_out) for k in keys]
    evaluated = [c.met for c in out if c.met is not None]
    return CriteriaResult(tuple(out), {k: DEFAULTS[k] for k in keys}, all(evaluated) if evaluated else None,
                          _caution(keys))
