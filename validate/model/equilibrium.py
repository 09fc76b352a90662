"""The measurement model of a 1:1 complex-formation study, for both engines.

Reagent solutions (from the method's [solutions]) -> totals of M and L in every
standard, mixture and addition-series point (volumes of each aliquot and the
flask, or the growing vessel volume) -> mean readings -> the line of the
standards (refitted) -> optionally the standards corrected for incomplete
complexation by a fixed number of vectorised iterations -> [ML], free M and L,
and K for every point (ICE table) -> the combined K with fixed generalised
least-squares weights (from the linear engine's covariance) -> log10 K.

Outputs are in the display units of the study (K in `k_unit`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from validate.inputs.schema import EquilibriumMethod, EquilibriumStudy
from validate.metrology.equipment import SourceSet, temperature_source, volume_term
from validate.metrology.sources import Source, normal
from validate.model import backend as mathops
from validate.model import kernels
from validate.model.assay import SolutionInputs, mean_reading_term, solution_order, solution_term
from validate.model.design import EquilibriumDesign, equilibrium_design, scatter_covers
from validate.model.errors import ModelError
from validate.model.fixed_point import Reported
from validate.model.ice import equilibrium_constant
from validate.model.keys import ResultKey
from validate.model.levels import Level
from validate.model.scatter import ScatterComponents, ScatterTerm
from validate.model.standards import corrected_reported, corrected_states, line_by_sums

COMBINED = "K, combined"
LOG10 = "log10 K, combined"
R_GAS = 8.314462618  # J/(mol K), molar gas constant (CODATA 2018, exact)
ENTHALPY = "reaction enthalpy"


def positive_or_nan(x):
    """Trials where K is not positive have no defined result: nan (counted by the engine).
    Plain floats and ufloats (the estimates) pass through unchanged."""
    if isinstance(x, np.ndarray):
        return np.where(x > 0, x, np.nan)
    return x


@dataclass
class EquilibriumModel(SolutionInputs):
    method: EquilibriumMethod
    sources: dict[str, Source]
    weights: list[float] | None = None  # GLS weights of the combined K, set after a first pass
    start_K: float | None = None  # the estimate's corrected K (SI): where trials start the correction
    weights_change: float = math.nan  # largest change of a weight in the last pass of their fixed point
    temperature_name: str | None = None  # the temperature deviation K is carried over by van 't Hoff
    # points whose K is physically impossible at the estimates (id -> reason): weight 0 and left
    # out of the combined K, so a nan trial of theirs cannot reach it
    excluded: dict[str, str] = field(default_factory=dict)
    assumptions: list[str] = field(default_factory=list)
    design: EquilibriumDesign = field(init=False, repr=False)  # set once by build_equilibrium_model
    _solution_terms: dict = field(default_factory=dict, repr=False)
    _standards: list = field(default_factory=list, repr=False)  # (totals fn, reading fn) per standard
    _points: list = field(default_factory=list, repr=False)  # (totals fn, reading fn) per point
    _memos: list = field(default_factory=list, repr=False)  # per addition series: its totals for one x

    @property
    def study(self) -> EquilibriumStudy:
        study = self.method.equilibrium
        if study is None:
            raise ValueError("an equilibrium model needs a method with an equilibrium study")
        return study

    @property
    def points(self) -> list[str]:
        """Ids of the mixtures and addition-series points, in order."""
        return self.design.point_ids()

    @property
    def result_labels(self) -> list[str]:
        labels = [f"K, {p}" for p in self.points]
        return labels + ([COMBINED, LOG10] if self.weights is not None else [])

    @property
    def result_keys(self) -> list[ResultKey]:
        keys = [ResultKey("K", p) for p in self.points]
        return keys + ([ResultKey("combined K"), ResultKey("log10 K")] if self.weights is not None else [])

    def unit_of(self, label: str) -> str:
        return "" if label == LOG10 else self.study.k_unit.text

    def columns(self, x):
        """Totals of M and L and mean absorbances of the standards and of the points (SI)."""
        conc = self.concentrations(x)
        std = [(totals(x, conc), reading(x)) for totals, reading in self._standards]
        pts = [(totals(x, conc), reading(x)) for totals, reading in self._points]
        for memo in self._memos:  # the series' totals of this x are no longer needed: free them
            memo.clear()
        return ([t[0] for t, _ in std], [t[1] for t, _ in std], [a for _, a in std], self._preparation_counts(),
                [t[0] for t, _ in pts], [t[1] for t, _ in pts], [a for _, a in pts])

    def ice_tables(self, x, columns=None):
        """The ICE table of every point. The correction of the standards is the fixed point of
        the combination with the reported K's weights (`combination_weights`), so the K used
        to correct the standards is the reported combined K; an excluded point has weight 0
        and is never averaged into it. Trials start from the estimate's K (`start_K`).
        `columns`: this x's `columns(x)`, when the caller holds them (they do not depend on the weights)."""
        sm, sl, sa, reps, pm, pl, pa = self.columns(x) if columns is None else columns
        study = self.study
        if study.correction == "none":
            return self._uncorrected(sm, sl, sa, reps, pm, pl, pa)
        solved = corrected_states((sm, sl, sa), (pm, pl, pa), **self._correction_settings(reps))
        return list(solved.states)

    def _preparation_counts(self) -> list[int]:
        # the line runs through the preparations' means: a standard of p preparations is their mean
        # with weight p (the same line as one point per preparation, all at one concentration)
        return [len(lv.preparations) for lv in self.design.standards]

    def _correction_settings(self, reps) -> dict:
        """The arguments of the correction of the standards (`corrected_states`); reps: the
        standards' preparation counts (`columns`)."""
        study = self.study
        return dict(limiting="L" if study.limiting == "ligand" else "M", iterations=max(study.iterations, 1),
                    standard_weights=reps, mixture_weights=self.combination_weights(), start=self.start_K)

    def correction_K(self, x):
        """The K the standards are corrected with (SI; the fixed point of the combination), or
        None without a correction."""
        sm, sl, sa, reps, pm, pl, pa = self.columns(x)
        if self.study.correction == "none":
            return None
        return corrected_states((sm, sl, sa), (pm, pl, pa), **self._correction_settings(reps)).K

    def combination_weights(self) -> list[float]:
        """The weights of the combined K (GLS, fixed by `prepare_combination`), or before they
        are known equal weights over the points not excluded."""
        if self.weights is not None:
            return list(self.weights)
        return [0.0 if p in self.excluded else 1.0 for p in self.points]

    def uncorrected_ice_tables(self, x):
        """The ICE table of every point read off the line of the standards taken as fully
        complexed (no correction): what a point's reading says before any combination."""
        return self._uncorrected(*self.columns(x))

    def _uncorrected(self, sm, sl, sa, reps, pm, pl, pa):
        limiting = sl if self.study.limiting == "ligand" else sm
        # collapsed (`backend.collapse`): the line and each K are shared by later results
        slope, intercept = (mathops.collapse(v) for v in line_by_sums(limiting, sa, reps))
        states = [equilibrium_constant((a - intercept) / slope, m, l_)
                  for m, l_, a in zip(pm, pl, pa, strict=True)]
        return [replace(s, K=mathops.collapse(s.K)) for s in states]

    def temperature_factor(self, x):
        """K at the stated temperature T0 over K at the laboratory's, T0 + dT (van 't Hoff,
        d ln K/dT = dH/(R T^2), integrated with dH constant):
        exp(-(dH/R)(1/T0 - 1/(T0 + dT))) = exp(-dH dT / (R T0 (T0 + dT))); 1 without an enthalpy."""
        if self.temperature_name is None or self.study.temperature_C is None:
            return 1.0
        t0 = self.study.temperature_C + 273.15
        dt = x[self.temperature_name]
        return mathops.exp(-x[ENTHALPY] * dt / (R_GAS * t0 * (t0 + dt)))

    def evaluate(self, x, columns=None) -> dict:
        factor = self.study.k_unit.factor
        to_stated = self.temperature_factor(x)
        reported = self._reported(x, to_stated, factor) if columns is None else None
        if reported is not None:
            return reported
        ks = [positive_or_nan(state.K) for state in self.ice_tables(x, columns)]
        if not (isinstance(to_stated, float) and to_stated == 1.0 and all(isinstance(k, np.ndarray) for k in ks)):
            ks = [k * to_stated for k in ks]  # (trials times 1.0 are the trials: no pass over them)
        out = {f"K, {p}": k / factor for p, k in zip(self.points, ks, strict=True)}
        if self.weights is not None:
            kept = [(w, k) for p, w, k in zip(self.points, self.weights, ks, strict=True) if p not in self.excluded]
            combined = sum(w * k for w, k in kept) / factor
            out[COMBINED] = combined
            out[LOG10] = mathops.log10(combined)
        return out

    def _reported(self, x, to_stated, factor) -> dict | None:
        """`evaluate`'s outputs for arrays of trials of a corrected study by the compiled loop
        (`fixed_point.solve_reported`), or None where it does not serve: `evaluate` then reads them
        off the ICE tables, the reference. Two passes of the numpy path are left out: the totals
        and readings are written straight into the loop's input arrays (`_stacked_columns`), not
        made apart and copied there, and each trial goes in the loop from its fixed point to its
        reported K's, with no passes over the ICE tables (positive or nan, the unit, the weighted
        sum). Measured on the nickel demo, CPU per trial of `mcrounds.evaluate` (100,000 trials
        on slices of 10,000, pinned to one core of a shared machine): alternating this path and
        the ICE tables' 15 times in one process, this one takes a median 0.71 of the time (0.99
        against 1.39 us under load); between the checkouts before and after, the median of 8
        interleaved processes (7 runs each), 1.06 and 0.89 us. The Monte Carlo stage of a run
        (benchmarks/speed_probe.py mc, 10^6 trials with the shares): 3.8 s before, 3.4 s after,
        against 1.05 s for drawing the random numbers alone."""
        n = _trials_in(x)
        if (self.study.correction == "none" or not n or not isinstance(to_stated, (float, np.ndarray))
                or not kernels.available()):
            return None
        std, mix = self._stacked_columns(x, n)
        kept = tuple(p not in self.excluded for p in self.points)
        weights = None if self.weights is None else tuple(self.weights)
        rows = corrected_reported(tuple(std), tuple(mix), Reported(to_stated, factor, weights, kept),
                                  stacks=(std, mix), **self._correction_settings(self._preparation_counts()))
        if rows is None:
            return None
        out = {f"K, {p}": row for p, row in zip(self.points, rows, strict=False)}
        if weights is not None:
            out[COMBINED] = rows[-1]
            out[LOG10] = np.log10(rows[-1])
        return out

    def _stacked_columns(self, x, n: int) -> tuple[np.ndarray, np.ndarray]:
        """`columns` of n trials written into the compiled loop's input arrays (`kernels.stacks`,
        reused by the next evaluation): (M, L, A) x standard x trial and x point x trial."""
        std, mix = kernels.stacks(len(self._standards), len(self._points), n)
        conc = self.concentrations(x)
        for stack, parts in ((std, self._standards), (mix, self._points)):
            for i, (totals, reading) in enumerate(parts):
                totals(x, conc, (stack[0, i], stack[1, i]))
                stack[2, i] = reading(x)
        for memo in self._memos:
            memo.clear()
        return std, mix


def _trials_in(x) -> int:
    """The number of trials of source values x (0 for plain numbers or ufloats)."""
    for v in x.values():
        if isinstance(v, np.ndarray) and v.ndim:
            return int(v.shape[0])
    return 0


def build_equilibrium_model(method: EquilibriumMethod) -> EquilibriumModel:
    ss = SourceSet()
    observed = method.settings.scatter == "observed"
    model = EquilibriumModel(method, ss.sources)
    study = model.study
    for sol in solution_order(method.solutions):
        model._solution_terms[sol.id] = solution_term(ss, method, sol, False)
    treatment = method.settings.scatter
    volumes = _VolumeMemo()
    model._memos.append(volumes)
    std_totals = [_mix_totals(ss, method, mix, scatter_covers(treatment, "standard preparation"), volumes)
                  for mix in study.standards]
    design = model.design = _design(model, std_totals)
    scatter = _standards_scatter(design) if observed else None

    def reading(ident, readings, terms):
        return mean_reading_term(ss, method, ident, readings, terms, study.cuvette, study.photometer)

    model._standards = [(totals, reading(lv.id, *_standard_reading(lv, scatter)))
                        for lv, totals in zip(design.standards, std_totals, strict=True)]
    # a mixture is the study's sample: u_p^2 + s_r^2/m where the observed scatter covers preparing it
    mixture_covered = scatter_covers(treatment, "sample preparation")
    for mix, point in zip(study.mixtures, design.mixtures, strict=True):
        totals = _mix_totals(ss, method, mix, mixture_covered, volumes)
        terms = scatter.sample_terms(point.id, point.count, 1.0) if scatter else None
        model._points.append((totals, reading(point.id, point.readings, terms)))
    series_points = iter(design.series_points)
    for series in study.series:
        step = f"addition series {series.id}"
        start = {r: volume_term(ss, method, d, step, f"{series.id} start, {r}") for r, d in series.start.items()}
        additions = [volume_term(ss, method, series.aliquot, step, f"{series.id} addition {k}")
                     for k in range(1, series.additions + 1)]
        memo: dict = {}
        model._memos.append(memo)
        for k in range(1, series.additions + 1):
            point = next(series_points)
            model._points.append((_series_totals(series.solutions, start, additions, series.added, k, memo),
                                  reading(point.id, point.readings, _series_terms(scatter, point.id, point.count))))
    if study.reaction_enthalpy is not None:
        dh, u_dh = study.reaction_enthalpy
        ss.add(normal(ENTHALPY, dh, u_dh, step="reaction conditions", unit="kJ/mol", display_factor=1e3,
                      provenance="stated in the method file (reaction_enthalpy)"))
        model.temperature_name = ss.add(temperature_source(method, "reaction temperature"), "reaction temperature")
    model.assumptions.extend(_assumptions(study, observed))
    # found here, from the readings and nominal values, so `validate check` reports them too
    model.excluded = impossible_points(model)
    return model


def impossible_points(model: EquilibriumModel) -> dict[str, str]:
    """Points whose ICE table at the estimates is physically impossible, with the reason: first
    as read off the uncorrected line, then after the correction of the standards made from the
    points left (which may move a point over the edge), until no more points drop out.
    ModelError (exit 3) when no point is left."""
    x0 = model.nominal_inputs()
    model.excluded = {}
    model.excluded.update(_impossible(model, model.uncorrected_ice_tables(x0), x0))
    while len(model.excluded) < len(model.points):
        try:
            states = model.ice_tables(x0)
        except (ValueError, ZeroDivisionError, OverflowError) as exc:
            raise ModelError(f"the correction of the standards cannot be computed from the points of the study "
                             f"({exc})\n  what to do: check the readings and the totals of the standards and "
                             f"mixtures") from None
        new = _impossible(model, states, x0)
        if not new:
            break
        model.excluded.update(new)
    if len(model.excluded) == len(model.points):
        listed = "; ".join(f"{p}: {why}" for p, why in model.excluded.items())
        raise ModelError(f"no point of the study gives a physically possible K ({listed})\n"
                         "  what to do: check the readings and the totals of the mixtures; a point needs a "
                         "reading above the blank and below full complexation")
    return dict(model.excluded)


def _impossible(model: EquilibriumModel, states, x0) -> dict[str, str]:
    columns = model.columns(x0)
    out = {}
    for p, state, m, l_ in zip(model.points, states, columns[4], columns[5], strict=True):
        reason = impossible_reason(state, float(m), float(l_))
        if reason is not None and p not in model.excluded:
            out[p] = reason
    return out


def impossible_reason(state, m_total, l_total) -> str | None:
    """Why the ICE table of one point at the estimates is physically impossible, or None: a
    complex at or below zero (reading at or below the blank), more complex than the reagent in
    deficit (saturation above 1), or K not positive."""
    complex_conc, free_m, free_l, k = (float(mathops.nominal(v)) for v in
                                       (state.complex_conc, state.free_M, state.free_L, state.K))
    if not complex_conc > 0:
        return "no complex: the reading is at or below the line's intercept (the blank)"
    if not (free_m > 0 and free_l > 0):
        smaller = min(m_total, l_total)
        share = f"{complex_conc / smaller:.0%}" if smaller > 0 else "more"
        return f"more complex than the reagent in deficit ([ML] is {share} of the smaller total)"
    if not (math.isfinite(k) and k > 0):
        return f"K = {k:g} is not a positive number"
    return None


class _VolumeMemo:
    """The volumes of one evaluation on arrays of trials, by what each is computed from (a volume
    term's `key`): where the observed scatter covers the glassware's per-use repeatability, the
    standards and mixtures made with one flask or pipette at one volume compute the same numbers
    from the same calibration and temperature draws, so each is computed once per evaluation
    (cleared by `EquilibriumModel.columns`). Only arrays are kept: an estimate's volume (float
    or ufloat) is computed afresh for every use, so the linear engine's sums are unchanged."""

    def __init__(self) -> None:
        self.x = None
        self.volumes: dict = {}

    def __call__(self, term, x):
        if self.x is not x:
            self.clear()
            self.x = x
        found = self.volumes.get(term.key)
        if found is not None:
            return found
        volume = term(x)
        if isinstance(volume, np.ndarray):
            self.volumes[term.key] = volume
        return volume

    def clear(self) -> None:
        self.x = None
        self.volumes.clear()


def _mix_totals(ss: SourceSet, method: EquilibriumMethod, mix, covered: bool, volumes: _VolumeMemo):
    """A closure (x, concentrations[, out]) -> (total M, total L) of a standard or mixture made up
    in a flask (written into the two rows `out` when given); without the glassware's per-use
    repeatability where the observed scatter covers it.
    `volumes` computes a volume shared with another preparation once per evaluation of trials."""
    step = f"prepare {mix.id}"
    flask = volume_term(ss, method, mix.flask, step, mix.id, not covered)
    parts = {r: volume_term(ss, method, d, step, f"{mix.id}, {r}", not covered)
             for r, d in mix.parts.items()}

    def totals(x, conc, out=None):
        v = volumes(flask, x)
        if out is not None:  # the same products and quotients, written into the rows `out` (M, L)
            for row, reagent in zip(out, ("metal", "ligand"), strict=True):
                if reagent in parts:
                    np.divide(np.multiply(conc[mix.solutions[reagent]], volumes(parts[reagent], x), out=row), v,
                              out=row)
                else:
                    row[...] = 0.0
            return out
        m = conc[mix.solutions["metal"]] * volumes(parts["metal"], x) / v if "metal" in parts else 0.0
        l_ = conc[mix.solutions["ligand"]] * volumes(parts["ligand"], x) / v if "ligand" in parts else 0.0
        return m, l_
    return totals


def _check_point_preparations(method: EquilibriumMethod) -> None:
    """A mixture or series point is one measured solution: several preparations under its id (the
    readings table's preparation column) are not averaged silently."""
    from validate.inputs.errors import InputError

    study = method.equilibrium
    assert study is not None
    points = [mix.id for mix in study.mixtures] + [i for s in study.series for i in s.reading_ids()]
    for ident in points:
        if len(set(method.reading_preparations.get(ident, ()))) > 1:
            raise InputError(f"`{ident}` has readings of several preparations (the readings table's preparation "
                             f"column); a mixture or series point is read as one measured solution",
                             file=Path(method.path).parent / study.readings_file, where=f"readings of {ident}",
                             fix="give each preparation its own mixture entry, or one preparation label")


def _design(model: EquilibriumModel, std_totals) -> EquilibriumDesign:
    """The study's design, its standards at their limiting-reagent totals at the estimates."""
    study = model.study
    _check_point_preparations(model.method)
    x0 = model.nominal_inputs()
    conc = model.concentrations(x0)
    limiting = {}
    for mix, totals in zip(study.standards, std_totals, strict=True):
        m, l_ = totals(x0, conc)
        limiting[mix.id] = l_ if study.limiting == "ligand" else m
    return equilibrium_design(model.method, limiting)


def _assumptions(study: EquilibriumStudy, observed: bool) -> list[str]:
    out = ["1:1 complex M + L <=> ML; only the complex absorbs beyond the blank (the line's intercept); "
           "K is conditional on the temperature and ionic strength recorded"]
    if study.correction == "iterate":
        out.append("standards corrected for incomplete complexation: K is the fixed point of K -> [ML] in each "
                   "standard (stable quadratic root) -> refitted line -> the points' K combined with the reported "
                   f"K's weights, found by Newton's method (at most {max(study.iterations, 1)} steps per trial, "
                   "stopping when K no longer changes)")
    else:
        out.append("standards taken as fully complexed (no correction); the record shows "
                   "the bias this assumption causes")
    if observed:
        out.append("calibration scatter treated as observed: the standards' line is fitted to the mean reading "
                   "of each prepared standard (repeated readings of one solution are not independent points); "
                   "the scatter of these means about the line is split into reading scatter s_r (repeated "
                   "readings) and preparation scatter u_p, which stand for the per-use repeatability of the "
                   "glassware preparing the standards and the mixtures and for every reading; a mixture read m "
                   "times carries u^2 = u_p^2 + s_r^2/m and no glassware repeatability of its own; an addition "
                   "series' points are not independent preparations (an addition's error is carried by every "
                   "later point), so their volumes keep their repeatability bottom-up and they carry reading "
                   "scatter s_r^2/m only")
    if study.reaction_enthalpy is not None:
        out.append("K carried from the laboratory temperature to the stated temperature by van 't Hoff "
                   "(d ln K/dT = dH/(R T^2)) with the stated reaction enthalpy and the laboratory temperature "
                   "deviation (the one deviation the glassware shares): both in U(K)")
    else:
        out.append("the laboratory temperature's effect on K is NOT in U(K): no reaction enthalpy given "
                   "(van 't Hoff: K changes by about 2.7 % per K for |dH| = 20 kJ/mol near 25 degC); give "
                   "`reaction_enthalpy` to include it")
    # the study is one run: what varies between runs is not observed, so it is not in U(K)
    out.append("U(K) is a within-run uncertainty: it holds this study's preparations, its line of standards and "
               "its readings; effects that change between days (reagent lots, the laboratory temperature on "
               "another day, photometer drift between sessions, another analyst) are not in it, since the "
               "study is not repeated over series; repeat the study on other days to estimate them")
    return out


def _series_totals(reagent_solution, start, additions, added, k: int, memo: dict):
    """Totals after k additions (written into the two rows `out` when given): the vessel holds the
    start aliquots plus k aliquots. The amounts and volumes after every addition are computed once
    per evaluation and shared by the series' points (`memo`, cleared by `EquilibriumModel.columns`),
    not once per point."""
    def totals(x, conc, out=None):
        if memo.get("x") is not x:
            memo.update(x=x, amounts=_series_all_amounts(reagent_solution, start, additions, added, x, conc))
        m, l_, volume = memo["amounts"][k - 1]
        if out is not None:
            np.divide(m, volume, out=out[0])
            np.divide(l_, volume, out=out[1])
            return out
        return m / volume, l_ / volume
    return totals


def _series_all_amounts(reagent_solution, start, additions, added, x, conc) -> list:
    """(amount of M, amount of L, vessel volume) after each addition."""
    start_volume = sum(v(x) for v in start.values())
    start_amount = {r: conc[reagent_solution[r]] * v(x) for r, v in start.items()}
    added_conc = conc[reagent_solution[added]]
    out = []
    added_volume = 0.0
    for a in additions:  # a loop over additions, not over trials
        added_volume = added_volume + a(x)
        volume = start_volume + added_volume
        amount = dict(start_amount)
        amount[added] = amount.get(added, 0.0) + added_conc * added_volume
        out.append((amount.get("metal", 0.0), amount.get("ligand", 0.0), volume))
    return out


def _standards_scatter(design: EquilibriumDesign) -> ScatterComponents:
    """The observed scatter of the standards' line through the preparations' means, split into
    reading and preparation scatter as an assay's (validate.model.scatter); absorbance as read:
    the scatter terms are added before dividing by the path."""
    try:
        scatter = design.scatter_components()
    except ValueError as exc:
        raise ModelError(f"equilibrium standards: {exc}") from None
    if not math.isfinite(scatter.means_sd) or scatter.means_dof < 1:
        raise ModelError("equilibrium standards: too few prepared standards to estimate the scatter of their "
                         "line (at least 3 at different concentrations)")
    return scatter


def _standard_reading(lv: Level, scatter: ScatterComponents | None) -> tuple[tuple[float, ...], list | None]:
    """The readings a standard's mean is taken over and its observed-scatter term: one
    preparation's own readings with its point term (s_m scaled for its reading count), or the
    mean of several preparations' means with the mean of their independent point terms."""
    if scatter is None:
        return lv.readings, None
    preps = lv.preparations
    terms = [scatter.point_term(p.key, p.count, 1.0) for p in preps]
    if len(preps) == 1:
        return preps[0].readings, terms
    u = math.sqrt(sum(t.u**2 for t in terms)) / len(preps)
    return (tuple(p.mean for p in preps),
            [replace(terms[0], u=u, provenance=f"mean of {len(preps)} independent preparations of {lv.id}; "
                                                f"each: {terms[0].provenance}")])


def _series_terms(scatter: ScatterComponents | None, ident: str, count: int) -> list[ScatterTerm] | None:
    """An addition-series point's observed scatter: reading scatter s_r/sqrt(m) only (its volumes
    are carried bottom-up). Where no solution was read twice there is no s_r, and s_m would carry
    the preparation a second time beside the volumes: None, so the point's readings carry the
    photometer's stated noise, as bottom-up."""
    if scatter is None or scatter.reading_sd is None:
        return None
    return scatter.reading_terms(ident, count, 1.0)
