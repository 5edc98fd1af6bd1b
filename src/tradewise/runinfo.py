"""What a front knows about the run that made it: one typed record, read and written here only.

A front from a run carries a :class:`RunInfo`: the case it came from (title,
description, cautions, file, hash, design space, constraint limits), how the
search ran (method, settings, seed, counts, times, why it stopped, software
versions), where its archive is, and for a set of seeds or a shortlist what
made them (:class:`SeedSet`, ``shortlist``). A front read from any CSV carries
only ``source`` and ``n_rows``.

On disk it is the run part of ``front.json``: flat keys beside the front's own
(objectives, variables, constraints, units, reference point, which
:mod:`tradewise.front` writes). ``format`` is the version field: this release
writes and reads ``tradewise-front/1``; a file of a later major version is
refused with a message that says so, and keys this release does not know are
kept (in ``extra``) and written back unchanged. :meth:`RunInfo.from_json`
checks every value's type where the file is read, so the rest of the code can
trust the fields.
"""

from __future__ import annotations

import datetime as _dt
import math
from collections.abc import Mapping
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from tradewise.errors import DataError, quote

__all__ = [
    "RunInfo",
    "SeedSet",
    "VariableSpec",
    "LimitSpec",
    "FRONT_FORMAT",
    "check_format",
    "check_front_keys",
    "iso_time",
]

#: The version of front.json this release writes (and the newest it reads).
FRONT_FORMAT = "tradewise-front/1"

_TEXT, _COUNT, _NUMBER, _FLAG, _TABLE = (
    "text",
    "a whole number",
    "a number",
    "true or false",
    "a JSON object",
)


def check_format(data: Any, where: str | Path) -> None:
    """Refuse a front.json that is not one, or of a later major version than this release reads."""
    found = data.get("format") if isinstance(data, dict) else None
    if found == FRONT_FORMAT:
        return
    if isinstance(found, str) and found.startswith("tradewise-front/"):
        raise DataError(
            f"{where}: written in format {found!r}, newer than this release reads ({FRONT_FORMAT!r}); "
            "update tradewise to read it"
        )
    raise DataError(
        f"{where}: not a tradewise front description (format {FRONT_FORMAT!r} expected)"
    )


def check_front_keys(data: Mapping[str, Any], where: str | Path) -> None:
    """Check the keys of front.json that describe the front itself (objectives, variables,
    constraints, units, reference point); :meth:`RunInfo.from_json` checks the rest.

    Raises
    ------
    DataError
        Naming the file and the key (``objectives[1].goal``, ``units.mass``)
        whose value has the wrong type, with what it holds and what is allowed.
    """

    def bad(key: str, value: Any, allowed: str) -> DataError:
        return DataError(f"{where}: key {key!r} must be {allowed}, got {_kind_of(value)}")

    objectives = data.get("objectives")
    if not isinstance(objectives, list):
        raise bad("objectives", objectives, "a list of objects with a name and a goal")
    if len(objectives) < 2:
        raise DataError(
            f"{where}: lists {len(objectives)} objective(s); a front needs at least two"
        )
    for i, item in enumerate(objectives):
        key = f"objectives[{i}]"
        if not isinstance(item, dict):
            raise bad(key, item, "an object with a name and a goal")
        if not isinstance(item.get("name"), str) or not item["name"]:
            raise bad(f"{key}.name", item.get("name"), "the objective's name as text")
        if item.get("goal", "min") not in ("min", "max"):
            raise bad(f"{key}.goal", item.get("goal"), "'min' or 'max'")
        _check_item(bad, key, item, _OBJECTIVE_KINDS)
        if item.get("worst") is not None and not math.isfinite(item["worst"]):
            raise bad(f"{key}.worst", item["worst"], "a finite number or null")
    for key in ("variables", "constraints"):
        value = data.get(key)
        if value is None:
            continue
        if not isinstance(value, list):
            raise bad(key, value, f"a list of {_TEXT}")
        for i, item in enumerate(value):
            if not _is(item, _TEXT):
                raise bad(f"{key}[{i}]", item, _TEXT)
    if data.get("n_designs") is not None and not _is(data["n_designs"], _COUNT):
        raise bad("n_designs", data["n_designs"], _COUNT)
    units = data.get("units")
    if units is not None:
        if not isinstance(units, dict):
            raise bad("units", units, "a JSON object of column name to unit text")
        for name, unit in units.items():
            if unit is not None and not isinstance(unit, str):
                raise bad(f"units.{name}", unit, "the unit as text")
    reference = data.get("reference_point")
    if reference is not None:
        fine = isinstance(reference, list) and all(
            _is(r, _NUMBER) and math.isfinite(r) for r in reference
        )
        if not fine or len(reference) != len(objectives):
            raise bad(
                "reference_point", reference, f"a list of {len(objectives)} finite numbers or null"
            )


@dataclass(frozen=True)
class VariableSpec:
    """One variable of the case's design space as the run recorded it."""

    name: str
    kind: str
    low: float | None = None
    high: float | None = None
    options: tuple[Any, ...] = ()
    unit: str = ""

    def to_json(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "type": self.kind,
            "low": self.low,
            "high": self.high,
            "options": list(self.options),
            "unit": self.unit,
        }


@dataclass(frozen=True)
class LimitSpec:
    """One constraint of the case as the run recorded it: ``min <= name <= max``."""

    name: str
    min: float | None = None
    max: float | None = None
    unit: str = ""

    def to_json(self) -> dict[str, Any]:
        return {"name": self.name, "min": self.min, "max": self.max, "unit": self.unit}


@dataclass(frozen=True)
class SeedSet:
    """A front merged from several seeds: the seeds, their hypervolumes on the common reference, the
    column of the merged table that says which seed found a design, and the seeds that did not run."""

    seeds: tuple[int, ...]
    column: str = "seed"
    hypervolumes: tuple[float, ...] = ()
    median: float | None = None
    min: float | None = None
    max: float | None = None
    missing: tuple[int, ...] = ()

    def to_json(self) -> dict[str, Any]:
        return {
            "seeds": list(self.seeds),
            "n_seeds": len(self.seeds),
            "seed_column": self.column,
            "seed_hypervolumes": list(self.hypervolumes),
            "hypervolume_median": self.median,
            "hypervolume_min": self.min,
            "hypervolume_max": self.max,
            "missing_seeds": list(self.missing),
        }


@dataclass(frozen=True)
class RunInfo:
    """The run a front came from; every field is optional (a front from a CSV has almost none).

    ``settings`` holds the search settings the run used (``population``,
    ``evaluations``, ``generations``, ``seed``, ``time_limit``,
    ``stall_generations``, ``stall_tolerance``, with the population resolved);
    ``versions`` the software versions; ``descriptions`` the case's
    description of each variable, objective and constraint. ``started`` and
    ``finished`` are seconds since the epoch here and ISO 8601 times in UTC
    with their offset in the file (``"2026-01-01T12:00:00.000+00:00"``; files
    of earlier releases held the seconds, which are still read).
    ``id_column`` is the key column that names the designs of a user's CSV,
    when one was named. ``hypervolume`` is the one
    recorded in the file (a front works out its own from its points).

    Examples
    --------
    >>> info = RunInfo(title="Bracket", seed=3)
    >>> info.title, info.seed, info.n_evals
    ('Bracket', 3, None)
    >>> RunInfo.from_json(info.to_json(), "front.json") == info
    True
    """

    title: str | None = None
    description: str | None = None
    cautions: str | None = None
    hazards: tuple[str, ...] = ()
    case_file: str | None = None
    case_hash: str | None = None
    algorithm: str | None = None
    status: str | None = None
    stop_reason: str | None = None
    message: str | None = None
    reference_source: str | None = None
    seed: int | None = None
    settings: dict[str, Any] = field(default_factory=dict)
    versions: dict[str, str] = field(default_factory=dict)
    n_evals: int | None = None
    n_gen: int | None = None
    n_failed: int | None = None
    n_cached: int | None = None
    started: float | None = None
    finished: float | None = None
    hypervolume: float | None = None
    feasible: bool | None = None
    design_space: tuple[VariableSpec, ...] = ()
    descriptions: dict[str, str] = field(default_factory=dict)
    constraint_limits: tuple[LimitSpec, ...] = ()
    seeds: SeedSet | None = None
    shortlist: dict[str, Any] | None = None
    store: str | None = None
    run_id: int | None = None
    source: str | None = None
    n_rows: int | None = None
    id_column: str | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def but(self, **changes: Any) -> RunInfo:
        """A copy with ``changes`` (a frozen record is never changed in place)."""
        return replace(self, **changes)

    @property
    def n_seeds(self) -> int:
        """How many seeds the front stands for (1 for a single run)."""
        return len(self.seeds.seeds) if self.seeds is not None else 1

    # ------------------------------------------------------------------ file
    def to_json(self) -> dict[str, Any]:
        """The flat keys of front.json this record owns (the front adds its own)."""
        data: dict[str, Any] = dict(self.extra)
        for f in fields(self):
            if f.name in ("extra", "seeds", "design_space", "constraint_limits", "shortlist"):
                continue
            value = getattr(self, f.name)
            if value is None or (isinstance(value, dict | tuple) and not value):
                continue
            data[f.name] = (
                dict(value)
                if isinstance(value, dict)
                else list(value)
                if isinstance(value, tuple)
                else value
            )
        for name in _TIME_KEYS:
            if name in data:
                data[name] = iso_time(data[name])
        if self.design_space:
            data["design_space"] = [v.to_json() for v in self.design_space]
        if self.constraint_limits or self.design_space:
            data["constraint_limits"] = [c.to_json() for c in self.constraint_limits]
        if self.seeds is not None:
            data.update(self.seeds.to_json())
        if self.shortlist is not None:
            data["shortlist"] = dict(self.shortlist)
        return data

    @classmethod
    def from_json(cls, data: Mapping[str, Any], where: str | Path) -> RunInfo:
        """The record from front.json's keys, each checked (front keys and unknown keys are skipped
        or kept in ``extra``).

        Raises
        ------
        DataError
            Naming the file and the key (``settings.seed``, ``design_space[1].low``)
            whose value has the wrong type, with what it holds and what is allowed.
        """

        def bad(key: str, value: Any, allowed: str) -> DataError:
            return DataError(f"{where}: key {key!r} must be {allowed}, got {_kind_of(value)}")

        def get(key: str, kind: str) -> Any:
            value = data.get(key)
            if value is not None and not _is(value, kind):
                raise bad(key, value, kind)
            return value

        def items(key: str, kinds: dict[str, str]) -> list[dict[str, Any]]:
            value = data.get(key)
            if value is None:
                return []
            if not isinstance(value, list):
                raise bad(key, value, "a list of objects")
            for i, item in enumerate(value):
                if not isinstance(item, dict):
                    raise bad(f"{key}[{i}]", item, _TABLE)
                _check_item(bad, f"{key}[{i}]", item, kinds)
            return value

        def numbers(key: str, kind: str) -> tuple:
            value = data.get(key)
            if value is None:
                return ()
            if not isinstance(value, list):
                raise bad(key, value, f"a list of {kind}")
            for i, item in enumerate(value):
                if not _is(item, kind):
                    raise bad(f"{key}[{i}]", item, kind)
            return tuple(value)

        texts = {name: get(name, _TEXT) for name in _TEXT_KEYS}
        counts = {name: get(name, _COUNT) for name in _COUNT_KEYS}
        floats = {name: get(name, _NUMBER) for name in _NUMBER_KEYS}
        times = {name: _read_time(data.get(name), name, bad) for name in _TIME_KEYS}
        settings = get("settings", _TABLE) or {}
        _check_item(bad, "settings", settings, _SETTING_KINDS)
        for name, value in settings.items():
            if value is not None and not isinstance(value, str | int | float | bool):
                raise bad(f"settings.{name}", value, "a number, text, true/false or null")
        tables = {}
        for key in ("versions", "descriptions"):
            table = get(key, _TABLE) or {}
            for name, value in table.items():
                if value is not None and not isinstance(value, str):
                    raise bad(f"{key}.{name}", value, "text")
            tables[key] = dict(table)
        space = tuple(
            VariableSpec(
                name=str(v.get("name", "")),
                kind=str(v.get("type", "")),
                low=v.get("low"),
                high=v.get("high"),
                options=tuple(v.get("options") or ()),
                unit=str(v.get("unit") or ""),
            )
            for v in items("design_space", _SPACE_KINDS)
        )
        limits = tuple(
            LimitSpec(
                name=str(c.get("name", "")),
                min=c.get("min"),
                max=c.get("max"),
                unit=str(c.get("unit") or ""),
            )
            for c in items("constraint_limits", _LIMIT_KINDS)
        )
        seeds = numbers("seeds", _COUNT)
        hvs = numbers("seed_hypervolumes", _NUMBER)
        missing = numbers("missing_seeds", _COUNT)
        get("n_seeds", _COUNT)
        column = get("seed_column", _TEXT)
        seed_set = None
        if seeds:
            seed_set = SeedSet(
                seeds=seeds,
                column=column or "seed",
                hypervolumes=hvs,
                median=get("hypervolume_median", _NUMBER),
                min=get("hypervolume_min", _NUMBER),
                max=get("hypervolume_max", _NUMBER),
                missing=missing,
            )
        shortlist = get("shortlist", _TABLE)
        extra = {k: v for k, v in data.items() if k not in _OWNED and k not in _FRONT_KEYS}
        return cls(
            **texts,
            **counts,
            **floats,
            **times,
            settings=dict(settings),
            versions=tables["versions"],
            descriptions=tables["descriptions"],
            feasible=get("feasible", _FLAG),
            design_space=space,
            constraint_limits=limits,
            hazards=numbers("hazards", _TEXT),
            seeds=seed_set,
            shortlist=dict(shortlist) if shortlist is not None else None,
            extra=extra,
        )


# What each key may hold, as data: one check, one shape of message. None (null) is allowed for all.
_TEXT_KEYS = (
    "title",
    "description",
    "cautions",
    "case_file",
    "case_hash",
    "algorithm",
    "status",
    "stop_reason",
    "message",
    "reference_source",
    "store",
    "source",
    "id_column",
)
_COUNT_KEYS = ("seed", "n_evals", "n_gen", "n_failed", "n_cached", "run_id", "n_rows")
_NUMBER_KEYS = ("hypervolume",)
#: Moments, written as ISO 8601 text in UTC (read also as seconds since the epoch, as earlier
#: releases wrote them).
_TIME_KEYS = ("started", "finished")
_ISO = "an ISO 8601 time with its UTC offset, such as '2026-01-01T12:00:00+00:00'"


def iso_time(seconds: float) -> str:
    """Seconds since the epoch as ISO 8601 text in UTC, to the millisecond.

    Examples
    --------
    >>> iso_time(1767268800.25)
    '2026-01-01T12:00:00.250+00:00'
    """
    moment = _dt.datetime.fromtimestamp(float(seconds), _dt.UTC)
    return moment.isoformat(timespec="milliseconds")


def _read_time(value: Any, key: str, bad) -> float | None:
    """A moment of front.json as seconds since the epoch: ISO 8601 text with an offset, or a number."""
    if value is None:
        return None
    if _is(value, _NUMBER) and math.isfinite(value):
        return float(value)
    if isinstance(value, str):
        try:
            moment = _dt.datetime.fromisoformat(value)
        except ValueError:
            moment = None
        if moment is not None and moment.utcoffset() is not None:
            return moment.timestamp()
    raise bad(key, value, _ISO)


_SETTING_KINDS = {
    "population": _COUNT,
    "evaluations": _COUNT,
    "generations": _COUNT,
    "seed": _COUNT,
    "stall_generations": _COUNT,
    "time_limit": _NUMBER,
    "stall_tolerance": _NUMBER,
}
_OBJECTIVE_KINDS = {"name": _TEXT, "goal": _TEXT, "unit": _TEXT, "worst": _NUMBER}
_SPACE_KINDS = {"name": _TEXT, "type": _TEXT, "low": _NUMBER, "high": _NUMBER, "unit": _TEXT}
_LIMIT_KINDS = {"name": _TEXT, "min": _NUMBER, "max": _NUMBER, "unit": _TEXT}
#: Keys this record reads from front.json (the seed-set keys are written by SeedSet.to_json).
_OWNED = frozenset(
    {f.name for f in fields(RunInfo)} - {"extra", "seeds"}
    | {
        "seeds",
        "n_seeds",
        "seed_column",
        "seed_hypervolumes",
        "hypervolume_median",
        "hypervolume_min",
        "hypervolume_max",
        "missing_seeds",
    }
)
#: Keys of front.json that describe the front itself (tradewise.front reads and writes them).
_FRONT_KEYS = frozenset(
    {"format", "objectives", "variables", "constraints", "units", "reference_point", "n_designs"}
)


def _check_item(bad, key: str, item: Mapping[str, Any], kinds: dict[str, str]) -> None:
    for name, kind in kinds.items():
        value = item.get(name)
        if value is not None and not _is(value, kind):
            raise bad(f"{key}.{name}", value, kind)


def _is(value: Any, kind: str) -> bool:
    if kind == _TEXT:
        return isinstance(value, str)
    if kind == _FLAG:
        return isinstance(value, bool)
    if kind == _TABLE:
        return isinstance(value, dict)
    if isinstance(value, bool):
        return False
    if kind == _COUNT:
        return isinstance(value, int)
    return isinstance(value, int | float)


def _kind_of(value: Any) -> str:
    names = {
        str: "text",
        bool: "true/false",
        int: "a number",
        float: "a number",
        list: "a list",
        dict: "a JSON object",
        type(None): "null",
    }
    return f"{names.get(type(value), type(value).__name__)} {quote(value, 40)}"
