"""Sources grouped by the input quantity they act through (CG4's presentation of a budget).

A source that acts through one quantity belongs to it; one shared by several quantities is
correlated between them (GUM 5.2) and stands as a quantity of its own, so the groups stay
independent and their shares add up to one (GUM 5.1.2 for independent inputs)."""

from __future__ import annotations

import pytest

from validate.metrology.equipment import SourceSet
from validate.metrology.sources import normal


def test_a_source_shared_by_two_quantities_is_its_own_quantity():
    ss = SourceSet()
    ss.add(normal("pipette: calibration", 0.0, 1.0), "pipette: volume (S1)")
    ss.add(normal("pipette: repeatability (S1)", 0.0, 1.0), "pipette: volume (S1)")
    ss.add(normal("pipette: calibration", 0.0, 1.0), "pipette: volume (S2)")
    ss.add(normal("stock: purity", 1.0, 0.01))
    assert ss.sources["pipette: repeatability (S1)"].quantity == "pipette: volume (S1)"
    assert ss.sources["pipette: calibration"].quantity == "pipette: calibration"
    assert ss.sources["stock: purity"].quantity == "stock: purity"


def test_quantity_shares_add_up_to_one_in_the_equilibrium_demo(nickel_demo):
    # the quantity groups are independent by construction, so their shares add up to one
    for result in nickel_demo.record["results"]:
        shares = [g["share"] for g in result["budget_by_quantity"]]
        assert sum(shares) == pytest.approx(1.0, rel=1e-9)
