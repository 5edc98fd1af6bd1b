"""Fronts: non-dominated tables of designs with names, senses and units, and their hypervolume.

Everything here works on any table of designs (a run's result or a CSV from
elsewhere); it never touches the search, the models or the archive. The
numerical kernels (non-dominated filtering, hypervolume, contributions) come
from moocore.
"""

from __future__ import annotations

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

from tradewise.case import Objective
from tradewise.errors import DataError

__all__ = [
    "Front",
    "FRONT_FORMAT",
    "nondominated",
    "hypervolume",
    "hv_contributions",
    "reference_point",
    "read_front",
    "column_header",
    "objective_matrix",
]

FRONT_FORMAT = "tradewise-front/1"
_HEADER = re.compile(r"^(?P<name>.*?) \[(?P<unit>[^\[\]]*)\]$")


def column_header(name: str, unit: str) -> str:
    """The CSV header of a column: ``"mass [g]"``, or the bare name when it has no unit."""
    return f"{name} [{unit}]" if unit else name


def objective_matrix(table: pd.DataFrame, objectives: Sequence[Objective], *, where: str = "table") -> np.ndarray:
    """The objective columns of ``table`` as a float array, checked for missing and non-numeric values."""
    missing = [o.name for o in objectives if o.name not in table.columns]
    if missing:
        raise DataError(f"{where}: no column {missing[0]!r}; columns: {', '.join(map(str, table.columns))}")
    columns = []
    for objective in objectives:
        raw = table[objective.name]
        values = pd.to_numeric(raw, errors="coerce")
        bad = values.isna() | ~np.isfinite(values.to_numpy(dtype=float, na_value=np.nan))
        if bad.any():
            position = int(np.flatnonzero(bad.to_numpy())[0])
            raise DataError(
                f"{where}: row {position + 1} column {objective.name!r}: "
                f"expected a finite number, got {raw.iloc[position]!r}"
            )
        columns.append(values.to_numpy(dtype=float))
    return np.column_stack(columns) if columns else np.empty((len(table), 0))


def nondominated(points: Any, maximise: bool | Sequence[bool] = False, *, keep_weakly: bool = False) -> np.ndarray:
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
    return np.asarray(moocore.is_nondominated(points, maximise=_flags(maximise, points.shape[1]), keep_weakly=keep_weakly))


def hypervolume(points: Any, reference: Sequence[float], maximise: bool | Sequence[bool] = False) -> float:
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
    return float(moocore.hypervolume(points, ref=np.asarray(reference, dtype=float), maximise=_flags(maximise, points.shape[1])))


def hv_contributions(points: Any, reference: Sequence[float], maximise: bool | Sequence[bool] = False) -> np.ndarray:
    """Hypervolume that each point alone adds (moocore); dominated and repeated points add 0."""
    points = np.asarray(points, dtype=float)
    if len(points) == 0:
        return np.zeros(0)
    return np.asarray(
        moocore.hv_contributions(points, ref=np.asarray(reference, dtype=float), maximise=_flags(maximise, points.shape[1]))
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
        span = hi - lo
        if span <= 0:
            span = abs(hi) if hi != 0 else 1.0
        ref[j] = lo - margin * span if flags[j] else hi + margin * span
    return ref


def _flags(maximise: bool | Sequence[bool], n: int) -> list[bool]:
    if isinstance(maximise, bool | np.bool_):
        return [bool(maximise)] * n
    flags = [bool(m) for m in maximise]
    if len(flags) != n:
        raise DataError(f"maximise: got {len(flags)} flags for {n} objectives")
    return flags


@dataclass(frozen=True)
class Front:
    """A table of designs with the objectives that judge them.

    ``table`` holds one row a design, with user names as column names
    (variables, objectives, constraints, outputs) and tradewise's own columns
    such as ``eval_id``. ``meta`` holds the run's provenance (title, seed,
    settings, versions, case hash) when it came from a run.

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
    meta: dict[str, Any] = field(default_factory=dict)

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
        meta: dict[str, Any] | None = None,
        where: str = "table",
    ) -> Front:
        """Keep the non-dominated rows of ``table`` under ``objectives`` (every other column is kept)."""
        objectives = tuple(objectives)
        if len(objectives) < 2:
            raise DataError(f"{where}: a front needs at least two objectives, got {len(objectives)}")
        points = objective_matrix(table, objectives, where=where)
        mask = nondominated(points, [o.maximise for o in objectives])
        kept = table.loc[mask].copy()
        for o in objectives:
            kept[o.name] = pd.to_numeric(kept[o.name])
        kept = kept.sort_values([o.name for o in objectives], ascending=[not o.maximise for o in objectives])
        merged_units = {o.name: o.unit for o in objectives}
        merged_units.update(units or {})
        return cls(
            table=kept.reset_index(drop=True),
            objectives=objectives,
            units=merged_units,
            variables=tuple(variables),
            constraints=tuple(constraints),
            reference=tuple(float(r) for r in reference) if reference is not None else None,
            meta=dict(meta or {}),
        )

    def __len__(self) -> int:
        return len(self.table)

    def __repr__(self) -> str:
        names = ", ".join(f"{o.name} ({o.goal})" for o in self.objectives)
        return f"Front({len(self)} designs; {names})"

    @property
    def objective_names(self) -> list[str]:
        return [o.name for o in self.objectives]

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
        return reference_point(self.points(), self.maximise, worst=[o.worst for o in self.objectives])

    def hypervolume(self, reference: Sequence[float] | None = None) -> float:
        """Hypervolume of the front for ``reference`` (default: :meth:`reference_point`)."""
        ref = self.reference_point() if reference is None else reference
        return hypervolume(self.points(), ref, self.maximise)

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
        meta = dict(self.meta)
        meta.update(
            {
                "format": FRONT_FORMAT,
                "objectives": [
                    {"name": o.name, "goal": o.goal, "unit": o.unit, "worst": o.worst} for o in self.objectives
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
        meta_path.write_text(json.dumps(_jsonable(self.metadata()), indent=2) + "\n", encoding="utf-8")
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
    if not isinstance(meta, dict) or meta.get("format") != FRONT_FORMAT:
        raise DataError(f"{meta_path}: not a tradewise front description (format {FRONT_FORMAT!r} expected)")
    try:
        table = pd.read_csv(path)
    except (OSError, ValueError) as exc:
        raise DataError(f"{path}: cannot be read as CSV ({exc})") from None
    table = table.rename(columns=_strip_unit)
    objectives = tuple(
        Objective(o["name"], o.get("goal", "min"), o.get("unit", ""), o.get("worst")) for o in meta.get("objectives", [])
    )
    if len(objectives) < 2:
        raise DataError(f"{meta_path}: lists {len(objectives)} objective(s); a front needs at least two")
    objective_matrix(table, objectives, where=str(path))
    reference = meta.get("reference_point")
    known = {k: meta[k] for k in meta if k not in {"objectives", "variables", "constraints", "units", "reference_point"}}
    return Front(
        table=table,
        objectives=objectives,
        units=dict(meta.get("units", {})),
        variables=tuple(meta.get("variables", [])),
        constraints=tuple(meta.get("constraints", [])),
        reference=tuple(reference) if reference is not None else None,
        meta=known,
    )


def _strip_unit(header: str) -> str:
    match = _HEADER.match(str(header))
    return match.group("name") if match else str(header)


def _jsonable(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, Path):
        return str(value)
    return value
