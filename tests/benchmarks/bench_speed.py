"""Speed benchmark: what tradewise costs on top of pymoo, measured side by side in one run.

Prints, as the median and range over a few repeats (the two sides alternate, so a busy machine
slows both):
- a trivial model evaluated one design a call, 10,000 evaluations written to an archive, against
  the plain pymoo NSGA-II loop on an ElementwiseProblem (population 100); target <= 1.1x;
- ZDT1 (Zitzler, Deb, Thiele 2000; 30 variables) as a batch model, 10,000 evaluations with an
  archive, against pymoo's vectorised loop on its own ZDT1 (population 100); target <= 1.3x;
- in a 50,000-evaluation DTLZ2 run (3 objectives; Deb, Thiele, Laumanns, Zitzler 2002), the wall
  time of a generation in the last tenth of the run against one between 10 % and 20 % of it
  (median of each, and the same with means; beside it the same ratio of the search thread's own
  CPU time, which other processes on a busy machine do not sway); target <= 1.3x;
- the wall time of `tradewise --help` and `tradewise cases` in a fresh interpreter, beside that of
  `python -c pass`; target well under a second;
- the peak memory (resident set size, Linux) of a 30,000-evaluation run with 4 objectives (DTLZ2,
  M = 4), in a fresh process (the archive writer's process not counted), beside that of a process that only imports tradewise and pymoo; target
  under 300 MB.

Run:  python tests/benchmarks/bench_speed.py [--repeats 3] [--skip-dtlz2] [--only growth]
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np
from pymoo.algorithms.moo.nsga2 import NSGA2
from pymoo.core.problem import ElementwiseProblem
from pymoo.optimize import minimize
from pymoo.problems import get_problem

import tradewise

CASES = Path(__file__).resolve().parent.parent / "cases"


class _Trivial(ElementwiseProblem):
    """The trivial model of tests/cases/trivial, one design a call."""

    def __init__(self):
        super().__init__(n_var=5, n_obj=2, xl=0.0, xu=1.0)

    def _evaluate(self, x, out, *args, **kwargs):
        a, b, c, d, e = x
        out["F"] = [a * a + b * b + c, (1 - a) ** 2 + d * e]


def _timed(call) -> float:
    start = time.perf_counter()
    call()
    return time.perf_counter() - start


def _summary(ratios: list[float]) -> str:
    return f"median {statistics.median(ratios):.2f}x (range {min(ratios):.2f}-{max(ratios):.2f})"


def trivial(repeats: int, folder: Path) -> list[float]:
    ratios = []
    for seed in range(1, repeats + 1):
        plain = _timed(
            lambda seed=seed: minimize(
                _Trivial(), NSGA2(pop_size=100), ("n_evals", 10_000), seed=seed, verbose=False
            )
        )
        ours = _timed(
            lambda seed=seed: tradewise.run(
                CASES / "trivial",
                seed=seed,
                evaluations=10_000,
                population=100,
                store=folder / f"trivial-{seed}.sqlite",
            )
        )
        ratios.append(ours / plain)
        print(f"  trivial seed {seed}: pymoo {plain:.2f} s, tradewise {ours:.2f} s", flush=True)
    return ratios


def batch_zdt1(repeats: int, folder: Path) -> list[float]:
    # The stall rule off, so that both sides spend the whole budget.
    case = tradewise.load_case(CASES / "zdt1-batch").with_search(stall_generations=0)
    ratios = []
    for seed in range(1, repeats + 1):
        plain = _timed(
            lambda seed=seed: minimize(
                get_problem("zdt1"),
                NSGA2(pop_size=100),
                ("n_evals", 10_000),
                seed=seed,
                verbose=False,
            )
        )
        ours = _timed(
            lambda seed=seed: tradewise.run(
                case,
                seed=seed,
                evaluations=10_000,
                population=100,
                store=folder / f"zdt1-{seed}.sqlite",
            )
        )
        ratios.append(ours / plain)
        print(f"  batch ZDT1 seed {seed}: pymoo {plain:.2f} s, tradewise {ours:.2f} s", flush=True)
    return ratios


def generation_growth(repeats: int, folder: Path) -> dict[str, list[float]]:
    """Late against early generation cost: wall time, and the search thread's own CPU time.

    The CPU time leaves out what other processes on a busy machine take from the run (and the
    archive writer's process); the wall time is what the user waits for.
    """
    ratios: dict[str, list[float]] = {"medians": [], "means": [], "cpu medians": []}
    for seed in range(1, repeats + 1):
        stamps, cpu = [time.perf_counter()], [time.thread_time()]

        def stamp(row, stamps=stamps, cpu=cpu):
            stamps.append(time.perf_counter())
            cpu.append(time.thread_time())

        result = tradewise.run(
            CASES / "dtlz2",
            seed=seed,
            evaluations=50_000,
            store=folder / f"dtlz2-{seed}.sqlite",
            progress=stamp,
        )
        took, used = np.diff(stamps), np.diff(cpu)
        n = len(took)
        early, late = slice(n // 10, n // 5), slice(n - n // 10, n)
        ratios["medians"].append(float(np.median(took[late]) / np.median(took[early])))
        ratios["means"].append(float(np.mean(took[late]) / np.mean(took[early])))
        ratios["cpu medians"].append(float(np.median(used[late]) / np.median(used[early])))
        print(
            f"  DTLZ2 seed {seed}: {n} generations, front {len(result.front)} designs, "
            f"early {1000 * np.median(took[early]):.1f} ms, late {1000 * np.median(took[late]):.1f} ms "
            f"a generation (CPU {1000 * np.median(used[early]):.1f} and "
            f"{1000 * np.median(used[late]):.1f} ms)",
            flush=True,
        )
    return ratios


_DTLZ2_4 = """
title = "DTLZ2, 4 objectives, 13 variables (Deb, Thiele, Laumanns, Zitzler 2002)"
model = "model.py:evaluate"
[variables]
{variables}
[objectives]
f1 = {{ goal = "min" }}
f2 = {{ goal = "min" }}
f3 = {{ goal = "min" }}
f4 = {{ goal = "min" }}
[search]
stall_generations = 0
"""

_DTLZ2_4_MODEL = """
import math

def evaluate(design):
    x = [design[f"x{i}"] for i in range(1, 14)]
    g = sum((v - 0.5) ** 2 for v in x[3:])
    a, b, c = (v * math.pi / 2 for v in x[:3])
    return {
        "f1": (1 + g) * math.cos(a) * math.cos(b) * math.cos(c),
        "f2": (1 + g) * math.cos(a) * math.cos(b) * math.sin(c),
        "f3": (1 + g) * math.cos(a) * math.sin(b),
        "f4": (1 + g) * math.sin(a),
    }
"""

# The high-water mark of this process's resident memory. Not ru_maxrss: on Linux a process started
# with fork and exec keeps its parent's maximum, so a child of a large benchmark process would report
# the benchmark's size.
_PEAK = """
import json
{body}
with open("/proc/self/status") as status:
    peak = next(int(line.split()[1]) for line in status if line.startswith("VmHWM:"))
print(json.dumps({{"self": peak / 1024}}))
"""


def _peak(body: str) -> dict[str, float]:
    out = subprocess.run(
        [sys.executable, "-c", _PEAK.format(body=textwrap.dedent(body))],
        check=True,
        capture_output=True,
        text=True,
    ).stdout
    return json.loads(out.strip().splitlines()[-1])


def peak_memory(repeats: int, folder: Path) -> tuple[list[float], float]:
    case = folder / "dtlz2-4"
    case.mkdir(exist_ok=True)
    variables = "\n".join(
        f'x{i} = {{ type = "real", low = 0.0, high = 1.0 }}' for i in range(1, 14)
    )
    (case / "case.toml").write_text(_DTLZ2_4.format(variables=variables))
    (case / "model.py").write_text(_DTLZ2_4_MODEL)
    base = _peak("import tradewise, tradewise.search, pymoo.algorithms.moo.nsga3")["self"]
    runs = []
    for seed in range(1, repeats + 1):
        got = _peak(
            f"import tradewise\n"
            f"tradewise.run({str(case)!r}, seed={seed}, evaluations=30_000, "
            f"store={str(folder / f'four-{seed}.sqlite')!r})"
        )
        runs.append(got["self"])
        print(f"  4 objectives seed {seed}: peak {got['self']:.0f} MB", flush=True)
    return runs, base


def start_up(repeats: int) -> dict[str, list[float]]:
    """Wall time of `tradewise --help` and `tradewise cases` in a fresh interpreter, and of a bare one."""
    commands = {
        "python -c pass": [sys.executable, "-c", "pass"],
        "tradewise --help": [sys.executable, "-c", _CLI, "--help"],
        "tradewise cases": [sys.executable, "-c", _CLI, "cases"],
    }
    times: dict[str, list[float]] = {name: [] for name in commands}
    for _ in range(repeats + 2):
        for name, command in commands.items():
            times[name].append(
                _timed(
                    lambda command=command: subprocess.run(command, check=True, capture_output=True)
                )
            )
    return times


_CLI = "import sys; from tradewise.cli import main; sys.argv[0] = 'tradewise'; main()"


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--skip-dtlz2", action="store_true")
    parser.add_argument(
        "--only",
        choices=["start-up", "trivial", "batch", "growth", "memory"],
        help="run only this part",
    )
    args = parser.parse_args()
    wanted = {args.only} if args.only else {"start-up", "trivial", "batch", "growth", "memory"}
    if args.skip_dtlz2:
        wanted.discard("growth")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        lines = []
        if "start-up" in wanted:
            times = start_up(args.repeats)
            for name, took in times.items():
                lines.append(
                    f"start-up, {name}: median {statistics.median(took):.2f} s "
                    f"(range {min(took):.2f}-{max(took):.2f})"
                )
        if "trivial" in wanted:
            ratios = trivial(args.repeats, folder)
            lines.append(
                f"trivial model, 10,000 evaluations with archive: {_summary(ratios)} (target <= 1.1x)"
            )
        if "batch" in wanted:
            ratios = batch_zdt1(args.repeats, folder)
            lines.append(
                f"batch ZDT1, 10,000 evaluations with archive: {_summary(ratios)} (target <= 1.3x)"
            )
        if "growth" in wanted:
            ratios = generation_growth(args.repeats, folder)
            lines.append(
                f"DTLZ2 50,000 evaluations, late/early generation: {_summary(ratios['medians'])} "
                f"on medians, {_summary(ratios['means'])} on means (target <= 1.3x); the search "
                f"thread's CPU time: {_summary(ratios['cpu medians'])} on medians"
            )
        if "memory" in wanted:
            runs, base = peak_memory(args.repeats, folder)
            lines.append(
                f"4 objectives, 30,000 evaluations, peak memory: median {statistics.median(runs):.0f} MB "
                f"(range {min(runs):.0f}-{max(runs):.0f}); importing tradewise and pymoo alone "
                f"{base:.0f} MB (target < 300 MB; the archive writer's own process not counted)"
            )
    print()
    print("\n".join(lines))


if __name__ == "__main__":
    main()
