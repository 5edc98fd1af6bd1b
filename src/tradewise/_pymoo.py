"""The search state of a pymoo genetic algorithm as plain data, and the algorithm rebuilt from it.

An archive is data: nothing read from it may run code. So the state a run
resumes from is not the pickled algorithm but what the algorithm's next
proposals depend on, as numbers: the surviving population (its encoded
designs, objective and constraint values, and the per-design marks the
survival step set, such as rank and crowding distance), the random
generator's state, the counters, and for NSGA-III the normalisation that
survival carries from generation to generation. Everything else (operators,
reference directions, the problem) is rebuilt from the case and the
settings, exactly as the run built it, so the resumed search proposes what
the uninterrupted run would have.
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np
from pymoo.core.population import Population
from pymoo.problems.static import StaticProblem

from tradewise.errors import StoreError

__all__ = ["STATE_FORMAT", "encode_state", "decode_state", "search_state", "restore_state"]

STATE_FORMAT = "tradewise-search-state/1"

# The normalisation NSGA-III's survival keeps between generations (pymoo 0.6.2).
_NORM_FIELDS = ("ideal_point", "worst_point", "nadir_point", "extreme_points")


def search_state(
    algorithm, *, generation: int, eval_ids: list[int] | None = None
) -> dict[str, Any]:
    """The plain-data state of ``algorithm`` after ``generation`` (see the module docstring)."""
    pop = algorithm.pop
    marks: dict[str, Any] = {}
    names = sorted({name for ind in pop for name in ind.data})
    for name in names:
        values = [ind.data.get(name) for ind in pop]
        present = [v for v in values if v is not None]
        kind = (
            "int"
            if all(isinstance(v, int | np.integer) and not isinstance(v, bool) for v in present)
            else "float"
        )
        marks[name] = {
            "kind": kind,
            "values": [None if v is None else _number(v, kind) for v in values],
        }
    state: dict[str, Any] = {
        "format": STATE_FORMAT,
        "generation": int(generation),
        "n_iter": int(algorithm.n_iter),
        "n_eval": int(algorithm.evaluator.n_eval),
        "random": _plain(algorithm.random_state.bit_generator.state),
        "X": _matrix(pop.get("X")),
        "F": _matrix(pop.get("F")),
        "G": _matrix(pop.get("G")) if algorithm.problem.n_ieq_constr else None,
        "marks": marks,
        "eval_ids": list(eval_ids) if eval_ids is not None else None,
    }
    norm = getattr(getattr(algorithm, "survival", None), "norm", None)
    if norm is not None:
        state["normalisation"] = {
            name: None
            if getattr(norm, name) is None
            else np.asarray(getattr(norm, name), float).tolist()
            for name in _NORM_FIELDS
        }
    return state


def restore_state(algorithm, state: dict[str, Any], *, where: str) -> None:
    """Put ``algorithm`` (set up afresh for the same case and settings) in the saved ``state``.

    Raises :class:`StoreError` naming ``where`` when the state does not fit
    the algorithm (another number of variables, objectives or constraints).
    """
    problem = algorithm.problem
    X = _array(state, "X", where)
    F = _array(state, "F", where)
    n = len(X)
    if X.ndim != 2 or X.shape[1] != problem.n_var or F.shape != (n, problem.n_obj) or n == 0:
        raise StoreError(
            f"{where}: the saved search state does not fit the case "
            f"({problem.n_var} variables, {problem.n_obj} objectives)"
        )
    values = {"F": F}
    if problem.n_ieq_constr:
        G = _array(state, "G", where)
        if G.shape != (n, problem.n_ieq_constr):
            raise StoreError(
                f"{where}: the saved search state does not fit the case's "
                f"{problem.n_ieq_constr} constraint columns"
            )
        values["G"] = G
    pop = Population.new(X=X)
    algorithm.evaluator.eval(StaticProblem(problem, **values), pop)
    marks = state.get("marks") or {}
    if not isinstance(marks, dict):
        raise StoreError(f"{where}: the saved search state's marks are not a table")
    for name, column in marks.items():
        if not isinstance(column, dict) or len(column.get("values") or []) != n:
            raise StoreError(
                f"{where}: the saved search state's mark {str(name)[:40]!r} is malformed"
            )
        cast = int if column.get("kind") == "int" else float
        for ind, value in zip(pop, column["values"], strict=True):
            # Set one by one: a mark some designs lack (None) stays missing on them.
            ind.data[str(name)] = None if value is None else cast(_float(value))
    algorithm.pop = pop
    algorithm.off = pop
    algorithm.is_initialized = True
    algorithm.n_iter = _count(state, "n_iter", where)
    algorithm.evaluator.n_eval = _count(state, "n_eval", where)
    try:
        algorithm.random_state.bit_generator.state = state["random"]
    except (KeyError, TypeError, ValueError) as exc:
        raise StoreError(
            f"{where}: the saved random generator state cannot be used ({exc})"
        ) from None
    norm = getattr(getattr(algorithm, "survival", None), "norm", None)
    saved_norm = state.get("normalisation")
    if norm is not None and isinstance(saved_norm, dict):
        for name in _NORM_FIELDS:
            value = saved_norm.get(name)
            setattr(norm, name, None if value is None else np.asarray(value, dtype=float))
    if hasattr(algorithm.survival, "opt"):
        algorithm.survival.opt = pop[pop.get("rank") == 0] if "rank" in marks else pop
    algorithm._set_optimum()


def encode_state(state: dict[str, Any]) -> bytes:
    """The state as UTF-8 JSON text (infinities written as JSON's usual ``Infinity``)."""
    return json.dumps(state, separators=(",", ":")).encode("utf-8")


def decode_state(blob: bytes | str) -> dict[str, Any] | None:
    """The state read back from its JSON text; ``None`` for anything else (e.g. an old pickled state).

    Only JSON is ever parsed: a saved state can hold numbers and text, never code.
    """
    try:
        text = (
            blob.decode("utf-8") if isinstance(blob, bytes | bytearray | memoryview) else str(blob)
        )
        state = json.loads(text)
    except (UnicodeDecodeError, ValueError, TypeError):
        return None
    if not isinstance(state, dict) or state.get("format") != STATE_FORMAT:
        return None
    return state


def _plain(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def _number(value: Any, kind: str) -> int | float:
    if kind == "int":
        return int(value)
    return float(value)


def _matrix(values: Any) -> list[list[float]]:
    return np.asarray(values, dtype=float).tolist()


def _float(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise StoreError("the saved search state holds a value that is not a number")
    return float(value)


def _array(state: dict[str, Any], key: str, where: str) -> np.ndarray:
    rows = state.get(key)
    try:
        if not isinstance(rows, list) or not all(isinstance(r, list) for r in rows):
            raise TypeError
        array = np.asarray([[_float(v) for v in row] for row in rows], dtype=float)
    except (TypeError, ValueError, StoreError):
        raise StoreError(
            f"{where}: the saved search state's {key} is not a table of numbers"
        ) from None
    if array.ndim != 2 or (key == "X" and not np.isfinite(array).all()):
        raise StoreError(
            f"{where}: the saved search state's {key} is not a table of finite numbers"
        )
    return array


def _count(state: dict[str, Any], key: str, where: str) -> int:
    value = state.get(key)
    if (
        isinstance(value, bool)
        or not isinstance(value, int)
        or value < 0
        or not math.isfinite(value)
    ):
        raise StoreError(f"{where}: the saved search state's {key} is not a count")
    return value
