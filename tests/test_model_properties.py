"""Properties the model and the linear engine must have (hypothesis)."""

from __future__ import annotations

import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from validate.workflow import pipeline as api

DILUTION = """
[settings]
temperature_range = "{temp} K"

[equipment.pipette]
kind = "one-mark pipette"
nominal = "{vp} mL"
tolerance = "{tp} mL"
repeatability = "{rp} mL"

[equipment.flask]
kind = "volumetric flask"
nominal = "{vf} mL"
tolerance = "{tf} mL"
repeatability = "{rf} mL"

[solutions.stock]
made_by = "certificate"
concentration = {{ value = "{c0} mg/L", expanded_uncertainty = "{uc} mg/L", coverage_factor = 2 }}

[solutions.first]
made_by = "dilution"
from = "stock"
aliquot = "pipette"
flask = "flask"

[solutions.second]
made_by = "dilution"
from = "first"
aliquot = "pipette"
flask = "flask"

[result]
name = "diluted"
unit = "mg/L"
formula = "{formula}"
"""

settings_ = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
volumes = st.sampled_from([(1, 10), (2, 50), (5, 100), (10, 100), (20, 250)])


def _write(write_method, vp, vf, scale=1.0, temp=3.0, formula="second", rel=(0.002, 0.001)):
    text = DILUTION.format(vp=vp * scale, vf=vf * scale, tp=vp * scale * rel[0], rp=vp * scale * rel[1],
                           tf=vf * scale * rel[0], rf=vf * scale * rel[1], c0=1000.0, uc=2.0,
                           temp=temp, formula=formula)
    return write_method(text)


@settings_
@given(volumes=volumes, temp=st.floats(0.5, 5.0))
def test_squared_contributions_add_up_to_the_combined_variance(write_method, volumes, temp):
    # GUM 5.1.2: for independent inputs u_c^2 = sum (c_i u_i)^2. Sources are independent by
    # construction, so the contributions must add up to the package's own combined u.
    run = api.analyse(_write(write_method, *volumes, temp=temp), trials=None, advice=False)
    (r,) = run.results
    total = sum(row.contribution**2 for row in r.contributions)
    assert total == pytest.approx(r.standard_uncertainty**2, rel=1e-9)
    assert sum(row.share for row in r.contributions) == pytest.approx(1.0, rel=1e-9)


@settings_
@given(volumes=volumes)
def test_one_item_used_twice_is_one_correlated_source(write_method, volumes):
    # The same pipette in two dilution steps: ONE calibration offset shared by both
    # uses (docs/design.md, "One calibration offset per item"), so its contribution is twice that of one use:
    # c = c0 (Vp/Vf)^2, dc/dVp = 2 c / Vp; u(offset) = tolerance/sqrt(6) (triangular, CG4).
    vp, vf = volumes
    run = api.analyse(_write(write_method, vp, vf), trials=None, advice=False)
    (r,) = run.results
    names = [row.source for row in r.contributions]
    assert names.count("pipette: calibration") == 1
    assert sum(1 for n in names if n.startswith("pipette: repeatability")) == 2  # fresh per use
    row = next(x for x in r.contributions if x.source == "pipette: calibration")
    expected = 2 * r.value / vp * (vp * 0.002 / math.sqrt(6))
    assert abs(row.contribution) == pytest.approx(expected, rel=1e-6)


@settings_
@given(volumes=volumes, scale=st.floats(0.1, 10.0))
def test_scaling_every_volume_leaves_the_concentration_unchanged(write_method, volumes, scale):
    # c = c0 * Vp/Vf: a common factor on every volume cancels (and so do relative tolerances)
    base = api.analyse(_write(write_method, *volumes), trials=None, advice=False).results[0]
    scaled = api.analyse(_write(write_method, *volumes, scale=scale), trials=None, advice=False).results[0]
    assert scaled.value == pytest.approx(base.value, rel=1e-12)
    assert scaled.standard_uncertainty == pytest.approx(base.standard_uncertainty, rel=1e-9)


def test_shared_temperature_cancels_in_a_dilution_ratio(write_method):
    # Expansion of the solution acts on aliquot and flask alike: V_p (1 + a dT) / (V_f (1 + a dT))
    # is independent of dT, so a shared temperature source contributes nothing to a dilution.
    run = api.analyse(_write(write_method, 10, 100, temp=5.0), trials=None, advice=False)
    row = next(x for x in run.results[0].contributions if x.source == "laboratory temperature")
    assert row.contribution == pytest.approx(0.0, abs=1e-12)


def _pooled_within(groups):
    """Pooled SD and degrees of freedom of groups of repeated readings (ISO 5725-2, 7.4)."""
    groups = [g for g in groups if len(g) >= 2]
    ss = sum(sum((a - sum(g) / len(g)) ** 2 for a in g) for g in groups)
    dof = sum(len(g) - 1 for g in groups)
    return math.sqrt(ss / dof), dof


def _demo_groups(method, ids):
    """Every solution's readings split by series (repeated readings of one solution, one day)."""
    out = []
    for i in ids:
        labels = method.reading_series.get(i) or [""] * len(method.readings[i])
        for lab in dict.fromkeys(labels):
            out.append([a for a, b in zip(method.readings[i], labels, strict=True) if b == lab])
    return out


def test_observed_scatter_reproduces_the_inverse_prediction_formula():
    # ISO 8466-1 / EURACHEM/CITAC CG4 Example A5 on preparation means, with two variance
    # components (Searle, Casella and McCulloch, Variance Components, one-way random model, from
    # memory): u(x0)^2 = [u_p^2 + s_r^2/m0 + s_m^2 (1/N + (y0-ybar)^2/(b^2 Sxx))] / b^2, where s_m is
    # the residual SD of the N preparation means about the line, s_r the pooled SD of repeated
    # readings of one solution and u_p^2 = s_m^2 - s_r^2/m. Computed here by hand with numpy; the
    # calibration-fit part of the model's budget, propagated through the refitted line, must equal it.
    import numpy as np
    from conftest import DEMOS

    run = api.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=None, advice=False)
    method, model = run.method, run.model
    conc = model.concentrations(model.nominal_inputs())
    ids = list(method.calibration.standards) + list(method.calibration.blanks)
    xs = np.array([conc[i] * 1e3 for i in ids])  # mol/m^3 -> µmol/L, one point per solution
    ys = np.array([np.mean(method.readings[i]) for i in ids])
    b, a = np.polyfit(xs, ys, 1)
    s_m2 = float(np.sum((ys - a - b * xs) ** 2)) / (len(xs) - 2)
    s_r, _ = _pooled_within(_demo_groups(method, ids))  # repeated readings of the line's solutions
    m = len(method.readings["S1"])
    assert all(len(method.readings[i]) == m for i in ids)
    u_p2 = max(0.0, s_m2 - s_r**2 / m)
    sxx = float(np.sum((xs - xs.mean()) ** 2))
    for sample, result in zip(method.samples, run.results, strict=True):
        u_line = math.sqrt(sum(r.contribution**2 for r in result.contributions if r.step == "calibration fit"))
        r0 = method.readings[sample.id]
        y0 = float(np.mean(r0))
        u_x0 = math.sqrt(u_p2 + s_r**2 / len(r0) + s_m2 * (1 / len(xs) + (y0 - ys.mean()) ** 2 / (b**2 * sxx))) / b
        # result = c * V_flask / V_sample * M_P: 50/20 dilution, 30.973762 g/mol, µmol/L -> mg/L
        expected = u_x0 * 1e-3 * (50 / 20) * 30.973762
        assert u_line == pytest.approx(expected, rel=1e-6)


def test_weighted_line_reproduces_the_weighted_inverse_prediction(tmp_path):
    # Miller and Miller, section 5.10: weighted line with w = 1/s_j^2 (normalised to a mean of one
    # over the points) and the weighted inverse prediction, here on preparation means with the two
    # variance components on the weighted scale:
    # u(x0)^2 = [(u_p^2 + s_r^2/m0)/w0 + s_w^2 (1/N + (y0 - ybar_w)^2/(b^2 Sxx_w))] / b^2.
    import shutil

    import numpy as np
    from conftest import DEMOS

    folder = tmp_path / "weighted"
    shutil.copytree(DEMOS / "phosphate_assay", folder)
    text = (folder / "method.toml").read_text().replace(
        'concentration_unit = "µmol/L"', 'concentration_unit = "µmol/L"\nweighting = "inverse-variance"')
    (folder / "method.toml").write_text(text)
    run = api.analyse(folder / "method.toml", trials=None, advice=False)
    model, method = run.model, run.method
    assert run.record["validation"]["line_weighting"]["used"] == "inverse-variance"
    conc = model.concentrations(model.nominal_inputs())
    ids = list(method.calibration.standards) + list(method.calibration.blanks)
    # a second preparation of a level (S4b, S6b) carries its level's weight
    level_of = {p.solution: lv.id for lv in model.design.levels for p in lv.preparations}

    def weight(ident):
        return model.design.weight(level_of.get(ident, ident))
    xs = np.array([conc[i] * 1e3 for i in ids])
    ys = np.array([np.mean(method.readings[i]) for i in ids])
    w = np.array([weight(i) for i in ids])
    assert w.mean() == pytest.approx(1.0, rel=1e-12)
    xbar, ybar = np.sum(w * xs) / w.sum(), np.sum(w * ys) / w.sum()
    sxx = float(np.sum(w * (xs - xbar) ** 2))
    b = float(np.sum(w * (xs - xbar) * (ys - ybar))) / sxx
    a = ybar - b * xbar
    intercept, slope = model.line(model.nominal_inputs())
    path = method.items["cell_40"].path
    assert slope * path * 1e-3 == pytest.approx(b, rel=1e-9)  # per mol/m^3 -> per µmol/L
    assert intercept * path == pytest.approx(a, rel=1e-9)
    s_m2 = float(np.sum(w * (ys - a - b * xs) ** 2)) / (len(xs) - 2)
    groups = _demo_groups(method, ids)
    owners = [i for i in ids
              for _ in dict.fromkeys(method.reading_series.get(i) or [""])]
    ss = sum(weight(o) * sum((v - np.mean(g)) ** 2 for v in g) for o, g in zip(owners, groups, strict=True))
    s_r2 = ss / sum(len(g) - 1 for g in groups if len(g) >= 2)
    u_p2 = max(0.0, s_m2 - s_r2 / 3)
    for sample, result in zip(method.samples, run.results, strict=True):
        u_line = math.sqrt(sum(r.contribution**2 for r in result.contributions if r.step == "calibration fit"))
        r0 = method.readings[sample.id]
        y0, w0 = float(np.mean(r0)), weight(sample.id)
        u_x0 = math.sqrt((u_p2 + s_r2 / len(r0)) / w0 + s_m2 * (1 / len(xs) + (y0 - ybar) ** 2 / (b**2 * sxx))) / b
        assert u_line == pytest.approx(u_x0 * 1e-3 * 2.5 * 30.973762, rel=1e-6)
