"""Turning one design into results: Python-function models and external command models."""

from __future__ import annotations

import contextlib
import importlib.util
import json
import math
import os
import signal
import subprocess
import sys
import tempfile
import threading
import time
import traceback
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from tradewise.case import Case
from tradewise.errors import CaseError, ModelError

__all__ = ["Outcome", "PythonModel", "CommandModel", "make_model", "check_results"]

_STDERR_TAIL = 400


@dataclass
class Outcome:
    """What one evaluation gave: ``status`` is ``"ok"``, ``"failed"`` or ``"timeout"``.

    ``results`` holds every objective and constraint by name (finite floats)
    and any extra outputs the model returned; for a failed design it may be
    empty and ``message`` says why.
    """

    status: str
    results: dict[str, Any] = field(default_factory=dict)
    message: str = ""
    duration: float = 0.0
    worker: str = ""

    @property
    def ok(self) -> bool:
        return self.status == "ok"


def _worker_name() -> str:
    return f"{os.uname().nodename}:{os.getpid()}" if hasattr(os, "uname") else str(os.getpid())


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
            return {}, f"model result has no {name!r} (got keys: {', '.join(map(str, raw)) or 'none'})"
        value = raw[name]
        if isinstance(value, np.generic):
            value = value.item()
        if isinstance(value, bool) or not isinstance(value, int | float):
            return {}, f"model result {name!r} is {value!r}, expected a number"
        if not math.isfinite(value):
            return {}, f"model result {name!r} is {value!r}, expected a finite number"
        results[name] = float(value)
    for key, value in raw.items():
        if key in results:
            continue
        if isinstance(value, np.generic):
            value = value.item()
        if isinstance(value, float) and not math.isfinite(value):
            value = None
        if value is None or isinstance(value, bool | int | float | str):
            results[str(key)] = value
    return results, ""


class PythonModel:
    """A model given as ``evaluate(design: dict) -> dict`` in a Python file beside the case.

    The function is imported lazily, once per process, so the object pickles
    cheaply to worker processes.
    """

    def __init__(self, case: Case) -> None:
        module, function = case.model.split(":")
        self.file = str(case.folder / module)
        self.function = function
        self.required = case.objective_names + case.constraint_names
        self._callable = None

    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["_callable"] = None
        return state

    def load(self):
        """Import the model file and return its function (ModelError when that fails)."""
        if self._callable is None:
            self._callable = _import_function(self.file, self.function)
        return self._callable

    def __call__(self, design: dict[str, Any]) -> Outcome:
        function = self.load()
        start = time.perf_counter()
        try:
            raw = function(dict(design))
        except Exception as exc:  # the designer's model may raise anything; record it
            where = _innermost_frame(exc)
            message = f"{type(exc).__name__}: {exc}{where}"
            return Outcome("failed", {}, message, time.perf_counter() - start, _worker_name())
        duration = time.perf_counter() - start
        results, problem = check_results(raw, self.required)
        if problem:
            return Outcome("failed", results, problem, duration, _worker_name())
        return Outcome("ok", results, "", duration, _worker_name())


_IMPORTED: dict[tuple[str, str], Any] = {}
_IMPORT_LOCK = threading.Lock()


def _import_function(file: str, function: str):
    key = (file, function)
    with _IMPORT_LOCK:
        if key in _IMPORTED:
            return _IMPORTED[key]
        folder = str(Path(file).parent)
        name = f"tradewise_model_{abs(hash(file)):x}"
        spec = importlib.util.spec_from_file_location(name, file)
        if spec is None or spec.loader is None:
            raise ModelError(f"{file}: cannot be imported as a Python module")
        module = importlib.util.module_from_spec(spec)
        sys.path.insert(0, folder)
        try:
            spec.loader.exec_module(module)
        except Exception as exc:
            raise ModelError(f"{file}: importing the model failed: {type(exc).__name__}: {exc}") from None
        finally:
            if sys.path and sys.path[0] == folder:
                sys.path.pop(0)
        target = getattr(module, function, None)
        if not callable(target):
            raise ModelError(f"{file}: {function!r} is not a function")
        _IMPORTED[key] = target
        return target


def _innermost_frame(exc: BaseException) -> str:
    frames = traceback.extract_tb(exc.__traceback__)
    if not frames:
        return ""
    last = frames[-1]
    return f" (at {Path(last.filename).name} line {last.lineno})"


class CommandModel:
    """A model run as an external program with an argument list (never a shell).

    The design is written as a JSON object to the file named by ``{input}``;
    the program writes a JSON object of results to ``{output}``. Each
    evaluation runs in a fresh temporary folder, which is removed on success
    and kept on failure (its path is in the message). A ``timeout`` kills
    the program's whole process group.
    """

    def __init__(self, case: Case, *, keep_root: str | Path | None = None) -> None:
        self.folder = str(case.folder)
        # The program runs in a fresh folder, so arguments naming files of the case are made absolute.
        self.command = [
            str(case.folder / a) if "{" not in a and (case.folder / a).is_file() else a for a in case.command
        ]
        self.timeout = case.timeout
        self.required = case.objective_names + case.constraint_names
        self.keep_root = str(keep_root) if keep_root else None

    def __call__(self, design: dict[str, Any]) -> Outcome:
        work = Path(tempfile.mkdtemp(prefix="tradewise-eval-", dir=self.keep_root))
        input_file, output_file = work / "design.json", work / "results.json"
        input_file.write_text(json.dumps(design, default=_plain), encoding="utf-8")
        args = [
            a.replace("{input}", str(input_file)).replace("{output}", str(output_file)).replace("{case}", self.folder)
            for a in self.command
        ]
        start = time.perf_counter()
        try:
            proc = subprocess.Popen(
                args,
                cwd=work,
                stdin=subprocess.DEVNULL,
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
                start_new_session=True,
            )
        except OSError as exc:
            return Outcome("failed", {}, f"cannot start {args[0]!r}: {exc.strerror or exc} (kept {work})", 0.0, _worker_name())
        try:
            _, stderr = proc.communicate(timeout=self.timeout)
        except subprocess.TimeoutExpired:
            _kill_group(proc)
            proc.communicate()
            duration = time.perf_counter() - start
            return Outcome("timeout", {}, f"no answer within {self.timeout:g} s; stopped (kept {work})", duration, _worker_name())
        duration = time.perf_counter() - start
        tail = stderr.decode("utf-8", "replace").strip()[-_STDERR_TAIL:].replace("\n", " | ")
        if proc.returncode != 0:
            message = f"exited with status {proc.returncode}" + (f": {tail}" if tail else "") + f" (kept {work})"
            return Outcome("failed", {}, message, duration, _worker_name())
        try:
            raw = json.loads(output_file.read_text(encoding="utf-8"))
        except FileNotFoundError:
            return Outcome("failed", {}, f"wrote no {output_file.name} (kept {work})", duration, _worker_name())
        except ValueError as exc:
            return Outcome("failed", {}, f"{output_file.name} is not valid JSON: {exc} (kept {work})", duration, _worker_name())
        results, problem = check_results(raw, self.required)
        if problem:
            return Outcome("failed", results, f"{problem} (kept {work})", duration, _worker_name())
        _remove_tree(work)
        return Outcome("ok", results, "", duration, _worker_name())


def _kill_group(proc: subprocess.Popen) -> None:
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        proc.kill()


def _remove_tree(folder: Path) -> None:
    for path in sorted(folder.rglob("*"), key=lambda p: len(p.parts), reverse=True):
        try:
            path.rmdir() if path.is_dir() else path.unlink()
        except OSError:
            return
    with contextlib.suppress(OSError):
        folder.rmdir()


def _plain(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def make_model(case: Case) -> PythonModel | CommandModel:
    """The callable model of ``case``: ``model(design) -> Outcome``."""
    if case.model is not None:
        return PythonModel(case)
    if case.command is not None:
        return CommandModel(case)
    raise CaseError(f"{case.path}: needs 'model' or 'command'")
