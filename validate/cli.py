"""The `validate` command: parses arguments, calls validate.api, prints. No computation here."""

from __future__ import annotations

import argparse
import shutil
import sys
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from validate import __version__, api
from validate.inputs.errors import InputError
from validate.model import ModelError
from validate.propagation.budget import grouped, round_gum

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
    chk = sub.add_parser("check", help="read and check a method file only")
    chk.add_argument("method")
    init = sub.add_parser("init", help="write a commented starter method file and readings table")
    init.add_argument("folder")
    return p


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    console = Console(highlight=False)
    errors = Console(stderr=True, highlight=False)
    try:
        return {"run": _run, "check": _check, "init": _init}[args.command](args, console)
    except InputError as exc:
        errors.print(f"[bold red]input error[/] {escape(exc.message())}", soft_wrap=True)
        return EXIT_INPUT
    except ModelError as exc:
        errors.print(f"[bold red]no result[/] {escape(str(exc))}", soft_wrap=True)
        return EXIT_DATA


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
    console.print(f"read {', '.join(method.input_files)}: {len(method.items)} equipment items, "
                  f"{len(method.solutions)} solutions, {len(method.samples)} samples, "
                  f"{len(model.sources)} uncertainty sources")
    _print_defaults(console, method)
    console.print("[green]the method file is complete and consistent[/]")
    return 0


def _run(args, console: Console) -> int:
    run = api.analyse(args.method)
    written = api.write_outputs(run, args.out, overwrite=args.overwrite)
    method = run.method
    console.print(f"[bold]{escape(method.title)}[/]")
    _print_defaults(console, method)
    table = Table(title="Results (GUM law of propagation)", show_lines=False)
    for col in ("result", "value", "U", "k", "p", "nu_eff"):
        table.add_column(col, justify="left" if col == "result" else "right")
    for r in run.results:
        value, U = round_gum(r.value, r.expanded_uncertainty)
        nu = "inf" if r.effective_dof == float("inf") else f"{r.effective_dof:.0f}"
        table.add_row(r.name, f"{value} {r.unit}", f"{U} {r.unit}", f"{r.coverage_factor:.2f}",
                      f"{r.coverage_probability:.2f}", nu)
    console.print(table)
    for r in run.results:
        console.print(f"[bold]{escape(r.name)}[/]: largest sources of uncertainty")
        for row in r.contributions[: args.top]:
            console.print(f"  {row.share:6.1%}  {escape(row.source)}  [dim](step: {escape(row.step or '-')})[/]")
        steps = grouped(r, "step")[:3]
        console.print("  by step: " + ", ".join(f"{g.group} {g.share:.0%}" for g in steps))
    console.print("wrote " + ", ".join(str(p) for p in written))
    return 0


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
