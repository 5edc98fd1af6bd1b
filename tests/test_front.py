"""Tests of front.py: non-dominated filtering against brute force and pymoo, hypervolume
invariants, tables read from CSV, and trade-off rates against closed forms."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from tradewise.case import Objective
from tradewise.errors import DataError
from tradewise.front import (
    Front,
    column_extremes,
    front_from_csv,
    hypervolume,
    hypervolume_problem,
    merge_nondominated,
    nondominated,
    read_front,
    read_table,
    reference_point,
    tradeoff_rates,
)


def brute_force_nondominated(points: np.ndarray, maximise: list[bool]) -> np.ndarray:
    """O(n^2) reference: a row is kept when no row is at least as good everywhere and better once."""
    signed = points * np.where(maximise, -1.0, 1.0)
    keep = np.ones(len(points), dtype=bool)
    for i in range(len(points)):
        for j in range(len(points)):
            if np.all(signed[j] <= signed[i]) and np.any(signed[j] < signed[i]):
                keep[i] = False
                break
    return keep


def first_copies(points: np.ndarray) -> np.ndarray:
    """True for the first occurrence of every distinct row."""
    _, first = np.unique(points, axis=0, return_index=True)
    mask = np.zeros(len(points), dtype=bool)
    mask[first] = True
    return mask


def make_front(points, goals, names=None, units=None) -> Front:
    points = np.asarray(points, dtype=float)
    names = names or [f"f{j + 1}" for j in range(points.shape[1])]
    units = units or [""] * len(names)
    objectives = [Objective(n, g, u) for n, g, u in zip(names, goals, units, strict=True)]
    return Front.from_table(pd.DataFrame(points, columns=names), objectives)


# ----------------------------------------------------------------- non-dominated filtering
@pytest.mark.parametrize("m", [2, 3, 4])
def test_nondominated_matches_brute_force_and_pymoo(m):
    """moocore's filter agrees with an O(n^2) loop and pymoo on sets full of ties and duplicates."""
    from pymoo.util.nds.non_dominated_sorting import NonDominatedSorting

    rng = np.random.default_rng(m)
    for trial in range(30):
        # Small integers make ties and exact duplicates common.
        points = rng.integers(0, 6, size=(int(rng.integers(1, 60)), m)).astype(float)
        maximise = [bool(b) for b in rng.integers(0, 2, m)]
        reference = brute_force_nondominated(points, maximise)
        # keep_weakly keeps every copy of a non-dominated row, like the loop.
        assert np.array_equal(nondominated(points, maximise, keep_weakly=True), reference), trial
        # By default only the first copy is kept.
        assert np.array_equal(nondominated(points, maximise), reference & first_copies(points)), (
            trial
        )
        # pymoo minimises; it keeps duplicates in the first front as well.
        signed = points * np.where(maximise, -1.0, 1.0)
        pymoo_front = NonDominatedSorting().do(signed, only_non_dominated_front=True)
        assert sorted(pymoo_front.tolist()) == np.flatnonzero(reference).tolist(), trial


@pytest.mark.parametrize("m", [2, 3, 4, 5])
def test_merging_into_a_front_agrees_with_filtering_everything(m):
    """merge_nondominated gives exactly moocore's answer on the old front stacked above the new points,
    for fronts above the size where it sorts them into cells: spheres, rounded spheres (ties), new
    points copying old ones and each other, and new points that beat many old ones."""
    rng = np.random.default_rng(10 + m)
    for trial in range(12):

        def sphere(n, trial=trial):
            points = np.abs(rng.normal(size=(n, m)))
            points /= np.linalg.norm(points, axis=1)[:, None]
            if trial % 3 == 1:
                points = np.round(points * 3000) / 3000  # ties and exact duplicates
            return points

        old = sphere(int(rng.integers(2500, 4000)))
        old = old[nondominated(old)]
        new = sphere(int(rng.integers(20, 150)))
        if trial % 3 == 2:
            new *= rng.uniform(0.97, 1.05, size=(len(new), 1))  # some beat old points, some lose
        new[:4] = old[:4]  # copies of old points: the old ones stay
        new[4:7] = new[10]  # copies among the new points: the first stays
        if trial % 4 == 3:
            new[7:12] *= 0.5  # far better: many old points go
        keep_old, keep_new = merge_nondominated(old, new)
        whole = nondominated(np.vstack([old, new]))
        assert len(old) >= 1000, trial
        assert np.array_equal(keep_old, whole[: len(old)]), trial
        assert np.array_equal(keep_new, whole[len(old) :]), trial


def test_merging_into_a_small_front_and_an_empty_one():
    """Small fronts and empty inputs give moocore's answer too."""
    old = np.array([[1.0, 3.0], [3.0, 1.0]])
    keep_old, keep_new = merge_nondominated(old, np.array([[2.0, 2.0], [0.5, 3.5], [3.0, 1.0]]))
    assert keep_old.tolist() == [True, True] and keep_new.tolist() == [True, True, False]
    keep_old, keep_new = merge_nondominated(old, np.empty((0, 2)))
    assert keep_old.tolist() == [True, True] and keep_new.tolist() == []
    keep_old, keep_new = merge_nondominated(np.empty((0, 2)), old)
    assert keep_old.tolist() == [] and keep_new.tolist() == [True, True]


def test_column_extremes_are_numpys_least_and_greatest():
    """column_extremes gives what min and max along the first axis give."""
    points = np.random.default_rng(1).normal(size=(500, 4))
    low, high = column_extremes(points)
    assert np.array_equal(low, points.min(axis=0)) and np.array_equal(high, points.max(axis=0))


def test_front_from_table_keeps_other_columns_and_drops_copies():
    """Front.from_table keeps every column of the kept rows and one copy of a repeated design."""
    table = pd.DataFrame(
        {"id": [1, 2, 3, 4, 5], "cost": [1, 2, 2, 3, 1], "range": [10, 20, 20, 15, 10]}
    )
    front = Front.from_table(table, [Objective("cost"), Objective("range", "max")])
    # (3, 15) is beaten by (2, 20); (2, 20) and (1, 10) appear twice.
    assert front.table["id"].tolist() == [1, 2]


points_2d_3d = st.integers(2, 3).flatmap(
    lambda m: arrays(
        np.float64,
        st.tuples(st.integers(1, 40), st.just(m)),
        elements=st.integers(0, 20).map(float),
    )
)


@settings(max_examples=60, deadline=None)
@given(points=points_2d_3d, flags=st.lists(st.booleans(), min_size=3, max_size=3))
def test_filtering_twice_changes_nothing(points, flags):
    """The non-dominated rows of a front are the front itself (a property of dominance)."""
    maximise = flags[: points.shape[1]]
    once = points[nondominated(points, maximise)]
    assert np.array_equal(nondominated(once, maximise), np.ones(len(once), dtype=bool))


@settings(max_examples=60, deadline=None)
@given(
    points=points_2d_3d,
    pick=st.integers(0, 10_000),
    shift=st.lists(st.integers(0, 5).map(float), min_size=3, max_size=3),
)
def test_adding_a_dominated_point_leaves_hypervolume_unchanged(points, pick, shift):
    """A point that some point weakly dominates adds no hypervolume (definition of the indicator)."""
    m = points.shape[1]
    reference = points.max(axis=0) + 10.0
    worse = points[pick % len(points)] + np.asarray(shift[:m])
    before = hypervolume(points, reference)
    after = hypervolume(np.vstack([points, worse]), reference)
    assert after == pytest.approx(before, rel=1e-12, abs=1e-9)


def test_hypervolume_published_values():
    """Hypervolume of small sets matches the values in the moocore docs and by hand."""
    # moocore R doctest: (5,5), (4,6), (2,7), (7,4) with reference (10,10) -> 38.
    assert hypervolume([(5, 5), (4, 6), (2, 7), (7, 4)], [10, 10]) == pytest.approx(38.0)
    # By hand: staircase (1,3), (2,2), (3,1) under (4,4): 3 + 2 + 1 = 6; adding a dominated
    # point, a duplicate and a point outside the box changes nothing.
    extra = [(1, 3), (2, 2), (3, 1), (2.5, 2.5), (2, 2), (5, 0.5)]
    assert hypervolume(extra, [4, 4]) == pytest.approx(6.0)


# ----------------------------------------------------------------- tables from CSV
def test_front_from_csv_accepts_bare_and_full_headers(tmp_path):
    """Headers "name [unit]" are matched by bare name or whole header, and units are kept."""
    path = tmp_path / "designs.csv"
    path.write_text(
        "id,cost [EUR],range [km]\n1,10,30\n2,12,50\n3,13,40\n4,9,20\n", encoding="utf-8"
    )
    front = front_from_csv(path, minimise=["cost [EUR]"], maximise=["range"])
    assert front.units == {"cost": "EUR", "range": "km"}
    assert sorted(front.table["id"].tolist()) == [1, 2, 4]
    assert front.reference is not None
    kept = front_from_csv(path, minimise=["cost"], maximise=["range"], keep=[])
    # the design's name (its data row in the file) always stays, whatever --keep says
    assert list(kept.table.columns) == ["data_row", "cost", "range"]


@pytest.mark.parametrize(
    ("text", "kwargs", "needle"),
    [
        ("a,b\n1,2\n", {"minimise": ["a", "c"]}, "no column 'c'"),
        (
            "a,b\n1,2\n2,x\n",
            {"minimise": ["a", "b"]},
            r"line 3 \(data row 2\) column 'b': expected a finite number, got 'x'",
        ),
        (
            "a,b\n1,2\n2,\n",
            {"minimise": ["a", "b"]},
            r"line 3 \(data row 2\) column 'b': expected a finite number, got an empty cell",
        ),
        ("a,b\n1,2\n", {"minimise": ["a"]}, "at least two objectives"),
        (
            "a,b\n1,2\n",
            {"minimise": ["a"], "maximise": ["a"]},
            "'a' is given as an objective twice",
        ),
        ("a,b\n", {"minimise": ["a", "b"]}, "no rows"),
        ("", {"minimise": ["a", "b"]}, "the file is empty"),
        ("a [g],a [kg]\n1,2\n", {"minimise": ["a"]}, "names the column 'a' twice"),
    ],
)
def test_front_from_csv_errors(tmp_path, text, kwargs, needle):
    """Each kind of bad table raises DataError with a message naming the problem."""
    path = tmp_path / "t.csv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(DataError, match=needle):
        front_from_csv(path, **kwargs)


def test_read_table_missing_file(tmp_path):
    """A missing table file is a DataError naming it."""
    with pytest.raises(DataError, match="no such table file"):
        read_table(tmp_path / "nowhere.csv")


def test_csv_round_trip_through_read_front(tmp_path):
    """A front written with to_csv reads back with the same objectives, units and rows."""
    from tradewise.front import read_front

    front = make_front(
        [(10, 100), (12, 60), (15, 40)], ["min", "min"], ["cost", "mass"], ["k$", "kg"]
    )
    front.to_csv(tmp_path / "front.csv")
    again = read_front(tmp_path)
    assert again.objective_names == ["cost", "mass"]
    assert again.units["mass"] == "kg"
    assert np.array_equal(again.points(), front.points())


# ----------------------------------------------------------------- trade-off rates
def test_two_objective_rates_by_hand():
    """Rates between neighbours in user units match hand arithmetic on the EX3 front."""
    # EX3 of the reference notes: (cost k$, mass kg) = (10, 100), (12, 60), (15, 40), (20, 30),
    # (30, 25). Moves along the front: 2 k$ for 40 kg, 3 for 20, 5 for 10, 10 for 5, i.e.
    # 0.05, 0.15, 0.5 and 2 k$ per kg; the median step saved is 15 kg, so rates are per 10 kg.
    front = make_front(
        [(10, 100), (12, 60), (15, 40), (20, 30), (30, 25)],
        ["min", "min"],
        ["cost", "mass"],
        ["k$", "kg"],
    )
    rates = tradeoff_rates(front)
    assert rates["rate"].tolist() == pytest.approx([0.05, 0.15, 0.5, 2.0])
    assert set(rates["gain"]) == {"mass"} and set(rates["give"]) == {"cost"}
    assert rates["per"].tolist() == [10.0] * 4
    assert rates["text"].tolist()[2] == "5 k$ more cost per 10 kg less mass"
    # From design 2 both ways: to (20, 30) as above; to (12, 60) 20 kg more for 3 k$ less,
    # 6.667 kg per k$. Both sides read on the same step of mass (10 kg): 5 k$ more cost per
    # 10 kg less mass one way, 3 / 20 * 10 = 1.5 k$ less cost per 10 kg more mass the other.
    at = tradeoff_rates(front, 2)
    assert at["neighbour"].tolist() == [3, 1]
    assert at["rate"].tolist() == pytest.approx([0.5, 20 / 3])
    assert at["text"].tolist() == [
        "5 k$ more cost per 10 kg less mass",
        "1.5 k$ less cost per 10 kg more mass",
    ]


def test_rates_on_zdt1_front_follow_the_secant():
    """On ZDT1 each neighbour rate is the secant of f2 = 1 - sqrt(f1) (Zitzler, Deb, Thiele 2000)."""
    f1 = np.linspace(0, 1, 101)
    front = make_front(np.column_stack([f1, 1 - np.sqrt(f1)]), ["min", "min"])
    rates = tradeoff_rates(front)
    # Moving right gives up f1 to gain f2: rate = (b - a) / (sqrt(b) - sqrt(a)) = sqrt(a) + sqrt(b).
    a, b = f1[:-1], f1[1:]
    assert rates["rate"].to_numpy() == pytest.approx(np.sqrt(a) + np.sqrt(b), rel=1e-9)


def test_rates_with_a_maximised_objective_read_naturally():
    """For a maximised objective the words say "more" when it is gained and "less" when given."""
    front = make_front([(100, 20), (150, 40)], ["min", "max"], ["cost", "range"], ["EUR", "km"])
    rates = tradeoff_rates(front)
    # 50 EUR for 20 km: 2.5 EUR per km, per 10 km.
    assert rates["text"].tolist() == ["25 EUR more cost per 10 km more range"]
    back = tradeoff_rates(front, 1)
    assert back["text"].tolist() == ["4 km less range per 10 EUR less cost"]


def test_rates_on_the_two_bar_truss_scale_read_without_exponents():
    """On the two-bar truss front V x S = 400 (Deb 2001; volume 0.004-0.04 m3, stress 10,000-100,000 kPa)
    each rate is the secant 400 / (S_a S_b) and is worded per a power of ten with plain numbers."""
    stress = np.array([100, 80, 50, 40, 25, 20, 16, 12.5, 10]) * 1000
    volume = 400 / stress
    front = make_front(
        np.column_stack([volume, stress]), ["min", "min"], ["volume", "stress"], ["m3", "kPa"]
    )
    rates = tradeoff_rates(front)
    # Along the front: V_b - V_a = 400 (S_a - S_b) / (S_a S_b), so volume given per kPa saved is 400 / (S_a S_b).
    assert rates["rate"].to_numpy() == pytest.approx(400 / (stress[:-1] * stress[1:]), rel=1e-9)
    # The median step saves 7,500 kPa, but per 1,000 kPa the amounts would be 0.00005 to 0.0032 m3;
    # per 10,000 kPa (still inside the front's 90,000 kPa) they read 0.0005 to 0.032 m3.
    assert rates["text"].tolist() == [
        f"{amount} m3 more volume per 10,000 kPa less stress"
        for amount in ["0.0005", "0.001", "0.002", "0.004", "0.008", "0.0125", "0.02", "0.032"]
    ]
    # From (0.016 m3, 25,000 kPa): to 20,000 kPa costs 0.004 m3 for 5,000 kPa (8e-7 m3 per kPa);
    # to 0.01 m3 costs 15,000 kPa for 0.006 m3 (2.5e6 kPa per m3). Both sides read per
    # 10,000 kPa of stress: 0.008 m3 more volume one way, 0.006 / 15,000 * 10,000 = 0.004 m3 less
    # the other.
    at = tradeoff_rates(front, 4)
    assert at["rate"].tolist() == pytest.approx([8e-7, 2.5e6])
    assert at["text"].tolist() == [
        "0.008 m3 more volume per 10,000 kPa less stress",
        "0.004 m3 less volume per 10,000 kPa more stress",
    ]
    every = rates["text"].tolist()
    every += [t for i in range(len(front)) for t in tradeoff_rates(front, i)["text"]]
    assert not [t for t in every if re.search(r"\de[-+]\d", t)]


def test_three_objective_rates_on_a_plane_are_exact():
    """On the plane f1 + 2 f2 + 4 f3 = 8 the local rates are the plane's exact slopes."""
    # Calculus: holding f3, df1 = -2 df2, so f1 given up per unit f2 gained is 2; likewise
    # 4 for f1 per f3 and 2 for f2 per f3.
    grid = np.array(
        [(a, b) for a in np.linspace(0, 1, 11) for b in np.linspace(0, 1, 11) if a + b <= 1]
    )
    f2, f3 = grid[:, 0] * 4, grid[:, 1] * 2
    front = make_front(np.column_stack([8 - 2 * f2 - 4 * f3, f2, f3]), ["min"] * 3)
    rates = tradeoff_rates(front)
    for (give, gain), expected in {("f1", "f2"): 2.0, ("f1", "f3"): 4.0, ("f2", "f3"): 2.0}.items():
        chosen = rates[(rates["give"] == give) & (rates["gain"] == gain)]
        assert chosen["rate"].to_numpy() == pytest.approx(expected, rel=1e-9)


def test_three_objective_rates_on_the_dtlz2_sphere():
    """On the DTLZ2 front the local rate of f1 per unit of f2 is f2 / f1 (Deb et al. 2002)."""
    # The DTLZ2 front is the unit sphere octant; its normal at f is f itself, so holding f3,
    # f1 df1 + f2 df2 = 0 and f1 given up per unit f2 gained is f2 / f1 (calculus).
    u, v = np.meshgrid(np.linspace(0.05, 0.95, 41), np.linspace(0.05, 0.95, 41))
    theta, phi = (u * np.pi / 2).ravel(), (v * np.pi / 2).ravel()
    points = np.column_stack(
        [np.cos(theta) * np.cos(phi), np.cos(theta) * np.sin(phi), np.sin(theta)]
    )
    front = make_front(points, ["min"] * 3)
    for aim in [(0.7, 0.4, 0.6), (0.3, 0.6, 0.74)]:
        at = int(
            np.argmin(
                np.linalg.norm(front.points() - np.asarray(aim) / np.linalg.norm(aim), axis=1)
            )
        )
        rates = tradeoff_rates(front, at).set_index(["give", "gain"])["rate"]
        f = front.points()[at]
        assert len(rates) == 3
        # The plane is fitted through neighbours on a curved surface: a few per cent off
        # where the grid is lopsided (along f3), near exact along the symmetric f1-f2 rows.
        assert rates["f1", "f2"] == pytest.approx(f[1] / f[0], rel=0.01)
        assert rates["f1", "f3"] == pytest.approx(f[2] / f[0], rel=0.03)
        assert rates["f2", "f3"] == pytest.approx(f[2] / f[1], rel=0.03)


def test_rates_reject_a_bad_design_index():
    """Asking for the rates at a row the front does not have is a DataError."""
    front = make_front([(1, 2), (2, 1)], ["min", "min"])
    with pytest.raises(DataError, match="design 5 is not a row"):
        tradeoff_rates(front, 5)


def test_contributions_of_a_staircase():
    """Each point's exclusive hypervolume matches the hand count on a staircase (moocore)."""
    # (1,3), (2,2), (3,1) under (4,4): exclusive boxes 1x1 each -> 1, 1, 1.
    front = make_front([(1, 3), (2, 2), (3, 1)], ["min", "min"])
    assert front.contributions([4, 4]).tolist() == pytest.approx([1.0, 1.0, 1.0])


def test_three_objective_rates_on_a_plateau_name_the_level_objective_once():
    """An objective that is level near a design (two standard sizes) gives one line, not a rate against each other objective.

    Designs on a + b = 2 at c = 0 and on a + b = 1 at c = 1 (none dominates another): near a design
    of the first level, c does not move and the rate of a per b with c held is 1 (by hand).
    """
    t = np.linspace(0.0, 2.0, 11)
    u = np.linspace(0.0, 1.0, 11)
    points = [(x, 2.0 - x, 0.0) for x in t] + [(x, 1.0 - x, 1.0) for x in u]
    front = make_front(points, ["min"] * 3, ["a", "b", "c"])
    at = int(np.flatnonzero((front.table["c"] == 0) & (front.table["a"] == 1.0))[0])
    rates = tradeoff_rates(front, at)
    level = rates[rates["give"] == rates["gain"]]
    assert level["text"].tolist() == [
        "c is 0 on this design and its 6 nearest neighbours: it does not trade here"
    ]
    pair = rates[(rates["give"] == "a") & (rates["gain"] == "b")]
    assert pair["rate"].to_numpy() == pytest.approx([1.0])
    assert len(rates) == 2  # no line for a or b against c


def test_three_objective_rates_from_three_designs():
    """Three designs fix a plane: (1,2,3), (3,2,1), (2,3,1) lie on a + b + c = 6, all rates 1."""
    # Normal by hand: (2, 0, -2) x (1, 1, -2) = (2, 2, 2). With two designs no plane is fixed.
    front = make_front([(1, 2, 3), (3, 2, 1), (2, 3, 1)], ["min"] * 3, ["a", "b", "c"])
    assert tradeoff_rates(front, 0)["rate"].to_numpy() == pytest.approx([1.0, 1.0, 1.0])
    two = make_front([(1, 2, 3), (3, 2, 1)], ["min"] * 3, ["a", "b", "c"])
    assert tradeoff_rates(two, 0)["text"].str.startswith("too few designs").all()


# ------------------------------------------------------------- trust in what a table says
def test_repeated_header_is_refused_not_renamed(tmp_path):
    """A header row naming `cost` twice is refused naming the file and the header (pandas would make `cost.1`)."""
    path = tmp_path / "twice.csv"
    path.write_text("cost,mass,cost\n1,2,3\n2,1,4\n", encoding="utf-8")
    with pytest.raises(
        DataError, match=r"twice\.csv: the header row names the column 'cost' twice"
    ):
        read_table(path)


@pytest.mark.parametrize(
    ("cell", "said"),
    [("nan", "'nan' (not a number)"), ("NaN", "'NaN' (not a number)"), ("", "an empty cell")],
)
def test_missing_values_are_told_apart(tmp_path, cell, said):
    """A cell reading NaN is called not a number, an empty one empty; the row is named by its line too."""
    path = tmp_path / "t.csv"
    path.write_text(
        f"cost,mass\n1,2\n\n2,{cell}\n", encoding="utf-8"
    )  # a blank line, which pandas skips
    with pytest.raises(DataError) as caught:
        front_from_csv(path, minimise=["cost", "mass"])
    assert str(caught.value) == (
        f"t.csv: line 4 (data row 2) column 'mass': expected a finite number, got {said}"
    )


def test_bad_cell_in_a_run_front_names_its_line(tmp_path):
    """read_front names the line of front.csv that holds the bad value."""
    table = pd.DataFrame({"cost": [1.0, 2.0], "mass": [2.0, 1.0]})
    front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    csv_path, _ = front.to_csv(tmp_path / "front.csv")
    csv_path.write_text(csv_path.read_text().replace("2.0,1.0", "2.0,NaN"), encoding="utf-8")
    with pytest.raises(
        DataError, match=r"line 3 \(data row 2\) column 'mass'.*'NaN' \(not a number\)"
    ):
        read_front(tmp_path)


def test_non_utf8_byte_is_reported_at_its_line(tmp_path):
    """A byte that is not UTF-8 on the second line is reported as line 2 with the byte, not 'position 0'."""
    path = tmp_path / "latin.csv"
    path.write_bytes(b"cost,mass\n1,\xe9\n")
    with pytest.raises(
        DataError, match=r"latin\.csv: line 2 holds the byte 0xe9, which is not UTF-8 text"
    ):
        read_table(path)


# ------------------------------------------------------------- values near the float limit
def test_reference_point_stays_finite_near_the_float_limit():
    """Objectives spanning -1.7e308 to 1.7e308 (span inf) still give a finite reference point."""
    points = np.array([[-1.7e308, 1.7e308], [1.7e308, -1.7e308], [0.0, 0.0]])
    for maximise in (False, [True, False]):
        ref = reference_point(points, maximise)
        assert np.isfinite(ref).all()
    ref = reference_point(points)
    assert (ref >= points.max(axis=0)).all()


def test_reference_point_unchanged_for_ordinary_values():
    """Ordinary values keep the nadir plus 10 % of the range (common practice)."""
    assert reference_point([[1.0, 4.0], [3.0, 2.0]]).tolist() == pytest.approx([3.2, 4.2])


def test_hypervolume_problem_names_the_objective():
    """When the extents multiply past the largest float the problem names the widest objective."""
    points = np.array([[-1.7e308, 1.0], [1.7e308, 0.5]])
    ref = reference_point(points)
    text = hypervolume_problem(points, ref, names=["cost", "mass"])
    assert "cannot be computed" in text and "'cost'" in text
    assert hypervolume_problem([[1.0, 2.0], [2.0, 1.0]], [3.0, 3.0]) == ""


def test_a_design_is_named_by_eval_id_then_data_row_then_its_place(tmp_path):
    """design_name says "design N" for a run's eval_id, "data row N" for a user's CSV and "row N" (its place,
    from 1) otherwise, and closest_miss uses the same name."""
    from tradewise.limits import closest_miss

    objectives = [Objective("cost"), Objective("mass")]
    table = pd.DataFrame({"cost": [3.0, 1.0, 2.0], "mass": [1.0, 3.0, 2.0]})
    plain = Front.from_table(table, objectives)  # sorted by cost: rows 2, 3, 1 of the table
    assert [plain.design_name(k) for k in range(3)] == ["row 1", "row 2", "row 3"]
    run = Front.from_table(table.assign(eval_id=[30, 10, 20]), objectives)
    assert run.design_ids() == [10, 20, 30] and run.design_name(0) == "design 10"
    # the middle design (2, 2) misses both limits by 0.5, less than either end misses one by 1.5
    assert closest_miss(run, ["cost <= 1.5", "mass <= 1.5"]).startswith("the closest is design 20 ")
    path = tmp_path / "t.csv"
    table.to_csv(path, index=False)
    user = front_from_csv(path, minimise=["cost", "mass"])
    assert user.design_ids() == [2, 3, 1] and user.design_name(2) == "data row 1"
