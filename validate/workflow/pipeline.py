"""The pipeline behind the commands: method file -> model -> engines -> record.

The command line holds no computation; everything it prints comes from here.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
from dataclasses import dataclass, field
from pathlib import Path

from validate import __version__
from validate.equilibrium.study import build_ready_model
from validate.inputs.errors import InputError
from validate.inputs.method_file import load_method
from validate.inputs.schema import Method
from validate.model.assay import Model
from validate.model.build import build
from validate.propagation.budget import budget_rows, grouped
from validate.propagation.linear import LinearResult, propagate
from validate.propagation.montecarlo import McResult, expected_work, new_seed, propagate_mc
from validate.record.files import budget_csv, record_json, sha256_of, write_atomic
from validate.validation.block import line_summary, validation_block

OUTPUT_FILES = ("results.json", "budget.csv", "report.pdf")


@dataclass
class Run:
    method: Method
    model: Model
    results: list[LinearResult]
    monte_carlo: list[McResult] = field(default_factory=list)
    combination: tuple | None = None  # equilibrium studies: (GLS combination, K values, covariance)
    advice: object | None = None  # validate.advisor.advice.AdviceReport
    seed: int | None = None
    trials: int | str | None = None
    record: dict = field(default_factory=dict)


def check(path) -> tuple[Method, Model]:
    """Read and check a method file, and build its model (no propagation)."""
    method = load_method(path)
    return method, build(method)


def analyse(path, trials: int | str | None = 1_000_000, seed: int | None = None,
            progress_factory=None, advice: bool = True) -> Run:
    """Both engines on one method file. `trials=None` runs the linear engine only;
    `progress_factory(total)` may return a callable advanced by trials done."""
    method = load_method(path)
    model, combination = build_ready_model(method)
    results = propagate(model)
    run = Run(method, model, results, trials=trials)
    run.combination = combination
    if trials is not None:
        run.seed = new_seed() if seed is None else int(seed)
        progress = progress_factory(expected_work(trials, model)) if progress_factory else None
        run.monte_carlo = propagate_mc(model, results, trials, run.seed, progress=progress)
    if advice:
        from validate.advisor.advice import advise
        run.advice = advise(method, results, seed=run.seed if run.seed is not None else 1,
                            confirm_with_mc=3 if trials else 0)
    run.record = build_record(run)
    return run


def calibration_summary(method: Method, model: Model) -> dict | None:
    """The straight line as the analyst sees it: absorbance against concentration."""
    return line_summary(method, model)


def build_record(run: Run) -> dict:
    method, results = run.method, run.results
    inputs = [{"path": str(p), "sha256": sha256_of(p)} for p in method.input_files]
    fingerprint = hashlib.sha256("".join(i["sha256"] for i in inputs).encode()).hexdigest()[:8]
    now = _dt.datetime.now(_dt.UTC)
    validation = validation_block(method, run.model, results) if method.calibration else None
    equilibrium = None
    if method.equilibrium is not None:
        from validate.equilibrium.study import equilibrium_block
        from validate.validation.block import equilibrium_validation_block
        equilibrium = equilibrium_block(run.model, results, run.monte_carlo, *run.combination)
        validation = equilibrium_validation_block(run.model)
    flags = (validation or {}).get("range_flags", {})
    labels = {label: smp.id for label, smp in zip(run.model.result_labels, method.samples)} \
        if method.result is not None and "c_measured" in method.result.formula.names else {}
    return {
        "software": {"name": "validate", "version": __version__},
        "run": {"record_id": f"VR-{now:%Y%m%d-%H%M%S}-{fingerprint}", "created": now.isoformat(timespec="seconds")},
        "method": {"title": method.title, "measurand": method.measurand, "scope": method.scope,
                   "file": method.path,
                   "formula": method.result.formula.text if method.result else
                   "K = [ML] / (([M]0 - [ML]) ([L]0 - [ML])), [ML] from the line of the standards",
                   "result_unit": method.result.unit.text if method.result else method.equilibrium.k_unit.text},
        "inputs": inputs,
        "settings": {**method.settings.to_dict(), "validation": method.validation.to_dict()},
        "defaults_applied": list(method.defaults_shown),
        "notes": list(method.notes),
        "assumptions": list(run.model.assumptions),
        "registers": list(method.registers_used),
        "equipment": [{"id": i.id, "kind": i.kind, "class": i.item_class, "provenance": i.provenance}
                      for i in method.items.values()],
        "sources": [s.to_dict() for s in run.model.sources.values()],
        "calibration": calibration_summary(method, run.model),
        "monte_carlo_settings": ({"trials": run.trials, "seed": run.seed,
                                  "method": "JCGM 101:2008; calibration line refitted in every trial"}
                                 if run.monte_carlo else None),
        "results": [
            {**r.to_dict(),
             "budget_by_step": [g.to_dict() for g in grouped(r, "step")],
             "budget_by_equipment": [g.to_dict() for g in grouped(r, "equipment")],
             "sample": labels.get(r.name),
             "flags": flags.get(labels.get(r.name), []),
             **({"monte_carlo": mc.to_dict()} if mc else {})}
            for r, mc in zip(results, run.monte_carlo or [None] * len(results))
        ],
        "validation": validation,
        "equilibrium": equilibrium,
        "advice": run.advice.to_dict() if run.advice is not None else None,
        "budget": budget_rows(results),
    }


def check_output_folder(out_dir, overwrite: bool) -> None:
    """Refuse early (before any computation) to write where a record already is."""
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputError("the output path exists and is not a folder", file=out,
                         fix="choose a folder name with --out")
    existing = [out / name for name in OUTPUT_FILES if (out / name).exists()]
    if existing and not overwrite:
        raise InputError("this folder already holds a record; it is not overwritten", file=out,
                         fix="choose another folder with --out, or add --overwrite to replace it")


def write_outputs(run: Run, out_dir, overwrite: bool = False, pdf: bool = True) -> list[Path]:
    """results.json, budget.csv, report.pdf and a copy of the inputs (DIR/inputs/, for
    `validate verify`). The PDF is built first into a hidden temporary file and every file is
    written whole and moved into place, so a failure never leaves a half-written record."""
    import os

    from validate.record.verify import store_inputs

    out = Path(out_dir)
    check_output_folder(out, overwrite)
    out.mkdir(parents=True, exist_ok=True)
    pending = out / ".report.pdf.new"
    try:
        if pdf:
            from validate.report.pdf import build_report
            build_report(run.record, pending)
        stored = store_inputs(list(run.method.input_files), out)
        # keep the SHA-256 of what was analysed: a file changed since shows up in `validate verify`
        run.record["inputs"] = [{**entry, "stored": copy["stored"]}
                                for entry, copy in zip(run.record["inputs"], stored)]
        payloads = {"results.json": record_json(run.record), "budget.csv": budget_csv(run.record["budget"])}
        written = []
        for name, data in payloads.items():
            write_atomic(out / name, data)
            written.append(out / name)
        if pdf:
            os.replace(pending, out / "report.pdf")
            written.append(out / "report.pdf")
    finally:
        if pending.exists():
            pending.unlink()
    return written
