"""The calibration design (validate.model.design) and the one least-squares line (validate.model.line).

The line is checked against NIST StRD certified values and against numpy/statsmodels as
general reference libraries; the design against the (invented) demo method files.
"""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest
from conftest import DEMOS, REFERENCE
from uncertainties import ufloat

from validate.model.design import CalibrationDesign
from validate.model.levels import Level, Preparation, ReadSolution
from validate.model.line import fit_line, level_sums, straight_line
from validate.model.standards import line_by_sums
from validate.workflow import pipeline as api

# NIST/ITL Statistical Reference Datasets, linear regression dataset "Norris"
# (data in tests/reference/nist_norris.csv), certified values.
NORRIS_B0 = -0.262323073774029
NORRIS_B1 = 1.00211681802045


def _norris():
    data = np.loadtxt(REFERENCE / "nist_norris.csv", delimiter=",", skiprows=1)
    return data[:, 0].tolist(), data[:, 1].tolist()


def test_one_line_reproduces_norris_certified_values():
    # Source: NIST StRD "Norris", certified B0 and B1 (to better than 1e-9 relative).
    x, y = _norris()
    intercept, slope = straight_line([1] * len(x), x, y)
    assert slope == pytest.approx(NORRIS_B1, rel=1e-9)
    assert intercept == pytest.approx(NORRIS_B0, rel=1e-9)
    # the same core under the standards' correction and the statistics' fit
    assert line_by_sums(x, y) == pytest.approx((NORRIS_B1, NORRIS_B0), rel=1e-9)
    fit = fit_line(x, y)
    assert (fit.slope, fit.intercept) == pytest.approx((NORRIS_B1, NORRIS_B0), rel=1e-9)


def test_norris_as_ufloats_and_as_trial_arrays():
    # Source: NIST StRD "Norris" certified B0, B1. The same code on ufloats (linear engine)
    # and on arrays of trials (Monte Carlo engine): the estimates are the certified values,
    # and every trial equals the plain-float line of that trial's data.
    x, y = _norris()
    counts = [1] * len(x)
    intercept_u, slope_u = straight_line(counts, x, [ufloat(v, 0.5) for v in y])
    assert slope_u.nominal_value == pytest.approx(NORRIS_B1, rel=1e-9)
    assert intercept_u.nominal_value == pytest.approx(NORRIS_B0, rel=1e-9)
    rng = np.random.default_rng(7)
    trials = [v + rng.normal(0.0, 0.5, 4) for v in y]
    intercepts, slopes = straight_line(counts, x, trials)
    assert slopes.shape == (4,) and intercepts.shape == (4,)
    for t in range(4):
        a, b = straight_line(counts, x, [float(col[t]) for col in trials])
        assert slopes[t] == pytest.approx(b, rel=1e-12)
        assert intercepts[t] == pytest.approx(a, rel=1e-12, abs=1e-12)


def test_ufloat_slope_uncertainty_is_the_known_sigma_formula():
    # With independent readings of known standard deviation sigma, u(b) = sigma / sqrt(Sxx) and
    # u(a) = sigma sqrt(1/n + xbar^2/Sxx) (Draper and Smith, Applied Regression Analysis, 3rd ed.,
    # section 1.4, from memory). Invented data.
    x = [0.0, 1.0, 2.0, 4.0, 6.0]
    y = [0.011, 0.108, 0.212, 0.405, 0.611]
    sigma = 0.003
    intercept, slope = straight_line([1] * 5, x, [ufloat(v, sigma) for v in y])
    sxx = sum((v - np.mean(x)) ** 2 for v in x)
    assert slope.std_dev == pytest.approx(sigma / np.sqrt(sxx), rel=1e-12)
    assert intercept.std_dev == pytest.approx(sigma * np.sqrt(1 / 5 + np.mean(x) ** 2 / sxx), rel=1e-12)


def test_levels_with_replicates_give_the_line_of_every_reading():
    # n_j readings of mean y_j at x_j: the same line as a fit to every reading (numpy.polyfit as
    # the reference). Invented readings.
    readings = {0.0: [0.010, 0.013], 2.0: [0.201, 0.197, 0.206], 5.0: [0.503, 0.498], 8.0: [0.80, 0.81, 0.79]}
    xs = [x for x, r in readings.items() for _ in r]
    ys = [a for r in readings.values() for a in r]
    slope, intercept = np.polyfit(xs, ys, 1)
    a, b = straight_line([len(r) for r in readings.values()], list(readings),
                         [float(np.mean(r)) for r in readings.values()])
    assert b == pytest.approx(slope, rel=1e-12)
    assert a == pytest.approx(intercept, rel=1e-9)


def test_weighted_levels_match_weighted_least_squares():
    # Weighted least squares (statsmodels WLS as the reference library): weights per reading.
    sm = pytest.importorskip("statsmodels.api")
    x = [1.0, 2.0, 4.0, 8.0, 16.0]
    y = [0.052, 0.099, 0.205, 0.396, 0.811]
    w = [4.0, 2.0, 1.0, 0.5, 0.25]
    ref = sm.WLS(np.asarray(y), sm.add_constant(np.asarray(x)), weights=np.asarray(w)).fit()
    a, b = straight_line([1] * 5, x, y, w)
    assert b == pytest.approx(ref.params[1], rel=1e-12)
    assert a == pytest.approx(ref.params[0], rel=1e-10)
    fit = fit_line(x, y, w)
    assert fit.slope_u == pytest.approx(ref.bse[1], rel=1e-9)
    assert fit.intercept_u == pytest.approx(ref.bse[0], rel=1e-9)


def test_level_sums_refuses_mismatched_columns():
    with pytest.raises(ValueError, match="one count, x and y per level"):
        level_sums([1, 1, 1], [0.0, 1.0, 2.0], [0.0, 1.0])
    with pytest.raises(ValueError, match="one weight per point"):
        fit_line([0.0, 1.0, 2.0], [0.0, 1.0, 2.1], [1.0, 1.0])


def test_a_level_of_several_preparations_fits_each_at_its_own_concentration():
    # Two independent preparations of the middle level, each read twice (invented values):
    # the line runs through every preparation at its own concentration, counting every reading.
    mid = Level("S2", "standard", (Preparation("S2a", 2.0, (0.200, 0.204)),
                                   Preparation("S2b", 2.1, (0.211, 0.209))))
    levels = (Level("S1", "standard", (Preparation("S1", 1.0, (0.101, 0.099)),)), mid,
              Level("S3", "standard", (Preparation("S3", 3.0, (0.302, 0.298)),)))
    design = CalibrationDesign(levels, (), False, (ReadSolution("x", (0.15,)),))
    assert [p.solution for _, p in design.fitted()] == ["S1", "S2a", "S2b", "S3"]
    assert mid.count == 4 and mid.readings == (0.200, 0.204, 0.211, 0.209)
    assert mid.concentration == pytest.approx(2.05)
    xs, ys, ws = design.reading_points()
    assert xs == [1.0, 1.0, 2.0, 2.0, 2.1, 2.1, 3.0, 3.0] and ws is None
    assert design.reading_ids() == ["S1", "S1", "S2", "S2", "S2", "S2", "S3", "S3"]
    slope, intercept = np.polyfit(xs, ys, 1)
    fitted = design.fitted()
    a, b = straight_line([p.count for _, p in fitted], [p.concentration for _, p in fitted],
                         [p.mean for _, p in fitted])
    assert (a, b) == pytest.approx((intercept, slope), rel=1e-9)


def _demo_copy(tmp_path, extra: str):
    folder = tmp_path / "demo"
    shutil.copytree(DEMOS / "phosphate_assay", folder)
    path = folder / "method.toml"
    text = path.read_text().replace('concentration_unit = "µmol/L"', f'concentration_unit = "µmol/L"\n{extra}')
    path.write_text(text)
    return path


def test_demo_design_follows_the_method_file():
    method, model = api.check(DEMOS / "phosphate_assay" / "method.toml")
    design = model.design
    cal = method.calibration
    # S4b and S6b are second, independent preparations of S4 and S6 (same concentration): one level each
    levels = [s for s in cal.standards if s not in ("S4b", "S6b")]
    assert [lv.id for lv in design.levels] == levels + list(cal.blanks)  # blanks fitted (default)
    assert [lv.role for lv in design.levels] == ["standard"] * len(levels) + ["blank"] * len(cal.blanks)
    for level in design.levels:
        for prep in level.preparations:
            assert prep.readings == tuple(method.readings[prep.solution])
    assert [[p.solution for p in lv.preparations] for lv in design.levels if len(lv.preparations) > 1] == \
        [["S4", "S4b"], ["S6", "S6b"]]
    assert [s.id for s in design.samples] == [s.id for s in method.samples]
    assert {s.id: s.series for s in design.samples} == {s.id: method.reading_series.get(s.id) for s in method.samples}
    assert not design.weighted and design.weight("S1") == 1.0
    plain = json.loads(json.dumps(design.to_dict()))
    assert [lv["id"] for lv in plain["levels"]] == [lv.id for lv in design.levels]
    assert plain["levels"][0]["preparations"][0]["readings"] == list(method.readings[design.levels[0].id])
    # the model refits through exactly these points: at the estimates its line is the design's line
    # (readings divided by the 40 mm path; concentrations in mol/m^3)
    xs, ys, _ = design.reading_points()
    fit = fit_line(xs, ys)
    intercept, slope = model.line(model.nominal_inputs())
    path = method.items["cell_40"].path
    assert slope * path == pytest.approx(fit.slope, rel=1e-12)
    assert intercept * path == pytest.approx(fit.intercept, rel=1e-9, abs=1e-15)


def test_blanks_out_of_the_fit_stay_in_the_design(tmp_path):
    method, model = api.check(_demo_copy(tmp_path, "blanks_in_fit = false"))
    design = model.design
    assert [p.solution for _, p in design.fitted()] == list(method.calibration.standards)
    assert [b.id for b in design.blanks] == ["blank"] and not design.blanks_in_fit
    assert design.blank_readings() == list(method.readings["blank"])
    assert "blank" not in design.reading_ids()


def test_weighted_design_has_weights_of_mean_one(tmp_path):
    # Miller and Miller, section 5.10: w_j = 1/s_j^2, scaled to a mean of one over the line's readings.
    method, model = api.check(_demo_copy(tmp_path, 'weighting = "inverse-variance"'))
    design = model.design
    assert design.weighted
    _, _, ws = design.reading_points()
    assert np.mean(ws) == pytest.approx(1.0, rel=1e-12)
    s1 = np.std(method.readings["S1"], ddof=1)
    s10 = np.std(method.readings["S10"], ddof=1)
    assert design.weight("S1") / design.weight("S10") == pytest.approx((s10 / s1) ** 2, rel=1e-12)
    assert all(design.weight(s.id) > 0 for s in design.samples)


def test_equilibrium_design_follows_the_study():
    method, model = api.check(DEMOS / "nickel_complex" / "method.toml")
    study, design = method.equilibrium, model.design
    assert [lv.id for lv in design.standards] == [m.id for m in study.standards]
    assert design.point_ids() == study.point_ids() == model.points
    assert [p.id for p in design.mixtures] == [m.id for m in study.mixtures]
    assert [p.id for p in design.series_points] == [i for s in study.series for i in s.reading_ids()]
    assert all(p.readings == tuple(method.readings[p.id]) for p in design.points)
    sm, sl, _, reps, *_ = model.columns(model.nominal_inputs())
    limiting = sl if study.limiting == "ligand" else sm
    assert [lv.concentration for lv in design.standards] == pytest.approx(limiting, rel=1e-12)
    # the line runs through the preparations' means: each standard weighs as its preparations (one here)
    assert reps == [1] * len(study.standards)
    xs, ys = design.reading_points()
    assert ys == [a for m in study.standards for a in method.readings[m.id]]
    assert len(xs) == len(ys)
