"""Archive benchmark: 10,000 trivial evaluations in-process, without the SQLite archive and with it.

The variants run in the same process, in turn (the order rotates from one repeat to the next), on
the same case and seed, so they do the same search; the difference is the archive (one row per
evaluation, commits at generation ends and at most half a second after each evaluation, the search
state saved at most once a second), written by the archive's writer process. Prints:

- wall-clock times (minimum and median over the repeats);
- the paired ratio to the run without the archive: median and range over the repeats;
- the time the search process spent inside archive calls, and the CPU time of the whole run
  (search process with its threads, plus the writer process);
- a control: the same plain run beside a process that only spins, which shows how much a busy
  second CPU slows the search on this machine (the writer process needs that second CPU).

Target: the archive adds at most 15 % to the run time.

A writer thread fed through a queue was measured against the writer process with this script
(both in turn, and the paired thread/process ratio); it was not within 5 % and was dropped: see
the notes at the top of src/tradewise/store.py, and the commit "Archive, measurement step" for the
code that ran both.

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


def _timed_method(cls, name):
    method = getattr(cls, name)

    @functools.wraps(method)
    def timed(self, *args, **kwargs):
        start = time.perf_counter()
        try:
            return method(self, *args, **kwargs)
        finally:
            inside[name] += time.perf_counter() - start

    return timed


def cpu() -> float:
    """CPU seconds of this process (all its threads) and of its finished children."""
    total = 0.0
    for who in (resource.RUSAGE_SELF, resource.RUSAGE_CHILDREN):
        usage = resource.getrusage(who)
        total += usage.ru_utime + usage.ru_stime
    return total


def run(case, store: Path | None) -> float:
    start = time.perf_counter()
    result = tradewise.run(case, seed=1, evaluations=10_000, population=100, store=store)
    elapsed = time.perf_counter() - start
    assert result.n_evals == 10_000, result.message
    return elapsed


def archived_run(case, store: Path) -> tuple[float, float, float]:
    """Wall time, time inside archive calls and CPU time of one run with the archive."""
    cls = Store
    originals = {name: getattr(cls, name) for name in STORE_CALLS}
    for name in STORE_CALLS:
        setattr(cls, name, _timed_method(cls, name))
    inside.clear()
    before = cpu()
    try:
        elapsed = run(case, store)
    finally:
        for name, method in originals.items():
            setattr(cls, name, method)
    return elapsed, sum(inside.values()), cpu() - before


def spread(values: list[float]) -> str:
    return (
        f"median {statistics.median(values):5.3f}  range {min(values):5.3f} to {max(values):5.3f}"
    )


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()
    case = load_case(CASE)
    run(case, None)  # warm-up: imports, the model module, numpy's first calls
    writers = ("process",)
    plain, plain_cpu = [], []
    wall = {w: [] for w in writers}
    spent = {w: [] for w in writers}
    used = {w: [] for w in writers}
    with tempfile.TemporaryDirectory() as folder:
        for i in range(args.repeats):
            order = ["plain", *writers]
            order = order[i % len(order) :] + order[: i % len(order)]
            for variant in order:
                if variant == "plain":
                    before = cpu()
                    plain.append(run(case, None))
                    plain_cpu.append(cpu() - before)
                    continue
                store = Path(folder) / f"archive-{variant}-{i}.sqlite"
                elapsed, inside_calls, cpu_time = archived_run(case, store)
                wall[variant].append(elapsed)
                spent[variant].append(inside_calls)
                used[variant].append(cpu_time)
        counts = {}
        for variant in writers:
            with sqlite3.connect(
                store.with_name(f"archive-{variant}-{args.repeats - 1}.sqlite")
            ) as db:
                counts[variant] = (
                    db.execute("SELECT COUNT(*) FROM evaluations").fetchone()[0],
                    db.execute("SELECT LENGTH(blob) FROM states").fetchone()[0],
                )
    spinner = subprocess.Popen([sys.executable, "-c", "while True: pass"])
    try:
        time.sleep(0.2)
        beside = [run(case, None) for _ in range(3)]
    finally:
        spinner.kill()
        spinner.wait()
    print(
        f"10,000 trivial evaluations in-process (tests/cases/trivial, population 100, seed 1), "
        f"{args.repeats} repeats"
    )
    print(
        f"  without archive    min {min(plain):6.3f} s   median {statistics.median(plain):6.3f} s   "
        f"CPU median {statistics.median(plain_cpu):.3f} s"
    )
    for variant in writers:
        ratios = [b / a for a, b in zip(plain, wall[variant], strict=True)]
        print(
            f"  {variant + ' writer':<18} min {min(wall[variant]):6.3f} s   median "
            f"{statistics.median(wall[variant]):6.3f} s   CPU median {statistics.median(used[variant]):.3f} s"
        )
        print(f"    ratio to no archive: {spread(ratios)}   (target <= 1.15)")
        print(
            f"    search process inside archive calls: median {statistics.median(spent[variant]):.3f} s a run "
            f"({statistics.median(spent[variant]) / statistics.median(plain):.1%} of the plain run)"
        )
        rows, states = counts[variant]
        print(f"    archive: {rows} rows, search state {states / 1e3:.0f} kB")
    print(
        f"  control: the plain run beside a spinning process: min {min(beside):.3f} s "
        f"({min(beside) / min(plain):.2f} x the plain run alone)"
    )


if __name__ == "__main__":
    main()
