"""Fingerprints of every figure and page drawn from fixed run folders, to prove a restructuring changed none.

The run folders under ``tests/fixtures/runs/`` are kept as they were written
(they also stand for run folders of an earlier release, which must stay
readable). This script draws each figure kind as SVG and each review page
from them and prints one SHA-256 a file. Not collected by pytest.

    python tests/fingerprints.py                  # print the fingerprints as JSON
    python tests/fingerprints.py --check FILE     # compare with a saved set; exit 1 on any difference
    python tests/fingerprints.py --make-fixtures  # write the run folders anew (changes every fingerprint)
"""

from __future__ import annotations

import argparse
import datetime as dt
import hashlib
import io
import json
import shutil
import sqlite3
import sys
import textwrap
from pathlib import Path

HERE = Path(__file__).parent
RUNS = HERE / "fixtures" / "runs"
GENERATED = dt.datetime(2026, 1, 1, 12, 0, tzinfo=dt.UTC)

MANY_MODEL = """
import math

def evaluate(design):
    x = [design[f"x{i}"] for i in range(8)]
    g = sum((v - 0.5) ** 2 for v in x[3:])
    out = {}
    for i in range(4):
        f = 1.0 + g
        for v in x[: 3 - i]:
            f *= math.cos(v * math.pi / 2)
        if i > 0:
            f *= math.sin(x[3 - i] * math.pi / 2)
        out[f"f{i + 1}"] = f
    return out
"""


def make_fixtures() -> None:
    """Run the fixture cases (small budgets, fixed seeds) and keep their run folders, paths scrubbed."""
    import tempfile

    from tradewise.cli import main

    if RUNS.exists():
        shutil.rmtree(RUNS)
    RUNS.mkdir(parents=True)
    with tempfile.TemporaryDirectory() as tmp:
        many = Path(tmp) / "dtlz2-4"
        many.mkdir()
        variables = "\n".join(
            f'x{i} = {{ type = "real", low = 0.0, high = 1.0 }}' for i in range(8)
        )
        objectives = "\n".join(f'f{i + 1} = {{ goal = "min" }}' for i in range(4))
        (many / "case.toml").write_text(
            f'title = "DTLZ2 with four objectives (Deb et al. 2002)"\nmodel = "model.py:evaluate"\n\n'
            f"[variables]\n{variables}\n\n[objectives]\n{objectives}\n",
            encoding="utf-8",
        )
        (many / "model.py").write_text(textwrap.dedent(MANY_MODEL), encoding="utf-8")
        jobs = {
            "heat-sink": ["heat-sink", "--evaluations", "600", "--seed", "3"],
            "mixed": [str(HERE / "cases" / "mixed"), "--evaluations", "400", "--seed", "2"],
            "mixed-seeds": [
                str(HERE / "cases" / "mixed"),
                "--evaluations",
                "300",
                "--seeds",
                "3",
                "--seed",
                "5",
            ],
            "dtlz2-4": [str(many), "--evaluations", "480", "--seed", "1"],
        }
        for name, args in jobs.items():
            out = RUNS / name
            result = main.main(["run", *args, "--out", str(out), "--quiet"], standalone_mode=False)
            assert result in (None, 0), name
            for store in out.rglob("archive.sqlite"):
                db = sqlite3.connect(store, isolation_level=None)
                db.execute("UPDATE runs SET case_path = 'case.toml'")  # no path of the machine kept
                db.execute(
                    "UPDATE evaluations SET worker = 'fixture' WHERE worker <> ''"
                )  # nor its name
                db.execute("PRAGMA journal_mode=DELETE")
                db.execute("VACUUM")
                db.close()
                for extra in ("-wal", "-shm"):
                    store.with_name(store.name + extra).unlink(missing_ok=True)
            for png in out.rglob("*.png"):
                png.unlink()
            for meta in out.rglob("front.json"):
                data = json.loads(meta.read_text(encoding="utf-8"))
                data["started"], data["finished"] = 1767268800.0, 1767268860.0
                data["versions"] = {k: "fixture" for k in data.get("versions", {})}
                meta.write_text(json.dumps(data, indent=2) + "\n", encoding="utf-8")
            shortlist = out / "shortlist.csv"
            if name in ("heat-sink", "mixed-seeds"):
                main.main(
                    ["pick", str(out), "--top", "3", "--out", str(shortlist)], standalone_mode=False
                )


def _sha(data: str | bytes) -> str:
    return hashlib.sha256(data.encode("utf-8") if isinstance(data, str) else data).hexdigest()


def _svg(fig) -> str:
    import matplotlib
    import matplotlib.pyplot as plt

    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": "tradewise-fingerprint"}):
        fig.savefig(buffer, format="svg", metadata={"Date": None})
    plt.close(fig)
    return buffer.getvalue()


def fingerprints() -> dict[str, str]:
    """One SHA-256 a figure (SVG) and a page (HTML) drawn from the fixture run folders."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from tradewise.front import read_front
    from tradewise.plots import plot_attainment, plot_kind
    from tradewise.report import build_report
    from tradewise.runfolder import read_run, read_seeds

    prints: dict[str, str] = {}
    for folder in sorted(p for p in RUNS.iterdir() if p.is_dir()):
        name = folder.name
        front, history, evaluations = read_run(folder)
        seeds, surfaces = read_seeds(folder, front)
        for kind in ("front", "parallel", "history"):
            with matplotlib.rc_context({"svg.hashsalt": "tradewise-fingerprint"}):
                prints[f"{name}/{kind}.svg"] = _sha(
                    _svg(plot_kind(kind, front, history=history, evaluations=evaluations))
                )
        prints[f"{name}/front-row-2.svg"] = _sha(
            _svg(plot_kind("front", front, history=history, evaluations=evaluations, highlight=1))
        )
        prints[f"{name}/parallel-variables.svg"] = _sha(
            _svg(plot_kind("parallel", front, variables=True))
        )
        if surfaces is not None:
            prints[f"{name}/attainment.svg"] = _sha(
                _svg(plot_attainment(surfaces, front.objectives, title=front.info.title))
            )
        listed = (
            read_front(folder / "shortlist.csv") if (folder / "shortlist.csv").is_file() else None
        )
        for suffix, shortlist in (("", None), ("-shortlist", listed)):
            if suffix and shortlist is None:
                continue
            with matplotlib.rc_context({"svg.hashsalt": "tradewise-fingerprint"}):
                page = build_report(
                    front,
                    history=history,
                    evaluations=evaluations,
                    seeds=seeds,
                    attainment=surfaces,
                    shortlist=shortlist,
                    generated=GENERATED,
                )
            prints[f"{name}/review{suffix}.html"] = _sha(page)
        plt.close("all")
    return prints


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", type=Path, help="a JSON file of fingerprints to compare with")
    parser.add_argument(
        "--make-fixtures", action="store_true", help="write the fixture run folders anew"
    )
    args = parser.parse_args()
    if args.make_fixtures:
        import contextlib

        with contextlib.redirect_stdout(sys.stderr):
            make_fixtures()
    prints = fingerprints()
    if args.check is None:
        print(json.dumps(prints, indent=1, sort_keys=True))
        return 0
    saved = json.loads(args.check.read_text(encoding="utf-8"))
    changed = sorted(k for k in saved.keys() | prints.keys() if saved.get(k) != prints.get(k))
    for key in changed:
        print(f"differs: {key}")
    print(f"{len(prints) - len([k for k in changed if k in prints])} of {len(prints)} identical")
    return 1 if changed else 0


if __name__ == "__main__":
    sys.exit(main())
