"""Solutions, one class per way of making them, each with only its own fields. Values are SI.

`made_by` is the word of the method file ("weighing", "certificate", "dilution", "blank");
code tells the kinds apart by class (`match sol: case Diluted(): ...`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

from validate.inputs.values import Delivery, UncertainValue


@dataclass(frozen=True, kw_only=True)
class SolutionCommon:
    made_by: ClassVar[str]
    id: str
    description: str = ""


# how a weighed mass is read on its balance: the difference of a tare and a gross reading, or
# one reading of the net mass (docs/design.md, "Mass by difference")
BY_DIFFERENCE, SINGLE_READING = "by difference", "single reading"
WEIGHINGS = (BY_DIFFERENCE, SINGLE_READING)


@dataclass(frozen=True, kw_only=True)
class Weighed(SolutionCommon):
    """A weighed mass of a substance made up to the mark of a flask."""

    made_by: ClassVar[str] = "weighing"
    mass: UncertainValue
    flask: Delivery
    balance: str | None = None  # id of the balance; None: the mass's own uncertainty only
    weighing: str | None = None  # one of WEIGHINGS; None: not stated, by difference (a default, shown)
    purity: UncertainValue | None = None  # None: taken as pure
    molar_mass: UncertainValue | None = None  # None: a mass concentration


@dataclass(frozen=True, kw_only=True)
class Certified(SolutionCommon):
    """A solution of certified concentration, used as it comes."""

    made_by: ClassVar[str] = "certificate"
    concentration: UncertainValue


@dataclass(frozen=True, kw_only=True)
class Diluted(SolutionCommon):
    """An aliquot of another solution made up to the mark of a flask."""

    made_by: ClassVar[str] = "dilution"
    parent: str
    aliquot: Delivery
    flask: Delivery


@dataclass(frozen=True, kw_only=True)
class Blank(SolutionCommon):
    """The reagents without the analyte: concentration zero."""

    made_by: ClassVar[str] = "blank"


def balance_readings(sol: Weighed) -> tuple[tuple[float, str], ...]:
    """(sign, name) of the balance readings a weighed mass is made of: gross minus tare, or one."""
    if sol.weighing == SINGLE_READING:
        return ((1.0, "net"),)
    return ((-1.0, "tare"), (1.0, "gross"))


Solution = Weighed | Certified | Diluted | Blank
SOLUTION_KINDS: dict[str, type[SolutionCommon]] = {cls.made_by: cls for cls in (Weighed, Certified, Diluted, Blank)}


def deliveries_of(sol: Solution) -> tuple[Delivery, ...]:
    """The volumes measured in making the solution: its aliquot and its flask, where it has them."""
    match sol:
        case Weighed(flask=flask):
            return (flask,)
        case Diluted(aliquot=aliquot, flask=flask):
            return (aliquot, flask)
        case Certified() | Blank():
            return ()


def parent_of(sol: Solution) -> str | None:
    """The solution this one is diluted from; None for one made from scratch."""
    match sol:
        case Diluted(parent=parent):
            return parent
        case Weighed() | Certified() | Blank():
            return None
