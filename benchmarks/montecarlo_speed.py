"""Monte Carlo speed and memory for a demo method (a script, not a test).

Prints, pinned to one core:
- trials per second at 10^6 trials (median of several runs, whole engine: drawing,
  model with the line refitted per trial, statistics; the budget shares are left out);
- peak memory (maximum resident set size) of a separate process running 10^7 trials;
- the ratio against evaluating the same model one trial at a time in a Python loop.

Usage: python benchmarks/montecarlo_speed.py [METHOD.toml] [--runs 5]
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from validate.propagation.distributions import draw_many  # noqa: E402
from validate.propagation.montecarlo import propagate_mc  # noqa: E402
from validate.workflow import pipeline as api  # noqa: E402

DEFAULT = ROOT / "example_inputs" / "phosphate_assay" / "method.toml"


def pin_to_one_core() -> str:
    try:
        os.sched_setaffinity(0, {sorted(os.sched_getaffinity(0))[0]})
        return "pinned to one core"
    except (AttributeError, OSError):
        return "could not pin to one core"


def vectorised_rate(method: Path, trials: int, runs: int) -> list[float]:
    run = api.analyse(method, trials=None)
    rates = []
    for _ in range(runs):
        start = time.perf_counter()
        propagate_mc(run.model, run.results, trials, seed=1, shares=False)
        rates.append(trials / (time.perf_counter() - start))
    return rates


def loop_rates(method: Path, trials: int) -> tuple[float, float]:
    """The same model one trial at a time with plain floats, the way a naive loop works:
    (a) drawing each trial's inputs and evaluating, (b) evaluating pre-drawn inputs only."""
    run = api.analyse(method, trials=None)
    sources = list(run.model.sources.values())
    rng = np.random.default_rng(1)
    start = time.perf_counter()
    for _ in range(trials):
        draws = draw_many(sources, 1, rng)
        run.model.evaluate({name: float(v[0]) for name, v in draws.items()})
    full = trials / (time.perf_counter() - start)
    draws = draw_many(sources, trials, rng)
    names = list(draws)
    start = time.perf_counter()
    for i in range(trials):
        run.model.evaluate({name: float(draws[name][i]) for name in names})
    return full, trials / (time.perf_counter() - start)


def peak_memory_mib(method: Path, trials: int) -> float:
    code = (f"import sys; sys.path.insert(0, {str(ROOT)!r}); from validate.workflow import pipeline as api; "
            "from validate.propagation.montecarlo import propagate_mc; "
            f"r = api.analyse({str(method)!r}, trials=None); "
            f"propagate_mc(r.model, r.results, {trials:d}, seed=1, shares=False)")
    subprocess.run([sys.executable, "-c", code], check=True)
    return resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0  # Linux: KiB


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("method", nargs="?", default=str(DEFAULT))
    parser.add_argument("--runs", type=int, default=5)
    args = parser.parse_args()
    method = Path(args.method)
    print(f"method: {method}")
    print(pin_to_one_core())
    rates = vectorised_rate(method, 1_000_000, args.runs)
    median = statistics.median(rates)
    print(f"vectorised, 10^6 trials: median {median:,.0f} trials/s over {args.runs} runs "
          f"(min {min(rates):,.0f}, max {max(rates):,.0f})")
    full, model_only = loop_rates(method, 2_000)
    print(f"per-trial Python loop, drawing and evaluating: {full:,.0f} trials/s; "
          f"vectorised is {median / full:,.0f} times faster")
    print(f"per-trial Python loop, evaluating pre-drawn inputs only: {model_only:,.0f} trials/s; "
          f"vectorised is {median / model_only:,.0f} times faster")
    print(f"peak memory at 10^7 trials: {peak_memory_mib(method, 10_000_000):,.0f} MiB (maximum resident set)")


if __name__ == "__main__":
    main()
