"""The run folder: every file in it is written and read here.

``front.csv`` and ``front.json`` (the front and what describes it),
``representatives.csv`` (a few designs that stand for the front), ``history.csv``
(one row a generation), ``least_infeasible.csv`` when nothing was feasible,
``failed.csv`` when evaluations failed or ran past the timeout, and for a set of seeds
``seeds.csv``, ``seeds/seed-N/``,
``attainment.csv`` and, for two objectives, ``disagreement.csv``. The
archive (``archive.sqlite``) is the store's.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

import pandas as pd

from tradewise._plain import write_json
from tradewise.compare import attainment, read_seed_fronts, write_attainment
from tradewise.errors import DataError
from tradewise.front import (
    Front,
    column_header,
    design_table,
    failed_rows,
    objective_matrix,
    read_front,
    read_table,
)
from tradewise.represent import REPRESENTATIVE_COLUMNS, representatives_table
from tradewise.store import open_store

__all__ = [
    "save_run",
    "save_seeds",
    "seed_attainment",
    "read_run",
    "read_seeds",
    "read_representatives",
    "REPRESENTATIVES_FILE",
    "shortlist_front",
    "SHORTLIST_COLUMNS",
    "DATA_FILES",
    "is_run_folder",
    "remove_stale",
    "DRAWN_FILES",
]

#: Files a run folder holds as data; no command may write its --out over one of them.
DATA_FILES = frozenset(
    {
        "front.csv",
        "front.json",
        "history.csv",
        "archive.sqlite",
        "archive.sqlite-wal",
        "archive.sqlite-shm",
        "representatives.csv",
        "least_infeasible.csv",
        "least_infeasible.json",
        "failed.csv",
        "seeds.csv",
        "attainment.csv",
        "disagreement.csv",
    }
)


#: What the tool itself writes into a run folder besides its data: the figures `plot` and the
#: page `report` write under their default names.
DRAWN_FILES = frozenset(
    {"review.html"} | {f"{kind}.{ext}" for kind in ("front", "parallel", "history", "attainment")
                        for ext in ("png", "svg", "pdf")}
)  # fmt: skip


def remove_stale(folder: str | Path, written: Mapping[str, Path] | Sequence[Path]) -> list[Path]:
    """Remove from ``folder`` what an earlier run wrote there and this one did not.

    Called after a run's files are written (so a failed run never costs the
    earlier results): the tool's own data files that were not written anew,
    its default figures and review page (drawn from the earlier front), and
    an earlier set of seeds' ``seeds/`` folder. The archive stays: it is the
    record of every evaluation, and the new run's cache. Files of other names
    are never touched.
    """
    folder = Path(folder)
    kept = {
        Path(p).resolve() for p in (written.values() if isinstance(written, Mapping) else written)
    }
    removed = []
    names = (DATA_FILES - {n for n in DATA_FILES if n.startswith("archive.sqlite")}) | DRAWN_FILES
    for name in sorted(names):
        path = folder / name
        if path.is_file() and path.resolve() not in kept:
            path.unlink()
            removed.append(path)
    seeds = folder / "seeds"
    if seeds.is_dir():
        import shutil

        for child in sorted(seeds.glob("seed-*")):
            ours = (child / "front.json").is_file() or (child / "least_infeasible.csv").is_file()
            # kept holds resolved paths: a relative --out must be resolved to be found among them
            if child.is_dir() and ours and not any(child.resolve() in p.parents for p in kept):
                shutil.rmtree(child)
                removed.append(child)
        if not any(seeds.iterdir()):
            seeds.rmdir()
    return removed


def is_run_folder(folder: Path) -> bool:
    """Whether ``folder`` was written by a run (its front.json names a case, or it holds a history or archive)."""
    if (folder / "history.csv").is_file() or (folder / "archive.sqlite").is_file():
        return True
    try:
        meta = json.loads((folder / "front.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(meta, dict) and bool(meta.get("case_hash"))


#: The file of the designs that stand for the front (see :func:`tradewise.represent.representatives`).
REPRESENTATIVES_FILE = "representatives.csv"
#: How many designs it holds when the run's settings do not say.
_DEFAULT_REPRESENTATIVES = 20

#: The columns a shortlist file adds before the design's own.
SHORTLIST_COLUMNS = ("pick_order", "front_row")


def save_run(result: Any, folder: str | Path) -> dict[str, Path]:
    """Write a run folder: ``front.csv``, ``front.json``, ``representatives.csv`` and ``history.csv``.

    ``representatives.csv`` holds at most the run's ``representatives``
    setting of designs standing for the front (greedy hypervolume subset
    selection, :func:`tradewise.represent.representatives_table`), with the
    headers of ``front.csv`` after two columns of its own: ``chosen_as`` and
    ``front_row``. When no feasible design was found,
    ``least_infeasible.csv`` is written instead of an empty front and its
    representatives (front.csv's headers, then ``violation``: the sum over the
    constraints of each excess divided by its limit, smallest first), and
    ``front.json`` says so.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written: dict[str, Path] = {}
    info = result.front.info.but(
        message=result.message,
        hypervolume=result.hypervolume,
        store=result.store_path.name if result.store_path else None,
        run_id=result.run_id,
    )
    front = replace(result.front, info=info)
    if len(front):
        written["front"], written["meta"] = front.to_csv(folder / "front.csv")
        written["representatives"] = _write_representatives(
            front, folder, _representative_count(result)
        )
    else:
        for name in ("front.csv", REPRESENTATIVES_FILE):
            stale = folder / name
            if stale.exists():
                stale.unlink()
        meta_path = folder / "front.json"
        write_json(meta_path, replace(front, info=info.but(feasible=False)).metadata())
        written["meta"] = meta_path
        if result.least_infeasible is not None:
            path = folder / "least_infeasible.csv"
            least = design_table(result.least_infeasible).assign(
                violation=result.least_infeasible["violation"]
            )
            least.rename(
                columns=lambda c: column_header(str(c), front.units.get(str(c), ""))
            ).to_csv(path, index=False)
            written["least_infeasible"] = path
    path = folder / "history.csv"
    result.history.to_csv(path, index=False)
    written["history"] = path
    failed = _write_failed(result, folder, front.units)
    if failed is not None:
        written["failed"] = failed
    return written


FAILED_FILE = "failed.csv"


def _write_failed(result: Any, folder: Path, units: dict[str, str]) -> Path | None:
    """Write ``failed.csv``: every evaluation that failed or ran past its timeout, with its message.

    Columns: ``eval_id``, ``generation``, ``status``, ``message``, then the
    design's variables with front.csv's unit headers. Where a model breaks is
    part of what a review asks; without the file it is only in the archive.
    A run without failures leaves no such file (an old one is removed).
    """
    path = folder / FAILED_FILE
    table = getattr(result, "evaluations", None)
    rows = failed_rows(table) if table is not None else None
    if rows is None or not len(rows):
        if path.exists():
            path.unlink()
        return None
    case = getattr(result, "case", None)
    names = [v.name for v in case.variables] if case is not None else []
    head = [c for c in ("eval_id", "generation", "status", "message") if c in rows.columns]
    out = rows[head + [n for n in names if n in rows.columns]]
    out.rename(columns=lambda c: column_header(str(c), units.get(str(c), ""))).to_csv(
        path, index=False
    )
    return path


def _representative_count(result: Any) -> int:
    """The run's ``representatives`` setting (its case's, else its recorded settings', else 20)."""
    search = getattr(getattr(result, "case", None), "search", None)
    count = getattr(search, "representatives", None)
    if count is None:
        count = result.front.info.settings.get("representatives", _DEFAULT_REPRESENTATIVES)
    return int(count)


def _write_representatives(front: Front, folder: Path, n: int) -> Path:
    """Write ``representatives.csv``: the designs standing for ``front``, with front.csv's headers."""
    table = representatives_table(front, n)
    path = folder / REPRESENTATIVES_FILE
    table.rename(columns=lambda c: column_header(str(c), front.units.get(str(c), ""))).to_csv(
        path, index=False
    )
    return path


def read_representatives(run: str | Path, front: Front | None = None) -> Front | None:
    """The designs of a run folder's ``representatives.csv`` as a front (None when it has none).

    The front's description (objectives, units, reference point, run
    information) is ``front``'s, or read from the folder's ``front.json``;
    the table is the file's, ``chosen_as`` and ``front_row`` first, in the
    order the designs were chosen. A folder of an earlier release has no
    such file.

    Raises
    ------
    DataError
        When the file cannot be read, or lacks an objective of the front or
        one of its own columns.
    """
    folder = Path(run)
    path = folder / REPRESENTATIVES_FILE
    if not path.is_file():
        return None
    front = front if front is not None else read_front(folder)
    table, _ = read_table(path)
    missing = [c for c in REPRESENTATIVE_COLUMNS if c not in table.columns]
    if missing:
        raise DataError(f"{path}: no column {missing[0]!r}; the file is written by `tradewise run`")
    objective_matrix(table, front.objectives, where=str(path), source=path)
    return front.with_table(design_table(table) if front.info.case_hash else table)


def save_seeds(result: Any, folder: str | Path, *, spread: Any = None) -> dict[str, Path]:
    """Write a run folder for several seeds.

    The merged front goes where a single run's would (``front.csv``,
    ``front.json``, ``history.csv`` with a ``seed`` column), each seed's own
    run folder to ``seeds/seed-N/``, and ``seeds.csv`` holds one row a seed:
    its status, evaluations, generations, failures, front size and
    hypervolume on the common reference point. ``spread`` is the set's
    :func:`seed_attainment` when the caller has already worked it out.
    """
    folder = Path(folder)
    written = save_run(result, folder)
    rows = []
    for run, hv in zip(result.runs, result.hypervolumes, strict=True):
        save_run(run, folder / "seeds" / f"seed-{run.seed}")
        rows.append(
            {
                "seed": run.seed,
                "run_id": run.run_id,
                "status": run.status,
                "evaluations": run.n_evals,
                "generations": run.n_gen,
                "failed": run.n_failed,
                "front_size": len(run.front),
                "hypervolume": hv,
            }
        )
    path = folder / "seeds.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    written["seeds"] = path
    spread = spread if spread is not None else seed_attainment(result)
    if spread is not None:
        written.update(write_attainment(spread, folder))
    return written


def seed_attainment(result: Any):
    """The attainment surfaces of a set of seeds on its common reference point (None for one seed, or
    more than three objectives, or no front at all)."""
    fronts = [run.front for run in result.runs]
    if len(result.runs) < 2 or not any(len(f) for f in fronts) or len(result.front.objectives) > 3:
        return None
    return attainment(fronts, reference=result.reference)


def read_run(run: str | Path, *, evaluations: bool = True):
    """The front, the history and (from the archive, when it is there) every evaluation of a run folder.

    For the merged front of a set of seeds (``run --seeds K``) the evaluations
    are every seed's, with the seed in ``front.info.seeds.column``: the seeds'
    runs share one archive and its evaluation numbers, so a design keeps the
    one name the merged front gives it.
    """
    folder = Path(run)
    if not folder.is_dir():
        raise DataError(f"{folder}: not a run folder; give the folder that `tradewise run` wrote")
    meta_path = folder / "front.json"
    if meta_path.is_file() and not (folder / "front.csv").is_file():
        try:
            feasible = json.loads(meta_path.read_text(encoding="utf-8")).get("feasible", True)
        except (OSError, ValueError):
            feasible = True
        if feasible is False:
            raise DataError(
                f"{folder}: the run found no feasible design, so it has no front to show; "
                "see least_infeasible.csv there"
            )
    front = read_front(folder)
    history = _read_csv(folder / "history.csv")
    table = None
    store_name, ours = front.info.store, front.info.case_hash
    runs = _runs_of(folder, front)
    if evaluations and store_name and runs and (folder / store_name).is_file():
        tables = []
        with open_store(folder / store_name, create=False) as archive:
            for seed, run_id in runs:
                record = archive.run(run_id)
                if ours and record["case_hash"] != ours:
                    which = f"run {run_id}" + (f" (seed {seed})" if seed is not None else "")
                    raise DataError(
                        f"{folder / store_name}: {which} of this archive is of the case "
                        f"{record['case_title']!r} ({record['case_hash']}), but {meta_path} is of the case "
                        f"{front.info.title!r} ({ours}); put the run's own archive beside its front.json"
                    )
                part = archive.evaluations(run_id)
                if seed is not None:
                    part.insert(0, front.info.seeds.column, seed)
                tables.append(part)
        table = tables[0] if len(tables) == 1 else pd.concat(tables, ignore_index=True)
    return front, history, table


def _read_csv(path: Path) -> pd.DataFrame | None:
    """A CSV file of the run folder, or None where it is absent; unreadable is one DataError."""
    if not path.is_file():
        return None
    try:
        return pd.read_csv(path)
    except (OSError, ValueError) as exc:
        raise DataError(f"{path}: cannot be read as CSV ({exc})") from None


def _runs_of(folder: Path, front: Front) -> list[tuple[int | None, int]]:
    """(seed, run id) of the archive's runs behind ``front``: its one run (seed None), or each
    seed's that started, from seeds.csv, for the merged front of a set of seeds."""
    if front.info.seeds is None:
        return [] if front.info.run_id is None else [(None, int(front.info.run_id))]
    seeds = _read_csv(folder / "seeds.csv")
    if seeds is None or "run_id" not in seeds.columns or "seed" not in seeds.columns:
        return []
    return [
        (int(seed), int(run_id))
        for seed, run_id in zip(seeds["seed"], seeds["run_id"], strict=True)
        if not pd.isna(run_id)  # a seed that never started has no run
    ]


def read_seeds(run: str | Path, front: Front):
    """seeds.csv and the attainment surfaces of a run folder written by ``run --seeds K`` (None where absent)."""
    folder = Path(run)
    seeds = _read_csv(folder / "seeds.csv")
    surfaces = None
    if (folder / "attainment.csv").is_file():
        surfaces, _ = read_table(folder / "attainment.csv")
    elif len(front.objectives) <= 3:
        fronts = read_seed_fronts(folder)
        if len(fronts) > 1:
            surfaces = attainment(fronts, reference=front.reference).table()
    return seeds, surfaces


def shortlist_front(
    front: Front, rows: Sequence[int], *, settings: Mapping[str, Any] | None = None
) -> Front:
    """Designs ``rows`` of ``front`` as a shortlist: a front file with its pick order and row.

    Two columns come first: ``pick_order`` (1, 2, ... in the order of
    ``rows``) and ``front_row`` (the design's row in the whole front, counting
    from 1). The metadata is the front's, with ``settings`` (how the designs
    were chosen) as ``info.shortlist``. :meth:`Front.to_csv` writes it
    and :func:`tradewise.front.read_front` reads it back.

    Raises
    ------
    DataError
        When ``rows`` is empty, holds a position outside the front, or the
        front already has a column named ``pick_order`` or ``front_row``.

    Examples
    --------
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [10.0, 12, 15], "mass": [100.0, 60, 40]})
    >>> picked = shortlist_front(Front.from_table(table, [Objective("cost"), Objective("mass")]), [2, 0])
    >>> picked.table[["pick_order", "front_row", "cost"]].values.tolist()
    [[1.0, 3.0, 15.0], [2.0, 1.0, 10.0]]
    """
    rows = [int(r) for r in rows]
    if not rows:
        raise DataError("shortlist: it is empty; add designs before exporting it")
    outside = [r for r in rows if not 0 <= r < len(front)]
    if outside:
        raise DataError(
            f"shortlist: {outside[0]} is not a row position of the front (0 to {len(front) - 1})"
        )
    clash = [c for c in SHORTLIST_COLUMNS if c in front.table.columns]
    if clash:
        raise DataError(
            f"shortlist: the front already has a column {clash[0]!r}, which the export writes"
        )
    table = front.table.iloc[rows].copy()
    if front.info.case_hash:
        table = design_table(table)
    table.insert(0, "front_row", [r + 1 for r in rows])
    table.insert(0, "pick_order", range(1, len(rows) + 1))
    return replace(front.with_table(table), info=front.info.but(shortlist=dict(settings or {})))
