"""The command line keeps its inputs safe: --out never replaces what a command reads or a run's data."""

from __future__ import annotations

import shutil

import pytest
from click.testing import CliRunner

from support import CASES
from tradewise.cli import main


def invoke(*args):
    result = CliRunner().invoke(main, [str(a) for a in args])
    if result.exception and not isinstance(result.exception, SystemExit):
        raise result.exception
    return result


def one_error_line(result) -> str:
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: "), result.output
    assert "Traceback" not in result.output
    return lines[0]


@pytest.fixture(scope="module")
def made_run(tmp_path_factory):
    """A small real run folder, made once; tests copy it before touching it."""
    folder = tmp_path_factory.mktemp("made") / "run"
    result = invoke(
        "run", CASES / "mixed", "--out", folder, "--evaluations", "100", "--seed", "2", "--quiet"
    )
    assert result.exit_code == 0, result.output
    return folder


@pytest.fixture
def run_folder(made_run, tmp_path):
    folder = tmp_path / "run"
    shutil.copytree(made_run, folder)
    return folder


# ------------------------------------------------------------- --out against inputs
def test_pick_out_onto_the_front_is_refused(run_folder):
    """`pick RUN --out RUN/front.csv` is refused with one line, and front.csv and front.json stay as they were."""
    before = {name: (run_folder / name).read_bytes() for name in ("front.csv", "front.json")}
    line = one_error_line(invoke("pick", run_folder, "--out", run_folder / "front.csv"))
    assert "front.csv" in line and "--out" in line
    assert {name: (run_folder / name).read_bytes() for name in before} == before


def test_front_out_onto_its_own_table_is_refused(tmp_path):
    """`front x.csv --out x.csv` is refused and x.csv is unchanged."""
    table = tmp_path / "x.csv"
    table.write_text("cost,mass\n1,3\n2,2\n3,3\n", encoding="utf-8")
    line = one_error_line(invoke("front", table, "--min", "cost", "--min", "mass", "--out", table))
    assert "x.csv" in line
    assert table.read_text(encoding="utf-8") == "cost,mass\n1,3\n2,2\n3,3\n"


def test_front_out_whose_json_is_the_input_is_refused(tmp_path):
    """The .json written beside --out counts too: `front x.json --out x.csv` would replace x.json."""
    table = tmp_path / "x.json"
    table.write_text("cost,mass\n1,3\n2,2\n", encoding="utf-8")
    line = one_error_line(
        invoke("front", table, "--min", "cost", "--min", "mass", "--out", tmp_path / "x.csv")
    )
    assert "x.json" in line


def test_out_through_a_symlink_to_an_input_is_refused(run_folder, tmp_path):
    """A symlink to front.json is the same file: report --out through it is refused."""
    link = tmp_path / "page.html"
    link.symlink_to(run_folder / "front.json")
    before = (run_folder / "front.json").read_bytes()
    one_error_line(invoke("report", run_folder, "--out", link))
    assert (run_folder / "front.json").read_bytes() == before


@pytest.mark.parametrize(
    "name", ["history.csv", "archive.sqlite", "front.json", "representatives.csv"]
)
def test_compare_out_onto_run_data_is_refused(run_folder, name):
    """compare --out onto any data file of a run folder is refused (also one it does not hold yet)."""
    target = run_folder / name
    before = target.read_bytes() if target.exists() else None
    line = one_error_line(invoke("compare", run_folder, "--out", target))
    assert name in line
    assert (target.read_bytes() if target.exists() else None) == before


def test_front_out_into_another_run_folder_is_refused(run_folder, tmp_path):
    """A table's front may not be written over another run's front.csv either."""
    table = tmp_path / "x.csv"
    table.write_text("cost,life\n1,3\n2,4\n", encoding="utf-8")
    one_error_line(
        invoke("front", table, "--min", "cost", "--max", "life", "--out", run_folder / "front.csv")
    )


def test_ordinary_outputs_are_still_written(run_folder, tmp_path):
    """Writing next to the inputs under other names works, and writing a front file twice over itself works."""
    assert invoke("pick", run_folder, "--out", run_folder / "shortlist.csv").exit_code == 0
    assert invoke("plot", run_folder, "--out", run_folder / "front.png").exit_code == 0
    assert invoke("plot", run_folder, "--out", run_folder / "front.png").exit_code == 0
    table = tmp_path / "x.csv"
    table.write_text("cost,mass\n1,3\n2,2\n3,3\n", encoding="utf-8")
    out = tmp_path / "made" / "front.csv"
    for _ in range(2):
        result = invoke("front", table, "--min", "cost", "--min", "mass", "--out", out)
        assert result.exit_code == 0, result.output


# ------------------------------------------------------------- one readable error line
def test_garbage_table_gives_one_short_line(tmp_path):
    """A file whose header is 5000 characters of garbage gives one line of readable length."""
    path = tmp_path / "garbage.csv"
    path.write_text("a" * 5000 + "\n1\n", encoding="utf-8")
    line = one_error_line(invoke("front", path, "--min", "cost", "--min", "mass"))
    assert "garbage.csv" in line and "no column 'cost'" in line
    assert len(line) <= 400 + len("Error: ") and "…" in line


def test_error_printer_makes_every_message_one_line(make_case):
    """A message with line breaks and a long quoted value still prints as one capped line."""
    from tradewise.errors import one_line

    text = one_line("bad\nthing: got '" + "x" * 500 + "'\r\n(end)")
    assert "\n" not in text and "\r" not in text
    assert text.startswith("bad thing: got 'xxx") and text.endswith("…' (end)")
    assert len(text) < 110
    folder = make_case(
        model="def evaluate(d):\n    raise ValueError('first\\nsecond' + 'y' * 300)\n"
    )
    result = CliRunner().invoke(main, ["check", str(folder)])
    assert result.exit_code == 2
    last = result.output.strip().splitlines()[-1]
    assert (
        last.startswith("Error: ") and "first second" in last and len(last) <= 400 + len("Error: ")
    )


# ------------------------------------------------------------- front.json of the wrong shape
def _spoil(folder, key, value):
    import json

    path = folder / "front.json"
    meta = json.loads(path.read_text(encoding="utf-8"))
    target = meta
    *parents, last = key
    for part in parents:
        target = target[part]
    target[last] = value
    path.write_text(json.dumps(meta), encoding="utf-8")


SPOILED = [
    (("objectives",), "cost,life", "'objectives'"),
    (("units",), ["EUR", "h"], "'units'"),
    (("reference_point",), {"cost": 1}, "'reference_point'"),
    (("reference_point",), ["13.6", "0.8"], "'reference_point'"),
    (("objectives", 0, "goal"), "least", "'objectives[0].goal'"),
    (("objectives", 1, "worst"), "12", "'objectives[1].worst'"),
    (("objectives", 0, "name"), 3, "'objectives[0].name'"),
    (("units", "cost"), 5, "'units.cost'"),
    (("settings", "evaluations"), "200", "'settings.evaluations'"),
    (("variables",), "width", "'variables'"),
    (("n_evals",), "200", "'n_evals'"),
    (("hypervolume",), "big", "'hypervolume'"),
    (("design_space", 0, "low"), "0.5", "'design_space[0].low'"),
    (("constraint_limits", 0, "min"), [1], "'constraint_limits[0].min'"),
    (("title",), {"a": 1}, "'title'"),
]


@pytest.mark.parametrize(
    ("key", "value", "named"), SPOILED, ids=[".".join(map(str, k)) for k, _, _ in SPOILED]
)
@pytest.mark.parametrize("command", ["plot", "report", "compare", "pick"])
def test_front_json_of_wrong_shape_is_one_line(run_folder, command, key, value, named):
    """A front.json with a wrongly typed value gives one Error line naming the file and the key, for each reader."""
    _spoil(run_folder, key, value)
    line = one_error_line(invoke(command, run_folder))
    assert "front.json" in line and named in line


# ------------------------------------------------------------- values near the float limit
def test_front_near_the_float_limit_reports_and_plots_without_a_crash(tmp_path):
    """A front whose values reach 1.7e308: the reference point is finite, report writes a page, plot says why not."""
    import json

    table = tmp_path / "huge.csv"
    rows = [(1.7e308 * (2 * x - 1), (1 - x) * 1.7e308) for x in (0.0, 0.25, 0.5, 0.75, 1.0)]
    table.write_text("cost,mass\n" + "".join(f"{a!r},{b!r}\n" for a, b in rows), encoding="utf-8")
    folder = tmp_path / "huge"
    made = invoke("front", table, "--min", "cost", "--max", "mass", "--out", folder / "front.csv")
    assert made.exit_code == 0, made.output
    reference = json.loads((folder / "front.json").read_text(encoding="utf-8"))["reference_point"]
    assert all(isinstance(r, float) for r in reference)
    page = invoke("report", folder)
    assert page.exit_code == 0, page.output
    assert (folder / "review.html").stat().st_size > 0
    line = one_error_line(invoke("plot", folder))
    assert "float limit" in line and "cost" in line


# ------------------------------------------------------------- an archive from another case
@pytest.mark.parametrize("command", ["plot", "report"])
def test_archive_of_another_case_is_refused(run_folder, make_case, tmp_path, command):
    """plot and report refuse a run folder whose archive holds another case, naming both cases."""
    other = tmp_path / "other"
    folder = make_case(name="tiny-case")
    made = invoke(
        "run", folder, "--out", other, "--evaluations", "40", "--population", "8", "--quiet"
    )
    assert made.exit_code == 0, made.output
    shutil.copy(other / "archive.sqlite", run_folder / "archive.sqlite")
    line = one_error_line(invoke(command, run_folder))
    assert "'tiny'" in line and "Mixed-variable" in line
