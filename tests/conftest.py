"""Shared fixtures: paths to the benchmark cases and a writer of small case folders."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from support import GOOD_MODEL, GOOD_TOML


@pytest.fixture
def make_case(tmp_path):
    """Write case.toml (and model.py) into a fresh folder and return the folder."""

    def write(toml: str = GOOD_TOML, model: str | None = GOOD_MODEL, name: str = "case") -> Path:
        folder = tmp_path / name
        folder.mkdir(parents=True, exist_ok=True)
        (folder / "case.toml").write_text(textwrap.dedent(toml), encoding="utf-8")
        if model is not None:
            (folder / "model.py").write_text(textwrap.dedent(model), encoding="utf-8")
        return folder

    return write
