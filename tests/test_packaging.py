"""The wheel carries the bundled cases: an installed tradewise lists and runs them from anywhere."""

from __future__ import annotations

import importlib.util
import json
import os
import site
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def _call(args: list[str], **kwargs) -> subprocess.CompletedProcess:
    return subprocess.run(args, capture_output=True, text=True, timeout=300, **kwargs)


@pytest.mark.slow
def test_wheel_installs_into_a_fresh_venv_and_runs_a_bundled_case(tmp_path):
    """The wheel holds every file of cases/ inside the package; installed into a fresh venv, its
    `tradewise` command lists the cases and runs heat-sink from a folder outside the repository."""
    wheels = tmp_path / "wheels"
    isolation = [] if importlib.util.find_spec("hatchling") is None else ["--no-build-isolation"]
    built = _call(
        [sys.executable, "-m", "pip", "wheel", str(ROOT), "--no-deps", "-q", "-w", str(wheels)]
        + isolation
    )
    assert built.returncode == 0, built.stderr
    (wheel,) = wheels.glob("tradewise-*.whl")
    names = set(zipfile.ZipFile(wheel).namelist())
    shipped = {
        f"tradewise/{p.relative_to(ROOT).as_posix()}"
        for p in (ROOT / "cases").rglob("*")
        if p.is_file() and "__pycache__" not in p.parts
    }
    assert len(shipped) >= 12 and shipped <= names
    assert not any(n.endswith(".pyc") for n in names)

    # A fresh venv that sees this environment's packages (numpy, pymoo, ...) after its own, through
    # a .pth line: the .pth files of that folder (an editable tradewise) are not processed, so the
    # only tradewise the venv can import is the one installed from the wheel.
    venv = tmp_path / "venv"
    made = _call([sys.executable, "-m", "venv", str(venv)])
    assert made.returncode == 0, made.stderr
    python, command = venv / "bin" / "python", venv / "bin" / "tradewise"
    own = Path(
        _call([str(python), "-c", "import site; print(site.getsitepackages()[0])"]).stdout.strip()
    )
    (own / "outer_packages.pth").write_text("\n".join(site.getsitepackages()) + "\n")
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    done = _call([str(python), "-m", "pip", "install", "--no-deps", "-q", str(wheel)], env=env)
    assert done.returncode == 0, done.stderr

    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    where = _call(
        [
            str(python),
            "-c",
            "from tradewise.case import bundled_cases; print(bundled_cases()['heat-sink'])",
        ],
        cwd=elsewhere,
        env=env,
    )
    assert Path(where.stdout.strip()).is_relative_to(own / "tradewise" / "cases"), where.stderr
    listed = _call([str(command), "cases"], cwd=elsewhere, env=env)
    assert listed.returncode == 0, listed.stderr
    listed_names = [line.split()[0] for line in listed.stdout.splitlines() if line.strip()]
    assert listed_names == sorted(p.parent.name for p in (ROOT / "cases").glob("*/case.toml"))
    ran = _call(
        [str(command), "run", "heat-sink", "--evaluations", "60", "--out", "run", "--quiet"],
        cwd=elsewhere,
        env=env,
    )
    assert ran.returncode == 0, ran.stderr
    assert (elsewhere / "run" / "front.csv").is_file()
    meta = json.loads((elsewhere / "run" / "front.json").read_text(encoding="utf-8"))
    assert meta["n_evals"] == 60
