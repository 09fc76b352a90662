"""Drawing Monte Carlo trial values for the input quantities (JCGM 101:2008, 6.4).

Each `Source` carries its estimate, GUM standard uncertainty `u` and the name
of its distribution; `draw` turns that into n trial values. The shapes follow
JCGM 101:2008 (GUM Supplement 1), clause 6.4:

- normal (Gaussian, 6.4.7): value + u z, z standard normal;
- rectangular (6.4.2): half-width a = u sqrt(3), value + a (2 r - 1);
- triangular, symmetric (6.4.5): half-width a = u sqrt(6),
  value + a (r1 + r2 - 1) (the sum of two rectangular variates);
- t, scaled and shifted (6.4.9): value + u t_dof. For a Type A input the GUM
  standard uncertainty u = s / sqrt(n) is the SCALE of this distribution, not
  its standard deviation: the trial values have standard deviation
  u sqrt(dof / (dof - 2)) for dof > 2 and an infinite one for dof <= 2. That is
  intended (JCGM 101 6.4.9): Monte Carlo then accounts for the few
  replicates, as Welch-Satterthwaite does in the linear engine;
- curvilinear trapezoid (6.4.3): a rectangular distribution whose half-width is
  itself uncertain, uniform in [w - d, w + d] with w = source.half_width and
  d = source.trapezoid_d. Sampling per 6.4.3.4: a random half-width from r1,
  then a point inside it from r2.

Degrees of freedom of non-t sources do not change their shape (JCGM 101 uses
the t distribution for Type A inputs only). A source with u == 0 gives a
constant array and draws no random numbers.

Speed matters here (10^6 - 10^7 trials per source): each branch uses the
Generator's vectorised draws and operates in place to avoid temporaries.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np

from validate.metrology.sources import Source

SQRT3 = math.sqrt(3.0)
SQRT6 = math.sqrt(6.0)


def _check_n(n) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ValueError(f"number of Monte Carlo trials must be a positive integer, got {n!r}")
    return int(n)


def _rectangular(value: float, a: float, n: int, rng: np.random.Generator) -> np.ndarray:
    x = rng.random(n)  # r in [0, 1)
    x *= 2.0 * a
    x += value - a
    return x


def _triangular(value: float, a: float, n: int, rng: np.random.Generator) -> np.ndarray:
    x = rng.random(n)
    x += rng.random(n)  # r1 + r2: symmetric triangular on [0, 2]
    x -= 1.0
    x *= a
    x += value
    return x


def _normal(value: float, scale: float, n: int, rng: np.random.Generator) -> np.ndarray:
    x = rng.standard_normal(n)
    x *= scale
    x += value
    return x


def _scaled_t(value: float, scale: float, dof: float, n: int, rng: np.random.Generator) -> np.ndarray:
    if math.isinf(dof):  # t with infinitely many degrees of freedom is the normal
        return _normal(value, scale, n, rng)
    x = rng.standard_t(dof, n)
    x *= scale
    x += value
    return x


def _curvilinear_trapezoid(value: float, w: float, d: float, n: int, rng: np.random.Generator) -> np.ndarray:
    # JCGM 101 6.4.3.4: a_s = (a - d) + 2 d r1, b_s = (a + b) - a_s, xi = a_s + (b_s - a_s) r2.
    # Centred on `value` this is: half-width h = w + d (1 - 2 r1), xi = value + h (2 r2 - 1).
    h = rng.random(n)
    h *= -2.0 * d
    h += w + d
    x = rng.random(n)
    x *= 2.0
    x -= 1.0
    x *= h
    x += value
    return x


def draw(source: Source, n: int, rng: np.random.Generator) -> np.ndarray:
    """n trial values (float64, shape (n,)) of one input quantity, JCGM 101 6.4."""
    n = _check_n(n)
    value, u = float(source.value), float(source.u)
    if u == 0.0:
        return np.full(n, value, dtype=np.float64)
    kind = source.distribution
    if kind == "normal":
        return _normal(value, u, n, rng)
    if kind == "rectangular":
        return _rectangular(value, u * SQRT3, n, rng)
    if kind == "triangular":
        return _triangular(value, u * SQRT6, n, rng)
    if kind == "t":
        return _scaled_t(value, u, float(source.dof), n, rng)
    if kind == "trapezoid":
        return _curvilinear_trapezoid(value, source.half_width, float(source.trapezoid_d), n, rng)
    raise ValueError(f"source {source.name}: no sampler for distribution {kind!r}")


def drawing_order(sources: Iterable[Source]) -> list[Source]:
    """The sources in the order `draw_many` draws them: sorted by name, duplicates merged.

    Sorting by name makes the draws independent of how the caller collected
    the sources (a set's order changes between Python processes). The same
    Source object listed twice is drawn once; two different sources with one
    name are an error, because their trial arrays could not be told apart.
    """
    by_name: dict[str, Source] = {}
    for src in sources:
        seen = by_name.get(src.name)
        if seen is not None and seen != src:
            raise ValueError(
                f"two different uncertainty sources share the name {src.name!r}; "
                "give each source its own name"
            )
        by_name[src.name] = src
    return [by_name[name] for name in sorted(by_name)]


def draw_many(sources: Iterable[Source], n: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Trial arrays for all sources, keyed by source name.

    Drawing order is fixed and documented: sources sorted by name, each taking
    its whole block of n trials from `rng` before the next; then one factor per
    `dof_group` (sorted by group name). The same seed and the same set of
    sources therefore reproduce every array bit for bit.

    t sources that share a `dof_group` rest on one estimated standard deviation
    with `dof` degrees of freedom, so they follow a multivariate t distribution
    (JCGM 102:2011, GUM Supplement 2, multivariate t; recalled from memory):
    x_i = value_i + u_i z_i sqrt(dof / chi2_dof), the chi-square draw shared by
    the group in each trial and the z_i independent standard normals.
    """
    n = _check_n(n)
    ordered = drawing_order(sources)
    grouped = [s for s in ordered if s.dof_group and s.distribution == "t" and s.u > 0
               and math.isfinite(s.dof)]
    in_groups = {s.name for s in grouped}  # by name (unique here): no comparison of sources field by field
    out = {src.name: draw(src, n, rng) for src in ordered if src.name not in in_groups}
    for group in sorted({s.dof_group for s in grouped}):
        out.update(_draw_group(group, [s for s in grouped if s.dof_group == group], n, rng))
    return out


def _draw_group(group: str, members: list[Source], n: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """One dof group's multivariate t trials: a standard normal block per member (in order), then
    one chi-square factor shared by the group in each trial (see `draw_many`)."""
    dof = members[0].dof
    if any(s.dof != dof for s in members):
        raise ValueError(f"sources of group {group!r} must share their degrees of freedom")
    out = {src.name: rng.standard_normal(n) for src in members}
    factor = np.sqrt(dof / rng.chisquare(dof, n))
    for src in members:
        x = out[src.name]
        x *= factor
        x *= src.u
        x += src.value
    return out
