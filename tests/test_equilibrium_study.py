"""An equilibrium study through the method file: exact recovery, the record, correlations."""

from __future__ import annotations

import copy
import dataclasses
import math
import shutil

import numpy as np
import pytest
from conftest import DEMOS

from validate.model.ice import complex_concentration
from validate.propagation.montecarlo import evaluate_trials
from validate.workflow import pipeline as api

DEMO = DEMOS / "nickel_complex"


def _noise_free_copy(tmp_path, K_L_per_mol: float, correction: str = "iterate", iterations: int = 60,
                     scatter: str = "bottom-up"):
    """The demo with readings computed exactly from a chosen K (and absorptivity, intercept).
    Observed scatter of exact readings is zero: the points' own random effects then vanish from
    the covariance and the GLS weights rest on shared terms alone (they may turn negative), so the
    default is bottom-up, which keeps them (glassware repeatability, reading noise)."""
    folder = tmp_path / "study"
    shutil.copytree(DEMO, folder)
    text = (folder / "method.toml").read_text()
    text = text.replace('correction = "iterate"', f'correction = "{correction}"')
    text = text.replace("iterations = 12", f"iterations = {iterations}")
    text = text.replace('scatter = "observed"', f'scatter = "{scatter}"')
    (folder / "method.toml").write_text(text)
    method, model = api.check(folder / "method.toml")
    sm, sl, _, _, pm, pl, _ = model.columns(model.nominal_inputs())
    K = K_L_per_mol * 1e-3  # SI: m^3/mol; concentrations in mol/m^3
    slope, intercept = 4.2, 0.004  # absorbance per mmol/L (10 mm cell), blank
    lines = ["id,absorbance"]
    ids = [m.id for m in method.equilibrium.standards] + model.points
    for ident, m, l_ in zip(ids, list(sm) + list(pm), list(sl) + list(pl), strict=True):
        a = intercept + slope * complex_concentration(K, m, l_)
        lines += [f"{ident},{a!r}", f"{ident},{a!r}"]
    (folder / "readings.csv").write_text("\n".join(lines) + "\n")
    return folder / "method.toml"


@pytest.mark.parametrize("K", [pytest.param(30.0, marks=pytest.mark.slow), 850.0,
                               pytest.param(2.0e4, marks=pytest.mark.slow)])
def test_exact_readings_give_back_K(tmp_path, K):
    # noise-free readings generated from a chosen K: every point and the combined K must
    # return it (the standards' incomplete complexation corrected by the iteration)
    run = api.analyse(_noise_free_copy(tmp_path, K), trials=None, advice=False)
    e = run.record["equilibrium"]
    for point in e["mixtures"]:
        assert point["K"] == pytest.approx(K, rel=1e-6), point["id"]
    assert e["combined"]["K"] == pytest.approx(K, rel=1e-6)
    assert e["log10K"]["value"] == pytest.approx(np.log10(K), abs=1e-6)


def test_full_complexation_bias_matches_closed_form(tmp_path):
    # Without correction the standards are taken as fully complexed. For a large excess of M the
    # fraction of L complexed is f = K[M]/(1 + K[M]) (1:1 mass balance), so the naive slope is
    # f times the true one: relative slope bias f - 1 (closed form of the 1:1 equilibrium).
    K = 850.0
    run = api.analyse(_noise_free_copy(tmp_path, K), trials=None, advice=False)
    bias = run.record["equilibrium"]["complete_complexation_bias"]
    model = run.model
    sm, sl, *_ = model.columns(model.nominal_inputs())
    free_m = sm[0] - complex_concentration(K * 1e-3, sm[0], sl[0])  # mol/m^3 = mmol/L
    f = (K * 1e-3 * free_m) / (1 + K * 1e-3 * free_m)
    assert bias["slope"] == pytest.approx(f - 1, rel=0.02)  # f varies slightly between standards
    assert bias["K"] > 0  # the naive K comes out high


def test_demo_record_equilibrium_block(nickel_demo):
    run = nickel_demo  # trials=20_000, seed=5, no advice
    e = run.record["equilibrium"]
    for key in ("mixtures", "combined", "complete_complexation_bias", "conditions", "log10K"):
        assert key in e
    for point in e["mixtures"]:
        assert {"K", "u_K", "interval"} <= set(point)
        assert point["interval"][0] < point["K"] < point["interval"][1]
    combined = e["combined"]
    for key in ("K", "standard_uncertainty", "expanded_uncertainty", "interval", "consistency"):
        assert key in combined
    # the combination has a smaller uncertainty than the best single point
    assert combined["standard_uncertainty"] < min(p["u_K"] for p in e["mixtures"])
    assert e["conditions"]["temperature_C"] == 25.0


def test_series_covariance_linear_against_monte_carlo(nickel_demo):
    # Points of one addition series share the vessel, the pipette's offset and the line, so their
    # K values are correlated; the linear engine's correlation matrix (GUM 5.2) must match the
    # Monte Carlo sample correlations (JCGM 101 7.5) within sampling error.
    # The line's scatter terms have 3 degrees of freedom: Monte Carlo draws them from t(3), whose
    # variance is nu/(nu - 2) = 3 times u^2 (JCGM 101 6.4.9), so the engines would weigh them
    # differently; drawn normal here, both engines hold the same variances and only the structure
    # of the correlations is compared.
    run = nickel_demo
    _, _, cov = run.combination
    cov = np.asarray(cov)
    labels = [f"K, {p}" for p in run.model.points]
    model = copy.deepcopy(run.model)
    for name, src in model.sources.items():
        if src.distribution == "t":
            model.sources[name] = dataclasses.replace(src, distribution="normal", dof=math.inf)
    out = evaluate_trials(model, 100_000, np.random.default_rng(8))
    samples = np.vstack([out[label] for label in labels])
    # a trial whose K is not positive is undefined (nan, counted by the engine): left out here; the
    # line's scatter on 5 prepared standards has 3 degrees of freedom, whose t tails reach that
    mc_corr = np.corrcoef(samples[:, np.all(np.isfinite(samples), axis=0)])
    sd = np.sqrt(np.diag(cov))
    gum_corr = cov / np.outer(sd, sd)
    series = [i for i, p in enumerate(run.model.points) if p.startswith("T.")]
    block = np.ix_(series, series)
    assert np.max(np.abs(mc_corr[block] - gum_corr[block])) < 0.05
    assert np.min(gum_corr[block]) > 0.3  # they really are correlated


def test_points_carry_their_saturation(nickel_demo):
    # saturation s = [ML] / min([M]0, [L]0); points outside 0.2-0.8 determine K poorly
    # (Deranleau, J. Am. Chem. Soc. 91 (1969) 4044, from memory) and are flagged
    run = nickel_demo
    for p in run.record["equilibrium"]["mixtures"]:
        assert p["saturation"] == pytest.approx(p["ML"] / min(p["M_total"], p["L_total"]), rel=1e-12)
        assert (p["saturation_flag"] is None) == (0.2 <= p["saturation"] <= 0.8)


def test_the_record_says_between_day_effects_are_not_in_U_of_K(nickel_demo):
    # A study run once observes no day-to-day variation, so its U(K) is within-run (within-laboratory
    # reproducibility needs series: ISO 5725-3); the record must say so rather than let U(K) stand
    # for the method's uncertainty in routine use.
    said = [a for a in nickel_demo.record["assumptions"] if a.startswith("U(K) is a within-run uncertainty")]
    assert len(said) == 1 and "not in it" in said[0] and "other days" in said[0]
    assert nickel_demo.record.get("method_uncertainty") is None  # no top-down route claimed for a study
