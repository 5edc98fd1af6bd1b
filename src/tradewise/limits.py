"""What a designer asks of a front's columns, read from text and applied.

A limit bounds any column of a front (an objective, a variable, a constraint,
an output, a choice's option or a flag): ``mass <= 12``, ``material == stainless 302``.
Per-objective values (weights, targets, tolerances) are read from
``"mass=0.1,stiffness=1"`` or a mapping. :mod:`tradewise.choose`,
:mod:`tradewise.represent`, :mod:`tradewise.diagnose`, the picker and the
command line all read and apply them here, so a limit means the same
everywhere.
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from tradewise import format as _format
from tradewise.errors import DataError
from tradewise.front import Front

__all__ = [
    "Limit",
    "parse_limit",
    "parse_values",
    "check_objective_names",
    "apply_limits",
    "limit_mask",
    "closest_miss",
]


@dataclass(frozen=True)
class Limit:
    """A bound on one column of a front, such as ``mass <= 12`` or ``material == stainless 302``.

    ``op`` is one of ``<=``, ``>=``, ``<``, ``>``, ``==`` and ``!=``. A number
    bounds a numeric column; text (with ``==`` or ``!=``) matches a choice's
    option or a flag (``true``/``false``). A design whose value is missing
    fails the limit.
    """

    column: str
    op: str
    value: float | str

    def __str__(self) -> str:
        shown = self.value if isinstance(self.value, str) else _format.number(self.value)
        return f"{self.column} {self.op} {shown}"

    @property
    def is_text(self) -> bool:
        return isinstance(self.value, str)

    def holds(self, values: np.ndarray) -> np.ndarray:
        """Boolean mask of the ``values`` that keep within the limit."""
        if self.is_text:
            wanted = _text_key(self.value)
            same = np.array([_text_key(v) == wanted for v in np.asarray(values, dtype=object)])
            same = same.astype(bool) if len(same) else np.zeros(0, dtype=bool)
            return same if self.op == "==" else ~same
        with np.errstate(invalid="ignore"):
            return np.asarray(
                _OPS[self.op](np.asarray(values, dtype=float), self.value), dtype=bool
            )

    def miss(self, values: np.ndarray) -> np.ndarray:
        """By how much each value misses a numeric limit (0 where it holds, in the column's unit)."""
        values = np.asarray(values, dtype=float)
        if self.op in ("<=", "<"):
            gap = values - self.value
        elif self.op in (">=", ">"):
            gap = self.value - values
        else:
            gap = np.abs(values - self.value)
        gap = np.where(self.holds(values), 0.0, np.maximum(gap, 0.0))
        return np.where(np.isnan(values), np.inf, gap)


def _text_key(value: object) -> str:
    """Text as a limit compares it: flags as true/false, everything else as written."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool):
        return "true" if value else "false"
    text = str(value).strip()
    return text.lower() if text.lower() in ("true", "false") else text


_OPS = {
    "<=": np.less_equal,
    ">=": np.greater_equal,
    "<": np.less,
    ">": np.greater,
    "==": np.equal,
    "!=": np.not_equal,
}
_LIMIT = re.compile(
    r"^\s*(?P<column>[^<>=!]+?)\s*(?P<op><=|>=|==|!=|=|<|>)\s*(?P<value>[^<>=]*?)\s*$"
)
_UNIT_SUFFIX = re.compile(r"\s*\[[^\[\]]*\]$")


def parse_limit(text: str) -> Limit:
    """Read a limit such as ``"mass <= 12"``, ``"range>=40"`` or ``"material==stainless 302"``.

    A unit written after the column name (``"mass [g] <= 12"``) is dropped. A
    bound that is not a number is text, allowed with ``==`` and ``!=`` only.

    Raises
    ------
    DataError
        When the text is not ``COLUMN OP VALUE`` with ``OP`` one of
        ``<=``, ``>=``, ``<``, ``>``, ``=``, ``==``, ``!=``.

    Examples
    --------
    >>> print(parse_limit("mass<=12"))
    mass <= 12
    >>> print(parse_limit("material != stainless 302"))
    material != stainless 302
    """
    if isinstance(text, Limit):
        return text
    match = _LIMIT.match(str(text))
    if not match or not match["value"]:
        raise DataError(
            f"limit {text!r}: expected COLUMN OP VALUE with OP one of <=, >=, <, >, ==, != "
            "(for example 'mass <= 12' or 'material == stainless 302')"
        )
    column = _UNIT_SUFFIX.sub("", match["column"]).strip()
    op = "==" if match["op"] == "=" else match["op"]
    try:
        value: float | str = float(match["value"])
    except ValueError:
        value = match["value"].strip()
    if isinstance(value, float) and not math.isfinite(value):
        raise DataError(f"limit {text!r}: the bound {match['value']!r} is not a finite number")
    if isinstance(value, str) and op not in ("==", "!="):
        raise DataError(
            f"limit {text!r}: {value!r} is not a number; text goes with == or != (an option of a "
            "choice, or true/false for a flag)"
        )
    return Limit(column, op, value)


def parse_values(text: str | Mapping[str, float] | None, *, what: str) -> dict[str, float]:
    """Read ``"cost=2,mass=1"`` into ``{"cost": 2.0, "mass": 1.0}``.

    ``what`` names the option in error messages (``"weights"``, ``"target"``).
    A mapping is passed through after checking that its values are numbers.
    """
    if text is None:
        return {}
    if isinstance(text, Mapping):
        items = list(text.items())
    else:
        items = []
        for part in str(text).split(","):
            if not part.strip():
                continue
            name, sep, value = part.partition("=")
            if not sep or not name.strip():
                raise DataError(
                    f"{what} {text!r}: expected NAME=NUMBER pairs separated by commas, got {part.strip()!r}"
                )
            items.append((_UNIT_SUFFIX.sub("", name.strip()), value.strip()))
    values: dict[str, float] = {}
    for name, value in items:
        try:
            number = float(value)
        except (TypeError, ValueError):
            number = math.nan
        if not math.isfinite(number):
            raise DataError(f"{what}: the value {value!r} for {name!r} is not a finite number")
        values[str(name)] = number
    return values


def apply_limits(front: Front, limits: Iterable[Limit | str]) -> Front:
    """The designs of ``front`` that meet every limit, as a new front.

    Parameters
    ----------
    front : Front
        Any front; limits may name objectives, variables, constraints or other
        numeric columns.
    limits : iterable of Limit or str
        Limits such as ``"mass <= 12"``.

    Raises
    ------
    DataError
        When a limit is malformed, names an unknown column, or names a column
        that holds text.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [1.0, 2.0, 3.0], "mass": [3.0, 2.0, 1.0]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> len(apply_limits(front, ["mass <= 2"]))
    2
    """
    mask = limit_mask(front, limits)
    return front.with_table(front.table.loc[mask])


def limit_mask(front: Front, limits: Iterable[Limit | str]) -> np.ndarray:
    """Boolean mask of the designs of ``front`` that meet every limit (see :func:`apply_limits`)."""
    mask = np.ones(len(front), dtype=bool)
    for limit in limits:
        limit = parse_limit(limit)
        if limit.column not in front.table.columns:
            close = difflib.get_close_matches(
                limit.column, [str(c) for c in front.table.columns], n=1
            )
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            raise DataError(
                f"limit '{limit}': no column {limit.column!r} in the front{hint}; "
                f"columns: {', '.join(map(str, front.table.columns))}"
            )
        raw = front.table[limit.column]
        if limit.is_text or raw.dtype == bool or raw.dtype == object and limit.op in ("==", "!="):
            if not limit.is_text and raw.dtype != bool:
                # an option written as a number ("alloy == 6063") matches its text
                number = float(limit.value)
                limit = Limit(
                    limit.column,
                    limit.op,
                    str(int(number)) if number.is_integer() else repr(number),
                )
            mask &= limit.holds(raw.to_numpy(dtype=object))
            continue
        values = pd.to_numeric(raw, errors="coerce")
        text = values.isna() & raw.notna()
        if text.any():
            row = int(np.flatnonzero(text.to_numpy())[0])
            raise DataError(
                f"limit '{limit}': column {limit.column!r} holds {raw.iloc[row]!r} in {front.design_name(row)}, "
                "not a number; a limit on text takes == or != (for example "
                f"'{limit.column} == {raw.iloc[row]}')"
            )
        mask &= limit.holds(values.to_numpy(dtype=float, na_value=np.nan))
    return mask


def closest_miss(front: Front, limits: Iterable[Limit | str]) -> str:
    """A sentence naming the design that comes closest to meeting ``limits`` and what it misses by.

    Closeness is the sum over the limits of each miss as a share of its
    column's range on the front (a text limit missed counts 1).

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [1.0, 2.0, 3.0], "mass": [3.0, 2.0, 1.0]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> closest_miss(front, ["cost <= 1.5", "mass <= 1.8"])
    'the closest is row 2 (cost 2, mass 2), which misses cost <= 1.5 by 0.5 and mass <= 1.8 by 0.2'
    """
    limits = [parse_limit(limit) for limit in limits]
    total = np.zeros(len(front))
    misses = []
    for limit in limits:
        raw = front.table[limit.column]
        if limit.is_text or raw.dtype == bool or raw.dtype == object:
            gap = (~limit.holds(raw.to_numpy(dtype=object))).astype(float)
            total += gap
            misses.append(gap)
            continue
        values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        gap = limit.miss(values)
        span = float(np.nanmax(values) - np.nanmin(values)) if np.isfinite(values).any() else 0.0
        total += gap / (span if span > 0 else max(abs(float(limit.value)), 1.0))
        misses.append(gap)
    best = int(np.argmin(total))
    record = front.table.iloc[best]
    shown = ", ".join(
        f"{o.name} {_format.quantity(record[o.name], front.units.get(o.name, o.unit))}"
        for o in front.objectives
    )
    missed = []
    for limit, gap in zip(limits, misses, strict=True):
        if gap[best] > 0:
            unit = front.units.get(limit.column, "")
            amount = "" if limit.is_text else f" by {_format.quantity(gap[best], unit)}"
            missed.append(f"{limit}{amount}")
    return (
        f"the closest is {front.design_name(best)} ({shown}), which misses {' and '.join(missed)}"
    )


def check_objective_names(front: Front, values: Mapping[str, float], what: str) -> None:
    """Raise :class:`DataError` naming the first key of ``values`` that is not an objective of ``front``."""
    for name in values:
        if name not in front.objective_names:
            raise DataError(
                f"{what}: {name!r} is not an objective of this front; objectives: "
                f"{', '.join(front.objective_names)}"
            )
