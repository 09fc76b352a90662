"""Report sections, part 1: summary, method, inputs, calibration.

Every section builder takes the record dict and returns a list of flowables
(without its numbered heading, which pdf.py adds), or None when the record
holds nothing for it. Nothing here computes a result: values come from the
record (the prediction band of the calibration figure is drawn from the
record's points).
"""

from __future__ import annotations

import io

from reportlab.lib.utils import ImageReader
from reportlab.platypus import Flowable, Image, KeepTogether, Paragraph

from validate.inputs.validation_settings import CRITERIA
from validate.report import figures
from validate.report.numbers import DASH, dof, gum_decimals, gum_pair, interval, is_number, num, pct
from validate.report.sections_verdict import (
    REPORTED_WIDTH,
    interval_rule_note,
    reported_bases,
    reported_column,
    verdict_block,
)
from validate.report.style import (
    BAD,
    FRAME_WIDTH,
    GOOD,
    data_table,
    gap,
    heading,
    key_value_table,
    pairs_table,
    para,
    styles,
    text,
)


class RasterImage(Flowable):
    """A figure's pixels (`figures.Raster`) at a given width, height from the aspect ratio;
    handed to the PDF writer as pixels, so they are compressed once."""

    def __init__(self, raster: figures.Raster, width: float) -> None:
        super().__init__()
        pixels_w, pixels_h = raster.size
        self.raster, self.width, self.height = raster, width, width * pixels_h / pixels_w

    def wrap(self, availWidth, availHeight):  # reportlab calls it with these names
        return self.width, self.height

    def draw(self) -> None:
        self.canv.drawImage(ImageReader(self.raster.pixels), 0, 0, self.width, self.height)


def png_image(data: bytes | figures.Raster, width: float = FRAME_WIDTH) -> Flowable:
    """A figure (pixels, or a PNG file's bytes) at the given width, height from its aspect ratio."""
    if isinstance(data, figures.Raster):
        return RasterImage(data, width)
    reader = ImageReader(io.BytesIO(data))
    w, h = reader.getSize()
    return Image(io.BytesIO(data), width=width, height=width * h / w)


def figure_block(data: bytes | figures.Raster, caption: str, width: float = FRAME_WIDTH) -> KeepTogether:
    """A figure and its caption, never parted by a page break."""
    return KeepTogether([gap(2), png_image(data, width), para(caption, "note")])


def rounded(value, expanded) -> tuple[str, str]:
    """Value and U rounded by GUM 7.2.6; dashes when the record holds no number (null)."""
    return gum_pair(value, expanded)


def u_decimals(result: dict) -> int:
    """Decimal places of the rounded U of a result (0 when there is none)."""
    return gum_decimals(result.get("value"), result.get("expanded_uncertainty"))


def concentration_unit(record: dict) -> str:
    """The line's concentration unit: from the calibration block, else the validation block."""
    for key in ("calibration", "validation"):
        unit = (record.get(key) or {}).get("concentration_unit")
        if unit:
            return unit
    return ""


def coloured(status: str, good: bool | None) -> Paragraph:
    colour = {True: GOOD.hexval(), False: BAD.hexval()}.get(good) if good is not None else None
    body = f"<b>{text(status)}</b>" if colour is None else \
        f'<font color="#{colour[2:]}"><b>{text(status)}</b></font>'
    return Paragraph(body, styles()["cell"])


# --------------------------------------------------------------------------
# Summary (first page)

def title_block(record: dict, content_hash: str | None = None) -> list:
    method, run, software = record.get("method", {}), record.get("run", {}), record.get("software", {})
    facts = [("record id", run.get("record_id", DASH)),
             ("created", run.get("created", DASH)),
             ("measurand", method.get("measurand") or DASH),
             ("software", f"{software.get('name', 'validate')} {software.get('version', '')}".strip())]
    if content_hash:  # SHA-256 of results.json without its run block; `validate verify` prints it too
        facts.append(("content hash", content_hash))
    return [para(method.get("title") or "Untitled method", "title"),
            para("Method validation and measurement uncertainty report", "subtitle"),
            gap(2), key_value_table(facts, (32, 142)), gap(3)]


def _relative(value, expanded) -> float | None:
    """U / |y|, None when either is missing or y is zero."""
    return expanded / abs(value) if is_number(value) and value and is_number(expanded) else None


def _result_row(r: dict, with_mc: bool, basis: dict) -> list:
    value, big_u = rounded(r.get("value"), r.get("expanded_uncertainty"))
    unit = r.get("unit", "")
    row = [r.get("name", DASH), f"{value} {unit}", f"{big_u} {unit}", num(r.get("coverage_factor"), 3),
           pct(r.get("coverage_probability"), 0), dof(r.get("effective_dof")),
           pct(_relative(r.get("value"), r.get("expanded_uncertainty")))]
    row += [mc_interval_text(r)] if with_mc else []
    return row + [reported_column(basis, r)] if basis else row


def _combined_k_row(record: dict, eq: dict, with_mc: bool) -> list:
    """The combined K of an equilibrium study, for records that do not list it as a result."""
    value, big_u = rounded(eq["K"], eq["expanded_uncertainty"])
    u = eq.get("standard_uncertainty")
    k = eq["expanded_uncertainty"] / u if is_number(u) and u > 0 else None
    unit = record["equilibrium"].get("k_unit") or record["equilibrium"].get("unit", "L/mol")
    row = ["formation constant K (combined)", f"{value} {unit}", f"{big_u} {unit}", num(k, 3),
           pct(eq.get("coverage_probability"), 0) if eq.get("coverage_probability") else DASH,
           dof(eq["effective_dof"]) if "effective_dof" in eq else DASH,
           pct(eq["expanded_uncertainty"] / abs(eq["K"]) if eq["K"] else None)]
    return row + [DASH] if with_mc else row


def _results_columns(with_mc: bool, with_basis: bool) -> tuple[list[str], list[float]]:
    """Header and widths (mm) of the results table: a Monte Carlo column when Monte Carlo ran,
    and a 'reported' column (y ± U or MC) when the record holds a verdict."""
    header = ["result", "value", "U", "k", "p", "ν_eff", "U / value"]
    widths: list[float] = [58, 26, 24, 13, 12, 13, 18]
    if with_mc:
        header.append("Monte Carlo interval")
        widths = [44, 22, 20, 12, 11, 12, 17, 36]
    if with_basis:  # the name and the narrow columns give way to the column saying what is reported
        header.append("reported")
        widths = ([30, 22, 20, 11, 10, 11, 15, 36] if with_mc else [39, 26, 24, 13, 12, 13, 18]) + [REPORTED_WIDTH]
    return header, widths


def result_rows(record: dict, results: list[dict] | None = None
                ) -> tuple[list[str], list[list], list[float], set[int]]:
    """Header, rows, column widths and numeric columns of the results table (all results by default)."""
    every = record.get("results") or []
    results = every if results is None else results
    with_mc = any(r.get("monte_carlo") for r in results)
    basis = reported_bases(record)
    header, widths = _results_columns(with_mc, bool(basis))
    rows = [_result_row(r, with_mc, basis) for r in results]
    eq = (record.get("equilibrium") or {}).get("combined")
    listed = any((r.get("key") or {}).get("kind") == "combined K" for r in every)  # never list it twice
    if eq and not listed and is_number(eq.get("K")) and is_number(eq.get("expanded_uncertainty")):
        rows.append(_combined_k_row(record, eq, with_mc) + ([DASH] if basis else []))
    return header, rows, widths, set(range(1, len(header)))


def mc_interval_text(result: dict) -> str:
    """The probabilistically symmetric Monte Carlo interval, to the decimal place of U."""
    shown = interval((result.get("monte_carlo") or {}).get("interval"), u_decimals(result))
    return shown if shown == DASH else f"{shown} {result.get('unit', '')}"


def limit_text(c: dict, conc_unit: str) -> str:
    """The limit with its unit or %, as the terminal shows it: "≤ 5 %", "≥ 0.995", "95 to 105 %"
    (a limit on an absolute value reads as a limit; the observed value carries the bars)."""
    limit, unit = c.get("limit"), c.get("unit", "")
    unit = conc_unit if unit == "concentration unit" else unit
    suffix = f" {unit}" if unit else ""
    if limit is None:
        return "not set"
    if isinstance(limit, (list, tuple)):
        return f"{num(limit[0])} to {num(limit[1])}{suffix}"
    comparison = str(c.get("comparison", ""))
    symbol = {">=": "≥", "<=": "≤", "|x| <=": "≤"}.get(comparison, comparison)
    return f"{symbol} {num(limit, 6)}{suffix}"


def not_applicable(crit: dict) -> list[str]:
    """The criteria left out of a record's list as not applicable to its kind of method."""
    judged = {c.get("key") for c in crit.get("criteria") or []}
    return [pretty(spec[0]) for key, spec in CRITERIA.items() if key not in judged]


def pretty(name: str) -> str:
    """Plain-text exponents of the record shown as superscripts (r^2 -> r²)."""
    return str(name).replace("^2", "²").replace("^-1", "⁻¹")


def _overall(crit: dict, shown: list[dict]) -> Paragraph:
    """One coloured line: every criterion met, how many not met, or none evaluable."""
    failed = [c for c in shown if c.get("met") is False]
    unevaluable = sum(1 for c in shown if c.get("status") == "not evaluable")
    if crit.get("all_met") is True and unevaluable:
        return coloured(f"Every evaluated acceptance criterion is met; {unevaluable} could not be evaluated "
                        "(see the verdict).", None)
    if crit.get("all_met") is True:
        return coloured("Every evaluated acceptance criterion is met.", True)
    if crit.get("all_met") is False:
        return coloured(f"{len(failed)} of {len(shown)} acceptance criteria not met.", False)
    return coloured("No acceptance criterion could be evaluated.", None)


def _criterion_row(c: dict, conc_unit: str) -> list:
    unit = c.get("unit", "")
    unit = conc_unit if unit == "concentration unit" else unit
    value = c.get("observed")
    # r² close to 1 needs its digits; other observations read well with four
    digits = 6 if is_number(value) and 0.9 < value < 1 else 4
    shown = num(value, digits)
    shown = f"|{shown}|" if c.get("comparison") == "|x| <=" else shown
    observed = f"{shown} {unit}".strip() if value is not None else DASH
    origin = "default (common practice)" if c.get("is_default") else "set by the user"
    return [pretty(c.get("name", c.get("key", ""))), limit_text(c, conc_unit), observed,
            coloured(c.get("status", DASH), c.get("met")), origin]


def criteria_block(record: dict) -> list:
    crit = (record.get("validation") or {}).get("criteria")
    if not crit:
        return []
    conc_unit = concentration_unit(record)
    items = crit.get("criteria") or []
    shown = [c for c in items if c.get("status") != "not set"]
    not_set = [pretty(c.get("name", c.get("key", ""))) for c in items if c.get("status") == "not set"]
    rows = [_criterion_row(c, conc_unit) for c in shown]
    out = [heading("Acceptance criteria", 2), _overall(crit, shown), gap(1.5)]
    if rows:
        out.append(data_table(["criterion", "limit", "observed", "verdict", "limit from"], rows,
                              [72, 24, 26, 20, 32], numeric={2}))
    if not_set:
        out.append(para("Not set (no general default): " + "; ".join(not_set) + ".", "small"))
    left_out = not_applicable(crit)
    if left_out:
        out.append(para("Not applicable to this kind of method, so not judged: " + "; ".join(left_out) + ".",
                        "small"))
    # the caution's own list of those left out is the line above
    caution = (crit.get("caution") or "").split(" Not applicable to this kind of method")[0]
    out.append(para(caution or "Acceptance criteria come from the applicable requirements, not from the tool.",
                    "note"))
    return out


def stages_not_run(record: dict) -> list:
    """One line naming every stage this run left out and why (the record says which ran:
    no Monte Carlo settings, no advice block)."""
    skipped = []
    if record.get("results") and not record.get("monte_carlo_settings") \
            and not any(isinstance(r.get("monte_carlo"), dict) for r in record["results"]):
        skipped.append("Monte Carlo (JCGM 101), because the run asked for the linear engine only (--trials 0): "
                       "the GUM intervals are not checked by clause 8")
    if "advice" in record and record.get("advice") is None:
        skipped.append("the advisor, because it was skipped on request (--no-advice): no ranked changes")
    if not skipped:
        return []
    return [para("<b>Not run in this evaluation:</b> " + text("; ".join(skipped)) + ".", "small", markup=True)]


def summary(record: dict) -> list:
    header, rows, widths, numeric = result_rows(record)
    out = [*verdict_block(record), heading("Results", 2),
            data_table(header, rows, widths, numeric=numeric),
            para("U = k u(y), k from the t distribution at the effective degrees of freedom ν_eff "
                 "(Welch-Satterthwaite, GUM G.4.1) for coverage probability p; U rounded to two "
                 "significant digits, the value to the same decimal place (GUM 7.2.6).", "note"),
            *interval_rule_note(record), *stages_not_run(record)]
    for r in record.get("results") or []:
        if r.get("flags"):  # e.g. below the LOQ, extrapolated: the reader must see it here
            out.append(para(f'<font color="#{BAD.hexval()[2:]}"><b>flag</b></font> '
                            f"{text(r['name'])}: {text('; '.join(map(str, r['flags'])))}",
                            "body", markup=True))
    out += criteria_block(record)
    return out


# --------------------------------------------------------------------------
# Method and scope; measurement equation and inputs

def _setting_text(value) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (list, tuple)):
        return ", ".join(_setting_text(v) for v in value) if value else "none"
    if is_number(value):
        return num(value, 4)
    return str(value) if value not in (None, "") else DASH


def _flatten(settings: dict, prefix: str = "") -> list[tuple[str, str]]:
    """Nested settings as (label, text) rows: {"validation": {"alpha": 0.05}} -> "validation: alpha"."""
    rows = []
    for key, value in settings.items():
        label = prefix + str(key).replace("_", " ")
        if isinstance(value, dict):
            rows += _flatten(value, label + ": ") if value else [(label, "none")]
        else:
            rows.append((label, _setting_text(value)))
    return rows


def method_scope(record: dict) -> list:
    method = record.get("method", {})
    facts = [("measurand", method.get("measurand") or DASH),
             ("scope", method.get("scope") or DASH),
             ("result unit", method.get("result_unit") or DASH),
             ("method file", method.get("file") or DASH)]
    settings = record.get("settings") or {}
    plain = {k: v for k, v in settings.items() if not isinstance(v, dict)}
    out = [key_value_table(facts, (32, 142))]
    if plain:
        out += [heading("Settings of this evaluation", 2), pairs_table(_flatten(plain))]
    for key, group in settings.items():
        if isinstance(group, dict) and group:
            out += [heading(f"Settings: {str(key).replace('_', ' ')}", 2), pairs_table(_flatten(group))]
    return out


# --------------------------------------------------------------------------
# Calibration

def reading_decimals(cal: dict) -> int:
    """Decimal places the readings were recorded with (the most any reading shows, at most 6)."""
    places = 0
    values = [p.get("absorbance") for p in cal.get("points", [])]
    values += [r for s in cal.get("samples", []) for r in s.get("readings", [])]
    for value in values:
        if is_number(value):
            shown = repr(float(value))
            if "e" not in shown and "." in shown:
                places = max(places, len(shown.split(".")[1].rstrip("0")))
    return min(places, 6)

def calibration(record: dict) -> list | None:
    cal = record.get("calibration")
    if not cal or not cal.get("points"):
        return None
    unit = cal.get("concentration_unit", "")
    facts = [("slope b (sensitivity)",
              f"{num(cal.get('slope'), 5)} per {unit}, "
              f"u(b) = {num(cal.get('slope_standard_uncertainty'), 3)} per {unit}"),
             ("intercept a", f"{num(cal.get('intercept'), 4)}, u(a) = "
                             f"{num(cal.get('intercept_standard_uncertainty'), 3)} (absorbance)"),
             ("residual standard deviation s",
              f"{num(cal.get('residual_standard_deviation'), 3)} (absorbance)"),
             ("coefficient of determination r²", num(cal.get("r_squared"), 6)),
             ("points n, degrees of freedom", f"{cal.get('n', DASH)}, {cal.get('dof', DASH)}"),
             ("concentration unit", unit or DASH)]
    out = [para("Absorbance A = a + b c, fitted by ordinary least squares to every reading of the "
                "standards (and of the blanks, when they enter the fit).", "lead"),
           key_value_table(facts, (58, 116)),
           figure_block(figures.calibration_figure(cal),
                        "Figure: calibration line with its standards and the samples' mean "
                        "readings placed on the line. The shaded band is the 95 % prediction "
                        "interval of one new reading, t(n-2) s sqrt(1 + 1/n + (c - c_m)²/Sxx), "
                        "c_m the mean concentration of the points (Draper and Smith, Applied "
                        "Regression Analysis, 3rd ed., 1998, section 3.1). Below: residuals, "
                        "reading minus line, with the same band drawn about zero.")]
    samples = cal.get("samples") or []
    if record.get("traceability"):  # every reading, with its series, is in the annex: said once
        return out + [para("Every reading of the standards, blanks and samples, with its series: section "
                           "Annex: traceability to the raw data.", "small")]
    if samples:
        places = reading_decimals(cal)
        rows = []
        for smp in samples:
            readings = [r for r in smp.get("readings", []) if is_number(r)]
            mean = sum(readings) / len(readings) if readings else None
            rows.append([smp.get("id", ""), ", ".join(f"{r:.{places}f}" for r in readings) or DASH,
                         len(readings), f"{mean:.{places + 1}f}" if mean is not None else DASH])
        out += [heading("Sample readings", 2),
                data_table(["sample", "absorbance readings", "n", "mean absorbance"], rows,
                           [45, 85, 14, 30], numeric={2, 3})]
    return out
