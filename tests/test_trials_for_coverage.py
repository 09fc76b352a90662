"""Too few Monte Carlo trials for the coverage interval asked: a clear refusal, never a traceback.

JCGM 101:2008 7.7.1 (from memory): the probabilistically symmetric 100p % interval of M sorted
trials runs from the trial of rank r = (M - q + 1)/2 to rank r + q - 1 with q = pM (rounded), so
it exists only where q <= M - 1, i.e. for M above 0.5/(1 - p); the engine asks for
1/(1 - p) + 1 at least, and 7.2.2 advises M >= 10^4/(1 - p).
"""

from __future__ import annotations

import pytest

from validate.cli import main
from validate.inputs.errors import InputError
from validate.model.errors import ModelError
from validate.propagation.mcstats import coverage_interval_symmetric, fewest_trials
from validate.workflow import pipeline

ONE_INPUT = """
[settings]
coverage_probability = {p}
[quantities.X1]
value = 2
u = 0.1
[result]
name = "Y"
unit = ""
formula = "X1"
"""

# Y = sqrt(X1 - X2*X2) at the estimates is sqrt(1e-6), but X2 drawn about 0 with u = 1 makes
# X1 - X2^2 negative in all but about 0.08 % of the trials: almost every trial is undefined
MOSTLY_UNDEFINED = """
[quantities.X1]
value = 1e-6
u = 1e-9
[quantities.X2]
value = 0
u = 1
[result]
name = "Y"
unit = ""
formula = "sqrt(X1 - X2 * X2)"
"""


def _exists(m: int, p: float) -> bool:
    try:
        coverage_interval_symmetric(list(range(m)), p, presorted=True)
    except ValueError as exc:
        assert "too few" in str(exc)
        return False
    return True


def test_the_interval_exists_from_half_over_one_minus_p_and_the_engine_asks_for_more():
    for p, first in ((0.9, 6), (0.95, 11), (0.99, 51), (0.9998, 2501)):  # the first M above 0.5/(1 - p)
        assert not _exists(first - 1, p) and _exists(first, p), p
        assert fewest_trials(p) == round(1 / (1 - p)) + 1 > first
        assert all(_exists(m, p) for m in range(fewest_trials(p), fewest_trials(p) + 50))


def test_trials_below_what_the_coverage_probability_needs_are_refused_before_any_trial(write_method):
    path = write_method(ONE_INPUT.format(p=0.9998))  # needs 5,001 trials at least
    with pytest.raises(InputError, match="too few for a 99.98 % coverage interval") as caught:
        pipeline.analyse(path, trials=1000, seed=1, advice=False)
    assert caught.value.where == "--trials" and "5,001" in (caught.value.fix or "")
    run = pipeline.analyse(path, trials=5001, seed=1, advice=False)  # the fewest that give an interval
    assert run.monte_carlo[0].summary.symmetric.low < 2.0 < run.monte_carlo[0].summary.symmetric.high


def test_the_command_says_so_with_exit_code_2(write_method, tmp_path, capsys):
    path = write_method(ONE_INPUT.format(p=0.9998))
    code = main(["run", str(path), "--trials", "1000", "--out", str(tmp_path / "record"), "--no-pdf"])
    assert code == 2
    err = capsys.readouterr().err
    assert "--trials" in err and "coverage_probability" in err and "Traceback" not in err
    assert not (tmp_path / "record").exists()  # nothing written


def test_a_run_whose_trials_are_almost_all_undefined_is_a_model_error(write_method):
    path = write_method(MOSTLY_UNDEFINED)
    with pytest.raises(ModelError, match="too many trials gave no defined result"):
        pipeline.analyse(path, trials=10_000, seed=1, advice=False)
