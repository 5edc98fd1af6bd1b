"""How long `tradewise pick` takes on a large three-objective front, step by step.

Goal: `pick` (CLI, default method, with every method it runs for the comparison) on 10^5
three-objective designs answers in under 30 s on a 2-core machine, and finds a few knees on
that noisy front, not hundreds. Times are printed as ratios to moocore's non-dominated filter
on the same points, measured in the same run.

    python tests/benchmarks/bench_pick.py [N]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import moocore
import numpy as np
import pandas as pd
from click.testing import CliRunner

from tradewise import choose
from tradewise.case import Objective
from tradewise.cli import main
from tradewise.front import Front, tradeoff_rates


def invented_front(n: int, seed: int = 1) -> np.ndarray:
    """Invented demo data: n designs on a front that bulges toward the ideal point, with noise."""
    rng = np.random.default_rng(seed)
    x = np.abs(rng.normal(size=(n, 3)))
    x /= np.linalg.norm(x, axis=1, keepdims=True)
    points = 1.0 - x + rng.normal(scale=1e-4, size=x.shape)
    return points * [120.0, 3.5, 40.0] + [10.0, 0.5, 5.0]


def timed(label: str, function, baseline: float | None = None):
    start = time.perf_counter()
    result = function()
    spent = time.perf_counter() - start
    ratio = f"  ({spent / baseline:8.1f} x the non-dominated filter)" if baseline else ""
    print(f"  {label:<34} {spent:8.3f} s{ratio}", flush=True)
    return result, spent


def main_bench(n: int) -> None:
    points = invented_front(n)
    keep = moocore.is_nondominated(points)
    points = points[keep]
    print(f"{len(points)} non-dominated designs of {n} (3 objectives, invented data)")
    _, base = timed("moocore.is_nondominated (baseline)", lambda: moocore.is_nondominated(points))
    names = ["cost", "mass", "loss"]
    front = Front.from_table(pd.DataFrame(points, columns=names), [Objective(x) for x in names])
    scaled = choose.normalised(front)
    print("per step:")
    timed("normalise", lambda: choose.normalised(front), base)
    timed("knee distance", lambda: choose.knee_distance(scaled), base)
    verdict, _ = timed("knee verdict (find_knees)", lambda: choose.find_knees(front), base)
    timed("trade-off measure", lambda: choose.tradeoff_measure(scaled), base)
    timed("pseudo-weights", lambda: choose.pseudo_weights(scaled), base)
    timed("asf", lambda: choose.asf(scaled), base)
    timed("topsis", lambda: choose.topsis(points), base)
    timed(
        "weighted sum + reachability",
        lambda: (choose.weighted_sum(scaled), choose.supported(scaled)),
        base,
    )
    timed("hypervolume contributions", front.contributions, base)
    timed("trade-off rates at one design", lambda: tradeoff_rates(front, 0), base)
    with tempfile.TemporaryDirectory() as folder:
        path = front.to_csv(Path(folder) / "front.csv")[0]
        result, spent = timed(
            "tradewise pick (whole command)",
            lambda: CliRunner().invoke(main, ["pick", str(path)]),
            base,
        )
    if result.exit_code != 0:
        raise SystemExit(f"pick failed: {result.output}")
    print(
        f"goal: under 30 s for 10^5 designs; {'met' if spent < 30 else 'NOT met'} ({spent:.1f} s)"
    )
    # one knee a region: the count must stay small however many designs the front holds
    print(f"knees found: {len(verdict.knees)} (goal: a few, not one per noisy bump)")
    for line in result.stdout.splitlines()[:4]:
        print("  | " + line)


if __name__ == "__main__":
    main_bench(int(sys.argv[1]) if len(sys.argv) > 1 else 100_000)
