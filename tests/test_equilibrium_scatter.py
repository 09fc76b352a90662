"""The equilibrium study's observed scatter on the right statistical units: the standards' line
through the prepared standards' means, reading and preparation scatter split as an assay's, and
each random effect counted once (mixtures, addition series). Demo data are invented; each check
names its source."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from conftest import DEMOS, copy_demo, edit_text

from validate.inputs.items import Cuvette
from validate.inputs.method_file import load_method
from validate.model.equilibrium import build_equilibrium_model
from validate.model.line import fit_line
from validate.model.standards import line_by_sums

NICKEL = DEMOS / "nickel_complex"


def _model(path=NICKEL / "method.toml", scatter: str | None = None):
    method = load_method(path)
    if scatter is not None:
        method = dataclasses.replace(method, settings=dataclasses.replace(method.settings, scatter=scatter))
    return build_equilibrium_model(method)


def test_components_are_the_one_way_random_model_of_the_standards():
    # s_r pooled within each standard's repeated readings, s_m the residual SD of the standards'
    # means about their line (n - 2), u_p^2 = s_m^2 - s_r^2/m (one-way random model; Searle,
    # Casella and McCulloch, Variance Components (1992), from memory), computed here by hand.
    model = _model()
    preps = [p for lv in model.design.standards for p in lv.preparations]
    within = sum(sum((a - p.mean) ** 2 for a in p.readings) for p in preps)
    s_r = math.sqrt(within / sum(p.count - 1 for p in preps))
    fit = fit_line([p.concentration for p in preps], [p.mean for p in preps])
    sc = model.design.scatter_components()
    assert sc.reading_sd == pytest.approx(s_r, rel=1e-12)
    assert (sc.means_sd, sc.means_dof) == (pytest.approx(fit.residual_sd, rel=1e-12), len(preps) - 2)
    assert sc.preparation_sd == pytest.approx(math.sqrt(max(0.0, fit.residual_sd**2 - s_r**2 / 3)), rel=1e-12)


def test_a_mixture_carries_u_p_and_reading_scatter_and_no_glassware_repeatability():
    # Observed treatment: the scatter of independently prepared standards stands for the per-use
    # repeatability of preparing a solution, so a mixture (the study's sample) carries
    # u^2 = u_p^2 + s_r^2/m (ISO 8466-1 / CG4 A5 on preparation means) and no repeatability term
    # of its own glassware (GUM 4.1: an effect counted once).
    model = _model()
    sc = model.design.scatter_components()
    for mix in model.design.mixtures:
        term = model.sources[f"calibration scatter, {mix.id}"]  # one term on s_m, with its dof
        assert term.u == pytest.approx(math.sqrt(sc.sample_variance(mix.count, 1.0)), rel=1e-12)
        assert term.dof == sc.means_dof
        assert not [n for n, s in model.sources.items() if s.step == f"prepare {mix.id}" and "repeatability" in n]
    # bottom-up, the mixture's glassware keeps its repeatability and no observed term is added
    bottom_up = _model(scatter="bottom-up")
    for mix in bottom_up.design.mixtures:
        assert [n for n, s in bottom_up.sources.items() if s.step == f"prepare {mix.id}" and "repeatability" in n]
        assert f"calibration scatter, {mix.id}" not in bottom_up.sources


def test_addition_series_points_carry_reading_scatter_only():
    # An addition series is not a set of independent preparations: each addition's error is
    # carried by every later point, so the additions keep their repeatability bottom-up and the
    # points carry s_r/sqrt(m) only (the preparation scatter would count the additions twice).
    model = _model()
    sc = model.design.scatter_components()
    for point in model.design.series_points:
        assert model.sources[f"reading scatter, {point.id}"].u == pytest.approx(
            sc.reading_sd / math.sqrt(point.count), rel=1e-12)
        assert f"calibration scatter, {point.id}" not in model.sources
    assert any("repeatability (T addition" in n for n in model.sources)


def test_standards_line_runs_through_each_preparation_mean(tmp_path):
    # A second independent preparation of a standard recorded under its id (the readings table's
    # `preparation` column) is a point of its own: the model's line equals the least-squares line
    # through every preparation's mean (Draper and Smith, Applied Regression Analysis, 1998,
    # chapter 1: a group mean with weight p gives the same line as its p points). Invented readings.
    folder = copy_demo(tmp_path, NICKEL)
    edit_text(folder, "id,absorbance", "id,absorbance,preparation", name="readings.csv", count=1)
    for line, label in (("E3,0.4967", "a"), ("E3,0.4987", "a"), ("E3,0.4969", "b")):
        edit_text(folder, line + "\n", f"{line},{label}\n", name="readings.csv", count=1)
    model = _model(folder / "method.toml")
    e3 = next(lv for lv in model.design.standards if lv.id == "E3")
    assert [p.readings for p in e3.preparations] == [(0.4967, 0.4987), (0.4969,)]
    x0 = model.nominal_inputs()
    sm, sl, sa, reps, *_ = model.columns(x0)
    slope, intercept = line_by_sums(sm if model.study.limiting == "metal" else sl, sa, reps)
    xs, ys = model.design.point_data()
    path = 1.0 if model.study.cuvette is None else model.method.item_of(model.study.cuvette, Cuvette).path
    fit = fit_line(xs, [y / path for y in ys])
    assert float(slope) == pytest.approx(fit.slope, rel=1e-9)
    assert float(intercept) == pytest.approx(fit.intercept, rel=1e-9, abs=1e-12)
    assert len(xs) == 6 and model.design.scatter_components().means_dof == 4


def test_more_readings_of_a_mixture_never_average_the_preparation_away():
    # u^2 = u_p^2 + s_r^2/m: the mixture's observed-scatter variance falls towards u_p^2 as it is
    # read more often, never to zero (one-way random model, from memory).
    sc = _model().design.scatter_components()
    variances = [sc.sample_variance(m, 1.0) for m in (1, 3, 10, 10**6)]
    assert np.all(np.diff(variances) < 0)
    assert variances[-1] == pytest.approx(sc.preparation_sd**2, rel=1e-5)


def test_a_series_point_without_reading_scatter_takes_the_stated_noise():
    # Where no solution was read twice there is no s_r; s_m would carry the preparation a second
    # time beside the additions' volumes, which stay bottom-up (GUM 4.1: each effect once), so the
    # point gets no observed term and its readings carry the photometer's stated noise.
    from validate.model.equilibrium import _series_terms
    from validate.model.scatter import ScatterComponents

    no_split = ScatterComponents(means_sd=0.002, means_dof=5, reading_sd=None, reading_dof=0,
                                 preparation_sd=None, mean_inverse_count=1.0)
    assert _series_terms(no_split, "T.1", 3) is None
    split = ScatterComponents(means_sd=0.002, means_dof=5, reading_sd=0.0015, reading_dof=10,
                              preparation_sd=0.001, mean_inverse_count=1 / 3)
    (term,) = _series_terms(split, "T.1", 3)
    assert term.label == "reading scatter" and term.u == pytest.approx(0.0015 / math.sqrt(3))
