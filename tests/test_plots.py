"""Figures: every kind for two, three and four objectives, and what they show checked against the data."""

from __future__ import annotations

import io
import itertools
import re
import xml.etree.ElementTree as ET

import matplotlib
import moocore
import numpy as np
import pandas as pd
import pytest
from PIL import Image

from tradewise import compare, plots
from tradewise.case import Objective
from tradewise.errors import DataError
from tradewise.front import Front
from tradewise.runinfo import LimitSpec, RunInfo

SVG = "{http://www.w3.org/2000/svg}"
XLINK_HREF = "{http://www.w3.org/1999/xlink}href"


# ------------------------------------------------------------------------------- fixtures
def zdt1_front(n: int = 31) -> Front:
    """Points of the analytic ZDT1 front f2 = 1 - sqrt(f1) (Zitzler, Deb and Thiele 2000), with units."""
    f1 = np.linspace(0.0, 1.0, n)
    table = pd.DataFrame(
        {
            "eval_id": np.arange(1, n + 1),
            "mass": f1 * 800 + 200,
            "cost": (1 - np.sqrt(f1)) * 50 + 10,
            "width": np.linspace(1, 4, n),
            "grade": ["S235", "S355", "S460"] * (n // 3) + ["S235"] * (n % 3),
        }
    )
    meta = {
        "design_space": [{"name": "grade", "type": "choice", "options": ["S235", "S355", "S460"]}]
    }
    return Front.from_table(
        table,
        [Objective("mass", "min", "g"), Objective("cost", "min", "EUR")],
        variables=["width", "grade"],
        units={"width": "mm"},
        info=RunInfo.from_json(meta, "test"),
    )


def sphere_front(m: int, n: int = 60) -> Front:
    """Points on the DTLZ2 front (unit sphere, Deb et al. 2002) drawn by moocore.generate_ndset."""
    points = moocore.generate_ndset(n, m, "sphere", seed=3)
    table = pd.DataFrame(points, columns=[f"f{k + 1}" for k in range(m)])
    table["x1"] = np.linspace(0, 1, n)
    return Front.from_table(
        table,
        [Objective(f"f{k + 1}", "min", "kg" if k == 0 else "") for k in range(m)],
        variables=["x1"],
    )


def cloud_for(front: Front, n: int = 150, seed: int = 0) -> pd.DataFrame:
    """Dominated and infeasible evaluations behind a front: each front point pushed to the worse side."""
    rng = np.random.default_rng(seed)
    base = front.points()[rng.integers(0, len(front), n)]
    sign = np.array([1.0 if o.goal == "min" else -1.0 for o in front.objectives])
    pushed = base + sign * rng.uniform(0.05, 0.4, base.shape) * np.ptp(front.points(), axis=0)
    table = pd.DataFrame(pushed, columns=front.objective_names)
    table["feasible"] = np.arange(n) % 5 != 0
    return table


def history_table(n: int = 30) -> pd.DataFrame:
    evaluations = np.arange(1, n + 1) * 40
    return pd.DataFrame(
        {
            "generation": np.arange(1, n + 1),
            "evaluations": evaluations,
            "hypervolume": 0.8 * (1 - np.exp(-evaluations / 300)),
            "front_size": np.minimum(np.arange(1, n + 1) * 3, 40),
            "failed": [0] * (n - 3) + [1, 2, 2],  # evaluations failed so far
        }
    )


def svg_tree(fig) -> ET.Element:
    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.fonttype": "path"}):
        fig.savefig(buffer, format="svg")
    return ET.fromstring(buffer.getvalue())


def group(tree: ET.Element, gid: str) -> ET.Element:
    found = [g for g in tree.iter(f"{SVG}g") if g.get("id") == gid]
    assert len(found) == 1, f"expected one SVG group {gid!r}, found {len(found)}"
    return found[0]


def marker_positions(tree: ET.Element, gid: str) -> np.ndarray:
    uses = list(group(tree, gid).iter(f"{SVG}use"))
    return np.array([[float(u.get("x")), float(u.get("y"))] for u in uses])


def plot_area(tree: ET.Element) -> tuple[float, float, float, float]:
    """The plot area in SVG coordinates (x0, y_top, x1, y_bottom), read from the axes' background patch."""
    path = next(iter(group(tree, "plot-area").iter(f"{SVG}path"))).get("d")
    numbers = [float(v) for v in path.replace("M", " ").replace("L", " ").replace("z", " ").split()]
    xs, ys = numbers[0::2], numbers[1::2]
    return min(xs), min(ys), max(xs), max(ys)


# ------------------------------------------------------------------------------- smoke, every kind
@pytest.mark.parametrize("m", [2, 3, 4])
def test_every_kind_draws_for_two_three_and_four_objectives(m, tmp_path):
    """front, parallel and history figures are produced for 2, 3 and 4 objectives and are not blank images."""
    front = zdt1_front() if m == 2 else sphere_front(m)
    evaluations = cloud_for(front)
    for kind in plots.FIGURE_KINDS:
        fig = plots.plot_kind(
            kind, front, history=history_table(), evaluations=evaluations, variables=True
        )
        path = plots.save_figure(fig, tmp_path / f"{kind}-{m}.png")
        grey = np.asarray(Image.open(path).convert("L"), dtype=float)
        assert grey.shape[0] > 400 and grey.shape[1] > 600
        # a drawn figure has a few percent of its pixels clearly darker than the white page
        assert (grey < 200).mean() > 0.01, f"{kind} for {m} objectives looks blank"


@pytest.mark.parametrize("m", [3, 4])
def test_matrix_has_a_panel_for_every_pair_and_labels_with_units_and_senses(m):
    """Three objectives: a 3D view plus the 3 pairs; four: the 6 pairs; every label names objective, unit and sense."""
    front = sphere_front(m)
    fig = plots.plot_front(front, evaluations=cloud_for(front), knee=0)
    panels = [ax for ax in fig.axes if ax.axison and ax.name == "rectilinear"]
    assert len(panels) == m * (m - 1) // 2
    three_d = [ax for ax in fig.axes if ax.name == "3d"]
    assert len(three_d) == (1 if m == 3 else 0)
    pairs = {(round(ax.get_xlim()[1], 6), round(ax.get_ylim()[1], 6), id(ax)) for ax in panels}
    assert len(pairs) == len(panels)
    labels = [ax.get_xlabel() for ax in panels + three_d] + [
        ax.get_ylabel() for ax in panels + three_d
    ]
    labels += [ax.get_zlabel() for ax in three_d]
    shown = [label for label in labels if label]
    assert "f1 [kg]\n(lower is better)" in shown
    assert all("(lower is better)" in label for label in shown)


def test_axis_label_says_unit_and_which_way_is_better():
    """The label of a maximised objective says higher is better; a dollar sign stays literal text."""
    assert plots.axis_label(Objective("life", "max", "h")) == "life [h] (higher is better)"
    assert plots.axis_label(Objective("cost", "min", "$")) == r"cost [\$] (lower is better)"


def test_dollar_signs_in_user_text_do_not_start_mathematics(tmp_path):
    """A title and unit with two dollar signs draw as plain text instead of failing as mathematics."""
    table = pd.DataFrame({"cost": [1.0, 2.0, 3.0], "mass": [3.0, 2.0, 1.0]})
    front = Front.from_table(table, [Objective("cost", "min", "$"), Objective("mass", "min", "kg")])
    fig = plots.plot_front(front, knee=None, title="Budget in $ and $ per unit, a_b^c")
    plots.save_figure(fig, tmp_path / "dollars.png")
    assert fig.texts[0].get_text() == r"Budget in \$ and \$ per unit, a_b^c"


# ------------------------------------------------------------------------------- data in the SVG
def test_front_svg_points_are_the_front_values():
    """The SVG front markers, mapped back through the axes limits, are the front's points, one each."""
    front = zdt1_front()
    evaluations = cloud_for(front)
    fig = plots.plot_front(front, evaluations=evaluations, knee=12, rasterize_cloud=False)
    ax = fig.axes[0]
    ax.patch.set_gid("plot-area")
    tree = svg_tree(fig)
    x0, y_top, x1, y_bottom = plot_area(tree)
    (xmin, xmax), (ymin, ymax) = ax.get_xlim(), ax.get_ylim()
    shown = marker_positions(tree, "front-points")
    data = np.column_stack(
        [
            xmin + (shown[:, 0] - x0) / (x1 - x0) * (xmax - xmin),
            ymin + (y_bottom - shown[:, 1]) / (y_bottom - y_top) * (ymax - ymin),
        ]
    )
    expected = front.points()
    assert len(data) == len(expected)
    order_data, order_expected = np.lexsort(data.T[::-1]), np.lexsort(expected.T[::-1])
    # SVG coordinates carry 6 decimals of a point; a thousandth of the span is far below one pixel
    np.testing.assert_allclose(
        data[order_data], expected[order_expected], atol=1e-3 * np.ptp(expected, axis=0).max()
    )
    feasible = int(evaluations["feasible"].sum())
    in_view = evaluations[evaluations["feasible"]]
    inside = (
        (in_view["mass"] >= xmin)
        & (in_view["mass"] <= xmax)
        & (in_view["cost"] >= ymin)
        & (in_view["cost"] <= ymax)
    )
    # clipped markers are still written, so the SVG holds every dominated evaluation
    assert len(marker_positions(tree, "other-points")) == feasible and inside.sum() > 0.5 * feasible
    assert len(marker_positions(tree, "infeasible-points")) == len(evaluations) - feasible
    knee = marker_positions(tree, "mark-1")
    knee_data = [
        xmin + (knee[0, 0] - x0) / (x1 - x0) * (xmax - xmin),
        ymin + (y_bottom - knee[0, 1]) / (y_bottom - y_top) * (ymax - ymin),
    ]
    np.testing.assert_allclose(knee_data, expected[12], atol=1e-3 * np.ptp(expected, axis=0).max())


def test_front_rows_already_in_the_cloud_are_not_counted_twice():
    """Evaluations that carry the front's eval_id are left out of the faint cloud (the front draws them)."""
    front = zdt1_front()
    evaluations = pd.concat(
        [
            front.table[["eval_id", "mass", "cost"]].assign(feasible=True),
            cloud_for(front).assign(eval_id=range(1000, 1150)),
        ],
        ignore_index=True,
    )
    fig = plots.plot_front(front, evaluations=evaluations, knee=None, rasterize_cloud=False)
    tree = svg_tree(fig)
    assert len(marker_positions(tree, "other-points")) == int(evaluations["feasible"].sum()) - len(
        front
    )


def test_feasibility_comes_from_status_and_constraint_limits_without_a_feasible_column():
    """An archive table (status and constraint columns, no feasible column) is split by the recorded limits."""
    front = zdt1_front()
    evaluations = cloud_for(front).drop(columns="feasible")
    evaluations["gap"] = np.linspace(0, 4, len(evaluations))  # limit: gap >= 2
    evaluations["status"] = ["ok"] * (len(evaluations) - 3) + ["failed"] * 3
    front = Front(
        table=front.table,
        objectives=front.objectives,
        units=front.units,
        info=RunInfo(constraint_limits=(LimitSpec("gap", min=2.0),)),
    )
    tree = svg_tree(
        plots.plot_front(front, evaluations=evaluations, knee=None, rasterize_cloud=False)
    )
    expected_ok = int(((evaluations["gap"] >= 2.0) & (evaluations["status"] == "ok")).sum())
    assert len(marker_positions(tree, "other-points")) == expected_ok
    assert len(marker_positions(tree, "infeasible-points")) == len(evaluations) - expected_ok


def test_parallel_highlight_follows_the_design_with_better_up():
    """The highlighted line sits at (worst - value) / (worst - best) on each objective axis: better is up."""
    front = zdt1_front()
    row = 7
    fig = plots.plot_parallel(front, highlight=row, variables=True)
    line = next(a for a in fig.axes[0].lines if a.get_gid() == "highlight-line")
    levels = line.get_ydata()
    for k, o in enumerate(front.objectives):
        values = front.table[o.name]
        best, worst = values.min(), values.max()
        assert levels[k] == pytest.approx((worst - values[row]) / (worst - best))
    width = front.table["width"]
    assert levels[2] == pytest.approx((width[row] - width.min()) / (width.max() - width.min()))
    assert levels[3] == pytest.approx(["S235", "S355", "S460"].index(front.table["grade"][row]) / 2)


def test_parallel_turns_maximised_objectives_so_better_is_still_up():
    """For a maximised objective the largest value is drawn at the top."""
    table = pd.DataFrame({"cost": [1.0, 2.0, 4.0], "life": [2.0, 5.0, 9.0], "size": [1, 2, 3]})
    front = Front.from_table(
        table, [Objective("cost", "min", "EUR"), Objective("life", "max", "h")], variables=["size"]
    )
    fig = plots.plot_parallel(front, highlight=2, variables=True)
    line = next(a for a in fig.axes[0].lines if a.get_gid() == "highlight-line")
    assert list(line.get_ydata())[:2] == pytest.approx([0.0, 1.0])


def _as_drawn(history: pd.DataFrame) -> pd.DataFrame:
    """The history as the figure draws it: the hypervolume as a percentage of its largest value."""
    return history.assign(hypervolume=100 * history["hypervolume"] / history["hypervolume"].max())


def test_history_lines_carry_the_history_and_mark_the_stop():
    """The two curves hold the history's values (the hypervolume as % of the best reached) and the
    stop marker sits at the last generation."""
    history = history_table()
    fig = plots.plot_history(history, stop_reason="the hypervolume stopped improving", budget=2000)
    assert "% of the best" in fig.axes[0].get_ylabel()
    history = _as_drawn(history)
    top, bottom = fig.axes
    hv = next(a for a in top.lines if a.get_gid() == "hypervolume-line")
    size = next(a for a in bottom.lines if a.get_gid() == "front-size-line")
    np.testing.assert_allclose(hv.get_xydata(), history[["evaluations", "hypervolume"]].to_numpy())
    np.testing.assert_allclose(size.get_xydata(), history[["evaluations", "front_size"]].to_numpy())
    stops = [c for ax in (top, bottom) for c in ax.collections if c.get_gid() == "stop-marker"]
    assert [tuple(c.get_offsets()[0]) for c in stops] == [
        (1200.0, history["hypervolume"].iloc[-1]),
        (1200.0, 40.0),
    ]
    texts = " ".join(t.get_text() for t in top.texts)
    assert "stopped after 1200 evaluations" in texts and "stopped improving" in texts


def test_history_note_counts_failures_once_per_run():
    """history.csv's failed column counts failures so far: the note gives the last count of each run
    (2 for one run, 2 + 2 + 2 for three seeds), not the sum of the column."""
    one = plots.plot_history(history_table(), stop_reason="budget used", budget=1200)
    notes = [t.get_text() for t in one.axes[1].texts if "failed" in t.get_text()]
    assert notes == ["2 evaluation(s) failed during the run"]
    three = pd.concat([history_table().assign(seed=k) for k in (1, 2, 3)], ignore_index=True)
    fig = plots.plot_history(three, stop_reason="budget used", budget=1200)
    notes = [t.get_text() for t in fig.axes[1].texts if "failed" in t.get_text()]
    assert notes == ["6 evaluation(s) failed during the runs"]


def test_history_with_seeds_draws_one_line_per_seed_and_a_star_at_each_end():
    """A history with a seed column (run --seeds) gives one line per seed holding exactly that seed's rows,
    none running back across a seed boundary, and a stop star at each seed's last generation."""
    parts = []
    for seed, (rate, n) in {1: (300, 30), 2: (500, 25), 3: (200, 30)}.items():
        part = history_table(n).assign(seed=seed)
        part["hypervolume"] = 0.8 * (1 - np.exp(-part["evaluations"] / rate))
        parts.append(part)
    history = pd.concat(parts, ignore_index=True)
    fig = plots.plot_history(
        history,
        stop_reason="seed 1: budget used; seed 2: budget used; seed 3: budget used",
        budget=1200,
    )
    history = _as_drawn(history)
    top, bottom = fig.axes
    for seed, part in history.groupby("seed"):
        hv = next(a for a in top.lines if a.get_gid() == f"hypervolume-seed-{seed}")
        size = next(a for a in bottom.lines if a.get_gid() == f"front-size-seed-{seed}")
        np.testing.assert_allclose(hv.get_xydata(), part[["evaluations", "hypervolume"]].to_numpy())
        np.testing.assert_allclose(
            size.get_xydata(), part[["evaluations", "front_size"]].to_numpy()
        )
    drawn = [a for a in top.lines if (a.get_gid() or "").startswith("hypervolume")]
    assert len(drawn) == 3
    assert all(np.all(np.diff(a.get_xdata()) > 0) for a in drawn), "a line runs back in evaluations"
    stars = next(c for c in top.collections if c.get_gid() == "stop-marker").get_offsets()
    ends = history.groupby("seed").tail(1)[["evaluations", "hypervolume"]].to_numpy()
    np.testing.assert_allclose(np.asarray(stars), ends)
    assert [t.get_text() for t in top.get_legend().get_texts()] == ["seed 1", "seed 2", "seed 3"]
    texts = " ".join(t.get_text() for t in top.texts)
    assert "3 seeds stopped after 1000 to 1200 evaluations" in texts
    assert "budget used (every seed)" in texts


# ------------------------------------------------------------------------------- attainment
def _attained(point: np.ndarray, run: np.ndarray, signs: np.ndarray) -> bool:
    """A run attains a point when one of its points is at least as good in every objective."""
    return bool(np.any(np.all(run * signs <= point * signs, axis=1)))


@pytest.mark.parametrize("goals", [("min", "min"), ("min", "max")])
def test_attainment_staircases_match_brute_force_counting(goals):
    """Below/left of the drawn best, median and worst staircases lie exactly the points that
    at least 1, 2 and all 4 runs attain (the definition of the EAF, Grunert da Fonseca et al. 2001)."""
    rng = np.random.default_rng(11)
    objectives = [Objective("cost", goals[0], "EUR"), Objective("life", goals[1], "h")]
    signs = np.array([1.0 if g == "min" else -1.0 for g in goals])
    runs = [
        moocore.generate_ndset(8, 2, "sphere", seed=int(s)) * (1 + 0.15 * k) * signs
        for k, s in enumerate(rng.integers(0, 1000, 4))
    ]
    surfaces = compare.attainment_surfaces(runs, [g == "max" for g in goals])
    fig = plots.plot_attainment(
        surfaces, objectives, runs=runs, levels={"best": 1, "median": 2, "worst": 4}, n_runs=4
    )
    ax = fig.axes[0]
    lines = {line.get_gid(): line.get_xydata() for line in ax.lines}
    needed = {"attainment-best": 1, "attainment-median": 2, "attainment-worst": 4}
    lows = np.min([r.min(axis=0) for r in runs], axis=0)
    highs = np.max([r.max(axis=0) for r in runs], axis=0)
    probes = rng.uniform(lows - 0.1, highs + 0.1, size=(400, 2))
    for gid, k in needed.items():
        path = lines[gid]
        steps = np.diff(path, axis=0)
        assert np.all((steps[:, 0] == 0) | (steps[:, 1] == 0)), (
            "every step is horizontal or vertical"
        )
        for probe in probes:
            count = sum(_attained(probe, run, signs) for run in runs)
            drawn = _attained(probe, path, signs)
            assert drawn == (count >= k), f"{gid} at {probe}: {count} runs attain it"


def test_attainment_table_from_compare_draws_a_true_median_for_three_runs():
    """Three runs: the table compare.attainment writes (attainment.csv) gives best, median and worst
    staircases below which lie exactly the points at least 1, 2 and 3 runs attain (the EAF's definition,
    Grunert da Fonseca et al. 2001); as moocore percentages the median level is 66.7, not 50."""
    from tradewise.compare import attainment as compare_attainment

    rng = np.random.default_rng(5)
    objectives = [Objective("cost", "min", "EUR"), Objective("life", "max", "h")]
    signs = np.array([1.0, -1.0])
    runs = [
        moocore.generate_ndset(9, 2, "sphere", seed=int(s)) * (1 + 0.2 * k) * signs
        for k, s in enumerate(rng.integers(0, 1000, 3))
    ]
    fronts = [
        Front.from_table(
            pd.DataFrame(r, columns=["cost", "life"]), objectives, reference=(3.0, -3.0)
        )
        for r in runs
    ]
    table = compare_attainment(fronts).table()
    fig = plots.plot_attainment(table, objectives)
    ax = fig.axes[0]
    lines = {line.get_gid(): line.get_xydata() for line in ax.lines}
    assert set(lines) == {"attainment-best", "attainment-median", "attainment-worst"}
    lows = np.min([r.min(axis=0) for r in runs], axis=0)
    highs = np.max([r.max(axis=0) for r in runs], axis=0)
    probes = rng.uniform(lows - 0.1, highs + 0.1, size=(400, 2))
    for gid, k in {"attainment-best": 1, "attainment-median": 2, "attainment-worst": 3}.items():
        for probe in probes:
            count = sum(_attained(probe, run, signs) for run in runs)
            assert _attained(probe, lines[gid], signs) == (count >= k), f"{gid} at {probe}"
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert labels[1:] == [
        "best: reached by at least 1 of 3 runs",
        "median: reached by at least 2 of 3 runs",
        "worst: reached by all 3 runs",
    ]
    # the same surfaces given as a mapping of corner arrays draw the same staircases
    corners = {name: part[["cost", "life"]].to_numpy() for name, part in table.groupby("surface")}
    again = plots.plot_attainment(
        corners, objectives, levels={"best": 1, "median": 2, "worst": 3}, n_runs=3
    )
    for line in again.axes[0].lines:
        np.testing.assert_allclose(line.get_xydata(), lines[line.get_gid()])


def test_attainment_median_of_five_runs_is_named_by_the_runs_that_reach_it():
    """Five runs through moocore's 50 % level: the median staircase bounds the points at least 3 of 5 runs
    attain (at least half, Grunert da Fonseca et al. 2001), and the legend says 3 of 5, not 2."""
    objectives = [Objective("cost", "min", "EUR"), Objective("mass", "min", "kg")]
    runs = [
        moocore.generate_ndset(7, 2, "sphere", seed=s) * (1 + 0.1 * k)
        for k, s in enumerate(range(5))
    ]
    fronts = [Front.from_table(pd.DataFrame(r, columns=["cost", "mass"]), objectives) for r in runs]
    fig = plots.plot_attainment(compare.attainment(fronts).table(), objectives)
    ax = fig.axes[0]
    median = next(line.get_xydata() for line in ax.lines if line.get_gid() == "attainment-median")
    signs = np.ones(2)
    probes = np.random.default_rng(2).uniform(-0.1, 1.6, size=(300, 2))
    for probe in probes:
        count = sum(_attained(probe, run, signs) for run in runs)
        assert _attained(probe, median, signs) == (count >= 3), f"median at {probe}: {count} runs"
    assert "median: reached by at least 3 of 5 runs" in [
        t.get_text() for t in ax.get_legend().get_texts()
    ]


def test_attainment_figure_refuses_three_objectives():
    """Three objectives are refused with a DataError naming the problem (the figure is a plane)."""
    three = [Objective("a"), Objective("b"), Objective("c")]
    surfaces = compare.attainment_surfaces([np.ones((3, 3))] * 2)
    with pytest.raises(DataError, match="two objectives"):
        plots.plot_attainment(surfaces, three)


def test_shortlist_rings_sit_on_the_chosen_designs_and_carry_their_pick_numbers():
    """Each shortlisted design gets a ring at its own values, numbered in pick order; designs that
    nearly coincide share one label ("3, 4") instead of hiding each other's number."""
    front = zdt1_front()
    rows = [20, 4, 9, 10]  # 9 and 10 are neighbours on a 31-point front: 1/30 of the range apart
    fig = plots.plot_front(front, knee=None, shortlist=rows)
    ax = fig.axes[0]
    rings = next(c for c in ax.collections if c.get_gid() == "shortlist-rings")
    np.testing.assert_allclose(np.asarray(rings.get_offsets()), front.points()[rows])
    labels = {
        t.get_gid(): (t.get_text(), t.xy)
        for t in ax.texts
        if (t.get_gid() or "").startswith("shortlist")
    }
    assert labels["shortlist-1"][0] == "1" and labels["shortlist-2"][0] == "2"
    np.testing.assert_allclose(labels["shortlist-1"][1], front.points()[20])
    assert labels["shortlist-3"][0] == "3, 4" and "shortlist-4" not in labels
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert legend[-1] == "shortlist (4), numbered in pick order"
    with pytest.raises(DataError, match="shortlist: 31"):
        plots.plot_front(front, shortlist=[31])


# ------------------------------------------------------------------------------- greyscale and colour vision
def _srgb_to_linear(c: np.ndarray) -> np.ndarray:
    # IEC 61966-2-1 (sRGB) transfer function
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _linear_to_lab(rgb: np.ndarray) -> np.ndarray:
    # sRGB primaries to XYZ (D65) and CIE 1976 L*a*b*, the published definitions
    m = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
    xyz = m @ rgb / np.array([0.95047, 1.0, 1.08883])
    f = np.where(xyz > (6 / 29) ** 3, np.cbrt(xyz), xyz / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


# Machado, Oliveira and Fernandes (2009), severity 1.0, applied to linear RGB. Recalled from
# memory and cross-checked once against colorspacious 1.1.2 (machado_et_al_2009_matrix).
_DEFICIENCIES = {
    "none": np.eye(3),
    "protanopia": np.array(
        [
            [0.152286, 1.052583, -0.204868],
            [0.114503, 0.786281, 0.099216],
            [-0.003882, -0.048116, 1.051998],
        ]
    ),
    "deuteranopia": np.array(
        [
            [0.367322, 0.860646, -0.227968],
            [0.280085, 0.672501, 0.047413],
            [-0.011820, 0.042940, 0.968881],
        ]
    ),
    "tritanopia": np.array(
        [
            [1.255528, -0.076749, -0.178779],
            [-0.078411, 0.930809, 0.147602],
            [0.004733, 0.691367, 0.303900],
        ]
    ),
}


def _lab(hex_colour: str, deficiency: str = "none") -> np.ndarray:
    rgb = np.array([int(hex_colour[i : i + 2], 16) for i in (1, 3, 5)]) / 255
    simulated = np.clip(_DEFICIENCIES[deficiency] @ _srgb_to_linear(rgb), 0, 1)
    return _linear_to_lab(simulated)


@pytest.mark.parametrize("deficiency", list(_DEFICIENCIES))
def test_marked_roles_stay_apart_for_colour_deficient_readers(deficiency):
    """Front, knee, picks and ink differ by at least 20 CIE76 units under each simulated deficiency
    (about ten times a just-noticeable difference of 2.3, common practice)."""
    roles = ["front", "highlight", "accent", "ink"]
    for a, b in itertools.combinations(roles, 2):
        distance = np.linalg.norm(
            _lab(plots.PALETTE[a], deficiency) - _lab(plots.PALETTE[b], deficiency)
        )
        assert distance >= 20, f"{a} and {b} are {distance:.1f} apart for {deficiency}"


def test_roles_differ_in_grey_on_the_rendered_figure():
    """In a greyscale rendering the front points are clearly darker than the knee and the faint cloud."""
    front = zdt1_front()
    fig = plots.plot_front(
        front, evaluations=cloud_for(front, n=400), knee=12, rasterize_cloud=False
    )
    fig.canvas.draw()
    grey = np.asarray(
        Image.fromarray(np.asarray(fig.canvas.buffer_rgba())[..., :3]).convert("L"), dtype=float
    )
    ax = fig.axes[0]
    height = grey.shape[0]

    def shade(x: float, y: float) -> float:
        px, py = ax.transData.transform((x, y))
        return grey[int(round(height - py)), int(round(px))]

    points = front.points()
    # ITU-R BT.601 luma (PIL's "L"); 255 is white
    front_shades = [shade(*points[k]) for k in (3, 20, 28)]
    knee_shade = shade(*points[12])
    assert max(front_shades) < 110
    assert knee_shade - max(front_shades) > 40
    cloud = fig.axes[0].collections[0].get_offsets()
    cloud_shades = np.array(
        [
            shade(*p)
            for p in cloud[:40]
            if ax.get_xlim()[0] < p[0] < ax.get_xlim()[1]
            and ax.get_ylim()[0] < p[1] < ax.get_ylim()[1]
        ]
    )
    assert np.median(cloud_shades) - max(front_shades) > 60


def test_roles_use_different_marker_shapes():
    """Knee, picks, front and infeasible points differ in marker shape; dominated points are smaller dots."""
    front = zdt1_front()
    fig = plots.plot_front(
        front, evaluations=cloud_for(front), knee=3, picks={"topsis": 20, "asf": 25}
    )
    legend = fig.axes[0].get_legend()
    handles = legend.legend_handles
    markers = [h.get_marker() for k, h in enumerate(handles) if k != 1]
    assert len(set(markers)) == len(markers) == 5, markers
    assert handles[1].get_markersize() < handles[0].get_markersize()
    texts = [t.get_text() for t in legend.get_texts()]
    # designs are named by their eval_id, which zdt1_front numbers 1, 2, ... along the front
    assert texts[3:] == ["knee (design 4)", "topsis (design 21)", "asf (design 26)"]


# ------------------------------------------------------------------------------- style safety and errors
def test_figures_leave_the_callers_matplotlib_settings_alone(tmp_path):
    """Building and saving figures restores rcParams and does not switch the backend."""
    before_backend = matplotlib.get_backend()
    before = dict(matplotlib.rcParams)
    front = zdt1_front()
    plots.save_figure(plots.plot_front(front, knee=None), tmp_path / "a.svg")
    plots.to_svg(plots.plot_parallel(front, highlight=None, variables=True))
    assert matplotlib.get_backend() == before_backend
    after = dict(matplotlib.rcParams)
    changed = [k for k in before if str(before[k]) != str(after[k])]
    assert changed == []


def test_save_figure_writes_each_format_and_refuses_others(tmp_path):
    """PNG, SVG and PDF are written with their own signatures; a .gif is refused with a DataError."""
    fig = plots.plot_front(zdt1_front(), knee=None)
    assert plots.save_figure(fig, tmp_path / "f.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert b"<svg" in plots.save_figure(fig, tmp_path / "f.svg").read_bytes()[:600]
    assert plots.save_figure(fig, tmp_path / "f.pdf").read_bytes()[:5] == b"%PDF-"
    with pytest.raises(DataError, match=r"\.gif"):
        plots.save_figure(fig, tmp_path / "f.gif")


def test_inline_svg_has_prefixed_ids_and_no_urls():
    """to_svg gives an <svg> element whose ids carry the prefix, with no URL and the label as its title."""
    text = plots.to_svg(plots.plot_front(zdt1_front(), knee=2), prefix="one", label="Front <a&b>")
    assert text.startswith("<svg") and text.endswith("</svg>")
    assert "http" not in text
    assert 'id="one-front-points"' in text and "<title>Front &lt;a&amp;b&gt;</title>" in text
    ids = re.findall(r'\bid="([^"]+)"', text)
    assert ids and all(i.startswith("one-") for i in ids)


def test_bad_rows_and_empty_inputs_raise_data_errors():
    """A knee or highlight outside the front, an empty front and an empty history raise DataError."""
    front = zdt1_front()
    with pytest.raises(DataError, match="knee: 99"):
        plots.plot_front(front, knee=99)
    with pytest.raises(DataError, match="highlight"):
        plots.plot_parallel(front, highlight=-1, variables=True)
    with pytest.raises(DataError, match="no designs"):
        plots.plot_front(front.with_table(front.table.iloc[0:0]))
    with pytest.raises(DataError, match="history"):
        plots.plot_history(pd.DataFrame({"evaluations": [], "hypervolume": [], "front_size": []}))
    with pytest.raises(DataError, match="figure kind"):
        plots.plot_kind("pie", front)


def test_auto_knee_is_marked_only_on_a_front_with_a_knee():
    """With knee="auto" the ZDT1 front (convex, Zitzler, Deb and Thiele 2000) gets its knee marked and
    the DTLZ2 quarter circle (bulges away from the ideal point, Deb et al. 2002) gets no mark at all:
    the design closest to the ideal point that the knee method offers there is not a knee."""
    from tradewise import choose

    front = zdt1_front()
    knee = choose.find_knees(front).knees[0]
    texts = [t.get_text() for t in plots.plot_front(front).axes[0].get_legend().get_texts()]
    assert f"knee (design {front.table['eval_id'].iloc[knee]})" in texts
    curve = sphere_front(2)
    assert not choose.find_knees(curve).has_knee
    legends = [
        plots.plot_front(curve, knee="auto").axes[0].get_legend(),
        plots.plot_parallel(curve, highlight="auto", variables=True).axes[0].get_legend(),
    ]
    for legend in legends:
        assert not any("knee" in t.get_text() for t in legend.get_texts())
    drawn = plots.plot_parallel(curve, highlight="auto", variables=True)
    assert 'id="highlight-line' not in plots.to_svg(drawn)
    assert 'id="mark-1' not in plots.to_svg(plots.plot_front(curve, knee="auto"))


# ------------------------------------------------------------------------------- legend and parallel
def _covered_points(fig) -> int:
    """How many plotted points (scatter markers and line vertices, in display coordinates) lie inside the
    legend's box, after the figure is laid out as it is drawn."""
    fig.draw_without_rendering()
    ax = fig.axes[0]
    box = ax.get_legend().get_window_extent()
    shown = [c.get_offset_transform().transform(c.get_offsets()) for c in ax.collections]
    shown += [line.get_transform().transform(line.get_xydata()) for line in ax.lines]
    xy = np.vstack([p for p in shown if len(p)])
    inside = (
        (xy[:, 0] >= box.x0) & (xy[:, 0] <= box.x1) & (xy[:, 1] >= box.y0) & (xy[:, 1] <= box.y1)
    )
    return int(inside.sum())


def test_legend_takes_a_corner_that_covers_no_point():
    """ZDT1's front (Zitzler, Deb and Thiele 2000) with dominated points behind it fills the upper left,
    upper right and lower right of the view; the legend sits inside the plot area over none of them."""
    front = zdt1_front()
    rng = np.random.default_rng(1)
    behind = pd.DataFrame(
        {"mass": rng.uniform(500, 1300, 300), "cost": rng.uniform(35, 80, 300), "feasible": True}
    )
    fig = plots.plot_front(
        front, evaluations=pd.concat([cloud_for(front, n=400), behind]), title="a title"
    )
    assert _covered_points(fig) == 0
    area = fig.axes[0].get_window_extent()
    box = fig.axes[0].get_legend().get_window_extent()
    assert area.x0 <= box.x0 and box.x1 <= area.x1 and area.y0 <= box.y0 and box.y1 <= area.y1
    assert fig.axes[0].texts, "the knee's label is drawn"
    assert not any(box.overlaps(t.get_window_extent()) for t in fig.axes[0].texts)
    legend = fig.axes[0].get_legend()
    for corner in ("upper right", "upper left", "lower right"):  # the filled corners, as meant
        legend.set_loc(corner)
        assert _covered_points(fig) > 0, corner


def test_legend_goes_outside_when_every_corner_holds_points():
    """Infeasible designs scattered over the whole view leave no free corner: the legend moves to the
    right of the plot area and still covers no point."""
    front = zdt1_front()
    grid = np.array([[m, c] for m in np.linspace(150, 1050, 12) for c in np.linspace(5, 65, 12)])
    evaluations = pd.DataFrame(grid, columns=["mass", "cost"]).assign(feasible=False)
    fig = plots.plot_front(front, evaluations=evaluations)
    assert _covered_points(fig) == 0
    assert fig.axes[0].get_legend().get_window_extent().x0 > fig.axes[0].get_window_extent().x1


def test_attainment_legend_covers_no_corner_of_a_staircase():
    """The attainment figure places its legend by the same rule: no staircase corner lies under it."""
    surfaces = {
        "best": [[0.0, 1.0], [0.3, 0.5], [0.6, 0.2], [1.0, 0.0]],
        "median": [[0.1, 1.0], [0.4, 0.6], [0.7, 0.3], [1.0, 0.1]],
        "worst": [[0.2, 1.0], [0.5, 0.7], [0.8, 0.4], [1.0, 0.2]],
    }
    fig = plots.plot_attainment(
        surfaces, [Objective("cost"), Objective("mass")],
        levels={"best": 1, "median": 2, "worst": 3}, n_runs=3,
    )  # fmt: skip
    assert _covered_points(fig) == 0


def test_parallel_of_two_objectives_alone_is_not_drawn_but_with_variables_is():
    """Two objective axes and nothing else raise DataError saying why; plot_kind adds the front's
    variables to a two-objective parallel figure, and four objectives alone draw as before."""
    front = zdt1_front()
    with pytest.raises(DataError, match="two objectives and nothing else"):
        plots.plot_parallel(front)
    fig = plots.plot_kind("parallel", front)
    labels = [t.get_text() for t in fig.axes[0].get_xticklabels()]
    assert len(labels) == 4 and labels[2].startswith("width") and labels[3] == "grade"
    bare = front.with_table(front.table[["mass", "cost"]])
    with pytest.raises(DataError, match="two objectives and nothing else"):
        plots.plot_kind("parallel", bare)
    assert len(plots.plot_parallel(sphere_front(4)).axes[0].get_xticklabels()) == 4


def test_history_legend_covers_no_point_and_not_the_note():
    """Three seeds whose hypervolume rises fast fill the upper left (where the legend used to sit): the
    legend covers no marker or line vertex of the upper panel and does not overlap the stop note."""
    parts = []
    for seed, rate in {1: 60, 2: 90, 3: 40}.items():
        part = history_table(30).assign(seed=seed)
        part["hypervolume"] = 0.8 * (1 - np.exp(-part["evaluations"] / rate))
        parts.append(part)
    fig = plots.plot_history(pd.concat(parts, ignore_index=True), stop_reason="budget used")
    assert _covered_points(fig) == 0
    top = fig.axes[0]
    legend = top.get_legend().get_window_extent()
    assert not any(legend.overlaps(t.get_window_extent()) for t in top.texts)
    top.get_legend().set_loc("upper left")  # the old place, covered as meant
    assert _covered_points(fig) > 0
