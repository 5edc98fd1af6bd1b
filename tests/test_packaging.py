"""The wheel carries the bundled cases: an installed tradewise lists and runs them from anywhere."""

from __future__ import annotations

import os
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.mark.slow
def test_wheel_installs_and_runs_a_bundled_case(tmp_path):
    """Build the wheel, install it (without dependencies, which this environment has) into a folder of
    its own, and from outside the repository list the bundled cases and run one."""
    wheels = tmp_path / "wheels"
    built = subprocess.run([sys.executable, "-m", "pip", "wheel", str(ROOT), "--no-deps", "--no-build-isolation",
                            "-q", "-w", str(wheels)], capture_output=True, text=True, timeout=300)
    if built.returncode != 0 and "hatchling" in built.stderr:
        built = subprocess.run([sys.executable, "-m", "pip", "wheel", str(ROOT), "--no-deps", "-q", "-w",
                                str(wheels)], capture_output=True, text=True, timeout=300)
    assert built.returncode == 0, built.stderr
    (wheel,) = wheels.glob("tradewise-*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    assert "tradewise/cases/heat-sink/case.toml" in names and "tradewise/cases/heat-sink/model.py" in names
    target = tmp_path / "site"
    done = subprocess.run([sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target", str(target),
                           str(wheel)], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    env = dict(os.environ, PYTHONPATH=str(target))
    where = subprocess.run([sys.executable, "-c", "import tradewise; print(tradewise.__file__)"], cwd=elsewhere,
                           env=env, capture_output=True, text=True)
    assert Path(where.stdout.strip()).is_relative_to(target), where.stdout + where.stderr
    listed = subprocess.run([sys.executable, "-m", "tradewise.cli", "cases"], cwd=elsewhere, env=env,
                            capture_output=True, text=True, timeout=120)
    assert listed.returncode == 0 and "heat-sink" in listed.stdout, listed.stderr
    ran = subprocess.run([sys.executable, "-m", "tradewise.cli", "run", "heat-sink", "--evaluations", "60",
                          "--out", "run", "--quiet"], cwd=elsewhere, env=env, capture_output=True, text=True,
                         timeout=300)
    assert ran.returncode == 0, ran.stderr
    assert (elsewhere / "run" / "front.csv").is_file()
