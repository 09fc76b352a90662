"""The warnings that bear on a run's results, each as a VerdictItem (what, why).

Every function reads typed parts of the record and returns the items it finds; the tests were
run by the validation and equilibrium stages and their outcomes are in the record. One test is
made here, because it needs two parts of the record side by side: a sample's intermediate
precision against its result's standard uncertainty (`top_down`), by the same F test the
method's reconciliation uses. validate.record.verdict.judge collects them.
"""

from __future__ import annotations

from collections.abc import Sequence

from validate.inputs.consistency import exact_inputs
from validate.inputs.schema import AssayMethod, Method
from validate.record.blocks import EquilibriumBlock, TrendEntry
from validate.record.blocks_addition import AdditionBlock
from validate.record.blocks_routine import MethodUncertaintyBlock
from validate.record.blocks_validation import IntermediatePrecisionEntry, ValidationBlock
from validate.record.blocks_verdict import VerdictItem
from validate.record.types import EquipmentEntry, ResultEntry
from validate.validation.method_uncertainty import reconcile

P_FLOOR = 1e-16  # below about this a p value from a distribution's tail is rounding error


def p_text(value: float) -> str:
    """"p = 0.043", or "p < 1e-16" where the tail probability is below double precision's reach."""
    return f"p < {P_FLOOR:g}" if value < P_FLOOR else f"p = {value:.2g}"


def _p(value: float | None) -> str:
    return "" if value is None else f" ({p_text(value)})"


WAYS_OUT = ("; two ways out (ISO 8466-2, from memory): the second-order calibration function over the full range "
            '(function = "second order" in [calibration]), or the straight line over a narrower working range where '
            "it passes; the advisor gives the U of each")


def linearity(v: ValidationBlock) -> list[VerdictItem]:
    """Lack of fit, Mandel's test or the runs test significant: the straight line is in doubt. Mandel's
    test names the two ways out. With a second-order function the results do not rest on the straight
    line, whose curvature is what the function was chosen for: no warning."""
    if v.calibration_function == "second order":
        return []
    return [VerdictItem(what=f"linearity, {t.name}",
                        why=t.verdict + _p(t.p_value) + (WAYS_OUT if t is v.mandel else ""))
            for t in (v.lack_of_fit, v.mandel, v.runs) if t.significant is True]


def weighting(v: ValidationBlock) -> list[VerdictItem]:
    """The scatter grows with concentration but the line was fitted unweighted."""
    t = v.weighting
    if t.significant is True and not v.fit.weighted:
        return [VerdictItem(what="weighting of the calibration line", why=t.verdict + _p(t.p_value))]
    return []


def scatter(v: ValidationBlock) -> list[VerdictItem]:
    """The line's observed scatter against the scatter the bottom-up budget predicts."""
    sc = v.scatter_consistency
    if sc is None or sc.observed_sd is None or sc.predicted_sd is None or sc.alpha is None:
        return []
    figures = f"observed SD {sc.observed_sd:.3g}, predicted {sc.predicted_sd:.3g} (absorbance)"
    if sc.p_excess is not None and sc.p_excess < sc.alpha:
        return [VerdictItem(what="scatter against the bottom-up budget",
                            why=f"{sc.verdict}: {figures}{_p(sc.p_excess)}; an effect is missing from the budget")]
    if sc.p_deficit is not None and sc.p_deficit < sc.alpha:
        return [VerdictItem(what="scatter against the bottom-up budget",
                            why=f"{sc.verdict}: {figures}{_p(sc.p_deficit)}; the budget may overstate the scatter")]
    return []


def reading_noise(v: ValidationBlock) -> list[VerdictItem]:
    """The pure error (repeated readings of one solution) against the photometer's stated reading
    noise, by the chi-square test of a standard deviation (NIST/SEMATECH 1.3.5.8): excess means the
    stated noise understates reading a solution (a bottom-up budget carries the stated figure);
    deficit means the specification is conservative, or the repeated readings were not independent."""
    sc = v.reading_noise_consistency
    if sc is None or sc.observed_sd is None or sc.predicted_sd is None or sc.alpha is None:
        return []
    what = "reading scatter against the photometer's stated noise"
    figures = f"pure error SD {sc.observed_sd:.3g}, stated noise {sc.predicted_sd:.3g} (absorbance), {sc.dof} " \
              f"degrees of freedom"
    if sc.p_excess is not None and sc.p_excess < sc.alpha:
        return [VerdictItem(what=what, why=f"{sc.verdict}: {figures}{_p(sc.p_excess)}")]
    if sc.p_deficit is not None and sc.p_deficit < sc.alpha:
        return [VerdictItem(what=what, why=f"repeated readings scatter significantly less than the stated noise: "
                                           f"{figures}{_p(sc.p_deficit)}; the specification is conservative, or "
                                           f"the repeated readings were not independent (read without refilling "
                                           f"or re-placing the cell)")]
    return []


def _sample_result(results: Sequence[ResultEntry], sample: str) -> ResultEntry | None:
    return next((r for r in results if r.key.kind == "result" and r.key.id == sample), None)


def top_down(v: ValidationBlock, results: Sequence[ResultEntry], skip: Sequence[str] = ()) -> list[VerdictItem]:
    """A sample read in several series whose intermediate precision (top-down) is significantly wider
    than its result's bottom-up standard uncertainty: F = (s_I,rel / u_rel)^2 against F(nu_I, nu_eff),
    one-sided at 5 % (the reconciliation test of validate.validation.method_uncertainty). Compared
    as relative values: the result is proportional to the concentration read off the line for the
    usual dilution formulas (common practice to compare RSDs). `skip`: the controls the method's
    reconciliation already judges."""
    items = []
    for sample, ip in (v.intermediate_precision or {}).items():
        result = _sample_result(results, sample)
        if sample in skip or not isinstance(ip, IntermediatePrecisionEntry) or result is None \
                or ip.intermediate_rsd_percent is None or not ip.intermediate_dof or not result.value \
                or not result.standard_uncertainty:
            continue
        relative_u = 100 * result.standard_uncertainty / abs(result.value)
        test = reconcile(ip.intermediate_rsd_percent, ip.intermediate_dof, relative_u,
                         result.effective_dof if result.effective_dof is not None else float("inf"))
        if test.verdict == "top-down larger":
            items.append(VerdictItem(
                what=f"top-down against bottom-up, {sample}",
                why=f"intermediate precision over {ip.groups} series, relative SD {ip.intermediate_rsd_percent:.2g} %, "
                    f"exceeds the result's relative standard uncertainty, {relative_u:.2g} % "
                    f"(F = {test.statistic:.3g}, {p_text(test.p_value)}): the budget may miss a series-to-series "
                    "effect"))
    return items


def reconciliation(m: MethodUncertaintyBlock | None) -> list[VerdictItem]:
    """The method's uncertainty for routine use: top-down and bottom-up disagree (either way)."""
    if m is None or m.reconciliation.verdict == "agree":
        return []
    rec = m.reconciliation
    figures = f" (F = {rec.statistic:.3g}, {p_text(rec.p_value)})" \
        if rec.statistic is not None and rec.p_value is not None else ""
    return [VerdictItem(what="top-down against bottom-up, method uncertainty for routine use",
                        why=f"{rec.verdict}{figures}: {rec.explanation}; stated for routine use: the "
                            f"{m.reported} U")]


def standard_additions(blocks: Sequence[AdditionBlock]) -> list[VerdictItem]:
    """A matrix effect shown by a standard addition (its slope differs from the external line's:
    results read on the external line are biased for that matrix), and additions too small for
    the extrapolation."""
    items = []
    for b in blocks:
        m = b.matrix_effect
        if m is not None and m.significant:
            items.append(VerdictItem(what=f"matrix effect, {b.sample}", why=(
                f"{m.verdict}; recovery of sensitivity {m.recovery_percent:.1f} % ({m.recovery_low_percent:.1f} to "
                f"{m.recovery_high_percent:.1f} %){_p(m.p_value)}")))
        if not b.reaches_sample_content:
            items.append(VerdictItem(what=f"standard addition, {b.sample}", why=(
                "the largest addition is below the sample's own content: the extrapolation is long "
                f"(leverage {b.leverage:.2g})")))
    return items


def _names(results: Sequence[ResultEntry]) -> str:
    """The results' labels; an equilibrium study's points gathered as "K of points X1, X2"."""
    points = [str(r.key.id) for r in results if r.key.kind == "K"]
    names = [r.name for r in results if r.key.kind != "K"]
    return "; ".join(([f"K of points {', '.join(points)}"] if points else []) + names)


def monte_carlo(results: Sequence[ResultEntry], ran: bool) -> list[VerdictItem]:
    """Monte Carlo not run, or not validating the GUM interval (JCGM 101 clause 8), or warning."""
    if not ran:
        return [VerdictItem(what="Monte Carlo check of the GUM interval",
                            why="Monte Carlo was not run (0 trials): no GUM interval is validated by JCGM 101 "
                                "clause 8")]
    checked = [r for r in results if r.monte_carlo is not None]
    differ = [r for r in checked if r.monte_carlo is not None and not r.monte_carlo.agrees_with_gum]
    items = []
    if differ:
        items.append(VerdictItem(
            what="Monte Carlo against the GUM interval",
            why=f"JCGM 101 clause 8 does not validate the GUM interval of {len(differ)} of {len(checked)} results "
                f"({_names(differ)}): their Monte Carlo interval is reported"))
    items += [VerdictItem(what=f"Monte Carlo, {r.name}", why=r.monte_carlo.warning)
              for r in checked if r.monte_carlo is not None and r.monte_carlo.warning]
    return items


def range_flags(results: Sequence[ResultEntry]) -> list[VerdictItem]:
    """Below the LOD or LOQ, outside the calibrated range: each result's flags."""
    return [VerdictItem(what=f"range, {r.name}", why=flag) for r in results for flag in r.flags]


def scope(v: ValidationBlock) -> list[VerdictItem]:
    """The range stated in [method] scope against the working range and the LOQ (each result
    outside the scope is among its range flags)."""
    if v.scope is None:
        return []
    return [VerdictItem(what="stated scope against the working range", why=flag) for flag in v.scope.flags]


def limits(v: ValidationBlock) -> list[VerdictItem]:
    return [VerdictItem(what="detection and quantitation limits", why=w) for w in v.limits.warnings]


def registers(equipment: Sequence[EquipmentEntry]) -> list[VerdictItem]:
    """Equipment figures recalled from memory or typical of the trade, not the items' own."""
    parts = []
    for marker, label in (("from memory", "recalled from memory"), ("typical", "typical specifications")):
        ids = [e.id for e in equipment if marker in e.provenance.lower()]
        if ids:
            parts.append(f"{label} ({', '.join(ids)})")
    if not parts:
        return []
    return [VerdictItem(what="equipment figures", why="; ".join(parts) + ": use your own certificates")]


def input_notes(defaults: Sequence[str], notes: Sequence[str]) -> list[VerdictItem]:
    """Defaults whose figures are recalled from memory, and the notes on the input (kept, not fatal)."""
    items = [VerdictItem(what="default from memory", why=d) for d in defaults if "from memory" in d.lower()]
    return items + [VerdictItem(what="input note", why=n) for n in notes]


def equilibrium(e: EquilibriumBlock) -> list[VerdictItem]:
    """Inconsistent K values, a trend of K, a correction that did not converge, points off 20-80 %."""
    items = []
    cons = e.combined.consistency
    if cons is not None and not cons.consistent:
        items.append(VerdictItem(what="consistency of the K values", why=cons.verdict + _p(cons.p_value)))
    if isinstance(e.trend, TrendEntry) and e.trend.trend:
        items.append(VerdictItem(what=f"trend of K with {e.trend.against}", why=e.trend.message + _p(e.trend.p_value)))
    if not e.complete_complexation_bias.iteration_converged:
        items.append(VerdictItem(what="correction of the standards",
                                 why="the iteration for incomplete complexation did not converge"))
    flagged = [m for m in e.mixtures if m.saturation_flag]
    if flagged:
        items.append(VerdictItem(what=f"saturation of points {', '.join(m.id for m in flagged)}",
                                 why="; ".join(f"{m.id}: {m.saturation_flag}" for m in flagged)))
    return items


# --------------------------------------------------------------------------
# inputs the method file states without an uncertainty

def stated_exact(method: Method) -> list[VerdictItem]:
    """Inputs that enter the result as exact (validate.inputs.consistency.exact_inputs, the list the
    defaults shown are made from)."""
    quantities = method.quantities if isinstance(method, AssayMethod) else {}
    reference = method.validation.reference_value if isinstance(method, AssayMethod) else None
    return [VerdictItem(what=what, why=why) for what, why in exact_inputs(method.solutions, quantities, reference)]
