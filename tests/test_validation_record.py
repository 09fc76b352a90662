"""The validation block of a run: range flags, criteria, trueness and the calibrate command."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys

import pytest
from conftest import DEMOS, REFERENCE

from validate.workflow import pipeline as api


@pytest.fixture(scope="module")
def demo_run():
    return api.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=None, advice=False)


def test_demo_record_has_the_validation_block(demo_run):
    v = demo_run.record["validation"]
    for key in ("lack_of_fit", "mandel", "runs", "intercept", "weighting", "limits", "criteria",
                "range_flags", "window_flags", "scatter_consistency", "trueness", "repeatability"):
        assert key in v, key
    statuses = {c["key"]: c["status"] for c in v["criteria"]["criteria"]}
    assert statuses["min_r_squared"] == "met"
    assert statuses["max_repeatability_rsd"] == "not set"
    # every route's LOD is positive, and the declared one is reported
    assert all(r["lod"] > 0 for r in v["limits"]["routes"])
    assert v["limits"]["declared_route"] == "ich_residual_sd"


def test_extrapolated_sample_is_flagged(tmp_path):
    # ISO 8466-1 restricts the line to its working range: a reading above the highest
    # standard must be flagged in the record, not reported as a plain number.
    folder = tmp_path / "demo"
    shutil.copytree(DEMOS / "phosphate_assay", folder)
    readings = (folder / "readings.csv").read_text()
    readings = readings.replace("outfall,0.6598", "outfall,0.9598").replace("outfall,0.6600", "outfall,0.9600") \
        .replace("outfall,0.6622", "outfall,0.9622")
    (folder / "readings.csv").write_text(readings)
    run = api.analyse(folder / "method.toml", trials=None, advice=False)
    flags = {r["sample"]: r["flags"] for r in run.record["results"]}
    assert flags["outfall"][0] == "above the highest standard (extrapolated)"
    # the demo's scope states 0.05 to 0.4 mg/L: 0.89 mg/L is outside it as well
    assert flags["outfall"][1].startswith("outside the stated scope (0.05 to 0.4 mg/L): 0.89")
    assert flags["river_upstream"] == []


def test_trueness_against_the_reference_sample(demo_run):
    # E_n = (x - X) / sqrt(U_x^2 + U_ref^2) (ISO 13528 / ISO/IEC 17043): recomputed by hand
    t = demo_run.record["validation"]["trueness"]
    ref = next(r for r in demo_run.record["results"] if r["sample"] == "reference_water")
    # each expanded uncertainty as stated: the certificate's U = 0.006 mg/L (k = 2, in method.toml)
    en = (ref["value"] - 0.200) / ((ref["expanded_uncertainty"]) ** 2 + 0.006 ** 2) ** 0.5
    assert t["en_number"] == pytest.approx(en, rel=1e-9)
    assert t["recovery_percent"] == pytest.approx(100 * ref["value"] / 0.200, rel=1e-12)


def test_calibrate_command_reproduces_norris():
    # NIST StRD "Norris" certified values through `validate calibrate --json`
    proc = subprocess.run([sys.executable, "-m", "validate.cli", "calibrate",
                           str(REFERENCE / "norris_calibration.csv"), "--sample", "300", "--sample", "301",
                           "--json"], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)
    assert out["slope"] == pytest.approx(1.00211681802045, rel=1e-9)
    assert out["intercept"] == pytest.approx(-0.262323073774029, rel=1e-9)
    assert out["residual_standard_deviation"] == pytest.approx(0.884796396144373, rel=1e-9)
    # two replicate readings of one unknown: x0 = (300.5 - a) / b
    assert out["sample"]["concentration"] == pytest.approx((300.5 + 0.262323073774029) / 1.00211681802045)
    assert out["sample"]["standard_uncertainty"] > 0


def test_a_single_blank_reading_drops_only_the_blank_route(tmp_path):
    # ICH Q2: sigma from blanks needs replicate blank readings; with one the route is left out
    # (and said so) rather than stopping the run.
    folder = tmp_path / "demo"
    shutil.copytree(DEMOS / "phosphate_assay", folder)
    lines = (folder / "readings.csv").read_text().splitlines()
    blank_rows = [i for i, line in enumerate(lines) if line.startswith("blank,")]
    for i in reversed(blank_rows[1:]):
        del lines[i]
    (folder / "readings.csv").write_text("\n".join(lines) + "\n")
    run = api.analyse(folder / "method.toml", trials=None, advice=False)
    limits = run.record["validation"]["limits"]
    assert "ich_blank_sd" not in {r["route"] for r in limits["routes"]}
    assert any("one blank reading" in note for note in limits["notes"])


def test_intermediate_precision_over_the_series_column(demo_run):
    # ISO 5725-3 one-way analysis of variance over the readings table's `series` column; the
    # F statistic checked against scipy.stats.f_oneway on the same concentrations.
    from scipy import stats

    ip = demo_run.record["validation"]["intermediate_precision"]["reference_water"]
    fit = demo_run.record["validation"]["fit"]
    method = demo_run.method
    values = [(a - fit["intercept"]) / fit["slope"] for a in method.readings["reference_water"]]
    labels = method.reading_series["reference_water"]
    groups = [[v for v, s in zip(values, labels, strict=True) if s == day] for day in sorted(set(labels))]
    assert ip["groups"] == 3 and ip["n"] == 9
    assert ip["f_statistic"] == pytest.approx(stats.f_oneway(*groups).statistic, rel=1e-9)
    assert ip["intermediate_sd"] >= ip["repeatability_sd"]
