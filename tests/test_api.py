"""The Python interface for notebooks (validate.workflow.notebook): the frames are views of
the typed record, checked against the record itself; the demo data are invented."""

from __future__ import annotations

import math

import pytest
from conftest import DEMOS

from validate.inputs.errors import InputError
from validate.workflow import notebook, pipeline

PHOSPHATE = DEMOS / "phosphate_assay" / "method.toml"


@pytest.fixture(scope="module")
def linear():
    return notebook.run(PHOSPHATE, trials=0)


def test_trials_0_is_the_linear_engine_only(linear):
    assert linear.record.monte_carlo_settings is None
    assert all(r.monte_carlo is None for r in linear.record.results)
    # the pipeline itself takes 0 the same way (it raised "only 0 of 0 Monte Carlo trials" before)
    assert pipeline.analyse(PHOSPHATE, trials=0, advice=False).monte_carlo == []


def test_load_gives_the_checked_method():
    method = notebook.load(PHOSPHATE)
    assert set(method.quantities) == {"V_sample", "V_flask", "M_P"}


def test_bad_arguments_are_refused():
    with pytest.raises(ValueError, match="trials"):
        notebook.run(PHOSPHATE, trials=-1)
    with pytest.raises(ValueError, match="unknown part"):
        notebook.to_frame(None, "everything")  # type: ignore[arg-type]


def test_the_budget_frame_is_the_record_budget(linear):
    frame = linear.to_frame("budget")
    assert len(frame) == len(linear.record.budget)
    assert list(frame["source"]) == [row.source for row in linear.record.budget]
    # the shares of each result's sources add up to its combined variance (GUM 5.1.2, a fraction 1)
    for _, shares in frame.groupby("id")["share"]:
        assert math.isclose(shares.sum(), 1.0, rel_tol=1e-9)


def test_the_results_frame_matches_the_typed_results(linear):
    frame = linear.to_frame("results")
    assert list(frame["id"]) == [r.key.id for r in linear.record.results]
    assert list(frame["expanded_uncertainty"]) == [r.expanded_uncertainty for r in linear.record.results]
    assert set(frame["reported_basis"]) == {"GUM"}  # no Monte Carlo: y +/- U
    assert (frame["reported_low"] == frame["value"] - frame["expanded_uncertainty"]).all()


def test_the_tests_and_criteria_frames(linear):
    tests = linear.to_frame("tests")
    assert list(tests["test"]) == ["lack_of_fit", "mandel", "runs", "intercept", "weighting"]
    assert tests.loc[tests["test"] == "mandel", "p_value"].item() == linear.record.validation.mandel.p_value
    criteria = linear.to_frame("criteria")
    assert (criteria["status"] == "met").sum() == 7  # the demo's criteria, all met


def test_save_and_read_back(linear, tmp_path):
    linear.save(tmp_path / "out", pdf=False)
    record = notebook.read(tmp_path / "out")
    assert record.results == linear.record.results
    assert record.verdict == linear.record.verdict


def test_read_names_a_missing_record(tmp_path):
    with pytest.raises(InputError, match="no record here"):
        notebook.read(tmp_path)
