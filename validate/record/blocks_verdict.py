"""The record's verdict block: is the method shown fit, and how each result is reported.

The block is decided once, by validate.record.verdict.judge, from the other parts of the
record; the terminal, the PDF and results.json only show it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from validate.model.keys import ResultKey
from validate.record.tree import RecordPart, described

Status = Literal["fit", "fit with reservations", "not shown fit"]
Basis = Literal["GUM", "Monte Carlo"]
Clause8 = Literal["validated", "not validated", "not run"]


@dataclass(frozen=True, kw_only=True)
class VerdictItem(RecordPart):
    """One entry under the verdict: what it concerns and why it is listed."""

    what: str
    why: str


@dataclass(frozen=True, kw_only=True)
class ReportedResult(RecordPart):
    """The interval a result is reported with, by the rule in `Verdict.interval_rule`."""

    key: ResultKey
    name: str
    unit: str
    basis: Basis = described("GUM: y +/- U; Monte Carlo: the Monte Carlo coverage interval")
    clause8: Clause8 = described("the GUM interval by JCGM 101 clause 8: validated, not validated, or Monte "
                                 "Carlo not run")
    value: float = described("the estimate y (GUM)")
    expanded_uncertainty: float = described("U of the GUM")
    coverage_factor: float
    coverage_probability: float
    low: float = described("lower end of the reported interval")
    high: float = described("upper end of the reported interval")
    gum_low: float = described("y - U")
    gum_high: float = described("y + U")
    why: str


@dataclass(frozen=True, kw_only=True)
class Verdict(RecordPart):
    """One verdict on the run, with everything that keeps it from a plain 'fit'."""

    status: Status = described("fit: every acceptance criterion met and nothing below; fit with "
                               "reservations: none failed, but some could not be evaluated or warnings "
                               "bear on the result; not shown fit: a criterion failed or none was evaluated")
    statement: str = described("the verdict in words, as the terminal and the report show it")
    not_met: tuple[VerdictItem, ...]
    not_evaluable: tuple[VerdictItem, ...]
    not_applicable: tuple[VerdictItem, ...] = described(
        "default criteria the method rules out (recovery and E_n where no reference sample is named): "
        "counted apart, not a reservation", default=())
    warnings: tuple[VerdictItem, ...]
    interval_rule: str = described("how the reported interval of each result is chosen")
    reported: tuple[ReportedResult, ...]
