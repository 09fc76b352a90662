"""The blocks `validate run` prints: the line's validation, each result, the equilibrium study,
the acceptance criteria and the advice. Each takes parts of the record dict (the form
results.json holds) and returns Lines; nothing here computes a result."""

from __future__ import annotations

from dataclasses import dataclass

from rich.markup import escape
from rich.table import Table

from validate.inputs.text import is_invisible
from validate.report.numbers import MISSING, compact, decimals_of, dof, gum_pair, interval, p_value
from validate.report.verdict_text import TONE, basis_text, headline, listed, reported_text


def terminal_safe(text: str) -> str:
    """Text with every control or invisible character but the line break written as a \\u
    escape: an escape sequence (ECMA-48) or a bidirectional override from an input or a record
    could otherwise recolour, move or hide what the terminal shows."""
    return "".join(f"\\u{ord(c):04x}" if c != "\n" and is_invisible(c) else c for c in text)


@dataclass(frozen=True)
class Line:
    """One print: rich console markup (record text already escaped). `soft_wrap` lets a long
    line run on instead of being broken at the console's width; `style` applies to all of it.
    Every Line is made terminal-safe when it is made: the one place text leaves for the terminal."""

    text: str = ""
    soft_wrap: bool = False
    style: str | None = None

    def __post_init__(self):
        object.__setattr__(self, "text", terminal_safe(self.text))


BLANK = Line()
Printable = Line | Table  # what the command line prints, in order


def p_after(p) -> str:
    """ "= 0.043" or "< 1e-16": a p value after its "p"."""
    shown = p_value(p, missing=MISSING)
    return shown if shown.startswith("<") else f"= {shown}"


def method_uncertainty_lines(m: dict | None) -> list[Printable]:
    """The method's uncertainty for routine use (top-down) beside the budget, and which U is reported."""
    if not m:
        return []
    rep, unit, rec = m["reproducibility"], escape(m["unit"]), m["reconciliation"]
    conc, big_u = gum_pair(m["concentration"], m["expanded_uncertainty"], missing=MISSING)
    _, bottom_up = gum_pair(m["concentration"], m["bottom_up"]["expanded_uncertainty"], missing=MISSING)
    lines: list[Printable] = [
        BLANK, Line("[bold]Method uncertainty for routine use[/] (validation data, top-down)"),
        Line(f"  control {escape(rep['sample'])}, {rep['series']} series: s_r {compact(rep['s_r'], 3)}, s_between "
             f"{compact(rep['s_between'], 3)}, s_Rw {compact(rep['s_Rw'], 3)} {unit} (nu {dof(rep['dof'])})",
             soft_wrap=True)]
    bias = m.get("bias")
    if bias:
        found = "significant" if bias["significant"] else "not significant"
        lines.append(Line(f"  bias {bias['relative_value_percent']:+.2f} %, u(bias) "
                          f"{bias['relative_standard_uncertainty_percent']:.2f} % ({found}; "
                          f"{escape(bias['treatment'])})"))
    lines += [Line(f"  at {conc} {unit}: top-down U = [bold]{big_u} {unit}[/] (k = {m['coverage_factor']:.2f}), "
                   f"bottom-up U = {bottom_up} {unit}", soft_wrap=True),
              Line(f"  reconciliation: {escape(rec['verdict'])} (F = {rec['statistic']:.2f}, "
                   f"p {p_after(rec['p_value'])}); reported for routine use: [bold]{escape(m['reported'])}[/]",
                   soft_wrap=True)]
    lines += [Line(f"  [yellow]note[/] {escape(text)}", soft_wrap=True) for text in m.get("limitations") or []]
    return lines


def addition_lines(blocks: list[dict] | None) -> list[Printable]:
    """Each standard addition's line, its leverage and the matrix-effect verdict."""
    lines: list[Printable] = []
    for b in blocks or []:
        unit = escape(b["concentration_unit"])
        lines += [BLANK, Line(f"[bold]Standard addition {escape(b['sample'])}[/]: {b['n']} flasks, slope "
                              f"{compact(b['slope'], 4)} per {unit}, extrapolated {compact(b['extrapolated'], 4)} "
                              f"{unit} in the flask (x {compact(b['dilution_factor'], 4)}); leverage h0 "
                              f"{compact(b['leverage'], 3)} (largest of the flasks "
                              f"{compact(b['largest_level_leverage'], 3)})", soft_wrap=True)]
        m = b.get("matrix_effect")
        if m:
            tone = "yellow" if m["significant"] else "green"
            lines.append(Line(f"  recovery of sensitivity {m['recovery_percent']:.1f} % "
                              f"[{m['recovery_low_percent']:.1f}, {m['recovery_high_percent']:.1f}] %: "
                              f"[{tone}]{escape(m['verdict'])}[/] (p {p_after(m['p_value'])})", soft_wrap=True))
        else:
            lines.append(Line("  matrix effect not tested: no external straight line to compare the additions' "
                              "slope with", soft_wrap=True))
        if not b["reaches_sample_content"]:
            lines.append(Line("  [yellow]note[/] the largest addition is below the sample's own content: the "
                              "extrapolation is longer than the spiked range", soft_wrap=True))
    return lines


# --------------------------------------------------------------------------
# one result

def _monte_carlo_lines(mc: dict, decimals: int) -> list[Printable]:
    def ends(pair) -> str:
        return interval(pair, decimals, missing=MISSING)

    verdict = {"agrees": f"[green]agrees[/] with Monte Carlo (ends within {mc['tolerance']:.1g})",
               "differs": f"[yellow]differs[/] from Monte Carlo (an end off by more than {mc['tolerance']:.1g})",
               }.get(mc["gum_check"], f"[yellow]undecided[/] against Monte Carlo (an end within noise of "
                                      f"{mc['tolerance']:.1g})")
    lines: list[Printable] = [
        Line(f"  Monte Carlo  {ends(mc['interval'])}, shortest {ends(mc['shortest_interval'])}, "
             f"{mc['trials']:,} trials"),
        Line(f"  GUM interval {ends(mc['gum_interval'])} {verdict}, JCGM 101 clause 8")]
    lines.append(Line(f"  d_low {mc['d_low']:.2g}, d_high {mc['d_high']:.2g}, delta {mc['tolerance']:.2g}; "
                      f"Monte Carlo ends to +/-{mc['numerical_tolerance']:.2g} (target delta/5 = "
                      f"{mc['tolerance_target']:.2g})"))
    if mc.get("moments_note"):
        lines.append(Line(f"  [yellow]note[/] {escape(mc['moments_note'])}", soft_wrap=True))
    if mc.get("warning"):
        lines.append(Line(f"  [yellow]warning[/] {escape(mc['warning'])}", soft_wrap=True))
    elif mc.get("invalid_trials"):
        lines.append(Line(f"  note: {mc['invalid_trials']} trials gave no defined result"))
    return lines


def _budget_lines(record: dict, result: dict, top: int) -> list[Printable]:
    rows = [row for row in record.get("budget") or [] if row["result"] == result["name"]]
    lines: list[Printable] = [Line("  largest sources of uncertainty:")]
    lines += [Line(f"    {row['share']:6.1%}  {escape(row['source'])}  [dim]({escape(row.get('step') or '-')})[/]")
              for row in rows[:top]]
    quantities = result.get("budget_by_quantity") or []
    if quantities:
        lines.append(Line("  by input quantity: " + ", ".join(f"{escape(g['group'])} {g['share']:.0%}"
                                                              for g in quantities[:3]), soft_wrap=True))
    steps = result.get("budget_by_step") or []
    lines.append(Line("  by step: " + ", ".join(f"{escape(g['group'])} {g['share']:.0%}" for g in steps[:3])))
    return lines


def result_lines(record: dict, result: dict, top: int) -> list[Printable]:
    """A result with U rounded by GUM 7.2.6, its Monte Carlo check and its largest sources."""
    value, big_u = gum_pair(result["value"], result["expanded_uncertainty"], missing=MISSING)
    nu = dof(result.get("effective_dof"), infinite="inf")
    lines: list[Printable] = [BLANK, Line(f"[bold]{escape(result['name'])}[/]")]
    lines += [Line(f"  [bold yellow]FLAG[/] {escape(flag)}: report with this flag, not as a plain number")
              for flag in result.get("flags") or []]
    lines += reported_lines(record, result)
    lines.append(Line(f"  GUM          [bold]{value} ± {big_u} {escape(result['unit'])}[/]  "
                      f"(k = {result['coverage_factor']:.2f}, p = {result['coverage_probability']:g}, "
                      f"nu_eff = {nu})"))
    if result.get("monte_carlo"):
        lines += _monte_carlo_lines(result["monte_carlo"], decimals_of(value) + 1)
    if top > 0:
        lines += _budget_lines(record, result, top)
    return lines


# --------------------------------------------------------------------------
# the equilibrium study

def _mixture_table(e: dict) -> Table:
    table = Table(show_edge=False, pad_edge=False)
    cu = escape(e["concentration_unit"])
    for col in ("point", f"[M]0 {cu}", f"[L]0 {cu}", "K", "U", "Monte Carlo 95 %"):
        table.add_column(col, justify="left" if col == "point" else "right")
    for p in e["mixtures"]:
        value, big_u = gum_pair(p["K"], p["expanded_uncertainty"], missing=MISSING)
        ends = f"[{p['interval'][0]:.4g}, {p['interval'][1]:.4g}]" if p["interval"] else "-"
        point = terminal_safe(escape(str(p["id"])))
        table.add_row(point, f"{p['M_total']:.4g}", f"{p['L_total']:.4g}", value, big_u, ends)
    return table


def _mixture_lines(e: dict) -> list[Printable]:
    cond = e["conditions"]
    lines: list[Printable] = [
        BLANK,
        Line(f"[bold]Formation constant K of ML (1:1)[/], in {escape(e['k_unit'])}; conditional on "
             f"{compact(cond['temperature_C'])} degC, I = {compact(cond['ionic_strength_mol_per_L'])} mol/L"),
        _mixture_table(e)]
    if cond.get("not_in_U"):  # conditions K depends on that U(K) does not hold
        lines.append(Line(f"  [yellow]not in U(K)[/]: {escape('; '.join(cond['not_in_U']))}", soft_wrap=True))
    lines += [Line(f"  [yellow]note[/] {escape(p['id'])}: {escape(p['saturation_flag'])}", soft_wrap=True)
              for p in e["mixtures"] if p.get("saturation_flag")]
    return lines


def _combination_lines(e: dict) -> list[Printable]:
    c, lines = e["combined"], list[Printable]()
    if c.get("consistency"):
        k = c["consistency"]
        lines.append(Line(f"  consistency: chi-square {k['chi_square']:.2f} on {k['dof']} dof, p "
                          f"{p_after(k['p_value'])}, Birge ratio {k['birge_ratio']:.2f}: {escape(k['verdict'])}",
                          soft_wrap=True))
    if any(w < 0 for w in c["weights"]):
        lines.append(Line("  note: some generalised-least-squares weights are negative (strongly correlated "
                          "K values)", style="dim"))
    trend = e.get("trend") or {}
    if "message" in trend:
        lines.append(Line(f"  trend with {escape(trend['against'])}: {escape(trend['message'])} "
                          f"(p {p_after(trend['p_value'])})", soft_wrap=True))
    return lines


def _bias_lines(e: dict) -> list[Printable]:
    b, unit = e["complete_complexation_bias"], escape(e["k_unit"])
    fractions = b["fraction_complexed_in_standards"]
    lines: list[Printable] = [Line(
        f"  taking the standards as fully complexed would bias the slope by {b['slope']:+.1%} and K by "
        f"{b['K']:+.1%} (naive K = {b['naive_K']:.4g} {unit}); fraction complexed in the standards "
        f"{min(fractions):.3f} to {max(fractions):.3f}", soft_wrap=True)]
    if not b["iteration_converged"]:
        lines.append(Line("  [yellow]warning[/] the correction of the standards did not converge: see the joint fit",
                          soft_wrap=True))
    return lines


def _cross_check_lines(e: dict) -> list[Printable]:
    unit, lines = escape(e["k_unit"]), list[Printable]()
    joint = e.get("joint_fit") or {}
    if "K" in joint:
        lines.append(Line(f"  cross-check, joint nonlinear fit: K = {joint['K']:.4g} ± "
                          f"{joint['standard_uncertainty']:.2g} {unit} (standard uncertainty)"))
    if "activity_estimate" in e:
        k0 = e["activity_estimate"]["K_thermodynamic"]
        k0 = k0["value"] if isinstance(k0, dict) else k0
        lines.append(Line(f"  activity estimate (Davies, an estimate): K at zero ionic strength about "
                          f"{k0:.4g} {unit}", soft_wrap=True))
    return lines


def equilibrium_lines(record: dict, top: int) -> list[Printable]:
    """K per mixture, the combined K and log10 K, the checks of the combination and the bias."""
    e = record["equilibrium"]
    by_kind = {r["key"]["kind"]: r for r in record["results"]}
    lines = _mixture_lines(e)
    lines += result_lines(record, by_kind["combined K"], top)
    lines += result_lines(record, by_kind["log10 K"], 0)
    return lines + _combination_lines(e) + _bias_lines(e) + _cross_check_lines(e)


# --------------------------------------------------------------------------
# advice

def _advice_figure(advice: dict, value) -> str:
    if advice["unit"].startswith("relative"):
        return f"{100 * value:.2f} %"
    return f"{value:.3g} {advice['unit']}"


def advice_lines(advice: dict | None) -> list[Printable]:
    """The three changes that lower U most, and all of them together."""
    if not advice:
        return []
    quantified = [a for a in advice["items"] if a["expanded_uncertainty_after"] is not None]
    lines: list[Printable] = [BLANK, Line(
        f"[bold]What to improve first[/] (judged by {escape(advice['target'])}: now "
        f"{_advice_figure(advice, advice['expanded_uncertainty_before'])})")]
    if not quantified:
        lines.append(Line("  no change among those tried lowers the expanded uncertainty noticeably"))
    lines += [Line(f"  -{a['reduction']:.0%}  {escape(a['change'])} -> "
                   f"{_advice_figure(advice, a['expanded_uncertainty_after'])}  [dim]({escape(a['cost'])})[/]",
                   soft_wrap=True) for a in quantified[:3]]
    if advice.get("combined"):
        c = advice["combined"]
        after = _advice_figure(advice, c["expanded_uncertainty_after"])
        lines.append(Line(f"  together: -{c['reduction']:.0%} -> {after}", soft_wrap=True))
    return lines


# --------------------------------------------------------------------------
# the verdict (validate.record.verdict) and each result as reported

def reported_lines(record: dict, result: dict) -> list[Printable]:
    """The result as reported by the record's interval rule, and on what basis."""
    reported = next((r for r in (record.get("verdict") or {}).get("reported", []) if r["key"] == result["key"]),
                    None)
    if reported is None:
        return []
    return [Line(f"  reported     [bold]{escape(reported_text(reported))}[/]  "
                 f"[dim]({escape(basis_text(reported))})[/]", soft_wrap=True)]


def _tone(verdict: dict) -> str:
    return {True: "green", None: "yellow", False: "red"}[TONE[verdict["status"]]]


def verdict_headline(verdict: dict | None) -> list[Printable]:
    """The verdict in one line (the first line `validate run` prints)."""
    if not verdict:
        return []
    return [Line(f"[bold {_tone(verdict)}]{escape(headline(verdict))}[/]", soft_wrap=True)]


def verdict_lines(verdict: dict | None) -> list[Printable]:
    """The verdict with every criterion not met, not evaluable and every warning (the last lines)."""
    if not verdict:
        return []
    lines: list[Printable] = [BLANK, *verdict_headline(verdict)]
    for title, items in listed(verdict):
        lines.append(Line(f"  {title}:"))
        lines += [Line(f"    - {escape(text)}", soft_wrap=True) for text in items]
    lines.append(Line(f"  [dim]{escape(verdict['interval_rule'])}[/]", soft_wrap=True))
    return lines
