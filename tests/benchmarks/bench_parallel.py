"""Parallel benchmark: a model that sleeps 0.05 s, run serially, on a process pool and on Dask, in one run.

Parallel efficiency = serial time / (workers x parallel time), for 2 workers. The serial run is the
in-process executor. Every run uses the same case, seed and budget (240 evaluations, 12 generations
of 20), so all three do exactly the same search (the script checks that the fronts agree).

Times include everything the user waits for inside the search: for the process pool, starting its
worker processes; for Dask, the run on a cluster that is already up, and separately the time to
start that LocalCluster (printed, and an efficiency with it included). Each worker's first task
imports tradewise and the model, and that is inside the timed run for both backends.

Target: efficiency at least 0.85 for both.

Run:  python tests/benchmarks/bench_parallel.py [--evaluations 240] [--workers 2]
"""

from __future__ import annotations

import argparse
import tempfile
import textwrap
import time
from pathlib import Path

import tradewise
from tradewise.case import load_case
from tradewise.executors import DaskCluster, InProcess, ProcessPool

MODEL = """
import time

def evaluate(design):
    time.sleep(0.05)
    x, y = design["x"], design["y"]
    return {"f1": x, "f2": (1 + y) * (1 - (x / (1 + y)) ** 0.5)}
"""

CASE = """
title = "sleeping model for the parallel benchmark"
model = "model.py:evaluate"

[variables]
x = { type = "real", low = 0.0, high = 1.0 }
y = { type = "real", low = 0.0, high = 1.0 }

[objectives]
f1 = { goal = "min" }
f2 = { goal = "min" }

[search]
population = 20
seed = 3
stall_generations = 0
"""


def timed_run(case, executor, evaluations: int):
    start = time.perf_counter()
    result = tradewise.run(case, evaluations=evaluations, executor=executor)
    elapsed = time.perf_counter() - start
    assert result.n_evals == evaluations and result.n_failed == 0, result.message
    return elapsed, result


def front_of(result):
    names = result.case.variable_names + result.case.objective_names
    return result.front.table[names].sort_values(names).reset_index(drop=True)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--evaluations", type=int, default=240)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    n, w = args.evaluations, args.workers
    with tempfile.TemporaryDirectory() as folder:
        (Path(folder) / "case.toml").write_text(textwrap.dedent(CASE), encoding="utf-8")
        (Path(folder) / "model.py").write_text(textwrap.dedent(MODEL), encoding="utf-8")
        case = load_case(folder)

        serial, reference = timed_run(case, InProcess(), n)
        with ProcessPool(w) as pool:
            pooled, by_pool = timed_run(case, pool, n)
        start = time.perf_counter()
        cluster = DaskCluster(w)
        started = time.perf_counter() - start
        try:
            dasked, by_dask = timed_run(case, cluster, n)
        finally:
            cluster.close()

    same = front_of(by_pool).equals(front_of(reference)) and front_of(by_dask).equals(
        front_of(reference)
    )
    ideal = n * 0.05
    print(f"{n} evaluations of 0.05 s (sleep), {w} workers; pure sleeping time {ideal:.1f} s")
    print(f"  in-process      {serial:7.2f} s")
    print(f"  process pool    {pooled:7.2f} s   efficiency {serial / (w * pooled):.3f}")
    print(
        f"  Dask            {dasked:7.2f} s   efficiency {serial / (w * dasked):.3f}   (cluster already up)"
    )
    print(
        f"  Dask start-up   {started:7.2f} s   efficiency with it {serial / (w * (dasked + started)):.3f}"
    )
    print(f"  target: efficiency >= 0.85; fronts identical on all three: {same}")


if __name__ == "__main__":
    main()
