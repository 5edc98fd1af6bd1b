"""Several runs of one case, one a seed: run them, resume them, merge their fronts on one reference point."""

from __future__ import annotations

import math
import uuid
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from tradewise import format as _format
from tradewise import search
from tradewise.case import Case, load_case
from tradewise.errors import StoreError
from tradewise.executors import make_executor
from tradewise.front import Front, hypervolume, hypervolume_box, hypervolume_share, nondominated
from tradewise.runinfo import RunInfo, SeedSet
from tradewise.search import STATUS_TEXT, RunResult, _case_of_run, _front_sentence
from tradewise.store import open_store

__all__ = ["SeedsResult", "run_seeds", "resume_seeds"]

_COMMON_REFERENCE = "the worst, per objective, of the seeds' own reference points"


@dataclass(frozen=True)
class SeedsResult:
    """Several independent runs of one case, one a seed, and their merged front.

    ``front`` is the non-dominated union of the runs' fronts; its column
    ``seed`` (``run_seed`` when the case already uses that name) says which
    run found each design. ``runs`` holds each run's :class:`RunResult` in
    seed order; ``hypervolumes`` each run's hypervolume and ``hypervolume``
    the merged front's, all on the one ``reference`` point (the worst, per
    objective, of the runs' own reference points). ``history`` holds every
    run's generations, with the seed in the first column.
    """

    status: str
    message: str
    front: Front
    runs: tuple[RunResult, ...]
    seeds: tuple[int, ...]
    hypervolumes: tuple[float, ...]
    hypervolume: float
    reference: tuple[float, ...] | None
    history: pd.DataFrame
    n_evals: int
    n_gen: int
    n_failed: int
    n_cached: int
    seed: int
    case: Case
    store_path: Path | None = None
    run_id: int | None = None
    least_infeasible: pd.DataFrame | None = None

    @property
    def info(self) -> RunInfo:
        """What the set recorded about itself (its merged front's :class:`~tradewise.runinfo.RunInfo`)."""
        return self.front.info

    @property
    def spread(self) -> dict[str, float]:
        """Median, smallest and largest hypervolume of the single runs."""
        return _spread(self.hypervolumes)

    def __repr__(self) -> str:
        s = self.spread
        return (
            f"SeedsResult({len(self.runs)} seeds, front={len(self.front)} designs, hypervolume={_format.number(self.hypervolume)}, "
            f"single runs median {_format.number(s['median'])} [{_format.number(s['min'])}, "
            f"{_format.number(s['max'])}])"
        )


def _spread(values: Any) -> dict[str, float]:
    values = np.asarray(values, dtype=float)
    if len(values) == 0:
        return {"median": math.nan, "min": math.nan, "max": math.nan}
    return {
        "median": float(np.median(values)),
        "min": float(values.min()),
        "max": float(values.max()),
    }


def _one_seed_of_set(
    case: Case,
    seed: int,
    store: str | Path | None,
    seed_set: dict[str, Any],
    run_id: int | None,
    evaluations: int | None,
    **where: Any,
) -> RunResult:
    """One run of a set of seeds: resumed when it has a ``run_id``, else started.

    ``where`` holds ``workers`` or ``executor`` and the callbacks. Module
    level, so that a process pool can run it.
    """
    if run_id is not None:
        return search.resume(store, run_id=run_id, evaluations=evaluations, case=case, **where)
    return search.run(case, seed=seed, store=store, seed_set=seed_set, **where)


def run_seeds(
    case: Case | str | Path,
    n_seeds: int = 5,
    *,
    seed: int | None = None,
    evaluations: int | None = None,
    generations: int | None = None,
    population: int | None = None,
    time_limit: float | None = None,
    store: str | Path | None = None,
    workers: int | None = None,
    dask: bool = False,
    scheduler: str | None = None,
    progress: Callable[[dict[str, Any]], None] | None = None,
    on_evaluation: Callable[[dict[str, Any]], None] | None = None,
    on_run: Callable[[RunResult], None] | None = None,
) -> SeedsResult:
    """Run a case ``n_seeds`` times with seeds ``seed``, ``seed + 1``, ... and merge the fronts.

    Each run is an ordinary :func:`run` with the same settings and its
    own seed; all of them write to the one archive ``store``. With
    ``workers > 1`` (and no Dask) whole runs go to separate processes, up to
    one a seed, each evaluating in its own process (workers left over are
    shared out as a process pool inside each run); otherwise the runs follow
    one another, each spreading its evaluations over the chosen executor.

    Runs share the archive, so a design one run has already evaluated is
    served to another from it; with real variables this practically never
    happens, but on small discrete spaces it lets later runs go further on
    the same budget, and with runs in parallel which run gets there first
    depends on timing.

    Parameters
    ----------
    case : Case, str or Path
        A loaded case, a case folder or ``case.toml``, or a bundled case name.
    n_seeds : int
        How many runs (1 or more).
    seed : int, optional
        The first seed (default: the case's).
    evaluations, generations, population, time_limit :
        Settings for every run; ``None`` keeps the case's.
    store, workers, dask, scheduler :
        As for :func:`run`.
    progress, on_evaluation : callable, optional
        As for :func:`run` (the row also carries ``seed``); only called
        when the runs follow one another.
    on_run : callable, optional
        Called with each run's result as it finishes.

    Returns
    -------
    SeedsResult

    Examples
    --------
    >>> result = run_seeds("heat-sink", 5, evaluations=600, workers=5)   # doctest: +SKIP
    >>> result.spread                                                     # doctest: +SKIP
    {'median': ..., 'min': ..., 'max': ...}
    """
    from tradewise.errors import CaseError

    if isinstance(n_seeds, bool) or not isinstance(n_seeds, int | np.integer) or n_seeds < 1:
        raise CaseError(f"seeds: got {n_seeds!r}, allowed: a whole number of runs, 1 or more")
    if not isinstance(case, Case):
        case = load_case(case)
    case = case.with_search(
        seed=seed,
        evaluations=evaluations,
        generations=generations,
        population=population,
        time_limit=time_limit,
    )
    seeds = [case.search.seed + i for i in range(int(n_seeds))]
    if store is not None:
        # Create the file and switch it to WAL once, before several writers open it.
        open_store(store).close()
    seed_set = {"id": uuid.uuid4().hex, "seeds": seeds}
    return _run_seed_set(
        case,
        seeds,
        {},
        seed_set=seed_set,
        store=store,
        workers=workers,
        dask=dask,
        scheduler=scheduler,
        progress=progress,
        on_evaluation=on_evaluation,
        on_run=on_run,
    )


def _run_seed_set(
    case: Case,
    seeds: list[int],
    existing: dict[int, int],
    *,
    seed_set: dict[str, Any],
    store: str | Path | None,
    workers: int | None,
    dask: bool,
    scheduler: str | None,
    progress,
    on_evaluation,
    on_run,
    evaluations: int | None = None,
) -> SeedsResult:
    """Run (or, for seeds in ``existing``, resume by run id) every seed of a set, and merge their fronts."""
    import concurrent.futures as cf
    import contextlib

    results: dict[int, RunResult] = {}
    interrupted = False
    parallel = bool(workers and workers > 1 and not (dask or scheduler) and len(seeds) > 1)
    if parallel:
        n_proc = min(int(workers), len(seeds))
        inner = int(workers) // n_proc
        pool = cf.ProcessPoolExecutor(max_workers=n_proc)
        futures = {
            pool.submit(
                _one_seed_of_set,
                case,
                s,
                store,
                seed_set,
                existing.get(s),
                evaluations,
                workers=inner if inner > 1 else None,
            ): s
            for s in seeds
        }
        try:
            for future in cf.as_completed(futures):
                results[futures[future]] = future.result()
                if on_run:
                    on_run(results[futures[future]])
        except KeyboardInterrupt:
            # The runs got the interrupt too and stop at their next generation; keep what they return.
            interrupted = True
            for future, s in futures.items():
                if future.cancel() or s in results:
                    continue
                # A run that died on the interrupt has nothing to give.
                with contextlib.suppress(BaseException):
                    results[s] = future.result()
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
    else:
        executor = make_executor(workers, dask=dask, scheduler=scheduler)
        try:
            for s in seeds:
                tagged = (lambda row, s=s: progress({**row, "seed": s})) if progress else None
                result = _one_seed_of_set(
                    case,
                    s,
                    store,
                    seed_set,
                    existing.get(s),
                    evaluations,
                    executor=executor,
                    progress=tagged,
                    on_evaluation=on_evaluation,
                )
                results[s] = result
                if on_run:
                    on_run(result)
                if result.status == "interrupted":
                    interrupted = True
                    break
        finally:
            executor.close()
    if not results:
        raise KeyboardInterrupt
    missing = [s for s in seeds if s not in results]
    return _merge_repeats(
        case, [results[s] for s in seeds if s in results], interrupted=interrupted, missing=missing
    )


def resume_seeds(
    store: str | Path,
    *,
    run_id: int | None = None,
    evaluations: int | None = None,
    case: Case | str | Path | None = None,
    workers: int | None = None,
    dask: bool = False,
    scheduler: str | None = None,
    progress: Callable[[dict[str, Any]], None] | None = None,
    on_evaluation: Callable[[dict[str, Any]], None] | None = None,
    on_run: Callable[[RunResult], None] | None = None,
) -> SeedsResult:
    """Continue a set of seeds made by :func:`run_seeds`: every unfinished seed resumed, every seed that
    never started run, and the fronts merged again.

    ``run_id`` is any run of the set (default: the newest in the file); the
    other parameters are as for :func:`resume`. Finished seeds are
    read back from the archive without evaluating anything.
    """
    path = Path(store)
    with open_store(path, create=False) as archive:
        run_id = run_id if run_id is not None else archive.latest_run()
        record = archive.run(run_id)
        seed_set = (record["settings"] or {}).get("seed_set")
        if not isinstance(seed_set, dict) or not isinstance(seed_set.get("seeds"), list):
            raise StoreError(
                f"{path}: run {run_id} is a single run, not one of a set of seeds; use resume"
            )
        existing: dict[int, int] = {}
        for other in archive.runs()["run_id"].tolist():
            other_record = archive.run(int(other))
            if ((other_record["settings"] or {}).get("seed_set") or {}).get("id") == seed_set["id"]:
                existing[int(other_record["seed"])] = int(other)
    loaded = _case_of_run(path, record, case)
    settings = {
        k: v
        for k, v in record["settings"].items()
        if k not in ("seed_set", "seed") and v is not None
    }
    if evaluations is not None:
        settings["evaluations"] = evaluations
    loaded = loaded.with_search(**settings)
    seeds = [int(s) for s in seed_set["seeds"]]
    return _run_seed_set(
        loaded,
        seeds,
        existing,
        seed_set=seed_set,
        store=path,
        workers=workers,
        dask=dask,
        scheduler=scheduler,
        progress=progress,
        on_evaluation=on_evaluation,
        on_run=on_run,
        evaluations=evaluations,
    )


def _history_on(run: RunResult, reference: np.ndarray) -> pd.DataFrame:
    """The run's history with each generation's hypervolume recomputed on another reference point."""
    history = run.history.copy()
    if not len(history) or "hypervolume" not in history.columns:
        return history
    table = run.evaluations
    names = run.case.objective_names
    if not len(table) or "feasible" not in table.columns:
        history["hypervolume"] = 0.0
        return history
    ok = table[table["feasible"].astype(bool)]
    generations = ok["generation"].to_numpy()
    points = ok[names].to_numpy(dtype=float)
    front = np.empty((0, len(names)))
    values, shares, done = [], [], -math.inf
    for generation in history["generation"].tolist():
        new = points[(generations > done) & (generations <= generation)]
        done = generation
        if len(new):
            candidates = np.vstack([front, new])
            front = candidates[nondominated(candidates, run.case.maximise)]
        values.append(hypervolume(front, reference, run.case.maximise) if len(front) else 0.0)
        shares.append(
            hypervolume_share(front, reference, run.case.maximise) if len(front) else math.nan
        )
    history["hypervolume"] = values
    if "hypervolume_share" in history.columns:
        history["hypervolume_share"] = shares
    return history


def _on_common_reference(run: RunResult, reference: np.ndarray, hv: float) -> RunResult:
    """The run restated on the seeds' common reference point: its hypervolume, history and message."""
    own = _front_sentence(run.front, run.reference)
    common = _front_sentence(run.front, reference, "the seeds' common reference point")
    info = run.info.but(reference_source=_COMMON_REFERENCE)
    front = replace(run.front, reference=tuple(float(v) for v in reference), info=info)
    return replace(
        run,
        front=front,
        hypervolume=hv,
        reference=tuple(float(v) for v in reference),
        history=_history_on(run, reference),
        message=run.message.replace(own, common),
    )


def _merge_repeats(
    case: Case, runs: list[RunResult], *, interrupted: bool, missing: list[int] | None = None
) -> SeedsResult:
    flags = np.asarray(case.maximise, dtype=bool)
    recorded = [np.asarray(r.reference, dtype=float) for r in runs if r.reference is not None]
    reference = (
        np.where(flags, np.min(recorded, axis=0), np.max(recorded, axis=0)) if recorded else None
    )
    hvs = tuple(
        hypervolume(r.front.points(), reference, case.maximise)
        if reference is not None and len(r.front)
        else 0.0
        for r in runs
    )
    if reference is not None:
        # One reference for everything about a set of seeds: each run's history, message and folder too.
        runs = [_on_common_reference(r, reference, hv) for r, hv in zip(runs, hvs, strict=True)]
    names = (
        set(case.variable_names)
        | set(case.objective_names)
        | set(case.constraint_names)
        | set(case.outputs)
    )
    for r in runs:
        names |= set(map(str, r.front.table.columns))
    column = "seed" if "seed" not in names else "run_seed"
    tables = []
    for r in runs:
        if len(r.front):
            table = r.front.table.copy()
            table.insert(1 if "eval_id" in table.columns else 0, column, r.seed)
            tables.append(table)
    seeds = tuple(r.seed for r in runs)
    statuses = [r.status for r in runs]
    status = (
        "interrupted"
        if interrupted or "interrupted" in statuses
        else (statuses[0] if len(set(statuses)) == 1 else "mixed")
    )
    n_evals = sum(r.n_evals for r in runs)
    n_failed = sum(r.n_failed for r in runs)
    spread = _spread(hvs)
    info = runs[0].info.but(
        seed=seeds[0],
        seeds=SeedSet(
            seeds=seeds,
            column=column,
            hypervolumes=hvs,
            median=spread["median"],
            min=spread["min"],
            max=spread["max"],
            missing=tuple(missing or ()),
        ),
        status="interrupted" if missing else status,
        stop_reason="; ".join(
            f"seed {r.seed}: {STATUS_TEXT.get(r.status, r.status)}" for r in runs
        ),
        n_evals=n_evals,
        n_gen=sum(r.n_gen for r in runs),
        n_failed=n_failed,
        n_cached=sum(r.n_cached for r in runs),
        reference_source=_COMMON_REFERENCE,
        started=min((r.info.started for r in runs if r.info.started is not None), default=None),
        finished=max((r.info.finished for r in runs if r.info.finished is not None), default=None),
    )
    if tables:
        front = Front.from_table(
            pd.concat(tables, ignore_index=True),
            case.objectives,
            units=case.units,
            variables=case.variable_names,
            constraints=case.constraint_names,
            reference=reference,
            info=info,
        )
    else:
        empty = runs[0].front.table.iloc[0:0].copy()
        empty.insert(0, column, pd.Series(dtype="int64"))
        front = Front(
            table=empty,
            objectives=case.objectives,
            units=case.units,
            variables=tuple(case.variable_names),
            constraints=tuple(case.constraint_names),
            reference=tuple(reference) if reference is not None else None,
            info=info,
        )
    merged_hv = (
        hypervolume(front.points(), reference, case.maximise)
        if reference is not None and len(front)
        else 0.0
    )
    histories = []
    for r in runs:
        if len(r.history):
            h = r.history.copy()
            h.insert(0, "seed", r.seed)
            histories.append(h)
    history = pd.concat(histories, ignore_index=True) if histories else pd.DataFrame()
    least = None
    if not len(front):
        parts = [r.least_infeasible for r in runs if r.least_infeasible is not None]
        if parts:
            least = pd.concat(parts, ignore_index=True).sort_values("violation").head(20)

    stops: dict[str, int] = {}
    for r in runs:
        stops[STATUS_TEXT.get(r.status, r.status)] = (
            stops.get(STATUS_TEXT.get(r.status, r.status), 0) + 1
        )
    span = f"seed {seeds[0]}" if len(seeds) == 1 else f"seeds {seeds[0]} to {seeds[-1]}"
    parts = [
        f"{len(runs)} run(s) with {span}, {n_evals} evaluations in all; stopped because "
        + ", ".join(f"{text} ({count})" for text, count in stops.items())
        + "."
    ]
    if n_failed:
        parts.append(f"{n_failed} evaluation(s) failed.")
    if len(front):
        s = spread
        box = hypervolume_box(front.points(), reference, case.maximise)
        if math.isfinite(box):
            share = {k: _format.share(v / box) for k, v in s.items()}
            parts.append(
                f"Merged front of {len(front)} designs, covering {_format.share(merged_hv / box)} of the "
                "box from its best values to the common reference point (hypervolume share); single "
                f"runs: median {share['median']}, min {share['min']}, max "
                f"{share['max']} of that box (spread {100 * (s['max'] - s['min']) / box:.2g} points)."
            )
        else:
            parts.append(
                f"Merged front of {len(front)} designs, hypervolume {_format.number(merged_hv)}; single runs: "
                f"median {_format.number(s['median'])}, min {_format.number(s['min'])}, max "
                f"{_format.number(s['max'])} on the common "
                f"reference point ({', '.join(_format.number(v) for v in reference)}), which does not lie "
                "beyond the front's best values in every objective."
            )
    else:
        parts.append("No run found a feasible design.")
    if missing:
        listed = ", ".join(str(m) for m in missing)
        parts.append(
            f"Seed(s) {listed} did not run: the merged front stands for {len(runs)} of "
            f"{len(runs) + len(missing)} seeds; resume the archive to run the rest."
        )
        status = "interrupted"
    return SeedsResult(
        status=status,
        message=" ".join(parts),
        front=front,
        runs=tuple(runs),
        seeds=seeds,
        hypervolumes=hvs,
        hypervolume=merged_hv,
        reference=tuple(float(v) for v in reference) if reference is not None else None,
        history=history,
        n_evals=n_evals,
        n_gen=sum(r.n_gen for r in runs),
        n_failed=n_failed,
        n_cached=sum(r.n_cached for r in runs),
        seed=seeds[0],
        case=case,
        store_path=runs[0].store_path,
        least_infeasible=least,
    )
