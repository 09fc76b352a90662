"""The combination's weights begun from a related study's settled weights (an advisor's candidate
from the run's): they settle where the passes from equal weights settle, in fewer passes, and a
start that does not settle leaves the plain passes to decide, as without a start.

The property checked is the definition of the estimator: GLS weights w with w = GLS(V(w)) to
WEIGHT_TOLERANCE (Aitken's generalised least squares), whatever the passes began from."""

from __future__ import annotations

import copy
import shutil
from pathlib import Path

import numpy as np
import pytest
from conftest import DEMOS
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from validate.advisor import advice
from validate.advisor.candidates import Shares
from validate.equilibrium import study
from validate.equilibrium.study import (
    UNSETTLED,
    WEIGHT_TOLERANCE,
    build_ready_model,
    prepare_combination,
    settled_weights,
)
from validate.inputs.method_file import load_method
from validate.inputs.registers import merge_registers
from validate.model.errors import ModelError
from validate.propagation.linear import propagate

DEMO = DEMOS / "nickel_complex"
# both ends settle to WEIGHT_TOLERANCE on a pass; the fixed point itself lies within about a
# twentieth of that of either (the passes contract about 20-fold), so 10x leaves room
SAME = 10 * WEIGHT_TOLERANCE


@pytest.fixture
def passes(monkeypatch):
    """Count the GLS passes (`_combination_pass`) the study module runs."""
    count = [0]
    real = study._combination_pass

    def counted(*args):
        count[0] += 1
        return real(*args)

    monkeypatch.setattr(study, "_combination_pass", counted)
    return count


def _settled(model) -> bool:
    return model.weights_change <= WEIGHT_TOLERANCE and not any(a.startswith(UNSETTLED) for a in model.assumptions)


def _assert_same_combination(warm, cold, warm_model, cold_model):
    (w_comb, w_values, w_cov), (c_comb, c_values, c_cov) = warm, cold
    assert _settled(warm_model) and _settled(cold_model)
    assert np.max(np.abs(np.subtract(warm_model.weights, cold_model.weights))) <= SAME
    # the points' K and their covariance depend on the weights through the K the standards are
    # corrected with only: the same fixed point, so the same to round-off
    np.testing.assert_allclose(w_values, c_values, rtol=1e-12, atol=0)
    # (an entry near zero by cancellation is compared on the scale of the matrix)
    np.testing.assert_allclose(w_cov, c_cov, rtol=1e-10, atol=1e-11 * np.max(np.abs(c_cov)))
    assert (w_comb is None) == (c_comb is None)
    if w_comb is not None:
        assert w_comb.value == pytest.approx(c_comb.value, rel=1e-12)
        assert w_comb.standard_uncertainty == pytest.approx(c_comb.standard_uncertainty, rel=1e-10)


def _candidates(method, model):
    entries, _ = merge_registers([Path(r) for r in method.registers_used])
    return advice.generate(method, Shares.of(propagate(model)), entries)


def test_candidates_begun_from_the_runs_weights_settle_where_equal_weights_do(nickel_demo, passes):
    method, run = nickel_demo.method, nickel_demo.model
    start = settled_weights(run)
    assert start is not None
    candidates = _candidates(method, run)
    assert len(candidates) >= 3
    for cand in candidates:
        changed = cand.apply(method)
        passes[0] = 0
        cold_model, cold = build_ready_model(changed)
        cold_passes, passes[0] = passes[0], 0
        warm_model, warm = build_ready_model(changed, start)
        _assert_same_combination(warm, cold, warm_model, cold_model)
        # the figure the advisor ranks by: U of the combined K, the same to convergence round-off
        u_warm = {r.name: r.expanded_uncertainty for r in propagate(warm_model)}
        u_cold = {r.name: r.expanded_uncertainty for r in propagate(cold_model)}
        assert u_warm == pytest.approx(u_cold, rel=1e-10)
        assert passes[0] <= 6 < cold_passes, cand.change  # 5 against 11 on this demo


def test_the_runs_own_weights_settle_in_one_pass_without_a_false_alarm(nickel_demo, passes):
    # a start at the fixed point itself: the first pass changes the weights by round-off only;
    # "a pass changed them more than the last" must not fire on it (there is no last pass)
    model = copy.deepcopy(nickel_demo.model)
    before = list(model.weights)
    prepare_combination(model, before)
    assert passes[0] == 1
    assert _settled(model)
    assert np.max(np.abs(np.subtract(model.weights, before))) <= SAME


def test_a_start_that_does_not_settle_leaves_the_plain_passes_to_decide(nickel_demo, monkeypatch):
    # mixing that never moves the weights: the second pass changes them as much as the first, the
    # accelerated passes give up, and the passes from equal weights decide: bit for bit the run's
    model = copy.deepcopy(nickel_demo.model)
    reference = copy.deepcopy(model)
    cold = prepare_combination(reference)
    start = [1.0 / len(model.points)] * len(model.points)
    monkeypatch.setattr(study, "_mixed", lambda results, changes: list(start))
    warm = prepare_combination(model, start)
    assert model.weights == reference.weights
    assert model.weights_change == reference.weights_change
    assert warm[1] == cold[1] and warm[2] == cold[2]
    assert not any(a.startswith(UNSETTLED) for a in model.assumptions)


def test_a_start_for_other_points_is_not_used(nickel_demo, passes):
    model = copy.deepcopy(nickel_demo.model)
    reference = copy.deepcopy(model)
    prepare_combination(reference)
    cold_passes, passes[0] = passes[0], 0
    prepare_combination(model, list(reference.weights)[:-1])  # one weight short
    assert passes[0] == cold_passes
    assert model.weights == reference.weights


def test_weights_that_did_not_settle_are_no_start(nickel_demo):
    model = copy.deepcopy(nickel_demo.model)
    assert settled_weights(model) == model.weights
    model.weights_change = 1e-3  # as after passes that did not settle
    assert settled_weights(model) is None


def test_the_advisor_begins_its_candidates_from_the_runs_weights(nickel_demo, passes):
    # the candidates of the nickel demo (3, and the best of them together) settle in at most 6
    # passes each, where 11 each from equal weights (44 in all before this start existed)
    advice.advise(nickel_demo.method, nickel_demo.results, model=nickel_demo.model, confirm_with_mc=0)
    assert passes[0] <= 6 * 4


@pytest.fixture(scope="module")
def demo_weights(nickel_demo):
    """The demo's settled weights (a short list: hypothesis shows it in a failing example)."""
    return settled_weights(nickel_demo.model)


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("study")
    shutil.copytree(DEMO, folder, dirs_exist_ok=True)
    return folder


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 2**32 - 1), scatter=st.floats(0.0, 0.03))
def test_a_related_study_begun_from_the_demos_weights_settles_where_equal_weights_do(
        demo_weights, demo_folder, seed, scatter):
    # studies made from the demo by scaling every reading by 1 + scatter z (z standard normal):
    # a change of the data, not only of uncertainties, so their weights lie further from the start
    rng = np.random.default_rng(seed)
    lines = (DEMO / "readings.csv").read_text().splitlines()
    out = []
    for line in lines:
        ident, _, value = line.partition(",")
        try:
            a = float(value)
        except ValueError:
            out.append(line)
            continue
        out.append(f"{ident},{a * (1.0 + scatter * rng.standard_normal())!r}")
    (demo_folder / "readings.csv").write_text("\n".join(out) + "\n")
    method = load_method(demo_folder / "method.toml")
    try:
        cold_model, cold = build_ready_model(method)
    except ModelError:
        return  # no point left with a possible K: no combination to settle
    if not _settled(cold_model):
        return  # no fixed point reached from equal weights: nothing to compare with
    warm_model, warm = build_ready_model(method, demo_weights)
    _assert_same_combination(warm, cold, warm_model, cold_model)


def test_the_columns_are_formed_once_for_every_pass(nickel_demo, monkeypatch):
    # the totals and mean readings do not depend on the weights: formed once (in the linear
    # engine's numbers) for all the passes, which give the same numbers as passes that form them
    # anew (to the last bits: two evaluations of the model in `uncertainties` numbers may sum a
    # derivative in another order)
    from uncertainties.core import AffineScalarFunc

    from validate.model.equilibrium import EquilibriumModel

    model = copy.deepcopy(nickel_demo.model)
    formed = [0]
    real = EquilibriumModel.columns

    def counted(self, x):
        formed[0] += any(isinstance(v, AffineScalarFunc) for v in x.values())
        return real(self, x)

    monkeypatch.setattr(EquilibriumModel, "columns", counted)
    held = prepare_combination(model)
    assert formed[0] == 1
    model.temperature_name = None  # as during the passes: the van 't Hoff factor is left out
    variables = {n: study.ufloat(s.value, s.u, tag=n) for n, s in model.sources.items()}
    kept = [i for i, p in enumerate(model.points) if p not in model.excluded]
    model.weights = list(held[0].weights)  # the weights the last pass began from are not kept: use
    anew = study._combination_pass(model, variables, kept)  # the settled ones on both sides
    again = study._combination_pass(model, variables, kept, model.columns(variables))
    np.testing.assert_allclose(again[1], anew[1], rtol=1e-14, atol=0)
    np.testing.assert_allclose(again[2], anew[2], rtol=1e-13, atol=0)
