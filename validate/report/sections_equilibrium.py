"""Report section: the equilibrium constant of a 1:1 association study.

Conditions, reagent totals and ICE table per point, K of every point beside
the combined K (figure), the combined K and log10 K, the consistency and
trend tests, the generalised-least-squares weights, the bias of taking the
standards as fully complexed, the joint-fit cross-check and the Davies
activity estimate. Everything is read from record["equilibrium"] and the
record's results; nothing is evaluated here.
"""

from __future__ import annotations

import re

from validate.model.equilibrium import COMBINED
from validate.report import figures_equilibrium
from validate.report.numbers import DASH, dof, is_number, num, p_value, pct, sig
from validate.report.sections import coloured, figure_block, rounded
from validate.report.sections_uncertainty import interval_text, mc_decimals
from validate.report.style import bullets, data_table, heading, key_value_table, para

SERIES_ID = re.compile(r"^.+\.\d+$")  # addition-series readings are named "<series>.<n>", e.g. T.1
WEIGHTS_PER_ROW = 10
CORRECTIONS = {"iterate": "iterated: K → [ML] in each standard → refitted line → K",
               "none": "none: the standards taken as fully complexed"}


def is_series(point_id) -> bool:
    return bool(SERIES_ID.match(str(point_id)))


def k_unit(eq: dict) -> str:
    return eq.get("k_unit") or eq.get("unit") or "L/mol"


def value_of(x):
    """A number of the record, whether stored plain or as {"value": ...} / {"mean": ...}."""
    if isinstance(x, dict):
        x = x.get("value", x.get("mean"))
    return x if is_number(x) else None


def result_by_key(record: dict, kind: str, ident: str | None = None) -> dict | None:
    """The record's result with this key (validate.model.keys): found by what it is, not by its label."""
    wanted = {"kind": kind, "id": ident}
    return next((r for r in record.get("results") or [] if r.get("key") == wanted), None)


def point_result(record: dict, point_id) -> dict | None:
    """The record's result for one point (key: kind "K", id the point)."""
    return result_by_key(record, "K", point_id)


def is_study(record: dict) -> bool:
    """An equilibrium study with a combined K: its report is laid out around that constant."""
    eq = record.get("equilibrium")
    return isinstance(eq, dict) and bool(eq) and result_by_key(record, "combined K") is not None


def point_interval(record: dict, mixture: dict):
    """The Monte Carlo 95 % interval of a point: from its result, else from the mixture entry."""
    result = point_result(record, mixture.get("id")) or {}
    ends = (result.get("monte_carlo") or {}).get("interval") or mixture.get("interval")
    return ends if ends and all(is_number(e) for e in ends) else None


def kind_text(point_id) -> str:
    return f"series {str(point_id).rsplit('.', 1)[0]}" if is_series(point_id) else "mixture"


# --------------------------------------------------------------------------
# parts of the section

def _condition_effects(cond: dict) -> list[tuple[str, str]]:
    """Ionic strengths, the activity and temperature effects on K, and what is not in U(K)."""
    std, pts = cond.get("ionic_strength_standards"), cond.get("ionic_strength_points")
    facts = [("ionic strength of standards / points", f"{num(min(std), 3)} to {num(max(std), 3)} / "
              f"{num(min(pts), 3)} to {num(max(pts), 3)} mol/L")] if std and pts else []
    act, temp = cond.get("activity_effect_on_correction") or {}, cond.get("temperature_effect") or {}
    if act:
        facts.append(("activity effect on the correction (Davies)", f"K {act['relative_change_of_K']:+.2%} "
                      "(an estimate, not in U(K))" if act.get("estimated") else str(act.get("note", ""))))
    if temp:
        facts.append(("laboratory temperature (van 't Hoff)", str(temp.get("note", ""))))
    if cond.get("not_in_U"):
        facts.append(("not in U(K)", "; ".join(cond["not_in_U"])))
    return facts


def _conditions(eq: dict) -> list:
    cond = eq.get("conditions") or {}
    facts, known = [], set()
    if is_number(cond.get("temperature_C")):
        facts.append(("temperature", f"{num(cond['temperature_C'], 4)} °C"))
        known.add("temperature_C")
    if is_number(cond.get("ionic_strength_mol_per_L")):
        facts.append(("ionic strength I", f"{num(cond['ionic_strength_mol_per_L'], 4)} mol/L"))
        known.add("ionic_strength_mol_per_L")
    charges = cond.get("charges")
    if isinstance(charges, (list, tuple)) and len(charges) >= 2:
        z = list(charges[:2]) + [charges[0] + charges[1]]
        facts.append(("charge numbers z(M), z(L), z(ML)", ", ".join(f"{c:+d}" for c in z)))
        known.add("charges")
    facts += _condition_effects(cond)
    known |= {"ionic_strength_standards", "ionic_strength_points", "ionic_strength_basis",
              "activity_effect_on_correction", "temperature_effect", "not_in_U"}
    for key, value in cond.items():  # anything else the record holds, as it stands
        if key not in known and key != "note":
            facts.append((key.replace("_", " "), num(value, 4) if is_number(value) else str(value)))
    if eq.get("limiting_reagent_in_standards"):
        facts.append(("limiting reagent in the standards", str(eq["limiting_reagent_in_standards"])))
    if eq.get("correction"):
        facts.append(("correction of the standards",
                      CORRECTIONS.get(eq["correction"], str(eq["correction"]))))
    if eq.get("concentration_unit"):
        facts.append(("concentration unit", eq["concentration_unit"]))
    out = [para("1:1 association M + L ⇌ ML, K = [ML] / ([M][L]). K is conditional: it holds "
                "at the temperature and ionic strength below.", "lead")]
    return out + ([key_value_table(facts, (62, 112))] if facts else [])


def _ice_table(record: dict, eq: dict) -> list:
    mixtures = eq.get("mixtures") or []
    if not mixtures:
        return []
    unit, cu = k_unit(eq), eq.get("concentration_unit") or ""
    rows = []
    for m in mixtures:
        value, big_u = rounded(m.get("K"), m.get("expanded_uncertainty"))  # GUM 7.2.6
        decimals = len(big_u.split(".")[1]) if "." in big_u else 0
        rows.append([m.get("id", DASH), kind_text(m.get("id")),
                     *(sig(m.get(k), 4) for k in ("M_total", "L_total", "ML", "M_free", "L_free")),
                     value if value != DASH else num(m.get("K"), 4), num(m.get("u_K"), 2),
                     interval_text(point_interval(record, m), decimals, "")])
    return [heading("Reagent totals and equilibrium concentrations (ICE table)", 2),
            para(f"Concentrations in {cu}, K in {unit}. Initial: the totals of metal and ligand "
                 "from the preparation; change: [ML] formed, read off the line of the standards; "
                 "equilibrium: free M = total M − [ML], free L = total L − [ML] (mass balance). "
                 "The Monte Carlo interval is the probabilistically symmetric 95 % interval "
                 "(JCGM 101).", "lead_small"),
            data_table(["point", "type", "total M", "total L", "[ML]", "free M", "free L",
                        f"K / {unit}", "u(K)", "Monte Carlo 95 %"], rows,
                       [13, 17, 17, 17, 17, 17, 17, 16, 13, 30],
                       numeric={2, 3, 4, 5, 6, 7, 8, 9})]


def _points(record: dict, shown: list[dict], from_mc: bool) -> list:
    """K of each point with its Monte Carlo interval, or K ± U when some point has none."""
    points = []
    for m in shown:
        big_u = m.get("expanded_uncertainty") if is_number(m.get("expanded_uncertainty")) else 0.0
        low, high = point_interval(record, m) if from_mc else (m["K"] - big_u, m["K"] + big_u)
        points.append(figures_equilibrium.PointK(str(m.get("id")), m["K"], low, high,
                                                 is_series(m.get("id"))))
    return points


def _figure_caption(bar: str, k, mc) -> str:
    caption = (f"Figure: K of every point with its {bar} as an error bar; circles are mixtures, "
               "squares the readings of an addition series.")
    if k is not None:
        caption += (" The line is the combined K, the shaded band its GUM interval K ± U"
                    + (" and the dashed lines its Monte Carlo 95 % interval." if mc else "."))
    return caption


def _figure(record: dict, eq: dict) -> list:
    shown = [m for m in eq.get("mixtures") or [] if is_number(m.get("K"))]
    if not shown:
        return []
    from_mc = all(point_interval(record, m) for m in shown)  # else K ± U for every point
    combined = result_by_key(record, "combined K") or {}
    comb_eq = eq.get("combined") or {}
    k = value_of(combined.get("value", comb_eq.get("K")))
    big_u = combined.get("expanded_uncertainty", comb_eq.get("expanded_uncertainty"))
    mc = (combined.get("monte_carlo") or {}).get("interval") or comb_eq.get("interval")
    bar = "Monte Carlo 95 % interval" if from_mc else "GUM interval K ± U"
    png = figures_equilibrium.k_per_point_figure(
        _points(record, shown, from_mc), k, big_u if is_number(big_u) else None,
        tuple(mc) if mc and all(is_number(e) for e in mc) else None, k_unit(eq), bar)
    return [figure_block(png, _figure_caption(bar, k, mc))]


def _combined(record: dict, eq: dict) -> list:
    result, log_result = result_by_key(record, "combined K"), result_by_key(record, "log10 K")
    comb = eq.get("combined") or {}
    unit = k_unit(eq)
    if not result and not comb:
        return []
    result = result or {"name": COMBINED, "unit": unit, "value": comb.get("K"),
                        "standard_uncertainty": comb.get("standard_uncertainty"),
                        "expanded_uncertainty": comb.get("expanded_uncertainty"),
                        "coverage_factor": comb.get("coverage_factor"),
                        "coverage_probability": comb.get("coverage_probability")}
    value, big_u = rounded(result.get("value"), result.get("expanded_uncertainty"))
    facts = [("combined K, U", f"{value} {unit}, U = {big_u} {unit} (k = "
              f"{num(result.get('coverage_factor'), 3)}, p = "
              f"{pct(result.get('coverage_probability'), 0)}, ν_eff = "
              f"{dof(result.get('effective_dof'))})"),
             ("standard uncertainty u(K)", f"{num(result.get('standard_uncertainty'), 3)} {unit}")]
    mc = result.get("monte_carlo") or {}
    d = mc_decimals(mc, result)
    for label, key in (("Monte Carlo 95 % interval, probabilistically symmetric", "interval"),
                       ("Monte Carlo 95 % interval, shortest", "shortest_interval")):
        ends = mc.get(key) or comb.get(key)
        if ends:
            facts.append((label, interval_text(ends, d, unit)))
    agrees = mc.get("agrees_with_gum", comb.get("agrees_with_gum"))
    if isinstance(agrees, bool):
        facts.append(("GUM interval (JCGM 101 clause 8)",
                      coloured("validated by Monte Carlo" if agrees else
                               "not validated: report the Monte Carlo interval", agrees)))
    if log_result and is_number(log_result.get("value")):
        lv, lu = rounded(log_result["value"], log_result.get("expanded_uncertainty"))
        text = (f"{lv}, U = {lu} (k = {num(log_result.get('coverage_factor'), 3)}), u = "
                f"{num(log_result.get('standard_uncertainty'), 2)}")
        ends = (log_result.get("monte_carlo") or {}).get("interval")
        if ends:
            text += "; Monte Carlo " + interval_text(ends, mc_decimals(log_result["monte_carlo"],
                                                                        log_result), "").strip()
        facts.append((f"log10 (K / ({unit}))", text))
    out = [heading("Combined constant", 2),
           para("The K values of all points combined by generalised least squares with their full "
                "covariance (A. C. Aitken, Proc. R. Soc. Edinburgh 55, 1935): points that share "
                "stock solutions, the line of the standards or an item of equipment are "
                "correlated, and the combination accounts for it.", "lead_small"),
           key_value_table(facts, (62, 112))]
    return out + _weights(eq, comb)


def _weights_note(ids: list, weights: list) -> str:
    negative = [str(i) for i, w in zip(ids, weights, strict=True) if is_number(w) and w < 0]
    note = f"The weights add up to {num(sum(w for w in weights if is_number(w)), 4)}"
    note += "." if not negative else f"; {len(negative)} of them are negative."
    if negative:
        note += (f" Negative weights ({', '.join(negative)}) arise when K values are strongly "
                 "correlated: the generalised-least-squares mean then subtracts part of a point "
                 "that mostly repeats the shared error of others. This follows from the covariance "
                 "and is not an error, but it makes the combined K sensitive to how well that "
                 "covariance is known.")
    return note


def _weights(eq: dict, comb: dict) -> list:
    weights = comb.get("weights") or []
    ids = [m.get("id", str(i + 1)) for i, m in enumerate(eq.get("mixtures") or [])]
    if not weights or len(weights) != len(ids):
        return []
    out = [heading("Weights of the points in the combined K", 2)]
    for start in range(0, len(ids), WEIGHTS_PER_ROW):
        chunk = list(zip(ids, weights, strict=True))[start:start + WEIGHTS_PER_ROW]
        out.append(data_table(["point"] + [str(i) for i, _ in chunk],
                              [["weight"] + [num(w, 3) for _, w in chunk]],
                              [16] + [15.8] * len(chunk), numeric=set(range(1, len(chunk) + 1)),
                              zebra=False))
    return out + [para(_weights_note(ids, weights), "small")]


def _consistency(eq: dict) -> list:
    cons = (eq.get("combined") or {}).get("consistency") or {}
    if not cons:
        return []
    chi2 = cons.get("chi_square")
    facts = [("χ², degrees of freedom ν", f"{num(chi2, 4)}, {cons.get('dof', DASH)}"),
             ("p value (χ² above the observed)", p_value(cons.get("p_value"), 3)),
             ("Birge ratio √(χ²/ν)", num(cons.get("birge_ratio"), 3)),
             ("verdict", coloured(cons.get("verdict", DASH), cons.get("consistent")))]
    out = [heading("Do the K values agree?", 2), key_value_table(facts, (62, 112))]
    if cons.get("source"):
        out.append(para(f"Source: {cons['source']}.", "note"))
    return out


def _trend(eq: dict) -> list:
    t = eq.get("trend") or {}
    if not t:
        return []
    unit, against = k_unit(eq), t.get("against") or "concentration"
    quantity, cu = t.get("quantity") or "K", eq.get("concentration_unit")
    top = f"({unit})" if quantity == "K" else ""
    per = f"{top} per ({cu})".strip() if cu else top
    facts = [(f"{quantity} against", against),
             ("slope, u(slope)", f"{num(t.get('slope'), 3)} {per}, u = {num(t.get('slope_u'), 2)} {per}"),
             ("t statistic, ν, p", f"{num(t.get('statistic'), 3)}, {t.get('dof', DASH)}, "
                                   f"{p_value(t.get('p_value'), 3)} (α = {num(t.get('alpha'))})"),
             ("verdict", coloured(t.get("message", DASH),
                                  None if t.get("trend") is None else not t.get("trend")))]
    return [heading("Does K drift with concentration?", 2),
            para(f"{quantity} of the points fitted as a straight line against {against} by "
                 "generalised least squares with their covariance; the slope tested against zero "
                 "(t test). A significant slope hints at a further complex or a wrong "
                 "stoichiometry.", "lead_small"),
            key_value_table(facts, (62, 112))]


def _fraction_words(eq: dict, b: dict) -> list[str]:
    fractions = [f for f in b.get("fraction_complexed_in_standards") or [] if is_number(f)]
    if not fractions:
        return []
    span = (pct(min(fractions), 2) if max(fractions) - min(fractions) < 5e-5
            else f"{pct(min(fractions), 2)} to {pct(max(fractions), 2)}")
    return [f"The standards are not fully complexed: {span} of the limiting reagent"
            + (f" ({eq['limiting_reagent_in_standards']})"
               if eq.get("limiting_reagent_in_standards") else "") + " is bound as ML."]


def _slope_words(b: dict, unit: str) -> list[str]:
    if not (is_number(b.get("slope")) and is_number(b.get("K"))):
        return []
    direction = "too high" if b["K"] > 0 else "too low"
    return [f"Taking them as fully complexed would make the slope of the line "
            f"{pct(abs(b['slope']), 1)} too {'low' if b['slope'] < 0 else 'high'} and K "
            f"{pct(abs(b['K']), 1)} {direction}"
            + (f" ({num(b['naive_K'], 4)} {unit} instead of the corrected value)."
               if is_number(b.get("naive_K")) else ".")]


def _iteration_words(b: dict) -> list[str]:
    if b.get("iteration_converged") is None:
        return []
    return [f"The correction (K → corrected standards → refit) was repeated "
            f"{b.get('iterations', DASH)} times and "
            + ("converged." if b["iteration_converged"] else
               "did NOT converge: rely on the joint fit below and check the data.")]


def _bias(eq: dict) -> list:
    b = eq.get("complete_complexation_bias") or {}
    if not b:
        return []
    words = _fraction_words(eq, b) + _slope_words(b, k_unit(eq)) + _iteration_words(b)
    if not words:
        return []
    return [heading("Bias of assuming complete complexation", 2), para(" ".join(words), "body")]


def _joint_fit(eq: dict, comb_value) -> list:
    j = eq.get("joint_fit") or {}
    if not is_number(j.get("K")):
        return []
    unit = k_unit(eq)
    ok = j.get("success")
    line = (f"K, the absorptivity and the intercept fitted together: K = {num(j['K'], 5)} {unit}, "
            f"u = {num(j.get('standard_uncertainty'), 2)} {unit} (from the fit's residuals only)")
    if is_number(comb_value):
        line += f"; it differs from the combined K by {num(j['K'] - comb_value, 2)} {unit}"
    line += "." if ok is not False else ". The fit reported no success: do not rely on it."
    out = [heading("Cross-check: joint nonlinear fit", 2), para(line, "body")]
    if j.get("note"):
        out.append(para(j["note"], "note"))
    return out


def _activity(eq: dict) -> list:
    a = eq.get("activity_estimate") or {}
    k_th = value_of(a.get("K_thermodynamic"))
    if k_th is None:
        return []
    unit = k_unit(eq)
    gammas = ", ".join(f"γ({s}) = {num(value_of(a.get(f'gamma_{s}')), 3)}" for s in ("M", "L", "ML"))
    k_entry = a.get("K_thermodynamic")
    u_th = k_entry.get("standard_uncertainty") if isinstance(k_entry, dict) else None
    facts = [("K at zero ionic strength (estimate)", f"about {num(k_th, 3)} {unit}"
              + (f", u = {num(u_th, 2)} {unit} from the inputs alone" if is_number(u_th) else "")),
             ("activity coefficients (Davies)", gammas),
             ("ionic strength, temperature, A",
              f"{num(value_of(a.get('ionic_strength')), 3)} mol/L, {num(a.get('temperature_C'), 4)} °C, "
              f"A = {num(a.get('A'), 4)}"),
             ("within the equation's range", coloured("yes" if a.get("within_range") else "no",
                                                      a.get("within_range")))]
    out = [heading("Activity correction: an estimate", 2),
           para("An ESTIMATE, not a measured result: the conditional K converted to zero ionic "
                "strength, K° = K γ(ML) / (γ(M) γ(L)), with activity coefficients from the Davies "
                "equation (C. W. Davies, Ion Association, Butterworths, 1962), which has no "
                "ion-specific parameter and whose own error is not included. Report the "
                "conditional K above as the result.", "lead_small"),
           key_value_table(facts, (62, 112))]
    return out + (bullets([a["note"]], "small") if a.get("note") else [])


def equilibrium(record: dict) -> list | None:
    eq = record.get("equilibrium")
    if not isinstance(eq, dict) or not eq:
        return None
    combined = result_by_key(record, "combined K") or {}
    comb_value = combined.get("value", (eq.get("combined") or {}).get("K"))
    return (_conditions(eq) + _ice_table(record, eq) + _figure(record, eq) + _combined(record, eq)
            + _consistency(eq) + _trend(eq) + _bias(eq)
            + _joint_fit(eq, comb_value) + _activity(eq))
