"""Evaluation backends: in-process, process pool and Dask give the same results; dying workers are survived."""

from __future__ import annotations

import json
import logging
import os
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

import tradewise
from support import CASES
from tradewise.case import load_case
from tradewise.cli import main
from tradewise.errors import ModelError, TradewiseError
from tradewise.executors import (
    POOL_SLOWDOWN_TO_WARN,
    DaskCluster,
    InProcess,
    ProcessPool,
    make_executor,
    run_designs,
)
from tradewise.models import make_model

MODEL = """
import math, os, time

def evaluate(design):
    x, mode = design["x"], design["mode"]
    time.sleep(design.get("sleep", float(os.environ.get("TW_TEST_SLEEP", "0"))))
    if mode == "raise":
        raise ValueError(f"cannot size x={x:.3f}")
    if mode == "nan":
        return {"cost": x, "mass": math.nan}
    if mode == "crash" and os.environ.get("TW_MAIN_PID") != str(os.getpid()):
        os._exit(3)  # kills the worker process; never the test process itself
    if mode == "hang" or (mode.startswith("every-fifth") and int(x * 1e6) % 5 == 0):  # a helper, no answer
        import subprocess, sys
        helper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
        if os.environ.get("TW_HELPER_PIDS"):
            open(os.path.join(os.environ["TW_HELPER_PIDS"], str(helper.pid)), "w").close()
        time.sleep(60)
    return {"cost": x + (0.5 if mode == "heavy" else 0.0), "mass": (1 - x) ** 2 + 0.1, "label": f"x{x:.2f}"}
"""

TOML = """
title = "backend contract"
model = "model.py:evaluate"
TIMEOUT

[variables]
x = { type = "real", low = 0.0, high = 1.0 }
mode = { type = "choice", options = MODES }

[objectives]
cost = { goal = "min" }
mass = { goal = "min" }

[search]
population = 12
evaluations = 48
seed = 5
"""

# A fixed batch: good designs, one that raises and one that returns NaN.
BATCH = [
    {"x": x / 10, "mode": mode}
    for x, mode in [
        (1, "ok"),
        (2, "heavy"),
        (3, "raise"),
        (4, "ok"),
        (5, "nan"),
        (6, "heavy"),
        (7, "ok"),
        (8, "ok"),
    ]
]


@pytest.fixture(scope="module", autouse=True)
def main_pid():
    """Tell the model which process is the test itself (workers inherit the environment)."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("TW_MAIN_PID", str(os.getpid()))
        yield


@pytest.fixture
def case(make_case):
    def build(modes=("ok", "heavy", "raise", "nan"), timeout=None):
        toml = TOML.replace("MODES", json.dumps(list(modes)))
        toml = toml.replace("TIMEOUT", "" if timeout is None else f"timeout = {timeout}")
        return load_case(make_case(toml, MODEL))

    return build


@pytest.fixture(scope="module")
def dask_cluster(main_pid):
    """One local Dask cluster of 2 worker processes for this module's cluster tests."""
    pytest.importorskip("dask.distributed")
    cluster = DaskCluster(2)
    yield cluster
    cluster.close()


def _outcomes(executor, model, designs):
    """(status, results, message) per position; exactly one outcome per design."""
    pairs = list(executor.run(model, designs))
    assert sorted(i for i, _ in pairs) == list(range(len(designs)))
    got = dict(pairs)
    return [(got[i].status, got[i].results, got[i].message) for i in range(len(designs))]


def _front_table(result):
    names = result.case.variable_names + result.case.objective_names
    return result.front.table[names].sort_values(names).reset_index(drop=True)


# ------------------------------------------------------------------------------ the contract
def test_process_pool_gives_the_in_process_results(case):
    """Contract: the same batch gives the same status, results and message in a pool of 2 as in-process."""
    model = make_model(case())
    expected = _outcomes(InProcess(), model, BATCH)
    assert [s for s, _, _ in expected] == ["ok", "ok", "failed", "ok", "failed", "ok", "ok", "ok"]
    assert "ValueError: cannot size x=0.300" in expected[2][2] and "finite number" in expected[4][2]
    with ProcessPool(2) as pool:
        assert _outcomes(pool, model, BATCH) == expected


def test_a_batch_answer_of_finite_float_arrays_is_checked_as_the_full_checks_would():
    """The quick path for a dict of exactly the required finite float arrays gives what the full checks
    give; any other answer (an extra output, integers, a NaN, a missing name, a short array) takes the
    full checks."""
    import numpy as np

    from tradewise import models

    n, required = 6, ["mass", "cost"]
    rng = np.random.default_rng(3)
    answers = [
        {"mass": rng.random(n), "cost": rng.random(n).astype(np.float32)},
        {"mass": rng.random((n, 1)), "cost": rng.random(n)},
        {"mass": rng.random(n), "cost": rng.random(n), "note": np.arange(n)},
        {"mass": rng.random(n), "cost": np.arange(n)},
        {"mass": np.r_[rng.random(n - 1), np.nan], "cost": rng.random(n)},
        {"mass": rng.random(n)},
        {"mass": rng.random(n), "cost": rng.random(n - 1)},
    ]
    quick = [models._finite_floats(raw, n, required) is not None for raw in answers]
    assert quick == [True, True, False, False, False, False, False]
    for raw in answers:
        checked = models.check_table(raw, n, required)
        original = models._finite_floats
        try:
            models._finite_floats = lambda *args: None
            assert models.check_table(raw, n, required) == checked
        finally:
            models._finite_floats = original


def test_a_batch_model_gets_the_table_from_records_would_give():
    """Reals only or mixed kinds, the designs reach a batch model as DataFrame.from_records builds them."""
    import numpy as np

    from tradewise._pymoo import Space
    from tradewise.models import BatchModel

    for name in ("zdt1-batch", "mixed"):
        case = load_case(CASES / name)
        space = Space(case)
        rows = np.random.default_rng(5).uniform(space.xl, space.xu, size=(12, len(space.xl)))
        designs = space.decode_all(space.repair(rows))
        model = BatchModel(case)
        pd.testing.assert_frame_equal(
            model.table(designs),
            pd.DataFrame.from_records(designs, columns=model.columns),
            check_exact=True,
        )


@pytest.mark.cluster
def test_dask_gives_the_in_process_results(case, dask_cluster):
    """Contract: the same batch gives the same outcomes on a 2-worker Dask LocalCluster as in-process."""
    model = make_model(case())
    assert dask_cluster.workers == 2
    assert _outcomes(dask_cluster, model, BATCH) == _outcomes(InProcess(), model, BATCH)


@pytest.mark.cluster
def test_a_whole_run_is_identical_on_every_backend(case, dask_cluster):
    """Same case, seed and budget: the same front, hypervolume and failure count on all three backends.

    Evaluation order does not touch the random state (the pymoo notes, section 1.9), so results must agree
    exactly.
    """
    loaded = case()
    runs = {
        "in-process": tradewise.run(loaded),
        "dask": tradewise.run(loaded, executor=dask_cluster),
    }
    with ProcessPool(2) as pool:
        runs["process pool"] = tradewise.run(loaded, executor=pool)
    reference = runs["in-process"]
    assert reference.n_evals == 48 and reference.n_failed > 0 and len(reference.front) > 3
    for name, result in runs.items():
        pd.testing.assert_frame_equal(_front_table(result), _front_table(reference), obj=name)
        assert result.hypervolume == reference.hypervolume
        assert (result.n_evals, result.n_failed) == (reference.n_evals, reference.n_failed)


@pytest.mark.cluster
def test_a_cluster_started_for_a_run_begins_on_a_pool_and_moves_to_the_cluster(case):
    """run(dask=True) starts the cluster behind the search: the batches that begin before it is up go to
    a process pool, the next ones to the cluster, with the in-process outcomes throughout; a whole run
    started so gives the in-process front."""
    model = make_model(case())
    executor = make_executor(2, dask=True)
    try:
        assert isinstance(executor, DaskCluster) and executor.workers == 2
        expected = _outcomes(InProcess(), model, BATCH)
        assert _outcomes(executor, model, BATCH) == expected
        assert (executor.on_pool, executor.on_cluster) == (len(BATCH), 0)  # it was still starting
        executor._starting.join()
        assert _outcomes(executor, model, BATCH) == expected
        assert (executor.on_pool, executor.on_cluster) == (len(BATCH), len(BATCH))
    finally:
        executor.close()
    loaded = case()
    by_dask, in_process = tradewise.run(loaded, dask=True, workers=2), tradewise.run(loaded)
    pd.testing.assert_frame_equal(_front_table(by_dask), _front_table(in_process))
    assert (by_dask.n_evals, by_dask.n_failed) == (in_process.n_evals, in_process.n_failed)


def test_a_cluster_that_cannot_start_behind_the_run_says_so_at_the_next_batch(case, monkeypatch):
    """The start-up's error is raised by the first batch that begins after it failed, and the pool of
    the meantime is stopped."""
    pytest.importorskip("dask.distributed")

    def fail(self, n):
        raise ModelError("no cluster today")

    monkeypatch.setattr(DaskCluster, "_start_local", fail)
    model = make_model(case())
    executor = make_executor(2, dask=True)
    try:
        assert _outcomes(executor, model, BATCH[:2]) == _outcomes(InProcess(), model, BATCH[:2])
        executor._starting.join()
        with pytest.raises(ModelError, match="no cluster today"):
            _outcomes(executor, model, BATCH[:2])
        assert executor._pool is None
    finally:
        executor.close()


BATCH_MODEL = """
import numpy as np

def evaluate(designs):
    if (designs["mode"] == "raise").any():
        raise ValueError(f"cannot size a table of {len(designs)}")
    x = designs["x"].to_numpy()
    mass = (1 - x) ** 2 + 0.1
    mass[(designs["mode"] == "nan").to_numpy()] = np.nan
    return {
        "cost": x + np.where(designs["mode"] == "heavy", 0.5, 0.0),
        "mass": mass,
        "label": [f"x{v:.2f}" for v in x],
    }
"""


@pytest.fixture
def batch_case(make_case):
    toml = TOML.replace("MODES", json.dumps(["ok", "heavy", "raise", "nan"]))
    return load_case(
        make_case(toml.replace("TIMEOUT", "batch = true"), BATCH_MODEL, name="batch-case")
    )


def _shared(executor, model, designs):
    """(status, results, message) per position through run_designs; exactly one outcome per design."""
    pairs = list(run_designs(executor, model, designs))
    assert sorted(i for i, _ in pairs) == list(range(len(designs)))
    got = dict(pairs)
    return [(got[i].status, got[i].results, got[i].message) for i in range(len(designs))]


def test_a_batch_model_gives_the_one_design_results_on_every_local_backend(case, batch_case):
    """Contract: a batch model gives, in-process and in a pool of 2 (a share each), the outcomes the
    one-design model gives for the same designs (numpy and Python arithmetic agree to the bit here); a NaN row fails that design alone."""
    designs = [d for d in BATCH if d["mode"] != "raise"]
    expected = _outcomes(InProcess(), make_model(case()), designs)
    model = make_model(batch_case)
    assert model.batch
    assert _shared(InProcess(), model, designs) == expected
    assert [s for s, _, _ in expected].count("failed") == 1
    with ProcessPool(2) as pool:
        assert _shared(pool, model, designs) == expected
        workers = {o.worker for _, o in run_designs(pool, model, designs)}
    assert len(workers) == 2


def test_an_exception_in_a_batch_call_fails_every_design_of_that_call_only(batch_case):
    """In-process the one call fails all 8 designs; in a pool of 2 only the share holding the design
    that makes the model raise fails, with the exception's message, and the other share completes."""
    model = make_model(batch_case)
    alone = _shared(InProcess(), model, BATCH)
    assert {s for s, _, _ in alone} == {"failed"}
    assert all(
        "the batch call failed: ValueError: cannot size a table of 8" in m for _, _, m in alone
    )
    with ProcessPool(2) as pool:
        shared = _shared(pool, model, BATCH)
    assert [s for s, _, _ in shared[:4]] == ["failed"] * 4
    assert all("cannot size a table of 4" in m for _, _, m in shared[:4])
    assert [s for s, _, _ in shared[4:]] == ["failed", "ok", "ok", "ok"]  # x=0.5 returned NaN
    assert "'mass' is nan, expected a finite number" in shared[4][2]


@pytest.mark.cluster
def test_a_batch_model_gives_the_in_process_results_on_dask(case, batch_case, dask_cluster):
    """Contract: the batch model on a 2-worker Dask LocalCluster gives the in-process outcomes."""
    designs = [d for d in BATCH if d["mode"] != "raise"]
    model = make_model(batch_case)
    assert _shared(dask_cluster, model, designs) == _shared(InProcess(), model, designs)
    assert _shared(dask_cluster, model, designs) == _outcomes(
        InProcess(), make_model(case()), designs
    )


def _pid(outcome) -> int:
    return int(outcome.worker.rsplit(":", 1)[1])


def _alive(pid: int) -> bool:
    """True while the process exists and is not a zombie."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except FileNotFoundError:
        return False
    return state not in {"Z", "X"}


def test_a_timeout_keeps_the_results_and_moves_python_models_out_of_the_process(case):
    """Contract: with a timeout the batch gives the same outcomes in-process and in a pool of 2 as
    without one; the model then runs in another process, and without a timeout in this one."""
    expected = _outcomes(InProcess(), make_model(case()), BATCH)
    guarded = make_model(case(timeout=5))
    assert _outcomes(InProcess(), guarded, BATCH) == expected
    with ProcessPool(2) as pool:
        assert _outcomes(pool, guarded, BATCH) == expected
    assert _pid(make_model(case())(BATCH[0])) == os.getpid()
    assert _pid(guarded(BATCH[0])) != os.getpid()


@pytest.mark.skipif(not os.path.isdir("/proc/self"), reason="reads process states from /proc")
@pytest.mark.parametrize("backend", ["in-process", "pool"])
def test_a_hanging_python_model_is_stopped_at_its_timeout(case, tmp_path, monkeypatch, backend):
    """A design that hangs is recorded as timed out after about the timeout; the process that ran it and
    the helper it started are killed, and the next designs run in a new process."""
    monkeypatch.setenv("TW_HELPER_PIDS", str(tmp_path))
    model = make_model(case(("ok", "hang"), timeout=1))
    designs = [
        {"x": 0.1, "mode": "ok"},
        {"x": 0.2, "mode": "hang"},
        {"x": 0.3, "mode": "ok"},
        {"x": 0.4, "mode": "ok"},
    ]
    start = time.monotonic()
    if backend == "pool":
        with ProcessPool(2) as pool:
            got = dict(pool.run(model, designs))
    else:
        got = dict(InProcess().run(model, designs))
    assert time.monotonic() - start < 20
    assert [got[i].status for i in range(4)] == ["ok", "timeout", "ok", "ok"]
    assert "no answer within the timeout of 1 s" in got[1].message and 1.0 <= got[1].duration < 5
    assert (
        got[3].results
        == _outcomes(InProcess(), make_model(case(("ok", "hang"))), designs[3:])[0][1]
    )
    helpers = [int(p.name) for p in tmp_path.iterdir() if p.name.isdigit()]
    assert len(helpers) == 1
    deadline = time.monotonic() + 5
    while (_alive(_pid(got[1])) or _alive(helpers[0])) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not _alive(_pid(got[1])) and not _alive(helpers[0])
    if backend == "in-process":
        assert _pid(got[0]) == _pid(got[1]) != _pid(got[2]) == _pid(got[3])


@pytest.mark.slow
@pytest.mark.parametrize("workers", ["1", "2"])
def test_a_run_whose_model_hangs_on_a_fifth_of_its_designs_finishes(
    case, tmp_path, monkeypatch, workers
):
    """40 evaluations, a fifth of the designs hang, timeout 1 s: the run finishes well under a minute
    and records the hanging designs as timed out."""
    monkeypatch.setenv("TW_HELPER_PIDS", str(tmp_path))
    folder = case(("every-fifth", "every-fifth-too"), timeout=1).folder
    out = tmp_path / "run"
    start = time.monotonic()
    result = CliRunner().invoke(
        main,
        [
            "run",
            str(folder),
            "--out",
            str(out),
            "--workers",
            workers,
            "--evaluations",
            "40",
            "--population",
            "10",
            "--quiet",
        ],
    )
    took = time.monotonic() - start
    assert result.exit_code == 0, result.output
    assert took < 45
    with sqlite3.connect(out / "archive.sqlite") as db:
        rows = db.execute(
            "SELECT design, status FROM evaluations WHERE source_id IS NULL"
        ).fetchall()
    assert len(rows) == 40
    hangs = {True: [], False: []}
    for design, status in rows:
        hangs[int(json.loads(design)["x"] * 1e6) % 5 == 0].append(status)
    assert len(hangs[True]) >= 4 and set(hangs[True]) == {"timeout"}
    assert set(hangs[False]) == {"ok"}


# ------------------------------------------------------------------------- as they complete
def _completion_order(executor, model):
    designs = [{"x": 0.1, "mode": "ok", "sleep": 1.5}] + [
        {"x": x / 10, "mode": "ok", "sleep": 0.05} for x in range(2, 8)
    ]
    return [i for i, _ in executor.run(model, designs)]


def test_pool_yields_results_as_they_complete(case):
    """A slow first design does not hold back the others: they are yielded while it still runs."""
    with ProcessPool(2) as pool:
        order = _completion_order(pool, make_model(case()))
    assert order[-1] == 0


@pytest.mark.cluster
def test_dask_yields_results_as_they_complete(case, dask_cluster):
    """On Dask too, the slow first design comes last."""
    assert _completion_order(dask_cluster, make_model(case()))[-1] == 0


def test_each_evaluation_is_reported_before_the_generation_ends(case, monkeypatch):
    """on_evaluation (the progress bar) advances per evaluation, well before the generation's row."""
    monkeypatch.setenv("TW_TEST_SLEEP", "0.1")
    stamps, rows = [], []
    with ProcessPool(2) as pool:
        tradewise.run(
            case(("ok", "heavy")),
            evaluations=8,
            population=8,
            executor=pool,
            on_evaluation=lambda row: stamps.append(time.monotonic()),
            progress=lambda row: rows.append(time.monotonic()),
        )
    assert len(stamps) == 8 and len(rows) == 1
    # 8 designs of 0.1 s on 2 workers take about 0.4 s; the first result arrives after about 0.1 s.
    assert rows[0] - stamps[0] >= 0.2


# ----------------------------------------------------------------- a pool that does not pay
SLOWER = "Workers slow this model down"


class _Notes(logging.Handler):
    """Keeps the messages of the "tradewise" logger (the command line may have stopped propagation)."""

    def __init__(self) -> None:
        super().__init__(logging.INFO)
        self.lines: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.lines.append(record.getMessage())


@pytest.fixture
def notes():
    handler = _Notes()
    logger = logging.getLogger("tradewise")
    logger.addHandler(handler)
    try:
        yield handler.lines
    finally:
        logger.removeHandler(handler)


# No call into the operating system at all: even time.sleep(0) gives up the processor, which on a
# busy machine can take as long as the hand-off itself.
QUICK_MODEL = """
def evaluate(design):
    return {"cost": design["x"], "mass": (1 - design["x"]) ** 2 + 0.1}
"""


@pytest.fixture
def quick(make_case):
    """A case whose model answers in about a microsecond."""
    return make_case(TOML.replace("MODES", '["ok", "heavy"]').replace("TIMEOUT", ""), QUICK_MODEL)


def _batches(pool, model, *, sleep: float, n_batches: int = 3) -> None:
    designs = [{"x": k / 20, "mode": "ok", "sleep": sleep} for k in range(1, 17)]
    for _ in range(n_batches):
        assert [s for s, _, _ in _outcomes(pool, model, designs)] == ["ok"] * len(designs)


def test_a_pool_says_once_that_it_slows_a_quick_model_down(quick, notes):
    """A model that answers in microseconds, in a pool of 2: one notice over four batches, naming the
    model's time, the hand-off cost and the way out (a hand-off of a design to another process costs
    far more than a few microseconds: common practice, and measured at about 0.5 ms here)."""
    with ProcessPool(2) as pool:
        _batches(pool, make_model(load_case(quick)), sleep=0.0, n_batches=4)
    said = [line for line in notes if SLOWER in line]
    assert len(said) == 1, notes
    assert "a design (median)" in said[0] and "2 worker processes costs about" in said[0]
    assert said[0].endswith("it runs faster without --workers.")


def test_a_pool_says_nothing_for_a_model_that_takes_50_ms(case, notes):
    """A model that sleeps 0.05 s a design: two workers halve the time per design, so no notice."""
    with ProcessPool(2) as pool:
        _batches(pool, make_model(case(("ok", "heavy"))), sleep=0.05)
    assert not [line for line in notes if SLOWER in line]
    assert POOL_SLOWDOWN_TO_WARN > 1  # the notice means slower than one process, never a close call


def test_the_batch_that_starts_the_pool_is_not_judged(quick, notes):
    """One batch of a quick model is all the pool's start-up; no notice comes from it alone."""
    with ProcessPool(2) as pool:
        _batches(pool, make_model(load_case(quick)), sleep=0.0, n_batches=1)
    assert not [line for line in notes if SLOWER in line]


def test_run_with_workers_on_a_quick_model_says_so_once_on_stderr(quick, tmp_path):
    """`run --workers 2` on a model of microseconds: the notice is one line on standard error, once."""
    result = CliRunner().invoke(
        main,
        ["run", str(quick), "--workers", "2", "--evaluations", "96", "--out", str(tmp_path / "r")],
    )
    assert result.exit_code == 0, result.output
    said = [line for line in result.stderr.splitlines() if SLOWER in line]
    assert len(said) == 1 and SLOWER not in result.stdout


# -------------------------------------------------------------------------- dying workers
CRASH_BATCH = [
    {"x": x / 10, "mode": "crash" if x == 5 else "ok", "sleep": 0.2} for x in range(1, 9)
]


def test_pool_survives_a_worker_that_dies(case):
    """os._exit in a worker: the guilty design is tried once more, then failed; its neighbours complete."""
    model = make_model(case(("ok", "crash")))
    with ProcessPool(2) as pool:
        got = _outcomes(pool, model, CRASH_BATCH)
        restarts = pool.n_restarts
    expected = _outcomes(InProcess(), model, [d | {"mode": "ok"} for d in CRASH_BATCH])
    for i, (status, results, message) in enumerate(got):
        if i == 4:
            assert (
                status == "failed"
                and "worker process died while evaluating this design, twice" in message
            )
        else:
            assert (status, results, message) == expected[i]
    assert restarts == 2


@pytest.mark.cluster
def test_dask_survives_a_worker_that_dies(case, dask_cluster):
    """On Dask the nanny restarts the worker; the guilty design is retried once, then failed."""
    model = make_model(case(("ok", "crash")))
    got = _outcomes(dask_cluster, model, CRASH_BATCH)
    expected = _outcomes(InProcess(), model, [d | {"mode": "ok"} for d in CRASH_BATCH])
    for i, (status, results, message) in enumerate(got):
        if i == 4:
            assert status == "failed" and "Dask worker died" in message
        else:
            assert (status, results, message) == expected[i]


@pytest.mark.cluster
def test_dask_sends_a_quick_model_in_shares_and_still_blames_only_the_design_that_kills(
    case, dask_cluster
):
    """A model quicker than an eighth of a second a design goes to Dask a few designs a task after its
    first batch (a task's round trip is paid once a share); a share whose design kills its worker is
    sent again a design a task, so only that design fails and its neighbours complete."""
    model = make_model(case(("ok", "crash")))
    quick = [{"x": x / 40, "mode": "ok"} for x in range(1, 25)]
    expected = _outcomes(InProcess(), model, quick)
    assert _outcomes(dask_cluster, model, quick) == expected  # one design a task: measured
    tasks = dask_cluster._tasks(model, len(quick))
    assert len(tasks) < len(quick) and sorted(sum(tasks, [])) == list(range(len(quick)))
    assert _outcomes(dask_cluster, model, quick) == expected  # in shares
    crash = [d | {"sleep": 0.0} for d in CRASH_BATCH] + quick
    assert any(len(task) > 1 and 4 in task for task in dask_cluster._tasks(model, len(crash)))
    got = _outcomes(dask_cluster, model, crash)
    fine = _outcomes(InProcess(), model, [d | {"mode": "ok"} for d in crash])
    for i, (status, results, message) in enumerate(got):
        if i == 4:
            assert status == "failed" and "Dask worker died" in message
        else:
            assert (status, results, message) == fine[i]


def test_run_with_raising_nan_and_crashing_python_model(case, tmp_path):
    """Through the command line with --workers 2: a model that raises, returns NaN, or kills its worker;
    the run completes, each failure is stored with its message, and the summary counts them."""
    folder = case(("ok", "raise", "nan", "crash")).folder
    out = tmp_path / "run"
    # Seed 2 draws every mode in the first generation.
    result = CliRunner().invoke(
        main, ["run", str(folder), "--out", str(out), "--workers", "2", "--seed", "2", "--quiet"]
    )
    assert result.exit_code == 0, result.output
    with sqlite3.connect(out / "archive.sqlite") as db:
        rows = db.execute(
            "SELECT design, status, message FROM evaluations WHERE source_id IS NULL"
        ).fetchall()
    assert len(rows) == 48
    failed = {}
    for design, status, message in rows:
        mode = json.loads(design)["mode"]
        assert (status == "ok") == (mode == "ok"), (mode, status, message)
        failed.setdefault(mode, message)
    assert (
        "ValueError: cannot size" in failed["raise"] and "(at model.py line 8)" in failed["raise"]
    )
    assert "'mass'" in failed["nan"] and "finite number" in failed["nan"]
    assert "worker process died" in failed["crash"]
    n_failed = sum(status != "ok" for _, status, _ in rows)
    assert f"{n_failed} evaluation(s) failed" in result.output


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL and process ids as used here are POSIX")
def test_a_killed_pool_run_leaves_no_folder_for_long(case, tmp_path, monkeypatch):
    """kill -9 of a --workers run strands its pool folder; the next pool removes it, and only folders
    whose owner process is gone."""
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    folder = case(("ok", "heavy")).folder
    env = dict(os.environ, TMPDIR=str(scratch), TW_TEST_SLEEP="0.2")
    run = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "tradewise.cli",
            "run",
            str(folder),
            "--out",
            str(tmp_path / "run"),
            "--workers",
            "2",
            "--evaluations",
            "400",
            "--quiet",
        ],
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    deadline = time.monotonic() + 60
    while not list(scratch.glob("tradewise-pool-*")) and time.monotonic() < deadline:
        time.sleep(0.05)
    stranded = list(scratch.glob("tradewise-pool-*"))
    run.send_signal(signal.SIGKILL)
    run.wait()
    assert len(stranded) == 1 and stranded[0].is_dir()
    alive = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        others = (
            scratch / f"tradewise-pool-{alive.pid}-busy"
        )  # a pool of a live run, not ours to remove
        others.mkdir()
        monkeypatch.setattr(tempfile, "tempdir", str(scratch))
        with ProcessPool(2) as pool:
            assert [
                o.status for _, o in pool.run(make_model(case(("ok", "heavy"))), BATCH[:2])
            ] == ["ok", "ok"]
        assert not stranded[0].exists()
        assert sorted(scratch.glob("tradewise-pool-*")) == [others]
    finally:
        alive.kill()
        alive.wait()


# ---------------------------------------------------------------------------------- choice
def test_make_executor_picks_from_the_options():
    """No options: in-process; --workers 1 stays in-process; --workers 3 is a pool; bad counts are refused."""
    assert isinstance(make_executor(), InProcess) and make_executor().workers == 1
    assert type(make_executor(1)) is InProcess
    pool = make_executor(3)
    assert isinstance(pool, ProcessPool) and pool.workers == 3
    with pytest.raises(TradewiseError, match="workers: got 0"):
        ProcessPool(0)


def _reaped() -> int:
    """The id of a process that has ended and been reaped."""
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


@pytest.mark.parametrize("who", ["pool worker", "model process"])
def test_a_watcher_whose_parent_is_already_gone_ends_its_process(who, tmp_path):
    """A pool worker, or a model's process, whose run died before the worker had even started (so its
    parent is already init) still ends: the parent's id is handed over, not read in the child."""
    gone = _reaped()
    if who == "pool worker":
        code = (
            "import time; from tradewise.executors import _watch_parent; "
            f"_watch_parent({gone}); print('watching', flush=True); time.sleep(60)"
        )
        args = [sys.executable, "-c", code]
    else:
        model = tmp_path / "model.py"
        model.write_text("def evaluate(d):\n    return {}\n", encoding="utf-8")
        import tradewise._model_host as host

        args = [sys.executable, host.__file__, str(model), "evaluate", "[]", str(gone)]
    proc = subprocess.Popen(
        args, stdin=subprocess.PIPE, stdout=subprocess.DEVNULL, start_new_session=True
    )
    try:
        assert proc.wait(timeout=20) != 0
    finally:
        proc.kill()
        proc.wait()
