"""Build the quality record of a run from what every stage produced.

The blocks of the validation, equilibrium and advice stages arrive as dicts and are taken in
with `from_dict`, which checks their shape against the record's declarations. Results are
addressed by the keys the model gives them (`model.result_keys`), never by their labels.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
from collections.abc import Sequence
from pathlib import Path, PurePath

from validate import __version__
from validate.equilibrium.study import equilibrium_block
from validate.inputs.schema import AssayMethod, EquilibriumMethod, Method
from validate.model.addition import AdditionModel
from validate.model.assay import Model
from validate.model.equilibrium import EquilibriumModel
from validate.model.keys import ResultKey
from validate.propagation.budget import budget_rows, grouped, grouped_by_quantity
from validate.propagation.linear import LinearResult
from validate.propagation.montecarlo import McResult
from validate.record.blocks import AdviceBlock, EquilibriumBlock
from validate.record.blocks_addition import AdditionBlock
from validate.record.blocks_routine import MethodUncertaintyBlock
from validate.record.blocks_validation import ValidationBlock
from validate.record.files import sha256_of
from validate.record.traceability import traceability_block
from validate.record.tree import from_dict, to_dict
from validate.record.types import (
    SCHEMA_VERSION,
    BudgetRow,
    CalibrationSummary,
    EquipmentEntry,
    GroupShare,
    InputFile,
    MethodInfo,
    MonteCarloResult,
    MonteCarloSettings,
    Record,
    ResultEntry,
    RunInfo,
    Settings,
    Software,
    SourceEntry,
)
from validate.record.verdict import judge
from validate.record.verdict_warnings import stated_exact
from validate.validation.block import equilibrium_validation_block, line_summary, validation_block
from validate.validation.matrix_effect import addition_blocks
from validate.validation.routine_block import method_uncertainty_block
from validate.validation.second_order import second_order_block

EQUILIBRIUM_FORMULA = "K = [ML] / (([M]0 - [ML]) ([L]0 - [ML])), [ML] from the line of the standards"
MONTE_CARLO_METHOD = "JCGM 101:2008; calibration line refitted in every trial"


def calibration_summary(method: Method, model: Model) -> CalibrationSummary | None:
    """The straight line as the analyst sees it: absorbance against concentration."""
    summary = line_summary(method, model)
    if summary is not None and model.design is not None and model.design.second_order:
        summary["second_order"] = second_order_block(method, model.design)
    return None if summary is None else from_dict(CalibrationSummary, summary)


def build_record(method: Method, model: Model | EquilibriumModel, results: list[LinearResult],
                 monte_carlo: Sequence[McResult] = (), *, combination: tuple | None = None, advice=None,
                 trials: int | str | None = None, seed: int | None = None) -> Record:
    """The record of one run. `combination` is the equilibrium study's (GLS result, K values,
    covariance); `advice` an AdviceReport; `trials` and `seed` those of the Monte Carlo run."""
    inputs = input_entries(method)
    validation, equilibrium = _stage_blocks(method, model, results, monte_carlo, combination)
    quantity_of = {name: src.quantity for name, src in model.sources.items()}
    keys = dict(zip(model.result_labels, model.result_keys, strict=True))
    entries = _results(results, monte_carlo, keys, validation, quantity_of)
    equipment = tuple(EquipmentEntry(id=i.id, kind=i.kind, item_class=i.item_class, provenance=i.provenance)
                      for i in method.items.values())
    routine = _method_uncertainty(method, model, results)
    additions = _standard_additions(method, model)
    return Record(
        schema_version=SCHEMA_VERSION,
        software=Software(name="validate", version=__version__),
        run=_run_info(inputs),
        method=_method_info(method),
        verdict=judge(results=entries, validation=validation, equilibrium=equilibrium, equipment=equipment,
                      exact=stated_exact(method), monte_carlo_ran=bool(monte_carlo),
                      defaults_applied=method.defaults_shown, notes=method.notes, method_uncertainty=routine,
                      standard_additions=additions or ()),
        inputs=inputs,
        settings=Settings.from_dict({**method.settings.to_dict(), "validation": method.validation.to_dict()},
                                    "settings"),
        defaults_applied=tuple(method.defaults_shown),
        notes=tuple(method.notes),
        assumptions=tuple(model.assumptions),
        registers=register_names(method),
        equipment=equipment,
        sources=tuple(SourceEntry.from_dict(s.to_dict(), "sources") for s in model.sources.values()),
        calibration=calibration_summary(method, model) if isinstance(model, Model) else None,
        monte_carlo_settings=(MonteCarloSettings(trials=trials, seed=seed, method=MONTE_CARLO_METHOD)
                              if monte_carlo and trials is not None and seed is not None else None),
        results=entries,
        validation=validation,
        equilibrium=equilibrium,
        advice=AdviceBlock.from_dict(advice.to_dict(), "advice") if advice is not None else None,
        budget=tuple(BudgetRow.from_dict({"result": row["result"], "key": to_dict(keys[row["result"]]),
                                          **{k: v for k, v in row.items() if k != "result"}}, "budget")
                     for row in budget_rows(results)),
        method_uncertainty=routine,
        standard_additions=additions,
        traceability=traceability_block(method, model),
    )


METHOD_FILE, READINGS, REGISTER, BUILTIN_REGISTER = "method file", "readings table", "register", "built-in register"
# A built-in register (shipped with the package) is named by this prefix and its file name, never by
# the place the package happens to be installed: records of one method from two installations name
# it alike; its SHA-256 says which version it was.
BUILTIN_PREFIX = "built-in: budgets/"


def builtin_register_name(path: str | Path) -> str:
    return BUILTIN_PREFIX + PurePath(path).name


def _builtin_paths(method: Method) -> list[str]:
    """The register files the run read that the method file did not name (the built-in ones)."""
    given = {str(p) for p in method.input_files}
    return [str(p) for p in method.registers_used if str(p) not in given]


def register_names(method: Method) -> tuple[str, ...]:
    """The registers the run read, in order: the laboratory's by the path the method gave, the
    built-in ones by their stable name."""
    builtin = set(_builtin_paths(method))
    return tuple(builtin_register_name(p) if str(p) in builtin else str(p) for p in method.registers_used)


def input_entries(method: Method) -> tuple[InputFile, ...]:
    """Every file the run read, with its SHA-256: the method file, its readings table, the
    laboratory's registers, and the built-in registers that were loaded with them (named by
    `builtin_register_name`)."""
    given = [str(p) for p in method.input_files]
    registers = [str(p) for p in method.registers_used]

    def role(path: str) -> str:
        return METHOD_FILE if path == str(method.path) else REGISTER if path in registers else READINGS

    entries = [InputFile(path=p, sha256=sha256_of(p), role=role(p)) for p in given]
    entries += [InputFile(path=builtin_register_name(p), sha256=sha256_of(p), role=BUILTIN_REGISTER)
                for p in _builtin_paths(method)]
    return tuple(entries)


def _method_uncertainty(method: Method, model: Model | EquilibriumModel,
                        results: list[LinearResult]) -> MethodUncertaintyBlock | None:
    block = method_uncertainty_block(method, model, results) \
        if isinstance(method, AssayMethod) and isinstance(model, Model) else None
    return None if block is None else MethodUncertaintyBlock.from_dict(block, "method_uncertainty")


def _standard_additions(method: Method, model: Model | EquilibriumModel) -> tuple[AdditionBlock, ...] | None:
    if not isinstance(model, AdditionModel) or not isinstance(method, AssayMethod):
        return None
    return tuple(AdditionBlock.from_dict(b, "standard_additions") for b in addition_blocks(method, model))


def _run_info(inputs: tuple[InputFile, ...]) -> RunInfo:
    fingerprint = hashlib.sha256("".join(i.sha256 for i in inputs).encode()).hexdigest()[:8]
    now = _dt.datetime.now(_dt.UTC)
    return RunInfo(record_id=f"VR-{now:%Y%m%d-%H%M%S}-{fingerprint}", created=now.isoformat(timespec="seconds"))


def _method_info(method: Method) -> MethodInfo:
    match method:
        case AssayMethod():
            formula, unit = method.result.formula.text, method.result.unit.text
        case EquilibriumMethod():
            formula, unit = EQUILIBRIUM_FORMULA, method.equilibrium.k_unit.text
    return MethodInfo(title=method.title, measurand=method.measurand, scope=method.scope, file=method.path,
                      formula=formula, result_unit=unit)


def _stage_blocks(method: Method, model: Model | EquilibriumModel, results: list[LinearResult],
                  monte_carlo: Sequence[McResult], combination: tuple | None
                  ) -> tuple[ValidationBlock | None, EquilibriumBlock | None]:
    """(validation, equilibrium) blocks, typed; either may be None."""
    if isinstance(model, EquilibriumModel):
        if combination is None:
            raise ValueError("an equilibrium study's record needs the combination of its K values")
        block = equilibrium_block(model, results, list(monte_carlo), *combination)
        return (ValidationBlock.from_dict(equilibrium_validation_block(model, results), "validation"),
                EquilibriumBlock.from_dict(block, "equilibrium"))
    if model.method.calibration is None:
        return None, None
    return ValidationBlock.from_dict(validation_block(model.method, model, results), "validation"), None


def _results(results: list[LinearResult], monte_carlo: Sequence[McResult], keys: dict[str, ResultKey],
             validation: ValidationBlock | None, quantity_of: dict[str, str]) -> tuple[ResultEntry, ...]:
    flags = validation.range_flags if validation is not None else {}
    entries = []
    mc_by_name = {mc.name: mc for mc in monte_carlo}
    for r in results:
        key = keys[r.name]
        sample = key.id if key.kind == "result" else None
        mc = mc_by_name.get(r.name)
        entries.append(ResultEntry(
            key=key, **r.to_dict(),
            budget_by_step=tuple(_group_shares(r, "step")),
            budget_by_equipment=tuple(_group_shares(r, "equipment")),
            budget_by_quantity=tuple(GroupShare(group=g.group, contribution=g.contribution, share=g.share)
                                     for g in grouped_by_quantity(r, quantity_of)),
            sample=sample,
            flags=tuple(flags.get(sample, ())) if sample is not None else (),
            monte_carlo=MonteCarloResult.from_dict(mc.to_dict(), f"results.{r.name}.monte_carlo") if mc else None))
    return tuple(entries)


def _group_shares(result: LinearResult, by: str) -> list[GroupShare]:
    return [GroupShare(group=g.group, contribution=g.contribution, share=g.share) for g in grouped(result, by)]
