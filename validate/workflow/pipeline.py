"""The pipeline behind the commands: method file -> model -> engines -> record.

The command line holds no computation; everything it prints comes from here.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from validate.equilibrium.study import build_ready_model
from validate.inputs.method_file import load_method
from validate.inputs.redirect import Redirect
from validate.inputs.registers import default_register_files
from validate.inputs.schema import Method
from validate.model.assay import Model
from validate.model.build import build
from validate.model.equilibrium import EquilibriumModel
from validate.propagation.linear import LinearResult, propagate
from validate.propagation.montecarlo import McResult, expected_work, new_seed, propagate_mc
from validate.record.build import build_record
from validate.record.files import budget_csv, json_members, members_json
from validate.record.folder import OutputFolder
from validate.record.manifest import MANIFEST_FILE, content_hash_of_members, make_manifest
from validate.record.output_checks import RECORD_ALLOWANCE, check_space
from validate.record.stored import copy_bytes, with_stored_names
from validate.record.types import Record

OUTPUT_FILES = ("results.json", "budget.csv", "report.pdf", MANIFEST_FILE)


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
            progress_factory=None, advice: bool = True, redirect: Redirect | None = None) -> Run:
    """Both engines on one method file. `trials=None` runs the linear engine only;
    `progress_factory(total)` may return a callable advanced by trials done; `redirect` says
    where to read the files the method names (a filed record's own copies). `trials=0` is the
    linear engine only, as `--trials 0`."""
    trials = None if trials == 0 else trials
    method = load_method(path, redirect)
    model, combination = build_ready_model(method)
    results = propagate(model)
    run = Run(method, model, results, trials=trials)
    run.combination = combination
    if trials is not None:
        run.seed = new_seed() if seed is None else int(seed)
        progress = progress_factory(expected_work(trials, model, results)) if progress_factory else None
        run.monte_carlo = propagate_mc(model, results, trials, run.seed, progress=progress)
    if advice:
        from validate.advisor.advice import advise
        run.advice = advise(method, results, seed=run.seed if run.seed is not None else 1,
                            confirm_with_mc=3 if trials else 0, model=model)
    record = build_record(method, model, results, run.monte_carlo, combination=combination,
                          advice=run.advice, trials=run.trials, seed=run.seed)
    run.set_record(with_stored_names(record))
    return run


def expected_size(method_path) -> int:
    """What a record of this method will take on disk, as far as it can be told before the run:
    the method file, the built-in registers and room for the record's own files."""
    files = [Path(method_path), *default_register_files()]
    return sum(p.stat().st_size for p in files if p.is_file()) + RECORD_ALLOWANCE


def open_output(out_dir, overwrite: bool = False, method_path=None) -> OutputFolder:
    """`--out` checked, locked and staged before any computation (validate.record.folder)."""
    expected = expected_size(method_path) if method_path is not None else RECORD_ALLOWANCE
    target = OutputFolder(out_dir, overwrite, expected)
    target.open()
    return target


def write_record(run: Run, target: OutputFolder, pdf: bool = True) -> list[Path]:
    """Stage the whole record in `target` (copies of the inputs and registers, results.json,
    budget.csv, report.pdf, manifest.json) and swap it into place."""
    if run.typed_record is None:
        raise ValueError("the run has no record yet: analyse() builds it")
    record = run.typed_record
    payloads = {entry.stored or "": copy_bytes(entry) for entry in record.inputs}
    members = json_members(record.to_dict())  # serialised once: results.json and the content hash
    payloads["results.json"] = members_json(members)
    recorded_hash = content_hash_of_members(members)
    payloads["budget.csv"] = budget_csv(run.record["budget"])
    check_space(target.out.parent, sum(len(d) for d in payloads.values()) + (RECORD_ALLOWANCE if pdf else 0))
    for name, data in payloads.items():
        target.write(name, data)
    if pdf:
        from validate.report.pdf import build_report
        try:
            build_report(run.record, target.reserve("report.pdf"), content_hash=recorded_hash)
        except OSError as exc:  # the disk filled up or went away while the PDF was written
            raise target.failed(exc, "writing report.pdf") from None
    try:
        manifest = make_manifest(target.staged, run.record, recorded_hash).to_json()
    except OSError as exc:
        raise target.failed(exc, "reading the staged files for manifest.json") from None
    target.write(MANIFEST_FILE, manifest)
    target.commit()
    return [target.out / name for name in OUTPUT_FILES if (target.out / name).exists()]


def write_outputs(run: Run, out_dir, overwrite: bool = False, pdf: bool = True) -> list[Path]:
    """Open `out_dir`, write the run's record and swap it into place, in one call."""
    target = open_output(out_dir, overwrite, run.method.path)
    try:
        return write_record(run, target, pdf)
    finally:
        target.close()
