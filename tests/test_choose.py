"""Tests of choose.py: knee and compromise methods against published knees, hand-worked
examples and pymoo, limits, representative sets and distinct picks."""

from __future__ import annotations

import itertools
import math
import warnings

import moocore
import numpy as np
import pandas as pd
import pytest

from tradewise.case import Objective
from tradewise.choose import (
    METHODS,
    NonConvexWarning,
    agreeing_groups,
    all_picks,
    asf,
    choose,
    describe_choice,
    find_knees,
    knee_agreement,
    knee_distance,
    kneedle,
    normalised,
    objective_ranks,
    pseudo_weights,
    scores,
    supported,
    topsis,
    tradeoff_measure,
    weighted_sum,
)
from tradewise.errors import DataError
from tradewise.front import Front
from tradewise.limits import Limit, apply_limits, parse_limit, parse_values
from tradewise.represent import distinct_picks, representatives, representatives_table, separation

# Worked examples EX1-EX4 of the shared reference notes (values computed there and recomputed
# by hand below). Indices are 0-based; objectives are minimised unless said otherwise.
EX1 = np.array([(0, 1), (0.1, 0.5), (0.2, 0.3), (0.5, 0.1), (1, 0)], dtype=float)
EX2 = np.array([(0, 1), (0.05, 0.7), (0.3, 0.3), (0.4, 0.15), (1, 0)], dtype=float)
EX3 = np.array([(10, 100), (12, 60), (15, 40), (20, 30), (30, 25)], dtype=float)
EX4 = np.array([(1, 0, 0), (0, 1, 0), (0, 0, 1), (0.2, 0.2, 0.2), (0.5, 0.3, 0.1)], dtype=float)


def make_front(points, goals=None, names=None, units=None, **extra) -> Front:
    points = np.asarray(points, dtype=float)
    names = names or [f"f{j + 1}" for j in range(points.shape[1])]
    goals = goals or ["min"] * len(names)
    units = units or [""] * len(names)
    table = pd.DataFrame(points, columns=names)
    for key, values in extra.items():
        table[key] = values
    objectives = [Objective(n, g, u) for n, g, u in zip(names, goals, units, strict=True)]
    return Front.from_table(table, objectives)


def row_values(front: Front, row: int) -> np.ndarray:
    return front.table.iloc[row][front.objective_names].to_numpy(dtype=float)


# ----------------------------------------------------------------- knee test problems
def deb2dk(k: int, n: int = 4001) -> np.ndarray:
    """DEB2DK front (Branke, Deb, Dierolf, Osswald 2004): g = 1 on the front, x1 in [0, 1]."""
    x = np.linspace(0.0, 1.0, n)
    r = 5 + 10 * (x - 0.5) ** 2 + np.cos(2 * k * np.pi * x) / k
    return np.column_stack([r * np.sin(np.pi * x / 2), r * np.cos(np.pi * x / 2)])


def do2dk(k: int, s: int, n: int = 4001) -> np.ndarray:
    """DO2DK front (Branke, Deb, Dierolf, Osswald 2004): g = 1 on the front, x1 in [0, 1]."""
    x = np.linspace(0.0, 1.0, n)
    r = 5 + 10 * (x - 0.5) ** 2 + 2 ** (s / 2) * np.cos(2 * k * np.pi * x) / k
    f1 = r * (np.sin(np.pi * x / 2 ** (s + 1) + (1 + (2**s - 1) / 2 ** (s + 2)) * np.pi) + 1)
    f2 = r * (np.cos(np.pi * x / 2 + np.pi) + 1)
    return np.column_stack([f1, f2])


# Knee positions: Branke et al. (2004) define the problems; the coordinates are the "X"
# values of the reference notes (section 3), from a 400,001-point scan of x1. K = 1 knees are
# the same under every definition; for K >= 2 and for s = 1 the notes give the knee as the
# largest normalised distance below the extreme line, so only method "knee" is held to them.
# Tolerance: 0.02 in objective units (about 0.25 % of the fronts' spans of 5.5 to 8.5).
TOL = 0.02


@pytest.mark.parametrize("method", ["knee", "trade-off", "kneedle"])
@pytest.mark.parametrize(
    ("points", "knee"),
    [
        (deb2dk(1), (2 * np.sqrt(2), 2 * np.sqrt(2))),  # DEB2DK K=1: x1 = 0.5, r = 4
        (do2dk(1, 0), (4 * (1 - np.sqrt(2) / 2),) * 2),  # DO2DK K=1, s=0: x1 = 0.5
    ],
    ids=["DEB2DK-K1", "DO2DK-K1-s0"],
)
def test_knee_methods_find_the_published_single_knee(points, knee, method):
    """Every knee method finds the one knee of DEB2DK and DO2DK (K=1) on a dense front."""
    front = make_front(points)
    row = choose(front, method)[0]
    assert np.linalg.norm(row_values(front, row) - knee) < TOL


@pytest.mark.parametrize(
    ("points", "knees"),
    [
        (do2dk(1, 1), [(1.058807, 1.033811)]),  # DO2DK K=1, s=1: x1 = 0.49581
        (deb2dk(2), [(4.594535, 2.079184), (2.079184, 4.594535)]),  # x1 = 0.729463 and mirror
        (deb2dk(4), [(4.044384, 2.756834), (2.756834, 4.044384)]),  # x1 = 0.619110 and mirror
    ],
    ids=["DO2DK-K1-s1", "DEB2DK-K2", "DEB2DK-K4"],
)
def test_largest_distance_knee_matches_reference(points, knees):
    """The extreme-line knee of skewed and multi-knee problems matches the computed reference."""
    front = make_front(points)
    found = row_values(front, choose(front, "knee")[0])
    assert min(np.linalg.norm(found - np.asarray(k)) for k in knees) < TOL


def test_do2dk_extremes_match_reference():
    """The sampled DO2DK (K=1, s=1) front spans the published extremes, a check on the formula."""
    # Reference notes section 3.2: extremes (0.6785541, 8.9142136) and (5.5028917, 0), which a
    # third-party study also uses as its reference point (5.50289172, 8.91421356).
    front = make_front(do2dk(1, 1))
    points = front.points()
    assert points[:, 0].min() == pytest.approx(0.6785541, abs=1e-6)
    assert points[:, 1].max() == pytest.approx(8.9142136, abs=1e-6)
    assert points[:, 0].max() == pytest.approx(5.5028917, abs=1e-6)


def test_deb2dk_four_knees_are_confirmed_by_kneedle():
    """Kneedle confirms more than one knee on DEB2DK with K = 4, the best next to a minimum of r."""
    # Branke et al. (2004): K = 4 gives four local minima of r; the two inner ones sit at
    # x1 = 0.389325 and 0.610675, i.e. (2.806681, 4.002518) and its mirror (reference notes 3.1).
    front = make_front(deb2dk(4))
    difference, knees = kneedle(normalised(front))
    assert len(knees) >= 2
    assert difference[knees].max() == pytest.approx(difference.max())


def test_zdt1_knee_is_quarter_half():
    """On ZDT1 all knee methods land on (1/4, 1/2), the tangent parallel to the extreme line."""
    # ZDT1 front f2 = 1 - sqrt(f1) (Zitzler, Deb, Thiele 2000); maximising sqrt(f1) - f1 gives
    # f1 = 1/4 (reference notes 1.5).
    f1 = np.linspace(0, 1, 2001)
    front = make_front(np.column_stack([f1, 1 - np.sqrt(f1)]))
    for method in ("knee", "trade-off", "kneedle"):
        assert np.allclose(row_values(front, choose(front, method)[0]), (0.25, 0.5), atol=2e-3)


def test_concave_front_has_no_knee():
    """On the concave ZDT2 front no design lies on the ideal side of the extreme line."""
    # ZDT2: 1 - f1 - f2 = f1^2 - f1 <= 0 on the whole front (reference notes 1.5); Kneedle's
    # difference curve is the same quantity, so it confirms no knee.
    f1 = np.linspace(0, 1, 501)
    front = make_front(np.column_stack([f1, 1 - f1**2]))
    assert scores(front, "knee").max() <= 1e-12
    assert len(kneedle(normalised(front))[1]) == 0


def test_kneedle_reproduces_the_paper_example():
    """Kneedle finds x = 0.2222 on y = 5 - 1/(x + 0.1), the example of Satopaa et al. (2011)."""
    # Ten points evenly in [0, 1], concave increasing, S = 1: knee at x = 0.2222 (kneed docs
    # reproducing the paper's Figure 2). As a front, x is a cost (min) and y a benefit (max);
    # the normalised difference curve is then y_n - x_n, the paper's for this shape.
    x = np.linspace(0, 1, 10)
    front = make_front(np.column_stack([x, 5 - 1 / (x + 0.1)]), goals=["min", "max"])
    row = choose(front, "kneedle")[0]
    assert front.table.iloc[row]["f1"] == pytest.approx(0.2222, abs=1e-4)


# ----------------------------------------------------------------- worked examples
def test_ex1_every_method_by_hand():
    """EX1: distance, trade-off, Kneedle, pseudo-weights and ASF agree with hand arithmetic."""
    # Distance to f1 + f2 = 1: point 2 (0.2, 0.3): (1 - 0.5)/sqrt(2) = 0.353553;
    # point 1 (0.1, 0.5): 0.4/sqrt(2) = 0.282843.
    assert knee_distance(EX1) == pytest.approx([0, 0.282843, 0.353553, 0.282843, 0], abs=1e-6)
    # Trade-off mu, every other point a neighbour: point 2 -> 3 loses 0.3 in f1 for 0.2 in f2
    # (1.5), point 2 -> 1 loses 0.2 in f2 for 0.1 in f1 (2.0), so mu(2) = 1.5; point 0 -> 1
    # loses 0.1 for 0.5: 0.2.
    assert tradeoff_measure(EX1) == pytest.approx([0.2, 0.5, 1.5, 0.666667, 0.2], abs=1e-6)
    # Kneedle: y_d = 1 - f1 - f2 = 0, 0.4, 0.5, 0.4, 0; mean step 0.25, threshold
    # 0.5 - 0.25 = 0.25; y_d falls to 0 after the peak, so point 2 is confirmed.
    difference, knees = kneedle(EX1)
    assert difference == pytest.approx([0, 0.4, 0.5, 0.4, 0])
    assert knees.tolist() == [2]
    # Pseudo-weights (Deb 2001): point 2 -> (0.8, 0.7)/1.5 = (0.533333, 0.466667);
    # point 1 -> (0.9, 0.5)/1.4 = (0.642857, 0.357143).
    w = pseudo_weights(EX1)
    assert w[2] == pytest.approx([0.533333, 0.466667], abs=1e-6)
    assert w[1] == pytest.approx([0.642857, 0.357143], abs=1e-6)
    # ASF with z = 0, weights multiplied (weight = importance), w = (0.8, 0.2):
    # max(0.8 f1, 0.2 f2) = 0.2, 0.1, 0.16, 0.4, 0.8 -> point 1.
    assert asf(EX1, weights=[0.8, 0.2], rho=0) == pytest.approx([0.2, 0.1, 0.16, 0.4, 0.8])
    # Augmented, rho = 1e-4, w = (0.5, 0.5): point 2 -> 0.15 + 1e-4 * 0.25 = 0.150025.
    assert asf(EX1, weights=[0.5, 0.5], rho=1e-4)[2] == pytest.approx(0.150025)


def test_ex1_choices_follow_weights():
    """EX1: pseudo-weights and ASF move along the front as the weights move, weight = importance."""
    front = make_front(EX1)
    # Pseudo-weights L1 to (0.5, 0.5): point 2: 0.033333 * 2 = 0.066667 (smallest);
    # to (0.8, 0.2): point 1: 0.157143 + 0.157143 = 0.314286 beats point 0 (0.4).
    assert choose(front, "pseudo-weights") == [2]
    assert choose(front, "pseudo-weights", weights={"f1": 0.8, "f2": 0.2}) == [1]
    assert choose(front, "pseudo-weights", weights={"f1": 0.2, "f2": 0.8}) == [3]
    assert choose(front, "asf", weights={"f1": 4, "f2": 1}) == [1]
    assert choose(front, "asf") == [2]


def test_ex2_knees_and_compromises_differ():
    """EX2: the knee methods pick point 3 while the compromise methods pick point 2."""
    # Distance: point 3 (0.4, 0.15): 0.45/sqrt(2) = 0.318198 > point 2: 0.4/sqrt(2) = 0.282843.
    # ASF, w = (0.5, 0.5): point 2: 0.15, point 3: max(0.2, 0.075) = 0.2.
    # Pseudo-weights of point 2: (0.7, 0.7)/1.4 = (0.5, 0.5), exactly the asked weights.
    front = make_front(EX2)
    assert knee_agreement(front) == {"knee": 3, "trade-off": 3, "kneedle": 3}
    assert choose(front, "asf") == [2]
    assert choose(front, "pseudo-weights") == [2]
    assert tradeoff_measure(EX2) == pytest.approx([0.166667, 0.625, 0.666667, 1.5, 0.25], abs=1e-6)


def test_ex3_topsis_by_hand():
    """EX3 in engineering units: TOPSIS closeness matches the hand arithmetic and picks point 2."""
    # Column norms: sqrt(1769) = 42.0595 (cost), sqrt(16725) = 129.325 (mass); with weights
    # 0.5, v(point 2) = (0.178319, 0.154649); ideal (0.118880, 0.096656), anti-ideal
    # (0.356638, 0.386622). S+ = sqrt(0.059439^2 + 0.057993^2) = 0.083044,
    # S- = sqrt(0.178319^2 + 0.231973^2) = 0.292590, C = 0.292590/0.375634 = 0.778924.
    closeness = topsis(EX3)
    assert closeness == pytest.approx([0.450535, 0.657728, 0.778924, 0.710503, 0.549465], abs=1e-6)
    front = make_front(EX3, names=["cost", "mass"], units=["k$", "kg"])
    assert choose(front, "topsis") == [2]


def test_topsis_with_a_benefit_criterion_by_hand():
    """TOPSIS with one cost and one benefit criterion matches the hand arithmetic."""
    # Input from the R MCDM package docs (Hwang and Yoon 1981 method): (6, 2), (7, 2.75),
    # (10, 3.5), weights 0.5, first a cost, second a benefit. Norms sqrt(185) = 13.6015 and
    # sqrt(23.8125) = 4.87981; v(1) = (0.257325, 0.281773); ideal (0.220564, 0.358621),
    # anti-ideal (0.367607, 0.204926); S+ = 0.085188, S- = 0.134417, C = 0.612087.
    assert topsis(np.array([(6, 2), (7, 2.75), (10, 3.5)]), benefit=[False, True]) == pytest.approx(
        [0.488941, 0.612086, 0.511059], abs=1e-6
    )
    front = make_front([(6, 2), (7, 2.75), (10, 3.5)], goals=["min", "max"])
    assert choose(front, "topsis") == [1]


def test_asf_target_in_units_by_hand():
    """ASF with a target given in the objectives' units picks the design the arithmetic says."""
    # EX3 normalised over the front: cost (c - 10)/20, mass (m - 25)/75. Target cost 11,
    # mass 70 -> z = (0.05, 0.6). With w = (0.5, 0.5): point 0 (0, 1): max(-0.025, 0.2) = 0.2;
    # point 1 (0.1, 0.466667): max(0.025, -0.066667) = 0.025; point 2 (0.25, 0.2): 0.1;
    # so point 1 (12 k$, 60 kg).
    front = make_front(EX3, names=["cost", "mass"])
    values = -scores(front, "asf", target={"cost": 11, "mass": 70})
    assert values[:3] == pytest.approx([0.2, 0.025, 0.1], abs=1e-5)
    assert choose(front, "asf", target={"cost": 11, "mass": 70}) == [1]


def test_ex3_tradeoff_measure_depends_on_scaling():
    """EX3: on raw units the trade-off measure picks point 3, normalised it picks point 2."""
    # Reference notes EX3: mu on raw F = 0.05, 0.15, 0.5, 2.0, 0.5 (point 3: to point 4 it
    # loses 10 k$ for 5 kg = 2.0); normalised, mu(2) = 1.777778 is the largest.
    assert tradeoff_measure(EX3) == pytest.approx([0.05, 0.15, 0.5, 2.0, 0.5])
    front = make_front(EX3)
    assert tradeoff_measure(normalised(front))[2] == pytest.approx(1.777778, abs=1e-6)
    assert choose(front, "trade-off") == [2]


def test_ex4_three_objectives():
    """EX4: distance to the plane f1 + f2 + f3 = 1 and the trade-off measure pick point 3."""
    # Point 3 (0.2, 0.2, 0.2): (1 - 0.6)/sqrt(3) = 0.230940; point 4: 0.1/sqrt(3) = 0.057735.
    assert knee_distance(EX4) == pytest.approx([0, 0, 0, 0.230940, 0.057735], abs=1e-6)
    # mu(3): to (0.5, 0.3, 0.1) loses 0.3 + 0.1 for 0.1: 4; to (1, 0, 0) loses 0.8 for 0.4: 2.
    assert tradeoff_measure(EX4) == pytest.approx([0.5, 0.5, 0.5, 2.0, 0.25])
    # Pseudo-weights of point 4: (0.5, 0.7, 0.9)/2.1.
    assert pseudo_weights(EX4)[4] == pytest.approx([0.238095, 0.333333, 0.428571], abs=1e-6)
    front = make_front(EX4)
    picked = row_values(front, choose(front, "knee")[0])
    assert picked == pytest.approx([0.2, 0.2, 0.2])
    assert set(knee_agreement(front)) == {"knee", "trade-off"}


def test_max_objectives_are_flipped():
    """Negating an objective and marking it max gives the same choices for every method."""
    rng = np.random.default_rng(3)
    f1 = np.sort(rng.random(40))
    points = np.column_stack([f1, (1 - f1**0.7) + 0.02 * rng.random(40)])
    plain = make_front(points)
    flipped = make_front(points * [1, -1], goals=["min", "max"])
    for method in METHODS:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NonConvexWarning)
            a = row_values(plain, choose(plain, method)[0])
            b = row_values(flipped, choose(flipped, method)[0]) * [1, -1]
        assert a == pytest.approx(b), method


# ----------------------------------------------------------------- weighted sum
def test_weighted_sum_warns_on_a_dented_front():
    """A weighted sum cannot pick the designs in a dent, and says so."""
    # (0.5, 0.6) lies above the segment from (0, 1) to (1, 0). With weights (w, 1 - w) its sum
    # is 0.6 - 0.1 w, the ends give w and 1 - w; 0.6 - 0.1 w > w for w < 0.545 and
    # 0.6 - 0.1 w > 1 - w for w > 0.444, so for every w an end point wins (hand arithmetic).
    points = np.array([(0, 1), (0.5, 0.6), (1, 0)])
    assert supported(points).tolist() == [True, False, True]
    front = make_front(points)
    with pytest.warns(NonConvexWarning, match="1 of 3 designs"):
        scores(front, "weighted-sum")
    assert choose(front, "asf") == [1]


def test_weighted_sum_on_convex_front_is_quiet():
    """On a convex front every design is reachable by a weighted sum and nothing is warned."""
    front = make_front(EX1)
    with warnings.catch_warnings():
        warnings.simplefilter("error", NonConvexWarning)
        # 0.5 f1 + 0.5 f2 = 0.5, 0.3, 0.25, 0.3, 0.5 -> point 2.
        assert choose(front, "weighted-sum") == [2]
    assert weighted_sum(EX1) == pytest.approx([0.5, 0.3, 0.25, 0.3, 0.5])


# ----------------------------------------------------------------- pymoo cross-checks
def _pymoo_quietly(function):
    """Run a pymoo call and restore the warning filters it changes for the whole process."""
    with warnings.catch_warnings():
        return function()


@pytest.mark.parametrize("m", [2, 3])
def test_pseudo_weights_agree_with_pymoo(m):
    """Pseudo-weight choices match pymoo's PseudoWeights on random fronts with min and max."""
    from pymoo.mcdm.pseudo_weights import PseudoWeights

    rng = np.random.default_rng(10 + m)
    for trial in range(20):
        raw = rng.random((80, m)) * rng.uniform(1, 100, m)
        goals = [str(g) for g in rng.choice(["min", "max"], m)]
        front = make_front(raw, goals=goals)
        F = front.points() * np.where(front.maximise, -1.0, 1.0)
        weights = rng.dirichlet(np.ones(m))
        expected = PseudoWeights(weights).do(F)
        ours = choose(
            front, "pseudo-weights", weights=dict(zip(front.objective_names, weights, strict=True))
        )
        assert ours == [int(expected)], trial


def test_tradeoff_measure_agrees_with_pymoo_on_worked_examples():
    """With every point a neighbour, our knee matches pymoo HighTradeoffPoints on EX1, EX2, EX4."""
    from pymoo.mcdm.high_tradeoff import HighTradeoffPoints

    # Reference notes: pymoo returns [2], [3] and [3]; on five points its neighbourhood
    # (at least 2M nearest) already holds every other point.
    for F, expected in ((EX1, 2), (EX2, 3), (EX4, 3)):
        found = _pymoo_quietly(lambda F=F: HighTradeoffPoints().do(F))
        assert found.tolist() == [expected]
        assert int(np.argmax(tradeoff_measure(F))) == expected


@pytest.mark.parametrize("m", [2, 3])
def test_tradeoff_measure_with_pymoo_neighbourhood(m):
    """With pymoo's neighbourhood (radius 0.125, at least 2M), our largest mu is in pymoo's knee set."""
    from pymoo.mcdm.high_tradeoff import HighTradeoffPoints

    rng = np.random.default_rng(20 + m)
    checked = 0
    for _ in range(15):
        raw = rng.random((120, m))
        front = make_front(raw)
        F = normalised(front)
        found = _pymoo_quietly(lambda F=F: HighTradeoffPoints().do(F))
        if found is None:
            continue
        checked += 1
        assert int(np.nanargmax(tradeoff_measure(F, radius=0.125))) in set(found.tolist())
    assert checked >= 5


def test_pymoo_warning_filter_is_restored():
    """Calling HighTradeoffPoints inside catch_warnings leaves the process's filters as they were."""
    from pymoo.mcdm.high_tradeoff import HighTradeoffPoints

    before = list(warnings.filters)
    _pymoo_quietly(lambda: HighTradeoffPoints().do(EX1))
    assert warnings.filters == before


def test_knee_distance_on_dense_deb2dk_agrees_with_pymoo():
    """On the normalised DEB2DK (K=1) front pymoo's high trade-off set holds our knee."""
    from pymoo.mcdm.high_tradeoff import HighTradeoffPoints

    front = make_front(deb2dk(1, n=801))
    F = normalised(front)
    found = _pymoo_quietly(lambda: HighTradeoffPoints().do(F))
    ours = choose(front, "knee")[0]
    assert found is not None
    near = np.linalg.norm(F[found] - F[ours], axis=1).min()
    assert near < 0.01


# ----------------------------------------------------------------- limits
def test_parse_limit_forms():
    """Limits are read with or without spaces and units, with all five operators."""
    assert parse_limit("mass <= 12") == Limit("mass", "<=", 12.0)
    assert parse_limit("range>=40") == Limit("range", ">=", 40.0)
    assert parse_limit("mass [g] < 1e3") == Limit("mass", "<", 1000.0)
    assert parse_limit("fins = 8") == Limit("fins", "==", 8.0)
    assert str(parse_limit(" cost>2.5 ")) == "cost > 2.5"


@pytest.mark.parametrize(
    ("text", "needle"),
    [
        ("mass", "expected COLUMN OP VALUE"),
        ("mass <= heavy", "text goes with == or !="),
        ("<= 3", "expected COLUMN OP VALUE"),
        ("mass <= nan", "not a finite number"),
    ],
)
def test_parse_limit_rejects_bad_text(text, needle):
    """A malformed limit raises DataError naming the limit."""
    with pytest.raises(DataError, match=needle) as info:
        parse_limit(text)
    assert repr(text) in str(info.value)


def test_limits_apply_before_the_method():
    """Limits remove designs first; the knee is then the knee of what is left, renormalised."""
    front = make_front(EX3, names=["cost", "mass"], units=["k$", "kg"], fins=[4, 6, 8, 10, 12])
    assert choose(front, "knee") == [2]
    # Left: (15, 40), (20, 30), (30, 25); normalised (0, 1), (1/3, 1/3), (1, 0) -> knee is row 3.
    assert choose(front, "knee", limits=["mass <= 40"]) == [3]
    assert len(apply_limits(front, ["mass <= 40", "fins >= 10"])) == 2
    with pytest.raises(DataError, match="no design of 5 meets the limits mass <= 10"):
        choose(front, "knee", limits=["mass <= 10"])


def test_limit_on_unknown_or_text_column():
    """A limit on a missing or non-numeric column names the limit and the column."""
    front = make_front(EX3, names=["cost", "mass"], alloy=["a", "b", "a", "b", "a"])
    with pytest.raises(DataError, match=r"limit 'mas <= 3': no column 'mas'.*did you mean 'mass'"):
        apply_limits(front, ["mas <= 3"])
    with pytest.raises(DataError, match=r"limit 'alloy <= 3': column 'alloy' holds 'a' in row 1"):
        apply_limits(front, ["alloy <= 3"])


# ----------------------------------------------------------------- front-level API
def test_choose_top_returns_best_first():
    """top=K returns K row positions ordered by score, confirmed Kneedle knees first."""
    front = make_front(EX1)
    assert choose(front, "knee", top=3) == [2, 1, 3]
    assert choose(front, "kneedle", top=2)[0] == 2
    with pytest.raises(DataError, match="top"):
        choose(front, top=0)


@pytest.mark.parametrize(
    ("kwargs", "needle"),
    [
        ({"method": "elbow"}, "method 'elbow' is not known"),
        ({"method": "knee", "weights": {"f1": 1}}, "takes no weights"),
        ({"method": "topsis", "target": {"f1": 1}}, "takes no target"),
        ({"method": "asf", "weights": {"f9": 1}}, "'f9' is not an objective"),
        ({"method": "asf", "weights": {"f1": -1}}, "at least 0"),
        ({"method": "asf", "weights": {"f1": 0, "f2": 0}}, "not all 0"),
    ],
)
def test_bad_method_arguments(kwargs, needle):
    """Unknown methods and misplaced or bad weights raise DataError."""
    with pytest.raises(DataError, match=needle):
        choose(make_front(EX1), **kwargs)


def test_kneedle_needs_two_objectives():
    """Kneedle refuses a three-objective front and all_picks leaves it out there."""
    front = make_front(EX4)
    with pytest.raises(DataError, match="two objectives; this front has 3"):
        choose(front, "kneedle")
    assert "kneedle" not in all_picks(front)


def test_parse_values():
    """NAME=NUMBER lists are read, units dropped, and bad entries named."""
    assert parse_values("cost=2, mass [g]=1", what="weights") == {"cost": 2.0, "mass": 1.0}
    with pytest.raises(DataError, match="weights 'cost:2'"):
        parse_values("cost:2", what="weights")
    with pytest.raises(DataError, match="'x' for 'cost'"):
        parse_values("cost=x", what="weights")


def test_ranks_and_agreement_helpers():
    """Ranks count from the best in each objective's own sense; groups put agreement first."""
    front = make_front([(1, 5), (2, 9), (3, 12)], goals=["min", "max"])
    ranks = objective_ranks(front)
    assert ranks["f1"].tolist() == [1, 2, 3]
    assert ranks["f2"].tolist() == [3, 2, 1]
    assert agreeing_groups({"a": 1, "b": 2, "c": 2}) == [(2, ["b", "c"]), (1, ["a"])]


def test_describe_choice_names_units_ranks_and_rates():
    """The plain description shows objectives with units, ranks, neighbours' rates and agreement."""
    front = make_front(EX3, names=["cost", "mass"], units=["k$", "kg"], fins=[4, 6, 8, 10, 12])
    lines = describe_choice(front, [2], method="knee")
    text = "\n".join(lines)
    assert "Choice 1: row 3" in text
    assert "15 k$" in text and "rank 3 of 5" in text
    # From (15, 40) to (20, 30): 5 k$ for 10 kg; to (12, 60): 20 kg for 3 k$.
    assert "to row 4: 5 k$ more cost per 10 kg less mass" in text
    assert "to row 2: 1.5 k$ less cost per 10 kg more mass" in text
    assert "Knee methods: knee, trade-off, kneedle all point at row 3." in text


def test_describe_choice_three_objectives_lists_nearest_moves():
    """With three objectives the description gives local-plane rates and moves to the nearest designs."""
    front = make_front(EX4, units=["kg", "EUR", "W"])
    row = choose(front, "knee")[0]
    text = "\n".join(describe_choice(front, [row], method="knee"))
    # Nearest to (0.2, 0.2, 0.2) in normalised space is (0.5, 0.3, 0.1): +0.3 kg, +0.1 EUR, -0.1 W.
    assert "+0.3 kg, f2 +0.1 EUR, f3 -0.1 W" in text
    assert text.count("locally:") == 3


# ----------------------------------------------------------------- knee or no knee
def deb3dk(k: int, c: float = 1.0, n: int = 101) -> np.ndarray:
    """DEB3DK front (Branke, Deb, Dierolf, Osswald 2004) on an n x n grid of (x1, x2), g = 1.

    ``c`` is the cosine coefficient, 1 in one port and 2 in another (reference notes 3.3:
    which one the paper uses is unresolved).
    """
    import moocore

    x1, x2 = (a.ravel() for a in np.meshgrid(np.linspace(0, 1, n), np.linspace(0, 1, n)))
    r = (
        (5 + 10 * (x1 - 0.5) ** 2 + c / k * np.cos(2 * k * np.pi * x1))
        + (5 + 10 * (x2 - 0.5) ** 2 + c / k * np.cos(2 * k * np.pi * x2))
    ) / 2
    s1, c1 = np.sin(np.pi * x1 / 2), np.cos(np.pi * x1 / 2)
    F = np.column_stack([r * s1 * np.sin(np.pi * x2 / 2), r * s1 * np.cos(np.pi * x2 / 2), r * c1])
    return F[moocore.is_nondominated(F)]


def test_deb3dk_k1_knee_is_the_centre():
    """DEB3DK with K = 1 has one knee, at x1 = x2 = 0.5, i.e. F = (2, 2, 2.828427) for c = 1."""
    # Reference notes 3.3 (X, 301 x 301 grid): the largest-distance point lies within 0.007 of
    # (0.5, 0.5) in x; F there is (2, 2, 2 sqrt 2) with c = 1.
    front = make_front(deb3dk(1))
    verdict = find_knees(front)
    assert verdict.has_knee and len(verdict.knees) == 1
    for method in ("knee", "trade-off"):
        found = row_values(front, choose(front, method)[0])
        assert np.allclose(found, (2, 2, 2 * np.sqrt(2)), atol=0.05), method


@pytest.mark.parametrize("k", [2, 3])
def test_deb3dk_corner_is_never_offered_as_a_knee(k):
    """On DEB3DK (K = 2, 3, c = 1) no knee method presents a corner; the verdict says no knee."""
    # With c = 1 the bulges of K = 2, 3 stay within the 0.02 margin of the extreme plane (largest
    # interior bulge 0.007 for K = 2 on a 301 x 301 grid, computed here); the corners (0, 0, 6.5)
    # and (8, 0, 0) lie farther from the fallback plane but are best in two objectives.
    front = make_front(deb3dk(k))
    verdict = find_knees(front)
    assert not verdict.has_knee and "no knee" in verdict.message
    scaled = normalised(front)
    for method in ("knee", "trade-off"):
        row = choose(front, method)[0]
        assert row == verdict.instead, method
        assert (scaled[row] > 0.05).all()  # an inner design, not a corner or an edge
    assert knee_agreement(front) == {}


def test_deb2dk_knee_counts():
    """DEB2DK has one knee for K = 1 and the two extreme-line knees for K = 2 (mirror images)."""
    # Reference notes 3.1 (X): K = 2 largest-distance knees at x1 = 0.729463 -> (4.594535,
    # 2.079184) and its mirror; the inner minima of r at 0.303708/0.696293 bulge less.
    assert len(find_knees(make_front(deb2dk(1))).knees) == 1
    front = make_front(deb2dk(2))
    knees = find_knees(front).knees
    found = sorted(tuple(row_values(front, r).round(2)) for r in knees[:2])
    assert np.allclose(found, [(2.08, 4.59), (4.59, 2.08)], atol=TOL)


@pytest.mark.parametrize(
    ("shape", "has_knee"),
    [("convex", True), ("linear", False), ("concave", False)],
)
def test_knee_verdict_on_simple_shapes(shape, has_knee):
    """A convex front has a knee at (1/4, 1/2); a straight and a bulging-away front have none."""
    # ZDT1 f2 = 1 - sqrt(f1), knee (1/4, 1/2) (reference notes 1.5); ZDT2 f2 = 1 - f1^2 bulges
    # away from the ideal point (notes 1.5); the line f1 + f2 = 1 has no bulge at all.
    f1 = np.linspace(0, 1, 401)
    f2 = {"convex": 1 - np.sqrt(f1), "linear": 1 - f1, "concave": 1 - f1**2}[shape]
    front = make_front(np.column_stack([f1, f2]))
    verdict = find_knees(front)
    assert verdict.has_knee is has_knee
    row = choose(front, "knee")[0]
    if has_knee:
        assert np.allclose(row_values(front, row), (0.25, 0.5), atol=3e-3)
    else:
        assert row == verdict.instead
        assert 0 < row < len(front) - 1  # not an end of the front
        text = "\n".join(describe_choice(front, [row], method="knee"))
        assert "This front has no knee" in text and "Knee methods: the front has no knee" in text


def test_deb3dk_k1_knee_survives_a_big_front():
    """On 10^4+ designs (the sampled trade-off path) the DEB3DK K = 1 knee is still found."""
    front = make_front(deb3dk(1, n=141))
    assert len(front) > 4000
    assert np.allclose(
        row_values(front, choose(front, "trade-off")[0]), (2, 2, 2 * np.sqrt(2)), atol=0.05
    )


# ----------------------------------------------------------------- fast paths against the old code
def _supported_pairwise(points):
    """The former O(n^2) interval check of weighted-sum reachability, kept as a reference."""
    n = len(points)
    result = np.zeros(n, dtype=bool)
    for i in range(n):
        d = points[i] - points
        slope, bound = d[:, 0] - d[:, 1], -d[:, 1]
        low, high = 0.0, 1.0
        pos, neg, flat = slope > 1e-12, slope < -1e-12, np.abs(slope) <= 1e-12
        if np.any(flat & (bound < -1e-12)):
            continue
        if pos.any():
            high = min(high, float(np.min(bound[pos] / slope[pos])))
        if neg.any():
            low = max(low, float(np.max(bound[neg] / slope[neg])))
        result[i] = low <= high + 1e-9
    return result


def test_supported_matches_the_pairwise_check():
    """The envelope check of weighted-sum reachability agrees with the pairwise one on random sets."""
    rng = np.random.default_rng(7)
    for trial in range(200):
        n = int(rng.integers(1, 200))
        points = rng.random((n, 2))
        if trial % 3 == 1:
            points = np.round(points * 5) / 5  # ties and duplicates
        if trial % 3 == 2:
            x = rng.random(n)
            points = np.column_stack([x, 1 - np.sqrt(x)])  # every point reachable
        assert supported(points).tolist() == _supported_pairwise(points).tolist(), trial


def test_sampled_tradeoff_bounds_the_exact_one():
    """Above the exact limit mu is an upper bound of every-pair mu and keeps its largest point."""
    rng = np.random.default_rng(3)
    x = np.abs(rng.normal(size=(1500, 3)))
    x /= np.linalg.norm(x, axis=1, keepdims=True)
    for points in (x, 1 - x):
        exact = tradeoff_measure(points)
        sampled = tradeoff_measure(points, exact_up_to=100)
        assert np.all(sampled >= exact - 1e-12)
        assert exact[np.nanargmax(sampled)] == pytest.approx(np.nanmax(exact))


@pytest.mark.parametrize("n", [200, 20_000])
@pytest.mark.parametrize("noise", [0.0, 1e-3])
def test_knee_count_does_not_grow_with_density_or_noise(n, noise):
    """DEB2DK with K = 2 (Branke et al. 2004) has its two knees whether sampled at 200 or 20,000 points,
    with or without Gaussian noise of 0.1 % of the range on each objective: knees closer than
    KNEE_SEPARATION are one region, and a knee must bulge most within that radius."""
    points = deb2dk(2, n)
    if noise:
        rng = np.random.default_rng(5)
        points = points + rng.normal(0.0, noise * np.ptp(points, axis=0), size=points.shape)
        points = points[moocore.is_nondominated(points)]
    front = make_front(points)
    knees = find_knees(front).knees
    assert len(knees) == 2
    found = sorted(tuple(row_values(front, r)) for r in knees)
    assert np.allclose(found, [(2.08, 4.59), (4.59, 2.08)], atol=0.1)


@pytest.mark.parametrize("n", [21, 61])
def test_noisy_edges_of_a_three_objective_front_are_not_knees(n):
    """DEB3DK with K = 1 (Branke et al. 2004; c = 1) keeps its one knee at the centre under Gaussian
    noise of 0.1 % of the range: noise breaks the ties at the best along the edges of the front
    (f1 = 0 or f2 = 0 there), and those edges, which bulge more than the centre, are not knees."""
    rng = np.random.default_rng(5)
    points = deb3dk(1, n=n)
    points = points + rng.normal(0.0, 1e-3 * np.ptp(points, axis=0), size=points.shape)
    front = make_front(points[moocore.is_nondominated(points)])
    knees = find_knees(front).knees
    assert len(knees) == 1
    # the centre x1 = x2 = 0.5 is F = (2, 2, 2 sqrt 2) (reference notes 3.3, X); the grid of 21 steps
    # by 0.05 in x, so the nearest design lies within about 0.3 of it
    assert np.allclose(row_values(front, knees[0]), (2, 2, 2 * np.sqrt(2)), atol=0.35)


# ----------------------------------------------------------------- representative sets
GREEDY_BOUND = 1 - 1 / math.e  # greedy on a monotone submodular function (Nemhauser et al. 1978)


def zdt1_front(n: int = 40) -> Front:
    """n points of the ZDT1 front f2 = 1 - sqrt(f1) (Zitzler, Deb and Thiele 2000)."""
    f1 = np.linspace(0.0, 1.0, n)
    return make_front(np.column_stack([f1, 1 - np.sqrt(f1)]))


def dtlz2_front() -> Front:
    """28 points of the DTLZ2 front, the unit sphere octant (Deb et al. 2002): a simplex lattice of
    six divisions pushed out onto the sphere."""
    lattice = np.array([(i, j, 6 - i - j) for i in range(7) for j in range(7 - i)], dtype=float)
    return make_front(lattice / np.linalg.norm(lattice, axis=1, keepdims=True))


def best_subset_2d(points: np.ndarray, k: int) -> tuple[float, tuple[int, ...]]:
    """The largest hypervolume of any k of the points (two objectives, minimised, mutually
    non-dominated) with reference 1.1, by trying every subset."""
    order = np.argsort(points[:, 0])
    points = points[order]
    subsets = np.array(list(itertools.combinations(range(len(points)), k)))
    x, y = points[subsets, 0], points[subsets, 1]  # sorted by f1, so f2 falls along each row
    right = np.concatenate([x[:, 1:], np.full((len(x), 1), 1.1)], axis=1)
    volume = ((right - x) * (1.1 - y)).sum(axis=1)
    best = int(np.argmax(volume))
    return float(volume[best]), tuple(order[subsets[best]].tolist())


def set_hypervolume(front: Front, rows) -> float:
    """moocore's hypervolume of designs ``rows`` in normalised objectives, reference 1.1."""
    points = normalised(front)[np.asarray(rows)]
    return float(moocore.hypervolume(points, ref=np.full(points.shape[1], 1.1)))


@pytest.mark.parametrize("k", [4, 5])
def test_representatives_on_zdt1_against_every_subset(k):
    """On 40 points of ZDT1 the greedy set keeps at least 1 - 1/e of the best k-subset's hypervolume."""
    front = zdt1_front(40)
    best, subset = best_subset_2d(normalised(front), k)
    # the brute force's own arithmetic agrees with moocore on the subset it found
    assert set_hypervolume(front, subset) == pytest.approx(best, rel=1e-12)
    greedy = set_hypervolume(front, representatives(front, k))
    assert greedy >= GREEDY_BOUND * best  # proved bound (Nemhauser, Wolsey and Fisher 1978)
    # Measured, not a published bound: 0.918 (k = 4) and 0.955 (k = 5). The set starts from both
    # extremes, which add little beside reference 1.1, and the knee; the best subset skips them.
    assert greedy >= 0.91 * best


def test_representatives_on_zdt1_against_subsets_holding_the_start():
    """Among the 5-subsets that hold the extremes and the knee, the greedy one is the best found by brute force."""
    front = zdt1_front(40)
    start = representatives(front, 3).tolist()
    points = normalised(front)
    rest = [r for r in range(len(front)) if r not in start]
    best = max(
        moocore.hypervolume(points[start + list(pair)], ref=[1.1, 1.1])
        for pair in itertools.combinations(rest, 2)
    )
    # measured: the greedy pair is the best pair here (ratio 1.0); not a published bound
    assert set_hypervolume(front, representatives(front, 5)) >= 0.999 * best


def test_representatives_on_dtlz2_against_every_subset():
    """On 28 points of the DTLZ2 octant the greedy 4-set keeps at least 1 - 1/e of the best 4-subset (moocore)."""
    front = dtlz2_front()
    points = normalised(front)
    best = max(
        moocore.hypervolume(points[list(c)], ref=[1.1] * 3)
        for c in itertools.combinations(range(len(front)), 4)
    )
    greedy = set_hypervolume(front, representatives(front, 4))
    assert greedy >= GREEDY_BOUND * best  # proved bound (Nemhauser, Wolsey and Fisher 1978)
    assert greedy >= 0.95 * best  # measured 0.974, not a published bound


def test_representatives_three_objectives_match_plain_greedy():
    """The lazily measured greedy step picks the same designs as measuring every design at every step (moocore)."""
    front = dtlz2_front()
    points = normalised(front)
    rows = representatives(front, 12).tolist()
    chosen = rows[:3]  # the three extremes: the octant has no knee
    assert not find_knees(front).has_knee
    while len(chosen) < 12:
        gains = [
            -1.0
            if r in chosen
            else moocore.hv_contributions(points[chosen + [r]], ref=[1.1] * 3)[-1]
            for r in range(len(front))
        ]
        chosen.append(int(np.argmax(gains)))
    assert rows == chosen


def test_representatives_hold_the_extremes_and_the_knee_of_deb2dk():
    """On DEB2DK (K = 1, Branke et al. 2004) the set holds both extremes and the knee at (2 sqrt 2, 2 sqrt 2)."""
    front = make_front(deb2dk(1))
    table = representatives_table(front, 6)
    rows = table["front_row"].to_numpy() - 1
    points = front.points()
    assert points[:, 0].argmin() in rows and points[:, 1].argmin() in rows
    knee = table.loc[table["chosen_as"] == "knee", ["f1", "f2"]].to_numpy()
    assert len(knee) == 1 and np.linalg.norm(knee[0] - 2 * np.sqrt(2)) < TOL
    assert table["chosen_as"].tolist()[:3] == ["best f1", "best f2", "knee"]
    assert set(table["chosen_as"].tolist()[3:]) == {"spread"}


def test_representatives_of_a_small_front_are_all_of_it():
    """A front of fewer designs than asked for is returned whole; a maximised objective is read with its sense."""
    # EX3 of the reference notes with its mass read as a range to maximise (invented: range = -mass)
    front = make_front(EX3[:, ::-1] * [-1, 1], goals=["max", "min"], names=["range", "cost"])
    assert sorted(representatives(front, 20).tolist()) == list(range(len(front)))
    assert representatives_table(front, 1)["chosen_as"].tolist() == ["knee"]
    assert representatives_table(front, 2)["chosen_as"].tolist() == ["knee", "best range"]


@pytest.mark.parametrize("n", [0, -1, 2.5, True, "3"])
def test_representatives_refuse_a_bad_size(n):
    """n must be a whole number of at least 1."""
    with pytest.raises(DataError, match="representatives: expected a whole number of at least 1"):
        representatives(zdt1_front(10), n)


# ----------------------------------------------------------------- distinct picks
def test_distinct_picks_on_a_dense_front_are_apart():
    """On 2001 points of ZDT1 the three best knee picks differ by more than 5 % of a range in some objective."""
    # ZDT1 front f2 = 1 - sqrt(f1) (Zitzler, Deb and Thiele 2000); both ranges are 1, so the
    # default separation is 0.05 in each objective (our own rule of thumb).
    front = zdt1_front(2001)
    ranking = choose(front, "knee", top=len(front))
    assert ranking[:3] != distinct_picks(front, ranking, top=3)  # the plain ranking is neighbours
    rows = distinct_picks(front, ranking, top=3)
    assert rows[0] == ranking[0] and len(rows) == 3
    points = front.points()[rows]
    for a, b in itertools.combinations(range(3), 2):
        assert np.abs(points[a] - points[b]).max() > 0.05


def test_distinct_picks_follow_tolerances_in_units():
    """Tolerances in units replace the default share for the objectives they name."""
    front = make_front(EX3 * [1000, 1], names=["cost", "mass"], units=["$", "kg"])
    assert separation(front) == {"cost": 1000.0, "mass": 3.75}
    assert separation(front, {"mass": 30}) == {"cost": 1000.0, "mass": 30.0}
    rows = distinct_picks(front, [2, 1, 3, 0, 4], top=5, tolerance="cost=6000,mass=30")
    assert rows == [2, 0, 4]  # 1 and 3 lie within 6000 $ and 30 kg of design 2; 0 is 60 kg off


def test_distinct_picks_stop_when_the_front_runs_out():
    """With a tolerance wider than the front, one design stands for all of it."""
    front = zdt1_front(50)
    assert distinct_picks(front, range(50), top=5, tolerance="f1=2,f2=2") == [0]
    assert distinct_picks(front, range(50), top=5, tolerance="f1=0,f2=0") == [0, 1, 2, 3, 4]


@pytest.mark.parametrize(
    ("tolerance", "needle"),
    [
        ("weight=1", "tolerance: 'weight' is not an objective of this front; objectives: f1, f2"),
        ("f1=-1", "tolerance: got -1 for 'f1', allowed: 0 or more"),
        ("f1", "expected NAME=NUMBER pairs"),
    ],
)
def test_separation_refuses_bad_tolerances(tolerance, needle):
    """Unknown names, negative amounts and malformed text give the shaped one-sentence error."""
    with pytest.raises(DataError, match=needle):
        separation(zdt1_front(10), tolerance)


def test_limits_on_choices_flags_and_variables():
    """A limit may name any column: text with == or != on a choice, true/false on a flag, a
    number on a variable; an option written as a number matches its text."""
    table = pd.DataFrame(
        {
            "cost": [1.0, 2.0, 3.0, 4.0],
            "mass": [4.0, 3.0, 2.0, 1.0],
            "material": ["stainless 302", "music wire", "stainless 302", "music wire"],
            "alloy": ["6063", "1050", "6063", "1050"],
            "coated": [True, False, True, False],
            "turns": [3, 4, 5, 6],
        }
    )
    front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    kept = lambda *limits: apply_limits(front, limits).table["cost"].tolist()  # noqa: E731
    assert kept("material==stainless 302") == [1.0, 3.0]
    assert kept("material != stainless 302") == [2.0, 4.0]
    assert kept("alloy == 6063") == [1.0, 3.0]
    assert kept("coated == true") == [1.0, 3.0]
    assert kept("turns >= 5", "material == music wire") == [4.0]
    with pytest.raises(DataError, match="text goes with == or !="):
        apply_limits(front, ["material <= steel"])


def test_no_design_meeting_the_limits_names_the_closest_and_its_miss():
    """When nothing meets the limits, the error names the design that misses least (by the sum of
    its misses as shares of each column's range) and how much it misses each limit by, in units."""
    table = pd.DataFrame({"cost": [10.0, 12, 15, 20, 30], "mass": [100.0, 60, 40, 30, 25]})
    front = Front.from_table(table, [Objective("cost", unit="k$"), Objective("mass", unit="kg")])
    with pytest.raises(DataError) as caught:
        choose(front, "knee", limits=["cost <= 14", "mass <= 35"])
    text = str(caught.value)
    # row 3 (15 k$, 40 kg) misses by 1 k$ (1/20 of the range) and 5 kg (5/75): 0.117 in all;
    # row 2 (12, 60) misses by 25 kg (0.333); row 4 (20, 30) by 6 k$ (0.3).
    assert "no design of 5 meets the limits cost <= 14 and mass <= 35" in text
    assert "the closest is row 3 (cost 15 k$, mass 40 kg)" in text
    assert "misses cost <= 14 by 1 k$ and mass <= 35 by 5 kg" in text
