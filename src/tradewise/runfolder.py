"""The run folder: every file in it is written and read here.

``front.csv`` and ``front.json`` (the front and what describes it),
``history.csv`` (one row a generation), ``least_infeasible.csv`` when nothing
was feasible, and for a set of seeds ``seeds.csv``, ``seeds/seed-N/``,
``attainment.csv`` and, for two objectives, ``disagreement.csv``. The
archive (``archive.sqlite``) is the store's.
"""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path
from typing import Any

import pandas as pd

from tradewise.compare import attainment, write_attainment

__all__ = ["save_run", "save_seeds", "seed_attainment"]


def save_run(result: Any, folder: str | Path) -> dict[str, Path]:
    """Write a run folder: ``front.csv``, ``front.json`` and ``history.csv``.

    When no feasible design was found, ``least_infeasible.csv`` is written
    instead of an empty front, and ``front.json`` says so.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written: dict[str, Path] = {}
    meta = dict(result.front.meta)
    meta.update({"message": result.message, "hypervolume": result.hypervolume,
                 "store": result.store_path.name if result.store_path else None, "run_id": result.run_id})
    front = replace(result.front, meta=meta)
    if len(front):
        written["front"], written["meta"] = front.to_csv(folder / "front.csv")
    else:
        stale = folder / "front.csv"
        if stale.exists():
            stale.unlink()
        meta_path = folder / "front.json"
        meta_path.write_text(json.dumps(front.metadata() | {"feasible": False}, indent=2, default=str) + "\n",
                             encoding="utf-8")
        written["meta"] = meta_path
        if result.least_infeasible is not None:
            path = folder / "least_infeasible.csv"
            result.least_infeasible.to_csv(path, index=False)
            written["least_infeasible"] = path
    path = folder / "history.csv"
    result.history.to_csv(path, index=False)
    written["history"] = path
    return written


def save_seeds(result: Any, folder: str | Path) -> dict[str, Path]:
    """Write a run folder for several seeds.

    The merged front goes where a single run's would (``front.csv``,
    ``front.json``, ``history.csv`` with a ``seed`` column), each seed's own
    run folder to ``seeds/seed-N/``, and ``seeds.csv`` holds one row a seed:
    its status, evaluations, generations, failures, front size and
    hypervolume on the common reference point.
    """
    folder = Path(folder)
    written = save_run(result, folder)
    rows = []
    for run, hv in zip(result.runs, result.hypervolumes, strict=True):
        save_run(run, folder / "seeds" / f"seed-{run.seed}")
        rows.append({"seed": run.seed, "run_id": run.run_id, "status": run.status, "evaluations": run.n_evals,
                     "generations": run.n_gen, "failed": run.n_failed, "front_size": len(run.front),
                     "hypervolume": hv})
    path = folder / "seeds.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    written["seeds"] = path
    spread = seed_attainment(result)
    if spread is not None:
        written.update(write_attainment(spread, folder))
    return written


def seed_attainment(result: Any):
    """The attainment surfaces of a set of seeds on its common reference point (None for one seed, or
    more than three objectives, or no front at all)."""
    fronts = [run.front for run in result.runs]
    if len(result.runs) < 2 or not any(len(f) for f in fronts) or len(result.front.objectives) > 3:
        return None
    return attainment(fronts, reference=result.reference)
