"""Second-order calibration limits follow the straight line's rule for samples read fewer times
than the function's points (validate.validation.limits.SAMPLE_RULE): the residual route's sigma is
the sample's response SD sqrt(u_p^2 + s_r^2/m0) (one-way random model, Searle, Casella and
McCulloch 1992, from memory; ICH Q2(R1) 6.3, sigma the SD of the response as the sample is
measured, from memory), never below the points' residual SD; read as often as the points, the
residual SD stands. By hand first, then through the invented saturating-reagent demo."""

from __future__ import annotations

import math
import shutil

import pytest
from conftest import DEMOS

from validate.model.quadratic import fit_quadratic
from validate.validation.limits import SampleReadings
from validate.validation.second_order import second_order_limits
from validate.workflow import pipeline

# an invented curved response, one point per level (means of 3 readings)
X = [0.0, 1.0, 2.0, 4.0, 6.0, 8.0, 10.0]
Y = [0.003, 0.101, 0.197, 0.382, 0.553, 0.712, 0.857]


def test_by_hand_a_sample_read_once_takes_its_own_response_sd():
    fit = fit_quadratic(X, Y, None)
    b = fit.coefficients[1]
    # s_r = 0.012, u_p = 0.004, m0 = 1: sigma^2 = 16e-6 + 144e-6 = 160e-6 (by hand)
    once = SampleReadings(count=1, reading_sd=0.012, preparation_sd=0.004, points_count=3.0)
    lim = second_order_limits(fit, None, "ich_residual_sd", once)
    route = next(r for r in lim["routes"] if r["route"] == "ich_residual_sd")
    assert route["sigma"] == pytest.approx(math.sqrt(160e-6), rel=1e-12)
    assert route["lod"] == pytest.approx(3.3 * math.sqrt(160e-6) / b, rel=1e-12)
    assert route["loq"] == pytest.approx(10 * math.sqrt(160e-6) / b, rel=1e-12)
    assert "sqrt(u_p^2 + s_r^2/m0)" in route["source"]
    # the intercept route is not a response of the sample: unchanged
    plain = second_order_limits(fit, None, "ich_residual_sd")
    intercept = [next(r for r in x["routes"] if r["route"] == "ich_intercept_sd") for x in (lim, plain)]
    assert intercept[0] == intercept[1]
    # read as often as the points or more: the function's residual SD stands
    for m0 in (3, 6):
        same = second_order_limits(fit, None, "ich_residual_sd", SampleReadings(m0, 0.012, 0.004, 3.0))
        assert same == plain
    # never below the points' residual SD (u_p and s_r tiny against the scatter about the function)
    tiny = second_order_limits(fit, None, "ich_residual_sd", SampleReadings(1, 1e-9, 1e-9, 3.0))
    assert next(r for r in tiny["routes"] if r["route"] == "ich_residual_sd")["sigma"] == fit.residual_sd


def _once(tmp_path):
    folder = tmp_path / "demo"
    shutil.copytree(DEMOS / "saturating_reagent", folder)
    readings = folder / "readings.csv"
    kept, seen = [], set()
    for line in readings.read_text(encoding="utf-8").splitlines(keepends=True):
        ident = line.split(",")[0]
        if ident.startswith(("rinse", "final_rinse")):
            if ident in seen:
                continue  # every sample read once; the standards keep their three readings
            seen.add(ident)
        kept.append(line)
    readings.write_text("".join(kept), encoding="utf-8")
    return folder / "method.toml"


def test_the_saturating_demo_with_samples_read_once_uses_their_response_sd(tmp_path):
    run = pipeline.analyse(_once(tmp_path), trials=None, advice=False)
    validation = run.record["validation"]
    units = validation["fit_units"]
    sigma = math.sqrt(units["preparation_sd"] ** 2 + units["reading_sd"] ** 2 / 1)
    block = run.record["calibration"]["second_order"]
    route = next(r for r in block["limits"]["routes"] if r["route"] == "ich_residual_sd")
    assert sigma > block["residual_standard_deviation"]  # the rule matters here
    assert route["sigma"] == pytest.approx(sigma, rel=1e-12)
    b = block["coefficients"][1]
    assert route["lod"] == pytest.approx(3.3 * sigma / b, rel=1e-12)
    # the validation block's limits (range flags, reporting units, the LOQ criterion) use the same
    limits = validation["limits"]
    assert next(r for r in limits["routes"] if r["route"] == "ich_residual_sd")["sigma"] == pytest.approx(sigma)
    assert any("sqrt(u_p^2 + s_r^2/m0)" in n for n in limits["notes"])
    # the demo as shipped reads samples as often as the standards: the residual SD stands
    shipped = pipeline.analyse(DEMOS / "saturating_reagent" / "method.toml", trials=None, advice=False)
    s_block = shipped.record["calibration"]["second_order"]
    s_route = next(r for r in s_block["limits"]["routes"] if r["route"] == "ich_residual_sd")
    assert s_route["sigma"] == s_block["residual_standard_deviation"]
