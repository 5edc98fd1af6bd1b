"""A few designs that stand for a whole front, and picks that differ by a meaningful amount.

:func:`representatives` keeps the extremes and the knees of a front and fills
the rest of a set of ``n`` by greedy hypervolume subset selection in
normalised objectives (the set every run folder writes as
``representatives.csv`` and the review page leads with).
:func:`distinct_picks` walks a method's ranking and drops designs that lie
within an engineering tolerance of one already kept, so a review never sees
two neighbours on the front as two choices.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import moocore
import numpy as np
import pandas as pd

from tradewise.choose import find_knees, normalised
from tradewise.errors import DataError
from tradewise.front import Front
from tradewise.limits import check_objective_names, parse_values

__all__ = [
    "REPRESENTATIVE_REFERENCE",
    "REPRESENTATIVE_COLUMNS",
    "representatives",
    "representatives_table",
    "DISTINCT_SHARE",
    "separation",
    "distinct_picks",
]

#: The reference point of the representative set's hypervolume, in every normalised objective
#: (0 best, 1 worst on the front): a little beyond the worst, so the extremes count too.
REPRESENTATIVE_REFERENCE = 1.1
#: With three or more objectives, the greedy step measures at most about this many candidates,
#: one a cell of an even grid over the normalised front (our own choice). Measured on 20,000
#: designs on a sphere octant and on a plane (n = 20): about 0.6 s instead of 4.5 to 6 s, and a set
#: whose hypervolume is within 0.1 % of the one the greedy step finds among every design.
_REPRESENTATIVE_CANDIDATES = 2000
#: The columns :func:`representatives_table` adds before the design's own.
REPRESENTATIVE_COLUMNS = ("chosen_as", "front_row")


def representatives(front: Front, n: int = 20) -> np.ndarray:
    """Row positions in ``front.table`` of at most ``n`` designs that stand for the whole front.

    Greedy hypervolume subset selection in normalised objectives (each
    objective scaled to [0, 1] over the front with its sense, see
    :func:`tradewise.choose.normalised`; reference point :data:`REPRESENTATIVE_REFERENCE` in
    every objective). The set starts from the extremes (the design best in
    each objective) and the knees that :func:`tradewise.choose.find_knees` finds, then
    repeatedly takes the design that adds most hypervolume to the designs
    already chosen, until it holds ``n``. A front of ``n`` designs or fewer is
    returned whole.

    Greedy selection maximises a monotone submodular function to within a
    factor ``1 - 1/e`` of the best subset of the same size (Nemhauser, Wolsey
    and Fisher 1978), and the hypervolume of a subset is such a function
    (Ulrich and Thiele 2012); Guerreiro, Fonseca and Paquete (2016) study
    this greedy selection for hypervolume in two and three objectives. The
    bound is proved for the greedy that starts from nothing; starting from
    the extremes and the knees is our own choice (a review wants them), and
    the tests measure how close the result stays to the best subset.

    Two objectives: the gain of every design is worked out exactly at each
    step from its neighbours among the chosen designs (a sort and a search).
    Three or more: the gains come from moocore's hypervolume contributions,
    taken lazily: a design's gain can only shrink as the set grows
    (submodularity), so a design is re-measured only when its last known gain,
    or the gain it would add beside any single chosen design, still leads,
    which gives the same set as measuring every design at every step. On
    fronts of more than 2,000 designs the candidates are first thinned to
    one a cell of an even grid over the normalised front, which keeps a
    20,000-design front under a second (see ``_REPRESENTATIVE_CANDIDATES``).

    Parameters
    ----------
    front : Front
        The front to stand for.
    n : int
        How many designs at most; a whole number of at least 1.

    Returns
    -------
    numpy.ndarray
        Row positions in the order chosen: the extremes in objective order,
        the knees strongest first, then the designs by falling gain. When
        ``n`` is smaller than that starting set, the strongest knee comes
        first, then the extremes.

    Raises
    ------
    DataError
        When ``n`` is not a whole number of at least 1.

    References
    ----------
    Guerreiro, A. P., Fonseca, C. M., Paquete, L. (2016). Greedy hypervolume
    subset selection in low dimensions. Evolutionary Computation 24(3):521-544
    (pages from memory).
    Nemhauser, G. L., Wolsey, L. A., Fisher, M. L. (1978). An analysis of
    approximations for maximizing submodular set functions - I. Mathematical
    Programming 14:265-294 (from memory).
    Ulrich, T., Thiele, L. (2012). Bounding the effectiveness of hypervolume-based
    (mu + lambda)-archiving algorithms. Learning and Intelligent Optimization
    (LION 6), LNCS 7219, pp. 235-249 (from memory).

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> f1 = np.linspace(0, 1, 101)
    >>> table = pd.DataFrame({"cost": f1, "mass": 1 - np.sqrt(f1)})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> rows = representatives(front, 5)
    >>> front.table["cost"].iloc[rows].round(2).tolist()
    [0.0, 1.0, 0.25, 0.59, 0.08]
    """
    return _representatives(front, n)[0]


def representatives_table(front: Front, n: int = 20) -> pd.DataFrame:
    """The designs of :func:`representatives` as a table, with why and where each was chosen.

    Two columns come first: ``chosen_as`` (``"best NAME"`` for an extreme,
    ``"knee"``, or ``"spread"`` for a design taken for the hypervolume it
    adds) and ``front_row`` (its row in the whole front, counting from 1, as
    in ``front.csv``); then the design's own columns.

    Raises
    ------
    DataError
        When ``n`` is not a whole number of at least 1, or the front already
        has a column named ``chosen_as`` or ``front_row``.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [10.0, 12, 15, 20, 30], "mass": [100.0, 60, 40, 30, 25]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> representatives_table(front, 3)[["chosen_as", "front_row", "cost"]].values.tolist()
    [['best cost', 1, 10.0], ['best mass', 5, 30.0], ['knee', 3, 15.0]]
    """
    clash = [c for c in REPRESENTATIVE_COLUMNS if c in front.table.columns]
    if clash:
        raise DataError(
            f"representatives: the front already has a column {clash[0]!r}, which the set writes"
        )
    rows, reasons = _representatives(front, n)
    table = front.table.iloc[rows].copy()
    table.insert(0, "front_row", rows + 1)
    table.insert(0, "chosen_as", reasons)
    return table.reset_index(drop=True)


def _representatives(front: Front, n: int) -> tuple[np.ndarray, list[str]]:
    """(rows, reasons) of the representative set; see :func:`representatives`."""
    if isinstance(n, bool) or not isinstance(n, int | np.integer) or n < 1:
        raise DataError(f"representatives: expected a whole number of at least 1, got {n!r}")
    n = int(n)
    scaled = normalised(front)
    count, m = scaled.shape
    if count == 0:
        return np.zeros(0, dtype=int), []
    reasons: dict[int, list[str]] = {}
    others = scaled.sum(axis=1)
    for j, objective in enumerate(front.objectives):
        best = int(np.lexsort((others - scaled[:, j], scaled[:, j]))[0])
        reasons.setdefault(best, []).append(f"best {objective.name}")
    extremes = list(reasons)
    knees = [int(k) for k in find_knees(front).knees] if count >= 3 else []
    for k in knees:
        reasons.setdefault(k, []).append("knee")
    start = list(dict.fromkeys(extremes + knees))
    if len(start) > n:
        start = list(dict.fromkeys(knees[:1] + extremes + knees[1:]))[:n]
    chosen = _greedy_hypervolume(scaled, start, n)
    labels = [", ".join(reasons.get(r, ["spread"])) for r in chosen]
    return np.asarray(chosen, dtype=int), labels


def _greedy_hypervolume(points: np.ndarray, start: list[int], n: int) -> list[int]:
    """Add to ``start`` the points of largest hypervolume gain (normalised, minimised) until ``n``."""
    count, m = points.shape
    chosen = list(start)
    # Only the non-dominated points are candidates: a dominated one adds nothing (and a copy of
    # a chosen point neither), and the two-objective gains below assume mutual non-dominance.
    open_ = np.asarray(moocore.is_nondominated(points), dtype=bool)
    open_[chosen] = False
    reference = np.full(m, REPRESENTATIVE_REFERENCE)
    if m > 2:
        open_ = _thinned(points, open_, _REPRESENTATIVE_CANDIDATES)
    if m == 2:
        while len(chosen) < n and open_.any():
            gain = np.where(open_, _gains_2d(points, points[chosen], reference), -np.inf)
            best = int(np.argmax(gain))
            chosen.append(best)
            open_[best] = False
        return chosen
    # Upper bounds of each gain: what a point adds beside any single chosen point (its box less
    # the overlap), and its last measured gain; both only shrink as the set grows.
    box = np.prod(reference - points, axis=1)
    bound = np.where(open_, box, -np.inf)
    for c in chosen:
        bound = np.minimum(bound, box - np.prod(reference - np.maximum(points, points[c]), axis=1))
    fresh = np.zeros(count, dtype=bool)
    while len(chosen) < n and np.isfinite(bound).any():
        best = int(np.argmax(bound))
        if not fresh[best]:
            subset = np.vstack([points[chosen], points[best]])
            bound[best] = float(moocore.hv_contributions(subset, ref=reference)[-1])
            fresh[best] = True
            continue
        chosen.append(best)
        bound[best] = -np.inf
        fresh[:] = False
        bound = np.minimum(
            bound, box - np.prod(reference - np.maximum(points, points[best]), axis=1)
        )
    return chosen


def _thinned(points: np.ndarray, open_: np.ndarray, limit: int) -> np.ndarray:
    """At most about ``limit`` of the open points, one a cell of an even grid over [0, 1]^M.

    In each cell the point nearest the ideal point (smallest sum) stands for the others.
    """
    rows = np.flatnonzero(open_)
    if len(rows) <= limit:
        return open_
    rows = rows[np.argsort(points[rows].sum(axis=1), kind="stable")]
    dimension = points.shape[1] - 1  # the front is a surface of one dimension less
    cells = int(np.ceil(limit ** (1.0 / dimension))) + 1
    while True:
        index = np.minimum(np.floor(points[rows] * cells), cells).astype(np.int64)
        key = index @ (cells + 1) ** np.arange(points.shape[1], dtype=np.int64)
        _, first = np.unique(key, return_index=True)
        if len(first) <= limit or cells <= 2:
            break
        cells = max(2, min(cells - 1, int(cells * (limit / len(first)) ** (1.0 / dimension))))
    kept = np.zeros_like(open_)
    kept[rows[first]] = True
    return kept


def _gains_2d(points: np.ndarray, chosen: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """The hypervolume each of ``points`` adds to ``chosen`` (two objectives, minimised).

    A point not dominated by the chosen ones adds the rectangle between it, the first
    objective of its right neighbour among them and the second of its left neighbour.
    """
    order = np.argsort(chosen[:, 0], kind="stable")
    x, y = chosen[order, 0], chosen[order, 1]
    at = np.searchsorted(x, points[:, 0], side="right")
    right = np.append(x, reference[0])[at]
    left = np.concatenate([[reference[1]], y])[at]
    return np.maximum(right - points[:, 0], 0.0) * np.maximum(left - points[:, 1], 0.0)


# --------------------------------------------------------------------------- distinct picks
#: By default two designs count as one for a review when they differ by no more than this share
#: of each objective's range over the front in every objective (our own rule of thumb).
DISTINCT_SHARE = 0.05


def separation(
    front: Front, tolerance: str | Mapping[str, float] | None = None, *, what: str = "tolerance"
) -> dict[str, float]:
    """How far apart, in each objective's units, two designs must be to count as different.

    Parameters
    ----------
    front : Front
        The front the designs come from; its ranges set the default.
    tolerance : str or dict, optional
        Engineering tolerances per objective name in the objective's units,
        as ``"mass=0.1,stiffness=1"`` or a mapping. Objectives left out take
        :data:`DISTINCT_SHARE` of their range over the front.
    what : str
        The option's name in error messages.

    Raises
    ------
    DataError
        When a name is not an objective of the front, or a value is not a
        finite number of at least 0.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [10.0, 12, 15, 20, 30], "mass": [100.0, 60, 40, 30, 25]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> separation(front, "mass=2")
    {'cost': 1.0, 'mass': 2.0}
    """
    given = parse_values(tolerance, what=what)
    check_objective_names(front, given, what)
    negative = [name for name, value in given.items() if value < 0]
    if negative:
        raise DataError(
            f"{what}: got {given[negative[0]]:g} for {negative[0]!r}, allowed: 0 or more "
            "in the objective's units"
        )
    points = front.points()
    spans = points.max(axis=0) - points.min(axis=0) if len(points) else np.zeros(points.shape[1])
    return {
        name: float(given.get(name, DISTINCT_SHARE * span))
        for name, span in zip(front.objective_names, spans, strict=True)
    }


def distinct_picks(
    front: Front,
    ranking: Sequence[int],
    *,
    top: int,
    tolerance: str | Mapping[str, float] | None = None,
) -> list[int]:
    """The first ``top`` designs of ``ranking`` that differ from each other by more than a tolerance.

    The ranking is walked best first, and a design is kept only when it
    differs from every design already kept by more than the tolerance in at
    least one objective: two designs within it in every objective are one
    design for a review, so neighbours on the front are never shown side by
    side. The first design of the ranking is always kept.

    Parameters
    ----------
    front : Front
        The front that ``ranking`` indexes (row positions in ``front.table``).
    ranking : sequence of int
        Row positions, most preferred first (such as :func:`tradewise.choose.choose` with a
        large ``top``).
    top : int
        How many designs at most.
    tolerance : str or dict, optional
        See :func:`separation`; default :data:`DISTINCT_SHARE` of each
        objective's range over ``front``.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [10.0, 12, 15, 20, 30], "mass": [100.0, 60, 40, 30, 25]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> distinct_picks(front, [2, 1, 3, 0, 4], top=3, tolerance="cost=4,mass=25")
    [2, 3, 0]
    """
    if isinstance(top, bool) or not isinstance(top, int | np.integer) or top < 1:
        raise DataError(f"top: expected a whole number of at least 1, got {top!r}")
    gaps = np.array(list(separation(front, tolerance).values()))
    ranking = np.asarray(ranking, dtype=int)
    points = front.points()[ranking]
    alive = np.ones(len(ranking), dtype=bool)
    kept: list[int] = []
    while len(kept) < top and alive.any():
        k = int(np.argmax(alive))  # the best design not within the tolerance of a kept one
        kept.append(int(ranking[k]))
        alive &= (np.abs(points - points[k]) > gaps).any(axis=1)
    return kept
