"""Tests of runfolder.py's representative set: representatives.csv written by every run folder and read back."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

import tradewise
from support import CASES, GOOD_MODEL, GOOD_TOML
from tradewise.cli import main
from tradewise.front import read_front
from tradewise.runfolder import read_representatives

FIXTURES = Path(__file__).parent / "fixtures" / "runs"


def check_representatives(folder, n: int) -> pd.DataFrame:
    """representatives.csv of ``folder``: at most n rows, front.csv's headers, the extremes, rows that match."""
    front_csv = pd.read_csv(folder / "front.csv")
    table = pd.read_csv(folder / "representatives.csv")
    assert 1 <= len(table) <= n
    assert list(table.columns) == ["chosen_as", "front_row", *front_csv.columns]
    front = read_front(folder)
    for o in front.objectives:
        values = front.table[o.name]
        best = values.max() if o.maximise else values.min()
        column = [c for c in front_csv.columns if c.split(" [")[0] == o.name][0]
        assert best in table[column].tolist()
        assert f"best {o.name}" in ", ".join(table["chosen_as"])
    # front_row counts from 1 and points at the same design in front.csv
    same = front_csv.iloc[table["front_row"] - 1].reset_index(drop=True)
    pd.testing.assert_frame_equal(same, table[front_csv.columns], check_dtype=False)
    return table


def test_save_run_writes_representatives(tmp_path):
    """A small run's folder holds representatives.csv with the extremes, and front.json records its size."""
    result = tradewise.run(CASES / "zdt1", evaluations=400, seed=3)
    written = tradewise.save_run(result, tmp_path)
    assert written["representatives"] == tmp_path / "representatives.csv"
    table = check_representatives(tmp_path, 20)
    assert len(table) == min(20, len(result.front))
    meta = json.loads((tmp_path / "front.json").read_text(encoding="utf-8"))
    assert meta["settings"]["representatives"] == 20
    back = read_representatives(tmp_path)
    assert back.objective_names == ["f1", "f2"] and len(back) == len(table)
    assert back.table["chosen_as"].tolist() == table["chosen_as"].tolist()


def test_case_setting_sets_the_size(make_case, tmp_path):
    """[search] representatives = 3 gives at most three designs, all of them named by why they were chosen."""
    folder = make_case(GOOD_TOML + "\n[search]\nrepresentatives = 3\n", GOOD_MODEL)
    result = tradewise.run(folder, evaluations=200, seed=1)
    tradewise.save_run(result, tmp_path / "run")
    table = check_representatives(tmp_path / "run", 3)
    assert len(table) == 3
    assert set(table["chosen_as"]) <= {"best cost", "best mass", "knee", "spread"}


def test_run_with_seeds_writes_representatives_everywhere(tmp_path):
    """`run --seeds 2 --representatives 5` writes the set for the merged front and for each seed's folder."""
    out = tmp_path / "run"
    cli = CliRunner().invoke(
        main,
        [
            "run",
            str(CASES / "zdt1"),
            "--seeds",
            "2",
            "--evaluations",
            "300",
            "--representatives",
            "5",
            "--out",
            str(out),
            "--quiet",
        ],
    )
    assert cli.exit_code == 0, cli.output
    assert "representatives.csv" in cli.output
    table = check_representatives(out, 5)
    assert len(table) == 5
    assert "seed" in table.columns
    meta = json.loads((out / "front.json").read_text(encoding="utf-8"))
    assert meta["settings"]["representatives"] == 5
    for seed in (1, 2):
        check_representatives(out / "seeds" / f"seed-{seed}", 5)


def test_run_refuses_a_bad_representatives_option(tmp_path):
    """--representatives 0 is a usage error (exit 2) naming the option."""
    cli = CliRunner().invoke(main, ["run", str(CASES / "zdt1"), "--representatives", "0"])
    assert cli.exit_code == 2 and "--representatives" in cli.output


def test_folder_without_representatives_reads_as_none():
    """A run folder of an earlier release has no representatives.csv; the reader says None."""
    folder = CASES.parent / "fixtures" / "runs" / "mixed"
    assert not (folder / "representatives.csv").exists()
    assert read_representatives(folder) is None


def test_damaged_representatives_file_is_named(tmp_path):
    """A representatives.csv without its chosen_as column gives a DataError naming the file."""
    result = tradewise.run(CASES / "zdt1", evaluations=120, seed=1)
    tradewise.save_run(result, tmp_path)
    table = pd.read_csv(tmp_path / "representatives.csv").drop(columns="chosen_as")
    table.to_csv(tmp_path / "representatives.csv", index=False)
    with pytest.raises(tradewise.DataError, match=r"representatives.csv: no column 'chosen_as'"):
        read_representatives(tmp_path)
    assert np.isfinite(read_front(tmp_path).points()).all()


# ------------------------------------------------------------------ design tables and bookkeeping
BOOKKEEPING = {"duration", "worker", "cached", "status", "message", "feasible", "violation"}


def test_design_tables_of_a_run_hold_no_bookkeeping(tmp_path):
    """front.csv, representatives.csv and a shortlist carry design columns with eval_id and generation, and
    none of the columns about how an evaluation ran; the archive keeps those."""
    result = tradewise.run(CASES / "zdt1", evaluations=200, seed=2)
    tradewise.save_run(result, tmp_path)
    for name in ("front.csv", "representatives.csv"):
        columns = set(pd.read_csv(tmp_path / name).columns)
        assert {"eval_id", "generation"} <= columns and not columns & BOOKKEEPING, name
    assert {"duration", "worker", "status"} <= set(result.evaluations.columns)
    out = tmp_path / "short.csv"
    picked = CliRunner().invoke(main, ["pick", str(tmp_path), "--top", "2", "--out", str(out)])
    assert picked.exit_code == 0, picked.output
    assert not set(pd.read_csv(out).columns) & BOOKKEEPING


def test_a_front_of_an_earlier_release_drops_its_duration_column(tmp_path):
    """A folder of an earlier release kept the evaluation time in front.csv; read back, the front is the
    design table alone, and a shortlist made from it too."""
    folder = FIXTURES / "heat-sink"
    assert "duration" in pd.read_csv(folder / "front.csv").columns
    front = read_front(folder)
    assert "duration" not in front.table.columns and "eval_id" in front.table.columns
    assert len(front) == len(pd.read_csv(folder / "front.csv"))
    out = tmp_path / "short.csv"
    picked = CliRunner().invoke(main, ["pick", str(folder), "--out", str(out)])
    assert picked.exit_code == 0, picked.output
    assert "duration" not in pd.read_csv(out).columns
