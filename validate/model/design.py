"""The calibration design of a method, built once and read by every later stage.

Which solutions make the line and in what order, which readings are repeated
readings of one solution, whether the blanks are fitted, the weight of every
reading, and the samples read off the line: decided here, once, from the
method and the solutions' concentrations at the estimates. The model owns the
design (`model.design`); the engines, the validation statistics, the advisor
and the record take it from there instead of deriving it again from the
method's readings table.

A calibration level is a group of preparations (solutions made for that
level), each read one or more times. Readings that share a solution id are
repeated readings of one solution; independent preparations at one level are
separate solutions of one concentration (docs/design.md, "Repeated readings and
independent preparations"). The statistical unit of the line is the
preparation: the line is fitted through the mean reading of every preparation,
and the observed scatter is split into two variance components, the reading
scatter (repeated readings of one solution) and the preparation scatter (what
the preparations' means show beyond it). Which effects the observed scatter
covers, and which are carried bottom-up, is decided here once, per term
(`SCATTER_COVERED`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import asdict, dataclass, replace
from pathlib import Path

from validate.inputs.schema import Method
from validate.model.errors import ModelError
from validate.model.levels import Level, Preparation, ReadSolution
from validate.model.line import LineFit, fit_line
from validate.model.quadratic import MIN_LEVELS as MIN_LEVELS_SECOND_ORDER
from validate.model.quadratic import QuadraticFit, fit_quadratic
from validate.model.scatter import ScatterComponents, pooled_reading_sd, residual_inverse_count
from validate.model.weights import WEIGHTING_FUNCTIONS, level_weights, weight_notes

MIN_LEVELS = 3  # distinct concentrations for a line with a residual scatter (n - 2 >= 1)

# Per term, once: the random effects the observed scatter of independently prepared standards
# stands for (observed treatment). They are left out bottom-up where the observed scatter is
# used, and every one of them is carried bottom-up in the bottom-up treatment (docs/design.md,
# "Never count an effect twice"). Systematic effects (calibration offsets of items, the shared
# temperature, the stock, the photometer offset) are never covered: the scatter cannot show them.
SCATTER_COVERED = {
    "standard preparation": "per-use repeatability (and burette readings) of the glassware used to "
                            "prepare each standard and blank",
    "sample preparation": "per-use repeatability of the volumes that make a sample's measured solution "
                          "(sample dilution)",
    "reading": "the photometer's reading noise of every reading",
}


def scatter_covers(treatment: str, term: str) -> bool:
    """Whether a method's scatter treatment ("observed" or "bottom-up") leaves this random effect
    (a key of SCATTER_COVERED) to the observed scatter: the one decision, for assays and studies."""
    if term not in SCATTER_COVERED:
        raise KeyError(f"unknown scatter term {term!r}")
    return treatment == "observed"


def _reading_points(levels: tuple[Level, ...], factor: float) -> tuple[list[float], list[float]]:
    xs = [p.concentration / factor for lv in levels for p in lv.preparations for _ in p.readings]
    ys = [a for lv in levels for p in lv.preparations for a in p.readings]
    return xs, ys


@dataclass(frozen=True)
class CalibrationDesign:
    """The design of an assay's calibration: fitted levels, blanks, weights and samples."""

    levels: tuple[Level, ...]  # the line's levels in fit order: standards, then blanks when fitted
    blanks: tuple[Level, ...]  # every blank, fitted or not
    blanks_in_fit: bool
    samples: tuple[ReadSolution, ...]
    weights: Mapping[str, float] | None = None  # id -> weight of one point (mean 1 over the line's points)
    weighting: str = "none"  # how the weights were found: "none", "inverse-variance", "variance-function"
    scatter: str = "observed"  # the method's treatment: "observed" or "bottom-up"
    notes: tuple[str, ...] = ()  # warnings about the design (weights on few readings)
    function: str = "straight line"  # the calibration function: "straight line" or "second order"

    def covers(self, term: str) -> bool:
        """Whether the observed scatter stands for this random effect (a key of SCATTER_COVERED),
        so its bottom-up term is left out."""
        return scatter_covers(self.scatter, term)

    def covered_terms(self) -> list[str]:
        """What the observed scatter stands for, in words, for the record (empty bottom-up)."""
        return [SCATTER_COVERED[t] for t in SCATTER_COVERED if self.covers(t)]

    @property
    def weighted(self) -> bool:
        return self.weights is not None

    def weight(self, ident: str) -> float:
        """Weight of one reading of a level or sample on the line's scale (1 when unweighted)."""
        return 1.0 if self.weights is None else self.weights[ident]

    @property
    def standards(self) -> tuple[Level, ...]:
        return tuple(lv for lv in self.levels if lv.role == "standard")

    def fitted(self) -> list[tuple[Level, Preparation]]:
        """Every preparation on the line, in fit order, with its level."""
        return [(lv, p) for lv in self.levels for p in lv.preparations]

    def reading_points(self, factor: float = 1.0) -> tuple[list[float], list[float], list[float] | None]:
        """Concentration (divided by `factor`), absorbance and weight (None: unweighted) of
        every reading on the line, in fit order."""
        xs, ys = _reading_points(self.levels, factor)
        ws = ([self.weight(lv.id) for lv in self.levels for _ in lv.readings] if self.weighted else None)
        return xs, ys, ws

    def reading_ids(self) -> list[str]:
        """The level id of every reading on the line, in fit order."""
        return [lv.id for lv in self.levels for _ in lv.readings]

    def point_data(self, factor: float = 1.0) -> tuple[list[float], list[float], list[float] | None]:
        """The line's statistical units: concentration (divided by `factor`), mean absorbance and
        weight (None: unweighted) of every preparation, in fit order."""
        fitted = self.fitted()
        xs = [p.concentration / factor for _, p in fitted]
        ys = [p.mean for _, p in fitted]
        ws = [self.weight(lv.id) for lv, _ in fitted] if self.weighted else None
        return xs, ys, ws

    def point_ids(self) -> list[str]:
        """The name of every preparation on the line (`Preparation.key`), in fit order."""
        return [p.key for _, p in self.fitted()]

    @property
    def second_order(self) -> bool:
        return self.function == "second order"

    def function_fit(self, factor: float = 1.0) -> LineFit | QuadraticFit:
        """The calibration function (straight line or second order) fitted to the preparations'
        means at the estimates, with its statistics."""
        return self.quadratic_fit(factor) if self.second_order else fit_line(*self.point_data(factor))

    def quadratic_fit(self, factor: float = 1.0) -> QuadraticFit:
        """The second-order function fitted to the preparations' means at the estimates."""
        return fit_quadratic(*self.point_data(factor))

    def scatter_components(self) -> ScatterComponents:
        """Reading and preparation scatter of the line at the estimates (see validate.model.scatter)."""
        return _scatter_components(self)

    def reading_sd_in_absorbance(self) -> tuple[float | None, int]:
        """(s_r, dof): the readings' scatter pooled within the line's preparations and series,
        unweighted, so in absorbance whatever the line's weighting (the pure error of ISO 8466-1);
        (None, 0) where no preparation was read twice."""
        return pooled_reading_sd([(g, 1.0) for _, p in self.fitted() for g in _within_series(p.readings, p.series)])

    def sample(self, ident: str) -> ReadSolution:
        return next(s for s in self.samples if s.id == ident)

    def blank_readings(self) -> list[float]:
        return [a for b in self.blanks for a in b.readings]

    def every_reading(self) -> list[float]:
        """Standards, blanks and samples: every absorbance the method reads."""
        return ([a for lv in self.standards for a in lv.readings] + self.blank_readings()
                + [a for s in self.samples for a in s.readings])

    def to_dict(self) -> dict:
        d = asdict(self)
        d["weights"] = None if self.weights is None else dict(self.weights)
        return d


def _within_series(readings, series) -> list[list[float]]:
    """A solution's readings split by series (day): a series effect is not reading scatter."""
    labels = list(series) if series else [""] * len(readings)
    return [[a for a, lab in zip(readings, labels, strict=True) if lab == key] for key in dict.fromkeys(labels)]


def _scatter_components(design: CalibrationDesign) -> ScatterComponents:
    """The two components of a design at the estimates: the repeated readings of the line's
    solutions give s_r (the pure error of ISO 8466-1), the preparations' means give s_m."""
    # s_m with N - 2 (line) or N - 3 (second order) degrees of freedom
    return scatter_of_line([(p, design.weight(lv.id)) for lv, p in design.fitted()], design.function_fit())


def scatter_of_line(preparations: list[tuple[Preparation, float]], fit) -> ScatterComponents:
    """s_m of the preparations' means about their fitted function `fit` (residual_sd, dof), s_r
    pooled within the preparations (each with its weight) and series, and u_p
    (validate.model.scatter)."""
    # the line's own solutions only: a sample's readings never change another sample's uncertainty
    groups = [(g, w) for p, w in preparations for g in _within_series(p.readings, p.series)]
    s_r, dof_r = pooled_reading_sd(groups)
    # the coefficient of s_r^2 in the expected residual mean square, with each point's leverage
    weights = [w for _, w in preparations]
    inv = residual_inverse_count([p.concentration for p, _ in preparations],
                                 None if all(w == 1.0 for w in weights) else weights,
                                 [p.count for p, _ in preparations], len(preparations) - fit.dof)
    u_p = math.sqrt(max(0.0, fit.residual_sd**2 - s_r**2 * inv)) if s_r is not None else None
    return ScatterComponents(fit.residual_sd, fit.dof, s_r, dof_r, u_p, inv)


def _level(method: Method, ident: str, role: str, concentrations: Mapping[str, float]) -> Level:
    """A solution's level: one preparation, or one per label of the readings table's
    `preparation` column (independent preparations recorded under one id)."""
    readings, series = tuple(method.readings[ident]), method.reading_series.get(ident)
    labels = method.reading_preparations.get(ident)
    if not labels or len(set(labels)) == 1:
        return Level(ident, role, (Preparation(ident, concentrations[ident], readings, series),))
    _check_split(method, ident)
    preps = []
    for label in dict.fromkeys(labels):
        idx = [i for i, lab in enumerate(labels) if lab == label]
        preps.append(Preparation(ident, concentrations[ident], tuple(readings[i] for i in idx),
                                 tuple(series[i] for i in idx) if series else None, label))
    return Level(ident, role, tuple(preps))


def _check_split(method: Method, ident: str) -> None:
    """Independent preparations under one id share the solution's recipe, and so its terms:
    right where the observed scatter covers their random effects, wrong bottom-up."""
    if method.settings.scatter != "observed":
        from validate.inputs.errors import InputError

        cal = method.calibration
        raise InputError(f"`{ident}` has readings of several preparations (the readings table's preparation "
                         f"column); bottom-up, each preparation needs its own preparation terms",
                         file=Path(method.path).parent / cal.readings_file if cal else method.path,
                         where=f"readings of {ident}",
                         fix="give each independent preparation its own solution entry (e.g. S4a, S4b) in the "
                             "method file, or use scatter = \"observed\"")


def _levels(method: Method, idents, role: str, concentrations: Mapping[str, float]) -> tuple[Level, ...]:
    """One level per concentration: solutions of equal concentration at the estimates (to 9
    digits) are independent preparations of one level, in the order first named."""
    groups: dict[str, list[Preparation]] = {}
    first: dict[str, str] = {}
    for ident in idents:
        key = f"{concentrations[ident]:.9g}"
        first.setdefault(key, ident)
        groups.setdefault(key, []).extend(_level(method, ident, role, concentrations).preparations)
    return tuple(Level(first[key], role, tuple(preps)) for key, preps in groups.items())


def _read(method: Method, ident: str) -> ReadSolution:
    return ReadSolution(ident, tuple(method.readings[ident]), method.reading_series.get(ident))


def calibration_design(method: Method, concentrations: Mapping[str, float]) -> CalibrationDesign:
    """The design of a method's calibration, checked, with its weights when the method asks
    for a weighted line. `concentrations`: every solution's concentration at the estimates (SI)."""
    cal = method.calibration
    if cal is None:
        raise ValueError("the method has no [calibration]; there is no calibration design")
    standards = _levels(method, cal.standards, "standard", concentrations)
    blanks = _levels(method, cal.blanks, "blank", concentrations)
    samples = tuple(_read(method, s.id) for s in method.samples)
    _check_sample_preparations(method)
    design = CalibrationDesign(standards + (blanks if cal.blanks_in_fit else ()), blanks,
                               cal.blanks_in_fit, samples, scatter=method.settings.scatter, function=cal.function)
    check_calibration_data(method, design)
    if cal.weighting in WEIGHTING_FUNCTIONS:
        design = replace(design, weights=level_weights(design.levels, design.samples, cal.weighting),
                         weighting=cal.weighting, notes=weight_notes(design.levels, cal.weighting))
    return design


def _check_sample_preparations(method: Method) -> None:
    """A sample is one measured solution here; several preparations of one sample under one id are
    not averaged silently."""
    from validate.inputs.errors import InputError

    cal = method.calibration
    for smp in method.samples:
        if len(set(method.reading_preparations.get(smp.id, ()))) > 1:
            raise InputError(f"sample `{smp.id}` has readings of several preparations (the readings table's "
                             f"preparation column); a sample is read off the line as one measured solution",
                             file=Path(method.path).parent / cal.readings_file if cal else method.path,
                             where=f"readings of {smp.id}",
                             fix="give each preparation of the sample its own sample id, or one preparation label")


def check_calibration_data(method: Method, design: CalibrationDesign) -> None:
    """At least MIN_LEVELS distinct concentrations (InputError, exit 2), and a line that
    rises with concentration (a data problem: ModelError, exit 3)."""
    from validate.inputs.errors import InputError

    cal = method.calibration
    assert cal is not None  # a design exists only for a method with a calibration
    path = method.path
    readings_path = Path(method.path).parent / cal.readings_file
    unit = cal.concentration_unit
    levels = sorted({float(f"{p.concentration / unit.factor:.9g}") for _, p in design.fitted()})  # 9 digits
    if len(levels) < MIN_LEVELS:
        shown = ", ".join(f"{x:g}" for x in levels)
        raise InputError(f"the calibration points have only {len(levels)} distinct concentration(s) "
                         f"({shown} {unit.text}); a line needs at least {MIN_LEVELS}", file=path,
                         where="[calibration].standards",
                         fix="prepare the standards at different concentrations (5 to 7 levels over the "
                             "working range is common practice)")
    if design.second_order:
        _check_second_order(method, design, levels)
        return
    xs, ys, _ = design.point_data(unit.factor)
    slope = fit_line(xs, ys).slope
    if not slope > 0:
        raise ModelError(
            f"{readings_path}, readings of the standards: the absorbance falls as the concentration rises "
            f"(fitted slope {slope:.3g} absorbance per {unit.text}); a Beer-Lambert calibration line rises, "
            f"so no result is reported\n  what to do: check that every reading is under the right id "
            f"(rows swapped between standards?) and that the preparation of the standards in {path} "
            f"matches the solutions measured; methods read as a loss of absorbance are not supported")


def _check_second_order(method: Method, design: CalibrationDesign, levels: list[float]) -> None:
    """At least 4 distinct concentrations (InputError, exit 2), and a function that rises over the
    whole working range, so every response in it has one root there (ModelError, exit 3)."""
    from validate.inputs.errors import InputError

    cal = method.calibration
    assert cal is not None
    unit = cal.concentration_unit
    if len(levels) < MIN_LEVELS_SECOND_ORDER:
        raise InputError(f"the calibration points have only {len(levels)} distinct concentration(s); a "
                         f"second-order function needs at least {MIN_LEVELS_SECOND_ORDER}", file=method.path,
                         where="[calibration].standards",
                         fix='add standards (ISO 8466-2 asks for about 10 levels, from memory), or use '
                             'function = "straight line"')
    fit = design.quadratic_fit(unit.factor)
    slopes = fit.slope_at([levels[0], levels[-1]])
    if not (slopes[0] > 0 and slopes[1] > 0):
        a, b, c = fit.coefficients
        vertex = -b / (2 * c) if c != 0 else float("nan")
        raise ModelError(
            f"{Path(method.path).parent / cal.readings_file}, readings of the standards: the second-order "
            f"function does not rise over the whole working range {levels[0]:g} to {levels[-1]:g} {unit.text} "
            f"(slope {slopes[0]:.3g} at the lowest, {slopes[1]:.3g} at the highest level; its turning point is "
            f"at {vertex:.4g} {unit.text}), so a response could belong to two concentrations and no result is "
            f"reported\n  what to do: narrow the working range to where the response still rises (dilute the "
            f"samples), or check the readings of the highest standards")


@dataclass(frozen=True)
class EquilibriumDesign:
    """The design of a complex-formation study: the standards' line and the points read off it."""

    standards: tuple[Level, ...]  # concentration: the limiting reagent's total at the estimates (SI)
    mixtures: tuple[ReadSolution, ...]
    series_points: tuple[ReadSolution, ...]  # every addition series' points, series by series
    limiting: str  # reagent the standards are short of: "metal" or "ligand"

    @property
    def points(self) -> tuple[ReadSolution, ...]:
        """The solutions K is found from: the mixtures, then the addition-series points."""
        return self.mixtures + self.series_points

    def point_ids(self) -> list[str]:
        return [p.id for p in self.points]

    def reading_points(self, factor: float = 1.0) -> tuple[list[float], list[float]]:
        """Limiting-reagent total (divided by `factor`) and absorbance of every standard's reading."""
        return _reading_points(self.standards, factor)

    def point_data(self, factor: float = 1.0) -> tuple[list[float], list[float]]:
        """Limiting-reagent total (divided by `factor`) and mean absorbance of every prepared
        standard: the line's statistical units (repeated readings of one solution averaged)."""
        preps = [p for lv in self.standards for p in lv.preparations]
        return [p.concentration / factor for p in preps], [p.mean for p in preps]

    def every_reading(self) -> list[float]:
        return [a for lv in self.standards for a in lv.readings] + [a for p in self.points for a in p.readings]

    def scatter_components(self) -> ScatterComponents:
        """Reading and preparation scatter of the standards' line through the preparations' means,
        as an assay's (unweighted)."""
        xs, ys = self.point_data()
        return scatter_of_line([(p, 1.0) for lv in self.standards for p in lv.preparations],
                               fit_line(xs, ys, None))

    def to_dict(self) -> dict:
        return asdict(self)


def equilibrium_design(method: Method, limiting_totals: Mapping[str, float]) -> EquilibriumDesign:
    """The study's design; `limiting_totals`: each standard's total of the limiting reagent (SI)
    at the estimates."""
    study = method.equilibrium
    if study is None:
        raise ValueError("the method has no equilibrium study; there is no equilibrium design")
    standards = tuple(_level(method, mix.id, "standard", limiting_totals) for mix in study.standards)
    mixtures = tuple(_read(method, mix.id) for mix in study.mixtures)
    series = tuple(_read(method, ident) for s in study.series for ident in s.reading_ids())
    return EquilibriumDesign(standards, mixtures, series, study.limiting)
