"""Equipment items, one class per kind, each with only the fields of its kind. Values are SI.

The kind's name (`kind`, e.g. "burette") is the word the method file, the registers and
the record use; code tells the kinds apart by class (`match item: case Burette(): ...`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar


@dataclass(frozen=True, kw_only=True)
class ItemCommon:
    """What every item has: its id, register class and where its values come from."""

    kind: ClassVar[str]
    id: str
    item_class: str
    provenance: str = ""
    defaults_used: tuple[str, ...] = ()  # plain-words notes on defaults applied


@dataclass(frozen=True, kw_only=True)
class Volumetric(ItemCommon):
    """Glassware or a pipette that delivers (or, a flask, holds) a volume."""

    nominal: float  # m^3
    tolerance: float  # maximum permissible error, m^3
    repeatability: float  # standard deviation per use, m^3
    distribution: str = "triangular"  # of the calibration offset


@dataclass(frozen=True, kw_only=True)
class OneMarkPipette(Volumetric):
    kind: ClassVar[str] = "one-mark pipette"


@dataclass(frozen=True, kw_only=True)
class GraduatedPipette(Volumetric):
    kind: ClassVar[str] = "graduated pipette"


@dataclass(frozen=True, kw_only=True)
class PistonPipette(Volumetric):
    kind: ClassVar[str] = "piston pipette"


@dataclass(frozen=True, kw_only=True)
class Burette(Volumetric):
    kind: ClassVar[str] = "burette"
    reading: float  # half-width of one reading of the scale, m^3


@dataclass(frozen=True, kw_only=True)
class VolumetricFlask(Volumetric):
    kind: ClassVar[str] = "volumetric flask"


@dataclass(frozen=True, kw_only=True)
class Cuvette(ItemCommon):
    kind: ClassVar[str] = "cuvette"
    path: float  # optical path length, m
    tolerance: float  # half-width of the path length, m


@dataclass(frozen=True, kw_only=True)
class Photometer(ItemCommon):
    """Offset and gain act alike on standards and samples and cancel through the calibration line;
    drift (between reading the standards and the samples) and stray light do not (docs/design.md,
    "Photometry")."""

    kind: ClassVar[str] = "photometer"
    offset: float = 0.0  # absorbance half-width, shared by every reading
    noise: float = 0.0  # absorbance standard deviation per reading
    gain: float = 0.0  # relative half-width of the photometric scale, shared by every reading
    drift: float = 0.0  # absorbance half-width of the change between standards and samples
    drift_basis: str = ""  # how the drift was found, in words (stated, or a check standard's readings)
    stray_light: float = 0.0  # largest stray-light ratio s_max: s in [0, s_max] (a fraction of the incident light)


LINEARITY_CORRELATIONS = ("independent", "shared")


@dataclass(frozen=True, kw_only=True)
class Balance(ItemCommon):
    """Each balance reading carries a repeatability term; its linearity deviation is its own
    (`linearity_correlation = "independent"`, EURACHEM/CITAC CG4) or one per balance ("shared")."""

    kind: ClassVar[str] = "balance"
    linearity: float = 0.0  # kg half-width, per reading
    repeatability: float = 0.0  # kg standard deviation of one reading
    linearity_correlation: str = "independent"  # one of LINEARITY_CORRELATIONS


Item = OneMarkPipette | GraduatedPipette | PistonPipette | Burette | VolumetricFlask | Cuvette | Photometer | Balance

# the order of the method file's documentation and of the messages that list the kinds
PIPETTES: tuple[type[Volumetric], ...] = (OneMarkPipette, GraduatedPipette, PistonPipette, Burette)
FLASKS: tuple[type[Volumetric], ...] = (VolumetricFlask,)
VOLUMETRIC: tuple[type[Volumetric], ...] = PIPETTES + FLASKS
ITEM_KINDS: dict[str, type[Item]] = {cls.kind: cls for cls in (OneMarkPipette, GraduatedPipette, PistonPipette,
                                                               Burette, VolumetricFlask, Cuvette, Photometer, Balance)}


def kind_names(kinds: tuple[type[ItemCommon], ...]) -> tuple[str, ...]:
    return tuple(cls.kind for cls in kinds)
