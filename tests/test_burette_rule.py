"""The maximum permissible error of a burette applies to every delivery on its scale.

ISO 385 (burettes) states the maximum permissible error for any volume delivered, the
difference between any two scale points (from memory); CG4's titration examples take the
burette tolerance as it is for each titre (EURACHEM/CITAC CG4, 3rd ed., from memory). The
method below is invented for the check: a certified stock diluted with a burette.
"""

from __future__ import annotations

import math
import textwrap

import pytest

from validate.workflow import pipeline as api

METHOD = """
    # invented for a test of the burette rule
    [method]
    title = "burette rule"

    [settings]
    glassware_distribution = "rectangular"

    [equipment.burette_25]
    kind = "burette"
    nominal = "25 mL"
    tolerance = "0.03 mL"
    reading = "0.01 mL"

    [equipment.flask_100]
    kind = "volumetric flask"
    nominal = "100 mL"
    tolerance = "0.1 mL"

    [solutions.stock]
    made_by = "certificate"
    concentration = {{ value = "1000 mg/L", expanded_uncertainty = "2 mg/L", coverage_factor = 2 }}

    [solutions.diluted]
    made_by = "dilution"
    from = "stock"
    aliquot = {{ item = "burette_25", volume = "{volume}" }}
    flask = "flask_100"

    [result]
    name = "diluted concentration"
    unit = "mg/L"
    formula = "diluted"
"""


def _run(tmp_path, volume: str):
    path = tmp_path / "method.toml"
    path.write_text(textwrap.dedent(METHOD.format(volume=volume)), encoding="utf-8")
    (result,) = api.analyse(path, trials=None, advice=False).results
    return {row.source: row for row in result.contributions}, result


@pytest.mark.parametrize("volume_ml", [1.0, 10.0, 25.0])
def test_every_delivery_carries_the_full_tolerance(tmp_path, volume_ml):
    # ISO 385 (from memory): +/-0.03 mL for a 25 mL class A burette at any delivered volume,
    # so a 1.00 mL delivery has u = 0.03/sqrt(3) mL (rectangular, GUM 4.3.7), not 1/25 of it.
    rows, result = _run(tmp_path, f"{volume_ml:.2f} mL")
    calibration = rows["burette_25: calibration"]
    assert calibration.standard_uncertainty == pytest.approx(0.03 / math.sqrt(3), rel=1e-9)
    relative = abs(calibration.contribution) / result.value
    assert relative == pytest.approx(0.03 / math.sqrt(3) / volume_ml, rel=1e-6)


def test_the_two_readings_stay_beside_the_calibration(tmp_path):
    # a delivery is the difference of two readings (GUM 5.1.2), each within +/-0.01 mL here
    rows, result = _run(tmp_path, "1.00 mL")
    readings = [r for name, r in rows.items() if "reading at" in name]
    assert len(readings) == 2
    for row in readings:
        assert abs(row.contribution) / result.value == pytest.approx(0.01 / math.sqrt(3) / 1.0, rel=1e-6)
