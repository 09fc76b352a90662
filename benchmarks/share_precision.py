"""The Monte Carlo shares' precision and cost, in a fresh process, for one checkout (not a test).

Usage: python benchmarks/share_precision.py CHECKOUT METHOD MEASURE COUNT
Puts CHECKOUT first on the path (so the same probe times another checkout side by side) and
prints one JSON object. MEASURE is one of:
  cpu     CPU seconds (time.process_time) of the shares (validate.propagation.montecarlo._shares,
          both keys, their default most trials, seed 1), COUNT times
  spread  every share of every output over COUNT seeds (1 .. COUNT), with, where the checkout
          estimates it, the standard error it states and the trials it ran
  nonlinear  (this checkout only) the shares of two strongly nonlinear hand-made models,
          Y = A B + C (A, B normal, sigma/mu = 0.5: exact shares from the variance of a product
          of independent variables) and Y = exp(A) / B (A normal, u 0.5; B rectangular, 0.8 to
          1.2), at the estimator's own stop and, as reference, from COUNT trials with every
          trial run (plain and with the control variate)
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
                                                 lambda k: None)
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


class _HandModel:
    """A measurement model written by hand, the same code for the linear engine and for trials."""

    def __init__(self, sources, formulas: dict):
        from types import SimpleNamespace

        self.sources = {s.name: s for s in sources}
        self.result_labels = list(formulas)
        self.formulas = formulas
        self.method = SimpleNamespace(settings=SimpleNamespace(coverage_probability=0.95))

    def unit_of(self, label: str) -> str:
        return ""

    def evaluate(self, x) -> dict:
        return {label: f(x) for label, f in self.formulas.items()}

    def outputs(self, x, labels) -> dict:
        return self.evaluate(x)


def nonlinear(count: int) -> dict:
    import numpy as np
    from uncertainties import umath

    from validate.metrology.sources import Source, rectangular
    from validate.propagation import mcshares
    from validate.propagation.linear import propagate

    def exp(v):
        return np.exp(v) if isinstance(v, np.ndarray) else umath.exp(v)

    mu, sigma, var_c = 1.0, 0.5, 0.05**2
    total = 2 * mu**2 * sigma**2 + sigma**4 + var_c
    product = _HandModel([Source("a", mu, sigma, step="a"), Source("b", mu, sigma, step="b"),
                          Source("c", 5.0, 0.05, step="c")], {"Y": lambda x: x["a"] * x["b"] + x["c"]})
    exact = {"a": 1 - (mu**2 * sigma**2 + var_c) / total, "b": 1 - (mu**2 * sigma**2 + var_c) / total,
             "c": var_c / total}
    ratio = _HandModel([Source("a", 0.0, 0.5, step="a"), rectangular("b", 1.0, 0.2, step="b")],
                       {"Y": lambda x: exp(x["a"]) / x["b"]})
    out = {}
    for name, model in (("product", product), ("exp_ratio", ratio)):
        linear = propagate(model)
        own = mcshares.share_estimates(model, linear, 1, ("step",), lambda k: None)["step"]["Y"]
        long = mcshares.share_estimates(model, linear, 2, ("step",), lambda k: None, count, 0.0)["step"]["Y"]
        out[name] = {g: {"estimate": s.share, "standard_error": s.standard_error, "trials": s.trials,
                         "gum_share": s.linear_exact, "reference_plain": ref.plain,
                         "reference_plain_se": ref.plain_standard_error, "reference_cv": ref.share,
                         "reference_cv_se": ref.standard_error,
                         **({"exact": exact[g]} if name == "product" else {})}
                     for (g, s), (_, ref) in zip(own, long, strict=True)}
    return out


if __name__ == "__main__":
    checkout, method, measure, count = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])
    sys.path.insert(0, checkout)
    if measure == "nonlinear":
        print(json.dumps(nonlinear(count), indent=1))
    else:
        print(json.dumps({"cpu": cpu, "spread": spread}[measure](method, count)))
