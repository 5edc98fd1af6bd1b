"""The typed run information: one schema for front.json's run part, read and written in runinfo.py."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pandas as pd
import pytest

from tradewise.case import Objective
from tradewise.errors import DataError
from tradewise.front import Front, read_front
from tradewise.runinfo import FRONT_FORMAT, LimitSpec, RunInfo, SeedSet, VariableSpec

FIXTURES = Path(__file__).parent / "fixtures" / "runs"


def _front(info: RunInfo) -> Front:
    table = pd.DataFrame({"cost": [1.0, 2.0, 4.0], "mass": [5.0, 3.0, 2.0], "t": [1, 2, 3]})
    return Front.from_table(
        table, [Objective("cost"), Objective("mass")], variables=["t"], info=info
    )


def test_every_field_survives_the_file(tmp_path):
    info = RunInfo(
        title="Bracket",
        description="An invented demo case.",
        cautions="Check it.",
        case_file="case.toml",
        case_hash="abc",
        algorithm="NSGA-II",
        status="budget",
        stop_reason="the evaluation budget was used up",
        message="Stopped.",
        reference_source="from the case",
        seed=7,
        settings={"evaluations": 600, "population": 30, "time_limit": None},
        versions={"tradewise": "0.1.0"},
        n_evals=600,
        n_gen=20,
        n_failed=1,
        n_cached=2,
        started=1.5,
        finished=9.25,
        hypervolume=3.0,
        design_space=(
            VariableSpec("t", "integer", 1, 3, (), "mm"),
            VariableSpec("grade", "choice", None, None, ("S235", "S355"), ""),
        ),
        descriptions={"t": "plate thickness"},
        constraint_limits=(LimitSpec("gap", 2.0, None, "mm"),),
        seeds=SeedSet(
            seeds=(1, 2),
            column="seed",
            hypervolumes=(1.0, 2.0),
            median=1.5,
            min=1.0,
            max=2.0,
            missing=(3,),
        ),  # fmt: skip
        shortlist={"method": "knee", "rows": [1]},
        store="archive.sqlite",
        run_id=4,
    )
    _front(info).to_csv(tmp_path / "front.csv")
    back = read_front(tmp_path)
    assert back.info.but(hypervolume=3.0) == info
    assert back.info.n_seeds == 2 and RunInfo().n_seeds == 1


def test_keys_of_a_later_release_are_kept_and_written_back(tmp_path):
    _front(RunInfo(title="T")).to_csv(tmp_path / "front.csv")
    meta = json.loads((tmp_path / "front.json").read_text())
    meta["cooling_hint"] = {"kept": True}
    (tmp_path / "front.json").write_text(json.dumps(meta))
    back = read_front(tmp_path)
    assert back.info.extra == {"cooling_hint": {"kept": True}}
    back.to_csv(tmp_path / "again.csv")
    assert json.loads((tmp_path / "again.json").read_text())["cooling_hint"] == {"kept": True}


def test_a_later_major_format_is_refused_by_name(tmp_path):
    _front(RunInfo()).to_csv(tmp_path / "front.csv")
    meta = json.loads((tmp_path / "front.json").read_text())
    assert meta["format"] == FRONT_FORMAT
    meta["format"] = "tradewise-front/2"
    (tmp_path / "front.json").write_text(json.dumps(meta))
    with pytest.raises(DataError, match="newer than this release reads"):
        read_front(tmp_path)


@pytest.mark.parametrize(
    ("key", "value", "named"),
    [
        ("seed", "seven", "'seed'"),
        ("settings", {"evaluations": 1.5}, "'settings.evaluations'"),
        ("design_space", [{"name": "t", "low": "a"}], "'design_space[0].low'"),
        ("constraint_limits", [{"name": 3}], "'constraint_limits[0].name'"),
        ("seeds", [1, "two"], "'seeds[1]'"),
        ("versions", {"tradewise": 1}, "'versions.tradewise'"),
        ("feasible", "no", "'feasible'"),
        ("shortlist", [1], "'shortlist'"),
    ],
)
def test_a_wrong_type_names_the_key(tmp_path, key, value, named):
    _front(RunInfo()).to_csv(tmp_path / "front.csv")
    meta = json.loads((tmp_path / "front.json").read_text())
    meta[key] = value
    (tmp_path / "front.json").write_text(json.dumps(meta))
    with pytest.raises(DataError, match=re.escape(f"front.json: key {named}")):
        read_front(tmp_path)


def test_the_fixture_folders_of_earlier_releases_read_as_typed_records():
    folders = [p.parent for p in FIXTURES.rglob("front.json")]
    assert folders
    for folder in folders:
        meta = json.loads((folder / "front.json").read_text())
        info = read_front(folder / "front.csv").info if (folder / "front.csv").exists() else None
        if info is None:
            continue
        assert info.title == meta.get("title")
        assert info.n_evals == meta.get("n_evals")
        assert [v.name for v in info.design_space] == [
            v["name"] for v in meta.get("design_space") or []
        ]
        if meta.get("seeds"):
            assert list(info.seeds.seeds) == meta["seeds"]
