"""Standard sizes: discrete variables and reals with a step, checked, searched and kept on their lists."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

import tradewise
from tradewise._pymoo import Space
from tradewise.case import load_case
from tradewise.errors import CaseError

# Preferred numbers: ISO 3 / Renard R10 rounded series between 1 and 10 (from memory).
R10 = [1.0, 1.25, 1.6, 2.0, 2.5, 3.15, 4.0, 5.0, 6.3, 8.0, 10.0]

SIZES_TOML = f"""
title = "plate from standard sizes"
model = "model.py:evaluate"

[variables]
thickness = {{ type = "discrete", values = {R10}, unit = "mm" }}
width = {{ type = "real", low = 10.0, high = 50.0, step = 2.5, unit = "mm" }}
count = {{ type = "integer", low = 1, high = 4 }}

[objectives]
mass = {{ goal = "min", unit = "g" }}
deflection = {{ goal = "min", unit = "mm" }}
"""

SIZES_MODEL = f"""
R10 = {R10}

def evaluate(design):
    t, w, n = design["thickness"], design["width"], design["count"]
    assert t in R10, t
    assert abs((w - 10.0) / 2.5 - round((w - 10.0) / 2.5)) < 1e-9 and 10.0 <= w <= 50.0, w
    assert isinstance(n, int)
    # a cantilever plate: mass ~ t w n, deflection ~ 1 / (w t^3 n) (PL^3 / 3EI with I = w t^3 / 12)
    return {{"mass": 0.1 * t * w * n, "deflection": 400.0 / (w * t**3 * n)}}
"""


def test_a_discrete_variable_and_a_stepped_real_are_loaded_with_their_lists(make_case):
    """The loader keeps the sizes in order and makes the stepped real's grid from low, step and high."""
    case = load_case(make_case(SIZES_TOML, SIZES_MODEL))
    thickness, width, _ = case.variables
    assert thickness.kind == "discrete" and thickness.grid == tuple(R10)
    assert (thickness.low, thickness.high) == (1.0, 10.0)
    assert width.grid == pytest.approx([10.0 + 2.5 * k for k in range(17)])
    assert thickness.contains(3.15) and not thickness.contains(3.0)
    assert width.contains(12.5) and not width.contains(11.0)


@pytest.mark.parametrize(
    ("entry", "words"),
    [
        ("values = [1.0]", "at least two"),
        ("values = [1.0, 1.0, 2.0]", "repeated"),
        ("values = [2.0, 1.0]", "must rise"),
        ('values = "1, 2"', "list of numbers"),
        ('values = [1.0, "x"]', "values[1]"),
        ("values = [1.0, 2.0], low = 1.0", "low"),
    ],
)
def test_bad_size_lists_are_refused_with_the_key_named(make_case, entry, words):
    """Each kind of bad list is one CaseError naming the variable and what is wrong."""
    toml = SIZES_TOML.replace(f"values = {R10}", entry)
    with pytest.raises(CaseError, match="thickness") as caught:
        load_case(make_case(toml, SIZES_MODEL))
    assert words in str(caught.value)


@pytest.mark.parametrize("step", ["0.0", "-1.0", "45.0"])
def test_a_bad_step_is_refused(make_case, step):
    """A step must be above zero and no wider than the range."""
    toml = SIZES_TOML.replace("step = 2.5", f"step = {step}")
    with pytest.raises(CaseError, match="step"):
        load_case(make_case(toml, SIZES_MODEL))


def test_neighbouring_sizes_are_neighbours_on_the_searched_axis(make_case):
    """Encoded by their index in the sorted list, sizes next to each other are one apart, and every
    point of the axis decodes to a size on the list."""
    space = Space(load_case(make_case(SIZES_TOML, SIZES_MODEL)))
    codes = [space.encode({"thickness": t, "width": 10.0, "count": 1})[0] for t in R10]
    assert np.diff(codes) == pytest.approx(np.ones(len(R10) - 1))
    X = np.random.default_rng(3).uniform(space.xl, space.xu, size=(2000, 3))
    decoded = [space.decode(x) for x in space.repair(X)]
    assert {d["thickness"] for d in decoded} == set(R10)
    assert all(d["width"] in {10.0 + 2.5 * k for k in range(17)} for d in decoded)


def test_a_search_over_sizes_finds_the_brute_force_front(make_case):
    """Every design the search reports uses listed sizes, and its front equals the non-dominated set of
    all 11 x 17 x 4 = 748 designs worked out by brute force (the whole space is small)."""
    folder = make_case(SIZES_TOML, SIZES_MODEL)
    result = tradewise.run(folder, evaluations=3000, population=40, seed=4)
    front = result.front.table
    assert set(front["thickness"]) <= set(R10)
    points = []
    for t, w, n in itertools.product(R10, [10.0 + 2.5 * k for k in range(17)], range(1, 5)):
        points.append((0.1 * t * w * n, 400.0 / (w * t**3 * n)))
    points = np.array(points)
    best = np.array(
        [p for p in points if not np.any(np.all(points <= p, axis=1) & np.any(points < p, axis=1))]
    )
    found = front[["mass", "deflection"]].to_numpy()
    # every brute-force front point is found (up to the ties of equal objective values)
    for p in best:
        assert np.any(np.all(np.isclose(found, p, rtol=1e-9), axis=1)), p


def test_a_misspelt_type_key_is_named_instead_of_a_missing_type(make_case):
    """`typ = "real"` is reported as the unknown key 'typ' with a suggestion, not as a missing type."""
    toml = SIZES_TOML.replace('count = { type = "integer"', 'count = { typ = "integer"')
    with pytest.raises(CaseError, match=r"unknown key 'typ' \(did you mean 'type'\?\)"):
        load_case(make_case(toml, SIZES_MODEL))
