"""Monte Carlo shares of the variance by group of sources (by step, by equipment item).

A group's share is the part of an output's variance removed when the group's sources are held
at their estimates: 1 - Var(held) / Var(all). Every held-group run uses the same draws as the
base run (common random numbers), so their difference is the group's effect, not sampling noise.

Control variate. With the same draws the linearised model y_lin = sum_i c_i (x_i - x_i0) is
evaluated too (c_i: the GUM sensitivity coefficients, GUM 5.1.3). Its held-group share is known
exactly: sum_{i in g} c_i^2 var_i / sum_i c_i^2 var_i, with var_i the variance of the
distribution actually drawn (`drawn_variance`; uncorrelated inputs, the members of a dof group
included). The estimate is

    share = share_MC(y) - share_MC(y_lin) + share_lin,

both Monte Carlo shares on the same trials. For a linear model it is the exact share whatever
the trials; what noise is left comes from the model's departure from its linearisation only. An
output with an undefined trial (in the base run or a held run) gets the plain estimate over its
defined trials: the exact linear share is over every trial, and which trials fall out depends
on the inputs, so the control variate would carry a bias there.

Trials run in batches of SHARE_BATCH until every share's standard error is at most SHARE_TARGET,
or SHARE_TRIALS trials (the most). The standard error is the first-order (delta method) one:
sqrt(sum_j IF_j^2) / N over the N trials where both runs are defined, IF_j the estimator's
influence function at trial j (`_ratio_influence`), its centres (means, variances) taken per
batch. An output to which a t input gives tails of nu <= HEAVY_TAILS_DOF (`t_inputs_reaching`:
the input's own nu where its GUM contribution is not zero, nu/p where it acts through the
model's curvature) gets no shares: its variance exists only for nu > 2 and a variance ratio
has a finite standard error only where the fourth moment does, nu > 4 (any statistics handbook
on Student's t). Measured on the equilibrium demo
(nu = 3), the plain estimate at 50,000 trials moved a share by up to 22 percentage points between
seeds and the control variate widened that: a figure that cannot be given a precision is not
reported (the record says why, `McResult.moments_note`); the GUM budget stands for such outputs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from validate.metrology.sources import Source
from validate.model.assay import Model
from validate.propagation.distributions import draw_many
from validate.propagation.linear import LinearResult
from validate.propagation.mcrounds import evaluate

SHARE_TRIALS = 50_000  # the most trials of the shares' runs (each held group's run and the base run)
SHARE_BATCH = 10_000  # trials per batch: the standard error is looked at after each
SHARE_TARGET = 0.0025  # each share's standard error, as a fraction (0.25 percentage points)
HEAVY_TAILS_DOF = 4  # tails of at most this many degrees of freedom (t_inputs_reaching): no shares
PROBE_STEPS = (-5.0, -1.5, 1.5, 5.0)  # standard uncertainties a t input is moved by (`_growth` reads this order)
# Measured (benchmarks/share_precision.py; docs/design.md, "Monte Carlo"): on the assay demo the
# runs stop after one batch, the shares' spread over 20 seeds 0.005 percentage points at the
# median (0.015 at most) against 0.24 (0.47) for the plain estimate at 50,000 trials, at a
# quarter of the CPU; the stated error is 0.65 to 1.44 times the spread seen.


def drawn_variance(src: Source) -> float:
    """Variance of the distribution `distributions.draw` samples for a source (JCGM 101 6.4):
    u^2 for normal, rectangular and triangular (u is their standard deviation); w^2/3 + d^2/9
    for the curvilinear trapezoid (u^2 unless its half-width was clipped at zero); for t the
    scale u gives u^2 nu/(nu - 2) when nu > 2 (JCGM 101 6.4.9) and no finite variance else."""
    u = float(src.u)
    if u == 0.0:
        return 0.0
    if src.distribution == "t" and math.isfinite(src.dof):
        return u * u * src.dof / (src.dof - 2.0) if src.dof > 2 else math.inf
    if src.distribution == "trapezoid":
        return src.half_width**2 / 3.0 + float(src.trapezoid_d) ** 2 / 9.0
    return u * u


def held_draws(model: Model, draws: dict[str, np.ndarray], hold, n: int) -> dict[str, np.ndarray]:
    """The draws with the sources named in `hold` at their estimates (the others shared, not copied)."""
    if not hold:
        return draws
    return {**draws, **{name: np.full(n, model.sources[name].value) for name in hold}}


class Moments:
    """Count, mean and sum of squared deviations of each column's defined values, added a batch
    at a time (the pairwise update of Chan, Golub and LeVeque: no sums of squares of raw values)."""

    def __init__(self, width: int):
        self.n = np.zeros(width)
        self.mean = np.zeros(width)
        self.m2 = np.zeros(width)

    def add(self, part: _Spread) -> None:
        """Add a batch's values, given as their spread."""
        k = part.k
        total = self.n + k
        with np.errstate(invalid="ignore", divide="ignore"):
            delta = part.mean - self.mean
            self.m2 += part.m2 + np.where(total > 0, delta * delta * self.n * k / total, 0.0)
            self.mean += np.where(total > 0, delta * k / total, 0.0)
        self.n = total

    @property
    def variance(self) -> np.ndarray:
        """Variance (divisor n, as numpy's var); nan with fewer than two values."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.n > 1, self.m2 / self.n, np.nan)


@dataclass
class _Spread:
    """A batch's values on the trials `ok`, a column per output: count, mean, squared deviations
    from the mean (0 where not ok), their sum and their mean (the variance, divisor k)."""

    k: np.ndarray
    mean: np.ndarray
    d: np.ndarray
    m2: np.ndarray
    v: np.ndarray

    @classmethod
    def of(cls, values: np.ndarray, ok: np.ndarray) -> _Spread:
        k = ok.sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            if ok.all():
                mean = values.mean(axis=0)
                d = values - mean
            else:  # undefined trials count as at the mean: no deviation, no influence
                d = np.where(ok, values, 0.0)
                mean = np.where(k > 0, d.sum(axis=0) / k, 0.0)
                d -= mean
                d *= ok
            np.square(d, out=d)
            m2 = d.sum(axis=0)
            v = np.where(k > 0, m2 / k, 0.0)
        return cls(k, mean, d, m2, v)

    @cached_property
    def excess(self) -> np.ndarray:
        """Each trial's squared deviation less the variance (a base run's serves every held run)."""
        return self.d - self.v


def _ratio_influence(all_: _Spread, held: _Spread) -> np.ndarray:
    """Influence function of R = Var(held)/Var(all), a column per output, over the trials where
    both are defined (both spreads taken on them): (e_held - R e_all) / Var(all), e a trial's
    squared deviation less the variance (first order, delta method). It is 0 (to round-off) on a
    trial not defined, and 0 in a column without variance."""
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.where(all_.v > 0, 1.0 / all_.v, 0.0)
        ratio = held.v * scale
    out = held.d - held.v
    out *= scale
    out -= all_.excess * (ratio * scale)
    return out


class _HeldSums:
    """One held set's sums, a column per output: its model values and linearised values (each
    on the trials where the held run is defined), and the squared influence of the estimators
    over the trials where both runs are defined."""

    def __init__(self, width: int):
        self.y = Moments(width)
        self.lin = Moments(width)
        self.influence2 = np.zeros(width)  # with the control variate
        self.plain2 = np.zeros(width)  # without
        self.joint = np.zeros(width)

    def add(self, y0: np.ndarray, l0: np.ndarray, ok0: np.ndarray, base: tuple[_Spread, _Spread],
            yh: np.ndarray, lh: np.ndarray) -> None:
        """A batch: the base run's values (y0, l0, defined where ok0; `base` their spreads) and
        this held run's (yh, lh), with the influence sums of the standard errors."""
        okh = np.isfinite(yh)
        both = ok0 & okh
        held = (_Spread.of(yh, both), _Spread.of(lh, both))
        usual = np.array_equal(both, okh)  # the base run is defined wherever this one is
        self.y.add(held[0] if usual else _Spread.of(yh, okh))
        self.lin.add(held[1] if usual else _Spread.of(lh, okh))
        if not np.array_equal(both, ok0):
            base = (_Spread.of(y0, both), _Spread.of(l0, both))
        plain = _ratio_influence(base[0], held[0])  # the plain share is 1 - R: its influence is -that
        influence = _ratio_influence(base[1], held[1])
        influence -= plain
        k = held[0].k
        self.influence2 += np.where(k > 1, np.square(influence).sum(axis=0), 0.0)
        self.plain2 += np.where(k > 1, np.square(plain).sum(axis=0), 0.0)
        self.joint += np.where(k > 1, k, 0)


@dataclass(frozen=True)
class Share:
    """One group's share for one output, with the parts it is made of."""

    share: float  # the estimate reported
    plain: float  # 1 - Var(held)/Var(all) of the model
    linear_mc: float  # the same of the linearised model on the same trials (nan: no control variate)
    linear_exact: float  # its exact value (nan: no control variate)
    standard_error: float  # first-order standard error of `share`
    plain_standard_error: float  # the same of `plain`, for comparison
    trials: int


@dataclass(frozen=True)
class _Linearised:
    """Sensitivity coefficients of the outputs with a control variate, as a matrix."""

    names: list[str]  # sources with a coefficient, sorted
    coefficients: np.ndarray  # (sources, outputs); a zero column for an output without one
    terms: dict[str, dict[str, float]]  # output -> source -> c_i^2 var_i

    def exact(self, label: str, held: frozenset) -> float:
        terms = self.terms[label]
        return math.fsum(v for k, v in terms.items() if k in held) / math.fsum(terms.values())

    def values(self, draws: dict[str, np.ndarray], model: Model, n: int) -> tuple[np.ndarray, np.ndarray]:
        """y_lin of every output for these draws, (trials, outputs), and the deviations
        x_i - x_i0 it is made of, (trials, sources)."""
        deviations = np.empty((n, len(self.names)), order="F")
        for j, name in enumerate(self.names):
            np.subtract(draws[name], model.sources[name].value, out=deviations[:, j])
        return deviations @ self.coefficients, deviations


def _linearised(model: Model, linear: list[LinearResult]) -> _Linearised:
    """c_i = contribution / u (the contribution is c_i u(x_i), GUM 5.1.3) of every output given
    with some variance (their columns in the order of `linear`)."""
    variances = {name: drawn_variance(src) for name, src in model.sources.items()}
    terms: dict[str, dict[str, float]] = {}
    coefficient: dict[str, dict[str, float]] = {}
    for gum in linear:
        c = {row.source: row.contribution / model.sources[row.source].u
             for row in gum.contributions if row.contribution != 0}
        t = {name: ci * ci * variances[name] for name, ci in c.items()}
        if math.fsum(t.values()) > 0:
            coefficient[gum.name], terms[gum.name] = c, t
    labels = [gum.name for gum in linear]
    names = sorted({name for c in coefficient.values() for name in c})
    matrix = np.zeros((len(names), len(labels)))
    for j, label in enumerate(labels):
        for i, name in enumerate(names):
            matrix[i, j] = coefficient.get(label, {}).get(name, 0.0)
    return _Linearised(names, matrix, terms)


def with_shares(model: Model, linear: list[LinearResult]) -> list[LinearResult]:
    """The outputs that get shares: those to which no t input gives tails of nu <= HEAVY_TAILS_DOF
    (no finite fourth moment: a variance ratio without a standard error)."""
    reach = t_inputs_reaching(model, linear)
    return [gum for gum in linear if not any(dof <= HEAVY_TAILS_DOF for dof in reach[gum.name].values())]


def t_inputs_reaching(model: Model, linear: list[LinearResult]) -> dict[str, dict[str, float]]:
    """For each output, the t-distributed inputs (finite nu, u > 0) that reach it, each with the
    degrees of freedom of the tails it gives the output: an output that goes as |x - x0|^p far
    out has the moments of order k < nu/p, the tails of a t with nu/p.
    - A non-zero GUM contribution: p = 1, the input's own nu.
    - A sensitivity of zero at the estimates (an extremum, a symmetric model): the input moved
      alone by PROBE_STEPS standard uncertainties shows whether it acts all the same, and p from
      the growth of the change between 1.5 and 5 u (2 for y = x^2; 2 where a move leaves the
      output undefined and no growth can be read).
    - Inputs that act only together (a product of two inputs at zero): moved at once, each is
      counted with its own nu (a product of independent inputs has the moments its factors have).
    A model whose response grows faster beyond 5 u than between 1.5 and 5 u is not caught."""
    t_inputs = {s.name: s for s in model.sources.values() if _t_input(s)}
    labels = [gum.name for gum in linear]
    reached = {gum.name: {name: float(t_inputs[name].dof) for name in _contributing(gum, set(t_inputs))}
               for gum in linear}
    unseen = [s for s in t_inputs.values() if any(s.name not in r for r in reached.values())]
    if unseen:
        powers = _moved(model, [(s,) for s in unseen], labels)
        for label, found in reached.items():
            for src, power in zip(unseen, powers[label], strict=True):
                if src.name not in found and power is not None:
                    found[src.name] = src.dof / power
        _acting_together(model, unseen, reached)
    return reached


def _acting_together(model: Model, unseen: list[Source], reached: dict[str, dict[str, float]]) -> None:
    """Add to each output the unseen inputs that change it only when moved at once."""
    left = {label: tuple(s for s in unseen if s.name not in found) for label, found in reached.items()}
    sets = list(dict.fromkeys(group for group in left.values() if len(group) > 1))
    if not sets:
        return
    powers = _moved(model, sets, list(reached))
    for label, group in left.items():
        if len(group) > 1 and powers[label][sets.index(group)] is not None:
            reached[label].update({src.name: float(src.dof) for src in group})


def _t_input(src: Source) -> bool:
    return src.distribution == "t" and src.u > 0 and math.isfinite(src.dof)


def _contributing(gum: LinearResult, names: set[str]) -> set[str]:
    """The sources among `names` with a non-zero GUM contribution to the output."""
    return {row.source for row in gum.contributions if row.contribution != 0 and row.source in names}


def _moved(model: Model, groups: list[tuple[Source, ...]], labels: list[str]) -> dict[str, list[float | None]]:
    """For each output and each group of inputs moved together (to value + k u, k in PROBE_STEPS;
    every other source at its estimate): None where no move changes the output, else the power
    p the change grows with (`_growth`). One evaluation of 1 + len(PROBE_STEPS) per group trials,
    the first at the estimates."""
    k = len(PROBE_STEPS)
    draws = {name: np.full(1 + k * len(groups), float(src.value)) for name, src in model.sources.items()}
    for i, group in enumerate(groups):
        for src in group:
            draws[src.name][1 + i * k:1 + (i + 1) * k] = float(src.value) + np.asarray(PROBE_STEPS) * float(src.u)
    values = evaluate(model, draws, 1 + k * len(groups), labels)
    return {label: [_growth(values[label][0], values[label][1 + i * k:1 + (i + 1) * k]) for i in range(len(groups))]
            for label in labels}


def _growth(base: float, moved: np.ndarray) -> float | None:
    """None where the moves (at PROBE_STEPS) leave the output as it is; else p with |change| ~ k^p,
    the larger of the two sides' log(change at 5 u / change at 1.5 u) / log(5 / 1.5), within 1 to
    8; 2 where a move leaves the output undefined or a side's change cannot be read."""
    change = np.abs(moved - base)
    undefined = np.isnan(moved) != np.isnan(base)
    if not (undefined.any() or (change > 0).any()):
        return None
    if undefined.any() or not np.isfinite(change).all():
        return 2.0
    sides = [(change[0], change[1]), (change[3], change[2])]  # (at 5 u, at 1.5 u) below and above
    found = [math.log(far / near) / math.log(5.0 / 1.5) for far, near in sides if far > 0 and near > 0]
    return min(8.0, max(1.0, *found)) if found else 2.0


def share_estimates(model: Model, linear: list[LinearResult], seed: int, keys: tuple[str, ...],
                    progress, n: int = SHARE_TRIALS,
                    target: float = SHARE_TARGET) -> dict[str, dict[str, list[tuple[str, Share]]]]:
    """{key: {output: [(group, Share)]}} of the outputs `with_shares`, groups in the order first met
    among the sources; no trials at all when there is none."""
    given = with_shares(model, linear)
    if not given:
        return {key: {} for key in keys}
    labels = [gum.name for gum in given]
    lin = _linearised(model, given)
    groups = {key: _groups(model, key) for key in keys}
    held_sets = list(dict.fromkeys(frozenset(names) for g in groups.values() for names in g.values()))
    sources = list(model.sources.values())
    rng = np.random.default_rng(seed)
    base = (Moments(len(labels)), Moments(len(labels)))
    sums = {held: _HeldSums(len(labels)) for held in held_sets}
    done = 0
    while done < n:
        b = min(SHARE_BATCH, n - done)
        _add_batch(model, lin, labels, draw_many(sources, b, rng), b, base, sums)
        done += b
        progress(b * sum(len(g) for g in groups.values()))
        out = _estimates(groups, base[0], base[1], sums, lin, labels, done)
        if _precise(out, target):
            break
    return out


def _add_batch(model: Model, lin: _Linearised, labels: list[str], draws: dict[str, np.ndarray], b: int,
               base: tuple[Moments, Moments], sums: dict[frozenset, _HeldSums]) -> None:
    """One batch of b drawn trials: the base run and every held set's run, model and linearised."""
    y0 = _outputs(model, draws, b, labels)
    l0, deviations = lin.values(draws, model, b)
    ok0 = np.isfinite(y0)
    spread = (_Spread.of(y0, ok0), _Spread.of(l0, ok0))
    base[0].add(spread[0])
    base[1].add(spread[1])
    position = {name: i for i, name in enumerate(lin.names)}
    for held, held_sums in sums.items():
        yh = _outputs(model, held_draws(model, draws, held, b), b, labels)
        rows = sorted(position[name] for name in held if name in position)  # not in the set's order
        lh = l0 - deviations[:, rows] @ lin.coefficients[rows] if rows else l0
        held_sums.add(y0, l0, ok0, spread, yh, lh)


def _outputs(model: Model, draws: dict[str, np.ndarray], n: int, labels: list[str]) -> np.ndarray:
    """The model's outputs for n trials, (trials, outputs), each column filled in place."""
    values = np.empty((n, len(labels)), order="F")
    evaluate(model, draws, n, labels, {label: values[:, j] for j, label in enumerate(labels)})
    return values


def _groups(model: Model, key: str) -> dict[str, set[str]]:
    groups: dict[str, set[str]] = {}
    for name, src in model.sources.items():
        groups.setdefault(getattr(src, key) or "(none)", set()).add(name)
    return groups


def _estimates(groups, base_y: Moments, base_lin: Moments, sums, lin: _Linearised, labels,
               trials: int) -> dict[str, dict[str, list[tuple[str, Share]]]]:
    v_all, w_all = base_y.variance, base_lin.variance
    out: dict[str, dict[str, list[tuple[str, Share]]]] = {}
    for key, by_group in groups.items():
        out[key] = {label: [] for label in labels}
        for group, names in by_group.items():
            s = sums[frozenset(names)]
            v_held, w_held = s.y.variance, s.lin.variance
            with np.errstate(invalid="ignore", divide="ignore"):
                se = np.where(s.joint > 0, np.sqrt(s.influence2) / s.joint, np.nan)
                se_plain = np.where(s.joint > 0, np.sqrt(s.plain2) / s.joint, np.nan)
            for j, label in enumerate(labels):
                plain = 1.0 - v_held[j] / v_all[j] if v_all[j] > 0 else 0.0
                # the exact linear share is over every trial: where some trial of y is undefined, y_lin's
                # share on the defined ones is not centred on it (which trials fall out depends on the
                # inputs), and the control variate would add a bias no number of trials removes
                every_trial = base_y.n[j] == trials and s.y.n[j] == trials
                if every_trial and label in lin.terms and v_all[j] > 0 and w_all[j] > 0:
                    exact = lin.exact(label, frozenset(names))
                    linear_mc = 1.0 - w_held[j] / w_all[j]
                    share, error = plain - linear_mc + exact, se[j]
                else:
                    exact = linear_mc = math.nan
                    share, error = plain, se_plain[j]
                out[key][label].append((group, Share(float(share), float(plain), float(linear_mc), exact,
                                                     float(error), float(se_plain[j]), trials)))
    return out


def _precise(estimates, target: float) -> bool:
    """Every defined share's standard error at most `target` (a share with no variance to
    estimate, nan, cannot be made more precise by more trials and does not hold the run)."""
    return all(math.isnan(s.share) or s.standard_error <= target
               for by_label in estimates.values() for rows in by_label.values() for _, s in rows)


def shares(model: Model, linear: list[LinearResult], seed: int, keys: tuple[str, ...], progress,
           n: int = SHARE_TRIALS) -> dict[str, dict[str, list[tuple[str, float, float, int]]]]:
    """{key: {output: [(group, share, standard error, trials)]}}, largest share first (ties by group
    name)."""
    out = {}
    for key, by_label in share_estimates(model, linear, seed, keys, progress, n).items():
        out[key] = {label: sorted(((g, s.share, s.standard_error, s.trials) for g, s in rows),
                                  key=lambda t: (-round(t[1], 12), t[0]))
                    for label, rows in by_label.items()}
    return out
