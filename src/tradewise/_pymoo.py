"""The adapter to pymoo: the only module where pymoo types appear.

It holds the encoding of a case's mixed variables as one real vector
(:class:`Space`), the operators and algorithms, the searchers a run drives by
propose and tell on plain numpy arrays (:func:`make_searcher`), and the
search state as plain data.

For two and three objectives :class:`Searcher` runs NSGA-II's generation on
numpy arrays with pymoo's kernels (SBX, polynomial mutation, crowding
distance) and moocore's non-dominated ranks; only the loop around them is
ours. pymoo's own loop keeps the population as objects, one per design, and
its bookkeeping on them (reading and setting values design by design,
tournaments over objects, duplicate checks) cost 9-11 ms of CPU a
generation of 100, about as much as a whole plain pymoo run of a trivial
model, so the run's own work had no room left; on arrays a generation costs
2-3 ms (DEVELOPERS.md has the measurements). The array loop is pymoo 0.6.2's NSGA-II step for step,
random draws included: the same seed proposes the same designs, bit for bit
(tests/test_pymoo_adapter.py runs both side by side), and states saved by
either resume in the other. Four or more objectives run pymoo's NSGA-III
(:class:`PymooSearcher`).

An archive is data: nothing read from it may run code. So the state a run
resumes from is not the pickled algorithm but what the algorithm's next
proposals depend on, as numbers: the surviving population (its encoded
designs, objective and constraint values, and the per-design marks the
survival step set, such as rank and crowding distance), the random
generator's state, the counters, and for NSGA-III the normalisation that
survival carries from generation to generation. Everything else (operators,
reference directions, the problem) is rebuilt from the case and the
settings, exactly as the run built it, so the resumed search proposes what
the uninterrupted run would have.
"""

from __future__ import annotations

import json
import math
from typing import Any

import moocore
import numpy as np
from pymoo.algorithms.moo.nsga2 import NSGA2
from pymoo.algorithms.moo.nsga3 import NSGA3
from pymoo.core.population import Population
from pymoo.core.problem import Problem
from pymoo.core.repair import Repair
from pymoo.core.termination import NoTermination
from pymoo.operators.crossover.sbx import SBX, cross_sbx
from pymoo.operators.mutation.pm import PM, mut_pm
from pymoo.operators.sampling.rnd import FloatRandomSampling
from pymoo.operators.survival.rank_and_crowding.metrics import calc_crowding_distance
from pymoo.problems.static import StaticProblem
from pymoo.util.ref_dirs import get_reference_directions
from pymoo.util.ref_dirs.reduction import ReductionBasedReferenceDirectionFactory
from scipy.spatial.distance import cdist

from tradewise._plain import plain
from tradewise.case import Case
from tradewise.errors import StoreError

__all__ = [
    "STATE_FORMAT",
    "Space",
    "Searcher",
    "PymooSearcher",
    "make_searcher",
    "default_population",
    "algorithm_name",
    "n_constraint_columns",
    "encode_state",
    "decode_state",
    "search_state",
    "restore_state",
    "restore_random",
    "minimise_function",
]


class Space:
    """Encoding of a case's variables as a real vector for the genetic operators.

    Reals are themselves. Integers, choices (option index) and flags (0/1) are
    searched on a real axis widened by half a step at each end and rounded, so
    every legal value has the same share of the axis and no fractional or
    out-of-range value ever reaches the model. A discrete variable (standard
    sizes) and a real with a step are searched the same way by the index of
    their sorted values, so neighbouring sizes are neighbours for crossover and
    mutation and no value off the list is ever proposed.
    """

    def __init__(self, case: Case) -> None:
        self.variables = case.variables
        low, high, discrete = [], [], []
        for v in case.variables:
            if v.grid:
                low.append(-0.4999)
                high.append(len(v.grid) - 1 + 0.4999)
                discrete.append(True)
            elif v.kind == "real":
                low.append(float(v.low))
                high.append(float(v.high))
                discrete.append(False)
            else:
                lo, hi = {
                    "integer": (v.low, v.high),
                    "choice": (0, len(v.options) - 1),
                    "flag": (0, 1),
                }[v.kind]
                low.append(lo - 0.4999)
                high.append(hi + 0.4999)
                discrete.append(True)
        self.xl = np.asarray(low, dtype=float)
        self.xu = np.asarray(high, dtype=float)
        self.discrete = np.asarray(discrete, dtype=bool)
        self._any_discrete = bool(self.discrete.any())
        self._names = [v.name for v in case.variables]
        self._kinds = [v.kind for v in case.variables]
        self._options = [v.options for v in case.variables]
        self._grids = [v.grid for v in case.variables]
        #: Every variable is a real without a step: every decoded value is a float.
        self.all_real = all(v.kind == "real" and not v.grid for v in case.variables)
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
        if not self._any_discrete:  # reals only: clipping alone (it makes the new array)
            return np.clip(np.asarray(X, dtype=float), self._round_low, self._round_high)
        X = np.array(X, dtype=float, copy=True)
        X[:, self.discrete] = np.round(X[:, self.discrete])
        return np.clip(X, self._round_low, self._round_high)

    def decode(self, x: Any) -> dict[str, Any]:
        """The design of one (repaired) row: floats, ints, options and booleans under their names."""
        if self.all_real:
            return dict(zip(self._names, map(float, x), strict=True))
        design: dict[str, Any] = {}
        for name, kind, options, grid, value in zip(
            self._names, self._kinds, self._options, self._grids, x, strict=True
        ):
            if grid:
                design[name] = grid[int(round(value))]
            elif kind == "real":
                design[name] = float(value)
            elif kind == "integer":
                design[name] = int(round(value))
            elif kind == "choice":
                design[name] = options[int(round(value))]
            else:
                design[name] = bool(round(value))
        return design

    def decode_columns(self, X: np.ndarray) -> list[list[Any]]:
        """The values of many (repaired) rows, one list a variable: what :meth:`decode` gives, a column at a time."""
        X = np.asarray(X, dtype=float).reshape(-1, len(self._names))
        columns: list[list[Any]] = []
        for j, (kind, options, grid) in enumerate(
            zip(self._kinds, self._options, self._grids, strict=True)
        ):
            column = X[:, j]
            if kind == "real" and not grid:
                columns.append(column.tolist())
                continue
            index = np.rint(column).astype(np.int64).tolist()
            if grid:
                columns.append([grid[i] for i in index])
            elif kind == "integer":
                columns.append(index)
            elif kind == "choice":
                columns.append([options[i] for i in index])
            else:
                columns.append([bool(i) for i in index])
        return columns

    def decode_all(self, X: np.ndarray) -> list[dict[str, Any]]:
        """The designs of many (repaired) rows, as :meth:`decode` gives each."""
        names = self._names
        return [
            dict(zip(names, row, strict=True)) for row in zip(*self.decode_columns(X), strict=True)
        ]

    def encode(self, design: dict[str, Any]) -> np.ndarray:
        x = []
        for v in self.variables:
            value = design[v.name]
            if v.kind == "choice":
                x.append(float(v.options.index(value)))
            elif v.grid:
                x.append(float(np.argmin(np.abs(np.asarray(v.grid) - float(value)))))
            else:
                x.append(float(value))
        return np.asarray(x, dtype=float)


class Rounding(Repair):
    """pymoo repair that rounds the discrete columns (module level so that it pickles)."""

    def __init__(self, space: Space) -> None:
        super().__init__()
        self.space = space

    def _do(self, problem, X, **kwargs):
        return self.space.repair(X)


class MixedMutation(PM):
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
        reset_choices(self.space, Xp, random_state, min(0.5, 1.0 / problem.n_var))
        return Xp


def reset_choices(space: Space, X: np.ndarray, rng: np.random.Generator, rate: float) -> None:
    """Redraw each choice and flag of the rows of ``X`` (in place) with probability ``rate``."""
    for column, levels in space.categorical:
        reset = rng.random(len(X)) < rate
        if reset.any():
            X[reset, column] = rng.integers(0, levels, size=int(reset.sum()))


def default_population(n_obj: int) -> int:
    """Designs a generation when the case does not say: 60 for two objectives, 100 for three, 120 beyond."""
    return {2: 60, 3: 100}.get(n_obj, 120)


def tune_operators(algorithm, refine: float, n_obj: int) -> None:
    """Set the distribution indices of SBX and polynomial mutation for the next generation.

    Two objectives: SBX 30 and mutation 20 throughout. Three or more: SBX 30,
    and mutation from coarse (5: offspring land far from their parents, which
    is what escapes the local fronts of a multimodal problem) to fine (100)
    as ``refine`` goes from 0 to 1. The search sets ``refine`` from how long
    the front has been settled (see ``search._refinement``). A front
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
    mating.crossover.eta, mating.mutation.eta = operator_indices(refine, n_obj)


def operator_indices(refine: float, n_obj: int) -> tuple[float, float]:
    """The distribution indices (SBX, polynomial mutation) :func:`tune_operators` sets."""
    if n_obj <= 2:
        return 30.0, 20.0
    return 30.0, 5.0 + 95.0 * min(max(refine, 0.0), 1.0)


def make_algorithm(case: Case, space: Space, population: int | None, seed: int):
    """pymoo's algorithm for the case: NSGA-III for four or more objectives; for two or three the
    NSGA-II that :class:`Searcher` follows step for step (tests drive both side by side)."""
    repair = Rounding(space)
    n_obj = len(case.objectives)
    population = population or default_population(n_obj)
    common = dict(
        sampling=FloatRandomSampling(),
        crossover=SBX(prob=0.9, eta=15),
        mutation=MixedMutation(space, eta=20),
        repair=repair,
        eliminate_duplicates=True,
    )
    if n_obj <= 3:
        return NSGA2(pop_size=population, **common), algorithm_name(n_obj)
    # pymoo's energy method starts from 10,000 points on the simplex and their full distance matrix
    # (about 800 MB whatever the population); a start sized to the population gives equally spread
    # directions (measured: closest two of 120 in 4 objectives 0.193 apart, against 0.194) in ~25 MB.
    start = ReductionBasedReferenceDirectionFactory(
        n_obj,
        population,
        kmeans=True,
        lexsort=False,
        n_sample_points=min(2000, max(1000, 10 * population)),
    ).do(random_state=np.random.default_rng(seed))
    directions = get_reference_directions("energy", n_obj, population, seed=seed, X=start)
    return NSGA3(directions, pop_size=population, **common), algorithm_name(n_obj)


def algorithm_name(n_obj: int) -> str:
    return "NSGA-II" if n_obj <= 3 else "NSGA-III"


def make_problem(case: Case, space: Space) -> Problem:
    return Problem(
        n_var=len(case.variables),
        n_obj=len(case.objectives),
        n_ieq_constr=n_constraint_columns(case),
        xl=space.xl,
        xu=space.xu,
    )


def n_constraint_columns(case: Case) -> int:
    """Constraint columns given to pymoo: the case's, plus one for failed evaluations.

    A case without constraints gets none, so that pymoo skips its feasibility
    bookkeeping; a failed design then gets the worst possible objective values.
    """
    return len(case.constraints) + 1 if case.constraints else 0


def make_searcher(case: Case, space: Space, *, population: int | None, seed: int):
    """The case's genetic search: :class:`Searcher` (NSGA-II) for two or three objectives,
    :class:`PymooSearcher` (pymoo's NSGA-III) beyond."""
    if len(case.objectives) <= 3:
        return Searcher(case, space, population=population, seed=seed)
    return PymooSearcher(case, space, population=population, seed=seed)


# pymoo 0.6.2's NSGA-II as make_algorithm configures it: SBX applied to a pair with probability 0.9,
# to each variable of it with 0.5, its two children swapped per variable with 0.5; the mutated copy
# of a child kept with probability 0.9 (PM's default); offspring nearer than 1e-16 to another design
# (Euclidean) are duplicates; mating is tried at most 100 times to fill a generation.
_CROSS_PAIR, _CROSS_VARIABLE, _CROSS_SWAP = 0.9, 0.5, 0.5
_MUTATE_CHILD = 0.9
_SAME = 1e-16
_MATING_ROUNDS = 100


class Searcher:
    """NSGA-II for a case, on plain numpy arrays, driven by propose and tell.

    :meth:`propose` gives the next generation's encoded, repaired designs;
    :meth:`keep` drops some of them (a budget cut short); :meth:`tell` gives
    back their objective values (minimised: maximised objectives negated)
    and constraint values (``<= 0`` is met) in the same order.

    The generation is pymoo 0.6.2's NSGA-II step by step, as
    :func:`make_algorithm` configures it, with pymoo's own kernels for SBX,
    polynomial mutation and crowding distance and moocore's non-dominated
    ranks, drawing the same random numbers in the same order: a random
    uniform first generation; binary tournaments (the smaller constraint
    violation wins, then Pareto dominance, then the larger crowding
    distance, ties at random); SBX and polynomial mutation with a reset of
    choices and flags; rounding; offspring that repeat a design of the
    population or of the generation dropped and mating repeated until the
    generation is full; survival of the feasible by rank and crowding
    distance, then of the least infeasible. So a seed proposes exactly the
    designs pymoo's loop would (tests/test_pymoo_adapter.py checks it), and a
    state saved by an earlier release, which drove pymoo's objects, resumes
    here. What pymoo's loop spends on its population objects (about as
    much as the whole run of a quick model) is not spent.
    """

    def __init__(self, case: Case, space: Space, *, population: int | None, seed: int) -> None:
        self.space = space
        self.n_obj = len(case.objectives)
        self.n_con = n_constraint_columns(case)
        self.name = algorithm_name(self.n_obj)
        self.size = population or default_population(self.n_obj)
        self.rng = np.random.default_rng(seed)
        self.eta_crossover, self.eta_mutation = 15.0, 20.0  # make_algorithm's, until tuned
        self.n_iter = 0
        self.n_eval = 0
        n_var = len(space.xl)
        self._xl, self._xu = np.asarray(space.xl, float), np.asarray(space.xu, float)
        self._rate = min(0.5, 1.0 / n_var)  # pymoo's per-variable mutation probability
        # The population, best first as survival left it, with its marks (NaN: none).
        self.X: np.ndarray | None = None
        self.F = np.empty((0, self.n_obj))
        self.G = np.empty((0, self.n_con))
        self.cv = np.empty(0)
        self.rank = np.empty(0)
        self.crowding = np.empty(0)
        self._pending: np.ndarray | None = None

    # -- the face the run loop drives --------------------------------------------------------
    def tune(self, refine: float) -> None:
        self.eta_crossover, self.eta_mutation = operator_indices(refine, self.n_obj)

    def propose(self) -> np.ndarray | None:
        """The next designs to evaluate (one encoded row each), or ``None`` when mating gives none."""
        if self.X is None:
            X = self._xl + (self._xu - self._xl) * self.rng.random((self.size, len(self._xl)))
            X = _unrepeated(self.space.repair(X))
        else:
            X = self._offspring(self.size)
            if len(X) == 0:
                return None
        self._pending = X
        return X

    def keep(self, rows: list[int]) -> None:
        self._pending = self._pending[rows]

    def tell(self, F: np.ndarray, G: np.ndarray | None) -> None:
        X, self._pending = self._pending, None
        F = np.asarray(F, dtype=float).reshape(len(X), self.n_obj)
        G = (
            np.asarray(G, dtype=float).reshape(len(X), self.n_con)
            if self.n_con
            else np.empty((len(X), 0))
        )
        self.n_eval += len(X)
        if self.X is None:
            self._survive(X, F, G, len(X))
            self.n_iter = 2
        else:
            self._survive(
                np.vstack([self.X, X]), np.vstack([self.F, F]), np.vstack([self.G, G]), self.size
            )
            self.n_iter += 1

    def survivors(self) -> np.ndarray:
        """The encoded designs of the surviving population."""
        return self.X if self.X is not None else np.empty((0, len(self._xl)))

    @property
    def started(self) -> bool:
        """Whether there is a population (after the first generation, a seeding or a restore)."""
        return self.X is not None

    def seed(self, X: np.ndarray, F: np.ndarray, G: np.ndarray | None) -> None:
        """Start from designs already evaluated: survival picks the population from them."""
        X = np.asarray(X, dtype=float)
        F = np.asarray(F, dtype=float).reshape(len(X), self.n_obj)
        G = np.asarray(G, dtype=float) if self.n_con else np.empty((len(X), 0))
        self.n_eval += len(X)
        self._survive(X, F, G, min(len(X), self.size))
        self.n_iter = 1

    def state(self, *, generation: int, eval_ids: list[int | None]) -> bytes:
        """The search state after ``generation`` as JSON bytes (see the module docstring)."""
        return encode_state(self.state_data(generation=generation, eval_ids=eval_ids))

    def state_data(self, *, generation: int, eval_ids: list[int | None] | None) -> dict[str, Any]:
        """The search state as plain data, in the form pymoo's NSGA-II state was saved."""
        X = self.survivors()
        rank = [None if np.isnan(r) else int(r) for r in self.rank.tolist()]
        crowding = [None if np.isnan(c) else c for c in self.crowding.tolist()]
        return {
            "format": STATE_FORMAT,
            "generation": int(generation),
            "n_iter": int(self.n_iter),
            "n_eval": int(self.n_eval),
            "random": plain(self.rng.bit_generator.state),
            "X": _matrix(X),
            "F": _matrix(self.F),
            "G": _matrix(self.G) if self.n_con else None,
            "marks": {
                "crowding": {"kind": "float", "values": crowding},
                "rank": {"kind": "int", "values": rank},
            },
            "eval_ids": list(eval_ids) if eval_ids is not None else None,
        }

    def restore(self, state: dict[str, Any], *, where: str) -> None:
        """Take up the saved ``state`` (this searcher's, or one pymoo's NSGA-II saved).

        Raises :class:`StoreError` naming ``where`` when the state does not
        fit the case (another number of variables, objectives or constraints).
        """
        X, F, G = saved_tables(state, len(self._xl), self.n_obj, self.n_con, where=where)
        n = len(X)
        G = np.empty((n, 0)) if G is None else G
        marks = state.get("marks") or {}
        if not isinstance(marks, dict):
            raise StoreError(f"{where}: the saved search state's marks are not a table")
        columns = {}
        for name in ("rank", "crowding"):  # what NSGA-II reads; other marks are pymoo's records
            column = marks.get(name, {"values": [None] * n})
            if not isinstance(column, dict) or len(column.get("values") or []) != n:
                raise StoreError(f"{where}: the saved search state's mark {name!r} is malformed")
            try:
                columns[name] = np.array(
                    [np.nan if v is None else _float(v) for v in column["values"]], dtype=float
                )
            except StoreError:
                raise StoreError(
                    f"{where}: the saved search state's mark {name!r} is malformed"
                ) from None
        n_iter = _count(state, "n_iter", where)
        n_eval = _count(state, "n_eval", where)
        restore_random(self.rng, state, where=where)
        self.X, self.F, self.G = X, F, G
        self.cv = _violation(G)
        self.rank, self.crowding = columns["rank"], columns["crowding"]
        self.n_iter, self.n_eval = n_iter, n_eval

    # -- one generation ----------------------------------------------------------------------
    def _offspring(self, n_offspring: int) -> np.ndarray:
        """Mate until ``n_offspring`` new designs (or the rounds run out), as pymoo's mating does."""
        off = np.empty((0, len(self._xl)))
        for _ in range(_MATING_ROUNDS):
            wanted = n_offspring - len(off)
            parents = self._tournaments(-(-wanted // 2))
            children = self.space.repair(self._mutate(self._cross(parents)))
            off = np.vstack([off, _unrepeated(children, self.X, off)[:wanted]])
            if len(off) >= n_offspring:
                break
        return off

    def _tournaments(self, n_pairs: int) -> np.ndarray:
        """Parents of ``n_pairs`` pairs, (n_pairs, 2) rows of the population, by binary tournaments."""
        rng, n = self.rng, len(self.X)
        n_draws = 4 * n_pairs
        entrants = np.concatenate([rng.permutation(n) for _ in range(math.ceil(n_draws / n))])
        a, b = entrants[:n_draws].reshape(-1, 2).T
        cv_a, cv_b = self.cv[a], self.cv[b]
        winner = np.full(len(a), -1)
        infeasible = (cv_a > 0.0) | (cv_b > 0.0)
        winner[infeasible & (cv_a < cv_b)] = a[infeasible & (cv_a < cv_b)]
        winner[infeasible & (cv_b < cv_a)] = b[infeasible & (cv_b < cv_a)]
        F_a, F_b = self.F[a], self.F[b]
        a_better, b_better = (F_a < F_b).any(axis=1), (F_b < F_a).any(axis=1)
        open_ = ~infeasible & (a_better == b_better)  # neither dominates: crowding decides
        first = ~infeasible & a_better & ~b_better
        second = ~infeasible & b_better & ~a_better
        winner[first], winner[second] = a[first], b[second]
        d_a, d_b = self.crowding[a], self.crowding[b]
        winner[open_ & (d_a > d_b)] = a[open_ & (d_a > d_b)]
        winner[open_ & (d_b > d_a)] = b[open_ & (d_b > d_a)]
        # Ties go to a coin, one draw a tie in tournament order (the draws pymoo makes).
        for i in np.flatnonzero(winner < 0).tolist():
            winner[i] = (a[i], b[i])[int(rng.integers(0, 2))]
        return winner.reshape(n_pairs, 2)

    def _cross(self, parents: np.ndarray) -> np.ndarray:
        """SBX on each pair (pymoo's kernel); rows: every pair's first child, then every second."""
        rng, n_pairs = self.rng, len(parents)
        mates = np.stack([self.X[parents[:, 0]], self.X[parents[:, 1]]])
        crossed = rng.random(n_pairs) < _CROSS_PAIR
        children = mates.copy()
        if crossed.any():
            rng.random((n_pairs, 1))  # SBX's draw for exchanging children, which is always on
            Q = cross_sbx(
                mates,
                self._xl,
                self._xu,
                np.full((n_pairs, 1), self.eta_crossover),
                np.full((n_pairs, 1), _CROSS_VARIABLE),
                np.full((n_pairs, 1), _CROSS_SWAP),
                random_state=rng,
            )
            children[:, crossed] = Q[:, crossed]
        return children.reshape(-1, len(self._xl))

    def _mutate(self, X: np.ndarray) -> np.ndarray:
        """Polynomial mutation (pymoo's kernel) and the reset of choices and flags (MixedMutation)."""
        rng, n = self.rng, len(X)
        mutated = mut_pm(
            X,
            self._xl,
            self._xu,
            np.full(n, self.eta_mutation),
            np.full(n, self._rate),
            at_least_once=False,
            random_state=rng,
        )
        reset_choices(self.space, mutated, rng, self._rate)
        chosen = rng.random(n) <= _MUTATE_CHILD
        X = X.copy()
        X[chosen] = mutated[chosen]
        return X

    def _survive(self, X: np.ndarray, F: np.ndarray, G: np.ndarray, n_survive: int) -> None:
        """Keep ``n_survive`` of the designs: the feasible by rank and crowding, then the least infeasible."""
        cv = _violation(G)
        rank, crowding = np.full(len(X), np.nan), np.full(len(X), np.nan)
        n_survive = min(n_survive, len(X))
        if self.n_con:
            feasible = np.flatnonzero(cv <= 0.0)
            infeasible = np.flatnonzero(~(cv <= 0.0))
            infeasible = infeasible[np.argsort(cv[infeasible])]
        else:
            feasible, infeasible = np.arange(len(X)), np.empty(0, dtype=int)
        kept = np.empty(0, dtype=int)
        if len(feasible):
            chosen, front_rank, front_crowding = _rank_and_crowding(
                F[feasible], min(len(feasible), n_survive), self.rng
            )
            rank[feasible], crowding[feasible] = front_rank, front_crowding
            kept = feasible[chosen]
        kept = np.concatenate([kept, infeasible[: n_survive - len(kept)]])
        self.X, self.F, self.G, self.cv = X[kept], F[kept], G[kept], cv[kept]
        self.rank, self.crowding = rank[kept], crowding[kept]


def _violation(G: np.ndarray) -> np.ndarray:
    """Total constraint violation of each row (pymoo's: the sum of the positive values)."""
    return np.maximum(0.0, G).sum(axis=1) if G.shape[1] else np.zeros(len(G))


def _rank_and_crowding(F: np.ndarray, n_survive: int, rng: np.random.Generator):
    """pymoo's RankAndCrowding on arrays: the rows that survive, in order, and every ranked row's marks.

    Whole fronts are taken in rank order (moocore's ranks, each front's rows
    in index order) until one does not fit; that one is cut by crowding
    distance (pymoo's kernel), ties broken by a random permutation.
    """
    ranks = np.asarray(moocore.pareto_rank(F))
    rank, crowding = np.full(len(F), np.nan), np.full(len(F), np.nan)
    survivors: list[np.ndarray] = []
    n_kept = 0
    for k in range(int(ranks.max()) + 1):
        front = np.flatnonzero(ranks == k)
        distance = (
            np.full(len(front), np.inf)
            if len(front) <= 2
            else calc_crowding_distance(F[front].astype(float))
        )
        rank[front], crowding[front] = k, distance
        if n_kept + len(front) > n_survive:
            n_remove = n_kept + len(front) - n_survive
            shuffled = rng.permutation(len(distance))
            order = np.flip(shuffled[np.argsort(distance[shuffled], kind="quicksort")])
            front = front[order[:-n_remove]]
        survivors.append(front)
        n_kept += len(front)
        if n_kept >= n_survive:
            break
    return np.concatenate(survivors), rank, crowding


def _unrepeated(X: np.ndarray, *others: np.ndarray) -> np.ndarray:
    """The rows of ``X`` that repeat no earlier row of it and no row of ``others`` (pymoo's rule)."""
    if len(X) == 0:
        return X
    earlier = np.tri(len(X), k=-1, dtype=bool)  # pymoo's distances to later rows and to itself: inf
    X = X[~((cdist(X, X) <= _SAME) & earlier).any(axis=1)]
    for other in others:
        if len(other):
            if len(X) == 0:
                break
            X = X[~(cdist(X, other) <= _SAME).any(axis=1)]
    return X


class PymooSearcher:
    """One pymoo genetic algorithm for a case (NSGA-III for four or more objectives), by ask and tell.

    The same face as :class:`Searcher`, on pymoo's population objects.
    """

    def __init__(self, case: Case, space: Space, *, population: int | None, seed: int) -> None:
        self.space = space
        self.n_obj = len(case.objectives)
        self.n_con = n_constraint_columns(case)
        self.algorithm, self.name = make_algorithm(case, space, population, seed)
        self.algorithm.setup(
            make_problem(case, space), termination=NoTermination(), seed=seed, verbose=False
        )
        self._pending = None

    def tune(self, refine: float) -> None:
        tune_operators(self.algorithm, refine, self.n_obj)

    def propose(self) -> np.ndarray | None:
        """The next designs to evaluate (one encoded row each), or ``None`` when mating gives none."""
        pop = self.algorithm.ask()
        if pop is None or len(pop) == 0:
            return None
        proposed = pop.get("X")
        X = self.space.repair(proposed)
        if not np.array_equal(X, proposed):
            pop.set("X", X)
        self._pending = pop
        return X

    def keep(self, rows: list[int]) -> None:
        self._pending = self._pending[rows]

    def tell(self, F: np.ndarray, G: np.ndarray | None) -> None:
        values = {"F": F} if G is None else {"F": F, "G": G}
        problem = self.algorithm.problem
        self.algorithm.evaluator.eval(StaticProblem(problem, **values), self._pending)
        self.algorithm.tell(infills=self._pending)
        self._pending = None

    def survivors(self) -> np.ndarray:
        """The encoded designs of the surviving population."""
        pop = self.algorithm.pop
        return pop.get("X") if pop is not None and len(pop) else np.empty((0, len(self.space.xl)))

    @property
    def started(self) -> bool:
        """Whether there is a population (after the first generation, a seeding or a restore)."""
        return self.algorithm.is_initialized

    def seed(self, X: np.ndarray, F: np.ndarray, G: np.ndarray | None) -> None:
        """Start from designs already evaluated: survival picks the population from them."""
        _seed_algorithm(self.algorithm, X, F, G)

    def state(self, *, generation: int, eval_ids: list[int | None]) -> bytes:
        """The search state after ``generation`` as JSON bytes (see the module docstring)."""
        return encode_state(self.state_data(generation=generation, eval_ids=eval_ids))

    def state_data(self, *, generation: int, eval_ids: list[int | None] | None) -> dict[str, Any]:
        return search_state(self.algorithm, generation=generation, eval_ids=eval_ids)

    def restore(self, state: dict[str, Any], *, where: str) -> None:
        restore_state(self.algorithm, state, where=where)


STATE_FORMAT = "tradewise-search-state/1"

# The normalisation NSGA-III's survival keeps between generations (pymoo 0.6.2).
_NORM_FIELDS = ("ideal_point", "worst_point", "nadir_point", "extreme_points")


def search_state(
    algorithm, *, generation: int, eval_ids: list[int] | None = None
) -> dict[str, Any]:
    """The plain-data state of ``algorithm`` after ``generation`` (see the module docstring)."""
    pop = algorithm.pop
    marks: dict[str, Any] = {}
    names = sorted({name for ind in pop for name in ind.data})
    for name in names:
        values = [ind.data.get(name) for ind in pop]
        present = [v for v in values if v is not None]
        kind = (
            "int"
            if all(isinstance(v, int | np.integer) and not isinstance(v, bool) for v in present)
            else "float"
        )
        marks[name] = {
            "kind": kind,
            "values": [None if v is None else _number(v, kind) for v in values],
        }
    state: dict[str, Any] = {
        "format": STATE_FORMAT,
        "generation": int(generation),
        "n_iter": int(algorithm.n_iter),
        "n_eval": int(algorithm.evaluator.n_eval),
        "random": plain(algorithm.random_state.bit_generator.state),
        "X": _matrix(pop.get("X")),
        "F": _matrix(pop.get("F")),
        "G": _matrix(pop.get("G")) if algorithm.problem.n_ieq_constr else None,
        "marks": marks,
        "eval_ids": list(eval_ids) if eval_ids is not None else None,
    }
    norm = getattr(getattr(algorithm, "survival", None), "norm", None)
    if norm is not None:
        state["normalisation"] = {
            name: None
            if getattr(norm, name) is None
            else np.asarray(getattr(norm, name), float).tolist()
            for name in _NORM_FIELDS
        }
    return state


def restore_state(algorithm, state: dict[str, Any], *, where: str) -> None:
    """Put ``algorithm`` (set up afresh for the same case and settings) in the saved ``state``.

    Raises :class:`StoreError` naming ``where`` when the state does not fit
    the algorithm (another number of variables, objectives or constraints).
    """
    problem = algorithm.problem
    X, F, G = saved_tables(state, problem.n_var, problem.n_obj, problem.n_ieq_constr, where=where)
    n = len(X)
    values = {"F": F} if G is None else {"F": F, "G": G}
    pop = Population.new(X=X)
    algorithm.evaluator.eval(StaticProblem(problem, **values), pop)
    marks = state.get("marks") or {}
    if not isinstance(marks, dict):
        raise StoreError(f"{where}: the saved search state's marks are not a table")
    for name, column in marks.items():
        if not isinstance(column, dict) or len(column.get("values") or []) != n:
            raise StoreError(
                f"{where}: the saved search state's mark {str(name)[:40]!r} is malformed"
            )
        cast = int if column.get("kind") == "int" else float
        for ind, value in zip(pop, column["values"], strict=True):
            # Set one by one: a mark some designs lack (None) stays missing on them.
            ind.data[str(name)] = None if value is None else cast(_float(value))
    algorithm.pop = pop
    algorithm.off = pop
    algorithm.is_initialized = True
    algorithm.n_iter = _count(state, "n_iter", where)
    algorithm.evaluator.n_eval = _count(state, "n_eval", where)
    restore_random(algorithm.random_state, state, where=where)
    norm = getattr(getattr(algorithm, "survival", None), "norm", None)
    saved_norm = state.get("normalisation")
    if norm is not None and isinstance(saved_norm, dict):
        for name in _NORM_FIELDS:
            value = saved_norm.get(name)
            setattr(norm, name, None if value is None else np.asarray(value, dtype=float))
    if hasattr(algorithm.survival, "opt"):
        algorithm.survival.opt = pop[pop.get("rank") == 0] if "rank" in marks else pop
    algorithm._set_optimum()


def saved_tables(
    state: dict[str, Any], n_var: int, n_obj: int, n_con: int, *, where: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """The population's encoded designs, objective and constraint values (None without constraints) from a saved state.

    Raises :class:`StoreError` naming ``where`` when they do not fit the case
    (another number of variables, objectives or constraints).
    """
    X = _array(state, "X", where)
    F = _array(state, "F", where)
    n = len(X)
    if X.ndim != 2 or X.shape[1] != n_var or F.shape != (n, n_obj) or n == 0:
        raise StoreError(
            f"{where}: the saved search state does not fit the case "
            f"({n_var} variables, {n_obj} objectives)"
        )
    if not n_con:
        return X, F, None
    G = _array(state, "G", where)
    if G.shape != (n, n_con):
        raise StoreError(
            f"{where}: the saved search state does not fit the case's {n_con} constraint columns"
        )
    return X, F, G


def restore_random(rng: np.random.Generator, state: dict[str, Any], *, where: str) -> None:
    """Put ``rng`` in the saved state's random generator state, or raise :class:`StoreError` naming ``where``."""
    try:
        rng.bit_generator.state = state["random"]
    except (KeyError, TypeError, ValueError) as exc:
        raise StoreError(
            f"{where}: the saved random generator state cannot be used ({exc})"
        ) from None


def encode_state(state: dict[str, Any]) -> bytes:
    """The state as UTF-8 JSON text (infinities written as JSON's usual ``Infinity``)."""
    return json.dumps(state, separators=(",", ":")).encode("utf-8")


def decode_state(blob: bytes | str) -> dict[str, Any] | None:
    """The state read back from its JSON text; ``None`` for anything else (e.g. an old pickled state).

    Only JSON is ever parsed: a saved state can hold numbers and text, never code.
    """
    try:
        text = (
            blob.decode("utf-8") if isinstance(blob, bytes | bytearray | memoryview) else str(blob)
        )
        state = json.loads(text)
    except (UnicodeDecodeError, ValueError, TypeError):
        return None
    if not isinstance(state, dict) or state.get("format") != STATE_FORMAT:
        return None
    return state


def _number(value: Any, kind: str) -> int | float:
    if kind == "int":
        return int(value)
    return float(value)


def _matrix(values: Any) -> list[list[float]]:
    return np.asarray(values, dtype=float).tolist()


def _float(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise StoreError("the saved search state holds a value that is not a number")
    return float(value)


def _array(state: dict[str, Any], key: str, where: str) -> np.ndarray:
    rows = state.get(key)
    try:
        if not isinstance(rows, list) or not all(isinstance(r, list) for r in rows):
            raise TypeError
        array = np.asarray([[_float(v) for v in row] for row in rows], dtype=float)
    except (TypeError, ValueError, StoreError):
        raise StoreError(
            f"{where}: the saved search state's {key} is not a table of numbers"
        ) from None
    if array.ndim != 2 or (key == "X" and not np.isfinite(array).all()):
        raise StoreError(
            f"{where}: the saved search state's {key} is not a table of finite numbers"
        )
    return array


def _count(state: dict[str, Any], key: str, where: str) -> int:
    value = state.get(key)
    if isinstance(value, bool) or not isinstance(value, int) or value < 0:
        raise StoreError(f"{where}: the saved search state's {key} is not a count")
    return value


def _seed_algorithm(algorithm, X: np.ndarray, F: np.ndarray, G: np.ndarray | None) -> None:
    """Start a pymoo algorithm from designs already evaluated: its survival step picks the
    population from them (rank and crowding), so the next proposal mates designs the archive
    holds instead of drawing a random first generation."""
    problem = algorithm.problem
    values = {"F": F} if G is None else {"F": F, "G": G}
    pop = Population.new(X=np.asarray(X, dtype=float))
    algorithm.evaluator.eval(StaticProblem(problem, **values), pop)
    pop = algorithm.survival.do(
        problem,
        pop,
        n_survive=min(len(pop), algorithm.pop_size),
        algorithm=algorithm,
        random_state=algorithm.random_state,
    )
    algorithm.pop = pop
    algorithm.off = pop
    algorithm.is_initialized = True
    algorithm.n_iter = 1
    algorithm._set_optimum()


def minimise_function(
    space: Space,
    function,
    *,
    n_obj: int,
    n_con: int,
    population: int,
    generations: int,
    seed: int,
    start: np.ndarray | None = None,
) -> np.ndarray:
    """NSGA-II on a cheap function of encoded rows: the final population's designs, repaired.

    ``function(X)`` returns ``(F, G)`` for the rows of ``X`` (``G`` is None
    without constraints). ``start`` (encoded rows) seeds the first generation;
    random rows fill it up to ``population``. Every row stays on the legal
    values of its variable (the same repair and mutation as a run's search).

    The generation loop is written on numpy arrays (pymoo's SBX and
    polynomial mutation kernels, moocore's ranks): on a function that costs a
    millisecond, pymoo's own loop spends about 5 ms a generation on its
    population objects, which was half of what the surrogate search costs a
    round. Binary tournament: feasible first, then smaller total violation,
    lower non-dominated rank, larger crowding distance; survival of the best
    ``population`` of parents and offspring by the same order (Deb, Pratap,
    Agarwal and Meyarivan 2002).
    """
    from pymoo.operators.crossover.sbx import cross_sbx
    from pymoo.operators.mutation.pm import mut_pm

    rng = np.random.default_rng(seed)
    xl, xu = np.asarray(space.xl, float), np.asarray(space.xu, float)
    n_var = len(xl)
    X = rng.uniform(xl, xu, size=(population, n_var))
    if start is not None and len(start):
        X[: min(len(start), population)] = np.asarray(start, dtype=float)[:population]
    X = space.repair(X)

    def evaluate(rows):
        F, G = function(rows)
        F = np.asarray(F, float).reshape(len(rows), n_obj)
        if G is None or not n_con:
            return F, np.zeros(len(rows))
        return F, np.clip(np.asarray(G, float).reshape(len(rows), n_con), 0.0, None).sum(axis=1)

    F, cv = evaluate(X)
    order = _survival_order(F, cv, rng)
    place = np.empty(population, int)
    place[order] = np.arange(population)
    per_variable = min(0.5, 1.0 / n_var)
    categorical = space.categorical
    for _ in range(generations):
        # binary tournaments: the better place wins
        a, b = rng.integers(0, population, size=(2, population))
        parents = np.where(place[a] < place[b], a, b)
        if population % 2:
            parents = np.append(parents, parents[0])
        pairs = parents.reshape(-1, 2)
        mates = np.stack([X[pairs[:, 0]], X[pairs[:, 1]]])
        n_pairs = len(pairs)
        children = cross_sbx(
            mates,
            xl,
            xu,
            np.full((n_pairs, 1), 15.0),
            np.full((n_pairs, 1), 0.5),
            np.full((n_pairs, 1), 0.5),
            random_state=rng,
        )
        keep = rng.random(n_pairs) >= 0.9  # a pair that does not cross passes on as it is
        children[:, keep] = mates[:, keep]
        children = children.reshape(-1, n_var)[:population]
        mutated = mut_pm(
            children,
            xl,
            xu,
            np.full(len(children), 20.0),
            np.full(len(children), per_variable),
            at_least_once=False,
            random_state=rng,
        )
        change = rng.random(len(children)) <= 0.9
        children[change] = mutated[change]
        for column, levels in categorical:
            reset = rng.random(len(children)) < per_variable
            if reset.any():
                children[reset, column] = rng.integers(0, levels, size=int(reset.sum()))
        children = space.repair(children)
        F_new, cv_new = evaluate(children)
        X = np.vstack([X, children])
        F = np.vstack([F, F_new])
        cv = np.concatenate([cv, cv_new])
        best = _survival_order(F, cv, rng)[:population]
        X, F, cv = X[best], F[best], cv[best]
        place = np.arange(population)  # survivors come best first
    return space.repair(X)


def _survival_order(F: np.ndarray, cv: np.ndarray, rng) -> np.ndarray:
    """Rows best first: feasible, then smaller violation, lower rank, larger crowding distance, ties at random."""
    import moocore

    rank = np.zeros(len(F))
    crowding = np.zeros(len(F))
    feasible = cv <= 0
    if feasible.any():
        rows = np.flatnonzero(feasible)
        ranks = np.asarray(moocore.pareto_rank(F[rows]))
        rank[rows] = ranks
        for r in np.unique(ranks):
            members = rows[ranks == r]
            crowding[members] = _crowding(F[members])
    return np.lexsort((rng.random(len(F)), -crowding, rank, cv, ~feasible))


def _crowding(F: np.ndarray) -> np.ndarray:
    """Crowding distance of the points of one front (Deb et al. 2002): the ends are infinite."""
    n, m = F.shape
    if n <= 2:
        return np.full(n, np.inf)
    distance = np.zeros(n)
    for k in range(m):
        order = np.argsort(F[:, k], kind="stable")
        values = F[order, k]
        span = values[-1] - values[0]
        distance[order[[0, -1]]] = np.inf
        if span > 0:
            distance[order[1:-1]] += (values[2:] - values[:-2]) / span
    return distance
