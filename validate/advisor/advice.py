"""What to improve first: which change to the method lowers the expanded uncertainty most.

Candidate changes (validate.advisor.candidates) come from the budget and the
equipment registers. Each is evaluated by building the what-if variant of the
method and running the same model through the linear engine (GUM law of
propagation, Welch-Satterthwaite, k from the t distribution), so a change
shows its effect on the degrees of freedom and k as well as on u. The best few
are confirmed with Monte Carlo (JCGM 101, fixed seed), and the best two or
three that do not touch the same thing are combined into one extra advice.

Ranking figure (what "expanded uncertainty" means in an advice):
- one result: its expanded uncertainty U, in the result's unit;
- several results (e.g. several samples): the largest relative expanded
  uncertainty U/|y| over the results, as a fraction. The method is only as good
  as its worst result, and the acceptance criterion on U is stated per result.
  The target is then "largest relative U over results", and every advice also
  lists each result's U, k and effective degrees of freedom before and after.
Advices are ranked by the figure after the change, ascending; a change that
lowers it by less than MIN_REDUCTION (or raises it: with a Type A component of
few degrees of freedom, Welch-Satterthwaite can raise k when a Type B source
shrinks) is not listed as advice but named under `without_effect`.

Qualitative advice (not evaluated by the model, ranked after the quantified
ones with no U after): a sample whose mean reading lies outside 0.2 to 0.8
(common practice) is better read nearer A = 1/ln 10 = 0.434, where constant
transmittance noise gives the smallest relative error (Twyman and Lothian,
Proc. Phys. Soc. 45 (1933) 643, from memory; validate.validation.window).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from validate.advisor.candidates import Candidate, Shares, class_candidates, piston_candidates, volume_pair_candidates
from validate.advisor.curvature import curvature_candidates
from validate.advisor.readings import reading_candidates
from validate.advisor.remembered_draws import RememberedStreams
from validate.advisor.stated_inputs import input_value_candidates, temperature_candidates
from validate.advisor.weighing import weighing_candidates
from validate.equilibrium.study import build_ready_model, settled_weights
from validate.inputs.errors import InputError
from validate.inputs.registers import RegisterEntry, merge_registers
from validate.inputs.schema import Method
from validate.model.assay import Model, ModelError
from validate.model.equilibrium import COMBINED
from validate.model.line import fit_line
from validate.propagation.linear import LinearResult, propagate
from validate.propagation.montecarlo import symmetric_intervals
from validate.validation.window import OPTIMUM_ABSORBANCE, relative_error_factor

MIN_REDUCTION = 1e-3  # a change lowering the figure by less than 0.1 % is not advice
READING_WINDOW = (0.2, 0.8)  # common practice: the band around the photometric optimum
RELATIVE = "relative (U/|y|)"
WORST = "largest relative U over results"
RANKING = ("ranked by the expanded uncertainty after the change, ascending; with several results the "
           "figure is the largest relative expanded uncertainty U/|y| over the results")



def generate(method: Method, shares: Shares, entries: list[RegisterEntry]) -> list[Candidate]:
    """Every candidate change worth evaluating for this method and budget."""
    out = class_candidates(method, shares, entries)
    out += piston_candidates(method, shares, entries)
    out += volume_pair_candidates(method, shares, entries)
    out += reading_candidates(method)
    out += temperature_candidates(method, shares)
    out += input_value_candidates(method, shares)
    out += weighing_candidates(method, shares, entries)
    out += curvature_candidates(method)
    return out


def _dof(x: float):
    return None if math.isinf(x) else x


@dataclass(frozen=True)
class ResultEffect:
    result: str
    value: float
    expanded_uncertainty_before: float
    expanded_uncertainty_after: float
    coverage_factor_before: float
    coverage_factor_after: float
    effective_dof_before: float
    effective_dof_after: float

    def to_dict(self) -> dict:
        d = dict(self.__dict__)
        d["effective_dof_before"] = _dof(self.effective_dof_before)
        d["effective_dof_after"] = _dof(self.effective_dof_after)
        return d


@dataclass(frozen=True)
class Advice:
    change: str
    kind: str
    target: str  # the result, or WORST when the method has several results
    unit: str  # of the two expanded uncertainties: the result's unit, or RELATIVE
    expanded_uncertainty_before: float
    expanded_uncertainty_after: float | None  # None: qualitative advice, not evaluated
    reduction: float | None  # 1 - after / before
    cost: str
    confirmed_by_monte_carlo: float | None  # the figure after, from Monte Carlo, when it confirms
    assumption: str = ""
    monte_carlo_note: str = ""
    effects: tuple[ResultEffect, ...] = ()
    details: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        d = {k: v for k, v in self.__dict__.items() if k not in ("effects", "details")}
        return {**d, "effects": [e.to_dict() for e in self.effects], "details": dict(self.details)}


@dataclass(frozen=True)
class AdviceReport:
    method: str
    ranking: str
    target: str
    unit: str
    expanded_uncertainty_before: float
    items: tuple[Advice, ...]  # ranked: quantified by U after, then qualitative
    combined: Advice | None  # the best two or three changes together
    monte_carlo_before: float | None
    monte_carlo_trials: int
    seed: int
    candidates_evaluated: int
    without_effect: tuple[str, ...]  # evaluated changes that do not lower the figure
    skipped: tuple[str, ...]  # candidates the model could not evaluate, with the reason
    sources: tuple[str, ...]

    def to_dict(self) -> dict:
        d = {k: v for k, v in self.__dict__.items() if k not in ("items", "combined")}
        return {**d, "items": [a.to_dict() for a in self.items],
                "combined": self.combined.to_dict() if self.combined else None,
                "without_effect": list(self.without_effect), "skipped": list(self.skipped),
                "sources": list(self.sources)}


def figure(results: list[LinearResult], widths: list[float] | None = None) -> tuple[str, str, float]:
    """(target, unit, value) of the ranking figure; `widths` replaces the GUM U (Monte Carlo)."""
    widths = [r.expanded_uncertainty for r in results] if widths is None else widths
    for r, w in zip(results, widths, strict=True):
        if r.name == COMBINED:  # an equilibrium study is judged by its combined K
            return r.name, r.unit, w
    if len(results) == 1:
        return results[0].name, results[0].unit, widths[0]
    relative = [w / abs(r.value) for r, w in zip(results, widths, strict=True) if r.value != 0]
    if not relative:  # every result is zero: compare absolute U (one unit for all results)
        return WORST, results[0].unit, max(widths)
    return WORST, RELATIVE, max(relative)


@dataclass
class _Evaluated:
    candidate: Candidate
    model: Model
    results: list[LinearResult]
    value: float


def _evaluate(method: Method, candidate: Candidate, start: list[float] | None = None) -> _Evaluated:
    """The candidate's model and results; `start`: the run's settled weights of an equilibrium
    study's combination, where the candidate's own weights begin their passes (a change of
    uncertainties moves them little; they settle to the same tolerance as from equal weights)."""
    model = build_ready_model(candidate.apply(method), start)[0]
    results = propagate(model)
    return _Evaluated(candidate, model, results, figure(results)[2])


def _advice(ev: _Evaluated, before: list[LinearResult], fig_before: float) -> Advice:
    target, unit, _ = figure(ev.results)
    after = {r.name: r for r in ev.results}
    effects = tuple(ResultEffect(b.name, b.value, b.expanded_uncertainty, after[b.name].expanded_uncertainty,
                                 b.coverage_factor, after[b.name].coverage_factor, b.effective_dof,
                                 after[b.name].effective_dof) for b in before)
    c = ev.candidate
    reduction = 1.0 - ev.value / fig_before if fig_before > 0 else 0.0
    return Advice(c.change, c.kind, target, unit, fig_before, ev.value, reduction, c.cost, None,
                  c.assumption, "", effects, dict(c.details))


def _combine(method: Method, ranked: list[_Evaluated], how_many: int,
             start: list[float] | None = None) -> _Evaluated | None:
    """The best `how_many` (at least two) changes that touch different things, applied one after another."""
    if how_many < 2:
        return None
    chosen: list[Candidate] = []
    touched: set[str] = set()
    for ev in ranked:
        if len(chosen) == how_many:
            break
        if not ev.candidate.touches & touched:
            chosen.append(ev.candidate)
            touched |= ev.candidate.touches
    if len(chosen) < 2:
        return None

    def apply(m):
        for cand in chosen:
            m = cand.apply(m)
        return m

    combined = Candidate("combined", "all of: " + "; ".join(c.change for c in chosen),
                         "; ".join(c.cost for c in chosen),
                         "; ".join(dict.fromkeys(c.assumption for c in chosen if c.assumption)),
                         frozenset(touched), apply, {"changes": [c.change for c in chosen]})
    return _evaluate(method, combined, start)


def _figure_labels(results: list[LinearResult]) -> list[str]:
    """The results the ranking figure reads (`figure`): an equilibrium study's combined K alone,
    otherwise every result."""
    names = [r.name for r in results]
    return [COMBINED] if COMBINED in names else names


def _mc_figure(model: Model, results: list[LinearResult], trials: int, seed: int,
               streams: RememberedStreams | None = None) -> float:
    """Half-width of the probabilistically symmetric interval (JCGM 101 7.7.1) in the ranking
    figure, from exactly `trials` trials (the clause 8 comparison, which may add trials, is not
    what the advice needs), of the results the figure reads only. `streams`: the generators of
    the seed that remember the draws the checks share (the same numbers, drawn once)."""
    intervals = symmetric_intervals(model, trials, seed, _figure_labels(results),
                                    np.random.default_rng if streams is None else streams)
    widths = [(intervals[r.name].high - intervals[r.name].low) / 2 if r.name in intervals else math.nan
              for r in results]
    return figure(results, widths)[2]


def _confirm(advice: Advice, ev: _Evaluated, mc_before: float, trials: int, seed: int,
             streams: RememberedStreams | None = None) -> Advice:
    mc_after = _mc_figure(ev.model, ev.results, trials, seed, streams)
    note = f"Monte Carlo ({trials} trials, seed {seed}): {mc_after:.4g} after, {mc_before:.4g} before"
    confirmed = mc_after < mc_before
    if not confirmed:
        note += "; the change is not resolved at this number of trials"
    return Advice(**{**advice.__dict__, "confirmed_by_monte_carlo": mc_after if confirmed else None,
                     "monte_carlo_note": note})


def _confirm_first(items: list[Advice], evaluated: list[_Evaluated], how_many: int, mc_before: float,
                   trials: int, seed: int, streams: RememberedStreams | None = None) -> list[Advice]:
    """The first `how_many` advices with their Monte Carlo check, the others as they are."""
    return [_confirm(advice, ev, mc_before, trials, seed, streams) if i < how_many else advice
            for i, (advice, ev) in enumerate(zip(items, evaluated, strict=True))]


def window_advice(model: Model, results: list[LinearResult], fig_before: float, unit: str) -> list[Advice]:
    """Qualitative advice for samples read outside READING_WINDOW: the factor by which the net
    reading should change to reach A = 0.434 (not above the highest standard's mean reading),
    and the expected effect, from Twyman-Lothian and from this budget's constant-absorbance scatter."""
    method = model.method
    cal = method.calibration
    if cal is None or "c_measured" not in method.result.formula.names:
        return []
    design = model.design
    assert design is not None  # a model with a calibration owns its design
    xs, ys, _ = design.reading_points()
    fit = fit_line(xs, ys)
    top = max(p.mean for lv in design.standards for p in lv.preparations)
    goal = min(OPTIMUM_ABSORBANCE, top)
    out = []
    own = [r for r, key in zip(results, model.result_keys, strict=True) if key.kind == "result"]
    for smp, result in zip(design.samples, own, strict=True):
        mean = smp.mean
        if READING_WINDOW[0] <= mean <= READING_WINDOW[1] or mean <= fit.intercept:
            continue
        factor = (goal - fit.intercept) / (mean - fit.intercept)
        if abs(factor - 1.0) < 0.05:
            continue  # the highest standard sits about here: no room to move
        out.append(_window_advice(smp.id, result.name, mean, goal, factor, fig_before, unit))
    return out


def _window_advice(sample: str, result: str, mean: float, goal: float, factor: float, fig_before: float,
                   unit: str) -> Advice:
    how = (f"raise the net reading about {factor:.1f}-fold (less dilution of the sample, a larger "
           f"sample portion or a longer cell)" if factor > 1 else
           f"dilute the sample about {1 / factor:.1f}-fold further")
    tl = relative_error_factor(mean) / relative_error_factor(goal)
    expected = (f"not evaluated by the model. Expected effect: for constant transmittance noise the relative "
                f"photometric error falls about {tl:.1f}-fold (Twyman and Lothian 1933, from memory)")
    expected += (f"; with this budget's constant absorbance scatter the reading's relative contribution falls "
                 f"about {factor:.1f}-fold" if factor > 1 else ", and stray light matters less at lower absorbance")
    return Advice(
        f"read `{sample}` nearer A = {goal:.2f} (its mean reading is {mean:.3f}): {how}",
        "absorbance window", result, unit, fig_before, None, None,
        "a changed sample preparation or cell; check that the reading stays inside the calibrated range",
        None, expected, "", (), {"sample": sample, "mean_reading": mean, "goal_reading": goal,
                                 "net_reading_factor": factor, "twyman_lothian_ratio": tl})


SOURCES = (
    "GUM (JCGM 100:2008) law of propagation, Welch-Satterthwaite G.4.1, k from the t distribution G.3",
    "JCGM 101:2008 Monte Carlo, probabilistically symmetric coverage interval 7.7.1",
    "Twyman and Lothian, Proc. Phys. Soc. 45 (1933) 643: smallest relative error at A = 0.434 (from memory)",
    "reading window 0.2 to 0.8 for the qualitative advice: common practice",
    "equipment tolerances: the registers named in the method's record",
)


def advise(method: Method, results: list[LinearResult] | None = None, *, confirm_with_mc: int = 3,
           mc_trials: int = 50_000, seed: int = 1, combine: int = 3,
           model: Model | None = None) -> AdviceReport:
    """Ranked changes that lower the expanded uncertainty, the best few confirmed by Monte Carlo,
    and the best `combine` (two or three) together as `combined`. `model`: the method's model
    ready for propagation (`build_ready_model`), when the caller has it already (not built again)."""
    baseline = build_ready_model(method)[0] if model is None else model
    results = propagate(baseline) if results is None else results
    target, unit, before = figure(results)
    start = settled_weights(baseline)  # where an equilibrium study's candidates begin their weights
    evaluated, skipped = _evaluate_all(method, results, start)
    useful, without = _partition(evaluated, before)
    items = [_advice(ev, results, before) for ev in useful]
    combined_ev = _combine(method, useful, combine, start)
    combined = _advice(combined_ev, results, before) if combined_ev else None
    mc_before = None
    if confirm_with_mc > 0 and (items or combined):
        streams = RememberedStreams()  # the run's draws, remembered for the changes' checks
        mc_before = _mc_figure(baseline, results, mc_trials, seed, streams)
        streams.remembering = False
        items = _confirm_first(items, useful, confirm_with_mc, mc_before, mc_trials, seed, streams)
        if combined and combined_ev:
            combined = _confirm(combined, combined_ev, mc_before, mc_trials, seed, streams)
    match baseline:
        case Model():  # the reading window concerns an assay's samples
            items += window_advice(baseline, results, before, unit)
    return AdviceReport(method.title, RANKING, target, unit, before, tuple(items), combined, mc_before,
                        mc_trials if mc_before is not None else 0, seed, len(evaluated), without,
                        tuple(skipped), SOURCES)


def _partition(evaluated: list[_Evaluated], before: float) -> tuple[list[_Evaluated], tuple[str, ...]]:
    """The changes that lower the figure by at least MIN_REDUCTION, and the others in words."""
    useful = [ev for ev in evaluated if before > 0 and ev.value <= before * (1 - MIN_REDUCTION)]
    without = tuple(f"{ev.candidate.change} (figure {before:.4g} -> {ev.value:.4g})"
                    for ev in evaluated if ev not in useful)
    return useful, without


def _evaluate_all(method: Method, results: list[LinearResult],
                  start: list[float] | None = None) -> tuple[list[_Evaluated], list[str]]:
    """Every candidate evaluated, best first; those the model cannot evaluate, with the reason."""
    entries, _ = merge_registers([Path(r) for r in method.registers_used])  # the files the method was read with
    evaluated, skipped = [], []
    for cand in generate(method, Shares.of(results), entries):
        try:
            evaluated.append(_evaluate(method, cand, start))
        except (ModelError, InputError, ValueError, ZeroDivisionError) as exc:
            skipped.append(f"{cand.change}: {exc}")
    evaluated.sort(key=lambda ev: (ev.value, ev.candidate.change))
    return evaluated, skipped
