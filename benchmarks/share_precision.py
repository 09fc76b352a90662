"""The Monte Carlo shares' precision and cost, in a fresh process, for one checkout (not a test).

Usage: python benchmarks/share_precision.py CHECKOUT METHOD MEASURE COUNT
Puts CHECKOUT first on the path (so the same probe times another checkout side by side) and
prints one JSON object. MEASURE is one of:
  cpu     CPU seconds (time.process_time) of the shares (validate.propagation.montecarlo._shares,
          both keys, their default most trials, seed 1), COUNT times
  spread  every share of every output over COUNT seeds (1 .. COUNT), with, where the checkout
          estimates it, the standard error it states and the trials it ran
The shares of any checkout: the newer `_shares` takes the linear results, the older does not.
"""

from __future__ import annotations

import inspect
import json
import sys
import time


def _setup(method: str):
    from validate.propagation import montecarlo as mc
    from validate.workflow import pipeline

    run = pipeline.analyse(method, trials=None, advice=False)
    linear = "linear" in inspect.signature(mc._shares).parameters

    def shares(seed: int):
        args = (run.model, run.results) if linear else (run.model,)
        return mc._shares(*args, seed, ("step", "equipment"), lambda k: None, mc.share_trials(1_000_000))
    return run, shares


def cpu(method: str, count: int) -> dict:
    _, shares = _setup(method)
    shares(1)  # compiled kernels and caches warm, as in a run
    out = []
    for _ in range(count):
        start = time.process_time()
        shares(1)
        out.append(time.process_time() - start)
    return {"cpu": out}


def spread(method: str, count: int) -> dict:
    run, shares = _setup(method)
    try:
        from validate.propagation import mcshares
    except ImportError:
        mcshares = None
    values: dict[str, list[float]] = {}
    errors: dict[str, list[float]] = {}
    trials: list[int] = []
    for seed in range(1, count + 1):
        if mcshares is not None:
            estimates = mcshares.share_estimates(run.model, run.results, seed, ("step", "equipment"),
                                                 lambda k: None, always_errors=True)
            for key, by_label in estimates.items():
                for label, rows in by_label.items():
                    for group, s in rows:
                        values.setdefault(f"{key} | {label} | {group}", []).append(s.share)
                        errors.setdefault(f"{key} | {label} | {group}", []).append(s.standard_error)
                        trials.append(s.trials)
        else:
            for key, by_label in shares(seed).items():
                for label, rows in by_label.items():
                    for group, share in rows:
                        values.setdefault(f"{key} | {label} | {group}", []).append(share)
    return {"values": values, "errors": errors, "trials": sorted(set(trials))}


if __name__ == "__main__":
    checkout, method, measure, count = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])
    sys.path.insert(0, checkout)
    print(json.dumps({"cpu": cpu, "spread": spread}[measure](method, count)))
