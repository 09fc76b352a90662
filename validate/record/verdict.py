"""One verdict on a run, decided once from the record's parts (the renderers only show it).

The status:
- "not shown fit": an acceptance criterion is not met, or none could be evaluated;
- "fit with reservations": none failed, but a criterion could not be evaluated, or a warning
  bears on the result (linearity, weighting, scatter, top-down against bottom-up: each sample's
  intermediate precision and the method's reconciliation, Monte Carlo against GUM, range flags
  and the stated scope, detection limits, equipment figures from memory or typical, inputs
  taken as exact, the equilibrium checks);
- "fit" (shown as "fit for the stated purpose"): every criterion that applies evaluated and
  met, nothing listed.
A criterion "not set" (no limit, none by default) is neither met nor listed. A default criterion the
method rules out ("not applicable": recovery and E_n where no reference sample is named) is listed
and counted apart; it is no reservation.

The reported interval of each result follows one rule (JCGM 101:2008, clause 8): where the
Monte Carlo method validates the GUM interval, the result is reported as y +/- U; where it
does not, the Monte Carlo coverage interval is the result and y +/- U is shown beside it.
"""

from __future__ import annotations

from collections.abc import Sequence

from validate.record import verdict_warnings as warn
from validate.record.blocks import EquilibriumBlock
from validate.record.blocks_addition import AdditionBlock
from validate.record.blocks_routine import MethodUncertaintyBlock
from validate.record.blocks_validation import Criterion, ValidationBlock
from validate.record.blocks_verdict import Basis, Clause8, ReportedResult, Status, Verdict, VerdictItem
from validate.record.types import EquipmentEntry, ResultEntry
from validate.validation.criteria import TRUENESS_CRITERIA

STATEMENTS: dict[str, str] = {"fit": "fit for the stated purpose", "fit with reservations": "fit with reservations",
                              "not shown fit": "not shown fit"}
INTERVAL_RULE = ("y ± U where Monte Carlo validates the GUM interval (JCGM 101, clause 8); else the Monte Carlo "
                 "interval (MC), with y ± U beside it labelled GUM; without Monte Carlo, y ± U unchecked.")


def _number(x: float | None) -> str:
    return "none" if x is None else f"{x:.4g}"


def _limit(c: Criterion, unit: str) -> str:
    if isinstance(c.limit, tuple):
        return f"within {_number(c.limit[0])} to {_number(c.limit[1])}{unit}"
    return f"{c.comparison} {_number(c.limit)}{unit}"


def _unit(c: Criterion, validation: ValidationBlock) -> str:
    unit = validation.concentration_unit if c.unit == "concentration unit" else c.unit
    return f" {unit}" if unit else ""


def _not_met(c: Criterion, validation: ValidationBlock) -> VerdictItem:
    unit = _unit(c, validation)
    origin = "default, common practice" if c.is_default else "set by the user"
    return VerdictItem(what=c.name, why=f"observed {_number(c.observed)}{unit}, limit {_limit(c, unit)} ({origin})")


def _why_not_evaluable(c: Criterion, validation: ValidationBlock, study: bool) -> str:
    """Why a criterion with a limit has no observed value, from what the record holds."""
    if study and c.key == "max_repeatability_rsd":
        return "an equilibrium study reads no sample in replicate"
    if c.key in ("recovery_range", "max_abs_en"):
        if study:
            return "an equilibrium study has no reference value to compare K with"
        if validation.settings.reference_sample is None:
            return "no reference sample with a reference value is named under [validation]"
        return "the trueness of the reference sample could not be computed"
    if c.key == "min_linearity_p_value":
        reasons = [f"{t.name}: {t.verdict}" for t in (validation.lack_of_fit, validation.mandel) if not t.evaluable]
        return "; ".join(reasons) or "no p value of the linearity tests is defined"
    if c.key == "max_loq":
        return (f"the limit of quantitation by the declared route ({validation.limits.declared_route}) is not "
                "defined for these data" + "".join(f"; {n}" for n in validation.limits.notes))
    if c.key == "max_repeatability_rsd":
        return "no sample was read in replicate"
    if c.key == "max_relative_expanded_uncertainty":
        return ("the combined K has no defined relative expanded uncertainty" if study else
                "no result has a defined relative expanded uncertainty")
    return "the record holds no observed value for it"


def _why_not_applicable(c: Criterion) -> str:
    if c.key in TRUENESS_CRITERIA:
        return "the method names no reference sample under [validation], so there is no trueness to judge"
    return "the method rules it out"


def not_applicable_items(validation: ValidationBlock | None) -> list[VerdictItem]:
    """The default criteria this method rules out, with why."""
    rows = validation.criteria.criteria if validation is not None else ()
    return [VerdictItem(what=c.name, why=_why_not_applicable(c)) for c in rows if c.status == "not applicable"]


def criteria_items(validation: ValidationBlock | None, study: bool) -> tuple[list[VerdictItem], list[VerdictItem]]:
    """(not met, not evaluable) among the acceptance criteria."""
    if validation is None:
        return [], [VerdictItem(what="acceptance criteria", why="the method has no calibration line, so no "
                                "acceptance criterion could be evaluated")]
    rows = validation.criteria.criteria
    not_met = [_not_met(c, validation) for c in rows if c.status == "not met"]
    not_evaluable = [VerdictItem(what=c.name, why=_why_not_evaluable(c, validation, study))
                     for c in rows if c.status == "not evaluable"]
    return not_met, not_evaluable


def warning_items(results: Sequence[ResultEntry], validation: ValidationBlock | None,
                  equilibrium: EquilibriumBlock | None, equipment: Sequence[EquipmentEntry],
                  exact: Sequence[VerdictItem], monte_carlo_ran: bool,
                  inputs: tuple[Sequence[str], Sequence[str]] = ((), ()),
                  method_uncertainty: MethodUncertaintyBlock | None = None,
                  standard_additions: Sequence[AdditionBlock] = ()) -> list[VerdictItem]:
    """Every warning that bears on the results, in the order the report treats them."""
    items: list[VerdictItem] = []
    controls = [level.sample for level in method_uncertainty.levels] if method_uncertainty else []
    if validation is not None:
        items += (warn.linearity(validation) + warn.weighting(validation) + warn.scatter(validation)
                  + warn.reading_noise(validation)
                  + warn.limits(validation) + warn.scope(validation) + warn.top_down(validation, results, controls))
    items += warn.reconciliation(method_uncertainty) + warn.standard_additions(standard_additions)
    if equilibrium is not None:
        items += warn.equilibrium(equilibrium)
    items += warn.range_flags(results) + warn.monte_carlo(results, monte_carlo_ran)
    return items + list(exact) + warn.input_notes(*inputs) + warn.registers(equipment)


def _status(not_met: list, not_evaluable: list, warnings: list, evaluated: int) -> Status:
    if not_met or evaluated == 0:
        return "not shown fit"
    return "fit with reservations" if not_evaluable or warnings else "fit"


def _statement(status: Status, met: int, not_met: int, not_evaluable: int, warnings: int,
               not_applicable: int = 0) -> str:
    counts = f"{met} acceptance criteria met, {not_met} not met, {not_evaluable} not evaluable"
    if met + not_met == 0:
        counts = f"no acceptance criterion could be evaluated ({not_evaluable} not evaluable)"
    if not_applicable:
        counts += f", {not_applicable} not applicable"
    return f"{STATEMENTS[status]}: {counts}; {warnings} warning{'s bear' if warnings != 1 else ' bears'} on the results"


def reported_result(r: ResultEntry) -> ReportedResult:
    """The interval this result is reported with, by INTERVAL_RULE."""
    mc = r.monte_carlo
    basis: Basis
    clause8: Clause8
    gum = (r.value - r.expanded_uncertainty, r.value + r.expanded_uncertainty)
    if mc is None:
        basis, clause8, ends = "GUM", "not run", gum
        why = "Monte Carlo was not run: y ± U, not checked by JCGM 101 clause 8"
    elif mc.agrees_with_gum:
        basis, clause8, ends = "GUM", "validated", gum
        why = f"validated by Monte Carlo (JCGM 101 clause 8: both ends within {mc.tolerance:.1g})"
    else:
        basis, clause8, ends = "Monte Carlo", "not validated", (mc.interval[0], mc.interval[1])
        why = (f"JCGM 101 clause 8 does not validate the GUM interval (an end differs by more than "
               f"{mc.tolerance:.1g}): the Monte Carlo interval is the result")
    return ReportedResult(key=r.key, name=r.name, unit=r.unit, basis=basis, clause8=clause8, value=r.value,
                          expanded_uncertainty=r.expanded_uncertainty, coverage_factor=r.coverage_factor,
                          coverage_probability=r.coverage_probability, low=ends[0], high=ends[1],
                          gum_low=gum[0], gum_high=gum[1], why=why)


def judge(*, results: Sequence[ResultEntry], validation: ValidationBlock | None,
          equilibrium: EquilibriumBlock | None, equipment: Sequence[EquipmentEntry] = (),
          exact: Sequence[VerdictItem] = (), monte_carlo_ran: bool, defaults_applied: Sequence[str] = (),
          notes: Sequence[str] = (), method_uncertainty: MethodUncertaintyBlock | None = None,
          standard_additions: Sequence[AdditionBlock] = ()) -> Verdict:
    """The verdict of a run from its record's parts; `exact` lists the inputs stated without
    an uncertainty (verdict_warnings.stated_exact of the method); `method_uncertainty` the
    top-down block, whose reconciliation with the budget is judged."""
    not_met, not_evaluable = criteria_items(validation, equilibrium is not None)
    ruled_out = not_applicable_items(validation)
    warnings = warning_items(results, validation, equilibrium, equipment, exact, monte_carlo_ran,
                             (defaults_applied, notes), method_uncertainty, standard_additions)
    rows = validation.criteria.criteria if validation is not None else ()
    met = sum(1 for c in rows if c.status == "met")
    status = _status(not_met, not_evaluable, warnings, met + len(not_met))
    return Verdict(status=status,
                   statement=_statement(status, met, len(not_met), len(not_evaluable), len(warnings),
                                        len(ruled_out)),
                   not_met=tuple(not_met), not_evaluable=tuple(not_evaluable), not_applicable=tuple(ruled_out),
                   warnings=tuple(warnings),
                   interval_rule=INTERVAL_RULE, reported=tuple(reported_result(r) for r in results))
