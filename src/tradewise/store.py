"""The SQLite archive of runs, every evaluation and the generation history.

Why the writer is a process of its own (tradewise/_archive_writer.py, fed through a pipe) and not
a thread of the search process fed through a queue, which would be about 230 lines shorter and
need no pickle: both were measured side by side with tests/benchmarks/bench_archive.py (10,000
trivial evaluations, writers in turn in one run; the thread committed on its own connection,
500 rows a statement). Median of the paired thread/process time ratios over four runs of the
benchmark: 1.056 and 1.068 (15 repeats each), 1.007 and 1.106 (25 each); of the fastest runs:
1.11, 1.12, 1.10 and 0.96. The thread keeps the encoding of every row on the search's interpreter
lock (about 0.05 s of 0.1 s of its work a run), while the process does all of it on another CPU,
so the thread was not within 5 % and the process stays. Both passed the kill -9 tests
(tests/test_resume.py); designs evaluated again after a kill, three tries each, thread against
process: in-process 2, 2, 3 against 2, 3, 3; two workers 8, 2, 2 against 9, 14, 18; first
generation 9, 9, 9 against 3, 2, 3. The process also keeps what it was handed when only the search
process is killed. The module is a little over 800 lines because the two links to the writer
(process, and in-process fallback) live beside the Store they serve.
"""

from __future__ import annotations

import contextlib
import itertools
import json
import logging
import math
import pickle
import select
import sqlite3
import struct
import subprocess
import sys
import threading
import time
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from tradewise import _archive_writer
from tradewise.errors import StoreError

__all__ = ["Store", "open_store", "SCHEMA_VERSION"]

SCHEMA_VERSION = 2
# Evaluations wait at most this long in this process before they go to the writer, which commits
# them at most 0.4 s later (COMMIT_EVERY in the writer program): together well within a second.
_HAND_OVER_EVERY = 0.1
_TICK = 0.05
# Evaluation ids reserved at a time; the next block is asked for half a block ahead.
_ID_BLOCK = 4096
# How long "this case has no evaluations from other runs" is trusted before asking the file again.
_OTHERS_TTL = 1.0
_SQLITE_HEADER = b"SQLite format 3\x00"
# Bytes the pipe to the writer process may hold (Linux allows up to 1 MB to any user by default).
_PIPE_SIZE = 1 << 20
# The first message to a writer process: answer 0 (it tells that the process runs).
_FIRST = pickle.dumps(("sync", 0), protocol=pickle.HIGHEST_PROTOCOL)
# Messages kept for a writer process that has not answered yet before the search waits for it.
_UNANSWERED_MOST = 64
#: Seconds to wait for another process to release a locked archive before stopping with a StoreError.
LOCK_WAIT = 30.0
#: Seconds of waiting after which the wait is announced (on the "tradewise" logger, which prints to
#: standard error when nothing else is set up).
LOCK_NOTICE = 1.0
_log = logging.getLogger("tradewise")

# Schema 2 (schema 1 was written by tradewise 0.1.0):
# - evaluations are indexed by key_digest (_archive_writer.key_digest of the case hash and the design
#   key) instead of (case_hash, design_key) itself; a look-up compares the whole key;
# - a design is a JSON object of its variables' values, or, when every value is a finite float, those
#   values as little-endian 8-byte floats (_archive_writer.pack_design) in the order the run's
#   `variables` (a JSON list of names, recorded with its first evaluation) gives.
# An archive of schema 1 is read as it is and upgraded before its first evaluation is written
# (_upgrade): two columns and an index are added, an index is dropped, no stored value changes.
_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT);
CREATE TABLE IF NOT EXISTS runs (
    run_id INTEGER PRIMARY KEY AUTOINCREMENT,
    case_hash TEXT NOT NULL,
    case_title TEXT,
    case_path TEXT,
    case_text TEXT,
    settings TEXT,
    seed INTEGER,
    versions TEXT,
    status TEXT,
    message TEXT,
    reference TEXT,
    started REAL,
    finished REAL,
    variables TEXT
);
CREATE TABLE IF NOT EXISTS evaluations (
    eval_id INTEGER PRIMARY KEY AUTOINCREMENT,
    run_id INTEGER NOT NULL REFERENCES runs(run_id),
    case_hash TEXT NOT NULL,
    design_key TEXT NOT NULL,
    design TEXT NOT NULL,
    results TEXT,
    status TEXT NOT NULL,
    message TEXT,
    duration REAL,
    generation INTEGER,
    worker TEXT,
    source_id INTEGER,
    created REAL,
    key_digest INTEGER
);
CREATE INDEX IF NOT EXISTS evaluations_by_digest ON evaluations (key_digest);
CREATE INDEX IF NOT EXISTS evaluations_by_run ON evaluations (run_id);
CREATE TABLE IF NOT EXISTS generations (
    run_id INTEGER NOT NULL REFERENCES runs(run_id),
    generation INTEGER NOT NULL,
    row TEXT NOT NULL,
    PRIMARY KEY (run_id, generation)
);
CREATE TABLE IF NOT EXISTS states (
    run_id INTEGER PRIMARY KEY REFERENCES runs(run_id),
    generation INTEGER NOT NULL,
    blob BLOB NOT NULL
);
"""
# Made on first use by a surrogate run (archives of earlier releases lack it and stay readable).
_PREDICTIONS_TABLE = """CREATE TABLE IF NOT EXISTS predictions (
    run_id INTEGER NOT NULL, generation INTEGER, eval_id INTEGER, name TEXT,
    predicted REAL, sd REAL, actual REAL)"""
_TABLES = frozenset({"meta", "runs", "evaluations", "generations", "states"})

# The archive writer (tradewise/_archive_writer.py): standard library only, run in a process of its
# own so that encoding and writing rows never takes time from the search, and so that
# everything handed to it is committed even when the search process is killed. The same code
# serves in this process when no writer process can be started. Messages are pickled tuples,
# each preceded by its length (4 bytes, big-endian); the search process is the only sender.


def _is_locked(exc: BaseException) -> bool:
    return isinstance(exc, sqlite3.OperationalError) and (
        "locked" in str(exc) or "busy" in str(exc)
    )


def _patiently(path: Path, db: sqlite3.Connection, action):
    """Run ``action`` (writes on ``db``), waiting up to :data:`LOCK_WAIT` seconds for another process's lock.

    The wait is announced once after :data:`LOCK_NOTICE` seconds; a lock held
    longer ends in one StoreError line instead of a traceback.
    """
    notice = min(LOCK_NOTICE, LOCK_WAIT)
    try:
        for wait in (notice, LOCK_WAIT - notice):
            db.execute(f"PRAGMA busy_timeout = {int(max(wait, 0.0) * 1000)}")
            try:
                return action()
            except sqlite3.OperationalError as exc:
                if not _is_locked(exc):
                    raise
                if db.in_transaction:
                    db.rollback()  # a stale read snapshot could not take the write lock later
            if wait == notice:
                _log.warning(
                    "the archive %s is locked by another process; waiting up to %g s...",
                    path,
                    LOCK_WAIT,
                )
        raise StoreError(
            f"{path}: the archive is locked by another process and stayed locked for {LOCK_WAIT:g} s; "
            "close the program or run that holds it and try again"
        )
    finally:
        db.execute(f"PRAGMA busy_timeout = {int(LOCK_WAIT * 1000)}")


class _ProcessLink:
    """The writer in a process of its own, fed through its standard input."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.proc = subprocess.Popen(
            # -I -S: isolated from the user's environment and site packages (a json.py in the current
            # folder must not stand in for the standard library's), and quicker to start.
            [sys.executable, "-I", "-S", _archive_writer.__file__, str(path), str(LOCK_WAIT)],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
        )
        # A generation's rows of a model with many variables fill the usual 64 kB pipe, so that the
        # search waited for the writer to read them; a larger pipe (Linux) lets it go on at once.
        with contextlib.suppress(AttributeError, OSError):
            import fcntl

            fcntl.fcntl(self.proc.stdin.fileno(), fcntl.F_SETPIPE_SZ, _PIPE_SIZE)
        self.tokens = itertools.count(1)
        self.reserved: list[int] = []
        # The first message asks for an answer (token 0), which tells that the writer runs; the
        # search does not wait for it (see started). A failure to send shows when it is awaited.
        self.answered = False
        with contextlib.suppress(OSError, ValueError):
            self.proc.stdin.write(struct.pack(">I", len(_FIRST)) + _FIRST)
            self.proc.stdin.flush()

    def started(self) -> bool:
        """Whether the writer has answered its first message, without waiting (False where a pipe cannot be polled)."""
        if not self.answered:
            try:
                ready = select.select([self.proc.stdout], [], [], 0)[0]
            except (OSError, ValueError):
                return False
            if ready:
                self._first_answer()
        return self.answered

    def _first_answer(self) -> None:
        if self._reply() != 0:
            self.fail()
        self.answered = True

    def send(self, message: tuple) -> None:
        data = pickle.dumps(message, protocol=pickle.HIGHEST_PROTOCOL)
        try:
            self.proc.stdin.write(struct.pack(">I", len(data)) + data)
            self.proc.stdin.flush()
        except (BrokenPipeError, OSError, ValueError):
            self.fail()

    def sync(self, kind: str = "sync") -> None:
        token = next(self.tokens)
        self.send((kind, token))
        if not self.answered:
            self._first_answer()
        while (reply := self._reply()) != token:
            if not (isinstance(reply, tuple) and reply[0] == "reserved"):
                self.fail()
            self.reserved.append(reply[1])

    def request_ids(self, block: int) -> None:
        """Ask for a block of evaluation ids; the answer is collected by :meth:`take_ids`."""
        self.send(("reserve", block))

    def take_ids(self) -> int:
        """The first answer to :meth:`request_ids` (waiting for it if it has not come yet)."""
        if not self.answered:
            self._first_answer()
        while not self.reserved:
            reply = self._reply()
            if not (isinstance(reply, tuple) and reply[0] == "reserved"):
                self.fail()
            self.reserved.append(reply[1])
        return self.reserved.pop(0)

    def _reply(self):
        head = self.proc.stdout.read(4)
        if len(head) < 4:
            self.fail()
        (size,) = struct.unpack(">I", head)
        return pickle.loads(self.proc.stdout.read(size))

    def tick(self) -> None:
        pass  # the writer keeps its own time

    def close(self) -> None:
        # Said in words rather than by closing the pipe: worker processes forked after the writer
        # started hold copies of its end, so the writer would not see the end of its input.
        self.sync("close")
        with contextlib.suppress(OSError):
            self.proc.stdin.close()
        if self.proc.wait() != 0:
            self.fail()
        self.proc.stdout.close()
        self.proc.stderr.close()

    def fail(self):
        with contextlib.suppress(OSError):
            self.proc.stdin.close()
        if self.proc.poll() is None:
            self.proc.kill()
        self.proc.wait()
        text = self.proc.stderr.read().decode("utf-8", "replace").strip().splitlines()
        raise StoreError(
            f"{self.path}: writing to the archive failed ({text[-1] if text else 'the writer stopped'})"
        )


class _LocalLink:
    """The same writer code run in this process, when no writer process can be started."""

    def __init__(self, path: Path) -> None:
        self.db = sqlite3.connect(path, timeout=LOCK_WAIT, check_same_thread=False)
        self.db.execute("PRAGMA synchronous=NORMAL")
        self.writer = _archive_writer.Writer(self.db)
        self.lock = threading.Lock()
        self.reserved: list[int] = []

    def send(self, message: tuple) -> None:
        with self.lock:
            self.writer.apply(message)
            if self.writer.due():
                self.writer.commit()

    def sync(self) -> None:
        with self.lock:
            self.writer.commit()

    def request_ids(self, block: int) -> None:
        with self.lock:
            self.reserved.append(self.writer.apply(("reserve", block))[1])

    def take_ids(self) -> int:
        return self.reserved.pop(0)

    def tick(self) -> None:
        with self.lock:
            if self.writer.due():
                self.writer.commit()

    def close(self) -> None:
        with self.lock:
            self.writer.commit()
            self.db.close()


class Store:
    """An open archive file; use :func:`open_store` to get one.

    Several runs, of one case or of several, may share one file; each
    evaluation remembers its case hash so that a design already evaluated
    for the same case is served from here in any later run.

    Evaluations and generation rows are written by a small writer process,
    so the search never waits for the disk, and rows handed to the writer
    are committed even if the search process is killed. Each evaluation is
    committed at most about half a second after it was recorded, also while
    the search waits for a slow model; the end of a generation commits at
    once (or, when generations end faster than ten a second, within about
    two tenths of a second). So a run killed at any moment loses only the designs still
    being evaluated and those finished in its last half second. The file is
    in WAL mode with ``synchronous=NORMAL``: commits survive a killed
    process; a power cut may lose the last commits, never corrupt the file.
    Evaluation ids are reserved in blocks, so runs writing to one file at
    the same time never collide (the ids of one run may jump between blocks).
    """

    def __init__(self, path: Path, connection: sqlite3.Connection, version: int) -> None:
        self.path = path
        self._db = connection  # reads, and the rare writes made after a sync with the writer
        self._version = version  # the archive's schema: 1 until upgraded by the first evaluation
        self._lock = threading.RLock()
        self._rows: list[tuple] = []  # evaluations recorded, not yet handed to the writer
        self._names: tuple[str, ...] = ()  # the variable names of the last design recorded
        self._rows_since = 0.0
        # Messages (generation rows, states, commits, recorded rows before them) waiting to go to the
        # writer with the next hand-over, and when the last hand-over was.
        self._later: list[tuple] = []
        self._sent_at = -math.inf
        self._commit_wanted = False
        self._link: _ProcessLink | _LocalLink | None = None
        # The writer has answered (set False while a new writer process is untried).
        self._proven = True
        # Messages sent to a writer process that has not answered yet: should it fail, the writer
        # run in this process gets them instead.
        self._unanswered: list[tuple] = []
        self._next_id, self._last_id = 1, 0
        self._ids_asked = False  # a block of ids was asked of the writer and not yet taken
        self._others: dict[
            tuple[str, int], float
        ] = {}  # (case, run) -> when "no other runs" was seen
        self._closing = threading.Event()
        self._ticker: threading.Thread | None = None
        self._failure: StoreError | None = None

    # ------------------------------------------------------------- plumbing
    def close(self) -> None:
        """Hand everything over, let the writer commit and stop, and close the file."""
        self._closing.set()
        if self._ticker is not None:
            self._ticker.join()
            self._ticker = None
        try:
            with self._lock:
                if self._link is not None and self._failure is None:
                    link = self._writer()
                    self._hand_over()
                    link.close()
        finally:
            self._link = None
            self._db.close()
        if self._failure is not None:
            raise self._failure

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def flush(self, *, wait: bool = True) -> None:
        """Make everything recorded so far durable.

        With ``wait=False`` (the end of a generation) the writer commits at
        once, or within a tenth of a second of its last commit, and the
        caller goes on.
        """
        with self._lock:
            if self._link is None:
                return
            if wait:
                self._sync()
            else:
                # Sent with the next message (the generation's row follows at once) or by the ticker.
                self._commit_wanted = True

    def _call(self, action) -> None:
        if self._failure is not None:
            raise self._failure
        try:
            action()
        except StoreError as exc:
            self._failure = exc
            raise

    def _start_writer(self) -> None:
        """Start the writer process (without waiting for it); call with the lock held."""
        if self._link is None:
            if self._version < SCHEMA_VERSION:
                _patiently(self.path, self._db, lambda: _upgrade(self._db))
                self._version = SCHEMA_VERSION
            try:
                self._link = _ProcessLink(self.path)
                self._proven = False
                self._unanswered = []
            except OSError:
                self._link = _LocalLink(self.path)
            self._ticker = threading.Thread(
                target=self._tick_loop, name="tradewise-store", daemon=True
            )
            self._ticker.start()

    def _writer(self, *, wait: bool = True) -> _ProcessLink | _LocalLink:
        """The link to the writer, with ``wait`` one that has answered once; call with the lock held.

        A writer process that fails before it answered (no usable Python at
        ``sys.executable``, say) is replaced by the same writer code run in
        this process, which is handed what was sent to it. Without ``wait``
        the search does not wait for a new writer process to start: what it
        sends waits in the pipe, and a copy here (at most
        ``_UNANSWERED_MOST`` messages, then it waits).
        """
        self._start_writer()
        if not self._proven:
            try:
                answered = self._link.started()
            except StoreError:
                answered = False
            if answered:
                self._proven, self._unanswered = True, []
            elif wait or len(self._unanswered) >= _UNANSWERED_MOST:
                try:
                    self._link.sync()
                except StoreError:
                    self._fall_back()
                self._proven, self._unanswered = True, []
        return self._link

    def _fall_back(self) -> None:
        """Put the writer in this process in place of a writer process that never answered."""
        sent, self._unanswered = self._unanswered, []
        self._link = _LocalLink(self.path)
        self._proven = True
        for message in sent:
            self._link.send(message)

    def _send(self, message: tuple) -> None:
        """Hand a message to the writer without waiting for a new writer process; call with the lock held."""
        link = self._writer(wait=False)
        if self._proven:
            self._call(lambda: link.send(message))
            return
        self._unanswered.append(message)
        try:
            link.send(message)
        except StoreError:
            self._fall_back()

    def _sync(self) -> None:
        """Hand everything over and wait until the writer has committed it; call with the lock held."""
        link = self._writer()
        self._hand_over()
        self._call(link.sync)

    def _hand_over(self) -> None:
        """Send the waiting messages and recorded evaluations to the writer; call with the lock held."""
        if self._later:
            messages, self._later = self._later, []
            if self._rows:
                messages.append(("rows", self._rows))
                self._rows = []
            self._send(("many", messages))
        elif self._rows:
            rows, self._rows = self._rows, []
            self._send(("rows", rows))
        else:
            return
        self._sent_at = time.monotonic()

    def _queue(self, messages: list[tuple]) -> None:
        """Put ``messages`` after everything recorded so far, to go with the next hand-over; call with the lock held."""
        if self._rows:
            self._later.append(("rows", self._rows))
            self._rows = []
        self._later += messages

    def _tick_loop(self) -> None:
        """Hand over evaluations that have waited long enough while the search waits for a slow model."""
        while not self._closing.wait(_TICK):
            with self._lock:
                if self._failure is not None or self._link is None:
                    return
                try:
                    now = time.monotonic()
                    if (self._rows and now - self._rows_since >= _HAND_OVER_EVERY) or (
                        self._later and now - self._sent_at >= _HAND_OVER_EVERY
                    ):
                        self._hand_over()
                    if self._commit_wanted:
                        self._hand_over()
                        self._send(("commit",))
                        self._commit_wanted = False
                    self._link.tick()
                except StoreError:
                    return  # kept in self._failure; the owner sees it on its next call

    def _write_now(self, sql: str, params: tuple = ()) -> sqlite3.Cursor:
        """A write through this process's own connection, committed at once; call with the lock held.

        The writer is synced first, so it holds no open transaction.
        """
        if self._link is not None:
            self._sync()

        def write() -> sqlite3.Cursor:
            cursor = self._db.execute(sql, params)
            self._db.commit()
            return cursor

        return _patiently(self.path, self._db, write)

    def _take_id(self) -> int:
        """The next evaluation id of this store's reserved block; call with the lock held.

        The first block is reserved here; each later one is asked of the
        writer when half of the current block is used, so its answer is
        waiting by the time it is needed.
        """
        if self._next_id > self._last_id:
            if self._ids_asked:
                self._ids_asked = False
                top = self._call_value(self._link.take_ids)
            else:
                top = self._reserve_here()
            self._next_id, self._last_id = top + 1, top + _ID_BLOCK
        elif (
            not self._ids_asked
            and self._link is not None
            and self._proven
            and self._last_id - self._next_id < _ID_BLOCK // 2
        ):
            link = self._link
            self._call(lambda: link.request_ids(_ID_BLOCK))
            self._ids_asked = True
        self._next_id += 1
        return self._next_id - 1

    def _reserve_here(self) -> int:
        """Reserve a block of ids through this process's connection; call with the lock held."""
        if self._link is not None and (self._proven or self._unanswered):
            self._sync()  # the writer must not hold an open transaction
        return _patiently(self.path, self._db, self._reserve_block)

    def _reserve_block(self) -> int:
        return _archive_writer.reserve(self._db, _ID_BLOCK)

    def _call_value(self, action):
        result = []
        self._call(lambda: result.append(action()))
        return result[0]

    def _query(self, sql: str, params: tuple = ()) -> list[tuple]:
        """Read with everything recorded so far committed first."""
        with self._lock:
            if self._link is not None and self._failure is None:
                self._sync()
            return self._db.execute(sql, params).fetchall()

    # ------------------------------------------------------------------ runs
    def start_run(
        self,
        *,
        case_hash: str,
        case_title: str,
        case_path: str,
        case_text: str,
        settings: dict[str, Any],
        seed: int,
        versions: dict[str, str],
    ) -> int:
        """Record a new run and return its id."""
        with self._lock:
            cursor = self._write_now(
                "INSERT INTO runs (case_hash, case_title, case_path, case_text, settings, seed, versions,"
                " status, message, started) VALUES (?, ?, ?, ?, ?, ?, ?, 'running', '', ?)",
                (
                    case_hash,
                    case_title,
                    case_path,
                    case_text,
                    _archive_writer.encode(settings),
                    seed,
                    _archive_writer.encode(versions),
                    time.time(),
                ),
            )
            self._start_writer()  # starts while the search sets up, ready by the first evaluation
            return int(cursor.lastrowid)

    def update_run(self, run_id: int, **fields: Any) -> None:
        """Change a run's ``status``, ``message``, ``reference``, ``settings`` or ``finished``.

        Once the writer runs, the change goes through it like an evaluation
        (committed at once, or within a tenth of a second, and at :meth:`close`).
        """
        allowed = {"status", "message", "reference", "settings", "finished"}
        for key in fields:
            if key not in allowed:
                raise KeyError(key)
        if not fields:
            return
        values = [
            _archive_writer.encode(v) if k in {"reference", "settings"} else v
            for k, v in fields.items()
        ]
        assignments = ", ".join(f"{key} = ?" for key in fields)
        sql = f"UPDATE runs SET {assignments} WHERE run_id = ?"
        with self._lock:
            if self._link is None or self._failure is not None:
                self._write_now(sql, (*values, run_id))
                return
            # The writer is running: it applies the change after every evaluation recorded so far
            # and commits at once, and the search does not wait (a read syncs with the writer first).
            self._queue([("sql", sql, (*values, run_id)), ("commit",)])
            self._commit_wanted = False
            self._hand_over()

    def runs(self):
        """One row a run, as a pandas DataFrame: id, case, seed, status, message, counts and times."""
        import pandas as pd

        columns = [
            "run_id",
            "case_title",
            "case_hash",
            "seed",
            "status",
            "message",
            "started",
            "finished",
            "n_evals",
        ]
        rows = self._query(
            "SELECT r.run_id, r.case_title, r.case_hash, r.seed, r.status, r.message, r.started, r.finished,"
            " (SELECT COUNT(*) FROM evaluations e WHERE e.run_id = r.run_id AND e.source_id IS NULL)"
            " FROM runs r ORDER BY r.run_id"
        )
        return pd.DataFrame.from_records(rows, columns=columns)

    def run(self, run_id: int) -> dict[str, Any]:
        """Everything recorded about one run (StoreError when there is no such run)."""
        keys = (
            "run_id",
            "case_hash",
            "case_title",
            "case_path",
            "case_text",
            "settings",
            "seed",
            "versions",
            "status",
            "message",
            "reference",
            "started",
            "finished",
        )
        found = self._query(f"SELECT {', '.join(keys)} FROM runs WHERE run_id = ?", (run_id,))
        if not found:
            known = [str(r) for (r,) in self._query("SELECT run_id FROM runs ORDER BY run_id")]
            raise StoreError(
                f"{self.path}: run {run_id} is not in this archive; runs it holds: {', '.join(known) or 'none'}"
            )
        record = dict(zip(keys, found[0], strict=True))
        for key in ("settings", "versions", "reference"):
            record[key] = json.loads(record[key]) if record[key] else None
        return record

    def latest_run(self) -> int:
        """The id of the newest run in the file (StoreError when it holds none)."""
        ((newest,),) = self._query("SELECT MAX(run_id) FROM runs")
        if newest is None:
            raise StoreError(f"{self.path}: the archive holds no runs")
        return int(newest)

    # ----------------------------------------------------------- evaluations
    def add_evaluation(
        self,
        run_id: int,
        *,
        case_hash: str,
        design_key: str,
        design: dict[str, Any],
        results: dict[str, Any],
        status: str,
        message: str,
        duration: float,
        generation: int,
        worker: str = "",
        source_id: int | None = None,
    ) -> int:
        """Record one completed evaluation (or one served from the archive, with ``source_id``).

        Returns the evaluation's id at once; the row is committed within a
        second (see the class notes).
        """
        # The design goes to the writer as its names and its values: one tuple of names shared by
        # every row of the same variables is pickled once, and a tuple of values pickles about three
        # times quicker than the dict (30 reals: 1.7 against 5.5 us a row).
        names = tuple(design)
        with self._lock:
            if self._failure is not None:
                raise self._failure
            if names != self._names:
                self._names = names
            eval_id = self._take_id()
            if not self._rows:
                self._rows_since = time.monotonic()
            self._rows.append(
                (
                    eval_id,
                    run_id,
                    case_hash,
                    design_key,
                    self._names,
                    tuple(design.values()),
                    results,
                    status,
                    message,
                    duration,
                    generation,
                    worker,
                    source_id,
                    time.time(),
                )
            )
            if len(self._rows) >= 4096 or time.monotonic() - self._rows_since >= _HAND_OVER_EVERY:
                self._hand_over()
        return eval_id

    def lookup(
        self, case_hash: str, keys: Iterable[str], *, exclude_run: int | None = None
    ) -> dict[str, dict[str, Any]]:
        """Committed evaluations of this case, by design key (the first real evaluation of each).

        With ``exclude_run``, rows of that run are left out; the search passes
        its own run, whose designs it keeps in memory, and when the file holds
        no evaluation of the case from any other run the look-up costs
        nothing (that answer is trusted for a second, so a run started beside
        this one in the same file is noticed).
        """
        keys = list(dict.fromkeys(keys))
        found: dict[str, dict[str, Any]] = {}
        if not keys:
            return found
        skip = "" if exclude_run is None else " AND run_id <> ?"
        tail = () if exclude_run is None else (exclude_run,)
        with self._lock:
            if exclude_run is not None and not self._has_others(case_hash, exclude_run):
                return found
            wanted = set(keys)
            column = "key_digest" if self._version >= 2 else "design_key"
            for start in range(0, len(keys), 500):
                chunk = keys[start : start + 500]
                if self._version >= 2:
                    chunk = [_archive_writer.key_digest(case_hash, key) for key in chunk]
                marks = ",".join("?" * len(chunk))
                rows = self._db.execute(
                    f"SELECT eval_id, design_key, results, status, message, duration, worker FROM evaluations"
                    f" WHERE {column} IN ({marks}) AND case_hash = ? AND source_id IS NULL{skip}"
                    " ORDER BY eval_id",
                    (*chunk, case_hash, *tail),
                ).fetchall()
                for eval_id, key, results, status, message, duration, worker in rows:
                    # a digest names a key but for a chance of 1 in 2**64: the key itself decides
                    if key in wanted and key not in found:
                        found[key] = {
                            "eval_id": eval_id,
                            "results": json.loads(results) if results else {},
                            "status": status,
                            "message": message or "",
                            "duration": duration or 0.0,
                            "worker": worker or "",
                        }
        return found

    def _has_others(self, case_hash: str, run_id: int) -> bool:
        seen = self._others.get((case_hash, run_id))
        if seen is not None and time.monotonic() - seen < _OTHERS_TTL:
            return False
        # Through the runs of the case and the index by run: asking the evaluations by case would read
        # every row of this run, a cost that grows with the run.
        (others,) = self._db.execute(
            "SELECT EXISTS (SELECT 1 FROM evaluations WHERE run_id IN"
            " (SELECT run_id FROM runs WHERE case_hash = ? AND run_id <> ?) AND source_id IS NULL)",
            (case_hash, run_id),
        ).fetchone()
        if others:
            self._others.pop((case_hash, run_id), None)
            return True
        self._others[(case_hash, run_id)] = time.monotonic()
        return False

    def evaluations(self, run_id: int | None = None, *, case_hash: str | None = None):
        """Every evaluation of a run (or of a case, or all) as one flat pandas DataFrame.

        Columns: ``eval_id``, ``run_id``, ``generation``, ``status``, ``message``,
        ``duration``, ``worker``, ``cached`` (served from the archive), then the
        design's variables and the model's results under their own names.
        """
        import pandas as pd

        query = (
            "SELECT eval_id, run_id, generation, status, message, duration, worker, source_id, design, results"
            " FROM evaluations"
        )
        params: tuple[Any, ...] = ()
        if run_id is not None:
            query += " WHERE run_id = ?"
            params = (run_id,)
        elif case_hash is not None:
            query += " WHERE case_hash = ?"
            params = (case_hash,)
        variables = {}  # run id -> the names its packed designs hold values of
        if self._version >= 2:
            variables = {
                rid: tuple(json.loads(names))
                for rid, names in self._query(
                    "SELECT run_id, variables FROM runs WHERE variables IS NOT NULL"
                )
            }
        records = []
        for (
            eval_id,
            rid,
            gen,
            status,
            message,
            duration,
            worker,
            source,
            design,
            results,
        ) in self._query(query + " ORDER BY eval_id", params):
            record = {
                "eval_id": eval_id,
                "run_id": rid,
                "generation": gen,
                "status": status,
                "message": message or "",
                "duration": duration,
                "worker": worker or "",
                "cached": source is not None,
            }
            if isinstance(design, bytes):
                try:
                    record.update(_archive_writer.unpack_design(variables.get(rid, ()), design))
                except ValueError as exc:
                    raise StoreError(
                        f"{self.path}: evaluation {eval_id} cannot be read ({exc})"
                    ) from None
            else:
                record.update(json.loads(design))
            if results:
                record.update(json.loads(results))
            records.append(record)
        return pd.DataFrame.from_records(records)

    def count_evaluations(self, run_id: int) -> int:
        """How many designs the run evaluated itself (served ones not counted)."""
        ((count,),) = self._query(
            "SELECT COUNT(*) FROM evaluations WHERE run_id = ? AND source_id IS NULL", (run_id,)
        )
        return int(count)

    # --------------------------------------------------- history and states
    def add_generation(
        self, run_id: int, row: dict[str, Any], *, state: bytes | None = None
    ) -> None:
        """Record one generation's summary (and the search state to resume from), and have it committed.

        It goes to the writer at once, with every evaluation recorded before
        it, when the last hand-over is a tenth of a second old, and otherwise
        with the next one, within about a tenth of a second (generations of a
        quick model end many times a second, and each hand-over wakes the
        writer process); the writer commits it at once (or within a tenth of
        a second of its last commit). The caller does not wait.
        """
        generation = int(row["generation"])
        with self._lock:
            messages = []
            messages.append(
                (
                    "sql",
                    "INSERT OR REPLACE INTO generations (run_id, generation, row) VALUES (?, ?, ?)",
                    (run_id, generation, _archive_writer.encode(row)),
                )
            )
            if state is not None:
                messages.append(
                    (
                        "sql",
                        "INSERT OR REPLACE INTO states (run_id, generation, blob) VALUES (?, ?, ?)",
                        (run_id, generation, state),
                    )
                )
            messages.append(("commit",))
            self._commit_wanted = False
            self._queue(messages)
            if time.monotonic() - self._sent_at >= _HAND_OVER_EVERY:
                self._hand_over()

    def save_state(self, run_id: int, generation: int, state: bytes) -> None:
        """Keep the search state reached after ``generation`` (one state a run: the newest).

        Committed by the writer within a tenth of a second, and at :meth:`close`.
        """
        with self._lock:
            self._queue(
                [
                    (
                        "sql",
                        "INSERT OR REPLACE INTO states (run_id, generation, blob) VALUES (?, ?, ?)",
                        (run_id, generation, state),
                    ),
                    ("commit",),
                ]
            )
            self._hand_over()

    def add_predictions(self, run_id: int, generation: int, rows: list[tuple]) -> None:
        """Record what a surrogate run's models predicted for designs it then evaluated.

        ``rows`` are ``(eval_id, name, predicted, sd, actual)``, one an
        objective or constraint a design. The table is made on first use, so
        archives written before it existed stay readable (and say nothing).
        """
        messages = [("sql", _PREDICTIONS_TABLE, ())]
        messages += [
            (
                "sql",
                "INSERT INTO predictions (run_id, generation, eval_id, name, predicted, sd, actual)"
                " VALUES (?, ?, ?, ?, ?, ?, ?)",
                (run_id, generation, *row),
            )
            for row in rows
        ]
        with self._lock:
            self._queue(messages)
            self._hand_over()

    def predictions(self, run_id: int):
        """What a surrogate run's models predicted beside the real results, one row a design and name."""
        import pandas as pd

        columns = ["generation", "eval_id", "name", "predicted", "sd", "actual"]
        exists = self._query(
            "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'predictions'"
        )
        rows = (
            self._query(
                f"SELECT {', '.join(columns)} FROM predictions WHERE run_id = ? ORDER BY rowid",
                (run_id,),
            )
            if exists
            else []
        )
        return pd.DataFrame.from_records(rows, columns=columns)

    def history(self, run_id: int):
        """One row a recorded generation of the run, in order, as a pandas DataFrame."""
        import pandas as pd

        rows = self._query(
            "SELECT row FROM generations WHERE run_id = ? ORDER BY generation", (run_id,)
        )
        return pd.DataFrame.from_records([json.loads(r) for (r,) in rows])

    def state(self, run_id: int) -> tuple[int, bytes] | None:
        """The newest saved search state of the run as ``(generation, JSON bytes)``; never unpickled."""
        rows = self._query("SELECT generation, blob FROM states WHERE run_id = ?", (run_id,))
        return (int(rows[0][0]), bytes(rows[0][1])) if rows else None

    def discard_after(self, run_id: int, generation: int) -> None:
        """Forget the run's history rows and served-from-archive rows after ``generation``.

        Used on resume: the search restarts from the state saved at
        ``generation`` and records those rows again. Rows of designs the run
        evaluated itself are kept (the resumed search takes them over).
        """
        with self._lock:
            self._write_now(
                "DELETE FROM evaluations WHERE run_id = ? AND generation > ? AND source_id IS NOT NULL",
                (run_id, generation),
            )
            self._write_now(
                "DELETE FROM generations WHERE run_id = ? AND generation > ?", (run_id, generation)
            )
            self._write_now(
                "DELETE FROM states WHERE run_id = ? AND generation > ?", (run_id, generation)
            )
            if self._db.execute(
                "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'predictions'"
            ).fetchone():
                self._write_now(
                    "DELETE FROM predictions WHERE run_id = ? AND generation > ?",
                    (run_id, generation),
                )


def open_store(path: str | Path, *, create: bool = True) -> Store:
    """Open (and with ``create``, make) an archive file in WAL mode.

    A file that exists is inspected before anything is written to it: a file
    that is not a tradewise archive is left exactly as it was.

    Parameters
    ----------
    path : str or Path
        The archive file.
    create : bool
        Make a new archive when the file does not exist (or is empty).

    Raises
    ------
    StoreError
        When the file is missing (and ``create`` is false), is a folder, is
        not an SQLite database, is an SQLite database of something else, or
        was written by a newer tradewise.

    Examples
    --------
    >>> with open_store("runs/archive.sqlite") as store:   # doctest: +SKIP
    ...     print(store.runs()[["run_id", "status"]])
    """
    path = Path(path)
    if path.is_dir():
        raise StoreError(f"{path}: is a folder; an archive is a file such as archive.sqlite")
    if not path.exists() or path.stat().st_size == 0:
        if not create:
            what = "is empty" if path.exists() else "does not exist"
            raise StoreError(f"{path}: {what}; expected an archive file written by `tradewise run`")
        path.parent.mkdir(parents=True, exist_ok=True)
    else:
        try:
            with open(path, "rb") as handle:
                header = handle.read(len(_SQLITE_HEADER))
        except OSError as exc:
            raise StoreError(f"{path}: cannot be read ({exc.strerror or exc})") from None
        if header != _SQLITE_HEADER:
            raise StoreError(
                f"{path}: is not an SQLite file (it starts with {header[:8]!r}); expected an archive"
            )
    db = None
    try:
        db = sqlite3.connect(path, timeout=LOCK_WAIT, check_same_thread=False)
        version = _patiently(path, db, lambda: _prepare(path, db, create=create))
    except StoreError:
        if db is not None:
            db.close()
        raise
    except sqlite3.DatabaseError as exc:
        if db is not None:
            db.close()
        raise StoreError(f"{path}: cannot be used as an archive ({exc})") from None
    return Store(path, db, version)


def _prepare(path: Path, db: sqlite3.Connection, *, create: bool) -> int:
    """Check the file, make it an archive if it is empty, and return its schema version."""
    # Look before writing anything: switching to WAL or adding tables would change a foreign file.
    tables = {r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    tables.discard("sqlite_sequence")
    version = SCHEMA_VERSION
    if tables:
        version = _check_tables(path, db, tables)
    elif not create:
        raise StoreError(
            f"{path}: is an empty SQLite file, not an archive written by `tradewise run`"
        )
    db.execute("PRAGMA journal_mode=WAL")
    db.execute("PRAGMA synchronous=NORMAL")
    if not tables:
        db.executescript(_SCHEMA)
        db.execute(
            "INSERT OR IGNORE INTO meta (key, value) VALUES ('schema', ?)", (str(SCHEMA_VERSION),)
        )
        db.commit()
    return version


def _check_tables(path: Path, db: sqlite3.Connection, tables: set[str]) -> int:
    if not _TABLES.issubset(tables):
        shown = ", ".join(sorted(tables)[:6]) + (", ..." if len(tables) > 6 else "")
        raise StoreError(
            f"{path}: is an SQLite file of something else (tables: {shown}), not a tradewise archive"
        )
    row = db.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()
    if row is None or not str(row[0]).isdigit():
        raise StoreError(
            f"{path}: has no tradewise schema version, so it is not a tradewise archive"
        )
    if int(row[0]) > SCHEMA_VERSION:
        raise StoreError(
            f"{path}: archive schema {row[0]} was written by a newer tradewise; this one reads up to {SCHEMA_VERSION}"
        )
    return int(row[0])


def _upgrade(db: sqlite3.Connection) -> None:
    """Bring an archive of schema 1 to schema 2, in one transaction (a crash leaves schema 1).

    Adds each evaluation's key digest and its index, drops the index on the
    keys themselves (which only repeated what the rows hold), and adds the runs'
    ``variables``, empty for the runs already there: every stored value stays as
    it was. An archive another process upgraded meanwhile is left alone.
    """
    db.create_function("tradewise_key_digest", 2, _archive_writer.key_digest, deterministic=True)
    db.execute("BEGIN IMMEDIATE")
    try:
        (version,) = db.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()
        if int(version) < 2:
            columns = {row[1] for row in db.execute("PRAGMA table_info(evaluations)")}
            if "key_digest" not in columns:
                db.execute("ALTER TABLE evaluations ADD COLUMN key_digest INTEGER")
            if "variables" not in {row[1] for row in db.execute("PRAGMA table_info(runs)")}:
                db.execute("ALTER TABLE runs ADD COLUMN variables TEXT")
            db.execute(
                "UPDATE evaluations SET key_digest = tradewise_key_digest(case_hash, design_key)"
            )
            db.execute(
                "CREATE INDEX IF NOT EXISTS evaluations_by_digest ON evaluations (key_digest)"
            )
            db.execute("DROP INDEX IF EXISTS evaluations_by_key")
            db.execute("UPDATE meta SET value = '2' WHERE key = 'schema'")
        db.commit()
    except BaseException:
        db.rollback()
        raise
