"""Figures of a front, its search and repeated runs, readable in greyscale and by colour-blind readers.

Every figure is a :class:`matplotlib.figure.Figure` made without pyplot, so
nothing here touches the backend or the ``rcParams`` of the caller's session:
settings are applied inside a style context while a figure is built and while
it is saved, and files are written through the Agg (PNG) or the vector
canvases. Roles are told apart by marker shape, fill and line style as well as
by colour, and the colours differ in lightness so that they survive a
greyscale print.

Over 800 lines because it is the one module that imports matplotlib (the
design keeps that dependency in one place): six kinds of figure and the
picker's drawing share one style, palette and label rule.
"""

from __future__ import annotations

import io
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from html import escape
from pathlib import Path
from typing import Any

import matplotlib
import numpy as np
import pandas as pd
from matplotlib import patheffects
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib.colors import to_rgb
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Polygon

from tradewise import choose as _choose
from tradewise import format as _format
from tradewise import limits as _limits
from tradewise.case import Objective
from tradewise.errors import DataError
from tradewise.front import Front, objective_matrix

__all__ = [
    "PALETTE",
    "FIGURE_KINDS",
    "TWO_AXES",
    "axis_label",
    "plot_front",
    "plot_narrowed_front",
    "clicked_row",
    "plot_parallel",
    "plot_history",
    "plot_attainment",
    "plot_kind",
    "save_figure",
    "to_svg",
]

#: Colours of the roles in every figure. Chosen for this project: they differ
#: in lightness (greyscale) and do not rely on a red-green contrast.
PALETTE: dict[str, str] = {
    "ink": "#1f1f24",  # near black: text, edges, some pick markers
    "front": "#1c4f82",  # deep blue, dark in greyscale
    "highlight": "#e08a00",  # amber, light in greyscale: the knee or the chosen design
    "accent": "#3f9fdc",  # sky blue: picks and the second curve; apart from amber in every common colour deficiency
    "feasible": "#b0b0b0",  # faint grey for dominated evaluations
    "infeasible": "#cbb89f",  # faint sand for infeasible or failed ones
    "band": "#d7dde6",
}

#: Marker shapes and colours of picked designs after the knee, in order.
_PICK_STYLES = (
    ("s", "ink"),
    ("^", "accent"),
    ("v", "ink"),
    ("P", "accent"),
    ("X", "ink"),
    ("h", "accent"),
)

#: Marker area of the ring around a shortlisted design (points squared): wider than any pick marker.
_SHORTLIST_RING = 190

#: Designs outside a designer's limits (hollow rings) and the ranges the limits exclude (shading).
_GREYED = "#c4c4ca"
_SHADE = "#eeeef2"

#: What ``plot_kind`` and the command line can draw from a run folder.
FIGURE_KINDS = ("front", "parallel", "history")

#: Why parallel coordinates of two objectives and nothing else are not drawn.
TWO_AXES = (
    "parallel coordinates of two objectives and nothing else are not drawn: two axes side by side "
    "say less than the front's scatter of the same designs"
)

_STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 9.5,
    "axes.titlesize": 10.5,
    "axes.labelsize": 9.5,
    "axes.edgecolor": "#55555c",
    "axes.labelcolor": PALETTE["ink"],
    "axes.linewidth": 0.8,
    "axes.grid": True,
    "grid.color": "#e4e4e8",
    "grid.linewidth": 0.6,
    "xtick.color": "#44444a",
    "ytick.color": "#44444a",
    "xtick.labelsize": 8.5,
    "ytick.labelsize": 8.5,
    "legend.fontsize": 8.5,
    "legend.frameon": True,
    "legend.framealpha": 0.92,
    "legend.edgecolor": "#c8c8cc",
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "savefig.facecolor": "white",
    "savefig.dpi": 150,
    "svg.fonttype": "path",
    "svg.hashsalt": "tradewise",
    "pdf.fonttype": 42,
    "axes.formatter.useoffset": False,
    "axes.formatter.limits": (-5, 7),
}

#: Above this many designs a front's points are drawn as an image inside vector files: the 2,144
#: heat-sink designs took 1.5 MB of its review page as vector points, 0.67 MB as an image. (Lines of
#: parallel coordinates are not: their image, semi-transparent, was larger than the vector lines.)
RASTER_FRONT = 1000

#: How the evaluations behind the front are drawn: infeasible or failed ones, then feasible ones.
_CLOUD_STYLES = (
    {"s": 9, "marker": "x", "linewidths": 0.6, "color": PALETTE["infeasible"], "alpha": 0.7, "zorder": 1,
     "gid": "infeasible-points"},
    {"s": 7, "marker": "o", "linewidths": 0, "color": PALETTE["feasible"], "alpha": 0.45, "zorder": 2,
     "gid": "other-points"},
)  # fmt: skip

_FORMATS = ("png", "svg", "pdf")
_MAX_SHOWN_RUNS = 12


# --------------------------------------------------------------------------------- words
def _plain(text: Any) -> str:
    """User text as matplotlib shows it literally: a ``$`` must not start mathematics."""
    return str(text).replace("$", r"\$")


def _short(text: str, limit: int = 90) -> str:
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 1] + "\u2026"


def axis_label(objective: Objective, *, unit: str | None = None, wrap: bool = False) -> str:
    """The axis label of an objective: name, unit and which way is better.

    Examples
    --------
    >>> axis_label(Objective("mass", "min", "g"))
    'mass [g] (lower is better)'
    """
    unit = objective.unit if unit is None else unit
    name = f"{objective.name} [{unit}]" if unit else objective.name
    sense = "(lower is better)" if objective.goal == "min" else "(higher is better)"
    return _plain(f"{name}\n{sense}" if wrap else f"{name} {sense}")


def _row_label(front: Front, row: int) -> str:
    # the design's one name, as pick, the page and the exported files give it
    return front.design_name(int(row))


# ------------------------------------------------------------------------------ helpers
def _styled():
    """Apply our settings while building or saving a figure; the caller's settings come back after."""
    return matplotlib.rc_context(_STYLE)


def _title(fig: Figure, title: str | None) -> None:
    if title:
        fig.suptitle(_plain(_short(title)), fontsize=11, color=PALETTE["ink"])


def _new_figure(size: tuple[float, float], figure: Figure | None = None) -> Figure:
    # Drawn anew on the caller's figure, which keeps its canvas and its callbacks.
    if figure is not None:
        figure.clear()
        figure.set_layout_engine("constrained")
        if tuple(figure.get_size_inches()) != size:
            figure.set_size_inches(size)
        return figure
    fig = Figure(figsize=size, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _objectives_of(front: Front) -> tuple[Objective, ...]:
    return tuple(
        Objective(o.name, o.goal, front.units.get(o.name, o.unit) or o.unit, o.worst)
        for o in front.objectives
    )


def _default_knee(front: Front) -> int | None:
    if len(front) < 3:
        return None
    # Only a real knee is marked as one: on a front without a knee nothing is called a knee.
    try:
        knees = _choose.find_knees(front).knees
    except (DataError, ValueError, IndexError):
        return None
    return int(knees[0]) if knees else None


def _check_row(front: Front, row: Any, what: str) -> int:
    if (
        isinstance(row, bool)
        or not isinstance(row, int | np.integer)
        or not 0 <= int(row) < len(front)
    ):
        raise DataError(
            f"{what}: {row!r} is not a row position of the front (0 to {len(front) - 1})"
        )
    return int(row)


def _marks(
    front: Front, knee: int | str | None, picks: Mapping[str, int] | Sequence[int] | None
) -> list[dict]:
    """The designs to mark: the knee first, then the picks, one entry per row with all its labels."""
    if isinstance(knee, str):
        if knee != "auto":
            raise DataError(f"knee: expected a row position, 'auto' or None, got {knee!r}")
        knee = _default_knee(front)
    labelled: list[tuple[str, int]] = []
    if knee is not None:
        labelled.append(("knee", _check_row(front, knee, "knee")))
    if picks:
        items = (
            picks.items()
            if isinstance(picks, Mapping)
            else ((f"pick {i + 1}", r) for i, r in enumerate(picks))
        )
        labelled.extend(
            (str(label), _check_row(front, row, f"pick {label!r}")) for label, row in items
        )
    marks: dict[int, dict] = {}
    for label, row in labelled:
        entry = marks.setdefault(row, {"row": row, "labels": [], "is_knee": False})
        entry["labels"].append(label)
        entry["is_knee"] = entry["is_knee"] or label == "knee"
    out = list(marks.values())
    pick_index = 0
    for entry in out:
        if entry["is_knee"]:  # filled, ink-edged
            colour = PALETTE["highlight"]
            entry.update(
                marker="D", color=colour, size=80, face=colour, edge=PALETTE["ink"], width=1.0
            )
        else:  # hollow, edged in its colour
            marker, name = _PICK_STYLES[pick_index % len(_PICK_STYLES)]
            pick_index += 1
            colour = PALETTE[name]
            entry.update(marker=marker, color=colour, size=90, face="none", edge=colour, width=2.0)
        entry["text"] = f"{', '.join(entry['labels'])} ({_row_label(front, entry['row'])})"
    return out


def _cloud(front: Front, evaluations: pd.DataFrame | None) -> tuple[np.ndarray, np.ndarray]:
    """Objective values of the other evaluations, split into feasible and infeasible-or-failed."""
    m = len(front.objectives)
    empty = np.empty((0, m))
    if evaluations is None or len(evaluations) == 0:
        return empty, empty
    names = front.objective_names
    missing = [n for n in names if n not in evaluations.columns]
    if missing:
        raise DataError(
            f"evaluations: no column {missing[0]!r}; the objectives are {', '.join(names)}"
        )
    values = evaluations[names].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
    usable = np.isfinite(values).all(axis=1)
    if "eval_id" in evaluations.columns and "eval_id" in front.table.columns:
        usable &= ~evaluations["eval_id"].isin(set(front.table["eval_id"].tolist())).to_numpy()
    if "feasible" in evaluations.columns:
        feasible = evaluations["feasible"].fillna(False).astype(bool).to_numpy()
    else:
        feasible = np.ones(len(evaluations), dtype=bool)
        if "status" in evaluations.columns:
            feasible &= (evaluations["status"].astype(str) == "ok").to_numpy()
        for limit in front.info.constraint_limits:
            name = limit.name
            if name not in evaluations.columns:
                continue
            column = pd.to_numeric(evaluations[name], errors="coerce").to_numpy(dtype=float)
            ok = np.isfinite(column)
            if limit.min is not None:
                ok &= column >= float(limit.min)
            if limit.max is not None:
                ok &= column <= float(limit.max)
            feasible &= ok
    return values[usable & feasible], values[usable & ~feasible]


def _view(front_values: np.ndarray, cloud: np.ndarray) -> tuple[float, float]:
    """Axis limits that show the whole front, and the cloud only as far as it helps."""
    lo, hi = float(np.min(front_values)), float(np.max(front_values))
    span = hi - lo if hi > lo else (abs(hi) or 1.0)
    lo_view, hi_view = lo - 0.06 * span, hi + 0.06 * span
    if len(cloud):
        # at most half the front's span more on either side keeps the front large while showing what it beat
        lo_view = min(lo_view, max(float(np.min(cloud)), lo - 0.5 * span))
        hi_view = max(hi_view, min(float(np.max(cloud)), hi + 0.5 * span))
    return lo_view, hi_view


def _scatter_panel(
    ax,
    front: Front,
    objectives,
    i: int,
    j: int,
    cloud: tuple[np.ndarray, np.ndarray],
    marks: list[dict],
    *,
    annotate: bool,
    rasterize: bool,
    wrap: bool,
    shortlist: Sequence[int] = (),
    narrowing: _Narrowing | None = None,
) -> None:
    points = front.points()
    feasible, infeasible = cloud
    for values, style in zip((infeasible, feasible), _CLOUD_STYLES, strict=True):
        if len(values):
            ax.scatter(values[:, i], values[:, j], rasterized=rasterize, **style)
    order = np.argsort(points[:, i], kind="stable")
    size = float(np.clip(2400.0 / max(len(points), 1), 9.0, 26.0))
    ax.scatter(
        points[:, i],
        points[:, j],
        s=size,
        marker="o",
        color=PALETTE["front"],
        edgecolors="white",
        linewidths=0.5,
        zorder=4,
        gid="front-points",
        rasterized=len(points) > RASTER_FRONT,
        # points in row order, so the index a pick event reports is the row position (see clicked_row)
        **({"picker": True, "pickradius": 6} if narrowing is not None else {}),
    )
    if len(objectives) == 2:
        # the front as a thin path so its shape reads even where points are sparse
        ax.plot(
            points[order, i],
            points[order, j],
            color=PALETTE["front"],
            linewidth=0.8,
            alpha=0.55,
            zorder=3,
        )
    ax.set_xlim(*_view(points[:, i], np.concatenate([feasible[:, i], infeasible[:, i]])))
    ax.set_ylim(*_view(points[:, j], np.concatenate([feasible[:, j], infeasible[:, j]])))
    for k, mark in enumerate(marks):
        x, y = points[mark["row"], i], points[mark["row"], j]
        ax.scatter(
            [x],
            [y],
            s=mark["size"],
            marker=mark["marker"],
            zorder=6,
            facecolors=mark["face"],
            edgecolors=mark["edge"],
            linewidths=mark["width"],
            gid=f"mark-{k + 1}",
        )
        if annotate:
            dx = 16 if objectives[i].goal == "min" else -16
            dy = 16 if objectives[j].goal == "min" else -16
            step = 13 * k
            ax.annotate(
                _plain(mark["text"]),
                (x, y),
                xytext=(dx + step * np.sign(dx), dy + 1.6 * step * np.sign(dy)),
                textcoords="offset points",
                fontsize=8.5,
                color=PALETTE["ink"],
                zorder=7,
                ha="left" if dx > 0 else "right",
                va="bottom" if dy > 0 else "top",
                bbox={
                    "boxstyle": "round,pad=0.25",
                    "fc": "white",
                    "ec": mark["color"],
                    "lw": 0.8,
                    "alpha": 0.92,
                },
                arrowprops={"arrowstyle": "-", "color": PALETTE["ink"], "lw": 0.7, "shrinkB": 5},
            )
    if shortlist:
        rows = list(shortlist)
        ax.scatter(
            points[rows, i],
            points[rows, j],
            s=_SHORTLIST_RING,
            marker="o",
            facecolors="none",
            edgecolors=PALETTE["ink"],
            linewidths=1.6,
            zorder=6,
            gid="shortlist-rings",
        )
        for numbers, row in _label_groups(ax, points[rows][:, [i, j]], rows):
            ax.annotate(
                ", ".join(map(str, numbers)),
                (points[row, i], points[row, j]),
                xytext=(7, -7),
                textcoords="offset points",
                ha="left",
                va="top",
                fontsize=8,
                fontweight="bold",
                color=PALETTE["ink"],
                zorder=7,
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": PALETTE["ink"], "lw": 0.6},
                gid=f"shortlist-{numbers[0]}",
            )
    if narrowing is not None and narrowing.greyed.any():
        out = narrowing.greyed
        ax.scatter(points[out, i], points[out, j], s=size, marker="o", facecolors="white",
                   edgecolors=_GREYED, linewidths=1.1, zorder=5, gid="outside-limits")  # fmt: skip
    ax.set_xlabel(axis_label(objectives[i], wrap=wrap))
    ax.set_ylabel(axis_label(objectives[j], wrap=wrap))


def _label_groups(ax, xy: np.ndarray, rows: Sequence[int]) -> list[tuple[list[int], int]]:
    """Shortlist numbers that share one label because their designs sit within 3 % of the view of each other."""
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    scaled = (xy - [x0, y0]) / [x1 - x0 or 1.0, y1 - y0 or 1.0]
    groups: list[tuple[list[int], int, np.ndarray]] = []
    for number, (row, here) in enumerate(zip(rows, scaled, strict=True), start=1):
        for numbers, _, anchor in groups:
            if np.all(np.abs(here - anchor) < 0.03):
                numbers.append(number)
                break
        else:
            groups.append(([number], row, here))
    return [(numbers, row) for numbers, row, _ in groups]


def _key(label: str, **style: Any) -> Line2D:
    """A legend entry of one marker, drawn without a line."""
    return Line2D([], [], linestyle="none", label=label, **style)


#: Corners of the plot area a legend may take, in the order tried; the first that covers no point wins.
_LEGEND_CORNERS = ("upper right", "upper left", "lower left", "lower right")
#: Points (1/72 inch) of air a legend keeps around the centre of every plotted point: the radius of
#: the largest mark (the shortlist ring, about 7 pt) so that no marker is even partly hidden.
_LEGEND_CLEARANCE = 7.0


def _place_legend(
    ax, handles: Sequence[Any], points: np.ndarray, *, avoid: Sequence[Any] = (), **options: Any
):
    """Put the legend in the first corner of ``ax`` that covers none of ``points`` (data coordinates)
    and overlaps none of the artists ``avoid`` (such as a note in the plot area).

    The legend is measured where it is drawn, after the figure's layout is
    settled (so a title must be set first); when every corner would cover
    something, it goes outside the plot area, on the right.
    """
    fig = ax.get_figure(root=True)
    legend = ax.legend(handles=handles, loc=_LEGEND_CORNERS[0], **options)
    xy = np.asarray(points, dtype=float).reshape(-1, 2)
    xy = xy[np.all(np.isfinite(xy), axis=1)]
    fig.draw_without_rendering()  # settles the layout; the legend's box follows its corner after
    boxes = [artist.get_window_extent() for artist in avoid]
    for corner in _LEGEND_CORNERS:
        legend.set_loc(corner)
        extent = legend.get_window_extent()
        if _covered(ax, legend, xy) == 0 and not any(extent.overlaps(b) for b in boxes):
            return legend
    legend.remove()
    return ax.legend(
        handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0, **options
    )


def _covered(ax, legend, xy: np.ndarray) -> int:
    """How many of the points ``xy`` (data coordinates) inside the plot area lie under the legend."""
    if not len(xy):
        return 0
    shown = ax.transData.transform(xy)
    fraction = ax.transAxes.inverted().transform(shown)
    in_view = np.all((fraction >= 0.0) & (fraction <= 1.0), axis=1)
    box = legend.get_window_extent()
    air = _LEGEND_CLEARANCE * ax.get_figure(root=True).dpi / 72.0
    under = (
        (shown[:, 0] >= box.x0 - air)
        & (shown[:, 0] <= box.x1 + air)
        & (shown[:, 1] >= box.y0 - air)
        & (shown[:, 1] <= box.y1 + air)
    )
    return int(np.sum(under & in_view))


def _legend_handles(
    front: Front,
    cloud: tuple[np.ndarray, np.ndarray],
    marks: list[dict],
    shortlist: Sequence[int] = (),
    narrowing: _Narrowing | None = None,
) -> list[Line2D]:
    handles = [
        _key(f"front ({len(front)} designs)", marker="o", markersize=6,
             markerfacecolor=PALETTE["front"], markeredgecolor="white")
    ]  # fmt: skip
    if len(cloud[0]):
        handles.append(
            _key(f"other feasible evaluations ({len(cloud[0])})", marker="o", markersize=4,
                 markerfacecolor=PALETTE["feasible"], markeredgewidth=0, alpha=0.8)
        )  # fmt: skip
    if len(cloud[1]):
        handles.append(
            _key(f"infeasible or failed ({len(cloud[1])})", marker="x", markersize=4,
                 color=PALETTE["infeasible"])
        )  # fmt: skip
    for mark in marks:
        handles.append(
            _key(_plain(mark["text"]), marker=mark["marker"], markersize=8, markerfacecolor=mark["face"],
                 markeredgecolor=mark["edge"], markeredgewidth=mark["width"])
        )  # fmt: skip
    if shortlist:
        handles.append(
            _key(f"shortlist ({len(shortlist)}), numbered in pick order", marker="o", markersize=10,
                 markerfacecolor="none", markeredgecolor=PALETTE["ink"], markeredgewidth=1.6)
        )  # fmt: skip
    if narrowing is not None and narrowing.greyed.any():
        handles.append(
            _key(f"outside the limits ({int(narrowing.greyed.sum())})", marker="o", markersize=6,
                 markerfacecolor="white", markeredgecolor=_GREYED, markeredgewidth=1.1)
        )  # fmt: skip
    return handles


# --------------------------------------------------------------------------------- front
def plot_front(
    front: Front,
    *,
    evaluations: pd.DataFrame | None = None,
    knee: int | str | None = "auto",
    picks: Mapping[str, int] | Sequence[int] | None = None,
    shortlist: Sequence[int] | None = None,
    title: str | None = None,
    rasterize_cloud: bool | None = None,
) -> Figure:
    """Draw the front over the other evaluations, with the knee and picked designs marked.

    Two objectives give one scatter with the picks annotated; three give a 3D
    view beside a matrix of pairwise projections; four or more give the
    matrix alone. Evaluations that the front dominates are drawn faint behind
    it (grey dots), infeasible and failed ones as faint crosses.

    Parameters
    ----------
    front : Front
        The front; objective names, senses and units label the axes.
    evaluations : pandas.DataFrame, optional
        Every evaluation of the run, with the objective columns and either a
        boolean ``feasible`` column or ``status`` and the constraint columns
        (checked against ``front.info.constraint_limits``).
    knee : int, "auto" or None
        Row position of the knee design; ``"auto"`` asks the knee method of
        :mod:`tradewise.choose` when it is available; None marks no knee.
    picks : dict or sequence of int, optional
        Further designs to mark: label to row position, or bare row positions.
    shortlist : sequence of int, optional
        Row positions of the designs a designer shortlisted, in pick order:
        each is ringed and numbered 1, 2, ... in every panel.
    title : str, optional
        A title over the figure (user text is shown literally).
    rasterize_cloud : bool, optional
        Draw the other evaluations as an image inside vector files; by
        default when there are more than 1500 of them.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> table = pd.DataFrame({"cost": [1.0, 2, 4], "mass": [5.0, 3, 2]})
    >>> front = Front.from_table(table, [Objective("cost", unit="EUR"), Objective("mass", unit="kg")])
    >>> fig = plot_front(front, knee=1)
    >>> fig.axes[0].get_xlabel()
    'cost [EUR] (lower is better)'
    """
    return _front_figure(
        front,
        evaluations=evaluations,
        knee=knee,
        picks=picks,
        shortlist=shortlist,
        title=title,
        rasterize_cloud=rasterize_cloud,
    )


@dataclass(frozen=True)
class _Narrowing:
    """Designs to grey (a mask over the front's rows) and the limits whose excluded ranges are shaded."""

    greyed: np.ndarray
    limits: tuple[_limits.Limit, ...]


def _front_figure(
    front: Front,
    *,
    evaluations: pd.DataFrame | None,
    knee: int | str | None,
    picks: Mapping[str, int] | Sequence[int] | None,
    shortlist: Sequence[int] | None,
    title: str | None,
    rasterize_cloud: bool | None,
    narrowing: _Narrowing | None = None,
    figure: Figure | None = None,
) -> Figure:
    if len(front) == 0:
        raise DataError("front: holds no designs, so there is nothing to draw")
    objectives = _objectives_of(front)
    m = len(objectives)
    _check_drawable(front)
    with _styled():
        cloud = _cloud(front, evaluations)
        marks = _marks(front, knee, picks)
        listed = [_check_row(front, row, "shortlist") for row in (shortlist or ())]
        rasterize = (
            (len(cloud[0]) + len(cloud[1]) > 1500) if rasterize_cloud is None else rasterize_cloud
        )
        if m == 2:
            fig = _new_figure((7.2, 5.2), figure)
            ax = fig.add_subplot()
            _scatter_panel(
                ax,
                front,
                objectives,
                0,
                1,
                cloud,
                marks,
                annotate=True,
                rasterize=rasterize,
                wrap=False,
                shortlist=listed,
                narrowing=narrowing,
            )
            if narrowing is not None:
                _shade_limits(ax, front, 0, 1, narrowing)
            _title(fig, title)
            _place_legend(
                ax,
                _legend_handles(front, cloud, marks, listed, narrowing),
                np.vstack([front.points()[:, :2], *(part[:, :2] for part in cloud)]),
                avoid=list(ax.texts),  # the labels of the knee, the picks and the shortlist
            )
        else:
            fig = _front_matrix(
                front, objectives, cloud, marks, rasterize, listed, narrowing, figure
            )
            _title(fig, title)
    return fig


def _front_matrix(
    front: Front,
    objectives,
    cloud,
    marks,
    rasterize: bool,
    shortlist: Sequence[int] = (),
    narrowing: _Narrowing | None = None,
    figure: Figure | None = None,
) -> Figure:
    m = len(objectives)
    n = m - 1
    if m == 3:
        fig = _new_figure((12.5, 5.8), figure)
        left, right = fig.subfigures(1, 2, width_ratios=[1.05, 1.0])
        _front_3d(left.add_subplot(projection="3d"), front, objectives, marks, shortlist, narrowing)
        grid_fig = right
    else:
        fig = _new_figure((2.9 * n + 1.2, 2.7 * n + 0.6), figure)
        grid_fig = fig
    axes = grid_fig.subplots(n, n, squeeze=False)
    for r in range(n):
        for c in range(n):
            ax = axes[r][c]
            if c > r:
                ax.set_axis_off()
                continue
            _scatter_panel(
                ax,
                front,
                objectives,
                c,
                r + 1,
                cloud,
                marks,
                annotate=False,
                rasterize=rasterize,
                wrap=True,
                shortlist=shortlist,
                narrowing=narrowing,
            )
            if r != n - 1:
                ax.set_xlabel("")
                ax.tick_params(labelbottom=False)
            if c != 0:
                ax.set_ylabel("")
                ax.tick_params(labelleft=False)
    for c in range(n):
        column = [axes[r][c] for r in range(c, n)]
        lows, highs = zip(*(a.get_xlim() for a in column), strict=True)
        for a in column:
            a.set_xlim(min(lows), max(highs))
    for r in range(n):
        row = [axes[r][c] for c in range(r + 1)]
        lows, highs = zip(*(a.get_ylim() for a in row), strict=True)
        for a in row:
            a.set_ylim(min(lows), max(highs))
    if narrowing is not None:  # shaded once the panels of a row or column share their view
        for r in range(n):
            for c in range(r + 1):
                _shade_limits(axes[r][c], front, c, r + 1, narrowing)
    handles = _legend_handles(front, cloud, marks, shortlist, narrowing)
    if n >= 2:
        axes[0][n - 1].legend(handles=handles, loc="upper right", borderaxespad=0.0)
    else:  # pragma: no cover - a matrix always has two or more columns here
        axes[0][0].legend(handles=handles)
    return fig


def _front_3d(
    ax,
    front: Front,
    objectives,
    marks: list[dict],
    shortlist: Sequence[int] = (),
    narrowing: _Narrowing | None = None,
) -> None:
    points = front.points()
    ax.scatter(
        points[:, 0],
        points[:, 1],
        points[:, 2],
        s=14,
        marker="o",
        color=PALETTE["front"],
        edgecolors="white",
        linewidths=0.3,
        depthshade=False,
        gid="front-points-3d",
        rasterized=len(points) > RASTER_FRONT,
    )
    for mark in marks:
        p = points[mark["row"]]
        ax.scatter(
            [p[0]],
            [p[1]],
            [p[2]],
            s=mark["size"] * 1.2,
            marker=mark["marker"],
            depthshade=False,
            facecolors=mark["face"],
            edgecolors=mark["edge"],
            linewidths=mark["width"],
            zorder=10,
        )
    for number, row in enumerate(shortlist, start=1):
        p = points[row]
        ax.scatter([p[0]], [p[1]], [p[2]], s=_SHORTLIST_RING, marker="o", facecolors="none",
                   edgecolors=PALETTE["ink"], linewidths=1.6, depthshade=False, zorder=11)  # fmt: skip
        ax.text(p[0], p[1], p[2], f"  {number}", fontsize=8, fontweight="bold", color=PALETTE["ink"],
                zorder=12)  # fmt: skip
    if narrowing is not None and narrowing.greyed.any():
        out = narrowing.greyed
        ax.scatter(points[out, 0], points[out, 1], points[out, 2], s=16, marker="o", facecolors=_GREYED,
                   edgecolors="white", linewidths=0.3, depthshade=False, gid="outside-limits-3d")  # fmt: skip
    for setter, objective in zip(
        (ax.set_xlabel, ax.set_ylabel, ax.set_zlabel), objectives, strict=False
    ):
        setter(axis_label(objective, wrap=True), labelpad=10)
    # look from the worst corner towards the ideal one, so the front faces the reader
    ax.view_init(elev=22, azim=45 if objectives[0].goal == objectives[1].goal else -45)
    ax.set_box_aspect(None, zoom=0.86)


# ------------------------------------------------------------------ a front narrowed by limits
def plot_narrowed_front(
    front: Front,
    *,
    greyed: Sequence[bool] | Sequence[int] | np.ndarray = (),
    limits: Iterable[_limits.Limit | str] = (),
    evaluations: pd.DataFrame | None = None,
    knee: int | str | None = None,
    picks: Mapping[str, int] | Sequence[int] | None = None,
    title: str | None = None,
    figure: Figure | None = None,
) -> Figure:
    """The front as :func:`plot_front` draws it, narrowed by a designer's limits, ready for clicks.

    On every 2D panel the ``greyed`` designs are drawn as hollow grey rings
    over their points, the ranges that ``limits`` on the panel's objectives
    exclude are shaded, and the front's points are pickable, so that
    :func:`clicked_row` turns a click into a design where the canvas reports
    clicks. The 3D view of three objectives draws the greyed designs grey.
    The legend counts the greyed designs.

    Parameters
    ----------
    front : Front
        The front; objective names, senses and units label the axes.
    greyed : boolean mask or row positions
        The designs outside the limits.
    limits : iterable of Limit or str
        The limits in force, such as ``"mass <= 12"``; those on objectives are
        shaded, others only explain ``greyed``.
    evaluations, knee, picks, title :
        As for :func:`plot_front` (``knee`` defaults to None here: the picks
        say which design is current).
    figure : matplotlib.figure.Figure, optional
        Draw on this figure instead of a new one: it is cleared and sized for
        the front, and keeps its canvas and the callbacks connected to it, so
        an interactive canvas shows each new state of the same figure.

    Returns
    -------
    matplotlib.figure.Figure
        ``figure`` when one was given.

    Examples
    --------
    >>> table = pd.DataFrame({"cost": [1.0, 2, 4], "mass": [5.0, 3, 2]})
    >>> front = Front.from_table(table, [Objective("cost", unit="EUR"), Objective("mass", unit="kg")])
    >>> fig = plot_narrowed_front(front, greyed=[False, False, True], limits=["cost <= 3"], picks={"pick": 1})
    >>> [len(c.get_offsets()) for c in fig.axes[0].collections if c.get_gid() == "outside-limits"]
    [1]
    """
    mask = _row_mask(front, greyed)
    parsed = tuple(_limits.parse_limit(limit) for limit in limits)
    return _front_figure(
        front,
        evaluations=evaluations,
        knee=knee,
        picks=picks,
        shortlist=None,
        title=title,
        rasterize_cloud=None,
        narrowing=_Narrowing(mask, parsed),
        figure=figure,
    )


def clicked_row(event: Any, *, prefer: Sequence[bool] | np.ndarray | None = None) -> int | None:
    """The row position of the front design a pick event on a front figure points at.

    Of the points under the mouse (``event.ind`` indexes the front's points,
    which the figures draw in row order) the nearest on screen wins; with
    ``prefer`` (a boolean mask over the rows) the nearest preferred one wins
    where there is one. None for an event on anything but the front's points.

    Parameters
    ----------
    event : matplotlib.backend_bases.PickEvent
        The event a ``pick_event`` callback receives.
    prefer : boolean mask, optional
        Rows to choose first when points overlap (the designs within limits).
    """
    artist = getattr(event, "artist", None)
    if artist is None or artist.get_gid() != "front-points" or not len(getattr(event, "ind", [])):
        return None
    rows = np.asarray(event.ind, dtype=int)
    offsets = np.asarray(artist.get_offsets(), dtype=float)[rows]
    screen = artist.axes.transData.transform(offsets)
    mouse = np.array([event.mouseevent.x, event.mouseevent.y], dtype=float)
    order = np.argsort(np.hypot(*(screen - mouse).T), kind="stable")
    if prefer is not None:
        preferred = np.asarray(prefer, dtype=bool)
        for k in order:
            if preferred[rows[k]]:
                return int(rows[k])
    return int(rows[order[0]])


def _row_mask(front: Front, rows: Sequence[bool] | Sequence[int] | np.ndarray) -> np.ndarray:
    """A boolean mask over the front's rows from a mask of the same length or from row positions."""
    values = np.asarray(rows)
    if values.dtype == bool:
        if values.shape != (len(front),):
            raise DataError(
                f"greyed: a mask of {values.size} values for a front of {len(front)} designs"
            )
        return values.copy()
    mask = np.zeros(len(front), dtype=bool)
    for row in values.ravel().tolist():
        mask[_check_row(front, row, "greyed")] = True
    return mask


def _shade_limits(ax, front: Front, i: int, j: int, narrowing: _Narrowing) -> None:
    """Shade the ranges of the panel's two objectives that the limits exclude, keeping the view."""
    names = front.objective_names
    for which, name in (("x", names[i]), ("y", names[j])):
        view = ax.get_xlim() if which == "x" else ax.get_ylim()
        shade = ax.axvspan if which == "x" else ax.axhspan
        lo_view, hi_view = min(view), max(view)
        for limit in narrowing.limits:
            if limit.column != name or limit.is_text or not math.isfinite(limit.value):
                continue
            if limit.op in (">=", ">") and limit.value > lo_view:
                shade(lo_view, limit.value, color=_SHADE, zorder=0, linewidth=0, gid="limit-shade")
            elif limit.op in ("<=", "<") and limit.value < hi_view:
                shade(limit.value, hi_view, color=_SHADE, zorder=0, linewidth=0, gid="limit-shade")
        (ax.set_xlim if which == "x" else ax.set_ylim)(view)


# ---------------------------------------------------------------------- parallel coordinates
def plot_parallel(
    front: Front,
    *,
    highlight: int | str | None = "auto",
    variables: bool | Sequence[str] = False,
    title: str | None = None,
) -> Figure:
    """Draw the front as parallel coordinates, one line a design, with one design highlighted.

    Objective axes are turned so that better is always up; the best and worst
    value on the front are written at the ends of each axis. Variable axes
    run from their smallest value at the bottom to their largest at the top;
    choices and flags sit at evenly spaced levels.

    Parameters
    ----------
    front : Front
        The front.
    highlight : int, "auto" or None
        Row position of the design to draw boldly; ``"auto"`` takes the knee
        when :mod:`tradewise.choose` is available.
    variables : bool or sequence of str
        Add axes for the front's variables (True) or for the named columns.
    title : str, optional
        A title over the figure.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    DataError
        When the front is empty, or when the axes would be two objectives
        and nothing else (:data:`TWO_AXES`).
    """
    if len(front) == 0:
        raise DataError("front: holds no designs, so there is nothing to draw")
    objectives = _objectives_of(front)
    if variables is True:
        extra = [v for v in front.variables if v in front.table.columns]
    elif variables:
        extra = [str(v) for v in variables]
        for name in extra:
            if name not in front.table.columns:
                raise DataError(
                    f"variables: no column {name!r} in the front; columns: {', '.join(map(str, front.table.columns))}"
                )
    else:
        extra = []
    if len(objectives) == 2 and not extra:
        raise DataError(f"{TWO_AXES}; name variables to add their axes")
    knee = None
    if isinstance(highlight, str):
        if highlight != "auto":
            raise DataError(
                f"highlight: expected a row position, 'auto' or None, got {highlight!r}"
            )
        highlight = knee = _default_knee(front)
    elif highlight is not None:
        highlight = _check_row(front, highlight, "highlight")
        knee = _default_knee(
            front
        )  # the legend calls the highlighted design the knee when it is one
    axes_spec = [_objective_axis(front, o) for o in objectives] + [
        _variable_axis(front, v) for v in extra
    ]
    levels = np.column_stack([spec["levels"] for spec in axes_spec])
    n_axes = len(axes_spec)
    with _styled():
        fig = _new_figure((max(6.5, 1.15 * n_axes + 1.6), 5.0))
        ax = fig.add_subplot()
        xs = np.arange(n_axes)
        alpha = float(np.clip(12.0 / max(len(front), 1), 0.08, 0.7))
        segments = [np.column_stack([xs, row]) for row in levels]
        ax.add_collection(
            LineCollection(
                segments,
                colors=PALETTE["front"],
                linewidths=0.9,
                alpha=alpha,
                zorder=2,
                gid="front-lines",
            )
        )
        if highlight is not None:
            ax.plot(
                xs,
                levels[highlight],
                color=PALETTE["highlight"],
                linewidth=2.6,
                marker="D",
                markersize=6,
                markeredgecolor=PALETTE["ink"],
                markeredgewidth=0.8,
                zorder=5,
                gid="highlight-line",
                path_effects=[patheffects.withStroke(linewidth=4.2, foreground=PALETTE["ink"])],
            )
        for k, spec in enumerate(axes_spec):
            ax.axvline(k, color="#55555c", linewidth=0.9, zorder=1)
            for level, text in spec["ticks"]:
                ax.text(
                    k + 0.04,
                    level,
                    _plain(text),
                    fontsize=7.8,
                    va="center",
                    ha="left",
                    color="#33333a",
                    zorder=6,
                    bbox={"boxstyle": "square,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8},
                )
        ax.set_xlim(-0.25, n_axes - 0.4)
        ax.set_ylim(-0.06, 1.06)
        ax.set_xticks(xs, [_plain(spec["label"]) for spec in axes_spec], fontsize=8.3)
        ax.set_yticks([])
        ax.grid(False)
        for side in ("left", "right", "top"):
            ax.spines[side].set_visible(False)
        ax.set_ylabel("objectives: worse  \u2192  better", color="#44444a")
        if extra:
            # variables have no better side: shade their part and say how they run
            first = len(objectives) - 0.5
            ax.axvspan(first, n_axes - 0.4, color="#f1f2f6", zorder=0)
        handles = [
            Line2D(
                [],
                [],
                color=PALETTE["front"],
                linewidth=1.2,
                alpha=0.8,
                label=f"front ({len(front)} designs)",
            )
        ]
        if extra:
            handles.append(
                Patch(
                    facecolor="#f1f2f6",
                    edgecolor="#c8c8cc",
                    label="variables: smallest at the bottom",
                )
            )
        if highlight is not None:
            text = (
                f"knee ({_row_label(front, highlight)})"
                if highlight == knee
                else _row_label(front, highlight)
            )
            handles.append(
                Line2D(
                    [],
                    [],
                    color=PALETTE["highlight"],
                    linewidth=2.6,
                    marker="D",
                    markeredgecolor=PALETTE["ink"],
                    label=_plain(text),
                    path_effects=[patheffects.withStroke(linewidth=4.2, foreground=PALETTE["ink"])],
                )
            )
        ax.legend(
            handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=3, frameon=False
        )
        _title(fig, title)
    return fig


def _objective_axis(front: Front, objective: Objective) -> dict[str, Any]:
    values = front.table[objective.name].to_numpy(dtype=float)
    lo, hi = float(np.min(values)), float(np.max(values))
    span = hi - lo
    scaled = (values - lo) / span if span > 0 else np.full(len(values), 0.5)
    if objective.goal == "min":
        scaled = 1.0 - scaled  # better is up
    best, worst = (lo, hi) if objective.goal == "min" else (hi, lo)
    ticks = (
        [(1.0, _format.number(best)), (0.0, _format.number(worst))]
        if span > 0
        else [(0.5, _format.number(lo))]
    )
    unit = front.units.get(objective.name, objective.unit)
    label = (
        f"{objective.name}\n[{unit}]\n{objective.goal}"
        if unit
        else f"{objective.name}\n{objective.goal}"
    )
    return {"levels": scaled, "ticks": ticks, "label": label}


def _variable_axis(front: Front, name: str) -> dict[str, Any]:
    column = front.table[name]
    unit = front.units.get(name, "")
    label = f"{name}\n[{unit}]" if unit else name
    numeric = pd.to_numeric(column, errors="coerce")
    if column.dtype != bool and numeric.notna().all():
        values = numeric.to_numpy(dtype=float)
        lo, hi = float(np.min(values)), float(np.max(values))
        if hi > lo:
            return {
                "levels": (values - lo) / (hi - lo),
                "ticks": [(1.0, _format.number(hi)), (0.0, _format.number(lo))],
                "label": label,
            }
        return {
            "levels": np.full(len(values), 0.5),
            "ticks": [(0.5, _format.number(lo))],
            "label": label,
        }
    options = _options_of(front, name, column)
    position = {
        option: (k / (len(options) - 1) if len(options) > 1 else 0.5)
        for k, option in enumerate(options)
    }
    levels = np.array([position[str(v)] for v in column], dtype=float)
    return {"levels": levels, "ticks": [(position[o], o) for o in options], "label": label}


def _options_of(front: Front, name: str, column: pd.Series) -> list[str]:
    for spec in front.info.design_space:
        if spec.name == name:
            if spec.kind == "flag":
                return ["False", "True"]
            if spec.options:
                known = [str(o) for o in spec.options]
                return known + sorted({str(v) for v in column} - set(known))
    return sorted({str(v) for v in column})


# ------------------------------------------------------------------------------- history
def plot_history(
    history: pd.DataFrame,
    *,
    stop_reason: str | None = None,
    budget: int | None = None,
    title: str | None = None,
) -> Figure:
    """Draw the hypervolume and the front size against evaluations, with the stopping point marked.

    The hypervolume is drawn as a percentage of the largest value in the history (the
    final front's, for one run or a set of seeds on their common reference point).

    A history with a ``seed`` column (``run --seeds K``) draws one line per
    seed, each against that seed's own evaluations and in the same style in
    both panels, with a star where each seed stopped.

    Parameters
    ----------
    history : pandas.DataFrame
        One row a generation with columns ``evaluations``, ``hypervolume`` and
        ``front_size`` (as in a run folder's ``history.csv``), and optionally
        ``seed`` and ``failed``.
    stop_reason : str, optional
        Why the run stopped, written beside the stopping point.
    budget : int, optional
        The evaluation budget (of each seed), drawn as a faint line when the
        run stopped before it.
    title : str, optional
        A title over the figure.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> history = pd.DataFrame({"seed": [1, 1, 2, 2], "evaluations": [50, 100, 50, 100],
    ...                         "hypervolume": [0.2, 0.4, 0.3, 0.35], "front_size": [4, 6, 5, 7]})
    >>> [line.get_gid() for line in plot_history(history).axes[0].lines if line.get_gid()]
    ['hypervolume-seed-1', 'hypervolume-seed-2']
    """
    needed = ("evaluations", "hypervolume", "front_size")
    for name in needed:
        if name not in history.columns:
            raise DataError(f"history: no column {name!r}; expected {', '.join(needed)}")
    if len(history) == 0:
        raise DataError("history: holds no generations, so there is nothing to draw")
    columns = {
        name: pd.to_numeric(history[name], errors="coerce").to_numpy(dtype=float) for name in needed
    }
    if not all(np.isfinite(values).all() for values in columns.values()):
        raise DataError(
            "history: the columns evaluations, hypervolume and front_size must hold finite numbers"
        )
    seeds = history["seed"] if "seed" in history.columns else None
    if seeds is not None and seeds.isna().any():
        raise DataError(
            "history: the seed column has an empty cell; every generation needs its seed"
        )
    runs: list[tuple[Any, np.ndarray]] = []
    if seeds is not None and seeds.nunique() > 1:
        for seed in sorted(seeds.unique().tolist()):
            runs.append((seed, np.flatnonzero((seeds == seed).to_numpy())))
    else:
        runs.append((None, np.arange(len(history))))
    evals, hv, size = columns["evaluations"], columns["hypervolume"], columns["front_size"]
    # A raw hypervolume is a product of units no reader can judge; as a share of the best value any
    # generation reached (the last one's, for a run, as the front only grows) it reads as progress.
    best = float(np.max(hv)) if len(hv) else 0.0
    if best > 0:
        hv = 100.0 * hv / best
    with _styled():
        fig = _new_figure((7.2, 5.4))
        top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=[1.4, 1.0])
        if len(runs) == 1:
            rows = runs[0][1]
            every = max(1, len(rows) // 25)
            top.plot(evals[rows], hv[rows], color=PALETTE["front"], linewidth=1.8, marker="o",
                     markersize=3.5, markevery=every, gid="hypervolume-line")  # fmt: skip
            bottom.plot(evals[rows], size[rows], color=PALETTE["accent"], linewidth=1.8,
                        linestyle="--", marker="s", markersize=4, markeredgecolor=PALETTE["ink"],
                        markeredgewidth=0.6, markevery=every, gid="front-size-line")  # fmt: skip
        else:
            for k, (seed, rows) in enumerate(runs):
                style = _seed_style(k, len(runs))
                every = max(1, len(rows) // 12)
                label = f"seed {seed}"
                top.plot(evals[rows], hv[rows], markevery=every, gid=f"hypervolume-seed-{seed}",
                         label=_plain(label), **style)  # fmt: skip
                bottom.plot(evals[rows], size[rows], markevery=every,
                            gid=f"front-size-seed-{seed}", **style)  # fmt: skip
        top.set_ylabel(
            "hypervolume, % of the best\nreached (higher is better)" if best > 0 else "hypervolume"
        )
        bottom.set_ylabel("designs on the front")
        bottom.set_xlabel("evaluations" if len(runs) == 1 else "evaluations (each seed's own)")
        ends = [int(rows[-1]) for _, rows in runs]
        for ax, values in ((top, hv), (bottom, size)):
            for end in ends:
                ax.axvline(evals[end], color=PALETTE["ink"], linestyle=":", linewidth=1.0, zorder=1)
            ax.scatter(
                evals[ends],
                values[ends],
                s=130 if len(runs) == 1 else 90,
                marker="*",
                color=PALETTE["highlight"],
                edgecolors=PALETTE["ink"],
                linewidths=0.8,
                zorder=5,
                gid="stop-marker",
            )
        last_x = float(np.max(evals[ends]))
        stops = sorted({int(evals[end]) for end in ends})
        if len(runs) == 1:
            text = f"stopped after {stops[0]} evaluations"
        elif len(stops) == 1:
            text = f"each of {len(runs)} seeds stopped after {stops[0]} evaluations"
        else:
            text = f"{len(runs)} seeds stopped after {stops[0]} to {stops[-1]} evaluations"
        reason = _common_reason(stop_reason) if len(runs) > 1 else stop_reason
        if reason:
            text += f":\n{_short(reason, 60)}"
        note = top.annotate(
            _plain(text),
            (last_x, 0.06),
            xycoords=("data", "axes fraction"),
            xytext=(-10, 0),
            textcoords="offset points",
            ha="right",
            va="bottom",
            fontsize=8.5,
            bbox={"boxstyle": "round,pad=0.3", "fc": "white", "ec": "#b0b0b6", "lw": 0.7},
        )
        if budget and budget > last_x:
            for ax in (top, bottom):
                ax.axvline(budget, color="#8a8a90", linestyle="-.", linewidth=0.9)
            bottom.annotate(
                "budget" if len(runs) == 1 else "budget of each seed",
                (budget, 0),
                xycoords=("data", "axes fraction"),
                xytext=(-3, 4),
                textcoords="offset points",
                ha="right",
                fontsize=8,
                color="#55555c",
            )
        if "failed" in history.columns:
            # history.csv counts the failures so far, so a run's count is its largest value
            counts = pd.to_numeric(history["failed"], errors="coerce").fillna(0).to_numpy()
            failed = int(sum(counts[rows].max() for _, rows in runs if len(rows)))
            if failed:
                bottom.annotate(
                    f"{failed} evaluation(s) failed during the "
                    + ("run" if len(runs) == 1 else "runs"),
                    (0.01, 0.96),
                    xycoords="axes fraction",
                    va="top",
                    fontsize=8,
                    color=PALETTE["ink"],
                )
        top.set_ylim(bottom=min(0.0, float(np.min(hv))))
        bottom.set_ylim(bottom=0)
        _title(fig, title)
        if 1 < len(runs) <= _MAX_SHOWN_RUNS:
            _place_legend(
                top,
                [line for line in top.lines if not line.get_label().startswith("_")],
                np.column_stack([evals, hv]),
                avoid=[note],
                ncol=2 if len(runs) > 4 else 1,
                fontsize=8,
            )
    return fig


#: Line styles and markers that tell seeds apart without colour.
_SEED_DASHES = ("-", "--", ":", "-.")
_SEED_MARKERS = ("o", "s", "^", "D", "v", "P")


def _seed_style(k: int, n: int) -> dict[str, Any]:
    """The k-th of n seeds: a blue from dark to light (so greyscale still orders them), a dash and a marker."""
    dark = np.array(to_rgb(PALETTE["front"]))
    light = np.array(to_rgb(PALETTE["accent"]))
    share = k / (n - 1) if n > 1 else 0.0
    return {
        "color": tuple(dark + (light - dark) * share),
        "linewidth": 1.5,
        "linestyle": _SEED_DASHES[k % len(_SEED_DASHES)],
        "marker": _SEED_MARKERS[k % len(_SEED_MARKERS)],
        "markersize": 3.8,
        "markeredgecolor": PALETTE["ink"],
        "markeredgewidth": 0.4,
    }


def _common_reason(stop_reason: str | None) -> str | None:
    """One reason when every seed stopped for the same one ("seed 1: X; seed 2: X" gives X)."""
    if not stop_reason:
        return stop_reason
    parts = [
        re.sub(r"^seed \S+: ", "", p.strip()) for p in str(stop_reason).split(";") if p.strip()
    ]
    return parts[0] + " (every seed)" if len(set(parts)) == 1 and len(parts) > 1 else stop_reason


# ---------------------------------------------------------------------------- attainment
def plot_attainment(
    surfaces: np.ndarray | pd.DataFrame | Mapping[str, Any],
    objectives: Sequence[Objective],
    *,
    runs: Sequence[Any] | None = None,
    levels: Mapping[str, int] | None = None,
    n_runs: int | None = None,
    title: str | None = None,
) -> Figure:
    """Draw the best, median and worst attainment surfaces of repeated runs (two objectives).

    Parameters
    ----------
    surfaces : numpy.ndarray, pandas.DataFrame or mapping
        Either rows ``(f1, f2, percent)`` as moocore's ``eaf`` gives them (the
        smallest percent is drawn as the best surface, 50 as the median and
        100 as the worst); or a table with a ``surface`` column naming
        ``best``, ``median`` and ``worst``, optional ``runs`` and ``n_runs``
        columns and a column for each objective (a run folder's
        ``attainment.csv``); or a mapping of those names to (k, 2) arrays of
        corner points (as :func:`tradewise.compare.attainment_surfaces` gives).
        Corner points are in the user's units and senses.
    objectives : sequence of Objective
        The two objectives.
    runs : sequence of array-like, optional
        The runs' own fronts, drawn faintly behind (at most twelve).
    levels : mapping of str to int, optional
        How many runs reach each surface, when ``surfaces`` does not say.
    n_runs : int, optional
        How many runs there were, when ``surfaces`` does not say.
    title : str, optional
        A title over the figure.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> corners = {"best": [[1, 3], [3, 1]], "median": [[2, 3], [3, 2]], "worst": [[2, 3], [3, 2]]}
    >>> fig = plot_attainment(corners, [Objective("cost"), Objective("mass")],
    ...                       levels={"best": 1, "median": 2, "worst": 2}, n_runs=2)
    >>> [text.get_text() for text in fig.axes[0].get_legend().get_texts()]
    ['reached by some runs but not all', 'best: reached by at least 1 of 2 runs', 'median and worst: reached by both runs']
    """
    objectives = list(objectives)
    if len(objectives) != 2:
        raise DataError(f"attainment: drawn for two objectives, got {len(objectives)}")
    corners, levels, n_runs = _attainment_levels(surfaces, objectives, levels, n_runs)
    sign = np.array([1.0 if o.goal == "min" else -1.0 for o in objectives])
    styles = {
        "best": {"color": PALETTE["front"], "linewidth": 1.4, "linestyle": "-"},
        "median": {"color": PALETTE["ink"], "linewidth": 2.4, "linestyle": "-"},
        "worst": {"color": PALETTE["highlight"], "linewidth": 1.8, "linestyle": "--"},
    }
    all_points = np.vstack(list(corners.values())) * sign
    lo, hi = all_points.min(axis=0), all_points.max(axis=0)
    span = np.where(hi > lo, hi - lo, 1.0)
    corner = hi + 0.12 * span  # where each staircase is closed off, in minimisation terms
    # surfaces reached by the same number of runs are one line, named by both
    drawn: dict[str, list[str]] = {}
    for name in ("best", "median", "worst"):
        if name not in corners:
            continue
        same = [d for d in drawn if levels.get(d) is not None and levels.get(d) == levels.get(name)]
        if same:
            drawn[same[0]].append(name)
        else:
            drawn[name] = [name]
    with _styled():
        fig = _new_figure((7.2, 5.2))
        ax = fig.add_subplot()
        if runs is not None:
            for run in list(runs)[:_MAX_SHOWN_RUNS]:
                values = np.asarray(run, dtype=float)
                ax.scatter(
                    values[:, 0],
                    values[:, 1],
                    s=8,
                    marker="o",
                    color=PALETTE["ink"],
                    alpha=0.35,
                    linewidths=0,
                    zorder=2,
                )
        stairs = {name: _staircase(points * sign, corner) for name, points in corners.items()}
        if "best" in stairs and "worst" in stairs:
            # the band between best and worst: where some but not all runs reached
            band = np.vstack([stairs["best"], stairs["worst"][::-1]]) * sign
            ax.add_patch(
                Polygon(
                    band,
                    closed=True,
                    facecolor=PALETTE["band"],
                    edgecolor="none",
                    alpha=0.8,
                    label="reached by some runs but not all",
                    zorder=0,
                )
            )
        for name, names in reversed(drawn.items()):
            xy = stairs[name] * sign
            label = _attainment_label(names, levels, n_runs)
            ax.plot(
                xy[:, 0], xy[:, 1], gid=f"attainment-{name}", label=label, zorder=3, **styles[name]
            )
        view_lo, view_hi = lo - 0.04 * span, corner
        limits = np.sort(np.vstack([view_lo * sign, view_hi * sign]), axis=0)
        ax.set_xlim(limits[0, 0], limits[1, 0])
        ax.set_ylim(limits[0, 1], limits[1, 1])
        ax.set_xlabel(axis_label(objectives[0]))
        ax.set_ylabel(axis_label(objectives[1]))
        # the lines were drawn worst first so that the best lies on top; the legend lists best first
        handles = list(ax.patches) + list(reversed(ax.lines))
        _title(fig, title)
        shown = [stairs[name] * sign for name in drawn]
        if runs is not None:
            shown += [np.asarray(run, dtype=float)[:, :2] for run in list(runs)[:_MAX_SHOWN_RUNS]]
        _place_legend(ax, handles, np.vstack(shown))
    return fig


def _attainment_levels(
    surfaces: Any,
    objectives: Sequence[Objective],
    levels: Mapping[str, int] | None,
    n_runs: int | None,
) -> tuple[dict[str, np.ndarray], dict[str, int], int | None]:
    """The corner points of each surface that has any, how many runs reach it, and the number of runs."""
    found: dict[str, np.ndarray] = {}
    known = dict(levels or {})
    names = [o.name for o in objectives]
    if isinstance(surfaces, pd.DataFrame):
        missing = [c for c in ["surface", *names] if c not in surfaces.columns]
        if missing:
            raise DataError(
                f"attainment: the table has no column {missing[0]!r}; expected surface and "
                f"{', '.join(names)} (as in attainment.csv)"
            )
        unknown = sorted(set(surfaces["surface"].astype(str)) - {"best", "median", "worst"})
        if unknown:
            raise DataError(
                f"attainment: surface {unknown[0]!r} is not known; expected best, median or worst"
            )
        for name in ("best", "median", "worst"):
            part = surfaces[surfaces["surface"].astype(str) == name]
            if len(part):
                found[name] = objective_matrix(part, objectives, where="attainment")
                if "runs" in part.columns and name not in known:
                    known[name] = int(part["runs"].iloc[0])
        if n_runs is None and "n_runs" in surfaces.columns and len(surfaces):
            n_runs = int(surfaces["n_runs"].iloc[0])
    elif isinstance(surfaces, Mapping):
        unknown = sorted(set(map(str, surfaces)) - {"best", "median", "worst"})
        if unknown:
            raise DataError(
                f"attainment: surface {unknown[0]!r} is not known; expected best, median or worst"
            )
        for name in ("best", "median", "worst"):
            if name in surfaces:
                points = np.asarray(surfaces[name], dtype=float)
                if points.size == 0:
                    continue
                if points.ndim != 2 or points.shape[1] != 2 or not np.isfinite(points).all():
                    raise DataError(
                        f"attainment: the {name} surface must be an (n, 2) array of finite numbers, "
                        f"got shape {points.shape}"
                    )
                found[name] = points
    else:
        array = np.asarray(surfaces, dtype=float)
        if array.ndim != 2 or array.shape[1] != 3 or len(array) == 0:
            raise DataError(
                f"attainment: expected rows (f1, f2, percent), got an array of shape {array.shape}"
            )
        percents = sorted(set(array[:, 2].tolist()))
        chosen = {"best": percents[0], "median": 50.0, "worst": percents[-1]}
        if n_runs is None and percents[0] > 0:
            n_runs = round(100.0 / percents[0])
        for name, percent in chosen.items():
            part = array[array[:, 2] == percent, :2]
            if len(part):
                found[name] = part
                if n_runs and name not in known:
                    # moocore counts a point at p % when at least p % of the runs reach it
                    known[name] = math.ceil(percent * n_runs / 100.0 - 1e-9)
    if not found:
        raise DataError("attainment: every surface is empty, so there is nothing to draw")
    return found, known, n_runs


def _attainment_label(names: Sequence[str], levels: Mapping[str, int], n_runs: int | None) -> str:
    """Legend text of one drawn surface: its names and how many of the runs reach it."""
    head = " and ".join(names)
    count = levels.get(names[0])
    if count is None or not n_runs:
        generic = {
            "best": "reached by at least one run",
            "median": "reached by half the runs",
            "worst": "reached by every run",
        }
        return f"{head}: {generic[names[0]]}"
    if count >= n_runs:
        return f"{head}: reached by {'both' if n_runs == 2 else f'all {n_runs}'} runs"
    return f"{head}: reached by at least {count} of {n_runs} runs"


def _staircase(points: np.ndarray, corner: np.ndarray) -> np.ndarray:
    """The boundary of the region that ``points`` weakly dominate (minimisation), closed at ``corner``."""
    order = np.lexsort((points[:, 1], points[:, 0]))
    points = points[order]
    path = [(points[0, 0], corner[1])]
    best_y = math.inf
    for x, y in points:
        if y >= best_y:
            continue  # dominated within the level: adds no step
        if best_y < math.inf:
            path.append((x, best_y))
        path.append((x, y))
        best_y = y
    path.append((corner[0], best_y))
    return np.asarray(path, dtype=float)


# ------------------------------------------------------------------------------ dispatch
def plot_kind(
    kind: str,
    front: Front,
    *,
    history: pd.DataFrame | None = None,
    evaluations: pd.DataFrame | None = None,
    highlight: int | None = None,
    variables: bool = False,
    title: str | None = None,
) -> Figure:
    """Draw one of :data:`FIGURE_KINDS` from the parts of a run folder.

    ``highlight`` (a row position) is marked as a pick on the front and drawn
    boldly in parallel coordinates; the knee is found when it is not given.
    Parallel coordinates of two objectives take the front's variables as well,
    since two axes alone are not drawn (:data:`TWO_AXES`).
    """
    if kind not in FIGURE_KINDS:
        raise DataError(
            f"figure kind {kind!r} is not known; choose one of {', '.join(FIGURE_KINDS)}"
        )
    title = title if title is not None else front.info.title
    if kind == "front":
        picks = {"chosen": highlight} if highlight is not None else None
        return plot_front(front, evaluations=evaluations, picks=picks, title=title)
    if kind == "parallel":
        if len(front.objectives) == 2 and not variables:
            # two axes alone say nothing the scatter does not; the variables make the figure worth it
            variables = [v for v in front.variables if v in front.table.columns]
        return plot_parallel(
            front,
            highlight="auto" if highlight is None else highlight,
            variables=variables,
            title=title,
        )
    if history is None:
        raise DataError(
            "history: the run folder has no history.csv, so convergence cannot be drawn"
        )
    budget = front.info.settings.get("evaluations")
    return plot_history(history, stop_reason=front.info.stop_reason, budget=budget, title=title)


# -------------------------------------------------------------------------------- output
def save_figure(fig: Figure, path: str | Path) -> Path:
    """Write ``fig`` as PNG, SVG or PDF, chosen by the file's suffix.

    Raises
    ------
    DataError
        When the suffix is not ``.png``, ``.svg`` or ``.pdf``.
    """
    path = Path(path)
    suffix = path.suffix.lower().lstrip(".")
    if suffix not in _FORMATS:
        raise DataError(
            f"{path}: figure files end in {', '.join('.' + f for f in _FORMATS)}, got {path.suffix or 'no suffix'!r}"
        )
    path.parent.mkdir(parents=True, exist_ok=True)
    metadata = (
        {"Date": None} if suffix == "svg" else {"CreationDate": None} if suffix == "pdf" else {}
    )
    with _styled():
        _draw(fig, path, format=suffix, metadata=metadata)
    return path


#: Beyond this magnitude matplotlib cannot place ticks (its axis margins overflow a float).
_DRAWABLE = 1e307


def _check_drawable(front: Front) -> None:
    """Refuse, in one line, a front whose values are too near the float limit for axes in its own units."""
    with np.errstate(over="ignore"):
        points = front.points()
        spans = np.ptp(points, axis=0) if len(points) else np.zeros(points.shape[1])
    for j, objective in enumerate(front.objectives):
        column = points[:, j]
        if np.abs(column).max(initial=0.0) > _DRAWABLE or not math.isfinite(float(spans[j])):
            raise DataError(
                f"the figure cannot be drawn: the objective {objective.name!r} reaches values near the float "
                f"limit (beyond {_DRAWABLE:g}); rescale that objective, e.g. change its unit"
            )


def _draw(fig: Figure, target: Any, **options: Any) -> None:
    """``fig.savefig`` with a plain DataError when the data lie too near the float limit to draw."""
    try:
        fig.savefig(target, **options)
    except (ValueError, OverflowError):
        huge = [
            label
            for ax in fig.axes
            for label, limits in (
                (ax.get_xlabel(), ax.get_xlim()),
                (ax.get_ylabel(), ax.get_ylim()),
            )
            if any(not math.isfinite(v) or abs(v) > _DRAWABLE for v in limits)
        ]
        if not huge:
            raise
        raise DataError(
            f"the figure cannot be drawn: the axis {huge[0]!r} reaches values near the float limit "
            f"(beyond {_DRAWABLE:g}); rescale that objective, e.g. change its unit"
        ) from None


_SVG_ID = re.compile(r'\bid="([^"]+)"')
_SVG_REF = re.compile(r'(\bid="|url\(#|href="#)([^")]+)')


def to_svg(fig: Figure, *, prefix: str = "fig", label: str | None = None) -> str:
    """The figure as an ``<svg>`` element for inlining in HTML: no XML prologue, no metadata,
    every id prefixed so that several figures can share one page.

    ``label`` becomes the figure's accessible name (``role="img"`` and a
    ``<title>``), escaped for HTML.
    """
    buffer = io.StringIO()
    with _styled():
        _draw(fig, buffer, format="svg", metadata={"Date": None})
    text = buffer.getvalue()
    text = text[text.index("<svg") :]
    text = re.sub(r"<metadata>.*?</metadata>\s*", "", text, flags=re.S)
    # namespace declarations are implied for <svg> inside HTML; dropping them leaves no URL in the page
    text = re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", text)
    known = set(_SVG_ID.findall(text))
    text = _SVG_REF.sub(
        lambda m: m.group(1) + prefix + "-" + m.group(2) if m.group(2) in known else m.group(0),
        text,
    )
    if label is not None:
        text = text.replace(
            "<svg ", f'<svg role="img" aria-label="{escape(label, quote=True)}" ', 1
        )
        head_end = text.index(">", text.index("<svg")) + 1
        text = text[:head_end] + f"<title>{escape(label)}</title>" + text[head_end:]
    return text.strip()
