"""What a calibration is made of: levels, the preparations read for them, and the solutions
read off the line (samples, mixtures, series points), each with its repeated readings."""

from __future__ import annotations

from dataclasses import dataclass


class RepeatedReadings:
    """The count and mean of the repeated readings of one solution (a dataclass with `readings`)."""

    readings: tuple[float, ...]

    @property
    def count(self) -> int:
        return len(self.readings)

    @property
    def mean(self) -> float:
        return sum(self.readings) / len(self.readings)


@dataclass(frozen=True)
class Preparation(RepeatedReadings):
    """One solution made for a calibration level, and its repeated readings."""

    solution: str  # id of the solution read (its recipe: one concentration at the estimates)
    concentration: float  # SI, at the estimates of the inputs
    readings: tuple[float, ...]
    series: tuple[str, ...] | None = None  # series label (day, analyst) of each reading
    label: str | None = None  # the readings table's preparation label, where one id holds several

    @property
    def key(self) -> str:
        """The preparation's own name: the solution id, with its preparation label if any."""
        return self.solution if self.label is None else f"{self.solution} (preparation {self.label or '-'})"


@dataclass(frozen=True)
class Level:
    """A calibration level: its id, its role and the preparations read for it."""

    id: str
    role: str  # "standard" or "blank"
    preparations: tuple[Preparation, ...]

    @property
    def readings(self) -> tuple[float, ...]:
        return tuple(a for p in self.preparations for a in p.readings)

    @property
    def count(self) -> int:
        return sum(p.count for p in self.preparations)

    @property
    def concentration(self) -> float:
        """The level's concentration at the estimates (the mean of its preparations')."""
        return sum(p.concentration for p in self.preparations) / len(self.preparations)


@dataclass(frozen=True)
class ReadSolution(RepeatedReadings):
    """A solution read off the line (a sample, a mixture, a series point) and its readings."""

    id: str
    readings: tuple[float, ...]
    series: tuple[str, ...] | None = None
