"""The examples in the docstrings run and give what they show."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import tradewise

MODULES = sorted(
    info.name
    for info in pkgutil.walk_packages(tradewise.__path__, "tradewise.")
    if ".cases" not in info.name
)


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    """Every example of the module's docstrings passes (those marked +SKIP excepted)."""
    module = importlib.import_module(name)
    result = doctest.testmod(
        module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False
    )
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples in {name} failed"


def test_there_are_examples():
    """The public modules carry examples at all (38 ran when this test was written)."""
    attempted = 0
    for name in MODULES:
        finder = doctest.DocTestFinder()
        attempted += sum(len(t.examples) for t in finder.find(importlib.import_module(name)))
    assert attempted >= 34
