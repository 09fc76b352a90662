"""Observed scatter as two variance components, effects counted once, the scatter checks and the
weights of a line (issue items on statistical units, double counting, scatter consistency and
weighting). Demo data are invented; each check names its source."""

from __future__ import annotations

import dataclasses
import math
import statistics

import numpy as np
import pytest
from conftest import DEMOS, edit_text
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from validate.model.assay import build_model
from validate.model.design import SCATTER_COVERED
from validate.model.levels import Level, Preparation
from validate.model.scatter import ScatterComponents
from validate.model.weights import MIN_READINGS_FOR_WEIGHTS, variance_function
from validate.workflow import pipeline as api

PHOSPHATE = DEMOS / "phosphate_assay" / "method.toml"


def _bottom_up(method):
    return dataclasses.replace(method, settings=dataclasses.replace(method.settings, scatter="bottom-up"))


def test_preparation_scatter_never_averages_away():
    # u^2(y0) = u_p^2 + s_r^2/m0 (one-way random model; Searle, Casella and McCulloch, Variance
    # Components (1992), from memory): with ever more readings it falls to u_p^2, not to zero.
    sc = ScatterComponents(means_sd=0.002, means_dof=5, reading_sd=0.002, reading_dof=14,
                           preparation_sd=math.sqrt(0.002**2 - 0.002**2 / 3), mean_inverse_count=1 / 3)
    assert sc.sample_variance(3, 1.0) == pytest.approx(0.002**2, rel=1e-12)  # a sample read like a standard
    assert sc.sample_variance(10**6, 1.0) == pytest.approx(sc.preparation_sd**2, rel=1e-5)
    # one term on s_m with its 5 degrees of freedom (u_p alone, a difference of two variances, has
    # fewer: Welch-Satterthwaite, GUM G.4.1), scaled to the sample's 6 readings
    (term,) = sc.sample_terms("x", 6, 1.0)
    assert term.u == pytest.approx(math.sqrt(sc.preparation_sd**2 + 0.002**2 / 6), rel=1e-12)
    assert term.dof == 5 and term.label == "calibration scatter"
    (reading,) = sc.reading_terms("x", 6, 1.0)  # a solution whose preparation is carried bottom-up
    assert reading.u == pytest.approx(0.002 / math.sqrt(6)) and reading.dof == 14


def test_observed_scatter_covers_each_random_effect_once():
    # docs/design.md, "Never count an effect twice" (CG4's warning against double counting, from
    # memory): with the observed treatment no per-use repeatability of a standard's or a sample's
    # preparation and no reading noise is added; bottom-up they are all there and no observed term is.
    method, model = api.check(PHOSPHATE)
    design = model.design
    assert all(design.covers(term) for term in SCATTER_COVERED)
    steps = {s.step for n, s in model.sources.items() if "repeatability" in n or "reading at" in n}
    assert steps == {"prepare stock", "prepare intermediate"}  # shared by every standard: not scatter
    assert not any(": noise," in n for n in model.sources)
    bottom = build_model(_bottom_up(method))
    assert not bottom.design.covered_terms()
    names = list(bottom.sources)
    assert any(n.startswith("pipette_20: repeatability (V_sample") for n in names)
    assert any(n.startswith("flask_50: repeatability (S1") for n in names)
    assert any(": noise, river_upstream reading 1" in n for n in names)
    assert not any("scatter," in n for n in names)


def test_the_record_says_what_the_observed_scatter_covers():
    run = api.analyse(PHOSPHATE, trials=None, advice=False)
    units = run.record["validation"]["fit_units"]
    assert units["points"] == "preparation means" and units["preparations"] == 9 and units["readings"] == 27
    assert units["covered_by_observed_scatter"] == list(SCATTER_COVERED.values())
    assert any("sample dilution" in a for a in run.record["assumptions"])


def _pooled(groups):
    groups = [g for g in groups if len(g) >= 2]
    return (math.sqrt(sum(sum((a - statistics.fmean(g)) ** 2 for a in g) for g in groups)
                      / sum(len(g) - 1 for g in groups)), sum(len(g) - 1 for g in groups))


def test_two_scatter_checks_compare_like_with_like():
    # NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.5.8: T = nu s^2 / sigma0^2, chi-square(nu).
    # Pure error (repeated readings of one solution, within each day) against the photometer's
    # reading noise; the preparation means' scatter about the line against preparation + reading noise.
    run = api.analyse(PHOSPHATE, trials=None, advice=False)
    method, v = run.method, run.record["validation"]
    noise = method.items["photometer"].noise
    ids = list(method.calibration.standards) + list(method.calibration.blanks)
    groups = []
    for i in ids:
        labels = method.reading_series.get(i) or [""] * len(method.readings[i])
        groups += [[a for a, b in zip(method.readings[i], labels, strict=True) if b == lab]
                   for lab in dict.fromkeys(labels)]
    s_r, dof_r = _pooled(groups)
    reading = v["reading_noise_consistency"]
    assert reading["observed_sd"] == pytest.approx(s_r, rel=1e-12) and reading["dof"] == dof_r
    assert reading["predicted_sd"] == noise
    assert reading["chi_square"] == pytest.approx(dof_r * s_r**2 / noise**2, rel=1e-12)
    assert reading["p_excess"] == pytest.approx(stats.chi2.sf(dof_r * s_r**2 / noise**2, dof_r), rel=1e-9)
    line = v["scatter_consistency"]
    assert line["dof"] == 9 - 2 and line["observed_sd"] == pytest.approx(v["fit"]["residual_sd"], rel=1e-12)
    assert line["predicted_sd"] > noise / math.sqrt(3)  # preparation noise comes on top of the readings'
    assert line["chi_square"] == pytest.approx(7 * line["observed_sd"] ** 2 / line["predicted_sd"] ** 2, rel=1e-12)
    assert "preparations' mean readings" in line["compared"] and "pure error" in reading["compared"]


def test_independent_preparations_of_one_level_give_pure_error():
    # The demo's second, independent preparations S4b and S6b (same recipes as S4 and S6, their own
    # ids): two levels of two preparations. The lack-of-fit F test (Draper and Smith, Applied
    # Regression Analysis, 3rd ed., 2.1) then runs on the preparation means with
    # (m - 2, N - m) = (7 - 2, 9 - 7) = (5, 2) degrees of freedom, pure error from the pairs.
    run = api.analyse(PHOSPHATE, trials=None, advice=False)
    design = run.model.design
    s4 = next(lv for lv in design.levels if lv.id == "S4")
    assert [p.solution for p in s4.preparations] == ["S4", "S4b"]
    lof = run.record["validation"]["lack_of_fit"]
    assert lof["evaluable"] and tuple(lof["dof"]) == (5, 2)
    xs, ys, _ = design.point_data(1e-3)
    x, y = np.array(xs), np.array(ys)
    b, a = np.polyfit(x, y, 1)
    rss = float(np.sum((y - a - b * x) ** 2))
    ids = design.point_ids()
    ss_pe = sum((y[ids.index(p)] - y[ids.index(q)]) ** 2 / 2 for p, q in (("S4", "S4b"), ("S6", "S6b")))
    assert lof["statistic"] == pytest.approx(((rss - ss_pe) / 5) / (ss_pe / 2), rel=1e-9)
    assert lof["p_value"] == pytest.approx(stats.f.sf(lof["statistic"], 5, 2), rel=1e-9)


def _level(ident, c, sd, n=4):
    """n readings of mean 0.1 c with standard deviation exactly sd (symmetric +/- pattern)."""
    half = [sd * math.sqrt((n - 1) / n)] * (n // 2)
    return Level(ident, "standard", (Preparation(ident, c, tuple(0.1 * c + d for h in half for d in (h, -h))),))


def test_variance_function_recovers_a_linear_standard_deviation():
    # s = a + b c (ISO 11095, linear model of the standard deviation, from memory): level SDs that
    # follow it exactly give back a and b.
    levels = [_level(f"L{c}", c, 0.001 + 0.0004 * c) for c in (1.0, 2.0, 4.0, 6.0, 8.0)]
    a, b, floor = variance_function(levels)
    assert (a, b) == pytest.approx((0.001, 0.0004), rel=1e-9)
    assert 0 < floor < a


def test_weights_warn_on_few_readings_and_the_variance_function_is_offered(tmp_path):
    # Three readings give s with 2 degrees of freedom: its inverse square is mostly noise (common
    # practice: at least MIN_READINGS_FOR_WEIGHTS readings per level for 1/s^2 weights).
    from conftest import copy_demo

    folder = copy_demo(tmp_path)
    path = edit_text(folder, 'concentration_unit = "µmol/L"', 'concentration_unit = "µmol/L"\nweighting = '
                     '"inverse-variance"', count=1)
    _, model = api.check(path)
    assert MIN_READINGS_FOR_WEIGHTS == 5
    assert any("rest on as few as 3 readings" in a for a in model.assumptions)
    path = edit_text(folder, '"inverse-variance"', '"variance-function"', count=1)
    _, model = api.check(path)
    design = model.design
    assert design.weighting == "variance-function" and not design.notes
    a, b, floor = variance_function(design.levels)
    for lv in design.levels:  # w proportional to 1/s(c)^2
        ratio = design.weight(lv.id) * max(a + b * lv.concentration, floor) ** 2
        first = design.weight(design.levels[0].id) * max(a + b * design.levels[0].concentration, floor) ** 2
        assert ratio == pytest.approx(first, rel=1e-9)
    assert np.mean([design.weight(lv.id) for lv, _ in design.fitted()]) == pytest.approx(1.0, rel=1e-12)


def test_preparations_recorded_under_one_id(tmp_path):
    # The readings table's `preparation` column: a second, independent preparation of S4 recorded
    # under the id S4 gives the same level of two preparations as a separate solution entry does,
    # and the same lack-of-fit test (Draper and Smith, 2.1). Invented readings.
    from conftest import copy_demo

    folder = copy_demo(tmp_path)
    edit_text(folder, "id,absorbance,series", "id,absorbance,series,preparation", name="readings.csv", count=1)
    for old in ("S4,0.3406,day 1", "S4,0.3388,day 1", "S4,0.3456,day 1"):
        edit_text(folder, old, old + ",1", name="readings.csv", count=1)
    edit_text(folder, "S6,0.5054,day 1", "S4,0.3441,day 1,2\nS4,0.3452,day 1,2\nS4,0.3430,day 1,2\nS6,0.5054,day 1",
              name="readings.csv", count=1)
    run = api.analyse(folder / "method.toml", trials=None, advice=False)
    s4 = next(lv for lv in run.model.design.levels if lv.id == "S4")
    # the demo's own S4b is a third preparation of the level
    assert [p.key for p in s4.preparations] == ["S4 (preparation 1)", "S4 (preparation 2)", "S4b"]
    assert [p.readings for p in s4.preparations][:2] == [(0.3406, 0.3388, 0.3456), (0.3441, 0.3452, 0.3430)]
    lof = run.record["validation"]["lack_of_fit"]
    assert lof["evaluable"] and tuple(lof["dof"]) == (5, 3)  # 7 levels, 10 preparations
    assert "calibration scatter, S4 (preparation 2)" in run.model.sources
    # bottom-up, the two preparations would share one set of preparation terms: refused
    from validate.inputs.errors import InputError

    path = edit_text(folder, 'scatter = "observed"', 'scatter = "bottom-up"', count=1)
    with pytest.raises(InputError, match="own solution entry"):
        api.check(path)


def test_an_equilibrium_study_line_is_judged_on_its_prepared_standards():
    # The standards' line of a study is judged on one point per prepared standard (their mean
    # readings), as a method's line is: five standards read three times are five points, n - 2 = 3.
    method, model = api.check(DEMOS / "nickel_complex" / "method.toml")
    from validate.validation.block import equilibrium_validation_block

    block = equilibrium_validation_block(model)
    standards = method.equilibrium.standards
    assert block["fit"]["n"] == len(standards) and block["fit"]["dof"] == len(standards) - 2
    assert block["fit"]["y"] == pytest.approx([statistics.fmean(method.readings[s.id]) for s in standards])
    assert not block["lack_of_fit"]["evaluable"]  # one preparation per level: no pure error


@given(st.lists(st.lists(st.floats(-0.01, 0.01), min_size=2, max_size=5), min_size=4, max_size=7),
       st.integers(1, 12))
@settings(max_examples=60, deadline=None)
def test_components_add_up_to_the_means_scatter(noise, m0):
    # Property of the split (one-way random model): a sample's u^2 is s_m^2 scaled by
    # (u_p^2 + s_r^2/m0)/(u_p^2 + s_r^2 mean(1/m)); where u_p is not truncated at zero that is
    # u_p^2 + s_r^2/m0 (never below u_p^2), and a sample read as often as the standards carries
    # exactly s_m^2. Invented readings about a true line.
    from validate.model.design import CalibrationDesign

    levels = tuple(Level(f"L{i}", "standard", (Preparation(f"L{i}", float(i), tuple(0.1 * i + 0.05 + d for d in r)),))
                   for i, r in enumerate(noise))
    design = CalibrationDesign(levels, (), False, ())
    sc = design.scatter_components()
    if sc.reading_sd is None or sc.reading_sd == 0 or sc.means_sd == 0:
        return
    var = sc.sample_variance(m0, 1.0)
    average = sc.preparation_sd**2 + sc.reading_sd**2 * sc.mean_inverse_count
    assert var == pytest.approx(sc.means_sd**2 * (sc.preparation_sd**2 + sc.reading_sd**2 / m0) / average,
                                rel=1e-9, abs=1e-18)
    if sc.preparation_sd > 0:
        assert var == pytest.approx(sc.preparation_sd**2 + sc.reading_sd**2 / m0, rel=1e-9, abs=1e-18)
        assert var >= sc.preparation_sd**2 * (1 - 1e-12)
    counts = {lv.count for lv in levels}
    if len(counts) == 1 and sc.preparation_sd > 0:
        (m,) = counts
        assert sc.sample_variance(m, 1.0) == pytest.approx(sc.means_sd**2, rel=1e-9)
        assert all(sc.point_term(lv.id, m, 1.0).u == pytest.approx(sc.means_sd, rel=1e-12) for lv in levels)


def test_on_a_weighted_line_only_the_pure_error_is_checked_against_the_stated_noise(tmp_path):
    # On a weighted line the means' scatter about the line is on the line's normalised weighted
    # scale (Miller and Miller 5.10: weights normalised to a mean of 1), not in absorbance, so that
    # check is not made. The pure error (ISO 8466-1: repeated readings of one solution about their
    # own mean) does not involve the line at all: taken unweighted it is in absorbance and is set
    # against the photometer's stated noise (chi-square, NIST/SEMATECH e-Handbook 1.3.5.8) exactly
    # as on the unweighted line of the same readings.
    from conftest import copy_demo

    from validate.validation.block import scatter_checks

    folder = copy_demo(tmp_path)
    path = edit_text(folder, 'concentration_unit = "µmol/L"', 'concentration_unit = "µmol/L"\nweighting = '
                     '"variance-function"', count=1)
    method, model = api.check(path)
    from validate.model.line import fit_line
    fit = fit_line(*model.design.point_data())
    line_w, reading_w = scatter_checks(method, model.design, fit)
    unweighted_method, unweighted = api.check(PHOSPHATE)
    line, reading = scatter_checks(unweighted_method, unweighted.design, fit_line(*unweighted.design.point_data()))
    assert line is not None and reading is not None
    assert line_w is None and reading_w is not None
    assert reading_w.dof == reading.dof
    assert (reading_w.observed_sd, reading_w.predicted_sd, reading_w.chi_square, reading_w.p_excess) == \
        pytest.approx((reading.observed_sd, reading.predicted_sd, reading.chi_square, reading.p_excess), rel=1e-12)
