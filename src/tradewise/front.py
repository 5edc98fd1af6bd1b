"""Fronts: non-dominated tables of designs with names, senses and units, and their hypervolume.

Everything here works on any table of designs (a run's result or a CSV from
elsewhere); it never touches the search, the models or the archive. The
numerical kernels (non-dominated filtering, hypervolume, contributions) come
from moocore.

Over 800 lines because reading a user's CSV (with an error that names the
file, row and column of every kind of bad cell) and the trade-off rates in
words live beside the Front they build and describe.
"""

from __future__ import annotations

import csv
import json
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import moocore
import numpy as np
import pandas as pd

from tradewise import format as _format
from tradewise._plain import write_json
from tradewise.case import Objective
from tradewise.errors import DataError, quote, undecodable
from tradewise.runinfo import FRONT_FORMAT, RunInfo, check_format, check_front_keys

__all__ = [
    "Front",
    "failed_rows",
    "failures_text",
    "nondominated",
    "merge_nondominated",
    "column_extremes",
    "hypervolume",
    "hv_contributions",
    "hypervolume_box",
    "hypervolume_share",
    "reference_point",
    "hypervolume_problem",
    "read_front",
    "column_header",
    "objective_matrix",
    "read_table",
    "front_from_csv",
    "tradeoff_rates",
    "BOOKKEEPING_COLUMNS",
    "ROW_COLUMN",
    "design_table",
]

#: Columns about how a design was evaluated rather than what it is. The archive keeps them (and
#: ``least_infeasible.csv`` keeps ``violation``, the file's subject); design tables (front.csv,
#: representatives.csv, shortlists) leave them out, and a run's front read back drops them.
BOOKKEEPING_COLUMNS = (
    "feasible",
    "violation",
    "status",
    "cached",
    "duration",
    "worker",
    "message",
    "design_key",
    "run_id",
)

#: The column that names a design of a user's CSV: its data row in that file, the first row
#: below the header counting as 1, carried through every filtering.
ROW_COLUMN = "data_row"


def design_table(table: pd.DataFrame) -> pd.DataFrame:
    """``table`` without the bookkeeping columns (:data:`BOOKKEEPING_COLUMNS`)."""
    return table.drop(columns=[c for c in BOOKKEEPING_COLUMNS if c in table.columns])


def failed_rows(evaluations: pd.DataFrame) -> pd.DataFrame:
    """The evaluations of a run's table that failed or ran past the timeout, each counted once:
    a design reused from the archive (``cached``, or a ``source_id``) failed where it was made."""
    if "status" not in evaluations.columns:
        return evaluations.iloc[:0]
    bad = evaluations[evaluations["status"] != "ok"]
    if "cached" in bad.columns:
        return bad[~bad["cached"].astype(bool)]
    if "source_id" in bad.columns:
        return bad[bad["source_id"].isna()]
    return bad


def failures_text(evaluations: pd.DataFrame) -> str:
    """:func:`tradewise.format.failures` of the table's :func:`failed_rows` (empty when none)."""
    bad = failed_rows(evaluations)
    if not len(bad):
        return ""
    timeout = bad["status"] == "timeout"
    messages = bad.loc[~timeout, "message"].fillna("").astype(str).tolist()
    return _format.failures(int(timeout.sum()), messages)


_HEADER = re.compile(r"^(?P<name>.*?) \[(?P<unit>[^\[\]]*)\]$")


def column_header(name: str, unit: str) -> str:
    """The CSV header of a column: ``"mass [g]"``, or the bare name when it has no unit."""
    return f"{name} [{unit}]" if unit else name


def objective_matrix(
    table: pd.DataFrame,
    objectives: Sequence[Objective],
    *,
    where: str = "table",
    source: str | Path | None = None,
) -> np.ndarray:
    """The objective columns of ``table`` as a float array, checked for missing and non-numeric values.

    ``source`` is the CSV file the table was read from (by :func:`read_table`,
    rows in file order); with it a bad cell is named by its line in that
    file and told apart as empty or holding text such as ``NaN``.
    """
    missing = [o.name for o in objectives if o.name not in table.columns]
    if missing:
        raise DataError(
            f"{where}: no column {missing[0]!r}; columns: {_columns_text(table.columns)}"
        )
    columns = []
    for objective in objectives:
        raw = table[objective.name]
        values = pd.to_numeric(raw, errors="coerce")
        bad = values.isna() | ~np.isfinite(values.to_numpy(dtype=float, na_value=np.nan))
        if bad.any():
            position = int(np.flatnonzero(bad.to_numpy())[0])
            cell = raw.iloc[position]
            got, row = (
                ("NaN (not a number)" if pd.isna(cell) else quote(cell)),
                f"row {position + 1}",
            )
            if source is not None:
                line, text = _raw_cell(source, position, objective.name)
                if line is not None:
                    row = f"line {line} (data row {position + 1})"
                if text is not None and pd.isna(cell):
                    got = "an empty cell" if not text.strip() else f"{quote(text)} (not a number)"
            raise DataError(
                f"{where}: {row} column {objective.name!r}: expected a finite number, got {got}"
            )
        columns.append(values.to_numpy(dtype=float))
    return np.column_stack(columns) if columns else np.empty((len(table), 0))


def _columns_text(columns: Sequence[Any], limit: int = 12) -> str:
    names = [quote(str(c), 40) for c in columns]
    return ", ".join(names[:limit]) + (
        f" and {len(names) - limit} more" if len(names) > limit else ""
    )


def _raw_cell(path: str | Path, position: int, name: str) -> tuple[int | None, str | None]:
    """The 1-based line of data row ``position`` of a CSV file and the text of its cell in column ``name``.

    Blank lines are skipped as pandas skips them; ``(None, None)`` when the
    file cannot be matched up with the table.
    """
    try:
        with open(path, newline="", encoding="utf-8") as handle:
            reader = csv.reader(handle)
            header = next((row for row in reader if row), None)
            if header is None:
                return None, None
            names = [_strip_unit(h) for h in header]
            if name not in names:
                return None, None
            column = names.index(name)
            seen, start = -1, reader.line_num + 1
            for row in reader:
                first, start = start, reader.line_num + 1  # a quoted cell may span several lines
                if not row or (len(row) == 1 and not row[0].strip()):
                    continue
                seen += 1
                if seen == position:
                    return first, row[column] if column < len(row) else ""
    except (OSError, UnicodeDecodeError, csv.Error):
        pass
    return None, None


def nondominated(
    points: Any, maximise: bool | Sequence[bool] = False, *, keep_weakly: bool = False
) -> np.ndarray:
    """Boolean mask of the rows of ``points`` that no other row dominates (moocore).

    Of several identical non-dominated rows only the first is kept unless
    ``keep_weakly`` is true.

    Examples
    --------
    >>> nondominated([[1, 3], [2, 2], [3, 3]]).tolist()
    [True, True, False]
    """
    points = np.asarray(points, dtype=float)
    if len(points) == 0:
        return np.zeros(0, dtype=bool)
    return np.asarray(
        moocore.is_nondominated(
            points, maximise=_flags(maximise, points.shape[1]), keep_weakly=keep_weakly
        )
    )


def column_extremes(points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The least and the greatest value of each column of a 2-D array.

    The same values as ``points.min(axis=0)`` and ``points.max(axis=0)``,
    taken a column at a time: numpy reduces a tall array of a few columns
    along its first axis a row at a time, about 40 times slower (17,000 rows
    of 3 columns: 1.1 ms against 30 us, measured).

    Examples
    --------
    >>> low, high = column_extremes(np.array([[1.0, 5.0], [3.0, 2.0]]))
    >>> low.tolist(), high.tolist()
    ([1.0, 2.0], [3.0, 5.0])
    """
    columns = np.asarray(points, dtype=float).T
    return (
        np.array([column.min() for column in columns]),
        np.array([column.max() for column in columns]),
    )


#: Below this many points in the old front :func:`merge_nondominated` asks moocore about the
#: whole merged set; from it on, only the cells of old points that can touch a new point are compared.
MERGE_CELLS_FROM = 1000


def merge_nondominated(old: np.ndarray, new: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Which rows of a non-dominated set ``old`` and of new points ``new`` form their merged front.

    All objectives are minimised; ``old`` holds no two equal rows and no row
    that another dominates. The answer is exactly :func:`nondominated` of
    ``old`` stacked above ``new``, split in two masks (of equal rows the first
    is kept, so an old row wins over an equal new one), but the cost for a
    large old front grows with its size only through a few passes over its
    values, not with a non-dominated sort of all of it.

    How: a new point that survives must be non-dominated among the new
    points, and no old point may be at least as good in every objective; an
    old point goes when one of these survivors is at least as good in every
    objective (any new point that beats it is itself beaten or matched by a
    survivor). The old points are put in cells of a grid on all objectives
    but the last (at most three), and each cell keeps its least and greatest
    values; a point is compared only with the cells whose extremes allow an
    answer. A front is a surface, so a new point meets only a few cells.

    Examples
    --------
    >>> keep_old, keep_new = merge_nondominated(np.array([[1.0, 3.0], [3.0, 1.0]]),
    ...                                         np.array([[2.0, 2.0], [3.0, 3.0], [1.0, 3.0]]))
    >>> keep_old.tolist(), keep_new.tolist()
    ([True, True], [True, False, False])
    """
    old = np.asarray(old, dtype=float)
    new = np.asarray(new, dtype=float)
    n, k = len(old), len(new)
    if k == 0:
        return np.ones(n, dtype=bool), np.zeros(0, dtype=bool)
    if n < MERGE_CELLS_FROM or not (np.isfinite(new).all() and np.isfinite(old).all()):
        mask = nondominated(np.vstack([old, new]))
        return mask[:n], mask[n:]
    keep_new = nondominated(new)
    grid = _CellGrid(old)
    candidates = np.flatnonzero(keep_new)
    met = grid.touching(new[candidates], at_least_as_good=True)
    if met is None:
        mask = nondominated(np.vstack([old, new]))
        return mask[:n], mask[n:]
    keep_new[candidates[met[0]]] = False
    survivors = new[keep_new]
    keep_old = np.ones(n, dtype=bool)
    if len(survivors):
        beaten = grid.touching(survivors, at_least_as_good=False)
        if beaten is None:
            mask = nondominated(np.vstack([old, new]))
            return mask[:n], mask[n:]
        keep_old[beaten[1]] = False
    return keep_old, keep_new


class _CellGrid:
    """Points sorted into the cells of a grid on their first (at most three) coordinates.

    Each cell knows the least and greatest value of its points in every
    coordinate, so that :meth:`touching` compares a query point only with the
    points of cells that can hold an answer.
    """

    # Cells per point aimed at, and the most cells (the cell numbers stay 16-bit integers, which
    # numpy sorts by counting, in time proportional to the number of points).
    _POINTS_A_CELL = 8
    _MOST_CELLS = 32_000
    # More pairs to compare than this many per point of the grid: give up (moocore is quicker).
    _PAIRS_A_POINT = 8

    def __init__(self, points: np.ndarray) -> None:
        n, m = points.shape
        axes = max(1, min(m - 1, 3))
        side = max(2, int((n / self._POINTS_A_CELL) ** (1 / axes)))
        side = min(side, int(self._MOST_CELLS ** (1 / axes)))
        low, high = column_extremes(points[:, :axes])
        width = np.where(high > low, high - low, 1.0)
        cell = np.zeros(n, dtype=np.int16)
        for j in range(axes):
            index = ((points[:, j] - low[j]) * (side / width[j])).astype(np.int16)  # >= 0: floor
            np.clip(index, 0, side - 1, out=index)
            cell *= side
            cell += index
        self.order = np.argsort(cell, kind="stable")
        sorted_cells = cell[self.order]
        self.starts = np.flatnonzero(np.r_[True, sorted_cells[1:] != sorted_cells[:-1]])
        self.counts = np.diff(np.r_[self.starts, n])
        self.columns = np.take(points, self.order, axis=0).T.copy()  # one row a coordinate
        self.low = np.minimum.reduceat(self.columns, self.starts, axis=1)
        self.high = np.maximum.reduceat(self.columns, self.starts, axis=1)
        self.n = n

    def touching(
        self, queries: np.ndarray, *, at_least_as_good: bool
    ) -> tuple[np.ndarray, np.ndarray] | None:
        """Pairs (query row, point row) where the point is at least as good as the query in every
        coordinate (``at_least_as_good``), or the query at least as good as the point; each query
        row and each point row given once, in increasing order. ``None`` when there would be too
        many pairs to compare."""
        cells = np.ones((len(queries), len(self.starts)), dtype=bool)
        for j, values in enumerate(queries.T):
            if at_least_as_good:
                cells &= self.low[j][None, :] <= values[:, None]
            else:
                cells &= self.high[j][None, :] >= values[:, None]
        q, c = np.divmod(np.flatnonzero(cells), len(self.starts))
        sizes = self.counts[c]
        total = int(sizes.sum())
        if total > self._PAIRS_A_POINT * self.n:
            return None
        query = np.repeat(q, sizes)
        ends = np.cumsum(sizes)
        position = np.arange(total) + np.repeat(self.starts[c] - (ends - sizes), sizes)
        hit = np.ones(total, dtype=bool)
        for j, values in enumerate(queries.T):
            if at_least_as_good:
                hit &= self.columns[j][position] <= values[query]
            else:
                hit &= self.columns[j][position] >= values[query]
        return np.unique(query[hit]), np.unique(self.order[position[hit]])


def hypervolume(
    points: Any, reference: Sequence[float], maximise: bool | Sequence[bool] = False
) -> float:
    """Hypervolume dominated by ``points`` and bounded by ``reference`` (moocore, exact).

    Points that do not strictly beat the reference in every objective add nothing.

    Examples
    --------
    >>> hypervolume([[1, 3], [2, 2], [3, 1]], [4, 4])
    6.0
    """
    points = np.asarray(points, dtype=float)
    if len(points) == 0:
        return 0.0
    return float(
        moocore.hypervolume(
            points,
            ref=np.asarray(reference, dtype=float),
            maximise=_flags(maximise, points.shape[1]),
        )
    )


def hypervolume_box(
    points: Any, reference: Sequence[float], maximise: bool | Sequence[bool] = False
) -> float:
    """Volume of the box between the best value of ``points`` in every objective and ``reference``.

    No set of designs can dominate more than this box, so the hypervolume divided by it is a
    share between 0 and 1 (:func:`hypervolume_share`). NaN when ``points`` is empty or the
    reference does not lie beyond the best values in every objective.

    Examples
    --------
    >>> hypervolume_box([[1, 3], [2, 2], [3, 1]], [4, 4])
    9.0
    """
    points = np.asarray(points, dtype=float)
    if len(points) == 0:
        return math.nan
    flags = np.asarray(_flags(maximise, points.shape[1]), dtype=bool)
    low, high = column_extremes(points)
    ideal = np.where(flags, high, low)
    sides = np.where(
        flags, ideal - np.asarray(reference, dtype=float), np.asarray(reference) - ideal
    )
    if not np.all(np.isfinite(sides)) or np.any(sides <= 0):
        return math.nan
    with np.errstate(over="ignore"):
        volume = float(np.prod(sides))
    return volume if math.isfinite(volume) and volume > 0 else math.nan


def hypervolume_share(
    points: Any, reference: Sequence[float], maximise: bool | Sequence[bool] = False
) -> float:
    """The share (0 to 1) of :func:`hypervolume_box` that ``points`` dominate; NaN where the box is.

    A readable form of the hypervolume: unlike the raw value (a product of the objectives'
    units), it does not depend on the units, and 1 would mean one design best in everything.

    Examples
    --------
    >>> hypervolume_share([[1, 3], [2, 2], [3, 1]], [4, 4])
    0.6666666666666666
    """
    box = hypervolume_box(points, reference, maximise)
    if not math.isfinite(box):
        return math.nan
    return min(1.0, hypervolume(points, reference, maximise) / box)


def hv_contributions(
    points: Any, reference: Sequence[float], maximise: bool | Sequence[bool] = False
) -> np.ndarray:
    """Hypervolume that each point alone adds (moocore); dominated and repeated points add 0."""
    points = np.asarray(points, dtype=float)
    if len(points) == 0:
        return np.zeros(0)
    return np.asarray(
        moocore.hv_contributions(
            points,
            ref=np.asarray(reference, dtype=float),
            maximise=_flags(maximise, points.shape[1]),
        )
    )


def reference_point(
    points: Any,
    maximise: bool | Sequence[bool] = False,
    *,
    worst: Sequence[float | None] | None = None,
    margin: float = 0.1,
) -> np.ndarray:
    """A hypervolume reference point: each objective's ``worst`` where given, otherwise
    the worst value among ``points`` pushed out by ``margin`` of the objective's range.

    A common practice (not a standard): the nadir plus 10 % of the range, so
    that the end points of the front count in the hypervolume.

    The point is always finite: for values so near the float limit that the
    margin would overflow, it is the largest float (the smallest for a
    maximised objective), and the worst designs then add nothing.
    """
    points = np.atleast_2d(np.asarray(points, dtype=float))
    n = points.shape[1]
    flags = _flags(maximise, n)
    worst = list(worst) if worst is not None else [None] * n
    ref = np.empty(n)
    for j in range(n):
        if worst[j] is not None:
            ref[j] = worst[j]
            continue
        column = points[:, j]
        lo, hi = float(np.min(column)), float(np.max(column))
        with np.errstate(over="ignore"):
            # half of each end, so that the span of values near the float limit does not overflow
            span = 2.0 * (hi / 2.0 - lo / 2.0)
            if not span > 0:
                span = abs(hi) if hi != 0 else 1.0
            value = lo - margin * span if flags[j] else hi + margin * span
        if not math.isfinite(value):
            value = -_LARGEST if flags[j] else _LARGEST
        ref[j] = value
    return ref


_LARGEST = float(np.finfo(float).max)


def hypervolume_problem(
    points: Any,
    reference: Sequence[float],
    maximise: bool | Sequence[bool] = False,
    *,
    names: Sequence[str] | None = None,
) -> str:
    """Why the hypervolume of ``points`` for ``reference`` cannot be computed ('' when it can).

    The hypervolume multiplies each objective's extent from the best value to
    the reference point; near the float limit that product (or one extent)
    is larger than any float, and the objective with the largest extent is
    named.
    """
    points = np.atleast_2d(np.asarray(points, dtype=float))
    if points.size == 0:
        return ""
    flags = np.asarray(_flags(maximise, points.shape[1]))
    ref = np.asarray(reference, dtype=float)
    best = np.where(flags, points.max(axis=0), points.min(axis=0))
    with np.errstate(over="ignore", invalid="ignore"):
        extent = np.abs(ref - best)
        product = float(np.prod(extent))
    if math.isfinite(product) and np.isfinite(ref).all():
        return ""
    j = int(np.nanargmax(np.where(np.isfinite(extent), extent, np.inf)))
    name = repr(str(names[j])) if names is not None else f"{j + 1}"
    return (
        f"the hypervolume cannot be computed at this scale: the objectives' extents to the reference point "
        f"multiply past the largest float (objective {name} spans {extent[j]:.3g}); rescale that objective, "
        "e.g. change its unit"
    )


def _flags(maximise: bool | Sequence[bool], n: int) -> list[bool]:
    if isinstance(maximise, bool | np.bool_):
        return [bool(maximise)] * n
    flags = [bool(m) for m in maximise]
    if len(flags) != n:
        raise DataError(
            f"maximise: got {len(flags)} flags for {n} objectives; give one for each objective"
        )
    return flags


@dataclass(frozen=True)
class Front:
    """A table of designs with the objectives that judge them.

    ``table`` holds one row a design, with user names as column names
    (variables, objectives, constraints, outputs) and tradewise's own columns
    such as ``eval_id``. ``info`` (a :class:`tradewise.runinfo.RunInfo`) holds
    the run's provenance (title, seed, settings, versions, case hash) when it
    came from a run.

    Examples
    --------
    >>> import pandas as pd
    >>> table = pd.DataFrame({"cost": [1.0, 2.0, 3.0], "mass": [3.0, 2.0, 3.5]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> len(front)
    2
    """

    table: pd.DataFrame
    objectives: tuple[Objective, ...]
    units: dict[str, str] = field(default_factory=dict)
    variables: tuple[str, ...] = ()
    constraints: tuple[str, ...] = ()
    reference: tuple[float, ...] | None = None
    info: RunInfo = field(default_factory=RunInfo)

    @classmethod
    def from_table(
        cls,
        table: pd.DataFrame,
        objectives: Sequence[Objective],
        *,
        units: dict[str, str] | None = None,
        variables: Sequence[str] = (),
        constraints: Sequence[str] = (),
        reference: Sequence[float] | None = None,
        info: RunInfo | None = None,
        where: str = "table",
    ) -> Front:
        """Keep the non-dominated rows of ``table`` under ``objectives`` (every other column is kept)."""
        objectives = tuple(objectives)
        if len(objectives) < 2:
            raise DataError(
                f"{where}: a front needs at least two objectives, got {len(objectives)}"
            )
        points = objective_matrix(table, objectives, where=where)
        mask = nondominated(points, [o.maximise for o in objectives])
        kept = table.loc[mask].copy()
        for o in objectives:
            kept[o.name] = pd.to_numeric(kept[o.name])
        kept = kept.sort_values(
            [o.name for o in objectives], ascending=[not o.maximise for o in objectives]
        )
        merged_units = {o.name: o.unit for o in objectives}
        merged_units.update(units or {})
        return cls(
            table=kept.reset_index(drop=True),
            objectives=objectives,
            units=merged_units,
            variables=tuple(variables),
            constraints=tuple(constraints),
            reference=tuple(float(r) for r in reference) if reference is not None else None,
            info=info if info is not None else RunInfo(),
        )

    def __len__(self) -> int:
        return len(self.table)

    def __repr__(self) -> str:
        names = ", ".join(f"{o.name} ({o.goal})" for o in self.objectives)
        return f"Front({len(self)} designs; {names})"

    @property
    def objective_names(self) -> list[str]:
        return [o.name for o in self.objectives]

    def design_ids(self) -> list[Any]:
        """The identity of each design, row by row: what every human view calls it.

        A run's design is its evaluation number (``eval_id``); a design of a
        user's CSV is the value of the key column named when it was read
        (``info.id_column``), else its data row in that file (``data_row``,
        the first row below the header counting as 1). A table with none of
        these falls back to the row's place in this front, counting from 1.

        Examples
        --------
        >>> table = pd.DataFrame({"eval_id": [7, 3], "cost": [1.0, 2.0], "mass": [2.0, 1.0]})
        >>> Front.from_table(table, [Objective("cost"), Objective("mass")]).design_ids()
        [7, 3]
        """
        column = self.identity_column()
        if column is None:
            return list(range(1, len(self) + 1))
        return [_plain_id(v) for v in self.table[column]]

    def design_name(self, row: int) -> str:
        """How a person is told about the design at row position ``row``: ``"design 1234"``
        (its evaluation number), ``"data row 6"`` (its row in the user's CSV), ``"part_no A-17"``
        (a key column), or ``"row 2"`` of this front when the table carries none of them."""
        column = self.identity_column()
        if column is None:
            return f"row {int(row) + 1}"
        value = _plain_id(self.table[column].iloc[int(row)])
        if column == "eval_id":
            return f"design {value}"
        if column == ROW_COLUMN:
            return f"data row {value}"
        return f"{column} {value}"

    def identity_column(self) -> str | None:
        """The column that names the designs (see :meth:`design_ids`); None when there is none."""
        key = self.info.id_column
        for column in (key, "eval_id", ROW_COLUMN):
            if column and column in self.table.columns:
                return column
        return None

    @property
    def maximise(self) -> list[bool]:
        return [o.maximise for o in self.objectives]

    def points(self) -> np.ndarray:
        """The objective values as an (n, m) float array in the user's units and senses."""
        return self.table[self.objective_names].to_numpy(dtype=float)

    def reference_point(self) -> np.ndarray:
        """The recorded reference point, or one made from this front when none was recorded."""
        if self.reference is not None:
            return np.asarray(self.reference, dtype=float)
        return reference_point(
            self.points(), self.maximise, worst=[o.worst for o in self.objectives]
        )

    def hypervolume(self, reference: Sequence[float] | None = None) -> float:
        """Hypervolume of the front for ``reference`` (default: :meth:`reference_point`)."""
        ref = self.reference_point() if reference is None else reference
        return hypervolume(self.points(), ref, self.maximise)

    def hypervolume_share(self, reference: Sequence[float] | None = None) -> float:
        """The share of the box from the front's best values to ``reference`` that it dominates."""
        ref = self.reference_point() if reference is None else reference
        return hypervolume_share(self.points(), ref, self.maximise)

    def contributions(self, reference: Sequence[float] | None = None) -> np.ndarray:
        """Exclusive hypervolume contribution of each design (moocore)."""
        ref = self.reference_point() if reference is None else reference
        return hv_contributions(self.points(), ref, self.maximise)

    def with_table(self, table: pd.DataFrame) -> Front:
        """The same front description over another table (for example a filtered one)."""
        return replace(self, table=table.reset_index(drop=True))

    # ------------------------------------------------------------------ files
    def metadata(self) -> dict[str, Any]:
        """The JSON-ready description written beside the CSV."""
        meta = self.info.to_json()
        meta.update(
            {
                "format": FRONT_FORMAT,
                "objectives": [
                    {"name": o.name, "goal": o.goal, "unit": o.unit, "worst": o.worst}
                    for o in self.objectives
                ],
                "variables": list(self.variables),
                "constraints": list(self.constraints),
                "units": {k: v for k, v in self.units.items() if k in self.table.columns},
                "reference_point": list(self.reference) if self.reference is not None else None,
                "n_designs": len(self),
            }
        )
        if self.reference is not None and len(self):
            meta["hypervolume"] = self.hypervolume()
        return meta

    def to_csv(self, path: str | Path, *, meta_path: str | Path | None = None) -> tuple[Path, Path]:
        """Write the table as CSV (headers ``name [unit]``) and its metadata as JSON beside it."""
        path = Path(path)
        meta_path = Path(meta_path) if meta_path is not None else path.with_suffix(".json")
        path.parent.mkdir(parents=True, exist_ok=True)
        out = self.table.rename(columns=lambda c: column_header(str(c), self.units.get(str(c), "")))
        out.to_csv(path, index=False)
        write_json(meta_path, self.metadata())
        return path, meta_path


def read_front(path: str | Path) -> Front:
    """Read a front back from a run folder, or from a CSV with its JSON metadata beside it.

    Parameters
    ----------
    path : str or Path
        A run folder (holding ``front.csv`` and ``front.json``) or a CSV file
        whose metadata lies beside it with the suffix ``.json``.

    Raises
    ------
    DataError
        When the file is missing, the metadata is absent or damaged, or a
        column named in the metadata is not in the table.
    """
    path = Path(path)
    if path.is_dir():
        path = path / "front.csv"
    if not path.is_file():
        raise DataError(f"{path}: no such front file")
    meta_path = path.with_suffix(".json")
    if not meta_path.is_file():
        raise DataError(
            f"{path}: no metadata file {meta_path.name} beside it; give the objectives with --min/--max instead"
        )
    try:
        meta = json.loads(meta_path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise DataError(f"{meta_path}: not readable JSON ({exc})") from None
    check_format(meta, meta_path)
    check_front_keys(meta, meta_path)
    info = RunInfo.from_json(meta, meta_path)
    try:
        table = pd.read_csv(path)
    except (OSError, ValueError) as exc:
        raise DataError(f"{path}: cannot be read as CSV ({exc})") from None
    table = table.rename(columns=_strip_unit)
    if info.case_hash:
        # a run's design table; folders of earlier releases carried the evaluation time in it
        table = design_table(table)
    objectives = tuple(
        Objective(o["name"], o.get("goal", "min"), o.get("unit", "") or "", o.get("worst"))
        for o in meta["objectives"]
    )
    objective_matrix(table, objectives, where=str(path), source=path)
    reference = meta.get("reference_point")
    return Front(
        table=table,
        objectives=objectives,
        units=dict(meta.get("units") or {}),
        variables=tuple(meta.get("variables") or []),
        constraints=tuple(meta.get("constraints") or []),
        reference=tuple(float(r) for r in reference) if reference is not None else None,
        info=info,
    )


def _plain_id(value: Any) -> Any:
    """A design's identity as plain data: a whole number without a decimal point, text as it is."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and value.is_integer():
        return int(value)
    return value


def _strip_unit(header: str) -> str:
    match = _HEADER.match(str(header))
    return match.group("name") if match else str(header)


# ---------------------------------------------------------------- tables from elsewhere
def read_table(path: str | Path) -> tuple[pd.DataFrame, dict[str, str]]:
    """Read a CSV table of designs; headers ``name [unit]`` become bare names with units.

    Returns
    -------
    table : pandas.DataFrame
        The rows, with bare column names.
    units : dict
        Column name to unit, for the headers that carried one.

    Raises
    ------
    DataError
        When the file is missing, empty or not CSV, or when two headers share
        a bare name.
    """
    path = Path(path)
    if not path.is_file():
        raise DataError(f"{path}: no such table file")
    try:
        table = pd.read_csv(path)
    except pd.errors.EmptyDataError:
        raise DataError(
            f"{path}: the file is empty; expected a CSV table with a header row"
        ) from None
    except UnicodeDecodeError:
        raise DataError(f"{path}: {_where_not_utf8(path)}; save it as UTF-8 CSV") from None
    except (OSError, ValueError) as exc:
        raise DataError(f"{path}: cannot be read as CSV ({exc})") from None
    _check_header(path)
    units: dict[str, str] = {}
    names: list[str] = []
    for header in table.columns:
        match = _HEADER.match(str(header))
        name = match.group("name") if match else str(header)
        if name in names:
            raise DataError(
                f"{path}: two columns are named {quote(name)}; column names must differ"
            )
        names.append(name)
        if match and match.group("unit"):
            units[name] = match.group("unit")
    table.columns = names
    return table, units


def _where_not_utf8(path: Path) -> str:
    data = path.read_bytes()
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as exc:
        return undecodable(data, exc)
    return "is not UTF-8 text"


def _check_header(path: Path) -> None:
    """Refuse a header row that names a column twice (pandas would quietly rename the second ``cost.1``)."""
    with open(path, newline="", encoding="utf-8") as handle:
        header = next((row for row in csv.reader(handle) if row), [])
    seen: dict[str, str] = {}
    for cell in header:
        name = _strip_unit(cell.strip())
        if name in seen:
            same = "" if seen[name] == cell else f" ({quote(seen[name])} and {quote(cell)})"
            raise DataError(
                f"{path}: the header row names the column {quote(name)} twice{same}; "
                "column names must differ"
            )
        seen[name] = cell


def front_from_csv(
    path: str | Path,
    *,
    minimise: Sequence[str] = (),
    maximise: Sequence[str] = (),
    keep: Sequence[str] | None = None,
    key: str | None = None,
) -> Front:
    """The non-dominated rows of any CSV table (moocore), every other column kept.

    Each design keeps the name it has in the file: with ``key``, the value of
    that column (which must hold a distinct value in every row); otherwise
    its data row, the first row below the header counting as 1, added as the
    first column ``data_row`` (a file that already has a ``data_row`` column,
    such as a front written by ``tradewise front``, keeps its own).

    Parameters
    ----------
    path : str or Path
        The CSV file. Headers may carry units as ``mass [g]``; columns are
        named by their bare name (``mass``) or by the whole header.
    minimise, maximise : sequence of str
        The objective columns, minimised and maximised; at least two in all.
    keep : sequence of str, optional
        The other columns to keep; by default all of them.
    key : str, optional
        A column that names each design (a part number, say); reports name
        designs by it instead of by their data row.

    Raises
    ------
    DataError
        For a missing column, a non-numeric or missing objective value (naming
        the row), fewer than two objectives, a column named twice, or a key
        column with an empty or repeated value.

    Examples
    --------
    >>> import tempfile, os
    >>> folder = tempfile.mkdtemp()
    >>> path = os.path.join(folder, "designs.csv")
    >>> _ = open(path, "w").write("id,cost [EUR],mass [g]\\n1,10,3\\n2,12,2\\n3,13,4\\n")
    >>> front = front_from_csv(path, minimise=["cost", "mass"])
    >>> front.table["id"].tolist(), front.units["mass"], front.design_name(1)
    ([1, 2], 'g', 'data row 2')
    """
    table, units = read_table(path)
    where = str(Path(path).name)
    wanted = [(str(n), "min") for n in minimise] + [(str(n), "max") for n in maximise]
    names = [_strip_unit(n) for n, _ in wanted]
    for name in names:
        if names.count(name) > 1:
            raise DataError(f"{where}: column {name!r} is given as an objective twice")
    if len(names) < 2:
        raise DataError(
            f"{where}: a front needs at least two objectives (--min/--max), got {len(names)}"
        )
    key = _strip_unit(key) if key else None
    for name in names + [_strip_unit(k) for k in keep or ()] + ([key] if key else []):
        if name not in table.columns:
            raise DataError(
                f"{where}: no column {quote(name)}; columns: {_columns_text(table.columns)}"
            )
    if len(table) == 0:
        raise DataError(f"{where}: the table has a header but no rows")
    if key:
        _check_key(table, key, where, path)
    elif ROW_COLUMN in table.columns:
        _check_key(table, ROW_COLUMN, where, path)
    else:
        table.insert(0, ROW_COLUMN, np.arange(1, len(table) + 1))
    if keep is not None:
        ident = key or ROW_COLUMN
        kept = [_strip_unit(k) for k in keep]
        others = [c for c in table.columns if c in kept and c not in names and c != ident]
        table = table[([ident] if ident not in names else []) + names + others]
    objectives = [
        Objective(n, goal, units.get(n, "")) for n, (_, goal) in zip(names, wanted, strict=True)
    ]
    objective_matrix(table, objectives, where=where, source=path)
    front = Front.from_table(table, objectives, units=units, where=where)
    return replace(
        front,
        reference=tuple(front.reference_point()),
        info=RunInfo(source=where, n_rows=len(table), id_column=key),
    )


def _check_key(table: pd.DataFrame, key: str, where: str, path: str | Path) -> None:
    """Refuse a key column with an empty cell or a value that names two rows."""
    column = table[key]
    empty = column.isna()
    if empty.any():
        row = int(np.flatnonzero(empty.to_numpy())[0]) + 1
        raise DataError(
            f"{where}: data row {row} has no value in the key column {quote(key)}; "
            "every design needs a name there"
        )
    repeated = column.duplicated()
    if repeated.any():
        row = int(np.flatnonzero(repeated.to_numpy())[0])
        first = int(np.flatnonzero((column == column.iloc[row]).to_numpy())[0]) + 1
        raise DataError(
            f"{where}: the key column {quote(key)} holds {quote(column.iloc[row])} in data rows "
            f"{first} and {row + 1}; a key names one design, so its values must differ"
        )


# ---------------------------------------------------------------- trade-off rates
def tradeoff_rates(
    front: Front, index: int | None = None, *, n_neighbours: int | None = None
) -> pd.DataFrame:
    """What one objective costs in another between neighbouring designs, in the objectives' own units.

    Two objectives: the designs are ordered from best to worst in the first
    objective; each row is a move from a design to its neighbour, giving up
    some of one objective (``give``) to gain some of the other (``gain``).
    ``rate`` is the amount given up per unit gained. Without ``index`` the
    rows are the moves along the whole front, all in the same direction (so
    the rates are comparable and a knee shows as a jump); with ``index`` they
    are the moves from that design to its two neighbours.

    Three or more objectives: at each design (or only at ``index``) a plane is
    fitted through it and its nearest neighbours in normalised objective space
    (least squares); each row gives the rate along one pair of objectives with
    the others held, read off that local plane (``neighbour`` is -1).

    ``per`` is a power of ten of the gained objective, and ``text`` says the
    rate in words, for example ``"0.8 EUR more cost per 100 g less mass"``.
    ``per`` starts at the power of ten at or below the typical step and moves
    a few decades when that brings the amount given up between about 0.1 and
    1000 (at least into 0.001 to 10,000), never past the gained objective's
    span on the front; numbers are written with three significant digits,
    without an exponent where possible (``"0.00782 m3 more volume per
    10,000 kPa less stress"``).

    Parameters
    ----------
    front : Front
        The front.
    index : int, optional
        Row position in ``front.table`` of the design to look from.
    n_neighbours : int, optional
        Three or more objectives only: neighbours used for the local plane
        (default twice the number of objectives).

    Returns
    -------
    pandas.DataFrame
        Columns ``design``, ``neighbour``, ``gain``, ``give``, ``gain_amount``,
        ``give_amount``, ``rate``, ``per`` and ``text``.

    Examples
    --------
    >>> table = pd.DataFrame({"cost": [10.0, 12, 15], "mass": [100.0, 60, 40]})
    >>> front = Front.from_table(table, [Objective("cost", unit="k$"), Objective("mass", unit="kg")])
    >>> tradeoff_rates(front)["text"].tolist()
    ['0.5 k$ more cost per 10 kg less mass', '1.5 k$ more cost per 10 kg less mass']
    """
    n = len(front)
    if index is not None and not (isinstance(index, int | np.integer) and 0 <= index < n):
        raise DataError(
            f"trade-off rates: design {index!r} is not a row of the front (0 to {n - 1})"
        )
    if len(front.objectives) == 2:
        rows = _rates_between_neighbours(front, index)
    else:
        rows = _rates_on_local_plane(front, index, n_neighbours)
    columns = [
        "design",
        "neighbour",
        "gain",
        "give",
        "gain_amount",
        "give_amount",
        "rate",
        "per",
        "text",
    ]
    return pd.DataFrame(rows, columns=columns)


def _rates_between_neighbours(front: Front, index: int | None) -> list[dict[str, Any]]:
    sign = np.where(front.maximise, -1.0, 1.0)
    signed = front.points() * sign  # larger is worse in every column
    order = np.lexsort((signed[:, 1], signed[:, 0]))
    if index is None:
        moves = list(zip(order[:-1], order[1:], strict=True))
    else:
        pos = int(np.flatnonzero(order == index)[0])
        moves = [(index, order[p]) for p in (pos + 1, pos - 1) if 0 <= p < len(order)]
    rows = []
    for i, j in moves:
        delta = signed[j] - signed[i]
        gain = int(np.argmin(delta))
        give = 1 - gain
        rows.append(
            {
                "design": int(i),
                "neighbour": int(j),
                "gain": front.objectives[gain].name,
                "give": front.objectives[give].name,
                "gain_amount": float(-delta[gain]),
                "give_amount": float(delta[give]),
            }
        )
    spans = dict(zip(front.objective_names, np.ptp(front.points(), axis=0).tolist(), strict=True))
    for row in rows:
        gain_amount = row["gain_amount"]
        row["rate"] = row["give_amount"] / gain_amount if gain_amount > 0 else math.nan
    common = None
    if index is None and rows:
        # one step for the whole front, so that the rates along it compare at a glance
        common = _readable_per(
            [r["rate"] for r in rows], [r["gain_amount"] for r in rows], spans[rows[0]["gain"]]
        )
    for row in rows:
        if common is not None:
            row["per"] = common
        else:
            row["per"] = _readable_per([row["rate"]], [row["gain_amount"]], spans[row["gain"]])
        row["text"] = _rate_text(front, row["give"], row["gain"], row["rate"], row["per"])
    if index is not None and len(rows) == 2 and rows[1]["gain"] == rows[0]["give"]:
        # The two sides of one design read on one step of the same objective, so that a reader
        # compares like with like: "0.145 g more mass per 1 N/mm more stiffness" on one side,
        # "0.11 g less mass per 1 N/mm less stiffness" on the other.
        up, down = rows
        inverse = 1.0 / down["rate"] if down["rate"] > 0 else math.nan
        step = _readable_per(
            [up["rate"], inverse], [up["gain_amount"], down["give_amount"]], spans[up["gain"]]
        )
        up["per"] = step
        up["text"] = _rate_text(front, up["give"], up["gain"], up["rate"], step)
        if math.isfinite(inverse):
            goals = {o.name: o.goal for o in front.objectives}
            saved = "less" if goals[down["gain"]] == "min" else "more"
            lost = "more" if goals[down["give"]] == "min" else "less"
            parts = [
                _number(inverse * step),
                front.units.get(down["gain"], ""),
                saved,
                down["gain"],
                "per",
                _number(step),
                front.units.get(down["give"], ""),
                lost,
                down["give"],
            ]
            down["text"] = " ".join(p for p in parts if p)
    return rows


def _rates_on_local_plane(
    front: Front, index: int | None, n_neighbours: int | None
) -> list[dict[str, Any]]:
    points = front.points()
    n, m = points.shape
    low, high = points.min(axis=0), points.max(axis=0)
    span = np.where(high > low, high - low, 1.0)
    scaled = moocore.normalise(points, maximise=front.maximise)  # the scale of choose.normalised
    k = min(n - 1, n_neighbours if n_neighbours is not None else 2 * m)
    designs = range(n) if index is None else [index]
    rows = []
    for i in designs:
        dist = np.sqrt(((scaled - scaled[i]) ** 2).sum(axis=1))
        dist[i] = np.inf
        near = np.argsort(dist, kind="stable")[:k]
        patch = scaled[np.concatenate([[i], near])]
        # An objective that takes one value on the whole patch (a standard size, a plateau of
        # the front) fixes no direction: the plane is fitted in the others, and the objective
        # is said once to stay put instead of giving a rate of it against every other one.
        level = (np.ptp(patch, axis=0) <= 1e-12) & (k >= m - 1)
        varying = np.flatnonzero(~level)
        normal = np.full(m, np.nan)
        if k >= m - 1 and len(varying) >= 2:  # the design and m - 1 neighbours fix a plane
            part = patch[:, varying]
            found = np.linalg.svd(part - part.mean(axis=0))[2][-1]
            normal[varying] = -found if found.sum() < 0 else found
        fitted = bool(np.isfinite(normal[varying]).all()) and len(varying) >= 2
        for c in np.flatnonzero(level):
            name = front.objectives[c].name
            rows.append(
                {
                    "design": int(i),
                    "neighbour": -1,
                    "gain": name,
                    "give": name,
                    "gain_amount": math.nan,
                    "give_amount": math.nan,
                    "rate": math.nan,
                    "per": math.nan,
                    "text": (
                        f"{name} is {_format.quantity(points[i, c], front.units.get(name))} on this "
                        f"design and its {k} nearest neighbour{'s' if k != 1 else ''}: it does not trade here"
                    ),
                }
            )
        for a in range(m):
            for b in range(a + 1, m):
                if level[a] or level[b]:
                    continue
                # along the plane with the others held: n_a dF_a + n_b dF_b = 0 in scaled units
                rate = (span[a] * normal[b]) / (normal[a] * span[b]) if normal[a] != 0 else math.nan
                steps = np.abs(points[near, b] - points[i, b]).tolist()
                per = _readable_per([abs(rate)], steps, float(high[b] - low[b]))
                rows.append(
                    {
                        "design": int(i),
                        "neighbour": -1,
                        "gain": front.objectives[b].name,
                        "give": front.objectives[a].name,
                        "gain_amount": per,
                        "give_amount": rate * per,
                        "rate": rate,
                        "per": per,
                        "text": _plane_text(front, a, b, rate, per, fitted=fitted),
                    }
                )
    return rows


def _plane_text(front: Front, a: int, b: int, rate: float, per: float, *, fitted: bool) -> str:
    give, gain = front.objectives[a].name, front.objectives[b].name
    if not fitted:
        return f"too few designs to estimate the rate of {give} per {gain}"
    if not math.isfinite(rate):
        # the local plane does not move in give: no amount of it buys gain with the others held
        return f"{give} and {gain} do not trade off here with the others held"
    return _rate_text(front, give, gain, rate, per) + (" (others held)" if rate >= 0 else "")


def _readable_step(amounts: Sequence[float]) -> float:
    """The power of ten at or below the median positive amount (1 when there is none)."""
    positive = [a for a in amounts if a > 0 and math.isfinite(a)]
    if not positive:
        return 1.0
    return float(10.0 ** math.floor(math.log10(float(np.median(positive)))))


#: Amounts given up, and steps per which they are given, that read without effort (easy) and
#: that can still be read (readable). Our own choice: "0.5 EUR" and "250 g" read at once,
#: "0.00782 m3" with care, "7.82e-05 m3" hardly; a step may be larger ("per 10,000 kPa").
_EASY = (0.1, 1000.0)
_READABLE = (1e-3, 1e4)
_EASY_STEP = (0.01, 1e5)
_READABLE_STEP = (1e-3, 1e7)


def _readable_per(rates: Sequence[float], steps: Sequence[float], span: float) -> float:
    """The power of ten of the gained objective to state ``rates`` per.

    Starts at the power of ten at or below the median step and tries the
    decades from a thousandth of it up to the largest power of ten within the
    gained objective's ``span`` on the front: the amount given up and the
    step itself should land in the easy ranges, or failing that the readable
    ones, while the step stays close to the designs' own steps.
    """
    base = _readable_step(steps)
    positive = [abs(r) for r in rates if math.isfinite(r) and r != 0]
    if not positive:
        return base
    rate = float(np.median(positive))
    top = base
    if span > 0 and math.isfinite(span):
        top = max(base, 10.0 ** math.floor(math.log10(span)))
    first = round(math.log10(base))
    candidates = range(first - 3, round(math.log10(top)) + 1)

    def outside(value: float, band: tuple[float, float]) -> float:
        # decades by which value misses the band (0 inside it)
        return max(0.0, math.log10(band[0] / value), math.log10(value / band[1]))

    def cost(k: int) -> tuple[float, int, int]:
        amount = rate * 10.0**k
        step = 10.0**k
        score = (
            10.0 * (outside(amount, _READABLE) + outside(step, _READABLE_STEP))
            + outside(amount, _EASY)
            + outside(step, _EASY_STEP)
            + 1.5 * abs(k - first)
        )
        return (round(score, 9), abs(k - first), k)

    return float(10.0 ** min(candidates, key=cost))


def _rate_text(front: Front, give: str, gain: str, rate: float, per: float) -> str:
    goals = {o.name: o.goal for o in front.objectives}
    if not math.isfinite(rate):
        return f"no change in {gain} between these designs"
    if rate < 0:
        return f"{give} and {gain} do not trade off here (the front is uneven around this design)"
    give_word = "more" if goals[give] == "min" else "less"
    gain_word = "less" if goals[gain] == "min" else "more"
    parts = [
        _number(rate * per),
        front.units.get(give, ""),
        give_word,
        give,
        "per",
        _number(per),
        front.units.get(gain, ""),
        gain_word,
        gain,
    ]
    return " ".join(p for p in parts if p)


def _number(value: float) -> str:
    # Rates are estimates from neighbouring designs: three significant digits say all they know.
    return _format.number(float(value), 3)
