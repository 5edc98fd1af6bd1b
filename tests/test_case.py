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
    (
        GOOD_TOML.replace("low = 0.0, high = 1.0", "low = 2.0, high = 1.0"),
        "[variables] x",
        "must be below",
    ),
    (
        GOOD_TOML.replace('type = "real", low = 0.0, high = 1.0', 'type = "choice", options = []'),
        "[variables] x",
        "non-empty list",
    ),
    (
        GOOD_TOML.replace(
            'type = "real", low = 0.0, high = 1.0', 'type = "choice", options = ["a", "a"]'
        ),
        "[variables] x",
        "'a' is repeated",
    ),
    (GOOD_TOML.replace('type = "real"', 'type = "reel"'), "[variables] x", "did you mean 'real'"),
    (
        GOOD_TOML.replace('unit = "EUR"', 'unit = "EUR", lo = 1'),
        "[objectives] cost",
        "unknown key 'lo'",
    ),
    (
        GOOD_TOML + "\n[constraints]\ncost = { max = 3 }\n",
        "[constraints] cost",
        "already used in [objectives]",
    ),
    (
        GOOD_TOML.replace('goal = "min", unit = "EUR"', 'goal = "minimise", unit = "EUR"'),
        "[objectives] cost",
        "allowed: min, max",
    ),
    (GOOD_TOML.replace('mass = { goal = "min", unit = "kg" }', ""), "[objectives]", "at least two"),
    (
        GOOD_TOML.replace("model.py:evaluate", "nomodel.py:evaluate"),
        "case.toml",
        "'nomodel.py' not found",
    ),
    (
        GOOD_TOML.replace("model.py:evaluate", "model.py:evaluat"),
        "case.toml",
        "did you mean 'evaluate'",
    ),
    (
        GOOD_TOML.replace('title = "tiny"', 'title = "tiny"\nbatch = "yes"'),
        "batch",
        "true or false",
    ),
    (
        GOOD_TOML.replace('title = "tiny"', 'title = "tiny"\nbatch = true\ntimeout = 5'),
        "batch",
        "without 'timeout'",
    ),
    (GOOD_TOML + "\n[search]\npopulation = 2\n", "[search] population", "at least 4"),
    (GOOD_TOML + "\n[search]\nrepresentatives = 0\n", "[search] representatives", "at least 1"),
    (
        GOOD_TOML + "\n[search]\nrepresentatives = 2.5\n",
        "[search] representatives",
        "expected an integer",
    ),
    (GOOD_TOML.replace("x = {", "status = {"), "[variables] status", "reserved"),
    (
        GOOD_TOML + "\n[constraints]\ngap = { unit = 'mm' }\n",
        "[constraints] gap",
        "needs 'min', 'max'",
    ),
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


def test_representatives_setting_reads_and_overrides(make_case):
    """[search] representatives sets the size of the representative set (default 20); overrides are checked."""
    assert load_case(CASES / "zdt1").search.representatives == 20
    case = load_case(make_case(GOOD_TOML + "\n[search]\nrepresentatives = 7\n"))
    assert case.search.representatives == 7 and case.search.as_dict()["representatives"] == 7
    assert case.with_search(representatives=3).search.representatives == 3
    with pytest.raises(CaseError, match=r"\[search\] representatives: got 0, allowed: at least 1"):
        case.with_search(representatives=0)


# ------------------------------------------------------------- ranges and model files
@pytest.mark.parametrize("low, high", [("-1.7e308", "1.7e308"), ("-1e308", "1e308")])
def test_range_too_wide_for_a_float_is_refused(make_case, low, high):
    """Bounds whose span overflows a float (high - low is inf) are refused at load, naming the variable."""
    toml = GOOD_TOML.replace(
        'x = { type = "real", low = 0.0, high = 1.0 }',
        f'x = {{ type = "real", low = {low}, high = {high} }}',
    )
    with pytest.raises(CaseError, match=r"\[variables\] x: the range .* too wide") as caught:
        load_case(make_case(toml=toml))
    assert "\n" not in str(caught.value)


def test_wide_but_finite_range_is_accepted(make_case):
    """A span of 1e308 is still a float, so the bounds load."""
    toml = GOOD_TOML.replace("low = 0.0, high = 1.0", "low = 0.0, high = 1e308")
    assert load_case(make_case(toml=toml)).variables[0].high == 1e308


@pytest.mark.parametrize(
    "model", ["../x.py:evaluate", "../../x.py:evaluate", "sub/../../x.py:evaluate"]
)
def test_model_outside_the_case_folder_is_refused(make_case, tmp_path, model):
    """A model path with '..' is refused even when the file exists there: the model lives in the case folder."""
    (tmp_path / "x.py").write_text("def evaluate(d):\n    return {}\n", encoding="utf-8")
    folder = make_case(toml=GOOD_TOML.replace('model = "model.py:evaluate"', f'model = "{model}"'))
    with pytest.raises(CaseError, match="must be a path inside the case folder"):
        load_case(folder)


def test_absolute_model_path_is_refused(make_case, tmp_path):
    """An absolute model path is refused even though the file exists."""
    other = tmp_path / "elsewhere.py"
    other.write_text("def evaluate(d):\n    return {}\n", encoding="utf-8")
    folder = make_case(
        toml=GOOD_TOML.replace(
            'model = "model.py:evaluate"', f'model = "{other.as_posix()}:evaluate"'
        )
    )
    with pytest.raises(CaseError, match="must be a path inside the case folder"):
        load_case(folder)


def test_model_through_a_link_out_of_the_folder_is_refused(make_case, tmp_path):
    """A subfolder that is a symlink to somewhere else does not let the model escape the case folder."""
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "model.py").write_text("def evaluate(d):\n    return {}\n", encoding="utf-8")
    folder = make_case(
        toml=GOOD_TOML.replace('model = "model.py:evaluate"', 'model = "lib/model.py:evaluate"')
    )
    (folder / "lib").symlink_to(outside, target_is_directory=True)
    with pytest.raises(CaseError, match="leads outside the case folder"):
        load_case(folder)


def test_model_in_a_subfolder_is_used(make_case):
    """A model in a subfolder of the case folder loads and answers (the rule allows subfolders)."""
    from tradewise.models import make_model

    folder = make_case(
        toml=GOOD_TOML.replace('model = "model.py:evaluate"', 'model = "lib/model.py:evaluate"')
    )
    (folder / "lib").mkdir()
    (folder / "model.py").rename(folder / "lib" / "model.py")
    case = load_case(folder)
    outcome = make_model(case)({"x": 0.5})
    assert outcome.ok and outcome.results["cost"] == 0.5


def test_missing_model_message_names_the_case_folder(make_case):
    """A missing model file is reported as not found in the case folder."""
    folder = make_case(
        toml=GOOD_TOML.replace('model = "model.py:evaluate"', 'model = "nothere.py:evaluate"')
    )
    with pytest.raises(CaseError, match=r"model file 'nothere.py' not found in the case folder"):
        load_case(folder)


def test_case_file_not_utf8_names_the_line(make_case):
    """A byte that is not UTF-8 on line 2 of case.toml is reported at line 2 with the byte."""
    folder = make_case()
    (folder / "case.toml").write_bytes(b'title = "t"\n# caf\xe9\n')
    with pytest.raises(CaseError, match=r"case\.toml: line 2 holds the byte 0xe9"):
        load_case(folder)


@pytest.mark.parametrize(
    ("field", "written", "meant"),
    [
        ("type", "float", "real"),
        ("type", "int", "integer"),
        ("type", "boolean", "flag"),
        ("type", "enum", "choice"),
        ("goal", "minimise", "min"),
        ("goal", "Maximize", "max"),
        ("type", "Real", "real"),
    ],
)
def test_words_an_engineer_writes_get_the_right_suggestion(make_case, field, written, meant):
    """`type = "float"` suggests real (not flag, which is merely spelt alike), `goal = "minimise"` min."""
    from tradewise.errors import CaseError

    toml = GOOD_TOML.replace(
        f'{field} = "{"real" if field == "type" else "min"}"', f'{field} = "{written}"', 1
    )
    with pytest.raises(CaseError, match=rf"did you mean '{meant}'\?"):
        load_case(make_case(toml))


def test_hazards_are_checked_against_the_list(make_case):
    """hazards must be a list of the known words; a near miss gets a suggestion."""
    case = load_case(make_case(GOOD_TOML.replace("model =", 'hazards = ["heat"]\nmodel =')))
    assert case.hazards == ("heat",)
    with pytest.raises(
        CaseError, match=r"'structure' is not one of them \(did you mean 'structures'\?\)"
    ):
        load_case(make_case(GOOD_TOML.replace("model =", 'hazards = ["structure"]\nmodel =')))
    with pytest.raises(CaseError, match="hazards must be a list"):
        load_case(make_case(GOOD_TOML.replace("model =", 'hazards = "heat"\nmodel =')))
