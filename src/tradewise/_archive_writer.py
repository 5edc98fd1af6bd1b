"""The archive writer: applies rows to the SQLite archive off the search's hot path.

Standard library only: it runs as its own process (``python -I -S _archive_writer.py ARCHIVE``)
fed through its standard input, or in the search process when no such process can be started.
"""

import hashlib
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
    "INSERT INTO evaluations (eval_id, run_id, case_hash, design_key, key_digest, design, results,"
    " status, message, duration, generation, worker, source_id, created)"
    " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"
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


def key_digest(case_hash, key):
    """The archive's index entry for a design key of a case: a 64-bit signed integer.

    Keeping an index on the keys themselves (about 600 characters for 30 reals) was a third of
    the writer's time; a look-up compares the full key of every row the digest finds.
    """
    text = f"{case_hash}\n{key}".encode("utf-8", "surrogatepass")
    return int.from_bytes(hashlib.blake2b(text, digest_size=8).digest(), "big", signed=True)


_FLOAT = {float}
_PACKS = {}


def pack_design(values):
    """A design of finite floats as little-endian 8-byte floats; None for any other design.

    Writing a float as JSON text (its repr) takes about a microsecond, so the text of a design of
    30 reals was most of what the writer did; packing it takes a hundredth of that, and keeps
    every bit.
    """
    if set(map(type, values)) != _FLOAT or not math.isfinite(sum(values)):
        return None
    packer = _PACKS.get(len(values))
    if packer is None:
        packer = _PACKS[len(values)] = struct.Struct(f"<{len(values)}d")
    return packer.pack(*values)


def unpack_design(names, blob):
    """The design :func:`pack_design` packed, as a dict of its variables' values."""
    if len(blob) != 8 * len(names):
        raise ValueError(f"{len(blob)} bytes hold no design of {len(names)} reals")
    return dict(zip(names, struct.unpack(f"<{len(names)}d", blob), strict=True))


class Writer:
    """Applies messages to a connection and decides when to commit."""

    def __init__(self, db):
        self.db = db
        self.dirty_since = None
        self.asked = False
        self.last_commit = time.monotonic()
        self.variables = {}  # run id -> the variable names its designs are packed with

    def design(self, run, names, values):
        """A design as the archive holds it: packed when it is of reals in the run's variables' order, else JSON."""
        known = self.variables.get(run)
        if known is None:
            known = self.variables[run] = self.run_variables(run, names)
        if names == known:
            packed = pack_design(values)
            if packed is not None:
                return packed
        return encode(dict(zip(names, values, strict=True)))

    def run_variables(self, run, names):
        """The run's variable names as recorded, recording ``names`` if it has none yet."""
        row = self.db.execute("SELECT variables FROM runs WHERE run_id = ?", (run,)).fetchone()
        if row is None:
            return ()  # no such run: its designs go as JSON
        if row[0] is None:
            self.db.execute(
                "UPDATE runs SET variables = ? WHERE run_id = ?", (encode(list(names)), run)
            )
            return names
        return tuple(json.loads(row[0]))

    def apply(self, message):
        kind = message[0]
        if kind == "rows":
            # a row as handed over: (eval_id, run, case hash, key, names, values, results, then
            # the status, message, duration, generation, worker, source and time as stored)
            design = self.design
            self.db.executemany(
                INSERT,
                [
                    (
                        *row[:4],
                        key_digest(row[2], row[3]),
                        design(row[1], row[4], row[5]),
                        encode(row[6]),
                        *row[7:],
                    )
                    for row in message[1]
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
