"""Parallel benchmark: a model that sleeps 0.05 s, run serially, on a process pool and on Dask, in one run.

Parallel efficiency = serial time / (workers x parallel time), for 2 workers. The serial run is the
in-process executor. Every run uses the same case, seed and budget (240 evaluations, 12 generations
of 20), so all of them do exactly the same search (the script checks that the fronts agree).

Times include everything the user waits for inside the search: for the process pool, starting its
worker processes; for "Dask, started by the run", what `tradewise.run(..., dask=True)` does: make the
executor (which starts the LocalCluster: importing dask and starting it are included), run, close
it; for "Dask, cluster up", a run on a cluster started beforehand (the start-up is printed beside
it). Each worker's first
task imports tradewise and the model, and that is inside the timed run for every backend.

Targets: process pool efficiency at least 0.95; Dask started by the run at least 0.85. Each figure
is the median and range over --repeats rounds (the backends take turns within a round, so a busy
machine slows them alike).

Run:  python tests/benchmarks/bench_parallel.py [--evaluations 240] [--workers 2] [--repeats 3]
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import textwrap
import time
from pathlib import Path

import tradewise
from tradewise.case import load_case
from tradewise.executors import DaskCluster, InProcess, ProcessPool, make_executor

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


def timed_run(case, evaluations: int, **where):
    start = time.perf_counter()
    result = tradewise.run(case, evaluations=evaluations, **where)
    elapsed = time.perf_counter() - start
    assert result.n_evals == evaluations and result.n_failed == 0, result.message
    return elapsed, result


def front_of(result):
    names = result.case.variable_names + result.case.objective_names
    return result.front.table[names].sort_values(names).reset_index(drop=True)


def _summary(values: list[float]) -> str:
    return f"median {statistics.median(values):.3f} (range {min(values):.3f}-{max(values):.3f})"


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--evaluations", type=int, default=240)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    n, w = args.evaluations, args.workers
    times: dict[str, list[float]] = {
        "in-process": [],
        "process pool": [],
        "Dask, started by the run": [],
        "Dask, cluster up": [],
        "Dask start-up": [],
    }
    on_cluster: list[float] = []
    same = True
    with tempfile.TemporaryDirectory() as folder:
        (Path(folder) / "case.toml").write_text(textwrap.dedent(CASE), encoding="utf-8")
        (Path(folder) / "model.py").write_text(textwrap.dedent(MODEL), encoding="utf-8")
        case = load_case(folder)
        for round_ in range(1, args.repeats + 1):
            serial, reference = timed_run(case, n, executor=InProcess())
            with ProcessPool(w) as pool:
                pooled, by_pool = timed_run(case, n, executor=pool)
            # What run(dask=True, workers=w) does, with the executor kept to ask where designs ran.
            start = time.perf_counter()
            own = make_executor(w, dask=True)
            try:
                _, by_run = timed_run(case, n, executor=own)
            finally:
                own.close()
            started_by_run = time.perf_counter() - start
            on_cluster.append(own.on_cluster / n)
            start = time.perf_counter()
            cluster = DaskCluster(w)
            started = time.perf_counter() - start
            try:
                dasked, by_dask = timed_run(case, n, executor=cluster)
            finally:
                cluster.close()
            for name, took in zip(
                times, (serial, pooled, started_by_run, dasked, started), strict=True
            ):
                times[name].append(took)
            same = same and all(
                front_of(r).equals(front_of(reference)) for r in (by_pool, by_run, by_dask)
            )
            print(
                f"  round {round_}: in-process {serial:.2f} s, pool {pooled:.2f} s, Dask started by "
                f"the run {started_by_run:.2f} s, Dask on a cluster up {dasked:.2f} s "
                f"(its start-up {started:.2f} s)",
                flush=True,
            )

    serial = times["in-process"]

    def efficiency(name: str) -> list[float]:
        return [s / (w * t) for s, t in zip(serial, times[name], strict=True)]

    print()
    print(
        f"{n} evaluations of 0.05 s (sleep), {w} workers; pure sleeping time {n * 0.05:.1f} s; "
        f"{args.repeats} rounds"
    )
    print(f"  in-process                time {_summary(serial)} s")
    for name in ("process pool", "Dask, started by the run", "Dask, cluster up"):
        print(
            f"  {name:25s} time {_summary(times[name])} s, efficiency {_summary(efficiency(name))}"
        )
    print(f"  Dask start-up alone       time {_summary(times['Dask start-up'])} s")
    print(
        f"  share of the run's designs evaluated on the cluster it started: {_summary(on_cluster)}"
    )
    print(
        "  targets: process pool efficiency >= 0.95, Dask started by the run >= 0.85; "
        f"fronts identical on every backend: {same}"
    )


if __name__ == "__main__":
    main()
