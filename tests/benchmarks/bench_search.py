"""Search benchmark: tradewise defaults against plain pymoo NSGA-II, side by side in one run.

Prints, per problem, the median over seeds of the evaluations needed to reach 99 % of the true
front's hypervolume (objectives normalised by the true ideal (0) and nadir (1), reference point
1.1), and the wall time of 10,000 trivial evaluations, tradewise against the plain pymoo loop.

Exact hypervolumes for reference 1.1 (closed forms, see the shared reference values):
ZDT1 0.21 + 2/3, ZDT2 0.21 + 1/3 (Zitzler, Deb, Thiele 2000), ZDT3 1.3317629087 (numerical
integration of the front curve), DTLZ2 1.1^3 - pi/6 (Deb, Thiele, Laumanns, Zitzler 2002).

Run:  python tests/benchmarks/bench_search.py [--seeds 5] [--quick]
"""

from __future__ import annotations

import argparse
import statistics
import time
from pathlib import Path

import moocore
import numpy as np
from pymoo.algorithms.moo.nsga2 import NSGA2
from pymoo.core.callback import Callback
from pymoo.core.problem import ElementwiseProblem
from pymoo.optimize import minimize
from pymoo.problems import get_problem

import tradewise

CASES = Path(__file__).resolve().parent.parent / "cases"
EXACT = {
    "zdt1": 0.21 + 2 / 3,
    "zdt2": 0.21 + 1 / 3,
    "zdt3": 1.3317629087,
    "dtlz2": 1.1**3 - np.pi / 6,
}
BUDGET = {"zdt1": 25_000, "zdt2": 25_000, "zdt3": 25_000, "dtlz2": 50_000}


def _pymoo_problem(name: str):
    if name == "dtlz2":
        return get_problem("dtlz2", n_var=12, n_obj=3)
    return get_problem(name)


class _Watch(Callback):
    """Records the evaluations at which the final population's HV first reaches the target."""

    def __init__(self, target: float) -> None:
        super().__init__()
        self.target, self.hit = target, None

    def notify(self, algorithm):
        if self.hit is None:
            F = algorithm.pop.get("F")
            if moocore.hypervolume(F, ref=np.full(F.shape[1], 1.1)) >= self.target:
                self.hit = algorithm.evaluator.n_eval


def plain_pymoo(name: str, seed: int) -> int | None:
    watch = _Watch(0.99 * EXACT[name])
    minimize(
        _pymoo_problem(name),
        NSGA2(pop_size=100),
        ("n_evals", BUDGET[name]),
        seed=seed,
        callback=watch,
        verbose=False,
    )
    return watch.hit


def tradewise_defaults(name: str, seed: int) -> int | None:
    target = 0.99 * EXACT[name]
    hit: list[int] = []
    front = None
    objectives = ["f1", "f2", "f3"] if name == "dtlz2" else ["f1", "f2"]

    state = {"rows": []}

    def on_eval(row):
        if row["status"] == "ok":
            state["rows"].append([row[o] for o in objectives])

    def on_gen(row):
        nonlocal front
        if hit or not state["rows"]:
            return
        new = np.asarray(state["rows"])
        state["rows"] = []
        front = new if front is None else np.vstack([front, new])
        front = front[moocore.is_nondominated(front)]
        if moocore.hypervolume(front, ref=np.full(len(objectives), 1.1)) >= target:
            hit.append(row["evaluations"])

    # Only the budget comes from here; population, operators and stopping are the tool's defaults.
    tradewise.run(
        CASES / name, seed=seed, evaluations=BUDGET[name], progress=on_gen, on_evaluation=on_eval
    )
    return hit[0] if hit else None


def _median(values):
    known = [v for v in values if v is not None]
    if len(known) < len(values):
        return None
    return statistics.median(known)


class _Trivial(ElementwiseProblem):
    def __init__(self):
        super().__init__(n_var=5, n_obj=2, xl=0.0, xu=1.0)

    def _evaluate(self, x, out, *args, **kwargs):
        a, b, c, d, e = x
        out["F"] = [a * a + b * b + c, (1 - a) ** 2 + d * e]


def overhead(repeats: int = 3) -> tuple[float, float]:
    plain, ours = [], []
    for seed in range(1, repeats + 1):
        start = time.perf_counter()
        minimize(_Trivial(), NSGA2(pop_size=100), ("n_evals", 10_000), seed=seed, verbose=False)
        plain.append(time.perf_counter() - start)
        start = time.perf_counter()
        tradewise.run(CASES / "trivial", seed=seed, evaluations=10_000, population=100)
        ours.append(time.perf_counter() - start)
    return statistics.median(plain), statistics.median(ours)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=5)
    parser.add_argument("--problems", default="zdt1,zdt2,zdt3,dtlz2")
    args = parser.parse_args()
    print("evaluations to reach 99% of the exact hypervolume (ref 1.1), median over seeds")
    print(
        f"{'problem':<8}{'tradewise':>12}{'plain pymoo':>14}{'ratio':>8}   per seed (tradewise / pymoo)"
    )
    for name in args.problems.split(","):
        ours = [tradewise_defaults(name, s) for s in range(1, args.seeds + 1)]
        theirs = [plain_pymoo(name, s) for s in range(1, args.seeds + 1)]
        a, b = _median(ours), _median(theirs)
        ratio = f"{a / b:.2f}" if a and b else "-"
        show = lambda v: "never" if v is None else f"{v:.0f}"  # noqa: E731
        print(f"{name:<8}{show(a):>12}{show(b):>14}{ratio:>8}   {ours} / {theirs}", flush=True)
    plain, mine = overhead()
    print(
        f"10,000 trivial evaluations: plain pymoo loop {plain:.2f} s, tradewise {mine:.2f} s, "
        f"ratio {mine / plain:.2f} (target <= 1.3)"
    )


if __name__ == "__main__":
    main()
