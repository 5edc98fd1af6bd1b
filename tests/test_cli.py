"""The command line: run, check, cases and plot, through click's CliRunner."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
from click.testing import CliRunner
from PIL import Image

from support import CASES
from tradewise.cli import main


def test_run_writes_folder_and_summary(tmp_path):
    """`tradewise run` writes the run folder and ends with front size, hypervolume and each objective's range."""
    out = tmp_path / "run"
    result = CliRunner().invoke(
        main,
        [
            "run",
            str(CASES / "mixed"),
            "--out",
            str(out),
            "--evaluations",
            "200",
            "--seed",
            "3",
            "--quiet",
        ],
    )
    assert result.exit_code == 0, result.output
    for name in ("front.csv", "front.json", "history.csv", "archive.sqlite"):
        assert (out / name).exists()
    # the front's size and hypervolume share are said once, in the run's message
    assert "Front of " in result.output and "hypervolume share" in result.output
    assert "Front: " not in result.output
    assert "cost [EUR]  min  best" in result.output and "life [h]" in result.output
    meta = json.loads((out / "front.json").read_text())
    assert meta["seed"] == 3 and meta["settings"]["evaluations"] == 200
    front = pd.read_csv(out / "front.csv")
    assert len(front) == meta["n_designs"] > 0


def test_run_without_terminal_prints_plain_lines(tmp_path):
    """Without a terminal the progress is plain lines (no bar control characters)."""
    result = CliRunner().invoke(
        main, ["run", str(CASES / "mixed"), "--out", str(tmp_path / "r"), "--evaluations", "100"]
    )
    assert result.exit_code == 0
    assert "gen 1  evals" in result.output and "\r" not in result.output


def test_run_twice_into_same_store_uses_cache(tmp_path):
    """A second run of the same case and seed into the same archive evaluates nothing again."""
    args = [
        "run",
        str(CASES / "mixed"),
        "--out",
        str(tmp_path / "r"),
        "--evaluations",
        "150",
        "--quiet",
    ]
    assert CliRunner().invoke(main, args).exit_code == 0
    second = CliRunner().invoke(main, args)
    assert second.exit_code == 0
    assert "were reused instead of being evaluated again" in second.output


def test_check_evaluates_one_design():
    """`tradewise check` validates the case and shows one evaluated design."""
    result = CliRunner().invoke(main, ["check", str(CASES / "truss")])
    assert result.exit_code == 0, result.output
    out = result.output
    assert "volume = 0.03354 m3" in out and "is a valid case" in out
    # the case in plain words, and each constraint's limit with whether the middle design meets it
    assert "Objectives (2):" in out and "volume: as low as possible, in m3" in out
    assert "stress_check = 17,889 kPa  (must be at most 100,000 kPa: met)" in out


def test_check_shows_a_choice_variable_as_its_option():
    """`tradewise check` on a case with a choice variable prints the option's name beside the numbers."""
    result = CliRunner().invoke(main, ["check", "heat-sink"])
    assert result.exit_code == 0, result.output
    assert "  alloy = 1050A" in result.output and "is a valid case" in result.output


def test_check_reports_a_failing_model(make_case):
    """A model that fails on the middle design gives exit 2 and one Error line quoting it."""
    folder = make_case(model="def evaluate(d):\n    return {'cost': 1.0}\n")
    result = CliRunner().invoke(main, ["check", str(folder)])
    assert result.exit_code == 2
    assert result.output.strip().splitlines()[-1].startswith("Error: ")
    assert "no 'mass'" in result.output


def test_model_that_cannot_import_is_one_line(make_case, tmp_path):
    """A model file that raises on import gives exit 2 and names the file."""
    folder = make_case(model="import not_a_module_anywhere\ndef evaluate(d):\n    return {}\n")
    result = CliRunner().invoke(main, ["run", str(folder), "--out", str(tmp_path / "r"), "--quiet"])
    assert (
        result.exit_code == 2 and "model.py" in result.output and "Traceback" not in result.output
    )


def test_help_for_every_command():
    """Every command answers --help with exit 0."""
    runner = CliRunner()
    top = runner.invoke(main, ["--help"])
    assert top.exit_code == 0
    for name in main.commands:
        assert runner.invoke(main, [name, "--help"]).exit_code == 0, name


def test_debug_shows_traceback(make_case):
    """--debug lets a user error through with its traceback."""
    folder = make_case("title = 'x'\n[variables\n")
    result = CliRunner().invoke(main, ["--debug", "check", str(folder)])
    assert result.exit_code != 0 and result.exception is not None


def test_a_reused_out_folder_keeps_no_files_of_the_earlier_run(tmp_path):
    """A second run into the same --out folder removes the earlier run's page, figures and seed
    folders (drawn from another front) after writing its own files, keeps the archive and any
    file that is not the tool's, and says what it removed."""
    out = tmp_path / "run"
    first = CliRunner().invoke(
        main,
        [
            "run",
            str(CASES / "zdt1"),
            "--out",
            str(out),
            "--evaluations",
            "300",
            "--seeds",
            "2",
            "--quiet",
        ],
    )
    assert first.exit_code == 0, first.output
    assert CliRunner().invoke(main, ["report", str(out)]).exit_code == 0
    assert CliRunner().invoke(main, ["plot", str(out), "--kind", "front"]).exit_code == 0
    (out / "notes.txt").write_text("mine")
    second = CliRunner().invoke(
        main, ["run", str(CASES / "zdt1"), "--out", str(out), "--evaluations", "300", "--quiet"]
    )
    assert second.exit_code == 0, second.output
    assert not (out / "review.html").exists() and not (out / "front.png").exists()
    assert not (out / "seeds").exists() and not (out / "seeds.csv").exists()
    assert (out / "front.csv").is_file() and (out / "archive.sqlite").is_file()
    assert (out / "notes.txt").read_text() == "mine"
    assert "Removed " in second.output and "review.html" in second.output


def test_a_case_declaring_hazards_without_cautions_still_gets_the_reminder(make_case, tmp_path):
    """A run's closing summary carries the review page's reminder for a declared hazard, also when
    the case wrote no cautions of its own; a case declaring none gets no reminder (common practice:
    screening results of structures, packs and heat go to a licensed professional)."""
    from support import GOOD_TOML

    declared = make_case(
        GOOD_TOML.replace('title = "tiny"', 'title = "tiny"\nhazards = ["structures"]')
    )
    said = CliRunner().invoke(
        main, ["run", str(declared), "--evaluations", "40", "--out", str(tmp_path / "a"), "--quiet"]
    )
    assert said.exit_code == 0, said.output
    assert "This case touches structures" in said.output and "licensed professional" in said.output
    plain = make_case(GOOD_TOML, name="plain")
    said = CliRunner().invoke(
        main, ["run", str(plain), "--evaluations", "40", "--out", str(tmp_path / "b"), "--quiet"]
    )
    assert said.exit_code == 0 and "licensed" not in said.output, said.output


def test_resume_of_a_finished_run_says_it_has_nothing_to_do(tmp_path):
    """resume on a run that used its budget leaves the folder alone and says how to extend it."""
    out = tmp_path / "run"
    done = CliRunner().invoke(
        main, ["run", str(CASES / "zdt1"), "--out", str(out), "--evaluations", "200", "--quiet"]
    )
    assert done.exit_code == 0, done.output
    before = (out / "front.json").stat().st_mtime_ns
    again = CliRunner().invoke(main, ["resume", str(out / "archive.sqlite")])
    assert again.exit_code == 0, again.output
    assert "nothing to do" in again.output and "--evaluations N with N above 200" in again.output
    assert (out / "front.json").stat().st_mtime_ns == before
    # the run folder itself names the archive, as it does for plot, pick and whatif
    by_folder = CliRunner().invoke(main, ["resume", str(out)])
    assert by_folder.exit_code == 0 and "nothing to do" in by_folder.output, by_folder.output


def test_resume_of_a_folder_without_an_archive_names_the_folder(tmp_path):
    said = CliRunner().invoke(main, ["resume", str(tmp_path)])
    assert said.exit_code == 2
    assert said.output.strip().splitlines() == [
        f"Error: {tmp_path}: this folder holds no archive.sqlite; give the archive file the run "
        "wrote (run --store), or the run folder it was written into"
    ]


# ------------------------------------------------------------------------------ plot
FIXTURE_RUNS = Path(__file__).parent / "fixtures" / "runs"


def _copied(name: str, tmp_path) -> Path:
    """A fixture run folder copied out, so that figures written beside it leave the fixture alone."""
    folder = tmp_path / name
    shutil.copytree(FIXTURE_RUNS / name, folder)
    return folder


def _is_png(path: Path) -> bool:
    with Image.open(path) as image:
        return image.format == "PNG" and image.size[0] > 600


def test_plot_draws_a_front_csv_written_by_front_or_pick_or_named_by_min_max(tmp_path):
    """`plot FILE.csv` draws a front from `front --out`, a shortlist from `pick --out` and a plain CSV
    given --min/--max, beside the file as NAME-KIND.png; a plain CSV without them is one error line."""
    run = _copied("mixed", tmp_path)
    runner = CliRunner()
    made = runner.invoke(
        main, ["front", str(run / "front.csv"), "--min", "cost", "--max", "life",
               "--out", str(tmp_path / "plain.csv")],
    )  # fmt: skip
    assert made.exit_code == 0, made.output
    drawn = runner.invoke(main, ["plot", str(tmp_path / "plain.csv")])
    assert drawn.exit_code == 0, drawn.output
    assert _is_png(tmp_path / "plain-front.png")
    picked = runner.invoke(
        main, ["pick", str(run), "--top", "3", "--out", str(tmp_path / "short.csv")]
    )
    assert picked.exit_code == 0, picked.output
    drawn = runner.invoke(main, ["plot", str(tmp_path / "short.csv"), "--kind", "parallel"])
    assert drawn.exit_code == 0, drawn.output
    assert _is_png(tmp_path / "short-parallel.png")
    raw = tmp_path / "raw.csv"
    shutil.copy(run / "front.csv", raw)
    drawn = runner.invoke(main, ["plot", str(raw), "--min", "cost", "--max", "life"])
    assert drawn.exit_code == 0, drawn.output
    assert _is_png(tmp_path / "raw-front.png")
    refused = runner.invoke(main, ["plot", str(raw)])
    assert refused.exit_code == 2 and refused.output.count("\n") == 1
    assert refused.output.startswith("Error: ") and "raw.json" in refused.output
    missing = runner.invoke(main, ["plot", str(tmp_path / "gone.csv")])
    assert missing.exit_code == 2 and missing.output.count("\n") == 1
    assert "not a run folder or a front CSV" in missing.output


def test_plot_kind_all_draws_what_applies_and_skips_the_rest_with_one_line_each(tmp_path):
    """--kind all: a run of three seeds gets all four figures; three objectives skip attainment; a front
    CSV of two objectives without variables gets the front alone and one line for each other kind."""
    runner = CliRunner()
    seeds = _copied("mixed-seeds", tmp_path)
    result = runner.invoke(main, ["plot", str(seeds), "--kind", "all"])
    assert result.exit_code == 0, result.output
    assert "Skipped" not in result.output
    assert all(_is_png(seeds / f"{k}.png") for k in ("front", "parallel", "history", "attainment"))
    three = _copied("heat-sink", tmp_path)
    result = runner.invoke(
        main, ["plot", str(three), "--kind", "all", "--out", str(tmp_path / "f" / "hs.svg")]
    )
    assert result.exit_code == 0, result.output
    assert [
        line.split(":")[0] for line in result.output.splitlines() if line.startswith("Skipped")
    ] == ["Skipped attainment"]
    assert "two objectives, and this front has 3" in result.output
    assert sorted(p.name for p in (tmp_path / "f").iterdir()) == [
        "hs-front.svg", "hs-history.svg", "hs-parallel.svg"
    ]  # fmt: skip
    made = runner.invoke(
        main, ["front", str(seeds / "front.csv"), "--min", "cost", "--max", "life",
               "--out", str(tmp_path / "plain.csv")],
    )  # fmt: skip
    assert made.exit_code == 0, made.output
    result = runner.invoke(main, ["plot", str(tmp_path / "plain.csv"), "--kind", "all"])
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert lines[0] == f"Wrote {tmp_path / 'plain-front.png'}" and len(lines) == 4
    skipped = [line.split(":")[0] for line in lines[1:]]
    assert skipped == ["Skipped parallel", "Skipped history", "Skipped attainment"]
    assert "two objectives and nothing else" in lines[1] and "history.csv" in lines[2]
    assert not (tmp_path / "plain-parallel.png").exists()


def test_plot_parallel_of_two_objectives_alone_is_one_error_line(tmp_path):
    """Asked for parallel coordinates of two objectives with nothing else, plot draws nothing and says why."""
    table = tmp_path / "t.csv"
    table.write_text("cost,mass\n1,3\n2,2\n3,1\n", encoding="utf-8")
    result = CliRunner().invoke(
        main, ["plot", str(table), "--kind", "parallel", "--min", "cost", "--min", "mass"]
    )
    assert result.exit_code == 2 and result.output.count("\n") == 1, result.output
    assert "two objectives and nothing else are not drawn" in result.output
    assert not (tmp_path / "t-parallel.png").exists()


def test_the_command_line_starts_without_numpy_pandas_or_pymoo():
    """Importing the command line and printing --help or listing the cases loads neither numpy, pandas
    nor pymoo (they are imported by the commands that need them), which keeps start-up quick."""
    import subprocess
    import sys

    probe = (
        "import sys\n"
        "from click.testing import CliRunner\n"
        "from tradewise.cli import main\n"
        "assert CliRunner().invoke(main, ['--help']).exit_code == 0\n"
        "heavy = sorted(m for m in ('numpy', 'pandas', 'pymoo') if m in sys.modules)\n"
        "result = CliRunner().invoke(main, ['cases'])\n"
        "assert result.exit_code == 0 and 'heat-sink' in result.output, result.output\n"
        "heavy += sorted(m for m in ('pandas', 'pymoo') if m in sys.modules)\n"
        "print(heavy)\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", probe], capture_output=True, text=True, check=True
    ).stdout
    assert out.strip() == "[]"
