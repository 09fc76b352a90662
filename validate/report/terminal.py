"""What the `validate` commands print, as Lines of rich console markup.

The command line only prints what these functions return. `validate run` is rendered from the
record dict (the form results.json holds), `validate verify` from the verification report's
dict, `validate calibrate` from the quick check's dict; numbers are written by
validate.report.numbers.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from rich.console import Console
from rich.markup import escape

from validate.report.numbers import MISSING, compact, gum_pair
from validate.report.terminal_run import (
    BLANK,
    Line,
    Printable,
    addition_lines,
    advice_lines,
    equilibrium_lines,
    method_uncertainty_lines,
    p_after,
    result_lines,
    verdict_headline,
    verdict_lines,
)
from validate.report.terminal_validation import criteria_lines, second_order_lines, second_order_text, validation_lines

__all__ = ["BLANK", "Line", "Printable", "ProgressBars", "check_facts", "check_lines", "describe_verify",
           "error_line", "format_quick_check", "init_lines", "interrupted_line", "quick_check_lines",
           "run_lines", "verdict_lines", "written_lines"]


# --------------------------------------------------------------------------
# validate check / run / init

def _defaults_lines(defaults: list[str], notes: list[str]) -> list[Printable]:
    lines: list[Printable] = []
    if defaults:
        lines.append(Line("[bold]Defaults applied[/] (set them in the method file to change them):"))
        lines += [Line(f"  - {escape(text)}", soft_wrap=True) for text in defaults]
    lines += [Line(f"[yellow]note[/] {escape(note)}", soft_wrap=True) for note in notes]
    return lines


def check_facts(method, model) -> dict:
    """What `validate check` reports of a method file and its model, as a plain dict."""
    if method.equilibrium is not None:
        study = method.equilibrium
        contents = (f"{len(study.standards)} standards, {len(study.mixtures)} mixtures, "
                    f"{len(study.series)} addition series")
    else:
        contents = f"{len(method.samples)} samples"
        if method.additions:
            contents += f", {len(method.additions)} by standard addition"
    return {"title": method.title, "input_files": [str(p) for p in method.input_files],
            "equipment_items": len(method.items), "solutions": len(method.solutions), "contents": contents,
            "sources": len(model.sources), "defaults_applied": list(method.defaults_shown),
            "notes": list(method.notes), "left_out": dict(getattr(model, "excluded", None) or {})}


def check_lines(facts: dict) -> list[Printable]:
    """The method file read and checked: what it holds and every default applied."""
    return [Line(f"[bold]{escape(facts['title'])}[/]"),
            Line(escape(f"read {', '.join(facts['input_files'])}: {facts['equipment_items']} equipment items, "
                        f"{facts['solutions']} solutions, {facts['contents']}, {facts['sources']} uncertainty "
                        "sources")),
            *_defaults_lines(facts["defaults_applied"], facts["notes"]),
            *[Line(escape(f"point {p} will be left out of the combined K: {why}"), style="yellow")
              for p, why in facts.get("left_out", {}).items()],
            Line("[green]the method file is complete and consistent[/]")]


def _seed_lines(record: dict) -> list[Printable]:
    seed = (record.get("monte_carlo_settings") or {}).get("seed")
    if seed is None:
        return []
    return [Line(f"Monte Carlo: JCGM 101, seed {seed} (repeat with --seed {seed})", style="dim")]


def run_lines(record: dict, top: int) -> list[Printable]:
    """Everything `validate run` prints about a record, `top` budget lines per result."""
    lines = [*verdict_headline(record.get("verdict")),
             Line(f"[bold]{escape(record['method']['title'])}[/]"),
             *_defaults_lines(record.get("defaults_applied") or [], record.get("notes") or []),
             *_seed_lines(record)]
    validation = record.get("validation")
    if validation:
        lines += validation_lines(validation)
    lines += second_order_lines((record.get("calibration") or {}).get("second_order"),
                                (validation or {}).get("concentration_unit", ""))
    if record.get("equilibrium"):
        lines += equilibrium_lines(record, top)
    else:
        for result in record["results"]:
            lines += result_lines(record, result, top)
    if validation:
        lines += criteria_lines(validation["criteria"], validation.get("concentration_unit") or "")
    lines += addition_lines(record.get("standard_additions"))
    lines += method_uncertainty_lines(record.get("method_uncertainty"))
    return lines + advice_lines(record.get("advice"))


def written_lines(paths) -> list[Printable]:
    return [Line(escape("wrote " + ", ".join(str(p) for p in paths)))]


def init_lines(folder: Path) -> list[Printable]:
    method = folder / "method.toml"
    return [Line(escape(f"wrote {method} and {folder / 'readings.csv'}; edit them, then run "
                        f"`validate check {method}`"))]


def error_line(kind: str, message: str) -> Line:
    """An error for stderr: `kind` in bold red ("input error", "no result"), then the message."""
    return Line(f"[bold red]{escape(kind)}[/] {escape(message)}", soft_wrap=True)


def interrupted_line(replaced: bool = False) -> Line:
    """`replaced`: the interruption came after the new record was swapped into place."""
    if replaced:
        return Line("interrupted after the new record was complete and in place")
    return Line("interrupted: no record was written or changed (a record is moved into place only when complete)")


# --------------------------------------------------------------------------
# validate verify

def _input_state(check: dict) -> str:
    if check["matches"]:
        return "unchanged"
    return "MISSING" if check["stored_sha256"] is None else "CHANGED (SHA-256 differs from the record)"


def _rerun_lines(report: dict, limit: int) -> list[str]:
    how = (f"{report['trials']} Monte Carlo trials, seed {report['seed']}" if report["trials"]
           else "linear engine only")
    tolerance = f"relative tolerance {report['relative_tolerance']:g}"
    mismatches = report["mismatches"]
    if report["rerun_error"]:
        return [f"  re-run from the stored copies ({how}) failed: {report['rerun_error']}"]
    if not mismatches:
        exact = "bit for bit" if report["identical"] else tolerance
        return [f"  re-run from the stored copies ({how}): the whole record reproduced "
                f"({report['numbers_compared']} numbers, {exact})"]
    lines = [f"  re-run from the stored copies ({how}): {len(mismatches)} of the record's values differ "
             f"({report['numbers_compared']} numbers compared, {tolerance})"]
    lines += [f"    {m['path']}: recorded {m['recorded']!r}, now {m['recomputed']!r}" for m in mismatches[:limit]]
    if len(mismatches) > limit:
        lines.append(f"    ... and {len(mismatches) - limit} more")
    return lines


def _file_lines(report: dict, limit: int) -> list[str]:
    """The folder's files against manifest.json, the content hash and budget.csv."""
    if not report["has_manifest"]:
        lines = ["  manifest.json: MISSING (the files of the folder cannot be checked)"]
    else:
        files = report["files"]
        odd = [f for f in files if f["state"] != "unchanged"]
        lines = [f"  files: {len(files) - len(odd)} of {len(files)} match manifest.json"]
        lines += [f"    {f['path']}: {f['state'].upper()}" for f in odd[:limit]]
    recorded, now = report["recorded_content_hash"], report["content_hash"]
    state = "matches manifest.json" if recorded == now else f"DIFFERS from manifest.json ({recorded or 'none'})"
    lines.append(f"  content hash {now}: {state}")
    lines.append("  budget.csv: " + ("as the record's budget gives it" if report["budget_file_matches"] else
                                     "DIFFERS from the record's budget (or is missing)"))
    return lines


def describe_verify(report: dict, limit: int = 20) -> list[str]:
    """Plain-words lines of a verification (VerifyReport.to_dict()): the folder's files, each input,
    the re-run, the first `limit` mismatches, the verdict."""
    lines = [f"record {report['record_id'] or '(no id)'} in {report['folder']}, written by validate "
             f"{report['recorded_version'] or '(unknown version)'}, re-run with {report['current_version']}"]
    lines += _file_lines(report, limit)
    lines += [f"  input {check['stored']}: {_input_state(check)}" for check in report["inputs"]]
    lines += _rerun_lines(report, limit)
    lines.append("verified: every file as written and the record reproduces from its stored inputs"
                 if report["passed"] else "NOT verified: see above")
    return lines


def verify_lines(report: dict) -> list[Printable]:
    return [Line(escape(text), soft_wrap=True) for text in describe_verify(report)]


# --------------------------------------------------------------------------
# validate calibrate

class _Sources:
    """Citations gathered as numbered notes, printed once in a block at the end."""

    def __init__(self) -> None:
        self.texts: list[str] = []

    def mark(self, text: str | None) -> str:
        if not text:
            return ""
        if text not in self.texts:
            self.texts.append(text)
        return f" [{self.texts.index(text) + 1}]"

    def block(self) -> list[str]:
        return ["", "Sources"] + [f"  [{i}] {t}" for i, t in enumerate(self.texts, 1)] if self.texts else []


def _units(result: dict) -> tuple[str, str]:
    """(concentration unit, 'per unit' text) from the table's header; a hint where it gives none."""
    unit = (result.get("units") or {}).get("concentration") or ""
    return unit, (f"per {unit}" if unit else "per concentration unit")


def _fit_text(result: dict) -> list[str]:
    unit, per = _units(result)
    shown = unit or "the table's unit (none in the header; write e.g. 'concentration (mg/L)')"
    return [f"Calibration check: {result['file']}",
            f"  {result['n']} readings at {result['distinct_concentrations']} concentrations, "
            f"{result['dof']} degrees of freedom; concentrations in {shown}, readings in absorbance",
            "", "Straight-line fit (ordinary least squares), standard uncertainties u",
            f"  slope       {compact(result['slope'], 6)} {per}, u = "
            f"{compact(result['slope_standard_uncertainty'], 3)} {per}",
            f"  intercept   {compact(result['intercept'], 6)} (absorbance), u = "
            f"{compact(result['intercept_standard_uncertainty'], 3)}",
            f"  residual SD {compact(result['residual_standard_deviation'], 6)} (absorbance)",
            f"  r^2         {compact(result['r_squared'], 8)}"]


def _linearity_text(result: dict, sources: _Sources) -> list[str]:
    out = ["", "Linearity"]
    for test in result["linearity"].values():
        head = f"  {test['name']}{sources.mark(test.get('source'))}: "
        if test["evaluable"]:
            head += f"statistic {compact(test['statistic'], 4)}"
            if test["p_value"] is not None:
                head += f", p {p_after(test['p_value'])}"
        out += [head, f"    {test['verdict']}"]
    return out


def _limits_text(result: dict, sources: _Sources) -> list[str]:
    limits = result["limits"]
    unit = _units(result)[0]
    out = ["", f"Detection and quantitation limits{f' in {unit}' if unit else ''} "
               f"(declared route: {limits['declared_route']}){sources.mark(result['limit_source'])}"]
    out += [f"  {r['route']:<18} LOD {compact(r['lod'], 4):<10} LOQ {compact(r['loq'], 4)}"
            f"{sources.mark(r.get('source')) if r['route'] != limits['declared_route'] else ''}"
            for r in limits["routes"]]
    iso = limits["iso11843"]
    out.append(f"  ISO 11843-2 critical value x_C {compact(iso['critical_value'], 4)}, minimum "
               f"detectable value x_D {compact(iso['minimum_detectable_value'], 4)}{f' {unit}' if unit else ''} "
               f"(alpha {iso['alpha']:g}, beta {iso['beta']:g})")
    return out + [f"  warning: {w}" for w in limits["warnings"]]


def _sample_line(i: int, s: dict, unit: str) -> str:
    value, big_u = gum_pair(s["concentration"], s.get("expanded_uncertainty"), missing=MISSING)
    flags = f"  [{'; '.join(s['flags'])}]" if s["flags"] else ""
    k = s.get("coverage_factor")
    expanded = (f"{value} ± {big_u}{f' {unit}' if unit else ''} (U = k u, k = {k:.2f}, "
                f"{100 * s['coverage_probability']:g} %)") if k is not None else compact(s["concentration"], 6)
    return (f"  sample {i}: {s['replicates']} reading(s), mean absorbance {compact(s['response_mean'], 5)} -> "
            f"{expanded}; u = {compact(s['standard_uncertainty'], 3)}, {s['dof']} degrees of freedom{flags}")


def _samples_text(result: dict, sources: _Sources) -> list[str]:
    samples = result.get("sample", [])
    if not samples:
        return []
    unit = _units(result)[0]
    curve = "the second-order function" if result.get("second_order") else "the line"
    out = ["", f"Samples: concentration read off {curve}, observed-scatter uncertainty"
               f"{sources.mark(samples[0].get('source'))}"]
    return out + [_sample_line(i, s, unit) for i, s in enumerate(samples, 1)]


def _notes_text(result: dict) -> list[str]:
    extra = result["flagged_points"] + result["notes"]
    if result["readings_outside_absorbance_window"]:
        lo, hi = result["absorbance_window"]
        extra.append(f"{result['readings_outside_absorbance_window']} reading(s) outside the "
                     f"absorbance window {lo:g} to {hi:g} (common practice)")
    return ["", "Notes"] + [f"  - {e}" for e in extra] if extra else []


def format_quick_check(result: dict) -> str:
    """Plain text of a quick check of a calibration table (the dict quick_check returns): every
    figure with its unit, each sample with U and k, the citations as numbered notes at the end."""
    sources = _Sources()
    out = (_fit_text(result) + _linearity_text(result, sources) + _limits_text(result, sources)
           + second_order_text(result) + _samples_text(result, sources) + _notes_text(result))
    return "\n".join(out + sources.block()) + "\n"


def quick_check_lines(result: dict) -> list[Printable]:
    return [Line(escape(format_quick_check(result)), soft_wrap=True)]


# --------------------------------------------------------------------------
# progress of a Monte Carlo run

class ProgressBars:
    """A rich progress bar for each Monte Carlo evaluation; `stop()` ends those still running
    (an adaptive run may end before its expected number of trials)."""

    def __init__(self, console: Console):
        self.console = console
        self.bars: list = []

    def __call__(self, total: int) -> Callable[[int], None]:
        from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn
        bar = Progress(TextColumn("Monte Carlo"), BarColumn(), TextColumn("{task.percentage:>3.0f}%"),
                       TimeRemainingColumn(), console=self.console, transient=True)
        task = bar.add_task("trials", total=total)
        bar.start()
        self.bars.append(bar)

        def advance(n: int) -> None:
            bar.advance(task, n)
        return advance

    def stop(self) -> None:
        for bar in self.bars:
            bar.stop()
