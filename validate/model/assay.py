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

from dataclasses import dataclass, field

from validate.inputs.items import Cuvette, Photometer
from validate.inputs.schema import AssayMethod, Method
from validate.inputs.solutions import Blank, Certified, Diluted, Weighed, parent_of
from validate.metrology.equipment import SourceSet, balance_terms, exact_or, value_source, volume_term
from validate.metrology.sources import Source
from validate.model import backend
from validate.model.line import fit_line, inverse_prediction


class ModelError(ValueError):
    """The data do not allow the model to give a result (e.g. a flat line)."""


MIN_LEVELS = 3  # distinct concentrations for a line with a residual scatter (n - 2 >= 1)


class SolutionInputs:
    """What every model shares: its sources' estimates and the solutions' concentrations
    (`_solution_terms` in preparation order, each term seeing those before it)."""

    def nominal_inputs(self) -> dict[str, float]:
        return {name: s.value for name, s in self.sources.items()}

    def concentrations(self, x) -> dict:
        conc = {}
        for sol_id, term in self._solution_terms.items():
            conc[sol_id] = term(x, conc)
        return conc


@dataclass
class Model(SolutionInputs):
    method: AssayMethod
    sources: dict[str, Source]
    result_labels: list[str]
    assumptions: list[str] = field(default_factory=list)
    _solution_terms: dict = field(default_factory=dict, repr=False)
    _points: list = field(default_factory=list, repr=False)  # (solution id, replicates, mean-reading term)
    _sample_terms: dict = field(default_factory=dict, repr=False)
    _quantity_terms: dict = field(default_factory=dict, repr=False)
    weights: dict | None = None  # id -> weight of one reading (weighted line), mean 1 over the line

    def weight(self, ident: str) -> float:
        return 1.0 if self.weights is None else self.weights[ident]

    def unit_of(self, label: str) -> str:
        return self.method.result.unit.text

    def line(self, x, conc=None):
        """Intercept and slope refitted from this evaluation's standards and readings.

        Ordinary least squares written over calibration levels: with n_j replicate
        readings of mean y_j at x_j, Sxx = sum n_j (x_j - xbar)^2 and
        Sxy = sum n_j (x_j - xbar)(y_j - ybar), the same line as a fit to every reading.
        """
        conc = self.concentrations(x) if conc is None else conc
        levels = [(n, conc[sol_id], term(x)) for sol_id, n, term in self._points]
        total = sum(n for n, _, _ in levels)
        x_mean = sum(n * xj for n, xj, _ in levels) / total
        y_mean = sum(n * yj for n, _, yj in levels) / total
        dx = [(n, xj - x_mean, yj) for n, xj, yj in levels]
        sxx = sum(n * d * d for n, d, _ in dx)
        sxy = sum(n * d * (yj - y_mean) for n, d, yj in dx)
        slope = sxy / sxx
        return y_mean - slope * x_mean, slope

    def evaluate(self, x) -> dict:
        """Results (in their display units) from source values of any backend."""
        conc = self.concentrations(x)
        values = dict(conc)
        line = self.line(x, conc) if self._points else None
        results = {}
        samples = self.method.samples if "c_measured" in self.method.result.formula.names else [None]
        factor = self.method.result.unit.factor
        for sample, label in zip(samples, self.result_labels):
            for name, term in self._quantity_terms.items():
                values[name] = term(x, sample.id if sample else "")
            if sample is not None:
                intercept, slope = line
                values["c_measured"] = (self._sample_terms[sample.id](x) - intercept) / slope
            results[label] = self.method.result.formula.evaluate(values, backend.FUNCTIONS) / factor
        return results


def build_model(method: AssayMethod) -> Model:
    ss = SourceSet()
    s = method.settings
    samples = method.samples if "c_measured" in method.result.formula.names else []
    name = method.result.name
    labels = [f"{name}, {smp.id}" for smp in samples] or [name]
    model = Model(method, ss.sources, labels)
    observed = s.scatter == "observed"
    cal = method.calibration
    standards = set(cal.standards) if cal else set()
    for sol in solution_order(method.solutions):
        model._solution_terms[sol.id] = solution_term(ss, method, sol, observed and sol.id in standards)
    if cal:
        if observed:
            model.assumptions.append(
                "calibration scatter treated as observed: the residual scatter of the line stands for "
                "the random effects of preparing and reading the standards and samples "
                "(EURACHEM/CITAC CG4, Example A5), so their per-use repeatability terms are not added")
        else:
            model.assumptions.append(
                "calibration scatter built bottom-up: every reading and every use of glassware "
                "carries its own random term; no term for the line's observed scatter is added")
        ids = list(cal.standards) + (list(cal.blanks) if cal.blanks_in_fit else [])
        check_calibration_data(method, ids, model.concentrations(model.nominal_inputs()))
        if cal.weighting == "inverse-variance":
            model.weights = level_weights(model, ids, samples)
            model.assumptions.append(
                "weighted calibration line: each level weighted by 1/s^2 of its replicate readings, a sample "
                "by 1/s^2 interpolated linearly in concentration (Miller and Miller, section 5.10)")
        scatter = _observed_scatter(model, ids, samples) if observed else None
        model._points = [(sid, len(method.readings[sid]) * model.weight(sid),
                          mean_reading_term(ss, method, sid, scatter, cal.cuvette, cal.photometer,
                                            model.weight(sid))) for sid in ids]
        for smp in samples:
            model._sample_terms[smp.id] = mean_reading_term(ss, method, smp.id, scatter, cal.cuvette,
                                                            cal.photometer, model.weight(smp.id))
    for q in method.quantities.values():
        model._quantity_terms[q.name] = _quantity_term(ss, method, q, samples)
    return model


def check_calibration_data(method: AssayMethod, ids: list[str], conc: dict[str, float]) -> None:
    """At least MIN_LEVELS distinct concentrations (InputError, exit 2), and a line that
    rises with concentration (a data problem: ModelError, exit 3)."""
    from pathlib import Path

    from validate.inputs.errors import InputError

    cal = method.calibration
    path = method.path
    readings_path = Path(method.path).parent / cal.readings_file
    unit = cal.concentration_unit
    levels = sorted({float(f"{conc[i] / unit.factor:.9g}") for i in ids})  # equal to 9 digits
    if len(levels) < MIN_LEVELS:
        shown = ", ".join(f"{x:g}" for x in levels)
        raise InputError(f"the calibration points have only {len(levels)} distinct concentration(s) "
                         f"({shown} {unit.text}); a line needs at least {MIN_LEVELS}", file=path,
                         where="[calibration].standards",
                         fix="prepare the standards at different concentrations (5 to 7 levels over the "
                             "working range is common practice)")
    xs = [conc[i] / unit.factor for i in ids for _ in method.readings[i]]
    ys = [a for i in ids for a in method.readings[i]]
    slope = fit_line(xs, ys).slope
    if not slope > 0:
        raise ModelError(
            f"{readings_path}, readings of the standards: the absorbance falls as the concentration rises "
            f"(fitted slope {slope:.3g} absorbance per {unit.text}); a Beer-Lambert calibration line rises, "
            f"so no result is reported\n  what to do: check that every reading is under the right id "
            f"(rows swapped between standards?) and that the preparation of the standards in {path} "
            f"matches the solutions measured; methods read as a loss of absorbance are not supported")


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
    balance = balance_terms(ss, method, sol.balance, sol.id, step) if sol.balance else []
    purity = value_source(ss, f"{sol.id}: purity", sol.purity, step) if sol.purity else None
    molar = value_source(ss, f"{sol.id}: molar mass", sol.molar_mass, step) if sol.molar_mass else None
    m0 = sol.mass.value
    p0 = sol.purity.value if sol.purity else 1.0
    mm0 = sol.molar_mass.value if sol.molar_mass else None

    def term(x, conc):
        m = exact_or(x, mass, m0)
        for b in balance:
            m = m + x[b]
        c = m * exact_or(x, purity, p0) / flask(x)
        return c / exact_or(x, molar, mm0) if mm0 is not None else c

    return term


def mean_reading_term(ss: SourceSet, method: Method, ident: str, scatter, cuvette: str | None,
                      photometer_id: str | None, weight: float = 1.0):
    """A closure x -> mean corrected reading of one standard, blank or sample:
    (mean absorbance + reading noise or observed scatter - photometer offset) / path length.

    `scatter` (observed treatment) is (s, dof) of the line's residuals in absorbance:
    the mean of m readings then carries a term of standard uncertainty s/sqrt(m w),
    w the reading's weight on the line's scale (1 for an unweighted line)."""
    observed = scatter is not None
    readings = method.readings[ident]
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
    if observed:
        s_abs, dof = scatter
        noise = [ss.add(Source(
            f"calibration scatter, {ident}", 0.0, s_abs / (len(readings) * weight) ** 0.5, "t", dof=dof,
            step="calibration fit", kind="A", dof_group="calibration line", unit="AU",
            provenance=f"residual standard deviation of the line {s_abs:.3g} (absorbance), "
            f"{len(readings)} reading(s), {dof} degrees of freedom (observed scatter; ISO 8466-1, CG4 A5)"))]
    if cell is not None:
        path = ss.add(Source(f"{cell.id}: path length", cell.path, cell.tolerance / 3**0.5, "rectangular",
                             step="photometric reading", equipment=cell.id,
                             provenance=f"{cell.path * 1e3:g} mm +/-{cell.tolerance * 1e3:g} mm, one cell for "
                             f"every reading; {cell.provenance}", unit="mm", display_factor=1e-3))
    path0 = cell.path if cell is not None else 1.0
    mean = sum(readings) / len(readings)

    def term(x):
        a = mean
        if observed:
            a = a + x[noise[0]]
        elif noise:
            a = a + sum(x[name] for name in noise) / len(noise)
        if offset is not None:
            a = a - x[offset]
        return a / exact_or(x, path, path0)

    return term


def _quantity_term(ss: SourceSet, method: Method, q, samples):
    if q.delivery is not None:
        # one use of the item per sample: a fresh repeatability term each time,
        # the item's calibration offset shared by all of them
        keys = [smp.id for smp in samples] or [""]
        uses = {k: volume_term(ss, method, q.delivery, q.step, f"{q.name}, {k}" if k else q.name)
                for k in keys}
        return lambda x, sample_id: uses[sample_id](x)
    src = value_source(ss, q.name, q.value, q.step)
    value = q.value.value
    return lambda x, sample_id: exact_or(x, src, value)


def level_weights(model: Model, ids: list[str], samples) -> dict[str, float]:
    """Weights 1/s_j^2 from each level's replicate readings; a sample's from s interpolated
    linearly in concentration (Miller and Miller, Statistics and Chemometrics for Analytical
    Chemistry, section 5.10). Normalised to a mean of one over the line's readings."""
    import statistics

    method = model.method
    conc = model.concentrations(model.nominal_inputs())
    sds = {}
    for sid in ids:
        readings = method.readings[sid]
        if len(readings) < 2:
            raise ModelError(f"weighted line: `{sid}` has {len(readings)} reading; inverse-variance weights "
                             f"need at least 2 replicate readings of every level")
        sds[sid] = statistics.stdev(readings)
        if sds[sid] == 0:
            raise ModelError(f"weighted line: the readings of `{sid}` are identical, so their standard "
                             f"deviation (and weight) is undefined; use weighting = \"none\"")
    xs, ss_ = [conc[i] for i in ids], [sds[i] for i in ids]
    trend = fit_line(xs, ss_) if len(set(xs)) >= 2 and len(xs) >= 3 else None
    unweighted = fit_line([conc[i] for i in ids for _ in method.readings[i]],
                          [a for i in ids for a in method.readings[i]])
    raw = {sid: 1.0 / sds[sid] ** 2 for sid in ids}
    for smp in samples:
        x0 = inverse_prediction(unweighted, method.readings[smp.id]).value
        s0 = trend.intercept + trend.slope * x0 if trend else statistics.mean(ss_)
        raw[smp.id] = 1.0 / max(s0, min(ss_)) ** 2
    total = sum(len(method.readings[i]) for i in ids)
    scale = total / sum(raw[i] * len(method.readings[i]) for i in ids)
    return {k: v * scale for k, v in raw.items()}


def _observed_scatter(model: Model, ids: list[str], samples) -> tuple[float, int]:
    """Residual standard deviation (absorbance) and n-2 of the line at the estimates.

    With the observed treatment each mean reading carries s/sqrt(m); propagated
    through the refitted line this gives exactly the inverse-prediction uncertainty
    u(x0) = s/b sqrt(1/m + 1/n + (y0 - ybar)^2 / (b^2 Sxx)) of ISO 8466-1 and
    EURACHEM/CITAC CG4 Example A5, and it correlates samples read off one line.
    """
    method = model.method
    conc = model.concentrations(model.nominal_inputs())
    xs = [conc[sid] for sid in ids for _ in method.readings[sid]]
    ys = [a for sid in ids for a in method.readings[sid]]
    ws = [model.weight(sid) for sid in ids for _ in method.readings[sid]] if model.weights else None
    try:
        fit = fit_line(xs, ys, ws)
    except ValueError as exc:
        raise ModelError(f"calibration: {exc}") from None
    for smp in samples:
        pred = inverse_prediction(fit, method.readings[smp.id], sample_weight=model.weight(smp.id))
        if not pred.finite:
            raise ModelError(
                f"sample {smp.id}: the slope of the line is not significantly different from zero "
                f"(Fieller's g = {pred.g:.2f} >= 1), so the concentration read off the line has no finite "
                f"confidence interval; no result is reported")
    return fit.residual_sd, fit.dof
