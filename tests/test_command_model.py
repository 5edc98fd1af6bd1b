"""Command models: an external program per design, its failures, and the bundled pipe-insulation case."""

from __future__ import annotations

import importlib.util
import json
import math
import os
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

from tradewise.case import bundled_cases, load_case
from tradewise.cli import main
from tradewise.models import CommandModel, make_model

# One program that misbehaves on request: the design's "mode" says how.
PROGRAM = r"""
import json, math, os, subprocess, sys, time
design = json.load(open(sys.argv[1]))
mode, x = design["mode"], design["x"]
out = {"cost": x, "mass": (1 - x) ** 2 + 0.1, "where": os.getcwd()}
if mode.startswith("helper-"):
    # A helper that ignores SIGTERM and outlives this program unless its process group is ended.
    helper = subprocess.Popen([sys.executable, "-c", "import signal, sys, time; "
                               "signal.signal(signal.SIGTERM, signal.SIG_IGN); print('ready', flush=True); "
                               "time.sleep(60)"], stdout=subprocess.PIPE)
    helper.stdout.readline()
    with open(os.path.join(os.path.dirname(sys.argv[2]), "..", "helpers.txt"), "a") as pids:
        pids.write(f"{helper.pid}\n")
    mode = mode[len("helper-"):]
if mode == "exit":
    print("first line", file=sys.stderr)
    print("solver: matrix is singular at step 7", file=sys.stderr)
    sys.exit(3)
if mode == "signal":
    os.kill(os.getpid(), 9)
if mode == "hang":
    child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    open(os.path.join(os.path.dirname(sys.argv[2]), "..", "child.pid"), "w").write(str(child.pid))
    time.sleep(60)
if mode == "badjson":
    open(sys.argv[2], "w").write('{"cost": 1.0, "mass": ')
    sys.exit(0)
if mode == "nojson":
    sys.exit(0)
if mode == "list":
    out = [1, 2]
if mode == "nan":
    out["mass"] = math.nan
if mode == "nokey":
    del out["mass"]
json.dump(out, open(sys.argv[2], "w"))
"""

CASE = """
title = "misbehaving program"
command = ["python3", "prog.py", "{input}", "{output}"]
timeout = TIMEOUT

[variables]
x = { type = "real", low = 0.0, high = 1.0 }
mode = { type = "choice", options = MODES }

[objectives]
cost = { goal = "min" }
mass = { goal = "min" }

[search]
population = POPULATION
evaluations = EVALUATIONS
seed = 4
"""


def _case_folder(
    root: Path, *, modes=("ok", "exit"), timeout=10.0, population=10, evaluations=20
) -> Path:
    folder = root / "case"
    folder.mkdir(parents=True, exist_ok=True)
    text = (
        CASE.replace("TIMEOUT", repr(timeout))
        .replace("MODES", json.dumps(list(modes)))
        .replace("POPULATION", str(population))
        .replace("EVALUATIONS", str(evaluations))
    )
    (folder / "case.toml").write_text(text, encoding="utf-8")
    (folder / "prog.py").write_text(PROGRAM, encoding="utf-8")
    return folder


@pytest.fixture
def command_model(tmp_path):
    """A CommandModel over the misbehaving program, keeping failed folders under tmp_path/kept."""

    def build(**kwargs) -> CommandModel:
        folder = _case_folder(tmp_path, modes=("ok", "exit"), **kwargs)
        (tmp_path / "kept").mkdir(exist_ok=True)
        return CommandModel(load_case(folder), keep_root=tmp_path / "kept")

    return build


def _alive(pid: int) -> bool:
    """True while the process exists and is not a zombie (a container's init may not reap)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except FileNotFoundError:
        return False
    return state not in {"Z", "X"}


# --------------------------------------------------------------------------------- arguments
def test_python_means_the_running_interpreter_and_case_files_are_absolute(command_model):
    """A leading python3 becomes sys.executable; prog.py is found in the case folder; placeholders filled."""
    model = command_model()
    args = model.arguments("IN.json", "OUT.json")
    assert args[0] == sys.executable
    assert Path(args[1]).is_absolute() and Path(args[1]).name == "prog.py"
    assert args[2:] == ["IN.json", "OUT.json"]


def test_other_programs_are_left_alone(tmp_path):
    """Only exactly 'python' or 'python3' is replaced; a full path or another program is kept."""
    folder = _case_folder(tmp_path)
    text = (
        (folder / "case.toml")
        .read_text()
        .replace('["python3", "prog.py"', '["/usr/bin/python3.99", "prog.py"')
    )
    (folder / "case.toml").write_text(text)
    assert CommandModel(load_case(folder)).arguments("i", "o")[0] == "/usr/bin/python3.99"


def test_placeholders_are_filled_in_one_pass(command_model):
    """A path that itself contains a placeholder is given as it is, never substituted a second time."""
    model = command_model()
    work = Path("/tmp/odd {output} and {case} name")
    args = model.arguments(work / "design.json", work / "results.json")
    assert args[2:] == [str(work / "design.json"), str(work / "results.json")]


def test_tmpdir_with_a_placeholder_in_its_name(command_model, tmp_path, monkeypatch):
    """With TMPDIR named like a placeholder the program still reads the design and writes its results."""
    odd = tmp_path / "tmp-{output}-{input}"
    odd.mkdir()
    monkeypatch.setenv("TMPDIR", str(odd))
    monkeypatch.setattr(tempfile, "tempdir", None)
    model = command_model()
    model.keep_root = None
    outcome = model({"x": 0.25, "mode": "ok"})
    assert outcome.status == "ok", outcome.message
    assert Path(outcome.results["where"]).parent == odd


@pytest.mark.parametrize("how", ["relative", "dot", "absolute"])
def test_run_finds_the_program_whatever_the_working_directory(tmp_path, monkeypatch, how):
    """`run case/` from its parent, `run .` inside the case folder and an absolute path all evaluate."""
    folder = _case_folder(tmp_path, modes=("ok", "fine"), population=4, evaluations=4)
    monkeypatch.chdir(folder if how == "dot" else tmp_path)
    argument = {"relative": "case", "dot": ".", "absolute": str(folder)}[how]
    out = tmp_path / f"run-{how}"
    result = CliRunner().invoke(main, ["run", argument, "--out", str(out), "--quiet"])
    assert result.exit_code == 0, result.output
    with sqlite3.connect(out / "archive.sqlite") as db:
        rows = db.execute(
            "SELECT status, message FROM evaluations WHERE source_id IS NULL"
        ).fetchall()
    assert len(rows) == 4 and all(status == "ok" for status, _ in rows), rows


# ------------------------------------------------------------------------------- one design
def test_success_reads_results_and_removes_the_folder(command_model):
    """A good evaluation gives every result (extra outputs kept) and leaves no folder behind."""
    model = command_model()
    outcome = model({"x": 0.25, "mode": "ok"})
    assert outcome.status == "ok", outcome.message
    assert outcome.results["cost"] == 0.25 and outcome.results["mass"] == pytest.approx(0.6625)
    work = Path(outcome.results["where"])
    assert work.name.startswith("tradewise-eval-") and not work.exists()
    assert outcome.duration > 0 and outcome.worker


FAILURES = {
    # mode: (status, words that must be in the message)
    "exit": (
        "failed",
        ["exited with status 3", "solver: matrix is singular at step 7", "first line"],
    ),
    "signal": ("failed", ["killed by signal SIGKILL"]),
    "badjson": ("failed", ["results.json is not valid JSON"]),
    "nojson": ("failed", ["wrote no results.json"]),
    "list": ("failed", ["holds a JSON list"]),
    "nan": ("failed", ["'mass'", "finite number"]),
    "nokey": ("failed", ["no 'mass'"]),
}


@pytest.mark.parametrize("mode", list(FAILURES))
def test_each_failure_is_reported_and_its_folder_kept(command_model, mode):
    """Each way a program can fail gives a failed outcome whose message says how and where the folder is."""
    status, words = FAILURES[mode]
    outcome = command_model()({"x": 0.5, "mode": mode})
    assert outcome.status == status
    for word in words:
        assert word in outcome.message, outcome.message
    kept = Path(outcome.message.rsplit("(kept ", 1)[1].rstrip(")"))
    assert kept.is_dir() and (kept / "design.json").exists() and (kept / "stderr.txt").exists()
    assert json.loads((kept / "design.json").read_text()) == {"x": 0.5, "mode": mode}


def test_program_that_cannot_start(tmp_path):
    """A missing program is a failed evaluation naming it, not a crash of the run."""
    folder = _case_folder(tmp_path)
    text = (
        (folder / "case.toml").read_text().replace('"python3", "prog.py"', '"no-such-solver-here"')
    )
    (folder / "case.toml").write_text(text)
    outcome = CommandModel(load_case(folder), keep_root=tmp_path)({"x": 0.5, "mode": "ok"})
    assert outcome.status == "failed" and "cannot start 'no-such-solver-here'" in outcome.message


def test_timeout_kills_the_whole_process_group(command_model, tmp_path):
    """Past the timeout the program and the helper it started are killed; the outcome is 'timeout'."""
    model = command_model(timeout=1.0)
    start = time.monotonic()
    outcome = model({"x": 0.5, "mode": "hang"})
    took = time.monotonic() - start
    assert outcome.status == "timeout" and "timeout of 1 s" in outcome.message
    assert 1.0 <= took < 10.0
    child = int((tmp_path / "kept" / "child.pid").read_text())
    deadline = time.monotonic() + 5
    while _alive(child) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not _alive(child)


def _helpers_left(folder: Path) -> list[int]:
    """The helper processes recorded in folder/helpers.txt that are still alive (after a short wait)."""
    pids = [int(line) for line in (folder / "helpers.txt").read_text().split()]
    assert pids
    deadline = time.monotonic() + 5
    while any(_alive(p) for p in pids) and time.monotonic() < deadline:
        time.sleep(0.05)
    return [p for p in pids if _alive(p)]


@pytest.mark.skipif(os.name != "posix", reason="process groups are POSIX")
@pytest.mark.parametrize("mode", ["helper-ok", "helper-exit"])
def test_helpers_of_the_program_end_with_the_evaluation(command_model, tmp_path, mode):
    """A helper the program started (one that ignores SIGTERM) is ended with the evaluation, success or not."""
    model = command_model()
    start = time.monotonic()
    outcome = model({"x": 0.5, "mode": mode})
    assert outcome.status == ("ok" if mode == "helper-ok" else "failed"), outcome.message
    assert time.monotonic() - start < 10
    assert _helpers_left(tmp_path / "kept") == []


# ------------------------------------------------------------------------------- whole runs
def test_run_with_failing_command_model_completes_and_counts_failures(tmp_path, monkeypatch):
    """A run whose program exits non-zero, hangs, or writes bad JSON completes; each failure is stored
    with its message and the summary counts them."""
    folder = _case_folder(
        tmp_path,
        modes=("ok", "exit", "hang", "badjson", "nan"),
        timeout=0.5,
        population=12,
        evaluations=24,
    )
    kept = tmp_path / "kept"
    kept.mkdir()
    monkeypatch.setenv("TMPDIR", str(kept))
    monkeypatch.setattr(tempfile, "tempdir", str(kept))
    out = tmp_path / "run"
    result = CliRunner().invoke(
        main, ["run", str(folder), "--out", str(out), "--workers", "2", "--quiet"]
    )
    assert result.exit_code == 0, result.output
    with sqlite3.connect(out / "archive.sqlite") as db:
        rows = db.execute(
            "SELECT design, status, message FROM evaluations WHERE source_id IS NULL"
        ).fetchall()
    assert len(rows) == 24
    failed = [(json.loads(d)["mode"], s, m) for d, s, m in rows if s != "ok"]
    by_mode = {mode: (s, m) for mode, s, m in failed}
    assert set(by_mode) == {"exit", "hang", "badjson", "nan"}  # seed 4 draws every mode
    assert by_mode["hang"][0] == "timeout" and "timeout of 0.5 s" in by_mode["hang"][1]
    assert "exited with status 3" in by_mode["exit"][1]
    assert "not valid JSON" in by_mode["badjson"][1]
    assert all(s != "ok" for mode, s, _ in failed if mode != "ok")
    assert f"{len(failed)} evaluation(s) failed" in result.output
    n_timeout = sum(s == "timeout" for _, s, _ in failed)
    assert f"{n_timeout} ran past the timeout" in result.output
    assert f"{len(failed) - n_timeout} with an error" in result.output
    # failed.csv: one row per failed evaluation, its status and message, then the design
    table = pd.read_csv(out / "failed.csv", keep_default_na=False)  # an option is named "nan"
    assert list(table.columns[:4]) == ["eval_id", "generation", "status", "message"]
    assert "mode" in table.columns
    listed = sorted(zip(table["mode"], table["status"], table["message"], strict=True))
    assert listed == sorted(failed)


@pytest.mark.skipif(os.name != "posix", reason="process groups are POSIX")
def test_no_helper_outlives_a_run(tmp_path, monkeypatch):
    """A run of a program that leaves a SIGTERM-proof helper behind on every design ends with none alive."""
    folder = _case_folder(
        tmp_path, modes=("helper-ok", "helper-exit"), population=6, evaluations=12
    )
    kept = tmp_path / "kept"
    kept.mkdir()
    monkeypatch.setenv("TMPDIR", str(kept))
    monkeypatch.setattr(tempfile, "tempdir", str(kept))
    out = tmp_path / "run"
    result = CliRunner().invoke(
        main, ["run", str(folder), "--out", str(out), "--workers", "2", "--quiet"]
    )
    assert result.exit_code == 0, result.output
    assert len((kept / "helpers.txt").read_text().split()) == 12
    assert _helpers_left(kept) == []


# ------------------------------------------------------------------------ the bundled case
def _pipeloss():
    path = bundled_cases()["pipe-insulation"].parent / "pipeloss.py"
    spec = importlib.util.spec_from_file_location("bundled_pipeloss", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_pipe_insulation_case_loads_as_a_command_model():
    """The bundled case is a command model with a timeout, invented-data cautions and a README."""
    case = load_case("pipe-insulation")
    assert case.command is not None and case.model is None and case.timeout
    assert isinstance(make_model(case), CommandModel)
    assert "qualified" in case.cautions and "invented" in case.cautions.lower()
    assert (case.folder / "README.md").exists()


def test_pipeloss_series_resistances_and_energy_balance():
    """Heat flow equals the temperature difference over shell plus film resistance (cylindrical wall,
    e.g. Incropera, Fundamentals of Heat and Mass Transfer, conduction in a cylinder), and the film
    carries the same heat from the surface to the air."""
    pipe = _pipeloss()
    design = {"thickness": 40.0, "material": "pir-foam", "cladding": True}
    out = pipe.evaluate(design)
    r1 = pipe.PIPE_OD / 2
    r2 = r1 + 0.040
    shell = math.log(r2 / r1) / (2 * math.pi * 0.025)
    film = 1 / (out["film_coefficient"] * math.pi * 2 * r2)
    assert out["heat_per_metre"] == pytest.approx(
        (pipe.WATER - pipe.AIR) / (shell + film), rel=1e-9
    )
    surface_flow = (
        out["film_coefficient"] * math.pi * 2 * r2 * (out["surface_temperature"] - pipe.AIR)
    )
    assert surface_flow == pytest.approx(out["heat_per_metre"], rel=1e-6)
    assert out["heat_loss"] == pytest.approx(out["heat_per_metre"] * 60 * 8760 / 1e6)
    assert out["outer_diameter"] == pytest.approx(60.3 + 80.0)


def test_pipeloss_cross_flow_correlation_by_hand():
    """Churchill and Bernstein (1977) at Re = 10,000, Pr = 0.7, worked by hand from the published formula:
    0.62 * 100 * 0.7^(1/3) = 55.05; [1 + (0.4/0.7)^(2/3)]^(1/4) = 1.1399; [1 + (1e4/282000)^(5/8)]^(4/5)
    = 1.0981; Nu = 0.3 + 55.05 / 1.1399 * 1.0981 = 53.33."""
    assert _pipeloss().churchill_bernstein(1e4, 0.7) == pytest.approx(53.33, abs=0.02)


def test_pipeloss_program_end_to_end_and_bad_input(tmp_path):
    """The program answers through files like any command model and refuses a bad design with exit 2."""
    model = CommandModel(load_case("pipe-insulation"), keep_root=tmp_path)
    outcome = model({"thickness": 50.0, "material": "mineral-wool", "cladding": False})
    assert outcome.status == "ok", outcome.message
    assert outcome.results == pytest.approx(
        _pipeloss().evaluate({"thickness": 50.0, "material": "mineral-wool", "cladding": False})
    )
    bad = model({"thickness": 50.0, "material": "cork", "cladding": False})
    assert (
        bad.status == "failed" and "exited with status 2" in bad.message and "'cork'" in bad.message
    )


def test_pipeloss_thicker_loses_less_and_costs_more():
    """Sanity of the trade-off: more insulation always cuts the loss and raises the cost."""
    pipe = _pipeloss()
    for material in pipe.MATERIALS:
        for clad in (False, True):
            rows = [
                pipe.evaluate({"thickness": t, "material": material, "cladding": clad})
                for t in (10, 40, 120)
            ]
            assert rows[0]["heat_loss"] > rows[1]["heat_loss"] > rows[2]["heat_loss"]
            assert rows[0]["cost"] < rows[1]["cost"] < rows[2]["cost"]


@pytest.mark.skipif(os.name != "posix", reason="process groups are POSIX")
def test_pipe_insulation_short_run(tmp_path):
    """A short search of the bundled case through the command line finds a front of feasible designs."""
    out = tmp_path / "run"
    result = CliRunner().invoke(
        main,
        [
            "run",
            "pipe-insulation",
            "--out",
            str(out),
            "--evaluations",
            "40",
            "--population",
            "20",
            "--workers",
            "2",
            "--quiet",
        ],
    )
    assert result.exit_code == 0, result.output
    front = (out / "front.csv").read_text().splitlines()
    assert len(front) > 2 and "Caution:" in result.output
