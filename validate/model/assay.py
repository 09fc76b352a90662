"""The measurement model, written once for every numeric backend.

`build_model(method)` turns a validated method into a `Model`: the list of
uncertainty sources and a pure function from source values to results. The
linear engine calls `evaluate` with `uncertainties` numbers, the Monte Carlo
engine with numpy arrays of trials; both run this same code, so shared
sources correlate results identically in both.

Chain: solutions (weighing, certificate, dilution) -> standards'
concentrations -> readings corrected for photometer offset and divided by
the cell's path length -> straight line refitted from these values -> each
sample's concentration in the measured solution (`c_measured`) -> the
result formula.
"""

from __future__ import annotations

import functools
import operator
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from validate.inputs.items import Cuvette, Photometer
from validate.inputs.schema import AssayMethod, Calibration, Method
from validate.inputs.solutions import Blank, Certified, Diluted, Weighed, parent_of
from validate.metrology.equipment import SourceSet, balance_terms, exact_or, value_source, volume_term
from validate.metrology.sources import Source
from validate.model import backend
from validate.model.design import CalibrationDesign, calibration_design
from validate.model.design import check_calibration_data as check_calibration_data  # re-exported: named so
from validate.model.errors import ModelError as ModelError  # imported from here by the later stages
from validate.model.errors import evaluate_formula
from validate.model.keys import ResultKey
from validate.model.line import fit_line, inverse_prediction, slope_resolved, straight_line
from validate.model.photometry import reading_correction
from validate.model.quadratic import quadratic_coefficients, quadratic_inverse_prediction, rising_root
from validate.model.scatter import LINE_GROUP, ScatterComponents, ScatterTerm


class SolutionInputs:
    """What every model shares: its sources' estimates and the solutions' concentrations
    (`_solution_terms` in preparation order, each term seeing those before it)."""

    sources: dict[str, Source]
    _solution_terms: dict

    def nominal_inputs(self) -> dict[str, float]:
        return {name: s.value for name, s in self.sources.items()}

    def evaluate(self, x) -> dict:
        """Every result from source values of any backend."""
        raise NotImplementedError

    def outputs(self, x, labels) -> dict:
        """At least the results named in `labels` (the Monte Carlo engine asks for the ones it
        keeps); a model that cannot evaluate fewer gives them all."""
        return self.evaluate(x)

    def concentrations(self, x) -> dict:
        conc: dict = {}
        for sol_id, term in self._solution_terms.items():
            # collapsed: each concentration is shared by its dilutions and by every result
            conc[sol_id] = backend.collapse(term(x, conc))
        return conc


@dataclass
class Model(SolutionInputs):
    method: AssayMethod
    sources: dict[str, Source]
    result_labels: list[str]
    result_keys: list[ResultKey] = field(default_factory=list)  # one per label, in the same order
    assumptions: list[str] = field(default_factory=list)
    design: CalibrationDesign | None = None  # None: a method without a calibration line
    _solution_terms: dict = field(default_factory=dict, repr=False)
    _reading_terms: dict = field(default_factory=dict, repr=False)  # solution id -> mean corrected reading
    _quantity_terms: dict = field(default_factory=dict, repr=False)

    def unit_of(self, label: str) -> str:
        return self.method.result.unit.text

    def line(self, x, conc=None):
        """Intercept and slope refitted from this evaluation's standards and readings: the
        (weighted) least-squares line through the mean readings of the design's preparations,
        one point per preparation (`straight_line`; docs/design.md, "Repeated readings and
        independent preparations")."""
        conc = self.concentrations(x) if conc is None else conc
        design = self._design()
        fitted = design.fitted()
        intercept, slope = straight_line(
            [1] * len(fitted), [conc[p.solution] for _, p in fitted],
            [self._reading_terms[p.key](x) for _, p in fitted],
            [design.weight(lv.id) for lv, _ in fitted] if design.weighted else None)
        return backend.collapse(intercept), backend.collapse(slope)  # shared by every sample's result

    def second_order(self, x, conc=None):
        """(a, b, c) of the second-order function y = a + b x + c x^2 refitted from this evaluation's
        standards and readings, through the same points and weights as `line` (ISO 8466-2)."""
        conc = self.concentrations(x) if conc is None else conc
        design = self._design()
        fitted = design.fitted()
        coefficients = quadratic_coefficients(
            [1] * len(fitted), [conc[p.solution] for _, p in fitted],
            [self._reading_terms[p.key](x) for _, p in fitted],
            [design.weight(lv.id) for lv, _ in fitted] if design.weighted else None)
        return tuple(backend.collapse(v) for v in coefficients)  # shared by every sample's result

    def _design(self) -> CalibrationDesign:
        if self.design is None:
            raise ModelError("the method has no calibration line")
        return self.design

    def evaluate(self, x) -> dict:
        """Results (in their display units) from source values of any backend."""
        return self._results(x, _plan(self))

    def outputs(self, x, labels) -> dict:
        """The results named in `labels`: the line and only the samples named (every result
        when one named is not the assay's own, e.g. a standard addition's). The same code as
        `evaluate`, so the same numbers; its plan is made once per model."""
        plan = self.__dict__.get("_outputs_plan")
        if plan is None or plan.labels != tuple(self.result_labels):  # made again if results were added
            plan = self.__dict__["_outputs_plan"] = _plan(self)
        some = plan.only(labels)
        return self.evaluate(x) if some is None else self._results(x, some)

    def _results(self, x, plan: _Plan) -> dict:
        conc = self.concentrations(x)
        values = dict(conc)
        formula, factor = self.method.result.formula, self.method.result.unit.factor
        read = self._read_off_line(x, conc, plan.samples) if plan.reads else [("", None)] * len(plan.own)
        results = {}
        for (sample_id, c_measured), label in zip(read, plan.own, strict=True):  # others: a subclass's results
            for name, term in self._quantity_terms.items():
                values[name] = term(x, sample_id)
            if c_measured is not None:  # a result without a sample reads nothing off the line
                values["c_measured"] = c_measured
            results[label] = evaluate_formula(formula, values, sample_id) / factor
        return results

    def result_at(self, c_measured: float) -> float:
        """The result (display unit) for a concentration `c_measured` (SI) in the measuring solution,
        every other input at its estimate: how a concentration on the line reads in the reported unit."""
        x = self.nominal_inputs()
        values = dict(self.concentrations(x))
        sample_id = self.method.samples[0].id if self.method.samples else ""
        for name, term in self._quantity_terms.items():
            values[name] = term(x, sample_id)
        values["c_measured"] = c_measured
        return float(evaluate_formula(self.method.result.formula, values, sample_id) / self.method.result.unit.factor)

    def _read_off_line(self, x, conc, samples=None) -> list[tuple[str, Any]]:
        """(sample id, concentration in the measured solution) of every sample (or of the design's
        `samples` given), from this evaluation's line, or its second-order function's root on the
        rising branch (ISO 8466-2)."""
        samples = self._design().samples if samples is None else samples
        if self._design().second_order:
            a, b, c = self.second_order(x, conc)
            rising = self._design().quadratic_fit().coefficients[1] > 0  # form from the estimates, once
            return [(smp.id, rising_root(a, b, c, self._reading_terms[smp.id](x), rising)) for smp in samples]
        intercept, slope = self.line(x, conc)
        return [(smp.id, (self._reading_terms[smp.id](x) - intercept) / slope) for smp in samples]


@dataclass(frozen=True)
class _Plan:
    """Which of the model's results an evaluation gives: their labels in order (`own`), whether
    they read a concentration off the line (`reads`), and the design's samples they read."""

    labels: tuple[str, ...]  # the model's result_labels when made
    own: tuple[str, ...]
    reads: bool
    samples: tuple = ()
    _subsets: dict = field(default_factory=dict, compare=False, repr=False)  # made once per set of labels

    def only(self, labels) -> _Plan | None:
        """The plan for the results named in `labels` only (in the model's order); None when one
        named is not among `own`."""
        wanted = frozenset(labels)
        if wanted not in self._subsets:
            keep = [i for i, label in enumerate(self.own) if label in wanted]
            samples = tuple(self.samples[i] for i in keep) if self.reads else ()
            some = _Plan(self.labels, tuple(self.own[i] for i in keep), self.reads, samples)
            self._subsets[wanted] = some if wanted <= frozenset(self.own) else None
        return self._subsets[wanted]


def _plan(model: Model) -> _Plan:
    own = tuple(lb for lb, key in zip(model.result_labels, model.result_keys, strict=True) if key.kind == "result")
    reads = "c_measured" in model.method.result.formula.names
    return _Plan(tuple(model.result_labels), own, reads, tuple(model._design().samples) if reads else ())


def build_model(method: AssayMethod) -> Model:
    ss = SourceSet()
    s = method.settings
    samples = method.samples if "c_measured" in method.result.formula.names else []
    name = method.result.name
    labels = [f"{name}, {smp.id}" for smp in samples] or [name]
    keys = [ResultKey("result", smp.id) for smp in samples] or [ResultKey("result")]
    model = Model(method, ss.sources, labels, keys)
    observed = s.scatter == "observed"
    cal = method.calibration
    standards = set(cal.standards) if cal else set()
    for sol in solution_order(method.solutions):
        model._solution_terms[sol.id] = solution_term(ss, method, sol, observed and sol.id in standards)
    if cal:
        _calibration_terms(model, ss, cal, samples, observed)
    covered = model.design is not None and model.design.covers("sample preparation")
    for q in method.quantities.values():
        model._quantity_terms[q.name] = _quantity_term(ss, method, q, samples, covered)
    model.evaluate(model.nominal_inputs())  # a formula that cannot be computed stops at `check`
    return model


def _calibration_terms(model: Model, ss: SourceSet, cal: Calibration, samples, observed: bool) -> None:
    """The calibration design, and the mean corrected reading of every point on the line and
    every sample read off it."""
    method = model.method
    design = model.design = calibration_design(method, model.concentrations(model.nominal_inputs()))
    model.assumptions.append(_scatter_assumption(design))
    if design.weighted:
        model.assumptions.append(WEIGHTING_ASSUMPTION[design.weighting])
    model.assumptions.extend(design.notes)
    scatter = _observed_scatter(design, samples) if observed else None
    for lv, p in design.fitted():
        terms = [scatter.point_term(p.key, p.count, design.weight(lv.id))] if scatter else None
        model._reading_terms[p.key] = mean_reading_term(ss, method, p.key, p.readings, terms,
                                                        cal.cuvette, cal.photometer)
    for smp in samples:
        read = design.sample(smp.id)
        terms = scatter.sample_terms(smp.id, read.count, design.weight(smp.id)) if scatter else None
        model._reading_terms[smp.id] = mean_reading_term(ss, method, smp.id, read.readings, terms,
                                                         cal.cuvette, cal.photometer)


WEIGHTING_ASSUMPTION = {
    "inverse-variance": "weighted calibration line: each level weighted by 1/s^2 of its replicate readings, a "
                        "sample by 1/s^2 interpolated linearly in concentration (Miller and Miller, section 5.10)",
    "variance-function": "weighted calibration line: every level and sample weighted by 1/s(c)^2 with "
                         "s(c) = a + b c fitted to the levels' standard deviations (ISO 11095 and ISO 8466-1, "
                         "linear model of the standard deviation, from memory)",
}


def _scatter_assumption(design: CalibrationDesign) -> str:
    units = ("the line is fitted to the mean reading of each preparation (repeated readings of one solution "
             "are not independent points)")
    covered = design.covered_terms()
    if covered:
        return (f"calibration scatter treated as observed: {units}; the scatter of the preparations' means "
                f"about the line stands for preparing and reading (EURACHEM/CITAC CG4, Example A5), split "
                f"into reading scatter (repeated readings of one solution) and preparation scatter; a sample "
                f"carries u^2 = u_prep^2 + s_read^2/m. Covered by the observed scatter and not added again: "
                + "; ".join(covered))
    return (f"calibration scatter built bottom-up: {units}; every reading and every use of glassware "
            f"carries its own random term; no term for the line's observed scatter is added")


def solution_order(solutions: dict) -> list:
    """Solutions with every parent before its dilutions (file order otherwise)."""
    done, order = set(), []

    def visit(sol):
        if sol.id in done:
            return
        parent = parent_of(sol)
        if parent is not None:
            visit(solutions[parent])
        done.add(sol.id)
        order.append(sol)

    for sol in solutions.values():
        visit(sol)
    return order


def solution_term(ss: SourceSet, method: Method, sol, is_standard_observed: bool):
    """A closure (x, concentrations so far) -> this solution's concentration (SI)."""
    step = f"prepare {sol.id}"
    match sol:
        case Blank():
            return lambda x, conc: 0.0
        case Certified(concentration=concentration):
            src = value_source(ss, f"{sol.id}: certified concentration", concentration, step)
            return lambda x, conc: exact_or(x, src, concentration.value)
        case Diluted(parent=parent):
            flask = volume_term(ss, method, sol.flask, step, sol.id, not is_standard_observed)
            aliquot = volume_term(ss, method, sol.aliquot, step, sol.id, not is_standard_observed)
            return lambda x, conc: conc[parent] * aliquot(x) / flask(x)
        case Weighed():
            return _weighed_term(ss, method, sol, step, is_standard_observed)


def _weighed_term(ss: SourceSet, method: Method, sol: Weighed, step: str, is_standard_observed: bool):
    flask = volume_term(ss, method, sol.flask, step, sol.id, not is_standard_observed)
    mass = value_source(ss, f"{sol.id}: mass", sol.mass, step)
    balance = balance_terms(ss, method, sol, step) if sol.balance else []
    purity = value_source(ss, f"{sol.id}: purity", sol.purity, step) if sol.purity else None
    molar = value_source(ss, f"{sol.id}: molar mass", sol.molar_mass, step) if sol.molar_mass else None
    m0 = sol.mass.value
    p0 = sol.purity.value if sol.purity else 1.0
    mm0 = sol.molar_mass.value if sol.molar_mass else None

    def term(x, conc):
        m = exact_or(x, mass, m0)
        for sign, b in balance:
            m = m + sign * x[b]
        c = m * exact_or(x, purity, p0) / flask(x)
        return c / exact_or(x, molar, mm0) if mm0 is not None else c

    return term


def _as_terms(scatter, ident: str, count: int, weight: float) -> list[ScatterTerm] | None:
    """Observed-scatter terms of one mean reading: given as terms, or as (s, dof) of the line's
    residuals, which gives the one term s/sqrt(m w) of ISO 8466-1 (w: the weight on the line's
    scale, 1 unweighted)."""
    if scatter is None or isinstance(scatter, list):
        return scatter
    s_abs, dof = scatter
    return [ScatterTerm("calibration scatter", s_abs / (count * weight) ** 0.5, dof, LINE_GROUP,
                        f"residual standard deviation of the line {s_abs:.3g} (absorbance), {count} reading(s), "
                        f"{dof} degrees of freedom (observed scatter; ISO 8466-1, CG4 A5)")]


def mean_reading_term(ss: SourceSet, method: Method, ident: str, readings: tuple[float, ...], scatter,
                      cuvette: str | None, photometer_id: str | None, weight: float = 1.0):
    """A closure x -> mean corrected reading of one standard, blank or sample:
    (mean absorbance + reading noise or observed scatter - photometer offset) / path length.

    `scatter` (observed treatment): a list of `ScatterTerm` (validate.model.scatter), or
    (s, dof) of the line's residuals in absorbance, for one term s/sqrt(m w)."""
    terms = _as_terms(scatter, ident, len(readings), weight)
    observed = terms is not None
    photometer = method.item_of(photometer_id, Photometer) if photometer_id else None
    cell = method.item_of(cuvette, Cuvette) if cuvette else None
    offset = path = None
    noise = []
    if photometer is not None and photometer.offset > 0:
        offset = ss.add(Source(f"{photometer.id}: photometric offset", 0.0, photometer.offset / 3**0.5,
                               "rectangular", step="photometric reading", equipment=photometer.id,
                               unit="AU",
                               provenance=f"+/-{photometer.offset:g} absorbance, shared by every reading; "
                               f"{photometer.provenance}"))
    if photometer is not None and photometer.noise > 0 and not observed:
        noise = [ss.add(Source(f"{photometer.id}: noise, {ident} reading {j + 1}", 0.0, photometer.noise,
                               "normal", step="photometric reading", equipment=photometer.id, unit="AU",
                               provenance=f"standard deviation {photometer.noise:g} absorbance per reading; "
                               f"{photometer.provenance}")) for j in range(len(readings))]
    if terms is not None:
        noise = [ss.add(Source(f"{t.label}, {ident}", 0.0, t.u, "t", dof=t.dof, step="calibration fit", kind="A",
                               dof_group=t.group, unit="AU", provenance=t.provenance)) for t in terms]
    path0 = _path_of(cell) if cell is not None else 1.0
    if cell is not None:
        path = ss.add(Source(f"{cell.id}: path length", path0, cell.tolerance / 3**0.5, "rectangular",
                             step="photometric reading", equipment=cell.id,
                             provenance=f"{path0 * 1e3:g} mm +/-{cell.tolerance * 1e3:g} mm, one cell for "
                             f"every reading; {cell.provenance}", unit="mm", display_factor=1e-3))
    mean = sum(readings) / len(readings)
    correct = reading_correction(ss, method, photometer, ident)  # gain, drift, stray light

    def term(x):
        a = mean
        if observed:
            a = a + _sum_of([x[name] for name in noise])
        elif noise:
            a = a + _sum_of([x[name] for name in noise]) / len(noise)
        if offset is not None:
            a = a - x[offset]
        return correct(x, a) / exact_or(x, path, path0)

    return term


def _sum_of(terms: list):
    """sum(terms); arrays of trials added from the first, without the 0 that sum() starts from: that
    start can change only the sign of a sum that is zero, and a reading's mean (never -0.0) is
    added to it next, so the reading is the same number with one pass over the trials less."""
    if terms and all(isinstance(t, np.ndarray) for t in terms):
        return functools.reduce(operator.add, terms)
    return sum(terms)


def _path_of(cell) -> float:
    """A cuvette's path length (m); the method file's checks give every cuvette one."""
    if cell.path is None:
        raise ValueError(f"cuvette `{cell.id}` has no path length")
    return cell.path


def _quantity_term(ss: SourceSet, method: Method, q, samples, covered: bool = False):
    """A quantity of the result formula. A volume delivered once per sample: the item's
    calibration offset shared by every sample, and a fresh repeatability term for each use,
    unless the observed scatter covers preparing the sample (`covered`, decided by the design)."""
    if q.delivery is not None:
        keys = [smp.id for smp in samples] or [""]
        with_repeatability = not (covered and samples)
        uses = {k: volume_term(ss, method, q.delivery, q.step, f"{q.name}, {k}" if k else q.name,
                               with_repeatability) for k in keys}
        return lambda x, sample_id: uses[sample_id](x)
    src = value_source(ss, q.name, q.value, q.step)
    value = q.value.value
    return lambda x, sample_id: exact_or(x, src, value)


def _observed_scatter(design: CalibrationDesign, samples) -> ScatterComponents:
    """The observed scatter's two components at the estimates (validate.model.scatter).

    Each preparation's mean on the line carries s_m (the residual SD of the means, N - 2
    degrees of freedom), each sample's mean u_p and s_r/sqrt(m); propagated through the
    refitted line this gives the inverse-prediction uncertainty
    u(x0) = 1/b sqrt(u_p^2 + s_r^2/m + s_m^2 (1/N + (y0 - ybar)^2 / (b^2 Sxx))), ISO 8466-1 and
    EURACHEM/CITAC CG4 Example A5 on preparation means, and it correlates samples read off one line.
    """
    try:
        scatter = design.scatter_components()
        fit = fit_line(*design.point_data())
    except ValueError as exc:
        raise ModelError(f"calibration: {exc}") from None
    if design.second_order:
        _check_real_roots(design, samples, scatter)
        return scatter
    if slope_resolved(fit):  # what the loop below asks of each sample, without a t quantile where clear
        return scatter
    for smp in samples:
        read = design.sample(smp.id)
        pred = inverse_prediction(fit, read.readings, sample_weight=design.weight(smp.id),
                                  response_variance=scatter.sample_variance(read.count, design.weight(smp.id)))
        if not pred.finite:
            raise ModelError(
                f"sample {smp.id}: the slope of the line is not significantly different from zero "
                f"(Fieller's g = {pred.g:.2f} >= 1), so the concentration read off the line has no finite "
                f"confidence interval; no result is reported")
    return scatter


def _check_real_roots(design: CalibrationDesign, samples, scatter: ScatterComponents) -> None:
    """Every sample's mean response must have a real root of the second-order function (a response
    above the function's maximum has none): a data problem, ModelError (exit 3)."""
    fit = design.quadratic_fit()
    for smp in samples:
        read = design.sample(smp.id)
        pred = quadratic_inverse_prediction(fit, read.readings, sample_weight=design.weight(smp.id),
                                            response_variance=scatter.sample_variance(read.count,
                                                                                      design.weight(smp.id)))
        if not pred.real_root:
            a, b, c = fit.coefficients
            top = a - b * b / (4 * c) if c < 0 else float("inf")
            raise ModelError(
                f"sample {smp.id}: its mean absorbance {pred.response_mean:.4g} has no real root on the "
                f"second-order calibration function (the function reaches at most {top:.4g}), so no "
                f"concentration can be read off it and no result is reported\n  what to do: dilute the "
                f"sample into the working range and read it again")
