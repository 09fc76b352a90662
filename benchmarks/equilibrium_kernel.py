"""The equilibrium model's speed with and without the compiled fixed point (a script, not a test).

Prints, pinned to one core, CPU seconds (time.process_time):
- model trials per second on the nickel demo (draws made beforehand and not counted; the model
  run on slices of the Monte Carlo engine's size), with the compiled fixed point
  (validate/model/kernels.py: the fixed point and the reported K's in one loop, the columns
  written into its inputs) and with the numpy path, median of --runs;
- what a process pays to use the compiled path: with numba's cache empty (the first run on a
  machine: import, compilation, writing the cache) and with it filled (import and loading), each
  in a fresh process with its own cache folder (NUMBA_CACHE_DIR).

Usage: python benchmarks/equilibrium_kernel.py [--runs 3] [--trials 200000]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
METHOD = ROOT / "example_inputs" / "nickel_complex" / "method.toml"

LOAD = ("import json, time\nt = time.process_time()\nfrom validate.model import kernels\n"
        "ok = kernels.available()\nprint(json.dumps({'ok': ok, 'cpu': time.process_time() - t}))")


def pin_to_one_core() -> str:
    try:
        os.sched_setaffinity(0, {sorted(os.sched_getaffinity(0))[0]})
        return "pinned to one core"
    except (AttributeError, OSError):
        return "could not pin to one core"


def model_rates(trials: int, runs: int) -> dict[str, float]:
    import numpy as np

    from validate.model import kernels
    from validate.propagation import montecarlo as mc
    from validate.propagation.distributions import draw_many
    from validate.workflow import pipeline

    model = pipeline.analyse(METHOD, trials=None, advice=False).model
    draws = draw_many(list(model.sources.values()), trials, np.random.default_rng(1))
    rates = {}
    for label, on in (("compiled", True), ("numpy", False)):
        kernels.enable(on)
        kernels.available()  # loading is measured apart
        spent = []
        for _ in range(runs):
            start = time.process_time()
            mc._evaluate(model, draws, trials, model.result_labels)
            spent.append(time.process_time() - start)
        rates[label] = trials / statistics.median(spent)
    kernels.enable(True)
    return rates


def load_cost(cache: Path) -> dict:
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache), "PYTHONPATH": str(ROOT)}
    done = subprocess.run([sys.executable, "-c", LOAD], capture_output=True, text=True, env=env, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--trials", type=int, default=200_000)
    args = parser.parse_args()
    print(pin_to_one_core(), f"; CPU seconds, median of {args.runs} runs")
    for label, rate in model_rates(args.trials, args.runs).items():
        print(f"equilibrium model, nickel demo, {label} fixed point: {rate / 1e6:.2f} M trials/s (draws not counted)")
    with tempfile.TemporaryDirectory() as folder:
        cold, warm = load_cost(Path(folder)), load_cost(Path(folder))
    print(f"compiled path, first use with an empty cache (import numba, compile, write the cache): "
          f"{cold['cpu']:.2f} s{'' if cold['ok'] else ' (not available: numpy path)'}")
    print(f"compiled path, first use with the cache filled (import numba, load): {warm['cpu']:.2f} s")


if __name__ == "__main__":
    main()
