"""The SQLite archive: durability, look-ups, resume bookkeeping, and refusing files it must not touch."""

from __future__ import annotations

import hashlib
import json
import shutil
import sqlite3
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

import tradewise
from support import GOOD_MODEL, GOOD_TOML
from tradewise import _archive_writer
from tradewise.cli import main
from tradewise.errors import StoreError
from tradewise.store import SCHEMA_VERSION, open_store

# An archive of schema 1 written by the release before schema 2 (tradewise 0.1.0): run 1 of the
# case beside it interrupted after 130 evaluations (its state saved after generation 1), run 2
# (seed 5) finished.
OLD_ARCHIVE = Path(__file__).parent / "fixtures" / "archive-v1"


def _start(store, case_hash="h1"):
    return store.start_run(
        case_hash=case_hash,
        case_title="t",
        case_path="p",
        case_text="x",
        settings={"evaluations": 10},
        seed=1,
        versions={},
    )


def _add(store, run_id, key, *, case_hash="h1", generation=1, source_id=None, value=1.0):
    return store.add_evaluation(
        run_id,
        case_hash=case_hash,
        design_key=key,
        design={"x": value},
        results={"cost": value},
        status="ok",
        message="",
        duration=0.1,
        generation=generation,
        source_id=source_id,
    )


def _count(path, where="1=1"):
    """Rows visible to another connection, i.e. committed."""
    with sqlite3.connect(path) as other:
        return other.execute(f"SELECT COUNT(*) FROM evaluations WHERE {where}").fetchone()[0]


def _digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


# ------------------------------------------------------------------------------- a new archive
def test_new_archive_is_wal_with_schema(tmp_path):
    """A new archive is in WAL mode and carries our schema version."""
    path = tmp_path / "sub" / "archive.sqlite"
    with open_store(path):
        pass
    with sqlite3.connect(path) as db:
        assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert db.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()[0] == str(
            SCHEMA_VERSION
        )


def test_evaluation_is_durable_within_one_second_while_the_next_one_runs(tmp_path):
    """A completed evaluation is committed by the background thread although nothing else happens."""
    path = tmp_path / "a.sqlite"
    store = open_store(path)
    run_id = _start(store)
    _add(store, run_id, "k1")
    _add(store, run_id, "k2")
    # The main thread now "evaluates" for a long time and writes nothing.
    deadline = time.monotonic() + 1.0
    while _count(path) < 2 and time.monotonic() < deadline:
        time.sleep(0.05)
    assert _count(path) == 2
    store.close()
    assert not [t for t in threading.enumerate() if t.name == "tradewise-store"]


def test_evaluation_survives_kill_minus_nine_after_one_second(tmp_path):
    """A process killed (SIGKILL) one second after recording an evaluation has made it durable."""
    path = tmp_path / "a.sqlite"
    script = textwrap.dedent(f"""
        import time
        from tradewise.store import open_store
        store = open_store({str(path)!r})
        run = store.start_run(case_hash="h", case_title="t", case_path="p", case_text="x",
                              settings={{}}, seed=1, versions={{}})
        store.add_evaluation(run, case_hash="h", design_key="k", design={{"x": 1}}, results={{}},
                             status="ok", message="", duration=0.0, generation=1)
        print("recorded", flush=True)
        time.sleep(60)
    """)
    proc = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "recorded"
        time.sleep(1.0)
    finally:
        proc.kill()
        proc.wait()
    assert _count(path) == 1


def test_generation_end_is_committed_at_once(tmp_path):
    """add_generation has the writer commit at once (well before the half-second), with every evaluation
    handed over before it."""
    path = tmp_path / "a.sqlite"
    with open_store(path) as store:
        run_id = _start(store)
        _add(store, run_id, "k1")
        time.sleep(
            0.15
        )  # the writer has inserted the row, and will not commit it for a while by itself
        assert _count(path) == 0
        store.add_generation(run_id, {"generation": 1, "hypervolume": 0.5}, state=b"state")
        deadline = time.monotonic() + 0.25
        while _count(path) < 1 and time.monotonic() < deadline:
            time.sleep(0.01)
        assert _count(path) == 1
        assert store.state(run_id) == (1, b"state")
        assert store.history(run_id)["hypervolume"].tolist() == [0.5]


def test_killed_search_process_loses_nothing_it_handed_over(tmp_path):
    """SIGKILL of the search process alone: the writer process still commits every row it was given."""
    path = tmp_path / "a.sqlite"
    script = textwrap.dedent(f"""
        import time
        from tradewise.store import open_store
        store = open_store({str(path)!r})
        run = store.start_run(case_hash="h", case_title="t", case_path="p", case_text="x",
                              settings={{}}, seed=1, versions={{}})
        for i in range(60):
            store.add_evaluation(run, case_hash="h", design_key=f"k{{i}}", design={{"x": i}}, results={{}},
                                 status="ok", message="", duration=0.0, generation=1 + i // 50)
            if i == 49:
                store.add_generation(run, {{"generation": 1}})
        time.sleep(0.3)  # long enough for the last ten to be handed over, not necessarily committed
        print("recorded", flush=True)
        time.sleep(60)
    """)
    proc = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "recorded"
    finally:
        proc.kill()  # the search process only; its writer sees the end of its input
        proc.wait()
    deadline = time.monotonic() + 5
    while _count(path) < 60 and time.monotonic() < deadline:
        time.sleep(0.05)
    assert _count(path) == 60


def test_kill_right_after_a_generation_end_keeps_that_generation(tmp_path):
    """SIGKILL a fifth of a second after a generation's end: that generation and every evaluation before it
    are in the file (the end of a generation commits at once, not after the half-second)."""
    path = tmp_path / "a.sqlite"
    script = textwrap.dedent(f"""
        import time
        from tradewise.store import open_store
        store = open_store({str(path)!r})
        run = store.start_run(case_hash="h", case_title="t", case_path="p", case_text="x",
                              settings={{}}, seed=1, versions={{}})
        for i in range(60):
            store.add_evaluation(run, case_hash="h", design_key=f"k{{i}}", design={{"x": i}}, results={{}},
                                 status="ok", message="", duration=0.0, generation=1 + i // 50)
            if i == 49:
                store.add_generation(run, {{"generation": 1}})
                time.sleep(0.2)
        print("recorded", flush=True)
        time.sleep(60)
    """)
    proc = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "recorded"
    finally:
        proc.kill()
        proc.wait()
    assert _count(path, "generation = 1") == 50
    with sqlite3.connect(path) as other:
        assert other.execute("SELECT generation FROM generations").fetchall() == [(1,)]


def test_evaluation_is_durable_within_one_second_while_the_search_computes(tmp_path):
    """The writer commits while this thread is busy in Python code and never waits."""
    path = tmp_path / "a.sqlite"
    with open_store(path) as store:
        _add(store, _start(store), "k1")
        deadline = time.monotonic() + 1.0
        while time.monotonic() < deadline:
            sum(range(1000))
        assert _count(path) == 1


@pytest.mark.parametrize("python", ["/no/such/python", "/bin/false"])
def test_without_a_writer_process_the_store_writes_itself(tmp_path, monkeypatch, python):
    """When no writer process can be started, or it dies at once, the same writer runs in this process."""
    monkeypatch.setattr(sys, "executable", python)
    path = tmp_path / "a.sqlite"
    with open_store(path) as store:
        run_id = _start(store)
        for i in range(5):
            _add(store, run_id, f"k{i}")
        deadline = time.monotonic() + 1.0
        while _count(path) < 5 and time.monotonic() < deadline:
            time.sleep(0.05)
        assert _count(path) == 5
        assert store.count_evaluations(run_id) == 5


def test_a_writer_process_that_never_answers_is_replaced_and_loses_nothing(tmp_path, monkeypatch):
    """The search does not wait for a new writer process; one that never answers (here a program that
    sleeps a second without reading) is replaced by the writer in this process, which gets every row,
    generation row and state sent to the silent one."""
    from tradewise import _archive_writer

    silent = tmp_path / "silent.py"
    silent.write_text("import time\ntime.sleep(1)\n")
    monkeypatch.setattr(_archive_writer, "__file__", str(silent))
    path = tmp_path / "a.sqlite"
    with open_store(path) as store:
        run_id = _start(store)
        for generation in range(1, 81):  # more messages than are kept before waiting for an answer
            _add(store, run_id, f"k{generation}", generation=generation)
            store.add_generation(run_id, {"generation": generation}, state=b"s%d" % generation)
        assert store.count_evaluations(run_id) == 80
        assert store.state(run_id) == (80, b"s80")
        assert len(store.history(run_id)) == 80


def test_a_failing_writer_is_one_store_error(tmp_path):
    """When the writer cannot write (here the table was dropped behind its back), the next call says so in
    one line naming the file and SQLite's message."""
    path = tmp_path / "a.sqlite"
    store = open_store(path)
    run_id = _start(store)
    _add(store, run_id, "k1")
    store.flush()
    with sqlite3.connect(path) as other:
        other.execute("DROP TABLE evaluations")
    _add(store, run_id, "k2")
    with pytest.raises(StoreError, match="no such table: evaluations") as info:
        store.flush()
    assert str(info.value).startswith(str(path)) and "\n" not in str(info.value)
    with pytest.raises(StoreError):
        store.close()


# ---------------------------------------------------------------------------------- look-ups
def test_lookup_serves_the_real_evaluation_of_the_same_case_only(tmp_path):
    """A look-up finds the first real evaluation of a design for its case hash, never a served copy."""
    with open_store(tmp_path / "a.sqlite") as store:
        run_id = _start(store)
        first = _add(store, run_id, "k1", value=2.0)
        _add(store, run_id, "k1", source_id=first, value=2.0)
        _add(store, run_id, "k2", case_hash="other")
        store.flush()  # look-ups see committed rows
        found = store.lookup("h1", ["k1", "k2", "k3"])
        assert set(found) == {"k1"}
        assert found["k1"]["eval_id"] == first and found["k1"]["results"] == {"cost": 2.0}


def test_lookup_leaving_out_the_own_run(tmp_path):
    """exclude_run leaves out the asking run's rows; a second run's rows are found by the first within a second."""
    with open_store(tmp_path / "a.sqlite") as store:
        one, two = _start(store), _start(store)
        _add(store, one, "k1")
        store.flush()
        assert store.lookup("h1", ["k1"], exclude_run=one) == {}
        assert set(store.lookup("h1", ["k1"], exclude_run=two)) == {"k1"}
        _add(store, two, "k2")
        store.flush()
        time.sleep(1.05)  # "no other runs" is trusted for a second only
        assert set(store.lookup("h1", ["k1", "k2"], exclude_run=one)) == {"k2"}


def test_lookup_compares_the_whole_key_where_digests_meet(tmp_path):
    """A row whose key digest equals the asked key's but whose key differs is not served (a digest collision)."""
    path = tmp_path / "a.sqlite"
    with open_store(path) as store:
        run_id = _start(store)
        _add(store, run_id, "k1")
        store.flush()
    with sqlite3.connect(path) as db:
        db.execute(
            "UPDATE evaluations SET key_digest = ?", (_archive_writer.key_digest("h1", "k2"),)
        )
    with open_store(path) as store:
        assert store.lookup("h1", ["k2"]) == {}
        assert store.lookup("h1", ["k1"]) == {}  # its row now carries another key's digest
        db_plan = store._db.execute(
            "EXPLAIN QUERY PLAN SELECT eval_id FROM evaluations WHERE key_digest IN (1, 2)"
            " AND case_hash = 'h1' AND source_id IS NULL AND run_id <> 3"
        ).fetchall()
        assert "evaluations_by_digest" in str(db_plan)


# ------------------------------------------------------------------------------- designs
def test_designs_of_reals_are_packed_and_read_back_bit_for_bit(tmp_path):
    """A design of finite reals in the run's variables is kept as 8-byte floats and read back exactly; one
    with an integer, a flag, a choice, NaN or other names is kept as JSON, as before."""
    path = tmp_path / "a.sqlite"
    designs = [
        {"x": 0.1 + 0.2, "y": 5e-324},
        {"x": -0.0, "y": 1.7976931348623157e308},
        {"x": 3, "y": 0.5},
        {"x": True, "y": 0.5},
        {"x": "anodised", "y": 0.5},
        {"x": float("nan"), "y": 0.5},
        {"y": 0.5, "x": 0.25},
    ]
    with open_store(path) as store:
        run_id = _start(store)
        for i, design in enumerate(designs):
            store.add_evaluation(
                run_id,
                case_hash="h1",
                design_key=f"k{i}",
                design=design,
                results={"cost": 1.0},
                status="ok",
                message="",
                duration=0.1,
                generation=1,
            )
        table = store.evaluations(run_id)
    with sqlite3.connect(path) as db:
        kinds = [
            r[0] for r in db.execute("SELECT typeof(design) FROM evaluations ORDER BY eval_id")
        ]
        (names,) = db.execute("SELECT variables FROM runs").fetchone()
    assert kinds == ["blob", "blob"] + ["text"] * 5 and json.loads(names) == ["x", "y"]
    got = table[["x", "y"]].to_dict("records")
    assert [r["x"] for r in got[:5]] == [0.1 + 0.2, -0.0, 3, True, "anodised"]
    assert str(got[1]["x"]) == "-0.0" and got[0]["y"] == 5e-324
    assert got[1]["y"] == 1.7976931348623157e308 and got[6] == {"x": 0.25, "y": 0.5}
    assert got[5]["x"] is None  # JSON has no NaN: stored as null, as before


def test_a_run_of_reals_reads_back_what_it_evaluated(tmp_path):
    """Every design of a run of real variables is packed, and the archive gives back exactly the values the run
    holds in memory."""
    case = tradewise.load_case(Path(__file__).parent / "cases" / "zdt1").with_search(
        stall_generations=0
    )
    result = tradewise.run(case, evaluations=200, population=20, store=tmp_path / "a.sqlite")
    with sqlite3.connect(tmp_path / "a.sqlite") as db:
        kinds = {r[0] for r in db.execute("SELECT typeof(design) FROM evaluations")}
    assert kinds == {"blob"}
    with open_store(tmp_path / "a.sqlite", create=False) as store:
        table = store.evaluations(result.run_id)
    names = ["eval_id", *case.variable_names, *case.objective_names]
    assert table[names].equals(result.evaluations[names].reset_index(drop=True))


# ------------------------------------------------------------------- archives of schema 1
def _rows(path):
    with sqlite3.connect(path) as db:
        return db.execute(
            "SELECT eval_id, run_id, case_hash, design_key, design, results, status, message,"
            " duration, generation, worker, source_id, created FROM evaluations ORDER BY eval_id"
        ).fetchall()


def _schema(path):
    with sqlite3.connect(path) as db:
        version = db.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()[0]
        indexes = {r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type = 'index'")}
    return int(version), indexes


def test_schema_1_archive_is_read_without_a_change(tmp_path):
    """Reading an archive of schema 1 (its runs, evaluations, history and state) leaves its file as it was."""
    path = tmp_path / "archive.sqlite"
    shutil.copy(OLD_ARCHIVE / "archive.sqlite", path)
    before = _digest(path)
    with open_store(path, create=False) as store:
        assert len(store.evaluations(1)) == 130 and len(store.evaluations(2)) == 60
        assert store.state(1)[0] == 1 and len(store.history(2)) == 3
        assert store.runs()["status"].tolist() == ["interrupted", "budget"]
    assert _digest(path) == before
    assert _schema(path) == (1, {"evaluations_by_key", "evaluations_by_run"} | _AUTO)


_AUTO = {"sqlite_autoindex_meta_1", "sqlite_autoindex_generations_1"}


def test_schema_1_archive_is_upgraded_by_its_first_evaluation_and_keeps_every_row(tmp_path):
    """The first evaluation written to an archive of schema 1 upgrades it to schema 2 (the digest index in place
    of the key index); every stored row keeps every value, its designs are found by key, and the file reads
    back its old (JSON) designs beside the new (packed) one."""
    path = tmp_path / "archive.sqlite"
    shutil.copy(OLD_ARCHIVE / "archive.sqlite", path)
    old = _rows(path)
    with open_store(path, create=False) as store:
        table = store.evaluations()
    with open_store(path) as store:
        run_id = _start(store)
        _add(store, run_id, "k1", value=0.1 + 0.2)
    assert _schema(path) == (2, {"evaluations_by_digest", "evaluations_by_run"} | _AUTO)
    rows = _rows(path)
    assert rows[: len(old)] == old and len(rows) == len(old) + 1 and isinstance(rows[-1][4], bytes)
    real = [r for r in old if r[11] is None]
    with open_store(path) as store:
        found = store.lookup(old[0][2], [r[3] for r in real])
        now = store.evaluations()
    assert {k: v["eval_id"] for k, v in found.items()} == {r[3]: r[0] for r in real}
    assert now["x"].iloc[-1] == 0.1 + 0.2
    # the new row's columns (x, cost) widen the old ones' types (integers with a gap become floats)
    pd.testing.assert_frame_equal(now.iloc[:-1][table.columns], table, check_dtype=False)


def test_schema_upgrade_is_one_transaction(tmp_path, monkeypatch):
    """An upgrade that fails halfway (as a killed process would) leaves the archive at schema 1, every
    evaluation as it was."""
    path = tmp_path / "archive.sqlite"
    shutil.copy(OLD_ARCHIVE / "archive.sqlite", path)
    old = _rows(path)
    seen = []

    def failing(case_hash, key):
        seen.append(key)
        if len(seen) > 100:
            raise RuntimeError("stopped halfway")
        return 0

    monkeypatch.setattr(_archive_writer, "key_digest", failing)
    with open_store(path) as store, pytest.raises(sqlite3.OperationalError):
        _start(store)
        store.flush()
    assert _schema(path)[0] == 1 and _rows(path) == old
    with sqlite3.connect(path) as db:
        assert "key_digest" not in {r[1] for r in db.execute("PRAGMA table_info(evaluations)")}


def test_discard_after_keeps_real_evaluations(tmp_path):
    """Resume bookkeeping: served rows and history after the state go, real evaluations stay."""
    with open_store(tmp_path / "a.sqlite") as store:
        run_id = _start(store)
        real = _add(store, run_id, "k1", generation=3)
        _add(store, run_id, "k0", generation=3, source_id=real)
        _add(store, run_id, "k9", generation=2, source_id=real)
        for g in (1, 2, 3):
            store.add_generation(run_id, {"generation": g})
        store.discard_after(run_id, 2)
        table = store.evaluations(run_id)
        assert sorted(zip(table["generation"], table["cached"], strict=True)) == [
            (2, True),
            (3, False),
        ]
        assert store.history(run_id)["generation"].tolist() == [1, 2]


def test_two_cases_share_one_archive(make_case, tmp_path):
    """Runs of two cases into one file are kept apart by case hash; runs() lists both."""
    one = make_case(name="one")
    two = make_case(GOOD_TOML.replace('"tiny"', '"tiny two"'), name="two")
    store = tmp_path / "shared.sqlite"
    first = tradewise.run(one, evaluations=20, population=10, store=store)
    second = tradewise.run(two, evaluations=20, population=10, store=store)
    assert first.n_cached == 0 and second.n_cached == 0  # different case hashes: nothing shared
    with open_store(store, create=False) as archive:
        runs = archive.runs()
    assert runs["n_evals"].tolist() == [20, 20]
    assert runs["case_hash"].nunique() == 2


# ------------------------------------------------------------------------------- bad files
def _foreign_sqlite(path):
    with sqlite3.connect(path) as db:
        db.execute("CREATE TABLE customers (name TEXT)")
        db.execute("INSERT INTO customers VALUES ('A. Person')")


def _newer_archive(path):
    with open_store(path):
        pass
    db = sqlite3.connect(path)
    db.execute("UPDATE meta SET value = '99' WHERE key = 'schema'")
    db.commit()
    db.execute("PRAGMA journal_mode=DELETE")
    db.close()


BAD_FILES = {
    "not sqlite": (lambda p: p.write_text("name,cost\nA,1\n"), "is not an SQLite file"),
    "sqlite of something else": (_foreign_sqlite, "SQLite file of something else"),
    "newer schema": (_newer_archive, "newer tradewise"),
}


@pytest.mark.parametrize("kind", list(BAD_FILES))
def test_bad_file_is_refused_and_left_unchanged(tmp_path, kind):
    """A file that is not one of our archives gives a one-line StoreError and keeps its bytes."""
    path = tmp_path / "bad.sqlite"
    make, words = BAD_FILES[kind]
    make(path)
    before = _digest(path)
    for create in (True, False):
        with pytest.raises(StoreError, match=words) as info:
            open_store(path, create=create)
        assert "\n" not in str(info.value)
    assert _digest(path) == before
    assert not (tmp_path / "bad.sqlite-wal").exists()


def test_missing_and_empty_files_when_resuming(tmp_path):
    """Resuming needs an existing archive: a missing or empty file is refused, and not created."""
    with pytest.raises(StoreError, match="does not exist"):
        open_store(tmp_path / "none.sqlite", create=False)
    assert not (tmp_path / "none.sqlite").exists()
    empty = tmp_path / "empty.sqlite"
    empty.write_bytes(b"")
    with pytest.raises(StoreError, match="is empty"):
        open_store(empty, create=False)
    assert empty.read_bytes() == b""
    with pytest.raises(StoreError, match="is a folder"):
        open_store(tmp_path, create=True)


@pytest.mark.parametrize("kind", list(BAD_FILES))
def test_cli_run_into_a_bad_store_exits_2_and_touches_nothing(make_case, tmp_path, kind):
    """`tradewise run --store BAD` prints one Error line, exits 2 and writes no run folder."""
    folder = make_case(model=GOOD_MODEL)
    path = tmp_path / "bad.sqlite"
    BAD_FILES[kind][0](path)
    before = _digest(path)
    out = tmp_path / "run"
    result = CliRunner().invoke(
        main, ["run", str(folder), "--store", str(path), "--out", str(out), "--quiet"]
    )
    assert result.exit_code == 2
    assert result.output.strip().count("\n") == 0 and result.output.startswith("Error: ")
    assert _digest(path) == before
    assert not out.exists()


@pytest.mark.parametrize("kind", ["missing", *BAD_FILES])
def test_cli_resume_of_a_bad_store_exits_2_and_touches_nothing(tmp_path, kind):
    """`tradewise resume BAD` prints one Error line, exits 2 and leaves the file as it was."""
    path = tmp_path / "bad.sqlite"
    if kind != "missing":
        BAD_FILES[kind][0](path)
    before = _digest(path) if path.exists() else None
    result = CliRunner().invoke(main, ["resume", str(path), "--quiet"])
    assert result.exit_code == 2
    assert result.output.strip().count("\n") == 0 and result.output.startswith("Error: ")
    assert (_digest(path) if path.exists() else None) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == (
        [] if kind == "missing" else ["bad.sqlite"]
    )


# ------------------------------------------------------------- an archive locked by another process
def test_locked_archive_waits_then_ends_with_one_line(make_case, tmp_path, monkeypatch):
    """A run whose archive stays locked says it waits, then ends with one Error line and exit 2 (no traceback)."""
    import sqlite3

    from click.testing import CliRunner

    from tradewise import store as store_module
    from tradewise.cli import main

    monkeypatch.setattr(store_module, "LOCK_WAIT", 0.6)
    monkeypatch.setattr(store_module, "LOCK_NOTICE", 0.2)
    path = tmp_path / "shared.sqlite"
    open_store(path).close()
    holder = sqlite3.connect(path)
    holder.execute("BEGIN IMMEDIATE")  # another program holding the write lock
    try:
        result = CliRunner().invoke(
            main,
            [
                "run",
                str(make_case()),
                "--out",
                str(tmp_path / "run"),
                "--store",
                str(path),
                "--evaluations",
                "20",
                "--quiet",
            ],
        )
    finally:
        holder.rollback()
        holder.close()
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output and not isinstance(result.exception, sqlite3.Error)
    assert f"the archive {path} is locked by another process; waiting" in result.output
    last = result.output.strip().splitlines()[-1]
    assert last.startswith("Error: ") and "locked by another process" in last and "0.6 s" in last
    with open_store(path) as archive:  # nothing was lost or broken: the archive opens as before
        assert archive.runs().empty


def test_lock_released_in_time_lets_the_run_go_on(make_case, tmp_path, monkeypatch):
    """A lock released within the waiting time only delays the run."""
    import sqlite3
    import threading

    from tradewise import store as store_module
    from tradewise.case import load_case

    monkeypatch.setattr(store_module, "LOCK_WAIT", 10.0)
    monkeypatch.setattr(store_module, "LOCK_NOTICE", 0.1)
    path = tmp_path / "shared.sqlite"
    open_store(path).close()
    holder = sqlite3.connect(path, check_same_thread=False)
    holder.execute("BEGIN IMMEDIATE")
    release = threading.Timer(0.5, holder.rollback)
    release.start()
    try:
        result = tradewise.run(load_case(make_case()), evaluations=20, population=10, store=path)
    finally:
        release.join()
        holder.close()
    assert result.n_evals == 20
