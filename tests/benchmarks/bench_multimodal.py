"""Multimodal benchmark: tradewise's default search (stall rule on) against plain pymoo NSGA-II, one run.

On DTLZ1 (3 objectives, 7 variables; Deb, Thiele, Laumanns, Zitzler 2002) and ZDT4 (10 variables;
Zitzler, Deb, Thiele 2000), both at 20,000 evaluations, prints per seed and as median [min, max]
over the seeds: IGD+ (moocore) of tradewise's front (every feasible design it evaluated) and of
plain pymoo NSGA-II's final population (population 100, pymoo's default operators), against
densely sampled true fronts; the evaluations each used and why tradewise stopped; and the ratio
of the medians (tradewise / pymoo; at most 1 is the goal).

True fronts (closed form): DTLZ1, the plane f1 + f2 + f3 = 0.5 with every f >= 0; ZDT4,
f2 = 1 - sqrt(f1) for f1 in [0, 1].

Run:  python tests/benchmarks/bench_multimodal.py [--seeds 5] [--problems dtlz1,zdt4] [--no-stall]
"""

from __future__ import annotations

import argparse
import statistics
import time
from pathlib import Path

import moocore
import numpy as np
from pymoo.algorithms.moo.nsga2 import NSGA2
from pymoo.core.problem import Problem
from pymoo.optimize import minimize
from pymoo.util.ref_dirs import get_reference_directions

import tradewise

CASES = Path(__file__).resolve().parent.parent / "cases"
BUDGET = 20_000


class _DTLZ1(Problem):
    def __init__(self) -> None:
        super().__init__(n_var=7, n_obj=3, xl=0.0, xu=1.0)

    def _evaluate(self, X, out, *args, **kwargs):
        tail = X[:, 2:] - 0.5
        g = 100 * (5 + np.sum(tail**2 - np.cos(20 * np.pi * tail), axis=1))
        half = 0.5 * (1 + g)
        out["F"] = np.column_stack(
            [half * X[:, 0] * X[:, 1], half * X[:, 0] * (1 - X[:, 1]), half * (1 - X[:, 0])]
        )


class _ZDT4(Problem):
    def __init__(self) -> None:
        xl = np.full(10, -5.0)
        xu = np.full(10, 5.0)
        xl[0], xu[0] = 0.0, 1.0
        super().__init__(n_var=10, n_obj=2, xl=xl, xu=xu)

    def _evaluate(self, X, out, *args, **kwargs):
        g = 1 + 10 * 9 + np.sum(X[:, 1:] ** 2 - 10 * np.cos(4 * np.pi * X[:, 1:]), axis=1)
        out["F"] = np.column_stack([X[:, 0], g * (1 - np.sqrt(X[:, 0] / g))])


def true_front(name: str) -> np.ndarray:
    if name == "dtlz1":
        return 0.5 * get_reference_directions("das-dennis", 3, n_partitions=99)  # 5,050 points
    f1 = np.linspace(0.0, 1.0, 5000)
    return np.column_stack([f1, 1 - np.sqrt(f1)])


PROBLEMS = {"dtlz1": _DTLZ1, "zdt4": _ZDT4}


def run_pymoo(name: str, seed: int) -> tuple[np.ndarray, int]:
    res = minimize(
        PROBLEMS[name](), NSGA2(pop_size=100), ("n_evals", BUDGET), seed=seed, verbose=False
    )
    return res.F, res.algorithm.evaluator.n_eval


def run_ours(name: str, seed: int, stall: bool) -> tuple[np.ndarray, int, str]:
    extra = {} if stall else {"stall_generations": 0}
    from tradewise.case import load_case

    case = load_case(CASES / name)
    if extra:
        case = case.with_search(**extra)
    result = tradewise.run(case, seed=seed, evaluations=BUDGET)
    return result.front.points(), result.n_evals, result.status


def _spread(values: list[float]) -> str:
    return f"{statistics.median(values):.4g} [{min(values):.4g}, {max(values):.4g}]"


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=5)
    parser.add_argument("--problems", default="dtlz1,zdt4")
    parser.add_argument("--no-stall", action="store_true", help="turn tradewise's stall rule off")
    args = parser.parse_args()
    started = time.monotonic()
    for name in args.problems.split(","):
        reference = true_front(name)
        ours, theirs, evals, stops = [], [], [], []
        for seed in range(1, args.seeds + 1):
            F, n_ours, status = run_ours(name, seed, stall=not args.no_stall)
            G, n_theirs = run_pymoo(name, seed)
            ours.append(float(moocore.igd_plus(F, ref=reference)))
            theirs.append(float(moocore.igd_plus(G, ref=reference)))
            evals.append(n_ours)
            stops.append(status)
            print(
                f"{name} seed {seed}: tradewise IGD+ {ours[-1]:.4g} after {n_ours} evaluations ({status}); "
                f"pymoo NSGA-II IGD+ {theirs[-1]:.4g} after {n_theirs}",
                flush=True,
            )
        ratio = statistics.median(ours) / statistics.median(theirs)
        print(
            f"{name}: IGD+ median [min, max] tradewise {_spread(ours)}, pymoo {_spread(theirs)}; "
            f"ratio of medians {ratio:.3g} (goal <= 1); evaluations {_spread(evals)}; stops {stops}"
        )
    print(f"wall time {time.monotonic() - started:.0f} s")


if __name__ == "__main__":
    main()
