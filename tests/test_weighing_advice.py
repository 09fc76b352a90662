"""The advisor's "larger weighing" candidates (validate.advisor.weighing): where a weighing
weighs in the budget, a larger mass into a larger flask, or into the same flask with more
dilution after it, beside a better balance. Checked on the invented phosphate demo: the
concentrations stay as they are, and the mass's relative uncertainty falls by the mass factor
(the balance adds the same absolute terms to any mass, docs/design.md, "Mass by difference")."""

from __future__ import annotations

import math
from pathlib import Path

import pytest
from conftest import DEMOS

from validate.advisor.advice import generate
from validate.advisor.candidates import Shares
from validate.advisor.weighing import weighing_candidates
from validate.inputs.method_file import load_method
from validate.inputs.registers import merge_registers
from validate.model.build import build
from validate.propagation.linear import propagate


@pytest.fixture(scope="module")
def phosphate():
    method = load_method(DEMOS / "phosphate_assay" / "method.toml")
    results = propagate(build(method))
    entries, _ = merge_registers([Path(r) for r in method.registers_used])
    return method, results, entries


def _mass_relative_u(model, solution: str, mass: float) -> float:
    return math.sqrt(sum(s.u**2 for s in model.sources.values() if s.quantity == f"{solution}: mass")) / mass


def test_both_larger_weighings_are_offered_and_registered(phosphate):
    method, results, entries = phosphate
    found = weighing_candidates(method, Shares.of(results), entries)
    assert [str(c.details.get("flask_mL_after", "dilution")) for c in found] == ["1000.0", "dilution"]
    changes = [c.change for c in generate(method, Shares.of(results), entries)]
    assert sum("weigh 136.1 mg instead of 68.05 mg" in c for c in changes) == 2  # registered in the advisor


def test_a_larger_flask_keeps_every_result_and_halves_the_mass_term(phosphate):
    method, results, entries = phosphate
    larger = next(c for c in weighing_candidates(method, Shares.of(results), entries) if "flask_mL_after" in c.details)
    variant = larger.apply(method)
    model = build(variant)
    after = propagate(model)
    for before, now in zip(results, after, strict=True):
        assert now.value == pytest.approx(before.value, rel=1e-12)  # 2 m into 2 V: same concentration
    before_rel = _mass_relative_u(build(method), "stock", method.solutions["stock"].mass.value)
    after_rel = _mass_relative_u(model, "stock", variant.solutions["stock"].mass.value)
    assert after_rel == pytest.approx(before_rel / 2, rel=1e-12)
    assert variant.items[variant.solutions["stock"].flask.item].nominal == pytest.approx(1e-3)  # 1000 mL
    worst = max(r.expanded_uncertainty / r.value for r in results)
    assert max(r.expanded_uncertainty / r.value for r in after) < worst


def test_more_dilution_keeps_every_concentration(phosphate):
    method, results, entries = phosphate
    scheme = next(c for c in weighing_candidates(method, Shares.of(results), entries) if "dilutions" in c.details)
    assert scheme.details["mass_factor"] == 2 and scheme.details["dilutions"] == {"intermediate": [25.0, 1000.0]}
    before = build(method)
    after = build(scheme.apply(method))
    estimates = before.concentrations(before.nominal_inputs())
    for sol, c in after.concentrations(after.nominal_inputs()).items():
        factor = 2.0 if sol == "stock" else 1.0
        assert c == pytest.approx(factor * estimates[sol], rel=1e-12), sol


def test_no_weighing_candidate_where_the_weighing_does_not_matter(phosphate):
    method, results, entries = phosphate
    shares = Shares.of(results)
    quiet = Shares(shares.equipment, shares.step, {k: 0.0 if k.startswith("balance") else v
                                                   for k, v in shares.source.items()})
    assert weighing_candidates(method, quiet, entries) == []
