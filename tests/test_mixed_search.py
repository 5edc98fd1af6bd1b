"""Choices and flags keep being searched after the first generation (the mixed-variable mutation)."""

from __future__ import annotations

import numpy as np
import pytest
from pymoo.core.problem import Problem

import tradewise
from support import CASES
from tradewise._pymoo import MixedMutation, Space
from tradewise.case import load_case
from tradewise.models import make_model


def test_choices_and_flags_are_reset_at_the_per_variable_rate():
    """Each choice or flag is redrawn uniformly with probability 1/n (n = 4 variables here), so a share of
    (1/4) * (k - 1)/k of the values change: 1/6 for the three-option choice, 1/8 for the flag."""
    case = load_case(CASES / "mixed")
    space = Space(case)
    problem = Problem(n_var=4, n_obj=2, xl=space.xl, xu=space.xu)
    X = np.tile(
        space.encode({"width": 2.0, "count": 2, "finish": "bare", "fast": False}), (20_000, 1)
    )
    mutated = space.repair(
        MixedMutation(space)._do(problem, X, random_state=np.random.default_rng(7))
    )
    finish_changed = np.mean(mutated[:, 2] != 0)
    fast_changed = np.mean(mutated[:, 3] != 0)
    assert finish_changed == pytest.approx(1 / 6, abs=0.01)
    assert fast_changed == pytest.approx(1 / 8, abs=0.01)
    assert set(np.unique(mutated[:, 2])) == {0.0, 1.0, 2.0}


@pytest.mark.slow
def test_girder_search_finds_the_light_higher_grade_designs():
    """On the bundled footbridge girder the lightest feasible design is an S355 girder. Reference:
    scipy's differential_evolution on the four plate sizes for each grade separately (seed 1,
    computed in this test): S235 needs about 603 kg, S355 about 548 kg. The search with default
    settings must leave S235 behind and come within 6 % of the lightest design on every seed."""
    from scipy.optimize import NonlinearConstraint, differential_evolution

    case = load_case("footbridge-girder")
    model = make_model(case)
    reals = [v for v in case.variables if v.kind == "real"]

    def lightest(grade: str) -> float:
        def results(x):
            design = {v.name: float(value) for v, value in zip(reals, x, strict=True)} | {
                "grade": grade
            }
            return model(design).results

        broken = NonlinearConstraint(
            lambda x: sum(c.violation(results(x)[c.name]) for c in case.constraints), -np.inf, 0.0
        )
        found = differential_evolution(
            lambda x: results(x)["mass"],
            [(v.low, v.high) for v in reals],
            constraints=broken,
            seed=1,
            tol=1e-8,
            maxiter=300,
            polish=False,
        )
        return float(found.fun)

    s235, s355 = lightest("S235"), lightest("S355")
    assert s355 < s235
    for seed in (1, 2, 3):
        front = tradewise.run(case, seed=seed).front.table
        assert front["mass"].min() < s235
        assert front["mass"].min() <= 1.06 * s355
        assert front["grade"].nunique() >= 2


def test_decoding_and_keys_a_generation_at_a_time_agree_with_one_design_at_a_time(make_case):
    """Every kind of variable (real, stepped real, integer, discrete sizes, choice, flag): decoding a
    generation a column at a time gives the designs and keys that decoding each row gives."""
    from tradewise.search import design_key, design_keys

    toml = """
    title = "every kind"
    model = "model.py:evaluate"
    [variables]
    width = { type = "real", low = 0.5, high = 4.0 }
    pitch = { type = "real", low = 1.0, high = 3.0, step = 0.25 }
    count = { type = "integer", low = -3, high = 7 }
    wire = { type = "discrete", values = [0.8, 1.0, 1.25, 2] }
    finish = { type = "choice", options = ["bare", "anodised", "painted"] }
    fast = { type = "flag" }
    [objectives]
    cost = { goal = "min" }
    mass = { goal = "min" }
    """
    case = load_case(make_case(toml))
    space = Space(case)
    rng = np.random.default_rng(4)
    X = space.repair(space.xl + rng.random((300, len(space.xl))) * (space.xu - space.xl))
    one_by_one = [space.decode(x) for x in X.tolist()]
    assert space.decode_all(X) == one_by_one
    assert [list(map(type, d.values())) for d in space.decode_all(X)] == [
        list(map(type, d.values())) for d in one_by_one
    ]
    keys = design_keys(case.variable_names, space.decode_columns(X))
    assert keys == [design_key(d) for d in one_by_one]
    assert len(set(keys)) > 250  # distinct designs give distinct keys


def test_keys_of_a_space_of_reals_formatted_a_design_at_a_time_agree():
    """ZDT1's 30 real variables: the one-call formatting of a float-only space gives design_key's keys."""
    from tradewise.search import design_key, design_keys

    case = load_case(CASES / "zdt1")
    space = Space(case)
    assert space.all_real
    X = np.random.default_rng(8).random((200, 30)) ** 7  # small values too: 'e' notation
    X[0, :] = 0.0
    columns = space.decode_columns(X)
    keys = design_keys(case.variable_names, columns, floats=True)
    assert keys == [design_key(space.decode(x)) for x in X.tolist()]
    assert keys == design_keys(case.variable_names, columns)
