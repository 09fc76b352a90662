"""Check a filed quality record: are its files as written, and does it still reproduce?

`verify_record` checks every file of the folder against manifest.json and the record's content
hash, each stored input against the SHA-256 the record holds, and budget.csv against the
record's budget (regenerated); then it re-runs the stored method from the record's own copies
(inputs and registers; never a file outside the folder) with the recorded seed, number of
Monte Carlo trials and advice setting, and compares the whole record number by number
(the comparison itself is `validate.record.verify`).
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

from validate.inputs.errors import InputError
from validate.inputs.run_limits import seed_problem, trials_problem
from validate.model.assay import ModelError
from validate.record.manifest import check_files, content_hash, read_manifest
from validate.record.stored import INPUTS_FOLDER, RECORD_FILE, StoredCopies
from validate.record.types import read_record
from validate.record.verify import (
    VerifyReport,
    budget_file_matches,
    check_input,
    comparable_part,
    compare,
    read_filed_record,
    record_id,
    recorded_version,
)
from validate.workflow.pipeline import analyse

EXACT = (0.0, 0.0)


def verify_record(out_dir) -> VerifyReport:
    """Check the folder's files and re-run the stored method; InputError when it is not a record."""
    folder = Path(out_dir)
    record = read_filed_record(folder)
    entries = record.get("inputs") or []
    if not entries or not all(e.get("stored") for e in entries):
        raise InputError("this record has no stored copies of its input files, so it cannot be re-run",
                         file=folder / RECORD_FILE, where="inputs",
                         fix=f"records keep their inputs in {folder / INPUTS_FOLDER}; run the method again "
                             f"to make a record that can be verified")
    copies = StoredCopies(folder, read_record(record).inputs)  # refuses stored names that leave the folder
    manifest = read_manifest(folder)
    mc = record.get("monte_carlo_settings") or {}
    trials, seed = mc.get("trials"), mc.get("seed")
    problem = trials_problem(trials) or seed_problem(seed)
    if problem:  # a forged record must not make the re-run take the machine's memory or fail inside numpy
        raise InputError(f"the record asks its re-run for settings no run may have: {problem}",
                         file=folder / RECORD_FILE, where="monte_carlo_settings",
                         fix="the file was damaged or edited by hand; restore it from the archive")
    checked = VerifyReport(
        str(folder), record_id(record), tuple(check_input(folder, entry) for entry in entries), trials, seed,
        None, 0, (), recorded_version(record), files=check_files(folder, manifest) if manifest else (),
        has_manifest=manifest is not None, content_hash=content_hash(record),
        recorded_content_hash=manifest.content_hash if manifest else None,
        budget_file_matches=budget_file_matches(folder, record))
    try:
        run = analyse(copies.method_file, trials=trials, seed=seed, advice=record.get("advice") is not None,
                      redirect=copies)
    except (InputError, ModelError) as exc:
        return replace(checked, rerun_error=exc.message() if isinstance(exc, InputError) else str(exc))
    old, new = comparable_part(record), comparable_part(run.record)
    mismatches, count = compare(old, new)
    return replace(checked, numbers_compared=count, mismatches=tuple(mismatches),
                   identical=not compare(old, new, tolerance=EXACT)[0])
