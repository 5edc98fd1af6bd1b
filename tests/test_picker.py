"""Tests of the picker's state, driven without widgets or figures: limits, preferences, details, shortlist."""

from __future__ import annotations

import json
import subprocess
import sys
import warnings

import numpy as np
import pandas as pd
import pytest

import tradewise
from tradewise.case import Objective
from tradewise.choose import WEIGHTED_METHODS, NonConvexWarning, choose, knee_agreement
from tradewise.errors import DataError
from tradewise.front import Front, read_front, tradeoff_rates
from tradewise.limits import apply_limits
from tradewise.picker import SHORTLIST_COLUMNS, PickerState, load_picker_source, shortlist_front


def _choose_quietly(front, method, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NonConvexWarning)
        return choose(front, method, **kwargs)


# ----------------------------------------------------------------------------------- limits
def test_moving_a_limit_removes_exactly_the_designs_beyond_it(run):
    """Each move of the mass limit keeps exactly the rows a plain pandas filter keeps, and apply_limits agrees."""
    front = run.front
    state = PickerState(front)
    mass = front.table["mass"].to_numpy()
    for high in np.quantile(mass, [0.9, 0.5, 0.2]):
        state.set_limit("mass", high=float(high))
        expected = np.flatnonzero(mass <= high)
        assert state.kept_rows == expected.tolist()
        assert len(state.kept_rows) < len(front)
        same = apply_limits(front, state.limits)
        assert same.table["eval_id"].tolist() == front.table["eval_id"].iloc[expected].tolist()
    low = float(np.quantile(front.table["pressure_drop"], 0.3))
    state.set_limit("pressure_drop", low=low)
    both = (mass <= high) & (front.table["pressure_drop"].to_numpy() >= low)
    assert state.kept_rows == np.flatnonzero(both).tolist()
    assert state.pick in state.kept_rows


def test_a_limit_at_the_end_of_the_range_limits_nothing(run):
    """A slider pushed to the front's extreme (or beyond) sets no limit, and clear_limits drops them all."""
    state = PickerState(run.front)
    low, high = state.span("mass")
    state.set_limit("mass", low - 1.0, high)
    assert state.limits == [] and state.kept.all()
    state.set_limit("mass", high=(low + high) / 2)
    assert len(state.limits) == 1
    state.clear_limits()
    assert state.limits == [] and len(state.kept_rows) == len(run.front)


def test_the_method_picks_only_among_the_kept_designs(zdt1):
    """With cost capped, the knee is the one choose() finds under the same limit, never a design beyond it."""
    state = PickerState(zdt1)
    state.set_limit("cost", high=40.0)
    assert state.pick == choose(zdt1, "knee", limits=["cost <= 40"])[0]
    assert zdt1.table["cost"].iloc[state.pick] <= 40.0
    assert sorted(state.ranking) == state.kept_rows


# ------------------------------------------------------------------------------ preferences
@pytest.mark.parametrize("method", WEIGHTED_METHODS)
def test_changing_weights_gives_the_pick_choose_returns(run, method):
    """After each weight change the pick is choose()'s first design for the same weights and limits."""
    front = run.front
    state = PickerState(front, method=method)
    state.set_limit("mass", high=float(front.table["mass"].median()))
    seen = set()
    for weights in (
        {"resistance": 1, "mass": 1, "pressure_drop": 1},
        {"resistance": 5},
        {"resistance": 0.2, "mass": 5},
        {"mass": 0.2, "pressure_drop": 5},
    ):
        state.set_weights(weights)
        expected = _choose_quietly(front, method, weights=state.weights, limits=state.limits)[0]
        assert state.pick == expected
        seen.add(state.pick)
    assert len(seen) > 1, "the weights never moved the pick"


def test_all_importance_on_one_objective_picks_its_best_design(zdt1):
    """ASF with weight only on cost picks the cheapest kept design (the definition of the scalarisation)."""
    state = PickerState(zdt1, method="asf")
    state.set_limit("mass", high=6.0)
    state.set_weights({"cost": 1.0, "mass": 0.0})
    kept = zdt1.table.iloc[state.kept_rows]
    assert state.pick == int(kept["cost"].idxmin())
    state.set_weights({"cost": 0.0, "mass": 1.0})
    assert state.pick == int(kept["mass"].idxmin())


def test_a_target_moves_the_asf_pick_to_the_design_choose_returns(zdt1):
    """A target point for asf gives choose()'s design for that target; other methods ignore the target."""
    state = PickerState(zdt1, method="asf")
    before = state.pick
    state.set_target({"cost": 80.0, "mass": 0.5})
    assert (
        state.pick
        == choose(zdt1, "asf", weights=state.weights, target={"cost": 80.0, "mass": 0.5})[0]
    )
    assert state.pick != before
    state.set_method("knee")
    assert state.pick == choose(zdt1, "knee")[0]


def test_a_design_selected_by_hand_holds_until_the_preferences_change(zdt1):
    """select() overrides the method; a new method or a limit that excludes it hands the pick back."""
    state = PickerState(zdt1)
    row = state.ranking[-1]
    state.select(row)
    assert state.pick == row and state.by_hand
    state.set_limit("cost", high=float(zdt1.table["cost"].iloc[row]) - 1.0)
    assert not state.by_hand and state.pick == state.method_pick
    with pytest.raises(DataError, match="outside the limits"):
        state.select(row)
    state.select(state.ranking[1])
    state.set_method("topsis")
    assert state.pick == choose(zdt1, "topsis", limits=state.limits)[0]


def test_no_design_within_the_limits_leaves_no_pick(zdt1):
    """Limits that exclude every design leave no pick and an empty ranking instead of an error."""
    state = PickerState(zdt1)
    state.set_limit("cost", high=30.0)
    state.set_limit("mass", high=4.0)
    assert state.kept_rows == [] and state.pick is None
    with pytest.raises(DataError, match="no design"):
        state.add()


# ----------------------------------------------------------------------------------- details
def test_details_match_the_choosing_functions(zdt1):
    """Ranks, neighbours' trade-off rates and knee agreement equal what choose/front compute on the kept designs."""
    state = PickerState(zdt1)
    state.set_limit("cost", low=10.0, high=70.0)
    info = state.details()
    keep = np.array(state.kept_rows)
    sub = zdt1.with_table(zdt1.table.iloc[keep])
    k = int(np.flatnonzero(keep == state.pick)[0])
    # two objectives on a front: the neighbours are the kept designs just before and after in cost
    assert {int(keep[k - 1]) + 1, int(keep[k + 1]) + 1} == {
        int(t.split()[2].rstrip(":")) for t in info["rates"]
    }
    texts = tradeoff_rates(sub, k)["text"].tolist()
    assert [t.split(": ", 1)[1] for t in info["rates"]] == texts
    costs = zdt1.table["cost"].iloc[keep].to_numpy()
    assert info["objectives"][0]["rank"] == int((costs < costs[k]).sum()) + 1
    assert info["objectives"][0]["of"] == len(keep)
    assert info["knees"] == knee_agreement(zdt1, limits=state.limits)
    assert info["knee_agree"] == [m for m, r in info["knees"].items() if r == state.pick]
    assert info["variables"] == [
        {"name": "x", "value": zdt1.table["x"].iloc[state.pick], "unit": ""}
    ]
    assert any("knee" in line for line in state.describe())


def test_details_of_a_table_from_elsewhere_show_its_other_columns(tmp_path):
    """A CSV front declares no variables, so the details list its other columns with their units."""
    from tradewise.front import front_from_csv

    path = tmp_path / "designs.csv"
    path.write_text(
        "id,grade,depth [mm],cost [EUR],mass [kg]\n1,S235,300,10,9\n2,S355,420,12,6\n3,S355,500,15,5\n",
        encoding="utf-8",
    )
    state = PickerState(front_from_csv(path, minimise=["cost", "mass"]))
    info = state.details(1)
    assert info["variables"] == [
        {"name": "id", "value": 2, "unit": ""},
        {"name": "grade", "value": "S355", "unit": ""},
        {"name": "depth", "value": 420, "unit": "mm"},
    ]


def test_details_of_a_three_objective_design_use_the_local_plane(run):
    """For three objectives the rates are read off a local plane, one per pair of objectives."""
    state = PickerState(run.front)
    info = state.details()
    assert len(info["rates"]) == 3 and all(r.startswith("nearby: ") for r in info["rates"])
    assert [o["unit"] for o in info["objectives"]] == ["K/W", "g", "Pa"]
    assert [v["name"] for v in info["variables"]] == list(run.front.variables)


# --------------------------------------------------------------------------------- shortlist
def test_the_shortlist_export_round_trips(run, tmp_path):
    """Exported with Front.to_csv and read back with read_front, the shortlist keeps rows, units and the run's metadata."""
    front = run.front
    state = PickerState(front, history=run.history)
    state.set_limit("mass", high=float(front.table["mass"].median()))
    state.add()
    state.set_method("asf")
    state.set_weights({"resistance": 4})
    state.add()
    state.add(state.ranking[5])
    state.add(state.ranking[5])  # a second add changes nothing
    rows = state.shortlist
    assert len(rows) == 3
    csv_path, json_path = state.export_shortlist(tmp_path / "picked" / "shortlist.csv")
    back = read_front(csv_path)
    written = state.shortlist_front()
    pd.testing.assert_frame_equal(back.table, written.table, check_dtype=False)
    assert back.table["pick_order"].tolist() == [1, 2, 3]
    assert back.table["front_row"].tolist() == [r + 1 for r in rows]
    for name in front.objective_names:
        assert back.table[name].tolist() == pytest.approx(
            front.table[name].iloc[rows].tolist(), rel=1e-12
        )
    for name in front.variables:
        assert (
            back.table[name].astype(str).tolist()
            == front.table[name].iloc[rows].astype(str).tolist()
        )
    # front.json keeps name, goal, unit and worst of each objective (not its description)
    assert [(o.name, o.goal, o.unit, o.worst) for o in back.objectives] == [
        (o.name, o.goal, o.unit, o.worst) for o in front.objectives
    ]
    assert back.variables == front.variables and back.reference == front.reference
    assert {k: back.units[k] for k in front.objective_names} == {
        o.name: o.unit for o in front.objectives
    }
    assert back.info.case_hash == front.info.case_hash and back.info.seed == front.info.seed
    settings = json.loads(json_path.read_text())["shortlist"]
    assert settings["rows"] == [r + 1 for r in rows]
    assert settings["method"] == "asf" and settings["weights"]["resistance"] == 4
    assert settings["limits"] == [str(limit) for limit in state.limits]


def test_removing_from_the_shortlist_and_its_errors(zdt1, tmp_path):
    """remove() takes a design off; removing one not on it, exporting nothing or to a non-CSV name are errors."""
    state = PickerState(zdt1)
    with pytest.raises(DataError, match="empty"):
        state.export_shortlist(tmp_path / "s.csv")
    state.add(3)
    state.add(7)
    state.remove(3)
    assert state.shortlist == [7]
    with pytest.raises(DataError, match="not on it"):
        state.remove(3)
    with pytest.raises(DataError, match="ending in .csv"):
        state.export_shortlist(tmp_path / "s.xlsx")


@pytest.mark.parametrize(
    ("action", "message"),
    [
        (lambda s: s.set_limit("weight", high=1), "not an objective"),
        (lambda s: s.set_limit("cost", 50, 20), "above the upper bound"),
        (lambda s: s.set_limit("cost", high=float("nan")), "not a finite number"),
        (lambda s: s.set_weights({"cost": 0, "mass": 0}), "not all 0"),
        (lambda s: s.set_weights({"cost": -1}), "at least 0"),
        (lambda s: s.set_method("kneedle3"), "not known .did you mean .kneedle"),
        (lambda s: s.select(99), "not a row position"),
    ],
)
def test_bad_changes_are_refused_with_one_sentence(zdt1, action, message):
    """Every refused change raises DataError naming the item and what is allowed, and leaves the state as it was."""
    state = PickerState(zdt1)
    before = (state.limits, state.weights, state.method, state.pick)
    with pytest.raises(DataError, match=message):
        action(state)
    assert (state.limits, state.weights, state.method, state.pick) == before


def test_kneedle_is_offered_for_two_objectives_only(zdt1, run):
    """The method list follows choose(): Kneedle for two objectives, not for three."""
    assert "kneedle" in PickerState(zdt1).methods
    assert "kneedle" not in PickerState(run.front).methods
    with pytest.raises(DataError, match="does not apply"):
        PickerState(run.front, method="kneedle")


def test_sources_a_run_folder_a_csv_and_a_result(run, tmp_path):
    """A search result, a run folder (with its history) and a front CSV give the same front."""

    tradewise.save_run(run, tmp_path / "run")
    for source in (run, tmp_path / "run", str(tmp_path / "run" / "front.csv")):
        front, history, _ = load_picker_source(source)
        assert len(front) == len(run.front)
        assert front.table["eval_id"].tolist() == run.front.table["eval_id"].tolist()
    assert load_picker_source(tmp_path / "run")[1] is not None
    with pytest.raises(DataError, match="expected a search result"):
        load_picker_source(42)


# ---------------------------------------------------------------------- shortlist as a file
def test_shortlist_front_numbers_the_rows_in_pick_order(zdt1, tmp_path):
    """shortlist_front puts pick_order and front_row first, keeps the designs' values and records the settings."""
    rows = [5, 2, 9]
    picked = shortlist_front(zdt1, rows, settings={"method": "knee", "limits": ["cost <= 50"]})
    assert list(picked.table.columns[:2]) == list(SHORTLIST_COLUMNS)
    assert picked.table["pick_order"].tolist() == [1, 2, 3]
    assert picked.table["front_row"].tolist() == [6, 3, 10]
    pd.testing.assert_frame_equal(
        picked.table.drop(columns=list(SHORTLIST_COLUMNS)),
        zdt1.table.iloc[rows].reset_index(drop=True),
    )
    assert picked.info.shortlist == {"method": "knee", "limits": ["cost <= 50"]}
    assert picked.objectives == zdt1.objectives and picked.units == zdt1.units
    back = read_front(picked.to_csv(tmp_path / "picked.csv")[0])
    assert back.table["front_row"].tolist() == [6, 3, 10]
    assert back.info.shortlist["limits"] == ["cost <= 50"]


def test_shortlist_front_refuses_what_it_cannot_write(zdt1):
    """No rows, a row outside the front, or a front that already has a pick_order column are DataErrors."""
    with pytest.raises(DataError, match="empty"):
        shortlist_front(zdt1, [])
    with pytest.raises(DataError, match="not a row position"):
        shortlist_front(zdt1, [0, len(zdt1)])
    taken = zdt1.with_table(zdt1.table.assign(pick_order=1))
    with pytest.raises(DataError, match="already has a column 'pick_order'"):
        shortlist_front(taken, [0])
    state = PickerState(taken)
    state.add(0)
    with pytest.raises(DataError, match="already has a column 'pick_order'"):
        state.shortlist_front()


def test_clear_shortlist_empties_it_and_says_so(zdt1):
    """clear_shortlist drops every design and leaves a message; the pick is untouched."""
    state = PickerState(zdt1)
    state.add(1)
    state.add(4)
    pick = state.pick
    state.clear_shortlist()
    assert state.shortlist == [] and state.pick == pick
    assert "empty" in state.message


# ----------------------------------------------------------------------------- listeners
def test_listeners_hear_each_change_once_and_a_batch_once(zdt1):
    """Every accepted change calls the listeners once, a batch of changes once, a refused change not at all."""
    state = PickerState(zdt1)
    heard = []
    state.on_change(lambda s: heard.append((s.pick, s.message)))
    state.set_limit("cost", high=60.0)
    assert len(heard) == 1
    with state.batch():
        state.set_method("asf")
        state.set_weights({"mass": 3})
        state.add()
    assert len(heard) == 2 and heard[-1][0] == state.pick
    with pytest.raises(DataError):
        state.set_weights({"cost": -1})
    assert len(heard) == 2
    state.tell("Wrote somewhere.")
    assert heard[-1] == (state.pick, "Wrote somewhere.") and state.message == "Wrote somewhere."


def test_bounds_follow_the_limits_and_span_stays_the_front_s(zdt1):
    """bounds() is the front's span where no limit is set and the limit where one is; span() never moves."""
    state = PickerState(zdt1)
    assert state.bounds("cost") == state.span("cost") == (0.0, 100.0)
    state.set_limit("cost", low=25.0, high=75.0)
    assert state.bounds("cost") == (25.0, 75.0) and state.span("cost") == (0.0, 100.0)
    assert [str(x) for x in state.limits] == ["cost >= 25", "cost <= 75"]
    with pytest.raises(DataError, match="not an objective"):
        state.bounds("x")


def test_describe_says_when_a_design_is_outside_the_limits(zdt1):
    """describe(row) of a design beyond the limits says so and ranks it among the whole front."""
    state = PickerState(zdt1)
    state.set_limit("cost", high=50.0)
    lines = state.describe(20)
    assert lines[0] == "Row 21 (outside the limits)"
    assert "rank 21 of 21" in lines[1]  # the dearest design of the 21, ranked on cost


def test_a_picker_state_needs_a_front_with_designs(zdt1):
    """Anything but a Front, or an empty front, is refused with a DataError."""
    with pytest.raises(DataError, match="expected a Front"):
        PickerState(zdt1.table)
    with pytest.raises(DataError, match="no designs"):
        PickerState(zdt1.with_table(zdt1.table.iloc[:0]))


def test_the_picker_imports_no_widgets_figures_or_faces():
    """Importing tradewise.picker loads neither ipywidgets nor matplotlib, nor the modules above it."""
    code = (
        "import sys, tradewise.picker; "
        "print(sorted(m for m in sys.modules if m.split('.')[0] in ('matplotlib', 'ipywidgets', 'ipympl') "
        "or m in ('tradewise.plots', 'tradewise.notebook', 'tradewise.report', 'tradewise.search')))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_details_say_plainly_when_the_front_has_no_knee():
    """On a concave front (f2 = 1 - f1^2, ZDT2's shape, Zitzler, Deb and Thiele 2000) the details
    panel says the front has no knee, not that no design meets the limits."""
    f1 = np.linspace(0, 1, 21)
    table = pd.DataFrame({"cost": f1, "mass": 1 - f1**2})
    state = PickerState(Front.from_table(table, [Objective("cost"), Objective("mass")]))
    lines = state.describe()
    assert "  knee methods: the front has no knee" in lines
    assert not any("meets the limits" in line for line in lines)


def test_choices_are_apart_and_follow_tolerances():
    """On a dense ZDT1 front the picker's top choices differ by more than the separation; the ranking keeps all."""
    # ZDT1 front f2 = 1 - sqrt(f1) (Zitzler, Deb and Thiele 2000), 2001 points: both ranges are 1.
    f1 = np.linspace(0.0, 1.0, 2001)
    table = pd.DataFrame({"cost": f1, "mass": 1 - np.sqrt(f1)})
    state = PickerState(Front.from_table(table, [Objective("cost"), Objective("mass")]))
    assert len(state.ranking) == 2001
    assert state.separation == pytest.approx({"cost": 0.05, "mass": 0.05})
    for gaps in ({"cost": 0.05, "mass": 0.05}, {"cost": 0.01, "mass": 0.2}):
        state.set_tolerance(gaps)
        rows = state.choices(6)
        assert rows[0] == state.pick and len(rows) == 6
        points = state.front.points()[rows]
        for a in range(6):
            for b in range(a + 1, 6):
                assert (np.abs(points[a] - points[b]) > list(gaps.values())).any()
    with pytest.raises(DataError, match="tolerance: 'weight' is not an objective"):
        state.set_tolerance({"weight": 1})
    assert state.separation == {"cost": 0.01, "mass": 0.2}  # a refused change changes nothing


# ------------------------------------------------------------------------ limits as rules
def test_rules_limit_any_column_and_come_off_one_by_one(run):
    """add_limit takes the --limit syntax on objectives, variables and choices; each rule keeps what
    a plain pandas filter keeps, and removing one (by position or by its text) restores the rest."""
    front = run.front
    table = front.table
    state = PickerState(front)
    mass_cap = float(table["mass"].median())
    state.add_limit(f"mass <= {mass_cap!r}")
    option = str(table["alloy"].iloc[0])
    state.add_limit(f"alloy == {option}")
    state.add_limit("fins >= 10")
    expected = (table["mass"] <= mass_cap) & (table["alloy"].astype(str) == option)
    expected &= table["fins"] >= 10
    assert state.kept_rows == np.flatnonzero(expected.to_numpy()).tolist()
    assert [x.column for x in state.limits] == ["mass", "alloy", "fins"]
    assert state.message.startswith("Added fins >= 10: ")
    state.remove_limit(f"alloy == {option}")
    state.remove_limit(0)
    assert [str(x) for x in state.limits] == ["fins >= 10"]
    assert state.kept_rows == np.flatnonzero((table["fins"] >= 10).to_numpy()).tolist()
    assert (
        state.message
        == f"Dropped mass <= {mass_cap:.4g}: {len(state.kept_rows)} of {len(front)} designs meet the limits."
    )


def test_a_rule_given_twice_counts_once_and_set_limit_replaces_only_its_bounds(zdt1):
    """The same rule twice is one limit; set_limit swaps the <= and >= limits of its objective in place
    and leaves a rule on another column and an == rule alone; bounds() reads the tightest of them."""
    state = PickerState(zdt1)
    state.add_limit("cost <= 80")
    state.add_limit("x >= 0.1")
    state.add_limit("cost<=80")
    assert [str(x) for x in state.limits] == ["cost <= 80", "x >= 0.1"]
    assert "already in force" in state.message
    state.set_limit("cost", low=20.0, high=60.0)
    assert [str(x) for x in state.limits] == ["cost >= 20", "cost <= 60", "x >= 0.1"]
    assert state.bounds("cost") == (20.0, 60.0)
    state.add_limit("cost < 50")
    assert state.bounds("cost") == (20.0, 50.0)
    # rows with 20 <= cost < 50 and x >= 0.1: cost = 5 * row, so rows 4 to 9
    assert state.kept_rows == [4, 5, 6, 7, 8, 9]


@pytest.mark.parametrize(
    ("rule", "message"),
    [
        ("mass", "expected COLUMN OP VALUE"),
        ("weight <= 3", "no column 'weight'"),
        ("cost <= cheap", "is not a number"),
        ("mass <= inf", "not a finite number"),
    ],
)
def test_a_bad_rule_is_refused_with_one_sentence(zdt1, rule, message):
    """A rule that cannot be read or names no column raises one DataError sentence and changes nothing."""
    state = PickerState(zdt1)
    state.add_limit("cost <= 90")
    with pytest.raises(DataError, match=message) as caught:
        state.add_limit(rule)
    assert "\n" not in str(caught.value)
    assert [str(x) for x in state.limits] == ["cost <= 90"]


def test_removing_a_rule_that_is_not_in_force_is_refused(zdt1):
    """remove_limit names what is in force when the position or the rule is not there."""
    state = PickerState(zdt1)
    state.add_limit("cost <= 90")
    with pytest.raises(DataError, match="no limit at position 3; in force: cost <= 90"):
        state.remove_limit(3)
    with pytest.raises(DataError, match="'mass <= 2' is not in force"):
        state.remove_limit("mass <= 2")


# ------------------------------------------------------------------------------------ moves
def _small_front():
    """Five designs by hand: cost [EUR] rises as mass [kg] falls."""
    table = pd.DataFrame(
        {
            "cost": [10.0, 12.0, 15.0, 20.0, 30.0],
            "mass": [100.0, 60.0, 40.0, 30.0, 25.0],
        }
    )
    return Front.from_table(table, [Objective("cost", unit="EUR"), Objective("mass", unit="kg")])


def test_moves_to_the_neighbours_and_the_shortlist_match_the_hand_calculation():
    """From row 3 (cost 15 EUR, mass 40 kg), by hand: to row 2 (12, 60) cost changes 12 - 15 = -3 EUR
    (a gain, cost is minimised) and mass 60 - 40 = +20 kg (given up); to row 4 (20, 30) cost +5 EUR
    (given up) and mass -10 kg (a gain); to shortlisted row 5 (30, 25) cost +15 EUR and mass -15 kg.
    Shares are of the front's spans, 20 EUR and 75 kg: 3/20 = 0.15, 20/75, 5/20, 10/75, 15/20, 15/75."""
    state = PickerState(_small_front())
    state.select(2)
    state.add(4)
    moves = state.moves()
    assert [m["row"] for m in moves] == [1, 3, 4]
    assert [m["why"] for m in moves] == ["next on the front", "next on the front", "shortlist 1"]
    by_hand = {
        1: [(-3.0, 3 / 20, "gain", "3 EUR less"), (20.0, 20 / 75, "give", "20 kg more")],
        3: [(5.0, 5 / 20, "give", "5 EUR more"), (-10.0, 10 / 75, "gain", "10 kg less")],
        4: [(15.0, 15 / 20, "give", "15 EUR more"), (-15.0, 15 / 75, "gain", "15 kg less")],
    }
    for move in moves:
        got = [(c["change"], c["share"], c["effect"], c["text"]) for c in move["changes"]]
        expected = by_hand[move["row"]]
        assert [g[0] for g in got] == pytest.approx([e[0] for e in expected])
        assert [g[1] for g in got] == pytest.approx([e[1] for e in expected])
        assert [g[2:] for g in got] == [e[2:] for e in expected]
    assert moves[2]["summary"] == "gains 15 kg less mass; gives up 15 EUR more cost"
    assert state.describe_moves()[0] == (
        "row 3 to row 2 (next on the front): gains 3 EUR less cost; gives up 20 kg more mass"
    )


def test_moves_follow_the_goal_the_limits_and_say_when_a_neighbour_is_shortlisted():
    """A maximised objective gains when it rises; a neighbour on the shortlist is listed once with both
    reasons; a neighbour outside the limits is skipped for the next one within them."""
    table = pd.DataFrame({"cost": [10.0, 12.0, 15.0, 20.0], "range": [100.0, 140.0, 150.0, 180.0]})
    front = Front.from_table(
        table, [Objective("cost", unit="EUR"), Objective("range", goal="max", unit="km")]
    )
    state = PickerState(front)
    state.select(1)
    state.add(2)
    up = next(m for m in state.moves() if m["row"] == 2)
    # by hand: 12 -> 15 EUR is 3 EUR more cost (given up); 140 -> 150 km is 10 km more range (gained)
    assert up["why"] == "next on the front, shortlist 1"
    assert [(c["effect"], c["text"]) for c in up["changes"]] == [
        ("give", "3 EUR more"),
        ("gain", "10 km more"),
    ]
    state.add_limit("cost != 15")
    assert [m["row"] for m in state.moves()] == [0, 3, 2]
    assert [m["kept"] for m in state.moves()] == [True, True, False]


def test_moves_on_three_objectives_go_to_the_nearest_designs_on_the_scaled_front():
    """With three objectives the neighbours are the nearest on the front scaled by its spans.

    Seven designs on the plane a + b + c = 3 (none dominates another); every span is 3. From
    (1, 1, 1), by hand: (1.1, 0.9, 1) is sqrt(0.02) / 3 = 0.047 away, (1.3, 1, 0.7) is
    sqrt(0.18) / 3 = 0.141, (1, 1.5, 0.5) is sqrt(0.5) / 3 = 0.236 and the three corners
    sqrt(6) / 3 = 0.816 each, so the three nearest are rows 2, 3 and 4 in that order.
    """
    table = pd.DataFrame(
        {
            "a": [1.0, 1.1, 1.3, 1.0, 3.0, 0.0, 0.0],
            "b": [1.0, 0.9, 1.0, 1.5, 0.0, 3.0, 0.0],
            "c": [1.0, 1.0, 0.7, 0.5, 0.0, 0.0, 3.0],
        }
    )
    front = Front.from_table(table, [Objective(n) for n in "abc"])
    assert len(front) == 7
    # the front keeps its rows sorted; find each design by its values
    at = {tuple(r): k for k, r in enumerate(front.points().tolist())}
    centre, near = (
        at[(1.0, 1.0, 1.0)],
        [at[(1.1, 0.9, 1.0)], at[(1.3, 1.0, 0.7)], at[(1.0, 1.5, 0.5)]],
    )
    state = PickerState(front)
    assert state.neighbours(centre) == near
    assert state.neighbours(centre, n_neighbours=4)[:3] == near
    state.add_limit("c >= 0.6")  # the third is outside: a corner takes its place
    assert state.neighbours(centre)[:2] == near[:2] and near[2] not in state.neighbours(centre)


def test_moves_name_a_run_s_designs_by_their_evaluation_number():
    """On a run's front a move names both designs as everything else does: 'design N' (its eval_id)."""
    front = _small_front()
    table = front.table.assign(eval_id=[41, 7, 19, 3, 88])
    state = PickerState(front.with_table(table))
    state.select(2)
    assert state.describe_moves()[0].startswith("design 19 to design 7 (next on the front)")


# ------------------------------------------------------------------------------------- what-if
def test_what_if_in_the_picker_gives_the_command_line_answer(tmp_path):
    """On a run folder of CONSTR (Deb 2001) with its archive, the picker's what-if under the rules in
    force gives exactly the answer of diagnose.what_if (and so of `tradewise whatif`); the state's
    own limits and pick are untouched; a front CSV has no archive to ask and says so."""
    from support import CASES
    from tradewise.diagnose import what_if
    from tradewise.runfolder import read_run

    folder = tmp_path / "run"
    result = tradewise.run(
        CASES / "constr", evaluations=1500, seed=1, store=folder / "archive.sqlite"
    )
    tradewise.save_run(result, folder)
    front, history, evaluations = load_picker_source(folder)
    assert evaluations is not None and len(evaluations) == 1500 and history is not None
    state = PickerState(front, evaluations=evaluations)
    state.add_limit("g1 >= 5")
    before = (state.kept_rows, state.pick)
    answer = state.what_if()
    _, _, archive = read_run(folder)
    expected = what_if(archive, front, ["g1 >= 5"])
    assert answer.lines() == expected.lines() and answer.joined == expected.joined
    assert answer.joined  # loosening the binding limit lets archived designs join
    assert (state.kept_rows, state.pick) == before
    assert state.what_if("f2 <= 4").lines() == what_if(archive, front, ["f2 <= 4"]).lines()
    bare = PickerState(load_picker_source(folder / "front.csv")[0])
    with pytest.raises(DataError, match="no archive of evaluations"):
        bare.what_if("g1 >= 5")
    state.clear_limits()
    with pytest.raises(DataError, match="no rule given and none in force"):
        state.what_if()
