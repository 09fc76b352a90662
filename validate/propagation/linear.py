"""The linear engine: GUM law of propagation over the `uncertainties` package.

Every source becomes one `ufloat` tagged with its name; the model runs once on
them. Sensitivity coefficients are the partial derivatives the package carries
(GUM 5.1.3), contributions are c_i u(x_i) (GUM 5.1.2), the effective degrees of
freedom follow Welch-Satterthwaite (GUM G.4.1) and the coverage factor is the
t quantile at the coverage probability (GUM G.3, G.4).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass

from uncertainties import ufloat
from uncertainties.core import AffineScalarFunc

from validate.metrology.probability import normal_quantile, t_quantile
from validate.model.assay import Model, ModelError


@dataclass(frozen=True)
class Contribution:
    source: str
    step: str
    equipment: str
    value: float  # the source's estimate, in its own unit
    unit: str
    standard_uncertainty: float  # in the source's own unit
    distribution: str
    dof: float
    kind: str
    provenance: str
    sensitivity: float  # result unit per source unit
    contribution: float  # c_i u(x_i), in the result's unit (signed)
    share: float  # fraction of the combined variance

    def to_dict(self) -> dict:
        d = asdict(self)
        d["dof"] = None if math.isinf(self.dof) else self.dof
        return d


@dataclass(frozen=True)
class LinearResult:
    name: str
    unit: str
    value: float
    standard_uncertainty: float
    effective_dof: float
    coverage_factor: float
    coverage_probability: float
    expanded_uncertainty: float
    contributions: tuple[Contribution, ...]  # ranked by share, largest first

    def to_dict(self) -> dict:
        return {
            "name": self.name, "unit": self.unit, "value": self.value,
            "standard_uncertainty": self.standard_uncertainty,
            "expanded_uncertainty": self.expanded_uncertainty,
            "coverage_factor": self.coverage_factor,
            "coverage_probability": self.coverage_probability,
            "effective_dof": None if math.isinf(self.effective_dof) else self.effective_dof,
        }


def welch_satterthwaite(contributions: list[float], dofs: list[float], groups: list[str] | None = None) -> float:
    """nu_eff = u_c^4 / sum(u_i^4 / nu_i)  (GUM G.4.1).

    Contributions in one `group` rest on one estimated standard deviation: they
    enter as one component, u_g^2 = sum of their squares, with the group's nu.
    """
    groups = groups or [""] * len(contributions)
    components: dict[str, list] = {}
    terms = []
    for c, nu, g in zip(contributions, dofs, groups, strict=True):
        if g:
            entry = components.setdefault(g, [0.0, nu])
            entry[0] += c * c
        else:
            terms.append((c * c, nu))
    terms += [tuple(v) for v in components.values()]
    total = sum(var for var, _ in terms)
    denominator = sum(var**2 / nu for var, nu in terms if math.isfinite(nu) and var != 0)
    if denominator == 0:
        return math.inf
    return total**2 / denominator


def coverage_factor(p: float, dof: float) -> float:
    """k = t_{(1+p)/2, nu}; the normal quantile when nu is infinite (GUM G.3.4)."""
    if math.isinf(dof) or dof > 1e7:
        return float(normal_quantile(0.5 + p / 2.0))  # what scipy.stats.norm.ppf computes
    return float(t_quantile(0.5 + p / 2.0, dof))  # what scipy.stats.t.ppf computes


def propagate(model: Model) -> list[LinearResult]:
    variables = {name: ufloat(src.value, src.u, tag=name) for name, src in model.sources.items()}
    outputs = model.evaluate(variables)
    p = model.method.settings.coverage_probability
    results = []
    for label, y in outputs.items():
        unit = model.unit_of(label)
        if not isinstance(y, AffineScalarFunc):  # no uncertain input reached this result
            y = ufloat(float(y), 0.0)
        if not math.isfinite(y.nominal_value):
            raise ModelError(f"{label}: the model gives no finite value at the estimates")
        derivatives = {var.tag: d for var, d in y.derivatives.items()}
        rows = []
        for name, src in model.sources.items():
            d = derivatives.get(name, 0.0)
            rows.append((src, d * src.display_factor, d * src.u))
        u = y.std_dev  # the package's own combination; the contributions must add up to it
        variance = u * u
        contribs = [
            Contribution(src.name, src.step, src.equipment, src.value / src.display_factor, src.unit,
                         src.u / src.display_factor, src.distribution, src.dof, src.kind, src.provenance,
                         sens, c, (c * c / variance) if variance > 0 else 0.0)
            for src, sens, c in rows
        ]
        contribs.sort(key=lambda r: (-round(r.share, 12), r.source))  # round-off must not reorder
        group_of = {name: src.dof_group for name, src in model.sources.items()}
        dof = welch_satterthwaite([r.contribution for r in contribs], [r.dof for r in contribs],
                                  [group_of[r.source] for r in contribs])
        k = coverage_factor(p, dof)
        results.append(LinearResult(label, unit, y.nominal_value, u, dof, k, p, k * u, tuple(contribs)))
    return results


def _terms_by_source(y) -> dict[str, tuple[float, float]]:
    """{source name: (derivative, standard uncertainty)} of a linear-engine number."""
    if not isinstance(y, AffineScalarFunc):
        return {}
    return {str(var.tag): (d, var.std_dev) for var, d in y.derivatives.items()}


def covariance(outputs: Sequence) -> list[list[float]]:
    """Covariance matrix of outputs of the linear engine (GUM 5.2.2, uncorrelated inputs:
    u(y_i, y_j) = sum over sources of c_i c_j u(x)^2).

    Each sum is formed by math.fsum, which rounds the exact sum once, so its bits do not depend
    on the order of the terms: the same inputs give the same matrix in every run. (The
    `uncertainties` package's own covariance_matrix sums over a set of its variables, whose
    order follows their memory addresses, so its last digits change from run to run.)
    """
    terms = [_terms_by_source(y) for y in outputs]
    n = len(terms)
    matrix = [[0.0] * n for _ in range(n)]
    for i in range(n):
        for j in range(i + 1):
            shared = terms[i].keys() & terms[j].keys()
            value = math.fsum(terms[i][s][0] * terms[j][s][0] * terms[i][s][1] ** 2 for s in shared)
            matrix[i][j] = matrix[j][i] = value
    return matrix
