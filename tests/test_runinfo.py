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


def test_times_are_written_as_iso_8601_in_utc(tmp_path):
    """started and finished go to front.json as ISO 8601 text in UTC with its offset, to the millisecond."""
    # 2026-01-01T12:00:00Z counted by hand: 56 years of 365 days and 14 leap days (1972 to 2024)
    # after 1970-01-01 are 20,454 days, times 86,400 s, plus 12 hours.
    noon = (56 * 365 + 14) * 86_400 + 12 * 3600
    assert noon == 1767268800
    _front(RunInfo(started=noon, finished=noon + 61.5)).to_csv(tmp_path / "front.csv")
    meta = json.loads((tmp_path / "front.json").read_text())
    assert meta["started"] == "2026-01-01T12:00:00.000+00:00"
    assert meta["finished"] == "2026-01-01T12:01:01.500+00:00"
    back = read_front(tmp_path).info
    assert (back.started, back.finished) == (noon, noon + 61.5)


def test_times_with_another_offset_or_as_seconds_are_read(tmp_path):
    """A time with another UTC offset is the same moment; seconds since the epoch (earlier releases) still read."""
    _front(RunInfo()).to_csv(tmp_path / "front.csv")
    meta = json.loads((tmp_path / "front.json").read_text())
    meta["started"] = "2026-01-01T13:00:00+01:00"  # one hour east of UTC: noon UTC
    meta["finished"] = 1767268860.0
    (tmp_path / "front.json").write_text(json.dumps(meta))
    info = read_front(tmp_path).info
    assert (info.started, info.finished) == (1767268800.0, 1767268860.0)
    for folder in sorted(p.parent for p in FIXTURES.glob("*/front.json")):
        assert isinstance(json.loads((folder / "front.json").read_text())["started"], float)
        assert read_front(folder).info.started == 1767268800.0  # as the fixture script set it


@pytest.mark.parametrize("value", ["2026-01-01T12:00:00", "noon", True])
def test_a_time_without_offset_or_not_a_time_is_refused(tmp_path, value):
    """A time without a UTC offset is ambiguous, so it is refused by key, like any wrong value."""
    _front(RunInfo()).to_csv(tmp_path / "front.csv")
    meta = json.loads((tmp_path / "front.json").read_text())
    meta["started"] = value
    (tmp_path / "front.json").write_text(json.dumps(meta))
    with pytest.raises(
        DataError, match=r"key 'started' must be an ISO 8601 time with its UTC offset"
    ):
        read_front(tmp_path)
