"""The `validate` command: parses arguments, calls validate.workflow.pipeline, prints. No computation here."""

from __future__ import annotations

import argparse
import shutil
import sys
from pathlib import Path

from rich.console import Console
from rich.markup import escape

from validate import __version__
from validate.inputs.errors import InputError
from validate.model.assay import ModelError
from validate.propagation.budget import grouped, round_gum
from validate.workflow import pipeline as api

EXIT_INPUT = 2
EXIT_DATA = 3


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="validate", description=(
        "Uncertainty budgets and method-validation records for photometric methods."))
    p.add_argument("--version", action="version", version=f"validate {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    run = sub.add_parser("run", help="evaluate a method file and write the record")
    run.add_argument("method", help="the method file (TOML)")
    run.add_argument("--out", required=True, help="folder for results.json and budget.csv")
    run.add_argument("--overwrite", action="store_true", help="replace a record already in --out")
    run.add_argument("--top", type=int, default=5, help="how many budget lines to print (default 5)")
    run.add_argument("--trials", default="1000000", type=_trials,
                     help="Monte Carlo trials: a number, 'auto' (JCGM 101 7.9 adaptive) or 0 to skip "
                          "(default 1000000)")
    run.add_argument("--no-advice", action="store_true", help="skip the what-if advisor")
    run.add_argument("--no-pdf", action="store_true", help="do not write report.pdf")
    run.add_argument("--seed", type=int, default=None,
                     help="random seed for Monte Carlo (default: a new one, recorded in the results)")
    chk = sub.add_parser("check", help="read and check a method file only")
    chk.add_argument("method")
    init = sub.add_parser("init", help="write a commented starter method file and readings table")
    init.add_argument("folder")
    ver = sub.add_parser("verify", help="re-check a record: inputs unchanged and every number reproduced")
    ver.add_argument("folder", help="the folder a `validate run --out` wrote")
    cal = sub.add_parser("calibrate", help="quick check of a calibration table (CSV: concentration,absorbance)")
    cal.add_argument("table", help="CSV with columns concentration and absorbance, one row per reading")
    cal.add_argument("--sample", action="append", type=float, default=[], metavar="A",
                     help="one reading of the unknown; repeat for replicate readings")
    cal.add_argument("--json", action="store_true", help="print the result as JSON")
    return p


def _trials(text: str):
    if text == "auto":
        return "auto"
    try:
        value = int(float(text))
    except ValueError:
        raise argparse.ArgumentTypeError("give a whole number of trials or 'auto'") from None
    if value < 0 or (0 < value < 1000):
        raise argparse.ArgumentTypeError("give 0 (no Monte Carlo), at least 1000 trials, or 'auto'")
    return value


def _progress_factory(console: Console):
    """A rich progress bar on a terminal; nothing when output goes to a file or pipe."""
    if not console.is_terminal:
        return None

    def factory(total):
        from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn
        bar = Progress(TextColumn("Monte Carlo"), BarColumn(), TextColumn("{task.percentage:>3.0f}%"),
                       TimeRemainingColumn(), console=console, transient=True)
        task = bar.add_task("trials", total=total)
        bar.start()
        factory.bars.append(bar)  # stopped by the caller: an adaptive run may end before `total`

        def advance(n):
            bar.advance(task, n)
        return advance

    factory.bars = []
    return factory


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    console = Console(highlight=False)
    errors = Console(stderr=True, highlight=False)
    try:
        return {"run": _run, "check": _check, "init": _init, "calibrate": _calibrate,
                "verify": _verify}[args.command](args, console)
    except InputError as exc:
        errors.print(f"[bold red]input error[/] {escape(exc.message())}", soft_wrap=True)
        return EXIT_INPUT
    except ModelError as exc:
        errors.print(f"[bold red]no result[/] {escape(str(exc))}", soft_wrap=True)
        return EXIT_DATA
    except KeyboardInterrupt:
        errors.print("interrupted: no record was written or changed (files are moved into place only "
                     "when complete)")
        return 130
    except BrokenPipeError:  # output piped into a program that stopped reading (e.g. head)
        sys.stderr.close()
        return 0


def _print_defaults(console: Console, method) -> None:
    if method.defaults_shown:
        console.print("[bold]Defaults applied[/] (set them in the method file to change them):")
        for line in method.defaults_shown:
            console.print(f"  - {escape(line)}", soft_wrap=True)
    for note in method.notes:
        console.print(f"[yellow]note[/] {escape(note)}", soft_wrap=True)


def _check(args, console: Console) -> int:
    method, model = api.check(args.method)
    console.print(f"[bold]{escape(method.title)}[/]")
    if method.equilibrium is not None:
        study = method.equilibrium
        contents = (f"{len(study.standards)} standards, {len(study.mixtures)} mixtures, "
                    f"{len(study.series)} addition series")
    else:
        contents = f"{len(method.samples)} samples"
    console.print(f"read {', '.join(method.input_files)}: {len(method.items)} equipment items, "
                  f"{len(method.solutions)} solutions, {contents}, {len(model.sources)} uncertainty sources")
    _print_defaults(console, method)
    console.print("[green]the method file is complete and consistent[/]")
    return 0


def _run(args, console: Console) -> int:
    api.check_output_folder(args.out, args.overwrite)
    progress = _progress_factory(console)
    try:
        run = api.analyse(args.method, trials=args.trials or None, seed=args.seed,
                          progress_factory=progress, advice=not args.no_advice)
    finally:
        for bar in getattr(progress, "bars", []):
            bar.stop()
    written = api.write_outputs(run, args.out, overwrite=args.overwrite, pdf=not args.no_pdf)
    method = run.method
    console.print(f"[bold]{escape(method.title)}[/]")
    _print_defaults(console, method)
    if run.monte_carlo:
        console.print(f"Monte Carlo: JCGM 101, seed {run.seed} (repeat with --seed {run.seed})", style="dim")
    if run.record.get("validation"):
        _print_validation(console, run.record["validation"])
    if run.record.get("equilibrium"):
        _print_equilibrium(console, run, args.top)
        _print_advice(console, run.record.get("advice"))
        console.print("wrote " + ", ".join(str(p) for p in written))
        return 0
    for index, r in enumerate(run.results):
        mc = run.monte_carlo[index] if run.monte_carlo else None
        _print_result(console, r, mc, args.top, run.record["results"][index].get("flags", []))
    if run.record.get("validation"):
        _print_criteria(console, run.record["validation"]["criteria"])
    _print_advice(console, run.record.get("advice"))
    console.print("wrote " + ", ".join(str(p) for p in written))
    return 0


def _print_equilibrium(console: Console, run, top: int) -> None:
    from rich.table import Table

    e = run.record["equilibrium"]
    unit, cu = escape(e["k_unit"]), escape(e["concentration_unit"])
    cond = e["conditions"]
    console.print()
    console.print(f"[bold]Formation constant K of ML (1:1)[/], in {unit}; conditional on "
                  f"{_g(cond['temperature_C'])} degC, I = {_g(cond['ionic_strength_mol_per_L'])} mol/L")
    table = Table(show_edge=False, pad_edge=False)
    for col in ("point", f"[M]0 {cu}", f"[L]0 {cu}", "K", "U", "Monte Carlo 95 %"):
        table.add_column(col, justify="left" if col == "point" else "right")
    for p in e["mixtures"]:
        value, U = round_gum(p["K"], p["expanded_uncertainty"])
        interval = f"[{p['interval'][0]:.4g}, {p['interval'][1]:.4g}]" if p["interval"] else "-"
        table.add_row(p["id"], f"{p['M_total']:.4g}", f"{p['L_total']:.4g}", value, U, interval)
    console.print(table)
    flagged = [p for p in e["mixtures"] if p.get("saturation_flag")]
    for p in flagged:
        console.print(f"  [yellow]note[/] {escape(p['id'])}: {escape(p['saturation_flag'])}", soft_wrap=True)
    from validate.model.keys import ResultKey
    by_key = dict(zip(run.model.result_keys, zip(run.results, run.monte_carlo or [None] * len(run.results),
                                                 strict=True), strict=True))
    for key in (ResultKey("combined K"), ResultKey("log10 K")):
        r, mc = by_key[key]
        _print_result(console, r, mc, top if key.kind == "combined K" else 0)
    c = e["combined"]
    if c.get("consistency"):
        k = c["consistency"]
        console.print(f"  consistency: chi-square {k['chi_square']:.2f} on {k['dof']} dof, p = {k['p_value']:.2g}, "
                      f"Birge ratio {k['birge_ratio']:.2f}: {escape(k['verdict'])}", soft_wrap=True)
    if any(w < 0 for w in c["weights"]):
        console.print("  note: some generalised-least-squares weights are negative (strongly correlated K values)",
                      style="dim")
    if "trend" in e and "message" in e["trend"]:
        console.print(f"  trend with {escape(e['trend']['against'])}: {escape(e['trend']['message'])} "
                      f"(p = {e['trend']['p_value']:.2g})", soft_wrap=True)
    b = e["complete_complexation_bias"]
    console.print(f"  taking the standards as fully complexed would bias the slope by {b['slope']:+.1%} and K by "
                  f"{b['K']:+.1%} (naive K = {b['naive_K']:.4g} {unit}); fraction complexed in the standards "
                  f"{min(b['fraction_complexed_in_standards']):.3f} to {max(b['fraction_complexed_in_standards']):.3f}",
                  soft_wrap=True)
    if not b["iteration_converged"]:
        console.print("  [yellow]warning[/] the correction of the standards did not converge: see the joint fit",
                      soft_wrap=True)
    j = e.get("joint_fit", {})
    if "K" in j:
        console.print(f"  cross-check, joint nonlinear fit: K = {j['K']:.4g} ± {j['standard_uncertainty']:.2g} "
                      f"{unit} (standard uncertainty)")
    if "activity_estimate" in e:
        a = e["activity_estimate"]
        console.print(f"  activity estimate (Davies, an estimate): K at zero ionic strength about "
                      f"{a['K_thermodynamic']['value'] if isinstance(a['K_thermodynamic'], dict) else a['K_thermodynamic']:.4g} {unit}",
                      soft_wrap=True)


def _print_advice(console: Console, advice: dict | None) -> None:
    if not advice:
        return
    quantified = [a for a in advice["items"] if a["expanded_uncertainty_after"] is not None]
    console.print()
    relative = advice["unit"].startswith("relative")
    fmt = (lambda v: f"{100 * v:.2f} %") if relative else (lambda v: f"{v:.3g} {advice['unit']}")
    console.print(f"[bold]What to improve first[/] (judged by {escape(advice['target'])}: now "
                  f"{fmt(advice['expanded_uncertainty_before'])})")
    if not quantified:
        console.print("  no change among those tried lowers the expanded uncertainty noticeably")
    for a in quantified[:3]:
        console.print(f"  -{a['reduction']:.0%}  {escape(a['change'])} -> {fmt(a['expanded_uncertainty_after'])}"
                      f"  [dim]({escape(a['cost'])})[/]", soft_wrap=True)
    if advice.get("combined"):
        c = advice["combined"]
        console.print(f"  together: -{c['reduction']:.0%} -> {fmt(c['expanded_uncertainty_after'])}", soft_wrap=True)


def _g(value, digits=4) -> str:
    return "n/a" if value is None else f"{value:.{digits}g}"


def _print_validation(console: Console, v: dict) -> None:
    fit, unit = v["fit"], escape(v["concentration_unit"])
    console.print()
    what = "Line of the standards" if v.get("samples") == {} and v.get("trueness") is None and \
        v.get("scatter_consistency") is None else "Calibration line"
    console.print(f"[bold]{what}[/] ({fit['n']} readings, absorbance against {unit})")
    console.print(f"  slope {_g(fit['slope'])} ± {_g(fit['slope_u'], 2)} per {unit}, intercept "
                  f"{_g(fit['intercept'])} ± {_g(fit['intercept_u'], 2)}, r² {fit['r_squared']:.5f}, "
                  f"residual SD {_g(fit['residual_sd'], 3)}")
    for key in ("lack_of_fit", "mandel", "runs", "intercept", "weighting"):
        test = v[key]
        p = f" (p = {test['p_value']:.2g})" if test.get("p_value") is not None else ""
        console.print(f"  {escape(test['name'])}{p}: {escape(test['verdict'])}", soft_wrap=True)
    limits = v["limits"]
    console.print(f"  LOD {_g(limits['lod'], 3)} {unit}, LOQ {_g(limits['loq'], 3)} {unit} "
                  f"(declared route: {escape(limits['declared_route'])}); all routes: " +
                  "; ".join(f"{escape(r['route'])} {_g(r['lod'], 3)}/{_g(r['loq'], 3)}" for r in limits["routes"]),
                  soft_wrap=True)
    for warning in limits["warnings"]:
        console.print(f"  [yellow]warning[/] {escape(warning)}", soft_wrap=True)
    sc = v.get("scatter_consistency")
    if sc:
        console.print(f"  scatter against the bottom-up budget: {escape(sc['verdict'])} "
                      f"(observed SD {_g(sc['observed_sd'], 3)}, predicted {_g(sc['predicted_sd'], 3)})",
                      soft_wrap=True)
    window = v["window_flags"]
    if window.get("outside"):
        console.print(f"  [yellow]note[/] {window['outside']} reading(s) outside the absorbance window "
                      f"{window['low']:g} to {window['high']:g} (common practice)")
    for sample, ip in (v.get("intermediate_precision") or {}).items():
        if "intermediate_sd" in ip:
            console.print(f"  intermediate precision of {escape(sample)} over {ip['groups']} series: s_I "
                          f"{_g(ip['intermediate_sd'], 3)} {escape(ip['unit'])} (s_r {_g(ip['repeatability_sd'], 3)}): "
                          f"{escape(ip['verdict'])}", soft_wrap=True)
    if v.get("trueness"):
        t = v["trueness"]
        console.print(f"  trueness: recovery {t['recovery_percent']:.1f} %, E_n = {t['en_number']:.2f}: "
                      f"{escape(t['verdict'])}", soft_wrap=True)


def _print_criteria(console: Console, criteria: dict) -> None:
    console.print()
    rows = criteria["criteria"]
    counts = {status: sum(1 for c in rows if c["status"] == status)
              for status in ("met", "not met", "not set", "not evaluable")}
    head = ", ".join(f"{n} {status}" for status, n in counts.items() if n)
    console.print(f"[bold]Acceptance criteria[/]: {head}")
    for c in rows:
        if c["status"] in ("met", "not met"):
            mark = "[green]met[/]" if c["met"] else "[red]NOT MET[/]"
            limit = c["limit"] if not isinstance(c["limit"], list) else f"{c['limit'][0]:g} to {c['limit'][1]:g}"
            default = " (default)" if c["is_default"] else ""
            console.print(f"  {mark}  {escape(c['name'])}: {_g(c['observed'])} {escape(c['comparison'])} "
                          f"{limit}{default}", soft_wrap=True)
    console.print(f"  [dim]{escape(criteria['caution'])}[/]", soft_wrap=True)


def _verify(args, console: Console) -> int:
    from validate.record.verify import describe
    from validate.workflow.verify import verify_record
    report = verify_record(args.folder)
    for line in describe(report):
        console.print(escape(line), soft_wrap=True)
    return 0 if report.passed else 1


def _calibrate(args, console: Console) -> int:
    import json

    from validate.validation.quickcheck import format_quick_check, quick_check
    result = quick_check(args.table, [args.sample] if args.sample else None)
    if args.sample:
        result["sample"] = result["sample"][0]  # the --sample values are replicate readings of one unknown
    if args.json:
        print(json.dumps(result, indent=2))
    else:
        text = format_quick_check({**result, "sample": [result["sample"]]} if args.sample else result)
        console.print(escape(text), soft_wrap=True)
    return 0


def _print_result(console: Console, r, mc, top: int, flags=()) -> None:
    value, U = round_gum(r.value, r.expanded_uncertainty)
    nu = "inf" if r.effective_dof == float("inf") else f"{r.effective_dof:.0f}"
    console.print()
    console.print(f"[bold]{escape(r.name)}[/]")
    for flag in flags:
        console.print(f"  [bold yellow]FLAG[/] {escape(flag)}: report with this flag, not as a plain number")
    console.print(f"  GUM          [bold]{value} ± {U} {escape(r.unit)}[/]  "
                  f"(k = {r.coverage_factor:.2f}, p = {r.coverage_probability:g}, nu_eff = {nu})")
    if mc is not None:
        s, v = mc.summary, mc.validation
        digits = len(value.split(".")[1]) + 1 if "." in value else 1
        fmt = lambda a, b: f"[{a:.{digits}f}, {b:.{digits}f}]"  # noqa: E731
        verdict = (f"[green]agrees[/] with Monte Carlo (ends within {v.delta:.1g})" if v.agrees else
                   f"[yellow]differs[/] from Monte Carlo (an end off by more than {v.delta:.1g})")
        console.print(f"  Monte Carlo  {fmt(s.symmetric.low, s.symmetric.high)}, shortest "
                      f"{fmt(s.shortest.low, s.shortest.high)}, {s.total_trials:,} trials")
        console.print(f"  GUM interval {fmt(v.gum_low, v.gum_high)} {verdict}, JCGM 101 clause 8")
        if mc.warning:
            console.print(f"  [yellow]warning[/] {escape(mc.warning)}", soft_wrap=True)
        elif s.invalid_trials:
            console.print(f"  note: {s.invalid_trials} trials gave no defined result")
    if top <= 0:
        return
    console.print("  largest sources of uncertainty:")
    for row in r.contributions[:top]:
        console.print(f"    {row.share:6.1%}  {escape(row.source)}  [dim]({escape(row.step or '-')})[/]")
    steps = grouped(r, "step")[:3]
    console.print("  by step: " + ", ".join(f"{escape(g.group)} {g.share:.0%}" for g in steps))


def _init(args, console: Console) -> int:
    folder = Path(args.folder)
    templates = Path(__file__).parent / "templates"
    targets = {folder / "method.toml": templates / "method.toml", folder / "readings.csv": templates / "readings.csv"}
    clashes = [str(t) for t in targets if t.exists()]
    if clashes:
        raise InputError(f"would overwrite {', '.join(clashes)}", file=folder,
                         fix="choose an empty or new folder")
    folder.mkdir(parents=True, exist_ok=True)
    for target, source in targets.items():
        shutil.copyfile(source, target)
    console.print(f"wrote {folder / 'method.toml'} and {folder / 'readings.csv'}; edit them, then run "
                  f"`validate check {folder / 'method.toml'}`")
    return 0


if __name__ == "__main__":
    sys.exit(main())
