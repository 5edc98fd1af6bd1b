"""Tests of the `front` and `pick` commands through click's CliRunner."""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from tradewise.cli import main
from tradewise.front import read_front

# EX3 of the reference notes with two invented variables and one dominated row (16, 70).
DESIGNS = (
    "id,fins,alloy,cost [k$],mass [kg]\n"
    "1,4,a,10,100\n"
    "2,6,b,12,60\n"
    "3,8,a,15,40\n"
    "4,10,b,20,30\n"
    "5,12,a,30,25\n"
    "6,9,b,16,70\n"
)


@pytest.fixture
def table(tmp_path):
    path = tmp_path / "designs.csv"
    path.write_text(DESIGNS, encoding="utf-8")
    return path


def run(*args):
    result = CliRunner().invoke(main, [str(a) for a in args])
    if result.exception and not isinstance(result.exception, SystemExit):
        raise result.exception
    return result


# ----------------------------------------------------------------- front
def test_front_prints_the_nondominated_rows(table):
    """Without --out the front goes to standard output as CSV with units in the headers."""
    result = run("front", table, "--min", "cost", "--min", "mass")
    assert result.exit_code == 0
    printed = pd.read_csv(io.StringIO(result.stdout))
    assert list(printed.columns) == ["data_row", "id", "fins", "alloy", "cost [k$]", "mass [kg]"]
    assert printed["id"].tolist() == [1, 2, 3, 4, 5]
    assert printed["data_row"].tolist() == [1, 2, 3, 4, 5]  # the rows of DESIGNS, counted by hand
    assert "5 of 6 rows are on the front" in result.stderr


def test_front_writes_csv_and_metadata(table, tmp_path):
    """--out writes a CSV and its JSON that read_front takes back, --keep drops other columns."""
    out = tmp_path / "out" / "front.csv"
    result = run(
        "front", table, "--min", "cost [k$]", "--max", "fins", "--keep", "id", "--out", out
    )
    assert result.exit_code == 0
    meta = json.loads(out.with_suffix(".json").read_text(encoding="utf-8"))
    assert [o["goal"] for o in meta["objectives"]] == ["min", "max"]
    front = read_front(out)
    assert list(front.table.columns) == ["data_row", "cost", "fins", "id"]
    # With fins maximised: (10, 4), (12, 6), (15, 8), (16, 9), (20, 10), (30, 12) all trade off.
    assert len(front) == 6


def test_front_agrees_with_a_plain_moocore_filter(tmp_path):
    """On random rows with mixed senses the command keeps exactly the rows moocore keeps."""
    import moocore

    rng = np.random.default_rng(7)
    data = pd.DataFrame(rng.integers(0, 30, size=(500, 3)), columns=["a", "b", "c"])
    data["tag"] = np.arange(500)
    path = tmp_path / "random.csv"
    data.to_csv(path, index=False)
    result = run(
        "front", path, "--min", "a", "--max", "b", "--min", "c", "--out", tmp_path / "f.csv"
    )
    assert result.exit_code == 0
    kept = pd.read_csv(tmp_path / "f.csv")
    mask = moocore.is_nondominated(data[["a", "c", "b"]].to_numpy(), maximise=[False, False, True])
    assert sorted(kept["tag"]) == sorted(data.loc[mask, "tag"])


@pytest.mark.parametrize(
    ("text", "args", "needle"),
    [
        (DESIGNS, ["--min", "cost", "--min", "weight"], "no column 'weight'"),
        (
            DESIGNS.replace("3,8,a,15,40", "3,8,a,15,heavy"),
            ["--min", "cost", "--min", "mass"],
            "line 4 (data row 3) column 'mass': expected a finite number, got 'heavy'",
        ),
        (
            DESIGNS.replace("3,8,a,15,40", "3,8,a,15,"),
            ["--min", "cost", "--min", "mass"],
            "line 4 (data row 3) column 'mass': expected a finite number, got an empty cell",
        ),
        (DESIGNS, ["--min", "cost"], "at least two objectives"),
        (DESIGNS, ["--min", "cost", "--max", "cost"], "given as an objective twice"),
        ("id,cost,mass\n", ["--min", "cost", "--min", "mass"], "no rows"),
        ("", ["--min", "cost", "--min", "mass"], "the file is empty"),
        ("a,b\n1,2\n3,4,5,6\n", ["--min", "a", "--min", "b"], "cannot be read as CSV"),
        (DESIGNS, ["--min", "cost", "--min", "mass", "--keep", "colour"], "no column 'colour'"),
    ],
    ids=[
        "missing-column",
        "text-value",
        "empty-cell",
        "one-objective",
        "twice",
        "no-rows",
        "empty-file",
        "ragged",
        "keep-unknown",
    ],
)
def test_front_bad_tables_exit_2_with_one_line(tmp_path, text, args, needle):
    """Each kind of bad table gives exit status 2 and a single Error line naming the problem."""
    path = tmp_path / "bad.csv"
    path.write_text(text, encoding="utf-8")
    result = run("front", path, *args)
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1, result.output
    assert lines[0].startswith("Error: ") and needle in lines[0]


def test_front_missing_file_exits_2(tmp_path):
    """A table that does not exist is one Error line and exit status 2."""
    result = run("front", tmp_path / "nothing.csv", "--min", "a", "--min", "b")
    assert result.exit_code == 2
    assert result.output.strip().count("\n") == 0 and "no such table file" in result.output


# ----------------------------------------------------------------- pick
@pytest.fixture
def front_folder(table, tmp_path):
    folder = tmp_path / "run"
    result = run("front", table, "--min", "cost", "--min", "mass", "--out", folder / "front.csv")
    assert result.exit_code == 0
    return folder


def test_pick_shows_the_knee_with_everything(front_folder):
    """pick prints the knee (15 k$, 40 kg) with its columns, ranks, rates and agreeing methods."""
    result = run("pick", front_folder)
    assert result.exit_code == 0
    out = result.stdout
    assert "Choice 1: data row 3" in out  # (15, 40) is the third data row of DESIGNS
    assert "cost  15 k$" in out and "rank 3 of 5" in out
    assert "other columns: id = 3, fins = 8, alloy = a" in out
    assert "to data row 4: 5 k$ more cost per 10 kg less mass" in out
    assert "hypervolume contribution" in out
    assert "Knee methods: knee, trade-off, kneedle all point at data row 3." in out


def test_pick_plain_csv_with_limits_weights_and_shortlist(table, tmp_path):
    """A plain CSV with --min/--max works; limits, weights and --top shape a shortlist file."""
    out = tmp_path / "short.csv"
    result = run(
        "pick",
        table,
        "--min",
        "cost",
        "--min",
        "mass",
        "--method",
        "asf",
        "--weights",
        "cost=4,mass=1",
        "--limit",
        "mass<=60",
        "--top",
        "2",
        "--out",
        out,
    )
    assert result.exit_code == 0, result.output
    assert "4 of them meet the limits mass <= 60" in result.stdout
    shortlist = read_front(out)
    # Left: (12, 60), (15, 40), (20, 30), (30, 25); normalised cost (c - 12)/18, mass
    # (m - 25)/35; ASF weights 0.8/0.2: (12,60) -> max(0, 0.2) = 0.2, (15,40) ->
    # max(0.133, 0.086) = 0.133, (20,30) -> max(0.356, 0.029) = 0.356: 15 k$ then 12 k$.
    assert shortlist.table["cost"].tolist() == [15, 12]
    assert shortlist.table["pick_order"].tolist() == [1, 2]
    assert shortlist.info.shortlist["method"] == "asf"


def test_pick_weighted_sum_notes_unreachable_designs(tmp_path):
    """weighted-sum adds a Note line when the front has designs no weights can reach."""
    path = tmp_path / "dent.csv"
    path.write_text("cost,mass\n0,1\n0.5,0.6\n1,0\n", encoding="utf-8")
    result = run("pick", path, "--min", "cost", "--min", "mass", "--method", "weighted-sum")
    assert result.exit_code == 0
    assert "Note: weighted sum: 1 of 3 designs" in result.stderr


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--method", "elbow"], "method 'elbow' is not known"),
        (["--limit", "mass <=> 3"], "limit 'mass <=> 3'"),
        (["--limit", "weight <= 3"], "no column 'weight'"),
        (["--limit", "mass <= 1"], "no design of 5 meets the limits mass <= 1"),
        (["--weights", "cost=2,volume=1", "--method", "asf"], "'volume' is not an objective"),
        (["--weights", "cost2"], "expected NAME=NUMBER"),
        (["--target", "cost=900"], "takes no target"),
        (["--top", "0"], "top: expected a whole number of at least 1"),
        (["--top", "2", "--tolerance", "weight=1"], "--tolerance: 'weight' is not an objective"),
        (["--tolerance", "mass=-1"], "--tolerance: got -1 for 'mass', allowed: 0 or more"),
    ],
)
def test_pick_bad_options_exit_2_with_one_line(front_folder, args, needle):
    """Bad methods, limits, weights and targets give exit status 2 and one Error line."""
    result = run("pick", front_folder, *args)
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1, result.output
    assert needle in lines[0]


def test_pick_plain_csv_without_objectives_says_how(table):
    """A CSV without metadata and without --min/--max gets a one-line hint."""
    result = run("pick", table)
    assert result.exit_code == 2
    assert "--min/--max" in result.output and result.output.strip().count("\n") == 0


def test_pick_says_plainly_when_a_front_has_no_knee(tmp_path):
    """DEB3DK with K = 2 (Branke, Deb, Dierolf, Osswald 2004; cosine coefficient 1) bulges away from the
    plane through its extremes: `front` then `pick` through the command line say it has no knee and offer
    the design closest to the ideal point, never presenting the corner (0, 0, 6.5) as the knee."""
    import numpy as np

    from test_choose import deb3dk

    points = deb3dk(2, n=41)
    table = tmp_path / "deb3dk.csv"
    pd.DataFrame(points, columns=["f1", "f2", "f3"]).to_csv(table, index=False)
    runner = CliRunner()
    made = runner.invoke(
        main,
        [
            "front",
            str(table),
            "--min",
            "f1",
            "--min",
            "f2",
            "--min",
            "f3",
            "--out",
            str(tmp_path / "front.csv"),
        ],
    )
    assert made.exit_code == 0, made.output
    picked = runner.invoke(main, ["pick", str(tmp_path / "front.csv"), "--method", "knee"])
    assert picked.exit_code == 0, picked.output
    assert "front has no knee" in picked.output
    # said before the first choice is shown, and the choice is the design the sentence offers
    assert picked.output.index("front has no knee") < picked.output.index("Choice 1")
    first = picked.output.split("Choice 1: data row ")[1].split()[0]
    assert f"data row {first}, the design closest to the ideal point" in picked.output
    # the design is named by its row in deb3dk.csv, whose data rows are the rows of points
    chosen = points[int(first) - 1]
    assert not np.allclose(np.sort(chosen), [0.0, 0.0, 6.5], atol=0.2)


# ----------------------------------------------------------------- distinct picks
@pytest.fixture
def dense(tmp_path):
    """2001 points of ZDT1 (Zitzler, Deb and Thiele 2000) as invented mass and stiffness: mass = 10 f1 kg,
    stiffness = 100 sqrt(f1) kN/mm (to maximise), so every design has neighbours a hair away."""
    f1 = np.linspace(0.0, 1.0, 2001)
    path = tmp_path / "dense.csv"
    pd.DataFrame({"mass [kg]": 10 * f1, "stiffness [kN/mm]": 100 * np.sqrt(f1)}).to_csv(
        path, index=False
    )
    return path


def shown_rows(output: str) -> list[int]:
    """The 0-based rows of the `Choice k: row R` lines of pick's output."""
    return [
        int(line.split("row ")[1]) - 1 for line in output.splitlines() if line.startswith("Choice")
    ]


def assert_apart(path, rows, gaps):
    """Every two of ``rows`` differ by more than ``gaps`` (mass, stiffness) in at least one objective."""
    points = pd.read_csv(path).to_numpy()[rows]
    for a in range(len(rows)):
        for b in range(a + 1, len(rows)):
            assert (np.abs(points[a] - points[b]) > gaps).any(), (rows[a], rows[b])


def test_pick_top_shows_designs_apart_by_the_default_share(dense):
    """pick --top 3 on a dense front shows three designs more than 5 % of a range apart, and says so once."""
    result = run("pick", dense, "--min", "mass", "--max", "stiffness", "--top", "3")
    assert result.exit_code == 0, result.output
    rows = shown_rows(result.stdout)
    assert len(rows) == 3 and rows[0] == 500  # the knee of ZDT1 at f1 = 1/4 stays first
    assert_apart(dense, rows, np.array([0.5, 5.0]))  # 5 % of 10 kg and of 100 kN/mm
    assert result.stdout.count("Separation:") == 1
    assert "mass 0.5 kg or stiffness 5 kN/mm; 5 % of an objective's range" in result.stdout


def test_pick_top_follows_tolerances_in_units(dense, tmp_path):
    """--tolerance mass=0.1,stiffness=1 spaces the designs shown by those amounts and goes into the shortlist."""
    out = tmp_path / "short.csv"
    result = run(
        *("pick", dense, "--min", "mass", "--max", "stiffness", "--top", "4"),
        *("--tolerance", "mass=0.1,stiffness=1", "--out", out),
    )
    assert result.exit_code == 0, result.output
    rows = shown_rows(result.stdout)
    assert len(rows) == 4
    assert_apart(dense, rows, np.array([0.1, 1.0]))
    # the tighter tolerance lets closer designs through than the default 0.5 kg / 5 kN/mm would
    masses = pd.read_csv(dense)["mass [kg]"].to_numpy()[rows]
    assert np.abs(masses[1:] - masses[0]).min() < 0.5
    assert "mass 0.1 kg (given) or stiffness 1 kN/mm (given)." in result.stdout
    assert read_front(out).info.shortlist["separation"] == {"mass": 0.1, "stiffness": 1.0}


def test_pick_single_choice_is_unchanged(dense):
    """Without --top the method's one pick is shown as before, with no separation line."""
    result = run("pick", dense, "--min", "mass", "--max", "stiffness", "--tolerance", "mass=3")
    assert result.exit_code == 0
    assert shown_rows(result.stdout) == [500] and "Separation" not in result.stdout


def test_pick_top_says_when_fewer_designs_are_apart(front_folder):
    """A tolerance wider than the front leaves one design, and the output says fewer were shown."""
    result = run("pick", front_folder, "--top", "3", "--tolerance", "cost=100,mass=100")
    assert result.exit_code == 0
    assert shown_rows(result.stdout) == [2]
    assert (
        "Only 1 design stands apart, fewer than the 3 asked for; smaller tolerances"
        in result.stdout
    )


def test_method_names_forgive_case_and_spelling(front_folder):
    """--method Knee works, tradeoff is read as trade-off, a near miss gets a suggestion, the
    methods are listed in --help, and a misspelt objective in --weights is named before the
    method's complaint that it takes no weights."""
    front = front_folder
    ok = CliRunner().invoke(main, ["pick", str(front), "--method", "Knee"])
    assert ok.exit_code == 0, ok.output
    alias = CliRunner().invoke(main, ["pick", str(front), "--method", "tradeoff"])
    assert alias.exit_code == 0 and "Method: trade-off" in alias.output
    bad = CliRunner().invoke(main, ["pick", str(front), "--method", "topsys"])
    assert bad.exit_code == 2 and "did you mean 'topsis'?" in bad.output
    helped = CliRunner().invoke(main, ["pick", "--help"])
    assert "knee|trade-off|kneedle|pseudo-weights|asf|topsis|weighted-sum" in helped.output
    typo = CliRunner().invoke(main, ["pick", str(front), "--weights", "cots=2,mass=1"])
    assert typo.exit_code == 2 and "'cots' is not an objective" in typo.output


# ----------------------------------------------------------------- one name for a design
# The five trade-off designs of DESIGNS with two dominated rows in between, so that the knee
# (15 k$, 40 kg) is the sixth data row of the file but the third design of the front.
SHUFFLED = (
    "part,cost [k$],mass [kg]\n"
    "P-1,10,100\n"
    "P-2,16,70\n"
    "P-3,12,60\n"
    "P-4,18,80\n"
    "P-5,20,30\n"
    "P-6,15,40\n"
    "P-7,30,25\n"
)


def test_a_design_of_a_users_csv_is_named_by_its_row_in_that_file(tmp_path):
    """pick names the knee of a plain CSV by its data row in the user's file (6), not its place on the
    filtered front (3), and the exported shortlist carries the same number in data_row."""
    # The knee by hand: normalised, the front is (0, 1), (0.1, 0.467), (0.25, 0.2), (0.5, 0.067),
    # (1, 0); 1 - (x + y), the bulge beyond the line through the ends, is largest (0.55) at (15, 40).
    path = tmp_path / "designs.csv"
    path.write_text(SHUFFLED, encoding="utf-8")
    out = tmp_path / "short.csv"
    result = run("pick", path, "--min", "cost", "--min", "mass", "--out", out)
    assert result.exit_code == 0, result.output
    assert "Choice 1: data row 6\n" in result.stdout
    assert "other columns: part = P-6" in result.stdout
    assert "to data row 5:" in result.stdout and "to data row 3:" in result.stdout
    assert "all point at data row 6." in result.stdout
    exported = pd.read_csv(out)
    assert exported["data_row"].tolist() == [6] and exported["part"].tolist() == ["P-6"]
    assert exported["front_row"].tolist() == [3]  # its place on the front, kept for read-back


def test_a_key_column_names_the_designs_everywhere(tmp_path):
    """With --id-column the designs are named by that column in pick's text, the front file and its JSON."""
    path = tmp_path / "designs.csv"
    path.write_text(SHUFFLED, encoding="utf-8")
    result = run("pick", path, "--min", "cost", "--min", "mass", "--id-column", "part")
    assert result.exit_code == 0, result.output
    assert "Choice 1: part P-6\n" in result.stdout and "data row" not in result.stdout
    made = run("front", path, "--min", "cost", "--min", "mass", "--id-column", "part", "--out",
               tmp_path / "f.csv")  # fmt: skip
    assert made.exit_code == 0, made.output
    assert "data_row" not in pd.read_csv(tmp_path / "f.csv").columns
    front = read_front(tmp_path / "f.csv")
    assert front.info.id_column == "part"
    assert front.design_ids() == ["P-1", "P-3", "P-6", "P-5", "P-7"]
    again = run("pick", tmp_path / "f.csv")
    assert "Choice 1: part P-6\n" in again.stdout


@pytest.mark.parametrize(
    ("rows", "needle"),
    [
        ("P-1,10,100\nP-1,12,60\n", "holds 'P-1' in data rows 1 and 2"),
        ("P-1,10,100\n,12,60\n", "data row 2 has no value in the key column 'part'"),
    ],
)
def test_a_key_column_must_name_each_design_once(tmp_path, rows, needle):
    """A key column with a repeated or empty value is refused on one line naming the data rows."""
    path = tmp_path / "designs.csv"
    path.write_text("part,cost,mass\n" + rows, encoding="utf-8")
    result = run("pick", path, "--min", "cost", "--min", "mass", "--id-column", "part")
    assert result.exit_code == 2 and needle in result.output, result.output
