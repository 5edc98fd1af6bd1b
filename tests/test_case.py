"""Case loading: the TOML schema and one clear line for every kind of mistake."""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from support import CASES, GOOD_TOML
from tradewise.case import load_case
from tradewise.cli import main
from tradewise.errors import CaseError


def test_loads_mixed_case():
    """Every variable kind, both goals and a constraint come through with their units."""
    case = load_case(CASES / "mixed")
    kinds = {v.name: v.kind for v in case.variables}
    assert kinds == {"width": "real", "count": "integer", "finish": "choice", "fast": "flag"}
    assert case.maximise == [False, True]
    assert case.units["width"] == "mm" and case.units["load"] == "kN"
    assert case.constraints[0].min == 1.0 and case.constraints[0].max is None
    assert case.search.population == 20 and case.search.evaluations == 400
    assert len(case.hash) == 16


def test_folder_or_file_give_same_case():
    """A case folder and its case.toml load to the same case (same hash)."""
    assert load_case(CASES / "zdt1").hash == load_case(CASES / "zdt1" / "case.toml").hash


def test_hash_follows_the_model(make_case):
    """Changing the model file changes the case hash, so the archive never mixes model versions."""
    folder = make_case()
    before = load_case(folder).hash
    (folder / "model.py").write_text("def evaluate(d):\n    return {'cost': 1.0, 'mass': 2.0}\n")
    assert load_case(folder).hash != before


BAD = [
    ("title = 'x'\n[variables\n", "TOML syntax error", "line 2"),
    (GOOD_TOML + "\n[serch]\npopulation = 3\n", "unknown key 'serch'", "did you mean 'search'"),
    (GOOD_TOML.replace("low = 0.0, high = 1.0", "low = 2.0, high = 1.0"), "[variables] x", "must be below"),
    (GOOD_TOML.replace('type = "real", low = 0.0, high = 1.0', 'type = "choice", options = []'),
     "[variables] x", "non-empty list"),
    (GOOD_TOML.replace('type = "real", low = 0.0, high = 1.0', 'type = "choice", options = ["a", "a"]'),
     "[variables] x", "'a' is repeated"),
    (GOOD_TOML.replace('type = "real"', 'type = "reel"'), "[variables] x", "did you mean 'real'"),
    (GOOD_TOML.replace('unit = "EUR"', 'unit = "EUR", lo = 1'), "[objectives] cost", "unknown key 'lo'"),
    (GOOD_TOML + "\n[constraints]\ncost = { max = 3 }\n", "[constraints] cost", "already used in [objectives]"),
    (GOOD_TOML.replace('goal = "min", unit = "EUR"', 'goal = "minimise", unit = "EUR"'),
     "[objectives] cost", "allowed: min, max"),
    (GOOD_TOML.replace('mass = { goal = "min", unit = "kg" }', ""), "[objectives]", "at least two"),
    (GOOD_TOML.replace("model.py:evaluate", "nomodel.py:evaluate"), "case.toml", "'nomodel.py' not found"),
    (GOOD_TOML.replace("model.py:evaluate", "model.py:evaluat"), "case.toml", "did you mean 'evaluate'"),
    (GOOD_TOML + "\n[search]\npopulation = 2\n", "[search] population", "at least 4"),
    (GOOD_TOML.replace("x = {", "status = {"), "[variables] status", "reserved"),
    (GOOD_TOML + "\n[constraints]\ngap = { unit = 'mm' }\n", "[constraints] gap", "needs 'min', 'max'"),
]


@pytest.mark.parametrize(("toml", "where", "what"), BAD)
def test_bad_case_one_line(make_case, toml, where, what):
    """Each kind of mistake raises CaseError with one line naming the file, the table/key and the fault."""
    folder = make_case(toml)
    with pytest.raises(CaseError) as info:
        load_case(folder)
    message = str(info.value)
    assert "\n" not in message
    assert "case.toml" in message and where in message and what in message


@pytest.mark.parametrize(("toml", "where", "what"), BAD)
def test_bad_case_exit_2_without_traceback(make_case, toml, where, what):
    """The command line prints one Error line and exits with status 2, no traceback."""
    folder = make_case(toml)
    result = CliRunner().invoke(main, ["check", str(folder)])
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: ") and what in lines[0]
    assert "Traceback" not in result.output


def test_missing_case_folder_names_it(tmp_path):
    """An unknown case name is an error naming it, not a traceback."""
    result = CliRunner().invoke(main, ["run", str(tmp_path / "nope")])
    assert result.exit_code == 2 and "nope" in result.output and "Traceback" not in result.output


def test_with_search_overrides_and_checks():
    """Command-line overrides replace case settings and are checked like them."""
    case = load_case(CASES / "zdt1").with_search(population=8, seed=None)
    assert case.search.population == 8 and case.search.seed == 1
    with pytest.raises(CaseError, match="population"):
        case.with_search(population=1)
