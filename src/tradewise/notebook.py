"""The notebook picker: narrow a front with limits and preferences, look at designs, keep a shortlist.

The state lives in :class:`PickerState`, a plain object that code and tests
drive without a browser. :class:`Picker` puts ipywidgets controls and the
front figure around one state; the widgets only show and edit it. ipywidgets
and ipympl are imported when a picker is built, so the state works without
them.
"""

from __future__ import annotations

import contextlib
import io
import math
import warnings
from collections.abc import Callable, Iterator, Mapping
from dataclasses import replace
from html import escape
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from tradewise import plots
from tradewise.case import RESERVED_NAMES, Objective
from tradewise.choose import (
    KNEE_METHODS,
    METHODS,
    WEIGHTED_METHODS,
    Limit,
    NonConvexWarning,
    all_picks,
    choose,
    knee_agreement,
    objective_ranks,
    parse_values,
)
from tradewise.errors import DataError
from tradewise.front import Front, read_front, tradeoff_rates

__all__ = ["PickerState", "Picker", "open_picker", "draw_picker", "load_picker_source", "SHORTLIST_COLUMNS"]

#: Columns the shortlist export adds in front of the design's own columns.
SHORTLIST_COLUMNS = ("pick_order", "front_row")

_GREYED = "#c4c4ca"
_MAX_FIGURE_PX = 880.0
_SHADE = "#eeeef2"


# ----------------------------------------------------------------------------------- sources
def load_picker_source(source: Any) -> tuple[Front, pd.DataFrame | None, pd.DataFrame | None]:
    """The front, the generation history and the evaluations behind ``source``.

    Parameters
    ----------
    source : StudyResult, Front, str or Path
        A search result (anything with ``front``, ``history`` and
        ``evaluations`` attributes, as :func:`tradewise.search.run_study`
        returns), a :class:`~tradewise.front.Front`, a run folder, or a front
        CSV with its JSON metadata beside it.

    Returns
    -------
    front, history, evaluations
        ``history`` and ``evaluations`` are None where the source has none
        (a run folder gives its ``history.csv`` but not its archive).

    Raises
    ------
    DataError
        When ``source`` is none of these, or the files cannot be read.
    """
    if isinstance(source, Front):
        return source, None, None
    if isinstance(getattr(source, "front", None), Front):
        return source.front, getattr(source, "history", None), getattr(source, "evaluations", None)
    if isinstance(source, str | Path):
        path = Path(source)
        front = read_front(path)
        history = None
        if path.is_dir() and (path / "history.csv").is_file():
            try:
                history = pd.read_csv(path / "history.csv")
            except (OSError, ValueError) as exc:
                raise DataError(f"{path / 'history.csv'}: cannot be read as CSV ({exc})") from None
        return front, history, None
    raise DataError(
        f"picker source: got a {type(source).__name__}; expected a search result, a Front, "
        "a run folder or a front CSV with its .json beside it"
    )


# ------------------------------------------------------------------------------------- state
class PickerState:
    """Limits, preferences, the current pick and a shortlist over one front, without widgets.

    Every change goes through a method, which checks it, works out again
    which designs meet the limits and which one the method prefers, and then
    calls the listeners registered with :meth:`on_change`. Row numbers are
    positions in ``front.table`` (0-based); texts for people show them 1-based,
    as in the front's CSV file.

    Parameters
    ----------
    front : Front
        The front to pick from.
    method : str
        A key of :data:`tradewise.choose.METHODS`; default ``"knee"``.
    weights : dict, optional
        Importance per objective for the weighted methods (default 1 each).
    target : dict, optional
        The point ``asf`` aims at, per objective in its units.
    history, evaluations : pandas.DataFrame, optional
        The run's generation history and every evaluation, when known; they
        are handed on to the review page and the figure.

    Examples
    --------
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [10.0, 12, 15, 20, 30], "mass": [100.0, 60, 40, 30, 25]})
    >>> state = PickerState(Front.from_table(table, [Objective("cost"), Objective("mass")]))
    >>> state.pick
    2
    >>> state.set_limit("cost", high=15)
    >>> state.kept_rows, state.pick
    ([0, 1, 2], 1)
    """

    def __init__(
        self,
        front: Front,
        *,
        method: str = "knee",
        weights: Mapping[str, float] | None = None,
        target: Mapping[str, float] | None = None,
        history: pd.DataFrame | None = None,
        evaluations: pd.DataFrame | None = None,
    ) -> None:
        if not isinstance(front, Front):
            raise DataError(f"picker: expected a Front, got a {type(front).__name__}")
        if len(front) == 0:
            raise DataError("picker: the front holds no designs, so there is nothing to pick from")
        self.front = front
        self.history = history
        self.evaluations = evaluations
        points = front.points()
        self._span = {o.name: (float(points[:, j].min()), float(points[:, j].max())) for j, o in enumerate(front.objectives)}
        self._bounds: dict[str, tuple[float | None, float | None]] = {o.name: (None, None) for o in front.objectives}
        self._method = "knee"
        self._weights = {o.name: 1.0 for o in front.objectives}
        self._target: dict[str, float] | None = None
        self._selected: int | None = None
        self._shortlist: list[int] = []
        self._listeners: list[Callable[[PickerState], None]] = []
        self._kept = np.ones(len(front), dtype=bool)
        self._ranking: list[int] = []
        self.notes: list[str] = []
        self.message = ""
        self._quiet = True
        try:
            self.set_method(method)
            if weights is not None:
                self.set_weights(weights)
            if target is not None:
                self.set_target(target)
        finally:
            self._quiet = False
        self._update()

    # -------------------------------------------------------------------- listeners
    def on_change(self, callback: Callable[[PickerState], None]) -> None:
        """Call ``callback(state)`` after every change."""
        self._listeners.append(callback)

    @contextlib.contextmanager
    def batch(self) -> Iterator[PickerState]:
        """Make several changes and tell the listeners once, at the end (the figure is drawn once).

        Examples
        --------
        >>> from tradewise.case import Objective
        >>> table = pd.DataFrame({"cost": [10.0, 12, 15, 20, 30], "mass": [100.0, 60, 40, 30, 25]})
        >>> state = PickerState(Front.from_table(table, [Objective("cost"), Objective("mass")]))
        >>> with state.batch():
        ...     state.set_method("asf")
        ...     state.set_weights({"mass": 4})
        >>> state.pick
        3
        """
        was_quiet = self._quiet
        self._quiet = True
        try:
            yield self
        finally:
            self._quiet = was_quiet
            message = self.message
            self._update(message=message)

    def _update(self, *, message: str = "") -> None:
        self._kept = np.ones(len(self.front), dtype=bool)
        for limit in self.limits:
            self._kept &= limit.holds(self.front.table[limit.column].to_numpy(dtype=float))
        self.notes = []
        self._ranking = []
        if self._kept.any():
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", NonConvexWarning)
                self._ranking = choose(
                    self.front, self._method, weights=self._method_weights(), target=self._method_target(),
                    limits=self.limits, top=int(self._kept.sum()),
                )
            self.notes = [str(w.message) for w in caught if issubclass(w.category, NonConvexWarning)]
        if self._selected is not None and not self._kept[self._selected]:
            self._selected = None
        self.message = message
        if not self._quiet:
            for callback in list(self._listeners):
                callback(self)

    # ------------------------------------------------------------------------ limits
    @property
    def objective_names(self) -> list[str]:
        return self.front.objective_names

    def span(self, name: str) -> tuple[float, float]:
        """Smallest and largest value of objective ``name`` on the whole front."""
        self._check_objective(name, "span")
        return self._span[name]

    def bounds(self, name: str) -> tuple[float, float]:
        """The current lower and upper limit of objective ``name`` (the front's span where unset)."""
        self._check_objective(name, "bounds")
        low, high = self._bounds[name]
        span = self._span[name]
        return (span[0] if low is None else low, span[1] if high is None else high)

    def set_limit(self, name: str, low: float | None = None, high: float | None = None) -> None:
        """Keep only the designs with ``low <= name <= high``; None leaves that end open.

        A bound at or beyond the front's own extreme value is the same as no
        bound, so that a slider pushed to its end limits nothing.

        Raises
        ------
        DataError
            When ``name`` is not an objective, a bound is not a finite number,
            or ``low`` is above ``high``.
        """
        self._check_objective(name, "limit")
        low = _finite_or_none(low, f"limit on {name!r}: the lower bound")
        high = _finite_or_none(high, f"limit on {name!r}: the upper bound")
        if low is not None and high is not None and low > high:
            raise DataError(f"limit on {name!r}: the lower bound {low:g} is above the upper bound {high:g}")
        span_low, span_high = self._span[name]
        self._bounds[name] = (
            None if low is None or low <= span_low else low,
            None if high is None or high >= span_high else high,
        )
        self._update()

    def clear_limits(self) -> None:
        """Drop every limit."""
        self._bounds = {name: (None, None) for name in self._bounds}
        self._update()

    @property
    def limits(self) -> list[Limit]:
        """The limits in force, as :class:`tradewise.choose.Limit` objects (inclusive bounds)."""
        out = []
        for name, (low, high) in self._bounds.items():
            if low is not None:
                out.append(Limit(name, ">=", low))
            if high is not None:
                out.append(Limit(name, "<=", high))
        return out

    @property
    def kept(self) -> np.ndarray:
        """Boolean mask over the front's rows: True where a design meets every limit."""
        return self._kept.copy()

    @property
    def kept_rows(self) -> list[int]:
        """Row positions of the designs that meet every limit, in table order."""
        return [int(r) for r in np.flatnonzero(self._kept)]

    # ------------------------------------------------------------------- preferences
    @property
    def methods(self) -> list[str]:
        """The choosing methods that apply to this front (Kneedle only for two objectives)."""
        return [m for m in METHODS if m != "kneedle" or len(self.front.objectives) == 2]

    @property
    def method(self) -> str:
        return self._method

    @property
    def weights(self) -> dict[str, float]:
        return dict(self._weights)

    @property
    def target(self) -> dict[str, float] | None:
        return dict(self._target) if self._target is not None else None

    def set_method(self, method: str) -> None:
        """Choose with ``method``; a design picked by hand gives way to the method's pick."""
        if method not in self.methods:
            raise DataError(f"method {method!r} does not apply here; choose one of {', '.join(self.methods)}")
        self._method = method
        self._selected = None
        self._update()

    def set_weights(self, weights: Mapping[str, float]) -> None:
        """Set the importance of some or all objectives (the others keep theirs).

        Raises
        ------
        DataError
            For a name that is not an objective, a negative or non-finite
            weight, or weights that would all be zero.
        """
        values = parse_values(weights, what="weights")
        for name in values:
            self._check_objective(name, "weights")
        merged = {**self._weights, **values}
        if any(v < 0 for v in merged.values()) or sum(merged.values()) <= 0:
            shown = ", ".join(f"{n}={v:g}" for n, v in merged.items())
            raise DataError(f"weights {shown}: expected numbers of at least 0, not all 0")
        self._weights = merged
        self._selected = None
        self._update()

    def set_weight(self, name: str, value: float) -> None:
        """Set the importance of one objective."""
        self.set_weights({name: value})

    def set_target(self, target: Mapping[str, float] | None) -> None:
        """Aim ``asf`` at ``target`` (objective name to value in its unit); None aims at the ideal point."""
        if target is None:
            self._target = None
        else:
            values = parse_values(target, what="target")
            for name in values:
                self._check_objective(name, "target")
            self._target = values
        self._selected = None
        self._update()

    def _method_weights(self) -> dict[str, float] | None:
        return dict(self._weights) if self._method in WEIGHTED_METHODS else None

    def _method_target(self) -> dict[str, float] | None:
        return dict(self._target) if self._method == "asf" and self._target else None

    # -------------------------------------------------------------------------- pick
    @property
    def method_pick(self) -> int | None:
        """The design the method prefers among those that meet the limits (None when none does)."""
        return self._ranking[0] if self._ranking else None

    @property
    def pick(self) -> int | None:
        """The current design: the one selected by hand if it meets the limits, else the method's pick."""
        return self._selected if self._selected is not None else self.method_pick

    @property
    def ranking(self) -> list[int]:
        """The designs that meet the limits, the method's favourite first."""
        return list(self._ranking)

    def select(self, row: int | None) -> None:
        """Make design ``row`` the current one; None goes back to the method's pick.

        Raises
        ------
        DataError
            When ``row`` is not a row of the front or is outside the limits.
        """
        if row is not None:
            row = self._check_row(row, "select")
            if not self._kept[row]:
                raise DataError(
                    f"select: row {row + 1} is outside the limits {', '.join(map(str, self.limits))}; "
                    "widen them to pick it"
                )
        self._selected = row
        self._update()

    @property
    def by_hand(self) -> bool:
        """True while the current design was selected by hand rather than by the method."""
        return self._selected is not None

    # ----------------------------------------------------------------------- details
    def details(self, row: int | None = None) -> dict[str, Any]:
        """What the picker says about design ``row`` (default the current pick).

        Returns
        -------
        dict
            ``row``; ``kept`` (meets the limits); ``objectives``: one dict per
            objective with ``name``, ``value``, ``unit``, ``goal``, ``rank`` and
            ``of`` (rank among the designs that meet the limits); ``variables``:
            dicts with ``name``, ``value`` and ``unit`` (for a front without
            declared variables, its other columns); ``rates``: trade-off
            rates to its neighbours among the kept designs, as text; ``knees``:
            knee method to the row it finds; ``knee_agree``: the knee methods
            that find this design; ``also``: the other methods whose first
            choice it is.
        """
        row = self.pick if row is None else self._check_row(row, "details")
        if row is None:
            raise DataError("details: no design meets the limits; widen them")
        front = self.front
        record = front.table.iloc[row]
        keep = np.flatnonzero(self._kept)
        kept = bool(self._kept[row])
        sub_rows = keep if kept else np.arange(len(front))
        sub = front.with_table(front.table.iloc[sub_rows])
        k = int(np.flatnonzero(sub_rows == row)[0])
        ranks = objective_ranks(sub)
        objectives = [
            {
                "name": o.name,
                "value": float(record[o.name]),
                "unit": front.units.get(o.name, o.unit) or "",
                "goal": o.goal,
                "rank": int(ranks.iloc[k][o.name]),
                "of": len(sub),
            }
            for o in front.objectives
        ]
        # a table from elsewhere declares no variables: its other columns describe the design
        names = [v for v in front.variables if v in front.table.columns] or [
            c for c in front.table.columns
            if c not in front.objective_names and c not in RESERVED_NAMES and c not in SHORTLIST_COLUMNS
        ]
        variables = [
            {"name": str(v), "value": _plain_value(record[v]), "unit": front.units.get(str(v), "") or ""}
            for v in names
        ]
        rates: list[str] = []
        if len(sub) > 1:
            for _, rate in tradeoff_rates(sub, k).iterrows():
                if int(rate["neighbour"]) >= 0:
                    rates.append(f"to row {int(sub_rows[int(rate['neighbour'])]) + 1}: {rate['text']}")
                else:
                    rates.append(f"nearby: {rate['text']}")
        knees: dict[str, int] = {}
        also: list[str] = []
        if len(keep):
            knees = knee_agreement(front, limits=self.limits)
            picks = all_picks(front, weights=self._weights, target=self._target, limits=self.limits)
            also = [m for m, r in picks.items() if r == row and m not in KNEE_METHODS]
        return {
            "row": int(row),
            "kept": kept,
            "objectives": objectives,
            "variables": variables,
            "rates": rates,
            "knees": knees,
            "knee_agree": [m for m, r in knees.items() if r == row],
            "also": also,
        }

    def describe(self, row: int | None = None) -> list[str]:
        """Plain lines about design ``row`` (default the current pick), as the details panel shows them."""
        info = self.details(row)
        lines = [f"Row {info['row'] + 1}" + ("" if info["kept"] else " (outside the limits)")]
        for o in info["objectives"]:
            value = f"{_show(o['value'])} {o['unit']}".strip()
            lines.append(f"  {o['name']}: {value}, rank {o['rank']} of {o['of']} ({o['goal']})")
        if info["variables"]:
            shown = ", ".join(f"{v['name']} = {_show(v['value'])}{' ' + v['unit'] if v['unit'] else ''}"
                              for v in info["variables"])
            lines.append(f"  variables: {shown}")
        lines.extend(f"  {text}" for text in info["rates"])
        lines.append("  " + _knee_sentence(info))
        if info["also"]:
            lines.append(f"  first choice of: {', '.join(info['also'])}")
        return lines

    # --------------------------------------------------------------------- shortlist
    @property
    def shortlist(self) -> list[int]:
        """Row positions on the shortlist, in the order they were added."""
        return list(self._shortlist)

    def add(self, row: int | None = None) -> None:
        """Put design ``row`` (default the current pick) on the shortlist; a second add changes nothing."""
        row = self.pick if row is None else self._check_row(row, "shortlist")
        if row is None:
            raise DataError("shortlist: no design meets the limits, so there is nothing to add")
        if row not in self._shortlist:
            self._shortlist.append(int(row))
        self._update(message=f"Row {row + 1} is on the shortlist ({len(self._shortlist)} in all).")

    def remove(self, row: int) -> None:
        """Take design ``row`` off the shortlist.

        Raises
        ------
        DataError
            When the design is not on the shortlist.
        """
        row = self._check_row(row, "shortlist")
        if row not in self._shortlist:
            shown = ", ".join(str(r + 1) for r in self._shortlist) or "none"
            raise DataError(f"shortlist: row {row + 1} is not on it; on it: {shown}")
        self._shortlist.remove(row)
        self._update(message=f"Row {row + 1} is off the shortlist ({len(self._shortlist)} left).")

    def clear_shortlist(self) -> None:
        """Empty the shortlist."""
        self._shortlist = []
        self._update(message="The shortlist is empty.")

    def shortlist_front(self) -> Front:
        """The shortlisted designs as a front with the run's metadata.

        Two columns come first: ``pick_order`` (1, 2, ... in the order the
        designs were added) and ``front_row`` (the design's row in the whole
        front, counting from 1). ``meta["shortlist"]`` records the rows, the
        limits, the method and its weights and target at the time.

        Raises
        ------
        DataError
            When the shortlist is empty, or the front already has a column
            named ``pick_order`` or ``front_row``.
        """
        if not self._shortlist:
            raise DataError("shortlist: it is empty; add designs before exporting it")
        clash = [c for c in SHORTLIST_COLUMNS if c in self.front.table.columns]
        if clash:
            raise DataError(f"shortlist: the front already has a column {clash[0]!r}, which the export writes")
        table = self.front.table.iloc[self._shortlist].copy()
        table.insert(0, "front_row", [r + 1 for r in self._shortlist])
        table.insert(0, "pick_order", range(1, len(self._shortlist) + 1))
        settings = {
            "rows": [r + 1 for r in self._shortlist],
            "n_front": len(self.front),
            "limits": [str(limit) for limit in self.limits],
            "method": self._method,
            "weights": self._method_weights(),
            "target": self._method_target(),
        }
        return replace(self.front.with_table(table), meta={**self.front.meta, "shortlist": settings})

    def export_shortlist(self, path: str | Path) -> tuple[Path, Path]:
        """Write the shortlist as CSV with its JSON metadata beside it (see :meth:`shortlist_front`).

        ``tradewise pick`` and :func:`tradewise.front.read_front` read the
        pair back, and ``tradewise report RUN --shortlist FILE.csv`` puts it
        on the review page of the whole front.
        """
        path = Path(path)
        if path.suffix.lower() != ".csv":
            raise DataError(f"{path}: the shortlist is written as CSV; give a name ending in .csv")
        written = self.shortlist_front().to_csv(path)
        self._update(message=f"Wrote {written[0].name} and {written[1].name} ({len(self._shortlist)} designs).")
        return written

    def write_review(self, path: str | Path) -> Path:
        """Write the review page of the whole front with the shortlist on it (:func:`tradewise.report.write_report`).

        The page keeps the whole front (its size, hypervolume, figures and
        table) and adds a section on the shortlisted designs in the order
        they were added, ringed and numbered on a figure of the front, with
        how they were chosen (limits, method, weights, target).
        """
        from tradewise.report import write_report

        page = write_report(self.front, path, history=self.history, evaluations=self.evaluations,
                            shortlist=self.shortlist_front())
        self._update(message=f"Wrote {Path(page).name}: the front of {len(self.front)} designs with "
                             f"{len(self._shortlist)} shortlisted.")
        return Path(page)

    # ------------------------------------------------------------------------ checks
    def _check_objective(self, name: str, what: str) -> None:
        if name not in self._span:
            raise DataError(f"{what}: {name!r} is not an objective of this front; objectives: {', '.join(self._span)}")

    def _check_row(self, row: Any, what: str) -> int:
        if isinstance(row, bool) or not isinstance(row, int | np.integer) or not 0 <= int(row) < len(self.front):
            raise DataError(f"{what}: {row!r} is not a row position of the front (0 to {len(self.front) - 1})")
        return int(row)

    def __repr__(self) -> str:
        pick = "none" if self.pick is None else f"row {self.pick + 1}"
        return (f"PickerState({int(self._kept.sum())} of {len(self.front)} designs within the limits; "
                f"{self._method} picks {pick}; shortlist {len(self._shortlist)})")


def _finite_or_none(value: Any, what: str) -> float | None:
    if value is None:
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        number = math.nan
    if not math.isfinite(number):
        raise DataError(f"{what} {value!r} is not a finite number")
    return number


def _plain_value(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


def _show(value: Any) -> str:
    if isinstance(value, float | np.floating):
        return f"{float(value):.5g}"
    return str(value)


def _knee_sentence(info: Mapping[str, Any]) -> str:
    knees, agree = info["knees"], info["knee_agree"]
    if not knees:
        return "knee methods: no design meets the limits"
    others = [f"{m} row {r + 1}" for m, r in knees.items() if m not in agree]
    if agree and not others:
        return f"every knee method ({', '.join(agree)}) finds this design"
    if agree:
        return f"knee methods finding this design: {', '.join(agree)}; the others: {', '.join(others)}"
    return f"no knee method finds this design ({', '.join(others)})"


# ------------------------------------------------------------------------------------ figure
def draw_picker(state: PickerState, *, evaluations: pd.DataFrame | None = None):
    """The front figure of a picker: the pick and the shortlist marked, designs outside the limits greyed.

    Built on :func:`tradewise.plots.plot_front` (a scatter for two
    objectives, a 3D view and pairwise panels for three). On every 2D panel
    the designs outside the limits are drawn as hollow grey rings over their
    points, the excluded ranges are shaded, and the front's points are made
    pickable (``gid="front-points"``), so a click can select a design where
    the canvas reports clicks.

    Returns
    -------
    matplotlib.figure.Figure
    """
    front = state.front
    marks: dict[str, int] = {}
    if state.pick is not None:
        marks["pick" if not state.by_hand else "selected"] = state.pick
    for k, row in enumerate(state.shortlist, start=1):
        marks[f"shortlist {k}"] = row
    fig = plots.plot_front(front, evaluations=evaluations, knee=None, picks=marks or None)
    points = front.points()
    outside = ~state.kept
    names = front.objective_names
    labels = [plots.axis_label(o, wrap=True) for o in _with_units(front)]
    for ax in fig.axes:
        found = [c for c in ax.collections if c.get_gid() in ("front-points", "front-points-3d")]
        if not found:
            continue
        if found[0].get_gid() == "front-points-3d":
            axes_of = [labels.index(label) if label in labels else None
                       for label in (ax.get_xlabel(), ax.get_ylabel(), ax.get_zlabel())]
            if None not in axes_of and outside.any():
                i, j, m = axes_of
                ax.scatter(points[outside, i], points[outside, j], points[outside, m], s=16, marker="o",
                           facecolors=_GREYED, edgecolors="white", linewidths=0.3, depthshade=False,
                           gid="outside-limits-3d")
            continue
        collection = found[0]
        offsets = np.asarray(collection.get_offsets(), dtype=float)
        i = _matching_column(offsets[:, 0], points)
        j = _matching_column(offsets[:, 1], points)
        collection.set_picker(True)
        collection.set_pickradius(6)
        if i is None or j is None:
            continue
        for which, axis_index in (("x", i), ("y", j)):
            low, high = state.bounds(names[axis_index])
            span_low, span_high = state.span(names[axis_index])
            view = ax.get_xlim() if which == "x" else ax.get_ylim()
            shade = ax.axvspan if which == "x" else ax.axhspan
            if low > span_low:
                shade(min(view), low, color=_SHADE, zorder=0, linewidth=0, gid="limit-shade")
            if high < span_high:
                shade(high, max(view), color=_SHADE, zorder=0, linewidth=0, gid="limit-shade")
            (ax.set_xlim if which == "x" else ax.set_ylim)(view)
        if outside.any():
            size = collection.get_sizes()
            ax.scatter(points[outside, i], points[outside, j], s=float(size[0]) if len(size) else 16.0,
                       marker="o", facecolors="white", edgecolors=_GREYED, linewidths=1.1, zorder=5,
                       gid="outside-limits")
    if outside.any():
        _add_legend_entry(fig, f"outside the limits ({int(outside.sum())})")
    return fig


def _add_legend_entry(fig, label: str) -> None:
    from matplotlib.lines import Line2D

    for ax in fig.axes:
        legend = ax.get_legend()
        if legend is None:
            continue
        handles = list(legend.legend_handles)
        handles.append(Line2D([], [], linestyle="none", marker="o", markersize=6, markerfacecolor="white",
                              markeredgecolor=_GREYED, markeredgewidth=1.1, label=label))
        # keep the place plots.py chose for the legend
        ax.legend(handles=handles, loc=getattr(legend, "_loc", "best"), borderaxespad=legend.borderaxespad)


def _with_units(front: Front) -> list[Objective]:
    return [Objective(o.name, o.goal, front.units.get(o.name, o.unit) or o.unit, o.worst) for o in front.objectives]


def _matching_column(values: np.ndarray, points: np.ndarray) -> int | None:
    for j in range(points.shape[1]):
        if len(values) == len(points) and np.allclose(values, points[:, j], equal_nan=True):
            return j
    return None


def _png(fig, dpi: float = 96) -> bytes:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi)
    return buffer.getvalue()


def _clicked_row(event, state: PickerState) -> int | None:
    """The front design nearest the mouse among those a pick event reports."""
    artist = getattr(event, "artist", None)
    if artist is None or artist.get_gid() != "front-points" or not len(getattr(event, "ind", [])):
        return None
    indices = np.asarray(event.ind, dtype=int)
    offsets = np.asarray(artist.get_offsets(), dtype=float)[indices]
    screen = artist.axes.transData.transform(offsets)
    mouse = np.array([event.mouseevent.x, event.mouseevent.y], dtype=float)
    order = np.argsort(np.hypot(*(screen - mouse).T), kind="stable")
    kept = state.kept
    for k in order:
        if kept[indices[k]]:
            return int(indices[k])
    return int(indices[order[0]])


# ----------------------------------------------------------------------------------- widgets
class Picker:
    """The widgets around a :class:`PickerState`: limits, preferences, figure, details, shortlist.

    Parameters
    ----------
    source : StudyResult, Front, str or Path
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
            self.state = PickerState(front, method=method, weights=weights, target=target, history=history,
                                     evaluations=evaluations)
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
        source = front.meta.get("source")
        title = str(front.meta.get("title") or (f"Front of {source}" if source else "Front"))
        self._heading = w.HTML()
        self._title = title
        self._sliders: dict[str, Any] = {}
        limit_rows = []
        for o in front.objectives:
            low, high = state.span(o.name)
            unit = front.units.get(o.name, o.unit) or ""
            label = f"{o.name} [{unit}]" if unit else o.name
            if high > low:
                slider = w.FloatRangeSlider(
                    value=(low, high), min=low, max=high, step=(high - low) / 200.0, readout_format=".4g",
                    continuous_update=False, description=label,
                    style={"description_width": "150px"}, layout=w.Layout(width="460px"),
                )
                slider.observe(self._limit_moved(o.name), names="value")
                self._sliders[o.name] = slider
                limit_rows.append(slider)
            else:
                limit_rows.append(w.HTML(f"<i>{escape(label)}: every design has {low:.5g}</i>"))
        reset = w.Button(description="Clear limits", icon="undo", layout=w.Layout(width="140px"))
        reset.on_click(lambda _b: self._act(state.clear_limits))
        self.buttons = {"clear limits": reset}
        self._count = w.HTML()
        limits_box = w.VBox([w.HTML("<b>Limits</b> <span style='color:#666'>(designs outside are greyed)</span>"),
                             *limit_rows, w.HBox([reset, self._count])])

        self._method = w.Dropdown(options=[(m, m) for m in state.methods], value=state.method,
                                  description="method", style={"description_width": "60px"},
                                  layout=w.Layout(width="260px"))
        self._method.observe(self._method_changed, names="value")
        self._method_help = w.HTML(layout=w.Layout(width="440px"))
        self._weights: dict[str, Any] = {}
        weight_rows = []
        for o in front.objectives:
            slider = w.FloatSlider(value=state.weights[o.name], min=0.0, max=5.0, step=0.1, readout_format=".1f",
                                   continuous_update=False, description=o.name,
                                   style={"description_width": "120px"}, layout=w.Layout(width="400px"))
            slider.observe(self._weight_moved(o.name), names="value")
            self._weights[o.name] = slider
            weight_rows.append(slider)
        self._use_target = w.Checkbox(value=state.target is not None, description="aim at a target (asf)",
                                      indent=False)
        self._use_target.observe(self._target_changed, names="value")
        self._targets: dict[str, Any] = {}
        target_rows = []
        ideal = {o.name: state.span(o.name)[1 if o.maximise else 0] for o in front.objectives}
        for o in front.objectives:
            unit = front.units.get(o.name, o.unit) or ""
            start = (state.target or {}).get(o.name, ideal[o.name])
            box = w.FloatText(value=float(f"{start:.6g}"), description=f"{o.name} [{unit}]" if unit else o.name,
                              style={"description_width": "150px"}, layout=w.Layout(width="300px"))
            box.observe(self._target_changed, names="value")
            self._targets[o.name] = box
            target_rows.append(box)
        prefs_box = w.VBox([w.HTML("<b>Preferences</b>"), self._method, self._method_help,
                            w.HTML("importance (weights)"), *weight_rows, self._use_target, *target_rows])

        self._figure_box = w.Box(layout=w.Layout(width="100%", overflow="auto"))
        self._image = w.Image(format="png", layout=w.Layout(max_width="100%", height="auto"))

        self._designs = w.Dropdown(description="design", style={"description_width": "60px"},
                                   layout=w.Layout(width="620px"))
        self._designs.observe(self._design_chosen, names="value")
        follow = w.Button(description="Method's pick", icon="crosshairs", layout=w.Layout(width="140px"))
        follow.on_click(lambda _b: self._act(state.select, None))
        self.buttons["method's pick"] = follow
        add = w.Button(description="Add to shortlist", icon="plus", button_style="primary",
                       layout=w.Layout(width="160px"))
        add.on_click(lambda _b: self._act(state.add))
        self.buttons["add"] = add
        self._details = w.HTML(layout=w.Layout(width="100%"))
        self._ranking = w.HTML(layout=w.Layout(width="100%", overflow="auto"))

        self._shortlist = w.Select(options=[], rows=5, description="shortlist", style={"description_width": "60px"},
                                   layout=w.Layout(width="620px"))
        self._shortlist.observe(self._shortlisted_chosen, names="value")
        drop = w.Button(description="Remove", icon="minus", layout=w.Layout(width="120px"))
        drop.on_click(lambda _b: self._remove_selected())
        self.buttons["remove"] = drop
        self._path = w.Text(value="shortlist.csv", description="file", style={"description_width": "40px"},
                            layout=w.Layout(width="300px"))
        export = w.Button(description="Export CSV", icon="download", layout=w.Layout(width="130px"))
        export.on_click(lambda _b: self._act(state.export_shortlist, self._path.value))
        self.buttons["export"] = export
        review = w.Button(description="Review page", icon="file", layout=w.Layout(width="130px"))
        review.on_click(lambda _b: self._act(state.write_review, str(Path(self._path.value).with_suffix(".html"))))
        self.buttons["review"] = review
        self._status = w.HTML()

        self.widget = w.VBox(
            [
                self._heading,
                w.HBox([limits_box, prefs_box], layout=w.Layout(flex_flow="row wrap", grid_gap="24px")),
                self._figure_box,
                w.HBox([self._designs, follow, add]),
                self._details,
                self._ranking,
                w.HTML("<b>Shortlist</b>"),
                w.HBox([self._shortlist, drop]),
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
            for name, slider in self._sliders.items():
                low, high = state.bounds(name)
                if tuple(slider.value) != (low, high):
                    slider.value = (max(low, slider.min), min(high, slider.max))
            self._method.value = state.method
            weighted = state.method in WEIGHTED_METHODS
            for name, slider in self._weights.items():
                slider.disabled = not weighted
                slider.value = state.weights[name]
            self._use_target.disabled = state.method != "asf"
            for box in self._targets.values():
                box.disabled = state.method != "asf" or not self._use_target.value
            self._method_help.value = f"<small>{escape(METHODS[state.method])}</small>"
            self._designs.options = [(self._design_label(r), r) for r in state.ranking] or [("no design meets the limits", -1)]
            self._designs.value = state.pick if state.pick is not None else -1
            self._shortlist.options = [(self._design_label(r), r) for r in state.shortlist]
        finally:
            self._syncing = False
        n_kept = int(state.kept.sum())
        self._count.value = f"&nbsp; {n_kept} of {len(front)} designs within the limits"
        self._heading.value = (f"<h3 style='margin:4px 0'>{escape(self._title)}</h3>"
                               f"<div style='color:#555'>{len(front)} designs on the front; objectives "
                               + ", ".join(escape(f"{o.name} ({o.goal})") for o in front.objectives) + "</div>")
        self._details.value = self._details_html()
        self._ranking.value = self._ranking_html()
        notes = "".join(f"<div style='color:#8a5a00'>{escape(n)}</div>" for n in state.notes)
        self._status.value = notes + (f"<div>{escape(state.message)}</div>" if state.message else "")
        self._redraw()

    def _redraw(self) -> None:
        self.figure = draw_picker(self.state, evaluations=self._cloud)
        # the three-objective figure is wider than a notebook column at screen resolution
        display_dpi = min(96.0, _MAX_FIGURE_PX / self.figure.get_figwidth())
        if self.clickable:
            from ipympl.backend_nbagg import Canvas, FigureManager

            old = self._canvas
            self.figure.set_dpi(display_dpi)
            if old is None:
                canvas = Canvas(self.figure)
                FigureManager(canvas, 0)
                canvas.header_visible = False
                canvas.footer_visible = False
                canvas.resizable = False
                canvas.toolbar_position = "left"
                self._canvas = canvas
                self._figure_box.children = [canvas]
            else:
                # one canvas widget for the picker's life: swapping widgets left the old view on the page,
                # so each new figure moves onto the canvas the page already shows
                canvas = old
                self.figure.set_canvas(canvas)
                canvas.figure = self.figure
                if getattr(canvas, "toolbar", None) is not None:
                    canvas.toolbar.update()
                width, height = self.figure.bbox.size
                if tuple(canvas._size) != (int(width), int(height)):
                    canvas.manager.resize(width, height)
            canvas.mpl_connect("pick_event", self._clicked)
            canvas.draw_idle()
        else:
            self.figure.canvas.mpl_connect("pick_event", self._clicked)
            self._image.value = _png(self.figure, dpi=2 * display_dpi)  # sharp on high-density screens
            self._image.layout.width = f"{int(self.figure.get_figwidth() * display_dpi)}px"
            self._figure_box.children = [self._image]

    # ----------------------------------------------------------------------- events
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

    def _limit_moved(self, name: str) -> Callable[[dict], None]:
        def moved(change: dict) -> None:
            if not self._syncing:
                low, high = change["new"]
                self._act(self.state.set_limit, name, low, high)

        return moved

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
            self._act(self.state.set_target, {name: box.value for name, box in self._targets.items()})
        else:
            self._act(self.state.set_target, None)

    def _design_chosen(self, change: dict) -> None:
        if not self._syncing and change["new"] is not None and change["new"] >= 0:
            self._act(self.state.select, int(change["new"]))

    def _shortlisted_chosen(self, change: dict) -> None:
        row = change["new"]
        if not self._syncing and row is not None and self.state.kept[row]:
            self._act(self.state.select, int(row))

    def _remove_selected(self) -> None:
        row = self._shortlist.value
        if row is None:
            self._status.value = "<div style='color:#a00'>Choose a design in the shortlist first.</div>"
            return
        self._act(self.state.remove, int(row))

    def _clicked(self, event) -> None:
        row = _clicked_row(event, self.state)
        if row is not None:
            self._act(self.state.select, row)

    # ------------------------------------------------------------------------- words
    def _design_label(self, row: int) -> str:
        front = self.state.front
        record = front.table.iloc[row]
        parts = []
        for o in front.objectives:
            unit = front.units.get(o.name, o.unit) or ""
            parts.append(f"{o.name} {_show(float(record[o.name]))}{' ' + unit if unit else ''}")
        return f"row {row + 1}: " + ", ".join(parts)

    def _details_html(self) -> str:
        state = self.state
        if state.pick is None:
            return "<p><i>No design meets the limits; widen them.</i></p>"
        info = state.details()
        how = "selected by hand" if state.by_hand else f"picked by {escape(state.method)}"
        rows = "".join(
            f"<tr><td>{escape(o['name'])}</td><td style='text-align:right'>{escape(_show(o['value']))}</td>"
            f"<td>{escape(o['unit'])}</td><td>{escape(o['goal'])}</td><td>{o['rank']} of {o['of']}</td></tr>"
            for o in info["objectives"]
        )
        variables = "".join(
            f"<tr><td>{escape(v['name'])}</td><td style='text-align:right'>{escape(_show(v['value']))}</td>"
            f"<td>{escape(v['unit'])}</td></tr>"
            for v in info["variables"]
        )
        rates = "".join(f"<li>{escape(text)}</li>" for text in info["rates"]) or "<li>only one design is left</li>"
        also = f"<div>First choice of: {escape(', '.join(info['also']))}</div>" if info["also"] else ""
        cell = "style='padding:2px 8px;vertical-align:top'"
        return (
            f"<div style='border:1px solid #d9d9df;padding:6px 10px;margin:6px 0'>"
            f"<b>Row {info['row'] + 1}</b> ({how})"
            f"<table><tr><td {cell}><table><tr><th>objective</th><th>value</th><th>unit</th><th>goal</th>"
            f"<th>rank</th></tr>{rows}</table></td>"
            f"<td {cell}><table><tr><th>variable</th><th>value</th><th>unit</th></tr>{variables}</table></td>"
            f"</tr></table>"
            f"<div>Trade-off rates to its neighbours:</div><ul style='margin:2px 0'>{rates}</ul>"
            f"<div>{escape(_knee_sentence(info)).capitalize()}.</div>{also}</div>"
        )

    def _ranking_html(self, n_rows: int = 8) -> str:
        state, front = self.state, self.state.front
        if not state.ranking:
            return ""
        head = "".join(f"<th>{escape(o.name)}</th>" for o in front.objectives)
        body = []
        for k, row in enumerate(state.ranking[:n_rows], start=1):
            record = front.table.iloc[row]
            style = " style='background:#fff1d6;font-weight:600'" if row == state.pick else ""
            marks = " *" if row in state.shortlist else ""
            cells = "".join(f"<td style='text-align:right'>{escape(_show(float(record[o.name])))}</td>"
                            for o in front.objectives)
            body.append(f"<tr{style}><td>{k}</td><td>row {row + 1}{marks}</td>{cells}</tr>")
        return (f"<div><b>The {min(n_rows, len(state.ranking))} designs {escape(state.method)} prefers</b> "
                f"<span style='color:#666'>(* on the shortlist; choose one in the list above)</span></div>"
                f"<table><tr><th>#</th><th>row</th>{head}</tr>{''.join(body)}</table>")


def open_picker(source: Any, **options: Any) -> Picker:
    """Build a :class:`Picker` over ``source``; show it by leaving it last in a cell.

    Parameters
    ----------
    source : StudyResult, Front, PickerState, str or Path
        What to pick from: a search result, a front, a run folder or a front
        CSV with its JSON beside it.
    **options
        ``clickable``, ``show_evaluations``, ``method``, ``weights`` and
        ``target``, as for :class:`Picker`.
    """
    return Picker(source, **options)
