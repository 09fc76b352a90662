"""The Monte Carlo shares of the variance by group (validate.propagation.mcshares): the control
variate against the law of propagation for a linear model, and against an exact variance for a
strongly nonlinear one."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from validate.metrology.sources import Source, rectangular, trapezoid, triangular
from validate.propagation import mcshares
from validate.propagation.linear import propagate


class HandModel:
    """A measurement model written by hand: results are functions of the sources' values, the
    same code for the linear engine's numbers and for arrays of trials."""

    def __init__(self, sources: list[Source], formulas: dict):
        self.sources = {s.name: s for s in sources}
        self.result_labels = list(formulas)
        self.formulas = formulas
        self.method = SimpleNamespace(settings=SimpleNamespace(coverage_probability=0.95))

    def unit_of(self, label: str) -> str:
        return ""

    def evaluate(self, x) -> dict:
        return {label: f(x) for label, f in self.formulas.items()}

    def outputs(self, x, labels) -> dict:
        return self.evaluate(x)


def _estimates(model: HandModel, seed: int = 3, n: int = mcshares.SHARE_TRIALS, keys=("step", "equipment"),
               target: float = mcshares.SHARE_TARGET):
    done: list[int] = []
    out = mcshares.share_estimates(model, propagate(model), seed, keys, done.append, n, target)
    return out, sum(done)


# Variances of the distributions drawn (JCGM 101:2008 6.4; from memory): normal u^2, rectangular
# a^2/3, symmetric triangular a^2/6, curvilinear trapezoid a^2/3 + d^2/9 (6.4.3), scaled and
# shifted t u^2 nu/(nu - 2) for nu > 2 (6.4.9); the members of a dof group share one chi-square
# factor but are uncorrelated, each with the t variance.
LINEAR_SOURCES = [
    Source("n1", 10.0, 0.3, step="weigh", equipment="balance"),
    rectangular("r1", 5.0, 0.4, step="weigh", equipment="flask"),
    triangular("tr1", 2.0, 0.5, step="dilute", equipment="flask"),
    trapezoid("tz1", 1.0, 0.2, 0.06, step="dilute", equipment="pipette"),
    Source("t1", 3.0, 0.1, "t", dof=5, step="read", equipment="photometer"),
    Source("g1", 0.5, 0.05, "t", dof=7, dof_group="line", step="fit", equipment="photometer"),
    Source("g2", 0.7, 0.04, "t", dof=7, dof_group="line", step="fit", equipment="(line)"),
]
VARIANCE = {"n1": 0.3**2, "r1": 0.4**2 / 3, "tr1": 0.5**2 / 6, "tz1": 0.2**2 / 3 + 0.06**2 / 9,
            "t1": 0.1**2 * 5 / 3, "g1": 0.05**2 * 7 / 5, "g2": 0.04**2 * 7 / 5}
COEFFICIENTS = {"Y": {"n1": 2.0, "r1": -3.0, "tr1": 1.5, "tz1": 4.0, "t1": -2.5, "g1": 6.0, "g2": -7.0},
                "Z": {"n1": 0.1, "r1": 1.0, "tr1": 0.0, "tz1": -2.0, "t1": 0.5, "g1": 1.0, "g2": 1.0}}


def _linear_model() -> HandModel:
    def formula(c):
        return lambda x: 1.0 + sum(ci * x[name] for name, ci in c.items() if ci)
    return HandModel(LINEAR_SOURCES, {label: formula(c) for label, c in COEFFICIENTS.items()})


def test_drawn_variances_are_those_of_the_distributions_drawn():
    for src in LINEAR_SOURCES:
        assert mcshares.drawn_variance(src) == pytest.approx(VARIANCE[src.name], rel=1e-12)
    assert mcshares.drawn_variance(Source("t2", 1.0, 0.1, "t", dof=2)) == math.inf  # no finite variance
    assert mcshares.drawn_variance(Source("z", 1.0, 0.0, "t", dof=3)) == 0.0  # drawn as a constant


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_linear_model_gets_the_law_of_propagation_shares_whatever_the_trials(seed):
    # GUM 5.1.3 (law of propagation, uncorrelated inputs): u^2(y) = sum c_i^2 u^2(x_i), so holding
    # a group at its estimates removes exactly sum over the group of c_i^2 var_i. The control
    # variate gives that share whatever the trials; plain Monte Carlo only within its noise.
    model = _linear_model()
    estimates, _ = _estimates(model, seed)
    for key in ("step", "equipment"):
        for label, c in COEFFICIENTS.items():
            total = sum(ci**2 * VARIANCE[name] for name, ci in c.items())
            for group, share in estimates[key][label]:
                names = [s.name for s in LINEAR_SOURCES if getattr(s, key) == group]
                analytic = sum(c[name] ** 2 * VARIANCE[name] for name in names) / total
                assert share.share == pytest.approx(analytic, abs=1e-9)
                assert share.standard_error < 1e-9
                assert share.plain == pytest.approx(analytic, abs=0.05)  # the plain estimate: its noise


def test_a_linear_model_stops_after_one_batch_and_reports_its_trials():
    model = _linear_model()
    estimates, progressed = _estimates(model)
    groups = len({s.step for s in LINEAR_SOURCES}) + len({s.equipment for s in LINEAR_SOURCES})
    assert {s.trials for rows in estimates["step"].values() for _, s in rows} == {mcshares.SHARE_BATCH}
    assert progressed == groups * mcshares.SHARE_BATCH  # the progress bar is told the trials run


def _product_model(mu: float, sigma: float) -> HandModel:
    sources = [Source("a", mu, sigma, step="a", equipment="a"), Source("b", mu, sigma, step="b", equipment="b"),
               Source("c", 5.0, 0.05, step="c", equipment="c")]
    return HandModel(sources, {"Y": lambda x: x["a"] * x["b"] + x["c"]})


def test_a_strongly_nonlinear_model_agrees_with_its_exact_shares_within_the_stated_error():
    # Y = A B + C, A and B independent normal with mean mu and standard deviation sigma: the
    # variance of a product of independent variables (Goodman, J. Am. Stat. Assoc. 55 (1960) 708,
    # from memory) is mu_a^2 s_b^2 + mu_b^2 s_a^2 + s_a^2 s_b^2; holding A at mu leaves
    # mu^2 sigma^2 + var(C). At sigma/mu = 0.5 the GUM share of A (its linearisation: 0.5 of the
    # product's part) is far from the true one, which the estimator must find within its error.
    mu, sigma, var_c = 1.0, 0.5, 0.05**2
    total = 2 * mu**2 * sigma**2 + sigma**4 + var_c
    exact = {"a": 1 - (mu**2 * sigma**2 + var_c) / total, "b": 1 - (mu**2 * sigma**2 + var_c) / total,
             "c": var_c / total}
    estimates, _ = _estimates(_product_model(mu, sigma), seed=12)
    for group, share in estimates["step"]["Y"]:
        assert abs(share.share - exact[group]) <= 4 * share.standard_error
        assert share.standard_error <= mcshares.SHARE_TARGET or share.trials == mcshares.SHARE_TRIALS
    gum_share = (mu**2 * sigma**2) / (2 * mu**2 * sigma**2 + var_c)  # the linearisation's, far off
    assert abs(exact["a"] - gum_share) > 0.05


def test_the_stated_error_matches_the_spread_between_seeds():
    # The first-order standard error against the spread of the estimate over independent seeds,
    # on the strongly nonlinear model: within a factor of two (a chi-square on 19 degrees of
    # freedom stays within that with a probability above 99.9 %).
    model = _product_model(1.0, 0.5)
    values, errors = [], []
    for seed in range(20):
        estimates, _ = _estimates(model, seed=100 + seed, n=mcshares.SHARE_BATCH)
        share = dict(estimates["step"]["Y"])["a"]
        values.append(share.share)
        errors.append(share.standard_error)
    spread = float(np.std(values, ddof=1))
    assert 0.5 < spread / float(np.median(errors)) < 2.0


@pytest.mark.parametrize("dof", [2, 3, 4])
def test_an_output_reached_by_a_t_input_with_heavy_tails_gets_no_shares(dof):
    # nu <= 4: no finite fourth moment of the t distribution (nu <= 2: no finite variance; any
    # statistics handbook), so a variance ratio has no standard error: such an output gets no
    # shares, and another output of the same model keeps its own, stopping once precise.
    model = HandModel([Source("a", 1.0, 0.1, "t", dof=dof, step="a"), Source("b", 2.0, 0.1, step="b")],
                      {"Y": lambda x: x["a"] * x["b"], "Z": lambda x: x["b"] ** 2})
    estimates, _ = _estimates(model, n=30_000, keys=("step",))
    assert "Y" not in estimates["step"]
    assert all(not math.isnan(s.linear_exact) and s.trials == mcshares.SHARE_BATCH for _, s in estimates["step"]["Z"])


def test_no_trials_when_no_output_gets_shares():
    model = HandModel([Source("a", 1.0, 0.1, "t", dof=3, step="a"), Source("b", 2.0, 0.1, step="b")],
                      {"Y": lambda x: x["a"] * x["b"]})
    estimates, done = _estimates(model, n=30_000, keys=("step", "equipment"))
    assert estimates == {"step": {}, "equipment": {}}
    assert done == 0  # trials reported to the progress bar


def test_an_output_with_undefined_trials_gets_the_plain_share_of_its_defined_trials():
    # Y = sqrt(A - 0.9) + B is undefined where A < 0.9 (about 16 % of the trials). Which trials fall
    # out depends on A, so the linearised model's share on the defined trials is not centred on its
    # exact share over all trials: a control variate would carry a bias (0.36 instead of 0.26 for A,
    # seen at 10^6 trials). The plain estimate over the defined trials is reported, within its
    # stated error of a long run's.
    model = HandModel([Source("a", 1.0, 0.1, step="a"), Source("b", 0.0, 0.2, step="b")],
                      {"Y": lambda x: np.sqrt(x["a"] - 0.9) + x["b"] if isinstance(x["a"], np.ndarray)
                       else (x["a"] - 0.9) ** 0.5 + x["b"]})
    estimates, _ = _estimates(model, keys=("step",), n=20_000)
    reference, _ = _estimates(model, seed=99, keys=("step",), n=400_000, target=0.0)  # all its trials
    for (_, share), (_, long) in zip(estimates["step"]["Y"], reference["step"]["Y"], strict=True):
        assert math.isnan(share.linear_exact) and share.share == share.plain
        assert math.isfinite(share.share)
        assert abs(share.share - long.share) <= 4 * math.hypot(share.standard_error, long.standard_error)


def test_the_report_states_the_shares_precision_from_the_record():
    from validate.report.sections_uncertainty import _largest_share_gap

    def result(name, gum, mc):
        return {"sample": name, "budget_by_step": [{"group": "a", "share": gum}],
                "monte_carlo": {"shares_by_step": [{"group": "a", "share": mc, "standard_error": 0.0004,
                                                    "trials": 10_000}]}}

    text = _largest_share_gap([result("s1", 0.50, 0.52), result("s2", 0.40, 0.47)])[0].text
    assert "by at most 7 percentage points (largest: a, s2)" in text
    assert "runs of 10,000 trials" in text and "standard error of at most 0.04 percentage points" in text
