"""The SQLite archive of runs, every evaluation and the generation history.

Rows are written by a thread of this process fed through a queue (standard library only). It
replaced a writer process fed through a pipe: measured side by side with
tests/benchmarks/bench_archive.py it was as quick, and it passed the same kill -9 tests; the one
thing the process did better, keeping what it had been handed when only the search process was
killed, covered rows younger than half a second, which a kill of the whole run loses either way.
"""

from __future__ import annotations

import itertools
import json
import logging
import math
import os
import queue
import sqlite3
import threading
import time
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from tradewise.errors import StoreError

__all__ = ["Store", "open_store", "SCHEMA_VERSION"]

SCHEMA_VERSION = 1
# An evaluation is taken off the queue within _TICK of being recorded and committed at most
# _COMMIT_EVERY after that: within half a second. A generation's end commits at once, unless
# the last commit is younger than _COMMIT_GAP (generations that end faster than ten a second).
_TICK = 0.05
_COMMIT_EVERY = 0.4
_COMMIT_GAP = 0.1
_ID_BLOCK = 4096  # evaluation ids reserved at a time
# How long "this case has no evaluations from other runs" is trusted before asking the file again.
_OTHERS_TTL = 1.0
_SQLITE_HEADER = b"SQLite format 3\x00"
#: Seconds to wait for another process to release a locked archive before stopping with a StoreError.
LOCK_WAIT = 30.0
#: Seconds of waiting after which the wait is announced (on the "tradewise" logger, which prints to
#: standard error when nothing else is set up).
LOCK_NOTICE = 1.0
_log = logging.getLogger("tradewise")
# Measurement only: "process" opens archives with the writer process of _store_process.
_WRITER = os.environ.get("TRADEWISE_ARCHIVE_WRITER", "thread")
_INSERT = (
    "INSERT INTO evaluations (eval_id, run_id, case_hash, design_key, design, results, status,"
    " message, duration, generation, worker, source_id, created) VALUES "
)
_ROW = "(?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"
# Rows go in many to a statement: the sqlite3 module lets go of the interpreter lock for every
# statement it steps, and taking the lock back from a busy search costs the writer a switch.
_ROWS_A_STATEMENT = 500

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
    finished REAL
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
    created REAL
);
CREATE INDEX IF NOT EXISTS evaluations_by_key ON evaluations (case_hash, design_key);
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
_TABLES = frozenset({"meta", "runs", "evaluations", "generations", "states"})


def _finite(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite(v) for v in value]
    return value


def _plain(value):
    if hasattr(value, "item"):  # a numpy number
        value = value.item()
        return None if isinstance(value, float) and not math.isfinite(value) else value
    raise TypeError(f"cannot store {type(value).__name__}")


_encoder = json.JSONEncoder(default=_plain, allow_nan=False, separators=(",", ":"))
try:  # the C encoder built once; json builds a new one for every call otherwise
    from json.encoder import c_make_encoder, encode_basestring_ascii

    _fast = c_make_encoder(None, _plain, encode_basestring_ascii, None, ":", ",", False, False, False)
except (ImportError, TypeError):
    _fast = None


def _encode(value) -> str:
    """JSON text of a value; NaN and infinities (which JSON has not) become null."""
    try:
        return "".join(_fast(value, 0)) if _fast is not None else _encoder.encode(value)
    except ValueError:
        return _encoder.encode(_finite(value))


def _is_locked(exc: BaseException) -> bool:
    return isinstance(exc, sqlite3.OperationalError) and ("locked" in str(exc) or "busy" in str(exc))


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
                _log.warning("the archive %s is locked by another process; waiting up to %g s...", path, LOCK_WAIT)
        raise StoreError(
            f"{path}: the archive is locked by another process and stayed locked for {LOCK_WAIT:g} s; "
            "close the program or run that holds it and try again"
        )
    finally:
        db.execute(f"PRAGMA busy_timeout = {int(LOCK_WAIT * 1000)}")


def _reserve_block(db: sqlite3.Connection) -> int:
    """Move the evaluation id counter past a block of ids; return the id before the block."""
    db.execute("BEGIN IMMEDIATE")
    try:
        row = db.execute("SELECT seq FROM sqlite_sequence WHERE name = 'evaluations'").fetchone()
        (largest,) = db.execute("SELECT COALESCE(MAX(eval_id), 0) FROM evaluations").fetchone()
        top = max(row[0] if row else 0, largest)
        if row:
            db.execute("UPDATE sqlite_sequence SET seq = ? WHERE name = 'evaluations'", (top + _ID_BLOCK,))
        else:
            db.execute("INSERT INTO sqlite_sequence (name, seq) VALUES ('evaluations', ?)", (top + _ID_BLOCK,))
        db.commit()
    except BaseException:
        db.rollback()
        raise
    return top


class _Writer:
    """The writer thread: takes rows off its queue, encodes them and commits them on its own connection.

    Items on the queue: ``("row", values)`` an evaluation, ``("sql", sql, params)``
    another write, ``("commit",)`` commit soon, ``("sync", event)`` commit now and
    set the event, ``("stop", event)`` the same, then end. A write that fails is
    kept in :attr:`failure` (one StoreError line); nothing is written after it.
    """

    def __init__(self, path: Path) -> None:
        self.path = path
        self.inbox: queue.SimpleQueue = queue.SimpleQueue()
        self.wake = threading.Event()
        self.failure: StoreError | None = None
        self.db = sqlite3.connect(path, timeout=LOCK_WAIT, check_same_thread=False)
        self.db.execute("PRAGMA synchronous=NORMAL")
        variables = self.db.getlimit(sqlite3.SQLITE_LIMIT_VARIABLE_NUMBER)
        self.chunk = max(1, min(_ROWS_A_STATEMENT, variables // _ROW.count("?")))
        # Not a daemon: when the program ends without closing the archive, the thread still
        # commits what it holds (it watches the main thread) before the interpreter exits.
        self.thread = threading.Thread(target=self._loop, name="tradewise-store")
        self.thread.start()

    # -- the search's side ------------------------------------------------------------------
    def put(self, item: tuple) -> None:
        self.inbox.put(item)

    def commit_soon(self) -> None:
        self.inbox.put(("commit",))
        self.wake.set()

    def sync(self, kind: str = "sync") -> None:
        """Wait until everything put so far is committed (StoreError if that failed)."""
        done = threading.Event()
        self.inbox.put((kind, done))
        self.wake.set()
        while not done.wait(_TICK):
            if not self.thread.is_alive():
                self.failure = self.failure or StoreError(
                    f"{self.path}: writing to the archive failed (the writer stopped)"
                )
                break
        if self.failure is not None:
            raise self.failure

    def stop(self) -> None:
        """Commit everything and end the thread (StoreError if a write failed)."""
        try:
            self.sync("stop")
        finally:
            self.thread.join()

    # -- the thread --------------------------------------------------------------------------
    def _loop(self) -> None:
        rows: list[tuple] = []
        writes: list[tuple] = []
        oldest = None  # when the oldest uncommitted item was taken off the queue
        asked = False
        last = time.monotonic()
        main = threading.main_thread()
        try:
            while True:
                self.wake.wait(_TICK)
                self.wake.clear()
                waiting, stop = [], not main.is_alive()
                while True:
                    try:
                        item = self.inbox.get_nowait()
                    except queue.Empty:
                        break
                    kind = item[0]
                    if kind == "row":
                        rows.append(item[1])
                    elif kind == "sql":
                        writes.append(item[1:])
                    elif kind == "commit":
                        asked = True
                    else:
                        waiting.append(item[1])
                        stop = stop or kind == "stop"
                now = time.monotonic()
                if oldest is None and (rows or writes):
                    oldest = now
                if oldest is None:
                    asked = False  # nothing to commit
                elif waiting or stop or now - oldest >= _COMMIT_EVERY or (asked and now - last >= _COMMIT_GAP):
                    if self.failure is None:
                        self._commit(rows, writes)
                    rows, writes, oldest, asked, last = [], [], None, False, time.monotonic()
                for done in waiting:
                    done.set()
                if stop:
                    return
        finally:
            self.db.close()

    def _commit(self, rows: list[tuple], writes: list[tuple]) -> None:
        try:
            encoded = [
                (i, run, case, key, _encode(design), _encode(results), *rest)
                for i, run, case, key, design, results, *rest in rows
            ]

            def write() -> None:
                self.db.execute("BEGIN IMMEDIATE")
                try:
                    for start in range(0, len(encoded), self.chunk):
                        part = encoded[start : start + self.chunk]
                        values = list(itertools.chain.from_iterable(part))
                        self.db.execute(_INSERT + ", ".join([_ROW] * len(part)), values)
                    for sql, params in writes:
                        self.db.execute(sql, params)
                    self.db.commit()
                except BaseException:
                    self.db.rollback()
                    raise

            _patiently(self.path, self.db, write)
        except StoreError as exc:
            self.failure = exc
        except Exception as exc:  # SQLite's complaint, or a value JSON cannot hold
            self.failure = StoreError(f"{self.path}: writing to the archive failed ({type(exc).__name__}: {exc})")


class Store:
    """An open archive file; use :func:`open_store` to get one.

    Several runs, of one case or of several, may share one file; each
    evaluation remembers its case hash so that a design already evaluated
    for the same case is served from here in any later run.

    Evaluations and generation rows are encoded and written by a writer
    thread, so recording one only puts it on a queue. Each evaluation is
    committed at most about half a second after it was recorded, also while
    the search waits for a slow model; the end of a generation commits at
    once (or, when generations end faster than ten a second, within a tenth
    of a second). So a run killed at any moment loses only the designs still
    being evaluated and those finished in its last half second. The file is
    in WAL mode with ``synchronous=NORMAL``: commits survive a killed
    process; a power cut may lose the last commits, never corrupt the file.
    Evaluation ids are reserved in blocks, so runs writing to one file at
    the same time never collide (the ids of one run may jump between blocks).
    """

    def __init__(self, path: Path, connection: sqlite3.Connection) -> None:
        self.path = path
        self._db = connection  # reads, and the rare writes made after a sync with the writer
        self._lock = threading.RLock()
        self._writer: _Writer | None = None  # started with the first run recorded or written to
        self._failure: StoreError | None = None
        self._next_id, self._last_id = 1, 0
        self._others: dict[tuple[str, int], float] = {}  # (case, run) -> when "no other runs" was seen

    # ------------------------------------------------------------- plumbing
    def close(self) -> None:
        """Let the writer commit everything and stop, and close the file."""
        with self._lock:
            try:
                if self._writer is not None:
                    writer, self._writer = self._writer, None
                    writer.stop()
            except StoreError as exc:
                self._failure = exc
            finally:
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
            if self._writer is None:
                return
            self._check()
            if wait:
                self._sync()
            else:
                self._writer.commit_soon()

    def _check(self) -> None:
        """Raise the writer's failure, if it had one; call with the lock held."""
        if self._failure is None and self._writer is not None:
            self._failure = self._writer.failure
        if self._failure is not None:
            raise self._failure

    def _started(self) -> _Writer:
        """The writer thread, started on first use; call with the lock held."""
        if self._writer is None:
            self._writer = _Writer(self.path)
        return self._writer

    def _sync(self) -> None:
        """Wait until the writer has committed everything recorded; call with the lock held."""
        if self._writer is not None:
            try:
                self._writer.sync()
            finally:
                self._check()

    def _write_now(self, sql: str, params: tuple = ()) -> sqlite3.Cursor:
        """A write through this process's own connection, committed at once; call with the lock held.

        The writer is synced first, so that the write comes after everything recorded before it.
        """
        self._check()
        self._sync()

        def write() -> sqlite3.Cursor:
            cursor = self._db.execute(sql, params)
            self._db.commit()
            return cursor

        return _patiently(self.path, self._db, write)

    def _take_id(self) -> int:
        """The next evaluation id of this store's reserved block; call with the lock held."""
        if self._next_id > self._last_id:
            top = _patiently(self.path, self._db, lambda: _reserve_block(self._db))
            self._next_id, self._last_id = top + 1, top + _ID_BLOCK
        self._next_id += 1
        return self._next_id - 1

    def _query(self, sql: str, params: tuple = ()) -> list[tuple]:
        """Read with everything recorded so far committed first."""
        with self._lock:
            if self._failure is None and (self._writer is None or self._writer.failure is None):
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
                (case_hash, case_title, case_path, case_text, _encode(settings), seed, _encode(versions),
                 time.time()),
            )
            self._started()  # ready by the first evaluation
            return int(cursor.lastrowid)

    def update_run(self, run_id: int, **fields: Any) -> None:
        """Change a run's ``status``, ``message``, ``reference``, ``settings`` or ``finished``."""
        allowed = {"status", "message", "reference", "settings", "finished"}
        for key in fields:
            if key not in allowed:
                raise KeyError(key)
        if not fields:
            return
        values = [_encode(v) if k in {"reference", "settings"} else v for k, v in fields.items()]
        assignments = ", ".join(f"{key} = ?" for key in fields)
        with self._lock:
            self._write_now(f"UPDATE runs SET {assignments} WHERE run_id = ?", (*values, run_id))

    def runs(self):
        """One row a run, as a pandas DataFrame: id, case, seed, status, message, counts and times."""
        import pandas as pd

        columns = ["run_id", "case_title", "case_hash", "seed", "status", "message", "started", "finished",
                   "n_evals"]
        rows = self._query(
            "SELECT r.run_id, r.case_title, r.case_hash, r.seed, r.status, r.message, r.started, r.finished,"
            " (SELECT COUNT(*) FROM evaluations e WHERE e.run_id = r.run_id AND e.source_id IS NULL)"
            " FROM runs r ORDER BY r.run_id"
        )
        return pd.DataFrame.from_records(rows, columns=columns)

    def run(self, run_id: int) -> dict[str, Any]:
        """Everything recorded about one run (StoreError when there is no such run)."""
        keys = ("run_id", "case_hash", "case_title", "case_path", "case_text", "settings", "seed", "versions",
                "status", "message", "reference", "started", "finished")
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
        with self._lock:
            self._check()
            writer = self._started()
            eval_id = self._take_id()
            writer.put(("row", (eval_id, run_id, case_hash, design_key, dict(design), dict(results), status,
                                message, duration, generation, worker, source_id, time.time())))
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
            for start in range(0, len(keys), 500):
                chunk = keys[start : start + 500]
                marks = ",".join("?" * len(chunk))
                rows = self._db.execute(
                    f"SELECT eval_id, design_key, results, status, message, duration, worker FROM evaluations"
                    f" WHERE case_hash = ? AND source_id IS NULL AND design_key IN ({marks}){skip} ORDER BY eval_id",
                    (case_hash, *chunk, *tail),
                ).fetchall()
                for eval_id, key, results, status, message, duration, worker in rows:
                    if key not in found:
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
        (others,) = self._db.execute(
            "SELECT EXISTS (SELECT 1 FROM evaluations WHERE case_hash = ? AND source_id IS NULL AND run_id <> ?)",
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
        records = []
        for eval_id, rid, gen, status, message, duration, worker, source, design, results in self._query(
            query + " ORDER BY eval_id", params
        ):
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
    def add_generation(self, run_id: int, row: dict[str, Any], *, state: bytes | None = None) -> None:
        """Record one generation's summary (and the search state to resume from), and have it committed.

        The writer commits it, with every evaluation recorded before it, at
        once (or within a tenth of a second of its last commit); the caller
        does not wait.
        """
        generation = int(row["generation"])
        with self._lock:
            self._check()
            writer = self._started()
            writer.put(("sql", "INSERT OR REPLACE INTO generations (run_id, generation, row) VALUES (?, ?, ?)",
                        (run_id, generation, _encode(row))))
            if state is not None:
                writer.put(("sql", "INSERT OR REPLACE INTO states (run_id, generation, blob) VALUES (?, ?, ?)",
                            (run_id, generation, state)))
            writer.commit_soon()

    def save_state(self, run_id: int, generation: int, state: bytes) -> None:
        """Keep the search state reached after ``generation`` (one state a run: the newest).

        Committed by the writer within a tenth of a second, and at :meth:`close`.
        """
        with self._lock:
            self._check()
            writer = self._started()
            writer.put(("sql", "INSERT OR REPLACE INTO states (run_id, generation, blob) VALUES (?, ?, ?)",
                        (run_id, generation, state)))
            writer.commit_soon()

    def history(self, run_id: int):
        """One row a recorded generation of the run, in order, as a pandas DataFrame."""
        import pandas as pd

        rows = self._query("SELECT row FROM generations WHERE run_id = ? ORDER BY generation", (run_id,))
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
            self._write_now("DELETE FROM generations WHERE run_id = ? AND generation > ?", (run_id, generation))
            self._write_now("DELETE FROM states WHERE run_id = ? AND generation > ?", (run_id, generation))


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
            raise StoreError(f"{path}: is not an SQLite file (it starts with {header[:8]!r}); expected an archive")
    db = None
    try:
        db = sqlite3.connect(path, timeout=LOCK_WAIT, check_same_thread=False)
        _patiently(path, db, lambda: _prepare(path, db, create=create))
    except StoreError:
        if db is not None:
            db.close()
        raise
    except sqlite3.DatabaseError as exc:
        if db is not None:
            db.close()
        raise StoreError(f"{path}: cannot be used as an archive ({exc})") from None
    if _WRITER == "process":
        from tradewise import _store_process

        return _store_process.Store(path, db)
    return Store(path, db)


def _prepare(path: Path, db: sqlite3.Connection, *, create: bool) -> None:
    # Look before writing anything: switching to WAL or adding tables would change a foreign file.
    tables = {r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    tables.discard("sqlite_sequence")
    if tables:
        _check_tables(path, db, tables)
    elif not create:
        raise StoreError(f"{path}: is an empty SQLite file, not an archive written by `tradewise run`")
    db.execute("PRAGMA journal_mode=WAL")
    db.execute("PRAGMA synchronous=NORMAL")
    if not tables:
        db.executescript(_SCHEMA)
        db.execute("INSERT OR IGNORE INTO meta (key, value) VALUES ('schema', ?)", (str(SCHEMA_VERSION),))
        db.commit()


def _check_tables(path: Path, db: sqlite3.Connection, tables: set[str]) -> None:
    if not _TABLES.issubset(tables):
        shown = ", ".join(sorted(tables)[:6]) + (", ..." if len(tables) > 6 else "")
        raise StoreError(f"{path}: is an SQLite file of something else (tables: {shown}), not a tradewise archive")
    row = db.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()
    if row is None or not str(row[0]).isdigit():
        raise StoreError(f"{path}: has no tradewise schema version, so it is not a tradewise archive")
    if int(row[0]) > SCHEMA_VERSION:
        raise StoreError(
            f"{path}: archive schema {row[0]} was written by a newer tradewise; this one reads up to {SCHEMA_VERSION}"
        )
