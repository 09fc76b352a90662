"""What a calibration is made of: levels, the preparations read for them, and the solutions
read off the line (samples, mixtures, series points), each with its repeated readings."""

from __future__ import annotations

from dataclasses import dataclass


def _mean(readings: tuple[float, ...]) -> float:
    return sum(readings) / len(readings)


@dataclass(frozen=True)
class Preparation:
    """One solution made for a calibration level, and its repeated readings."""

    solution: str  # id of the solution read
    concentration: float  # SI, at the estimates of the inputs
    readings: tuple[float, ...]
    series: tuple[str, ...] | None = None  # series label (day, analyst) of each reading

    @property
    def count(self) -> int:
        return len(self.readings)

    @property
    def mean(self) -> float:
        return _mean(self.readings)


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
class ReadSolution:
    """A solution read off the line (a sample, a mixture, a series point) and its readings."""

    id: str
    readings: tuple[float, ...]
    series: tuple[str, ...] | None = None

    @property
    def count(self) -> int:
        return len(self.readings)

    @property
    def mean(self) -> float:
        return _mean(self.readings)
