"""Resume: a run killed with SIGKILL loses nothing it had finished, repeats nothing, and ends with the same front."""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

import tradewise
from tradewise.case import load_case
from tradewise.cli import main
from tradewise.search import design_key
from tradewise.store import open_store

# Sleeps a little, and appends each finished evaluation to a log that survives the kill.
MODEL = """
import json, os, time

def evaluate(design):
    time.sleep(float(os.environ.get("TW_TEST_SLEEP", "0")))
    x, y = design["x"], design["y"]
    result = {"f1": x, "f2": (1 + 4 * y) * (1 - (x / (1 + 4 * y)) ** 0.5)}
    log = os.environ.get("TW_EVAL_LOG")
    if log:
        with open(log, "a", encoding="utf-8") as handle:
            handle.write(json.dumps({"t": time.time(), "design": design}) + "\\n")
    return result
"""

TOML = """
title = "kill and resume"
model = "model.py:evaluate"

[variables]
x = { type = "real", low = 0.0, high = 1.0 }
y = { type = "real", low = 0.0, high = 1.0 }

[objectives]
f1 = { goal = "min" }
f2 = { goal = "min" }

[search]
population = POPULATION
evaluations = 150
seed = 7
stall_generations = 0
"""


@pytest.fixture
def folder(make_case):
    def build(population=10):
        return make_case(TOML.replace("POPULATION", str(population)), MODEL)

    return build


def _cli(args, *, env, cwd):
    return [sys.executable, "-m", "tradewise.cli", *args], dict(os.environ, **env), cwd


def _log(path: Path) -> list[dict]:
    if not path.exists():
        return []
    return [json.loads(line) for line in path.read_text().splitlines() if line.strip()]


def _real_rows(store: Path) -> pd.DataFrame:
    """Every evaluation the model really made (not served from the archive), by what a second connection sees."""
    with sqlite3.connect(store) as db:
        return pd.read_sql_query(
            "SELECT eval_id, run_id, case_hash, design_key, design, results, status FROM evaluations"
            " WHERE source_id IS NULL ORDER BY eval_id",
            db,
        )


def _front(path: Path, case) -> pd.DataFrame:
    names = case.variable_names + case.objective_names
    return pd.read_csv(path)[names].sort_values(names).reset_index(drop=True)


def _kill_part_way(case_folder: Path, tmp_path: Path, *, after: int, extra=()):
    """Start `tradewise run` in its own process group; SIGKILL the group after `after` evaluations finished."""
    log = tmp_path / "evaluations.log"
    env = {"TW_EVAL_LOG": str(log), "TW_TEST_SLEEP": "0.02"}
    args, env, cwd = _cli(
        ["run", case_folder.name, "--out", "run", "--quiet", *extra], env=env, cwd=tmp_path
    )
    proc = subprocess.Popen(
        args,
        env=env,
        cwd=cwd,
        start_new_session=True,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )
    deadline = time.monotonic() + 60
    # Wait for `after` evaluations, and for the first to be 1.5 s old so that durability can be checked.
    while len(entries := _log(log)) < after or time.time() - entries[0]["t"] < 1.5:
        assert proc.poll() is None, proc.stderr.read().decode()
        assert time.monotonic() < deadline, "the run made no progress"
        time.sleep(0.02)
    killed_at = time.time()
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    assert proc.returncode == -signal.SIGKILL
    return log, killed_at


def _check_kill_and_resume(case_folder: Path, tmp_path: Path, *, after: int, extra=()):
    case = load_case(case_folder)
    store = tmp_path / "run" / "archive.sqlite"
    log, killed_at = _kill_part_way(case_folder, tmp_path, after=after, extra=extra)
    at_kill = _real_rows(store)
    with sqlite3.connect(store) as db:
        saved = db.execute("SELECT generation FROM states").fetchall()
    finished_before = _log(log)

    # Durable within a second: every evaluation that finished more than a second before the kill is stored.
    stored_keys = set(at_kill["design_key"])
    old_enough = [e for e in finished_before if e["t"] <= killed_at - 1.0]
    assert old_enough, "kill came too early to test durability"
    assert {design_key(e["design"]) for e in old_enough} <= stored_keys

    # Resume from another folder: the case path recorded with the run is absolute.
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    args, env, cwd = _cli(
        ["resume", str(store), "--quiet", *extra],
        env={"TW_EVAL_LOG": str(log), "TW_TEST_SLEEP": "0.02"},
        cwd=elsewhere,
    )
    done = subprocess.run(args, env=env, cwd=cwd, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    after_resume = _real_rows(store)

    # Nothing lost: every row stored at the kill is still there, unchanged.
    kept = after_resume.set_index("eval_id").loc[at_kill["eval_id"]]
    assert kept["results"].tolist() == at_kill["results"].tolist()
    # Nothing repeated: one real evaluation per design and case, and the model never re-ran a stored design.
    assert after_resume.groupby(["case_hash", "design_key"]).size().max() == 1
    assert len(after_resume) == 150
    evaluated_again = [design_key(e["design"]) for e in _log(log)[len(finished_before) :]]
    assert not set(evaluated_again) & stored_keys
    # The only designs the model ran twice are the few that had finished but were not yet durable.
    twice = {design_key(e["design"]) for e in finished_before} - stored_keys
    assert set(evaluated_again) >= twice and len(twice) <= 60

    # The same front as a run that was never interrupted (same seed and budget, its own archive).
    reference = tradewise.run(case, store=tmp_path / "reference.sqlite")
    pd.testing.assert_frame_equal(
        _front(tmp_path / "run" / "front.csv", case), _front_of(reference, case)
    )
    meta = json.loads((tmp_path / "run" / "front.json").read_text())
    assert meta["hypervolume"] == reference.hypervolume and meta["n_evals"] == 150
    print(
        f"killed after {len(finished_before)} finished evaluations, {len(at_kill)} stored, state at "
        f"generation {saved}, {len(twice)} evaluated twice"
    )
    return at_kill, saved


def _front_of(result, case) -> pd.DataFrame:
    names = case.variable_names + case.objective_names
    return result.front.table[names].sort_values(names).reset_index(drop=True)


@pytest.mark.slow
def test_kill_in_process_run_and_resume(folder, tmp_path):
    """SIGKILL part-way through an in-process run, then `tradewise resume`: nothing lost or repeated, same front."""
    at_kill, saved = _check_kill_and_resume(folder(), tmp_path, after=60)
    assert 0 < len(at_kill) < 150 and saved


@pytest.mark.slow
def test_kill_process_pool_run_and_resume(folder, tmp_path):
    """The same with --workers 2: the run's process group (main process and workers) is killed."""
    _check_kill_and_resume(folder(), tmp_path, after=60, extra=("--workers", "2"))


@pytest.mark.slow
def test_kill_during_the_first_generation(folder, tmp_path):
    """Killed before any search state was saved: resume starts again from the seed, reusing what was stored."""
    at_kill, saved = _check_kill_and_resume(folder(population=100), tmp_path, after=45)
    assert not saved and len(at_kill) < 100


# --------------------------------------------------------------------------- extend, cache
def test_extend_a_finished_run(folder, tmp_path):
    """A finished run of 60 resumed with --evaluations 120 equals a run of 120 (budget a multiple of the
    population, so no generation was cut short)."""
    case = load_case(folder())
    store = tmp_path / "a.sqlite"
    first = tradewise.run(case, evaluations=60, store=store)
    assert (first.status, first.n_evals) == ("budget", 60)
    extended = tradewise.resume(store, evaluations=120)
    reference = tradewise.run(case, evaluations=120)
    assert extended.n_evals == 120 and extended.n_cached == first.n_cached
    pd.testing.assert_frame_equal(_front_of(extended, case), _front_of(reference, case))
    assert _real_rows(store).groupby("design_key").size().max() == 1


def test_second_run_into_the_same_archive_evaluates_nothing_stored(folder, tmp_path):
    """The cache: a second run of the same case and seed serves every stored design from the archive, counts
    them in n_cached and evaluates only designs the archive does not hold."""
    case = load_case(folder())
    store = tmp_path / "a.sqlite"
    first = tradewise.run(case, evaluations=60, store=store)
    log = tmp_path / "evaluations.log"
    os.environ["TW_EVAL_LOG"] = str(log)
    try:
        second = tradewise.run(case, evaluations=60, store=store)
    finally:
        del os.environ["TW_EVAL_LOG"]
    stored_by_first = set(_real_rows(store).query(f"run_id == {first.run_id}")["design_key"])
    assert second.n_cached >= 60 and second.n_evals == 60
    assert not {design_key(e["design"]) for e in _log(log)} & stored_by_first
    assert _real_rows(store).groupby("design_key").size().max() == 1
    # Same seed, same results: the second run picks up where the first stopped, so it can only be better.
    assert second.hypervolume >= first.hypervolume


def test_cli_second_run_reports_the_archive(folder, tmp_path):
    """`tradewise run` twice into one archive: the second records how many designs it took from it."""
    args = ["run", str(folder()), "--out", str(tmp_path / "r"), "--evaluations", "30", "--quiet"]
    assert CliRunner().invoke(main, args).exit_code == 0
    assert json.loads((tmp_path / "r" / "front.json").read_text())["n_cached"] == 0
    assert CliRunner().invoke(main, args).exit_code == 0
    meta = json.loads((tmp_path / "r" / "front.json").read_text())
    assert meta["n_cached"] >= 30 and meta["n_evals"] == 30


def test_resume_of_a_run_in_an_archive_of_schema_1(tmp_path):
    """A run interrupted in an archive of the release before schema 2 resumes to its budget: every stored row
    kept as it was and taken over, nothing the archive holds (of either run) evaluated again."""
    old = Path(__file__).parent / "fixtures" / "archive-v1"
    shutil.copytree(old, tmp_path / "old")
    store = tmp_path / "old" / "archive.sqlite"
    before = _real_rows(store)
    result = tradewise.resume(store, run_id=1, case=tmp_path / "old" / "case")
    after = _real_rows(store)
    assert result.status == "budget" and result.n_evals == 300
    kept = after.set_index("eval_id").loc[before["eval_id"]].reset_index()
    pd.testing.assert_frame_equal(kept[before.columns], before)
    assert (after["run_id"] == 1).sum() == 300
    assert after.groupby(["case_hash", "design_key"]).size().max() == 1
    with sqlite3.connect(store) as db:
        assert db.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone() == ("2",)


# ---------------------------------------------------------------------------- wrong stores
def _digests(folder: Path) -> dict[str, str]:
    return {
        p.name: hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.iterdir())
        if p.is_file()
    }


@pytest.fixture
def finished(folder, tmp_path):
    """A finished run folder written by the command line."""
    out = tmp_path / "run"
    result = CliRunner().invoke(
        main, ["run", str(folder()), "--out", str(out), "--evaluations", "30", "--quiet"]
    )
    assert result.exit_code == 0, result.output
    return out


def test_resume_with_another_case_is_refused(finished, make_case):
    """A store resumed with the case of another study: one Error line, exit 2, no file in the folder touched."""
    other = make_case(TOML.replace("POPULATION", "12"), MODEL, name="other")
    before = _digests(finished)
    result = CliRunner().invoke(
        main, ["resume", str(finished / "archive.sqlite"), "--case", str(other)]
    )
    assert result.exit_code == 2
    assert result.output.count("\n") == 1 and result.output.startswith("Error: ")
    assert "belongs to case 'kill and resume'" in result.output
    assert _digests(finished) == before


def test_resume_after_the_case_changed_is_refused(finished, tmp_path):
    """Editing the model after the run changes the case hash: resuming would mix two models, so it is refused."""
    model = tmp_path / "case" / "model.py"
    model.write_text(model.read_text().replace("1 + 4 * y", "1 + 5 * y"))
    before = _digests(finished)
    result = CliRunner().invoke(main, ["resume", str(finished / "archive.sqlite")])
    assert result.exit_code == 2 and "the case or its model changed" in result.output
    assert _digests(finished) == before


def test_resume_of_a_run_that_is_not_there(finished):
    """--run with an unknown id names the runs the archive holds."""
    result = CliRunner().invoke(main, ["resume", str(finished / "archive.sqlite"), "--run", "7"])
    assert (
        result.exit_code == 2 and "run 7 is not in this archive; runs it holds: 1" in result.output
    )


def test_resume_writes_the_run_folder_again(finished):
    """Resuming a finished run without a new budget rewrites its folder with the same front."""
    before = pd.read_csv(finished / "front.csv")
    (finished / "front.csv").unlink()
    result = CliRunner().invoke(main, ["resume", str(finished / "archive.sqlite"), "--quiet"])
    assert result.exit_code == 0, result.output
    assert "Resumed run 1" in result.output
    after = pd.read_csv(finished / "front.csv")
    pd.testing.assert_frame_equal(after, before)
    with open_store(finished / "archive.sqlite", create=False) as archive:
        assert archive.count_evaluations(1) == 30
