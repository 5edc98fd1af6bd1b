"""What pins a front, and what-if limits answered from the archive."""

from __future__ import annotations

import math
import shutil

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

import tradewise
from support import CASES
from tradewise.case import Objective
from tradewise.cli import main
from tradewise.diagnose import BOUND_SHARE, Finding, what_if, what_pins
from tradewise.errors import DataError
from tradewise.front import Front, front_from_csv
from tradewise.limits import Limit
from tradewise.runfolder import read_run
from tradewise.runinfo import LimitSpec, RunInfo, VariableSpec


# --------------------------------------------------------------------------- what pins a front
def test_zdt1_pareto_set_has_all_but_the_first_variable_at_its_lower_bound():
    """ZDT1 (Zitzler, Deb and Thiele 2000): its Pareto set is x1 in [0, 1], x2..x30 = 0, so
    x2..x30 sit at their lower bound on every design and x1 is at no bound on most of it."""
    n = 30
    x1 = np.linspace(0.0, 1.0, 41)
    table = pd.DataFrame({f"x{i}": x1 if i == 1 else np.zeros_like(x1) for i in range(1, n + 1)})
    table["f1"] = x1
    table["f2"] = 1.0 - np.sqrt(x1)  # g = 1 on the Pareto set
    space = tuple(VariableSpec(f"x{i}", "real", 0.0, 1.0) for i in range(1, n + 1))
    front = Front.from_table(
        table,
        [Objective("f1"), Objective("f2")],
        variables=[v.name for v in space],
        info=RunInfo(design_space=space),
    )
    assert len(front) == 41
    found = what_pins(front)
    bounds = {f.name: f for f in found if f.kind == "bound"}
    assert set(bounds) == {f"x{i}" for i in range(2, n + 1)}
    assert all(f.side == "low" and f.share == 1.0 and f.value == 0.0 for f in bounds.values())
    assert "x1" not in {f.name for f in found}
    # a variable at its bound everywhere is not reported a second time as a constant
    assert not [f for f in found if f.kind == "constant"]
    assert bounds["x2"].text.startswith("x2 sits at its lower bound 0 on every design of the front")


def test_tnk_front_lies_on_its_first_constraint():
    """TNK (Tanaka et al. 1995, as given by Deb 2001, from memory): the Pareto front lies on the
    boundary of c1 = x1^2 + x2^2 - 1 - 0.1 cos(16 atan(x1/x2)) >= 0, so c1 binds on every design;
    c2 = (x1 - 0.5)^2 + (x2 - 0.5)^2 <= 0.5 only cuts the two ends off."""
    theta = np.linspace(1e-4, math.pi / 2 - 1e-4, 4001)  # theta = atan(x1 / x2)
    radius = np.sqrt(1.0 + 0.1 * np.cos(16.0 * theta))
    x1, x2 = radius * np.sin(theta), radius * np.cos(theta)
    table = pd.DataFrame({"x1": x1, "x2": x2, "f1": x1, "f2": x2})
    table["c1"] = x1**2 + x2**2 - 1.0 - 0.1 * np.cos(16.0 * np.arctan(x1 / x2))
    table["c2"] = (x1 - 0.5) ** 2 + (x2 - 0.5) ** 2
    table = table[table["c2"] <= 0.5]
    info = RunInfo(
        design_space=(
            VariableSpec("x1", "real", 0.0, math.pi),
            VariableSpec("x2", "real", 0.0, math.pi),
        ),
        constraint_limits=(LimitSpec("c1", min=0.0), LimitSpec("c2", max=0.5)),
    )
    front = Front.from_table(
        table, [Objective("f1"), Objective("f2")], constraints=["c1", "c2"], info=info
    )
    found = what_pins(front)
    limits = [f for f in found if f.kind == "limit"]
    assert [(f.name, f.side, f.share) for f in limits] == [("c1", "min", 1.0)]
    assert found[0] == limits[0]  # the share first, and a binding limit before anything else
    assert "c1 is at its minimum 0 on every design of the front" in limits[0].text
    assert not [f for f in found if f.kind == "bound"]


@pytest.fixture(scope="module")
def constr_run(tmp_path_factory):
    """A short search of CONSTR (Deb 2001) saved as a run folder with its archive."""
    folder = tmp_path_factory.mktemp("constr") / "run"
    result = tradewise.run(
        CASES / "constr", evaluations=4000, seed=1, store=folder / "archive.sqlite"
    )
    tradewise.save_run(result, folder)
    return folder


def test_constr_front_is_pinned_by_g1_and_the_lower_bound_of_x2(constr_run):
    """CONSTR (Deb 2001, from memory; the split worked out in tests/cases/constr): on the Pareto
    set g1 = x2 + 9 x1 binds at 6 for x1 <= 2/3 and x2 sits at 0 beyond, so every design of a
    searched front shows one of the two, and the pins name both."""
    front, _, _ = read_run(constr_run)
    everything = what_pins(front, bound_share=0.0, limit_share=0.0)
    shares = {(f.kind, f.name, f.side): f.share for f in everything}
    g1, x2 = shares[("limit", "g1", "min")], shares[("bound", "x2", "low")]
    assert g1 + x2 >= 0.9  # a few designs are still converging
    reported = {(f.kind, f.name) for f in what_pins(front)}
    assert ("limit", "g1") in reported and g1 >= 0.2
    assert ("bound", "x2") in reported and x2 >= BOUND_SHARE
    assert ("limit", "g2") not in reported  # g2 binds nowhere on the Pareto set


def test_constants_of_a_mixed_front_and_their_words():
    """A choice, a flag and an integer with one value on every design are reported as constants
    (invented data); a real that barely moves is reported with its span."""
    table = pd.DataFrame(
        {
            "finish": ["painted"] * 4,
            "fast": [True] * 4,
            "count": [2, 2, 2, 2],
            "width": [1.50, 1.51, 1.52, 1.505],
            "cost": [1.0, 2.0, 3.0, 4.0],
            "life": [1.0, 2.0, 3.0, 4.0],
        }
    )
    space = (
        VariableSpec("finish", "choice", options=("bare", "painted")),
        VariableSpec("fast", "flag"),
        VariableSpec("count", "integer", -3, 7),
        VariableSpec("width", "real", 0.5, 4.0, unit="mm"),
    )
    front = Front.from_table(
        table,
        [Objective("cost", unit="EUR"), Objective("life", goal="max", unit="h")],
        info=RunInfo(design_space=space),
        units={"width": "mm"},
    )
    texts = {f.name: f.text for f in what_pins(front)}
    assert set(texts) == {"finish", "fast", "count", "width"}
    assert texts["finish"].startswith("finish is 'painted' on every design of the front")
    assert texts["fast"].startswith("fast is true on every design")
    assert texts["count"].startswith("count is 2 on every design")
    assert texts["width"].startswith("width stays between 1.5 and 1.52 mm on every design")


def test_findings_are_ordered_by_share_then_kind():
    """A larger share comes first; at the same share a limit comes before a bound and a constant."""
    found = [
        Finding("constant", "a", 1.0, ""),
        Finding("bound", "b", 0.6, ""),
        Finding("limit", "c", 1.0, ""),
        Finding("bound", "d", 1.0, ""),
    ]
    assert [f.name for f in sorted(found, key=lambda f: f.weight)] == ["c", "d", "a", "b"]


def test_a_plain_csv_front_reports_only_constants(tmp_path):
    """A front read from any CSV knows no bounds or limits: only columns with one value (invented data)."""
    path = tmp_path / "springs.csv"
    path.write_text(
        "id,material,coils,mass [g],rate [N/mm]\n"
        "1,music wire,3,10,4\n2,music wire,3,12,3\n3,music wire,3,14,2\n",
        encoding="utf-8",
    )
    front = front_from_csv(path, minimise=["mass", "rate"])
    found = what_pins(front)
    assert {f.kind for f in found} == {"constant"}
    assert {f.name for f in found} == {"material", "coils"}
    assert what_pins(front.with_table(front.table.iloc[0:0])) == []


# --------------------------------------------------------------------------- what-if limits
def test_the_case_own_limit_gives_back_the_run_front(constr_run):
    """Restating the case's limit changes nothing: the archive gives back the run's front exactly."""
    front, _, archive = read_run(constr_run)
    answer = what_if(archive, front, ["g1 >= 6"])
    assert set(answer.before.table["eval_id"]) == set(front.table["eval_id"])
    assert set(answer.front.table["eval_id"]) == set(front.table["eval_id"])
    assert answer.joined == answer.left == ()
    assert answer.newly_allowed == () and answer.n_tightened == 0


def test_relaxing_a_constraint_lets_designs_join(constr_run):
    """g1 >= 5 instead of 6: archived designs join and the best f1 improves, but no further than
    the relaxed problem allows (g1 >= 5 and g2 >= 1 give 18 x1 >= 6, so x1 >= 1/3, worked out
    from the case's formulas)."""
    front, _, archive = read_run(constr_run)
    answer = what_if(archive, front, ["g1>=5"])
    assert answer.joined
    assert answer.best_after["f1"] < answer.best_before["f1"]
    assert answer.best_after["f1"] >= 1 / 3 - 1e-12
    assert answer.best_before["f1"] >= 7 / 18 - 1e-12  # the case's own front: x1 >= 7/18
    assert answer.n_eligible_after > answer.n_eligible_before
    ((band, count),) = answer.newly_allowed
    assert band == "5 <= g1 < 6" and count > 0
    ids = set(answer.before.table["eval_id"]) - set(answer.left) | set(answer.joined)
    assert ids == set(answer.front.table["eval_id"])
    lines = answer.lines()
    assert lines[0] == "What if g1 >= 5 (the case has g1 >= 6: loosened)?"
    assert any(line.startswith("Caveat:") and "5 <= g1 < 6" in line for line in lines)
    assert any("tradewise run CASE" in line for line in lines)
    # the designs that join are named by eval_id, as pick and the page name them
    first = ", ".join(str(i) for i in answer.joined[:2])
    word = "design" if len(answer.joined) == 1 else "designs"
    assert any(f"join ({word} {first}" in line for line in lines), lines


def test_tightening_a_constraint_removes_designs(constr_run):
    """g1 >= 7 instead of 6: designs leave and the best f1 gets no better than the tightened
    problem allows (g1 >= 7 and g2 >= 1 give x1 >= 4/9, worked out from the case's formulas)."""
    front, _, archive = read_run(constr_run)
    answer = what_if(archive, front, [Limit("g1", ">=", 7.0)])
    assert answer.left
    assert answer.n_eligible_after < answer.n_eligible_before
    assert answer.best_after["f1"] >= max(answer.best_before["f1"], 4 / 9 - 1e-12)
    assert answer.newly_allowed == () and answer.n_tightened == 1
    assert (answer.front.table["g1"] >= 7).all()
    assert answer.front.info.constraint_limits[0] == LimitSpec("g1", min=7.0, max=None, unit="")


def test_a_limit_on_one_objective_does_not_improve_the_other(constr_run):
    """f1 <= 0.6 is added (f1 is no constraint): the best f2 can only get worse, as any filter of a
    front's designs leaves the others' bests no better."""
    front, _, archive = read_run(constr_run)
    answer = what_if(archive, front, ["f1 <= 0.6"])
    assert (answer.front.table["f1"] <= 0.6).all()
    assert answer.best_after["f2"] >= answer.best_before["f2"]
    assert answer.joined == ()  # nothing outside the old front can join under an added limit
    assert answer.rules == ("f1 <= 0.6 (added)",)


def test_what_if_front_matches_a_plain_numpy_filter(constr_run):
    """The what-if front is the set a plain pairwise dominance check finds in the hand-filtered
    archive (status ok, g1 >= 5, g2 >= 1, f2 <= 4)."""
    front, _, archive = read_run(constr_run)
    answer = what_if(archive, front, ["g1 >= 5", "f2 <= 4"])
    ok = archive[
        (archive["status"] == "ok")
        & (archive["g1"] >= 5)
        & (archive["g2"] >= 1)
        & (archive["f2"] <= 4)
    ]
    points = ok[["f1", "f2"]].to_numpy(dtype=float)
    no_worse = (points[None, :, :] <= points[:, None, :]).all(axis=2)
    better = (points[None, :, :] < points[:, None, :]).any(axis=2)
    dominated = (no_worse & better).any(axis=1)
    expected = np.unique(
        points[~dominated], axis=0
    )  # a design served from the archive is there twice
    found = answer.front.points()
    found = found[np.lexsort(found.T[::-1])]
    # designs that differ by rounding alone (1e-9 of the span) are one design to the front
    assert found.shape == expected.shape
    np.testing.assert_allclose(found, expected, rtol=1e-8)


def test_unknown_column_and_equality_on_a_constraint_are_data_errors(constr_run):
    """A limit on a column the archive lacks names it and lists the known ones; == on a case
    constraint, no limit at all and an empty archive are refused."""
    front, _, archive = read_run(constr_run)
    with pytest.raises(DataError, match=r"no column 'g3'.*known columns: x1, x2, f1, f2, g1, g2"):
        what_if(archive, front, ["g3 >= 1"])
    with pytest.raises(DataError, match="constraint of the case"):
        what_if(archive, front, ["g1 = 5"])
    with pytest.raises(DataError, match="no limit given"):
        what_if(archive, front, [])
    with pytest.raises(DataError, match="holds no evaluation"):
        what_if(archive.iloc[0:0], front, ["g1 >= 5"])


def test_whatif_command_prints_the_answer_and_writes_the_front(constr_run, tmp_path):
    """`tradewise whatif RUN --limit RULE --out FILE` exits 0, prints the lines and writes a front
    file that reads back with the new limit."""
    out = tmp_path / "loosened.csv"
    result = CliRunner().invoke(
        main, ["whatif", str(constr_run), "--limit", "g1>=5", "--out", str(out)]
    )
    assert result.exit_code == 0, result.output
    assert result.output.startswith("What if g1 >= 5 (the case has g1 >= 6: loosened)?\n")
    assert "Best f1:" in result.output and "Caveat:" in result.output
    written = tradewise.read_front(out)
    assert written.info.constraint_limits[0].min == 5.0
    front, _, archive = read_run(constr_run)
    assert set(written.table["eval_id"]) == set(
        what_if(archive, front, ["g1>=5"]).front.table["eval_id"]
    )


def test_whatif_on_a_set_of_seeds_judges_every_seed_s_evaluations(tmp_path):
    """`whatif` on a run folder of `run --seeds 2` (CONSTR, Deb 2001) answers from both seeds'
    archived evaluations: its front is what a plain dominance check finds in their union under the
    new limit, and each design keeps its evaluation number and the seed that found it."""
    folder = tmp_path / "set"
    ran = CliRunner().invoke(
        main,
        ["run", str(CASES / "constr"), "--seeds", "2", "--evaluations", "600", "--out", str(folder), "--quiet"],
    )  # fmt: skip
    assert ran.exit_code == 0, ran.output
    out = tmp_path / "loosened.csv"
    said = CliRunner().invoke(main, ["whatif", str(folder), "--limit", "g1>=5", "--out", str(out)])
    assert said.exit_code == 0, said.output
    assert said.output.startswith("What if g1 >= 5 (the case has g1 >= 6: loosened)?")
    assert "Of the 1,200 archived designs that evaluated" in said.output
    written = pd.read_csv(out)
    with tradewise.store.open_store(folder / "archive.sqlite", create=False) as archive:
        union = pd.concat([archive.evaluations(1), archive.evaluations(2)], ignore_index=True)
    ok = union[(union["status"] == "ok") & (union["g1"] >= 5) & (union["g2"] >= 1)]
    points = ok[["f1", "f2"]].to_numpy(dtype=float)
    no_worse = (points[None, :, :] <= points[:, None, :]).all(axis=2)
    better = (points[None, :, :] < points[:, None, :]).any(axis=2)
    expected = np.unique(points[~(no_worse & better).any(axis=1)], axis=0)  # a cached design twice
    found = written[["f1", "f2"]].to_numpy(dtype=float)
    found = found[np.lexsort(found.T[::-1])]
    assert found.shape == expected.shape
    np.testing.assert_allclose(found, expected, rtol=1e-8)
    assert set(written["seed"]) == {1, 2}
    by_run = union.set_index("eval_id")["run_id"]
    assert all(by_run[e] == s for e, s in zip(written["eval_id"], written["seed"], strict=True))


def test_whatif_command_needs_the_archive(constr_run, tmp_path):
    """A run folder without its archive gives exit status 2 and one Error: line saying it is needed."""
    folder = tmp_path / "no-archive"
    shutil.copytree(constr_run, folder, ignore=shutil.ignore_patterns("archive.sqlite*"))
    result = CliRunner().invoke(main, ["whatif", str(folder), "--limit", "g1>=5"])
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: ")
    assert "archive.sqlite" in lines[0]


def test_whatif_command_refuses_to_write_over_the_run_front(constr_run):
    """--out may not replace the run folder's own front.csv."""
    result = CliRunner().invoke(
        main,
        ["whatif", str(constr_run), "--limit", "g1>=5", "--out", str(constr_run / "front.csv")],
    )
    assert result.exit_code == 2
    assert "Error: --out:" in result.output


@pytest.mark.slow
def test_what_if_does_not_overstate_a_rerun_with_the_relaxed_limit(constr_run, tmp_path):
    """Every design the what-if front claims is truly feasible under g1 >= 5 with the values it
    claims (re-evaluated by the model), and the what-if front covers no more than a new search of
    the relaxed case finds (hypervolume, moocore, on one reference point)."""
    import importlib.util

    import moocore

    front, _, archive = read_run(constr_run)
    answer = what_if(archive, front, ["g1>=5"])
    spec = importlib.util.spec_from_file_location("constr_model", CASES / "constr" / "model.py")
    model = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(model)
    for record in answer.front.table.to_dict("records"):
        again = model.evaluate({"x1": record["x1"], "x2": record["x2"]})
        assert again["g1"] >= 5 - 1e-9 and again["g2"] >= 1 - 1e-9
        assert again["f1"] == pytest.approx(record["f1"]) and again["f2"] == pytest.approx(
            record["f2"]
        )
    relaxed = tmp_path / "relaxed"
    shutil.copytree(CASES / "constr", relaxed)
    toml = (relaxed / "case.toml").read_text().replace("g1 = { min = 6.0 }", "g1 = { min = 5.0 }")
    (relaxed / "case.toml").write_text(toml)
    rerun = tradewise.run(relaxed, evaluations=6000, seed=2)
    ref = np.array([1.1, 11.0])
    claimed = moocore.hypervolume(answer.front.points(), ref=ref)
    found = moocore.hypervolume(rerun.front.points(), ref=ref)
    assert claimed <= found * 1.001


def test_the_faces_say_what_pins_the_front(constr_run, tmp_path):
    """run's closing summary, pick's output and the review page all carry what pins the front; the
    page also answers what loosening the binding limit would give, from the archive."""
    result = CliRunner().invoke(
        main, ["run", str(CASES / "constr"), "--out", str(tmp_path / "run"), "--quiet"]
    )
    assert result.exit_code == 0, result.output
    assert "What pins the front:" in result.output and "g1 is at its minimum 6" in result.output
    result = CliRunner().invoke(main, ["pick", str(constr_run)])
    assert result.exit_code == 0, result.output
    assert "What pins the front:" in result.output and "g1 is at its minimum 6" in result.output
    out = tmp_path / "review.html"
    result = CliRunner().invoke(main, ["report", str(constr_run), "--out", str(out)])
    assert result.exit_code == 0, result.output
    page = out.read_text()
    section = page.split('<section id="binds">')[1].split("</section>")[0]
    assert "g1 is at its minimum 6" in section
    assert "What if g1 &gt;= " in section and "loosened" in section


def test_a_variable_whose_best_value_lies_beyond_its_range_is_reported_at_that_bound(make_case):
    """A case built so that every Pareto-optimal design wants y = -1.5 while y may only go down to
    0 (worked out by hand: f2 grows with (y + 1.5)^2 and nothing else depends on y): a real search
    ends with y at its lower bound on (nearly) the whole front, and what_pins says so first."""
    toml = """
    title = "beyond the range"
    model = "model.py:evaluate"
    [variables]
    x = { type = "real", low = 0.0, high = 1.0 }
    y = { type = "real", low = 0.0, high = 2.0, unit = "mm" }
    [objectives]
    f1 = { goal = "min" }
    f2 = { goal = "min" }
    """
    model = """
def evaluate(design):
    x, y = design["x"], design["y"]
    return {"f1": x, "f2": (1 - x) ** 2 + (y + 1.5) ** 2}
"""
    result = tradewise.run(make_case(toml, model), evaluations=1500, seed=3)
    found = what_pins(result.front)
    assert found[0].kind == "bound" and found[0].name == "y" and found[0].side == "low"
    assert found[0].share >= 0.9
    assert "x" not in {f.name for f in found}
