"""The archive writer: applies rows to the SQLite archive off the search's hot path.

Standard library only: it runs as its own process (``python -I -S _archive_writer.py ARCHIVE``)
fed through its standard input, or in the search process when no such process can be started.
"""

import json
import math
import os
import pickle
import queue
import sqlite3
import struct
import sys
import threading
import time

COMMIT_EVERY = 0.4  # seconds an evaluation may wait uncommitted here
COMMIT_GAP = 0.1  # a generation's end commits at once unless the last commit is younger than this
INSERT = (
    "INSERT INTO evaluations (eval_id, run_id, case_hash, design_key, design, results, status,"
    " message, duration, generation, worker, source_id, created)"
    " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"
)


def finite(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: finite(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [finite(v) for v in value]
    return value


def plain(value):
    if hasattr(value, "item"):  # a numpy number
        value = value.item()
        return None if isinstance(value, float) and not math.isfinite(value) else value
    raise TypeError(f"cannot store {type(value).__name__}")


_encoder = json.JSONEncoder(default=plain, allow_nan=False, separators=(",", ":"))
try:  # the C encoder built once; json builds a new one for every call otherwise
    from json.encoder import c_make_encoder, encode_basestring_ascii

    _fast = c_make_encoder(
        None, plain, encode_basestring_ascii, None, ":", ",", False, False, False
    )
except (ImportError, TypeError):
    _fast = None


def encode(value):
    try:
        return "".join(_fast(value, 0)) if _fast is not None else _encoder.encode(value)
    except ValueError:  # NaN or infinity: JSON has none
        return _encoder.encode(finite(value))


class Writer:
    """Applies messages to a connection and decides when to commit."""

    def __init__(self, db):
        self.db = db
        self.dirty_since = None
        self.asked = False
        self.last_commit = time.monotonic()

    def apply(self, message):
        kind = message[0]
        if kind == "rows":
            # each design as the tuple of its variable names and the tuple of its values
            self.db.executemany(
                INSERT,
                [
                    (
                        i,
                        run,
                        case,
                        key,
                        encode(dict(zip(names, values, strict=True))),
                        encode(results),
                        status,
                        text,
                        duration,
                        gen,
                        worker,
                        source,
                        created,
                    )
                    for i, run, case, key, names, values, results, status, text, duration, gen, worker, source, created in message[
                        1
                    ]
                ],
            )
            self.touch()
        elif kind == "sql":
            self.db.execute(message[1], message[2])
            self.touch()
        elif kind == "commit":
            self.asked = True
        elif kind == "many":
            for part in message[1]:
                self.apply(part)
        elif kind == "reserve":
            self.commit()
            return ("reserved", reserve(self.db, message[1]))
        elif kind in ("sync", "close"):
            self.commit()
            return message[1]
        return None

    def touch(self):
        if self.dirty_since is None:
            self.dirty_since = time.monotonic()

    def due(self):
        if self.dirty_since is None:
            return False
        now = time.monotonic()
        return now - self.dirty_since >= COMMIT_EVERY or (
            self.asked and now - self.last_commit >= COMMIT_GAP
        )

    def commit(self):
        self.db.commit()
        self.dirty_since = None
        self.asked = False
        self.last_commit = time.monotonic()


def reserve(db, block):
    """Move the evaluation id counter past a block of ids; return the id before the block."""
    db.execute("BEGIN IMMEDIATE")
    try:
        row = db.execute("SELECT seq FROM sqlite_sequence WHERE name = 'evaluations'").fetchone()
        (largest,) = db.execute("SELECT COALESCE(MAX(eval_id), 0) FROM evaluations").fetchone()
        top = max(row[0] if row else 0, largest)
        if row:
            db.execute(
                "UPDATE sqlite_sequence SET seq = ? WHERE name = 'evaluations'", (top + block,)
            )
        else:
            db.execute(
                "INSERT INTO sqlite_sequence (name, seq) VALUES ('evaluations', ?)", (top + block,)
            )
        db.commit()
    except BaseException:
        db.rollback()
        raise
    return top


def read_messages(stream, inbox):
    while True:
        head = stream.read(4)
        if len(head) < 4:
            inbox.put(None)
            return
        (size,) = struct.unpack(">I", head)
        try:
            inbox.put(pickle.loads(stream.read(size)))
        except BaseException as exc:  # e.g. a value this process cannot unpickle: stop, do not hang
            inbox.put(exc)
            return


def main(path, wait=60.0):
    db = sqlite3.connect(path, timeout=wait)
    db.execute("PRAGMA synchronous=NORMAL")
    writer = Writer(db)
    inbox = queue.Queue()
    threading.Thread(target=read_messages, args=(sys.stdin.buffer, inbox), daemon=True).start()
    out = sys.stdout.buffer
    while True:
        try:
            message = inbox.get(timeout=0.05)
        except queue.Empty:
            message = ()
        if isinstance(message, BaseException):
            writer.commit()
            raise message
        if message is None:  # the search process closed the archive, or died: keep what it sent
            writer.commit()
            db.close()
            return
        if message:
            reply = writer.apply(message)
            if reply is not None:
                data = pickle.dumps(reply)
                out.write(struct.pack(">I", len(data)) + data)
                out.flush()
            if message[0] == "close":
                db.close()
                return
        if writer.due():
            writer.commit()


if __name__ == "__main__":
    # Ctrl-C reaches the whole process group; the search process decides what to do with it and
    # then tells this writer to close, so the writer itself must not die of it.
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # os._exit: the reader thread may still be blocked on the input pipe, which a normal interpreter
    # shutdown does not allow.
    try:
        main(sys.argv[1], *(float(a) for a in sys.argv[2:3]))
    except BaseException as exc:
        print(f"{type(exc).__name__}: {exc}", file=sys.stderr, flush=True)
        os._exit(1)
    os._exit(0)
