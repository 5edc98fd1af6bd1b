"""Judging runs: indicators against moocore and hand arithmetic, attainment surfaces, comparing run folders."""

from __future__ import annotations

import math

import moocore
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

import tradewise
from support import CASES
from tradewise.case import Objective
from tradewise.cli import main
from tradewise.compare import (
    attainment,
    attainment_surfaces,
    common_reference,
    compare_fronts,
    compare_runs,
    convergence_advice,
    dominated_share,
    epsilon_additive,
    igd_plus,
    late_gain,
    write_attainment,
)
from tradewise.errors import DataError
from tradewise.front import Front

REFERENCE_SET = [[1.0, 3.0], [2.0, 2.0], [3.0, 1.0]]
APPROXIMATION = [[1.5, 3.0], [3.0, 1.5]]


def _front(points, *, goals=("min", "min"), reference=None, info=None) -> Front:
    names = [f"f{i + 1}" for i in range(len(goals))]
    table = pd.DataFrame(np.asarray(points, dtype=float), columns=names)
    objectives = [Objective(n, g) for n, g in zip(names, goals, strict=True)]
    return Front.from_table(table, objectives, reference=reference, info=info)


# ------------------------------------------------------------------------------- indicators
def test_three_point_example_by_hand():
    """IGD+, additive epsilon and hypervolume of a two-point set against three reference points.

    Hand arithmetic (IGD+ after Ishibuchi et al. 2015: d+(x, r) = sqrt(sum max(0, x_j - r_j)^2)):
      r = (1, 3): d+ to (1.5, 3) = 0.5, to (3, 1.5) = 2  -> 0.5
      r = (2, 2): d+ to (1.5, 3) = 1,   to (3, 1.5) = 1  -> 1
      r = (3, 1): d+ to (1.5, 3) = 2,   to (3, 1.5) = 0.5 -> 0.5
      IGD+ = (0.5 + 1 + 0.5) / 3 = 2/3.
    Additive epsilon (Zitzler et al. 2003): max over r of min over x of max_j (x_j - r_j):
      r = (1, 3): min(max(0.5, 0), max(2, -1.5)) = 0.5
      r = (2, 2): min(max(-0.5, 1), max(1, -0.5)) = 1
      r = (3, 1): min(max(-1.5, 2), max(0, 0.5)) = 0.5
      epsilon = 1.
    Hypervolume with reference (4, 4): (4 - 1.5)(4 - 3) + (4 - 3)(3 - 1.5) = 2.5 + 1.5 = 4.
    """
    assert igd_plus(APPROXIMATION, REFERENCE_SET) == pytest.approx(2 / 3, abs=1e-15)
    assert epsilon_additive(APPROXIMATION, REFERENCE_SET) == pytest.approx(1.0, abs=1e-15)
    assert _front(APPROXIMATION).hypervolume([4, 4]) == pytest.approx(4.0, abs=1e-15)
    # The reference set covers itself: both indicators are 0 (definition).
    assert igd_plus(REFERENCE_SET, REFERENCE_SET) == 0.0
    assert epsilon_additive(REFERENCE_SET, REFERENCE_SET) == 0.0


def test_indicators_agree_with_moocore_called_directly():
    """Our IGD+ and epsilon equal moocore's on the same random sets, with and without maximised objectives."""
    rng = np.random.default_rng(7)
    for n_obj in (2, 3):
        points = rng.random((40, n_obj))
        reference = moocore.generate_ndset(25, n_obj, "sphere", seed=3)
        assert igd_plus(points, reference) == moocore.igd_plus(points, ref=reference)
        assert epsilon_additive(points, reference) == moocore.epsilon_additive(
            points, ref=reference
        )
        flags = [True] + [False] * (n_obj - 1)
        assert igd_plus(points, reference, flags) == moocore.igd_plus(
            points, ref=reference, maximise=flags
        )
        # Maximising a column is the same as minimising its negative (moocore's own convention).
        flipped, flipped_ref = points.copy(), reference.copy()
        flipped[:, 0], flipped_ref[:, 0] = -flipped[:, 0], -flipped_ref[:, 0]
        assert epsilon_additive(points, reference, flags) == pytest.approx(
            epsilon_additive(flipped, flipped_ref)
        )


def test_dominated_share_by_hand():
    """(1, 1) dominates (2, 2), not (0, 3), and not its own copy: 1 of 3 (Pareto dominance)."""
    assert dominated_share([[1, 1]], [[2, 2], [0, 3], [1, 1]]) == pytest.approx(1 / 3)
    assert dominated_share([[1, 1]], [[2, 2]], [True, True]) == 0.0  # maximised, (2, 2) is better
    assert dominated_share(REFERENCE_SET, REFERENCE_SET) == 0.0


def test_common_reference_is_the_worst_recorded_point():
    """The common reference is the worst recorded value per objective, respecting each goal."""
    a = _front([[1, 5]], goals=("min", "max"), reference=[3, 2])
    b = _front([[1, 5]], goals=("min", "max"), reference=[4, 3])
    assert common_reference([a, b]).tolist() == [4.0, 2.0]


# ------------------------------------------------------------------------------- attainment
def test_attainment_surfaces_by_hand_and_against_moocore():
    """Two runs {(1,3), (3,1)} and {(2,2)}: reached by one run are the three points themselves; reached by
    both are (2,3) and (3,2), the corners where the two staircases cross (definition of the EAF,
    Grunert da Fonseca et al. 2001). Both agree with moocore.eaf called directly."""
    runs = [[[1, 3], [3, 1]], [[2, 2]]]
    surfaces = attainment_surfaces(runs)
    assert surfaces["best"].tolist() == [[1, 3], [2, 2], [3, 1]]
    assert surfaces["worst"].tolist() == [[2, 3], [3, 2]]
    assert surfaces["median"].tolist() == surfaces["best"].tolist()  # half of 2 runs is 1
    direct = moocore.eaf(np.array([[1, 3], [3, 1], [2, 2]], dtype=float), [1, 1, 2])
    assert sorted(direct[direct[:, 2] == 100, :2].tolist()) == surfaces["worst"].tolist()


def test_median_surface_matches_moocore_fiftieth_percentile():
    """Our median (at least half the runs) equals moocore's 50th percentile surface for 4 and 5 runs."""
    rng = np.random.default_rng(11)
    for n_runs in (4, 5):
        sets = [moocore.filter_dominated(rng.random((30, 2))) for _ in range(n_runs)]
        points = np.vstack(sets)
        labels = np.concatenate([np.full(len(s), i) for i, s in enumerate(sets)])
        direct = moocore.eaf(points, labels, percentiles=[50])[:, :2]
        ours = attainment_surfaces(sets)["median"]
        assert np.array_equal(ours, direct[np.lexsort(direct.T[::-1])])


def test_attainment_flips_maximised_objectives_and_back():
    """A maximised objective gives the mirror image of the minimised problem's surfaces."""
    runs = [np.array([[1, 3], [3, 1]]), np.array([[2, 2]])]
    mirrored = [r * np.array([1, -1]) for r in runs]
    plain = attainment_surfaces(runs)
    flipped = attainment_surfaces(mirrored, [False, True])
    for name in plain:
        assert sorted((flipped[name] * np.array([1, -1])).tolist()) == sorted(plain[name].tolist())


def test_disagreement_region_by_hand():
    """Between the best staircase {(1,3), (2,2), (3,1)} and the worst {(2,3), (3,2)} inside the box to (4,4)
    lie three unit squares: [1,2]x[3,4], [2,3]x[2,3], [3,4]x[1,2], area 3 = HV(best) 6 - HV(worst) 3
    (HV(best) = 6 is the moocore doctest value; HV(worst) = 2*1 + 1*1)."""
    fronts = [_front([[1, 3], [3, 1]], reference=[4, 4]), _front([[2, 2]], reference=[4, 4])]
    result = attainment(fronts)
    regions = result.regions
    area = (
        (regions["f1_high"] - regions["f1_low"]) * (regions["f2_high"] - regions["f2_low"])
    ).sum()
    assert area == pytest.approx(3.0)
    assert result.spread_volume == pytest.approx(3.0)
    best_hv = moocore.hypervolume(result.surfaces["best"], ref=[4, 4])
    worst_hv = moocore.hypervolume(result.surfaces["worst"], ref=[4, 4])
    assert best_hv - worst_hv == pytest.approx(area)
    assert result.spread_share == pytest.approx(0.5)
    # The worst surface misses each best corner by 1 in the normalised box of side 3 (ideal (1,1) to (4,4)).
    assert result.gap == pytest.approx(1 / 3)
    assert result.gap == pytest.approx(
        moocore.epsilon_additive(
            (result.surfaces["worst"] - 1) / 3, ref=(result.surfaces["best"] - 1) / 3
        )
    )


def test_disagreement_area_equals_hypervolume_difference_with_a_maximised_objective():
    """On random runs with one maximised objective the rectangles' area equals HV(best) - HV(worst) (moocore)."""
    rng = np.random.default_rng(5)
    fronts = []
    for _ in range(5):
        pts = moocore.filter_dominated(rng.random((25, 2)) * [1, -1], maximise=[False, True])
        fronts.append(_front(pts, goals=("min", "max"), reference=[1.0, -1.0]))
    result = attainment(fronts)
    r = result.regions
    area = ((r["f1_high"] - r["f1_low"]) * (r["f2_high"] - r["f2_low"])).sum()
    expected = moocore.hypervolume(
        result.surfaces["best"], ref=[1, -1], maximise=[False, True]
    ) - moocore.hypervolume(result.surfaces["worst"], ref=[1, -1], maximise=[False, True])
    assert (r["f2_high"] >= r["f2_low"]).all()
    assert area == pytest.approx(expected, rel=1e-12)


def test_attainment_with_a_run_that_found_nothing():
    """A run without designs reaches nothing: no worst surface, and the summary says why."""
    empty = _front(np.empty((0, 2)), reference=[4, 4])
    result = attainment([_front([[1, 3], [3, 1]], reference=[4, 4]), empty])
    assert len(result.surfaces["best"]) == 2 and len(result.surfaces["worst"]) == 0
    assert any("No point is reached by every run" in line for line in result.lines())


def test_attainment_needs_two_or_three_objectives():
    """Four objectives are refused with a one-sentence DataError (moocore's EAF is 2-D and 3-D only)."""
    with pytest.raises(DataError, match="2 or 3 objectives"):
        attainment_surfaces([np.random.default_rng(1).random((5, 4))])


def test_write_attainment_files(tmp_path):
    """attainment.csv holds every surface with its name and run count; disagreement.csv the rectangles."""
    fronts = [_front([[1, 3], [3, 1]], reference=[4, 4]), _front([[2, 2]], reference=[4, 4])]
    written = write_attainment(attainment(fronts), tmp_path)
    table = pd.read_csv(written["attainment"])
    assert list(table.columns) == ["surface", "runs", "n_runs", "f1", "f2"]
    assert table.groupby("surface").size().to_dict() == {"best": 3, "median": 3, "worst": 2}
    assert len(pd.read_csv(written["disagreement"])) == 3


# ------------------------------------------------------------------------------- comparing
def test_compare_fronts_uses_one_scale_and_matches_moocore():
    """Hypervolume, IGD+ and epsilon on the common scale equal moocore on the same normalised points."""
    a = _front([[1, 9], [4, 4], [9, 1]], reference=[10, 10])
    b = _front([[2, 8], [5, 5], [8, 2]], reference=[11, 10])
    result = compare_fronts({"a": a, "b": b})
    ideal, ref = (
        np.array([1.0, 1.0]),
        np.array([11.0, 10.0]),
    )  # best reached; worst recorded reference
    assert result.reference == (11.0, 10.0) and result.ideal == (1.0, 1.0)
    union = moocore.filter_dominated(np.vstack([a.points(), b.points()]))
    target = (union - ideal) / (ref - ideal)
    for label, front in (("a", a), ("b", b)):
        z = (front.points() - ideal) / (ref - ideal)
        row = result.table.set_index("run").loc[label]
        assert row["hypervolume"] == pytest.approx(moocore.hypervolume(z, ref=[1, 1]), rel=1e-12)
        assert row["igd_plus"] == pytest.approx(moocore.igd_plus(z, ref=target), rel=1e-12)
        assert row["epsilon"] == pytest.approx(moocore.epsilon_additive(z, ref=target), rel=1e-12)
    assert result.best == "a"
    # (4, 4) dominates (5, 5); (2, 8) and (8, 2) escape (1, 9) and (9, 1) in one objective each.
    assert (
        result.dominance.loc["a", "b"] == pytest.approx(1 / 3)
        and result.dominance.loc["b", "a"] == 0.0
    )


def test_compare_refuses_different_objectives():
    """Fronts of different objectives cannot be compared: a DataError naming both."""
    with pytest.raises(DataError, match="differ from"):
        compare_fronts({"a": _front([[1, 2]]), "b": _front([[1, 2]], goals=("min", "max"))})


def _run(tmp_path, name, evaluations, seed=1):
    folder = tmp_path / name
    result = tradewise.run(
        CASES / "zdt1", evaluations=evaluations, seed=seed, store=folder / "archive.sqlite"
    )
    tradewise.save_run(result, folder)
    return folder


def test_two_runs_of_the_same_seed_report_identical_indicators(tmp_path):
    """Same case, seed and budget (separate archives) give the same front, so every indicator is equal."""
    first, second = _run(tmp_path, "first", 600), _run(tmp_path, "second", 600)
    result = compare_runs([first, second])
    a, b = (result.table.set_index("run").loc[k] for k in ("first", "second"))
    for column in (
        "hypervolume",
        "igd_plus",
        "epsilon",
        "front_size",
        "evaluations",
        "failed_share",
    ):
        assert a[column] == b[column]
    assert result.dominance.loc["first", "second"] == 0.0 == result.dominance.loc["second", "first"]
    assert "same hypervolume" in " ".join(result.lines)
    cli = CliRunner().invoke(main, ["compare", str(first), str(second)])
    assert cli.exit_code == 0, cli.output
    lines = {line.split()[0]: line.split()[1:7] for line in cli.output.splitlines()[1:3]}
    assert lines["first"] == lines["second"]


@pytest.mark.slow
def test_short_run_against_long_run(tmp_path):
    """ZDT1, seed 1: 600 evaluations against 6000. The long run is better on every indicator, dominates
    most of the short run's designs, and the verdict names it."""
    short, long = _run(tmp_path, "short", 600), _run(tmp_path, "long", 6000)
    result = compare_runs([short, long])
    table = result.table.set_index("run")
    assert result.best == "long"
    assert table.loc["long", "hypervolume"] > table.loc["short", "hypervolume"]
    assert table.loc["long", "igd_plus"] < table.loc["short", "igd_plus"]
    assert table.loc["long", "epsilon"] < table.loc["short", "epsilon"]
    assert result.dominance.loc["long", "short"] > 0.9 > 0.1 > result.dominance.loc["short", "long"]
    assert result.lines[0].startswith("long has the largest hypervolume")
    assert "unknown" in result.lines[-1]  # neither run has seeds
    cli = CliRunner().invoke(main, ["compare", str(short), str(long)])
    assert cli.exit_code == 0 and "long has the largest hypervolume" in cli.output


def test_compare_against_a_given_reference_front(tmp_path):
    """With the analytic ZDT1 front (f2 = 1 - sqrt(f1), Zitzler, Deb, Thiele 2000) as a plain CSV, IGD+ is
    measured against it: positive for a run that has not converged, and equal to moocore on the scale."""
    run = _run(tmp_path, "run", 1200)
    f1 = np.linspace(0, 1, 501)
    path = tmp_path / "true.csv"
    pd.DataFrame({"f1": f1, "f2": 1 - np.sqrt(f1)}).to_csv(path, index=False)
    result = compare_runs([run], reference=path)
    assert result.reference_set == "the given reference front"
    ideal, ref = np.array(result.ideal), np.array(result.reference)
    assert ideal.tolist() == [0.0, 0.0]  # the true front reaches both ends
    z = (
        Front.from_table(
            pd.read_csv(run / "front.csv"), [Objective("f1"), Objective("f2")]
        ).points()
        - ideal
    ) / (ref - ideal)
    target = (np.c_[f1, 1 - np.sqrt(f1)] - ideal) / (ref - ideal)
    assert result.table.loc[0, "igd_plus"] == pytest.approx(
        moocore.igd_plus(z, ref=target), rel=1e-12
    )
    assert result.table.loc[0, "igd_plus"] > 0.01


def test_compare_command_errors_are_one_line(tmp_path):
    """A folder without a front is a user error: one `Error:` line and exit status 2."""
    (tmp_path / "empty").mkdir()
    cli = CliRunner().invoke(main, ["compare", str(tmp_path / "empty")])
    assert cli.exit_code == 2 and cli.output.startswith("Error:") and cli.output.count("\n") == 1


# ------------------------------------------------------------------------------- convergence
def test_convergence_advice_on_made_up_histories():
    """Linear growth gains 10% of the final value over the last 10% of 20 generations: advice.
    A flat tail (gain 0) gives none. The threshold is 1% (our rule of thumb)."""
    rising = pd.DataFrame({"generation": range(1, 21), "hypervolume": np.arange(1, 21) / 20})
    assert late_gain(rising) == pytest.approx((1.0 - 0.9) / 1.0)
    assert "consider a larger budget" in convergence_advice(rising)
    flat = pd.DataFrame(
        {"generation": range(1, 21), "hypervolume": np.minimum(np.arange(1, 21), 15) / 15}
    )
    assert late_gain(flat) == 0.0 and convergence_advice(flat) == ""
    # Just under and just over the threshold: 0.9% and 1.1% over the last two generations.
    for gain, advised in ((0.009, False), (0.011, True)):
        hv = np.ones(20)
        hv[:18] = 1 - gain
        history = pd.DataFrame({"generation": range(1, 21), "hypervolume": hv})
        assert bool(convergence_advice(history)) is advised
    assert math.isnan(late_gain(pd.DataFrame({"generation": [1], "hypervolume": [0.5]})))


def test_convergence_advice_on_real_runs():
    """ZDT1 after 1200 evaluations is still far from its front (HV well under 2/3) and still gaining;
    the five-variable overhead test case has converged after 2000 (gain about 0.1%) and gets no advice."""
    short = tradewise.run(CASES / "zdt1", evaluations=1200, seed=1)
    assert late_gain(short.history) > 0.01 and "still improving" in convergence_advice(
        short.history
    )
    done = tradewise.run(CASES / "trivial", evaluations=2000, seed=1)
    assert convergence_advice(done.history) == ""


def test_convergence_advice_seed_by_seed():
    """A history with a seed column is judged per seed and says how many seeds still improved."""
    rising = np.arange(1, 21) / 20
    history = pd.DataFrame(
        {
            "seed": [1] * 20 + [2] * 20,
            "generation": list(range(1, 21)) * 2,
            "hypervolume": np.concatenate([rising, np.ones(20)]),
        }
    )
    assert "in 1 of 2 seeds" in convergence_advice(history)
