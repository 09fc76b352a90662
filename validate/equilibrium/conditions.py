"""The conditions a conditional K refers to, and what of them is in U(K).

K = [ML]/([M][L]) in concentrations holds at one ionic strength and one temperature
(docs/design.md, "Equilibrium constants"). Standards made with a large excess of one reagent
hold more salt than the mixtures, so their K differs from the mixtures' K that corrects them;
the laboratory temperature moves K through the reaction enthalpy. This module records:

- the ionic strength of every standard and point, I = 1/2 sum c_i z_i^2 (IUPAC), from the
  solutions' compositions: the background medium every solution is made up in, the reagents'
  salts taken as fully dissociated (a salt of M^zM with counter-ion X^zX holds |zM/zX| X per
  M, adding 1/2 c |zM| (|zM| + |zX|)), and the complex formed (M + L -> ML changes I by
  [ML] zM zL);
- the activity effect on the correction of the standards: each standard's K estimated at its
  own ionic strength by the Davies equation relative to the points' mean ionic strength, the
  correction repeated with those K, and the change of K reported (an estimate, not in U(K));
- the van 't Hoff term when a reaction enthalpy is given (in U(K), `EquilibriumModel`), and a
  plain statement of every effect that is not in U(K).
"""

from __future__ import annotations

import math

from validate.equilibrium.combine import DAVIES_UPPER_I, davies_log10_gamma, debye_huckel_A
from validate.model.equilibrium import R_GAS, EquilibriumModel
from validate.model.ice import complex_concentration
from validate.model.standards import corrected_states

MOL_PER_L = 1e3  # mol/m^3 per mol/L


def salt_ionic_strength(conc, charge: int, counter: int):
    """Ionic strength (concentration units of `conc`) of a fully dissociated salt of an ion of
    charge z with counter-ion z_X: 1/2 c (z^2 + |z/z_X| z_X^2) = 1/2 c |z| (|z| + |z_X|)."""
    if charge == 0:
        return 0.0 * conc
    return 0.5 * conc * abs(charge) * (abs(charge) + abs(counter))


def solution_ionic_strength(m_total, l_total, complex_conc, charges, counter, medium: float = 0.0):
    """I of one solution (same unit as the concentrations): medium + the two salts + [ML] zM zL."""
    z_m, z_l = charges
    return (medium + salt_ionic_strength(m_total, z_m, counter[0]) + salt_ionic_strength(l_total, z_l, counter[1])
            + complex_conc * z_m * z_l)


def davies_K_ratio(ionic: float, reference: float, charges, A: float) -> float:
    """K_cond(I) / K_cond(I_ref) for M + L <=> ML: K_cond = K_th gamma_M gamma_L / gamma_ML, each
    log10 gamma by the Davies equation (I in mol/L)."""
    z_m, z_l = charges

    def lg(i):
        return (davies_log10_gamma(z_m, i, A) + davies_log10_gamma(z_l, i, A)
                - davies_log10_gamma(z_m + z_l, i, A))
    return 10.0 ** (lg(ionic) - lg(reference))


def conditions_block(model: EquilibriumModel) -> dict:
    """The study's conditions for the record: stated values, ionic strengths, the activity
    estimate on the correction, the temperature term and what is not in U(K)."""
    study = model.study
    out: dict = {"temperature_C": study.temperature_C,
                 "ionic_strength_mol_per_L": None if study.ionic_strength is None else study.ionic_strength / MOL_PER_L,
                 "charges": list(study.charges) if study.charges else None,
                 "note": "K is conditional on the temperature and ionic strength recorded"}
    strengths = _ionic_strengths(model)
    out.update(strengths)
    out["activity_effect_on_correction"] = _activity_effect(model, strengths)
    out["temperature_effect"] = _temperature_effect(model)
    out["not_in_U"] = _not_in_u(model, out)
    return out


def _nominal_state(model: EquilibriumModel):
    x0 = model.nominal_inputs()
    sm, sl, sa, reps, pm, pl, pa = model.columns(x0)
    K = model.correction_K(x0)
    states = model.ice_tables(x0)
    return (sm, sl, sa, reps, pm, pl, pa), (None if K is None else float(K)), states


def _ionic_strengths(model: EquilibriumModel) -> dict:
    study = model.study
    if study.charges is None or study.counter_charges is None:
        return {"ionic_strength_standards": None, "ionic_strength_points": None,
                "ionic_strength_basis": "not computed: give `charges` and `counter_ion_charges` (and "
                                        "`medium_ionic_strength`) to compute it from the solutions"}
    (sm, sl, _, _, pm, pl, _), K, states = _nominal_state(model)
    medium = study.medium_ionic_strength or 0.0
    # [ML] of a standard: at the corrected K, or all of the limiting reagent without a correction
    std_ml = [complex_concentration(K, m, l_) if K else min(m, l_) for m, l_ in zip(sm, sl, strict=True)]
    std = [solution_ionic_strength(m, l_, c, study.charges, study.counter_charges, medium) / MOL_PER_L
           for m, l_, c in zip(sm, sl, std_ml, strict=True)]
    pts = [solution_ionic_strength(m, l_, float(s.complex_conc), study.charges, study.counter_charges, medium)
           / MOL_PER_L for m, l_, s in zip(pm, pl, states, strict=True)]
    basis = ("I = 1/2 sum c z^2 from the solutions: the medium (" +
             (f"{medium / MOL_PER_L:g} mol/L" if study.medium_ionic_strength is not None else
              "none stated: the reagents' salts only") +
             "), the reagents' salts fully dissociated, and the complex formed; at the estimates")
    return {"ionic_strength_standards": [float(v) for v in std], "ionic_strength_points": [float(v) for v in pts],
            "ionic_strength_basis": basis}


def _activity_effect(model: EquilibriumModel, strengths: dict) -> dict:
    """The correction repeated with each standard's K at its own ionic strength (Davies)."""
    study = model.study
    std, pts = strengths["ionic_strength_standards"], strengths["ionic_strength_points"]
    if study.correction == "none":
        return {"estimated": False, "note": "no correction of the standards in this study"}
    if std is None:
        return {"estimated": False, "note": "not estimated: the ionic strengths need `charges` and "
                                            "`counter_ion_charges`"}
    kept = [i for i, p in enumerate(model.points) if p not in model.excluded]
    highest = max(std + [pts[i] for i in kept])
    if highest > DAVIES_UPPER_I:
        return {"estimated": False, "note": f"not estimated: an ionic strength of {highest:.3g} mol/L is beyond "
                                            f"the Davies equation's range (about I <= {DAVIES_UPPER_I:g} mol/L)"}
    temperature = study.temperature_C if study.temperature_C is not None else 25.0
    A = debye_huckel_A(temperature)
    reference = sum(pts[i] for i in kept) / len(kept)
    factors = [davies_K_ratio(i, reference, study.charges, A) for i in std]
    (sm, sl, sa, reps, pm, pl, pa), K, _ = _nominal_state(model)
    solved = corrected_states((sm, sl, sa), (pm, pl, pa), limiting="L" if study.limiting == "ligand" else "M",
                              iterations=max(study.iterations, 1), standard_weights=reps,
                              mixture_weights=model.combination_weights(), start=K, standard_K_factors=factors)
    K_act = float(solved.K)
    change = K_act / K - 1.0 if K else math.nan
    return {"estimated": True, "relative_change_of_K": change, "K": K_act / study.k_unit.factor,
            "K_factors_of_standards": factors, "reference_ionic_strength_mol_per_L": reference, "A": A,
            "note": "each standard's K taken at its own ionic strength, relative to the points' mean, by the "
                    "Davies equation log10 gamma = -A z^2 (sqrt(I)/(1 + sqrt(I)) - 0.3 I) (valid to about "
                    f"I = {DAVIES_UPPER_I:g} mol/L), and the standards corrected with it: an estimate, NOT in U(K)"}


def _temperature_effect(model: EquilibriumModel) -> dict:
    study = model.study
    settings = model.method.settings
    t0 = (study.temperature_C if study.temperature_C is not None else 25.0) + 273.15
    if study.reaction_enthalpy is None:
        return {"in_U": False, "reaction_enthalpy_kJ_per_mol": None, "u_kJ_per_mol": None,
                "relative_change_per_K": None, "temperature_range_K": settings.temperature_range,
                "note": "no reaction enthalpy given: the laboratory temperature's effect on K is not in U(K)"}
    dh, u_dh = study.reaction_enthalpy
    return {"in_U": True, "reaction_enthalpy_kJ_per_mol": dh / 1e3, "u_kJ_per_mol": u_dh / 1e3,
            "relative_change_per_K": dh / (R_GAS * t0 * t0), "temperature_range_K": settings.temperature_range,
            "note": "van 't Hoff, d ln K/dT = dH/(R T^2): K carried from the laboratory temperature (deviation "
                    f"within +/-{settings.temperature_range:g} K) to {t0 - 273.15:g} degC; in U(K)"}


def _not_in_u(model: EquilibriumModel, conditions: dict) -> list[str]:
    out = []
    if not conditions["temperature_effect"]["in_U"]:
        out.append("the laboratory temperature's effect on K (no reaction enthalpy given)")
    activity = conditions["activity_effect_on_correction"]
    if model.study.correction != "none":
        out.append("the ionic strength of the standards differing from the mixtures'" +
                   (f" (Davies estimate: K {activity['relative_change_of_K']:+.2%})" if activity.get("estimated")
                    else " (not estimated)"))
    out.append("the difference between the stated ionic strength and that of each point")
    return out
