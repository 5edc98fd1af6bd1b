"""Surrogate benchmark: `surrogate = true` against the default search, side by side in one run.

For each problem and seed it prints the hypervolume ratio (the front of every feasible design
evaluated so far, objectives normalised by the exact front's ideal and nadir, reference 1.1,
over the exact front's value) after 50, 100 and 200 evaluations, and the evaluations needed
to reach 95 % of it (DTLZ2 runs to 400 evaluations, as it reaches 95 % only after 200); then, per problem, the medians over seeds, the ratio of the default
search's evaluations to the surrogate's, and the surrogate's own time per proposed design
(model fitting and searching, from history.csv's model_seconds) next to the default search's
time per evaluation in the same run. That time is wall-clock time: on a machine shared with other
work it grows with the load (DTLZ2 in one run: 0.35 and 0.26 s a design for seeds 1 and 2 with
about five other busy processes on two cores, 0.075 s for seed 3 once they had ended), so compare
two versions side by side, started together.

Two objectives pick by the expected hypervolume improvement, three by the hypervolume
improvement of the predicted values, each pick then polished by a compass search on that
criterion (src/tradewise/surrogate.py gives the measurements behind each choice). On a shared
machine, compare the surrogate's overhead as CPU time of two versions run side by side.

Problems (tests/problems.py): ZDT1 and ZDT2 with 6 variables (Zitzler, Deb and Thiele 2000),
DTLZ2 with 3 objectives and 6 variables (Deb, Thiele, Laumanns and Zitzler 2002), BNH with two
constraints (Binh and Korn 1997, from memory). A bundled case, `--problems compression-spring`
(mixed: two reals, an integer and a choice of four wires; two constraints): it has no published
front, so its ratios are against the front of a long default search of the case (20,000
evaluations, seed 1) run first, normalised by that front's ideal and nadir, reference 1.1.

Run:  python tests/benchmarks/bench_surrogate.py [--seeds 3]
      [--problems zdt1,zdt2,dtlz2,bnh,compression-spring]
      [--workers 1]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import moocore
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import tradewise  # noqa: E402
from problems import PROBLEMS, Problem, write_problem  # noqa: E402

SURROGATE_BUDGET = {"zdt1": 100, "zdt2": 200, "dtlz2": 400, "bnh": 100, "compression-spring": 200}
DEFAULT_BUDGET = {
    "zdt1": 8000,
    "zdt2": 8000,
    "dtlz2": 30000,
    "bnh": 4000,
    "compression-spring": 8000,
}
#: Bundled cases measured against the front of a long default search of their own.
BUNDLED = {"compression-spring": 20_000}
CHECKS = (50, 100, 200)
TARGET = 0.95


def _curve(result, problem) -> tuple[dict[int, float], int | None]:
    """Hypervolume ratio after each checkpoint, and the first evaluation count reaching TARGET."""
    table = result.evaluations
    table = table[~table["cached"]].sort_values("eval_id")
    names = result.case.objective_names
    feasible = table["feasible"].to_numpy()
    points = table[names].to_numpy(float) * _flip(result.case)
    n = len(table)
    step = 1 if n <= 400 else 25
    hit, ratios = None, {}
    for k in range(step, n + step, step):
        k = min(k, n)
        ratio = problem.ratio(points[:k][feasible[:k]])
        if hit is None and ratio >= TARGET:
            hit = k
        if k in CHECKS:
            ratios[k] = ratio
        if hit is not None and all(c in ratios or c > n for c in CHECKS):
            break
    for c in CHECKS:
        if c <= n and c not in ratios:
            ratios[c] = problem.ratio(points[:c][feasible[:c]])
    return ratios, hit


def _flip(case) -> np.ndarray:
    """-1 for maximised objectives: every point is compared as minimised."""
    return np.where(case.maximise, -1.0, 1.0)


def _bundled_problem(name: str, evaluations: int) -> tuple[Path, Problem]:
    """A bundled case and its best known front: that of a long default search, normalised."""
    case = Path(tradewise.load_case(name).folder)
    best = tradewise.run(case, evaluations=evaluations, seed=1)
    front = best.front.points() * _flip(best.case)
    ideal, nadir = front.min(axis=0), front.max(axis=0)
    scaled = (front - ideal) / (nadir - ideal)
    exact = float(moocore.hypervolume(scaled, ref=np.full(scaled.shape[1], 1.1)))
    print(
        f"{name}: best known front from {evaluations:,} evaluations of the default search, "
        f"{len(front)} designs",
        flush=True,
    )
    return case, Problem(name, tuple(ideal), tuple(nadir), exact)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=3)
    parser.add_argument("--problems", default="zdt1,zdt2,dtlz2,bnh,compression-spring")
    parser.add_argument("--workers", type=int, default=1)
    args = parser.parse_args()
    root = Path(tempfile.mkdtemp())
    for name in args.problems.split(","):
        if name in BUNDLED:
            case, problem = _bundled_problem(name, BUNDLED[name])
        else:
            problem = PROBLEMS[name]
            case = write_problem(root / name, name, 6)
        rows = []
        for seed in range(1, args.seeds + 1):
            started = time.monotonic()
            fast = tradewise.run(
                case,
                surrogate=True,
                evaluations=SURROGATE_BUDGET[name],
                seed=seed,
                workers=args.workers if args.workers > 1 else None,
            )
            fast_wall = time.monotonic() - started
            started = time.monotonic()
            plain = tradewise.run(case, evaluations=DEFAULT_BUDGET[name], seed=seed)
            plain_wall = time.monotonic() - started
            f_ratios, f_hit = _curve(fast, problem)
            p_ratios, p_hit = _curve(plain, problem)
            model_seconds = fast.history.get("model_seconds")
            proposed = int((fast.history.get("surrogate") == "models").sum() * max(1, args.workers))
            per_design = (
                float(model_seconds.sum()) / max(proposed, 1)
                if model_seconds is not None
                else float("nan")
            )
            rows.append(
                (
                    f_ratios,
                    f_hit,
                    p_ratios,
                    p_hit,
                    per_design,
                    plain_wall / max(plain.n_evals, 1),
                    fast_wall,
                )
            )
            print(
                f"{name} seed {seed}: surrogate HV ratio "
                + ", ".join(f"{k}: {v:.4f}" for k, v in sorted(f_ratios.items()))
                + f"; to {TARGET:.0%}: {f_hit or 'not within ' + str(fast.n_evals)}"
                + " | default "
                + ", ".join(f"{k}: {v:.4f}" for k, v in sorted(p_ratios.items()))
                + f"; to {TARGET:.0%}: {p_hit or 'not within ' + str(plain.n_evals)}"
                + f" | surrogate {per_design:.3f} s a proposed design, wall {fast_wall:.0f} s;"
                f" {fast.message.split('The models')[-1][:90] if 'The models' in fast.message else ''}",
                flush=True,
            )
        for c in CHECKS:
            values = [r[0][c] for r in rows if c in r[0]]
            base = [r[2][c] for r in rows if c in r[2]]
            if values:
                print(
                    f"{name}: median HV ratio after {c}: surrogate {statistics.median(values):.4f}, default {statistics.median(base):.4f}"
                )
        f_hits = [r[1] for r in rows]
        p_hits = [r[3] for r in rows]
        if all(f_hits) and all(p_hits):
            f_med, p_med = statistics.median(f_hits), statistics.median(p_hits)
            print(
                f"{name}: evaluations to {TARGET:.0%}: surrogate {f_med:g}, default {p_med:g}, ratio {p_med / f_med:.1f}x"
            )
        else:
            print(
                f"{name}: evaluations to {TARGET:.0%}: surrogate {f_hits}, default {p_hits} (None: not reached)"
            )
        per = statistics.median(r[4] for r in rows)
        base = statistics.median(r[5] for r in rows)
        print(
            f"{name}: surrogate time a proposed design {per:.3f} s (median); default search "
            f"{base * 1000:.2f} ms an evaluation; ratio {per / base:.0f}x",
            flush=True,
        )


if __name__ == "__main__":
    np.seterr(all="ignore")
    main()
