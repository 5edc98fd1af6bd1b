"""The picker's state: a front narrowed by limits and preferences, the current pick and a shortlist.

Plain Python over :mod:`tradewise.choose` and :mod:`tradewise.front`, so code
and tests drive it without a browser, widgets or figures.
:mod:`tradewise.notebook` puts the ipywidgets face on it.
"""

from __future__ import annotations

import contextlib
import math
import warnings
from collections.abc import Callable, Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from tradewise import format as _format
from tradewise._plain import plain
from tradewise.case import RESERVED_NAMES
from tradewise.choose import (
    KNEE_METHODS,
    METHODS,
    WEIGHTED_METHODS,
    NonConvexWarning,
    all_picks,
    choose,
    knee_agreement,
    method_name,
    objective_ranks,
)
from tradewise.errors import DataError
from tradewise.front import Front, read_front, tradeoff_rates
from tradewise.limits import Limit, limit_mask, parse_limit, parse_values
from tradewise.represent import distinct_picks, separation
from tradewise.runfolder import SHORTLIST_COLUMNS, shortlist_front

__all__ = ["PickerState", "load_picker_source", "shortlist_front", "SHORTLIST_COLUMNS"]

#: Columns the shortlist export adds in front of the design's own columns.


# ----------------------------------------------------------------------------------- sources
def load_picker_source(source: Any) -> tuple[Front, pd.DataFrame | None, pd.DataFrame | None]:
    """The front, the generation history and the evaluations behind ``source``.

    Parameters
    ----------
    source : RunResult, Front, str or Path
        A search result (anything with ``front``, ``history`` and
        ``evaluations`` attributes, as :func:`tradewise.run`
        returns), a :class:`~tradewise.front.Front`, a run folder, or a front
        CSV with its JSON metadata beside it.

    Returns
    -------
    front, history, evaluations
        ``history`` and ``evaluations`` are None where the source has none
        (a run folder gives its ``history.csv`` and, where it is beside it,
        every evaluation in its archive; a front CSV gives neither).

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
        if path.is_dir():
            from tradewise.runfolder import read_run

            return read_run(path)
        return read_front(path), None, None
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
        self._span = {
            o.name: (float(points[:, j].min()), float(points[:, j].max()))
            for j, o in enumerate(front.objectives)
        }
        self._limits: list[Limit] = []
        self._method = "knee"
        self._weights = {o.name: 1.0 for o in front.objectives}
        self._target: dict[str, float] | None = None
        self._tolerance: dict[str, float] = {}
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
        if self.limits:
            self._kept &= limit_mask(self.front, self.limits)
        self.notes = []
        self._ranking = []
        if self._kept.any():
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", NonConvexWarning)
                self._ranking = choose(
                    self.front,
                    self._method,
                    weights=self._method_weights(),
                    target=self._method_target(),
                    limits=self.limits,
                    top=int(self._kept.sum()),
                )
            self.notes = [
                str(w.message) for w in caught if issubclass(w.category, NonConvexWarning)
            ]
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
        """The tightest lower and upper limit on objective ``name`` (the front's span where unset)."""
        self._check_objective(name, "bounds")
        low, high = self._span[name]
        for limit in self._limits:
            if limit.column != name or limit.is_text:
                continue
            if limit.op in (">=", ">", "=="):
                low = max(low, float(limit.value))
            if limit.op in ("<=", "<", "=="):
                high = min(high, float(limit.value))
        return (low, high)

    def set_limit(self, name: str, low: float | None = None, high: float | None = None) -> None:
        """Keep only the designs with ``low <= name <= high``; None leaves that end open.

        The bounds replace every earlier ``>=``, ``>``, ``<=`` and ``<`` limit on
        ``name`` (the others stay). A bound at or beyond the front's own
        extreme value is the same as no bound.

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
            raise DataError(
                f"limit on {name!r}: the lower bound {low:g} is above the upper bound {high:g}"
            )
        span_low, span_high = self._span[name]
        new = []
        if low is not None and low > span_low:
            new.append(Limit(name, ">=", low))
        if high is not None and high < span_high:
            new.append(Limit(name, "<=", high))
        ranged = (">=", ">", "<=", "<")
        old = [i for i, x in enumerate(self._limits) if x.column == name and x.op in ranged]
        at = old[0] if old else len(self._limits)
        kept = [x for i, x in enumerate(self._limits) if i not in old]
        self._limits = kept[:at] + new + kept[at:]
        self._update()

    def add_limit(self, rule: str | Limit) -> None:
        """Add a limit written as a rule, as ``--limit`` takes it: ``"mass <= 5"``, ``"material == stainless 302"``.

        Any column of the front may be limited (an objective, a variable, a
        constraint, an output, a choice's option or a flag). A rule already in
        force is not added twice.

        Raises
        ------
        DataError
            When the rule cannot be read (:func:`tradewise.limits.parse_limit`)
            or names a column the front does not have, or text for a column of
            numbers; the state is left as it was.

        Examples
        --------
        >>> from tradewise.case import Objective
        >>> table = pd.DataFrame({"cost": [10.0, 12, 15, 20, 30], "mass": [100.0, 60, 40, 30, 25]})
        >>> state = PickerState(Front.from_table(table, [Objective("cost"), Objective("mass")]))
        >>> state.add_limit("mass <= 50")
        >>> [str(x) for x in state.limits], state.kept_rows
        (['mass <= 50'], [2, 3, 4])
        """
        limit = parse_limit(rule)
        limit_mask(self.front, [limit])  # an unknown column or text in numbers: one sentence here
        if str(limit) in {str(x) for x in self._limits}:
            self._update(message=f"The limit {limit} is already in force.")
            return
        self._limits.append(limit)
        self._update(message=f"Added {limit}: {self._kept_sentence(self._limits)}.")

    def remove_limit(self, rule: int | str | Limit) -> None:
        """Drop one limit, given by its position in :attr:`limits` or by its rule.

        Raises
        ------
        DataError
            When no limit in force is at that position or reads that way.
        """
        shown = ", ".join(str(x) for x in self._limits) or "none"
        if isinstance(rule, int | np.integer) and not isinstance(rule, bool):
            if not 0 <= int(rule) < len(self._limits):
                raise DataError(
                    f"limit: there is no limit at position {int(rule)}; in force: {shown}"
                )
            at = int(rule)
        else:
            text = str(parse_limit(rule))
            found = [i for i, x in enumerate(self._limits) if str(x) == text]
            if not found:
                raise DataError(f"limit: {text!r} is not in force; in force: {shown}")
            at = found[0]
        limit = self._limits.pop(at)
        self._update(message=f"Dropped {limit}: {self._kept_sentence(self._limits)}.")

    def clear_limits(self) -> None:
        """Drop every limit."""
        self._limits = []
        self._update()

    def what_if(self, rules=None):
        """What the archive says the front would be under ``rules`` (default: the limits in force).

        Unlike the limits, which only narrow the front shown, this judges every
        archived evaluation again, so a loosened constraint lets designs that
        were off the front join it (:func:`tradewise.diagnose.what_if`). The
        state is not changed.

        Raises
        ------
        DataError
            When the picker has no archive of evaluations (it was opened on a
            front CSV, or a run folder without its archive.sqlite), no rule is
            given or in force, or a rule cannot be used.
        """
        from tradewise.diagnose import what_if

        if self.evaluations is None:
            raise DataError(
                "what-if: the picker has no archive of evaluations to ask; open it on a run folder "
                "with its archive.sqlite, or on the result of tradewise.run"
            )
        if rules is None:
            rules = list(self._limits)
        elif isinstance(rules, str | Limit):
            rules = [rules]
        if not rules:
            raise DataError(
                "what-if: no rule given and none in force; give one, such as 'mass <= 5'"
            )
        return what_if(self.evaluations, self.front, rules)

    @property
    def limits(self) -> list[Limit]:
        """The limits in force, in the order they were set, as :class:`tradewise.limits.Limit` objects."""
        return list(self._limits)

    def _kept_sentence(self, limits: list[Limit]) -> str:
        n_kept = int(limit_mask(self.front, limits).sum()) if limits else len(self.front)
        return f"{n_kept} of {len(self.front)} designs meet the limits"

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
        method = method_name(method)
        if method not in self.methods:
            raise DataError(
                f"method {method!r} does not apply here; choose one of {', '.join(self.methods)}"
            )
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
        """The designs that meet the limits, the method's favourite first (every one of them).

        Neighbours on the front follow each other here; :meth:`choices` is
        the short list of designs that differ, for showing the top choices.
        """
        return list(self._ranking)

    def choices(self, n: int = 8) -> list[int]:
        """The method's top ``n`` designs that differ from each other, favourite first.

        The ranking is walked best first and a design is kept only when it
        differs from every kept one by more than :attr:`separation` in at
        least one objective (:func:`tradewise.represent.distinct_picks`), so
        neighbours on the front are never listed side by side. The first is
        always the method's pick.

        Examples
        --------
        >>> from tradewise.case import Objective
        >>> table = pd.DataFrame({"cost": [10.0, 12, 15, 20, 30], "mass": [100.0, 60, 40, 30, 25]})
        >>> state = PickerState(Front.from_table(table, [Objective("cost"), Objective("mass")]))
        >>> state.ranking[:3], state.choices(3)
        ([2, 1, 3], [2, 1, 3])
        >>> state.set_tolerance({"cost": 4, "mass": 25})
        >>> state.choices(3)
        [2, 3, 0]
        """
        if not self._ranking:
            return []
        return distinct_picks(self.front, self._ranking, top=n, tolerance=self.separation)

    @property
    def separation(self) -> dict[str, float]:
        """How far apart (objective name to amount in its unit) two of :meth:`choices` must be.

        The tolerances given with :meth:`set_tolerance`; for the other
        objectives 5 % of their range over the whole front
        (:data:`tradewise.represent.DISTINCT_SHARE`, our own rule of thumb).
        """
        return separation(self.front, self._tolerance)

    def set_tolerance(self, tolerance: Mapping[str, float] | str | None) -> None:
        """Set engineering tolerances per objective in its units (None goes back to the default share).

        Raises
        ------
        DataError
            For a name that is not an objective or an amount below 0.
        """
        values = parse_values(tolerance, what="tolerance")
        separation(self.front, values)  # checks names and amounts before anything changes
        self._tolerance = values
        self._update()

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
                    f"select: {self.front.design_name(row)} is outside the limits {', '.join(map(str, self.limits))}; "
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
            that find this design; ``no_knee``: True when designs meet the
            limits but the front has none that is a knee; ``also``: the other
            methods whose first choice it is.
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
            c
            for c in front.table.columns
            if c not in front.objective_names
            and c not in RESERVED_NAMES
            and c not in SHORTLIST_COLUMNS
        ]
        variables = [
            {
                "name": str(v),
                "value": plain(record[v]),
                "unit": front.units.get(str(v), "") or "",
            }
            for v in names
        ]
        rates: list[str] = []
        if len(sub) > 1:
            for _, rate in tradeoff_rates(sub, k).iterrows():
                if int(rate["neighbour"]) >= 0:
                    rates.append(
                        f"to {front.design_name(int(sub_rows[int(rate['neighbour'])]))}: {rate['text']}"
                    )
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
            "name": front.design_name(row),
            "kept": kept,
            "objectives": objectives,
            "variables": variables,
            "rates": rates,
            "knees": knees,
            "knee_agree": [m for m, r in knees.items() if r == row],
            "knee_names": {m: front.design_name(r) for m, r in knees.items()},
            "no_knee": bool(len(keep)) and not knees,
            "also": also,
        }

    def describe(self, row: int | None = None) -> list[str]:
        """Plain lines about design ``row`` (default the current pick), as the details panel shows them."""
        info = self.details(row)
        name = info["name"][0].upper() + info["name"][1:]
        lines = [name + ("" if info["kept"] else " (outside the limits)")]
        for o in info["objectives"]:
            value = f"{show_value(o['value'])} {o['unit']}".strip()
            lines.append(f"  {o['name']}: {value}, rank {o['rank']} of {o['of']} ({o['goal']})")
        if info["variables"]:
            shown = ", ".join(
                f"{v['name']} = {show_value(v['value'])}{' ' + v['unit'] if v['unit'] else ''}"
                for v in info["variables"]
            )
            lines.append(f"  variables: {shown}")
        lines.extend(f"  {text}" for text in info["rates"])
        lines.append("  " + knee_sentence(info))
        if info["also"]:
            lines.append(f"  first choice of: {', '.join(info['also'])}")
        return lines

    # ------------------------------------------------------------------------- moves
    def neighbours(self, row: int | None = None, *, n_neighbours: int | None = None) -> list[int]:
        """The designs next to design ``row`` (default the current pick) on the front, nearest first.

        Only designs that meet the limits count (all designs when ``row``
        itself is outside them). Two objectives: the design on each side of
        ``row`` along the front, ordered as :func:`tradewise.front.tradeoff_rates`
        orders it (the one better in the first objective first). Three or
        more: the ``n_neighbours`` nearest (default one per objective) by
        straight-line distance with each objective divided by its span on the
        whole front.
        """
        row = self.pick if row is None else self._check_row(row, "neighbours")
        if row is None:
            return []
        pool = np.flatnonzero(self._kept) if self._kept[row] else np.arange(len(self.front))
        front = self.front
        sign = np.where(front.maximise, -1.0, 1.0)
        signed = front.points()[pool] * sign  # smaller is better in every column
        k = int(np.flatnonzero(pool == row)[0])
        if len(front.objectives) == 2:
            order = np.lexsort((signed[:, 1], signed[:, 0]))
            at = int(np.flatnonzero(order == k)[0])
            return [int(pool[order[p]]) for p in (at - 1, at + 1) if 0 <= p < len(order)]
        spans = np.array([hi - lo for lo, hi in self._span.values()])
        scaled = signed / np.where(spans > 0, spans, 1.0)
        distance = np.hypot.reduce(scaled - scaled[k], axis=1)
        distance[k] = np.inf
        n = len(front.objectives) if n_neighbours is None else int(n_neighbours)
        nearest = np.argsort(distance, kind="stable")[: max(0, min(n, len(pool) - 1))]
        return [int(pool[j]) for j in nearest]

    def moves(self, row: int | None = None, *, n_neighbours: int | None = None) -> list[dict]:
        """What moving from design ``row`` (default the current pick) to each design near it
        and to each shortlisted design gains and gives up, objective by objective, in units.

        Parameters
        ----------
        row : int, optional
            The design to move from (a row position of the front).
        n_neighbours : int, optional
            Three or more objectives: how many nearby designs (see :meth:`neighbours`).

        Returns
        -------
        list of dict
            One dict a design moved to, its neighbours first and then the
            shortlist in the order it was added (a design both near and
            shortlisted comes once): ``row``; ``why`` (``"next on the
            front"``, ``"shortlist 2"``, or both, joined by ``", "``);
            ``kept`` (meets the limits); ``changes``: one dict per objective
            with ``name``, ``unit``, ``goal``, ``start`` and ``end`` (the
            values before and after the move), ``change`` (``end - start``),
            ``share`` (the size of the change as a share of the objective's
            span on the whole front), ``effect`` (``"gain"``, ``"give"`` or
            ``"same"``, judged by the objective's goal) and ``text`` (such as
            ``"3.2 kg less"``); ``summary``: the move in one line.

        Examples
        --------
        >>> from tradewise.case import Objective
        >>> table = pd.DataFrame({"cost": [10.0, 12, 15, 20, 30], "mass": [100.0, 60, 40, 30, 25]})
        >>> front = Front.from_table(table, [Objective("cost", unit="EUR"), Objective("mass", unit="kg")])
        >>> state = PickerState(front)
        >>> [m["summary"] for m in state.moves()]
        ['gains 3 EUR less cost; gives up 20 kg more mass', 'gains 10 kg less mass; gives up 5 EUR more cost']
        """
        start = self.pick if row is None else self._check_row(row, "moves")
        if start is None:
            return []
        why: dict[int, list[str]] = {}
        for r in self.neighbours(start, n_neighbours=n_neighbours):
            why.setdefault(r, []).append("next on the front")
        for k, r in enumerate(self._shortlist, start=1):
            if r != start:
                why.setdefault(r, []).append(f"shortlist {k}")
        front = self.front
        here = front.table.iloc[start]
        out = []
        for r, reasons in why.items():
            there = front.table.iloc[r]
            changes = []
            for o in front.objectives:
                a, b = float(here[o.name]), float(there[o.name])
                low, high = self._span[o.name]
                change = b - a
                if abs(change) <= 1e-12 * max(abs(a), abs(b), high - low):
                    change = 0.0
                better = change < 0 if o.goal == "min" else change > 0
                effect = "same" if change == 0 else ("gain" if better else "give")
                unit = front.units.get(o.name, o.unit) or ""
                text = (
                    "no change"
                    if change == 0
                    else f"{_format.quantity(abs(change), unit)} {'more' if change > 0 else 'less'}"
                )
                changes.append(
                    {
                        "name": o.name,
                        "unit": unit,
                        "goal": o.goal,
                        "start": a,
                        "end": b,
                        "change": change,
                        "share": abs(change) / (high - low) if high > low else 0.0,
                        "effect": effect,
                        "text": text,
                    }
                )
            out.append(
                {
                    "row": r,
                    "why": ", ".join(reasons),
                    "kept": bool(self._kept[r]),
                    "changes": changes,
                    "summary": _move_summary(changes),
                }
            )
        return out

    def describe_moves(self, row: int | None = None) -> list[str]:
        """The moves of :meth:`moves` as plain lines, one a design moved to."""
        start = self.pick if row is None else self._check_row(row, "moves")
        if start is None:
            return ["No design meets the limits; widen them."]
        lines = []
        for move in self.moves(start):
            outside = "" if move["kept"] else ", outside the limits"
            lines.append(
                f"{self.front.design_name(start)} to {self.front.design_name(move['row'])} "
                f"({move['why']}{outside}): {move['summary']}"
            )
        return lines or [f"{self._named(start)} is the only design within the limits."]

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
        self._update(
            message=f"{self._named(row)} is on the shortlist ({len(self._shortlist)} in all)."
        )

    def remove(self, row: int) -> None:
        """Take design ``row`` off the shortlist.

        Raises
        ------
        DataError
            When the design is not on the shortlist.
        """
        row = self._check_row(row, "shortlist")
        if row not in self._shortlist:
            shown = ", ".join(self.front.design_name(r) for r in self._shortlist) or "none"
            raise DataError(
                f"shortlist: {self.front.design_name(row)} is not on it; on it: {shown}"
            )
        self._shortlist.remove(row)
        self._update(
            message=f"{self._named(row)} is off the shortlist ({len(self._shortlist)} left)."
        )

    def clear_shortlist(self) -> None:
        """Empty the shortlist."""
        self._shortlist = []
        self._update(message="The shortlist is empty.")

    def shortlist_front(self) -> Front:
        """The shortlisted designs as a front with the run's metadata (see :func:`shortlist_front`).

        ``info.shortlist`` records the rows, the size of the front, the
        limits, the method and its weights and target at the time.

        Raises
        ------
        DataError
            When the shortlist is empty, or the front already has a column
            named ``pick_order`` or ``front_row``.
        """
        settings = {
            "rows": [r + 1 for r in self._shortlist],
            "designs": [self.front.design_name(r) for r in self._shortlist],
            "n_front": len(self.front),
            "limits": [str(limit) for limit in self.limits],
            "method": self._method,
            "weights": self._method_weights(),
            "target": self._method_target(),
        }
        return shortlist_front(self.front, self._shortlist, settings=settings)

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
        self._update(
            message=f"Wrote {written[0].name} and {written[1].name} ({len(self._shortlist)} designs)."
        )
        return written

    def tell(self, message: str) -> None:
        """Pass ``message`` to the listeners (a face shows it as its status line); nothing else changes."""
        self._update(message=str(message))

    # ------------------------------------------------------------------------ checks
    def _check_objective(self, name: str, what: str) -> None:
        if name not in self._span:
            raise DataError(
                f"{what}: {name!r} is not an objective of this front; objectives: {', '.join(self._span)}"
            )

    def _named(self, row: int) -> str:
        """The design's name (:meth:`Front.design_name`) to open a sentence."""
        name = self.front.design_name(row)
        return name[0].upper() + name[1:]

    def _check_row(self, row: Any, what: str) -> int:
        if (
            isinstance(row, bool)
            or not isinstance(row, int | np.integer)
            or not 0 <= int(row) < len(self.front)
        ):
            raise DataError(
                f"{what}: {row!r} is not a row position of the front (0 to {len(self.front) - 1})"
            )
        return int(row)

    def __repr__(self) -> str:
        pick = "none" if self.pick is None else self.front.design_name(self.pick)
        return (
            f"PickerState({int(self._kept.sum())} of {len(self.front)} designs within the limits; "
            f"{self._method} picks {pick}; shortlist {len(self._shortlist)})"
        )


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


def _move_summary(changes: list[dict]) -> str:
    """One line for a move: what it gains, then what it gives up."""
    gains = [f"{c['text']} {c['name']}" for c in changes if c["effect"] == "gain"]
    gives = [f"{c['text']} {c['name']}" for c in changes if c["effect"] == "give"]
    parts = []
    if gains:
        parts.append("gains " + ", ".join(gains))
    if gives:
        parts.append("gives up " + ", ".join(gives))
    return "; ".join(parts) or "the same in every objective"


def show_value(value: Any) -> str:
    """A value as the picker shows it (the one rule of :mod:`tradewise.format`)."""
    return _format.value(value)


def knee_sentence(info: Mapping[str, Any]) -> str:
    """What the knee methods say about the design of ``info`` (a :meth:`PickerState.details` result)."""
    knees, agree = info["knees"], info["knee_agree"]
    if not knees:
        if info.get("no_knee"):
            return "knee methods: the front has no knee"
        return "knee methods: no design meets the limits"
    names = info.get("knee_names", {})
    others = [f"{m} {names.get(m, f'row {r + 1}')}" for m, r in knees.items() if m not in agree]
    if agree and not others:
        return f"every knee method ({', '.join(agree)}) finds this design"
    if agree:
        return (
            f"knee methods finding this design: {', '.join(agree)}; the others: {', '.join(others)}"
        )
    return f"no knee method finds this design ({', '.join(others)})"


# ------------------------------------------------------------------------------ shortlist
