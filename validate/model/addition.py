"""Standard addition in the assay model: each sample's concentration by extrapolation to zero response.

Flask k holds a portion V_p,k of the sample and a volume v_k of a standard of concentration
c_std, made up to V_f,k, and reads y_k = b (c_s V_p,k + c_std v_k) / V_f,k (plus any intercept
of the photometer). Multiplying by V_f,k / V_p,k gives a straight line in the portion's terms,

    z_k = y_k V_f,k / V_p,k = b c_s + b x_k,   x_k = c_std v_k / V_p,k,

so c_s = intercept / slope of z on x, with every use of every item in the model, and no
assumption that the flasks are alike (Harris, Quantitative Chemical Analysis, "Standard
addition", from memory, for the equal-volume form this generalises). The line is refitted in
every evaluation, so the Monte Carlo engine refits it per trial as the assay's calibration line.

The observed scatter: each flask's mean reading carries s_y/x of the standard-addition line
(n - 2 degrees of freedom, one chi-square factor per sample in Monte Carlo), which gives the
textbook extrapolation uncertainty s_x = s_y/|b| sqrt(1/n + ybar^2 / (b^2 Sxx)) (Miller and
Miller, Statistics and Chemometrics for Analytical Chemistry, section 5.8, from memory) to first
order. Glassware's per-use repeatability is covered by it and left out; the items' calibration
offsets (shared by every use) and the standard's concentration are carried.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

from validate.inputs.addition_section import StandardAddition
from validate.inputs.schema import AssayMethod
from validate.metrology.equipment import SourceSet, volume_term
from validate.metrology.probability import t_quantile
from validate.model.assay import Model, ModelError, build_model, mean_reading_term
from validate.model.keys import ResultKey
from validate.model.line import fit_line, straight_line
from validate.model.scatter import ScatterTerm

STEP = "standard addition"
MIN_REACH = 0.5  # the largest addition at least half the sample's content: below, refused (common practice)


@dataclass
class AdditionTerms:
    """The closures of one sample's flasks: (portion, spike or None, flask, mean corrected reading)."""

    addition: StandardAddition
    flasks: list[tuple]


@dataclass
class AdditionModel(Model):
    """The assay model with samples measured by standard addition as results of their own."""

    addition_terms: list[AdditionTerms] = field(default_factory=list, repr=False)

    def unit_of(self, label: str) -> str:
        for t in self.addition_terms:
            if label == addition_label(t.addition):
                return t.addition.unit.text
        return super().unit_of(label)

    def evaluate(self, x) -> dict:
        results = super().evaluate(x)
        conc = self.concentrations(x)
        for t in self.addition_terms:
            c_sample = self.addition_line(t, x, conc)
            results[addition_label(t.addition)] = c_sample / t.addition.unit.factor
        return results

    def addition_line(self, terms: AdditionTerms, x, conc):
        """c_s = intercept / slope of z_k = y_k V_f,k / V_p,k on x_k = c_std v_k / V_p,k (SI)."""
        c_std = conc[terms.addition.standard]
        xs, zs = [], []
        for portion, spike, flask, reading in terms.flasks:
            v_p = portion(x)
            xs.append(0.0 if spike is None else c_std * spike(x) / v_p)
            zs.append(reading(x) * flask(x) / v_p)
        intercept, slope = straight_line([1] * len(xs), xs, zs)
        return intercept / slope


def addition_label(add: StandardAddition) -> str:
    return f"{add.id}, by standard addition"


def flask_concentrations(method: AssayMethod, add: StandardAddition, c_std: float) -> list[float]:
    """The concentration added to each flask (SI), at the estimates: c_std v_k / V_f."""
    return [c_std * v / add.made_up_to.volume for v in add.spike_volumes()]


def mean_readings(method: AssayMethod, add: StandardAddition) -> list[float]:
    return [sum(method.readings[r]) / len(method.readings[r]) for r in add.reading_ids()]


def check_addition_line(method: AssayMethod, add: StandardAddition, c_std: float):
    """The line of mean absorbance on added concentration at the estimates, refused when it
    falls, when its slope does not differ from zero (Fieller's g >= 1: the extrapolation has no
    finite confidence interval; Miller and Miller, section 5.6, from memory), or when the additions
    reach less than half the sample's own content (common practice: about 1 to 3 times it)."""
    xs = flask_concentrations(method, add, c_std)
    f, u, where = add.unit.factor, add.unit.text, f"standard addition `{add.id}`"
    try:
        fit = fit_line(xs, mean_readings(method, add))
    except ValueError as exc:
        raise ModelError(f"{where}: {exc}") from None
    if fit.slope <= 0:
        raise ModelError(f"{where}: the response falls as standard is added (slope {fit.slope * f:.4g} absorbance "
                         f"per {u}); check the readings' order against spike_volumes and the standard solution")
    g = (float(t_quantile(0.975, fit.dof)) * fit.slope_u / fit.slope) ** 2
    if g >= 1:
        raise ModelError(f"{where}: the slope does not differ significantly from zero (Fieller's g = {g:.2f} >= 1), "
                         f"so the extrapolated concentration has no finite interval; add larger amounts of standard")
    x_e = fit.intercept / fit.slope
    if max(xs) < MIN_REACH * x_e:
        raise ModelError(f"{where}: the largest addition ({max(xs) / f:.4g} {u}) is less than half the sample's own "
                         f"contribution to the flask ({x_e / f:.4g} {u}), so the line would be extrapolated over more "
                         f"than twice its spiked range; add up to about 1 to 3 times the sample's content")
    return fit


def build_addition_model(method: AssayMethod) -> Model:
    """The assay's model, with every [additions] sample as a result of kind "standard addition"."""
    base = build_model(method)
    model = AdditionModel(**{f.name: getattr(base, f.name) for f in fields(base)})
    ss = SourceSet()
    ss.sources = model.sources  # the same sources: shared items and solutions stay one source each
    conc = model.concentrations(model.nominal_inputs())
    for add in method.additions:
        fit = check_addition_line(method, add, conc[add.standard])
        model.addition_terms.append(_terms(ss, method, add, fit))
        model.result_labels.append(addition_label(add))
        model.result_keys.append(ResultKey("standard addition", add.id))
    if method.additions:
        model.assumptions.append(
            "standard addition: each sample's concentration is the intercept / slope of its own line, refitted "
            "in every evaluation; the line's residual scatter stands for reading and preparing the flasks "
            "(per-use glassware repeatability not added again); the reagents' own response is taken as part "
            "of the sample's (read a reagent blank and subtract it where it is not negligible)")
    model.evaluate(model.nominal_inputs())
    return model


def _terms(ss: SourceSet, method: AssayMethod, add: StandardAddition, fit) -> AdditionTerms:
    cal = method.calibration
    if cal is None:  # the loader refuses additions without a readings table
        raise ModelError("standard addition needs the [calibration]'s readings table")
    observed = method.settings.scatter == "observed"
    step = f"{STEP} {add.id}"
    flasks = []
    for rid, spike in zip(add.reading_ids(), add.spikes, strict=True):
        portion = volume_term(ss, method, add.portion, step, f"{rid} portion", not observed)
        added = None if spike is None else volume_term(ss, method, spike, step, f"{rid} addition", not observed)
        flask = volume_term(ss, method, add.made_up_to, step, f"{rid} flask", not observed)
        readings = method.readings[rid]
        terms = [ScatterTerm("standard-addition scatter", fit.residual_sd, fit.dof, step,
                             f"residual standard deviation {fit.residual_sd:.3g} (absorbance) of the flasks' mean "
                             f"readings about the standard-addition line of {add.id}, {fit.dof} degrees of "
                             f"freedom (observed scatter)")] if observed else None
        reading = mean_reading_term(ss, method, rid, readings, terms, cal.cuvette, cal.photometer)
        flasks.append((portion, added, flask, reading))
    return AdditionTerms(add, flasks)
