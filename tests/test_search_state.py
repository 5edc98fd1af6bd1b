"""The saved search state is plain data: a run resumes from it exactly, and no archive can run code."""

from __future__ import annotations

import json
import os
import pickle
import sqlite3
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

import tradewise
import tradewise._pymoo as adapter
from tradewise.case import load_case
from tradewise.cli import main
from tradewise.store import open_store

MIXED_MODEL = """
def evaluate(design):
    x, n, alloy, coat = design["x"], design["n"], design["alloy"], design["coat"]
    density = {"a": 1.0, "b": 1.3, "c": 0.8}[alloy]
    return {"mass": density * x * n + (0.2 if coat else 0.0), "sag": 1.0 / (x * n) + (0.0 if coat else 0.1),
            "span": x * n}
"""

MIXED_TOML = """
title = "mixed, constrained"
model = "model.py:evaluate"

[variables]
x = { type = "real", low = 0.5, high = 3.0 }
n = { type = "integer", low = 1, high = 6 }
alloy = { type = "choice", options = ["a", "b", "c"] }
coat = { type = "flag" }

[objectives]
mass = { goal = "min" }
sag = { goal = "min" }

[constraints]
span = { min = 2.0 }

[search]
population = 20
evaluations = 100
seed = 5
stall_generations = 0
"""

# DTLZ2 (Deb, Thiele, Laumanns, Zitzler 2002) with M objectives and M + 4 variables.
MANY_MODEL = """
import math

def evaluate(design):
    x = [design[f"x{i}"] for i in range(len(design))]
    m = M
    g = sum((v - 0.5) ** 2 for v in x[m - 1:])
    out = {}
    for i in range(m):
        f = 1.0 + g
        for v in x[: m - 1 - i]:
            f *= math.cos(v * math.pi / 2)
        if i > 0:
            f *= math.sin(x[m - 1 - i] * math.pi / 2)
        out[f"f{i + 1}"] = f
    return out
"""


def _many_case(make_case, m: int, *, population: int = 24, evaluations: int = 96) -> Path:
    variables = "\n".join(
        f'x{i} = {{ type = "real", low = 0.0, high = 1.0 }}' for i in range(m + 4)
    )
    objectives = "\n".join(f'f{i + 1} = {{ goal = "min" }}' for i in range(m))
    toml = (
        f'title = "DTLZ2 with {m} objectives"\nmodel = "model.py:evaluate"\n\n[variables]\n{variables}\n\n'
        f"[objectives]\n{objectives}\n\n[search]\npopulation = {population}\nevaluations = {evaluations}\n"
        "seed = 2\nstall_generations = 0\n"
    )
    return make_case(toml, MANY_MODEL.replace("m = M", f"m = {m}"), name=f"dtlz2-{m}")


def _real_designs(store: Path, names: list[str]) -> pd.DataFrame:
    with open_store(store, create=False) as archive:
        table = archive.evaluations()
    return table[~table["cached"]][names + ["generation"]].reset_index(drop=True)


@pytest.fixture
def spy(monkeypatch):
    """Count how often a resume rebuilds the search from a saved state."""
    calls = []
    for searcher in (adapter.Searcher, adapter.PymooSearcher):

        def counting(self, state, *, where, original=searcher.restore):
            calls.append(where)
            return original(self, state, where=where)

        monkeypatch.setattr(searcher, "restore", counting)
    return calls


def test_saved_state_is_json_and_holds_no_code(make_case, tmp_path):
    """The state in the archive is JSON text with the population, the counters and the random state."""
    case = load_case(make_case(MIXED_TOML, MIXED_MODEL))
    store = tmp_path / "a.sqlite"
    tradewise.run(case, store=store)
    with sqlite3.connect(store) as db:
        ((generation, blob),) = db.execute("SELECT generation, blob FROM states").fetchall()
    state = json.loads(bytes(blob).decode("utf-8"))
    assert state["format"] == adapter.STATE_FORMAT and state["generation"] == generation == 5
    assert len(state["X"]) == len(state["F"]) == len(state["G"]) == 20
    assert {"rank", "crowding"} <= set(state["marks"])
    assert all(isinstance(i, int) for i in state["eval_ids"])
    assert state["random"]["bit_generator"] == "PCG64"


@pytest.mark.parametrize("build", ["mixed", "four objectives"])
def test_resume_from_the_state_proposes_what_the_uninterrupted_run_would(
    build, make_case, tmp_path, spy, monkeypatch
):
    """A run interrupted after its third generation and resumed from the state saved there evaluates exactly
    the designs, in the order and generations, of one uninterrupted run (NSGA-II on a mixed constrained case;
    NSGA-III with four objectives)."""
    monkeypatch.setattr("tradewise.search._STATE_EVERY", 0.0)  # a state after every generation
    folder = make_case(MIXED_TOML, MIXED_MODEL) if build == "mixed" else _many_case(make_case, 4)
    case = load_case(folder)
    names = case.variable_names

    def stop_after_three(row):
        if row["generation"] == 3:
            raise KeyboardInterrupt

    first = tradewise.run(case, store=tmp_path / "cut.sqlite", progress=stop_after_three)
    assert first.status == "interrupted" and first.n_gen == 3
    resumed = tradewise.resume(tmp_path / "cut.sqlite")
    assert spy, "the resume did not use the saved state"
    whole = tradewise.run(case, store=tmp_path / "whole.sqlite")
    assert resumed.status == whole.status == "budget" and resumed.n_evals == whole.n_evals
    pd.testing.assert_frame_equal(
        _real_designs(tmp_path / "cut.sqlite", names),
        _real_designs(tmp_path / "whole.sqlite", names),
    )
    assert resumed.hypervolume == whole.hypervolume


class _Payload:
    """Unpickling this writes a marker file: the proof that a pickle in an archive would run code."""

    def __init__(self, marker: Path) -> None:
        self.marker = str(marker)

    def __reduce__(self):
        return (exec, (f"open({self.marker!r}, 'w').write('ran')",))


def test_a_crafted_archive_runs_no_code(make_case, tmp_path):
    """A pickle planted in the archive's state table (and in its other blobs) is never unpickled by any
    command; resume falls back to replaying from the seed and ends with the uninterrupted run's front."""
    folder = make_case(MIXED_TOML, MIXED_MODEL)
    runner = CliRunner()
    done = runner.invoke(main, ["run", str(folder), "--out", str(tmp_path / "run"), "--quiet"])
    assert done.exit_code == 0, done.output
    store = tmp_path / "run" / "archive.sqlite"
    marker = tmp_path / "marker.txt"
    payload = pickle.dumps(_Payload(marker))
    with sqlite3.connect(store) as db:
        db.execute("UPDATE states SET blob = ?", (payload,))
    # The payload really would run if unpickled (checked on a copy, then the marker removed).
    pickle.loads(payload)
    assert marker.exists()
    marker.unlink()

    for args in (
        ["resume", str(store), "--quiet", "--evaluations", "140"],
        ["plot", str(tmp_path / "run")],
        ["report", str(tmp_path / "run")],
        ["compare", str(tmp_path / "run"), str(tmp_path / "run")],
        ["pick", str(tmp_path / "run")],
    ):
        result = runner.invoke(main, args)
        assert result.exit_code == 0, (args, result.output)
        assert not marker.exists(), f"{args[0]} ran code from the archive"
    whole = tradewise.run(load_case(folder), evaluations=140)
    front = pd.read_csv(tmp_path / "run" / "front.csv")
    assert len(front) == len(whole.front)


def test_a_state_that_does_not_fit_is_refused_in_one_line(make_case, tmp_path):
    """A state whose population has the wrong number of variables ends resume with one StoreError line."""
    folder = make_case(MIXED_TOML, MIXED_MODEL)
    run = CliRunner().invoke(main, ["run", str(folder), "--out", str(tmp_path / "run"), "--quiet"])
    assert run.exit_code == 0, run.output
    store = tmp_path / "run" / "archive.sqlite"
    with sqlite3.connect(store) as db:
        (blob,) = db.execute("SELECT blob FROM states").fetchone()
        state = json.loads(bytes(blob))
        state["X"] = [row[:2] for row in state["X"]]
        db.execute("UPDATE states SET blob = ?", (json.dumps(state).encode(),))
    result = CliRunner().invoke(main, ["resume", str(store), "--quiet", "--evaluations", "140"])
    assert result.exit_code == 2
    assert (
        result.output.startswith("Error: ") and "saved search state does not fit" in result.output
    )
    assert len(result.output.strip().splitlines()) == 1


@pytest.mark.slow
@pytest.mark.parametrize("m", [4, 5])
def test_many_objectives_run_and_resume_through_the_command_line(m, make_case, tmp_path):
    """NSGA-III cases with 4 and 5 objectives run with an archive, are killed, and resume from the command line."""
    folder = _many_case(make_case, m, population=30, evaluations=3000)
    env = dict(os.environ)
    args = [
        sys.executable,
        "-m",
        "tradewise.cli",
        "run",
        str(folder),
        "--out",
        str(tmp_path / "run"),
        "--quiet",
        "--evaluations",
        "150",
    ]
    done = subprocess.run(args, capture_output=True, text=True, env=env, timeout=300)
    assert done.returncode == 0, done.stderr
    assert (tmp_path / "run" / "front.csv").is_file()
    store = tmp_path / "run" / "archive.sqlite"
    resumed = subprocess.run(
        [
            sys.executable,
            "-m",
            "tradewise.cli",
            "resume",
            str(store),
            "--quiet",
            "--evaluations",
            "300",
        ],
        capture_output=True,
        text=True,
        env=env,
        timeout=300,
    )
    assert resumed.returncode == 0, resumed.stderr
    meta = json.loads((tmp_path / "run" / "front.json").read_text())
    assert meta["n_evals"] == 300 and meta["algorithm"] == "NSGA-III"
    front = pd.read_csv(tmp_path / "run" / "front.csv")
    assert {f"f{i + 1}" for i in range(m)} <= set(front.columns) and len(front) > 0
