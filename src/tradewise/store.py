"""The SQLite archive of runs, every evaluation and the generation history."""

from __future__ import annotations

import json
import math
import sqlite3
import threading
import time
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import pandas as pd

from tradewise.errors import StoreError

__all__ = ["Store", "open_store", "SCHEMA_VERSION"]

SCHEMA_VERSION = 1
# A completed evaluation is committed at most this many seconds after it was recorded, by a
# background thread, so it survives a kill even while the next evaluation runs for hours.
_COMMIT_EVERY = 0.5
_TICK = 0.1
_SQLITE_HEADER = b"SQLite format 3\x00"

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


def _plain(value: Any) -> Any:
    if hasattr(value, "item"):
        value = value.item()
        if isinstance(value, float) and not math.isfinite(value):
            return None
        return value
    raise TypeError(f"cannot store {type(value).__name__}")


# One encoder for every row: building a new one per call (what json.dumps does when given
# `default`) costs about as much as encoding a small design.
_encode = json.JSONEncoder(default=_plain, allow_nan=False, separators=(",", ":")).encode


def _dumps(value: Any) -> str:
    return _encode(value)


class Store:
    """An open archive file; use :func:`open_store` to get one.

    Several runs, of one case or of several, may share one file; each
    evaluation remembers its case hash so that a design already evaluated
    for the same case is served from here in any later run.

    Writes are grouped into transactions: a background thread commits
    whatever is pending at most half a second after it was written, and
    :meth:`flush` (called at the end of every generation) commits at once.
    So a killed run loses only the designs that were still being evaluated.
    The file is in WAL mode with ``synchronous=NORMAL``: commits survive a
    killed process; a power cut may lose the last commits, never corrupt
    the file.
    """

    def __init__(self, path: Path, connection: sqlite3.Connection) -> None:
        self.path = path
        self._db = connection
        self._lock = threading.RLock()
        self._dirty_since: float | None = None
        self._closing = threading.Event()
        self._flusher: threading.Thread | None = None

    # ------------------------------------------------------------- plumbing
    def close(self) -> None:
        """Commit what is pending and close the file."""
        self._closing.set()
        if self._flusher is not None:
            self._flusher.join()
            self._flusher = None
        with self._lock:
            try:
                self._db.commit()
            finally:
                self._db.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def flush(self) -> None:
        """Make everything written so far durable."""
        with self._lock:
            self._db.commit()
            self._dirty_since = None

    def _written(self) -> None:
        """Note an uncommitted write (call with the lock held) and make sure it gets committed."""
        if self._dirty_since is None:
            self._dirty_since = time.monotonic()
        if self._flusher is None and not self._closing.is_set():
            self._flusher = threading.Thread(target=self._flush_loop, name="tradewise-store", daemon=True)
            self._flusher.start()

    def _flush_loop(self) -> None:
        while not self._closing.wait(_TICK):
            with self._lock:
                if self._dirty_since is not None and time.monotonic() - self._dirty_since >= _COMMIT_EVERY:
                    try:
                        self._db.commit()
                    except sqlite3.Error:
                        return  # the connection is gone or the disk failed; the owner sees it next
                    self._dirty_since = None

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
            cursor = self._db.execute(
                "INSERT INTO runs (case_hash, case_title, case_path, case_text, settings, seed, versions,"
                " status, message, started) VALUES (?, ?, ?, ?, ?, ?, ?, 'running', '', ?)",
                (case_hash, case_title, case_path, case_text, _dumps(settings), seed, _dumps(versions), time.time()),
            )
            self.flush()
            return int(cursor.lastrowid)

    def update_run(self, run_id: int, **fields: Any) -> None:
        """Change a run's ``status``, ``message``, ``reference``, ``settings`` or ``finished``."""
        allowed = {"status", "message", "reference", "settings", "finished"}
        with self._lock:
            for key, value in fields.items():
                if key not in allowed:
                    raise KeyError(key)
                if key in {"reference", "settings"}:
                    value = _dumps(value)
                self._db.execute(f"UPDATE runs SET {key} = ? WHERE run_id = ?", (value, run_id))
            self.flush()

    def runs(self) -> pd.DataFrame:
        """One row a run: id, case, seed, status, message, counts and times."""
        with self._lock:
            return pd.read_sql_query(
                "SELECT r.run_id, r.case_title, r.case_hash, r.seed, r.status, r.message, r.started, r.finished,"
                " (SELECT COUNT(*) FROM evaluations e WHERE e.run_id = r.run_id AND e.source_id IS NULL)"
                " AS n_evals FROM runs r ORDER BY r.run_id",
                self._db,
            )

    def run(self, run_id: int) -> dict[str, Any]:
        """Everything recorded about one run (StoreError when there is no such run)."""
        keys = ("run_id", "case_hash", "case_title", "case_path", "case_text", "settings", "seed", "versions",
                "status", "message", "reference", "started", "finished")
        with self._lock:
            row = self._db.execute(f"SELECT {', '.join(keys)} FROM runs WHERE run_id = ?", (run_id,)).fetchone()
            if row is None:
                known = [str(r) for (r,) in self._db.execute("SELECT run_id FROM runs ORDER BY run_id")]
                raise StoreError(
                    f"{self.path}: run {run_id} is not in this archive; runs it holds: {', '.join(known) or 'none'}"
                )
        record = dict(zip(keys, row, strict=True))
        for key in ("settings", "versions", "reference"):
            record[key] = json.loads(record[key]) if record[key] else None
        return record

    def latest_run(self) -> int:
        """The id of the newest run in the file (StoreError when it holds none)."""
        with self._lock:
            row = self._db.execute("SELECT MAX(run_id) FROM runs").fetchone()
        if row is None or row[0] is None:
            raise StoreError(f"{self.path}: the archive holds no runs")
        return int(row[0])

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

        The row is committed within a second (see the class notes).
        """
        row = (run_id, case_hash, design_key, _dumps(design), _dumps(results), status, message, duration,
               generation, worker, source_id, time.time())
        with self._lock:
            cursor = self._db.execute(
                "INSERT INTO evaluations (run_id, case_hash, design_key, design, results, status, message,"
                " duration, generation, worker, source_id, created) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                row,
            )
            self._written()
            return int(cursor.lastrowid)

    def lookup(self, case_hash: str, keys: Iterable[str]) -> dict[str, dict[str, Any]]:
        """Evaluations already archived for this case, by design key (first real evaluation wins)."""
        found: dict[str, dict[str, Any]] = {}
        keys = list(dict.fromkeys(keys))
        with self._lock:
            for start in range(0, len(keys), 500):
                chunk = keys[start : start + 500]
                marks = ",".join("?" * len(chunk))
                rows = self._db.execute(
                    f"SELECT eval_id, design_key, results, status, message, duration, worker FROM evaluations"
                    f" WHERE case_hash = ? AND source_id IS NULL AND design_key IN ({marks}) ORDER BY eval_id",
                    (case_hash, *chunk),
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

    def evaluations(self, run_id: int | None = None, *, case_hash: str | None = None) -> pd.DataFrame:
        """Every evaluation of a run (or of a case, or all) as one flat table.

        Columns: ``eval_id``, ``run_id``, ``generation``, ``status``, ``message``,
        ``duration``, ``worker``, ``cached`` (served from the archive), then the
        design's variables and the model's results under their own names.
        """
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
        query += " ORDER BY eval_id"
        with self._lock:
            rows = self._db.execute(query, params).fetchall()
        records = []
        for eval_id, rid, gen, status, message, duration, worker, source, design, results in rows:
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
        with self._lock:
            row = self._db.execute(
                "SELECT COUNT(*) FROM evaluations WHERE run_id = ? AND source_id IS NULL", (run_id,)
            ).fetchone()
        return int(row[0])

    # --------------------------------------------------- history and states
    def add_generation(self, run_id: int, row: dict[str, Any], *, state: bytes | None = None) -> None:
        """Record one generation's summary (and the search state to resume from) durably."""
        with self._lock:
            self._db.execute(
                "INSERT OR REPLACE INTO generations (run_id, generation, row) VALUES (?, ?, ?)",
                (run_id, int(row["generation"]), _dumps(row)),
            )
            if state is not None:
                self._db.execute(
                    "INSERT OR REPLACE INTO states (run_id, generation, blob) VALUES (?, ?, ?)",
                    (run_id, int(row["generation"]), state),
                )
            self.flush()

    def save_state(self, run_id: int, generation: int, state: bytes) -> None:
        """Keep the search state reached after ``generation`` (one state a run: the newest)."""
        with self._lock:
            self._db.execute(
                "INSERT OR REPLACE INTO states (run_id, generation, blob) VALUES (?, ?, ?)",
                (run_id, generation, state),
            )
            self.flush()

    def history(self, run_id: int) -> pd.DataFrame:
        """One row a recorded generation of the run, in order."""
        with self._lock:
            rows = self._db.execute(
                "SELECT row FROM generations WHERE run_id = ? ORDER BY generation", (run_id,)
            ).fetchall()
        return pd.DataFrame.from_records([json.loads(r) for (r,) in rows])

    def state(self, run_id: int) -> tuple[int, bytes] | None:
        """The newest saved search state of the run as ``(generation, pickled algorithm)``."""
        with self._lock:
            row = self._db.execute("SELECT generation, blob FROM states WHERE run_id = ?", (run_id,)).fetchone()
        return (int(row[0]), bytes(row[1])) if row else None

    def discard_after(self, run_id: int, generation: int) -> None:
        """Forget the run's history rows and served-from-archive rows after ``generation``.

        Used on resume: the search restarts from the state saved at
        ``generation`` and records those rows again. Rows of designs the run
        evaluated itself are kept (the resumed search takes them over).
        """
        with self._lock:
            self._db.execute(
                "DELETE FROM evaluations WHERE run_id = ? AND generation > ? AND source_id IS NOT NULL",
                (run_id, generation),
            )
            self._db.execute("DELETE FROM generations WHERE run_id = ? AND generation > ?", (run_id, generation))
            self._db.execute("DELETE FROM states WHERE run_id = ? AND generation > ?", (run_id, generation))
            self.flush()


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
        db = sqlite3.connect(path, timeout=30, check_same_thread=False)
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
    except StoreError:
        if db is not None:
            db.close()
        raise
    except sqlite3.DatabaseError as exc:
        if db is not None:
            db.close()
        raise StoreError(f"{path}: cannot be used as an archive ({exc})") from None
    return Store(path, db)


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
