"""Which t inputs reach an output (validate.propagation.mcshares.t_inputs_reaching): an input whose
sensitivity coefficient is zero at the estimates still reaches an output through the model's
curvature, and its tails decide whether the output's Monte Carlo moments and shares exist."""

from __future__ import annotations

from test_mc_shares import HandModel

from validate.metrology.sources import Source
from validate.propagation import mcshares
from validate.propagation.linear import propagate


def _model() -> HandModel:
    # Y = a^2 + b with a centred on 0: dY/da = 2a = 0 at the estimate, so the law of propagation
    # (GUM 5.1.2, first order) gives a no contribution, yet a t input with nu = 3 has no finite
    # fourth moment and Y = a^2 then has no finite variance (any statistics handbook on Student's t).
    # W = exp(b) does not depend on a at all.
    a = Source("a", 0.0, 0.1, "t", dof=3, step="a")
    b = Source("b", 2.0, 0.1, step="b")
    return HandModel([a, b], {"Y": lambda x: x["a"] ** 2 + x["b"], "W": lambda x: 3.0 * x["b"]})


def test_an_input_with_zero_sensitivity_at_the_estimate_still_reaches_the_output():
    model = _model()
    linear = propagate(model)
    contribution = {row.source: row.contribution for row in next(g for g in linear if g.name == "Y").contributions}
    assert contribution.get("a", 0.0) == 0.0  # the first-order budget does not see it
    reach = mcshares.t_inputs_reaching(model, linear)
    assert [s.name for s in reach["Y"]] == ["a"]
    assert reach["W"] == []  # moved alone, a leaves W unchanged


def test_such_an_output_gets_no_shares_and_the_others_keep_theirs():
    model = _model()
    linear = propagate(model)
    assert [g.name for g in mcshares.with_shares(model, linear)] == ["W"]
    estimates = mcshares.share_estimates(model, linear, 4, ("step",), lambda n: None, 20_000)
    assert set(estimates["step"]) == {"W"}


def test_an_input_that_makes_the_output_undefined_when_moved_reaches_it():
    # V's value does not depend on a where it is defined (0 times a number), but it is undefined
    # for a^2 > 0.1, i.e. beyond about 3.2 u: a trial there has no result, so a reaches V
    a = Source("a", 0.0, 0.1, "t", dof=3, step="a")
    b = Source("b", 2.0, 0.1, step="b")
    model = HandModel([a, b], {"V": lambda x: x["b"] + 0.0 * (0.1 - x["a"] ** 2) ** 0.5,
                               "W": lambda x: 3.0 * x["b"]})
    reach = mcshares.t_inputs_reaching(model, propagate(model))
    assert [s.name for s in reach["V"]] == ["a"]
    assert reach["W"] == []
