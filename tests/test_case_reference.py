"""The case-file reference (docs/case-file.md) documents every key the loader accepts, and no more."""

from __future__ import annotations

import re
from pathlib import Path

from tradewise import case as case_module
from tradewise.case import HAZARDS, VARIABLE_TYPES, load_case

DOC = Path(__file__).parents[1] / "docs" / "case-file.md"

EXAMPLE_MODEL = """
def evaluate(design):
    index = design["coil"] / design["wire"]
    return {"mass": design["wire"] ** 2 * design["turns"], "rate": 1.0 / design["turns"],
            "index": index, "stress_use": 0.5, "deflection": 1.0}
"""


def _accepted() -> set[str]:
    keys = set(case_module._TOP_KEYS) | set(case_module._SEARCH_KEYS)
    for group in (
        case_module._OBJECTIVE_KEYS,
        case_module._CONSTRAINT_KEYS,
        case_module._OUTPUT_KEYS,
    ):
        keys |= set(group)
    for group in case_module._VARIABLE_KEYS.values():
        keys |= set(group)
    return keys


def test_every_key_the_loader_accepts_is_documented():
    """Each top-level, variable, objective, constraint, output and search key, each variable
    type and each hazard word appears in the reference."""
    text = DOC.read_text(encoding="utf-8")
    for key in sorted(_accepted()) + list(VARIABLE_TYPES) + list(HAZARDS):
        assert f"`{key}`" in text or f"`[{key}]`" in text, key


def test_every_key_the_reference_lists_is_accepted():
    """The first column of every key table names only keys the loader takes (a key that is
    documented but refused would send a reader into an error)."""
    text = DOC.read_text(encoding="utf-8")
    listed = set()
    for row in re.findall(r"^\| (`[^|]+`) \|", text, flags=re.M):
        listed |= set(re.findall(r"`([^`]+)`", row))
    assert listed and listed <= _accepted(), listed - _accepted()


def test_the_complete_example_loads(tmp_path):
    """The reference's complete example is a valid case (with a small model written here)."""
    text = DOC.read_text(encoding="utf-8")
    toml = re.search(r"```toml\n(.*?)```", text, flags=re.S).group(1)
    (tmp_path / "case.toml").write_text(toml, encoding="utf-8")
    (tmp_path / "model.py").write_text(EXAMPLE_MODEL, encoding="utf-8")
    case = load_case(tmp_path)
    assert [v.kind for v in case.variables] == ["discrete", "real", "integer", "choice", "flag"]
    assert case.hazards == ("stored energy",) and case.timeout == 5


def test_the_readme_and_check_errors_point_at_the_reference():
    """The README links the reference, so a user starting from it finds every key."""
    readme = (Path(__file__).parents[1] / "README.md").read_text(encoding="utf-8")
    assert "docs/case-file.md" in readme
