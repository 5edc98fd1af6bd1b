"""The notebook face of the picker: ipywidgets controls and the front figure around a picker state.

The state (limits, preferences, the current pick, the shortlist and its
export) lives in :class:`tradewise.picker.PickerState`, which code and tests
drive without a browser. :class:`Picker` puts the controls and the figure
around one state; the widgets only show and edit it. The figure is drawn by
:mod:`tradewise.plots`. ipywidgets and ipympl are imported when a picker is
built.
"""

from __future__ import annotations

import io
from collections.abc import Callable, Mapping
from html import escape
from pathlib import Path
from typing import Any

import pandas as pd

from tradewise import format as _format
from tradewise import plots
from tradewise.choose import METHODS, WEIGHTED_METHODS
from tradewise.diagnose import pins_lines
from tradewise.errors import DataError
from tradewise.picker import (
    SHORTLIST_COLUMNS,
    PickerState,
    knee_sentence,
    load_picker_source,
    show_value,
)
from tradewise.represent import representatives_table

# PickerState, load_picker_source and SHORTLIST_COLUMNS are picker.py's; they stay importable from here as before
__all__ = [
    "Picker",
    "open_picker",
    "draw_picker",
    "write_review",
    "PickerState",
    "load_picker_source",
    "SHORTLIST_COLUMNS",
]

_MAX_FIGURE_PX = 880.0


# ------------------------------------------------------------------------------------ review
def write_review(state: PickerState, path: str | Path) -> Path:
    """Write the review page of the whole front with the state's shortlist on it.

    The page (:func:`tradewise.report.write_report`) keeps the whole front
    (its size, hypervolume, figures and table) and adds a section on the
    shortlisted designs in the order they were added, ringed and numbered on
    a figure of the front, with how they were chosen (limits, method,
    weights, target). The page is written here, by the face, because the
    picker's state stays below the report in the order of imports.

    Raises
    ------
    DataError
        When the shortlist is empty (see :meth:`PickerState.shortlist_front`).
    """
    from tradewise.report import write_report

    page = write_report(
        state.front,
        path,
        history=state.history,
        evaluations=state.evaluations,
        shortlist=state.shortlist_front(),
    )
    state.tell(
        f"Wrote {Path(page).name}: the front of {len(state.front)} designs with "
        f"{len(state.shortlist)} shortlisted."
    )
    return Path(page)


# ------------------------------------------------------------------------------------ figure
def draw_picker(state: PickerState, *, evaluations: pd.DataFrame | None = None, figure=None):
    """The front figure of a picker: the pick and the shortlist marked, designs outside the limits greyed.

    Drawn by :func:`tradewise.plots.plot_narrowed_front` (a scatter for two
    objectives, a 3D view and pairwise panels for three): the excluded
    ranges are shaded and the front's points are pickable
    (``gid="front-points"``), so a click can select a design where the canvas
    reports clicks. With ``figure`` the drawing replaces what that figure
    showed (it keeps its canvas).

    Returns
    -------
    matplotlib.figure.Figure
    """
    marks: dict[str, int] = {}
    if state.pick is not None:
        marks["pick" if not state.by_hand else "selected"] = state.pick
    for k, row in enumerate(state.shortlist, start=1):
        marks[f"shortlist {k}"] = row
    return plots.plot_narrowed_front(
        state.front,
        greyed=~state.kept,
        limits=state.limits,
        evaluations=evaluations,
        picks=marks or None,
        figure=figure,
    )


def _png(fig, dpi: float = 96) -> bytes:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi)
    return buffer.getvalue()


# ----------------------------------------------------------------------------------- widgets
class Picker:
    """The widgets around a :class:`PickerState`: rules, figure, moves, details, preferences, shortlist.

    From the top: a box where limits are typed as rules (the syntax of
    ``--limit``), each rule in force shown as an item that drops it; the
    figure, with the representative set and what pins the front beside it;
    the current design and the table of moves from it (what going to each
    design next to it on the front, and to each shortlisted design, gains and
    gives up, in units); its details and the method's list beside the
    preferences; the shortlist and its export.

    Parameters
    ----------
    source : RunResult, Front, str or Path
        What to pick from (see :func:`load_picker_source`), or a ready
        :class:`PickerState`.
    clickable : bool, optional
        Draw the figure on an ipympl canvas so that clicking a point selects
        it. Default: when ipympl is installed. Without it the figure is a
        picture, and designs are selected in the list below it.
    show_evaluations : bool
        Draw every other evaluation faintly behind the front (slower).
    method, weights, target :
        Starting preferences (see :class:`PickerState`).

    Notes
    -----
    Display the picker by leaving it as the last expression of a cell, or
    with ``display(picker.widget)``. ``picker.state`` is the state the
    widgets edit; changing it from code updates the widgets.
    """

    def __init__(
        self,
        source: Any,
        *,
        clickable: bool | None = None,
        show_evaluations: bool = False,
        method: str = "knee",
        weights: Mapping[str, float] | None = None,
        target: Mapping[str, float] | None = None,
    ) -> None:
        import ipywidgets as w

        self._w = w
        if isinstance(source, PickerState):
            self.state = source
        else:
            front, history, evaluations = load_picker_source(source)
            self.state = PickerState(
                front,
                method=method,
                weights=weights,
                target=target,
                history=history,
                evaluations=evaluations,
            )
        if clickable is None:
            try:
                import ipympl  # noqa: F401
            except ImportError:
                clickable = False
            else:
                clickable = True
        self.clickable = bool(clickable)
        self._cloud = self.state.evaluations if show_evaluations else None
        self._syncing = False
        self.figure = None
        self._canvas = None
        self._build()
        self.state.on_change(lambda _state: self.refresh())
        self.refresh()

    # ------------------------------------------------------------------------ layout
    def _build(self) -> None:
        w, state, front = self._w, self.state, self.state.front
        source = front.info.source
        title = str(front.info.title or (f"Front of {source}" if source else "Front"))
        self._heading = w.HTML()
        self._title = title
        names = ", ".join(o.name for o in front.objectives)
        self._rule_text = w.Text(
            placeholder="a rule such as " + _example_rule(state),
            continuous_update=False,
            layout=w.Layout(width="340px"),
        )
        self._rule_text.observe(self._rule_typed, names="value")
        add_rule = w.Button(description="Add rule", icon="check", layout=w.Layout(width="120px"))
        add_rule.on_click(lambda _b: self._add_rule(self._rule_text.value))
        reset = w.Button(description="Drop all", icon="undo", layout=w.Layout(width="110px"))
        reset.on_click(lambda _b: self._act(state.clear_limits))
        self.buttons = {"add rule": add_rule, "clear limits": reset}
        self._rule_error = w.HTML(layout=w.Layout(margin="0 0 0 8px"))
        self._rules = w.Box(layout=w.Layout(flex_flow="row wrap", margin="4px 0"))
        self._count = w.HTML()
        limits_box = w.VBox(
            [
                w.HTML(
                    "<b>Rules</b> <span style='color:#5b6470'>on any column, as <code>--limit</code> "
                    f"takes them ({escape(names)}, the variables, ...); designs that break one "
                    "are greyed</span>"
                ),
                w.HBox([self._rule_text, add_rule, reset, self._rule_error]),
                self._rules,
                self._count,
            ],
            layout=w.Layout(
                border="1px solid #c9d3cf", padding="6px 10px", margin="4px 0", width="100%"
            ),
        )

        self._method = w.Dropdown(
            options=[(m, m) for m in state.methods],
            value=state.method,
            description="method",
            style={"description_width": "60px"},
            layout=w.Layout(width="260px"),
        )
        self._method.observe(self._method_changed, names="value")
        self._method_help = w.HTML(layout=w.Layout(width="440px"))
        self._weights: dict[str, Any] = {}
        weight_rows = []
        for o in front.objectives:
            slider = w.FloatSlider(
                value=state.weights[o.name],
                min=0.0,
                max=5.0,
                step=0.1,
                readout_format=".1f",
                continuous_update=False,
                description=o.name,
                style={"description_width": "120px"},
                layout=w.Layout(width="400px"),
            )
            slider.observe(self._weight_moved(o.name), names="value")
            self._weights[o.name] = slider
            weight_rows.append(slider)
        self._use_target = w.Checkbox(
            value=state.target is not None, description="aim at a target (asf)", indent=False
        )
        self._use_target.observe(self._target_changed, names="value")
        self._targets: dict[str, Any] = {}
        target_rows = []
        ideal = {o.name: state.span(o.name)[1 if o.maximise else 0] for o in front.objectives}
        for o in front.objectives:
            unit = front.units.get(o.name, o.unit) or ""
            start = (state.target or {}).get(o.name, ideal[o.name])
            box = w.FloatText(
                value=float(f"{start:.6g}"),
                description=f"{o.name} [{unit}]" if unit else o.name,
                style={"description_width": "150px"},
                layout=w.Layout(width="300px"),
            )
            box.observe(self._target_changed, names="value")
            self._targets[o.name] = box
            target_rows.append(box)
        prefs_box = w.VBox(
            [
                w.HTML("<b>Preferences</b>"),
                self._method,
                self._method_help,
                w.HTML("importance (weights)"),
                *weight_rows,
                self._use_target,
                *target_rows,
            ]
        )

        self._figure_box = w.Box(layout=w.Layout(flex="1 1 560px", overflow="auto"))
        self._image = w.Image(format="png", layout=w.Layout(max_width="100%", height="auto"))

        self._designs = w.Dropdown(
            description="design",
            style={"description_width": "60px"},
            layout=w.Layout(width="620px"),
        )
        self._designs.observe(self._design_chosen, names="value")
        follow = w.Button(
            description="Method's pick", icon="crosshairs", layout=w.Layout(width="140px")
        )
        follow.on_click(lambda _b: self._act(state.select, None))
        self.buttons["method's pick"] = follow
        add = w.Button(
            description="Add to shortlist",
            icon="plus",
            button_style="primary",
            layout=w.Layout(width="160px"),
        )
        add.on_click(lambda _b: self._act(state.add))
        self.buttons["add"] = add
        self._details = w.HTML(layout=w.Layout(width="100%"))
        self._ranking = w.HTML(layout=w.Layout(width="100%", overflow="auto"))

        self._shortlist = w.VBox()
        self._path = w.Text(
            value="shortlist.csv",
            description="file",
            style={"description_width": "40px"},
            layout=w.Layout(width="300px"),
        )
        export = w.Button(description="Export CSV", icon="download", layout=w.Layout(width="130px"))
        export.on_click(lambda _b: self._act(state.export_shortlist, self._path.value))
        self.buttons["export"] = export
        review = w.Button(description="Review page", icon="file", layout=w.Layout(width="130px"))
        review.on_click(
            lambda _b: self._act(
                self.write_review, str(Path(self._path.value).with_suffix(".html"))
            )
        )
        self.buttons["review"] = review
        self._status = w.HTML()
        pins = "".join(f"<li>{escape(line)}</li>" for line in pins_lines(state.front))
        self._pins = w.HTML(
            "<div style='font-weight:600;margin-top:8px'>What pins this front</div>"
            f"<ul style='margin:2px 0;padding-left:18px'>{pins}</ul>"
        )
        self._representatives = self._representatives_table()
        self._reps = w.HTML()
        ask = w.Button(
            description="Ask the archive",
            icon="search",
            tooltip="What the front would be under the rules in force, from every archived design",
            layout=w.Layout(width="150px"),
            disabled=state.evaluations is None,
        )
        ask.on_click(lambda _b: self.ask_archive())
        self.buttons["ask archive"] = ask
        self._answer = w.HTML(
            "<div style='color:#5b6470'>With rules in force, ask the archive what the front would "
            "be: a loosened constraint lets designs off the front join it.</div>"
            if state.evaluations is not None
            else "<div style='color:#5b6470'>No archive beside this front, so no what-if.</div>"
        )
        side = w.VBox(
            [
                self._reps,
                self._pins,
                w.HTML("<div style='font-weight:600;margin-top:8px'>What if</div>"),
                ask,
                self._answer,
            ],
            layout=w.Layout(
                flex="0 1 380px", padding="0 0 0 12px", border_left="3px solid #c9d3cf"
            ),
        )
        self._moves = w.HTML(layout=w.Layout(width="100%", overflow="auto"))
        self._move_to = w.Box(layout=w.Layout(flex_flow="row wrap"))

        self.widget = w.VBox(
            [
                self._heading,
                limits_box,
                w.HBox([self._figure_box, side], layout=w.Layout(flex_flow="row wrap")),
                w.HBox([self._designs, follow, add]),
                self._moves,
                self._move_to,
                w.HBox(
                    [
                        w.VBox([self._details, self._ranking], layout=w.Layout(flex="1 1 520px")),
                        prefs_box,
                    ],
                    layout=w.Layout(flex_flow="row wrap", grid_gap="16px"),
                ),
                w.HTML("<b>Shortlist</b>"),
                self._shortlist,
                w.HBox([self._path, export, review]),
                self._status,
            ],
            layout=w.Layout(width="100%"),
        )

    # ----------------------------------------------------------------------- display
    def _ipython_display_(self) -> None:
        from IPython.display import display

        display(self.widget)

    def _repr_mimebundle_(self, **kwargs):
        return self.widget._repr_mimebundle_(**kwargs)

    def refresh(self) -> None:
        """Bring every widget and the figure in line with the state."""
        state, front = self.state, self.state.front
        self._syncing = True
        try:
            self._method.value = state.method
            weighted = state.method in WEIGHTED_METHODS
            for name, slider in self._weights.items():
                slider.disabled = not weighted
                slider.value = state.weights[name]
            self._use_target.disabled = state.method != "asf"
            for box in self._targets.values():
                box.disabled = state.method != "asf" or not self._use_target.value
            self._method_help.value = f"<small>{escape(METHODS[state.method])}</small>"
            self._designs.options = [(self._design_label(r), r) for r in state.ranking] or [
                ("no design meets the limits", -1)
            ]
            self._designs.value = state.pick if state.pick is not None else -1
        finally:
            self._syncing = False
        n_kept = int(state.kept.sum())
        self._count.value = (
            f"<span style='color:#5b6470'>{n_kept} of {len(front)} designs keep every rule</span>"
        )
        self._rules.children = [self._rule_item(k, limit) for k, limit in enumerate(state.limits)]
        self._moves.value = self._moves_html()
        self._reps.value = self._representatives_html()
        self._shortlist.children = [
            self._shortlist_item(k, row) for k, row in enumerate(state.shortlist, start=1)
        ] or [self._w.HTML("<i style='color:#5b6470'>Nothing on the shortlist yet.</i>")]
        self._move_to.children = [self._move_button(m) for m in state.moves() if m["kept"]]
        self._heading.value = (
            f"<h3 style='margin:4px 0'>{escape(self._title)}</h3>"
            f"<div style='color:#555'>{len(front)} designs on the front; objectives "
            + ", ".join(escape(f"{o.name} ({o.goal})") for o in front.objectives)
            + "</div>"
        )
        self._details.value = self._details_html()
        self._ranking.value = self._ranking_html()
        notes = "".join(f"<div style='color:#8a5a00'>{escape(n)}</div>" for n in state.notes)
        self._status.value = notes + (
            f"<div>{escape(state.message)}</div>" if state.message else ""
        )
        self._redraw()

    def _redraw(self) -> None:
        # one figure for the picker's life, drawn anew on each change: it keeps its canvas (an ipympl
        # widget the page already shows) and the click callback connected to it
        first = self.figure is None
        self.figure = draw_picker(self.state, evaluations=self._cloud, figure=self.figure)
        # the three-objective figure is wider than a notebook column at screen resolution
        display_dpi = min(96.0, _MAX_FIGURE_PX / self.figure.get_figwidth())
        if first:
            self.figure.canvas.mpl_connect("pick_event", self._clicked)
        if self.clickable:
            if first:
                from ipympl.backend_nbagg import Canvas, FigureManager

                self.figure.set_dpi(display_dpi)
                canvas = Canvas(self.figure)
                FigureManager(canvas, 0)
                canvas.header_visible = False
                canvas.footer_visible = False
                canvas.resizable = False
                canvas.toolbar_position = "left"
                self._canvas = canvas
                self._figure_box.children = [canvas]
            elif getattr(self._canvas, "toolbar", None) is not None:
                self._canvas.toolbar.update()  # the zoom history belongs to the axes just cleared
            self._canvas.draw_idle()
        else:
            self._image.value = _png(
                self.figure, dpi=2 * display_dpi
            )  # sharp on high-density screens
            self._image.layout.width = f"{int(self.figure.get_figwidth() * display_dpi)}px"
            self._figure_box.children = [self._image]

    def write_review(self, path: str | Path) -> Path:
        """Write the review page of the whole front with the shortlist on it (see :func:`write_review`)."""
        return write_review(self.state, path)

    # ----------------------------------------------------------------------- events
    def ask_archive(self) -> None:
        """Show what the archive says the front would be under the rules in force."""
        try:
            answer = self.state.what_if()
        except DataError as exc:
            self._answer.value = f"<div>{_error(str(exc))}</div>"
            return
        items = "".join(f"<li>{escape(line)}</li>" for line in answer.lines())
        self._answer.value = f"<ul style='margin:2px 0;padding-left:18px'>{items}</ul>"

    def _act(self, action: Callable[..., Any], *args: Any) -> None:
        try:
            action(*args)
        except DataError as exc:
            self._status.value = f"<div style='color:#a00'>{escape(str(exc))}</div>"
            self._refresh_keeping_message()

    def _refresh_keeping_message(self) -> None:
        """Put the controls back to the state after a change was refused, keeping the error shown."""
        message = self._status.value
        self.refresh()
        self._status.value = message

    def _rule_typed(self, change: dict) -> None:
        if not self._syncing and change["new"].strip():
            self._add_rule(change["new"])

    def _add_rule(self, text: str) -> None:
        """Add the typed rule; a rule that cannot be used stays in the box with one sentence beside it."""
        if not text.strip():
            self._rule_error.value = _error(
                "Type a rule first, such as " + _example_rule(self.state) + "."
            )
            return
        try:
            self.state.add_limit(text)
        except DataError as exc:
            self._rule_error.value = _error(str(exc))
            return
        self._rule_error.value = ""
        self._syncing = True
        try:
            self._rule_text.value = ""
        finally:
            self._syncing = False

    def _rule_item(self, position: int, limit: Any):
        """One rule in force: its text and a control that drops it."""
        w = self._w
        drop = w.Button(
            icon="times",
            tooltip=f"drop {limit}",
            layout=w.Layout(width="28px", height="24px", padding="0"),
        )
        drop.on_click(lambda _b: self._act(self.state.remove_limit, position))
        return w.HBox(
            [w.HTML(f"<code style='background:none'>{escape(str(limit))}</code>"), drop],
            layout=w.Layout(
                border="1px solid #8fa8a0",
                padding="0 0 0 8px",
                margin="2px 6px 2px 0",
                align_items="center",
            ),
        )

    def _shortlist_item(self, order: int, row: int):
        """One shortlisted design: its place and values, a button to make it current and one to take it off."""
        w, state = self._w, self.state
        kept = bool(state.kept[row])
        here = " <b>(current)</b>" if row == state.pick else ""
        outside = "" if kept else " <i>(breaks a rule)</i>"
        go = w.Button(
            description="go to",
            disabled=not kept or row == state.pick,
            layout=w.Layout(width="70px", margin="0 4px"),
        )
        go.on_click(lambda _b: self._act(state.select, row))
        drop = w.Button(
            icon="times",
            tooltip=f"take {self.state.front.design_name(row)} off the shortlist",
            layout=w.Layout(width="28px", height="24px", padding="0"),
        )
        drop.on_click(lambda _b: self._act(state.remove, row))
        return w.HBox(
            [
                w.HTML(f"{order}. {escape(self._design_label(row))}{here}{outside}"),
                go,
                drop,
            ],
            layout=w.Layout(align_items="center", border_bottom="1px solid #dde3e0"),
        )

    def _move_button(self, move: Mapping[str, Any]):
        w = self._w
        go = w.Button(
            description=f"go to {self.state.front.design_name(move['row'])}",
            tooltip=move["summary"],
            layout=w.Layout(width="auto", margin="2px 6px 2px 0"),
        )
        go.on_click(lambda _b: self._act(self.state.select, move["row"]))
        return go

    def _weight_moved(self, name: str) -> Callable[[dict], None]:
        def moved(change: dict) -> None:
            if not self._syncing:
                self._act(self.state.set_weight, name, change["new"])

        return moved

    def _method_changed(self, change: dict) -> None:
        if not self._syncing:
            self._act(self.state.set_method, change["new"])

    def _target_changed(self, _change: dict) -> None:
        if self._syncing:
            return
        if self._use_target.value:
            self._act(
                self.state.set_target, {name: box.value for name, box in self._targets.items()}
            )
        else:
            self._act(self.state.set_target, None)

    def _design_chosen(self, change: dict) -> None:
        if not self._syncing and change["new"] is not None and change["new"] >= 0:
            self._act(self.state.select, int(change["new"]))

    def _clicked(self, event) -> None:
        row = plots.clicked_row(event, prefer=self.state.kept)
        if row is not None:
            self._act(self.state.select, row)

    # ------------------------------------------------------------------------- words
    def _design_label(self, row: int) -> str:
        front = self.state.front
        record = front.table.iloc[row]
        parts = []
        for o in front.objectives:
            unit = front.units.get(o.name, o.unit) or ""
            parts.append(
                f"{o.name} {show_value(float(record[o.name]))}{' ' + unit if unit else ''}"
            )
        return f"{front.design_name(row)}: " + ", ".join(parts)

    def _details_html(self) -> str:
        state = self.state
        if state.pick is None:
            return "<p><i>No design meets the limits; widen them.</i></p>"
        info = state.details()
        how = "selected by hand" if state.by_hand else f"picked by {escape(state.method)}"
        rows = "".join(
            f"<tr><td>{escape(o['name'])}</td><td style='text-align:right'>{escape(show_value(o['value']))}</td>"
            f"<td>{escape(o['unit'])}</td><td>{escape(o['goal'])}</td><td>{o['rank']} of {o['of']}</td></tr>"
            for o in info["objectives"]
        )
        variables = "".join(
            f"<tr><td>{escape(v['name'])}</td><td style='text-align:right'>{escape(show_value(v['value']))}</td>"
            f"<td>{escape(v['unit'])}</td></tr>"
            for v in info["variables"]
        )
        rates = (
            "".join(f"<li>{escape(text)}</li>" for text in info["rates"])
            or "<li>only one design is left</li>"
        )
        also = (
            f"<div>First choice of: {escape(', '.join(info['also']))}</div>" if info["also"] else ""
        )
        cell = "style='padding:2px 8px;vertical-align:top'"
        return (
            f"<div style='border:1px solid #d9d9df;padding:6px 10px;margin:6px 0'>"
            f"<b>{escape(info['name'][0].upper() + info['name'][1:])}</b> ({how})"
            f"<table><tr><td {cell}><table><tr><th>objective</th><th>value</th><th>unit</th><th>goal</th>"
            f"<th>rank</th></tr>{rows}</table></td>"
            f"<td {cell}><table><tr><th>variable</th><th>value</th><th>unit</th></tr>{variables}</table></td>"
            f"</tr></table>"
            f"<div>Trade-off rates to its neighbours:</div><ul style='margin:2px 0'>{rates}</ul>"
            f"<div>{escape(knee_sentence(info)).capitalize()}.</div>{also}</div>"
        )

    def _representatives_table(self) -> pd.DataFrame | str | None:
        """The few designs that stand for the front (greedy hypervolume subset selection), worked
        out once; None when the front is no larger than the set, the reason when it cannot be made."""
        front = self.state.front
        n = int(front.info.settings.get("representatives") or 20)
        if len(front) <= n:
            return None
        try:
            return representatives_table(front, n)
        except DataError as exc:
            return str(exc)

    def _representatives_html(self) -> str:
        """The representative set, the current pick and shortlisted designs among them marked."""
        state, front, table = self.state, self.state.front, self._representatives
        heading = "<div style='font-weight:600'>{}</div>"
        if table is None:
            return heading.format(f"The front in {len(front)} designs: each stands for itself")
        if isinstance(table, str):
            return heading.format("The front in a few designs") + f"<div>{escape(table)}</div>"
        names = [o.name for o in front.objectives]
        head = "".join(f"<th style='text-align:right'>{escape(name)}</th>" for name in names)
        body = []
        for r in table.sort_values(names[0]).to_dict("records"):
            row = int(r["front_row"]) - 1
            mark = " \u25cf" if row == state.pick else ""
            mark += " *" if row in state.shortlist else ""
            style = " style='background:#e4f1ea'" if row == state.pick else ""
            body.append(
                f"<tr{style}><td>{escape(front.design_name(row))}{mark}</td><td style='color:#5b6470'>"
                f"{escape(str(r['chosen_as']))}</td>"
                + "".join(
                    f"<td style='text-align:right'>{escape(show_value(r[name]))}</td>"
                    for name in names
                )
                + "</tr>"
            )
        return heading.format(f"The front in {len(table)} designs") + (
            "<div style='color:#5b6470'>\u25cf the current design, * on the shortlist</div>"
            "<div style='max-height:320px;overflow:auto'><table style='font-size:92%'>"
            f"<tr><th>design</th><th>chosen as</th>{head}</tr>{''.join(body)}</table></div>"
        )

    def _moves_html(self) -> str:
        """The table of moves from the current pick (see :meth:`PickerState.moves`)."""
        state, front = self.state, self.state.front
        if state.pick is None:
            return ""
        here = front.table.iloc[state.pick]
        at = ", ".join(
            f"{o.name} {_format.quantity(float(here[o.name]), front.units.get(o.name, o.unit))}"
            for o in front.objectives
        )
        title = (
            f"<div style='margin-top:6px'><b>Moves from {escape(front.design_name(state.pick))}</b> "
            f"<span style='color:#5b6470'>({escape(at)}): what each move gains and gives up</span></div>"
        )
        moves = state.moves()
        if not moves:
            return title + "<div><i>It is the only design that keeps every rule.</i></div>"
        shades = {
            "gain": ("#1d6b4f", "#e4f1ea", "gains"),
            "give": ("#8a3c12", "#f7e9df", "gives up"),
            "same": ("#5b6470", "transparent", "same"),
        }
        head = "".join(
            f"<th style='text-align:right;padding:2px 10px'>{escape(o.name)}</th>"
            for o in front.objectives
        )
        body = []
        for move in moves:
            cells = []
            for c in move["changes"]:
                ink, paper, word = shades[c["effect"]]
                share = (
                    f" · {_format.share(c['share'], 0)} of its span"
                    if c["effect"] != "same"
                    else ""
                )
                cells.append(
                    f"<td style='text-align:right;padding:2px 10px;color:{ink};background:{paper}'>"
                    f"<b>{escape(c['text'])}</b><br><small>{word}{share}</small></td>"
                )
            outside = "" if move["kept"] else " <small>(breaks a rule)</small>"
            body.append(
                f"<tr style='border-top:1px solid #dde3e0'><td style='padding:2px 10px'>"
                f"{escape(front.design_name(move['row']))}{outside}</td>"
                f"<td style='padding:2px 10px;color:#5b6470'>{escape(move['why'])}</td>"
                + "".join(cells)
                + "</tr>"
            )
        return (
            title
            + "<table style='border-collapse:collapse;margin:4px 0'>"
            + "<tr><th style='text-align:left;padding:2px 10px'>to</th>"
            + f"<th style='text-align:left;padding:2px 10px'>listed as</th>{head}</tr>"
            + "".join(body)
            + "</table>"
        )

    def _ranking_html(self, n_rows: int = 8) -> str:
        state, front = self.state, self.state.front
        if not state.ranking:
            return ""
        head = "".join(f"<th>{escape(o.name)}</th>" for o in front.objectives)
        body = []
        chosen = state.choices(n_rows)
        for k, row in enumerate(chosen, start=1):
            record = front.table.iloc[row]
            style = " style='background:#fff1d6;font-weight:600'" if row == state.pick else ""
            marks = " *" if row in state.shortlist else ""
            cells = "".join(
                f"<td style='text-align:right'>{escape(show_value(float(record[o.name])))}</td>"
                for o in front.objectives
            )
            name = escape(front.design_name(row))
            body.append(f"<tr{style}><td>{k}</td><td>{name}{marks}</td>{cells}</tr>")
        return (
            f"<div><b>The {len(chosen)} designs {escape(state.method)} prefers that differ from each "
            f"other</b> <span style='color:#666'>(by more than "
            f"{escape(', '.join(f'{k} {show_value(v)}' for k, v in state.separation.items()))}; "
            "* on the shortlist; choose one in the list above)</span></div>"
            f"<table><tr><th>#</th><th>design</th>{head}</tr>{''.join(body)}</table>"
        )


def _error(text: str) -> str:
    return f"<span style='color:#a00'>{escape(text)}</span>"


def _example_rule(state: PickerState) -> str:
    """A rule on the first objective at the middle of its span, to show what may be typed."""
    objective = state.front.objectives[0]
    low, high = state.span(objective.name)
    op = ">=" if objective.maximise else "<="
    return f"{objective.name} {op} {_format.number((low + high) / 2, 2)}"


def open_picker(source: Any, **options: Any) -> Picker:
    """Build a :class:`Picker` over ``source``; show it by leaving it last in a cell.

    Parameters
    ----------
    source : RunResult, Front, PickerState, str or Path
        What to pick from: a search result, a front, a run folder or a front
        CSV with its JSON beside it.
    **options
        ``clickable``, ``show_evaluations``, ``method``, ``weights`` and
        ``target``, as for :class:`Picker`.
    """
    return Picker(source, **options)
