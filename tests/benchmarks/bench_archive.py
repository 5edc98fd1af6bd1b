"""Archive benchmark: 10,000 trivial evaluations in-process, with and without the SQLite archive.

Both variants run in the same process, alternately, on the same case and seed, so they do the same
search; the difference is the archive (one row per evaluation, commits at generation ends and at
most half a second after each evaluation, the search state saved at most once a second). The rows
are encoded and written by the archive's writer process, so the search process only hands them
over. Prints:

- wall-clock times (minimum and median over the repeats) and the median of the paired ratios;
- the time the search process spent inside archive calls, and the CPU time of the writer process;
- a control: the same plain run beside a process that only spins, which shows how much a busy
  second CPU slows the search on this machine (the writer needs that second CPU).

Target: the archive adds at most 15 % to the run time.

Run:  python tests/benchmarks/bench_archive.py [--repeats 7]
"""

from __future__ import annotations

import argparse
import collections
import functools
import resource
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import tradewise
from tradewise.case import load_case
from tradewise.store import Store

CASE = Path(__file__).resolve().parent.parent / "cases" / "trivial"
STORE_CALLS = (
    "add_evaluation",
    "lookup",
    "add_generation",
    "flush",
    "save_state",
    "start_run",
    "update_run",
    "close",
)
inside = collections.Counter()


def _timed_method(name):
    method = getattr(Store, name)

    @functools.wraps(method)
    def timed(self, *args, **kwargs):
        start = time.perf_counter()
        try:
            return method(self, *args, **kwargs)
        finally:
            inside[name] += time.perf_counter() - start

    return timed


def children_cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def run(case, store: Path | None) -> float:
    start = time.perf_counter()
    result = tradewise.run(case, seed=1, evaluations=10_000, population=100, store=store)
    elapsed = time.perf_counter() - start
    assert result.n_evals == 10_000, result.message
    return elapsed


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()
    case = load_case(CASE)
    run(case, None)  # warm-up: imports, the model module, numpy's first calls
    plain, archived, spent, writer = [], [], [], []
    originals = {name: getattr(Store, name) for name in STORE_CALLS}
    with tempfile.TemporaryDirectory() as folder:
        for i in range(args.repeats):
            plain.append(run(case, None))
            for name in STORE_CALLS:
                setattr(Store, name, _timed_method(name))
            inside.clear()
            before = children_cpu()
            store = Path(folder) / f"archive-{i}.sqlite"
            archived.append(run(case, store))
            writer.append(children_cpu() - before)
            spent.append(sum(inside.values()))
            for name, method in originals.items():
                setattr(Store, name, method)
        with sqlite3.connect(store) as db:
            rows = db.execute("SELECT COUNT(*) FROM evaluations").fetchone()[0]
            states = db.execute("SELECT LENGTH(blob) FROM states").fetchone()[0]
    spinner = subprocess.Popen([sys.executable, "-c", "while True: pass"])
    try:
        time.sleep(0.2)
        beside = [run(case, None) for _ in range(3)]
    finally:
        spinner.kill()
        spinner.wait()
    ratios = [b / a for a, b in zip(plain, archived, strict=True)]
    print("10,000 trivial evaluations in-process (tests/cases/trivial, population 100, seed 1)")
    print(f"  without archive   min {min(plain):6.3f} s   median {statistics.median(plain):6.3f} s")
    print(
        f"  with archive      min {min(archived):6.3f} s   median {statistics.median(archived):6.3f} s"
    )
    print(
        f"  ratio             of minima {min(archived) / min(plain):5.3f}   median of paired runs "
        f"{statistics.median(ratios):5.3f}   (target <= 1.15)"
    )
    print(
        f"  search process inside archive calls: median {statistics.median(spent):.3f} s a run "
        f"({statistics.median(spent) / statistics.median(plain):.1%} of the plain run)"
    )
    print(f"  writer process CPU: median {statistics.median(writer):.3f} s a run, on the other CPU")
    print(
        f"  control: the plain run beside a spinning process: min {min(beside):.3f} s "
        f"({min(beside) / min(plain):.2f} x the plain run alone)"
    )
    print(
        f"  archive: {rows} rows, search state {states / 1e3:.0f} kB; "
        f"{rows / min(archived):,.0f} evaluations stored per second of run"
    )


if __name__ == "__main__":
    main()
