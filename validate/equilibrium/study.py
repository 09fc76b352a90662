"""The equilibrium block of the record: K per point and combined, with both engines.

`prepare_combination` runs the linear engine once on the per-point K values to
get their covariance (they share the line, the stock solutions and the
glassware), combines them by generalised least squares and fixes the weights
in the model, so both engines then evaluate the same combined estimator.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from uncertainties import ufloat

from validate.equilibrium.combine import DAVIES_UPPER_I, combine_correlated, davies_activity_correction, trend_test
from validate.equilibrium.conditions import conditions_block
from validate.inputs.schema import EquilibriumStudy
from validate.model.build import build
from validate.model.equilibrium import COMBINED, LOG10, EquilibriumModel, impossible_points
from validate.model.standards import fit_joint, iterate_standards, normalised
from validate.propagation.linear import covariance

# A point constrains K best when the complex holds between about 20 % and 80 % of the
# reagent in deficit (D. A. Deranleau, J. Am. Chem. Soc. 91 (1969) 4044; from memory).
SATURATION_WINDOW = (0.2, 0.8)


# The GLS weights depend on the covariance of the points' K, which depends (weakly) on the
# weights the standards are corrected with: repeat until they agree (a fixed point).
WEIGHT_PASSES = 25  # the weights settle by a factor of about 20 per pass on the nickel demo
WEIGHT_TOLERANCE = 1e-12
# Passes begun from a related study's settled weights (an advisor's candidate starts from the
# run's) are accelerated by Anderson mixing of the last passes (D. G. Anderson, J. ACM 12 (1965)
# 547; H. F. Walker and P. Ni, SIAM J. Numer. Anal. 49 (2011) 1715, from memory): 5 passes instead
# of 11 on the nickel demo's candidates. They stop by the same test on a plain pass.
MIXED_PASSES = 2  # earlier passes mixed in


def prepare_combination(model: EquilibriumModel, start: Sequence[float] | None = None):
    """Covariance of the per-point K (linear engine) and the GLS combination of the points whose
    K is physically possible; sets model.excluded, model.weights (0 for a point left out) and
    model.start_K. The standards are corrected with the combination's own weights, so the K
    they are corrected with is the reported combined K (issue: a correction with the plain mean
    while the GLS mean is reported is consistent with neither). ModelError (exit 3) when no
    point is left. `start`: weights of a related study (one per point) to begin the passes from
    (`_settle_from`); the weights settle to the same tolerance as from equal weights, and where
    they do not, the passes from equal weights decide, as without a start."""
    model.weights, model.start_K = None, None
    model.excluded = impossible_points(model)  # ModelError (exit 3) when no point is left
    kept = [i for i, p in enumerate(model.points) if p not in model.excluded]
    variables = {n: ufloat(s.value, s.u, tag=n) for n, s in model.sources.items()}
    x0 = model.nominal_inputs()
    # The van 't Hoff factor multiplies every point's K alike: it is left out of the covariance the
    # weights come from (combining first and multiplying after is the same estimate). A common
    # multiplicative error in GLS weights pulls the mean low (Peelle's pertinent puzzle; e.g.
    # Froehner, Nucl. Sci. Eng. 126 (1997) 1, from memory).
    temperature, model.temperature_name = model.temperature_name, None
    # the totals and mean readings (with their derivatives) do not depend on the weights: formed
    # once for every pass
    passes = _Passes(model, variables, kept, model.columns(variables))
    try:
        begin = _usable_start(model, start, kept, x0)
        settled = None if begin is None else _settle_from(model, passes, x0, begin)
        if settled is None:  # no start, or it did not settle: the passes from equal weights decide
            model.weights = None
            settled = _settle_weights(model, passes, x0)
        combined, values, cov = settled
    finally:
        model.temperature_name = temperature
    start_K = model.correction_K(x0)
    model.start_K = None if start_K is None else float(start_K)
    return combined, values, cov


@dataclass(frozen=True)
class _Passes:
    """What every GLS pass of one study evaluates: its model, the sources as `uncertainties`
    numbers, the points kept in the combination and the columns of those sources."""

    model: EquilibriumModel
    variables: dict
    kept: list[int]
    columns: tuple

    def run(self):
        """(GLS combination, K values, covariance) with the model's present weights, and the
        combination's weights over every point (0 for a point left out)."""
        combined, values, cov = _combination_pass(self.model, self.variables, self.kept, self.columns)
        return (combined, values, cov), _full_weights(combined, self.kept, len(values))


def _settle_weights(model: EquilibriumModel, passes: _Passes, x0):
    """GLS passes until the weights the standards are corrected with are the combination's."""
    last = math.inf
    for _ in range(WEIGHT_PASSES):
        used = normalised(model.combination_weights(), len(model.points))
        (combined, values, cov), weights = passes.run()
        change = max(abs(a - b) for a, b in zip(used, weights, strict=True))
        if change > last or not _correction_defined(model, weights, x0):
            # not settling (strongly correlated points far apart): keep the weights of the last
            # pass, which the standards were corrected with; the record says they did not settle
            model.weights, model.weights_change = list(used), change
            model.assumptions[:] = [a for a in model.assumptions if not a.startswith(UNSETTLED)]
            model.assumptions.append(_unsettled_note(change))
            break
        model.weights, model.weights_change, last = weights, change, change
        if change <= WEIGHT_TOLERANCE:
            break
    return combined, values, cov


def settled_weights(model) -> list[float] | None:
    """An equilibrium study's combination weights where they settled (to begin a related study's
    passes from: `prepare_combination`), else None (an assay, or weights that did not settle)."""
    if not isinstance(model, EquilibriumModel) or model.weights is None:
        return None
    return list(model.weights) if model.weights_change <= WEIGHT_TOLERANCE else None


def _usable_start(model: EquilibriumModel, start: Sequence[float] | None, kept: list[int], x0) -> list[float] | None:
    """The start weights over this study's points, 0 for a point left out and summing to 1; None
    when there is no start, it is for other points, or the standards cannot be corrected with it."""
    if start is None or len(start) != len(model.points):
        return None
    weights = [float(start[i]) if i in kept else 0.0 for i in range(len(start))]
    total = sum(weights)
    if not (math.isfinite(total) and abs(total) > 1e-6):
        return None
    weights = [w / total for w in weights]
    return weights if _correction_defined(model, weights, x0) else None


def _settle_from(model: EquilibriumModel, passes: _Passes, x0, weights: list[float]):
    """GLS passes from `weights`, each after the first begun from the Anderson mixture of its
    predecessors' results (`_mixed`), until a pass changes the weights by at most
    WEIGHT_TOLERANCE, as `_settle_weights` asks; None, leaving the model's weights to be set
    again, when a pass does not lower the change, leaves the correction of the standards
    undefined, fails, or WEIGHT_PASSES are spent (then the plain passes decide)."""
    results: list[np.ndarray] = []
    changes: list[np.ndarray] = []
    last = math.inf
    for _ in range(WEIGHT_PASSES):
        model.weights = weights
        used = normalised(weights, len(model.points))
        try:
            (combined, values, cov), new = passes.run()
        except (ArithmeticError, ValueError):  # a mixture the plain passes never visit: not settled
            return None
        change = max(abs(a - b) for a, b in zip(used, new, strict=True))
        if not change < last or not _correction_defined(model, new, x0):
            return None
        if change <= WEIGHT_TOLERANCE:
            model.weights, model.weights_change = new, change
            return combined, values, cov
        last = change
        results = [*results, np.array(new)][-(MIXED_PASSES + 1):]
        changes = [*changes, np.array(new) - np.array(used)][-(MIXED_PASSES + 1):]
        weights = _mixed(results, changes)
        if not _correction_defined(model, weights, x0):
            weights = new
    return None


def _mixed(results: list[np.ndarray], changes: list[np.ndarray]) -> list[float]:
    """Anderson's next weights: the combination of the last passes' results whose changes cancel
    best (least squares over the differences of the changes); the last result alone at first.
    The coefficients sum to 1, so the weights still do."""
    if len(results) < 2:
        return [float(w) for w in results[-1]]
    d_change = np.diff(np.column_stack(changes), axis=1)
    d_result = np.diff(np.column_stack(results), axis=1)
    gamma = np.linalg.lstsq(d_change, changes[-1], rcond=None)[0]
    return [float(w) for w in results[-1] - d_result @ gamma]


def _correction_defined(model: EquilibriumModel, weights: list[float], x0) -> bool:
    """Does the correction of the standards with these weights give a positive K at the estimates?"""
    before = model.weights
    model.weights = weights
    try:
        K = model.correction_K(x0)
    except (ValueError, ZeroDivisionError, OverflowError):
        return False
    finally:
        model.weights = before
    return K is None or (math.isfinite(float(K)) and float(K) > 0)


UNSETTLED = "the generalised least-squares weights did not settle"


def _unsettled_note(change: float) -> str:
    return (f"{UNSETTLED} (a pass changed them by {change:.3g} or left the "
            "correction of the standards undefined): the combined K and the correction use the weights of the "
            "last pass before, the same weights in both")


def _combination_pass(model: EquilibriumModel, variables: dict, kept: list[int], columns=None):
    outputs = model.evaluate(variables, columns)
    ks = [outputs[f"K, {p}"] for p in model.points]
    cov = covariance(ks)  # summed in source-name order: the same bits in every run
    values = [k.nominal_value for k in ks]
    kept_values = [values[i] for i in kept]
    kept_cov = [[cov[i][j] for j in kept] for i in kept]
    return (combine_correlated(kept_values, kept_cov) if len(kept) > 1 else None), values, cov


def _full_weights(combined, kept: list[int], n: int) -> list[float]:
    kept_weights = list(combined.weights) if combined else [1.0]
    weights = [0.0] * n
    for i, w in zip(kept, kept_weights, strict=True):
        weights[i] = float(w)
    return weights


def build_ready_model(method, start_weights: Sequence[float] | None = None):
    """(model, combination). An assay's model as it is; for an equilibrium study the
    per-point K covariance is computed first and the combined K's weights fixed, so
    both engines evaluate the same combined estimator (combination: GLS result,
    K values, covariance). `start_weights`: a related study's settled weights to begin
    the weights' passes from (`prepare_combination`)."""
    model = build(method)
    if not isinstance(model, EquilibriumModel):
        return model, None
    return model, prepare_combination(model, start_weights)


def _interval(mc, kind: str = "symmetric") -> list[float] | None:
    """The Monte Carlo coverage interval of a result, when the engine ran."""
    if mc is None:
        return None
    interval = getattr(mc.summary, kind)
    return [interval.low, interval.high]


def _saturation_flag(saturation: float) -> str | None:
    low, high = SATURATION_WINDOW
    if low <= saturation <= high:
        return None
    return (f"[ML] is {saturation:.0%} of the smaller total: outside {low:.0%} to {high:.0%}, where K is "
            f"well determined (Deranleau 1969, from memory)")


def _point_flag(model: EquilibriumModel, point: str, saturation: float) -> str | None:
    if point in model.excluded:
        return f"left out of the combined K: {model.excluded[point]}"
    return _saturation_flag(saturation)


def _point_rows(model: EquilibriumModel, by_name: dict, mc_by_name: dict, pm, pl) -> list[dict]:
    """One row per mixture or series point: totals, ICE table, K and its uncertainty."""
    states = model.ice_tables(model.nominal_inputs())
    cu = model.study.concentration_unit.factor
    rows = []
    for p, state, m, l_ in zip(model.points, states, pm, pl, strict=True):
        r, mc = by_name[f"K, {p}"], mc_by_name.get(f"K, {p}")
        saturation = float(state.complex_conc / min(m, l_)) if min(m, l_) > 0 else math.nan
        rows.append({
            "saturation": saturation,
            "saturation_flag": _point_flag(model, p, saturation),
            "id": p, "M_total": m / cu, "L_total": l_ / cu, "ML": state.complex_conc / cu,
            "M_free": state.free_M / cu, "L_free": state.free_L / cu,
            "K": r.value, "u_K": r.standard_uncertainty, "expanded_uncertainty": r.expanded_uncertainty,
            "coverage_factor": r.coverage_factor,
            "interval": _interval(mc), "shortest_interval": _interval(mc, "shortest"),
            "invalid_trials": mc.summary.invalid_trials if mc else None,
        })
    return rows


def _consistency(combined) -> dict | None:
    if combined is None:
        return None
    return {"chi_square": combined.chi_square, "dof": combined.dof, "p_value": combined.p_value,
            "birge_ratio": combined.birge_ratio, "consistent": combined.consistent,
            "verdict": ("the K values agree within their uncertainties" if combined.consistent else
                        "the K values scatter more than their uncertainties explain: look for a missing "
                        "source, another complex or a wrong stoichiometry"),
            "source": "generalised least squares with the full covariance; chi-square and Birge ratio "
                      "(Birge 1932)"}


def _invalid(mc) -> int | None:
    """Monte Carlo trials without a defined K (None without Monte Carlo)."""
    return None if mc is None else int(mc.summary.invalid_trials)


def _combined_part(model: EquilibriumModel, comb, mc_comb, combined, mc_by_name: dict) -> dict:
    return {
        "K": comb.value, "standard_uncertainty": comb.standard_uncertainty,
        "expanded_uncertainty": comb.expanded_uncertainty, "coverage_factor": comb.coverage_factor,
        "coverage_probability": comb.coverage_probability,
        "interval": _interval(mc_comb), "shortest_interval": _interval(mc_comb, "shortest"),
        "agrees_with_gum": mc_comb.check.agrees if mc_comb else None,
        "weights": list(model.weights or []), "weights_change": model.weights_change,
        "excluded": [{"id": p, "reason": why, "invalid_trials": _invalid(mc_by_name.get(f"K, {p}"))}
                     for p, why in model.excluded.items()],
        "consistency": _consistency(combined),
    }


def _bias_part(model: EquilibriumModel, columns, limiting: str, reported_K: float) -> dict:
    """The bias of taking the standards as fully complexed, against the reported K: the
    shortcut's K is the combination, with the reported K's weights, of the points' K read off
    the line of the standards taken as fully complexed."""
    study = model.study
    sm, sl, sa, reps, pm, pl, pa = columns
    corr = iterate_standards(sm, sl, sa, pm, pl, pa, limiting=limiting, iterations=max(study.iterations, 1),
                             standard_weights=reps, mixture_weights=model.combination_weights())
    naive_K = _float(corr.naive_K) / study.k_unit.factor
    if study.correction == "none":  # the reported K is the shortcut's: its bias against the corrected K
        corrected = _float(corr.K) / study.k_unit.factor
        return {
            "slope": _float(corr.slope_bias), "K": reported_K / corrected - 1.0, "naive_K": naive_K,
            "reported_K": reported_K,
            "fraction_complexed_in_standards": [_float(f) for f in corr.fraction_standards],
            "meaning": f"relative bias of the reported K, the standards taken as fully complexed, against the K "
                       f"of corrected standards ({corrected:.6g}): reported / corrected - 1",
            "iteration_converged": corr.converged, "iterations": corr.iterations}
    return {
        "slope": _float(corr.slope_bias), "K": naive_K / reported_K - 1.0,
        "naive_K": naive_K, "reported_K": reported_K,
        "fraction_complexed_in_standards": [_float(f) for f in corr.fraction_standards],
        "meaning": "relative bias (naive / reported - 1) if the standards were taken as fully complexed: the "
                   "naive K combines the points' K read off the uncorrected line with the reported K's weights",
        "iteration_converged": corr.converged, "iterations": corr.iterations}


def _joint_fit_part(study: EquilibriumStudy, columns, limiting: str) -> dict:
    sm, sl, sa, _, pm, pl, pa = columns
    try:
        jf = fit_joint(sm, sl, sa, pm, pl, pa, limiting=limiting)
    except ValueError as exc:
        return {"error": str(exc)}
    k_unit = study.k_unit.factor
    return {"K": jf.K / k_unit, "standard_uncertainty": jf.K_u / k_unit, "log10K": math.log10(jf.K / k_unit),
            "slope_bias": jf.slope_bias, "K_bias": jf.K_bias, "success": jf.success,
            "note": "K, absorptivity and intercept fitted together by nonlinear least squares "
                    "over the mean readings (a cross-check of the iteration; Bates & Watts 1988)"}


def _optional_parts(study: EquilibriumStudy, comb, values, cov, pm) -> dict:
    """The trend of K with the metal total (3 or more points) and the activity estimate."""
    out: dict = {}
    if len(values) >= 3:
        x = [m / study.concentration_unit.factor for m in pm]
        try:
            out["trend"] = trend_test(values, cov, x).to_dict() | {
                "against": f"total metal ({study.concentration_unit.text})"}
        except ValueError as exc:
            out["trend"] = {"error": str(exc)}
    if study.charges and study.ionic_strength is not None and study.ionic_strength / 1e3 <= DAVIES_UPPER_I:
        act = davies_activity_correction(comb.value, study.ionic_strength / 1e3, study.charges,
                                         study.temperature_C if study.temperature_C is not None else 25.0)
        out["activity_estimate"] = act.to_dict()
    return out


def equilibrium_block(model: EquilibriumModel, results, monte_carlo, combined, values, cov) -> dict:
    study = model.study
    by_name = {r.name: r for r in results}
    mc_by_name = {m.name: m for m in monte_carlo}
    columns = model.columns(model.nominal_inputs())
    pm, pl = columns[4], columns[5]
    comb, log10 = by_name[COMBINED], by_name[LOG10]
    mc_log = mc_by_name.get(LOG10)
    limiting = "L" if study.limiting == "ligand" else "M"
    block = {
        "conditions": conditions_block(model),
        "k_unit": study.k_unit.text, "unit": study.k_unit.text,
        "concentration_unit": study.concentration_unit.text,
        "correction": study.correction, "limiting_reagent_in_standards": study.limiting,
        "mixtures": _point_rows(model, by_name, mc_by_name, pm, pl),
        "combined": _combined_part(model, comb, mc_by_name.get(COMBINED), combined, mc_by_name),
        "log10K": {"value": log10.value, "standard_uncertainty": log10.standard_uncertainty,
                   "expanded_uncertainty": log10.expanded_uncertainty, "interval": _interval(mc_log)},
        "complete_complexation_bias": _bias_part(model, columns, limiting, comb.value),
        "covariance": [list(row) for row in cov],
        "joint_fit": _joint_fit_part(study, columns, limiting),
    }
    kept = [i for i, p in enumerate(model.points) if p not in model.excluded]  # the trend of possible K only
    block.update(_optional_parts(study, comb, [values[i] for i in kept], [[cov[i][j] for j in kept] for i in kept],
                                 [pm[i] for i in kept]))
    return block


def _float(x) -> float:
    try:
        return float(x)
    except (TypeError, ValueError):
        return math.nan
