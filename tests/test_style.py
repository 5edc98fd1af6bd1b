"""The code passes the project's linter and is formatted as ruff formats it."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def _ruff(*args: str) -> subprocess.CompletedProcess:
    command = [shutil.which("ruff")] if shutil.which("ruff") else [sys.executable, "-m", "ruff"]
    return subprocess.run(
        [*command, *args, "src", "tests"], cwd=ROOT, capture_output=True, text=True
    )


@pytest.mark.parametrize("args", [("check",), ("format", "--check")], ids=["lint", "format"])
def test_ruff(args):
    """`ruff check` and `ruff format --check` find nothing (ruff comes with the test extras)."""
    done = _ruff(*args)
    assert done.returncode == 0, done.stdout + done.stderr
