"""The `validate` command: arguments in, exit codes out. The work is done by validate.workflow and
what is printed is rendered by validate.report.terminal."""

from __future__ import annotations

import argparse
import contextlib
import math
import shutil
import signal
import sys
from pathlib import Path
from typing import TYPE_CHECKING

from rich.console import Console

from validate import __version__
from validate.inputs.errors import InputError
from validate.inputs.run_limits import MAX_SEED, MAX_TRIALS, MIN_TRIALS
from validate.model.errors import ModelError  # the small module: no numerics for --help
from validate.report import terminal

if TYPE_CHECKING:
    from validate.workflow.pipeline import Run

# validate.workflow.pipeline (and with it numpy, scipy and the engines) is imported by the
# commands that need it, when they run: `validate --help` and `validate init` stay fast.

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
    run.add_argument("--out", required=True, type=_folder_name, help="folder for results.json and budget.csv")
    run.add_argument("--overwrite", action="store_true", help="replace a record already in --out")
    run.add_argument("--top", type=_top, default=5, help="how many budget lines to print (default 5)")
    run.add_argument("--trials", default="1000000", type=_trials,
                     help="Monte Carlo trials: a number, 'auto' (JCGM 101 7.9 adaptive) or 0 to skip "
                          "(default 1000000)")
    run.add_argument("--no-advice", action="store_true", help="skip the what-if advisor")
    run.add_argument("--no-pdf", action="store_true", help="do not write report.pdf")
    run.add_argument("--strict", action="store_true",
                     help="exit with 4 when the verdict is not 'fit for the stated purpose' (the record is "
                          "still written)")
    run.add_argument("--seed", type=_seed, default=None,
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
    cal.add_argument("--sample", action="append", type=_reading, default=[], metavar="A",
                     help="one reading of the unknown; repeat for replicate readings")
    cal.add_argument("--json", action="store_true", help="print the result as JSON")
    cal.add_argument("--function", default="straight line", choices=("straight line", "second order"),
                     help='calibration function: "straight line" (default) or "second order" '
                          "(y = a + b x + c x^2, ISO 8466-2)")
    return p


# Bounds of the numeric arguments: validate.inputs.run_limits (a filed record's re-run is held to them too).
MAX_TOP = 1000


def _trials(text: str):
    if text == "auto":
        return "auto"
    value = _whole_number(text, "trials", "give a whole number of trials or 'auto'")
    if value < 0 or (0 < value < MIN_TRIALS) or value > MAX_TRIALS:
        raise argparse.ArgumentTypeError(f"give 0 (no Monte Carlo), {MIN_TRIALS} to {MAX_TRIALS:,} trials, "
                                         f"or 'auto' (got {text})")
    return value


def _seed(text: str) -> int:
    value = _whole_number(text, "seed", "give a whole number as the seed")
    if not 0 <= value <= MAX_SEED:
        raise argparse.ArgumentTypeError(f"the seed must lie between 0 and {MAX_SEED} (got {text})")
    return value


def _top(text: str) -> int:
    value = _whole_number(text, "top", "give a whole number of budget lines")
    if not 0 <= value <= MAX_TOP:
        raise argparse.ArgumentTypeError(f"give 0 to {MAX_TOP} budget lines (got {text})")
    return value


# `calibrate` takes the table's response as it is (any instrument's signal, not only an
# absorbance), so a sample reading is bounded only in size: its square and the fit's sums
# must stay far inside the range of a double (about 1.8e308)
MAX_SAMPLE = 1e12


def _reading(text: str) -> float:
    """One reading of the unknown for `calibrate --sample`: a finite number of bounded size."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"give the reading as a number (got {text!r})") from None
    if not abs(value) <= MAX_SAMPLE:  # also refuses nan and inf
        raise argparse.ArgumentTypeError(f"a reading must be a finite number from {-MAX_SAMPLE:g} to "
                                         f"{MAX_SAMPLE:g} (got {text})")
    return value


def _folder_name(text: str) -> str:
    if not text.strip() or "\x00" in text:
        raise argparse.ArgumentTypeError(f"give the name of a folder (got {text!r})")
    return text


def _whole_number(text: str, name: str, fix: str) -> int:
    """An integer written as 1000, 1e6 or 1_000; refused when not finite or not whole."""
    try:
        number = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{fix} (got {text!r})") from None
    if not math.isfinite(number) or number != int(number):
        raise argparse.ArgumentTypeError(f"{fix} (got {text!r})")
    return int(number) if abs(number) < 2**53 else int(text) if text.lstrip("+-").isdigit() else int(number)


def _tolerant_streams() -> None:
    """A terminal or pipe that cannot show a character (an ASCII locale and a "µ") gets a
    replacement mark instead of a traceback after the record was written."""
    for stream in (sys.stdout, sys.stderr):
        reconfigure = getattr(stream, "reconfigure", None)
        if reconfigure is not None:
            reconfigure(errors="replace")


class Terminated(KeyboardInterrupt):
    """A termination signal (kill's default SIGTERM, a closed terminal's SIGHUP), handled as Ctrl-C:
    the staged record is removed and the message says what --out holds."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.exit_code = 128 + signum


def _terminate(signum, frame):
    raise Terminated(signum)


@contextlib.contextmanager
def _termination_as_interrupt():
    wanted = [getattr(signal, name) for name in ("SIGTERM", "SIGHUP") if hasattr(signal, name)]
    try:
        previous = {sig: signal.signal(sig, _terminate) for sig in wanted}
    except ValueError:  # not the main thread (an embedding program): leave its handlers alone
        previous = {}
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def _interrupt_code(exc: KeyboardInterrupt) -> int:
    return exc.exit_code if isinstance(exc, Terminated) else 130


def main(argv=None) -> int:
    _tolerant_streams()
    args = _parser().parse_args(argv)
    console = Console(highlight=False)
    errors = Console(stderr=True, highlight=False)
    try:
        with _termination_as_interrupt():
            return {"run": _run, "check": _check, "init": _init, "calibrate": _calibrate,
                    "verify": _verify}[args.command](args, console)
    except InputError as exc:
        _show(errors, [terminal.error_line(exc.kind, exc.message())])
        return EXIT_INPUT
    except ModelError as exc:
        _show(errors, [terminal.error_line("no result", str(exc))])
        return EXIT_DATA
    except KeyboardInterrupt as exc:
        _show(errors, [terminal.interrupted_line()])
        return _interrupt_code(exc)
    except BrokenPipeError:  # output piped into a program that stopped reading (e.g. head)
        sys.stderr.close()
        return 0


def _show(console: Console, lines: list[terminal.Printable]) -> None:
    """Print the lines; into a file or a pipe no line is broken at the console's width."""
    for item in lines:
        if isinstance(item, terminal.Line):
            console.print(item.text, soft_wrap=item.soft_wrap or not console.is_terminal, style=item.style)
        else:
            console.print(item)


def _check(args, console: Console) -> int:
    # what `pipeline.check` does, without importing the engines and the record for it
    from validate.inputs.method_file import load_method
    from validate.model.build import build

    method = load_method(args.method)
    model = build(method)
    _show(console, terminal.check_lines(terminal.check_facts(method, model)))
    return 0


def _run(args, console: Console) -> int:
    from validate.workflow import pipeline as api  # imported when needed (see the top)

    # --out is checked, locked and staged before any computation; the record is swapped into
    # place whole at the end, so --out holds the old or the new record at every instant
    target = api.open_output(args.out, args.overwrite, args.method)
    try:
        run = _analyse(args, console)
        written = api.write_record(run, target, pdf=not args.no_pdf)
    except KeyboardInterrupt as exc:
        _show(Console(stderr=True, highlight=False), [terminal.interrupted_line(replaced=target.committed)])
        return _interrupt_code(exc)
    finally:
        target.close()
    verdict = run.record.get("verdict")
    _show(console, terminal.run_lines(run.record, args.top) + terminal.written_lines(written)
          + terminal.verdict_lines(verdict))
    return _run_exit_code(verdict, args.strict)


def _analyse(args, console: Console) -> Run:
    from validate.workflow import pipeline as api

    progress = terminal.ProgressBars(console) if console.is_terminal else None  # not into a file or pipe
    try:
        return api.analyse(args.method, trials=args.trials or None, seed=args.seed,
                           progress_factory=progress, advice=not args.no_advice)
    finally:
        if progress is not None:
            progress.stop()


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
    result = quick_check(args.table, [args.sample] if args.sample else None, getattr(args, "function", "straight line"))
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
