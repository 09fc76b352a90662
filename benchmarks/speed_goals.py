"""Speed goals of the linear engine, the advisor, start-up, whole runs and the PDF (a script, not a test).

Every figure is CPU time (time.process_time in the measuring process, or the child's user +
system time for a command), the median of --runs runs, on one core (the process and its
children are pinned to one core and numerical libraries to one thread). Each measure runs
in a fresh process. With --before CHECKOUT the same measures run on that checkout too
(for example an export of an earlier commit: `git archive COMMIT | tar -x -C FOLDER`), and
the ratio before/after is printed beside each figure; the slowest before-measures (whole
runs of the generated method) are skipped unless --before-all is given.

Methods: the two demos in example_inputs/ and a generated copy of the phosphate demo with
40 standards and 50 samples (benchmarks/scaled_method.py; invented readings).

Each checkout's modules are compiled to bytecode first (into its __pycache__ folders, which git
ignores; not PYTHONPYCACHEPREFIX, which would leave every installed library without its
bytecode), as `pip install .` does for a user (an
environment with PYTHONDONTWRITEBYTECODE set would otherwise compile every module again in each
measured process: about 0.35 s per command on a slow machine). The first lines print what this
machine does in a fixed workload (numpy's normal draws, a Python loop), so figures from
different machines can be set side by side; compare ratios, not seconds, across machines.

Usage: python benchmarks/speed_goals.py [--runs 3] [--before CHECKOUT [--before-all]] [--memory]
       [--only TEXT]   (TEXT: only the measures whose label contains it, e.g. "Monte Carlo")
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(Path(__file__).resolve().parent))

from scaled_method import write_scaled_method  # noqa: E402

PROBE = Path(__file__).resolve().parent / "speed_probe.py"
DEMOS = {"phosphate": ROOT / "example_inputs" / "phosphate_assay" / "method.toml",
         "nickel": ROOT / "example_inputs" / "nickel_complex" / "method.toml"}
ONE_THREAD = {k: "1" for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}


@dataclass(frozen=True)
class Goal:
    label: str
    limit: float | None  # the goal: at most this many seconds (or bytes); None: shown for context
    unit: str = "s"


def pin_to_one_core() -> str:
    try:
        os.sched_setaffinity(0, {sorted(os.sched_getaffinity(0))[0]})
        return "pinned to one core"
    except (AttributeError, OSError):
        return "could not pin to one core (figures are CPU time all the same)"


def compile_checkout(checkout: Path) -> None:
    """Bytecode for every module of the checkout's package, as an installation writes it."""
    subprocess.run([sys.executable, "-m", "compileall", "-q", str(checkout / "validate")], check=True,
                   env=_env(checkout), capture_output=True)


def machine_reference() -> str:
    """CPU seconds of two fixed workloads on this machine (the best of 5): 10^7 standard normal
    draws with numpy, and a Python loop summing 10^7 integers."""
    import time

    import numpy as np

    def best(work) -> float:
        spent = []
        for _ in range(5):
            start = time.process_time()
            work()
            spent.append(time.process_time() - start)
        return min(spent)

    rng = np.random.default_rng(1)
    draws = best(lambda: rng.standard_normal(10_000_000))
    loop = best(lambda: sum(range(10_000_000)))
    return f"this machine: 10^7 normal draws {draws:.3f} s, a Python loop over 10^7 integers {loop:.3f} s"


def _env(checkout: Path) -> dict:
    return {**os.environ, **ONE_THREAD, "PYTHONPATH": str(checkout), "MPLBACKEND": "Agg"}


def probe(checkout: Path, measure: str, method: Path, runs: int) -> dict:
    """A measurement of speed_probe.py in a fresh process on `checkout`."""
    done = subprocess.run([sys.executable, str(PROBE), str(checkout), measure, str(method), str(runs)],
                          capture_output=True, text=True, env=_env(checkout), check=False)
    if done.returncode != 0:
        raise RuntimeError(f"{measure} on {method} failed in {checkout}:\n{done.stderr[-2000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def command_cpu(checkout: Path, args: list[str], runs: int) -> list[float]:
    """CPU seconds (user + system) of `python -m validate.cli ARGS` in a child process, per run."""
    times = []
    for _ in range(runs):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        done = subprocess.run([sys.executable, "-m", "validate.cli", *args], capture_output=True,
                              text=True, env=_env(checkout), cwd=checkout, check=False)
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        if done.returncode != 0:
            raise RuntimeError(f"validate {' '.join(args)} failed in {checkout}:\n{done.stderr[-2000:]}")
        times.append(after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime)
    return times


def whole_run(checkout: Path, method: Path, runs: int, out: Path) -> list[float]:
    """A default run: 10^6 Monte Carlo trials with the shares, the advisor and the PDF."""
    return command_cpu(checkout, ["run", str(method), "--out", str(out), "--overwrite", "--seed", "1"], runs)


def show(goal: Goal, after: float, before: float | None) -> None:
    scale, unit = (1024.0, "kB") if goal.unit == "bytes" else (1.0, goal.unit)
    ratio = f"{before / after:7.1f}x" if before is not None and after > 0 else "       -"
    was = f"{before / scale:9.3f}" if before is not None else "        -"
    if goal.limit is None:
        print(f"{goal.label:58s} {was} {after / scale:9.3f} {ratio}   (no goal; for context)")
        return
    met = "met" if after <= goal.limit else "NOT MET"
    print(f"{goal.label:58s} {was} {after / scale:9.3f} {ratio}   <= {goal.limit / scale:g} {unit}  {met}")


def _median(values: list[float]) -> float:
    return statistics.median(values)


class Bench:
    def __init__(self, runs: int, before: Path | None, before_all: bool, scratch: Path, only: str = "") -> None:
        self.runs, self.before, self.before_all, self.scratch = runs, before, before_all, scratch
        self.only = only

    def both(self, goal: Goal, measure, slow: bool = False) -> None:
        """Run `measure(checkout)` here and, when asked, on the before-checkout; print the pair."""
        if self.only not in goal.label:
            return
        after = measure(ROOT)
        before = measure(self.before) if self.before and (self.before_all or not slow) else None
        show(goal, after, before)

    def gum(self, method: Path, label: str, limit: float) -> None:
        self.both(Goal(f"linear engine (GUM), {label}", limit),
                  lambda c: _median(probe(c, "gum", method, self.runs)["cpu"]))

    def advisor(self, method: Path, label: str) -> None:
        self.both(Goal(f"advisor, {label} (with its Monte Carlo check)", 1.0),
                  lambda c: _median(probe(c, "advisor", method, self.runs)["cpu"]))
        self.both(Goal(f"advisor, {label}, linear engine part only", 1.0),
                  lambda c: _median(probe(c, "advisor-linear", method, self.runs)["cpu"]))

    def whole(self, method: Path, label: str, limit: float, slow: bool = False) -> None:
        out = self.scratch / label.replace(" ", "_")
        runs = 1 if slow else self.runs
        self.both(Goal(f"whole run with defaults, {label}", limit),
                  lambda c: _median(whole_run(c, method, runs, out)), slow)

    def monte_carlo(self, method: Path, label: str) -> None:
        """Goal 1: the Monte Carlo stage against its draw-only floor (a ratio, so `limit` is 2)."""
        for measure, how in (("mc", "as a run does"), ("mc-asked", "trials asked only")):
            found = {}

            def measured(c: Path, measure=measure, found=found) -> dict:
                if c not in found:
                    found[c] = probe(c, measure, method, self.runs)
                return found[c]

            self.both(Goal(f"Monte Carlo 10^6 + shares, {label}, {how}: s", None),
                      lambda c: _median(measured(c)["cpu"]))
            self.both(Goal(f"  ... its draw-only floor (the same trials drawn), {label}, {how}: s", None),
                      lambda c: _median(measured(c)["floor"]))
            self.both(Goal(f"  ... ratio engine / floor, {label}, {how}", 2.0, "x"),
                      lambda c: _median(measured(c)["cpu"]) / _median(measured(c)["floor"]))

    def stages(self, method: Path, label: str) -> None:
        """Where a default run's CPU time goes, stage by stage (context for the whole-run goal)."""
        if self.only not in f"stages of a default run, {label}":
            return
        found = probe(ROOT, "stages", method, 1)["stages"]
        for stage, seconds in found.items():
            show(Goal(f"  stages of a default run, {label}: {stage}", None), seconds, None)

    def memory(self, method: Path, label: str) -> None:
        self.both(Goal(f"peak memory, Monte Carlo at 10^7 trials + shares, {label}: MiB", 600.0, "MiB"),
                  lambda c: probe(c, "memory", method, 1)["mib"], slow=True)

    def pdf(self, method: Path, label: str) -> None:
        results = {}

        def measured(c: Path) -> dict:
            if c not in results:
                results[c] = probe(c, "pdf", method, self.runs)
            return results[c]

        self.both(Goal(f"PDF report, {label}", None), lambda c: _median(measured(c)["cpu"]))
        self.both(Goal(f"PDF figures, {label}", 1.0), lambda c: _median(measured(c)["figures_cpu"]))
        self.both(Goal(f"PDF size, {label}", 600 * 1024, "bytes"), lambda c: float(measured(c)["bytes"]))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--before", type=Path, default=None, help="another checkout to time side by side")
    parser.add_argument("--before-all", action="store_true", help="also the slow before-measures")
    parser.add_argument("--memory", action="store_true", help="also peak memory at 10^7 trials (minutes)")
    parser.add_argument("--only", default="", help="run only the measures whose label contains this text")
    args = parser.parse_args()
    print(pin_to_one_core(), f"; CPU seconds, median of {args.runs} runs; before = {args.before or '-'}")
    print(machine_reference())
    print(f"{'measure':58s} {'before':>9s} {'after':>9s} {'ratio':>8s}   goal")
    with tempfile.TemporaryDirectory() as folder:
        scratch = Path(folder)
        for checkout in (ROOT, args.before):
            if checkout is not None:
                compile_checkout(checkout.resolve())
        scaled = write_scaled_method(scratch / "scaled", standards=40, samples=50)
        bench = Bench(args.runs, args.before.resolve() if args.before else None, args.before_all, scratch,
                      args.only)
        for label, method in DEMOS.items():
            bench.gum(method, f"{label} demo", 1.0)
        bench.gum(scaled, "generated 40 standards x 50 samples", 1.0)
        for label, method in DEMOS.items():
            bench.advisor(method, f"{label} demo")
        for label, method in DEMOS.items():
            bench.monte_carlo(method, f"{label} demo")
        bench.both(Goal("validate --help", 0.5), lambda c: _median(command_cpu(c, ["--help"], args.runs)))
        for label, method in DEMOS.items():
            bench.both(Goal(f"validate check, {label} demo", 0.5),
                       lambda c, m=method: _median(command_cpu(c, ["check", str(m)], args.runs)))
        bench.pdf(DEMOS["phosphate"], "phosphate demo")
        for label, method in DEMOS.items():
            bench.whole(method, f"{label} demo", 4.0)
        bench.monte_carlo(scaled, "generated 40 x 50")
        bench.whole(scaled, "generated 40 x 50", 15.0, slow=True)
        bench.stages(scaled, "generated 40 x 50")
        if args.memory:
            for label, method in DEMOS.items():
                bench.memory(method, f"{label} demo")


if __name__ == "__main__":
    main()
