"""The pipeline behind the commands: method file -> model -> engines -> record.

The command line holds no computation; everything it prints comes from here.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path

from validate.equilibrium.study import build_ready_model
from validate.inputs.errors import InputError
from validate.inputs.method_file import load_method
from validate.inputs.schema import Method
from validate.model.assay import Model
from validate.model.build import build
from validate.model.equilibrium import EquilibriumModel
from validate.propagation.linear import LinearResult, propagate
from validate.propagation.montecarlo import McResult, expected_work, new_seed, propagate_mc
from validate.record.build import build_record
from validate.record.files import budget_csv, record_json, write_atomic
from validate.record.types import Record

OUTPUT_FILES = ("results.json", "budget.csv", "report.pdf")


@dataclass
class Run:
    method: Method
    model: Model | EquilibriumModel
    results: list[LinearResult]
    monte_carlo: list[McResult] = field(default_factory=list)
    combination: tuple | None = None  # equilibrium studies: (GLS combination, K values, covariance)
    advice: object | None = None  # validate.advisor.advice.AdviceReport
    seed: int | None = None
    trials: int | str | None = None
    typed_record: Record | None = None  # the record as a typed tree (validate.record.types)
    record: dict = field(default_factory=dict)  # its JSON form, as written to results.json; renderers read it

    def set_record(self, record: Record) -> None:
        self.typed_record, self.record = record, record.to_dict()


def check(path) -> tuple[Method, Model | EquilibriumModel]:
    """Read and check a method file, and build its model (no propagation)."""
    method = load_method(path)
    return method, build(method)


def analyse(path, trials: int | str | None = 1_000_000, seed: int | None = None,
            progress_factory=None, advice: bool = True) -> Run:
    """Both engines on one method file. `trials=None` or 0 runs the linear engine only (as
    `--trials 0`); `progress_factory(total)` may return a callable advanced by trials done."""
    trials = None if trials == 0 else trials
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
    run.set_record(build_record(method, model, results, run.monte_carlo, combination=combination,
                                advice=run.advice, trials=run.trials, seed=run.seed))
    return run


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
        record = with_stored_inputs(run.typed_record, stored)
        payloads = {"results.json": record_json(record), "budget.csv": budget_csv(record.to_dict()["budget"])}
        written = []
        for name, data in payloads.items():
            write_atomic(out / name, data)
            written.append(out / name)
        if pdf:
            os.replace(pending, out / "report.pdf")
            written.append(out / "report.pdf")
        run.set_record(record)
    finally:
        if pending.exists():
            pending.unlink()
    return written


def with_stored_inputs(record: Record | None, stored: list[dict]) -> Record:
    """The record with each input's stored copy named. The SHA-256 stays that of what was
    analysed: a file changed since shows up in `validate verify`."""
    if record is None:
        raise ValueError("the run has no record yet: analyse() builds it")
    inputs = tuple(dataclasses.replace(entry, stored=copy["stored"])
                   for entry, copy in zip(record.inputs, stored, strict=True))
    return dataclasses.replace(record, inputs=inputs)
