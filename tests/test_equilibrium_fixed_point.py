"""The correction of the standards is the fixed point of the reported combination.

Synthetic studies below are invented: readings computed exactly from a chosen K with the 1:1
mass-action law (IUPAC definition of a stability constant, K = [ML]/([M][L])), so the code
must give back what it was given. The fixed point and Newton's method are checked against
properties that must hold, and against the plain iteration K <- F(K) run to convergence.
"""

from __future__ import annotations

import shutil
import warnings

import numpy as np
import pytest
from conftest import DEMOS
from test_equilibrium_study import _noise_free_copy
from uncertainties import ufloat

from validate.equilibrium.study import _combination_pass, prepare_combination
from validate.model import fixed_point
from validate.model.equilibrium import COMBINED
from validate.model.errors import ModelError
from validate.model.standards import iterate_standards, study_columns
from validate.propagation.distributions import draw_many
from validate.propagation.montecarlo import propagate_mc
from validate.workflow import pipeline as api

DEMO = DEMOS / "nickel_complex"


def _plain_fixed_point(cols, K, steps=400):
    """The plain iteration K <- F(K), run long enough to converge (a contraction: |F'| < 1)."""
    for _ in range(steps):
        K = fixed_point.combination(K, cols)[0]
    return K


def test_exact_study_gives_back_K_and_the_correction_uses_the_reported_K(tmp_path):
    # invented study, readings exact for K = 850 L/mol: every point, the combined K and the K the
    # standards are corrected with must all be 850 L/mol. Bottom-up scatter: exact readings show no
    # scatter, so only bottom-up terms give each point the random effects a real study has (with
    # observed scatter of zero the GLS weights rest on shared terms alone and may be negative)
    K = 850.0
    run = api.analyse(_noise_free_copy(tmp_path, K, iterations=12, scatter="bottom-up"), trials=None,
                      advice=False)
    e = run.record["equilibrium"]
    assert e["combined"]["K"] == pytest.approx(K, rel=1e-9)
    for point in e["mixtures"]:
        assert point["K"] == pytest.approx(K, rel=1e-9), point["id"]
    model = run.model
    used = model.correction_K(model.nominal_inputs()) / model.study.k_unit.factor
    assert used == pytest.approx(e["combined"]["K"], rel=1e-10)
    # the bias of assuming full complexation is taken against the reported K
    bias = e["complete_complexation_bias"]
    assert bias["reported_K"] == e["combined"]["K"]
    assert bias["K"] == pytest.approx(bias["naive_K"] / e["combined"]["K"] - 1.0, rel=1e-12)
    assert bias["K"] > 0.0  # standards taken as fully complexed give a high K (mass balance)


def test_without_correction_the_bias_is_that_of_the_reported_K(tmp_path):
    # correction "none": the reported K is the shortcut's; its bias is taken against the corrected K,
    # which for exact readings is the K they were made from (invented study, K = 850 L/mol)
    K = 850.0
    run = api.analyse(_noise_free_copy(tmp_path, K, correction="none", scatter="bottom-up"), trials=None,
                      advice=False)  # bottom-up: exact readings show no scatter (see the test above)
    e = run.record["equilibrium"]
    bias = e["complete_complexation_bias"]
    assert bias["reported_K"] == e["combined"]["K"] > K
    assert bias["K"] == pytest.approx(e["combined"]["K"] / K - 1.0, rel=1e-7)


def test_the_demo_corrects_with_the_reported_K_and_its_own_weights(nickel_demo):
    # fixed point: the K the standards are corrected with equals the reported combined K (1e-10),
    # and the GLS weights recomputed from the covariance at that correction are the weights used
    run = nickel_demo
    model = run.model
    reported = next(r for r in run.results if r.name == COMBINED)
    used = model.correction_K(model.nominal_inputs()) / model.study.k_unit.factor
    assert used == pytest.approx(reported.value, rel=1e-10)
    assert run.record["equilibrium"]["combined"]["K"] == pytest.approx(used, rel=1e-10)
    variables = {n: ufloat(s.value, s.u, tag=n) for n, s in model.sources.items()}
    kept = [i for i, p in enumerate(model.points) if p not in model.excluded]
    combined, _, _ = _combination_pass(model, variables, kept)
    weights = np.zeros(len(model.points))
    weights[kept] = combined.weights
    np.testing.assert_allclose(weights, model.weights, rtol=0, atol=1e-10)
    # and the GLS value of the recomputed combination is the reported K
    assert combined.value == pytest.approx(reported.value, rel=1e-10)


def test_the_fixed_point_holds_in_every_monte_carlo_trial(nickel_demo):
    # both engines: per trial, the K used to correct the standards is the combined K of that trial
    model = nickel_demo.model
    draws = draw_many(list(model.sources.values()), 3000, np.random.default_rng(3))
    with np.errstate(invalid="ignore", divide="ignore"):
        used = model.correction_K(draws) / model.study.k_unit.factor
        combined = model.evaluate(draws)[COMBINED]
    finite = np.isfinite(combined)
    assert finite.mean() > 0.99
    np.testing.assert_allclose(used[finite], combined[finite], rtol=1e-10)


def test_trials_at_the_estimates_agree_with_the_linear_engine(nickel_demo):
    # one model, two engines: trials that all sit at the estimates give the linear engine's values
    model = nickel_demo.model
    x0 = {n: np.full(40000, s.value) for n, s in model.sources.items()}  # more than one block of trials
    out = model.evaluate(x0)
    for r in nickel_demo.results:
        np.testing.assert_allclose(out[r.name], r.value, rtol=1e-12, err_msg=r.name)


def test_a_trials_K_does_not_depend_on_the_other_trials_of_its_block(nickel_demo):
    # each trial steps until its own change is settled (fixed_point._solve_trials): the K of a trial
    # solved among 3000 others is bit for bit the K it gets solved alone, or among a few others
    model = nickel_demo.model
    draws = draw_many(list(model.sources.values()), 3000, np.random.default_rng(11))
    with np.errstate(invalid="ignore", divide="ignore"):
        together = model.correction_K(draws)
        some = [0, 17, 1234, 2999]
        few = model.correction_K({k: v[some] for k, v in draws.items()})
        alone = [model.correction_K({k: v[i:i + 1] for k, v in draws.items()})[0] for i in some]
    np.testing.assert_array_equal(few, together[some])
    np.testing.assert_array_equal(alone, together[some])
    assert np.isfinite(together).mean() > 0.99


@pytest.mark.parametrize("K", [30.0, 850.0, 2.0e4])
def test_newton_agrees_with_the_plain_iteration(K):
    # invented study with M in excess: Newton's fixed point and that of K <- F(K) run to
    # convergence (it contracts here) are the same K, and F(K) = K there
    u = 1.0 / K
    std_M, std_L = [8.0 * u] * 5, [0.1 * i * u for i in range(1, 6)]
    mix_M, mix_L = [0.5 * u, 1.0 * u, 2.0 * u], [u] * 3
    a = [0.01 + 2.0 * K * fixed_point_root(K, m, lig) for m, lig in zip(std_M, std_L, strict=True)]
    b = [0.01 + 2.0 * K * fixed_point_root(K, m, lig) * 1.01 for m, lig in zip(mix_M, mix_L, strict=True)]
    cols = study_columns((std_M, std_L, a), (mix_M, mix_L, b), mixture_weights=[0.2, 0.5, 0.3])
    solved = fixed_point.solve(cols, limiting_totals=std_L)
    plain = _plain_fixed_point(cols, solved.K * 1.05)
    assert solved.K == pytest.approx(plain, rel=1e-12)
    assert fixed_point.combination(solved.K, cols)[0] == pytest.approx(solved.K, rel=1e-13)
    assert len(solved.history) <= 6  # quadratic convergence: a handful of steps


def fixed_point_root(K, m, lig):
    from validate.model.ice import complex_concentration
    return complex_concentration(K, m, lig)


def test_newton_derivative_matches_finite_differences():
    # F'(K) in closed form against a central difference (step 1e-6 K; error O(h^2))
    K = 900.0
    u = 1.0 / K
    cols = study_columns(([6 * u] * 4, [0.2 * u * i for i in range(1, 5)], [0.1, 0.2, 0.31, 0.4]),
                         ([u, 2 * u], [u, u], [0.2, 0.27]), standard_weights=[3, 3, 2, 3],
                         mixture_weights=[0.4, 0.6], standard_K_factors=[0.8, 0.8, 0.8, 0.8])
    h = 1e-6 * K
    numeric = (fixed_point.combination(K + h, cols)[0] - fixed_point.combination(K - h, cols)[0]) / (2 * h)
    assert fixed_point.combination(K, cols, derivative=True)[1] == pytest.approx(numeric, rel=1e-7)


def test_linear_engine_derivative_is_the_implicit_functions():
    # one ufloat Newton step from the converged estimate gives dK/dA = -g_A/g_K (implicit function
    # theorem); compare with a central difference of the float solution
    K, eps, a0 = 1e3, 2e3, 0.01
    std_M, std_L = [5e-3] * 5, [i * 4e-5 for i in range(1, 6)]
    mix_M, mix_L = [5e-4, 1e-3, 2e-3], [1e-3] * 3

    def reading(m, lig):
        return a0 + eps * fixed_point_root(K, m, lig)
    std_A = [reading(m, lig) for m, lig in zip(std_M, std_L, strict=True)]
    mix_A = [reading(m, lig) for m, lig in zip(mix_M, mix_L, strict=True)]
    x = ufloat(mix_A[1], 1e-3, tag="x")
    r = iterate_standards(std_M, std_L, std_A, mix_M, mix_L, [mix_A[0], x, mix_A[2]])
    h = 1e-6

    def at(a):
        return iterate_standards(std_M, std_L, std_A, mix_M, mix_L, [mix_A[0], a, mix_A[2]]).K
    numeric = (at(mix_A[1] + h) - at(mix_A[1] - h)) / (2 * h)
    assert r.K.derivatives[x] == pytest.approx(numeric, rel=1e-6)
    assert r.K.nominal_value == pytest.approx(K, rel=1e-10)


# ---------------------------------------------------------------- impossible points (issue 15)


def _copy_with_readings(tmp_path, point_pattern, value):
    import re
    folder = tmp_path / "study"
    shutil.copytree(DEMO, folder)
    readings = folder / "readings.csv"
    lines = [re.sub(rf"^({point_pattern}),[0-9.]+$", rf"\g<1>,{value}", line)
             for line in readings.read_text().splitlines()]
    readings.write_text("\n".join(lines) + "\n")
    return folder / "method.toml"


def test_check_finds_a_point_read_at_the_blank(tmp_path):
    # a mixture read at the blank has no complex: K <= 0 is physically impossible; found at
    # `validate check` from the readings and nominal values, before any run
    _, model = api.check(_copy_with_readings(tmp_path, "X1", "0.0005"))
    assert list(model.excluded) == ["X1"]
    assert "blank" in model.excluded["X1"]


def test_check_finds_a_point_above_full_complexation(tmp_path):
    # [ML] above the smaller total (saturation above 1): impossible, found at check
    _, model = api.check(_copy_with_readings(tmp_path, "T.6", "1.9"))
    assert "T.6" in model.excluded and "more complex" in model.excluded["T.6"]


def test_check_stops_when_no_point_is_possible(tmp_path):
    with pytest.raises(ModelError, match="no point of the study gives a physically possible K"):
        api.check(_copy_with_readings(tmp_path, r"X\d|T\.\d", "0.0005"))


def test_an_excluded_point_raises_no_warning_in_monte_carlo_and_is_counted(tmp_path):
    # every held-group run of the excluded point may have no defined trial: no RuntimeWarning may
    # reach the user; the record counts the point's undefined trials
    method = _copy_with_readings(tmp_path, "X1", "0.0005")
    method_obj, model = api.check(method)
    from validate.equilibrium.study import build_ready_model
    from validate.propagation.linear import propagate
    model, _ = build_ready_model(method_obj)
    results = propagate(model)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        mc = propagate_mc(model, results, 4000, seed=1, shares=True)
    x1 = next(m for m in mc if m.name == "K, X1")
    assert x1.summary.invalid_trials > 0
    run = api.analyse(method, trials=2000, seed=1, advice=False)
    excluded = run.record["equilibrium"]["combined"]["excluded"]
    assert [e["id"] for e in excluded] == ["X1"] and excluded[0]["invalid_trials"] > 0
    assert run.record["equilibrium"]["combined"]["weights"][0] == 0.0


def test_prepare_combination_is_repeatable(nickel_demo):
    # preparing twice gives the same weights bit for bit (no state carried between runs)
    import copy
    model = copy.deepcopy(nickel_demo.model)
    before = list(model.weights)
    prepare_combination(model)
    assert model.weights == before


def test_unconverged_trials_are_undefined_not_silently_off():
    # Monte Carlo trials whose correction did not converge (here: one Newton step allowed, from the
    # shortcut's K 10x too high) get no K; the count says so (docs/design.md, "Monte Carlo")
    K, eps, a0 = 1e3, 100.0, 0.02
    std_M, std_L = [4e-3] * 6, [i * 2e-4 for i in range(6)]
    mix_M, mix_L = [7.5e-3, 6e-3, 9e-3], [6e-3] * 3

    def reading(m, lig):
        return a0 + eps * fixed_point_root(K, m, lig)
    std_A = [np.full(3, reading(m, lig)) for m, lig in zip(std_M, std_L, strict=True)]
    mix_A = [np.full(3, reading(m, lig)) for m, lig in zip(mix_M, mix_L, strict=True)]
    short = iterate_standards(std_M, std_L, std_A, mix_M, mix_L, mix_A, iterations=1)
    assert np.all(np.isnan(short.K)) and short.unconverged_trials == 3 and short.undefined_trials == 3
    full = iterate_standards(std_M, std_L, std_A, mix_M, mix_L, mix_A)
    np.testing.assert_allclose(full.K, K, rtol=1e-9)
    assert full.unconverged_trials == 0
