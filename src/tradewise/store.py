"""The SQLite archive of runs, every evaluation and the generation history."""

from __future__ import annotations

import json
import math
import sqlite3
import time
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import pandas as pd

from tradewise.errors import StoreError

__all__ = ["Store", "open_store"]

SCHEMA_VERSION = 1
_COMMIT_EVERY = 0.5  # seconds; keeps every completed evaluation durable within one second

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


def _dumps(value: Any) -> str:
    return json.dumps(value, default=_plain, allow_nan=False)


def _plain(value: Any) -> Any:
    if hasattr(value, "item"):
        value = value.item()
        if isinstance(value, float) and not math.isfinite(value):
            return None
        return value
    raise TypeError(f"cannot store {type(value).__name__}")


class Store:
    """An open archive file; use :func:`open_store` to get one.

    Several runs, of one case or of several, may share one file; each
    evaluation remembers its case hash so that a design already evaluated
    for the same case is served from here in any later run.
    """

    def __init__(self, path: Path, connection: sqlite3.Connection) -> None:
        self.path = path
        self._db = connection
        self._last_commit = time.monotonic()

    # ------------------------------------------------------------- plumbing
    def close(self) -> None:
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
        self._db.commit()
        self._last_commit = time.monotonic()

    def _maybe_commit(self) -> None:
        if time.monotonic() - self._last_commit >= _COMMIT_EVERY:
            self.flush()

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
        for key, value in fields.items():
            if key not in allowed:
                raise KeyError(key)
            if key in {"reference", "settings"}:
                value = _dumps(value)
            self._db.execute(f"UPDATE runs SET {key} = ? WHERE run_id = ?", (value, run_id))
        self.flush()

    def runs(self) -> pd.DataFrame:
        """One row a run: id, case, seed, status, message, counts and times."""
        table = pd.read_sql_query(
            "SELECT r.run_id, r.case_title, r.case_hash, r.seed, r.status, r.message, r.started, r.finished,"
            " (SELECT COUNT(*) FROM evaluations e WHERE e.run_id = r.run_id AND e.source_id IS NULL) AS n_evals"
            " FROM runs r ORDER BY r.run_id",
            self._db,
        )
        return table

    def run(self, run_id: int) -> dict[str, Any]:
        """Everything recorded about one run (StoreError when there is no such run)."""
        row = self._db.execute(
            "SELECT run_id, case_hash, case_title, case_path, case_text, settings, seed, versions, status,"
            " message, reference, started, finished FROM runs WHERE run_id = ?",
            (run_id,),
        ).fetchone()
        if row is None:
            known = ", ".join(str(r) for r in self.runs()["run_id"]) or "none"
            raise StoreError(f"{self.path}: no run {run_id}; runs: {known}")
        keys = ("run_id", "case_hash", "case_title", "case_path", "case_text", "settings", "seed", "versions",
                "status", "message", "reference", "started", "finished")
        record = dict(zip(keys, row, strict=True))
        for key in ("settings", "versions", "reference"):
            record[key] = json.loads(record[key]) if record[key] else None
        return record

    def latest_run(self) -> int:
        row = self._db.execute("SELECT MAX(run_id) FROM runs").fetchone()
        if row is None or row[0] is None:
            raise StoreError(f"{self.path}: holds no runs")
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
        """Record one completed evaluation (or one served from the archive, with ``source_id``)."""
        cursor = self._db.execute(
            "INSERT INTO evaluations (run_id, case_hash, design_key, design, results, status, message, duration,"
            " generation, worker, source_id, created) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (
                run_id,
                case_hash,
                design_key,
                _dumps(design),
                _dumps(results),
                status,
                message,
                duration,
                generation,
                worker,
                source_id,
                time.time(),
            ),
        )
        self._maybe_commit()
        return int(cursor.lastrowid)

    def lookup(self, case_hash: str, keys: Iterable[str]) -> dict[str, dict[str, Any]]:
        """Evaluations already archived for this case, by design key (first real evaluation wins)."""
        found: dict[str, dict[str, Any]] = {}
        keys = list(dict.fromkeys(keys))
        for start in range(0, len(keys), 500):
            chunk = keys[start : start + 500]
            marks = ",".join("?" * len(chunk))
            rows = self._db.execute(
                f"SELECT eval_id, design_key, results, status, message, duration, worker FROM evaluations"
                f" WHERE case_hash = ? AND source_id IS NULL AND design_key IN ({marks}) ORDER BY eval_id",
                (case_hash, *chunk),
            )
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
        records = []
        for eval_id, rid, gen, status, message, duration, worker, source, design, results in self._db.execute(
            query, params
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
        row = self._db.execute(
            "SELECT COUNT(*) FROM evaluations WHERE run_id = ? AND source_id IS NULL", (run_id,)
        ).fetchone()
        return int(row[0])

    # --------------------------------------------------- history and states
    def add_generation(self, run_id: int, row: dict[str, Any], *, state: bytes | None = None) -> None:
        """Record one generation's summary (and the search state to resume from) durably."""
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

    def history(self, run_id: int) -> pd.DataFrame:
        rows = [json.loads(r) for (r,) in self._db.execute(
            "SELECT row FROM generations WHERE run_id = ? ORDER BY generation", (run_id,)
        )]
        return pd.DataFrame.from_records(rows)

    def state(self, run_id: int) -> tuple[int, bytes] | None:
        row = self._db.execute("SELECT generation, blob FROM states WHERE run_id = ?", (run_id,)).fetchone()
        return (int(row[0]), bytes(row[1])) if row else None


def open_store(path: str | Path, *, create: bool = True) -> Store:
    """Open (and with ``create``, make) an archive file in WAL mode.

    Raises
    ------
    StoreError
        When the file is missing (and ``create`` is false), is not an SQLite
        database, or is an SQLite database of something else.
    """
    path = Path(path)
    if not path.exists():
        if not create:
            raise StoreError(f"{path}: no such archive file")
        path.parent.mkdir(parents=True, exist_ok=True)
    elif path.is_dir():
        raise StoreError(f"{path}: is a folder, expected an archive file")
    else:
        with open(path, "rb") as handle:
            header = handle.read(16)
        if header and header != b"SQLite format 3\x00":
            raise StoreError(f"{path}: is not an SQLite archive (it starts with {header[:8]!r})")
    try:
        db = sqlite3.connect(path, timeout=30)
        db.execute("PRAGMA journal_mode=WAL")
        db.execute("PRAGMA synchronous=NORMAL")
        tables = {r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        if tables and "runs" not in tables:
            db.close()
            raise StoreError(f"{path}: is an SQLite file but not a tradewise archive (tables: {', '.join(sorted(tables))})")
        db.executescript(_SCHEMA)
        db.execute("INSERT OR IGNORE INTO meta (key, value) VALUES ('schema', ?)", (str(SCHEMA_VERSION),))
        db.commit()
    except sqlite3.DatabaseError as exc:
        raise StoreError(f"{path}: cannot be used as an archive ({exc})") from None
    return Store(path, db)

