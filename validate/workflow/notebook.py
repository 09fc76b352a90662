"""The tool from Python, for notebooks: load a method, run it, read a filed record, and the
budget, the validation tests and the results as pandas DataFrames.

    from validate.workflow import notebook
    method = notebook.load("method.toml")            # read and checked; InputError if not
    ev = notebook.run("method.toml", trials=0)       # 0: linear engine only, as on the command line
    ev.record.verdict.status                         # the record as typed objects
    ev.to_frame("budget")                            # or "tests", "criteria", "results"
    ev.save("out/")                                  # results.json, budget.csv, report.pdf
    record = notebook.read("out/")                   # a filed record, typed

The frames are views of the record, one row per item, built from its typed parts; nothing is
computed anew.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from validate.inputs.errors import InputError
from validate.inputs.schema import Method
from validate.record.files import read_json_file
from validate.record.tree import RecordShapeError
from validate.record.types import Record, read_record
from validate.workflow import pipeline

LINE_TESTS = ("lack_of_fit", "mandel", "runs", "intercept", "weighting")


def load(path) -> Method:
    """The method file read and checked (its model is built too, so a file that loads here runs)."""
    return pipeline.check(path)[0]


@dataclass(frozen=True)
class Evaluation:
    """One run: `record` is the typed record (validate.record.types.Record)."""

    run_state: pipeline.Run

    @property
    def record(self) -> Record:
        if self.run_state.typed_record is None:
            raise ValueError("the run has no record")
        return self.run_state.typed_record

    def to_dict(self) -> dict:
        """The record's JSON form, as results.json holds it."""
        return self.record.to_dict()

    def to_frame(self, part: str = "results") -> pd.DataFrame:
        return to_frame(self.record, part)

    def save(self, folder, overwrite: bool = False, pdf: bool = True) -> list[Path]:
        """Write results.json, budget.csv and (unless pdf=False) report.pdf into `folder`."""
        return pipeline.write_outputs(self.run_state, folder, overwrite=overwrite, pdf=pdf)


def run(path, trials: int | str = 100_000, seed: int | None = None, advice: bool = False) -> Evaluation:
    """Evaluate a method file. `trials`: Monte Carlo trials, "auto" (JCGM 101 7.9), or 0 for the
    linear engine only; `seed` repeats a Monte Carlo run; `advice` runs the what-if advisor."""
    if isinstance(trials, bool) or not (trials == "auto" or (isinstance(trials, int) and trials >= 0)):
        raise ValueError(f"trials must be a whole number >= 0 or 'auto', got {trials!r}")
    return Evaluation(pipeline.analyse(path, trials=trials or None, seed=seed, advice=advice))


def read(path) -> Record:
    """A filed record: a folder written by `validate run --out` or its results.json."""
    file = Path(path)
    file = file / "results.json" if file.is_dir() else file
    if not file.exists():
        raise InputError("no record here", file=file, fix="give a folder written by `validate run --out` "
                         "or its results.json")
    data = read_json_file(file, "the record", "give a record written by `validate run --out`")  # bounded, strict
    try:
        return read_record(data)
    except RecordShapeError as exc:
        raise InputError(f"not a record of this layout: {exc}", file=file,
                         fix="read it with the version of validate that wrote it") from None


# --------------------------------------------------------------------------
# tables

def _key_columns(key) -> dict:
    return {"kind": key.kind, "id": key.id}


def budget_frame(record: Record) -> pd.DataFrame:
    """Every source of every result (the rows of budget.csv), ranked by share within a result."""
    rows = []
    for row in record.budget:
        data = row.to_dict()
        data.pop("key")
        rows.append({**_key_columns(row.key), **data})
    return pd.DataFrame(rows)


def tests_frame(record: Record) -> pd.DataFrame:
    """The hypothesis tests on the calibration line (lack of fit, Mandel, runs, intercept, weighting)."""
    v = record.validation
    if v is None:
        return pd.DataFrame(columns=["test", "name", "evaluable", "statistic", "p_value", "critical_value",
                                     "alpha", "significant", "verdict", "source"])
    rows = []
    for key in LINE_TESTS:
        data = getattr(v, key).to_dict()
        data.pop("details")
        data.pop("dof")
        rows.append({"test": key, **data})
    return pd.DataFrame(rows)


def criteria_frame(record: Record) -> pd.DataFrame:
    """The acceptance criteria: limit, observed value and status."""
    rows = [c.to_dict() for c in record.validation.criteria.criteria] if record.validation else []
    return pd.DataFrame(rows, columns=["key", "name", "comparison", "limit", "observed", "met", "unit", "source",
                                       "is_default", "status"])


def results_frame(record: Record) -> pd.DataFrame:
    """Each result: GUM value and U, Monte Carlo interval, and the interval it is reported with."""
    reported = {(r.key.kind, r.key.id): r for r in record.verdict.reported} if record.verdict else {}
    rows = []
    for r in record.results:
        mc = r.monte_carlo
        rep = reported.get((r.key.kind, r.key.id))
        rows.append({**_key_columns(r.key), "name": r.name, "unit": r.unit, "value": r.value,
                     "standard_uncertainty": r.standard_uncertainty, "expanded_uncertainty": r.expanded_uncertainty,
                     "coverage_factor": r.coverage_factor, "coverage_probability": r.coverage_probability,
                     "effective_dof": r.effective_dof,
                     "mc_low": mc.interval[0] if mc else None, "mc_high": mc.interval[1] if mc else None,
                     "mc_agrees_with_gum": mc.agrees_with_gum if mc else None,
                     "reported_basis": rep.basis if rep else None, "reported_low": rep.low if rep else None,
                     "reported_high": rep.high if rep else None, "flags": "; ".join(r.flags)})
    return pd.DataFrame(rows)


FRAMES: dict[str, Callable[[Record], pd.DataFrame]] = {
    "budget": budget_frame, "tests": tests_frame, "criteria": criteria_frame, "results": results_frame}


def to_frame(record: Record, part: str = "results") -> pd.DataFrame:
    """One part of the record as a DataFrame: "budget", "tests", "criteria" or "results"."""
    if part not in FRAMES:
        raise ValueError(f"unknown part {part!r}; choose one of {', '.join(FRAMES)}")
    return FRAMES[part](record)
