"""Shared fixtures: paths to the benchmark cases and a writer of small case folders."""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import tradewise
from support import GOOD_MODEL, GOOD_TOML
from tradewise.case import Objective
from tradewise.front import Front


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


@pytest.fixture(scope="module")
def run():
    """A short search on the bundled heat-sink case: a real three-objective front with variables."""

    return tradewise.run("heat-sink", evaluations=400, population=40, seed=2)


@pytest.fixture
def zdt1():
    """Points of the ZDT1 Pareto front f2 = 1 - sqrt(f1) (Zitzler, Deb and Thiele 2000), with units."""
    f1 = np.linspace(0.0, 1.0, 21)
    table = pd.DataFrame({"x": f1, "cost": f1 * 100.0, "mass": (1.0 - np.sqrt(f1)) * 10.0})
    return Front.from_table(
        table, [Objective("cost", unit="EUR"), Objective("mass", unit="kg")], variables=["x"]
    )
