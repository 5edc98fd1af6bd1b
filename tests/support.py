"""Constants shared by the tests: benchmark case folders and a tiny valid case."""

from __future__ import annotations

from pathlib import Path

CASES = Path(__file__).parent / "cases"

GOOD_MODEL = """
def evaluate(design):
    x = design["x"]
    return {"cost": x, "mass": (1 - x) ** 2 + 0.1}
"""

GOOD_TOML = """
title = "tiny"
model = "model.py:evaluate"

[variables]
x = { type = "real", low = 0.0, high = 1.0 }

[objectives]
cost = { goal = "min", unit = "EUR" }
mass = { goal = "min", unit = "kg" }
"""
