"""The search: one run of a case, generation by generation, in named steps.

The genetic algorithm (pymoo, behind ``tradewise._pymoo``) proposes designs
and is told their values; everything around that is ours. Each generation:
propose (and sort the designs into ones known to the run or the archive and
new ones), evaluate (record the known, take over an interrupted run's,
evaluate the rest), tell the algorithm, update the front, the settling
measure and the history, save the state, and decide whether to stop
(``_stop_status``, a status, never an exception).

Over 800 lines, about a third of them numpydoc, because the public face
(``run``, ``resume``, ``RunResult``) and the run's closing sentences belong
with the loop whose state they report.
"""

from __future__ import annotations

import functools
import json
import math
import platform
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from tradewise import format as _format
from tradewise._plain import plain
from tradewise._pymoo import Searcher, Space, decode_state, default_population, make_searcher
from tradewise.case import Case, load_case
from tradewise.errors import ModelError, StoreError
from tradewise.executors import InProcess, make_executor, run_designs
from tradewise.front import (
    Front,
    column_extremes,
    design_table,
    failures_text,
    hypervolume,
    hypervolume_box,
    hypervolume_share,
    merge_nondominated,
    reference_point,
)
from tradewise.models import Outcome, make_model
from tradewise.runinfo import LimitSpec, RunInfo, VariableSpec
from tradewise.store import Store, open_store

__all__ = [
    "RunResult",
    "run",
    "middle_design",
    "resume",
    "design_key",
    "design_keys",
    "STATUS_TEXT",
]

#: Why a run stopped, in words for the summary.
STATUS_TEXT = {
    "budget": "the evaluation budget was used up",
    "generations": "the generation limit was reached",
    "time_limit": "the time limit was reached",
    "stalled": "the front stopped moving",
    "exhausted": "the search proposed no new designs",
    "interrupted": "the run was interrupted",
}

# The violation given to a failed evaluation: always worse than any real violation.
_FAILED_PENALTY = 1e6
# The objective values given to a failed design when the case has no constraints.
_FAILED_OBJECTIVE = 1e30
_EXHAUSTED_AFTER = 25  # generations in a row without a new design before giving up
# The front has settled after a generation when it gained less than _SETTLE_GAIN of its hypervolume
# (on its own scale) over the last _SETTLE_WINDOW generations; mutation is finest after _SETTLE_SPAN such.
_SETTLE_WINDOW = 10
_SETTLE_GAIN = 1e-3
_SETTLE_SPAN = 150
# Above this many designs a front of four or more objectives is thinned evenly for the settling measure
# and the stall rule, and the history's hypervolume of any front is computed exactly every
# _EXACT_EVERY generations only (and at the end), so that a generation's cost hardly grows with the front.
_GAIN_POINTS = 2000
_EXACT_EVERY = 10
# The search state (plain data: the surviving population, the random generator, ~50 kB) is saved after a generation when this many seconds
# have passed since the last save, and at the end. Resuming from an older state costs nothing but
# pymoo time: the generations after it are replayed with results taken from the archive.
_STATE_EVERY = 1.0


# --------------------------------------------------------------------------------------- encoding
def middle_design(case: Case) -> dict[str, Any]:
    """The design in the middle of every range (first option, flags off): a quick model check."""
    space = Space(case)
    return space.decode(space.repair(((space.xl + space.xu) / 2)[None, :])[0])


def _key_text(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return f"{value:.12g}"
    if isinstance(value, str):
        return json.dumps(value)
    return repr(value)


def design_key(design: dict[str, Any]) -> str:
    """A canonical text key of a design: equal designs give equal keys (reals to 12 significant digits).

    Examples
    --------
    >>> design_key({"t": 0.1 + 0.2, "n": 3, "alloy": "6063", "coat": True})
    't=0.3|n=3|alloy="6063"|coat=true'
    """
    return "|".join(
        [
            f"{name}={value:.12g}" if type(value) is float else f"{name}={_key_text(value)}"
            for name, value in design.items()
        ]
    )


def design_keys(names: list[str], columns: list[list[Any]], *, floats: bool = False) -> list[str]:
    """:func:`design_key` of many designs given a column a variable (``Space.decode_columns``).

    ``floats`` says that every value is a float (a space of real variables
    only); the keys are then formatted a design at a time in one call.

    Examples
    --------
    >>> design_keys(["t", "n"], [[0.1 + 0.2, 1.5], [3, 4]])
    ['t=0.3|n=3', 't=1.5|n=4']
    >>> design_keys(["t", "w"], [[0.1 + 0.2], [2.0]], floats=True)
    ['t=0.3|w=2']
    """
    if floats:
        # printf-style %.12g gives what format's .12g gives, a little quicker
        template = "|".join(f"{name.replace('%', '%%')}=%.12g" for name in names)
        return [template % row for row in zip(*columns, strict=True)]
    texts = [
        [
            f"{name}={value:.12g}" if type(value) is float else f"{name}={_key_text(value)}"
            for value in column
        ]
        for name, column in zip(names, columns, strict=True)
    ]
    return ["|".join(parts) for parts in zip(*texts, strict=True)]


# ----------------------------------------------------------------------------------------- result
@dataclass(frozen=True)
class RunResult:
    """What a search gives back; ``status`` and ``message`` say why it stopped.

    ``front`` is the non-dominated set of every feasible design evaluated
    (empty when none was feasible; then ``least_infeasible`` holds the designs
    closest to feasibility). ``evaluations`` has one row per design the run
    looked at, ``history`` one row per generation.
    """

    status: str
    message: str
    front: Front
    evaluations: pd.DataFrame
    history: pd.DataFrame
    n_evals: int
    n_gen: int
    hypervolume: float
    seed: int
    case: Case
    store_path: Path | None = None
    run_id: int | None = None
    reference: tuple[float, ...] | None = None
    n_failed: int = 0
    n_cached: int = 0
    least_infeasible: pd.DataFrame | None = None

    @property
    def info(self) -> RunInfo:
        """What the run recorded about itself (its front's :class:`~tradewise.runinfo.RunInfo`)."""
        return self.front.info

    def __repr__(self) -> str:
        return (
            f"RunResult({self.message!r}, front={len(self.front)} designs, n_evals={self.n_evals}, "
            f"n_gen={self.n_gen}, hypervolume={_format.number(self.hypervolume)})"
        )


# ------------------------------------------------------------------------------------------ state
@dataclass(frozen=True)
class _Taken:
    """An evaluation a run made after its last saved state, waiting to be proposed again on resume."""

    outcome: Outcome
    design: dict[str, Any]
    generation: int


@dataclass
class _Proposal:
    """One generation's designs: what was proposed, and which of them are new to the run."""

    number: int
    designs: list[dict[str, Any]]
    keys: list[str]
    served: dict[str, Outcome]  # from this run's memo or the archive: recorded, not evaluated
    fresh: list[str]  # to evaluate (or to take over from before an interruption), in order
    first_row: int


class _Run:
    """The bookkeeping of one run: cache, evaluation records, front and history."""

    def __init__(self, case: Case, store: Store | None, run_id: int | None) -> None:
        self.case = case
        self.store = store
        self.run_id = run_id
        self.objectives = case.objectives
        self.maximise = case.maximise
        self.memo: dict[str, Outcome] = {}
        self.records: list[dict[str, Any]] = []
        self.n_evals = 0
        self.n_failed = 0
        self.n_cached = 0
        self.first_failure = ""
        self.front_rows = np.empty(0, dtype=np.int64)  # positions in self.records
        self.front_pts = np.empty((0, len(case.objectives)))
        self.front_ties = np.empty((0, len(case.objectives)))  # rounded on the run's scale
        self._exact_hv: float | None = None
        self._last_hv = 0.0
        self.reference: np.ndarray | None = None
        self.reference_source = ""
        self.scale: np.ndarray | None = None
        self.history: list[dict[str, Any]] = []
        # The front after each of the last generations, for judging how much it still moves.
        self.snapshots: deque[tuple[np.ndarray, dict[bytes, float]]] = deque(
            maxlen=max(case.search.stall_generations, _SETTLE_WINDOW) + 1
        )
        self.settled = 0  # generations so far after which the front had settled (see _refinement)
        self._gains: dict[int, float] = {}  # front_gain by window, as last judged (see snapshot)
        # The windows the run watches: the settling measure's and the stall rule's.
        self._windows = {_SETTLE_WINDOW, case.search.stall_generations} - {0}
        self.next_id = 1
        # Designs this run evaluated after its last saved state, by key; a resumed search takes
        # each over when it proposes it again instead of evaluating it twice.
        self.adopt: dict[str, _Taken] = {}
        self.state_saved_at = -math.inf
        self.model = None  # made on first use, so that a run that evaluates nothing imports nothing

    # -- one evaluation --------------------------------------------------------------------
    def record(
        self,
        design: dict[str, Any],
        key: str,
        outcome: Outcome,
        generation: int,
        *,
        cached: bool,
        source_id: int | None = None,
        eval_id: int | None = None,
    ) -> dict[str, Any]:
        """Add one evaluation's row (archived unless ``eval_id`` says it already is) and return it."""
        status, results, message = outcome.status, outcome.results, outcome.message
        duration, worker = outcome.duration, outcome.worker
        violation = 0.0
        if status == "ok":
            for c in self.case.constraints:
                violation += c.violation(results[c.name])
        else:
            violation = _FAILED_PENALTY
        if eval_id is not None:
            pass  # already in the archive (taken over on resume)
        elif self.store is not None:
            eval_id = self.store.add_evaluation(
                self.run_id,
                case_hash=self.case.hash,
                design_key=key,
                design=design,
                results=results,
                status=status,
                message=message,
                duration=duration,
                generation=generation,
                worker=worker,
                source_id=source_id,
            )
        else:
            eval_id = self.next_id
            self.next_id += 1
        row = {
            "eval_id": eval_id,
            "generation": generation,
            "status": status,
            "feasible": status == "ok" and violation == 0.0,
            "violation": violation,
            "cached": cached,
            "message": message,
            "duration": duration,
            "worker": worker,
            **design,
            **results,
        }
        self.records.append(row)
        if not cached:
            self.n_evals += 1
            # Each evaluation's outcome is its own object (executors and models make one a design).
            outcome.eval_id = eval_id
            self.memo[key] = outcome
            if status != "ok":
                self.n_failed += 1
                self.first_failure = self.first_failure or message
        else:
            self.n_cached += 1
        return row

    # -- one generation ---------------------------------------------------------------------
    def update_front(self, new_rows: list[int]) -> None:
        """Merge the feasible designs of ``new_rows`` into the front: old front plus new designs only."""
        fresh = [i for i in new_rows if self.records[i]["feasible"]]
        if not fresh:
            return
        names = [o.name for o in self.objectives]
        new_points = np.array([[self.records[i][n] for n in names] for i in fresh], dtype=float)
        if self.reference is None:
            self.reference = reference_point(
                new_points, self.maximise, worst=[o.worst for o in self.objectives]
            )
            given = [o.name for o in self.objectives if o.worst is not None]
            self.reference_source = (
                "worst values from the case"
                if len(given) == len(self.objectives)
                else "fixed from the first feasible designs (worst value plus 10% of the range)"
                + (f"; case values for {', '.join(given)}" if given else "")
            )
        if self.scale is None:
            best = np.where(self.maximise, new_points.max(axis=0), new_points.min(axis=0))
            scale = np.abs(self.reference - best)
            self.scale = np.where(scale > 0, scale, 1.0)
        # Values equal to 1e-9 of the objective's scale count as ties, so floating-point noise
        # (cos(pi/2) is 6e-17, not 0) cannot keep an unconverged design on the front. The front's
        # rounded values are kept, so only the new designs are rounded.
        # The rounded values are kept minimised (maximised objectives negated) for the merge.
        new_ties = np.round(new_points / self.scale, 9) * np.where(self.maximise, -1.0, 1.0)
        keep_old, keep_new = merge_nondominated(self.front_ties, new_ties)
        if keep_old.all() and not keep_new.any():
            return
        # Rows picked by position: numpy picks rows of a 2-D array by a mask several times slower.
        old, new = np.flatnonzero(keep_old), np.flatnonzero(keep_new)
        self.front_rows = np.concatenate(
            [self.front_rows[old], np.asarray(fresh, dtype=np.int64)[new]]
        )
        self.front_pts = np.vstack([self.front_pts.take(old, axis=0), new_points[new]])
        self.front_ties = np.vstack([self.front_ties.take(old, axis=0), new_ties[new]])
        self._exact_hv = None

    def front_points(self) -> np.ndarray:
        return self.front_pts

    def snapshot(self, generation: int) -> None:
        """Keep the front as it stands after ``generation``; judge its gain when that is due.

        The gains over the windows the run watches are computed now while
        the front has at most ``_GAIN_POINTS`` designs, and on every
        ``_EXACT_EVERY``-th generation beyond that; in between they are
        carried over. Computing them here, from the generation number, gives
        a resumed run the values the uninterrupted run had.
        """
        points = self.front_pts * np.where(self.maximise, -1.0, 1.0)
        if points.shape[1] >= 4:
            points = _thin(points, _GAIN_POINTS)
        self.snapshots.append((points, {}))
        if len(self.front_pts) <= _GAIN_POINTS or generation % _EXACT_EVERY == 0:
            self._gains = {window: self._gain(window) for window in self._windows}

    def front_gain(self, window: int) -> float:
        """How much the front gained over the last ``window`` generations, judged on its own scale.

        Both fronts are normalised by the ideal and nadir of the current
        front, and the gain is the share of the current front's hypervolume
        (reference 1.1 in each normalised objective) that the older front did
        not have. Judged so, a front that still moves toward the ideal shows a
        large gain however large the box of the first random designs was.
        ``inf`` until ``window`` generations have passed. Exact, and judged
        after every generation, while the front has at most 2,000 designs;
        beyond that it is judged every 10th generation and carried over in
        between, so that a generation's cost does not grow with the front
        (see :meth:`snapshot`); with four or more objectives such a front is
        also thinned evenly first (an approximation, for speed).
        """
        if window not in self._gains:
            self._gains[window] = self._gain(window)
        return self._gains[window]

    def _gain(self, window: int) -> float:
        if window <= 0 or len(self.snapshots) <= window:
            return math.inf
        new, old = self.snapshots[-1], self.snapshots[-1 - window]
        if not len(new[0]):
            return math.inf
        low, high = column_extremes(new[0])
        hv_new = _normalised_hypervolume(new, low, high)
        if hv_new <= 0:
            return math.inf
        hv_old = _normalised_hypervolume(old, low, high) if len(old[0]) else 0.0
        return max(0.0, (hv_new - hv_old) / hv_new)

    def hypervolume(self) -> float:
        """The exact hypervolume of the front on the run's reference point."""
        if self.reference is None or not len(self.front_rows):
            return 0.0
        if self._exact_hv is None:
            self._exact_hv = hypervolume(self.front_points(), self.reference, self.maximise)
        return self._exact_hv

    def progress_hypervolume(self, generation: int) -> tuple[float, bool]:
        """The hypervolume for a generation's history row, and whether it is exact.

        Exact while the front has at most ``_GAIN_POINTS`` designs and on every
        ``_EXACT_EVERY``-th generation; in between, a larger front's row repeats
        the last exact value (the front only grows, so it is a lower bound).
        """
        if len(self.front_rows) <= _GAIN_POINTS or generation % _EXACT_EVERY == 0:
            self._last_hv = self.hypervolume()
            return self._last_hv, True
        return self._last_hv, False


def _normalised_hypervolume(
    snapshot: tuple[np.ndarray, dict[bytes, float]], low: np.ndarray, high: np.ndarray
) -> float:
    """Hypervolume of a kept front normalised by ``low`` and ``high`` (reference 1.1), computed once."""
    points, known = snapshot
    key = low.tobytes() + high.tobytes()
    if key not in known:
        span = np.where(high > low, high - low, 1.0)
        known.clear()  # only the latest normalisation is kept; another is computed afresh
        known[key] = hypervolume((points - low) / span, np.full(points.shape[1], 1.1), False)
    return known[key]


def _thin(points: np.ndarray, most: int) -> np.ndarray:
    """At most ``most`` of ``points``, evenly spaced in the order of the first objective."""
    if len(points) <= most:
        return points
    order = np.argsort(points[:, 0], kind="stable")
    return points[order[np.linspace(0, len(points) - 1, most).astype(int)]]


# ---------------------------------------------------------------------------------------- algorithm
@functools.cache
def _package_versions() -> tuple[tuple[str, str], ...]:
    """Python's and the packages' versions, looked up once a process (the look-up reads the disk)."""
    versions = {"python": platform.python_version()}
    for package in ("tradewise", "pymoo", "moocore", "numpy", "pandas"):
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            versions[package] = "unknown"
    return tuple(versions.items())


def _versions() -> dict[str, str]:
    return dict(_package_versions())


# ------------------------------------------------------------------------------------------ study
def run(
    case: Case | str | Path,
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
    executor: InProcess | None = None,
    progress: Callable[[dict[str, Any]], None] | None = None,
    on_evaluation: Callable[[dict[str, Any]], None] | None = None,
    seed_set: dict[str, Any] | None = None,
    surrogate: bool | None = None,
) -> RunResult:
    """Search a case for its Pareto front.

    Parameters
    ----------
    case : Case, str or Path
        A loaded case, a case folder or ``case.toml``, or a bundled case name.
    seed, evaluations, generations, population, time_limit :
        Override the case's ``[search]`` settings; ``None`` keeps them.
    store : str or Path, optional
        The SQLite archive to write every evaluation to (and to serve already
        evaluated designs of the same case from). Without it nothing is written.
    workers, dask, scheduler :
        Where evaluations run: ``workers > 1`` a local process pool, ``dask``
        a local Dask cluster, ``scheduler`` an existing Dask scheduler.
    executor : optional
        An executor object from :mod:`tradewise.executors`, instead of the above.
    progress : callable, optional
        Called with each generation's history row.
    on_evaluation : callable, optional
        Called with each evaluation's record as it completes.
    seed_set : dict, optional
        Set by :func:`run_seeds`: the set of seeds this run is one of
        (``{"id": ..., "seeds": [...]}``), recorded with the run so that
        resuming any of them resumes them all.
    surrogate : bool, optional
        Search Gaussian-process models of the model instead of the model
        itself, for slow models (:mod:`tradewise.surrogate`); ``None`` keeps
        the case's ``[search] surrogate``.

    Returns
    -------
    RunResult
        Running out of budget is a status, not an error.

    Raises
    ------
    ModelError
        When every design of the first generation fails (quoting the first message).

    Examples
    --------
    >>> result = run("heat-sink", evaluations=300, seed=2)   # doctest: +SKIP
    >>> result.status                                              # doctest: +SKIP
    'budget'
    """
    if not isinstance(case, Case):
        case = load_case(case)
    case = case.with_search(
        seed=seed,
        evaluations=evaluations,
        generations=generations,
        population=population,
        time_limit=time_limit,
        surrogate=surrogate,
    )
    # The archive first: a bad file fails before any worker or cluster is started.
    archive = open_store(store) if store is not None else None
    own_executor = executor is None
    try:
        executor = executor or make_executor(workers, dask=dask, scheduler=scheduler)
    except BaseException:
        if archive is not None:
            archive.close()
        raise
    try:
        run_id = None
        if archive is not None:
            run_id = archive.start_run(
                case_hash=case.hash,
                case_title=case.title,
                case_path=str(case.path.resolve()),
                case_text=case.text,
                settings=_recorded_settings(case, seed_set),
                seed=case.search.seed,
                versions=_versions(),
            )
        run = _Run(case, archive, run_id)
        searcher = _searcher(case)
        return _loop(run, searcher, executor, progress, on_evaluation, started=time.time())
    finally:
        if own_executor:
            executor.close()
        if archive is not None:
            archive.close()


def resume(
    store: str | Path,
    *,
    run_id: int | None = None,
    evaluations: int | None = None,
    case: Case | str | Path | None = None,
    workers: int | None = None,
    dask: bool = False,
    scheduler: str | None = None,
    executor: InProcess | None = None,
    progress: Callable[[dict[str, Any]], None] | None = None,
    on_evaluation: Callable[[dict[str, Any]], None] | None = None,
) -> RunResult:
    """Continue an interrupted run (or extend a finished one) from its archive.

    The newest saved search state is restored, with its random state (or,
    when none was saved, the search starts again from the run's seed), so
    the continuation proposes the designs the uninterrupted run would have.
    Designs the run evaluated after that state are taken over when they are
    proposed again, and designs the archive holds from other runs of the
    case are served from it: nothing is evaluated twice, and a run resumed
    after a kill ends with the front the uninterrupted run would have had.

    Parameters
    ----------
    store : str or Path
        The archive file.
    run_id : int, optional
        Which run (default: the latest in the file).
    evaluations : int, optional
        New total evaluation budget (default: the run's own).
    case : optional
        The case to use; by default the case file recorded with the run is
        reloaded, and it must still have the recorded hash.
    """
    path = Path(store)
    archive = open_store(path, create=False)
    try:
        run_id = run_id if run_id is not None else archive.latest_run()
        record = archive.run(run_id)
        case = _case_of_run(path, record, case)
        settings = dict(record["settings"])
        seed_set = settings.pop("seed_set", None)
        if evaluations is not None:
            settings["evaluations"] = evaluations
        case = case.with_search(**{k: v for k, v in settings.items() if v is not None})
        searcher = _searcher(case)
        saved = archive.state(run_id)
        state = decode_state(saved[1]) if saved is not None else None
        if state is None:
            # No usable state (killed before the first was saved, or a state in an older form, which
            # is never unpickled): the same seed proposes the same designs again, and every design
            # the run had evaluated is taken over from the archive, so only pymoo's time is spent.
            state_generation = 0
        else:
            state_generation = saved[0]
            searcher.restore(state, where=f"{path}: run {run_id}")
        archive.discard_after(run_id, state_generation)
        run = _Run(case, archive, run_id)
        _restore(run, archive, run_id, record, upto=state_generation)
        archive.update_run(
            run_id,
            status="running",
            message="resumed",
            settings=_recorded_settings(case, seed_set),
        )
        own_executor = executor is None
        executor = executor or make_executor(workers, dask=dask, scheduler=scheduler)
        try:
            return _loop(
                run,
                searcher,
                executor,
                progress,
                on_evaluation,
                started=record["started"] or time.time(),
            )
        finally:
            if own_executor:
                executor.close()
    finally:
        archive.close()


def _searcher(case: Case):
    """The case's searcher: NSGA-II (or NSGA-III), or the Gaussian-process models of a surrogate run."""
    if case.search.surrogate:
        from tradewise.surrogate import SurrogateSearcher

        return SurrogateSearcher(
            case, Space(case), population=case.search.population, seed=case.search.seed
        )
    return make_searcher(
        case, Space(case), population=case.search.population, seed=case.search.seed
    )


def _recorded_settings(case: Case, seed_set: dict[str, Any] | None) -> dict[str, Any]:
    """The search settings recorded with a run, with the set of seeds it belongs to, if any."""
    return case.search.as_dict() | ({"seed_set": seed_set} if seed_set else {})


def _case_of_run(path: Path, record: dict[str, Any], case: Case | str | Path | None) -> Case:
    """The case of an archived run: the given one, or the case file recorded with it; its hash must match."""
    run_id = record["run_id"]
    if case is None:
        case_path = Path(record["case_path"])
        if not case_path.exists():
            raise StoreError(
                f"{path}: run {run_id}'s case file {case_path} no longer exists; pass the case"
            )
        case = load_case(case_path)
    elif not isinstance(case, Case):
        case = load_case(case)
    if case.hash != record["case_hash"]:
        raise StoreError(
            f"{path}: run {run_id} belongs to case {record['case_title']!r} (hash {record['case_hash']}), "
            f"not to {case.path} (hash {case.hash}); the case or its model changed"
        )
    return case


def _restore(run: _Run, archive: Store, run_id: int, record: dict[str, Any], *, upto: int) -> None:
    """Rebuild the bookkeeping of a run from its archive rows, up to generation ``upto``.

    Evaluations made after that generation go to ``run.adopt``; the front is
    rebuilt generation by generation, exactly as the run built it.
    """
    table = archive.evaluations(run_id)
    case = run.case
    names = case.variable_names
    if record.get("reference"):
        run.reference = np.asarray(record["reference"]["point"], dtype=float)
        run.reference_source = record["reference"]["source"]
    start, current = 0, None
    for row in table.to_dict("records"):
        design = {n: plain(row[n]) for n in names}
        key = design_key(design)
        results = {
            k: plain(row[k])
            for k in row
            if k not in design and k not in _EVAL_COLUMNS and not _missing(row[k])
        }
        outcome = Outcome(
            row["status"],
            results,
            row["message"],
            row["duration"] or 0.0,
            row["worker"],
            eval_id=row["eval_id"],
        )
        if row["generation"] > upto:
            if not row["cached"]:
                run.adopt[key] = _Taken(outcome, design, row["generation"])
            continue
        if row["generation"] != current:
            if current is not None:
                run.update_front(list(range(start, len(run.records))))
                run.snapshot(current)
            start, current = len(run.records), row["generation"]
        run.record(
            design,
            key,
            outcome,
            row["generation"],
            cached=bool(row["cached"]),
            eval_id=row["eval_id"],
        )
    if current is not None:
        run.update_front(list(range(start, len(run.records))))
        run.snapshot(current)
    history = archive.history(run_id)
    run.history = history.to_dict("records") if len(history) else []
    if run.history:
        run.settled = int(run.history[-1].get("settled", 0) or 0)


_EVAL_COLUMNS = {
    "eval_id",
    "run_id",
    "generation",
    "status",
    "message",
    "duration",
    "worker",
    "cached",
}


def _missing(value: Any) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def _stop_status(
    settings, *, n_evals: int, generation: int, elapsed: float, gain: float, idle: int, size: float
) -> str:
    """Why the run must stop before another generation (``""`` to go on): the stopping rules in order."""
    if n_evals >= settings.evaluations:
        return "budget"
    if settings.generations is not None and generation >= settings.generations:
        return "generations"
    if settings.time_limit is not None and elapsed >= settings.time_limit:
        return "time_limit"
    if gain <= settings.stall_tolerance:
        return "stalled"
    if idle >= _EXHAUSTED_AFTER or n_evals >= size:
        return "exhausted"
    return ""


def _refinement(run: _Run) -> float:
    """How far the operators are refined, 0 to 1: the share of _SETTLE_SPAN generations the front has settled."""
    return min(1.0, run.settled / _SETTLE_SPAN)


def _loop(
    run: _Run, searcher: Searcher, executor: InProcess, progress, on_evaluation, *, started: float
) -> RunResult:
    settings = run.case.search
    generation = len(run.history)
    fronted = len(run.records)
    idle = 0
    status = ""
    # Elapsed time counts the time spent searching: a resumed run goes on from its last generation.
    clock = time.monotonic() - (
        run.history[-1]["elapsed_s"] if run.history else time.time() - started
    )
    saved_generation = generation
    if hasattr(searcher, "watch"):
        searcher.watch(run, executor)  # a surrogate searcher learns from the run's records
    try:
        while not (
            status := _stop_status(
                settings,
                n_evals=run.n_evals,
                generation=generation,
                elapsed=time.monotonic() - clock,
                gain=run.front_gain(settings.stall_generations),
                idle=idle,
                size=searcher.space.size,
            )
        ):
            searcher.tune(_refinement(run))
            proposal = _propose(run, searcher, generation + 1)
            if proposal is None:
                status = "exhausted"
                break
            generation = proposal.number
            fronted = proposal.first_row
            outcomes = _evaluate(run, proposal, executor, on_evaluation)
            searcher.tell(*_values(run.case, proposal.keys, outcomes, searcher.n_con))
            row = _update(run, proposal, clock)
            if hasattr(searcher, "notes"):
                row.update(searcher.notes())
            idle = idle + 1 if not proposal.fresh else 0
            if run.store is not None:
                state = None
                if time.monotonic() - run.state_saved_at >= _STATE_EVERY:
                    state, saved_generation = _saved_state(run, searcher, generation), generation
                    run.state_saved_at = time.monotonic()
                run.store.add_generation(run.run_id, row, state=state)
            if progress:
                progress(row)
        if run.store is not None and saved_generation != generation:
            run.store.save_state(run.run_id, generation, _saved_state(run, searcher, generation))
    except KeyboardInterrupt:
        status = "interrupted"
        # Designs evaluated in the interrupted generation count too: they are in the archive.
        run.update_front(list(range(fronted, len(run.records))))
    _take_over_leftovers(run)
    return _finish(run, status, searcher.name, started, getattr(searcher, "summary", lambda: "")())


def _propose(run: _Run, searcher: Searcher, number: int) -> _Proposal | None:
    """Ask for the next generation and sort its designs into known (memo, archive) and new ones.

    Designs this run evaluated before it was interrupted count as new: they
    are taken over, not evaluated again. When the new designs exceed what is
    left of the budget, the generation is cut to fit.
    """
    X = searcher.propose()
    if X is None:
        return None
    case = run.case
    names = case.variable_names
    columns = searcher.space.decode_columns(X)
    designs = [dict(zip(names, row, strict=True)) for row in zip(*columns, strict=True)]
    keys = design_keys(names, columns, floats=searcher.space.all_real)
    known = {k for k in keys if k in run.memo}
    unknown = [k for k in dict.fromkeys(keys) if k not in known]
    look_up = [k for k in unknown if k not in run.adopt]
    archived = {
        key: Outcome(**found)
        for key, found in (
            run.store.lookup(case.hash, look_up, exclude_run=run.run_id)
            if run.store is not None and look_up
            else {}
        ).items()
    }
    fresh = [k for k in unknown if k not in archived]
    room = case.search.evaluations - run.n_evals
    if len(fresh) > room:
        allowed = set(fresh[:room])
        keep = [i for i, k in enumerate(keys) if k in known or k in archived or k in allowed]
        searcher.keep(keep)
        designs = [designs[i] for i in keep]
        keys = [keys[i] for i in keep]
        fresh = fresh[:room]
    to_evaluate = set(fresh)  # a list's membership test is a scan per key
    served = {
        k: run.memo[k] if k in run.memo else archived[k]
        for k in dict.fromkeys(keys)
        if k not in to_evaluate
    }
    return _Proposal(number, designs, keys, served, fresh, first_row=len(run.records))


def _evaluate(
    run: _Run, proposal: _Proposal, executor: InProcess, on_evaluation
) -> dict[str, Outcome]:
    """Record the served designs, take over the interrupted run's, evaluate the rest; every outcome by key."""
    designs, keys, generation = proposal.designs, proposal.keys, proposal.number
    outcomes: dict[str, Outcome] = {}
    # Each key's first place in the generation, found in one pass (keys.index is a scan per key).
    positions: dict[str, int] = {}
    for i, key in enumerate(keys):
        positions.setdefault(key, i)
    for key, outcome in proposal.served.items():
        row = run.record(
            designs[positions[key]],
            key,
            outcome,
            generation,
            cached=True,
            source_id=outcome.eval_id,
        )
        run.memo.setdefault(key, outcome)
        outcomes[key] = outcome
        if on_evaluation:
            on_evaluation(row)
    for key in sorted(
        (k for k in proposal.fresh if k in run.adopt), key=lambda k: run.adopt[k].outcome.eval_id
    ):
        taken = run.adopt.pop(key)
        run.record(
            designs[positions[key]],
            key,
            taken.outcome,
            generation,
            cached=False,
            eval_id=taken.outcome.eval_id,
        )
        outcomes[key] = run.memo[key]
    to_run = [k for k in proposal.fresh if k not in outcomes]
    batch = [designs[positions[k]] for k in to_run]
    for i, outcome in run_designs(executor, _model_for(run), batch) if batch else ():
        key = to_run[i]
        row = run.record(batch[i], key, outcome, generation, cached=False)
        outcomes[key] = run.memo[key]
        if on_evaluation:
            on_evaluation(row)
    if run.store is not None:
        run.store.flush(wait=False)  # committed by the archive writer; the search goes on
    return outcomes


def _values(case: Case, keys: list[str], outcomes: dict[str, Outcome], n_con: int):
    """Objective values (minimised) and constraint values (``<= 0`` met) of the designs, in order."""
    n_obj = len(case.objectives)
    signs = [(o.name, o.maximise) for o in case.objectives]
    constraints = case.constraints
    # Rows built as lists and made arrays once: a generation's values in one numpy call each.
    failed_f = [0.0] * n_obj if n_con else [_FAILED_OBJECTIVE] * n_obj
    failed_g = [0.0] * (n_con - 1) + [_FAILED_PENALTY] if n_con else []
    met = [0.0] * (n_con - len(constraints))  # the failure column of a design that did not fail
    F_rows, G_rows = [], []
    for key in keys:
        outcome = outcomes[key]
        if outcome.status != "ok":
            F_rows.append(failed_f)
            G_rows.append(failed_g)
            continue
        results = outcome.results
        F_rows.append([-results[name] if flip else results[name] for name, flip in signs])
        if n_con:
            G_rows.append([c.violation(results[c.name]) for c in constraints] + met)
    F = np.array(F_rows, dtype=float).reshape(len(keys), n_obj)
    G = np.array(G_rows, dtype=float).reshape(len(keys), n_con) if n_con else None
    return F, G


def _update(run: _Run, proposal: _Proposal, clock: float) -> dict[str, Any]:
    """After a generation: the front, how settled it is, the reference point, and the history row."""
    new_rows = list(range(proposal.first_row, len(run.records)))
    if (
        proposal.number == 1
        and new_rows
        and all(run.records[i]["status"] != "ok" for i in new_rows)
    ):
        message = (
            f"every design of the first generation failed ({len(new_rows)} of {len(new_rows)}); "
            f"first error: {run.first_failure}"
        )
        if run.store is not None:
            run.store.update_run(run.run_id, status="failed", message=message, finished=time.time())
        raise ModelError(message)
    had_reference = run.reference is not None
    run.update_front(new_rows)
    run.snapshot(proposal.number)
    if run.front_gain(_SETTLE_WINDOW) < _SETTLE_GAIN:
        run.settled += 1
    if run.store is not None and run.reference is not None and not had_reference:
        run.store.update_run(
            run.run_id, reference={"point": run.reference.tolist(), "source": run.reference_source}
        )
    n_feasible = sum(1 for i in new_rows if run.records[i]["feasible"])
    hv, _ = run.progress_hypervolume(proposal.number)
    row = {
        "generation": proposal.number,
        "evaluations": run.n_evals,
        "new": len(proposal.fresh),
        "cached": len(new_rows) - len(proposal.fresh),
        "failed": run.n_failed,
        "feasible_share": n_feasible / len(new_rows) if new_rows else 0.0,
        "front_size": len(run.front_rows),
        "hypervolume": hv,
        "hypervolume_share": _finite(
            min(1.0, hv / hypervolume_box(run.front_points(), run.reference, run.maximise))
            if run.reference is not None and len(run.front_rows)
            else math.nan
        ),
        "elapsed_s": round(time.monotonic() - clock, 3),
        "front_gain": _finite(run.front_gain(run.case.search.stall_generations or _SETTLE_WINDOW)),
        "settled": run.settled,
    }
    run.history.append(row)
    return row


def _saved_state(run: _Run, searcher: Searcher, generation: int) -> bytes:
    """The search state after ``generation`` as plain data (JSON), with the survivors' evaluation ids."""
    keys = design_keys(
        run.case.variable_names,
        searcher.space.decode_columns(searcher.survivors()),
        floats=searcher.space.all_real,
    )
    ids = [getattr(run.memo.get(key), "eval_id", None) for key in keys]
    return searcher.state(generation=generation, eval_ids=ids)


def _take_over_leftovers(run: _Run) -> None:
    """Count the evaluations a resumed search did not propose again (it stopped earlier) as the run's own."""
    if not run.adopt:
        return
    first = len(run.records)
    for key, taken in sorted(run.adopt.items(), key=lambda item: item[1].outcome.eval_id):
        run.record(
            taken.design,
            key,
            taken.outcome,
            taken.generation,
            cached=False,
            eval_id=taken.outcome.eval_id,
        )
    run.adopt.clear()
    run.update_front(list(range(first, len(run.records))))


def _model_for(run: _Run):
    if run.model is None:
        run.model = make_model(run.case)
        if hasattr(run.model, "load"):
            run.model.load()  # import errors surface once, before any evaluation
    return run.model


def _finite(value: float) -> float | None:
    return value if math.isfinite(value) else None


def _finish(
    run: _Run, status: str, algorithm_name: str, started: float, more: str = ""
) -> RunResult:
    case = run.case
    records = pd.DataFrame.from_records(run.records)
    columns = _ordered_columns(case, records)
    evaluations = records[columns] if len(records) else records
    history = pd.DataFrame.from_records(run.history)
    hv = run.hypervolume()
    info = RunInfo(
        title=case.title,
        description=case.description,
        cautions=case.cautions,
        hazards=case.hazards,
        case_file=case.path.name,
        case_hash=case.hash,
        algorithm=algorithm_name,
        status=status,
        stop_reason=STATUS_TEXT.get(status, status),
        seed=case.search.seed,
        settings=case.search.as_dict()
        | {"population": case.search.population or default_population(len(case.objectives))},
        versions=_versions(),
        n_evals=run.n_evals,
        n_gen=len(run.history),
        n_failed=run.n_failed,
        n_cached=run.n_cached,
        reference_source=run.reference_source,
        started=started,
        finished=time.time(),
        design_space=tuple(
            VariableSpec(v.name, v.kind, v.low, v.high, tuple(v.options or v.grid), v.unit)
            for v in case.variables
        ),
        descriptions={
            item.name: item.description
            for item in (*case.variables, *case.objectives, *case.constraints)
            if item.description
        },
        constraint_limits=tuple(LimitSpec(c.name, c.min, c.max, c.unit) for c in case.constraints),
    )
    front_table = (
        records.iloc[np.sort(run.front_rows)][columns]
        if len(run.front_rows)
        else records.iloc[0:0].reindex(columns=columns)
    )
    front_table = design_table(front_table)
    units = case.units
    front = Front.from_table(
        front_table,
        case.objectives,
        units=units,
        variables=case.variable_names,
        constraints=case.constraint_names,
        reference=run.reference,
        info=info,
    )
    least = None
    parts = [
        f"Stopped after {run.n_evals} evaluations in {len(run.history)} generations: "
        f"{STATUS_TEXT.get(status, status)}."
    ]
    if status == "stalled":
        window, tolerance = case.search.stall_generations, case.search.stall_tolerance
        parts.append(
            f"Over the last {window} generations the front gained less than {tolerance:.2g} of its "
            "hypervolume measured on its own scale; to search on, set stall_generations higher (or 0 to "
            "turn the rule off) or stall_tolerance lower in [search] and run again."
        )
    if run.n_failed:
        parts.append(
            f"{failures_text(records)}. They count as infeasible; a run folder lists them with "
            "their designs in failed.csv."
        )
    if len(front):
        parts.append(_front_sentence(front, run.reference))
    else:
        ok = records[records["status"] == "ok"] if len(records) else records
        parts.append(
            "No feasible design was found"
            + (
                ": " + _violation_summary(case, ok)
                if len(ok)
                else "; no design evaluated successfully."
            )
        )
        if len(ok):
            least = ok.sort_values("violation").drop_duplicates(subset=case.variable_names).head(20)
            # a design table, with the one bookkeeping column that is its subject kept (last)
            least = design_table(least[columns]).assign(violation=least["violation"])
    if more:
        parts.append(more)
    message = " ".join(parts)
    if run.store is not None:
        run.store.update_run(run.run_id, status=status, message=message, finished=time.time())
    return RunResult(
        status=status,
        message=message,
        front=front,
        evaluations=evaluations.reset_index(drop=True),
        history=history,
        n_evals=run.n_evals,
        n_gen=len(run.history),
        hypervolume=hv,
        seed=case.search.seed,
        case=case,
        store_path=run.store.path if run.store is not None else None,
        run_id=run.run_id,
        reference=tuple(float(r) for r in run.reference) if run.reference is not None else None,
        n_failed=run.n_failed,
        n_cached=run.n_cached,
        least_infeasible=least,
    )


def _front_sentence(front: Front, reference: Any, point: str = "the reference point") -> str:
    """The sentence of a run's message about its front (``point`` names the reference point).

    The hypervolume is told as the share of the box from the front's best values to the
    reference point that the front dominates; the raw value (a product of units) stays in
    front.json.
    """
    share = (
        hypervolume_share(front.points(), reference, front.maximise)
        if reference is not None and len(front)
        else math.nan
    )
    if not math.isfinite(share):
        hv = hypervolume(front.points(), reference, front.maximise) if len(front) else 0.0
        return f"Front of {len(front)} designs, hypervolume {_format.number(hv)} on {point}."
    return (
        f"Front of {len(front)} designs, covering {_format.share(share)} of the box from its best "
        f"values to {point} (hypervolume share)."
    )


def _violation_summary(case: Case, ok: pd.DataFrame) -> str:
    """Name the constraints broken most often and the least amount each was missed by."""
    lines = []
    for c in case.constraints:
        values = ok[c.name].astype(float)
        shortfall = pd.Series(0.0, index=values.index)
        if c.min is not None:
            shortfall = shortfall + (c.min - values).clip(lower=0)
        if c.max is not None:
            shortfall = shortfall + (values - c.max).clip(lower=0)
        broken = shortfall > 0
        if broken.any():
            lines.append(
                (
                    broken.mean(),
                    f"{c.describe()} broken by {broken.mean():.0%} of designs, "
                    f"missed by {_format.quantity(shortfall[broken].min(), c.unit)} at best",
                )
            )
    lines.sort(key=lambda item: -item[0])
    return "; ".join(text for _, text in lines[:3]) + "."


def _ordered_columns(case: Case, records: pd.DataFrame) -> list[str]:
    first = ["eval_id", "generation"]
    named = case.variable_names + case.objective_names + case.constraint_names
    tail = ["feasible", "violation", "status", "cached", "duration", "worker", "message"]
    outputs = [c for c in records.columns if c not in set(first) | set(named) | set(tail)]
    return [c for c in first + named + outputs + tail if c in records.columns]
