"""Several seeds of one case: the merged front, the spread of hypervolume, the folder, the attainment surfaces."""

from __future__ import annotations

import json
import math

import moocore
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

import tradewise
from support import CASES
from tradewise.cli import main
from tradewise.compare import attainment, attainment_surfaces, read_seed_fronts
from tradewise.errors import CaseError
from tradewise.front import read_front
from tradewise.store import open_store


def test_parallel_and_sequential_seeds_agree_and_share_one_archive(tmp_path):
    """Three seeds run one after another and in three processes give the same runs (same seed, same result),
    and each set of runs lands in its own single archive."""
    one = tradewise.run_seeds(CASES / "zdt1", 3, evaluations=600, store=tmp_path / "one.sqlite")
    many = tradewise.run_seeds(
        CASES / "zdt1", 3, evaluations=600, store=tmp_path / "many.sqlite", workers=3
    )
    assert one.seeds == many.seeds == (1, 2, 3)  # the case's seed 1, then +1, +2
    assert one.hypervolumes == many.hypervolumes
    for a, b in zip(one.runs, many.runs, strict=True):
        assert np.array_equal(a.front.points(), b.front.points())
    for name in ("one.sqlite", "many.sqlite"):
        with open_store(tmp_path / name, create=False) as archive:
            runs = archive.runs()
            assert sorted(runs["seed"]) == [1, 2, 3] and (runs["n_evals"] == 600).all()


def test_each_seed_is_an_ordinary_run():
    """Seed 2 of a repeat is the run that tradewise.run makes with seed 2 alone."""
    repeat = tradewise.run_seeds(CASES / "zdt1", 2, seed=1, evaluations=400)
    alone = tradewise.run(CASES / "zdt1", seed=2, evaluations=400)
    assert np.array_equal(repeat.runs[1].front.points(), alone.front.points())


def test_merged_front_and_spread_against_moocore():
    """The merged front is the non-dominated union of the seeds' fronts (moocore.filter_dominated); each
    seed's hypervolume is moocore's on the common reference point, the worst of the recorded ones."""
    result = tradewise.run_seeds(CASES / "zdt1", 3, evaluations=600)
    union = np.vstack([r.front.points() for r in result.runs])
    expected = moocore.filter_dominated(union)
    assert sorted(map(tuple, result.front.points())) == sorted(map(tuple, expected))
    reference = np.max([r.reference for r in result.runs], axis=0)
    assert result.reference == tuple(reference) == (1.0, 1.0)  # the case's worst values
    for run, hv in zip(result.runs, result.hypervolumes, strict=True):
        assert hv == pytest.approx(
            moocore.hypervolume(run.front.points(), ref=reference), rel=1e-12
        )
    assert result.hypervolume == pytest.approx(moocore.hypervolume(union, ref=reference), rel=1e-12)
    assert result.hypervolume >= max(result.hypervolumes)
    spread = result.spread
    assert spread["min"] <= spread["median"] <= spread["max"]
    assert spread["median"] == pytest.approx(np.median(result.hypervolumes))
    assert set(result.front.table["seed"]) <= {1, 2, 3}
    assert result.n_evals == 3 * 600
    assert "median" in result.message and "min" in result.message and "max" in result.message


def test_maximised_objective_and_own_reference_points(make_case):
    """Without `worst`, each seed fixes its own reference; the common one is the worst of them per goal
    (largest for a minimised objective, smallest for a maximised one)."""
    folder = make_case(
        toml="""
        title = "tiny, one goal maximised"
        model = "model.py:evaluate"
        [variables]
        x = { type = "real", low = 0.0, high = 1.0 }
        y = { type = "real", low = 0.0, high = 1.0 }
        [objectives]
        cost = { goal = "min", unit = "EUR" }
        grip = { goal = "max", unit = "N" }
        """,
        model="""
        def evaluate(design):
            x, y = design["x"], design["y"]
            return {"cost": x + 0.5 * y, "grip": 10 * x ** 0.5 - 2 * y}
        """,
    )
    result = tradewise.run_seeds(folder, 3, evaluations=300)
    refs = np.array([r.reference for r in result.runs])
    assert result.reference == (refs[:, 0].max(), refs[:, 1].min())
    surfaces = attainment_surfaces([r.front.points() for r in result.runs], [False, True])
    # The best surface of a maximised objective is no lower than the worst one where both exist.
    assert surfaces["best"][:, 1].max() >= surfaces["worst"][:, 1].max()


def test_bad_number_of_seeds():
    """Zero seeds is refused with a one-sentence CaseError; the CLI refuses it as a usage error."""
    with pytest.raises(CaseError, match="seeds: got 0"):
        tradewise.run_seeds(CASES / "zdt1", 0)
    cli = CliRunner().invoke(main, ["run", str(CASES / "zdt1"), "--seeds", "0"])
    assert cli.exit_code == 2


def test_run_folder_for_several_seeds(tmp_path):
    """tradewise.save_seeds writes the merged front, one folder a seed, seeds.csv and a history with a seed column."""
    result = tradewise.run_seeds(
        CASES / "zdt1", 3, evaluations=400, store=tmp_path / "archive.sqlite"
    )
    written = tradewise.save_seeds(result, tmp_path / "run")
    run = tmp_path / "run"
    assert set(written) >= {"front", "meta", "history", "seeds"}
    seeds = pd.read_csv(run / "seeds.csv")
    assert seeds["seed"].tolist() == [1, 2, 3]
    assert seeds["hypervolume"].tolist() == pytest.approx(list(result.hypervolumes))
    merged = read_front(run)
    assert len(merged) == len(result.front) and merged.info.seeds.seeds == (1, 2, 3)
    assert merged.info.seeds.median == pytest.approx(result.spread["median"])
    per_seed = read_seed_fronts(run)
    assert [len(f) for f in per_seed] == [len(r.front) for r in result.runs]
    history = pd.read_csv(run / "history.csv")
    assert history.columns[0] == "seed" and sorted(history["seed"].unique()) == [1, 2, 3]


def test_cli_run_with_seeds_in_parallel(tmp_path):
    """`run --seeds 3 --workers 3` states the spread, writes attainment.csv with the three surfaces and
    disagreement.csv, whose area equals HV(best) - HV(worst) (moocore)."""
    out = tmp_path / "run"
    cli = CliRunner().invoke(
        main,
        [
            "run",
            str(CASES / "zdt1"),
            "--seeds",
            "3",
            "--workers",
            "3",
            "--evaluations",
            "600",
            "--out",
            str(out),
            "--quiet",
        ],
    )
    assert cli.exit_code == 0, cli.output
    assert "single runs: median" in cli.output and "runs disagree on" in cli.output
    table = pd.read_csv(out / "attainment.csv")
    assert set(table["surface"]) == {"best", "median", "worst"}
    regions = pd.read_csv(out / "disagreement.csv")
    area = (
        (regions["f1_high"] - regions["f1_low"]) * (regions["f2_high"] - regions["f2_low"])
    ).sum()
    best = table.loc[table["surface"] == "best", ["f1", "f2"]].to_numpy()
    worst = table.loc[table["surface"] == "worst", ["f1", "f2"]].to_numpy()
    assert area == pytest.approx(
        moocore.hypervolume(best, ref=[1, 1]) - moocore.hypervolume(worst, ref=[1, 1])
    )
    meta = json.loads((out / "front.json").read_text())
    assert meta["n_seeds"] == 3 and meta["n_evals"] == 1800
    # The folder compares like any other, and brings its seed-to-seed spread along.
    compared = CliRunner().invoke(main, ["compare", str(out), str(out / "seeds" / "seed-1")])
    assert compared.exit_code == 0, compared.output
    assert "Single seeds of" in compared.output and "(3 seeds)" in compared.output


def test_cli_seeds_with_a_relative_out_keeps_each_seed_folder(tmp_path, monkeypatch):
    """`run --seeds 2 --out runs/a` given relative to the working folder keeps seeds/seed-N/ (the
    clean-up of an earlier run's files compared a relative folder with resolved paths and removed
    them), and a second run into the same folder keeps them too."""
    monkeypatch.chdir(tmp_path)
    command = ["run", str(CASES / "zdt1"), "--seeds", "2", "--evaluations", "120", "--out", "runs/a", "--quiet"]  # fmt: skip
    for _ in range(2):
        cli = CliRunner().invoke(main, command)
        assert cli.exit_code == 0, cli.output
        for seed in (1, 2):
            assert (tmp_path / "runs" / "a" / "seeds" / f"seed-{seed}" / "front.json").is_file()


# ------------------------------------------------------------------ against published fronts
@pytest.mark.slow
def test_zdt1_median_attainment_surface_near_the_true_front():
    """ZDT1 (Zitzler, Deb, Thiele 2000): front f2 = 1 - sqrt(f1), 0 <= f1 <= 1.

    Budget stated here: 5 seeds (1-5) of 10,000 evaluations each, the case's default population, run in
    parallel. Every corner of the median attainment surface (reached by 3 of 5 runs) inside the unit box
    lies within 0.06 of the true front (measured 0.027), none lies below it, and the IGD+ of the surface
    against 100,001 points of the true front is at most 0.04 (measured 0.016). With 6000 evaluations the
    distance was still 0.16: ZDT1's 30 variables need the budget.
    """
    result = tradewise.run_seeds(CASES / "zdt1", 5, evaluations=10_000, seed=1, workers=5)
    median = attainment([r.front for r in result.runs]).surfaces["median"]
    f1 = np.linspace(0.0, 1.0, 100_001)
    true = np.c_[f1, 1 - np.sqrt(f1)]
    inside = median[(median <= 1).all(axis=1)]
    assert len(inside) >= 100
    distance = np.array([np.hypot(*(true - corner).T).min() for corner in inside])
    assert distance.max() <= 0.06
    assert (median[:, 1] >= 1 - np.sqrt(np.clip(median[:, 0], 0, 1)) - 1e-12).all()
    assert moocore.igd_plus(median, ref=true) <= 0.04


@pytest.mark.slow
def test_dtlz2_median_attainment_surface_near_the_true_front():
    """DTLZ2, 3 objectives (Deb, Thiele, Laumanns, Zitzler 2002): the front is the positive octant of the
    unit sphere, so a point's distance to it is its norm minus 1.

    Budget stated here: 5 seeds (1-5) of 6000 evaluations each, the case's default population, run in
    parallel. Of the median surface's corners inside the unit box, 90 % lie within 0.07 of the sphere
    (measured 0.039; corners near the octant's edges converge last), none lies inside it, and the IGD+
    against a 151 x 151 grid of the sphere is at most 0.04 (measured 0.023).
    """
    result = tradewise.run_seeds(CASES / "dtlz2", 5, evaluations=6000, seed=1, workers=5)
    median = attainment([r.front for r in result.runs]).surfaces["median"]
    inside = median[(median <= 1).all(axis=1)]
    norms = np.linalg.norm(inside, axis=1)
    assert len(inside) >= 1000
    assert np.quantile(norms - 1, 0.9) <= 0.07
    assert norms.min() >= 1 - 1e-9
    a, b = np.meshgrid(np.linspace(0, math.pi / 2, 151), np.linspace(0, math.pi / 2, 151))
    sphere = np.c_[
        (np.cos(a) * np.cos(b)).ravel(), (np.cos(a) * np.sin(b)).ravel(), np.sin(a).ravel()
    ]
    assert moocore.igd_plus(median, ref=sphere) <= 0.04


# ------------------------------------------------------------------------ interrupted sets of seeds
NO_WORST_MODEL = """
import json, os, time

def evaluate(design):
    time.sleep(float(os.environ.get("TW_TEST_SLEEP", "0")))
    x, y = design["x"], design["y"]
    log = os.environ.get("TW_EVAL_LOG")
    if log:
        with open(log, "a", encoding="utf-8") as handle:
            handle.write("1\\n")
    return {"cost": x + 0.3 * y, "grip": 10 * x ** 0.5 - 2 * y}
"""

NO_WORST_TOML = """
title = "tiny, no worst values"
model = "model.py:evaluate"
[variables]
x = { type = "real", low = 0.0, high = 1.0 }
y = { type = "real", low = 0.0, high = 1.0 }
[objectives]
cost = { goal = "min", unit = "EUR" }
grip = { goal = "max", unit = "N" }
[search]
population = 10
evaluations = 60
seed = 4
stall_generations = 0
"""


def _merged(result) -> pd.DataFrame:
    names = ["x", "y", "cost", "grip", "seed"]
    return result.front.table[names].sort_values(names).reset_index(drop=True)


def test_an_interrupted_set_of_seeds_resumes_every_seed(make_case, tmp_path):
    """Three seeds interrupted in the second: the result says which seeds did not run, and resuming the
    archive finishes the second, runs the third and merges all three, as one uninterrupted set would."""

    folder = make_case(NO_WORST_TOML, NO_WORST_MODEL)

    def stop_in_seed_five(row):
        if row["seed"] == 5 and row["generation"] == 2:
            raise KeyboardInterrupt

    cut = tradewise.run_seeds(folder, 3, store=tmp_path / "cut.sqlite", progress=stop_in_seed_five)
    assert cut.status == "interrupted" and cut.seeds == (4, 5)
    assert "Seed(s) 6 did not run" in cut.message and cut.info.seeds.missing == (6,)
    resumed = tradewise.resume_seeds(tmp_path / "cut.sqlite")
    whole = tradewise.run_seeds(folder, 3, store=tmp_path / "whole.sqlite")
    assert resumed.seeds == whole.seeds == (4, 5, 6)
    assert [r.status for r in resumed.runs] == ["budget"] * 3 and resumed.status == "budget"
    assert resumed.n_evals == whole.n_evals == 180
    pd.testing.assert_frame_equal(_merged(resumed), _merged(whole))
    assert resumed.hypervolumes == whole.hypervolumes
    with open_store(tmp_path / "cut.sqlite", create=False) as archive:
        assert sorted(archive.runs()["seed"]) == [4, 5, 6]


def test_one_reference_for_everything_about_a_set_of_seeds(make_case, tmp_path):
    """Without `worst` each seed fixes its own reference, yet the history, each seed's folder, seeds.csv and
    the messages all use the common one: the last history row of each seed equals its seeds.csv value."""
    folder = make_case(NO_WORST_TOML, NO_WORST_MODEL)
    result = tradewise.run_seeds(folder, 3, evaluations=100)
    tradewise.save_seeds(result, tmp_path / "run")
    seeds = pd.read_csv(tmp_path / "run" / "seeds.csv").set_index("seed")
    history = pd.read_csv(tmp_path / "run" / "history.csv")
    for run, hv in zip(result.runs, result.hypervolumes, strict=True):
        last = history[history["seed"] == run.seed]["hypervolume"].iloc[-1]
        assert (
            last
            == pytest.approx(hv, rel=1e-12)
            == pytest.approx(seeds.loc[run.seed, "hypervolume"])
        )
        meta = json.loads(
            (tmp_path / "run" / "seeds" / f"seed-{run.seed}" / "front.json").read_text()
        )
        assert tuple(meta["reference_point"]) == pytest.approx(result.reference, rel=1e-12)
        assert meta["hypervolume"] == pytest.approx(hv, rel=1e-12)
        points = run.front.points()
        ideal = np.where(run.front.maximise, points.max(axis=0), points.min(axis=0))
        share = hv / np.prod(np.abs(np.asarray(result.reference) - ideal))
        assert (
            f"covering {100 * share:.1f} % of the box from its best values to the seeds' common "
            "reference point" in run.message
        )
    # The seeds really had different references of their own (else this test would prove nothing).
    alone = [tradewise.run(folder, seed=s, evaluations=100).reference for s in result.seeds]
    assert len(set(alone)) > 1


@pytest.mark.slow
def test_cli_set_of_seeds_killed_then_resumed(make_case, tmp_path):
    """`run --seeds 3` killed with SIGKILL part-way; `resume STORE` finishes every seed and writes the merged
    folder with all three seeds, as the uninterrupted command would."""
    import os
    import signal
    import subprocess
    import sys
    import time

    folder = make_case(NO_WORST_TOML, NO_WORST_MODEL)
    log = tmp_path / "log.txt"
    env = dict(os.environ, TW_EVAL_LOG=str(log), TW_TEST_SLEEP="0.02")
    args = [
        sys.executable,
        "-m",
        "tradewise.cli",
        "run",
        str(folder),
        "--seeds",
        "3",
        "--out",
        str(tmp_path / "run"),
        "--quiet",
    ]
    proc = subprocess.Popen(
        args, env=env, start_new_session=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    deadline = time.monotonic() + 60
    while not log.exists() or len(log.read_text().splitlines()) < 80:
        assert proc.poll() is None and time.monotonic() < deadline
        time.sleep(0.02)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    store = tmp_path / "run" / "archive.sqlite"
    done = subprocess.run(
        [sys.executable, "-m", "tradewise.cli", "resume", str(store), "--quiet"],
        env=dict(env, TW_TEST_SLEEP="0"),
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    seeds = pd.read_csv(tmp_path / "run" / "seeds.csv")
    assert seeds["seed"].tolist() == [4, 5, 6] and (seeds["status"] == "budget").all()
    assert (seeds["evaluations"] == 60).all()
    whole = tradewise.run_seeds(folder, 3)
    front = pd.read_csv(tmp_path / "run" / "front.csv")
    front.columns = [c.split(" [")[0] for c in front.columns]
    names = ["x", "y", "cost", "grip", "seed"]
    pd.testing.assert_frame_equal(
        front[names].sort_values(names).reset_index(drop=True), _merged(whole), check_dtype=False
    )
