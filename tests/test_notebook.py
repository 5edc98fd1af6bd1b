"""Tests of the notebook picker: its state driven without a browser, its widgets, and the example notebooks."""

from __future__ import annotations

import json
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from tradewise.case import Objective
from tradewise.choose import (
    WEIGHTED_METHODS,
    NonConvexWarning,
    apply_limits,
    choose,
    knee_agreement,
)
from tradewise.errors import DataError
from tradewise.front import Front, read_front, tradeoff_rates
from tradewise.notebook import PickerState, draw_picker, load_picker_source

NOTEBOOKS = sorted((Path(__file__).parent.parent / "notebooks").glob("*.ipynb"))


@pytest.fixture(scope="module")
def run():
    """A short search on the bundled heat-sink case: a real three-objective front with variables."""
    from tradewise.search import run_study

    return run_study("heat-sink", evaluations=400, population=40, seed=2)


@pytest.fixture
def zdt1():
    """Points of the ZDT1 Pareto front f2 = 1 - sqrt(f1) (Zitzler, Deb and Thiele 2000), with units."""
    f1 = np.linspace(0.0, 1.0, 21)
    table = pd.DataFrame({"x": f1, "cost": f1 * 100.0, "mass": (1.0 - np.sqrt(f1)) * 10.0})
    return Front.from_table(table, [Objective("cost", unit="EUR"), Objective("mass", unit="kg")], variables=["x"])


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
    for weights in ({"resistance": 1, "mass": 1, "pressure_drop": 1}, {"resistance": 5}, {"resistance": 0.2, "mass": 5},
                    {"mass": 0.2, "pressure_drop": 5}):
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
    assert state.pick == choose(zdt1, "asf", weights=state.weights, target={"cost": 80.0, "mass": 0.5})[0]
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
    assert {int(keep[k - 1]) + 1, int(keep[k + 1]) + 1} == {int(t.split()[2].rstrip(":")) for t in info["rates"]}
    texts = tradeoff_rates(sub, k)["text"].tolist()
    assert [t.split(": ", 1)[1] for t in info["rates"]] == texts
    costs = zdt1.table["cost"].iloc[keep].to_numpy()
    assert info["objectives"][0]["rank"] == int((costs < costs[k]).sum()) + 1
    assert info["objectives"][0]["of"] == len(keep)
    assert info["knees"] == knee_agreement(zdt1, limits=state.limits)
    assert info["knee_agree"] == [m for m, r in info["knees"].items() if r == state.pick]
    assert info["variables"] == [{"name": "x", "value": zdt1.table["x"].iloc[state.pick], "unit": ""}]
    assert any("knee" in line for line in state.describe())


def test_details_of_a_table_from_elsewhere_show_its_other_columns(tmp_path):
    """A CSV front declares no variables, so the details list its other columns with their units."""
    from tradewise.front import front_from_csv

    path = tmp_path / "designs.csv"
    path.write_text("id,grade,depth [mm],cost [EUR],mass [kg]\n1,S235,300,10,9\n2,S355,420,12,6\n3,S355,500,15,5\n",
                    encoding="utf-8")
    state = PickerState(front_from_csv(path, minimise=["cost", "mass"]))
    info = state.details(1)
    assert info["variables"] == [{"name": "id", "value": 2, "unit": ""}, {"name": "grade", "value": "S355", "unit": ""},
                                 {"name": "depth", "value": 420, "unit": "mm"}]


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
        assert back.table[name].tolist() == pytest.approx(front.table[name].iloc[rows].tolist(), rel=1e-12)
    for name in front.variables:
        assert back.table[name].astype(str).tolist() == front.table[name].iloc[rows].astype(str).tolist()
    # front.json keeps name, goal, unit and worst of each objective (not its description)
    assert [(o.name, o.goal, o.unit, o.worst) for o in back.objectives] == [
        (o.name, o.goal, o.unit, o.worst) for o in front.objectives
    ]
    assert back.variables == front.variables and back.reference == front.reference
    assert {k: back.units[k] for k in front.objective_names} == {o.name: o.unit for o in front.objectives}
    assert back.meta["case_hash"] == front.meta["case_hash"] and back.meta["seed"] == front.meta["seed"]
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


def test_the_review_page_shows_the_whole_front_with_the_shortlist(run, tmp_path):
    """write_review gives the page of the whole front (its size, and its hypervolume as moocore computes it),
    with the two shortlisted designs listed in the order they were added and tagged in the front's table."""
    import re

    import moocore

    front = run.front
    state = PickerState(front, history=run.history)
    first, second = state.pick, 0
    assert first != 0
    state.add(first)
    state.add(second)
    page = state.write_review(tmp_path / "review.html")
    text = page.read_text(encoding="utf-8")
    facts = dict(
        (label, value) for value, label in re.findall(r'<div class="fact"><b>([^<]*)</b><span>([^<]*)</span>', text)
    )
    assert facts["designs on the front"] == str(len(front)) and facts["designs on the shortlist"] == "2"
    expected = moocore.hypervolume(front.points(), ref=np.asarray(front.reference_point()))
    assert float(facts["hypervolume of the front"]) == pytest.approx(expected, rel=1e-4)
    assert "shortlist of" not in text
    listed = text.split('<section id="shortlist">')[1].split("</section>")[0]
    assert re.findall(r"<h3>\d+\. row (\d+)</h3>", listed) == [str(first + 1), str(second + 1)]
    shown = re.findall(r"mass = <b>([^<]+)</b>", listed)
    assert [float(v) for v in shown] == pytest.approx(front.table["mass"].iloc[[first, second]].tolist(), rel=1e-4)
    body = text.split('<table id="front-table">')[1].split("</tbody>")[0]
    assert len(re.findall(r"<tr", body)) == len(front) + 1  # the heading row and one row a design


@pytest.mark.parametrize(
    ("action", "message"),
    [
        (lambda s: s.set_limit("weight", high=1), "not an objective"),
        (lambda s: s.set_limit("cost", 50, 20), "above the upper bound"),
        (lambda s: s.set_limit("cost", high=float("nan")), "not a finite number"),
        (lambda s: s.set_weights({"cost": 0, "mass": 0}), "not all 0"),
        (lambda s: s.set_weights({"cost": -1}), "at least 0"),
        (lambda s: s.set_method("kneedle3"), "does not apply"),
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
    from tradewise.search import save_run

    save_run(run, tmp_path / "run")
    for source in (run, tmp_path / "run", str(tmp_path / "run" / "front.csv")):
        front, history, _ = load_picker_source(source)
        assert len(front) == len(run.front)
        assert front.table["eval_id"].tolist() == run.front.table["eval_id"].tolist()
    assert load_picker_source(tmp_path / "run")[1] is not None
    with pytest.raises(DataError, match="expected a search result"):
        load_picker_source(42)


# ------------------------------------------------------------------------------------ figure
def test_the_figure_greys_exactly_the_designs_outside_the_limits(run):
    """Every 2D panel draws one grey ring per excluded design, at that design's objective values."""
    front = run.front
    state = PickerState(front)
    state.set_limit("pressure_drop", high=float(front.table["pressure_drop"].quantile(0.6)))
    outside = ~state.kept
    fig = draw_picker(state)
    points = front.points()
    panels = 0
    for ax in fig.axes:
        rings = [c for c in ax.collections if c.get_gid() == "outside-limits"]
        base = [c for c in ax.collections if c.get_gid() == "front-points"]
        if not base:
            continue
        panels += 1
        offsets = np.asarray(rings[0].get_offsets())
        assert len(offsets) == outside.sum()
        drawn = {tuple(np.round(p, 9)) for p in offsets}
        columns = [j for j in range(3) if np.allclose(np.asarray(base[0].get_offsets())[:, 0], points[:, j])]
        columns += [j for j in range(3) if np.allclose(np.asarray(base[0].get_offsets())[:, 1], points[:, j])]
        assert drawn == {tuple(np.round(p, 9)) for p in points[outside][:, columns]}
    assert panels == 3  # the three pairwise panels of three objectives
    greyed_3d = [c for ax in fig.axes for c in ax.collections if c.get_gid() == "outside-limits-3d"]
    assert len(greyed_3d) == 1 and len(greyed_3d[0].get_offsets()) == outside.sum()


def test_clicking_a_point_selects_that_design(zdt1):
    """A mouse press over a kept design on the (Agg) canvas selects it through matplotlib's pick events."""
    pytest.importorskip("ipywidgets")
    from matplotlib.backend_bases import MouseEvent

    from tradewise.notebook import Picker

    picker = Picker(zdt1, clickable=False)
    target = picker.state.ranking[4]
    ax = next(a for a in picker.figure.axes if any(c.get_gid() == "front-points" for c in a.collections))
    picker.figure.canvas.draw()
    x, y = ax.transData.transform(zdt1.points()[target])
    MouseEvent("button_press_event", picker.figure.canvas, x, y, button=1)._process()
    assert picker.state.pick == target and picker.state.by_hand


def test_the_widgets_edit_the_state(zdt1, tmp_path, monkeypatch):
    """Moving a slider, a weight, the method, the design list and pressing the buttons change the state alike."""
    pytest.importorskip("ipywidgets")
    from tradewise.notebook import Picker

    monkeypatch.chdir(tmp_path)
    picker = Picker(zdt1, clickable=False)
    state = picker.state
    slider = picker._sliders["cost"]
    slider.value = (slider.min, 50.0)
    assert [str(x) for x in state.limits] == ["cost <= 50"]
    assert picker._count.value.strip().startswith("&nbsp; 11 of 21")
    picker._method.value = "asf"
    assert not picker._weights["cost"].disabled
    picker._weights["mass"].value = 4.0
    assert state.weights["mass"] == 4.0
    assert state.pick == choose(zdt1, "asf", weights=state.weights, limits=state.limits)[0]
    assert picker._designs.value == state.pick
    picker._designs.value = state.ranking[2]
    assert state.pick == state.ranking[2] and state.by_hand
    picker.buttons["add"].click()
    assert state.shortlist == [state.ranking[2]]
    picker.buttons["export"].click()
    assert read_front(tmp_path / "shortlist.csv").table["front_row"].tolist() == [state.shortlist[0] + 1]
    picker._shortlist.value = state.shortlist[0]
    picker.buttons["remove"].click()
    assert state.shortlist == []
    picker.buttons["export"].click()
    assert "empty" in picker._status.value
    state.set_limit("mass", high=3.0)  # a change from code shows in the widgets
    assert picker._sliders["mass"].value[1] == pytest.approx(3.0)
    assert picker._image.value[:4] == b"\x89PNG"


@pytest.mark.filterwarnings("ignore::DeprecationWarning:traitlets")  # raised inside ipympl's toolbar
def test_an_ipympl_canvas_takes_clicks(zdt1):
    """With ipympl the figure is an interactive canvas widget and a pick event on it selects the design."""
    pytest.importorskip("ipympl")
    from matplotlib.backend_bases import MouseEvent

    from tradewise.notebook import Picker

    picker = Picker(zdt1, clickable=True)
    canvas = picker._figure_box.children[0]
    assert type(canvas).__name__ == "Canvas" and canvas.figure is picker.figure
    target = picker.state.ranking[3]
    ax = next(a for a in picker.figure.axes if any(c.get_gid() == "front-points" for c in a.collections))
    canvas.draw()
    x, y = ax.transData.transform(zdt1.points()[target])
    MouseEvent("button_press_event", canvas, x, y, button=1)._process()
    assert picker.state.pick == target
    # the new figure is drawn on the same canvas widget, and clicks on it still select
    assert picker._figure_box.children == (canvas,) and canvas.figure is picker.figure
    other = picker.state.ranking[6]
    canvas.draw()
    ax = next(a for a in picker.figure.axes if any(c.get_gid() == "front-points" for c in a.collections))
    x, y = ax.transData.transform(zdt1.points()[other])
    MouseEvent("button_press_event", canvas, x, y, button=1)._process()
    assert picker.state.pick == other


# --------------------------------------------------------------------------------- notebooks
def test_notebooks_are_stored_without_outputs():
    """Every notebook is committed with cleared outputs and execution counts."""
    nbformat = pytest.importorskip("nbformat")
    assert len(NOTEBOOKS) >= 2
    for path in NOTEBOOKS:
        nb = nbformat.read(path, as_version=4)
        for cell in nb.cells:
            if cell.cell_type == "code":
                assert cell.outputs == [] and cell.execution_count is None, f"{path.name} holds outputs"


@pytest.fixture
def kernel_name(tmp_path, monkeypatch):
    """A kernelspec that runs this interpreter, so the notebooks see the tradewise under test."""
    folder = tmp_path / "jupyter" / "kernels" / "tradewise-test"
    folder.mkdir(parents=True)
    spec = {"argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
            "display_name": "tradewise test", "language": "python"}
    (folder / "kernel.json").write_text(json.dumps(spec), encoding="utf-8")
    monkeypatch.setenv("JUPYTER_PATH", str(tmp_path / "jupyter"))
    return "tradewise-test"


@pytest.mark.slow
@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.name for p in NOTEBOOKS])
def test_notebook_runs_top_to_bottom(path, kernel_name, tmp_path):
    """The notebook executes in a fresh kernel without a failing cell, and writes its shortlist."""
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    nb = nbformat.read(path, as_version=4)
    work = tmp_path / "work"
    work.mkdir()
    client = nbclient.NotebookClient(nb, timeout=300, kernel_name=kernel_name,
                                     resources={"metadata": {"path": str(work)}})
    client.execute()  # raises CellExecutionError on the first failing cell
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs if o.output_type == "error"]
    assert errors == []
    shortlists = list(work.rglob("shortlist.csv"))
    assert shortlists, "the notebook wrote no shortlist"
    for csv_path in shortlists:
        assert len(read_front(csv_path)) >= 1
