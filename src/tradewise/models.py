"""Turning one design into results: Python-function models and external command models."""

from __future__ import annotations

import atexit
import contextlib
import itertools
import json
import operator
import os
import queue
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from tradewise import _model_host as _host
from tradewise._model_host import check_results
from tradewise.case import Case
from tradewise.errors import CaseError, ModelError

__all__ = [
    "Outcome",
    "PythonModel",
    "BatchModel",
    "CommandModel",
    "make_model",
    "check_results",
]

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
    #: The archive row holding this evaluation, once it has one.
    eval_id: int | None = None

    @property
    def ok(self) -> bool:
        return self.status == "ok"


class PythonModel:
    """A model given as ``evaluate(design: dict) -> dict`` in a Python file beside the case.

    The function is imported lazily, once per process, so the object pickles
    cheaply to worker processes.

    Without a ``timeout`` the function runs in the calling process. With one,
    it runs in a separate Python process of this process's own (started once
    and reused, since a hanging function cannot be stopped inside a process):
    a design that takes longer than the timeout is recorded as ``"timeout"``,
    that process and everything it started are killed, and the next design
    gets a new one. Its output to stdout goes to stderr there.
    """

    def __init__(self, case: Case) -> None:
        module, function = case.model.split(":")
        self.file = os.path.abspath(case.folder / module)
        self.function = function
        self.required = case.objective_names + case.constraint_names
        self.timeout = case.timeout
        self._callable = None

    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["_callable"] = None
        return state

    def __setstate__(self, state: dict[str, Any]) -> None:
        state.setdefault("timeout", None)
        self.__dict__.update(state)

    def load(self):
        """Import the model file and return its function (ModelError when that fails)."""
        if self._callable is None:
            try:
                self._callable = _host.import_function(self.file, self.function)
            except _host.ImportProblem as exc:
                raise ModelError(str(exc)) from None
        return self._callable

    def __call__(self, design: dict[str, Any]) -> Outcome:
        if self.timeout is not None:
            return _evaluate_guarded(self.file, self.function, self.required, self.timeout, design)
        return Outcome(
            *_host.call(self._callable or self.load(), design, self.required), _host.worker_name()
        )


class BatchModel:
    """A model given as ``evaluate(designs: DataFrame)`` that evaluates many designs in one call.

    The function receives one row per design, with the case's variable names
    as columns, and returns a DataFrame or a mapping of arrays with one row
    per design, in the same order. A row whose objectives or constraints are
    missing, NaN or infinite fails that design alone; an exception in the
    call fails every design of the call, each with the exception's message.
    Calling the object with a list of designs gives one :class:`Outcome` per
    design; the executors hand each worker a share of a generation.
    """

    #: Executors split a generation into shares for a batch model instead of sending designs one by one.
    batch = True

    def __init__(self, case: Case) -> None:
        module, function = case.model.split(":")
        self.file = os.path.abspath(case.folder / module)
        self.function = function
        self.columns = case.variable_names
        self.required = case.objective_names + case.constraint_names
        self._callable = None

    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["_callable"] = None
        return state

    load = PythonModel.load

    def table(self, designs: list[dict[str, Any]]):
        """The designs as the DataFrame the function receives: one row a design, a column a variable."""
        import pandas as pd

        pick = operator.itemgetter(*self.columns)  # a design's values in column order, in one call
        rows = [pick(design) for design in designs] if len(self.columns) > 1 else []
        if rows and set(map(type, itertools.chain.from_iterable(rows))) == {float}:
            # Reals only (the usual batch model): one block of floats, built at once.
            return pd.DataFrame(np.array(rows, dtype=float), columns=self.columns)
        return pd.DataFrame.from_records(designs, columns=self.columns)

    def __call__(self, designs: list[dict[str, Any]]) -> list[Outcome]:
        function = self._callable or self.load()
        worker = _host.worker_name()
        n = len(designs)
        if not n:
            return []
        table = self.table(designs)
        start = time.perf_counter()
        try:
            raw = function(table)
        except (Exception, SystemExit) as exc:  # the designer's model may raise; every design fails
            message = (
                f"the batch call failed: {type(exc).__name__}: {exc}{_host._innermost_frame(exc)}"
            )
            share = (time.perf_counter() - start) / n
            return [Outcome("failed", {}, message, share, worker) for _ in range(n)]
        share = (time.perf_counter() - start) / n
        return [
            Outcome("failed" if problem else "ok", results, problem, share, worker)
            for results, problem in check_table(raw, n, self.required)
        ]


def check_table(raw: Any, n: int, required: list[str]) -> list[tuple[dict[str, Any], str]]:
    """Check a batch model's answer for ``n`` designs: (results, '' or an error message) per design.

    The same rules as :func:`check_results`, applied a column at a time.
    """
    import pandas as pd

    def every(problem: str) -> list[tuple[dict[str, Any], str]]:
        return [({}, problem) for _ in range(n)]

    quick = _finite_floats(raw, n, required)
    if quick is not None:
        return [(dict(zip(required, row, strict=True)), "") for row in quick.tolist()]

    if isinstance(raw, pd.DataFrame):
        table = raw.reset_index(drop=True)
    elif isinstance(raw, dict) or hasattr(raw, "keys"):
        try:
            table = pd.DataFrame({str(k): np.asarray(raw[k]).reshape(-1) for k in raw})
        except ValueError as exc:
            return every(f"batch model returned arrays that do not form a table: {exc}")
    else:
        return every(
            f"batch model returned {type(raw).__name__}, expected a DataFrame or a mapping of arrays"
        )
    if len(table) != n:
        return every(f"batch model returned {len(table)} rows for {n} designs")
    table.columns = [str(c) for c in table.columns]
    missing = [name for name in required if name not in table.columns]
    if missing:
        return every(
            f"model result has no {missing[0]!r} (got columns: {', '.join(table.columns) or 'none'})"
        )
    values = np.empty((n, len(required)))
    for j, name in enumerate(required):
        column = table[name]
        if column.dtype == bool or not (
            pd.api.types.is_numeric_dtype(column) or column.dtype == object
        ):
            return every(f"model result {name!r} is of type {column.dtype}, expected numbers")
        values[:, j] = pd.to_numeric(column, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    good = np.isfinite(values).all(axis=1)
    extra = [c for c in table.columns if c not in set(required)]
    others = (
        table[extra].astype(object).where(table[extra].notna(), None).to_dict("records")
        if extra
        else [{}] * n
    )
    checked: list[tuple[dict[str, Any], str]] = []
    for i, row in enumerate(values.tolist()):
        if not good[i]:
            j = int(np.flatnonzero(~np.isfinite(values[i]))[0])
            given = table[required[j]].iloc[i]
            given = given.item() if isinstance(given, np.generic) else given
            checked.append(
                ({}, f"model result {required[j]!r} is {given!r}, expected a finite number")
            )
            continue
        results = dict(zip(required, row, strict=True))
        for key, value in others[i].items():
            value = value.item() if isinstance(value, np.generic) else value
            if isinstance(value, float) and not np.isfinite(value):
                value = None
            if value is None or isinstance(value, bool | int | float | str):
                results[key] = value
        checked.append((results, ""))
    return checked


def _finite_floats(raw: Any, n: int, required: list[str]) -> np.ndarray | None:
    """The usual answer of a batch model as a table of values, or None to check it in full.

    The usual answer is a dict holding exactly the objectives and constraints,
    each an array of ``n`` finite floats; anything else (a DataFrame, outputs
    beside them, other types, a value that is not finite) is left to the full
    checks, which give the same results and say what is wrong.
    """
    if type(raw) is not dict or len(raw) != len(required):
        return None
    columns = []
    for name in required:
        value = raw.get(name)
        if type(value) is not np.ndarray or value.dtype.kind != "f" or value.size != n:
            return None
        columns.append(value.reshape(-1))
    values = np.column_stack(columns).astype(float, copy=False) if columns else np.empty((n, 0))
    return values if np.isfinite(values).all() else None


# ------------------------------------------------------------------ Python models under a timeout
# The separate process ("host") runs tradewise/_model_host.py and speaks JSON lines over its stdin
# and stdout: never pickle, so nothing it sends back can make this process run code.
_HOST_START = 60.0  # seconds a host may take to import the model, on top of the timeout
_IDLE_HOSTS: dict[tuple[str, str], list[_Host]] = {}
_ALL_HOSTS: set[_Host] = set()
_HOSTS_LOCK = threading.Lock()


class _HostGone(Exception):
    """The host process ended or did not answer in time."""


class _Host:
    """One Python process that imports a model function and evaluates designs sent to it."""

    def __init__(self, file: str, function: str, required: list[str], start_within: float) -> None:
        self.proc = subprocess.Popen(
            [
                sys.executable,
                _host.__file__,
                file,
                function,
                json.dumps(required),
                str(os.getpid()),
            ],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            **_NEW_GROUP,
        )
        self.name = ""
        self._lines: queue.Queue[bytes | None] = queue.Queue()
        threading.Thread(target=self._read, name="tradewise-model-host", daemon=True).start()
        with _HOSTS_LOCK:
            _ALL_HOSTS.add(self)
        answer = self.receive(start_within)
        if "error" in answer:
            self.stop()
            raise ModelError(answer["error"])
        self.name = str(answer.get("worker", ""))

    def _read(self) -> None:
        for line in self.proc.stdout:
            self._lines.put(line)
        self._lines.put(None)

    def receive(self, within: float) -> dict[str, Any]:
        try:
            line = self._lines.get(timeout=within)
        except queue.Empty:
            raise _HostGone("timeout") from None
        if line is None:
            raise _HostGone("ended")
        try:
            answer = json.loads(line)
        except ValueError:
            answer = None
        if not isinstance(answer, dict):
            raise _HostGone("garbled")
        return answer

    def send(self, line: bytes) -> None:
        try:
            self.proc.stdin.write(line)
            self.proc.stdin.flush()
        except (BrokenPipeError, OSError):
            raise _HostGone("ended") from None

    def how_it_ended(self) -> str:
        try:
            code = self.proc.wait(timeout=1.0)
        except subprocess.TimeoutExpired:
            return "stopped answering"
        if code < 0:
            return f"was killed by signal {_signal_name(-code)}"
        return f"exited with status {code}"

    def stop(self) -> None:
        """Kill the host and everything it started, and reap it."""
        _kill_group(self.proc)
        with contextlib.suppress(OSError):
            self.proc.stdin.close()
        self.proc.wait()
        with _HOSTS_LOCK:
            _ALL_HOSTS.discard(self)


def _evaluate_guarded(
    file: str, function: str, required: list[str], timeout: float, design: dict[str, Any]
) -> Outcome:
    """Evaluate one design in a host process; past ``timeout`` seconds the host is killed."""
    try:
        request = json.dumps({"design": design}, default=_plain, allow_nan=False).encode() + b"\n"
    except (TypeError, ValueError) as exc:
        return Outcome(
            "failed",
            {},
            f"the design cannot be sent to the model's process: {exc}",
            0.0,
            _host.worker_name(),
        )
    key = (file, function)
    with _HOSTS_LOCK:
        idle = _IDLE_HOSTS.setdefault(key, [])
        host = idle.pop() if idle else None
    start = time.perf_counter()
    if host is None:
        try:
            host = _Host(file, function, required, _HOST_START + timeout)
        except _HostGone:
            return Outcome(
                "failed",
                {},
                f"the process for the model did not start within {_HOST_START + timeout:g} s "
                "(is importing the model file that slow?)",
                time.perf_counter() - start,
                _host.worker_name(),
            )
    start = time.perf_counter()
    try:
        host.send(request)
        answer = host.receive(timeout)
    except _HostGone as gone:
        duration = time.perf_counter() - start
        if str(gone) == "timeout":
            host.stop()
            return Outcome(
                "timeout",
                {},
                f"no answer within the timeout of {timeout:g} s; the model's process "
                "was stopped and a new one takes the next design",
                duration,
                host.name,
            )
        how = host.how_it_ended()
        host.stop()
        return Outcome(
            "failed",
            {},
            f"the model's process {how} while evaluating this design "
            "(a crash, os._exit or the out-of-memory killer)",
            duration,
            host.name,
        )
    except BaseException:
        host.stop()  # interrupted: the host may be busy with this design; do not leave it running
        raise
    with _HOSTS_LOCK:
        _IDLE_HOSTS.setdefault(key, []).append(host)
    return Outcome(
        str(answer.get("status", "failed")),
        dict(answer.get("results") or {}),
        str(answer.get("message", "")),
        float(answer.get("duration", 0.0)),
        str(answer.get("worker", "")),
    )


def stop_model_processes() -> None:
    """Kill every host process this process started (at exit, or when its own parent has gone)."""
    with _HOSTS_LOCK:
        hosts = list(_ALL_HOSTS)
        _IDLE_HOSTS.clear()
    for host in hosts:
        host.stop()


def _forget_hosts() -> None:
    """After a fork: the hosts belong to the parent; this process starts its own when it needs them."""
    global _HOSTS_LOCK
    _HOSTS_LOCK = threading.Lock()
    _IDLE_HOSTS.clear()
    _ALL_HOSTS.clear()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_hosts)
atexit.register(stop_model_processes)


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
            raise CaseError(
                f"{case.path}: command: got {case.command!r}, expected a list of arguments"
            )
        # The program runs in a folder of its own, so a case given by a relative path (`run my-case/`,
        # `run .`) must still name its files by where they are, not by where the run started.
        folder = Path(os.path.abspath(case.folder))
        self.folder = str(folder)
        self.command = [
            str(folder / a) if "{" not in a and (folder / a).is_file() else a for a in case.command
        ]
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
        worker = _host.worker_name()

        def failed(text: str, duration: float = 0.0, status: str = "failed") -> Outcome:
            return Outcome(status, {}, f"{text} (kept {work})", duration, worker)

        try:
            input_file.write_text(
                json.dumps(design, default=_plain, allow_nan=False), encoding="utf-8"
            )
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
                    "were stopped",
                    time.perf_counter() - start,
                    "timeout",
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
            how = (
                f"was killed by signal {_signal_name(-proc.returncode)}"
                if proc.returncode < 0
                else f"exited with status {proc.returncode}"
            )
            return failed(
                f"{Path(args[0]).name} {how}"
                + (f"; stderr ends: {tail}" if tail else "; stderr is empty"),
                duration,
            )
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
            return failed(
                f"{output_file.name} holds a JSON {type(raw).__name__}, expected an object of results",
                duration,
            )
        results, problem = check_results(raw, self.required)
        if problem:
            return failed(problem, duration)
        _remove_tree(work)
        return Outcome("ok", results, "", duration, worker)


_PYTHON_NAMES = frozenset({"python", "python3"})
_PLACEHOLDER = re.compile(r"\{(input|output|case)\}")
_RUNNING: set[subprocess.Popen] = set()  # programs of this process now running, for stop_programs()
_NEW_GROUP: dict[str, Any] = (
    {"start_new_session": True}
    if os.name == "posix"
    else {"creationflags": getattr(subprocess, "CREATE_NEW_PROCESS_GROUP", 0)}
)


def stop_programs() -> None:
    """Kill the process group of every command-model program this process is running.

    For a worker process whose parent has died: its programs run in sessions
    of their own and would otherwise go on alone.
    """
    for proc in list(_RUNNING):
        _kill_group(proc)
    stop_model_processes()


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
    return " | ".join(line.strip() for line in text.strip().splitlines() if line.strip())[
        -_STDERR_TAIL:
    ]


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


def make_model(case: Case) -> PythonModel | BatchModel | CommandModel:
    """The callable model of ``case``: ``model(design) -> Outcome``, or for a batch model
    ``model(designs) -> [Outcome, ...]``."""
    if case.model is not None and case.batch:
        return BatchModel(case)
    if case.model is not None:
        return PythonModel(case)
    if case.command is not None:
        return CommandModel(case)
    raise CaseError(f"{case.path}: needs 'model' or 'command'")
