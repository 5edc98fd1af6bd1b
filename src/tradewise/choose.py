"""Choosing designs from a front: the knee and compromise methods, and the words that explain a pick.

Limits are read and applied in :mod:`tradewise.limits`; representative sets
and distinct picks live in :mod:`tradewise.represent`.

Over 800 lines (about 1,100) because the seven published methods each carry
their numpydoc, their citation and a worked example, and the front-level
layer above them (limits in force, knee verdicts, agreement between methods,
the plain-words description of a pick) is read together with them: splitting
the methods from the layer that calls them would put every change to a
method's behaviour in two files.
"""

from __future__ import annotations

import difflib
import re
import warnings
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass

import moocore
import numpy as np
import pandas as pd

from tradewise import format as _format
from tradewise.errors import DataError
from tradewise.front import Front, column_header, tradeoff_rates
from tradewise.limits import (
    Limit,
    check_objective_names,
    closest_miss,
    limit_mask,
    parse_limit,
    parse_values,
)

__all__ = [
    "METHODS",
    "KNEE_METHODS",
    "WEIGHTED_METHODS",
    "NonConvexWarning",
    "KNEE_MARGIN",
    "KNEE_SEPARATION",
    "KneeVerdict",
    "find_knees",
    "method_name",
    "normalised",
    "knee_distance",
    "tradeoff_measure",
    "kneedle",
    "pseudo_weights",
    "asf",
    "topsis",
    "weighted_sum",
    "supported",
    "scores",
    "choose",
    "all_picks",
    "knee_agreement",
    "agreeing_groups",
    "objective_ranks",
    "describe_choice",
]

#: Every method :func:`choose` knows, with a one-line description for users.
METHODS: dict[str, str] = {
    "knee": "the design farthest on the ideal side of the plane through the extreme designs "
    "(normalised objectives; Das 1999, Branke et al. 2004)",
    "trade-off": "the design that loses most per unit gained when moving to any other design "
    "(trade-off measure of Rachmawati and Srinivasan 2009, normalised objectives)",
    "kneedle": "the confirmed peak of the Kneedle difference curve, two objectives only "
    "(Satopaa et al. 2011)",
    "pseudo-weights": "the design whose pseudo-weights are closest to the given weights (Deb 2001)",
    "asf": "the design nearest the target by the achievement scalarizing function, "
    "weight = importance (Wierzbicki 1980)",
    "topsis": "closest to the best and farthest from the worst value of every objective "
    "(TOPSIS, Hwang and Yoon 1981)",
    "weighted-sum": "smallest weighted sum of normalised objectives; it cannot reach "
    "designs in non-convex parts of the front",
}

#: The methods that look for knees and need no preferences.
KNEE_METHODS = ("knee", "trade-off", "kneedle")
#: The methods that take weights (one per objective; weight = importance).
WEIGHTED_METHODS = ("pseudo-weights", "asf", "topsis", "weighted-sum")

_ASF_RHO = 1e-6
#: Columns of a run's tables that say how a design was evaluated or found, not what it is.
_BOOKKEEPING = frozenset(
    {"eval_id", "generation", "run_id", "status", "message", "duration", "worker", "cached",
     "feasible", "violation", "design_key", "rank", "data_row"}
)  # fmt: skip

#: How far (normalised objectives) a design must lie on the ideal side of the plane through
#: the extreme designs to count as a knee. Our own choice: a bulge of 2 % of every range.
KNEE_MARGIN = 0.02
#: Knees closer than this (Euclidean, normalised objectives) are one knee region; the strongest stands.
KNEE_SEPARATION = 0.2


class NonConvexWarning(UserWarning):
    """A weighted sum was asked to choose on a front that it cannot fully reach."""


# --------------------------------------------------------------------------- scaling
def normalised(front: Front) -> np.ndarray:
    """The objectives of ``front`` turned into minimisation and scaled to [0, 1] over the front.

    0 is the best value on the front (the ideal point) and 1 the worst (the
    nadir point); maximised objectives are flipped. An objective with one
    value on the whole front becomes 0.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [10.0, 20.0], "range": [30.0, 50.0]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("range", "max")])
    >>> normalised(front).tolist()
    [[0.0, 1.0], [1.0, 0.0]]
    """
    scaled, _, _ = _scaled(front)
    return scaled


def _scaled(front: Front) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(normalised F, ideal, nadir), ideal and nadir in the user's units and senses."""
    points = front.points()
    flip = np.asarray(front.maximise, dtype=bool)
    if len(points) == 0:
        width = len(front.objectives)
        return np.empty((0, width)), np.full(width, np.nan), np.full(width, np.nan)
    low, high = points.min(axis=0), points.max(axis=0)
    ideal = np.where(flip, high, low)
    nadir = np.where(flip, low, high)
    return _to_unit(points, ideal, nadir), ideal, nadir


def _to_unit(values: np.ndarray, ideal: np.ndarray, nadir: np.ndarray) -> np.ndarray:
    span = nadir - ideal  # negative for maximised objectives, which flips them
    safe = np.where(span == 0, 1.0, span)
    return np.where(span == 0, 0.0, (values - ideal) / safe) + 0.0  # no -0.0 from flipped columns


# --------------------------------------------------------------------------- array methods
def knee_distance(points: np.ndarray) -> np.ndarray:
    """Signed distance of each point from the plane through the extreme points.

    The extreme point of an objective is the point best in it (ties go to the
    smallest sum of the others). With ``M`` objectives the ``M`` extreme points
    span a plane ``n . f = 1``; the distance is ``(1 - n . f) / |n|``, positive
    on the side of the ideal point. The knee is the point with the largest
    distance (Das 1999; Branke et al. 2004; used as a knee definition by
    Zhang, Tian and Jin 2015, from memory). When the extreme points do not span a plane with
    positive intercepts, the plane ``sum(f) = 1`` is used instead.

    Parameters
    ----------
    points : (n, M) array
        Normalised objectives, all minimised (see :func:`normalised`).

    Returns
    -------
    numpy.ndarray
        One distance per point; all are zero or negative on a front that bulges
        away from the ideal point (no knee).

    References
    ----------
    Das, I. (1999). On characterizing the "knee" of the Pareto curve based on
    normal-boundary intersection. Structural Optimization 18:107-115 (from memory).
    Branke, J., Deb, K., Dierolf, H., Osswald, M. (2004). Finding knees in
    multi-objective optimization. PPSN VIII, LNCS 3242, pp. 722-731.

    Examples
    --------
    >>> knee_distance(np.array([[0, 1], [0.2, 0.3], [1, 0]])).round(4).tolist()
    [0.0, 0.3536, 0.0]
    """
    points = np.asarray(points, dtype=float)
    n, m = points.shape
    normal = np.ones(m)
    if n >= m:
        others = points.sum(axis=1)
        extremes = np.array(
            [np.lexsort((others - points[:, j], points[:, j]))[0] for j in range(m)]
        )
        if len(set(extremes.tolist())) == m:
            try:
                candidate = np.linalg.solve(points[extremes], np.ones(m))
            except np.linalg.LinAlgError:
                candidate = None
            if candidate is not None and np.all(np.isfinite(candidate)) and np.all(candidate > 0):
                normal = candidate
    return (1.0 - points @ normal) / np.linalg.norm(normal)


#: Up to this many points the trade-off measure compares every pair of points (exact).
_TRADEOFF_EXACT = 4000
#: Beyond it, each point is compared with its nearest neighbours and with this many points
#: spread over the front (our own choice: about 2 s for 10^5 points on two cores).
_TRADEOFF_NEAREST = 16
_TRADEOFF_SPREAD = 1500


def tradeoff_measure(
    points: np.ndarray, *, radius: float | None = None, exact_up_to: int = _TRADEOFF_EXACT
) -> np.ndarray:
    """The trade-off measure mu of each point (Rachmawati and Srinivasan 2009).

    Moving from point ``i`` to a neighbour ``j`` loses
    ``sum_m max(0, f_m(j) - f_m(i))`` and gains ``sum_m max(0, f_m(i) - f_m(j))``;
    ``T(i, j)`` is loss over gain, and ``mu(i)`` is the least ``T(i, j)`` over the
    neighbours. A large ``mu`` means every move away from ``i`` costs much more
    than it brings: a knee. The measure depends on scaling, so pass normalised
    objectives.

    Parameters
    ----------
    points : (n, M) array
        Normalised objectives, all minimised.
    radius : float, optional
        Neighbours are the points within this distance, and at least the
        ``2 M`` nearest (the neighbourhood pymoo's ``HighTradeoffPoints`` uses
        with radius 0.125). By default every other point is a neighbour.
    exact_up_to : int
        Without ``radius``, on up to this many points every pair is compared.
        On more, the neighbours of a point are its 16 nearest points and 1500
        points spread evenly over the range of ``sum(f)``; a least ratio over
        fewer neighbours can only be larger, so mu is then an upper bound of
        the every-point value (``tests/benchmarks/bench_pick.py`` measures
        how close it stays).

    Returns
    -------
    numpy.ndarray
        mu per point; ``nan`` where no neighbour offers any gain.

    References
    ----------
    Rachmawati, L., Srinivasan, D. (2009). Multiobjective evolutionary
    algorithm with controllable focus on the knees of the Pareto front. IEEE
    Transactions on Evolutionary Computation 13(4):810-824.

    Examples
    --------
    >>> F = np.array([[0, 1], [0.1, 0.5], [0.2, 0.3], [0.5, 0.1], [1, 0]])
    >>> tradeoff_measure(F).round(4).tolist()
    [0.2, 0.5, 1.5, 0.6667, 0.2]
    """
    points = np.asarray(points, dtype=float)
    n, m = points.shape
    if radius is None and n > exact_up_to:
        return _tradeoff_sampled(points)
    mu = np.full(n, np.nan)
    n_min = min(2 * m, n - 1)
    chunk = max(1, 4_000_000 // max(n * m, 1))
    for start in range(0, n, chunk):
        block = points[start : start + chunk]
        diff = points[None, :, :] - block[:, None, :]  # (b, n, m): from block row i to point j
        ratio = _loss_over_gain(diff)
        if radius is not None:
            dist = np.sqrt((diff**2).sum(axis=2))
            rows = np.arange(len(block))
            dist[rows, start + rows] = np.inf  # a point is not its own neighbour
            near = dist <= radius
            if n_min > 0:
                nearest = np.argsort(dist, axis=1, kind="stable")[:, :n_min]
                near[rows[:, None], nearest] = True
            ratio = np.where(near, ratio, np.inf)
        best = ratio.min(axis=1)
        mu[start : start + len(block)] = np.where(np.isfinite(best), best, np.nan)
    return mu


def _loss_over_gain(diff: np.ndarray) -> np.ndarray:
    """T for moves ``diff`` (..., M): loss over gain, ``inf`` where nothing is gained."""
    loss = np.maximum(diff, 0.0).sum(axis=-1)
    gain = np.maximum(-diff, 0.0).sum(axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(gain > 0, loss / np.where(gain > 0, gain, 1.0), np.inf)


def _least_move(origin: np.ndarray, others: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For each origin (b, M), the position among ``others`` (b or 1, k, M) of least q, and that q."""
    total = np.zeros((len(origin), others.shape[1]))
    length = np.zeros_like(total)
    for j in range(origin.shape[1]):
        d = others[:, :, j] - origin[:, j][:, None]
        total += d
        length += np.abs(d)
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.where(length > 0, total / length, np.inf)
    at = np.argmin(q, axis=1)
    return at, q[np.arange(len(q)), at]


def _tradeoff_sampled(points: np.ndarray) -> np.ndarray:
    """mu over the nearest points and a spread of points (see :func:`tradeoff_measure`)."""
    from scipy.spatial import cKDTree

    n, m = points.shape
    _, nearest = cKDTree(points).query(points, k=min(_TRADEOFF_NEAREST + 1, n))
    by_sum = np.argsort(points.sum(axis=1), kind="stable")
    spread = by_sum[np.unique(np.linspace(0, n - 1, min(_TRADEOFF_SPREAD, n)).round().astype(int))]
    best = np.empty(n, dtype=int)
    chunk = max(1, 2_000_000 // len(spread))
    for start in range(0, n, chunk):
        rows = slice(start, min(start + chunk, n))
        # with L + G = |d|_1 and L - G = sum(d), T = L / G = (1 + q) / (1 - q) for
        # q = sum(d) / |d|_1, so the least T is the least q: cheap on (rows, others) arrays
        far, far_q = spread, _least_move(points[rows], points[spread][None, :, :])
        near = nearest[rows]
        near_q = _least_move(points[rows], points[near])
        pick_near = near_q[1] < far_q[1]
        at = np.arange(len(near))
        best[rows] = np.where(pick_near, near[at, near_q[0]], far[far_q[0]])
    mu = _loss_over_gain(points[best] - points)  # the exact T of each point's best move
    return np.where(np.isfinite(mu), mu, np.nan)


def kneedle(points: np.ndarray, *, sensitivity: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Kneedle on a two-objective front (Satopaa, Albrecht, Irwin and Raghavan 2011).

    The front is read as a curve of the second objective against the first,
    both normalised and minimised, so it is convex and decreasing. Its
    difference curve is ``y_d = (1 - y) - x``; every local maximum of ``y_d``
    is a candidate, and it is confirmed as a knee when ``y_d`` drops below
    ``y_d(max) - sensitivity * mean(dx)`` before the next local maximum. No
    smoothing is applied, and every confirmed knee is reported.

    Parameters
    ----------
    points : (n, 2) array
        Normalised objectives, both minimised.
    sensitivity : float
        The paper's ``S``; larger values confirm fewer knees.

    Returns
    -------
    difference : numpy.ndarray
        ``y_d`` for each point, in the order given.
    knees : numpy.ndarray
        Positions of the confirmed knees, in order of increasing first objective.

    References
    ----------
    Satopaa, V., Albrecht, J., Irwin, D., Raghavan, B. (2011). Finding a
    "Kneedle" in a haystack: detecting knee points in system behavior. 31st
    ICDCS Workshops, pp. 166-171.

    Examples
    --------
    >>> F = np.array([[0, 1], [0.1, 0.5], [0.2, 0.3], [0.5, 0.1], [1, 0]])
    >>> diff, knees = kneedle(F)
    >>> knees.tolist()
    [2]
    """
    points = np.asarray(points, dtype=float)
    if points.ndim != 2 or points.shape[1] != 2:
        raise DataError(
            f"kneedle works on two objectives, got {points.shape[-1] if points.ndim == 2 else 0}"
        )
    n = len(points)
    order = np.lexsort((points[:, 1], points[:, 0]))
    x, y = moocore.normalise(points[order]).T
    curve = (1.0 - y) - x
    difference = np.empty(n)
    difference[order] = curve
    if n < 3:
        return difference, np.zeros(0, dtype=int)
    step = float(np.mean(np.diff(x)))
    peaks = [i for i in range(1, n - 1) if curve[i] > curve[i - 1] and curve[i] >= curve[i + 1]]
    knees = []
    for k, peak in enumerate(peaks):
        threshold = curve[peak] - sensitivity * step
        stop = peaks[k + 1] if k + 1 < len(peaks) else n
        if np.any(curve[peak + 1 : stop] < threshold):
            knees.append(order[peak])
    return difference, np.asarray(knees, dtype=int)


def pseudo_weights(points: np.ndarray) -> np.ndarray:
    """Pseudo-weight vector of each point (Deb 2001, section 8.4).

    ``w_i = (f_i^max - f_i) / (f_i^max - f_i^min)``, divided by its sum over the
    objectives: how near each objective is to its best on the set, as shares.

    Parameters
    ----------
    points : (n, M) array
        Objectives, all minimised (any scale: the result does not depend on it).

    References
    ----------
    Deb, K. (2001). Multi-Objective Optimization using Evolutionary
    Algorithms. Wiley.

    Examples
    --------
    >>> pseudo_weights(np.array([[0, 1], [0.2, 0.3], [1, 0]])).round(4).tolist()
    [[1.0, 0.0], [0.5333, 0.4667], [0.0, 1.0]]
    """
    points = np.asarray(points, dtype=float)
    low, high = points.min(axis=0), points.max(axis=0)
    span = np.where(high > low, high - low, 1.0)
    share = np.where(high > low, (high - points) / span, 1.0)
    total = share.sum(axis=1, keepdims=True)
    m = points.shape[1]
    return np.where(total > 0, share / np.where(total > 0, total, 1.0), 1.0 / m)


def asf(
    points: np.ndarray,
    *,
    target: Sequence[float] | None = None,
    weights: Sequence[float] | None = None,
    rho: float = _ASF_RHO,
) -> np.ndarray:
    """Augmented achievement scalarizing function (Wierzbicki 1980); smaller is better.

    ``s(f) = max_i w_i (f_i - z_i) + rho * sum_i w_i (f_i - z_i)`` with the
    target ``z``. **The weights multiply**: a larger weight means the objective
    matters more and the chosen design comes closer to the target in it.
    (pymoo's ``ASF`` divides by the weights, the opposite convention.)

    Parameters
    ----------
    points : (n, M) array
        Normalised objectives, all minimised.
    target : sequence of float, optional
        The reference point ``z`` on the same scale; default the ideal point 0.
    weights : sequence of float, optional
        Importance of each objective; default equal. They are scaled to sum 1.
    rho : float
        The augmentation that breaks ties towards Pareto-optimal designs.

    References
    ----------
    Wierzbicki, A. P. (1980). The use of reference objectives in
    multiobjective optimization. In Fandel, G., Gal, T. (eds.) Multiple
    Criteria Decision Making Theory and Application, Springer, pp. 468-486.

    Examples
    --------
    >>> F = np.array([[0, 1], [0.1, 0.5], [0.2, 0.3], [0.5, 0.1], [1, 0]])
    >>> asf(F, weights=[0.8, 0.2], rho=0).round(4).tolist()
    [0.2, 0.1, 0.16, 0.4, 0.8]
    """
    points = np.asarray(points, dtype=float)
    m = points.shape[1]
    z = np.zeros(m) if target is None else np.asarray(target, dtype=float)
    w = _unit_weights(weights, m)
    gap = w * (points - z)
    return gap.max(axis=1) + rho * gap.sum(axis=1)


def topsis(
    values: np.ndarray,
    *,
    weights: Sequence[float] | None = None,
    benefit: Sequence[bool] | None = None,
) -> np.ndarray:
    """TOPSIS relative closeness of each alternative (Hwang and Yoon 1981); larger is better.

    Each column is divided by its root sum of squares and multiplied by its
    weight; the positive ideal takes the best value of each column (largest
    for a benefit, smallest for a cost) and the negative ideal the worst.
    ``C = S- / (S+ + S-)`` with ``S+``, ``S-`` the Euclidean distances to them.

    Parameters
    ----------
    values : (n, M) array
        The raw values in their own units (the vector normalisation assumes a
        meaningful zero).
    weights : sequence of float, optional
        Importance of each criterion; default equal; scaled to sum 1.
    benefit : sequence of bool, optional
        True where larger is better; default every criterion is a cost.

    References
    ----------
    Hwang, C.-L., Yoon, K. (1981). Multiple Attribute Decision Making: Methods
    and Applications. Springer, Berlin (LNEMS vol. 186).

    Examples
    --------
    >>> X = np.array([[6, 2], [7, 2.75], [10, 3.5]])
    >>> topsis(X, benefit=[False, True]).round(4).tolist()
    [0.4889, 0.6121, 0.5111]
    """
    values = np.asarray(values, dtype=float)
    m = values.shape[1]
    w = _unit_weights(weights, m)
    good = np.zeros(m, dtype=bool) if benefit is None else np.asarray(benefit, dtype=bool)
    norm = np.sqrt((values**2).sum(axis=0))
    scaled = w * values / np.where(norm > 0, norm, 1.0)
    best = np.where(good, scaled.max(axis=0), scaled.min(axis=0))
    worst = np.where(good, scaled.min(axis=0), scaled.max(axis=0))
    s_best = np.sqrt(((scaled - best) ** 2).sum(axis=1))
    s_worst = np.sqrt(((scaled - worst) ** 2).sum(axis=1))
    total = s_best + s_worst
    return np.where(total > 0, s_worst / np.where(total > 0, total, 1.0), 1.0)


def weighted_sum(points: np.ndarray, *, weights: Sequence[float] | None = None) -> np.ndarray:
    """Weighted sum of normalised, minimised objectives; smaller is better.

    A weighted sum only ever picks designs on the convex hull of the front:
    designs in non-convex (dented) parts cannot be reached by any weights
    (Das and Dennis 1997). Use :func:`asf` to reach them; :func:`supported`
    says which designs a weighted sum can pick.

    References
    ----------
    Das, I., Dennis, J. E. (1997). A closer look at drawbacks of minimizing
    weighted sums of objectives for Pareto set generation in multicriteria
    optimization problems. Structural Optimization 14:63-69 (from memory).

    Examples
    --------
    >>> weighted_sum(np.array([[0, 1], [0.2, 0.3], [1, 0]])).round(4).tolist()
    [0.5, 0.25, 0.5]
    """
    points = np.asarray(points, dtype=float)
    return points @ _unit_weights(weights, points.shape[1])


def supported(points: np.ndarray) -> np.ndarray | None:
    """Which points some weighted sum with non-negative weights can pick.

    Exact for two objectives: point ``i`` is picked by weights ``(w, 1 - w)``
    when ``w f_1 + (1 - w) f_2`` at ``i`` is no larger than the lower envelope
    ``h(w) = min_j (w f_1(j) + (1 - w) f_2(j))`` for some ``w`` in [0, 1]. The
    gap between the two is convex in ``w`` and smallest at a corner of the
    envelope, found by bisection on the envelope's slopes, so the check takes
    ``O(n log n)``. For three or more objectives the check needs linear
    programming and is not done: the result is ``None``.
    """
    points = np.asarray(points, dtype=float)
    n, m = points.shape
    if m != 2:
        return None
    if n == 0:
        return np.zeros(0, dtype=bool)
    corners, heights, slopes = _lower_envelope(points[:, 1], points[:, 0] - points[:, 1])
    own = points[:, 0] - points[:, 1]  # slope of w -> w f_1 + (1 - w) f_2 for each point
    # the gap's slope own - h'(w) rises with w; it changes sign at the corner after the last
    # envelope piece steeper than the point's own line; its neighbours guard against ties
    at = np.searchsorted(-slopes, -own, side="left")
    gap = np.full(n, np.inf)
    for shift in (-1, 0, 1):
        k = np.clip(at + shift, 0, len(corners) - 1)
        w = corners[k]
        gap = np.minimum(gap, w * points[:, 0] + (1 - w) * points[:, 1] - heights[k])
    scale = np.abs(points).max() if np.isfinite(points).all() else 1.0
    return gap <= 1e-9 * max(scale, 1.0)


def _lower_envelope(
    intercepts: np.ndarray, slopes: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Corners (w in [0, 1]), heights there and the slopes of the pieces of ``min_j (b_j + s_j w)``.

    ``slopes[p]`` is the slope of the piece that starts at ``corners[p]``; the
    corners run from 0 to 1 and the slopes fall.
    """
    order = np.lexsort((intercepts, -slopes))  # steepest first; equal slopes: lowest first
    stack: list[int] = []
    starts: list[float] = []
    for j in order.tolist():
        b, s = intercepts[j], slopes[j]
        if stack and slopes[stack[-1]] == s:
            continue  # same slope, higher or equal line
        while stack:
            top = stack[-1]
            # where the new line crosses the top line (the new one is flatter, so lower after it)
            cross = (b - intercepts[top]) / (slopes[top] - s)
            if cross <= starts[-1]:
                stack.pop()
                starts.pop()
            else:
                break
        cross = (b - intercepts[stack[-1]]) / (slopes[stack[-1]] - s) if stack else -np.inf
        stack.append(j)
        starts.append(cross)
    lines = np.asarray(stack)
    begin = np.asarray(starts, dtype=float)
    end = np.append(begin[1:], np.inf)
    keep = (end > 0) & (begin < 1)
    lines, begin = lines[keep], np.clip(begin[keep], 0.0, 1.0)
    corners = np.append(begin, 1.0)
    piece = np.append(np.arange(len(lines)), len(lines) - 1)
    heights = intercepts[lines[piece]] + slopes[lines[piece]] * corners
    return corners, heights, np.append(slopes[lines], slopes[lines[-1]])


def _unit_weights(weights: Sequence[float] | None, m: int) -> np.ndarray:
    if weights is None:
        return np.full(m, 1.0 / m)
    w = np.asarray(weights, dtype=float)
    return w / w.sum()


# --------------------------------------------------------------------------- front level
def scores(
    front: Front,
    method: str,
    *,
    weights: Mapping[str, float] | None = None,
    target: Mapping[str, float] | None = None,
) -> np.ndarray:
    """One score per design of ``front`` by ``method``; larger means more preferred.

    Where the published quantity is smaller-is-better (ASF, weighted sum, the
    distance between pseudo-weights and the asked weights) the score is its
    negative, so every method ranks the same way.

    Parameters
    ----------
    front : Front
        The designs to score (apply limits first, see :func:`tradewise.limits.apply_limits`).
    method : str
        A key of :data:`METHODS`.
    weights : dict, optional
        Importance per objective name, for the methods in
        :data:`WEIGHTED_METHODS`; objectives left out weigh 1. Default equal.
    target : dict, optional
        For ``asf`` only: the target value per objective name in the
        objective's units; objectives left out take their best value on the
        front. Default the ideal point.

    Warns
    -----
    NonConvexWarning
        For ``weighted-sum`` on a front with designs no weights can reach.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [10, 12, 15, 20, 30], "mass": [100, 60, 40, 30, 25]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> int(np.argmax(scores(front, "knee")))
    2
    """
    method = method_name(method)
    _check_method(method, front, weights=weights, target=target)
    scaled, ideal, nadir = _scaled(front)
    if method == "knee":
        return knee_distance(scaled)
    if method == "trade-off":
        return tradeoff_measure(scaled)
    if method == "kneedle":
        return kneedle(scaled)[0]
    w = _weight_vector(front, weights)
    if method == "pseudo-weights":
        return -np.abs(pseudo_weights(scaled) - w / w.sum()).sum(axis=1)
    if method == "asf":
        z = _target_vector(front, target, ideal)
        return -asf(scaled, target=_to_unit(z, ideal, nadir), weights=w)
    if method == "topsis":
        return topsis(front.points(), weights=w, benefit=front.maximise)
    reachable = supported(scaled)
    if reachable is None:
        warnings.warn(
            "weighted sum: designs in non-convex parts of a front cannot be picked by any weights, "
            "and with three or more objectives tradewise does not check whether this front has such parts",
            NonConvexWarning,
            stacklevel=2,
        )
    elif not reachable.all():
        warnings.warn(
            f"weighted sum: {int((~reachable).sum())} of {len(reachable)} designs lie in non-convex parts "
            "of the front and no weights can pick them; use 'asf' to reach them",
            NonConvexWarning,
            stacklevel=2,
        )
    return -weighted_sum(scaled, weights=w)


@dataclass(frozen=True)
class KneeVerdict:
    """Whether a front has a knee, which designs are knees, and what stands out when none is.

    ``knees`` are row positions in the front's table, strongest first; an empty
    tuple means the front has no knee, and ``instead`` is then the row of the
    design closest to the ideal point in normalised objectives. ``message``
    says so in one sentence.
    """

    knees: tuple[int, ...]
    instead: int | None
    message: str

    @property
    def has_knee(self) -> bool:
        """True when the front has at least one knee."""
        return bool(self.knees)


def find_knees(front: Front, *, limits: Iterable[Limit | str] = ()) -> KneeVerdict:
    """The knees of ``front``, or a plain statement that it has none.

    A knee is a design that (1) lies at least :data:`KNEE_MARGIN` on the ideal
    side of the plane through the extreme designs (normalised objectives, see
    :func:`knee_distance`), (2) bulges more than its neighbours (its distance is
    the largest among its ``2 M`` nearest designs) and (3) is best in no
    objective: an extreme or a design on the edge of the front is a corner, not
    a knee (with three or more objectives, within :data:`KNEE_MARGIN` of the
    best counts as the best, so noise does not turn an edge into knees). A knee
    must also bulge most of all designs within :data:`KNEE_SEPARATION` of it,
    and of knees closer than that only the strongest is kept: one knee a
    region, however densely or noisily the front is sampled. The neighbourhood
    is a share of the front's extent, not a count of designs, as in the knee
    neighbourhoods of Zhang, Tian and Jin (2015, from memory), who also take
    the bulge beyond the extreme plane as the knee measure; the bulge itself is
    that of Das (1999, from memory). A front that is flat or bulges away from the ideal point has no
    knee; the design closest to the ideal point (Euclidean distance in
    normalised objectives, compromise programming) is offered instead.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [0.0, 0.5, 1.0], "mass": [1.0, 0.6, 0.0]})
    >>> verdict = find_knees(Front.from_table(table, [Objective("cost"), Objective("mass")]))
    >>> verdict.has_knee, verdict.instead
    (False, 1)
    """
    limits = [parse_limit(limit) for limit in limits]
    rows = np.flatnonzero(limit_mask(front, limits))
    if len(rows) == 0:
        raise DataError("the front holds no designs to choose from")
    scaled = normalised(front.with_table(front.table.iloc[rows]))
    knees = _knee_positions(scaled)
    if len(knees):
        found = tuple(int(rows[k]) for k in knees)
        shown = ", ".join(front.design_name(r) for r in found[:5]) + (
            ", ..." if len(found) > 5 else ""
        )
        word = "knee" if len(found) == 1 else "knees"
        return KneeVerdict(
            found,
            None,
            f"{len(found)} {word} ({shown}): designs that bulge toward the ideal point at least "
            f"{KNEE_MARGIN:g} (normalised) beyond the plane through the extreme designs",
        )
    instead = int(rows[int(np.argmin(np.linalg.norm(scaled, axis=1)))])
    return KneeVerdict(
        (),
        instead,
        f"this front has no knee: no design other than its corners lies {KNEE_MARGIN:g} (normalised) "
        f"or more toward the ideal point beyond the plane through its extreme designs; "
        f"{front.design_name(instead)}, the design closest to the ideal point in normalised "
        "objectives, "
        "is offered instead",
    )


def _knee_positions(scaled: np.ndarray) -> np.ndarray:
    """Positions of the knees among normalised points, strongest first (see :func:`find_knees`)."""
    n, m = scaled.shape
    if n < 3:
        return np.zeros(0, dtype=int)
    from scipy.spatial import cKDTree

    distance = knee_distance(scaled)
    _, nearest = cKDTree(scaled).query(scaled, k=min(2 * m, n - 1) + 1)
    bulges = distance >= distance[nearest[:, 1:]].max(axis=1)
    # Best in no objective. With three or more objectives the front has edges (designs best in
    # one objective that trade the others off), and noise breaks their ties at the best, so an
    # edge turns into a thin band of designs; within KNEE_MARGIN of the best counts as the best
    # there, by the same scale that the margin sets for a bulge that matters. A design near the
    # best in every objective is a sharp corner toward the ideal point, which is a knee.
    near = scaled <= (KNEE_MARGIN if m >= 3 else 1e-12)
    inside = ~near.any(axis=1) | near.all(axis=1)
    knees = np.flatnonzero(bulges & inside & (distance >= KNEE_MARGIN))
    knees = knees[np.argsort(-distance[knees], kind="stable")]
    # One knee a region: a weaker local bulge within KNEE_SEPARATION of a stronger knee is the same
    # knee seen through noise or dense sampling, so the count does not grow with the number of designs.
    tree = cKDTree(scaled)
    kept: list[int] = []
    for k in knees:
        around = tree.query_ball_point(scaled[k], KNEE_SEPARATION)
        if distance[around].max() <= distance[k] and all(
            np.linalg.norm(scaled[k] - scaled[j]) >= KNEE_SEPARATION for j in kept
        ):
            kept.append(int(k))
    return np.asarray(kept, dtype=int)


def choose(
    front: Front,
    method: str = "knee",
    *,
    weights: Mapping[str, float] | None = None,
    target: Mapping[str, float] | None = None,
    limits: Iterable[Limit | str] = (),
    top: int = 1,
) -> list[int]:
    """Row positions in ``front.table`` of the ``top`` designs preferred by ``method``.

    Limits are applied first; the method then sees only the designs that meet
    them (normalisation included). The knee methods rank knees first:
    ``knee`` the knees of :func:`find_knees` by their bulge, ``trade-off`` the
    same knees by mu, ``kneedle`` its confirmed knees. On a front without a
    knee they put the design closest to the ideal point first instead (see
    :func:`find_knees`, which says so), never a corner. Ties keep table order.

    Parameters
    ----------
    front : Front
        The front to choose from.
    method : str
        A key of :data:`METHODS`; default ``"knee"``.
    weights, target : dict, optional
        See :func:`scores`.
    limits : iterable of Limit or str
        Limits such as ``"mass <= 12"``.
    top : int
        How many designs to return, best first.

    Raises
    ------
    DataError
        For an unknown method, bad weights or target, a bad limit, or when no
        design meets the limits.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [10, 12, 15, 20, 30], "mass": [100, 60, 40, 30, 25]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> choose(front, "asf", weights={"cost": 4, "mass": 1})
    [1]
    """
    if isinstance(top, bool) or not isinstance(top, int | np.integer) or top < 1:
        raise DataError(f"top: expected a whole number of at least 1, got {top!r}")
    method = method_name(method)
    limits = [parse_limit(limit) for limit in limits]
    rows = np.flatnonzero(limit_mask(front, limits))
    if len(rows) == 0:
        if limits:
            raise DataError(
                f"no design of {len(front)} meets the limits {' and '.join(map(str, limits))}; "
                f"{closest_miss(front, limits)}"
            )
        raise DataError("the front holds no designs to choose from")
    sub = front.with_table(front.table.iloc[rows]) if len(rows) < len(front) else front
    value = np.nan_to_num(
        scores(sub, method, weights=weights, target=target), nan=-np.inf, posinf=np.inf
    )
    order = np.argsort(-value, kind="stable")
    if method in KNEE_METHODS:
        scaled = normalised(sub)
        if method == "kneedle":
            first = kneedle(scaled)[1].tolist()
        else:
            knees = _knee_positions(scaled)
            # the knee method ranks the knees by their bulge; the trade-off measure ranks them by mu
            first = (
                knees.tolist()
                if method == "knee"
                else [k for k in order if k in set(knees.tolist())]
            )
        if not first:  # no knee: the design closest to the ideal point stands in
            first = [int(np.argmin(np.linalg.norm(scaled, axis=1)))]
        chosen = set(first)
        order = np.concatenate([first, [k for k in order if k not in chosen]]).astype(int)
    return [int(rows[k]) for k in order[:top]]


def all_picks(
    front: Front,
    *,
    weights: Mapping[str, float] | None = None,
    target: Mapping[str, float] | None = None,
    limits: Iterable[Limit | str] = (),
) -> dict[str, int]:
    """The first choice of every method that applies to ``front`` (method name to row position).

    ``weights`` go to the weighted methods and ``target`` to ``asf``; Kneedle
    is left out for more than two objectives.
    """
    limits = [parse_limit(limit) for limit in limits]
    picks = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NonConvexWarning)
        for method in METHODS:
            if method == "kneedle" and len(front.objectives) != 2:
                continue
            picks[method] = choose(
                front,
                method,
                weights=weights if method in WEIGHTED_METHODS else None,
                target=target if method == "asf" else None,
                limits=limits,
            )[0]
    return picks


def knee_agreement(front: Front, *, limits: Iterable[Limit | str] = ()) -> dict[str, int]:
    """The knee each knee method finds (method name to row position in ``front.table``).

    Runs ``knee`` and ``trade-off``, and ``kneedle`` on two objectives. Use
    :func:`agreeing_groups` to see where they agree. Empty when the front has
    no knee (:func:`find_knees` says what stands out instead).

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [10, 12, 15, 20, 30], "mass": [100, 60, 40, 30, 25]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> knee_agreement(front)
    {'knee': 2, 'trade-off': 2, 'kneedle': 2}
    """
    limits = [parse_limit(limit) for limit in limits]
    if not find_knees(front, limits=limits).has_knee:
        return {}
    methods = [m for m in KNEE_METHODS if m != "kneedle" or len(front.objectives) == 2]
    return {m: choose(front, m, limits=limits)[0] for m in methods}


def agreeing_groups(picks: Mapping[str, int]) -> list[tuple[int, list[str]]]:
    """Group methods by the design they picked, largest group first.

    Examples
    --------
    >>> agreeing_groups({"knee": 4, "trade-off": 7, "kneedle": 4})
    [(4, ['knee', 'kneedle']), (7, ['trade-off'])]
    """
    groups: dict[int, list[str]] = {}
    for method, row in picks.items():
        groups.setdefault(int(row), []).append(method)
    return sorted(groups.items(), key=lambda item: -len(item[1]))


def objective_ranks(front: Front) -> pd.DataFrame:
    """Rank of each design in each objective, 1 being the best on the front (ties share the best rank)."""
    ranks = {}
    for o in front.objectives:
        ranks[o.name] = (
            front.table[o.name]
            .astype(float)
            .rank(method="min", ascending=not o.maximise)
            .astype(int)
        )
    return pd.DataFrame(ranks, index=front.table.index)


# --------------------------------------------------------------------------- checks
def method_name(text: str) -> str:
    """The method a user meant: case, spaces and underscores forgiven, ``tradeoff`` read as ``trade-off``.

    Raises
    ------
    DataError
        For a name that is none of :data:`METHODS`, with the closest one suggested.

    Examples
    --------
    >>> method_name("Knee"), method_name("tradeoff"), method_name("Weighted_Sum")
    ('knee', 'trade-off', 'weighted-sum')
    """
    key = re.sub(r"[\s_]+", "-", str(text).strip().lower())
    key = _METHOD_ALIASES.get(key.replace("-", ""), key)
    if key in METHODS:
        return key
    close = difflib.get_close_matches(key, list(METHODS), n=1, cutoff=0.6)
    hint = f" (did you mean {close[0]!r}?)" if close else ""
    raise DataError(f"method {text!r} is not known{hint}; choose one of {', '.join(METHODS)}")


_METHOD_ALIASES = {m.replace("-", ""): m for m in ("trade-off", "pseudo-weights", "weighted-sum")}


def _check_method(
    method: str,
    front: Front,
    *,
    weights: Mapping[str, float] | None,
    target: Mapping[str, float] | None,
) -> None:
    if method not in METHODS:
        method_name(method)  # raises, naming the closest method
    # a misspelt objective in the preferences is the likelier mistake: name it first
    if weights:
        check_objective_names(front, parse_values(weights, what="weights"), "weights")
    if target:
        check_objective_names(front, parse_values(target, what="target"), "target")
    if method == "kneedle" and len(front.objectives) != 2:
        raise DataError(
            f"method 'kneedle' works on two objectives; this front has {len(front.objectives)}"
        )
    if weights and method not in WEIGHTED_METHODS:
        raise DataError(
            f"method {method!r} takes no weights; weights go with {', '.join(WEIGHTED_METHODS)}"
        )
    if target and method != "asf":
        raise DataError(f"method {method!r} takes no target; a target goes with 'asf'")
    if len(front) == 0:
        raise DataError("the front holds no designs to choose from")


def _weight_vector(front: Front, weights: Mapping[str, float] | None) -> np.ndarray:
    weights = parse_values(weights, what="weights")
    check_objective_names(front, weights, "weights")
    w = np.array([weights.get(name, 1.0) for name in front.objective_names], dtype=float)
    if np.any(w < 0) or w.sum() <= 0:
        shown = ", ".join(f"{n}={v:g}" for n, v in zip(front.objective_names, w, strict=True))
        raise DataError(f"weights {shown}: expected numbers of at least 0, not all 0")
    return w


def _target_vector(
    front: Front, target: Mapping[str, float] | None, ideal: np.ndarray
) -> np.ndarray:
    target = parse_values(target, what="target")
    check_objective_names(front, target, "target")
    return np.array(
        [target.get(name, ideal[j]) for j, name in enumerate(front.objective_names)], dtype=float
    )


# --------------------------------------------------------------------------- words
def describe_choice(
    front: Front,
    rows: Sequence[int],
    *,
    method: str,
    weights: Mapping[str, float] | None = None,
    target: Mapping[str, float] | None = None,
    limits: Iterable[Limit | str] = (),
) -> list[str]:
    """Plain lines describing the chosen designs, for a terminal or a text report.

    For each design: its objectives with units and rank in each objective,
    its variables and other columns, the trade-off rates to its neighbours,
    its hypervolume contribution and the other methods that pick it; then
    where the knee methods agree. Ranks and rates are taken among the designs
    that meet the limits. A design is named as every view names it
    (:meth:`Front.design_name`): by its evaluation number in a run, by its
    data row (or key) in a user's CSV.
    """
    limits = [parse_limit(limit) for limit in limits]
    keep = np.flatnonzero(limit_mask(front, limits))
    sub = front.with_table(front.table.iloc[keep])
    position = {int(row): k for k, row in enumerate(keep)}
    names = ", ".join(f"{column_header(o.name, o.unit)} ({o.goal})" for o in front.objectives)
    lines = [f"Front: {len(front)} designs; objectives {names}."]
    if limits:
        lines.append(f"{len(sub)} of them meet the limits {' and '.join(map(str, limits))}.")
    method = method_name(method)
    lines.append(f"Method: {method}, {METHODS[method]}.")
    verdict = find_knees(front, limits=limits)
    if method in KNEE_METHODS:
        lines.append(f"{verdict.message[0].upper()}{verdict.message[1:]}.")
    ranks = objective_ranks(sub)
    picks = all_picks(front, weights=weights, target=target, limits=limits)
    contributions = front.contributions()
    total = front.hypervolume()
    objective_names = set(front.objective_names)
    variables = [v for v in front.variables if v in front.table.columns]
    # what a design is and does; how it was evaluated (time taken, worker, ...) is bookkeeping
    others = [
        c
        for c in front.table.columns
        if c not in objective_names
        and c not in variables
        and c not in _BOOKKEEPING
        and c != front.identity_column()
    ]
    for choice, row in enumerate(rows, start=1):
        k = position[int(row)]
        record = front.table.iloc[int(row)]
        lines.append("")
        lines.append(f"Choice {choice}: {front.design_name(int(row))}")
        width = max(len(o.name) for o in front.objectives)
        for o in front.objectives:
            value = f"{_format.value(record[o.name])} {o.unit}".strip()
            lines.append(
                f"  {o.name:<{width}}  {value:<16} rank {int(ranks.iloc[k][o.name])} of {len(sub)} ({o.goal})"
            )
        for title, columns in (("variables", variables), ("other columns", others)):
            if columns:
                shown = ", ".join(
                    f"{c} = {_format.quantity(record[c], front.units.get(c))}" for c in columns
                )
                lines.append(f"  {title}: {shown}")
        if "generation" in record.index and _format.value(record["generation"]) != _format.MISSING:
            lines.append(f"  found in generation {int(record['generation'])} of the run")
        if len(sub) > 1:
            rates = tradeoff_rates(sub, k)
            for _, rate in rates.iterrows():
                if rate["neighbour"] >= 0:
                    lines.append(
                        f"  to {front.design_name(int(keep[int(rate['neighbour'])]))}: {rate['text']}"
                    )
                else:
                    lines.append(f"  locally: {rate['text']}")
            if len(front.objectives) > 2:
                lines.extend(_nearest_moves(sub, k))
        if total > 0:
            part = contributions[int(row)] / total
            lines.append(
                f"  hypervolume contribution: {_format.share(part) if part >= 0.0005 else 'under 0.1 %'} "
                "of the front's, covered by this design alone"
            )
        agree = [m for m, r in picks.items() if r == int(row) and m != method]
        lines.append(
            f"  also picked by: {', '.join(agree)}" if agree else "  no other method picks it first"
        )
    knees = {m: r for m, r in picks.items() if m in KNEE_METHODS}
    groups = agreeing_groups(knees)
    lines.append("")
    if not verdict.has_knee:
        lines.append(
            f"Knee methods: the front has no knee; {front.design_name(verdict.instead)} is the design "
            "closest to the ideal point."
        )
    elif len(groups) == 1:
        lines.append(
            f"Knee methods: {', '.join(groups[0][1])} all point at {front.design_name(groups[0][0])}."
        )
    else:
        parts = "; ".join(f"{', '.join(ms)} at {front.design_name(r)}" for r, ms in groups)
        lines.append(f"Knee methods differ: {parts}.")
    return lines


def _nearest_moves(front: Front, k: int, n_moves: int = 3) -> list[str]:
    """The changes in every objective from design ``k`` to its nearest designs (normalised distance)."""
    scaled = normalised(front)
    distance = np.linalg.norm(scaled - scaled[k], axis=1)
    distance[k] = np.inf
    points = front.points()
    lines = []
    for j in np.argsort(distance, kind="stable")[: min(n_moves, len(front) - 1)]:
        changes = ", ".join(
            f"{o.name} {points[j, m] - points[k, m]:+.3g}{' ' + o.unit if o.unit else ''}"
            for m, o in enumerate(front.objectives)
        )
        lines.append(f"  near {front.design_name(int(j))}: {changes}")
    return lines
