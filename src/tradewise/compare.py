"""Judging runs against each other: quality indicators, attainment surfaces, seed spread and convergence.

Everything here works on fronts (a run folder's ``front.csv`` or any
:class:`~tradewise.front.Front`); it never touches the search, the models or
the archive. The indicators (hypervolume, IGD+, additive epsilon) and the
empirical attainment function come from moocore; what this module adds is the
common scale that makes runs comparable and the words that say what the
numbers mean.

Over 800 lines because the indicators, the attainment surfaces and the seed
spread share that common scale and its wording; split, each part would import
the others' private helpers.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import moocore
import numpy as np
import pandas as pd

from tradewise import format as _format
from tradewise.case import Objective
from tradewise.errors import DataError
from tradewise.front import (
    Front,
    _flags,
    column_header,
    hypervolume,
    objective_matrix,
    read_front,
    read_table,
    reference_point,
)

__all__ = [
    "SURFACES",
    "Attainment",
    "Comparison",
    "attainment",
    "attainment_surfaces",
    "common_reference",
    "compare_fronts",
    "compare_runs",
    "convergence_advice",
    "dominated_share",
    "epsilon_additive",
    "igd_plus",
    "late_gain",
    "read_seed_fronts",
    "write_attainment",
]

#: The attainment surfaces exported, from the most to the least optimistic.
SURFACES = ("best", "median", "worst")

#: Convergence advice: the last ``_TAIL`` share of the generations is looked at, and a relative
#: hypervolume gain above ``_GAIN`` over it counts as "still improving". A rule of thumb of our own.
_TAIL = 0.1
_GAIN = 0.01


# ------------------------------------------------------------------------------- small helpers
def _as_points(points: Any, n_obj: int | None = None) -> np.ndarray:
    array = np.asarray(points, dtype=float)
    if array.size == 0:
        return np.empty((0, n_obj or 0))
    return np.atleast_2d(array)


def _to_min(points: np.ndarray, flags: np.ndarray) -> np.ndarray:
    """Negate the maximised columns, so that smaller is better everywhere (moocore's EAF needs it)."""
    return np.where(flags, -points, points)


def _worst(points: np.ndarray, flags: np.ndarray) -> np.ndarray:
    return np.where(flags, points.min(axis=0), points.max(axis=0))


def _best(points: np.ndarray, flags: np.ndarray) -> np.ndarray:
    return np.where(flags, points.max(axis=0), points.min(axis=0))


# ----------------------------------------------------------------------------------- indicators
def igd_plus(points: Any, reference_set: Any, maximise: bool | Sequence[bool] = False) -> float:
    """IGD+ of ``points`` against ``reference_set`` (moocore): smaller is better, 0 when they cover it.

    The mean, over the reference points, of the distance to the nearest point
    of the set counting only the amounts by which that point is worse.

    Examples
    --------
    >>> igd_plus([[1.5, 3], [3, 1.5]], [[1, 3], [2, 2], [3, 1]])
    0.6666666666666666
    """
    return _against_set(moocore.igd_plus, points, reference_set, maximise)


def epsilon_additive(
    points: Any, reference_set: Any, maximise: bool | Sequence[bool] = False
) -> float:
    """Additive epsilon of ``points`` against ``reference_set`` (moocore): the smallest amount that,
    taken off every objective of the set, lets it weakly dominate the reference set.

    Smaller is better; 0 or less when the set already covers the reference set.

    Examples
    --------
    >>> epsilon_additive([[1.5, 3], [3, 1.5]], [[1, 3], [2, 2], [3, 1]])
    1.0
    """
    return _against_set(moocore.epsilon_additive, points, reference_set, maximise)


def _against_set(
    indicator: Any, points: Any, reference_set: Any, maximise: bool | Sequence[bool]
) -> float:
    """A moocore indicator of ``points`` against ``reference_set``; NaN when either is empty."""
    points, reference_set = _as_points(points), _as_points(reference_set)
    if len(points) == 0 or len(reference_set) == 0:
        return math.nan
    return float(indicator(points, ref=reference_set, maximise=_flags(maximise, points.shape[1])))


def dominated_share(points: Any, others: Any, maximise: bool | Sequence[bool] = False) -> float:
    """Share of the designs in ``others`` that some design of ``points`` dominates.

    Dominates means no worse in every objective and better in at least one, so
    two identical sets dominate none of each other's designs.

    Examples
    --------
    >>> dominated_share([[1, 1]], [[2, 2], [0, 3]])
    0.5
    """
    points, others = _as_points(points), _as_points(others)
    if len(others) == 0:
        return math.nan
    if len(points) == 0:
        return 0.0
    flags = _flags(maximise, points.shape[1])
    a, b = _to_min(points, flags), _to_min(others, flags)
    hit = np.zeros(len(b), dtype=bool)
    step = max(1, 2_000_000 // max(1, len(a) * a.shape[1]))  # bounds the broadcast's memory
    for start in range(0, len(b), step):
        chunk = b[start : start + step]
        no_worse = (a[None, :, :] <= chunk[:, None, :]).all(axis=2)
        better = (a[None, :, :] < chunk[:, None, :]).any(axis=2)
        hit[start : start + step] = (no_worse & better).any(axis=1)
    return float(hit.mean())


def common_reference(fronts: Sequence[Front]) -> np.ndarray:
    """One hypervolume reference point for several fronts of the same objectives.

    The worst, objective by objective, of the reference points recorded with
    the fronts, so that every design that counted in its own run still counts;
    when no front recorded one, the worst value over all fronts plus 10 % of
    the range (common practice, as in :func:`tradewise.front.reference_point`).

    Raises
    ------
    DataError
        When there is no front with designs.
    """
    fronts = [f for f in fronts if f is not None]
    if not fronts:
        raise DataError("reference point: got no front; at least one front with designs is needed")
    flags = np.asarray(fronts[0].maximise, dtype=bool)
    recorded = [np.asarray(f.reference, dtype=float) for f in fronts if f.reference is not None]
    if recorded:
        return _worst(np.vstack(recorded), flags)
    points = np.vstack([f.points() for f in fronts if len(f)])
    if len(points) == 0:
        raise DataError(
            "reference point: every front is empty; at least one front with designs is needed"
        )
    return reference_point(points, flags.tolist(), worst=[o.worst for o in fronts[0].objectives])


# ----------------------------------------------------------------------------------- attainment
def attainment_surfaces(
    point_sets: Sequence[Any], maximise: bool | Sequence[bool] = False
) -> dict[str, np.ndarray]:
    """The best, median and worst attainment surfaces of several runs (moocore's EAF).

    A surface is the boundary of the objective-space region that at least a
    given number of the runs reached: ``best`` at least one run, ``median``
    at least half of them (3 of 5, 2 of 4), ``worst`` every run.

    Parameters
    ----------
    point_sets : sequence of array-like
        One (n_i, m) array of objective values a run, in the user's units and
        senses; m is 2 or 3. A run with no designs counts as a run that
        reached nothing.
    maximise : bool or sequence of bool
        Which objectives are maximised (they are negated for moocore, which
        only minimises, and negated back).

    Returns
    -------
    dict of str to ndarray
        ``{"best": ..., "median": ..., "worst": ...}``; each an (k, m) array of
        the surface's corner points in the user's units and senses, sorted by
        the first objective then the second (k is 0 when no point is reached
        by that many runs). In two objectives the surface is the staircase
        through these corners: for a minimised second objective draw it with
        ``matplotlib.pyplot.step(x, y, where="post")`` after sorting by x
        ascending.

    Examples
    --------
    >>> runs = [[[1, 3], [3, 1]], [[2, 2]]]
    >>> attainment_surfaces(runs)["worst"].tolist()
    [[2.0, 3.0], [3.0, 2.0]]
    """
    surfaces, _ = _surfaces(point_sets, maximise)
    return surfaces


def _surfaces(
    point_sets: Sequence[Any], maximise: bool | Sequence[bool]
) -> tuple[dict[str, np.ndarray], dict[str, int]]:
    sets = [_as_points(p) for p in point_sets]
    n_runs = len(sets)
    if n_runs == 0:
        raise DataError("attainment: got no runs; at least one run's front is needed")
    widths = {p.shape[1] for p in sets if len(p)}
    if len(widths) > 1:
        raise DataError(
            f"attainment: the runs have different numbers of objectives ({sorted(widths)}); they must match"
        )
    n_obj = widths.pop() if widths else 0
    if n_obj and n_obj not in (2, 3):
        raise DataError(
            f"attainment: got {n_obj} objectives; attainment surfaces are computed for 2 or 3 objectives only"
        )
    levels = {"best": 1, "median": math.ceil(n_runs / 2), "worst": n_runs}
    empty = {name: np.empty((0, n_obj)) for name in SURFACES}
    filled = [p for p in sets if len(p)]
    if not filled:
        return empty, levels
    flags = _flags(maximise, n_obj)
    points = np.vstack([_to_min(p, flags) for p in filled])
    labels = np.concatenate([np.full(len(p), i + 1) for i, p in enumerate(filled)])
    eaf = np.asarray(moocore.eaf(points, labels))
    # moocore reports percentages of the runs it saw (only those with points); turn them back into run counts.
    counts = np.rint(eaf[:, -1] * len(filled) / 100.0).astype(int)
    result = {}
    for name in SURFACES:
        corners = eaf[counts == levels[name], :-1]
        corners = _to_min(corners, flags)  # negating again restores the user's senses
        order = np.lexsort(corners.T[::-1]) if len(corners) else np.arange(0)
        result[name] = corners[order]
    return result, levels


@dataclass(frozen=True)
class Attainment:
    """The attainment surfaces of several runs and the spread between them.

    ``surfaces`` maps ``best``/``median``/``worst`` to corner points in the
    user's units and senses; ``levels`` says how many runs reach each surface.
    ``spread_volume`` is the objective-space volume reached by some runs but
    not by all (between the best and the worst surface, inside the box bounded
    by ``reference``), and ``spread_share`` that volume as a share of the
    volume the best surface reaches. ``regions`` (two objectives only) lists
    that region as rectangles, one row each, with ``NAME_low`` and
    ``NAME_high`` columns. ``widest`` locates the best-surface corner the worst
    surface misses by most, and ``gap`` is that miss as a share of each
    objective's range between the ideal and the reference point.
    """

    surfaces: dict[str, np.ndarray]
    levels: dict[str, int]
    n_runs: int
    objectives: tuple[Objective, ...]
    reference: tuple[float, ...]
    spread_volume: float
    spread_share: float
    gap: float
    widest: tuple[float, ...] | None = None
    regions: pd.DataFrame | None = None
    units: dict[str, str] = field(default_factory=dict)

    def table(self) -> pd.DataFrame:
        """One row a surface corner: ``surface``, ``runs`` (how many runs reach it), ``n_runs``, objectives."""
        names = [o.name for o in self.objectives]
        parts = []
        for name in SURFACES:
            corners = self.surfaces[name]
            part = pd.DataFrame(corners, columns=names)
            part.insert(0, "n_runs", self.n_runs)
            part.insert(0, "runs", self.levels[name])
            part.insert(0, "surface", name)
            parts.append(part)
        return pd.concat(parts, ignore_index=True)

    def lines(self) -> list[str]:
        """The spread in plain words, for a summary."""
        if self.n_runs < 2:
            return []
        text = [
            f"Attainment: the best surface is reached by at least 1 of {self.n_runs} runs, the median by "
            f"{self.levels['median']}, the worst by all {self.n_runs}."
        ]
        if len(self.surfaces["worst"]) == 0:
            text.append("No point is reached by every run (some run found no feasible design).")
            return text
        kind = "area" if len(self.objectives) == 2 else "volume"
        text.append(
            f"The runs disagree on {self.spread_share:.1%} of the {kind} the best surface dominates "
            f"(between the best and the worst surface, reference point {_point_text(self.reference)})."
        )
        if self.widest is not None and self.gap > 0:
            where = ", ".join(
                f"{o.name} {_format.quantity(value, self.units.get(o.name, o.unit))}"
                for o, value in zip(self.objectives, self.widest, strict=True)
            )
            text.append(
                f"They disagree most near ({where}): the worst surface misses that point by "
                f"{self.gap:.1%} of each objective's range."
            )
        return text


def attainment(fronts: Sequence[Front], *, reference: Sequence[float] | None = None) -> Attainment:
    """Attainment surfaces of several runs' fronts, with the region where the runs disagree.

    Parameters
    ----------
    fronts : sequence of Front
        One front a run, all with the same objectives (two or three).
    reference : sequence of float, optional
        Bounds the disagreement region (default: :func:`common_reference`).

    Returns
    -------
    Attainment

    Raises
    ------
    DataError
        For no fronts, fronts whose objectives differ, or more than three objectives.
    """
    fronts = list(fronts)
    objectives = _same_objectives(fronts)
    flags = np.asarray([o.maximise for o in objectives], dtype=bool)
    surfaces, levels = _surfaces([f.points() for f in fronts], flags)
    units: dict[str, str] = {}
    for f in fronts:
        units.update({k: v for k, v in f.units.items() if v})
    ref = np.asarray(reference, dtype=float) if reference is not None else common_reference(fronts)
    best, worst = surfaces["best"], surfaces["worst"]
    hv_best = hypervolume(best, ref, flags.tolist()) if len(best) else 0.0
    hv_worst = hypervolume(worst, ref, flags.tolist()) if len(worst) else 0.0
    volume = max(0.0, hv_best - hv_worst)
    share = volume / hv_best if hv_best > 0 else math.nan
    gap, widest = math.nan, None
    regions = None
    if len(best) and len(worst):
        ideal = _best(best, flags)
        scale = _scale(ideal, ref, flags)
        b = _normalise(best, ideal, scale, flags)
        w = _normalise(worst, ideal, scale, flags)
        # For each best corner, how far the worst surface is from reaching it (max over objectives of the shortfall).
        miss = np.array([np.min(np.max(w - corner, axis=1)) for corner in b])
        i = int(np.argmax(miss))
        gap, widest = float(max(miss[i], 0.0)), tuple(float(v) for v in best[i])
    if len(objectives) == 2 and len(best):
        regions = _regions(best, worst, ref, objectives, flags)
    return Attainment(
        surfaces=surfaces,
        levels=levels,
        n_runs=len(fronts),
        objectives=objectives,
        reference=tuple(float(r) for r in ref),
        spread_volume=volume,
        spread_share=share,
        gap=gap,
        widest=widest,
        regions=regions,
        units=units,
    )


def _regions(
    best: np.ndarray,
    worst: np.ndarray,
    ref: np.ndarray,
    objectives: Sequence[Objective],
    flags: np.ndarray,
) -> pd.DataFrame:
    """The two-objective region between the best and worst staircases, cut into vertical strips.

    Worked in minimisation space: over each strip of the first objective both
    staircases are flat, and the region is the part above the best one and
    below the worst one (or below the reference point where the worst is absent).
    """
    b, w, r = _to_min(best, flags), _to_min(worst, flags), _to_min(ref[None, :], flags)[0]
    xs = np.unique(np.concatenate([b[:, 0], w[:, 0]]))
    xs = np.append(xs[xs < r[0]], r[0])
    rows = []
    for left, right in zip(xs[:-1], xs[1:], strict=True):
        low = _height(b, left)
        high = min(_height(w, left), r[1])
        if low < high:
            rows.append((left, right, low, high))
    names = [o.name for o in objectives]
    columns = [f"{names[0]}_low", f"{names[0]}_high", f"{names[1]}_low", f"{names[1]}_high"]
    table = pd.DataFrame(rows, columns=columns, dtype=float)
    for j, name in enumerate(names):
        if flags[j]:
            low, high = f"{name}_low", f"{name}_high"
            table[low], table[high] = -table[high], -table[low]
    return table


def _height(staircase: np.ndarray, x: float) -> float:
    """Lowest second objective among the points whose first objective is at most ``x`` (inf if none)."""
    left = staircase[staircase[:, 0] <= x]
    return float(left[:, 1].min()) if len(left) else math.inf


def write_attainment(result: Attainment, folder: str | Path) -> dict[str, Path]:
    """Write ``attainment.csv`` (one row a surface corner, column ``surface`` naming the surface) and,
    for two objectives, ``disagreement.csv`` (the rectangles between the best and worst surfaces).

    Headers carry units as ``name [unit]``, like ``front.csv``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    units = {o.name: result.units.get(o.name, o.unit) for o in result.objectives}
    written = {}
    path = folder / "attainment.csv"
    result.table().rename(columns=lambda c: column_header(str(c), units.get(str(c), ""))).to_csv(
        path, index=False
    )
    written["attainment"] = path
    if result.regions is not None:
        path = folder / "disagreement.csv"
        headers = {}
        for o in result.objectives:
            for end in ("low", "high"):
                headers[f"{o.name}_{end}"] = column_header(f"{o.name}_{end}", units[o.name])
        result.regions.rename(columns=headers).to_csv(path, index=False)
        written["disagreement"] = path
    return written


# ----------------------------------------------------------------------------------- comparison
def _same_objectives(
    fronts: Sequence[Front], labels: Sequence[str] | None = None
) -> tuple[Objective, ...]:
    if not fronts:
        raise DataError("compare: got no fronts; at least one is needed")
    labels = list(labels) if labels is not None else [f"front {i + 1}" for i in range(len(fronts))]
    first = [(o.name, o.goal) for o in fronts[0].objectives]
    for label, front in zip(labels[1:], fronts[1:], strict=True):
        other = [(o.name, o.goal) for o in front.objectives]
        if other != first:
            raise DataError(
                f"{label}: objectives {_goals_text(other)} differ from {labels[0]}'s {_goals_text(first)}; "
                "runs can only be compared on the same objectives"
            )
    return tuple(fronts[0].objectives)


def _goals_text(pairs: Sequence[tuple[str, str]]) -> str:
    return "(" + ", ".join(f"{name} {goal}" for name, goal in pairs) + ")"


def _scale(ideal: np.ndarray, ref: np.ndarray, flags: np.ndarray) -> np.ndarray:
    span = np.where(flags, ideal - ref, ref - ideal)
    return np.where(span > 0, span, 1.0)


def _normalise(
    points: np.ndarray, ideal: np.ndarray, scale: np.ndarray, flags: np.ndarray
) -> np.ndarray:
    """0 at the ideal, 1 at the reference point, smaller is better in every column."""
    return np.where(flags, ideal - points, points - ideal) / scale


def _point_text(point: Sequence[float]) -> str:
    return "(" + ", ".join(_format.number(v) for v in point) + ")"


@dataclass(frozen=True)
class Comparison:
    """Runs judged on one scale.

    ``table`` has one row a run: ``run``, ``front_size``, ``evaluations``,
    ``failed_share``, ``hypervolume``, ``igd_plus``, ``epsilon``, and, for runs
    with several seeds, ``seeds``, ``hv_seed_median``, ``hv_seed_min`` and
    ``hv_seed_max``. Objectives are normalised so that 0 is the best value any
    run (or the reference set) reached and 1 the common reference point; the
    hypervolume is then the share of that box a front dominates (larger is
    better), and IGD+ and epsilon are distances in shares of each objective's
    range (smaller is better). ``dominance`` has one row and one column a
    run: the share of the column run's designs that the row run dominates.
    ``lines`` say in words which run is better and whether the difference is
    larger than the seed-to-seed spread.
    """

    table: pd.DataFrame
    dominance: pd.DataFrame
    reference: tuple[float, ...]
    ideal: tuple[float, ...]
    reference_set: str
    best: str
    lines: list[str]

    def __repr__(self) -> str:
        return f"Comparison({len(self.table)} runs, best {self.best!r})"


def compare_fronts(
    fronts: Mapping[str, Front],
    *,
    reference_set: Front | np.ndarray | None = None,
    seed_fronts: Mapping[str, Sequence[Front]] | None = None,
    reference: Sequence[float] | None = None,
) -> Comparison:
    """Judge several fronts of the same objectives on one reference point and one normalisation.

    Parameters
    ----------
    fronts : mapping of str to Front
        The fronts, by the label to show. Each front's ``info`` may carry
        ``n_evals`` and ``n_failed`` (a run's front does).
    reference_set : Front or array, optional
        The set IGD+ and epsilon measure against (for example a known true
        front, in the user's units and senses). Default: the non-dominated
        union of all the fronts, the usual choice when the true front is unknown.
    seed_fronts : mapping of str to sequence of Front, optional
        For runs made of several seeds, each seed's own front; their
        hypervolumes on the common scale give the seed-to-seed spread.
    reference : sequence of float, optional
        The hypervolume reference point (default: :func:`common_reference`).

    Returns
    -------
    Comparison

    Raises
    ------
    DataError
        For no fronts, fronts with different objectives, or no designs at all.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> objectives = [Objective("cost"), Objective("mass")]
    >>> a = Front.from_table(pd.DataFrame({"cost": [1.0, 2.0], "mass": [2.0, 1.0]}), objectives, reference=[3, 3])
    >>> b = Front.from_table(pd.DataFrame({"cost": [1.5, 2.5], "mass": [2.5, 1.5]}), objectives, reference=[3, 3])
    >>> compare_fronts({"a": a, "b": b}).best
    'a'
    """
    labels = list(fronts)
    items = [fronts[k] for k in labels]
    objectives = _same_objectives(items, labels)
    flags = np.asarray([o.maximise for o in objectives], dtype=bool)
    seed_fronts = {k: list(v) for k, v in (seed_fronts or {}).items() if v}
    for label, seeds in seed_fronts.items():
        _same_objectives(
            [fronts[label], *seeds],
            [label] + [f"{label} seed front {i + 1}" for i in range(len(seeds))],
        )

    given = None
    source = "the non-dominated union of the compared fronts"
    if reference_set is not None:
        if isinstance(reference_set, Front):
            given = objective_matrix(reference_set.table, objectives, where="reference front")
        else:
            given = _as_points(reference_set, len(objectives))
        if given.shape[1] != len(objectives) or len(given) == 0:
            raise DataError(
                f"reference front: got {given.shape[0]} rows of {given.shape[1]} objectives; "
                f"expected at least one row of {len(objectives)}"
            )
        source = "the given reference front"
    filled = [f.points() for f in items if len(f)]
    if not filled:
        raise DataError("compare: every front is empty; nothing to compare")
    union = np.vstack(filled)
    ref = np.asarray(reference, dtype=float) if reference is not None else common_reference(items)
    everything = np.vstack([union] + ([given] if given is not None else []))
    ideal = _best(everything, flags)
    scale = _scale(ideal, ref, flags)
    target = moocore.filter_dominated(union if given is None else given, maximise=flags)
    target_n = _normalise(target, ideal, scale, flags)
    unit_ref = np.ones(len(objectives))

    def score(front: Front) -> tuple[float, float, float]:
        if not len(front):
            return 0.0, math.nan, math.nan
        z = _normalise(front.points(), ideal, scale, flags)
        return (hypervolume(z, unit_ref), igd_plus(z, target_n), epsilon_additive(z, target_n))

    rows = []
    spreads: dict[str, list[float]] = {}
    for label, front in zip(labels, items, strict=True):
        hv, igd, eps = score(front)
        n_evals = front.info.n_evals
        n_failed = front.info.n_failed
        failed = (n_failed / n_evals) if n_evals and n_failed is not None else math.nan
        row = {
            "run": label,
            "front_size": len(front),
            "evaluations": n_evals if n_evals is not None else math.nan,
            "failed_share": failed,
            "hypervolume": hv,
            "igd_plus": igd,
            "epsilon": eps,
        }
        if label in seed_fronts:
            values = [score(f)[0] for f in seed_fronts[label]]
            spreads[label] = values
            row.update(
                {
                    "seeds": len(values),
                    "hv_seed_median": float(np.median(values)),
                    "hv_seed_min": float(min(values)),
                    "hv_seed_max": float(max(values)),
                }
            )
        rows.append(row)
    table = pd.DataFrame(rows)
    dominance = pd.DataFrame(
        [
            [
                math.nan if i == j else dominated_share(a.points(), b.points(), flags.tolist())
                for j, b in enumerate(items)
            ]
            for i, a in enumerate(items)
        ],
        index=labels,
        columns=labels,
    )
    best = labels[int(np.argmax(table["hypervolume"].to_numpy()))]
    lines = _verdict(table, dominance, best, spreads, source)
    return Comparison(
        table=table,
        dominance=dominance,
        reference=tuple(float(r) for r in ref),
        ideal=tuple(float(v) for v in ideal),
        reference_set=source,
        best=best,
        lines=lines,
    )


def _verdict(
    table: pd.DataFrame,
    dominance: pd.DataFrame,
    best: str,
    spreads: dict[str, list[float]],
    source: str,
) -> list[str]:
    if len(table) < 2:
        return [f"Only one run: {best}."]
    by_label = table.set_index("run")
    lines = []
    order = table.sort_values("hypervolume", ascending=False)["run"].tolist()
    lines.append(
        f"{best} has the largest hypervolume ({_format.share(by_label.at[best, 'hypervolume'], 2)} of the "
        "common box)."
    )
    for label, indicator in (("IGD+", "igd_plus"), ("epsilon", "epsilon")):
        values = table[indicator].to_numpy(dtype=float)
        if np.isfinite(values).any():
            leader = table["run"].iloc[int(np.nanargmin(values))]
            if leader != best and not math.isclose(
                by_label.at[leader, indicator], by_label.at[best, indicator]
            ):
                lines.append(
                    f"{label} against {source} ranks {leader} first instead: the indicators disagree."
                )
    for other in order[1:]:
        h_best, h_other = by_label.at[best, "hypervolume"], by_label.at[other, "hypervolume"]
        diff = h_best - h_other
        if diff <= 1e-12 * max(1.0, abs(h_best)):
            lines.append(f"{other} has the same hypervolume as {best}.")
            continue
        text = f"{other} is lower by {100 * diff:.2f} points of that share"
        d_bo, d_ob = dominance.at[best, other], dominance.at[other, best]
        if np.isfinite(d_bo) and np.isfinite(d_ob):
            text += f"; {best} dominates {d_bo:.0%} of {other}'s designs, {other} {d_ob:.0%} of {best}'s"
        lines.append(text + ".")
        lines.append(_spread_text(best, other, by_label, spreads))
    return lines


def _spread_text(
    best: str, other: str, by_label: pd.DataFrame, spreads: dict[str, list[float]]
) -> str:
    def span(label: str) -> str:
        values = spreads[label]
        return f"{_format.share(min(values), 2)} to {_format.share(max(values), 2)} ({len(values)} seeds)"

    if best in spreads and other in spreads:
        low_best, high_other = min(spreads[best]), max(spreads[other])
        if low_best > high_other:
            verdict = (
                "they do not overlap, so the difference is larger than the seed-to-seed spread"
            )
        elif min(spreads[other]) > max(spreads[best]):
            verdict = (
                f"they do not overlap, but single seeds of {other} do better: its lead comes "
                "from merging more seeds"
            )
        else:
            verdict = "they overlap, so the difference is within the seed-to-seed spread and may be luck of the seed"
        return f"Single seeds of {best} reached {span(best)}, of {other} {span(other)}: {verdict}."
    for known, single in ((best, other), (other, best)):
        if known in spreads and single not in spreads:
            value = by_label.at[single, "hypervolume"]
            low, high = min(spreads[known]), max(spreads[known])
            if low <= value <= high:
                where = "inside that range, so the difference is within the seed-to-seed spread"
            else:
                side = "above" if value > high else "below"
                where = (
                    f"{side} that range, so the difference is larger than the seed-to-seed spread"
                )
            return f"Single seeds of {known} reached {span(known)}; {single}'s {_format.share(value, 2)} lies {where}."
    return (
        f"The seed-to-seed spread of {best} and {other} is unknown; run each with --seeds to tell a real "
        "difference from the luck of the seed."
    )


# ------------------------------------------------------------------------------------ run folders
def read_seed_fronts(folder: str | Path) -> list[Front]:
    """The fronts of each seed of a run folder written with several seeds (``seeds/seed-N/front.csv``),
    in seed order; an empty list for a single run.

    A seed that found no feasible design has no ``front.csv``; it is left out.
    """
    root = Path(folder) / "seeds"
    if not root.is_dir():
        return []
    found = []
    for sub in root.iterdir():
        if sub.is_dir() and sub.name.startswith("seed-") and (sub / "front.csv").is_file():
            try:
                number = int(sub.name.removeprefix("seed-"))
            except ValueError:
                continue
            found.append((number, sub))
    return [read_front(sub) for _, sub in sorted(found)]


def compare_runs(
    folders: Sequence[str | Path], *, reference: str | Path | None = None
) -> Comparison:
    """Compare run folders (see :func:`compare_fronts`); a folder run with several seeds brings its
    seed-to-seed spread along.

    Parameters
    ----------
    folders : sequence of str or Path
        Run folders (or front CSV files with their ``.json`` beside them).
    reference : str or Path, optional
        A reference front for IGD+ and epsilon: a front CSV with its ``.json``,
        or a plain CSV with a column for each objective (headers may carry units).

    Raises
    ------
    DataError
        For a missing or damaged front file, runs with different objectives,
        or a reference CSV without a needed column.
    """
    if not folders:
        raise DataError("compare: got no run folders; give at least one")
    paths = [Path(f) for f in folders]
    labels = _labels(paths)
    fronts = {label: read_front(path) for label, path in zip(labels, paths, strict=True)}
    seeds = {
        label: read_seed_fronts(path)
        for label, path in zip(labels, paths, strict=True)
        if path.is_dir()
    }
    reference_set = None
    if reference is not None:
        reference_set = _read_reference(Path(reference), next(iter(fronts.values())).objectives)
    return compare_fronts(fronts, reference_set=reference_set, seed_fronts=seeds)


def _labels(paths: Sequence[Path]) -> list[str]:
    names = [p.name if p.is_dir() else p.stem for p in paths]
    if len(set(names)) == len(names):
        return names
    return [str(p) for p in paths]


def _read_reference(path: Path, objectives: Sequence[Objective]) -> np.ndarray:
    if path.is_dir() or path.with_suffix(".json").is_file():
        front = read_front(path)
        return objective_matrix(front.table, objectives, where=str(path))
    table, _ = read_table(path)
    if len(table) == 0:
        raise DataError(f"{path}: the reference front has a header but no rows")
    return objective_matrix(table, objectives, where=str(path))


# ----------------------------------------------------------------------------------- convergence
def late_gain(history: pd.DataFrame, *, tail: float = _TAIL) -> float:
    """Relative hypervolume gain over the last ``tail`` share of the generations (at least one).

    ``(hv_last - hv_before_tail) / hv_last`` from a run's ``history`` (columns
    ``generation`` and ``hypervolume``); NaN when there are fewer than two
    generations or no hypervolume yet.
    """
    if history is None or len(history) < 2 or "hypervolume" not in history:
        return math.nan
    hv = history["hypervolume"].to_numpy(dtype=float)
    window = max(1, math.ceil(tail * len(hv)))
    window = min(window, len(hv) - 1)
    last, before = hv[-1], hv[-1 - window]
    if not (last > 0):
        return math.nan
    return float((last - before) / last)


def convergence_advice(
    history: pd.DataFrame, *, tail: float = _TAIL, threshold: float = _GAIN
) -> str:
    """A sentence advising a larger budget when the front was still improving at the end, else ``""``.

    Still improving means the hypervolume grew by more than ``threshold``
    (default 1 %) of its final value over the last ``tail`` (default 10 %) of
    the generations: a rule of thumb of ours. A history with a ``seed``
    column (several seeds) is judged seed by seed.

    Examples
    --------
    >>> history = pd.DataFrame({"generation": range(1, 21), "hypervolume": [i / 20 for i in range(1, 21)]})
    >>> convergence_advice(history)[:34]
    'The front was still improving: the'
    """
    if history is None or len(history) == 0:
        return ""
    if "seed" in history.columns:
        gains = {
            seed: late_gain(part, tail=tail) for seed, part in history.groupby("seed", sort=True)
        }
    else:
        gains = {None: late_gain(history, tail=tail)}
    improving = {k: g for k, g in gains.items() if np.isfinite(g) and g > threshold}
    if not improving:
        return ""
    top = max(improving.values())
    if None in gains:
        return (
            f"The front was still improving: the hypervolume grew {top:.1%} over the last {tail:.0%} of the "
            f"generations (more than {threshold:.0%}); consider a larger budget."
        )
    return (
        f"The front was still improving in {len(improving)} of {len(gains)} seeds: the hypervolume grew up to "
        f"{top:.1%} over the last {tail:.0%} of the generations (more than {threshold:.0%}); "
        "consider a larger budget."
    )
