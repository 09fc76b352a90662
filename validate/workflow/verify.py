"""Check a filed quality record: are its inputs unchanged, and does it still reproduce?

`verify_record` checks each stored copy of the inputs against the SHA-256 the record holds,
re-runs the stored method with the recorded seed and number of Monte Carlo trials, and
compares the record number by number (the comparison itself is `validate.record.verify`).
"""

from __future__ import annotations

from pathlib import Path

from validate.inputs.errors import InputError
from validate.model.assay import ModelError
from validate.record.verify import (
    COMPARED_SECTIONS,
    INPUTS_FOLDER,
    RECORD_FILE,
    VerifyReport,
    _check_input,
    _method_entry,
    _read_record,
    _record_id,
    _recorded_version,
    compare,
    reproducible_part,
)
from validate.workflow.pipeline import analyse


def verify_record(out_dir) -> VerifyReport:
    """Check the stored inputs against their SHA-256 and re-run the stored method."""
    folder = Path(out_dir)
    record = _read_record(folder)
    entries = record.get("inputs") or []
    checks = tuple(_check_input(folder, entry) for entry in entries)
    if not checks or not any(c.stored_sha256 for c in checks):
        raise InputError("this record has no stored copies of its input files, so it cannot be re-run",
                         file=folder / RECORD_FILE, where="inputs",
                         fix=f"records keep their inputs in {folder / INPUTS_FOLDER}; run the method again "
                             f"to make a record that can be verified")
    mc = record.get("monte_carlo_settings") or {}
    trials, seed = mc.get("trials"), mc.get("seed")
    method_file = folder / _method_entry(record, checks).stored
    try:
        run = analyse(method_file, trials=trials, seed=seed, advice=False)
    except (InputError, ModelError) as exc:
        message = exc.message() if isinstance(exc, InputError) else str(exc)
        return VerifyReport(str(folder), _record_id(record), checks, trials, seed, message, 0, (),
                            _recorded_version(record))
    old, new = reproducible_part(record), reproducible_part(run.record)  # both in their JSON form
    mismatches, count = [], 0
    for section in COMPARED_SECTIONS:
        found, n = compare(old.get(section), new.get(section), section)
        mismatches += found
        count += n
    return VerifyReport(str(folder), _record_id(record), checks, trials, seed, None, count, tuple(mismatches),
                        _recorded_version(record))
