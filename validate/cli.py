"""The `validate` command: arguments in, exit codes out. The work is done by validate.workflow and
what is printed is rendered by validate.report.terminal."""

from __future__ import annotations

import argparse
import shutil
import sys
from pathlib import Path

from rich.console import Console

from validate import __version__
from validate.inputs.errors import InputError
from validate.model.assay import ModelError
from validate.report import terminal
from validate.workflow import pipeline as api

EXIT_INPUT = 2
EXIT_DATA = 3
EXIT_NOT_FIT = 4  # `run --strict`: the record was written, but the verdict is not "fit"


class _ShowVersion(argparse.Action):
    """--version: the version and the folder the package runs from, so a foreign module named
    `validate` found first on the path is seen at once (README). Printed as is: argparse's own
    version action would re-wrap a long path."""

    def __init__(self, option_strings, dest, **kwargs):
        super().__init__(option_strings, dest, nargs=0, help="show the version and the package folder, then exit")

    def __call__(self, parser, namespace, values, option_string=None):
        print(f"validate {__version__}\npackage folder: {Path(__file__).resolve().parent}")
        parser.exit()


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="validate", description=(
        "Uncertainty budgets and method-validation records for photometric methods."))
    p.add_argument("--version", action=_ShowVersion)
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
    run.add_argument("--strict", action="store_true",
                     help="exit with 4 when the verdict is not 'fit for the stated purpose' (the record is "
                          "still written)")
    run.add_argument("--seed", type=int, default=None,
                     help="random seed for Monte Carlo (default: a new one, recorded in the results)")
    chk = sub.add_parser("check", help="read and check a method file only")
    chk.add_argument("method")
    init = sub.add_parser("init", help="write a commented starter method file and readings table")
    init.add_argument("folder")
    init.add_argument("--equilibrium", action="store_true",
                      help="a starter for a 1:1 complex-formation study instead of an assay")
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


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    console = Console(highlight=False)
    errors = Console(stderr=True, highlight=False)
    try:
        return {"run": _run, "check": _check, "init": _init, "calibrate": _calibrate,
                "verify": _verify}[args.command](args, console)
    except InputError as exc:
        _show(errors, [terminal.error_line("input error", exc.message())])
        return EXIT_INPUT
    except ModelError as exc:
        _show(errors, [terminal.error_line("no result", str(exc))])
        return EXIT_DATA
    except KeyboardInterrupt:
        _show(errors, [terminal.interrupted_line()])
        return 130
    except BrokenPipeError:  # output piped into a program that stopped reading (e.g. head)
        sys.stderr.close()
        return 0


def _show(console: Console, lines: list[terminal.Printable]) -> None:
    for item in lines:
        if isinstance(item, terminal.Line):
            console.print(item.text, soft_wrap=item.soft_wrap, style=item.style)
        else:
            console.print(item)


def _check(args, console: Console) -> int:
    method, model = api.check(args.method)
    _show(console, terminal.check_lines(terminal.check_facts(method, model)))
    return 0


def _run(args, console: Console) -> int:
    api.check_output_folder(args.out, args.overwrite)
    progress = terminal.ProgressBars(console) if console.is_terminal else None  # not into a file or pipe
    try:
        run = api.analyse(args.method, trials=args.trials or None, seed=args.seed,
                          progress_factory=progress, advice=not args.no_advice)
    finally:
        if progress is not None:
            progress.stop()
    written = api.write_outputs(run, args.out, overwrite=args.overwrite, pdf=not args.no_pdf)
    verdict = run.record.get("verdict")
    _show(console, terminal.run_lines(run.record, args.top) + terminal.written_lines(written)
          + terminal.verdict_lines(verdict))
    return _run_exit_code(verdict, args.strict)


def _run_exit_code(verdict: dict | None, strict: bool) -> int:
    """0 for a completed evaluation; with --strict, EXIT_NOT_FIT unless the verdict is "fit"."""
    if strict and (verdict is None or verdict["status"] != "fit"):
        return EXIT_NOT_FIT
    return 0


def _verify(args, console: Console) -> int:
    from validate.workflow.verify import verify_record
    report = verify_record(args.folder)
    _show(console, terminal.verify_lines(report.to_dict()))
    return 0 if report.passed else 1


def _calibrate(args, console: Console) -> int:
    import json

    from validate.validation.quickcheck import quick_check
    result = quick_check(args.table, [args.sample] if args.sample else None)
    if not args.json:
        _show(console, terminal.quick_check_lines(result))
    elif args.sample:  # the --sample values are replicate readings of one unknown
        print(json.dumps({**result, "sample": result["sample"][0]}, indent=2))
    else:
        print(json.dumps(result, indent=2))
    return 0


def _starter_files(folder: Path, equilibrium: bool) -> dict[Path, Path]:
    """What `validate init` writes (target -> template): an assay, or with --equilibrium a study."""
    templates = Path(__file__).parent / "templates"
    method, readings = ("equilibrium.toml", "equilibrium_readings.csv") if equilibrium else \
        ("method.toml", "readings.csv")
    return {folder / "method.toml": templates / method, folder / "readings.csv": templates / readings}


def _init(args, console: Console) -> int:
    folder = Path(args.folder)
    targets = _starter_files(folder, args.equilibrium)
    clashes = [str(t) for t in targets if t.exists()]
    if clashes:
        raise InputError(f"would overwrite {', '.join(clashes)}", file=folder,
                         fix="choose an empty or new folder")
    folder.mkdir(parents=True, exist_ok=True)
    for target, source in targets.items():
        shutil.copyfile(source, target)
    _show(console, terminal.init_lines(folder))
    return 0


if __name__ == "__main__":
    sys.exit(main())
