"""Tests of the notebook face: the picker's figure and widgets, the review page it writes, the example notebooks.

The picker's state is tested without widgets in test_picker.py.
"""

from __future__ import annotations

import ast
import html
import json
import re
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from tradewise import plots
from tradewise.case import Objective
from tradewise.choose import choose
from tradewise.errors import DataError
from tradewise.front import Front, read_front
from tradewise.notebook import draw_picker, write_review
from tradewise.picker import PickerState

NOTEBOOKS = sorted((Path(__file__).parent.parent / "notebooks").glob("*.ipynb"))


# ------------------------------------------------------------------------------ review page
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
    page = write_review(state, tmp_path / "review.html")
    text = page.read_text(encoding="utf-8")
    facts = dict(
        (label, value)
        for value, label in re.findall(
            r'<div class="fact"><b>([^<]*)</b><span>([^<]*)</span>', text
        )
    )
    assert (
        facts["designs on the front"] == str(len(front))
        and facts["designs on the shortlist"] == "2"
    )
    # the share of the box from the front's best values to the reference point (all minimised here)
    box = np.prod(np.asarray(front.reference_point()) - front.points().min(axis=0))
    expected = moocore.hypervolume(front.points(), ref=np.asarray(front.reference_point())) / box
    covered = facts["of the box from the best values to the reference point, covered"]
    assert float(covered.rstrip(" %")) == pytest.approx(100 * expected, abs=0.05)
    assert "shortlist of" not in text
    listed = text.split('<section id="shortlist">')[1].split("</section>")[0]
    # named by eval_id on the page, as the picker names them
    ids = front.table["eval_id"]
    assert re.findall(r"<h3>\d+\. design (\d+)</h3>", listed) == [str(ids[first]), str(ids[second])]
    assert state.details(first)["name"] == f"design {ids[first]}"
    shown = re.findall(r"mass = <b>([^<]+)</b>", listed)
    # the page prints numbers with thousands separators (tradewise.format)
    assert [float(v.replace(",", "")) for v in shown] == pytest.approx(
        front.table["mass"].iloc[[first, second]].tolist(), rel=1e-4
    )
    body = text.split('<table id="front-table">')[1].split("</tbody>")[0]
    assert len(re.findall(r"<tr", body)) == len(front) + 1  # the heading row and one row a design


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
        columns = [
            j
            for j in range(3)
            if np.allclose(np.asarray(base[0].get_offsets())[:, 0], points[:, j])
        ]
        columns += [
            j
            for j in range(3)
            if np.allclose(np.asarray(base[0].get_offsets())[:, 1], points[:, j])
        ]
        assert drawn == {tuple(np.round(p, 9)) for p in points[outside][:, columns]}
    assert panels == 3  # the three pairwise panels of three objectives
    greyed_3d = [c for ax in fig.axes for c in ax.collections if c.get_gid() == "outside-limits-3d"]
    assert len(greyed_3d) == 1 and len(greyed_3d[0].get_offsets()) == outside.sum()


def _panel_shades(ax):
    """The shaded ranges of one panel as (axis, low, high) in data units."""
    out = []
    for patch in (p for p in ax.patches if p.get_gid() == "limit-shade"):
        x0, y0, x1, y1 = patch.get_bbox().extents
        # axvspan spans the whole height (0 to 1 in axes units), axhspan the whole width
        out.append(("x", x0, x1) if (y0, y1) == (0.0, 1.0) else ("y", y0, y1))
    return sorted(out)


def test_the_shading_covers_exactly_what_the_limits_exclude(zdt1):
    """A lower limit on cost shades from the view's left edge to it, an upper limit on mass from it to the top."""
    state = PickerState(zdt1)
    state.set_limit("cost", low=20.0)
    state.set_limit("mass", high=6.0)
    fig = draw_picker(state)
    ax = fig.axes[0]
    (x_view, _), (_, y_view) = ax.get_xlim(), ax.get_ylim()
    assert _panel_shades(ax) == [
        ("x", pytest.approx(x_view), pytest.approx(20.0)),
        ("y", pytest.approx(6.0), pytest.approx(y_view)),
    ]
    rings = next(c for c in ax.collections if c.get_gid() == "outside-limits")
    assert len(rings.get_offsets()) == len(zdt1) - len(state.kept_rows)
    assert [t.get_text() for t in ax.get_legend().get_texts()][
        -1
    ] == f"outside the limits ({len(rings.get_offsets())})"


def test_a_limit_is_shaded_on_its_own_axis_when_two_objectives_hold_the_same_values():
    """Two objectives with equal values (a cost and a waste counted alike): the waste limit shades the waste axis.

    The panels say which objectives they show; matching axes by their values
    took the first equal column and shaded the cost axis instead.
    """
    f1 = np.linspace(0.0, 1.0, 11)
    table = pd.DataFrame({"cost": f1, "mass": 1.0 - np.sqrt(f1), "waste": f1.copy()})
    front = Front.from_table(table, [Objective("cost"), Objective("mass"), Objective("waste")])
    state = PickerState(front)
    state.set_limit("waste", high=0.5)
    fig = draw_picker(state)
    panels = [ax for ax in fig.axes if any(c.get_gid() == "front-points" for c in ax.collections)]
    # pairwise panels: the first row is cost against mass, the second cost and mass against waste
    waste_row = [ax for ax in panels if ax.get_subplotspec().rowspan.start == 1]
    assert len(panels) == 3 and len(waste_row) == 2
    for ax in waste_row:
        assert [(axis, low) for axis, low, _ in _panel_shades(ax)] == [("y", pytest.approx(0.5))]
    top = next(ax for ax in panels if ax.get_subplotspec().rowspan.start == 0)
    assert _panel_shades(top) == []  # cost against mass: neither is limited


def test_greyed_designs_may_be_given_as_row_positions(zdt1):
    """plot_narrowed_front greys the same designs for a mask and for its row positions; bad ones are DataErrors."""
    mask = np.zeros(len(zdt1), dtype=bool)
    mask[[0, 3, 20]] = True
    by_mask = plots.plot_narrowed_front(zdt1, greyed=mask)
    by_rows = plots.plot_narrowed_front(zdt1, greyed=[0, 3, 20])
    rings = [
        next(c for c in f.axes[0].collections if c.get_gid() == "outside-limits").get_offsets()
        for f in (by_mask, by_rows)
    ]
    np.testing.assert_array_equal(rings[0], rings[1])
    np.testing.assert_array_equal(rings[0], zdt1.points()[[0, 3, 20]])
    with pytest.raises(DataError, match="a mask of 3 values for a front of 21"):
        plots.plot_narrowed_front(zdt1, greyed=[True, False, True])
    with pytest.raises(DataError, match="not a row position"):
        plots.plot_narrowed_front(zdt1, greyed=[21])


@pytest.mark.parametrize("n_objectives", [2, 3])
def test_drawing_onto_a_used_figure_gives_what_a_new_figure_shows(n_objectives):
    """plot_narrowed_front(figure=...) clears the figure it is given: its SVG equals that of a fresh figure."""
    f1 = np.linspace(0.0, 1.0, 21)
    table = pd.DataFrame(
        {"cost": f1 * 100.0, "mass": (1.0 - np.sqrt(f1)) * 10.0, "waste": (1.0 - f1) ** 2}
    )
    front = Front.from_table(
        table, [Objective(n) for n in ("cost", "mass", "waste")[:n_objectives]]
    )
    fresh = plots.plot_narrowed_front(
        front, greyed=f1 > 0.6, limits=["cost <= 60"], picks={"pick": 3}
    )
    used = plots.plot_narrowed_front(
        front, greyed=f1 < 0.2, limits=["cost >= 20"], picks={"pick": 9}
    )
    again = plots.plot_narrowed_front(
        front, greyed=f1 > 0.6, limits=["cost <= 60"], picks={"pick": 3}, figure=used
    )
    assert again is used
    assert plots.to_svg(again) == plots.to_svg(fresh)


def test_the_picker_draws_every_state_on_one_figure(zdt1):
    """A change redraws the picker's own figure (same object, same canvas) with the new state on it."""
    pytest.importorskip("ipywidgets")
    from tradewise.notebook import Picker

    picker = Picker(zdt1, clickable=False)
    figure, canvas = picker.figure, picker.figure.canvas
    picker.state.set_limit("cost", high=30.0)
    assert picker.figure is figure and figure.canvas is canvas
    rings = next(c for c in figure.axes[0].collections if c.get_gid() == "outside-limits")
    assert len(rings.get_offsets()) == len(zdt1) - len(picker.state.kept_rows)


def test_a_click_maps_to_a_row_by_the_event_index(zdt1):
    """clicked_row reads the row from the pick event's index: nearest to the mouse, a preferred row first."""
    from matplotlib.backend_bases import MouseEvent, PickEvent

    fig = plots.plot_narrowed_front(zdt1)
    ax = fig.axes[0]
    fig.canvas.draw()
    points = next(c for c in ax.collections if c.get_gid() == "front-points")
    x, y = ax.transData.transform(zdt1.points()[4])
    mouse = MouseEvent("button_press_event", fig.canvas, x, y, button=1)
    event = PickEvent("pick_event", fig.canvas, mouse, points, ind=np.array([3, 4, 5]))
    assert plots.clicked_row(event) == 4
    prefer = np.ones(len(zdt1), dtype=bool)
    prefer[4] = False
    assert plots.clicked_row(event, prefer=prefer) in (3, 5)
    line = ax.lines[0]  # the thin path through the front is not a design
    assert (
        plots.clicked_row(PickEvent("pick_event", fig.canvas, mouse, line, ind=np.array([4])))
        is None
    )


def test_the_notebook_face_draws_only_through_plots():
    """notebook.py and picker.py import no matplotlib; picker.py imports nothing of the faces or figures."""
    source = Path(__file__).parent.parent / "src" / "tradewise"

    def imported(name):
        tree = ast.parse((source / name).read_text(encoding="utf-8"))
        found = set()
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                found |= {a.name for a in node.names}
            elif isinstance(node, ast.ImportFrom) and node.module:
                found |= {node.module} | {f"{node.module}.{a.name}" for a in node.names}
        return found

    assert not {m for m in imported("notebook.py") if m.split(".")[0] == "matplotlib"}
    faces = ("tradewise.notebook", "tradewise.plots", "tradewise.report", "tradewise.cli")
    below = {
        m
        for m in imported("picker.py")
        if m.split(".")[0] in ("matplotlib", "ipywidgets", "ipympl") or m.startswith(faces)
    }
    assert below == set()


def test_clicking_a_point_selects_that_design(zdt1):
    """A mouse press over a kept design on the (Agg) canvas selects it through matplotlib's pick events."""
    pytest.importorskip("ipywidgets")
    from matplotlib.backend_bases import MouseEvent

    from tradewise.notebook import Picker

    picker = Picker(zdt1, clickable=False)
    target = picker.state.ranking[4]
    ax = next(
        a for a in picker.figure.axes if any(c.get_gid() == "front-points" for c in a.collections)
    )
    picker.figure.canvas.draw()
    x, y = ax.transData.transform(zdt1.points()[target])
    MouseEvent("button_press_event", picker.figure.canvas, x, y, button=1)._process()
    assert picker.state.pick == target and picker.state.by_hand


def test_the_widgets_edit_the_state(zdt1, tmp_path, monkeypatch):
    """Typing a rule, a weight, the method, the design list and pressing the buttons change the state alike."""
    pytest.importorskip("ipywidgets")
    from tradewise.notebook import Picker

    monkeypatch.chdir(tmp_path)
    picker = Picker(zdt1, clickable=False)
    state = picker.state
    picker._rule_text.value = "cost <= 50"  # what Enter in the box sends
    assert [str(x) for x in state.limits] == ["cost <= 50"]
    assert picker._rule_text.value == ""
    assert ">11 of 21 designs keep every rule<" in picker._count.value
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
    assert read_front(tmp_path / "shortlist.csv").table["front_row"].tolist() == [
        state.shortlist[0] + 1
    ]
    item = picker._shortlist.children[0]
    assert item.children[0].value.startswith(f"1. row {state.shortlist[0] + 1}: ")
    item.children[2].click()  # its cross takes it off
    assert state.shortlist == []
    picker.buttons["export"].click()
    assert "empty" in picker._status.value
    state.set_limit("mass", high=3.0)  # a change from code shows in the widgets
    shown = [item.children[0].value for item in picker._rules.children]
    assert [html.unescape(re.sub("<[^>]+>", "", text)) for text in shown] == [
        "cost <= 50",
        "mass <= 3",
    ]
    assert picker._image.value[:4] == b"\x89PNG"


@pytest.mark.filterwarnings(
    "ignore::DeprecationWarning:traitlets"
)  # raised inside ipympl's toolbar
def test_an_ipympl_canvas_takes_clicks(zdt1):
    """With ipympl the figure is an interactive canvas widget and a pick event on it selects the design."""
    pytest.importorskip("ipympl")
    from matplotlib.backend_bases import MouseEvent

    from tradewise.notebook import Picker

    picker = Picker(zdt1, clickable=True)
    canvas = picker._figure_box.children[0]
    assert type(canvas).__name__ == "Canvas" and canvas.figure is picker.figure
    target = picker.state.ranking[3]
    ax = next(
        a for a in picker.figure.axes if any(c.get_gid() == "front-points" for c in a.collections)
    )
    canvas.draw()
    x, y = ax.transData.transform(zdt1.points()[target])
    MouseEvent("button_press_event", canvas, x, y, button=1)._process()
    assert picker.state.pick == target
    # the new figure is drawn on the same canvas widget, and clicks on it still select
    assert picker._figure_box.children == (canvas,) and canvas.figure is picker.figure
    other = picker.state.ranking[6]
    canvas.draw()
    ax = next(
        a for a in picker.figure.axes if any(c.get_gid() == "front-points" for c in a.collections)
    )
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
                assert cell.outputs == [] and cell.execution_count is None, (
                    f"{path.name} holds outputs"
                )


@pytest.fixture
def kernel_name(tmp_path, monkeypatch):
    """A kernelspec that runs this interpreter, so the notebooks see the tradewise under test."""
    folder = tmp_path / "jupyter" / "kernels" / "tradewise-test"
    folder.mkdir(parents=True)
    spec = {
        "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
        "display_name": "tradewise test",
        "language": "python",
    }
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
    client = nbclient.NotebookClient(
        nb, timeout=300, kernel_name=kernel_name, resources={"metadata": {"path": str(work)}}
    )
    client.execute()  # raises CellExecutionError on the first failing cell
    errors = [
        o for c in nb.cells if c.cell_type == "code" for o in c.outputs if o.output_type == "error"
    ]
    assert errors == []
    shortlists = list(work.rglob("shortlist.csv"))
    assert shortlists, "the notebook wrote no shortlist"
    for csv_path in shortlists:
        assert len(read_front(csv_path)) >= 1


def test_the_preferred_list_keeps_designs_apart_and_the_front_shows_its_representatives(zdt1):
    """On the 21-point ZDT1 front (Zitzler, Deb and Thiele 2000) the method's list shows designs
    that differ by more than the separation in some objective, and with representatives = 5 the
    widgets carry the five designs that stand for the front, extremes included."""
    from tradewise.notebook import Picker

    front = zdt1.with_table(zdt1.table)
    front = replace(front, info=front.info.but(settings={"representatives": 5}))
    picker = Picker(front, clickable=False)
    html = picker._ranking_html(6)
    rows = [int(r) - 1 for r in re.findall(r"<td>row (\d+)", html)]
    gap = picker.state.separation
    points = front.table[["cost", "mass"]].to_numpy()
    for i, a in enumerate(rows):
        for b in rows[:i]:
            assert np.any(np.abs(points[a] - points[b]) > [gap["cost"], gap["mass"]])
    reps = picker._reps.value
    assert "The front in 5 designs" in reps and "best cost" in reps and "best mass" in reps
    listed = [int(r) - 1 for r in re.findall(r"<td>row (\d+)", reps)]
    assert len(listed) == 5
    picker.state.select(listed[1])  # the current design is marked in the set
    assert f"<td>row {listed[1] + 1} \u25cf</td>" in picker._reps.value
    assert "What pins this front" in picker._pins.value


def test_rules_are_typed_shown_as_items_and_dropped_one_by_one(zdt1):
    """A typed rule becomes an item with its text and a drop control; a bad rule stays in the box with
    one sentence beside it; the Add button takes the box's text; dropping an item drops that rule only."""
    pytest.importorskip("ipywidgets")
    from tradewise.notebook import Picker

    picker = Picker(zdt1, clickable=False)
    state = picker.state
    picker._rule_text.value = "weight <= 3"
    assert state.limits == [] and picker._rule_text.value == "weight <= 3"
    error = html.unescape(re.sub("<[^>]+>", "", picker._rule_error.value))
    assert "no column 'weight'" in error and error.count(". ") == 0
    picker._syncing = True  # typing without Enter: the box holds the text, nothing is sent
    picker._rule_text.value = "x >= 0.2"
    picker._syncing = False
    picker.buttons["add rule"].click()
    picker._rule_text.value = "mass<=6"
    assert [str(x) for x in state.limits] == ["x >= 0.2", "mass <= 6"]
    assert picker._rule_error.value == ""
    first = picker._rules.children[0]
    assert "x &gt;= 0.2" in first.children[0].value
    first.children[1].click()
    assert [str(x) for x in state.limits] == ["mass <= 6"]
    assert len(picker._rules.children) == 1


def test_the_moves_table_shows_the_state_s_moves_in_units(zdt1):
    """The moves table lists each move of PickerState.moves with its amounts as text, and its buttons go there."""
    pytest.importorskip("ipywidgets")
    from tradewise.notebook import Picker

    picker = Picker(zdt1, clickable=False)
    state = picker.state
    state.add(0)
    moves = state.moves()
    page = picker._moves.value
    assert f"Moves from row {state.pick + 1}" in page
    assert re.findall(r"<td style='padding:2px 10px'>row (\d+)", page) == [
        str(m["row"] + 1) for m in moves
    ]
    for move in moves:
        for change in move["changes"]:
            assert f"<b>{change['text']}</b>" in page
    assert "shortlist 1" in page
    target = moves[-1]["row"]
    picker._move_to.children[-1].click()
    assert state.pick == target and state.by_hand


def test_each_shortlisted_design_is_an_item_that_goes_to_it_or_takes_it_off(zdt1):
    """A shortlist item makes its design current; one that breaks a rule cannot be gone to; its cross takes it off."""
    pytest.importorskip("ipywidgets")
    from tradewise.notebook import Picker

    picker = Picker(zdt1, clickable=False)
    state = picker.state
    state.add(2)
    state.add(18)
    first, second = picker._shortlist.children
    second.children[1].click()
    assert state.pick == 18 and state.by_hand
    state.add_limit(
        "cost <= 50"
    )  # row 19 has cost 90: outside, and the pick goes back to the method
    first, second = picker._shortlist.children
    assert "breaks a rule" in second.children[0].value and second.children[1].disabled
    assert not first.children[1].disabled
    second.children[2].click()
    assert state.shortlist == [2]
    assert len(picker._shortlist.children) == 1


def test_the_ask_button_shows_the_archive_s_answer_under_the_rules(tmp_path):
    """Opened on a run folder with its archive (CONSTR, Deb 2001), the picker's 'Ask the archive'
    shows diagnose.what_if's lines for the rules in force; without an archive it is off."""
    pytest.importorskip("ipywidgets")
    import tradewise
    from support import CASES
    from tradewise.diagnose import what_if
    from tradewise.notebook import Picker
    from tradewise.runfolder import read_run

    folder = tmp_path / "run"
    result = tradewise.run(
        CASES / "constr", evaluations=800, seed=2, store=folder / "archive.sqlite"
    )
    tradewise.save_run(result, folder)
    picker = Picker(folder, clickable=False)
    assert not picker.buttons["ask archive"].disabled
    picker.buttons["ask archive"].click()  # no rule yet: one sentence, nothing else changes
    assert "no rule given and none in force" in picker._answer.value
    picker._rule_text.value = "g1 >= 5"
    picker.buttons["ask archive"].click()
    front, _, archive = read_run(folder)
    shown = html.unescape(re.sub("<[^>]+>", "\n", picker._answer.value)).split("\n")
    for line in what_if(archive, front, ["g1 >= 5"]).lines():
        assert line in shown
    csv_only = Picker(str(folder / "front.csv"), clickable=False)
    assert csv_only.buttons["ask archive"].disabled and "No archive" in csv_only._answer.value
