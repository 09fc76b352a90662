"""One timed measurement in a fresh process, for benchmarks/speed_goals.py (not a test).

Usage: python benchmarks/speed_probe.py CHECKOUT MEASURE METHOD RUNS
Puts CHECKOUT first on the path (so the same probe times another checkout side by side),
runs MEASURE RUNS times and prints one JSON object: CPU seconds per run (time.process_time)
and, for the PDF, its size. MEASURE is one of:
  gum      build the model (with an equilibrium study's combination) and run the linear engine
  advisor  the what-if advisor as a default run calls it (candidates by the linear engine,
           the best three checked by Monte Carlo at 50,000 trials)
  advisor-linear  the same without the Monte Carlo check
  pdf      the report from a finished run (10^6 trials, seed 1); also the CPU time inside the
           figure functions and the file size
  mc       the Monte Carlo stage of a default run (10^6 trials, seed 1, with the shares and the
           clause 8 comparison's added trials) and its floor: drawing the same random numbers
           only (as many trials as the run drew: every call of draw_many counted, the main
           run's, the additions' and the shares' batches)
  mc-asked the same with no trials added for the clause 8 comparison (the trials asked only)
  memory   peak resident memory (MiB) of the Monte Carlo stage at 10^7 trials with the shares
  stages   a default run (10^6 trials, seed 1, advisor, record folder with the PDF) with the CPU
           seconds of each stage: imports, GUM, Monte Carlo, advisor, record, PDF, manifest
"""

from __future__ import annotations

import inspect
import json
import sys
import tempfile
import time
from pathlib import Path


def _cpu(work) -> float:
    start = time.process_time()
    work()
    return time.process_time() - start


def gum(method: str, runs: int) -> dict:
    from validate.equilibrium.study import build_ready_model
    from validate.inputs.method_file import load_method
    from validate.propagation.linear import propagate

    loaded = load_method(method)
    return {"cpu": [_cpu(lambda: propagate(build_ready_model(loaded)[0])) for _ in range(runs)]}


def advisor(method: str, runs: int, confirm: int) -> dict:
    from validate.advisor.advice import advise
    from validate.equilibrium.study import build_ready_model
    from validate.inputs.method_file import load_method
    from validate.propagation.linear import propagate

    loaded = load_method(method)
    model = build_ready_model(loaded)[0]
    results = propagate(model)  # the run's model and results, handed to the advisor as a run does
    given = {"model": model} if "model" in inspect.signature(advise).parameters else {}  # older checkouts
    return {"cpu": [_cpu(lambda: advise(loaded, results, seed=1, confirm_with_mc=confirm, **given))
                    for _ in range(runs)]}


def _timed_figures(spent: list[float]) -> None:
    """Wrap every public figure function so the time spent drawing is summed in `spent`."""
    import importlib

    for name in ("validate.report.figures", "validate.report.figures_equilibrium"):
        try:
            module = importlib.import_module(name)
        except ImportError:
            continue
        for attr, func in list(vars(module).items()):
            if callable(func) and attr.endswith(("_figure", "_chart")) and not attr.startswith("_"):
                setattr(module, attr, _wrapped(func, spent))  # the sections call module.attr


def _wrapped(func, spent: list[float]):
    def timed(*args, **kwargs):
        start = time.process_time()
        try:
            return func(*args, **kwargs)
        finally:
            spent[0] += time.process_time() - start
    timed.__wrapped__ = func  # type: ignore[attr-defined]
    return timed


def pdf(method: str, runs: int) -> dict:
    from validate.report import pdf as report
    from validate.workflow import pipeline

    run = pipeline.analyse(method, trials=1_000_000, seed=1)
    spent = [0.0]
    _timed_figures(spent)
    total, figures, size = [], [], 0
    with tempfile.TemporaryDirectory() as folder:
        target = Path(folder) / "report.pdf"
        for _ in range(runs):
            spent[0] = 0.0
            total.append(_cpu(lambda: report.build_report(run.record, target)))
            figures.append(spent[0])
        size = target.stat().st_size
    return {"cpu": total, "figures_cpu": figures, "bytes": size}


def _mc_and_floor(method: str, runs: int, growth: int | None) -> dict:
    import importlib

    import numpy as np

    from validate.propagation import montecarlo as mc
    from validate.propagation.distributions import draw_many
    from validate.workflow import pipeline

    try:  # where the rounds' settings live (older checkouts: in montecarlo itself)
        from validate.propagation import mcrounds as rounds
    except ImportError:
        rounds = mc
    if growth is not None:
        rounds.CHECK_GROWTH = growth
    run = pipeline.analyse(method, trials=None, advice=False)
    trials = 1_000_000
    counted = _count_draws(importlib, draw_many)
    engine = [_cpu(lambda: mc.propagate_mc(run.model, run.results, trials, seed=1)) for _ in range(runs)]
    drawn = counted[-1] // runs  # the trials one run drew, every draw_many call counted
    sources = list(run.model.sources.values())

    def draw_only() -> None:
        rng, done = np.random.default_rng(1), 0
        while done < drawn:
            n = min(rounds.CHUNK, drawn - done)
            draw_many(sources, n, rng)
            done += n

    return {"cpu": engine, "floor": [_cpu(draw_only) for _ in range(runs)], "drawn": drawn}


def _count_draws(importlib, draw_many) -> list[int]:
    """Wrap draw_many where the engine's modules call it; the returned list's last item is the
    number of trials drawn so far (the floor then draws exactly what the runs drew)."""
    total = [0]

    def counting(sources, n, rng):
        total.append(total[-1] + int(n))
        return draw_many(sources, n, rng)

    for name in ("montecarlo", "mcrounds", "mcshares"):
        try:
            module = importlib.import_module(f"validate.propagation.{name}")
        except ImportError:
            continue
        if getattr(module, "draw_many", None) is draw_many:
            module.draw_many = counting
    return total


def memory(method: str) -> dict:
    import resource

    from validate.propagation.montecarlo import propagate_mc
    from validate.workflow import pipeline

    run = pipeline.analyse(method, trials=None, advice=False)
    propagate_mc(run.model, run.results, 10_000_000, seed=1)
    return {"mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0}  # Linux: KiB


STAGES = (("validate.workflow.pipeline", "propagate", "GUM"),
          ("validate.workflow.pipeline", "propagate_mc", "Monte Carlo"),
          ("validate.advisor.advice", "advise", "advisor"),
          ("validate.workflow.pipeline", "build_record", "record built"),
          ("validate.workflow.pipeline", "json_members", "results.json"),
          ("validate.workflow.pipeline", "content_hash_of_members", "content hash"),
          ("validate.report.pdf", "build_report", "PDF"),
          ("validate.workflow.pipeline", "make_manifest", "manifest"))


def stages(method: str, runs: int) -> dict:
    """CPU seconds of each stage of a default run, from the stage functions wrapped in timers."""
    import importlib

    start = time.process_time()
    from validate.workflow import pipeline

    spent = {"imports": time.process_time() - start}
    for module_name, attr, label in STAGES:
        module = importlib.import_module(module_name)
        setattr(module, attr, _stage_timer(getattr(module, attr), label, spent))
    with tempfile.TemporaryDirectory() as folder:
        total = _cpu(lambda: pipeline.write_outputs(pipeline.analyse(method, trials=1_000_000, seed=1),
                                                    Path(folder) / "record"))
    spent["the rest"] = total - sum(v for k, v in spent.items() if k != "imports")
    return {"cpu": [total + spent["imports"]], "stages": spent}


def _stage_timer(func, label: str, spent: dict):
    def timed(*args, **kwargs):
        start = time.process_time()
        try:
            return func(*args, **kwargs)
        finally:
            spent[label] = spent.get(label, 0.0) + time.process_time() - start
    return timed


def main() -> None:
    checkout, measure, method, runs = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])
    sys.path.insert(0, checkout)
    probes = {"gum": lambda: gum(method, runs), "advisor": lambda: advisor(method, runs, 3),
              "advisor-linear": lambda: advisor(method, runs, 0), "pdf": lambda: pdf(method, runs),
              "mc": lambda: _mc_and_floor(method, runs, None), "mc-asked": lambda: _mc_and_floor(method, runs, 1),
              "memory": lambda: memory(method), "stages": lambda: stages(method, runs)}
    if measure not in probes:
        raise SystemExit(f"unknown measure {measure!r}; choose one of {', '.join(probes)}")
    print(json.dumps(probes[measure]()))


if __name__ == "__main__":
    main()
