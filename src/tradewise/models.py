"""Turning one design into results: Python-function models and external command models."""

from __future__ import annotations

import contextlib
import importlib.util
import json
import math
import os
import re
import shutil
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


_WORKER: str | None = None


def _forget_worker() -> None:
    global _WORKER
    _WORKER = None


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_worker)


def _worker_name() -> str:
    """Host and process id of this worker (worked out once per process)."""
    global _WORKER
    if _WORKER is None:
        host = os.uname().nodename if hasattr(os, "uname") else "local"
        _WORKER = f"{host}:{os.getpid()}"
    return _WORKER


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
        self.file = os.path.abspath(case.folder / module)
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
        except (Exception, SystemExit) as exc:  # the designer's model may raise or exit; record it
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
    the program writes a JSON object of results to ``{output}``; ``{case}``
    stands for the case folder. Each evaluation runs in a fresh temporary
    folder (its working directory), which also receives the program's
    ``stdout.txt`` and ``stderr.txt``. The folder is removed when the
    evaluation succeeds and kept when it fails; its path is in the message.

    The program leads a process group of its own, and the whole group ends
    with every evaluation, success or failure: helpers it started and left
    running get SIGTERM, then SIGKILL after half a second. A ``timeout``
    (seconds) ends the group the same way; the outcome is ``"timeout"``. A
    non-zero exit status is recorded with the tail of the program's stderr.

    Arguments that name a file in the case folder are made absolute, since
    the program runs elsewhere. A first argument of exactly ``python`` or
    ``python3`` means the Python that runs tradewise (``sys.executable`` of
    the process doing the evaluation), so a case runs with the packages of
    the user's environment whatever ``python3`` on the search path is; write
    a full path to use another interpreter.
    """

    def __init__(self, case: Case, *, keep_root: str | Path | None = None) -> None:
        if not case.command:
            raise CaseError(f"{case.path}: command: got {case.command!r}, expected a list of arguments")
        # The program runs in a folder of its own, so a case given by a relative path (`run my-case/`,
        # `run .`) must still name its files by where they are, not by where the run started.
        folder = Path(os.path.abspath(case.folder))
        self.folder = str(folder)
        self.command = [str(folder / a) if "{" not in a and (folder / a).is_file() else a for a in case.command]
        self.timeout = case.timeout
        self.required = case.objective_names + case.constraint_names
        self.keep_root = str(keep_root) if keep_root else None

    def arguments(self, input_file: str | Path, output_file: str | Path) -> list[str]:
        """The argument list for one evaluation, placeholders filled in."""
        values = {"input": str(input_file), "output": str(output_file), "case": self.folder}
        # One pass per argument: a filled-in path that itself contains "{output}" (a TMPDIR of that
        # name) is never substituted again.
        args = [_PLACEHOLDER.sub(lambda m: values[m.group(1)], a) for a in self.command]
        if args[0] in _PYTHON_NAMES and sys.executable:
            args[0] = sys.executable
        return args

    def __call__(self, design: dict[str, Any]) -> Outcome:
        work = Path(tempfile.mkdtemp(prefix="tradewise-eval-", dir=self.keep_root))
        input_file, output_file = work / "design.json", work / "results.json"
        worker = _worker_name()

        def failed(text: str, duration: float = 0.0, status: str = "failed") -> Outcome:
            return Outcome(status, {}, f"{text} (kept {work})", duration, worker)

        try:
            input_file.write_text(json.dumps(design, default=_plain, allow_nan=False), encoding="utf-8")
        except (TypeError, ValueError) as exc:
            return failed(f"the design cannot be written as JSON: {exc}")
        args = self.arguments(input_file, output_file)
        start = time.perf_counter()
        with open(work / "stdout.txt", "wb") as out, open(work / "stderr.txt", "wb") as err:
            try:
                proc = subprocess.Popen(
                    args, cwd=work, stdin=subprocess.DEVNULL, stdout=out, stderr=err, **_NEW_GROUP
                )
            except OSError as exc:
                return failed(f"cannot start {args[0]!r}: {exc.strerror or exc}")
            _RUNNING.add(proc)
            try:
                proc.wait(timeout=self.timeout)
            except subprocess.TimeoutExpired:
                _end_group(proc)
                return failed(
                    f"no answer within the timeout of {self.timeout:g} s; the program and its process group "
                    "were stopped", time.perf_counter() - start, "timeout",
                )
            except BaseException:
                # Interrupted (Ctrl-C) or killed from outside: the program runs in its own session and
                # would not see the signal, so stop it before leaving.
                _kill_group(proc)
                proc.wait()
                raise
            finally:
                _RUNNING.discard(proc)
        duration = time.perf_counter() - start
        # Helpers the program started may outlive it (a licence daemon, a forked solver); they end
        # with the evaluation, whatever its result.
        _end_group(proc)
        if proc.returncode != 0:
            tail = _tail(work / "stderr.txt")
            how = (f"was killed by signal {_signal_name(-proc.returncode)}" if proc.returncode < 0
                   else f"exited with status {proc.returncode}")
            return failed(f"{Path(args[0]).name} {how}" + (f"; stderr ends: {tail}" if tail else "; stderr is empty"),
                          duration)
        try:
            text = output_file.read_text(encoding="utf-8")
        except FileNotFoundError:
            return failed(f"the program exited normally but wrote no {output_file.name}", duration)
        except (OSError, UnicodeDecodeError) as exc:
            return failed(f"{output_file.name} cannot be read: {exc}", duration)
        try:
            raw = json.loads(text)
        except ValueError as exc:
            return failed(f"{output_file.name} is not valid JSON ({exc})", duration)
        if not isinstance(raw, dict):
            return failed(f"{output_file.name} holds a JSON {type(raw).__name__}, expected an object of results",
                          duration)
        results, problem = check_results(raw, self.required)
        if problem:
            return failed(problem, duration)
        _remove_tree(work)
        return Outcome("ok", results, "", duration, worker)


_PYTHON_NAMES = frozenset({"python", "python3"})
_PLACEHOLDER = re.compile(r"\{(input|output|case)\}")
_RUNNING: set[subprocess.Popen] = set()  # programs of this process now running, for stop_programs()
_NEW_GROUP: dict[str, Any] = (
    {"start_new_session": True} if os.name == "posix"
    else {"creationflags": getattr(subprocess, "CREATE_NEW_PROCESS_GROUP", 0)}
)


def stop_programs() -> None:
    """Kill the process group of every command-model program this process is running.

    For a worker process whose parent has died: its programs run in sessions
    of their own and would otherwise go on alone.
    """
    for proc in list(_RUNNING):
        _kill_group(proc)


_GRACE = 0.5  # seconds a program's process group gets between SIGTERM and SIGKILL


def _end_group(proc: subprocess.Popen, grace: float = _GRACE) -> None:
    """End the program and every process of its group: SIGTERM, ``grace`` seconds, then SIGKILL.

    Returns at once when the program has exited and left nothing behind (the
    usual case); otherwise waits only as long as something is still running.
    """
    if os.name != "posix":
        with contextlib.suppress(OSError):
            proc.kill()
        proc.wait()
        return
    group = proc.pid  # the program leads a session, hence a group, of its own
    if proc.poll() is not None and not _group_running(group):
        return
    with contextlib.suppress(ProcessLookupError, PermissionError):
        os.killpg(group, signal.SIGTERM)
    deadline = time.monotonic() + grace
    while time.monotonic() < deadline:
        if proc.poll() is not None and not _group_running(group):
            return
        time.sleep(0.01)
    with contextlib.suppress(ProcessLookupError, PermissionError):
        os.killpg(group, signal.SIGKILL)
    proc.wait()


def _group_running(group: int) -> bool:
    """Whether a process of ``group`` still runs (zombies left to an init that never reaps do not count)."""
    try:
        os.killpg(group, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return False  # the id now belongs to another user's processes, not to our program
    if not os.path.isdir("/proc/self"):
        return True
    for entry in os.scandir("/proc"):
        if not entry.name.isdigit():
            continue
        try:
            with open(f"/proc/{entry.name}/stat", "rb") as handle:
                fields = handle.read().rsplit(b")", 1)[1].split()
        except (OSError, IndexError):
            continue
        if int(fields[2]) == group and fields[0] not in (b"Z", b"X"):
            return True
    return False


def _kill_group(proc: subprocess.Popen) -> None:
    if os.name == "posix":
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.killpg(proc.pid, signal.SIGKILL)
            return
    with contextlib.suppress(OSError):
        proc.kill()


def _tail(file: Path) -> str:
    try:
        with open(file, "rb") as handle:
            handle.seek(0, os.SEEK_END)
            handle.seek(max(0, handle.tell() - 4 * _STDERR_TAIL))
            text = handle.read().decode("utf-8", "replace")
    except OSError:
        return ""
    return " | ".join(line.strip() for line in text.strip().splitlines() if line.strip())[-_STDERR_TAIL:]


def _signal_name(number: int) -> str:
    try:
        return signal.Signals(number).name
    except ValueError:
        return str(number)


def _remove_tree(folder: Path) -> None:
    shutil.rmtree(folder, ignore_errors=True)


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
