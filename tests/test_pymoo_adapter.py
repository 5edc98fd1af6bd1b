"""The adapter (tradewise._pymoo): NSGA-II on arrays proposes what pymoo's own NSGA-II loop proposes."""

from __future__ import annotations

import numpy as np
import pytest

from tradewise._pymoo import (
    PymooSearcher,
    Searcher,
    Space,
    decode_state,
    make_searcher,
    n_constraint_columns,
)
from tradewise.case import load_case
from tradewise.errors import StoreError

MODEL = "def evaluate(design):\n    return {}\n"


def _case(make_case, variables: str, *, n_obj: int = 2, limit: bool = False, population: int):
    objectives = "\n".join(f'f{i} = {{ goal = "min" }}' for i in range(n_obj))
    constraints = "\n[constraints]\ng = { max = 0.5 }\n" if limit else ""
    toml = (
        f'title = "adapter"\nmodel = "model.py:evaluate"\n\n[variables]\n{variables}\n\n'
        f"[objectives]\n{objectives}\n{constraints}\n[search]\npopulation = {population}\n"
    )
    return load_case(make_case(toml, MODEL, name="adapter"))


SHAPES = {
    "reals, odd population": (
        'x = { type = "real", low = 0.0, high = 1.0 }\ny = { type = "real", low = -2.0, high = 5.0 }',
        dict(population=25),
    ),
    "integers with a limit": (
        'n = { type = "integer", low = 0, high = 9 }\nm = { type = "integer", low = 0, high = 9 }',
        dict(population=15, limit=True),
    ),
    "three objectives, choices, a flag, sizes": (
        'x = { type = "real", low = 0.0, high = 1.0, step = 0.1 }\n'
        'k = { type = "choice", options = ["a", "b", "c"] }\nf = { type = "flag" }\n'
        'd = { type = "discrete", values = [0.8, 1.0, 1.25, 1.6] }',
        dict(population=21, n_obj=3, limit=True),
    ),
    "sixteen designs in all": (
        'n = { type = "integer", low = 0, high = 3 }\n'
        'k = { type = "choice", options = ["a", "b"] }\nf = { type = "flag" }',
        dict(population=10),
    ),
}


def _values(space, X, n_obj, n_con, failed):
    """Made-up objective values, a limit on the first variable, and failures as the run encodes them."""
    F = np.column_stack(
        [np.sin(3 * X.sum(axis=1) + k) + X[:, k % X.shape[1]] for k in range(n_obj)]
    )
    G = None
    if n_con:
        G = np.zeros((len(X), n_con))
        G[:, 0] = (X[:, 0] - space.xl[0]) / (space.xu[0] - space.xl[0]) - 0.5
        G[failed, -1] = 1e6
        F[failed] = 0.0
    else:
        F[failed] = 1e30
    return F, G


def _drive(case, searcher, generations, *, failing, cut_at=3, hand_over=None):
    """The designs a searcher proposes, generation by generation, told made-up values; a third of the
    generation ``cut_at`` kept (a budget cut short); after ``hand_over[0]`` the state goes to a new
    searcher of class ``hand_over[1]``."""
    space = searcher.space
    n_obj, n_con = len(case.objectives), n_constraint_columns(case)
    coin = np.random.default_rng(99)
    proposed = []
    for generation in range(generations):
        searcher.tune(min(1.0, generation / 10))
        X = searcher.propose()
        if X is None:
            proposed.append(None)
            break
        if generation == cut_at:
            rows = list(range(0, len(X), 3))
            searcher.keep(rows)
            X = X[rows]
        proposed.append(X.copy())
        searcher.tell(*_values(space, X, n_obj, n_con, coin.random(len(X)) < failing))
        if hand_over and generation == hand_over[0]:
            saved = searcher.state(generation=generation + 1, eval_ids=[None] * len(X))
            searcher = hand_over[1](case, space, population=case.search.population, seed=12345)
            searcher.restore(decode_state(saved), where="test")
    return proposed


def _same(a, b) -> bool:
    return len(a) == len(b) and all(
        (x is None and y is None) or (x is not None and y is not None and np.array_equal(x, y))
        for x, y in zip(a, b, strict=True)
    )


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize("failing", [0.0, 0.3, 1.0])
def test_the_array_loop_proposes_exactly_what_pymoos_loop_proposes(make_case, shape, failing):
    """Over 20 generations (8 on the space of sixteen designs, where mating soon goes round after
    round) with the operators tuned as a run tunes them, one generation cut short and some or all
    designs failed, the array NSGA-II and pymoo's NSGA-II as make_algorithm configures it, with the
    same seed, propose the same designs bit for bit: same tournaments, SBX, mutation, resets of
    choices, duplicates dropped, survival and ties broken with the same random numbers."""
    variables, options = SHAPES[shape]
    case = _case(make_case, variables, **options)
    space = Space(case)
    n_gen = 8 if shape == "sixteen designs in all" else 20
    proposed = [
        _drive(
            case,
            kind(case, space, population=case.search.population, seed=7),
            n_gen,
            failing=failing,
        )
        for kind in (Searcher, PymooSearcher)
    ]
    assert _same(*proposed)
    assert len(proposed[0]) == n_gen and all(X is not None and len(X) for X in proposed[0])


def test_a_space_used_up_ends_the_proposals_as_pymoo_does(make_case):
    """With four designs in all and a population of ten, the first generation holds the four and mating
    then finds no new design: both loops propose nothing (the run's "exhausted")."""
    case = _case(
        make_case,
        'f = { type = "flag" }\nk = { type = "choice", options = ["a", "b"] }',
        population=10,
    )
    space = Space(case)
    ours = _drive(
        case, Searcher(case, space, population=case.search.population, seed=3), 5, failing=0.0
    )
    theirs = _drive(
        case, PymooSearcher(case, space, population=case.search.population, seed=3), 5, failing=0.0
    )
    assert _same(ours, theirs) and [len(ours[0]), ours[1]] == [4, None]


@pytest.mark.parametrize("direction", ["pymoo to arrays", "arrays to pymoo"])
def test_a_state_saved_by_either_loop_resumes_in_the_other(make_case, direction):
    """A state saved by pymoo's loop (what earlier releases stored) and taken up by the array loop, or
    the other way round, continues with the designs the uninterrupted run proposes."""
    variables, options = SHAPES["three objectives, choices, a flag, sizes"]
    case = _case(make_case, variables, **options)
    space = Space(case)
    first, then = (
        (PymooSearcher, Searcher) if direction == "pymoo to arrays" else (Searcher, PymooSearcher)
    )
    whole = _drive(
        case, first(case, space, population=case.search.population, seed=5), 12, failing=0.3
    )
    handed = _drive(
        case,
        first(case, space, population=case.search.population, seed=5),
        12,
        failing=0.3,
        hand_over=(6, then),
    )
    assert _same(whole, handed)


def test_seeding_from_evaluated_designs_agrees_with_pymoos_survival(make_case):
    """Seeded with 37 evaluated designs (some failed), both loops keep the same population with the same
    rank and crowding marks, save the same state and then propose the same designs."""
    variables, options = SHAPES["integers with a limit"]
    case = _case(make_case, variables, **options)
    space = Space(case)
    draw = np.random.default_rng(5)
    X = space.repair(space.xl + (space.xu - space.xl) * draw.random((37, len(space.xl))))
    F, G = _values(space, X, 2, n_constraint_columns(case), draw.random(37) < 0.3)
    states, proposals = [], []
    for kind in (Searcher, PymooSearcher):
        searcher = kind(case, space, population=case.search.population, seed=4)
        searcher.seed(X, F, G)
        states.append(decode_state(searcher.state(generation=0, eval_ids=None)))
        proposals.append(searcher.propose())
    assert states[0] == states[1]
    assert np.array_equal(*proposals)


def test_nsga2_runs_on_arrays_and_nsga3_on_pymoo(make_case):
    """Two and three objectives get the array NSGA-II, four get pymoo's NSGA-III."""
    reals = (
        'x = { type = "real", low = 0.0, high = 1.0 }\ny = { type = "real", low = 0.0, high = 1.0 }'
    )
    for n_obj, kind, name in [(2, Searcher, "NSGA-II"), (3, Searcher, "NSGA-II")] + [
        (4, PymooSearcher, "NSGA-III")
    ]:
        case = _case(make_case, reals, n_obj=n_obj, population=12)
        searcher = make_searcher(case, Space(case), population=case.search.population, seed=1)
        assert isinstance(searcher, kind) and searcher.name == name


def test_a_state_with_malformed_marks_is_refused(make_case):
    """A saved crowding column of the wrong length is a StoreError naming the archive, not a crash."""
    variables, options = SHAPES["reals, odd population"]
    case = _case(make_case, variables, **options)
    searcher = Searcher(case, Space(case), population=case.search.population, seed=1)
    X = searcher.propose()
    searcher.tell(*_values(searcher.space, X, 2, 0, np.zeros(len(X), bool)))
    state = decode_state(searcher.state(generation=1, eval_ids=None))
    state["marks"]["crowding"]["values"] = state["marks"]["crowding"]["values"][:3]
    fresh = Searcher(case, Space(case), population=case.search.population, seed=1)
    with pytest.raises(StoreError, match="archive.sqlite: .*mark 'crowding' is malformed"):
        fresh.restore(state, where="archive.sqlite")
    assert not fresh.started
