"""The Monte Carlo engine (JCGM 101): the same model evaluated on arrays of trials.

Trials are drawn for every source (validate.propagation.distributions), the
model runs once per chunk of trials on numpy arrays, so the calibration line
is refitted in every trial without a Python loop per trial. Memory stays
bounded by the chunk size, apart from the output values kept for the
coverage intervals (8 bytes per trial and result).

Trials whose result is undefined (NaN or infinite, e.g. a zero slope) are
counted and reported, never dropped silently (docs/design.md, "Monte Carlo").
"""

from __future__ import annotations

import math
import secrets
from dataclasses import dataclass

import numpy as np

from validate.model.assay import Model
from validate.propagation.distributions import draw_many
from validate.propagation.gumcheck import GumCheck, check_gum
from validate.propagation.linear import LinearResult
from validate.propagation.mcstats import (
    AdaptiveCheck,
    HistogramData,
    McSummary,
    adaptive_batch_size,
    adaptive_converged,
    histogram_data,
    summarise,
)

CHUNK = 100_000  # trials evaluated together: large enough for numpy, small enough for memory
MAX_ADAPTIVE_TRIALS = 10_000_000
SHARE_TRIALS = 50_000  # trials per held-group run for the Monte Carlo shares (common random numbers)
INVALID_WARNING = 0.001  # share of undefined trials above which a warning is shown
MAX_CHECK_TRIALS = 10_000_000  # trial budget of the JCGM 101 8.2 comparison per output
CHECK_GROWTH = 10  # ... and at most this many times the trials asked for (a small run stays small)
MAX_KEPT_VALUES = 40_000_000  # values kept over all outputs still being compared (320 MB)


@dataclass(frozen=True)
class McResult:
    name: str
    seed: int
    summary: McSummary
    check: GumCheck  # JCGM 101 8.2, decided beyond Monte Carlo noise
    adaptive: AdaptiveCheck | None
    histogram: HistogramData
    shares_by_step: tuple[tuple[str, float], ...]
    shares_by_equipment: tuple[tuple[str, float], ...]
    smallest_dof: float = math.inf  # least degrees of freedom of a t input that reaches the result

    @property
    def variance_exists(self) -> bool:
        """A t input with nu <= 2 has no finite variance, so neither has the output (JCGM 101 6.4.9)."""
        return self.smallest_dof > 2

    @property
    def mean_exists(self) -> bool:
        return self.smallest_dof > 1

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
            return (f"an input drawn from a t distribution with {nu:g} degrees of freedom has no finite "
                    "variance, so the output has none: the Monte Carlo standard uncertainty and the "
                    "variance shares do not exist and are not reported; the coverage intervals stand")
        if nu <= 4:
            return (f"an input drawn from a t distribution with {nu:g} degrees of freedom (at most 4) has "
                    "no finite fourth moment: the Monte Carlo standard uncertainty and the variance "
                    "shares vary strongly between runs; rely on the coverage intervals")
        return None

    def to_dict(self) -> dict:
        s, c = self.summary, self.check
        v = c.validation
        shares = self.variance_exists
        return {
            "trials": s.total_trials, "mean": s.mean if self.mean_exists else None,
            "standard_uncertainty": s.standard_deviation if shares else None,
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
            "shares_by_step": [{"group": g, "share": x} for g, x in self.shares_by_step] if shares else [],
            "shares_by_equipment": ([{"group": g, "share": x} for g, x in self.shares_by_equipment]
                                    if shares else []),
        }


def new_seed() -> int:
    """A seed for a run where the user gave none; it is recorded so the run can be repeated."""
    return secrets.randbits(32)


def evaluate_trials(model: Model, n: int, rng: np.random.Generator, hold: frozenset = frozenset()) -> dict:
    """Output arrays of n trials; sources named in `hold` stay at their estimates.

    Every source is drawn even when held, so runs with different `hold` sets
    share their random numbers (common random numbers: their difference is
    the held sources' effect, not sampling noise)."""
    draws = draw_many(list(model.sources.values()), n, rng)
    for name in hold:
        draws[name] = np.full(n, model.sources[name].value)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        out = model.evaluate(draws)
    return {k: np.broadcast_to(np.asarray(v, dtype=float), (n,)) for k, v in out.items()}


def _fixed(model: Model, trials: int, rng, progress, labels=None) -> dict[str, np.ndarray]:
    """Output values of `trials` trials, kept for `labels` (every output when None)."""
    labels = model.result_labels if labels is None else labels
    values = {label: np.empty(trials) for label in labels}
    done = 0
    while done < trials:
        n = min(CHUNK, trials - done)
        out = evaluate_trials(model, n, rng)
        for label in labels:
            values[label][done:done + n] = out[label]
        done += n
        progress(n)
    return values


def _adaptive(model: Model, p: float, rng, progress) -> tuple[dict, dict]:
    """JCGM 101 7.9: batches of M trials until every output's statistics are stable."""
    m = adaptive_batch_size(p)
    kept: dict[str, list[np.ndarray]] = {label: [] for label in model.result_labels}
    batches: dict[str, list] = {label: [] for label in model.result_labels}
    checks: dict[str, AdaptiveCheck] = {}
    total = 0
    while total < MAX_ADAPTIVE_TRIALS:
        for label, arr in evaluate_trials(model, m, rng).items():
            kept[label].append(np.array(arr))
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
    """Trials per held-group run: SHARE_TRIALS, fewer when the main run itself is smaller."""
    return SHARE_TRIALS if trials == "auto" else max(1000, min(SHARE_TRIALS, int(trials) // 4))


def _shares(model: Model, seed: int, key: str, progress, n: int = SHARE_TRIALS) -> dict[str, list[tuple[str, float]]]:
    """Share of the variance removed when one group of sources is held at its estimates:
    1 - Var(held) / Var(all), from runs of n trials on common random numbers."""
    groups: dict[str, set] = {}
    for name, src in model.sources.items():
        groups.setdefault(getattr(src, key) or "(none)", set()).add(name)
    base = evaluate_trials(model, n, np.random.default_rng(seed))
    var0 = {k: _defined_variance(v) for k, v in base.items()}
    shares: dict[str, list[tuple[str, float]]] = {label: [] for label in model.result_labels}
    for group, names in groups.items():
        held = evaluate_trials(model, n, np.random.default_rng(seed), frozenset(names))
        progress(n)
        for label, arr in held.items():
            share = 1.0 - _defined_variance(arr) / var0[label] if var0[label] > 0 else 0.0
            shares[label].append((group, float(share)))
    return {k: sorted(v, key=lambda t: (-round(t[1], 12), t[0])) for k, v in shares.items()}


def _defined_variance(arr: np.ndarray) -> float:
    """Variance over the defined trials; nan, without numpy's warning, when fewer than two are
    defined (a point left out of an equilibrium study can have none in a held-group run)."""
    return float(np.nanvar(arr)) if np.count_nonzero(~np.isnan(arr)) > 1 else math.nan


def propagate_mc(model: Model, linear: list[LinearResult], trials: int | str = 1_000_000,
                 seed: int | None = None, shares: bool = True, progress=None) -> list[McResult]:
    """Monte Carlo results for every output, validated against the GUM results (JCGM 101 clause 8)."""
    seed = new_seed() if seed is None else int(seed)
    progress = progress or (lambda n: None)
    p = model.method.settings.coverage_probability
    rng = np.random.default_rng(seed)
    if trials == "auto":
        values, checks = _adaptive(model, p, rng, progress)
    else:
        values, checks = _fixed(model, int(trials), rng, progress), {}
    gums = {gum.name: gum for gum in linear}
    values, gum_checks = _checked(model, gums, values, p, rng, progress)
    n_shares = share_trials(trials)
    by_step = _shares(model, seed + 1, "step", progress, n_shares) if shares else {}
    by_item = _shares(model, seed + 1, "equipment", progress, n_shares) if shares else {}
    results = []
    for gum in linear:
        arr = values[gum.name]
        summary = summarise(arr, p)
        # the histogram shows the central part: the 95 % interval widened by 60 % on each side
        low95, high95 = summary.symmetric.low, summary.symmetric.high
        spread = 0.6 * (high95 - low95)
        window = (low95 - spread, high95 + spread) if high95 > low95 else None
        histogram = histogram_data(arr, bins=80, value_range=window)
        results.append(McResult(gum.name, seed, summary, gum_checks[gum.name], checks.get(gum.name), histogram,
                                tuple(by_step.get(gum.name, ())), tuple(by_item.get(gum.name, ())),
                                smallest_t_dof(model, gum)))
    return results


def smallest_t_dof(model: Model, gum: LinearResult) -> float:
    """The least degrees of freedom of a t-distributed input that reaches the result."""
    dofs = [model.sources[row.source].dof for row in gum.contributions
            if row.contribution != 0 and model.sources[row.source].distribution == "t"]
    return min(dofs, default=math.inf)


def _check(gum: LinearResult, arr: np.ndarray, p: float) -> GumCheck:
    finite = np.sort(arr[np.isfinite(arr)])
    return check_gum(gum.value, gum.expanded_uncertainty, gum.standard_uncertainty, finite, p)


def _checked(model: Model, gums: dict[str, LinearResult], values: dict[str, np.ndarray], p: float, rng,
             progress) -> tuple[dict[str, np.ndarray], dict[str, GumCheck]]:
    """JCGM 101 8.2 for every output; more trials (kept only for the outputs still open) while a
    verdict is undecided or the Monte Carlo ends are not yet known to delta/5, within the budget."""
    checks = {name: _check(gum, values[name], p) for name, gum in gums.items()}
    total = min(arr.size for arr in values.values()) if values else 0
    budget = min(MAX_CHECK_TRIALS, CHECK_GROWTH * total)
    while True:
        open_ = [name for name, c in checks.items() if not c.settled]
        more = min(total, budget - total)
        if not open_ or more <= 0 or len(open_) * (total + more) > MAX_KEPT_VALUES:
            return values, checks
        extra = _fixed(model, more, rng, progress, open_)
        total += more
        for name in open_:
            values[name] = np.concatenate([values[name], extra[name]])
            checks[name] = _check(gums[name], values[name], p)


def expected_work(trials: int | str, model: Model, shares: bool = True) -> int:
    """Trials the run will evaluate, for a progress bar (the adaptive run is open-ended)."""
    groups = len({s.step for s in model.sources.values()}) + len({s.equipment for s in model.sources.values()})
    main = adaptive_batch_size(model.method.settings.coverage_probability) * 10 if trials == "auto" else int(trials)
    return main + (groups * share_trials(trials) if shares else 0)


__all__ = ["McResult", "propagate_mc", "evaluate_trials", "new_seed", "expected_work"]
