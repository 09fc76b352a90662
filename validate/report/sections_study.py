"""Summary, budget and Monte Carlo sections laid out for an equilibrium study.

An equilibrium study has one result that matters, the combined K (and
log10 K, the same quantity on another scale), and many per-point K values
that lead to it. Those sections give the combined K in full and the points
in one compact table each, instead of a budget and a Monte Carlo block per
point (the full per-point budgets stay in budget.csv and results.json).
pdf.py picks these builders when sections_equilibrium.is_study(record).
"""

from __future__ import annotations

from reportlab.lib.units import mm
from reportlab.platypus import CondPageBreak, Table, TableStyle

from validate.report.numbers import DASH, dof, is_number, num, p_equals, pct
from validate.report.sections import coloured, criteria_block, result_rows, rounded, stages_not_run, u_decimals
from validate.report.sections_equilibrium import k_unit, point_interval, point_result, result_by_key
from validate.report.sections_uncertainty import (
    BUDGET_LEAD,
    NOT_RUN,
    budget_for_result,
    interval_text,
    mc_decimals,
    monte_carlo_for_result,
    monte_carlo_intro,
    shown_rule,
)
from validate.report.sections_verdict import interval_rule_note, verdict_block
from validate.report.style import BAD, data_table, heading, key_value_table, para, text

SAME_SHARES = 1e-6  # log10 K's shares equal K's when they differ by less than this


def _parts(record: dict) -> tuple[dict, dict | None, list[tuple[dict, dict]]]:
    """The combined K result, the log10 K result, and (mixture entry, result) per point."""
    points = []
    for m in record["equilibrium"].get("mixtures") or []:
        points.append((m, point_result(record, m.get("id")) or {}))
    return result_by_key(record, "combined K") or {}, result_by_key(record, "log10 K"), points


def _verdict(result: dict):
    agrees = (result.get("monte_carlo") or {}).get("agrees_with_gum")
    if not isinstance(agrees, bool):
        return DASH
    return coloured("validated" if agrees else "not validated", agrees)


def _mc_text(record: dict, mixture: dict, result: dict) -> str:
    """A point's Monte Carlo interval to the decimal place of its rounded U."""
    places = u_decimals(result) if result else 0
    return interval_text(point_interval(record, mixture), places, "").strip()


# --------------------------------------------------------------------------
# Summary (first page)

def _consistency_line(eq: dict, n_points: int) -> list:
    cons = (eq.get("combined") or {}).get("consistency") or {}
    if not cons:
        return []
    chi2 = cons.get("chi_square")
    return [para(f"Consistency of the {n_points} K values: χ² = {num(chi2, 3)} on ν = "
                 f"{cons.get('dof', DASH)}, {p_equals(cons.get('p_value'))}, Birge ratio "
                 f"{num(cons.get('birge_ratio'), 2)}: {cons.get('verdict', DASH)}.", "body")]


def _points_mc_line(points: list[tuple[dict, dict]]) -> list:
    checked = [r for _, r in points if isinstance((r.get("monte_carlo") or {}).get("agrees_with_gum"), bool)]
    if not checked:
        return []
    agree = sum(1 for r in checked if r["monte_carlo"]["agrees_with_gum"])
    return [para(f"Per point: Monte Carlo validates the GUM interval of {agree} of {len(checked)} "
                 "K values; where it does not, report the Monte Carlo interval.", "body")]


def _summary_point_rows(record: dict, points: list[tuple[dict, dict]]) -> list[list]:
    rows = []
    for m, r in points:
        value, big_u = rounded(r.get("value", m.get("K")),
                               r.get("expanded_uncertainty", m.get("expanded_uncertainty")))
        rows.append([m.get("id", DASH), value, big_u, _mc_text(record, m, r) or DASH])
    return rows


def _side_by_side(rows: list[list], unit: str) -> Table:
    """The points in two tables next to each other, so ten points take five lines."""
    half = (len(rows) + 1) // 2
    header = ["point", f"K / {unit}", f"U / {unit}", "Monte Carlo 95 %"]
    tables = [data_table(header, part, [13, 20, 20, 31], numeric={1, 2, 3})
              for part in (rows[:half], rows[half:]) if part]
    pair = Table([tables], colWidths=[87 * mm] * len(tables), hAlign="LEFT")
    pair.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                              ("LEFTPADDING", (0, 0), (-1, -1), 0)]))
    return pair


def summary(record: dict) -> list:
    combined, log10k, points = _parts(record)
    eq, unit = record["equilibrium"], k_unit(record["equilibrium"])
    headline = [r for r in (combined, log10k) if r]
    header, rows, widths, numeric = result_rows(record, headline)
    out = [*verdict_block(record, study=True), heading("Results", 2),
           data_table(header, rows, widths, numeric=numeric),
           para("K: combined formation constant of all points; log10 K of K in "
                f"{unit}. U: expanded uncertainty, U = k u(y), with coverage factor k from the t "
                "distribution at the effective degrees of freedom ν_eff (Welch-Satterthwaite, "
                "GUM G.4.1) and coverage probability p. U is rounded to two significant digits "
                "and the value to the same decimal place (GUM 7.2.6).", "note"), *interval_rule_note(record),
           *stages_not_run(record)]
    out += _consistency_line(eq, len(points))
    for r in headline + [r for _, r in points]:
        if r.get("flags"):
            out.append(para(f'<font color="#{BAD.hexval()[2:]}"><b>flag</b></font> '
                            f"{text(r['name'])}: {text('; '.join(map(str, r['flags'])))}",
                            "body", markup=True))
    out += _points_mc_line(points)
    if points:
        out += [heading("K of each point", 2), _side_by_side(_summary_point_rows(record, points), unit),
                para("Series points are named series.reading (T.1 is the first reading of series "
                     "T). Reagent totals, ICE table, a figure of these values and the consistency "
                     "and trend checks: section Equilibrium constant. Uncertainty of each point: "
                     "section Uncertainty budget.", "note")]
    return out + criteria_block(record)


# --------------------------------------------------------------------------
# Uncertainty budget

def _same_shares(record: dict, a: str, b: str) -> bool:
    """Do the results of kinds a and b (keys) have the same share from every source?"""
    shares: dict[str, dict] = {}
    for row in record.get("budget") or []:
        kind = (row.get("key") or {}).get("kind")
        if kind in (a, b) and is_number(row.get("share")):
            shares.setdefault(kind, {})[row.get("source")] = row["share"]
    first, second = shares.get(a), shares.get(b)
    if not first or not second or set(first) != set(second):
        return False
    return all(abs(first[s] - second[s]) < SAME_SHARES for s in first)


def _log10_budget(record: dict, combined: dict, log10k: dict | None) -> list:
    if not log10k:
        return []
    if not _same_shares(record, "combined K", "log10 K"):
        return budget_for_result(record, log10k)
    value, big_u = rounded(log10k.get("value"), log10k.get("expanded_uncertainty"))
    return [heading(log10k["name"], 2),
            para(f"log10 K = {value}, U = {big_u} (k = {num(log10k.get('coverage_factor'), 3)}). "
                 "log10 K is a function of K alone, so every source has the same share of its "
                 "variance as above; only the scale changes, u(log10 K) = u(K) / (K ln 10) = "
                 f"{num(log10k.get('standard_uncertainty'), 3)} (GUM 5.1.2).", "body")]


def _largest_source(record: dict, name: str | None) -> tuple[str, str]:
    rows = [r for r in record.get("budget") or [] if r.get("result") == name and is_number(r.get("share"))]
    if not rows:
        return DASH, DASH
    top = max(rows, key=lambda r: r["share"])
    return top.get("source", DASH), pct(top["share"], 0)


def _points_table(record: dict, points: list[tuple[dict, dict]]) -> list:
    unit = k_unit(record["equilibrium"])
    rows = []
    for m, r in points:
        if not r:
            continue
        value, big_u = rounded(r.get("value"), r.get("expanded_uncertainty"))
        rows.append([m.get("id", DASH), value, num(r.get("standard_uncertainty"), 2), big_u,
                     num(r.get("coverage_factor"), 3), dof(r.get("effective_dof")),
                     *_largest_source(record, r.get("name")), _mc_text(record, m, r) or DASH,
                     _verdict(r)])
    if not rows:
        return []
    return [CondPageBreak(60 * mm), heading("K of each point", 2),
            para(f"K, u(K) and U in {unit}. Largest source: the source with the largest share of "
                 "that point's variance, and that share. Monte Carlo: the probabilistically symmetric 95 % "
                 "interval; GUM interval: validated or not by JCGM 101 clause 8. The full budget of "
                 "every point is in budget.csv.", "lead"),
            data_table(["point", "K", "u(K)", "U", "k", "ν_eff", "largest source", "share",
                        "Monte Carlo 95 %", "GUM interval"], rows,
                       [13, 10, 10, 10, 9, 13, 41, 13, 31, 24], numeric={1, 2, 3, 4, 5, 7, 8})]


def budget(record: dict) -> list:
    combined, log10k, points = _parts(record)
    out = [para(BUDGET_LEAD + shown_rule() + " Shown for the combined K; the points follow in one table.", "lead")]
    return (out + budget_for_result(record, combined) + _log10_budget(record, combined, log10k)
            + _points_table(record, points))


# --------------------------------------------------------------------------
# Monte Carlo check

def _largest_share_difference(first: dict, second: dict) -> float | None:
    """Largest difference of the Monte Carlo shares of the same groups in two results."""
    diffs = []
    for key in ("shares_by_step", "shares_by_equipment"):
        a = {g.get("group"): g.get("share") for g in first.get(key) or []}
        for g in second.get(key) or []:
            if is_number(a.get(g.get("group"))) and is_number(g.get("share")):
                diffs.append(abs(a[g["group"]] - g["share"]))
    return max(diffs) if diffs else None


def _log10_mc(combined: dict, log10k: dict | None) -> list:
    if not log10k or not isinstance(log10k.get("monte_carlo"), dict):
        return []
    mc = log10k["monte_carlo"]
    d = mc_decimals(mc, log10k)
    agrees = mc.get("agrees_with_gum")
    verdict = ({True: "validated", False: "not validated: report the Monte Carlo interval"}[agrees]
               if isinstance(agrees, bool) else "not evaluated")
    facts = [("95 % interval, probabilistically symmetric", interval_text(mc.get("interval"), d, "")),
             ("95 % interval, shortest", interval_text(mc.get("shortest_interval"), d, "")),
             ("95 % GUM interval y ± U", interval_text(mc.get("gum_interval"), d, "")),
             ("verdict (JCGM 101 clause 8)",
              coloured(verdict, agrees if isinstance(agrees, bool) else None))]
    diff = _largest_share_difference(combined.get("monte_carlo") or {}, mc)
    lead = "From the same trials as K."
    if diff is not None:
        lead += (" Its shares of the variance by group differ from those of K by at most "
                 f"{num(100 * diff, 2)} percentage points, so they are not repeated.")
    return [heading(log10k["name"], 2), para(lead, "lead_small"), key_value_table(facts, (62, 112))]


def monte_carlo(record: dict) -> list | None:
    combined, log10k, points = _parts(record)
    if not any(isinstance(r.get("monte_carlo"), dict) for r in [combined, log10k or {}]
               + [r for _, r in points]):
        return [para(NOT_RUN, "body")]
    out = monte_carlo_intro(record)
    if isinstance(combined.get("monte_carlo"), dict):
        out += monte_carlo_for_result(combined)
    out += _log10_mc(combined, log10k)
    line = _points_mc_line(points)
    if line:
        out += [heading("K of each point", 2), *line,
                para("Each point's Monte Carlo interval and verdict are in the table 'K of each "
                     "point' of the uncertainty budget.", "small")]
    return out
