"""The search: a non-dominated sorting genetic search on pymoo, driven generation by generation.

pymoo proposes designs (ask) and is told their values (tell); everything
around that is ours: the encoding of mixed variables, the evaluation cache,
failure handling, the archive, the front built from every feasible design
evaluated so far, hypervolume tracking and the stopping rules.
"""

from __future__ import annotations

import json
import math
import platform
import time
import uuid
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from pymoo.algorithms.moo.nsga2 import NSGA2
from pymoo.algorithms.moo.nsga3 import NSGA3
from pymoo.core.problem import Problem
from pymoo.core.repair import Repair
from pymoo.core.termination import NoTermination
from pymoo.operators.crossover.sbx import SBX
from pymoo.operators.mutation.pm import PM
from pymoo.operators.sampling.rnd import FloatRandomSampling
from pymoo.problems.static import StaticProblem
from pymoo.util.ref_dirs import get_reference_directions

from tradewise._pymoo import decode_state, encode_state, restore_state, search_state
from tradewise.case import Case, load_case
from tradewise.errors import ModelError, StoreError
from tradewise.executors import InProcess, make_executor
from tradewise.front import Front, hypervolume, nondominated, reference_point
from tradewise.models import Outcome, make_model
from tradewise.store import Store, open_store

__all__ = ["StudyResult", "run_study", "middle_design", "resume_study", "save_run", "design_key", "Space", "STATUS_TEXT",
           "run_repeats", "resume_repeats", "save_repeats", "RepeatsResult"]

#: Why a run stopped, in words for the summary.
STATUS_TEXT = {
    "budget": "the evaluation budget was used up",
    "generations": "the generation limit was reached",
    "time_limit": "the time limit was reached",
    "stalled": "the front stopped moving",
    "exhausted": "the search proposed no new designs",
    "interrupted": "the run was interrupted",
}

_FAILED_PENALTY = 1e6  # violation given to a failed evaluation: always worse than any real violation
_FAILED_OBJECTIVE = 1e30  # objective values given to a failed design when the case has no constraints
_EXHAUSTED_AFTER = 25  # generations in a row without a new design before giving up
# The front has settled after a generation when it gained less than _SETTLE_GAIN of its hypervolume
# (on its own scale) over the last _SETTLE_WINDOW generations; mutation is finest after _SETTLE_SPAN such.
_SETTLE_WINDOW = 10
_SETTLE_GAIN = 1e-3
_SETTLE_SPAN = 150
# The search state (plain data: the surviving population, the random generator, ~50 kB) is saved after a generation when this many seconds
# have passed since the last save, and at the end. Resuming from an older state costs nothing but
# pymoo time: the generations after it are replayed with results taken from the archive.
_STATE_EVERY = 1.0


# --------------------------------------------------------------------------------------- encoding
class Space:
    """Encoding of a case's variables as a real vector for the genetic operators.

    Reals are themselves. Integers, choices (option index) and flags (0/1) are
    searched on a real axis widened by half a step at each end and rounded, so
    every legal value has the same share of the axis and no fractional or
    out-of-range value ever reaches the model.
    """

    def __init__(self, case: Case) -> None:
        self.variables = case.variables
        low, high, discrete = [], [], []
        for v in case.variables:
            if v.kind == "real":
                low.append(float(v.low))
                high.append(float(v.high))
                discrete.append(False)
            else:
                lo, hi = {"integer": (v.low, v.high), "choice": (0, len(v.options) - 1), "flag": (0, 1)}[v.kind]
                low.append(lo - 0.4999)
                high.append(hi + 0.4999)
                discrete.append(True)
        self.xl = np.asarray(low, dtype=float)
        self.xu = np.asarray(high, dtype=float)
        self.discrete = np.asarray(discrete, dtype=bool)
        self._names = [v.name for v in case.variables]
        self._kinds = [v.kind for v in case.variables]
        self._options = [v.options for v in case.variables]
        self._all_real = all(kind == "real" for kind in self._kinds)
        #: (column, number of options) of every choice and flag
        self.categorical = [
            (i, len(v.options) if v.kind == "choice" else 2)
            for i, v in enumerate(case.variables)
            if v.kind in ("choice", "flag")
        ]
        self._round_low = np.where(self.discrete, np.ceil(self.xl), self.xl)
        self._round_high = np.where(self.discrete, np.floor(self.xu), self.xu)

    @property
    def size(self) -> float:
        """Number of distinct designs (``inf`` when any variable is real)."""
        if not self.discrete.all():
            return math.inf
        return float(np.prod(self._round_high - self._round_low + 1))

    def repair(self, X: np.ndarray) -> np.ndarray:
        X = np.array(X, dtype=float, copy=True)
        X[:, self.discrete] = np.round(X[:, self.discrete])
        return np.clip(X, self._round_low, self._round_high)

    def decode(self, x: Any) -> dict[str, Any]:
        """The design of one (repaired) row: floats, ints, options and booleans under their names."""
        if self._all_real:
            return dict(zip(self._names, map(float, x), strict=True))
        design: dict[str, Any] = {}
        for name, kind, options, value in zip(self._names, self._kinds, self._options, x, strict=True):
            if kind == "real":
                design[name] = float(value)
            elif kind == "integer":
                design[name] = int(round(value))
            elif kind == "choice":
                design[name] = options[int(round(value))]
            else:
                design[name] = bool(round(value))
        return design

    def encode(self, design: dict[str, Any]) -> np.ndarray:
        x = []
        for v in self.variables:
            value = design[v.name]
            if v.kind == "choice":
                x.append(float(v.options.index(value)))
            else:
                x.append(float(value))
        return np.asarray(x, dtype=float)


class _Rounding(Repair):
    """pymoo repair that rounds the discrete columns (module level so that it pickles)."""

    def __init__(self, space: Space) -> None:
        super().__init__()
        self.space = space

    def _do(self, problem, X, **kwargs):
        return self.space.repair(X)


def middle_design(case: Case) -> dict[str, Any]:
    """The design in the middle of every range (first option, flags off): a quick model check."""
    space = Space(case)
    return space.decode(space.repair(((space.xl + space.xu) / 2)[None, :])[0])


class _MixedMutation(PM):
    """Polynomial mutation, plus a random reset of choices and flags.

    On the widened real axis of a choice or a flag, polynomial mutation moves
    a value by a few per cent of the axis, which almost never reaches another
    option; left to it, a choice would keep whatever the first generation
    drew. Each choice and flag is therefore also reset to a uniformly drawn
    option with the usual per-variable probability min(0.5, 1/n). Cases
    without choices or flags draw nothing extra, so their runs are unchanged.
    """

    def __init__(self, space: Space, eta: float = 20.0) -> None:
        super().__init__(eta=eta)
        self.space = space

    def _do(self, problem, X, *args, random_state=None, **kwargs):
        Xp = super()._do(problem, X, *args, random_state=random_state, **kwargs)
        for column, levels in self.space.categorical:
            reset = random_state.random(len(Xp)) < min(0.5, 1.0 / problem.n_var)
            if reset.any():
                Xp[reset, column] = random_state.integers(0, levels, size=int(reset.sum()))
        return Xp


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
    return "|".join([f"{name}={value:.12g}" if type(value) is float else f"{name}={_key_text(value)}"
                     for name, value in design.items()])


# ----------------------------------------------------------------------------------------- result
@dataclass(frozen=True)
class StudyResult:
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
    meta: dict[str, Any] = field(default_factory=dict)

    def __repr__(self) -> str:
        return (
            f"StudyResult({self.message!r}, front={len(self.front)} designs, n_evals={self.n_evals}, "
            f"n_gen={self.n_gen}, hypervolume={self.hypervolume:.6g})"
        )


# ------------------------------------------------------------------------------------------ state
class _Run:
    """The bookkeeping of one run: cache, evaluation records, front and history."""

    def __init__(self, case: Case, store: Store | None, run_id: int | None) -> None:
        self.case = case
        self.store = store
        self.run_id = run_id
        self.objectives = case.objectives
        self.maximise = case.maximise
        self.memo: dict[str, dict[str, Any]] = {}
        self.records: list[dict[str, Any]] = []
        self.n_evals = 0
        self.n_failed = 0
        self.n_cached = 0
        self.first_failure = ""
        self.front_rows: list[int] = []  # positions in self.records
        self.front_pts = np.empty((0, len(case.objectives)))
        self.reference: np.ndarray | None = None
        self.reference_source = ""
        self.scale: np.ndarray | None = None
        self.history: list[dict[str, Any]] = []
        # The front after each of the last generations, for judging how much it still moves.
        self.snapshots: deque[np.ndarray] = deque(maxlen=max(case.search.stall_generations, _SETTLE_WINDOW) + 1)
        self.settled = 0  # generations so far after which the front had settled (see _tune_operators)
        self.next_id = 1
        # Designs this run evaluated after its last saved state, by key; a resumed search takes
        # each over when it proposes it again instead of evaluating it twice.
        self.adopt: dict[str, dict[str, Any]] = {}
        self.state_saved_at = -math.inf
        self.model = None  # made on first use, so that a run that evaluates nothing imports nothing

    # -- one evaluation --------------------------------------------------------------------
    def record(self, design: dict[str, Any], key: str, outcome: Outcome | dict[str, Any], generation: int,
               *, cached: bool, source_id: int | None = None, eval_id: int | None = None) -> dict[str, Any]:
        if isinstance(outcome, Outcome):
            status, results, message = outcome.status, outcome.results, outcome.message
            duration, worker = outcome.duration, outcome.worker
        else:
            status, results, message = outcome["status"], outcome["results"], outcome["message"]
            duration, worker = outcome["duration"], outcome["worker"]
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
            self.memo[key] = {"status": status, "results": results, "message": message,
                              "duration": duration, "worker": worker, "eval_id": eval_id}
            if status != "ok":
                self.n_failed += 1
                self.first_failure = self.first_failure or message
        else:
            self.n_cached += 1
        return row

    # -- one generation ---------------------------------------------------------------------
    def update_front(self, new_rows: list[int]) -> None:
        fresh = [i for i in new_rows if self.records[i]["feasible"]]
        if not fresh:
            return
        names = [o.name for o in self.objectives]
        new_points = np.array([[self.records[i][n] for n in names] for i in fresh], dtype=float)
        candidates = self.front_rows + fresh
        points = np.vstack([self.front_pts, new_points]) if self.front_rows else new_points
        if self.reference is None:
            self.reference = reference_point(points, self.maximise, worst=[o.worst for o in self.objectives])
            given = [o.name for o in self.objectives if o.worst is not None]
            self.reference_source = (
                "worst values from the case" if len(given) == len(self.objectives)
                else "fixed from the first feasible designs (worst value plus 10% of the range)"
                + (f"; case values for {', '.join(given)}" if given else "")
            )
        if self.scale is None:
            best = np.where(self.maximise, points.max(axis=0), points.min(axis=0))
            scale = np.abs(self.reference - best)
            self.scale = np.where(scale > 0, scale, 1.0)
        # Values equal to 1e-9 of the objective's scale count as ties, so floating-point noise
        # (cos(pi/2) is 6e-17, not 0) cannot keep an unconverged design on the front.
        mask = nondominated(np.round(points / self.scale, 9), self.maximise)
        self.front_rows = [i for i, keep in zip(candidates, mask, strict=True) if keep]
        self.front_pts = points[mask]

    def front_points(self) -> np.ndarray:
        return self.front_pts

    def snapshot(self) -> None:
        """Keep the front as it stands after a generation."""
        self.snapshots.append(self.front_pts)

    def front_gain(self, window: int) -> float:
        """How much the front gained over the last ``window`` generations, judged on its own scale.

        Both fronts are normalised by the ideal and nadir of the current
        front, and the gain is the share of the current front's hypervolume
        (reference 1.1 in each normalised objective) that the older front did
        not have. Judged so, a front that still moves toward the ideal shows a
        large gain however large the box of the first random designs was.
        ``inf`` until ``window`` generations have passed. Exact for two and
        three objectives; with four or more, fronts above 2,000 designs are
        thinned evenly first (an approximation, for speed).
        """
        if window <= 0 or len(self.snapshots) <= window:
            return math.inf
        new, old = self.snapshots[-1], self.snapshots[-1 - window]
        if not len(new):
            return math.inf
        flip = np.where(self.maximise, -1.0, 1.0)
        new, old = new * flip, old * flip
        if new.shape[1] >= 4:
            new, old = _thin(new), _thin(old)
        low, high = new.min(axis=0), new.max(axis=0)
        span = np.where(high > low, high - low, 1.0)
        ref = np.full(new.shape[1], 1.1)
        hv_new = hypervolume((new - low) / span, ref, False)
        if hv_new <= 0:
            return math.inf
        hv_old = hypervolume((old - low) / span, ref, False) if len(old) else 0.0
        return max(0.0, (hv_new - hv_old) / hv_new)

    def hypervolume(self) -> float:
        if self.reference is None or not self.front_rows:
            return 0.0
        return hypervolume(self.front_points(), self.reference, self.maximise)


def _thin(points: np.ndarray, most: int = 2000) -> np.ndarray:
    if len(points) <= most:
        return points
    order = np.lexsort(points.T[::-1])
    return points[order[np.linspace(0, len(points) - 1, most).astype(int)]]


# ---------------------------------------------------------------------------------------- algorithm
def default_population(n_obj: int) -> int:
    """Designs a generation when the case does not say: 60 for two objectives, 100 for three, 120 beyond."""
    return {2: 60, 3: 100}.get(n_obj, 120)


def _tune_operators(algorithm, settled: int, n_obj: int) -> None:
    """Set the distribution indices of SBX and polynomial mutation for the next generation.

    Two objectives: SBX 30 and mutation 20 throughout. Three or more: SBX 30,
    and mutation from coarse (5: offspring land far from their parents, which
    is what escapes the local fronts of a multimodal problem) to fine (100)
    as the front settles: the index rises with the number of generations after
    which the front had gained less than 0.1 % over the last ten (see
    ``_Run.front_gain``), reaching 100 after 150 such generations. A front
    that still moves keeps searching coarsely however much of the budget is
    spent; a settled one is refined. Measured side by side with pymoo's
    NSGA-II in tests/benchmarks/bench_multimodal.py (DTLZ1, ZDT4) and
    bench_search.py (ZDT1-3, DTLZ2): a schedule on the share of the budget
    used instead refined DTLZ1's front before it had converged (median IGD+
    0.35 against pymoo's 0.09), and fixed fine indices leave DTLZ2's front
    short of 99 % of its hypervolume; on ZDT3 late fine mutation loses parts
    of the disconnected front, so two-objective runs keep fixed indices.
    """
    mating = getattr(algorithm, "mating", None)
    if mating is None:
        return
    if n_obj <= 2:
        mating.mutation.eta, mating.crossover.eta = 20.0, 30.0
        return
    mating.crossover.eta = 30.0
    mating.mutation.eta = 5.0 + 95.0 * min(1.0, settled / _SETTLE_SPAN)


def _make_algorithm(case: Case, space: Space, population: int | None, seed: int):
    repair = _Rounding(space)
    n_obj = len(case.objectives)
    population = population or default_population(n_obj)
    common = dict(
        sampling=FloatRandomSampling(),
        crossover=SBX(prob=0.9, eta=15),
        mutation=_MixedMutation(space, eta=20),
        repair=repair,
        eliminate_duplicates=True,
    )
    if n_obj <= 3:
        return NSGA2(pop_size=population, **common), _algorithm_name(n_obj)
    directions = get_reference_directions("energy", n_obj, population, seed=seed)
    return NSGA3(directions, pop_size=population, **common), _algorithm_name(n_obj)


def _algorithm_name(n_obj: int) -> str:
    return "NSGA-II" if n_obj <= 3 else "NSGA-III"


def _problem(case: Case, space: Space) -> Problem:
    return Problem(
        n_var=len(case.variables),
        n_obj=len(case.objectives),
        n_ieq_constr=_n_constraint_columns(case),
        xl=space.xl,
        xu=space.xu,
    )


def _n_constraint_columns(case: Case) -> int:
    """Constraint columns given to pymoo: the case's, plus one for failed evaluations.

    A case without constraints gets none, so that pymoo skips its feasibility
    bookkeeping; a failed design then gets the worst possible objective values.
    """
    return len(case.constraints) + 1 if case.constraints else 0


def _versions() -> dict[str, str]:
    versions = {"python": platform.python_version()}
    for package in ("tradewise", "pymoo", "moocore", "numpy", "pandas"):
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            versions[package] = "unknown"
    return versions


# ------------------------------------------------------------------------------------------ study
def run_study(
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
) -> StudyResult:
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
        Set by :func:`run_repeats`: the set of seeds this run is one of
        (``{"id": ..., "seeds": [...]}``), recorded with the run so that
        resuming any of them resumes them all.

    Returns
    -------
    StudyResult
        Running out of budget is a status, not an error.

    Raises
    ------
    ModelError
        When every design of the first generation fails (quoting the first message).

    Examples
    --------
    >>> result = run_study("heat-sink", evaluations=300, seed=2)   # doctest: +SKIP
    >>> result.status                                              # doctest: +SKIP
    'budget'
    """
    if not isinstance(case, Case):
        case = load_case(case)
    case = case.with_search(
        seed=seed, evaluations=evaluations, generations=generations, population=population, time_limit=time_limit
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
                settings=case.search.as_dict() | ({"seed_set": seed_set} if seed_set else {}),
                seed=case.search.seed,
                versions=_versions(),
            )
        run = _Run(case, archive, run_id)
        space = Space(case)
        algorithm, name = _make_algorithm(case, space, case.search.population, case.search.seed)
        algorithm.setup(_problem(case, space), termination=NoTermination(), seed=case.search.seed, verbose=False)
        return _loop(run, algorithm, name, space, executor, progress, on_evaluation, started=time.time())
    finally:
        if own_executor:
            executor.close()
        if archive is not None:
            archive.close()


def resume_study(
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
) -> StudyResult:
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
        space = Space(case)
        algorithm, _ = _make_algorithm(case, space, case.search.population, case.search.seed)
        algorithm.setup(_problem(case, space), termination=NoTermination(), seed=case.search.seed, verbose=False)
        saved = archive.state(run_id)
        state = decode_state(saved[1]) if saved is not None else None
        if state is None:
            # No usable state (killed before the first was saved, or a state in an older form, which
            # is never unpickled): the same seed proposes the same designs again, and every design
            # the run had evaluated is taken over from the archive, so only pymoo's time is spent.
            state_generation = 0
        else:
            state_generation = saved[0]
            restore_state(algorithm, state, where=f"{path}: run {run_id}")
        archive.discard_after(run_id, state_generation)
        run = _Run(case, archive, run_id)
        _restore(run, archive, run_id, record, upto=state_generation)
        archive.update_run(run_id, status="running", message="resumed",
                           settings=case.search.as_dict() | ({"seed_set": seed_set} if seed_set else {}))
        own_executor = executor is None
        executor = executor or make_executor(workers, dask=dask, scheduler=scheduler)
        try:
            return _loop(run, algorithm, _algorithm_name(len(case.objectives)), space, executor,
                         progress, on_evaluation, started=record["started"] or time.time())
        finally:
            if own_executor:
                executor.close()
    finally:
        archive.close()


def _case_of_run(path: Path, record: dict[str, Any], case: Case | str | Path | None) -> Case:
    """The case of an archived run: the given one, or the case file recorded with it; its hash must match."""
    run_id = record["run_id"]
    if case is None:
        case_path = Path(record["case_path"])
        if not case_path.exists():
            raise StoreError(f"{path}: run {run_id}'s case file {case_path} no longer exists; pass the case")
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
        design = {n: _native(row[n]) for n in names}
        key = design_key(design)
        results = {k: _native(row[k]) for k in row if k not in design and k not in _EVAL_COLUMNS and not _missing(row[k])}
        outcome = {"status": row["status"], "results": results, "message": row["message"],
                   "duration": row["duration"] or 0.0, "worker": row["worker"]}
        if row["generation"] > upto:
            if not row["cached"]:
                run.adopt[key] = {**outcome, "eval_id": row["eval_id"], "design": design,
                                  "generation": row["generation"]}
            continue
        if row["generation"] != current:
            if current is not None:
                run.update_front(list(range(start, len(run.records))))
                run.snapshot()
            start, current = len(run.records), row["generation"]
        run.record(design, key, outcome, row["generation"], cached=bool(row["cached"]), eval_id=row["eval_id"])
    if current is not None:
        run.update_front(list(range(start, len(run.records))))
        run.snapshot()
    history = archive.history(run_id)
    run.history = history.to_dict("records") if len(history) else []
    if run.history:
        run.settled = int(run.history[-1].get("settled", 0) or 0)


_EVAL_COLUMNS = {"eval_id", "run_id", "generation", "status", "message", "duration", "worker", "cached"}


def _missing(value: Any) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def _native(value: Any) -> Any:
    if isinstance(value, np.generic):
        value = value.item()
    return value


def _loop(run: _Run, algorithm, algorithm_name: str, space: Space, executor: InProcess,
          progress, on_evaluation, *, started: float) -> StudyResult:
    case, settings = run.case, run.case.search
    problem = algorithm.problem
    n_obj = len(case.objectives)
    n_con = _n_constraint_columns(case)
    generation = len(run.history)
    fronted = len(run.records)
    idle = 0
    status = ""
    # Elapsed time counts the time spent searching: a resumed run goes on from its last generation.
    clock = time.monotonic() - (run.history[-1]["elapsed_s"] if run.history else time.time() - started)
    saved_generation = generation
    try:
        while True:
            elapsed = time.monotonic() - clock
            if run.n_evals >= settings.evaluations:
                status = "budget"
            elif settings.generations is not None and generation >= settings.generations:
                status = "generations"
            elif settings.time_limit is not None and elapsed >= settings.time_limit:
                status = "time_limit"
            elif run.front_gain(settings.stall_generations) <= settings.stall_tolerance:
                status = "stalled"
            elif idle >= _EXHAUSTED_AFTER or run.n_evals >= space.size:
                status = "exhausted"
            if status:
                break
            _tune_operators(algorithm, run.settled, n_obj)
            pop = algorithm.ask()
            if pop is None or len(pop) == 0:
                status = "exhausted"
                break
            generation += 1
            proposed = pop.get("X")
            X = space.repair(proposed)
            if not np.array_equal(X, proposed):
                pop.set("X", X)
            designs = [space.decode(x) for x in X.tolist()]
            keys = [design_key(d) for d in designs]

            # Which designs are new: not in this run's memo, not in the archive for this case.
            # Those this run evaluated before it was interrupted count as new: they are taken over.
            known = {k for k in keys if k in run.memo}
            unknown = [k for k in dict.fromkeys(keys) if k not in known]
            look_up = [k for k in unknown if k not in run.adopt]
            archived = (run.store.lookup(case.hash, look_up, exclude_run=run.run_id)
                        if run.store is not None and look_up else {})
            fresh = [k for k in unknown if k not in archived]
            room = settings.evaluations - run.n_evals
            if len(fresh) > room:
                allowed = set(fresh[:room])
                keep = [i for i, k in enumerate(keys) if k in known or k in archived or k in allowed]
                pop = pop[keep]
                designs = [designs[i] for i in keep]
                keys = [keys[i] for i in keep]
                fresh = fresh[:room]
            first_new = fronted = len(run.records)

            outcomes: dict[str, Any] = {}
            for key in dict.fromkeys(keys):
                if key in run.memo:
                    outcomes[key] = run.memo[key]
                elif key in archived:
                    outcomes[key] = archived[key]
            # Served from the memo or the archive: recorded as cached rows, not evaluated again.
            for key, outcome in list(outcomes.items()):
                design = designs[keys.index(key)]
                row = run.record(design, key, outcome, generation, cached=True, source_id=outcome["eval_id"])
                if key in archived and key not in run.memo:
                    run.memo[key] = {**outcome}
                if on_evaluation:
                    on_evaluation(row)
            positions = {k: keys.index(k) for k in fresh}
            for key in sorted((k for k in fresh if k in run.adopt), key=lambda k: run.adopt[k]["eval_id"]):
                taken = run.adopt.pop(key)
                run.record(designs[positions[key]], key, taken, generation, cached=False, eval_id=taken["eval_id"])
                outcomes[key] = run.memo[key]
            to_run = [k for k in fresh if k not in outcomes]
            batch = [designs[positions[k]] for k in to_run]
            for i, outcome in executor.run(_model_for(run), batch) if batch else ():
                key = to_run[i]
                row = run.record(batch[i], key, outcome, generation, cached=False)
                outcomes[key] = run.memo[key]
                if on_evaluation:
                    on_evaluation(row)
            if run.store is not None:
                run.store.flush(wait=False)  # committed by the archive writer; the search goes on

            F = np.zeros((len(keys), n_obj))
            G = np.zeros((len(keys), n_con)) if n_con else None
            for r, key in enumerate(keys):
                outcome = outcomes[key]
                if outcome["status"] != "ok":
                    if n_con:
                        G[r, -1] = _FAILED_PENALTY
                    else:
                        F[r, :] = _FAILED_OBJECTIVE
                    continue
                results = outcome["results"]
                for j, o in enumerate(case.objectives):
                    F[r, j] = -results[o.name] if o.maximise else results[o.name]
                for j, c in enumerate(case.constraints):
                    G[r, j] = c.violation(results[c.name])
            values = {"F": F} if G is None else {"F": F, "G": G}
            algorithm.evaluator.eval(StaticProblem(problem, **values), pop)
            algorithm.tell(infills=pop)

            new_rows = list(range(first_new, len(run.records)))
            if generation == 1 and new_rows and all(run.records[i]["status"] != "ok" for i in new_rows):
                message = (
                    f"every design of the first generation failed ({len(new_rows)} of {len(new_rows)}); "
                    f"first error: {run.first_failure}"
                )
                if run.store is not None:
                    run.store.update_run(run.run_id, status="failed", message=message, finished=time.time())
                raise ModelError(message)
            had_reference = run.reference is not None
            run.update_front(new_rows)
            run.snapshot()
            if run.front_gain(_SETTLE_WINDOW) < _SETTLE_GAIN:
                run.settled += 1
            if run.store is not None and run.reference is not None and not had_reference:
                run.store.update_run(
                    run.run_id, reference={"point": run.reference.tolist(), "source": run.reference_source}
                )
            idle = idle + 1 if not fresh else 0
            n_feasible = sum(1 for i in new_rows if run.records[i]["feasible"])
            row = {
                "generation": generation,
                "evaluations": run.n_evals,
                "new": len(fresh),
                "cached": len(new_rows) - len(fresh),
                "failed": run.n_failed,
                "feasible_share": n_feasible / len(new_rows) if new_rows else 0.0,
                "front_size": len(run.front_rows),
                "hypervolume": run.hypervolume(),
                "elapsed_s": round(time.monotonic() - clock, 3),
                "front_gain": _finite(run.front_gain(settings.stall_generations or _SETTLE_WINDOW)),
                "settled": run.settled,
            }
            run.history.append(row)
            if run.store is not None:
                state = None
                if time.monotonic() - run.state_saved_at >= _STATE_EVERY:
                    state, saved_generation = _saved_state(run, algorithm, space, generation), generation
                    run.state_saved_at = time.monotonic()
                run.store.add_generation(run.run_id, row, state=state)
            if progress:
                progress(row)
        if run.store is not None and saved_generation != generation:
            run.store.save_state(run.run_id, generation, _saved_state(run, algorithm, space, generation))
    except KeyboardInterrupt:
        status = "interrupted"
        # Designs evaluated in the interrupted generation count too: they are in the archive.
        run.update_front(list(range(fronted, len(run.records))))
    _take_over_leftovers(run)
    return _finish(run, status, algorithm_name, started)


def _saved_state(run: _Run, algorithm, space: Space, generation: int) -> bytes:
    """The search state after ``generation`` as plain data (JSON), with the survivors' evaluation ids."""
    ids = [run.memo.get(design_key(space.decode(x)), {}).get("eval_id") for x in algorithm.pop.get("X").tolist()]
    return encode_state(search_state(algorithm, generation=generation, eval_ids=ids))


def _take_over_leftovers(run: _Run) -> None:
    """Count the evaluations a resumed search did not propose again (it stopped earlier) as the run's own."""
    if not run.adopt:
        return
    first = len(run.records)
    for key, taken in sorted(run.adopt.items(), key=lambda item: item[1]["eval_id"]):
        run.record(taken["design"], key, taken, taken["generation"], cached=False, eval_id=taken["eval_id"])
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


def _finish(run: _Run, status: str, algorithm_name: str, started: float) -> StudyResult:
    case = run.case
    records = pd.DataFrame.from_records(run.records)
    columns = _ordered_columns(case, records)
    evaluations = records[columns] if len(records) else records
    history = pd.DataFrame.from_records(run.history)
    hv = run.hypervolume()
    meta = {
        "title": case.title,
        "description": case.description,
        "cautions": case.cautions,
        "case_file": case.path.name,
        "case_hash": case.hash,
        "algorithm": algorithm_name,
        "status": status,
        "stop_reason": STATUS_TEXT.get(status, status),
        "seed": case.search.seed,
        "settings": case.search.as_dict()
        | {"population": case.search.population or default_population(len(case.objectives))},
        "versions": _versions(),
        "n_evals": run.n_evals,
        "n_gen": len(run.history),
        "n_failed": run.n_failed,
        "n_cached": run.n_cached,
        "reference_source": run.reference_source,
        "started": started,
        "finished": time.time(),
        "design_space": [
            {"name": v.name, "type": v.kind, "low": v.low, "high": v.high, "options": list(v.options), "unit": v.unit}
            for v in case.variables
        ],
        "descriptions": {
            item.name: item.description
            for item in (*case.variables, *case.objectives, *case.constraints)
            if item.description
        },
        "constraint_limits": [
            {"name": c.name, "min": c.min, "max": c.max, "unit": c.unit} for c in case.constraints
        ],
    }
    front_table = records.iloc[run.front_rows][columns] if run.front_rows else records.iloc[0:0].reindex(columns=columns)
    front_table = front_table.drop(columns=[c for c in ("cached", "message", "status", "feasible", "violation", "worker")
                                            if c in front_table.columns])
    units = case.units
    front = Front.from_table(
        front_table, case.objectives, units=units, variables=case.variable_names,
        constraints=case.constraint_names, reference=run.reference, meta=meta,
    )
    least = None
    parts = [f"Stopped after {run.n_evals} evaluations in {len(run.history)} generations: "
             f"{STATUS_TEXT.get(status, status)}."]
    if status == "stalled":
        window, tolerance = case.search.stall_generations, case.search.stall_tolerance
        parts.append(
            f"Over the last {window} generations the front gained less than {tolerance:.2g} of its "
            "hypervolume measured on its own scale; to search on, set stall_generations higher (or 0 to "
            "turn the rule off) or stall_tolerance lower in [search] and run again."
        )
    if run.n_failed:
        parts.append(f"{run.n_failed} evaluation(s) failed (first: {run.first_failure}).")
    if len(front):
        parts.append(f"Front of {len(front)} designs, hypervolume {hv:.6g}.")
    else:
        ok = records[records["status"] == "ok"] if len(records) else records
        parts.append("No feasible design was found" + (": " + _violation_summary(case, ok) if len(ok) else "; no design evaluated successfully."))
        if len(ok):
            least = ok.sort_values("violation").drop_duplicates(subset=case.variable_names).head(20)[columns]
    message = " ".join(parts)
    if run.store is not None:
        run.store.update_run(run.run_id, status=status, message=message, finished=time.time())
    return StudyResult(
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
        meta=meta,
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
            unit = f" {c.unit}" if c.unit else ""
            lines.append((broken.mean(), f"{c.describe()} broken by {broken.mean():.0%} of designs, "
                                          f"missed by {shortfall[broken].min():.4g}{unit} at best"))
    lines.sort(key=lambda item: -item[0])
    return "; ".join(text for _, text in lines[:3]) + "."


def _ordered_columns(case: Case, records: pd.DataFrame) -> list[str]:
    first = ["eval_id", "generation"]
    named = case.variable_names + case.objective_names + case.constraint_names
    tail = ["feasible", "violation", "status", "cached", "duration", "worker", "message"]
    outputs = [c for c in records.columns if c not in set(first) | set(named) | set(tail)]
    return [c for c in first + named + outputs + tail if c in records.columns]


# ------------------------------------------------------------------------------------------ files
def save_run(result: StudyResult, folder: str | Path) -> dict[str, Path]:
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


# ---------------------------------------------------------------------------------------- repeats
@dataclass(frozen=True)
class RepeatsResult:
    """Several independent runs of one case, one a seed, and their merged front.

    ``front`` is the non-dominated union of the runs' fronts; its column
    ``seed`` (``run_seed`` when the case already uses that name) says which
    run found each design. ``runs`` holds each run's :class:`StudyResult` in
    seed order; ``hypervolumes`` each run's hypervolume and ``hypervolume``
    the merged front's, all on the one ``reference`` point (the worst, per
    objective, of the runs' own reference points). ``history`` holds every
    run's generations, with the seed in the first column.
    """

    status: str
    message: str
    front: Front
    runs: tuple[StudyResult, ...]
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
    meta: dict[str, Any] = field(default_factory=dict)

    @property
    def spread(self) -> dict[str, float]:
        """Median, smallest and largest hypervolume of the single runs."""
        return _spread(self.hypervolumes)

    def __repr__(self) -> str:
        s = self.spread
        return (
            f"RepeatsResult({len(self.runs)} seeds, front={len(self.front)} designs, hypervolume={self.hypervolume:.6g}, "
            f"single runs median {s['median']:.6g} [{s['min']:.6g}, {s['max']:.6g}])"
        )


def _spread(values: Any) -> dict[str, float]:
    values = np.asarray(values, dtype=float)
    if len(values) == 0:
        return {"median": math.nan, "min": math.nan, "max": math.nan}
    return {"median": float(np.median(values)), "min": float(values.min()), "max": float(values.max())}


def _one_seed_of_set(case: Case, seed: int, store: str | Path | None, workers: int | None,
                     seed_set: dict[str, Any], run_id: int | None, evaluations: int | None) -> StudyResult:
    """One run of a set of seeds, started or resumed, in a worker process (module level so that it pickles)."""
    if run_id is not None:
        return resume_study(store, run_id=run_id, evaluations=evaluations, case=case, workers=workers)
    return run_study(case, seed=seed, store=store, workers=workers, seed_set=seed_set)


def run_repeats(
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
    on_run: Callable[[StudyResult], None] | None = None,
) -> RepeatsResult:
    """Run a case ``n_seeds`` times with seeds ``seed``, ``seed + 1``, ... and merge the fronts.

    Each run is an ordinary :func:`run_study` with the same settings and its
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
        As for :func:`run_study`.
    progress, on_evaluation : callable, optional
        As for :func:`run_study` (the row also carries ``seed``); only called
        when the runs follow one another.
    on_run : callable, optional
        Called with each run's result as it finishes.

    Returns
    -------
    RepeatsResult

    Examples
    --------
    >>> result = run_repeats("heat-sink", 5, evaluations=600, workers=5)   # doctest: +SKIP
    >>> result.spread                                                     # doctest: +SKIP
    {'median': ..., 'min': ..., 'max': ...}
    """
    from tradewise.errors import CaseError

    if isinstance(n_seeds, bool) or not isinstance(n_seeds, int | np.integer) or n_seeds < 1:
        raise CaseError(f"seeds: got {n_seeds!r}, allowed: a whole number of runs, 1 or more")
    if not isinstance(case, Case):
        case = load_case(case)
    case = case.with_search(
        seed=seed, evaluations=evaluations, generations=generations, population=population, time_limit=time_limit
    )
    seeds = [case.search.seed + i for i in range(int(n_seeds))]
    if store is not None:
        # Create the file and switch it to WAL once, before several writers open it.
        open_store(store).close()
    seed_set = {"id": uuid.uuid4().hex, "seeds": seeds}
    return _run_seed_set(case, seeds, {}, seed_set=seed_set, store=store, workers=workers, dask=dask,
                         scheduler=scheduler, progress=progress, on_evaluation=on_evaluation, on_run=on_run)


def _run_seed_set(case: Case, seeds: list[int], existing: dict[int, int], *, seed_set: dict[str, Any],
                  store: str | Path | None, workers: int | None, dask: bool, scheduler: str | None,
                  progress, on_evaluation, on_run, evaluations: int | None = None) -> RepeatsResult:
    """Run (or, for seeds in ``existing``, resume by run id) every seed of a set, and merge their fronts."""
    import concurrent.futures as cf
    import contextlib

    def start(s: int, inner: int | None = None, executor=None, tagged=None):
        if s in existing:
            return resume_study(store, run_id=existing[s], evaluations=evaluations, case=case, workers=inner,
                                executor=executor, progress=tagged, on_evaluation=on_evaluation)
        return run_study(case, seed=s, store=store, workers=inner, executor=executor, progress=tagged,
                         on_evaluation=on_evaluation, seed_set=seed_set)

    results: dict[int, StudyResult] = {}
    interrupted = False
    parallel = bool(workers and workers > 1 and not (dask or scheduler) and len(seeds) > 1)
    if parallel:
        n_proc = min(int(workers), len(seeds))
        inner = int(workers) // n_proc
        pool = cf.ProcessPoolExecutor(max_workers=n_proc)
        futures = {pool.submit(_one_seed_of_set, case, s, store, inner if inner > 1 else None, seed_set,
                               existing.get(s), evaluations): s for s in seeds}
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
                with contextlib.suppress(BaseException):  # a run that died on the interrupt has nothing to give
                    results[s] = future.result()
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
    else:
        executor = make_executor(workers, dask=dask, scheduler=scheduler)
        try:
            for s in seeds:
                tagged = (lambda row, s=s: progress({**row, "seed": s})) if progress else None
                result = start(s, executor=executor, tagged=tagged)
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
    return _merge_repeats(case, [results[s] for s in seeds if s in results], interrupted=interrupted,
                          missing=missing)


def resume_repeats(
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
    on_run: Callable[[StudyResult], None] | None = None,
) -> RepeatsResult:
    """Continue a set of seeds made by :func:`run_repeats`: every unfinished seed resumed, every seed that
    never started run, and the fronts merged again.

    ``run_id`` is any run of the set (default: the newest in the file); the
    other parameters are as for :func:`resume_study`. Finished seeds are
    read back from the archive without evaluating anything.
    """
    path = Path(store)
    with open_store(path, create=False) as archive:
        run_id = run_id if run_id is not None else archive.latest_run()
        record = archive.run(run_id)
        seed_set = (record["settings"] or {}).get("seed_set")
        if not isinstance(seed_set, dict) or not isinstance(seed_set.get("seeds"), list):
            raise StoreError(f"{path}: run {run_id} is a single run, not one of a set of seeds; use resume")
        existing: dict[int, int] = {}
        for other in archive.runs()["run_id"].tolist():
            settings = archive.run(int(other))["settings"] or {}
            if (settings.get("seed_set") or {}).get("id") == seed_set["id"]:
                existing[int(archive.run(int(other))["seed"])] = int(other)
    loaded = _case_of_run(path, record, case)
    settings = {k: v for k, v in record["settings"].items() if k not in ("seed_set", "seed") and v is not None}
    if evaluations is not None:
        settings["evaluations"] = evaluations
    loaded = loaded.with_search(**settings)
    seeds = [int(s) for s in seed_set["seeds"]]
    return _run_seed_set(loaded, seeds, existing, seed_set=seed_set, store=path, workers=workers, dask=dask,
                         scheduler=scheduler, progress=progress, on_evaluation=on_evaluation, on_run=on_run,
                         evaluations=evaluations)


def _history_on(run: StudyResult, reference: np.ndarray) -> pd.DataFrame:
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
    values, done = [], -math.inf
    for generation in history["generation"].tolist():
        new = points[(generations > done) & (generations <= generation)]
        done = generation
        if len(new):
            candidates = np.vstack([front, new])
            front = candidates[nondominated(candidates, run.case.maximise)]
        values.append(hypervolume(front, reference, run.case.maximise) if len(front) else 0.0)
    history["hypervolume"] = values
    return history


def _on_common_reference(run: StudyResult, reference: np.ndarray, hv: float) -> StudyResult:
    """The run restated on the seeds' common reference point: its hypervolume, history and message."""
    own = f"Front of {len(run.front)} designs, hypervolume {run.hypervolume:.6g}."
    common = f"Front of {len(run.front)} designs, hypervolume {hv:.6g} on the seeds' common reference point."
    meta = dict(run.meta) | {"reference_source": "the worst, per objective, of the seeds' own reference points"}
    front = replace(run.front, reference=tuple(float(v) for v in reference), meta=meta)
    return replace(run, front=front, hypervolume=hv, reference=tuple(float(v) for v in reference),
                   history=_history_on(run, reference), message=run.message.replace(own, common), meta=meta)


def _merge_repeats(case: Case, runs: list[StudyResult], *, interrupted: bool,
                   missing: list[int] | None = None) -> RepeatsResult:
    flags = np.asarray(case.maximise, dtype=bool)
    recorded = [np.asarray(r.reference, dtype=float) for r in runs if r.reference is not None]
    reference = np.where(flags, np.min(recorded, axis=0), np.max(recorded, axis=0)) if recorded else None
    hvs = tuple(
        hypervolume(r.front.points(), reference, case.maximise) if reference is not None and len(r.front) else 0.0
        for r in runs
    )
    if reference is not None:
        # One reference for everything about a set of seeds: each run's history, message and folder too.
        runs = [_on_common_reference(r, reference, hv) for r, hv in zip(runs, hvs, strict=True)]
    names = set(case.variable_names) | set(case.objective_names) | set(case.constraint_names) | set(case.outputs)
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
    status = "interrupted" if interrupted or "interrupted" in statuses else (
        statuses[0] if len(set(statuses)) == 1 else "mixed")
    n_evals = sum(r.n_evals for r in runs)
    n_failed = sum(r.n_failed for r in runs)
    spread = _spread(hvs)
    meta = dict(runs[0].meta)
    meta.update({
        "seed": seeds[0], "seeds": list(seeds), "n_seeds": len(seeds), "seed_column": column,
        "seed_hypervolumes": list(hvs), "hypervolume_median": spread["median"],
        "hypervolume_min": spread["min"], "hypervolume_max": spread["max"],
        "status": status, "stop_reason": "; ".join(f"seed {r.seed}: {STATUS_TEXT.get(r.status, r.status)}" for r in runs),
        "n_evals": n_evals, "n_gen": sum(r.n_gen for r in runs), "n_failed": n_failed,
        "n_cached": sum(r.n_cached for r in runs),
        "reference_source": "the worst, per objective, of the seeds' own reference points",
        "started": min(r.meta.get("started", math.inf) for r in runs),
        "finished": max(r.meta.get("finished", -math.inf) for r in runs),
    })
    if tables:
        front = Front.from_table(
            pd.concat(tables, ignore_index=True), case.objectives, units=case.units, variables=case.variable_names,
            constraints=case.constraint_names, reference=reference, meta=meta,
        )
    else:
        empty = runs[0].front.table.iloc[0:0].copy()
        empty.insert(0, column, pd.Series(dtype="int64"))
        front = Front(table=empty, objectives=case.objectives, units=case.units,
                      variables=tuple(case.variable_names), constraints=tuple(case.constraint_names),
                      reference=tuple(reference) if reference is not None else None, meta=meta)
    merged_hv = hypervolume(front.points(), reference, case.maximise) if reference is not None and len(front) else 0.0
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
        stops[STATUS_TEXT.get(r.status, r.status)] = stops.get(STATUS_TEXT.get(r.status, r.status), 0) + 1
    span = f"seed {seeds[0]}" if len(seeds) == 1 else f"seeds {seeds[0]} to {seeds[-1]}"
    parts = [f"{len(runs)} run(s) with {span}, {n_evals} evaluations in all; stopped because "
             + ", ".join(f"{text} ({count})" for text, count in stops.items()) + "."]
    if n_failed:
        parts.append(f"{n_failed} evaluation(s) failed.")
    if len(front):
        s = spread
        parts.append(
            f"Merged front of {len(front)} designs, hypervolume {merged_hv:.6g}; single runs: median "
            f"{s['median']:.6g}, min {s['min']:.6g}, max {s['max']:.6g} (spread {s['max'] - s['min']:.3g}) "
            f"on the common reference point ({', '.join(f'{v:g}' for v in reference)})."
        )
    else:
        parts.append("No run found a feasible design.")
    if missing:
        listed = ", ".join(str(m) for m in missing)
        parts.append(f"Seed(s) {listed} did not run: the merged front stands for {len(runs)} of "
                     f"{len(runs) + len(missing)} seeds; resume the archive to run the rest.")
        status = meta["status"] = "interrupted"
    meta["missing_seeds"] = list(missing or [])
    return RepeatsResult(
        status=status, message=" ".join(parts), front=front, runs=tuple(runs), seeds=seeds, hypervolumes=hvs,
        hypervolume=merged_hv, reference=tuple(float(v) for v in reference) if reference is not None else None,
        history=history, n_evals=n_evals, n_gen=sum(r.n_gen for r in runs), n_failed=n_failed,
        n_cached=sum(r.n_cached for r in runs), seed=seeds[0], case=case, store_path=runs[0].store_path,
        least_infeasible=least, meta=meta,
    )


def save_repeats(result: RepeatsResult, folder: str | Path) -> dict[str, Path]:
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
    return written
