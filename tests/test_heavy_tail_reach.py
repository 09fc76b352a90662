"""Which t inputs reach an output, and with what tails (validate.propagation.mcshares.
t_inputs_reaching): an input whose sensitivity coefficient is zero at the estimates still reaches
an output through the model's curvature, and the tails it gives the output decide whether the
output's Monte Carlo moments and shares exist.

Moments of Student's t (any statistics handbook): E|T|^k is finite for k < nu only. So for
Y = a^2, E|Y|^k = E|a|^(2k) is finite for k < nu/2: Y has the moments of a t with nu/2; and
for a product of independent inputs E|ab|^k = E|a|^k E|b|^k, finite for k below the smaller nu.
"""

from __future__ import annotations

import math

import pytest
from test_mc_shares import HandModel

from validate.metrology.sources import Source
from validate.propagation import mcshares
from validate.propagation.linear import propagate
from validate.propagation.montecarlo import _tail_dof


def _square_model(dof: float) -> HandModel:
    # Y = a^2 + b with a centred on 0: dY/da = 2a = 0 at the estimate, so the law of propagation
    # (GUM 5.1.2, first order) gives a no contribution; W = 3 b does not depend on a at all
    a = Source("a", 0.0, 0.1, "t", dof=dof, step="a")
    b = Source("b", 2.0, 0.1, step="b")
    return HandModel([a, b], {"Y": lambda x: x["a"] ** 2 + x["b"], "W": lambda x: 3.0 * x["b"]})


def test_an_input_with_zero_sensitivity_reaches_the_output_with_the_tails_of_its_square():
    model = _square_model(3)
    linear = propagate(model)
    contribution = {row.source: row.contribution for row in next(g for g in linear if g.name == "Y").contributions}
    assert contribution.get("a", 0.0) == 0.0  # the first-order budget does not see it
    reach = mcshares.t_inputs_reaching(model, linear)
    assert reach["Y"] == {"a": pytest.approx(1.5, rel=1e-9)}  # nu/2: Y = a^2 has no finite variance
    assert reach["W"] == {}  # moved alone, a leaves W unchanged
    assert _tail_dof(model, reach["Y"]) == (pytest.approx(1.5, rel=1e-9), True)
    assert _tail_dof(model, reach["W"]) == (math.inf, False)


def test_an_input_with_a_contribution_keeps_its_own_degrees_of_freedom():
    a = Source("a", 1.0, 0.1, "t", dof=3, step="a")
    model = HandModel([a], {"Y": lambda x: 2.0 * x["a"]})
    reach = mcshares.t_inputs_reaching(model, propagate(model))
    assert reach["Y"] == {"a": 3.0}
    assert _tail_dof(model, reach["Y"]) == (3.0, False)


@pytest.mark.parametrize(("dof", "shares"), [(3, False), (6, False), (8, False), (9, True)])
def test_shares_need_the_fourth_moment_of_the_output_not_of_the_input(dof, shares):
    # Y = a^2: its fourth moment is E a^8, finite for nu > 8 only; W keeps its shares throughout
    model = _square_model(dof)
    linear = propagate(model)
    assert [g.name for g in mcshares.with_shares(model, linear)] == (["Y", "W"] if shares else ["W"])
    if dof == 3:
        estimates = mcshares.share_estimates(model, linear, 4, ("step",), lambda n: None, 20_000)
        assert set(estimates["step"]) == {"W"}


def test_inputs_that_act_only_together_reach_the_output():
    # Y = a b + 1 with a and b both at 0: each alone leaves Y at 1 and neither has a sensitivity
    # coefficient, but together they act (GUM 5.1.2, note: the product's second-order term)
    a = Source("a", 0.0, 0.1, "t", dof=3, step="a")
    b = Source("b", 0.0, 0.2, "t", dof=5, step="b")
    c = Source("c", 2.0, 0.1, step="c")
    model = HandModel([a, b, c], {"Y": lambda x: x["a"] * x["b"] + 1.0, "W": lambda x: 3.0 * x["c"]})
    linear = propagate(model)
    reach = mcshares.t_inputs_reaching(model, linear)
    assert reach["Y"] == {"a": 3.0, "b": 5.0}
    assert reach["W"] == {}
    assert [g.name for g in mcshares.with_shares(model, linear)] == ["W"]


def test_an_input_that_makes_the_output_undefined_when_moved_reaches_it():
    # V's value does not depend on a where it is defined (0 times a number), but it is undefined
    # for a^2 > 0.1, i.e. beyond about 3.2 u: a trial there has no result, so a reaches V
    a = Source("a", 0.0, 0.1, "t", dof=3, step="a")
    b = Source("b", 2.0, 0.1, step="b")
    model = HandModel([a, b], {"V": lambda x: x["b"] + 0.0 * (0.1 - x["a"] ** 2) ** 0.5,
                               "W": lambda x: 3.0 * x["b"]})
    reach = mcshares.t_inputs_reaching(model, propagate(model))
    assert set(reach["V"]) == {"a"}
    assert reach["W"] == {}
