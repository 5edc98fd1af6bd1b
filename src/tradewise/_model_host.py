"""Calling a Python model function on one design, in this process or in a separate one that can be killed.

This module imports the standard library only, so that the separate process
(started as ``python _model_host.py FILE FUNCTION REQUIRED PARENT``, without the
tradewise package and its pandas) is ready in a fraction of a second. It
speaks JSON lines on its stdin and stdout: never pickle, so nothing it sends
back can make the run execute code.
"""

from __future__ import annotations

import importlib.util
import json
import math
import os
import signal
import sys
import threading
import time
import traceback
from pathlib import Path
from typing import Any

_WORKER: str | None = None


def _forget_worker() -> None:
    global _WORKER
    _WORKER = None


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_worker)


def worker_name() -> str:
    """Host and process id of this worker (worked out once per process)."""
    global _WORKER
    if _WORKER is None:
        host = os.uname().nodename if hasattr(os, "uname") else "local"
        _WORKER = f"{host}:{os.getpid()}"
    return _WORKER


def _plain_number(value: Any) -> Any:
    """A numpy scalar as the Python value it holds (numpy is only looked at when the model loaded it)."""
    numpy = sys.modules.get("numpy")
    if numpy is not None and isinstance(value, numpy.generic):
        return value.item()
    return value


def check_results(raw: Any, required: list[str]) -> tuple[dict[str, Any], str]:
    """Check a model's answer; return the cleaned results and '' or an error message.

    Every required name must be present with a finite number; other keys are
    kept as outputs when they are numbers, text or booleans (non-finite
    numbers in outputs become ``None``).
    """
    if not isinstance(raw, dict):
        return {}, f"model returned {type(raw).__name__}, expected a dict of results"
    results: dict[str, Any] = {}
    for name in required:
        if name not in raw:
            return (
                {},
                f"model result has no {name!r} (got keys: {', '.join(map(str, raw)) or 'none'})",
            )
        value = raw[name]
        if type(value) is float and value - value == 0.0:  # the usual answer: a finite float
            results[name] = value
            continue
        value = _plain_number(value)
        if isinstance(value, bool) or not isinstance(value, int | float):
            return {}, f"model result {name!r} is {value!r}, expected a number"
        if not math.isfinite(value):
            return {}, f"model result {name!r} is {value!r}, expected a finite number"
        results[name] = float(value)
    if len(raw) == len(results):
        return results, ""  # no outputs beside the objectives and constraints
    for key, value in raw.items():
        if key in results:
            continue
        value = _plain_number(value)
        if isinstance(value, float) and not math.isfinite(value):
            value = None
        if value is None or isinstance(value, bool | int | float | str):
            results[str(key)] = value
    return results, ""


def evaluate(function, design: dict[str, Any], required: list[str]) -> dict[str, Any]:
    """Call the model function on one design and check its answer; never raises for the model's faults.

    Returns the fields of an outcome: status, results, message, duration, worker.
    """
    return _fields(*call(function, design, required))


def call(function, design: dict[str, Any], required: list[str]) -> tuple[str, dict, str, float]:
    """:func:`evaluate` without the worker's name: status, results, message and duration."""
    start = time.perf_counter()
    try:
        raw = function(dict(design))
    except (Exception, SystemExit) as exc:  # the designer's model may raise or exit; record it
        message = f"{type(exc).__name__}: {exc}{_innermost_frame(exc)}"
        return "failed", {}, message, time.perf_counter() - start
    duration = time.perf_counter() - start
    results, problem = check_results(raw, required)
    return "failed" if problem else "ok", results, problem, duration


def _fields(status: str, results: dict[str, Any], message: str, duration: float) -> dict[str, Any]:
    return {
        "status": status,
        "results": results,
        "message": message,
        "duration": duration,
        "worker": worker_name(),
    }


class ImportProblem(Exception):
    """The model file cannot be imported or has no such function (the message names the file)."""


_IMPORTED: dict[tuple[str, str], Any] = {}
_IMPORT_LOCK = threading.Lock()


def import_function(file: str, function: str):
    """Import ``function`` from the Python file ``file``, once per process."""
    key = (file, function)
    with _IMPORT_LOCK:
        if key in _IMPORTED:
            return _IMPORTED[key]
        folder = str(Path(file).parent)
        name = f"tradewise_model_{abs(hash(file)):x}"
        spec = importlib.util.spec_from_file_location(name, file)
        if spec is None or spec.loader is None:
            raise ImportProblem(f"{file}: cannot be imported as a Python module")
        module = importlib.util.module_from_spec(spec)
        sys.path.insert(0, folder)
        try:
            spec.loader.exec_module(module)
        except Exception as exc:
            raise ImportProblem(
                f"{file}: importing the model failed: {type(exc).__name__}: {exc}"
            ) from None
        finally:
            if sys.path and sys.path[0] == folder:
                sys.path.pop(0)
        target = getattr(module, function, None)
        if not callable(target):
            raise ImportProblem(f"{file}: {function!r} is not a function")
        _IMPORTED[key] = target
        return target


def _innermost_frame(exc: BaseException) -> str:
    frames = traceback.extract_tb(exc.__traceback__)
    if not frames:
        return ""
    last = frames[-1]
    return f" (at {Path(last.filename).name} line {last.lineno})"


def serve(file: str, function_name: str, required: list[str], parent: int) -> None:
    """The separate process: import the model, then answer one JSON line for each design sent.

    ``parent`` is the id of the process that started it, handed over by that
    process (read here, it could already be init's if the run was killed
    while this process started, and the watch below would never end).
    """
    answers = os.fdopen(os.dup(1), "wb")
    os.dup2(2, 1)  # what the model prints must not mix with the answers
    sys.path.pop(0)  # this file's folder (the package) is no place to find the model's imports

    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(0.5)
        if os.name == "posix":
            # The run is gone: end this process and what the model started.
            os.killpg(0, signal.SIGKILL)
        os._exit(1)

    threading.Thread(target=watch, name="tradewise-host-watch", daemon=True).start()

    def answer(message: dict[str, Any]) -> None:
        answers.write(json.dumps(message, allow_nan=False).encode() + b"\n")
        answers.flush()

    try:
        function = import_function(file, function_name)
    except ImportProblem as exc:
        answer({"error": str(exc)})
        return
    answer({"ready": True, "worker": worker_name()})
    for line in sys.stdin.buffer:
        answer(evaluate(function, json.loads(line)["design"], required))


if __name__ == "__main__":
    serve(sys.argv[1], sys.argv[2], json.loads(sys.argv[3]), int(sys.argv[4]))
