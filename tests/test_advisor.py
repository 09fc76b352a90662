"""The improvement advisor: which change lowers the expanded uncertainty most."""

from __future__ import annotations

import dataclasses
import json
import math
from itertools import pairwise

import pytest
from conftest import DEMOS
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from validate.advisor.advice import RELATIVE, WORST, advise, figure
from validate.advisor.candidates import Shares, volume_pair_candidates
from validate.advisor.readings import with_more_calibration_readings, with_more_sample_readings
from validate.inputs.method_file import load_method
from validate.inputs.registers import find_entry, load_registers
from validate.model.assay import build_model
from validate.model.line import fit_line
from validate.propagation.linear import propagate

DEMO = DEMOS / "phosphate_assay" / "method.toml"
fixture_settings = settings(max_examples=20, deadline=None,
                            suppress_health_check=[HealthCheck.function_scoped_fixture])


@pytest.fixture(scope="module")
def demo():
    return load_method(DEMO)


@pytest.fixture(scope="module")
def demo_report(demo):
    return advise(demo, confirm_with_mc=2, mc_trials=20_000, seed=7)


def _u(method):
    return [r.expanded_uncertainty for r in propagate(build_model(method))]


# ---- a pure tightening never raises U ----

DILUTION = """
[equipment.pipette]
kind = "one-mark pipette"
nominal = "{vp} mL"
tolerance = "{tp} mL"

[equipment.flask]
kind = "volumetric flask"
nominal = "{vf} mL"
tolerance = "{tf} mL"

[solutions.stock]
made_by = "certificate"
concentration = {{ value = "1000 mg/L", expanded_uncertainty = "{uc} mg/L", coverage_factor = 2 }}

[solutions.diluted]
made_by = "dilution"
from = "stock"
aliquot = "pipette"
flask = "flask"

[result]
name = "diluted"
unit = "mg/L"
formula = "diluted"
"""


@fixture_settings
@given(tp=st.floats(0.001, 0.05), tf=st.floats(0.01, 0.5), uc=st.floats(0.1, 5.0),
       which=st.sampled_from(["pipette", "flask"]), shrink=st.floats(0.01, 1.0))
def test_tightening_a_tolerance_never_raises_u_dilution(write_method, tp, tf, uc, which, shrink):
    # Every source here has infinite degrees of freedom, so k is fixed and U = k u_c; a smaller
    # tolerance lowers one term of u_c^2 = sum (c_i u_i)^2 (GUM 5.1.2) and cannot raise U.
    method = load_method(write_method(DILUTION.format(vp=10, vf=100, tp=tp, tf=tf, uc=uc)))
    item = method.items[which]
    tighter = dataclasses.replace(method, items={**method.items, which: dataclasses.replace(
        item, tolerance=item.tolerance * shrink, repeatability=item.repeatability * shrink)})
    assert _u(tighter)[0] <= _u(method)[0] * (1 + 1e-12)


@settings(max_examples=15, deadline=None)
@given(which=st.sampled_from(["flask_500", "flask_100", "flask_50", "pipette_5", "pipette_20", "burette_25",
                              "balance", "cell_40"]), shrink=st.floats(0.01, 1.0))
def test_tightening_an_item_never_raises_u_demo(demo, which, shrink):
    # The demo carries the line's observed scatter with 19 degrees of freedom. A Type B source
    # that shrinks lowers nu_eff (Welch-Satterthwaite, GUM G.4.1) and so raises k a little, but
    # with nu >= about 5 the fall of u_c always outweighs it: U must not rise for any result.
    item = demo.items[which]
    # every tolerance-like field the item's kind carries (a balance has no tolerance, a cuvette
    # no repeatability)
    fields = {k: getattr(item, k) * shrink for k in ("tolerance", "repeatability", "linearity") if hasattr(item, k)}
    assert fields, f"{which} carries none of the fields shrunk here"
    tighter = dataclasses.replace(demo, items={**demo.items, which: dataclasses.replace(item, **fields)})
    for after, before in zip(_u(tighter), _u(demo), strict=True):
        assert after <= before * (1 + 1e-12)


def test_a_change_that_raises_u_through_welch_satterthwaite_is_not_advised(write_method):
    # Counterexample to "tighter is always better" for U (not u): a Type A input with 2 degrees
    # of freedom beside a small Type B one. Halving the Type B term lowers nu_eff from about 2.38
    # to 2.09, and k = t_0.975(nu) rises from about 3.8 to 4.2 (GUM G.4.1, G.3): U grows.
    # The advisor must name this change as without effect, not recommend it.
    text = """
[quantities.a]
value = "10 mg/L"
u = "1 mg/L"
dof = 2
[quantities.b]
value = "5 mg/L"
u = "0.3 mg/L"
[result]
name = "total"
unit = "mg/L"
formula = "a + b"
"""
    method = load_method(write_method(text))
    report = advise(method, confirm_with_mc=0)
    listed = [a.details.get("source") for a in report.items]
    assert listed == ["a"]
    assert any("`b`" in text for text in report.without_effect)


# ---- a linear model: halving a source follows the budget shares ----

SUM = """
[quantities.a]
value = "10 mg/L"
u = "{ua} mg/L"
[quantities.b]
value = "20 mg/L"
u = "{ub} mg/L"
[quantities.c]
value = "30 mg/L"
u = "{uc} mg/L"
[result]
name = "total"
unit = "mg/L"
formula = "a + b + c"
"""


@fixture_settings
@given(us=st.lists(st.floats(0.2, 1.0), min_size=3, max_size=3))
def test_halving_ranking_agrees_with_the_budget_shares(write_method, us):
    method = load_method(write_method(SUM.format(ua=us[0], ub=us[1], uc=us[2])))
    (before,) = propagate(build_model(method))
    shares = {c.source: c.share for c in before.contributions}
    ordered = sorted(shares.values())
    assume(min(b - a for a, b in pairwise(ordered)) > 1e-6)
    report = advise(method, confirm_with_mc=0, combine=0)
    halved = [a for a in report.items if a.kind == "better input value"]
    assert [a.details["source"] for a in halved] == sorted(shares, key=lambda s: -shares[s])
    for advice in halved:
        # y = a + b + c with independent normal inputs: u^2 = sum u_i^2 (GUM 5.1.2), k fixed,
        # so halving u_i gives U_after = U_before sqrt(1 - 3/4 share_i).
        share = shares[advice.details["source"]]
        assert advice.expanded_uncertainty_after == pytest.approx(
            before.expanded_uncertainty * math.sqrt(1 - 0.75 * share), rel=1e-9)
        assert advice.target == "total" and advice.unit == "mg/L"


# ---- volume pairs keep the dilution factor ----

PAIR = DILUTION.replace('tolerance = "{tp} mL"', 'class = "{cp}"').replace('tolerance = "{tf} mL"', 'class = "{cf}"')
PIPETTES = [0.5, 1, 2, 5, 10, 20, 25, 50, 100]
FLASKS = [10, 20, 25, 50, 100, 200, 250, 500, 1000]


@fixture_settings
@given(vp=st.sampled_from(PIPETTES), vf=st.sampled_from(FLASKS), cp=st.sampled_from("AB"), cf=st.sampled_from("AB"))
def test_volume_pair_keeps_the_dilution_factor_within_its_tolerance(write_method, vp, vf, cp, cf):
    assume(vp < vf)
    method = load_method(write_method(PAIR.format(vp=vp, vf=vf, cp=cp, cf=cf, uc=0.5)))
    results = propagate(build_model(method))
    entries, _ = load_registers([])
    for cand in volume_pair_candidates(method, Shares.of(results), entries):
        d = cand.details
        assert abs(d["factor_after"] / d["factor_before"] - 1) <= d["factor_tolerance"]
        assert d["relative_tolerance_after"] < d["relative_tolerance_before"]
        variant = cand.apply(method)
        sol = variant.solutions["diluted"]
        pip, flask = variant.items[sol.aliquot.item], variant.items[sol.flask.item]
        # only items the registers hold, in the classes the method already uses
        assert find_entry(entries, "one-mark pipette", cp, pip.nominal).values["tolerance"] == pip.tolerance
        assert find_entry(entries, "volumetric flask", cf, flask.nominal).values["tolerance"] == flask.tolerance
        assert sol.aliquot.volume / sol.flask.volume == pytest.approx(d["factor_after"])
        assert flask.nominal <= 10 * vf * 1e-6 * (1 + 1e-9)


def test_one_into_hundred_becomes_ten_into_thousand(write_method):
    # The example of the brief: 1 mL into 100 mL (class A) -> 10 mL into 1000 mL; ISO 648 and
    # ISO 1042 class A tolerances from the register (values there from memory): 0.008 mL on 1 mL
    # is 0.8 %, 0.02 mL on 10 mL is 0.2 %.
    method = load_method(write_method(PAIR.format(vp=1, vf=100, cp="A", cf="A", uc=0.5)))
    report = advise(method, confirm_with_mc=1, mc_trials=20_000)
    best = report.items[0]
    assert best.kind == "volume pair"
    assert (best.details["aliquot_mL"], best.details["flask_mL"]) == (10, 1000)
    assert best.details["factor_after"] == pytest.approx(0.01, rel=1e-12)
    assert best.expanded_uncertainty_after < best.expanded_uncertainty_before
    assert best.confirmed_by_monte_carlo is not None
    assert best.confirmed_by_monte_carlo < report.monte_carlo_before


def test_class_b_items_are_offered_class_a(write_method):
    method = load_method(write_method(PAIR.format(vp=10, vf=100, cp="B", cf="B", uc=0.5)))
    report = advise(method, confirm_with_mc=0)
    classes = {a.details["item"]: a for a in report.items if a.kind == "better class"}
    assert set(classes) == {"pipette", "flask"}
    for advice in classes.values():
        assert advice.details["class_after"] == "A"
        assert advice.expanded_uncertainty_after < advice.expanded_uncertainty_before
    assert report.combined is not None
    assert report.combined.expanded_uncertainty_after <= report.items[0].expanded_uncertainty_after


def test_piston_pipette_at_one_volume_is_offered_a_one_mark_pipette(write_method):
    # ISO 8655-2 (1000 uL piston pipette) against ISO 648 class A (1 mL one-mark pipette): the
    # register values are from memory; the advice must use the register's one-mark pipette.
    text = PAIR.replace('kind = "one-mark pipette"\nnominal = "{vp} mL"\nclass = "{cp}"',
                        'kind = "piston pipette"\nnominal = "1000 µL"\nclass = "ISO 8655-2"')
    method = load_method(write_method(text.format(vf=100, cf="A", uc=0.5)))
    report = advise(method, confirm_with_mc=0)
    swap = [a for a in report.items if a.kind == "one-mark pipette"]
    assert len(swap) == 1 and swap[0].details == {"item": "pipette", "volume_mL": 1.0}
    entries, _ = load_registers([])
    one_mark = find_entry(entries, "one-mark pipette", "A", 1e-6).values
    piston = find_entry(entries, "piston pipette", "ISO 8655-2", 1e-6).values
    flask = find_entry(entries, "volumetric flask", "A", 100e-6).values["tolerance"]
    # c = c0 V_a / V_f, a product: relative variances add (GUM 5.1.6); the shared temperature term
    # cancels in V_a / V_f; triangular tolerances u = a/sqrt(6) (CG4); the one-mark pipette's
    # repeatability is the tool's default 0.2 x tolerance (CG4 Example A1), the piston pipette's
    # comes from its register (ISO 8655-2); k = 1.96 (normal, all degrees of freedom infinite).
    def expected_u(y, tol_a, rep_a):
        rel = ((0.25 / 1000) ** 2 + (tol_a**2 / 6 + rep_a**2) / (1e-6) ** 2
               + (flask**2 / 6 + (0.2 * flask) ** 2) / (100e-6) ** 2)
        return 1.959963984540054 * y * math.sqrt(rel)

    y = propagate(build_model(method))[0].value
    assert y == pytest.approx(10.0)  # 1000 mg/L, 1 mL into 100 mL
    assert swap[0].expanded_uncertainty_before == pytest.approx(
        expected_u(y, piston["tolerance"], piston["repeatability"]), rel=1e-6)
    assert swap[0].expanded_uncertainty_after == pytest.approx(
        expected_u(y, one_mark["tolerance"], 0.2 * one_mark["tolerance"]), rel=1e-6)


# ---- the demo ----

def test_demo_best_change_lowers_u_and_monte_carlo_confirms_it(demo, demo_report):
    r = demo_report
    assert r.target == WORST and r.unit == RELATIVE
    worst = max(x.expanded_uncertainty / x.value for x in propagate(build_model(demo)))
    assert r.expanded_uncertainty_before == pytest.approx(worst)
    best = r.items[0]
    assert best.expanded_uncertainty_after < best.expanded_uncertainty_before
    assert 0 < best.reduction < 1
    assert best.confirmed_by_monte_carlo is not None and best.confirmed_by_monte_carlo < r.monte_carlo_before
    quantified = [a for a in r.items if a.expanded_uncertainty_after is not None]
    afters = [a.expanded_uncertainty_after for a in quantified]
    assert afters == sorted(afters)
    assert r.items[len(quantified):] == tuple(a for a in r.items if a.expanded_uncertainty_after is None)
    assert r.combined.expanded_uncertainty_after < best.expanded_uncertainty_after
    # one cell is used for standards and samples: nothing to suggest about cells
    assert not any("cell" in a.kind for a in r.items)
    json.dumps(r.to_dict(), allow_nan=False)


def _line_part(results) -> list[float]:
    return [math.sqrt(sum(c.contribution**2 for c in r.contributions if c.step == "calibration fit"))
            for r in results]


def test_more_sample_readings_lower_the_reading_noise_only(demo):
    # Two variance components (ISO 8466-1 / CG4 Example A5 on preparation means): a sample's mean
    # reading carries u_p^2 + s_r^2/m. Reading every sample twice as often keeps s_r and u_p (and the
    # line), so u^2 falls by exactly s_r^2/(2m) (in concentration: divided by b^2), nothing more.
    variant = with_more_sample_readings(demo)
    before, after = build_model(demo), build_model(variant)
    sc_before, sc_after = before.design.scatter_components(), after.design.scatter_components()
    assert sc_after.reading_sd == pytest.approx(sc_before.reading_sd, rel=1e-12)
    assert sc_after.preparation_sd == pytest.approx(sc_before.preparation_sd, rel=1e-12)
    slope = fit_line(*before.design.point_data(1e-3)[:2]).slope  # absorbance per µmol/L
    scale = 1e-3 * (50 / 20) * 30.973762  # µmol/L -> mg/L of P in the sample
    for sample, u_old, u_new in zip(demo.samples, _line_part(propagate(before)), _line_part(propagate(after)),
                                    strict=True):
        m = len(demo.readings[sample.id])
        assert len(variant.readings[sample.id]) == 2 * m
        drop = sc_before.reading_sd**2 * (1 / m - 1 / (2 * m)) * (scale / slope) ** 2
        assert u_old**2 - u_new**2 == pytest.approx(drop, rel=1e-6)


def test_more_calibration_readings_keep_the_line_and_the_preparation_scatter(demo):
    variant = with_more_calibration_readings(demo)
    old_d, new_d = build_model(demo).design, build_model(variant).design
    old, new = fit_line(*old_d.point_data()[:2]), fit_line(*new_d.point_data()[:2])
    assert new.n == old.n and new.dof == old.dof  # one point per prepared solution
    assert (new.slope, new.intercept) == pytest.approx((old.slope, old.intercept), rel=1e-9)
    sc_old, sc_new = old_d.scatter_components(), new_d.scatter_components()
    m = len(demo.readings["S1"])
    assert sc_new.reading_sd == pytest.approx(sc_old.reading_sd, rel=1e-12)
    assert sc_new.reading_dof > sc_old.reading_dof
    assert sc_new.preparation_sd == pytest.approx(sc_old.preparation_sd, rel=1e-9)
    # the means' expected variance u_p^2 + s_r^2/m becomes u_p^2 + s_r^2/(2m); s_m follows that ratio
    ratio = ((sc_old.preparation_sd**2 + sc_old.reading_sd**2 / (2 * m))
             / (sc_old.preparation_sd**2 + sc_old.reading_sd**2 / m))
    assert sc_new.means_sd**2 == pytest.approx(sc_old.means_sd**2 * ratio, rel=1e-9)


def test_readings_outside_the_window_get_qualitative_advice(demo, demo_report):
    # Window 0.2 to 0.8: common practice; optimum A = 0.434 (Twyman and Lothian 1933, from memory).
    window = [a for a in demo_report.items if a.kind == "absorbance window"]
    # mean readings 0.132, 0.170 (the control) and 0.107 (the low reference material)
    assert [a.details["sample"] for a in window] == ["river_upstream", "control_water", "low_reference"]
    assert window[0].expanded_uncertainty_after is None and window[0].reduction is None
    assert window[0].details["net_reading_factor"] > 1  # read higher: less dilution
    high = dataclasses.replace(demo, readings={**demo.readings, "outfall": (0.90, 0.91, 0.90)})
    advice = [a for a in advise(high, confirm_with_mc=0).items if a.kind == "absorbance window"]
    outfall = [a for a in advice if a.details["sample"] == "outfall"]
    assert outfall and outfall[0].details["net_reading_factor"] < 1  # dilute further
    assert "dilute" in outfall[0].change


def test_single_result_figure_is_in_the_result_unit(write_method):
    method = load_method(write_method(SUM.format(ua=0.5, ub=0.5, uc=0.5)))
    results = propagate(build_model(method))
    assert figure(results) == ("total", "mg/L", results[0].expanded_uncertainty)


@pytest.mark.slow
def test_equilibrium_study_is_judged_by_its_combined_K(nickel_demo):
    # An equilibrium study is advised on its combined K; reading every point more often lowers
    # U (the observed scatter of a mean of m readings is s/sqrt(m), ISO 8466-1 / CG4 A5).
    run = nickel_demo
    report = advise(run.method, run.results, confirm_with_mc=0)
    assert report.target == "K, combined"
    kinds = {a.kind: a for a in report.items}
    assert "more point readings" in kinds
    assert kinds["more point readings"].expanded_uncertainty_after < report.expanded_uncertainty_before


def test_the_runs_model_handed_in_gives_the_same_advice(demo, demo_report):
    # a run hands the advisor the model it already built (not built again): the report, Monte
    # Carlo check included, is the one the advisor gives when it builds the model itself
    model = build_model(demo)
    handed = advise(demo, propagate(model), confirm_with_mc=2, mc_trials=20_000, seed=7, model=model)
    assert handed.to_dict() == demo_report.to_dict()
