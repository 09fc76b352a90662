"""The Monte Carlo engine (JCGM 101): the same model evaluated on arrays of trials.

A fixed number of trials, with the JCGM 101 8.2 rounds that add trials where the comparison
with the GUM interval is open, runs in validate.propagation.mcrounds (its settings: CHUNK,
EVAL_SLICE, MAX_KEPT_BYTES, MAX_CHECK_TRIALS, CHECK_GROWTH): one pass of draws for every result
where what is kept fits in memory, every value of a result (8 bytes a trial) or only the tails
its statistics read (validate.propagation.mctails); a run whose single result does not fit
stops with a message before any trial. The adaptive procedure (trials="auto", JCGM 101 7.9) is
here; it keeps every result's values of its batches, at most MAX_ADAPTIVE_TRIALS each.

Budget shares (held groups) use common random numbers: each batch of draws and its base run
are shared by every held-group run, with the linearised model as a control variate
(validate.propagation.mcshares).

Trials whose result is undefined (NaN or infinite, e.g. a zero slope) are
counted and reported, never dropped silently (docs/design.md, "Monte Carlo").
"""

from __future__ import annotations

import math
import secrets
from dataclasses import dataclass

import numpy as np

from validate.inputs.errors import InputError
from validate.model.assay import Model
from validate.model.errors import ModelError
from validate.propagation import mcrounds, mcshares
from validate.propagation.distributions import draw_many
from validate.propagation.gumcheck import GumCheck
from validate.propagation.linear import LinearResult
from validate.propagation.mcrounds import Final, Kept, extend_whole, label_groups, run_fixed, run_trials
from validate.propagation.mcrounds import evaluate as _evaluate
from validate.propagation.mcshares import SHARE_TRIALS, held_draws
from validate.propagation.mcstats import (
    AdaptiveCheck,
    CoverageInterval,
    HistogramData,
    McSummary,
    TooFewTrials,
    adaptive_batch_size,
    adaptive_converged,
    coverage_interval_symmetric,
    fewest_trials,
    summarise,
)

MAX_ADAPTIVE_TRIALS = 10_000_000
INVALID_WARNING = 0.001  # share of undefined trials above which a warning is shown


@dataclass(frozen=True)
class McResult:
    name: str
    seed: int
    summary: McSummary
    check: GumCheck  # JCGM 101 8.2, decided beyond Monte Carlo noise
    adaptive: AdaptiveCheck | None
    histogram: HistogramData
    shares_by_step: tuple[tuple[str, float, float, int], ...]  # (group, share, standard error, trials)
    shares_by_equipment: tuple[tuple[str, float, float, int], ...]
    smallest_dof: float = math.inf  # least degrees of freedom of the tails a t input gives the result
    through_curvature: bool = False  # ... given by an input acting only through the model's curvature (nu/p)

    @property
    def variance_exists(self) -> bool:
        """A t input with nu <= 2 has no finite variance, so neither has the output (JCGM 101 6.4.9)."""
        return self.smallest_dof > 2

    @property
    def mean_exists(self) -> bool:
        return self.smallest_dof > 1

    @property
    def shares_exist(self) -> bool:
        """Variance shares with a standard error need a finite fourth moment: no t input with
        nu <= 4 reaches the result (validate.propagation.mcshares, which then runs none)."""
        return self.smallest_dof > mcshares.HEAVY_TAILS_DOF

    @property
    def warning(self) -> str | None:
        share = self.summary.invalid_trials / self.summary.total_trials
        if share > INVALID_WARNING:
            return (f"{self.summary.invalid_trials} of {self.summary.total_trials} trials ({share:.2%}) "
                    f"gave no defined result and are left out of the statistics")
        return None

    @property
    def moments_note(self) -> str | None:
        """Why the standard uncertainty and the shares are left out, or why to distrust them."""
        nu = self.smallest_dof
        if nu <= 2:
            return (f"{self._tail_source(nu)} has no finite variance, so the output has none: the Monte Carlo "
                    "standard uncertainty and the variance shares do not exist and are not reported; the "
                    "coverage intervals stand")
        if nu <= mcshares.HEAVY_TAILS_DOF:
            return (f"{self._tail_source(nu)} (at most 4) has no finite fourth moment: the Monte Carlo standard "
                    "uncertainty varies strongly between runs, and variance shares would have no standard "
                    "error, so none are reported; rely on the coverage intervals and the GUM budget")
        return None

    def _tail_source(self, nu: float) -> str:
        if self.through_curvature:  # e.g. y = x^2 with x at 0: the output goes as the square of a t variable
            return ("an input drawn from a t distribution acts on the output through the model's curvature "
                    f"(its sensitivity is zero at the estimates), giving it the tails of a t distribution with "
                    f"{nu:g} degrees of freedom, which")
        return f"an input drawn from a t distribution with {nu:g} degrees of freedom"

    def to_dict(self) -> dict:
        s, c = self.summary, self.check
        v = c.validation
        shares = self.shares_exist
        return {
            "trials": s.total_trials, "mean": s.mean if self.mean_exists else None,
            "standard_uncertainty": s.standard_deviation if self.variance_exists else None,
            "interval": [s.symmetric.low, s.symmetric.high],
            "shortest_interval": [s.shortest.low, s.shortest.high],
            "coverage_probability": s.p,
            "agrees_with_gum": c.agrees, "gum_check": c.verdict, "gum_check_note": c.explanation(),
            "invalid_trials": s.invalid_trials, "seed": self.seed,
            "gum_interval": [v.gum_low, v.gum_high], "tolerance": v.delta,
            "d_low": v.d_low, "d_high": v.d_high,
            "numerical_tolerance": c.numerical_tolerance, "tolerance_target": c.target,
            "adaptive": self.adaptive.to_dict() if self.adaptive else None,
            "warning": self.warning, "moments_note": self.moments_note,
            "histogram": {"edges": list(self.histogram.edges), "counts": list(self.histogram.counts)},
            "shares_by_step": [_share_entry(row) for row in self.shares_by_step] if shares else [],
            "shares_by_equipment": [_share_entry(row) for row in self.shares_by_equipment] if shares else [],
        }


def _share_entry(row: tuple[str, float, float, int]) -> dict:
    group, share, error, trials = row
    return {"group": group, "share": share, "standard_error": error, "trials": trials}


def new_seed() -> int:
    """A seed for a run where the user gave none; it is recorded so the run can be repeated."""
    return secrets.randbits(32)


def evaluate_trials(model: Model, n: int, rng: np.random.Generator, hold: frozenset = frozenset()) -> dict:
    """Output arrays of n trials; sources named in `hold` stay at their estimates.

    Every source is drawn even when held, so runs with different `hold` sets
    share their random numbers (common random numbers: their difference is
    the held sources' effect, not sampling noise)."""
    draws = draw_many(list(model.sources.values()), n, rng)
    return _evaluate(model, held_draws(model, draws, hold, n), n, model.result_labels)


def _adaptive(model: Model, p: float, rng, progress) -> tuple[dict, dict]:
    """JCGM 101 7.9: batches of M trials until every output's statistics are stable."""
    m = adaptive_batch_size(p)
    kept: dict[str, list[np.ndarray]] = {label: [] for label in model.result_labels}
    batches: dict[str, list] = {label: [] for label in model.result_labels}
    checks: dict[str, AdaptiveCheck] = {}
    total = 0
    while total < MAX_ADAPTIVE_TRIALS:
        for label, arr in evaluate_trials(model, m, rng).items():
            kept[label].append(arr)
            batches[label].append(summarise(arr, p))
        total += m
        progress(m)
        done = True
        for label in model.result_labels:
            ok, checks[label] = adaptive_converged(batches[label], ndig=2, p=p)
            done = done and ok
        if done:
            break
    return {k: np.concatenate(v) for k, v in kept.items()}, checks


def share_trials(trials) -> int:
    """Most trials of the shares' runs: SHARE_TRIALS, fewer when the main run itself is smaller."""
    return SHARE_TRIALS if trials == "auto" else max(1000, min(SHARE_TRIALS, int(trials) // 4))


def _shares(model: Model, linear: list[LinearResult], seed: int, keys: tuple[str, ...], progress,
            n: int = SHARE_TRIALS) -> dict[str, dict[str, list[tuple[str, float, float, int]]]]:
    """Share of the variance removed when one group of sources is held at its estimates,
    1 - Var(held) / Var(all), on common random numbers with the linearised model as a control
    variate, in batches until precise or n trials (validate.propagation.mcshares)."""
    return mcshares.shares(model, linear, seed, keys, progress, n)


def propagate_mc(model: Model, linear: list[LinearResult], trials: int | str = 1_000_000,
                 seed: int | None = None, shares: bool = True, progress=None) -> list[McResult]:
    """Monte Carlo results for every output, validated against the GUM results (JCGM 101 clause 8).
    Raises InputError where the trials asked, and ModelError where the defined trials left, are too
    few for a coverage interval at the method's coverage probability."""
    seed = new_seed() if seed is None else int(seed)
    progress = progress or (lambda n: None)
    p = model.method.settings.coverage_probability
    if trials != "auto" and int(trials) < fewest_trials(p):
        raise InputError(f"{int(trials):,} Monte Carlo trials are too few for a {100 * p:g} % coverage interval "
                         f"(coverage_probability = {p:g} in [settings])", where="--trials",
                         fix=f"ask for at least {fewest_trials(p):,} trials (JCGM 101 7.2.2 advises at least "
                             f"10^4/(1 - p) = {10_000 / (1 - p):,.0f}), or lower coverage_probability")
    try:
        return _propagate(model, linear, trials, seed, p, shares, progress)
    except TooFewTrials as exc:  # most trials gave no defined result
        raise ModelError(f"Monte Carlo: {exc}; too many trials gave no defined result (see the model's "
                         "warnings), or ask for more trials") from exc


def _propagate(model: Model, linear: list[LinearResult], trials, seed: int, p: float, shares: bool,
               progress) -> list[McResult]:
    gums = {gum.name: gum for gum in linear}
    checks: dict[str, AdaptiveCheck] = {}
    if trials == "auto":
        rng = np.random.default_rng(seed)
        values, checks = _adaptive(model, p, rng, progress)
        kept = {name: Kept.of(gum, values.pop(name), p) for name, gum in gums.items()}
        final: dict[str, Final] = {}
        extend_whole(model, gums, kept, min(k.values.size + k.invalid for k in kept.values()), p, rng, progress, final)
    else:
        final = run_fixed(model, gums, int(trials), seed, p, progress)
    by = _shares(model, linear, seed + 1, ("step", "equipment"), progress, share_trials(trials)) if shares else {}
    reach = mcshares.t_inputs_reaching(model, linear)
    results = []
    for gum in linear:
        f = final[gum.name]
        results.append(McResult(gum.name, seed, f.summary, f.check, checks.get(gum.name), f.histogram,
                                tuple(by.get("step", {}).get(gum.name, ())),
                                tuple(by.get("equipment", {}).get(gum.name, ())),
                                *_tail_dof(model, reach[gum.name])))
    return results


def _tail_dof(model: Model, reach: dict[str, float]) -> tuple[float, bool]:
    """The least degrees of freedom of the tails the t inputs give a result, and whether an input
    acting only through the model's curvature gives them (mcshares.t_inputs_reaching)."""
    nu = min(reach.values(), default=math.inf)
    return nu, any(dof == nu and dof != model.sources[name].dof for name, dof in reach.items())


def symmetric_intervals(model: Model, trials: int, seed: int, labels: list[str] | None = None,
                        stream=np.random.default_rng) -> dict[str, CoverageInterval]:
    """The probabilistically symmetric coverage interval (JCGM 101 7.7.1) of every output (or of
    `labels`) from exactly `trials` trials of stream(seed), numpy's default generator unless the
    caller gives one that draws the same numbers: no comparison with the GUM interval (so no
    trials added) and no shares. What the advisor compares before and after a change."""
    p = model.method.settings.coverage_probability
    out = {}
    for group in label_groups(model.result_labels if labels is None else labels, trials):
        values = run_trials(model, trials, stream(seed), lambda n: None, group)
        for name in group:
            arr = values.pop(name)
            finite = np.sort(arr[np.isfinite(arr)])
            out[name] = coverage_interval_symmetric(finite, p, presorted=True)
    return out


def expected_work(trials: int | str, model: Model, linear: list[LinearResult] | None = None,
                  shares: bool = True) -> int:
    """Trials the run will evaluate, for a progress bar (the adaptive run is open-ended; the
    shares count at their most, share_trials, and stop early once precise; none where no result
    gets shares, see mcshares.with_shares: `linear` tells, when given)."""
    groups = len({s.step for s in model.sources.values()}) + len({s.equipment for s in model.sources.values()})
    if trials == "auto":
        main = adaptive_batch_size(model.method.settings.coverage_probability) * 10
    elif mcrounds.first_split(model.result_labels, int(trials), model.method.settings.coverage_probability):
        main = int(trials)  # one pass of draws for every result
    else:  # a run too large to keep every result's values at once runs once per group of results
        per = mcrounds.MAX_KEPT_BYTES // (8 * int(trials)) if 8 * int(trials) <= mcrounds.MAX_KEPT_BYTES else 1
        main = int(trials) * -(-len(model.result_labels) // max(1, per))
    shares = shares and (linear is None or bool(mcshares.with_shares(model, linear)))
    return main + (groups * share_trials(trials) if shares else 0)


__all__ = ["McResult", "propagate_mc", "evaluate_trials", "new_seed", "expected_work", "symmetric_intervals"]
